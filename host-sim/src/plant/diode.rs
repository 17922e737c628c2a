//! Laser diode: rate equations (dynamic) and their exact steady state
//! (quasi-static) from one parameter set, with temperature, forward voltage,
//! catastrophic facet damage and aging.
//!
//! # Rate equations (SI units internally)
//!
//! ```text
//! dN/dt = eta_i I / (q V) - R(N) - v_g g S
//! dS/dt = Gamma v_g g S - S / tau_p + Gamma beta_sp B N^2
//! R(N)  = A N + B N^2 + C N^3
//! g     = g_N(N) / (1 + eps S),  g_N = g0 ln((N + Ns)/(Ntr + Ns))  or  a (N - Ntr)
//! 1/tau_p = v_g (alpha_i + alpha_m),  alpha_m = ln(1/(R1 R2)) / (2 L)
//! P_front = h nu v_g alpha_m,front S V / Gamma,  alpha_m,front = ln(1/R1) / (2 L)
//! ```
//!
//! The logarithmic gain is continued below `N_knee = (Ntr + Ns)/e - Ns`
//! (where g_N = -g0) by its tangent line, so the gain stays defined (as
//! absorption) down to N = 0 even when Ns < 0.
//!
//! # Temperature and aging map
//!
//! With dT = T - T_ref, the recombination rate R(N) (all of A, B, C, and so
//! the spontaneous term) is multiplied by `f = exp(dT/T0) exp(-dT/T1) k_th k_sl`
//! and eta_i by `exp(-dT/T1) k_sl`, where `k_th = 1 + rise * h/1000` and
//! `k_sl = 1 - loss * h/1000` are the aging factors after h operating hours.
//! Gain, confinement and losses (so N_th and tau_p) stay fixed. This is a
//! lumped description of carrier leakage, Auger and injection losses that
//! makes the analytic figures follow exactly
//! `I_th(T) = I_th(T_ref) exp(dT/T0) k_th` and
//! `eta_d(T) = eta_d(T_ref) exp(-dT/T1) k_sl`, in both modes.
//!
//! # Quasi-static mode
//!
//! The steady state of the same equations is solved exactly: eliminating the
//! stimulated term gives `S = Gamma tau_p (J - R(N) + beta B N^2)`, leaving one
//! equation `F(N) = S (1/tau_p - Gamma v_g g) - Gamma beta B N^2 = 0`, solved by
//! bracketed Halley iteration (analytic F' and F'') from the root of its
//! quadratic expansion about N_th, stopped when the predicted error is below
//! 1e-12 N (one or two iterations in practice; about 70 ns per call). Below
//! threshold this is the spontaneous emission coupled into the lasing mode;
//! above threshold it reduces to P = eta_d (h nu / q)(I - I_th) apart from the
//! small gain-compression and spontaneous-emission corrections.
//!
//! [`Diode::quasi_static`] (and [`Diode::step_quasi_static_reference`]) run
//! this solver from the cold start at every call. The closed loop uses
//! [`Diode::step_quasi_static`], which solves the same equation faster:
//! above threshold one Halley step from an *anchor* (a nearby root where
//! everything that depends on N alone was evaluated once), accepted under
//! the same stopping rule, else a second step whose start becomes the new
//! anchor, else the solver above; the temperature exponentials and
//! ln(I/I_s) are continued from the previous call ([`super::near`]). It
//! agrees with the cold-start form to 1e-11 in N and 1e-9 in power (tested
//! on all parameter sets over ramps, DAC-sized steps, jumps and aging).
//!
//! # Dynamic mode
//!
//! The equations, in the scaled state n = N / N_th, s = S / S_u with
//! S_u = Gamma tau_p R(N_th), are integrated with the L-stable, stiffly
//! accurate 4th-order Rosenbrock method RODAS4 (Hairer and Wanner, *Solving
//! Ordinary Differential Equations II*, 2nd ed., Springer 1996, sect. IV.7;
//! coefficient set of their code RODAS) with its embedded 3rd-order error
//! estimate, the analytic 2x2 Jacobian and step-size control on the RMS norm
//! `|err_i| / (atol + rtol max(|y_i|, |y_i,new|))`. Default tolerance:
//! rtol = 1e-6, atol = 1e-9 (on the scaled state).

use serde::{Deserialize, Serialize};

use super::constants::{C, H, K_B, Q, ZERO_CELSIUS_K};
use super::error::{ensure, PlantError};
use super::near::{ExpNear, LnNear};

/// Gain model of the active region (user units, cm based).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "snake_case", deny_unknown_fields)]
pub enum GainModel {
    /// g = g0 ln((N + Ns) / (Ntr + Ns)).
    Log {
        /// Gain coefficient g0, 1/cm.
        g0_per_cm: f64,
        /// Transparency carrier density Ntr, 1/cm^3.
        n_tr_per_cm3: f64,
        /// Shift density Ns, 1/cm^3 (may be negative).
        n_s_per_cm3: f64,
    },
    /// g = a (N - Ntr).
    Linear {
        /// Differential gain a, cm^2.
        a_cm2: f64,
        /// Transparency carrier density Ntr, 1/cm^3.
        n_tr_per_cm3: f64,
    },
}

/// Laser-diode parameters in easy-to-write units (stated in each name).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DiodeParams {
    /// Active-region width, um.
    pub width_um: f64,
    /// Cavity length, um.
    pub length_um: f64,
    /// Active-region thickness (total of the wells), nm.
    pub thickness_nm: f64,
    /// Optical confinement factor Gamma.
    pub confinement: f64,
    /// Group index n_g (v_g = c / n_g).
    pub group_index: f64,
    /// Internal loss alpha_i, 1/cm.
    pub alpha_i_per_cm: f64,
    /// Power reflectivity of the front (output) facet R1.
    pub r_front: f64,
    /// Power reflectivity of the back facet R2 (monitor side).
    pub r_back: f64,
    /// Injection efficiency eta_i at T_ref.
    pub eta_i: f64,
    /// Non-radiative (defect) recombination coefficient A, 1/s.
    pub a_per_s: f64,
    /// Radiative recombination coefficient B, cm^3/s.
    pub b_cm3_per_s: f64,
    /// Auger recombination coefficient C, cm^6/s.
    pub c_cm6_per_s: f64,
    /// Material gain model.
    pub gain: GainModel,
    /// Gain compression factor eps, cm^3.
    pub eps_cm3: f64,
    /// Spontaneous-emission coupling factor beta_sp.
    pub beta_sp: f64,
    /// Emission wavelength at T_ref, nm.
    pub wavelength_nm: f64,
    /// Emission wavelength temperature drift, nm/K.
    pub wavelength_drift_nm_per_k: f64,
    /// Reference temperature of the parameter set, degC.
    pub t_ref_c: f64,
    /// Characteristic temperature of the threshold T0, K.
    pub t0_k: f64,
    /// Characteristic temperature of the slope efficiency T1, K.
    pub t1_k: f64,
    /// Diode-equation ideality factor n.
    pub ideality: f64,
    /// Saturation current I_s at T_ref, A.
    pub i_s_a: f64,
    /// Activation energy of I_s, eV: I_s(T) = I_s exp(-(E_a/(n k))(1/T - 1/T_ref));
    /// gives dV_j/dT = (V_j - E_a/q)/T at fixed current. 0 keeps I_s constant.
    pub i_s_activation_ev: f64,
    /// Series resistance R_s, ohm.
    pub r_s_ohm: f64,
    /// Front-facet power that destroys the facet (catastrophic optical damage), W.
    pub damage_power_w: f64,
    /// Facet heating time constant for damage in the dynamic mode, ns: the
    /// front power is low-pass filtered with it before the comparison
    /// (0 = instantaneous).
    pub damage_filter_ns: f64,
    /// Aging: relative threshold rise per 1000 operating hours.
    pub threshold_rise_per_khour: f64,
    /// Aging: relative slope-efficiency loss per 1000 operating hours.
    pub slope_loss_per_khour: f64,
    /// Highest junction temperature at which the diode lases, degC: above
    /// it the threshold rises e-fold every [`CUTOFF_EFOLD_K`] on top of T0,
    /// so lasing stops within a few kelvin. `None`: T0 holds at any
    /// temperature.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_operating_c: Option<f64>,
    /// Relative fall of the facet-damage power per kelvin of junction
    /// temperature above `t_ref_c` (it rises as much below), 1/K:
    /// `P_damage(T) = damage_power_w (1 - tc (T - T_ref))`, kept within
    /// 0.05 ..= 2 times `damage_power_w`. 0 (the default): no dependence.
    #[serde(default)]
    pub damage_tc_per_k: f64,
}

/// Kelvin per e-fold of the threshold above the maximum operating
/// temperature (a lumped description of the carrier-leakage cut-off; the
/// 2 K is a modelling choice, not a measured figure: threshold x 150 at
/// 10 K above).
pub const CUTOFF_EFOLD_K: f64 = 2.0;

/// Gain model converted to SI.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "snake_case")]
pub enum GainSi {
    /// Logarithmic gain with tangent continuation below `n_knee_m3`.
    Log {
        /// g0, 1/m.
        g0_per_m: f64,
        /// Ntr, 1/m^3.
        n_tr_m3: f64,
        /// Ns, 1/m^3.
        n_s_m3: f64,
        /// Density below which the tangent line is used, 1/m^3.
        n_knee_m3: f64,
    },
    /// Linear gain.
    Linear {
        /// a, m^2.
        a_m2: f64,
        /// Ntr, 1/m^3.
        n_tr_m3: f64,
    },
}

impl GainSi {
    /// Unsaturated material gain g_N (1/m) and dg_N/dN (m^2) at density `n` (1/m^3).
    #[inline]
    pub fn gain(&self, n: f64) -> (f64, f64) {
        match *self {
            GainSi::Log {
                g0_per_m,
                n_tr_m3,
                n_s_m3,
                n_knee_m3,
            } => {
                if n >= n_knee_m3 {
                    let x = n + n_s_m3;
                    (g0_per_m * (x / (n_tr_m3 + n_s_m3)).ln(), g0_per_m / x)
                } else {
                    let slope = g0_per_m / (n_knee_m3 + n_s_m3);
                    (-g0_per_m + slope * (n - n_knee_m3), slope)
                }
            }
            GainSi::Linear { a_m2, n_tr_m3 } => (a_m2 * (n - n_tr_m3), a_m2),
        }
    }

    /// Density at which g_N = `g` (1/m), on the logarithmic branch.
    fn density_for_gain(&self, g: f64) -> f64 {
        match *self {
            GainSi::Log {
                g0_per_m,
                n_tr_m3,
                n_s_m3,
                ..
            } => (n_tr_m3 + n_s_m3) * (g / g0_per_m).exp() - n_s_m3,
            GainSi::Linear { a_m2, n_tr_m3 } => n_tr_m3 + g / a_m2,
        }
    }
}

