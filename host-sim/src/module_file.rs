//! Module files: the hardware around the core (diode, monitor photodiode,
//! current source, temperature sensor and its front end, supply, thermal
//! path, converters) in a TOML schema of this project, read, checked and
//! turned into the simulator's [`DemoModule`] parameter set. The schema and
//! the derivation are documented in `docs/module-files.md`.
//!
//! # Deriving the rate-equation parameters from datasheet figures
//!
//! The `[diode]` table holds datasheet-level figures at the reference
//! temperature: threshold current `I_th`, front-facet slope efficiency
//! `S_f`, turn-on voltage `V_on` (the junction voltage at `I_th`), series
//! resistance, facet reflectivities, T0 and T1 and the rest. The optional
//! `[diode.structure]` table holds the rate-equation structure (geometry,
//! gain law, losses, recombination coefficients); without it a reference
//! in-plane structure is used ([`DiodeParams::textbook_in_plane`]) with the
//! file's reflectivities and wavelength.
//!
//! With the structure fixed, the threshold carrier density `N_th` and the
//! optical efficiency `eta_opt = alpha_m / (alpha_i + alpha_m)` and front
//! fraction `F = alpha_m1 / alpha_m` follow from it alone. Then
//!
//! ```text
//! eta_i = S_f / (eta_opt F h nu / q)                     (slope)
//! k     = I_th / (q V R(N_th) / eta_i)                   (threshold)
//! A, B, C <- k A, k B, k C
//! I_s   = I_th / (exp(V_on / (n k_B T_ref / q)) - 1)     (turn-on voltage)
//! ```
//!
//! so the derived parameters give back `I_th`, `S_f` and `V_on` exactly
//! (tested below). When the structure pins `eta_i` (and with it A, B and C
//! as written) or `saturation_current_a`, those are used as written and the
//! figures are checked against what they give instead (1 % for threshold
//! and slope, 10 mV for the turn-on voltage); the shipped demo module files
//! do this, so they reproduce the built-in demo modules exactly.

use crate::plant::DEFAULT_SUPPLY_DIVIDER;
use std::fmt;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::files::{self, FileError};
use crate::locate::{locate, plain_message, Place, Seg};
use crate::plant::{
    c_to_k, photon_energy_j, thermal_voltage_v, Adc, AdcParams, DemoModule, DiodeParams,
    DriverParams, GainModel, MonitorParams, PartTolerances, PlantError, SensorChain,
    SensorChainParams, TempSensor, ThermalParams, AGING_ACTIVATION_EV, AGING_CURRENT_EXPONENT, Q,
};

/// Relative tolerance of a pinned structure's threshold and slope against
/// the figures the file states.
pub const FIGURE_REL_TOL: f64 = 0.01;
/// Tolerance of a pinned saturation current's turn-on voltage against the
/// figure the file states, V.
pub const TURN_ON_TOL_V: f64 = 0.010;

/// A whole module file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ModuleFile {
    /// Module name (reports).
    pub name: String,
    /// Rated front-facet output power, mW.
    pub rated_power_mw: f64,
    /// Rated maximum forward current, mA.
    pub rated_current_ma: f64,
    /// Supply of the current source.
    pub supply: SupplySection,
    /// The laser diode.
    pub diode: DiodeSection,
    /// Back-facet monitor photodiode and its transimpedance front end.
    pub monitor: MonitorParams,
    /// Current source and its DAC.
    pub source: DriverParams,
    /// Thermal ladder junction - case - heatsink - ambient.
    pub thermal: ThermalParams,
    /// Case temperature sensor and its front end.
    pub sensor: SensorChainParams,
    /// ADC of the monitor, current-sense and supply channels.
    pub adc: AdcParams,
    /// Part-to-part tolerances a Monte Carlo campaign draws from.
    pub tolerances: PartTolerances,
}

/// `[supply]`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SupplySection {
    /// Nominal supply voltage of the current source, V.
    pub voltage_v: f64,
    /// Ratio of the divider in front of the supply ADC channel (supply
    /// volts per ADC volt); default 8 (boards up to about 24 V on a 3.3 V
    /// ADC).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub divider: Option<f64>,
}

