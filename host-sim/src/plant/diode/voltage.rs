//! The temperature law of the forward voltage's diode term: how the
//! saturation current I_s of V_f = n k T / q ln(1 + I / I_s(T)) + I R_s
//! moves with the junction temperature.
//!
//! # The law
//!
//! ```text
//! I_s(T) = I_s(T_ref) (T / T_ref)^(3/n) exp( E_a / (n k T_ref) - E_b(T) / (n k T) )
//! E_b(T) = E_a + Eg_GaAs(T) - Eg_GaAs(T_ref)
//! ```
//!
//! `E_a` is the module's `turn_on_activation_ev` (the barrier at T_ref,
//! by default the photon energy); it shrinks with temperature as the band
//! gap does, by Varshni's law with the GaAs parameters of Vurgaftman,
//! Meyer and Ram-Mohan (J. Appl. Phys. 89, 5815 (2001)): every shipped
//! module is a GaAs-substrate family (AlGaInP red, AlGaAs 808 nm and
//! 850 nm, InGaAs 976 nm). The T^(3/n) prefactor is the n_i^2 ~ T^3
//! temperature dependence of the diffusion current, taken to the lumped
//! ideality n. At fixed current and T = T_ref this gives
//!
//! ```text
//! dV_f/dT = (V_d - E_a/q) / T + (1/q) dEg/dT - 3 k / q
//! ```
//!
//! with V_d the diode term: the relation of Schubert, *Light-Emitting
//! Diodes*, 2nd ed. (Cambridge University Press 2006), ch. 6 (temperature
//! dependence of the forward voltage; `from memory`).
//!
//! # Why
//!
//! The law before kept only the Arrhenius factor with a constant barrier,
//! so dV_f/dT = (V_d - E_a/q)/T: positive wherever the diode term exceeds
//! the barrier, which happens whenever `turn_on_v` is above the photon
//! energy and the barrier defaults to the photon energy (the 850 nm VCSEL
//! rose by +0.6 mV/K at 5 mA, the 808 nm bench module by +0.42 mV/K).
//! Real diodes fall at fixed current (silicon about -2 mV/K: Sedra and
//! Smith, *Microelectronic Circuits*, diode temperature dependence,
//! `from memory`). The two terms it lacked, the shrinking gap and the
//! prefactor, are both negative: about -0.45 mV/K and -0.26 mV/K at
//! 25 degC.

use crate::plant::constants::{K_B, Q, ZERO_CELSIUS_K};

use super::params::DiodeParams;
use super::varshni::VARSHNI_GAAS;

/// The temperature law of I_s for one parameter set.
#[derive(Clone, Copy, Debug)]
pub(super) struct JunctionLaw {
    /// E_a / (n k), K.
    act_k: f64,
    /// q / (n k), K per eV (turns a barrier shift in eV into K).
    inv_nk: f64,
    /// 3 / n, the prefactor's exponent.
    prefactor_exp: f64,
    inv_t_ref: f64,
    /// Eg_GaAs(T_ref), eV.
    eg_ref_ev: f64,
}

impl JunctionLaw {
    pub(super) fn new(p: &DiodeParams) -> Self {
        let t_ref_k = p.t_ref_c + ZERO_CELSIUS_K;
        let inv_nk = Q / (p.ideality * K_B);
        Self {
            act_k: p.i_s_activation_ev * inv_nk,
            inv_nk,
            prefactor_exp: 3.0 / p.ideality,
            inv_t_ref: 1.0 / t_ref_k,
            eg_ref_ev: VARSHNI_GAAS.eg_ev(t_ref_k),
        }
    }

    /// ln(I_s(T_ref) / I_s(T)): added to ln(I / I_s(T_ref)) it gives
    /// ln(I / I_s(T)); zero at T_ref.
    #[inline]
    pub(super) fn log_shift(&self, t_k: f64) -> f64 {
        self.log_shift_with(t_k, (t_k * self.inv_t_ref).ln())
    }

    /// T / T_ref, whose logarithm [`JunctionLaw::log_shift_with`] takes.
    #[inline]
    pub(super) fn t_ratio(&self, t_k: f64) -> f64 {
        t_k * self.inv_t_ref
    }

    /// [`JunctionLaw::log_shift`] given ln(T / T_ref) (the fast path
    /// continues it from the previous tick, see `crate::plant::near`).
    #[inline]
    pub(super) fn log_shift_with(&self, t_k: f64, ln_t_ratio: f64) -> f64 {
        let inv_t = 1.0 / t_k;
        let gap_shift_ev = VARSHNI_GAAS.eg_ev(t_k) - self.eg_ref_ev;
        self.act_k * (inv_t - self.inv_t_ref) + self.inv_nk * gap_shift_ev * inv_t
            - self.prefactor_exp * ln_t_ratio
    }
}