/// Analytic figures of a parameter set at T_ref, unaged (SI units).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DiodeDerived {
    /// Active volume V, m^3.
    pub volume_m3: f64,
    /// Group velocity v_g, m/s.
    pub v_g_m_per_s: f64,
    /// Mirror loss alpha_m (both facets), 1/m.
    pub alpha_m_per_m: f64,
    /// Front-facet share of the mirror loss, 1/m.
    pub alpha_m_front_per_m: f64,
    /// Back-facet share of the mirror loss, 1/m.
    pub alpha_m_back_per_m: f64,
    /// Photon lifetime tau_p, s.
    pub tau_p_s: f64,
    /// Threshold material gain g_th = (alpha_i + alpha_m)/Gamma, 1/m.
    pub g_th_per_m: f64,
    /// Threshold carrier density N_th, 1/m^3.
    pub n_th_m3: f64,
    /// Differential gain dg/dN at threshold, m^2.
    pub dg_dn_m2: f64,
    /// Threshold current I_th = q V R(N_th) / eta_i, A.
    pub i_th_a: f64,
    /// Differential quantum efficiency eta_d = eta_i alpha_m/(alpha_i + alpha_m), both facets.
    pub eta_d: f64,
    /// Front-facet part of eta_d.
    pub eta_d_front: f64,
    /// Photon energy at the reference wavelength, J.
    pub photon_energy_j: f64,
    /// Front-facet slope efficiency eta_d,front h nu / q, W/A.
    pub slope_w_per_a: f64,
    /// Slope efficiency from both facets, W/A.
    pub slope_total_w_per_a: f64,
    /// Confinement factor (copied for the figures below).
    pub confinement: f64,
    /// Injection efficiency (copied for the figures below).
    pub eta_i: f64,
}

impl DiodeDerived {
    /// Photon density above threshold, Gamma tau_p eta_i (I - I_th) / (q V), 1/m^3.
    pub fn photon_density_m3(&self, i_a: f64) -> f64 {
        (self.confinement * self.tau_p_s * self.eta_i * (i_a - self.i_th_a) / (Q * self.volume_m3))
            .max(0.0)
    }

    /// Relaxation-oscillation frequency f_R = sqrt(v_g a S / tau_p) / (2 pi), Hz.
    pub fn f_r_hz(&self, i_a: f64) -> f64 {
        let s = self.photon_density_m3(i_a);
        (self.v_g_m_per_s * self.dg_dn_m2 * s / self.tau_p_s).sqrt() / core::f64::consts::TAU
    }
}

/// Rate-equation coefficients after the temperature and aging map (SI), as
/// integrated by [`Diode::step_dynamic`]; also the hand-over format for the
/// reference solver script.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RateCoefficients {
    /// Active volume, m^3.
    pub volume_m3: f64,
    /// Group velocity, m/s.
    pub v_g_m_per_s: f64,
    /// Confinement factor.
    pub confinement: f64,
    /// Photon lifetime, s.
    pub tau_p_s: f64,
    /// Effective injection efficiency.
    pub eta_i: f64,
    /// Effective A, 1/s.
    pub a_per_s: f64,
    /// Effective B, m^3/s.
    pub b_m3_per_s: f64,
    /// Effective C, m^6/s.
    pub c_m6_per_s: f64,
    /// Spontaneous-emission coupling.
    pub beta_sp: f64,
    /// Gain compression, m^3.
    pub eps_m3: f64,
    /// Gain model.
    pub gain: GainSi,
    /// Photon energy, J.
    pub photon_energy_j: f64,
    /// Front mirror loss, 1/m.
    pub alpha_m_front_per_m: f64,
    /// Back mirror loss, 1/m.
    pub alpha_m_back_per_m: f64,
    /// Carrier-density unit of the scaled state, 1/m^3.
    pub n_scale_m3: f64,
    /// Photon-density unit of the scaled state, 1/m^3.
    pub s_scale_m3: f64,
    /// Whether the cavity still has feedback (false after facet damage).
    pub lasing: bool,
}

/// Diode outputs at one instant.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct DiodeOutput {
    /// Optical power from the front (output) facet, W.
    pub p_front_w: f64,
    /// Optical power from the back (monitor) facet, W.
    pub p_back_w: f64,
    /// Forward voltage, V.
    pub v_f_v: f64,
    /// Emission wavelength, m.
    pub wavelength_m: f64,
    /// Analytic threshold current at this temperature and age, A
    /// (infinite once the facet is destroyed).
    pub i_th_a: f64,
    /// Carrier density, 1/m^3.
    pub n_m3: f64,
    /// Photon density, 1/m^3.
    pub s_m3: f64,
}

/// Integrator counters of [`Diode::step_dynamic`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct DynamicStats {
    /// Accepted steps.
    pub steps: u64,
    /// Rejected steps.
    pub rejected: u64,
    /// Right-hand-side evaluations.
    pub f_evals: u64,
    /// Jacobian evaluations.
    pub jac_evals: u64,
}

/// Temperature-independent constants precomputed from the parameters (SI).
#[derive(Clone, Debug)]
struct Model {
    volume: f64,
    qv: f64,
    inv_qv: f64,
    v_g: f64,
    gamma: f64,
    tau_p: f64,
    inv_tau_p: f64,
    alpha_m1: f64,
    alpha_m2: f64,
    /// v_g V / Gamma: multiply by alpha_m,x h nu S for facet power.
    power_coef: f64,
    a: f64,
    b: f64,
    c: f64,
    beta: f64,
    eps: f64,
    gain: GainSi,
    n_th: f64,
    dgdn_th: f64,
    /// Log gain only: ln((N_th + Ns)/(Ntr + Ns)), 1/(N_th + Ns), g0 and the
    /// range |N - N_th| below which ln1p is summed as a series.
    log_th: f64,
    inv_x_th: f64,
    g0: f64,
    inv_g0: f64,
    series_dn: f64,
    /// R(N_th) - beta B N_th^2 and its derivative, at f = 1.
    rt_th: f64,
    rtp_th: f64,
    i_th: f64,
    eta_i: f64,
    eta_opt: f64,
    t_ref_k: f64,
    inv_t_ref: f64,
    inv_t0: f64,
    inv_t1: f64,
    t_max_k: f64,
    lambda_ref: f64,
    drift: f64,
    n_vt_per_k: f64,
    i_s: f64,
    inv_i_s: f64,
    act_k: f64,
    r_s: f64,
    damage_w: f64,
    damage_tc: f64,
    damage_tau: f64,
    rise: f64,
    loss: f64,
    n_scale: f64,
    s_scale: f64,
    inv_n_scale: f64,
    inv_s_scale: f64,
    /// Constants of the anchored Halley step ([`halley_from`]):
    /// Gamma tau_p, Gamma v_g, eps / tau_p, Gamma beta B (sigma at f = 1)
    /// and -6 Gamma tau_p C (the third derivative of S at f = 1).
    gt: f64,
    gv: f64,
    c2: f64,
    sigma1: f64,
    s3_1: f64,
}

impl Model {
    /// Unsaturated gain and its derivative, as [`GainSi::gain`]; near N_th
    /// the logarithm is evaluated as ln((N_th+Ns)/(Ntr+Ns)) + ln1p(u) with
    /// u = (N - N_th)/(N_th + Ns), |u| < 1e-2, summed to u^9 (truncation
    /// below 1e-21), which avoids a logarithm call in the common case.
    #[inline]
    fn gain(&self, n: f64) -> (f64, f64) {
        let (g, gp, _) = self.gain3(n);
        (g, gp)
    }

    /// Gain, first and second derivative with respect to N.
    #[inline]
    fn gain3(&self, n: f64) -> (f64, f64, f64) {
        let dn = n - self.n_th;
        if self.series_dn > 0.0 && dn.abs() < self.series_dn {
            let u = dn * self.inv_x_th;
            let l1p = u
                * (1.0
                    - u * (1.0 / 2.0
                        - u * (1.0 / 3.0
                            - u * (1.0 / 4.0
                                - u * (1.0 / 5.0
                                    - u * (1.0 / 6.0
                                        - u * (1.0 / 7.0 - u * (1.0 / 8.0 - u * (1.0 / 9.0)))))))));
            let gp = self.g0 * self.inv_x_th / (1.0 + u);
            (self.g0 * (self.log_th + l1p), gp, -gp * gp * self.inv_g0)
        } else {
            let (g, gp) = self.gain.gain(n);
            let gpp = match self.gain {
                GainSi::Log { n_knee_m3, .. } if n >= n_knee_m3 => -gp * gp * self.inv_g0,
                _ => 0.0,
            };
            (g, gp, gpp)
        }
    }

    fn new(p: &DiodeParams) -> Self {
        let length = p.length_um * 1e-6;
        let volume = p.width_um * 1e-6 * length * p.thickness_nm * 1e-9;
        let v_g = C / p.group_index;
        let alpha_i = p.alpha_i_per_cm * 100.0;
        let alpha_m1 = (1.0 / p.r_front).ln() / (2.0 * length);
        let alpha_m2 = (1.0 / p.r_back).ln() / (2.0 * length);
        let alpha_m = alpha_m1 + alpha_m2;
        let tau_p = 1.0 / (v_g * (alpha_i + alpha_m));
        let gain = match p.gain {
            GainModel::Log {
                g0_per_cm,
                n_tr_per_cm3,
                n_s_per_cm3,
            } => {
                let (ntr, ns) = (n_tr_per_cm3 * 1e6, n_s_per_cm3 * 1e6);
                GainSi::Log {
                    g0_per_m: g0_per_cm * 100.0,
                    n_tr_m3: ntr,
                    n_s_m3: ns,
                    n_knee_m3: (ntr + ns) / core::f64::consts::E - ns,
                }
            }
            GainModel::Linear {
                a_cm2,
                n_tr_per_cm3,
            } => GainSi::Linear {
                a_m2: a_cm2 * 1e-4,
                n_tr_m3: n_tr_per_cm3 * 1e6,
            },
        };
        let gamma = p.confinement;
        let g_th = (alpha_i + alpha_m) / gamma;
        let n_th = gain.density_for_gain(g_th);
        let (_, dgdn_th) = gain.gain(n_th);
        let (log_th, inv_x_th, g0) = match gain {
            GainSi::Log {
                g0_per_m,
                n_tr_m3,
                n_s_m3,
                ..
            } => (
                ((n_th + n_s_m3) / (n_tr_m3 + n_s_m3)).ln(),
                1.0 / (n_th + n_s_m3),
                g0_per_m,
            ),
            GainSi::Linear { .. } => (0.0, 0.0, 0.0),
        };
        let (a, b, c) = (p.a_per_s, p.b_cm3_per_s * 1e-6, p.c_cm6_per_s * 1e-12);
        let r_th = a * n_th + b * n_th * n_th + c * n_th * n_th * n_th;
        let rt_th = r_th - p.beta_sp * b * n_th * n_th;
        let rtp_th = a + 2.0 * b * (1.0 - p.beta_sp) * n_th + 3.0 * c * n_th * n_th;
        let qv = Q * volume;
        let i_th = qv * r_th / p.eta_i;
        let t_ref_k = p.t_ref_c + ZERO_CELSIUS_K;
        Self {
            volume,
            qv,
            inv_qv: 1.0 / qv,
            v_g,
            gamma,
            tau_p,
            inv_tau_p: 1.0 / tau_p,
            alpha_m1,
            alpha_m2,
            power_coef: v_g * volume / gamma,
            a,
            b,
            c,
            beta: p.beta_sp,
            eps: p.eps_cm3 * 1e-6,
            gain,
            n_th,
            dgdn_th,
            log_th,
            inv_x_th,
            g0,
            inv_g0: if g0 > 0.0 { 1.0 / g0 } else { 0.0 },
            series_dn: if inv_x_th > 0.0 { 1e-2 / inv_x_th } else { 0.0 },
            rt_th,
            rtp_th,
            i_th,
            eta_i: p.eta_i,
            eta_opt: alpha_m / (alpha_i + alpha_m),
            t_ref_k,
            inv_t_ref: 1.0 / t_ref_k,
            inv_t0: 1.0 / p.t0_k,
            inv_t1: 1.0 / p.t1_k,
            t_max_k: p
                .max_operating_c
                .map_or(f64::INFINITY, |c| c + ZERO_CELSIUS_K),
            lambda_ref: p.wavelength_nm * 1e-9,
            drift: p.wavelength_drift_nm_per_k * 1e-9,
            n_vt_per_k: p.ideality * K_B / Q,
            i_s: p.i_s_a,
            inv_i_s: 1.0 / p.i_s_a,
            act_k: p.i_s_activation_ev * Q / (p.ideality * K_B),
            r_s: p.r_s_ohm,
            damage_w: p.damage_power_w,
            damage_tc: p.damage_tc_per_k,
            damage_tau: p.damage_filter_ns * 1e-9,
            rise: p.threshold_rise_per_khour,
            loss: p.slope_loss_per_khour,
            n_scale: n_th,
            s_scale: gamma * tau_p * r_th,
            inv_n_scale: 1.0 / n_th,
            inv_s_scale: 1.0 / (gamma * tau_p * r_th),
            gt: gamma * tau_p,
            gv: gamma * v_g,
            c2: p.eps_cm3 * 1e-6 / tau_p,
            sigma1: gamma * p.beta_sp * b,
            s3_1: -6.0 * gamma * tau_p * c,
        }
    }
}