/// `[diode]`: datasheet-level figures at the reference temperature.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DiodeSection {
    /// Emission wavelength at the reference temperature, nm.
    pub wavelength_nm: f64,
    /// Wavelength temperature coefficient, nm/K.
    pub wavelength_drift_nm_per_k: f64,
    /// Reference temperature of the figures, degC.
    pub reference_c: f64,
    /// Threshold current at the reference temperature, mA.
    pub threshold_ma: f64,
    /// Front-facet slope efficiency at the reference temperature, W/A.
    pub slope_w_per_a: f64,
    /// Characteristic temperature of the threshold, K.
    pub t0_k: f64,
    /// Characteristic temperature of the slope efficiency, K.
    pub t1_k: f64,
    /// Series resistance, ohm.
    pub series_resistance_ohm: f64,
    /// Junction (diode-term) voltage at the threshold current, V.
    pub turn_on_v: f64,
    /// Diode ideality factor of the junction.
    #[serde(default = "default_ideality")]
    pub ideality: f64,
    /// Activation energy of the saturation current, eV (default: the
    /// photon energy at the wavelength).
    #[serde(default)]
    pub turn_on_activation_ev: Option<f64>,
    /// Power reflectivity of the front (output) facet.
    pub front_reflectivity: f64,
    /// Power reflectivity of the back facet.
    pub back_reflectivity: f64,
    /// Front-facet power at which the facet is destroyed, mW.
    pub facet_damage_mw: f64,
    /// Time constant over which the facet-damage power is averaged, ns.
    #[serde(default = "default_damage_filter_ns")]
    pub damage_filter_ns: f64,
    /// Aging: relative threshold rise per 1000 operating hours.
    #[serde(default)]
    pub threshold_rise_per_khour: f64,
    /// Aging: relative slope loss per 1000 operating hours.
    #[serde(default)]
    pub slope_loss_per_khour: f64,
    /// Activation energy of the aging rate, eV (default 0.5).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub aging_activation_ev: Option<f64>,
    /// Current exponent of the aging rate (default 2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub aging_current_exponent: Option<f64>,
    /// Drive current at which the aging rates hold, mA (default: the
    /// module's `rated_current_ma`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub aging_reference_ma: Option<f64>,
    /// Junction temperature at which the aging rates hold, degC (default:
    /// `reference_c`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub aging_reference_c: Option<f64>,
    /// Highest junction temperature at which the diode lases, degC (above
    /// it the threshold rises steeply); none when absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_operating_c: Option<f64>,
    /// Relative fall of the facet-damage power per kelvin of junction
    /// temperature above `reference_c`, 1/K (default 0).
    #[serde(default)]
    pub facet_damage_tc_per_k: f64,
    /// Rate-equation structure; the reference in-plane structure when absent.
    #[serde(default)]
    pub structure: Option<StructureSection>,
}

fn default_ideality() -> f64 {
    2.0
}

fn default_damage_filter_ns() -> f64 {
    100.0
}

/// `[diode.structure]`: the rate-equation structure.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StructureSection {
    /// Active-region width, um.
    pub width_um: f64,
    /// Cavity length, um.
    pub length_um: f64,
    /// Active-layer thickness, nm.
    pub thickness_nm: f64,
    /// Optical confinement factor.
    pub confinement: f64,
    /// Group index.
    pub group_index: f64,
    /// Internal loss, 1/cm.
    pub alpha_i_per_cm: f64,
    /// Gain law.
    pub gain: GainModel,
    /// Gain compression, cm^3.
    pub eps_cm3: f64,
    /// Spontaneous-emission coupling.
    pub beta_sp: f64,
    /// Defect recombination A, 1/s (scaled to the threshold unless `eta_i` is pinned).
    pub a_per_s: f64,
    /// Radiative recombination B, cm^3/s (likewise).
    pub b_cm3_per_s: f64,
    /// Auger recombination C, cm^6/s (likewise).
    pub c_cm6_per_s: f64,
    /// Injection efficiency: when given, it and A, B, C are used as
    /// written and the threshold and slope figures are checked against them.
    #[serde(default)]
    pub eta_i: Option<f64>,
    /// Junction saturation current at the reference temperature, A: when
    /// given, used as written and `turn_on_v` is checked against it.
    #[serde(default)]
    pub saturation_current_a: Option<f64>,
}

