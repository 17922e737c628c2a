//! Physical constants (CODATA 2018 exact SI values) and photon relations.
//!
//! Since the 2019 redefinition of the SI, h, c, e and k_B are exact by
//! definition (SI Brochure, 9th ed.; Tiesinga et al., Rev. Mod. Phys. 93,
//! 025010 (2021)).

/// Planck constant h, J s (exact).
pub const H: f64 = 6.626_070_15e-34;
/// Speed of light in vacuum c, m/s (exact).
pub const C: f64 = 299_792_458.0;
/// Elementary charge e, C (exact).
pub const Q: f64 = 1.602_176_634e-19;
/// Boltzmann constant k_B, J/K (exact).
pub const K_B: f64 = 1.380_649e-23;
/// 0 degrees Celsius in kelvin (exact by definition).
pub const ZERO_CELSIUS_K: f64 = 273.15;

/// Photon energy h c / lambda in joules for a vacuum wavelength in metres.
#[inline]
pub fn photon_energy_j(lambda_m: f64) -> f64 {
    H * C / lambda_m
}

/// Ideal slope efficiency h nu / q in W/A: optical power per ampere when
/// every injected electron yields one emitted photon.
#[inline]
pub fn ideal_slope_w_per_a(lambda_m: f64) -> f64 {
    H * C / (Q * lambda_m)
}

/// Ideal photodiode responsivity q lambda / (h c) in A/W (unit quantum
/// efficiency); no real photodiode exceeds it.
#[inline]
pub fn ideal_responsivity_a_per_w(lambda_m: f64) -> f64 {
    Q * lambda_m / (H * C)
}

/// Thermal voltage k_B T / q in volts.
#[inline]
pub fn thermal_voltage_v(t_k: f64) -> f64 {
    K_B * t_k / Q
}

/// Converts degrees Celsius to kelvin.
#[inline]
pub fn c_to_k(t_c: f64) -> f64 {
    t_c + ZERO_CELSIUS_K
}

/// Converts kelvin to degrees Celsius.
#[inline]
pub fn k_to_c(t_k: f64) -> f64 {
    t_k - ZERO_CELSIUS_K
}