/// Extra threshold factor above the maximum operating temperature.
#[inline]
fn cutoff(t_k: f64, t_max_k: f64) -> f64 {
    if t_k > t_max_k {
        ((t_k - t_max_k) / CUTOFF_EFOLD_K).exp()
    } else {
        1.0
    }
}

/// Operating-point factors at one temperature and age.
#[derive(Clone, Copy, Debug)]
struct Op {
    /// Recombination multiplier.
    f: f64,
    /// Effective injection efficiency.
    eta_i: f64,
    /// Threshold multiplier exp(dT/T0) k_th.
    ith_factor: f64,
    wavelength: f64,
    hnu: f64,
}

impl DiodeParams {
    /// Checks that the parameters describe a physical device.
    pub fn validate(&self) -> Result<(), PlantError> {
        let pos = |v: f64| v > 0.0 && v.is_finite();
        let nonneg = |v: f64| v >= 0.0 && v.is_finite();
        ensure(pos(self.width_um), "width_um", "must be > 0")?;
        ensure(pos(self.length_um), "length_um", "must be > 0")?;
        ensure(pos(self.thickness_nm), "thickness_nm", "must be > 0")?;
        ensure(
            pos(self.confinement) && self.confinement <= 1.0,
            "confinement",
            "must be in (0, 1]",
        )?;
        ensure(pos(self.group_index), "group_index", "must be > 0")?;
        ensure(
            nonneg(self.alpha_i_per_cm),
            "alpha_i_per_cm",
            "must be >= 0",
        )?;
        ensure(
            pos(self.r_front) && self.r_front < 1.0,
            "r_front",
            "must be in (0, 1)",
        )?;
        ensure(
            pos(self.r_back) && self.r_back <= 1.0,
            "r_back",
            "must be in (0, 1]",
        )?;
        ensure(
            pos(self.eta_i) && self.eta_i <= 1.0,
            "eta_i",
            "must be in (0, 1]",
        )?;
        ensure(nonneg(self.a_per_s), "a_per_s", "must be >= 0")?;
        ensure(nonneg(self.b_cm3_per_s), "b_cm3_per_s", "must be >= 0")?;
        ensure(nonneg(self.c_cm6_per_s), "c_cm6_per_s", "must be >= 0")?;
        ensure(
            self.a_per_s + self.b_cm3_per_s + self.c_cm6_per_s > 0.0,
            "a_per_s",
            "some recombination (A, B or C) must be > 0",
        )?;
        match self.gain {
            GainModel::Log {
                g0_per_cm,
                n_tr_per_cm3,
                n_s_per_cm3,
            } => {
                ensure(pos(g0_per_cm), "g0_per_cm", "must be > 0")?;
                ensure(pos(n_tr_per_cm3), "n_tr_per_cm3", "must be > 0")?;
                ensure(
                    n_s_per_cm3.is_finite() && n_tr_per_cm3 + n_s_per_cm3 > 0.0,
                    "n_s_per_cm3",
                    "n_tr + n_s must be > 0",
                )?;
            }
            GainModel::Linear {
                a_cm2,
                n_tr_per_cm3,
            } => {
                ensure(pos(a_cm2), "a_cm2", "must be > 0")?;
                ensure(pos(n_tr_per_cm3), "n_tr_per_cm3", "must be > 0")?;
            }
        }
        ensure(nonneg(self.eps_cm3), "eps_cm3", "must be >= 0")?;
        ensure(
            nonneg(self.beta_sp) && self.beta_sp < 1.0,
            "beta_sp",
            "must be in [0, 1)",
        )?;
        ensure(pos(self.wavelength_nm), "wavelength_nm", "must be > 0")?;
        ensure(
            self.wavelength_drift_nm_per_k.is_finite(),
            "wavelength_drift_nm_per_k",
            "must be finite",
        )?;
        ensure(
            self.t_ref_c.is_finite() && self.t_ref_c > -ZERO_CELSIUS_K,
            "t_ref_c",
            "must be above absolute zero",
        )?;
        ensure(pos(self.t0_k), "t0_k", "must be > 0")?;
        ensure(pos(self.t1_k), "t1_k", "must be > 0")?;
        ensure(
            self.max_operating_c
                .is_none_or(|c| c.is_finite() && c > self.t_ref_c),
            "max_operating_c",
            "must be above the reference temperature",
        )?;
        ensure(pos(self.ideality), "ideality", "must be > 0")?;
        ensure(pos(self.i_s_a), "i_s_a", "must be > 0")?;
        ensure(
            nonneg(self.i_s_activation_ev),
            "i_s_activation_ev",
            "must be >= 0",
        )?;
        ensure(nonneg(self.r_s_ohm), "r_s_ohm", "must be >= 0")?;
        ensure(pos(self.damage_power_w), "damage_power_w", "must be > 0")?;
        ensure(
            nonneg(self.damage_tc_per_k) && self.damage_tc_per_k < 0.1,
            "damage_tc_per_k",
            "must be in 0 ..< 0.1 per K",
        )?;
        ensure(
            nonneg(self.damage_filter_ns),
            "damage_filter_ns",
            "must be >= 0",
        )?;
        ensure(
            nonneg(self.threshold_rise_per_khour),
            "threshold_rise_per_khour",
            "must be >= 0",
        )?;
        ensure(
            nonneg(self.slope_loss_per_khour),
            "slope_loss_per_khour",
            "must be >= 0",
        )?;
        Ok(())
    }

    /// Analytic figures at T_ref for the unaged device.
    pub fn derived(&self) -> DiodeDerived {
        let m = Model::new(self);
        let hnu = H * C / m.lambda_ref;
        let eta_d = m.eta_i * m.eta_opt;
        let front = m.alpha_m1 / (m.alpha_m1 + m.alpha_m2);
        DiodeDerived {
            volume_m3: m.volume,
            v_g_m_per_s: m.v_g,
            alpha_m_per_m: m.alpha_m1 + m.alpha_m2,
            alpha_m_front_per_m: m.alpha_m1,
            alpha_m_back_per_m: m.alpha_m2,
            tau_p_s: m.tau_p,
            g_th_per_m: 1.0 / (m.gamma * m.v_g * m.tau_p),
            n_th_m3: m.n_th,
            dg_dn_m2: m.dgdn_th,
            i_th_a: m.i_th,
            eta_d,
            eta_d_front: eta_d * front,
            photon_energy_j: hnu,
            slope_w_per_a: eta_d * front * hnu / Q,
            slope_total_w_per_a: eta_d * hnu / Q,
            confinement: m.gamma,
            eta_i: m.eta_i,
        }
    }
}

/// Band gap by Varshni's equation Eg(T) = Eg(0) - alpha T^2 / (T + beta), eV.
#[inline]
pub fn varshni_ev(eg0_ev: f64, alpha_ev_per_k: f64, beta_k: f64, t_k: f64) -> f64 {
    eg0_ev - alpha_ev_per_k * t_k * t_k / (t_k + beta_k)
}

/// Varshni parameters of a semiconductor.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Varshni {
    /// Band gap at 0 K, eV.
    pub eg0_ev: f64,
    /// alpha, eV/K.
    pub alpha_ev_per_k: f64,
    /// beta, K.
    pub beta_k: f64,
}

impl Varshni {
    /// Band gap at `t_k`, eV.
    #[inline]
    pub fn eg_ev(&self, t_k: f64) -> f64 {
        varshni_ev(self.eg0_ev, self.alpha_ev_per_k, self.beta_k, t_k)
    }
}

/// GaAs (Vurgaftman, Meyer, Ram-Mohan, J. Appl. Phys. 89, 5815 (2001)).
pub const VARSHNI_GAAS: Varshni = Varshni {
    eg0_ev: 1.519,
    alpha_ev_per_k: 0.5405e-3,
    beta_k: 204.0,
};
/// InP (same source).
pub const VARSHNI_INP: Varshni = Varshni {
    eg0_ev: 1.4236,
    alpha_ev_per_k: 0.363e-3,
    beta_k: 162.0,
};
/// InAs (same source).
pub const VARSHNI_INAS: Varshni = Varshni {
    eg0_ev: 0.417,
    alpha_ev_per_k: 0.276e-3,
    beta_k: 93.0,
};
/// AlAs, Gamma valley (same source).
pub const VARSHNI_ALAS_GAMMA: Varshni = Varshni {
    eg0_ev: 3.099,
    alpha_ev_per_k: 0.885e-3,
    beta_k: 530.0,
};