impl StructureSection {
    /// The reference structure for a diode given by figures only: the
    /// reference in-plane structure widened in proportion to the threshold
    /// current (so the threshold current density, and with it the photon
    /// density at a given multiple of threshold and the gain compression
    /// there, stay those of the reference device), with the file's
    /// reflectivities.
    pub fn reference_for(d: &DiodeSection) -> Result<Self, KeyError> {
        let mut s = Self::reference();
        let mut p = DiodeParams::textbook_in_plane();
        p.r_front = d.front_reflectivity;
        p.r_back = d.back_reflectivity;
        p.wavelength_nm = d.wavelength_nm;
        p.validate().map_err(|e| diode_key(&e, false))?;
        s.width_um *= d.threshold_ma * 1e-3 / p.derived().i_th_a;
        Ok(s)
    }

    /// The reference in-plane structure (the textbook set of
    /// [`DiodeParams::textbook_in_plane`]) used when a file gives none.
    pub fn reference() -> Self {
        let t = DiodeParams::textbook_in_plane();
        Self {
            width_um: t.width_um,
            length_um: t.length_um,
            thickness_nm: t.thickness_nm,
            confinement: t.confinement,
            group_index: t.group_index,
            alpha_i_per_cm: t.alpha_i_per_cm,
            gain: t.gain,
            eps_cm3: t.eps_cm3,
            beta_sp: t.beta_sp,
            a_per_s: t.a_per_s,
            b_cm3_per_s: t.b_cm3_per_s,
            c_cm6_per_s: t.c_cm6_per_s,
            eta_i: None,
            saturation_current_a: None,
        }
    }
}

/// A module file's value refused: the key as `table.key` and why.
type KeyError = (String, String);

fn refuse(key: &str, why: impl Into<String>) -> KeyError {
    (key.to_string(), why.into())
}

fn pos(v: f64) -> bool {
    v.is_finite() && v > 0.0
}

