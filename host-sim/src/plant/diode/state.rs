//! The laser diode with state ([`Diode`]): construction, carrier and
//! photon density, the temperature and aging map at its present age, the
//! analytic threshold, slope and wavelength, the forward voltage and the
//! output at one instant. The steps live beside it: `quasi_static.rs`,
//! `dynamic.rs`; facet damage in `damage.rs`, aging in `aging.rs`.

use crate::plant::constants::{C, H, Q};
use crate::plant::error::PlantError;
use crate::plant::near::{ExpNear, LnNear};

use super::model::{cutoff, DiodeDerived, Model, Op};
use super::params::DiodeParams;
use super::rodas4::{DynamicStats, Tolerance};
use super::steady_state::Anchor;

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

/// A laser diode with state: carrier and photon density, facet damage and age.
#[derive(Clone, Debug)]
pub struct Diode {
    pub(super) params: DiodeParams,
    pub(super) m: Model,
    pub(super) n: f64,
    pub(super) s: f64,
    pub(super) damaged: bool,
    pub(super) age_hours: f64,
    pub(super) k_th: f64,
    pub(super) k_sl: f64,
    pub(super) p_filt: f64,
    pub(super) h_next: f64,
    pub(super) tol: Tolerance,
    pub(super) stats: DynamicStats,
    /// Where the quasi-static Halley step starts from (see
    /// [`Diode::step_quasi_static`]).
    pub(super) anchor: Option<Anchor>,
    /// exp(dT/T0), exp(-dT/T1), ln(I/I_s), ln(T/T_ref) and
    /// exp(-ln(1 + I/I_s(T))) continued from the previous tick (see [`crate::plant::near`]).
    pub(super) near: NearTerms,
}

/// The slowly varying transcendental terms of [`Diode::step_quasi_static`].
#[derive(Clone, Copy, Debug)]
pub(super) struct NearTerms {
    pub(super) t0: ExpNear,
    pub(super) t1: ExpNear,
    pub(super) ratio: LnNear,
    pub(super) vf: ExpNear,
    /// ln(T / T_ref) of the saturation current's prefactor.
    pub(super) t_ratio: LnNear,
    /// ln(I / I_ref) and the acceleration factor of the aging law.
    pub(super) aging_ln: LnNear,
    pub(super) aging_exp: ExpNear,
    /// The current of the last forward voltage and its ln(I / I_s): the
    /// next forward voltage at the same current reuses it, and the aging
    /// law at the same current takes ln(I / I_ref) from it
    /// (ln(I / I_s) + ln(I_s / I_ref)) instead of a second continuation.
    pub(super) last_i_a: f64,
    pub(super) last_ln_i: f64,
}

impl Default for NearTerms {
    fn default() -> Self {
        Self {
            t0: ExpNear::new(),
            t1: ExpNear::new(),
            ratio: LnNear::new(),
            vf: ExpNear::new(),
            t_ratio: LnNear::new(),
            aging_ln: LnNear::new(),
            aging_exp: ExpNear::new(),
            // No current yet: NaN equals no current.
            last_i_a: f64::NAN,
            last_ln_i: f64::NAN,
        }
    }
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
    pub(super) fn op(&self, t_k: f64) -> Op {
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
    pub(super) fn op_near(&mut self, t_k: f64) -> Op {
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

    /// [`Diode::forward_voltage`] with ln(I/I_s) and ln(T/T_ref) continued
    /// from the previous call and, where the diode term is l + ln1p(e^-l) with l =
    /// ln(I/I_s(T)) in (18, 35], ln1p(y) = y - y^2/2 (next term below
    /// 1e-24) and e^-l continued as well; equal to it within a few ulp.
    #[inline]
    pub(super) fn forward_voltage_near(&mut self, i_a: f64, t_k: f64) -> f64 {
        let m = &self.m;
        let i = i_a.max(0.0);
        let ratio = i * m.inv_i_s;
        let ln_t_ratio = self.near.t_ratio.ln(m.junction.t_ratio(t_k));
        let x = m.junction.log_shift_with(t_k, ln_t_ratio);
        // The same current as the last call (the source settled on an
        // unchanged DAC code) gives the same continued logarithm: reuse it.
        let ln_i = if i == self.near.last_i_a {
            self.near.last_ln_i
        } else {
            self.near.ratio.ln(ratio)
        };
        self.near.last_i_a = i;
        self.near.last_ln_i = ln_i;
        let l = ln_i + x;
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

    /// Forward voltage V_f = n k T / q ln(1 + I / I_s(T)) + I R_s, V, with
    /// I_s(T) by [`super::voltage`] (negative currents are treated as zero).
    #[inline]
    pub fn forward_voltage(&self, i_a: f64, t_k: f64) -> f64 {
        let m = &self.m;
        let i = i_a.max(0.0);
        let ratio = i / m.i_s;
        let x = m.junction.log_shift(t_k);
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
    pub(super) fn output(&self, op: &Op, i_a: f64, t_k: f64, n: f64, s: f64) -> DiodeOutput {
        self.output_with(op, n, s, self.forward_voltage(i_a, t_k))
    }

    #[inline]
    pub(super) fn output_with(&self, op: &Op, n: f64, s: f64, v_f_v: f64) -> DiodeOutput {
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
}

#[cfg(test)]
mod tests {
    use super::super::params::CUTOFF_EFOLD_K;
    use super::*;
    use crate::plant::constants::ZERO_CELSIUS_K;

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
}