// RODAS4 coefficients (Hairer and Wanner, Solving ODEs II, sect. IV.7; the
// transformed form K_i = h k_i with G = 1/(h gamma) - J used by their code).
const RG: f64 = 0.25;
const RA: [[f64; 5]; 6] = [
    [0.0, 0.0, 0.0, 0.0, 0.0],
    [1.544, 0.0, 0.0, 0.0, 0.0],
    [
        0.946_678_528_081_582_6,
        0.255_701_169_898_328_4,
        0.0,
        0.0,
        0.0,
    ],
    [
        3.314_825_187_068_521,
        2.896_124_015_972_201,
        0.998_641_913_997_781_7,
        0.0,
        0.0,
    ],
    [
        1.221_224_509_226_641,
        6.019_134_481_288_629,
        12.537_083_329_320_87,
        -0.687_886_036_105_895,
        0.0,
    ],
    [
        1.221_224_509_226_641,
        6.019_134_481_288_629,
        12.537_083_329_320_87,
        -0.687_886_036_105_895,
        1.0,
    ],
];
const RC: [[f64; 5]; 6] = [
    [0.0, 0.0, 0.0, 0.0, 0.0],
    [-5.6688, 0.0, 0.0, 0.0, 0.0],
    [
        -2.430_093_356_833_875,
        -0.206_359_915_709_191_5,
        0.0,
        0.0,
        0.0,
    ],
    [
        -0.107_352_905_815_137_5,
        -9.594_562_251_023_355,
        -20.470_286_148_096_16,
        0.0,
        0.0,
    ],
    [
        7.496_443_313_967_647,
        -10.246_804_314_643_52,
        -33.999_903_528_199_05,
        11.708_908_932_061_6,
        0.0,
    ],
    [
        8.083_246_795_921_522,
        -7.981_132_988_064_893,
        -31.521_594_328_743_71,
        16.319_305_431_231_36,
        -6.058_818_238_834_054,
    ],
];

/// The RODAS4 step of a 2-dimensional autonomous system: returns the new
/// state and the embedded error estimate. `f` evaluates the right-hand side;
/// `f0` and `jac` are the derivative and Jacobian at `y0`.
#[inline]
fn rodas4_step<F: FnMut([f64; 2]) -> [f64; 2]>(
    y0: [f64; 2],
    f0: [f64; 2],
    jac: [[f64; 2]; 2],
    h: f64,
    mut f: F,
) -> ([f64; 2], [f64; 2]) {
    let d = 1.0 / (h * RG);
    let (g00, g01, g10, g11) = (d - jac[0][0], -jac[0][1], -jac[1][0], d - jac[1][1]);
    let inv_det = 1.0 / (g00 * g11 - g01 * g10);
    let solve = |r: [f64; 2]| -> [f64; 2] {
        [
            (g11 * r[0] - g01 * r[1]) * inv_det,
            (g00 * r[1] - g10 * r[0]) * inv_det,
        ]
    };
    let inv_h = 1.0 / h;
    let mut k = [[0.0f64; 2]; 6];
    k[0] = solve(f0);
    for i in 1..6 {
        let mut y = y0;
        let mut r = [0.0f64; 2];
        for j in 0..i {
            y[0] += RA[i][j] * k[j][0];
            y[1] += RA[i][j] * k[j][1];
            r[0] += RC[i][j] * k[j][0];
            r[1] += RC[i][j] * k[j][1];
        }
        let fy = f(y);
        k[i] = solve([fy[0] + r[0] * inv_h, fy[1] + r[1] * inv_h]);
    }
    // Stiffly accurate: y_new = Y_6 + K_6, error estimate = K_6.
    let mut y = y0;
    for j in 0..5 {
        y[0] += RA[5][j] * k[j][0];
        y[1] += RA[5][j] * k[j][1];
    }
    ([y[0] + k[5][0], y[1] + k[5][1]], k[5])
}

/// Adaptive RODAS4 integration of a 2-dimensional autonomous system over
/// `t_span` (exposed so the integrator itself can be verified).
///
/// `rhs_jac(y, want_jacobian)` returns the derivative and (when asked) the
/// Jacobian at `y`. `h` carries the step size in (first trial step) and out
/// (suggested next step). Error control: RMS norm of
/// `err_i / (atol + rtol max(|y_i|, |y_i,new|))` must be <= 1; new step
/// `h * clamp(0.9 err^(-1/4), 0.2, 6)` (no growth right after a rejection).
/// Negative components are clamped to zero after each accepted step (the
/// rate-equation state is non-negative).
pub fn integrate_rodas4<F>(
    y: &mut [f64; 2],
    t_span: f64,
    h: &mut f64,
    rtol: f64,
    atol: f64,
    mut rhs_jac: F,
) -> DynamicStats
where
    F: FnMut([f64; 2], bool) -> ([f64; 2], [[f64; 2]; 2]),
{
    integrate_rodas4_observed(y, t_span, h, rtol, atol, &mut rhs_jac, |_, _| false).0
}

/// As [`integrate_rodas4`], calling `observe(h, y)` after every accepted
/// step; integration stops early when it returns true. Returns the counters
/// and the time reached.
fn integrate_rodas4_observed<F, O>(
    y: &mut [f64; 2],
    t_span: f64,
    h: &mut f64,
    rtol: f64,
    atol: f64,
    rhs_jac: &mut F,
    mut observe: O,
) -> (DynamicStats, f64)
where
    F: FnMut([f64; 2], bool) -> ([f64; 2], [[f64; 2]; 2]),
    O: FnMut(f64, &[f64; 2]) -> bool,
{
    let mut stats = DynamicStats::default();
    if t_span.is_nan() || t_span <= 0.0 {
        return (stats, 0.0);
    }
    let h_min = t_span * 1e-14;
    let mut h_nat = if *h > 0.0 && h.is_finite() {
        *h
    } else {
        t_span * 1e-3
    };
    let mut t = 0.0;
    let mut rejected_last = false;
    while t < t_span {
        let (f0, jac) = rhs_jac(*y, true);
        stats.jac_evals += 1;
        stats.f_evals += 1;
        loop {
            let remaining = t_span - t;
            let last = h_nat >= remaining * (1.0 - 1e-10);
            let hs = if last { remaining } else { h_nat };
            let (y_new, err) = rodas4_step(*y, f0, jac, hs, |s| {
                stats.f_evals += 1;
                rhs_jac(s, false).0
            });
            let mut e2 = 0.0;
            for i in 0..2 {
                let sc = atol + rtol * y[i].abs().max(y_new[i].abs());
                let r = err[i] / sc;
                e2 += r * r;
            }
            let en = (0.5 * e2).sqrt();
            let fac = if en.is_finite() {
                (0.9 / en.sqrt().sqrt()).clamp(0.2, 6.0)
            } else {
                0.2
            };
            if !en.is_finite() && hs <= h_min {
                // Non-finite inputs (a NaN temperature or current) give no
                // finite step at any size: stop instead of stepping the
                // whole span by the smallest step.
                *h = h_nat;
                return (stats, t);
            }
            if en <= 1.0 || hs <= h_min {
                stats.steps += 1;
                t = if last { t_span } else { t + hs };
                *y = [y_new[0].max(0.0), y_new[1].max(0.0)];
                let fac = if rejected_last { fac.min(1.0) } else { fac };
                rejected_last = false;
                let proposed = hs * fac;
                // A step cut short at the interval end says little about the
                // natural step size: keep the larger one for the next call.
                h_nat = if last { h_nat.max(proposed) } else { proposed };
                if observe(hs, y) {
                    *h = h_nat;
                    return (stats, t);
                }
                break;
            }
            stats.rejected += 1;
            rejected_last = true;
            h_nat = (hs * fac).max(h_min);
        }
    }
    *h = h_nat;
    (stats, t)
}

/// Right-hand side (and optionally Jacobian) of the scaled rate equations.
#[inline]
fn rate_rhs(
    m: &Model,
    f: f64,
    j: f64,
    lasing: bool,
    y: [f64; 2],
    want_jac: bool,
) -> ([f64; 2], [[f64; 2]; 2]) {
    let n = y[0] * m.n_scale;
    let s = y[1] * m.s_scale;
    let r = f * ((m.c * n + m.b) * n + m.a) * n;
    let (gn, gnp) = m.gain(n);
    let inv_den = 1.0 / (1.0 + m.eps * s);
    let stim = m.v_g * gn * inv_den * s;
    let dn = j - r - stim;
    let spont = m.gamma * m.beta * f * m.b * n * n;
    let ds = if lasing {
        m.gamma * stim - s * m.inv_tau_p + spont
    } else {
        -s * m.inv_tau_p
    };
    let fy = [dn * m.inv_n_scale, ds * m.inv_s_scale];
    if !want_jac {
        return (fy, [[0.0; 2]; 2]);
    }
    let rp = f * ((3.0 * m.c * n + 2.0 * m.b) * n + m.a);
    let dn_dn = -rp - m.v_g * s * gnp * inv_den;
    let dn_ds = -m.v_g * gn * inv_den * inv_den;
    let (ds_dn, ds_ds) = if lasing {
        (
            m.gamma * m.v_g * s * gnp * inv_den + 2.0 * m.gamma * m.beta * f * m.b * n,
            m.gamma * m.v_g * gn * inv_den * inv_den - m.inv_tau_p,
        )
    } else {
        (0.0, -m.inv_tau_p)
    };
    let ratio = m.s_scale / m.n_scale;
    (fy, [[dn_dn, dn_ds * ratio], [ds_dn / ratio, ds_ds]])
}