impl DiodeSection {
    /// The rate-equation parameter set these figures describe (derivation
    /// in the module documentation).
    pub fn params(&self) -> Result<DiodeParams, KeyError> {
        let k = |name: &str| format!("diode.{name}");
        for (name, v) in [
            ("wavelength_nm", self.wavelength_nm),
            ("threshold_ma", self.threshold_ma),
            ("slope_w_per_a", self.slope_w_per_a),
            ("t0_k", self.t0_k),
            ("t1_k", self.t1_k),
            ("turn_on_v", self.turn_on_v),
            ("ideality", self.ideality),
            ("facet_damage_mw", self.facet_damage_mw),
        ] {
            if !pos(v) {
                return Err(refuse(&k(name), "must be a finite number above 0"));
            }
        }
        if !(self.series_resistance_ohm.is_finite() && self.series_resistance_ohm >= 0.0) {
            return Err(refuse(&k("series_resistance_ohm"), "must be >= 0 ohm"));
        }
        if !(self.reference_c.is_finite() && (-55.0..=150.0).contains(&self.reference_c)) {
            return Err(refuse(&k("reference_c"), "must be in -55 ..= 150 degC"));
        }
        if !(pos(self.front_reflectivity) && self.front_reflectivity < 1.0) {
            return Err(refuse(&k("front_reflectivity"), "must be in (0, 1)"));
        }
        if !(pos(self.back_reflectivity) && self.back_reflectivity <= 1.0) {
            return Err(refuse(&k("back_reflectivity"), "must be in (0, 1]"));
        }
        let i_th = self.threshold_ma * 1e-3;
        let s = match &self.structure {
            Some(s) => s.clone(),
            None => StructureSection::reference_for(self)?,
        };
        let t_ref_k = c_to_k(self.reference_c);
        let n_vt = self.ideality * thermal_voltage_v(t_ref_k);
        let photon_ev = photon_energy_j(self.wavelength_nm * 1e-9) / Q;
        let mut p = DiodeParams {
            width_um: s.width_um,
            length_um: s.length_um,
            thickness_nm: s.thickness_nm,
            confinement: s.confinement,
            group_index: s.group_index,
            alpha_i_per_cm: s.alpha_i_per_cm,
            r_front: self.front_reflectivity,
            r_back: self.back_reflectivity,
            eta_i: s.eta_i.unwrap_or(1.0),
            a_per_s: s.a_per_s,
            b_cm3_per_s: s.b_cm3_per_s,
            c_cm6_per_s: s.c_cm6_per_s,
            gain: s.gain.clone(),
            eps_cm3: s.eps_cm3,
            beta_sp: s.beta_sp,
            wavelength_nm: self.wavelength_nm,
            wavelength_drift_nm_per_k: self.wavelength_drift_nm_per_k,
            t_ref_c: self.reference_c,
            t0_k: self.t0_k,
            t1_k: self.t1_k,
            ideality: self.ideality,
            i_s_a: s
                .saturation_current_a
                .unwrap_or_else(|| i_th / (self.turn_on_v / n_vt).exp_m1()),
            i_s_activation_ev: self.turn_on_activation_ev.unwrap_or(photon_ev),
            r_s_ohm: self.series_resistance_ohm,
            damage_power_w: self.facet_damage_mw * 1e-3,
            damage_filter_ns: self.damage_filter_ns,
            threshold_rise_per_khour: self.threshold_rise_per_khour,
            slope_loss_per_khour: self.slope_loss_per_khour,
            aging_activation_ev: self.aging_activation_ev.unwrap_or(AGING_ACTIVATION_EV),
            aging_current_exponent: self
                .aging_current_exponent
                .unwrap_or(AGING_CURRENT_EXPONENT),
            aging_ref_current_a: self.aging_reference_ma.map(|i| i * 1e-3),
            aging_ref_c: self.aging_reference_c,
            max_operating_c: self.max_operating_c,
            damage_tc_per_k: self.facet_damage_tc_per_k,
        };
        p.validate()
            .map_err(|e| diode_key(&e, self.structure.is_some()))?;
        let d = p.derived();
        match s.eta_i {
            None => {
                // Slope: eta_i scales the slope linearly.
                let eta_i = self.slope_w_per_a / (d.slope_w_per_a / d.eta_i);
                if !eta_i.is_finite() || eta_i > 1.0 {
                    return Err(refuse(
                        &k("slope_w_per_a"),
                        format!(
                            "above what this structure can give: at most {:.4} W/A with these \
                             reflectivities, internal loss and wavelength (injection efficiency 1)",
                            d.slope_w_per_a / d.eta_i
                        ),
                    ));
                }
                // Threshold: I_th = q V R(N_th) / eta_i; R scales with A, B, C.
                let i_th_new_eta = d.i_th_a * d.eta_i / eta_i;
                let scale = i_th / i_th_new_eta;
                p.eta_i = eta_i;
                p.a_per_s *= scale;
                p.b_cm3_per_s *= scale;
                p.c_cm6_per_s *= scale;
            }
            Some(_) => {
                for (name, given, got) in [
                    ("threshold_ma", self.threshold_ma, d.i_th_a * 1e3),
                    ("slope_w_per_a", self.slope_w_per_a, d.slope_w_per_a),
                ] {
                    if ((got - given) / given).abs() > FIGURE_REL_TOL {
                        return Err(refuse(
                            &k(name),
                            format!(
                                "the pinned structure ([diode.structure] eta_i and A, B, C) \
                                 gives {got:.6}, more than {} % away",
                                FIGURE_REL_TOL * 100.0
                            ),
                        ));
                    }
                }
            }
        }
        if s.saturation_current_a.is_some() {
            let v_on = n_vt * (i_th / p.i_s_a).ln_1p();
            if (v_on - self.turn_on_v).abs() > TURN_ON_TOL_V {
                return Err(refuse(
                    &k("turn_on_v"),
                    format!(
                        "the pinned saturation current gives {v_on:.4} V at the threshold, \
                         more than {} mV away",
                        TURN_ON_TOL_V * 1e3
                    ),
                ));
            }
        }
        p.validate()
            .map_err(|e| diode_key(&e, self.structure.is_some()))?;
        Ok(p)
    }
}

