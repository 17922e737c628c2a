//! Plant models: diode, monitor photodiode, driver, thermal path, sensors.
//!
//! Everything here is std Rust in f64 with SI units internally; parameter
//! structs read from TOML in the units stated in their field names.

pub mod constants;
pub mod demo;
pub mod diode;
pub mod driver;
pub mod error;
pub mod monitor;
pub mod near;
pub mod rng;
pub mod sensors;
pub mod thermal;

pub use constants::{
    c_to_k, ideal_responsivity_a_per_w, ideal_slope_w_per_a, k_to_c, photon_energy_j,
    thermal_voltage_v, C, H, K_B, Q, ZERO_CELSIUS_K,
};
pub use demo::{DemoModule, PartTolerances, DEFAULT_SUPPLY_DIVIDER};
pub use diode::{
    integrate_rodas4, varshni_ev, Diode, DiodeDerived, DiodeOutput, DiodeParams, DynamicStats,
    GainModel, GainSi, RateCoefficients, Tolerance, Varshni, AGING_ACTIVATION_EV,
    AGING_CURRENT_EXPONENT, VARSHNI_ALAS_GAMMA, VARSHNI_GAAS, VARSHNI_INAS, VARSHNI_INP,
};
pub use driver::{Driver, DriverParams};
pub use error::{from_toml, PlantError};
pub use monitor::{Monitor, MonitorParams, MONITOR_T_REF_K};
pub use near::{ExpNear, LnNear};
pub use rng::Rng;
pub use sensors::{
    Adc, AdcParams, FrontEndParams, Ntc, Rtd, RtdClass, SensorChain, SensorChainParams, TempSensor,
    Topology, NTC_T25_K, RTD_A, RTD_B, RTD_C,
};
pub use thermal::{Thermal, ThermalParams};