/// Exact steady state (N, S) of the rate equations at recombination
/// multiplier `f` and injection rate `j` (1/(m^3 s)).
fn steady_state(m: &Model, f: f64, j: f64) -> (f64, f64) {
    if j.is_nan() || j <= 0.0 {
        return (0.0, 0.0);
    }
    let gt = m.gamma * m.tau_p;
    let gv = m.gamma * m.v_g;
    let (fa, fb, fc) = (f * m.a, f * m.b * (1.0 - m.beta), f * m.c);
    let sig_c = m.gamma * m.beta * f * m.b;
    // Initial guess: root of the quadratic expansion about N_th.
    let k = gv * m.dgdn_th;
    let a2 = gt * k * f * m.rtp_th;
    let b1 = gt * k * (j - f * m.rt_th);
    let sig = sig_c * m.n_th * m.n_th;
    let disc = (b1 * b1 + 4.0 * a2 * sig).sqrt();
    let x = if b1 >= 0.0 {
        if b1 + disc > 0.0 {
            2.0 * sig / (b1 + disc)
        } else {
            0.0
        }
    } else {
        (disc - b1) / (2.0 * a2)
    };
    let mut n = m.n_th - x;
    if b1 > 0.0 {
        // Gain compression lifts the clamped density above N_th by about
        // g_th eps S / (dg/dN).
        let s_est = gt * (j - f * m.rt_th);
        n += m.eps * s_est / (gv * m.tau_p * m.dgdn_th);
    }
    let (mut lo, mut hi) = (0.0f64, f64::INFINITY);
    if j < f * m.rt_th {
        // Below threshold the root lies under the density where all the
        // injection recombines (S = 0). Newton on that convex equation from
        // N_th stays above its root, so every iterate is an upper bound.
        let mut nd = m.n_th;
        if fc > 0.0 {
            nd = nd.min((j / fc).cbrt());
        }
        if fb > 0.0 {
            nd = nd.min((j / fb).sqrt());
        }
        if fa > 0.0 {
            nd = nd.min(j / fa);
        }
        for _ in 0..4 {
            let g = ((fc * nd + fb) * nd + fa) * nd - j;
            let gp = (3.0 * fc * nd + 2.0 * fb) * nd + fa;
            nd -= g / gp;
        }
        hi = nd;
        if !(n < nd && n > 0.0) {
            n = nd * (1.0 - 1e-9);
        }
    }
    if n.is_nan() || n <= 0.0 {
        n = m.n_th;
    }
    for _ in 0..200 {
        let rt = ((fc * n + fb) * n + fa) * n;
        let s = gt * (j - rt);
        if s <= 0.0 {
            // Past the density where all injection recombines: root is below.
            hi = n;
            n = 0.5 * (lo + hi);
            continue;
        }
        let rtp = (3.0 * fc * n + 2.0 * fb) * n + fa;
        let (gn, gnp, gnpp) = m.gain3(n);
        let inv_den = 1.0 / (1.0 + m.eps * s);
        let g = gn * inv_den;
        let d = m.inv_tau_p - gv * g;
        let fval = s * d - sig_c * n * n;
        if fval > 0.0 {
            lo = n;
        } else {
            hi = n;
        }
        let sp = -gt * rtp;
        let dp = -gv * inv_den * (gnp - g * m.eps * sp);
        let dfdn = sp * d + s * dp - 2.0 * sig_c * n;
        if dfdn < 0.0 {
            let spp = -gt * (2.0 * fb + 6.0 * fc * n);
            let wp = -m.eps * sp * inv_den;
            let wpp = -m.eps * spp * inv_den + 2.0 * wp * wp;
            // h = g_N w with w = 1/(1 + eps S): h'' = g'' w + 2 g' w' + g w''.
            let hpp = inv_den * (gnpp + 2.0 * gnp * wp + gn * wpp);
            let fpp = spp * d + 2.0 * sp * dp - s * gv * hpp - 2.0 * sig_c;
            // Halley step (cubic convergence); its error is about
            // (F'' step / F')^2 step, so stop once that is below 1e-12 N.
            let step = fval * dfdn / (dfdn * dfdn - 0.5 * fval * fpp);
            let q = fpp * step;
            let done = step.abs() <= 1e-12 * n
                || (step.abs() <= 1e-3 * n && (q * q * step).abs() <= 1e-12 * n * dfdn * dfdn);
            if done {
                let n_new = n - step;
                let rt_new = ((fc * n_new + fb) * n_new + fa) * n_new;
                let s_new = gt * (j - rt_new);
                if d - dp * step > 0.5 * m.inv_tau_p {
                    // Far below threshold the balance S = Gamma tau_p (J - R)
                    // cancels; the photon equation S = spont / D is the
                    // better conditioned form there.
                    let (gn2, _) = m.gain(n_new);
                    let d2 = m.inv_tau_p - gv * gn2 / (1.0 + m.eps * s_new.max(0.0));
                    return (n_new, sig_c * n_new * n_new / d2);
                }
                return (n_new, s_new.max(0.0));
            }
            let n_new = n - step;
            if n_new > lo && n_new < hi {
                n = n_new;
                continue;
            }
        }
        if hi.is_finite() {
            if hi - lo <= 1e-15 * hi {
                break;
            }
            n = 0.5 * (lo + hi);
        } else {
            n *= 2.0;
        }
    }
    // Bracket collapsed without convergence of the iteration (not met in practice).
    let rt = ((fc * n + fb) * n + fa) * n;
    let s_bal = (gt * (j - rt)).max(0.0);
    let (gn, _) = m.gain(n);
    let d = m.inv_tau_p - gv * gn / (1.0 + m.eps * s_bal);
    let s = if d > 0.5 * m.inv_tau_p {
        sig_c * n * n / d
    } else {
        s_bal
    };
    (n, s)
}

/// A carrier density N_a and the parts of the steady-state equation that
/// depend on N alone, evaluated there once (at f = 1, with
/// R0(N) = A N + (1 - beta) B N^2 + C N^3):
/// Gamma tau_p R0 and its first two derivatives, 1/tau_p - Gamma v_g g_N
/// and Gamma v_g times the first two derivatives of g_N.
#[derive(Clone, Copy, Debug)]
struct Anchor {
    n: f64,
    nn: f64,
    p0: f64,
    p1: f64,
    p2: f64,
    e0: f64,
    gv_gp: f64,
    gv_gpp: f64,
}

impl Anchor {
    fn at(m: &Model, n: f64) -> Self {
        let (gt, gv) = (m.gt, m.gv);
        let (a0, b0, c0) = (m.a, m.b * (1.0 - m.beta), m.c);
        let (g, gp, gpp) = m.gain3(n);
        Self {
            n,
            nn: n * n,
            p0: gt * ((c0 * n + b0) * n + a0) * n,
            p1: gt * ((3.0 * c0 * n + 2.0 * b0) * n + a0),
            p2: gt * (6.0 * c0 * n + 2.0 * b0),
            e0: m.inv_tau_p - gv * g,
            gv_gp: gv * gp,
            gv_gpp: gv * gpp,
        }
    }
}

/// Outcome of one Halley step of [`halley_from`].
#[derive(Clone, Copy, Debug)]
struct HalleyStep {
    /// The new density, 1/m^3.
    n: f64,
    /// The photon density there, 1/m^3.
    s: f64,
    /// Whether the stopping rule of [`steady_state`] holds for this step
    /// (predicted error below 1e-12 N).
    converged: bool,
}

/// One Halley step toward the steady state above threshold, from the
/// anchor `a`; `None` where the general [`steady_state`] must decide
/// (photon density not positive, slope of the wrong sign, a step out of
/// the physical range, or too close to threshold, where the photon
/// equation is the better conditioned form).
///
/// The equation is that of [`steady_state`] multiplied through by
/// w = 1 + eps S > 0, so its evaluation has no division: with
/// S = Gamma tau_p (J - f R0(N)) and sigma = Gamma beta f B,
/// `G(N) = c2 S^2 + c1(N) S + k0(N)`, `c2 = eps / tau_p`,
/// `c1 = 1/tau_p - Gamma v_g g_N(N) - eps sigma N^2`, `k0 = -sigma N^2`.
/// G = w F vanishes exactly where F does (G' = w F' there). Everything
/// that depends on N alone comes from the anchor, so the step needs only
/// the operations that involve J and f. S at the new N follows from the
/// exact Taylor expansion of the cubic S(N).
#[inline]
fn halley_from(m: &Model, f: f64, j: f64, a: &Anchor) -> Option<HalleyStep> {
    let (n, nn) = (a.n, a.nn);
    let (ea, c2) = (m.inv_tau_p, m.c2);
    let sigma = m.sigma1 * f;
    let sig_eps = sigma * m.eps;
    let s = m.gt * j - f * a.p0;
    let (sp, spp) = (-f * a.p1, -f * a.p2);
    let c1 = a.e0 - sig_eps * nn;
    let c1p = -a.gv_gp - 2.0 * sig_eps * n;
    let c1pp = -a.gv_gpp - 2.0 * sig_eps;
    let (k0, k0p, k0pp) = (-sigma * nn, -2.0 * sigma * n, -2.0 * sigma);
    let lin = 2.0 * c2 * s + c1;
    let gval = (c2 * s + c1) * s + k0;
    let d1 = lin * sp + c1p * s + k0p;
    let d2 = 2.0 * c2 * sp * sp + lin * spp + 2.0 * c1p * sp + c1pp * s + k0pp;
    if !(s > 0.0 && d1 < 0.0) {
        return None;
    }
    let step = gval * d1 / (d1 * d1 - 0.5 * gval * d2);
    let n_new = n - step;
    // The third derivative of S is the same at every N.
    let s3_6 = m.s3_1 * f * (1.0 / 6.0);
    let s_new = s - step * (sp - step * (0.5 * spp - step * s3_6));
    if !(n_new > 0.0 && s_new > 0.0) || sigma * n_new * n_new > 0.5 * ea * s_new {
        return None;
    }
    let q = d2 * step;
    let converged = step.abs() <= 1e-12 * n
        || (step.abs() <= 1e-3 * n && (q * q * step).abs() <= 1e-12 * n * d1 * d1);
    Some(HalleyStep {
        n: n_new,
        s: s_new,
        converged,
    })
}

/// Carrier density with no optical feedback: f R(N) = j.
fn dark_state(m: &Model, f: f64, j: f64) -> f64 {
    if j.is_nan() || j <= 0.0 {
        return 0.0;
    }
    let (fa, fb, fc) = (f * m.a, f * m.b, f * m.c);
    // Start above the root (each term alone would reach j), so Newton on the
    // convex increasing R(N) descends monotonically.
    let mut n = f64::INFINITY;
    if fa > 0.0 {
        n = n.min(j / fa);
    }
    if fb > 0.0 {
        n = n.min((j / fb).sqrt());
    }
    if fc > 0.0 {
        n = n.min((j / fc).cbrt());
    }
    for _ in 0..100 {
        let g = ((fc * n + fb) * n + fa) * n - j;
        let gp = (3.0 * fc * n + 2.0 * fb) * n + fa;
        let dn = g / gp;
        n -= dn;
        if dn.abs() <= 1e-14 * n {
            break;
        }
    }
    n.max(0.0)
}

/// Tolerance of the dynamic integrator (on the scaled state n = N/N_th,
/// s = S/S_u).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Tolerance {
    /// Relative tolerance.
    pub rtol: f64,
    /// Absolute tolerance (scaled units).
    pub atol: f64,
}

impl Default for Tolerance {
    fn default() -> Self {
        Self {
            rtol: 1e-6,
            atol: 1e-9,
        }
    }
}

/// A laser diode with state: carrier and photon density, facet damage and age.
#[derive(Clone, Debug)]
pub struct Diode {
    params: DiodeParams,
    m: Model,
    n: f64,
    s: f64,
    damaged: bool,
    age_hours: f64,
    k_th: f64,
    k_sl: f64,
    p_filt: f64,
    h_next: f64,
    tol: Tolerance,
    stats: DynamicStats,
    /// Where the quasi-static Halley step starts from (see
    /// [`Diode::step_quasi_static`]).
    anchor: Option<Anchor>,
    /// exp(dT/T0), exp(-dT/T1), ln(I/I_s) and exp(-ln(1 + I/I_s(T)))
    /// continued from the previous tick (see [`super::near`]).
    near: NearTerms,
}

/// The slowly varying transcendental terms of [`Diode::step_quasi_static`].
#[derive(Clone, Copy, Debug, Default)]
struct NearTerms {
    t0: ExpNear,
    t1: ExpNear,
    ratio: LnNear,
    vf: ExpNear,
}

impl Diode {
    /// Builds an unaged, undamaged diode with no carriers or photons.
    pub fn new(params: DiodeParams) -> Result<Self, PlantError> {
        params.validate()?;
        let m = Model::new(&params);
        let h_next = m.tau_p;
        Ok(Self {
            params,
            m,
            n: 0.0,
            s: 0.0,
            damaged: false,
            age_hours: 0.0,
            k_th: 1.0,
            k_sl: 1.0,
            p_filt: 0.0,
            h_next,
            tol: Tolerance::default(),
            stats: DynamicStats::default(),
            anchor: None,
            near: NearTerms::default(),
        })
    }