#[cfg(test)]
mod tests {
    use super::super::state::Diode;
    use super::*;
    use crate::plant::demo::DemoModule;

    /// dV_f/dT at fixed current by a central difference, V/K.
    fn dvdt(d: &Diode, i_a: f64, t_k: f64) -> f64 {
        (d.forward_voltage(i_a, t_k + 0.01) - d.forward_voltage(i_a, t_k - 0.01)) / 0.02
    }

    /// dEg/dT of GaAs by Varshni, eV/K.
    fn gaas_slope(t_k: f64) -> f64 {
        let v = VARSHNI_GAAS;
        -v.alpha_ev_per_k * t_k * (t_k + 2.0 * v.beta_k) / ((t_k + v.beta_k) * (t_k + v.beta_k))
    }

    /// At T_ref the law is Schubert's relation (Light-Emitting Diodes, 2nd
    /// ed., Cambridge University Press 2006, ch. 6, `from memory`):
    /// dV/dT = (V_d - E_a/q)/T + (1/q) dEg/dT - 3k/q, whatever the current.
    #[test]
    fn slope_at_the_reference_temperature_is_schuberts_relation() {
        for p in [
            DiodeParams::demo_visible(),
            DiodeParams::demo_pump(),
            DiodeParams::textbook_in_plane(),
        ] {
            let d = Diode::new(p.clone()).unwrap();
            let t = p.t_ref_c + ZERO_CELSIUS_K;
            for i in [1e-6, 1e-3, 0.03, 1.0] {
                let vd = d.forward_voltage(i, t) - i * p.r_s_ohm;
                let want = (vd - p.i_s_activation_ev) / t + gaas_slope(t) - 3.0 * K_B / Q;
                let got = dvdt(&d, i, t);
                assert!((got - want).abs() < 1e-8, "{i} A: {got} V/K, want {want}");
            }
        }
    }

    /// A GaAs junction (barrier at the 25 degC gap, ideality 1) at a
    /// typical LED current falls at fixed current by about -1.5 mV/K,
    /// inside the -1 to -2 mV/K that real diodes show (silicon about
    /// -2 mV/K: Sedra and Smith, Microelectronic Circuits, diode
    /// temperature dependence, `from memory`). The law before (Arrhenius
    /// only) gave about -0.8 mV/K here.
    #[test]
    fn a_gaas_junction_falls_by_one_to_two_millivolts_per_kelvin() {
        let mut p = DiodeParams::demo_pump();
        let t = p.t_ref_c + ZERO_CELSIUS_K;
        p.ideality = 1.0;
        p.r_s_ohm = 0.0;
        p.i_s_activation_ev = VARSHNI_GAAS.eg_ev(t);
        p.i_s_a = 1e-21;
        let d = Diode::new(p).unwrap();
        let i = 0.020;
        let v = d.forward_voltage(i, t);
        assert!(v > 1.0 && v < 1.3, "{v} V");
        let s = dvdt(&d, i, t) * 1e3;
        assert!((-2.0..=-1.0).contains(&s), "{s} mV/K");
    }

    /// Every built-in demo module falls at fixed current, from a tenth of
    /// its threshold to its rated current, from 0 to 80 degC.
    #[test]
    fn every_built_in_module_falls_with_temperature() {
        for (name, m) in [
            ("visible", DemoModule::visible()),
            ("pump", DemoModule::pump()),
        ] {
            falls_everywhere(name, &m.diode, m.rated_current_a);
        }
        let p = DiodeParams::textbook_in_plane();
        let i_max = 10.0 * Diode::new(p.clone()).unwrap().derived().i_th_a;
        falls_everywhere("textbook", &p, i_max);
    }

    fn falls_everywhere(name: &str, p: &DiodeParams, i_max: f64) {
        let d = Diode::new(p.clone()).unwrap();
        let i_th = d.derived().i_th_a;
        for k in 0..=20 {
            let i = 0.1 * i_th * (i_max / (0.1 * i_th)).powf(k as f64 / 20.0);
            for c in [0.0, 25.0, 50.0, 80.0] {
                let s = dvdt(&d, i, c + ZERO_CELSIUS_K);
                assert!(s < -1e-4, "{name}: {s} V/K at {i} A, {c} degC");
            }
        }
    }
}
