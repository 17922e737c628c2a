//! Back-facet monitor photodiode.
//!
//! I_mon = kappa(T) * P_front * R_pd(lambda) * degrade + I_dark(T), with
//! kappa(T) = kappa_25 (1 + tc (T - 25 degC)) the tracking ratio (fraction of
//! the front-facet power that reaches the photodiode from the back facet),
//! R_pd(lambda) = eta_ext q lambda / (h c) at the constant external quantum
//! efficiency implied by the stated responsivity (so eta_ext <= 1 is
//! enforced), and I_dark(T) = I_dark,25 2^((T - 25 degC) / T_double).

use serde::{Deserialize, Serialize};

use super::constants::{ideal_responsivity_a_per_w, ZERO_CELSIUS_K};
use super::error::{ensure, PlantError};
use super::near::ExpNear;

/// Reference temperature of the monitor coefficients (25 degC), K.
pub const MONITOR_T_REF_K: f64 = 25.0 + ZERO_CELSIUS_K;

/// Monitor photodiode parameters.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MonitorParams {
    /// Tracking ratio kappa at 25 degC: photodiode optical input per watt of
    /// front-facet output (dimensionless).
    pub tracking_ratio: f64,
    /// Relative temperature coefficient of kappa ("tracking error"), 1/K.
    pub tracking_tc_per_k: f64,
    /// Photodiode responsivity, A/W, at `responsivity_wavelength_nm`.
    pub responsivity_a_per_w: f64,
    /// Wavelength the responsivity is stated at, nm.
    pub responsivity_wavelength_nm: f64,
    /// Dark current at 25 degC, A.
    pub dark_current_25c_a: f64,
    /// Temperature rise that doubles the dark current, K.
    pub dark_doubling_k: f64,
    /// Transimpedance (or load resistor) converting I_mon to the monitor
    /// ADC voltage, ohm.
    pub transimpedance_ohm: f64,
}

impl MonitorParams {
    /// Validates ranges; the responsivity must not exceed the ideal
    /// q lambda / (h c) at its wavelength.
    pub fn validate(&self) -> Result<(), PlantError> {
        ensure(
            self.tracking_ratio >= 0.0 && self.tracking_ratio.is_finite(),
            "tracking_ratio",
            "must be >= 0",
        )?;
        ensure(
            self.tracking_tc_per_k.is_finite(),
            "tracking_tc_per_k",
            "must be finite",
        )?;
        ensure(
            self.responsivity_wavelength_nm > 0.0 && self.responsivity_wavelength_nm.is_finite(),
            "responsivity_wavelength_nm",
            "must be > 0",
        )?;
        ensure(
            self.responsivity_a_per_w >= 0.0 && self.responsivity_a_per_w.is_finite(),
            "responsivity_a_per_w",
            "must be >= 0",
        )?;
        let ideal = ideal_responsivity_a_per_w(self.responsivity_wavelength_nm * 1e-9);
        if self.responsivity_a_per_w > ideal {
            return Err(PlantError::Responsivity {
                responsivity_a_per_w: self.responsivity_a_per_w,
                ideal_a_per_w: ideal,
                wavelength_nm: self.responsivity_wavelength_nm,
            });
        }
        ensure(
            self.dark_current_25c_a >= 0.0 && self.dark_current_25c_a.is_finite(),
            "dark_current_25c_a",
            "must be >= 0",
        )?;
        ensure(
            self.dark_doubling_k > 0.0 && self.dark_doubling_k.is_finite(),
            "dark_doubling_k",
            "must be > 0",
        )?;
        ensure(
            self.transimpedance_ohm > 0.0 && self.transimpedance_ohm.is_finite(),
            "transimpedance_ohm",
            "must be > 0",
        )
    }

    /// External quantum efficiency implied by the stated responsivity.
    pub fn quantum_efficiency(&self) -> f64 {
        self.responsivity_a_per_w
            / ideal_responsivity_a_per_w(self.responsivity_wavelength_nm * 1e-9)
    }
}

/// Monitor photodiode with fault hooks.
#[derive(Clone, Debug)]
pub struct Monitor {
    params: MonitorParams,
    /// eta_ext * q / (h c): responsivity per metre of wavelength, A/(W m).
    resp_per_m: f64,
    dark_k: f64,
    /// Fault hook: photodiode open (no current at all).
    pub open: bool,
    /// Fault hook: responsivity multiplier (1.0 healthy, < 1 degraded).
    pub degrade_factor: f64,
    /// Dark-current exponential continued between calls.
    dark_near: ExpNear,
}