    /// Parameters in use.
    pub fn params(&self) -> &DiodeParams {
        &self.params
    }

    /// Analytic figures at T_ref, unaged.
    pub fn derived(&self) -> DiodeDerived {
        self.params.derived()
    }

    #[inline]
    fn op(&self, t_k: f64) -> Op {
        let m = &self.m;
        let dt = t_k - m.t_ref_k;
        let e0 = (dt * m.inv_t0).exp() * cutoff(t_k, m.t_max_k);
        let e1 = (-dt * m.inv_t1).exp();
        let wavelength = m.lambda_ref + m.drift * dt;
        Op {
            f: e0 * e1 * self.k_th * self.k_sl,
            eta_i: m.eta_i * e1 * self.k_sl,
            ith_factor: e0 * self.k_th,
            wavelength,
            hnu: H * C / wavelength,
        }
    }

    /// [`Diode::op`] with the two exponentials continued from the previous
    /// call; equal to it within 3 ulp.
    #[inline]
    fn op_near(&mut self, t_k: f64) -> Op {
        let m = &self.m;
        let dt = t_k - m.t_ref_k;
        let e0 = self.near.t0.exp(dt * m.inv_t0) * cutoff(t_k, m.t_max_k);
        let e1 = self.near.t1.exp(-dt * m.inv_t1);
        let wavelength = m.lambda_ref + m.drift * dt;
        Op {
            f: e0 * e1 * self.k_th * self.k_sl,
            eta_i: m.eta_i * e1 * self.k_sl,
            ith_factor: e0 * self.k_th,
            wavelength,
            hnu: H * C / wavelength,
        }
    }

    /// [`Diode::forward_voltage`] with ln(I/I_s) continued from the previous
    /// call and, where the diode term is l + ln1p(e^-l) with l =
    /// ln(I/I_s(T)) in (18, 35], ln1p(y) = y - y^2/2 (next term below
    /// 1e-24) and e^-l continued as well; equal to it within a few ulp.
    #[inline]
    fn forward_voltage_near(&mut self, i_a: f64, t_k: f64) -> f64 {
        let m = &self.m;
        let i = i_a.max(0.0);
        let ratio = i * m.inv_i_s;
        let x = m.act_k * (1.0 / t_k - m.inv_t_ref);
        let l = self.near.ratio.ln(ratio) + x;
        let ln_term = if l > 35.0 {
            l
        } else if l > 18.0 {
            let y = self.near.vf.exp(-l);
            l + y * (1.0 - 0.5 * y)
        } else {
            (ratio * x.exp()).ln_1p()
        };
        m.n_vt_per_k * t_k * ln_term + i * m.r_s
    }

    /// Analytic threshold current at junction temperature `t_k` and present
    /// age, I_th(T_ref) exp(dT/T0) k_th, A.
    pub fn threshold_current_a(&self, t_k: f64) -> f64 {
        self.m.i_th * self.op(t_k).ith_factor
    }

    /// Analytic differential quantum efficiency (both facets) at `t_k` and age.
    pub fn eta_d(&self, t_k: f64) -> f64 {
        self.op(t_k).eta_i * self.m.eta_opt
    }

    /// Analytic front-facet slope efficiency at `t_k` and age, W/A.
    pub fn slope_w_per_a(&self, t_k: f64) -> f64 {
        let op = self.op(t_k);
        let front = self.m.alpha_m1 / (self.m.alpha_m1 + self.m.alpha_m2);
        op.eta_i * self.m.eta_opt * front * op.hnu / Q
    }

    /// Emission wavelength at junction temperature `t_k`, m.
    #[inline]
    pub fn wavelength_m(&self, t_k: f64) -> f64 {
        self.m.lambda_ref + self.m.drift * (t_k - self.m.t_ref_k)
    }

    /// Forward voltage V_f = n k T / q ln(1 + I / I_s(T)) + I R_s, V
    /// (negative currents are treated as zero).
    #[inline]
    pub fn forward_voltage(&self, i_a: f64, t_k: f64) -> f64 {
        let m = &self.m;
        let i = i_a.max(0.0);
        let ratio = i / m.i_s;
        let x = m.act_k * (1.0 / t_k - 1.0 / m.t_ref_k);
        // ln(1 + r e^x) = ln r + x + ln1p(e^-x / r); the last term is below
        // 1e-15 once ln r + x > 35, so the exponential is skipped there.
        let l = ratio.ln() + x;
        let ln_term = if l > 35.0 {
            l
        } else {
            (ratio * x.exp()).ln_1p()
        };
        m.n_vt_per_k * t_k * ln_term + i * m.r_s
    }

    #[inline]
    fn output(&self, op: &Op, i_a: f64, t_k: f64, n: f64, s: f64) -> DiodeOutput {
        self.output_with(op, n, s, self.forward_voltage(i_a, t_k))
    }

    #[inline]
    fn output_with(&self, op: &Op, n: f64, s: f64, v_f_v: f64) -> DiodeOutput {
        let ps = op.hnu * self.m.power_coef * s;
        DiodeOutput {
            p_front_w: ps * self.m.alpha_m1,
            p_back_w: ps * self.m.alpha_m2,
            v_f_v,
            wavelength_m: op.wavelength,
            i_th_a: if self.damaged {
                f64::INFINITY
            } else {
                self.m.i_th * op.ith_factor
            },
            n_m3: n,
            s_m3: s,
        }
    }

    /// Steady state of the rate equations at current `i_a` and junction
    /// temperature `t_k` (no state change). After facet damage there is no
    /// optical output.
    #[inline]
    pub fn quasi_static(&self, i_a: f64, t_k: f64) -> DiodeOutput {
        let op = self.op(t_k);
        let j = op.eta_i * i_a.max(0.0) / self.m.qv;
        let (n, s) = if self.damaged {
            (dark_state(&self.m, op.f, j), 0.0)
        } else {
            steady_state(&self.m, op.f, j)
        };
        self.output(&op, i_a, t_k, n, s)
    }

    /// [`Diode::quasi_static`] that also stores the steady state as the
    /// diode state and latches facet damage when the front power exceeds
    /// `damage_power_w`. The returned output is the one that caused the
    /// damage; later calls give no optical output.
    ///
    /// Above threshold the steady state comes from an anchored Halley step
    /// and the temperature and current terms are continued from the
    /// previous call; the result equals
    /// [`Diode::step_quasi_static_reference`] to 1e-11 in N and 1e-9 in
    /// power (see the module docs).
    #[inline]
    pub fn step_quasi_static(&mut self, i_a: f64, t_k: f64) -> DiodeOutput {
        let op = self.op_near(t_k);
        let j = op.eta_i * i_a.max(0.0) * self.m.inv_qv;
        let (n, s) = if self.damaged {
            (dark_state(&self.m, op.f, j), 0.0)
        } else {
            self.steady_state_anchored(op.f, j)
        };
        let v_f_v = self.forward_voltage_near(i_a, t_k);
        let out = self.output_with(&op, n, s, v_f_v);
        self.n = n;
        self.s = s;
        self.p_filt = out.p_front_w;
        self.check_damage_at(out.p_front_w, t_k);
        out
    }

    /// The steady state above threshold by one Halley step from the anchor
    /// when that step meets the stopping rule; otherwise a second step from
    /// where the first one landed (which becomes the anchor), and below or
    /// near threshold, or failing both, the general [`steady_state`] (whose
    /// root above threshold becomes the anchor).
    #[inline]
    fn steady_state_anchored(&mut self, f: f64, j: f64) -> (f64, f64) {
        let m = &self.m;
        let above = j > f * m.rt_th;
        if let (true, Some(a)) = (above, self.anchor) {
            match halley_from(m, f, j, &a) {
                Some(h) if h.converged => return (h.n, h.s),
                Some(h) => {
                    let a2 = Anchor::at(m, h.n);
                    if let Some(h2) = halley_from(m, f, j, &a2).filter(|h2| h2.converged) {
                        self.anchor = Some(a2);
                        return (h2.n, h2.s);
                    }
                }
                None => {}
            }
        }
        let (n, s) = steady_state(m, f, j);
        if above && n > 0.0 && s > 0.0 {
            self.anchor = Some(Anchor::at(m, n));
        }
        (n, s)
    }

    /// The straightforward form of [`Diode::step_quasi_static`]: the steady
    /// state from the cold initial guess and every exp and ln by the
    /// library, every call. Reference for the fast path.
    pub fn step_quasi_static_reference(&mut self, i_a: f64, t_k: f64) -> DiodeOutput {
        let out = self.quasi_static(i_a, t_k);
        self.n = out.n_m3;
        self.s = out.s_m3;
        self.p_filt = out.p_front_w;
        self.check_damage_at(out.p_front_w, t_k);
        out
    }

    /// Latches facet damage if `p_front_w` exceeds the damage limit at the
    /// reference temperature; returns whether the facet is (now) destroyed.
    #[inline]
    pub fn check_damage(&mut self, p_front_w: f64) -> bool {
        self.check_damage_at(p_front_w, self.m.t_ref_k)
    }

    /// Facet-damage power at junction temperature `t_k`, W.
    #[inline]
    pub fn damage_power_w(&self, t_k: f64) -> f64 {
        let m = &self.m;
        m.damage_w * (1.0 - m.damage_tc * (t_k - m.t_ref_k)).clamp(0.05, 2.0)
    }

    /// Latches facet damage if `p_front_w` exceeds the damage limit at
    /// junction temperature `t_k`; returns whether the facet is (now)
    /// destroyed.
    #[inline]
    pub fn check_damage_at(&mut self, p_front_w: f64, t_k: f64) -> bool {
        if !self.damaged && p_front_w > self.damage_power_w(t_k) {
            self.damaged = true;
            self.s = 0.0;
        }
        self.damaged
    }

    /// Whether the front facet has been destroyed.
    #[inline]
    pub fn damaged(&self) -> bool {
        self.damaged
    }

