//! The diode's parameters as a user writes them (units in each name):
//! geometry, gain model, recombination, facets, temperature figures
//! (T0, T1, maximum operating temperature), forward voltage, facet damage
//! and aging rates, and their validation.

use serde::{Deserialize, Serialize};

use crate::plant::constants::ZERO_CELSIUS_K;
use crate::plant::error::{ensure, PlantError};

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
    /// Aging: relative threshold rise per 1000 operating hours at the
    /// aging reference conditions (`aging_ref_current_a`, `aging_ref_c`).
    pub threshold_rise_per_khour: f64,
    /// Aging: relative slope-efficiency loss per 1000 operating hours at
    /// the aging reference conditions.
    pub slope_loss_per_khour: f64,
    /// Activation energy Ea of the aging rate, eV: the rate scales with
    /// exp(-Ea / (k_B T_j)) (see `aging.rs`). Default
    /// [`AGING_ACTIVATION_EV`].
    #[serde(default = "default_aging_activation_ev")]
    pub aging_activation_ev: f64,
    /// Current exponent n of the aging rate: the rate scales with I^n.
    /// Default [`AGING_CURRENT_EXPONENT`].
    #[serde(default = "default_aging_current_exponent")]
    pub aging_current_exponent: f64,
    /// Drive current at which the per-1000-hour rates hold, A. `None`: the
    /// rates do not depend on the current (any current above zero ages at
    /// them, scaled by temperature only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub aging_ref_current_a: Option<f64>,
    /// Junction temperature at which the per-1000-hour rates hold, degC.
    /// `None`: `t_ref_c`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub aging_ref_c: Option<f64>,
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

/// Default activation energy of the aging rate, eV: 0.5 eV, the value
/// quoted for gradual degradation of GaAs-based (808 nm class) lasers;
/// published figures of laser diodes span about 0.3 to 0.9 eV (from
/// memory; M. Fukuda, *Reliability and Degradation of Semiconductor Lasers
/// and LEDs*, Artech House 1991). Give the part's own figure.
pub const AGING_ACTIVATION_EV: f64 = 0.5;
/// Default current exponent of the aging rate: 2, within the 1.5 to 3
/// usually found for laser diodes (from memory, same source).
pub const AGING_CURRENT_EXPONENT: f64 = 2.0;

fn default_aging_activation_ev() -> f64 {
    AGING_ACTIVATION_EV
}

fn default_aging_current_exponent() -> f64 {
    AGING_CURRENT_EXPONENT
}

/// Kelvin per e-fold of the threshold above the maximum operating
/// temperature (a lumped description of the carrier-leakage cut-off; the
/// 2 K is a modelling choice, not a measured figure: threshold x 150 at
/// 10 K above).
pub const CUTOFF_EFOLD_K: f64 = 2.0;

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
        ensure(
            nonneg(self.aging_activation_ev) && self.aging_activation_ev <= 2.0,
            "aging_activation_ev",
            "must be in 0 ..= 2 eV",
        )?;
        ensure(
            nonneg(self.aging_current_exponent) && self.aging_current_exponent <= 10.0,
            "aging_current_exponent",
            "must be in 0 ..= 10",
        )?;
        if let Some(i) = self.aging_ref_current_a {
            ensure(pos(i), "aging_ref_current_a", "must be > 0")?;
        }
        if let Some(c) = self.aging_ref_c {
            ensure(
                c.is_finite() && (-55.0..=150.0).contains(&c),
                "aging_ref_c",
                "must be in -55 ..= 150 degC",
            )?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn toml_round_trip_and_unknown_fields() {
        let p = DiodeParams::demo_pump();
        let text = toml::to_string(&p).unwrap();
        let back: DiodeParams = crate::plant::error::from_toml(&text).unwrap();
        assert_eq!(p, back);
        let bad = text.replace("eta_i =", "eta_x = 1.0\neta_i =");
        assert!(crate::plant::error::from_toml::<DiodeParams>(&bad).is_err());
    }
}