/// The module-file key a diode parameter refusal is about.
fn diode_key(e: &PlantError, has_structure: bool) -> KeyError {
    let PlantError::Invalid { field, reason } = e else {
        return refuse("diode", e.to_string());
    };
    let key = match *field {
        "r_front" => "diode.front_reflectivity".to_string(),
        "r_back" => "diode.back_reflectivity".to_string(),
        "i_s_activation_ev" => "diode.turn_on_activation_ev".to_string(),
        "damage_tc_per_k" => "diode.facet_damage_tc_per_k".to_string(),
        "damage_power_w" => "diode.facet_damage_mw".to_string(),
        "aging_ref_current_a" => "diode.aging_reference_ma".to_string(),
        "aging_ref_c" => "diode.aging_reference_c".to_string(),
        "damage_filter_ns"
        | "aging_activation_ev"
        | "aging_current_exponent"
        | "threshold_rise_per_khour"
        | "slope_loss_per_khour"
        | "wavelength_drift_nm_per_k" => format!("diode.{field}"),
        "i_s_a" => "diode.structure.saturation_current_a".to_string(),
        "g0_per_cm" | "n_tr_per_cm3" | "n_s_per_cm3" | "a_cm2" if has_structure => {
            format!("diode.structure.gain.{field}")
        }
        f if has_structure => format!("diode.structure.{f}"),
        f => format!("diode.{f}"),
    };
    (key, (*reason).to_string())
}

/// Section-prefixed key of a refusal by one of the embedded parameter tables.
fn section_key(section: &str, e: &PlantError) -> KeyError {
    match e {
        PlantError::Invalid { field, reason } => {
            (format!("{section}.{field}"), (*reason).to_string())
        }
        other => (section.to_string(), other.to_string()),
    }
}

/// The key of a sensor-channel refusal: the sensor's own coefficients sit
/// under `sensor.sensor.ntc` or `sensor.sensor.rtd`, the rest under
/// `sensor.front_end`.
fn sensor_key(p: &SensorChainParams, e: &PlantError) -> KeyError {
    let PlantError::Invalid { field, reason } = e else {
        return refuse("sensor", e.to_string());
    };
    let table = match (&p.sensor, *field) {
        (
            TempSensor::Ntc(_),
            "r25_ohm" | "beta_k" | "a" | "b" | "c" | "r25_deviation" | "beta_deviation",
        ) => "sensor.sensor.ntc",
        (TempSensor::Rtd(_), "r0_ohm" | "band_position") => "sensor.sensor.rtd",
        _ => "sensor.front_end",
    };
    (format!("{table}.{field}"), (*reason).to_string())
}

impl ModuleFile {
    /// The simulator's parameter set, every table checked.
    pub fn to_module(&self) -> Result<DemoModule, KeyError> {
        if !pos(self.rated_power_mw) {
            return Err(refuse("rated_power_mw", "must be a finite number above 0"));
        }
        if !pos(self.rated_current_ma) {
            return Err(refuse(
                "rated_current_ma",
                "must be a finite number above 0",
            ));
        }
        for (key, v) in [
            ("tolerances.threshold", self.tolerances.threshold),
            ("tolerances.slope", self.tolerances.slope),
            ("tolerances.tracking", self.tolerances.tracking),
            ("tolerances.t0", self.tolerances.t0),
            ("tolerances.sense_gain", self.tolerances.sense_gain),
            ("tolerances.dac_gain", self.tolerances.dac_gain),
            ("tolerances.ntc_r25", self.tolerances.ntc_r25),
            ("tolerances.ntc_beta", self.tolerances.ntc_beta),
        ] {
            if !(v.is_finite() && (0.0..1.0).contains(&v)) {
                return Err(refuse(key, "must be a relative half-width in 0 ..< 1"));
            }
        }
        if let TempSensor::Rtd(_) = self.sensor.sensor {
            for (key, v) in [
                ("tolerances.ntc_r25", self.tolerances.ntc_r25),
                ("tolerances.ntc_beta", self.tolerances.ntc_beta),
            ] {
                if v != 0.0 {
                    return Err(refuse(
                        key,
                        "applies to an NTC sensor; this module's sensor is a platinum RTD, \
                         whose tolerance is its IEC 60751 class (sensor.sensor.rtd class)",
                    ));
                }
            }
        }
        for (key, v) in [
            (
                "tolerances.sense_offset_mv",
                self.tolerances.sense_offset_mv,
            ),
            ("tolerances.dac_offset_mv", self.tolerances.dac_offset_mv),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(refuse(key, "must be a half-width in mV, finite and >= 0"));
            }
        }
        if !pos(self.supply.voltage_v) {
            return Err(refuse(
                "supply.voltage_v",
                "must be a finite number above 0",
            ));
        }
        let supply_divider = self.supply.divider.unwrap_or(DEFAULT_SUPPLY_DIVIDER);
        if !(supply_divider.is_finite() && supply_divider >= 1.0) {
            return Err(refuse(
                "supply.divider",
                "must be a finite ratio of 1 or more",
            ));
        }
        let mut diode = self.diode.params()?;
        // The aging rates hold at the rated current unless told otherwise.
        diode.aging_ref_current_a = diode
            .aging_ref_current_a
            .or(Some(self.rated_current_ma * 1e-3));
        if self.rated_power_mw >= self.diode.facet_damage_mw {
            return Err(refuse(
                "rated_power_mw",
                format!(
                    "must be below the facet-damage power diode.facet_damage_mw = {} mW",
                    self.diode.facet_damage_mw
                ),
            ));
        }
        let module = DemoModule {
            rated_power_w: self.rated_power_mw * 1e-3,
            rated_current_a: self.rated_current_ma * 1e-3,
            tolerances: self.tolerances,
            supply_v: self.supply.voltage_v,
            supply_divider,
            diode,
            monitor: self.monitor.clone(),
            driver: self.source.clone(),
            thermal: self.thermal.clone(),
            sensor: self.sensor.clone(),
            adc: self.adc.clone(),
        };
        module
            .monitor
            .validate()
            .map_err(|e| section_key("monitor", &e))?;
        module
            .driver
            .validate()
            .map_err(|e| section_key("source", &e))?;
        module
            .thermal
            .validate()
            .map_err(|e| section_key("thermal", &e))?;
        SensorChain::new(module.sensor.clone()).map_err(|e| sensor_key(&module.sensor, &e))?;
        Adc::new(module.adc.clone()).map_err(|e| section_key("adc", &e))?;
        Ok(module)
    }
}