    /// Integrates the rate equations over `dt_s` with the current held at
    /// `i_a` and the junction at `t_k`, and returns the output at the end of
    /// the interval. Damage is checked after every internal step on the
    /// front power filtered with `damage_filter_ns`; once destroyed the
    /// cavity has no feedback and the photon density decays with tau_p.
    pub fn step_dynamic(&mut self, i_a: f64, t_k: f64, dt_s: f64) -> DiodeOutput {
        let op = self.op(t_k);
        let j = op.eta_i * i_a.max(0.0) / self.m.qv;
        let mut y = [self.n / self.m.n_scale, self.s / self.m.s_scale];
        let mut remaining = dt_s;
        if remaining > 0.0 && !self.damaged {
            let m = &self.m;
            let p_per_s = op.hnu * m.power_coef * m.alpha_m1 * m.s_scale;
            let tau = m.damage_tau;
            let damage_w = m.damage_w * (1.0 - m.damage_tc * (t_k - m.t_ref_k)).clamp(0.05, 2.0);
            let mut p_filt = self.p_filt;
            let mut rhs = |y: [f64; 2], want: bool| rate_rhs(m, op.f, j, true, y, want);
            let (st, t_done) = integrate_rodas4_observed(
                &mut y,
                remaining,
                &mut self.h_next,
                self.tol.rtol,
                self.tol.atol,
                &mut rhs,
                |h, y| {
                    let p = p_per_s * y[1];
                    p_filt = if tau > 0.0 {
                        let x = h / tau;
                        // exp(-x); the cubic is exact to 4e-14 for x < 1e-3.
                        let decay = if x < 1e-3 {
                            1.0 - x * (1.0 - x * (0.5 - x * (1.0 / 6.0)))
                        } else {
                            (-x).exp()
                        };
                        p + (p_filt - p) * decay
                    } else {
                        p
                    };
                    p_filt > damage_w
                },
            );
            self.p_filt = p_filt;
            add_stats(&mut self.stats, st);
            if p_filt > damage_w {
                self.damaged = true;
                y[1] = 0.0;
                self.p_filt = 0.0;
            }
            remaining -= t_done;
        }
        if remaining > 0.0 && self.damaged {
            let m = &self.m;
            let mut rhs = |y: [f64; 2], want: bool| rate_rhs(m, op.f, j, false, y, want);
            let st = integrate_rodas4(
                &mut y,
                remaining,
                &mut self.h_next,
                self.tol.rtol,
                self.tol.atol,
                &mut rhs,
            );
            add_stats(&mut self.stats, st);
        }
        self.n = y[0] * self.m.n_scale;
        self.s = y[1] * self.m.s_scale;
        self.output(&op, i_a, t_k, self.n, self.s)
    }

    /// Adds `hours` of operation (aging): k_th = 1 + rise h/1000,
    /// k_sl = 1 - loss h/1000 (kept above 1e-6).
    pub fn age(&mut self, hours: f64) {
        if hours > 0.0 && hours.is_finite() {
            self.age_hours += hours;
        }
        let kh = self.age_hours / 1000.0;
        self.k_th = 1.0 + self.m.rise * kh;
        self.k_sl = (1.0 - self.m.loss * kh).max(1e-6);
    }

    /// Operating hours accumulated by [`Diode::age`].
    pub fn age_hours(&self) -> f64 {
        self.age_hours
    }

    /// Aging factors (threshold multiplier k_th, slope multiplier k_sl).
    pub fn aging_factors(&self) -> (f64, f64) {
        (self.k_th, self.k_sl)
    }

    /// Sets the dynamic integrator tolerance.
    pub fn set_tolerance(&mut self, rtol: f64, atol: f64) {
        self.tol = Tolerance { rtol, atol };
    }

    /// Dynamic integrator tolerance in use.
    pub fn tolerance(&self) -> Tolerance {
        self.tol
    }

    /// Integrator counters accumulated since construction or the last reset.
    pub fn stats(&self) -> DynamicStats {
        self.stats
    }

    /// Clears the integrator counters.
    pub fn reset_stats(&mut self) {
        self.stats = DynamicStats::default();
    }

    /// Carrier density, 1/m^3.
    pub fn carrier_density_m3(&self) -> f64 {
        self.n
    }

    /// Photon density, 1/m^3.
    pub fn photon_density_m3(&self) -> f64 {
        self.s
    }

    /// Overwrites the carrier and photon densities, 1/m^3.
    pub fn set_state(&mut self, n_m3: f64, s_m3: f64) {
        self.n = n_m3.max(0.0);
        self.s = if self.damaged { 0.0 } else { s_m3.max(0.0) };
    }

    /// Rate-equation coefficients at junction temperature `t_k` and the
    /// present age and damage state.
    pub fn rate_coefficients(&self, t_k: f64) -> RateCoefficients {
        let op = self.op(t_k);
        let m = &self.m;
        RateCoefficients {
            volume_m3: m.volume,
            v_g_m_per_s: m.v_g,
            confinement: m.gamma,
            tau_p_s: m.tau_p,
            eta_i: op.eta_i,
            a_per_s: op.f * m.a,
            b_m3_per_s: op.f * m.b,
            c_m6_per_s: op.f * m.c,
            beta_sp: m.beta,
            eps_m3: m.eps,
            gain: m.gain,
            photon_energy_j: op.hnu,
            alpha_m_front_per_m: m.alpha_m1,
            alpha_m_back_per_m: m.alpha_m2,
            n_scale_m3: m.n_scale,
            s_scale_m3: m.s_scale,
            lasing: !self.damaged,
        }
    }
}