impl Monitor {
    /// Builds the monitor after validating the parameters.
    pub fn new(params: MonitorParams) -> Result<Self, PlantError> {
        params.validate()?;
        let resp_per_m = params.responsivity_a_per_w / (params.responsivity_wavelength_nm * 1e-9);
        let dark_k = core::f64::consts::LN_2 / params.dark_doubling_k;
        Ok(Self {
            params,
            resp_per_m,
            dark_k,
            open: false,
            degrade_factor: 1.0,
            dark_near: ExpNear::new(),
        })
    }

    /// Parameters in use.
    pub fn params(&self) -> &MonitorParams {
        &self.params
    }

    /// Photocurrent plus dark current, A, for front power `p_front_w` at
    /// `wavelength_m` with the photodiode at `t_case_k`.
    #[inline]
    pub fn current_a(&self, p_front_w: f64, wavelength_m: f64, t_case_k: f64) -> f64 {
        if self.open {
            return 0.0;
        }
        let dt = t_case_k - MONITOR_T_REF_K;
        let kappa = self.params.tracking_ratio * (1.0 + self.params.tracking_tc_per_k * dt);
        let resp = self.resp_per_m * wavelength_m * self.degrade_factor;
        let dark = self.params.dark_current_25c_a * (self.dark_k * dt).exp();
        kappa * p_front_w.max(0.0) * resp + dark
    }

    /// [`Monitor::current_a`] with the dark-current exponential continued
    /// from the previous call (see [`super::near`]); equal to it within
    /// 3 ulp of the dark term.
    #[inline]
    pub fn current_a_near(&mut self, p_front_w: f64, wavelength_m: f64, t_case_k: f64) -> f64 {
        if self.open {
            return 0.0;
        }
        let dt = t_case_k - MONITOR_T_REF_K;
        let kappa = self.params.tracking_ratio * (1.0 + self.params.tracking_tc_per_k * dt);
        let resp = self.resp_per_m * wavelength_m * self.degrade_factor;
        let dark = self.params.dark_current_25c_a * self.dark_near.exp(self.dark_k * dt);
        kappa * p_front_w.max(0.0) * resp + dark
    }

    /// Monitor signal voltage for a photodiode current, V.
    #[inline]
    pub fn voltage_v(&self, i_mon_a: f64) -> f64 {
        i_mon_a * self.params.transimpedance_ohm
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn params() -> MonitorParams {
        MonitorParams {
            tracking_ratio: 0.02,
            tracking_tc_per_k: 1e-3,
            responsivity_a_per_w: 0.5,
            responsivity_wavelength_nm: 808.0,
            dark_current_25c_a: 1e-9,
            dark_doubling_k: 10.0,
            transimpedance_ohm: 1e4,
        }
    }

    #[test]
    fn current_and_faults() {
        let mut m = Monitor::new(params()).unwrap();
        let i = m.current_a(0.1, 808e-9, MONITOR_T_REF_K);
        assert!((i - (0.02 * 0.1 * 0.5 + 1e-9)).abs() < 1e-15);
        // Dark current doubles per 10 K; tracking ratio +1 %.
        let i_hot = m.current_a(0.0, 808e-9, MONITOR_T_REF_K + 10.0);
        assert!((i_hot - 2e-9).abs() < 1e-18);
        let i_ph = m.current_a(0.1, 808e-9, MONITOR_T_REF_K + 10.0) - i_hot;
        assert!((i_ph / 1e-3 - 1.01).abs() < 1e-12);
        m.degrade_factor = 0.5;
        let i_deg = m.current_a(0.1, 808e-9, MONITOR_T_REF_K);
        assert!((i_deg - (0.5e-3 + 1e-9)).abs() < 1e-15);
        // The continued form gives the same current, dark current alone
        // (no light) and with light, over a slow drift with jumps.
        for p in [0.0, 0.07] {
            for k in 0..2000 {
                let t = MONITOR_T_REF_K + 1e-3 * f64::from(k) + f64::from(k / 500);
                let (a, b) = (m.current_a(p, 808e-9, t), m.current_a_near(p, 808e-9, t));
                assert!((a - b).abs() <= 4.0 * f64::EPSILON * a, "{a} vs {b} at {t}");
            }
        }
        m.open = true;
        assert_eq!(m.current_a(0.1, 808e-9, MONITOR_T_REF_K), 0.0);
    }

    #[test]
    fn responsivity_above_ideal_is_rejected() {
        let mut p = params();
        p.responsivity_a_per_w = 0.66; // ideal at 808 nm is 0.6517 A/W
        assert!(matches!(
            Monitor::new(p),
            Err(PlantError::Responsivity { .. })
        ));
    }
}