/// Why a module file could not be used.
#[derive(Debug)]
pub enum ModuleFileError {
    /// The file could not be read.
    Read(FileError),
    /// Not valid TOML or not this schema (line, column, what was expected).
    Parse {
        /// The file.
        path: PathBuf,
        /// The TOML reader's message.
        message: String,
    },
    /// A value is out of its range or the values do not go together.
    Invalid {
        /// The file.
        path: PathBuf,
        /// The key at fault, as `table.key`.
        key: String,
        /// Where the key stands, when it is written in the file.
        place: Option<Box<Place>>,
        /// What is wrong.
        why: String,
    },
}

impl fmt::Display for ModuleFileError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ModuleFileError::Read(e) => write!(f, "{e}"),
            ModuleFileError::Parse { path, message } => {
                write!(f, "{}: {}", path.display(), message.trim_end())
            }
            ModuleFileError::Invalid {
                path,
                key,
                place,
                why,
            } => match place {
                Some(p) => write!(
                    f,
                    "{}: line {}, column {}: {key} = {}: {why}",
                    path.display(),
                    p.line,
                    p.column,
                    p.text
                ),
                None => write!(f, "{}: {key}: {why}", path.display()),
            },
        }
    }
}

impl std::error::Error for ModuleFileError {}

/// A module file read and checked.
#[derive(Clone, Debug)]
pub struct LoadedModule {
    /// The module's name from the file.
    pub name: String,
    /// The simulator's parameter set.
    pub module: DemoModule,
    /// The file it was read from (`None` for a built-in demo module).
    pub path: Option<PathBuf>,
}

/// Parse and check module-file text; `path` names the file in messages.
pub fn parse_module(text: &str, path: &Path) -> Result<LoadedModule, ModuleFileError> {
    let file: ModuleFile = toml::from_str(text).map_err(|e| ModuleFileError::Parse {
        path: path.to_path_buf(),
        message: plain_message(&e.to_string()),
    })?;
    let module = file.to_module().map_err(|(key, why)| {
        let segs: Vec<Seg<'_>> = key.split('.').map(Seg::Key).collect();
        ModuleFileError::Invalid {
            path: path.to_path_buf(),
            place: locate(text, &segs).map(Box::new),
            key,
            why,
        }
    })?;
    Ok(LoadedModule {
        name: file.name,
        module,
        path: Some(path.to_path_buf()),
    })
}

/// Read and check the module file at `path`, named by `origin` (a key such
/// as a board file's `module`, or an argument) in read errors.
pub fn load_module(path: &Path, origin: &str) -> Result<LoadedModule, ModuleFileError> {
    let text = files::read_text(path, origin).map_err(ModuleFileError::Read)?;
    parse_module(&text, path)
}

