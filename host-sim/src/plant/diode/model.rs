//! A parameter set in SI units: the temperature-independent constants
//! ([`Model`]), the temperature and aging map at one operating point
//! ([`Op`], with the cut-off above the maximum operating temperature) and
//! the analytic figures at the reference temperature ([`DiodeDerived`]).

use serde::{Deserialize, Serialize};

use crate::plant::constants::{C, H, K_B, Q, ZERO_CELSIUS_K};

use super::gain::GainSi;
use super::params::{DiodeParams, GainModel, CUTOFF_EFOLD_K};
use super::voltage::JunctionLaw;

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

/// Temperature-independent constants precomputed from the parameters (SI).
#[derive(Clone, Debug)]
pub(super) struct Model {
    pub(super) volume: f64,
    pub(super) qv: f64,
    pub(super) inv_qv: f64,
    pub(super) v_g: f64,
    pub(super) gamma: f64,
    pub(super) tau_p: f64,
    pub(super) inv_tau_p: f64,
    pub(super) alpha_m1: f64,
    pub(super) alpha_m2: f64,
    /// v_g V / Gamma: multiply by alpha_m,x h nu S for facet power.
    pub(super) power_coef: f64,
    pub(super) a: f64,
    pub(super) b: f64,
    pub(super) c: f64,
    pub(super) beta: f64,
    pub(super) eps: f64,
    pub(super) gain: GainSi,
    pub(super) n_th: f64,
    pub(super) dgdn_th: f64,
    /// Log gain only: ln((N_th + Ns)/(Ntr + Ns)), 1/(N_th + Ns), g0 and the
    /// range |N - N_th| below which ln1p is summed as a series.
    pub(super) log_th: f64,
    pub(super) inv_x_th: f64,
    pub(super) g0: f64,
    pub(super) inv_g0: f64,
    pub(super) series_dn: f64,
    /// R(N_th) - beta B N_th^2 and its derivative, at f = 1.
    pub(super) rt_th: f64,
    pub(super) rtp_th: f64,
    pub(super) i_th: f64,
    pub(super) eta_i: f64,
    pub(super) eta_opt: f64,
    pub(super) t_ref_k: f64,
    pub(super) inv_t0: f64,
    pub(super) inv_t1: f64,
    pub(super) t_max_k: f64,
    pub(super) lambda_ref: f64,
    pub(super) drift: f64,
    pub(super) n_vt_per_k: f64,
    pub(super) i_s: f64,
    pub(super) inv_i_s: f64,
    /// The temperature law of I_s ([`super::voltage`]).
    pub(super) junction: JunctionLaw,
    pub(super) r_s: f64,
    pub(super) damage_w: f64,
    pub(super) damage_tc: f64,
    pub(super) damage_tau: f64,
    pub(super) rise: f64,
    pub(super) loss: f64,
    /// Aging law: Ea / k_B (K), the current exponent, 1 / I_ref (1/A; 0
    /// when the rates do not depend on the current) and 1 / T_ref (1/K).
    pub(super) aging_ea_over_k: f64,
    pub(super) aging_n: f64,
    pub(super) aging_inv_i_ref: f64,
    /// ln(I_s / I_ref) (0 without a reference current).
    pub(super) aging_ln_i_s_per_i_ref: f64,
    pub(super) aging_inv_t_ref: f64,
    pub(super) n_scale: f64,
    pub(super) s_scale: f64,
    pub(super) inv_n_scale: f64,
    pub(super) inv_s_scale: f64,
    /// Constants of the anchored Halley step ([`super::steady_state::halley_from`]):
    /// Gamma tau_p, Gamma v_g, eps / tau_p, Gamma beta B (sigma at f = 1)
    /// and -6 Gamma tau_p C (the third derivative of S at f = 1).
    pub(super) gt: f64,
    pub(super) gv: f64,
    pub(super) c2: f64,
    pub(super) sigma1: f64,
    pub(super) s3_1: f64,
}

impl Model {
    /// Unsaturated gain and its derivative, as [`GainSi::gain`]; near N_th
    /// the logarithm is evaluated as ln((N_th+Ns)/(Ntr+Ns)) + ln1p(u) with
    /// u = (N - N_th)/(N_th + Ns), |u| < 1e-2, summed to u^9 (truncation
    /// below 1e-21), which avoids a logarithm call in the common case.
    #[inline]
    pub(super) fn gain(&self, n: f64) -> (f64, f64) {
        let (g, gp, _) = self.gain3(n);
        (g, gp)
    }

    /// Gain, first and second derivative with respect to N.
    #[inline]
    pub(super) fn gain3(&self, n: f64) -> (f64, f64, f64) {
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

    pub(super) fn new(p: &DiodeParams) -> Self {
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
            junction: JunctionLaw::new(p),
            r_s: p.r_s_ohm,
            damage_w: p.damage_power_w,
            damage_tc: p.damage_tc_per_k,
            damage_tau: p.damage_filter_ns * 1e-9,
            rise: p.threshold_rise_per_khour,
            loss: p.slope_loss_per_khour,
            aging_ea_over_k: p.aging_activation_ev * Q / K_B,
            aging_n: p.aging_current_exponent,
            aging_inv_i_ref: p.aging_ref_current_a.map_or(0.0, |i| 1.0 / i),
            aging_ln_i_s_per_i_ref: p.aging_ref_current_a.map_or(0.0, |i| (p.i_s_a / i).ln()),
            aging_inv_t_ref: 1.0 / (p.aging_ref_c.unwrap_or(p.t_ref_c) + ZERO_CELSIUS_K),
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
pub(super) fn cutoff(t_k: f64, t_max_k: f64) -> f64 {
    if t_k > t_max_k {
        ((t_k - t_max_k) / CUTOFF_EFOLD_K).exp()
    } else {
        1.0
    }
}

/// Operating-point factors at one temperature and age.
#[derive(Clone, Copy, Debug)]
pub(super) struct Op {
    /// Recombination multiplier.
    pub(super) f: f64,
    /// Effective injection efficiency.
    pub(super) eta_i: f64,
    /// Threshold multiplier exp(dT/T0) k_th.
    pub(super) ith_factor: f64,
    pub(super) wavelength: f64,
    pub(super) hnu: f64,
}

impl DiodeParams {
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gain_derivatives_match_finite_differences() {
        for p in [DiodeParams::textbook_in_plane(), DiodeParams::demo_pump()] {
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
}