fn add_stats(acc: &mut DynamicStats, st: DynamicStats) {
    acc.steps += st.steps;
    acc.rejected += st.rejected;
    acc.f_evals += st.f_evals;
    acc.jac_evals += st.jac_evals;
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Damped oscillator x'' + 0.2 x' + x = 0 as a first-order system.
    fn osc(y: [f64; 2], _: bool) -> ([f64; 2], [[f64; 2]; 2]) {
        ([y[1], -y[0] - 0.2 * y[1]], [[0.0, 1.0], [-1.0, -0.2]])
    }

    fn osc_exact(t: f64) -> [f64; 2] {
        // x(0) = 1, v(0) = 0; zeta = 0.1, wd = sqrt(0.99).
        let wd = 0.99f64.sqrt();
        let e = (-0.1 * t).exp();
        let x = e * ((wd * t).cos() + 0.1 / wd * (wd * t).sin());
        let v = -e * (1.0 / wd) * (wd * t).sin();
        [x, v]
    }

    fn fixed_step_error(h: f64, t_end: f64) -> f64 {
        let mut y = [1.0, 0.0];
        let steps = (t_end / h).round() as usize;
        for _ in 0..steps {
            let (f0, jac) = osc(y, true);
            y = rodas4_step(y, f0, jac, h, |s| osc(s, false).0).0;
        }
        let ex = osc_exact(t_end);
        ((y[0] - ex[0]).powi(2) + (y[1] - ex[1]).powi(2)).sqrt()
    }

    #[test]
    fn non_finite_temperature_or_current_ends_the_dynamic_step() {
        // A NaN junction temperature (from a non-finite ambient) made every
        // step fail its error test at the smallest step size, so one tick
        // took about 1e14 steps.
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        for (i, t) in [(0.03, f64::NAN), (f64::NAN, 300.0), (0.03, f64::INFINITY)] {
            d.reset_stats();
            let _ = d.step_dynamic(i, t, 5e-5);
            assert!(d.stats().steps < 1000, "{:?}", d.stats());
        }
    }

    #[test]
    fn rodas4_is_fourth_order() {
        let e1 = fixed_step_error(0.1, 10.0);
        let e2 = fixed_step_error(0.05, 10.0);
        let ratio = e1 / e2;
        assert!(
            (13.0..19.0).contains(&ratio),
            "error ratio {ratio} (expect 16)"
        );
    }

    #[test]
    fn rodas4_nonlinear_order_and_estimate() {
        // y' = -y^2, y(0) = 1: y = 1/(1+t). Second component z' = -z (linear).
        let f = |y: [f64; 2], _: bool| ([-y[0] * y[0], -y[1]], [[-2.0 * y[0], 0.0], [0.0, -1.0]]);
        let run = |h: f64| {
            let mut y = [1.0, 1.0];
            let n = (2.0 / h).round() as usize;
            for _ in 0..n {
                let (f0, j) = f(y, true);
                y = rodas4_step(y, f0, j, h, |s| f(s, false).0).0;
            }
            (y[0] - 1.0 / 3.0).abs()
        };
        let ratio = run(0.1) / run(0.05);
        assert!((13.0..19.0).contains(&ratio), "ratio {ratio}");
        // Embedded estimate of one step behaves as h^4 (3rd-order method).
        let est = |h: f64| {
            let (f0, j) = f([1.0, 1.0], true);
            let e = rodas4_step([1.0, 1.0], f0, j, h, |s| f(s, false).0).1;
            e[0].abs()
        };
        let r = est(0.02) / est(0.01);
        assert!((13.0..19.0).contains(&r), "estimate ratio {r}");
    }

    #[test]
    fn adaptive_meets_tolerance_on_stiff_system() {
        // y1' = -1e6 (y1 - cos t) - sin t  (solution y1 = cos t), y2' = -y2.
        let mut y = [1.0, 1.0];
        let mut h = 1e-9;
        let mut t = 0.0;
        let mut rhs = |y: [f64; 2], _: bool| {
            // Autonomous form needs t; integrate piecewise over short spans
            // where t is frozen would be wrong, so use the exact-decay
            // second component only plus a stiff linear first one.
            (
                [-1e6 * y[0] + 1e6 * y[1], -y[1]],
                [[-1e6, 1e6], [0.0, -1.0]],
            )
        };
        for _ in 0..10 {
            integrate_rodas4(&mut y, 0.5, &mut h, 1e-8, 1e-12, &mut rhs);
            t += 0.5;
        }
        // Exact: y2 = e^-t, y1 = e^-t * 1e6/(1e6 - 1) + C e^-1e6 t.
        let y2 = f64::exp(-t);
        let y1 = y2 * 1e6 / (1e6 - 1.0);
        assert!((y[1] / y2 - 1.0).abs() < 1e-6, "{} vs {y2}", y[1]);
        assert!((y[0] / y1 - 1.0).abs() < 1e-6, "{} vs {y1}", y[0]);
    }

    fn textbook() -> DiodeParams {
        DiodeParams::textbook_in_plane()
    }

    /// Brute-force steady state: bisection on F(N) to machine precision.
    fn bisect_steady(m: &Model, f: f64, j: f64) -> (f64, f64) {
        let gt = m.gamma * m.tau_p;
        let eval = |n: f64| {
            let rt = f * (m.a * n + m.b * (1.0 - m.beta) * n * n + m.c * n * n * n);
            let s = gt * (j - rt);
            if s <= 0.0 {
                return (-1.0, s);
            }
            let (gn, _) = m.gain(n);
            let d = m.inv_tau_p - m.gamma * m.v_g * gn / (1.0 + m.eps * s);
            (s * d - m.gamma * m.beta * f * m.b * n * n, s)
        };
        let (mut lo, mut hi) = (0.0, 10.0 * m.n_th);
        for _ in 0..300 {
            let mid = 0.5 * (lo + hi);
            if eval(mid).0 > 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        (lo, eval(lo).1)
    }

    #[test]
    fn steady_state_matches_bisection() {
        for p in [
            textbook(),
            DiodeParams::demo_visible(),
            DiodeParams::demo_pump(),
        ] {
            let m = Model::new(&p);
            for f in [0.7, 1.0, 1.6] {
                for x in [0.01, 0.3, 0.9, 0.99, 1.0, 1.01, 1.1, 2.0, 5.0, 20.0] {
                    let j = x * f * m.rt_th;
                    let (n, s) = steady_state(&m, f, j);
                    let (nb, sb) = bisect_steady(&m, f, j);
                    assert!((n / nb - 1.0).abs() < 1e-10, "N {n} vs {nb} at x={x} f={f}");
                    assert!((s / sb - 1.0).abs() < 1e-6, "S {s} vs {sb} at x={x} f={f}");
                }
            }
        }
    }

    #[test]
    fn gain_derivatives_match_finite_differences() {
        for p in [textbook(), DiodeParams::demo_pump()] {
            let m = Model::new(&p);
            // Series branch (near N_th), logarithm branch, tangent branch.
            for x in [1.0005, 0.995, 1.3, 0.8, 0.1] {
                let n = x * m.n_th;
                let h = 1e-6 * m.n_th;
                let (g, gp, gpp) = m.gain3(n);
                let (gm, gpm, _) = m.gain3(n - h);
                let (gpl, gpp_, _) = m.gain3(n + h);
                let (g_ref, gp_ref) = m.gain.gain(n);
                assert!(
                    (g - g_ref).abs() <= 1e-13 * g_ref.abs().max(1.0),
                    "g at {x}"
                );
                assert!((gp / gp_ref - 1.0).abs() < 1e-13, "g' at {x}");
                assert!(
                    ((gpl - gm) / (2.0 * h) / gp - 1.0).abs() < 1e-6,
                    "fd g' at {x}"
                );
                let fd2 = (gpp_ - gpm) / (2.0 * h);
                assert!(
                    (fd2 - gpp).abs() <= 1e-5 * gpp.abs().max(1e-30 * gp.abs()),
                    "g'' at {x}"
                );
            }
        }
    }

    #[test]
    fn dark_state_balances_recombination() {
        let m = Model::new(&textbook());
        for j in [1e30, 1e32, 1e34] {
            let n = dark_state(&m, 1.3, j);
            let r = 1.3 * (m.a * n + m.b * n * n + m.c * n * n * n);
            assert!((r / j - 1.0).abs() < 1e-12);
        }
    }

    #[test]
    fn toml_round_trip_and_unknown_fields() {
        let p = DiodeParams::demo_pump();
        let text = toml::to_string(&p).unwrap();
        let back: DiodeParams = crate::plant::from_toml(&text).unwrap();
        assert_eq!(p, back);
        let bad = text.replace("eta_i =", "eta_x = 1.0\neta_i =");
        assert!(crate::plant::from_toml::<DiodeParams>(&bad).is_err());
    }

    #[test]
    fn damage_latches_and_stops_lasing() {
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        let t = 298.15;
        let ok = d.step_quasi_static(0.05, t);
        assert!(!d.damaged() && ok.p_front_w > 0.01);
        let hit = d.step_quasi_static(0.2, t);
        assert!(hit.p_front_w > 0.06 && d.damaged());
        let after = d.step_quasi_static(0.05, t);
        assert_eq!(after.p_front_w, 0.0);
        assert!(after.v_f_v > 1.5);
        let dyn_out = d.step_dynamic(0.05, t, 1e-9);
        assert_eq!(dyn_out.p_front_w, 0.0);
    }

    #[test]
    fn dynamic_damage_uses_filtered_power() {
        // A 2 ns overdrive spike well above the limit does not destroy the
        // facet with a 100 ns facet time constant; a sustained one does.
        let p = DiodeParams::demo_visible();
        let t = 298.15;
        let mut d = Diode::new(p).unwrap();
        d.step_quasi_static(0.04, t);
        d.step_dynamic(0.2, t, 2e-9);
        assert!(!d.damaged());
        d.step_dynamic(0.04, t, 1e-6);
        assert!(!d.damaged());
        d.step_dynamic(0.2, t, 1e-6);
        assert!(d.damaged());
        assert_eq!(d.photon_density_m3(), 0.0);
    }

    #[test]
    fn aging_raises_threshold_and_lowers_slope() {
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        let t = 298.15;
        let (i0, s0) = (d.threshold_current_a(t), d.slope_w_per_a(t));
        d.age(5000.0);
        assert!((d.threshold_current_a(t) / i0 - 1.10).abs() < 1e-12);
        assert!((d.slope_w_per_a(t) / s0 - 0.95).abs() < 1e-12);
        // The quasi-static L-I follows the analytic figures.
        let p1 = d.quasi_static(0.045, t).p_front_w;
        let p2 = d.quasi_static(0.055, t).p_front_w;
        let slope = (p2 - p1) / 0.01;
        assert!((slope / d.slope_w_per_a(t) - 1.0).abs() < 0.01, "{slope}");
    }

    /// Worst differences between the fast quasi-static step and the
    /// straightforward one: relative N, front power relative to
    /// max(P, 1e-6 of the damage power), forward voltage in volts; and how
    /// many steps above threshold started from an anchor.
    fn fast_vs_reference(p: DiodeParams, seed: u64, age_at: usize) -> (f64, f64, f64, usize) {
        let mut fast = Diode::new(p.clone()).unwrap();
        let mut refd = Diode::new(p.clone()).unwrap();
        let i_th = fast.threshold_current_a(298.15);
        let floor_w = 1e-6 * p.damage_power_w;
        let mut rng = crate::plant::Rng::new(seed);
        let mut t = 298.15f64;
        let (mut dn, mut dp, mut dv) = (0.0f64, 0.0f64, 0.0f64);
        let mut anchored = 0usize;
        for k in 0..60_000 {
            // Drive: a ramp through threshold, then DAC-sized steps and
            // dither around a few operating points, sometimes a jump;
            // junction: a slow drift with small steps and rare jumps.
            let target = match k / 10_000 {
                0 => 3.0 * i_th * k as f64 / 10_000.0,
                1 => 1.5 * i_th,
                2 => 2.5 * i_th,
                3 => 0.5 * i_th,
                4 => 3.0 * i_th,
                _ => 1.05 * i_th,
            };
            let i = if k % 997 == 0 {
                target * (0.5 + rng.uniform())
            } else {
                target + 2e-3 * i_th * (rng.uniform() - 0.5)
            };
            t += 2e-4 * (rng.uniform() - 0.45) + if k % 1499 == 0 { 3.0 } else { 0.0 };
            if k == age_at {
                fast.age(4000.0);
                refd.age(4000.0);
            }
            let had_anchor = fast.anchor.is_some();
            let a = fast.step_quasi_static(i, t);
            let b = refd.step_quasi_static_reference(i, t);
            if had_anchor && i > 1.01 * fast.threshold_current_a(t) {
                anchored += 1;
            }
            if b.n_m3 > 0.0 {
                dn = dn.max((a.n_m3 / b.n_m3 - 1.0).abs());
            }
            dp = dp.max((a.p_front_w - b.p_front_w).abs() / b.p_front_w.max(floor_w));
            dv = dv.max((a.v_f_v - b.v_f_v).abs());
            assert_eq!(fast.damaged(), refd.damaged());
        }
        (dn, dp, dv, anchored)
    }

    #[test]
    fn fast_quasi_static_equals_reference() {
        // The anchored Halley step, the continued exponentials and the
        // continued logarithm reproduce the straightforward evaluation:
        // carrier density to 1e-11, front power to 1e-9 (relative, or of
        // 1e-6 of the damage power near zero), forward voltage to 1e-12 V.
        for (k, p) in [
            textbook(),
            DiodeParams::demo_visible(),
            DiodeParams::demo_pump(),
        ]
        .into_iter()
        .enumerate()
        {
            let (dn, dp, dv, anchored) = fast_vs_reference(p, 40 + k as u64, 25_000);
            assert!(dn < 1e-11, "N differs by {dn:e} (set {k})");
            assert!(dp < 1e-9, "P differs by {dp:e} (set {k})");
            assert!(dv < 1e-12, "V_f differs by {dv:e} V (set {k})");
            assert!(
                anchored > 15_000,
                "anchored path used {anchored} times (set {k})"
            );
        }
    }

    #[test]
    fn fast_quasi_static_latches_damage_like_reference() {
        let mut fast = Diode::new(DiodeParams::demo_visible()).unwrap();
        let mut refd = Diode::new(DiodeParams::demo_visible()).unwrap();
        let t = 300.0;
        for k in 0..400 {
            let i = 0.03 + 0.0005 * k as f64;
            let a = fast.step_quasi_static(i, t);
            let b = refd.step_quasi_static_reference(i, t);
            assert_eq!(fast.damaged(), refd.damaged(), "at {i} A");
            assert!((a.p_front_w - b.p_front_w).abs() <= 1e-9 * b.p_front_w.max(1e-9));
        }
        assert!(fast.damaged());
    }

    /// Above the maximum operating temperature the threshold leaves the T0
    /// law and rises steeply: at three times the 25 degC threshold the
    /// diode lases normally up to it and goes dark 10 K above it.
    #[test]
    fn lasing_stops_above_the_maximum_operating_temperature() {
        let mut p = DiodeParams::demo_visible();
        let t0_law = Diode::new(p.clone()).unwrap();
        p.max_operating_c = Some(60.0);
        let d = Diode::new(p).unwrap();
        let k = |c: f64| c + ZERO_CELSIUS_K;
        for c in [25.0, 45.0, 60.0] {
            assert_eq!(
                d.threshold_current_a(k(c)),
                t0_law.threshold_current_a(k(c))
            );
        }
        let ratio = d.threshold_current_a(k(70.0)) / t0_law.threshold_current_a(k(70.0));
        assert!((ratio / (10.0 / CUTOFF_EFOLD_K).exp() - 1.0).abs() < 1e-12);
        let i = 3.0 * d.threshold_current_a(k(25.0));
        let lasing = d.quasi_static(i, k(60.0)).p_front_w;
        let dark = d.quasi_static(i, k(70.0)).p_front_w;
        assert!(lasing > 0.01, "{lasing}");
        assert!(dark < 1e-3 * lasing, "{dark} {lasing}");
        let mut near = Diode::new(d.params().clone()).unwrap();
        let fast = near.step_quasi_static(i, k(70.0)).p_front_w;
        assert!((fast - dark).abs() <= 1e-9 * lasing, "{fast} {dark}");
    }

    /// With a damage temperature coefficient the facet fails at a lower
    /// power when hot: 55 mW is safe at 25 degC (limit 60 mW) and destroys
    /// the facet at 65 degC (limit 60 mW x 0.8 = 48 mW), in both solvers.
    #[test]
    fn facet_damage_level_falls_with_temperature() {
        let mut p = DiodeParams::demo_visible();
        p.damage_tc_per_k = 0.005;
        let probe = Diode::new(p.clone()).unwrap();
        let (cold, hot) = (25.0 + ZERO_CELSIUS_K, 65.0 + ZERO_CELSIUS_K);
        assert!((probe.damage_power_w(hot) - 0.048).abs() < 1e-12);
        // The current giving 55 mW at each temperature.
        let current_for = |t_k: f64| {
            let (mut lo, mut hi) = (0.0, 0.2);
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if probe.quasi_static(mid, t_k).p_front_w < 0.055 {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            hi
        };
        for fast in [true, false] {
            let mut d = Diode::new(p.clone()).unwrap();
            let step = |d: &mut Diode, i: f64, t: f64| {
                if fast {
                    d.step_quasi_static(i, t)
                } else {
                    d.step_quasi_static_reference(i, t)
                }
            };
            step(&mut d, current_for(cold), cold);
            assert!(!d.damaged());
            step(&mut d, current_for(hot), hot);
            assert!(d.damaged());
        }
        // Without the coefficient 55 mW is safe when hot too.
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        d.step_quasi_static(current_for(hot), hot);
        assert!(!d.damaged());
    }
}