/// A module named by a board file's `module` key or the `liv` argument: a
/// module file path (relative to `base_dir`), or one of the built-in demo
/// modules `visible` and `pump` (the names board files used before module
/// files existed).
pub fn resolve(value: &str, base_dir: &Path, origin: &str) -> Result<LoadedModule, String> {
    match value {
        "visible" => Ok(LoadedModule {
            name: "visible".into(),
            module: DemoModule::visible(),
            path: None,
        }),
        "pump" => Ok(LoadedModule {
            name: "pump".into(),
            module: DemoModule::pump(),
            path: None,
        }),
        file => load_module(&base_dir.join(file), origin).map_err(|e| match e {
            ModuleFileError::Read(_) => format!(
                "{e} (expected a module file, relative to the board file, or a built-in demo \
                 module: visible or pump)"
            ),
            e => e.to_string(),
        }),
    }
}

/// A module file as TOML text (what `fit` writes).
pub fn to_toml(file: &ModuleFile) -> String {
    toml::to_string(file).expect("module file serialises")
}

/// The front-facet figures a parameter set gives at its reference
/// temperature: threshold (mA), slope (W/A) and the turn-on voltage (V).
pub fn figures(p: &DiodeParams) -> (f64, f64, f64) {
    let d = p.derived();
    let n_vt = p.ideality * thermal_voltage_v(c_to_k(p.t_ref_c));
    (
        d.i_th_a * 1e3,
        d.slope_w_per_a,
        n_vt * (d.i_th_a / p.i_s_a).ln_1p(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plant::{c_to_k, Diode};

    fn figures_only() -> DiodeSection {
        DiodeSection {
            wavelength_nm: 808.0,
            wavelength_drift_nm_per_k: 0.28,
            reference_c: 25.0,
            threshold_ma: 180.0,
            slope_w_per_a: 1.1,
            t0_k: 120.0,
            t1_k: 500.0,
            series_resistance_ohm: 0.15,
            turn_on_v: 1.45,
            ideality: 2.0,
            turn_on_activation_ev: None,
            front_reflectivity: 0.05,
            back_reflectivity: 0.95,
            facet_damage_mw: 4000.0,
            damage_filter_ns: 100.0,
            threshold_rise_per_khour: 0.0,
            slope_loss_per_khour: 0.0,
            aging_activation_ev: None,
            aging_current_exponent: None,
            aging_reference_ma: None,
            aging_reference_c: None,
            max_operating_c: None,
            facet_damage_tc_per_k: 0.0,
            structure: None,
        }
    }

    #[test]
    fn derived_parameters_give_back_the_figures() {
        for (th, sl, von) in [(180.0, 1.1, 1.45), (23.0, 0.9, 1.9), (2500.0, 0.3, 1.2)] {
            let mut d = figures_only();
            d.threshold_ma = th;
            d.slope_w_per_a = sl;
            d.turn_on_v = von;
            let p = d.params().unwrap();
            let (th2, sl2, von2) = figures(&p);
            assert!((th2 / th - 1.0).abs() < 1e-9, "{th} {th2}");
            assert!((sl2 / sl - 1.0).abs() < 1e-9, "{sl} {sl2}");
            assert!((von2 - von).abs() < 1e-9, "{von} {von2}");
            // The steady-state solver agrees: the light-current curve read
            // the bench way (linear fit above threshold) gives them too.
            let diode = Diode::new(p).unwrap();
            let t = c_to_k(25.0);
            let i1 = 2.0 * th * 1e-3;
            let i2 = 3.0 * th * 1e-3;
            let p1 = diode.quasi_static(i1, t).p_front_w;
            let p2 = diode.quasi_static(i2, t).p_front_w;
            let slope = (p2 - p1) / (i2 - i1);
            let ith = i1 - p1 / slope;
            assert!((slope / sl - 1.0).abs() < 0.02, "{slope} {sl}");
            assert!((ith * 1e3 / th - 1.0).abs() < 0.03, "{ith} {th}");
        }
    }

    #[test]
    fn a_slope_beyond_the_structure_is_refused_by_key() {
        let mut d = figures_only();
        d.slope_w_per_a = 5.0;
        let (key, why) = d.params().unwrap_err();
        assert_eq!(key, "diode.slope_w_per_a");
        assert!(why.contains("at most"), "{why}");
    }

    #[test]
    fn a_pinned_structure_that_disagrees_with_the_figures_is_refused() {
        let v = DiodeParams::demo_visible();
        let mut d = figures_only();
        d.wavelength_nm = v.wavelength_nm;
        d.front_reflectivity = v.r_front;
        d.back_reflectivity = v.r_back;
        d.structure = Some(StructureSection {
            eta_i: Some(v.eta_i),
            saturation_current_a: Some(v.i_s_a),
            ..StructureSection::reference()
        });
        let (key, _) = d.params().unwrap_err();
        assert_eq!(key, "diode.threshold_ma");
    }

    #[test]
    fn refusals_name_the_line_and_the_value() {
        let text = std::fs::read_to_string(
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/modules/demo-red-650.toml"),
        )
        .unwrap();
        let bad = text.replace("t0_k = 80.0", "t0_k = -3.0");
        let e = parse_module(&bad, Path::new("m.toml"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("diode.t0_k = -3.0"), "{e}");
        assert!(e.contains("line "), "{e}");
        let bad = text.replace("transimpedance_ohm = 7500.0", "transimpedance_ohm = 0.0");
        let e = parse_module(&bad, Path::new("m.toml"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("monitor.transimpedance_ohm = 0.0"), "{e}");
        // The converter chain's and T0's tolerances, by key.
        for (from, to, key) in [
            (
                "tracking = 0.10",
                "tracking = 0.10\nt0 = 1.5",
                "tolerances.t0",
            ),
            (
                "tracking = 0.10",
                "tracking = 0.10\ndac_offset_mv = -1.0",
                "tolerances.dac_offset_mv",
            ),
        ] {
            assert!(text.contains(from));
            let e = parse_module(&text.replace(from, to), Path::new("m.toml"))
                .unwrap_err()
                .to_string();
            assert!(e.contains(key), "{e}");
        }
        // The NTC's R25 and B tolerances: read on an NTC module, refused
        // out of range, and refused on a module with a platinum RTD.
        let m = parse_module(
            &text.replace(
                "tracking = 0.10",
                "tracking = 0.10\nntc_r25 = 0.01\nntc_beta = 0.005",
            ),
            Path::new("m.toml"),
        )
        .unwrap();
        assert_eq!(
            (m.module.tolerances.ntc_r25, m.module.tolerances.ntc_beta),
            (0.01, 0.005)
        );
        let e = parse_module(
            &text.replace("tracking = 0.10", "tracking = 0.10\nntc_beta = 1.2"),
            Path::new("m.toml"),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("tolerances.ntc_beta = 1.2"), "{e}");
        let pump = std::fs::read_to_string(
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/modules/demo-pump-976.toml"),
        )
        .unwrap();
        let e = parse_module(
            &pump.replace("tracking = 0.10", "tracking = 0.10\nntc_r25 = 0.01"),
            Path::new("m.toml"),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("tolerances.ntc_r25 = 0.01"), "{e}");
        assert!(e.contains("platinum RTD"), "{e}");
        // The aging law's keys, each refused by its own name.
        for (key, value, want) in [
            ("aging_activation_ev", "5.0", "0 ..= 2 eV"),
            ("aging_current_exponent", "-1.0", "0 ..= 10"),
            ("aging_reference_ma", "0.0", "> 0"),
            ("aging_reference_c", "400.0", "-55 ..= 150 degC"),
        ] {
            let bad = text.replace(
                "slope_loss_per_khour = 0.01",
                &format!("slope_loss_per_khour = 0.01\n{key} = {value}"),
            );
            let e = parse_module(&bad, Path::new("m.toml"))
                .unwrap_err()
                .to_string();
            assert!(e.contains(&format!("diode.{key} = {value}")), "{e}");
            assert!(e.contains(want), "{e}");
        }
    }
}

#[cfg(test)]
mod shipped {
    use super::*;

    #[test]
    fn shipped_demo_module_files_are_the_built_in_demo_modules() {
        let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/modules");
        for (file, module) in [
            ("demo-red-650.toml", DemoModule::visible()),
            ("demo-pump-976.toml", DemoModule::pump()),
        ] {
            let m = load_module(&dir.join(file), "MODULE").unwrap();
            assert_eq!(m.module, module, "{file}");
        }
    }
}
