//! Board configuration files (TOML, diodestat's own schema; see
//! `docs/board-config.md`): the diode's limits, ramps, loop gains,
//! derating, protections, calibration, temperature table and tick rate of
//! one board, and the simulated module it drives. [`load_board`] reads a
//! file into the core's [`Config`] and validates it, so the simulator runs
//! and `diodestat export` emits exactly what the file says.
//!
//! Calibration is either given channel by channel or derived from the
//! module's nominal hardware by the factory calibration of [`crate::board`];
//! the temperature table is either built from the module's sensor equation
//! or given as points (inline or in a CSV file beside the board file).

use std::fmt;
use std::path::{Path, PathBuf};

use diodestat_core::config::{
    AdcCal, ApcGains, Calibration, CurrentLimits, DacCal, Derating, PowerRange, Protection, Rail,
    Ramps, TempCal,
};
use diodestat_core::temp_table::TEMP_TABLE_LEN;
use diodestat_core::{Config, ConfigError, Fx, Gain, TempPoint, ValidConfig};
use serde::{Deserialize, Deserializer};

use crate::board;
use crate::plant::DemoModule;
use crate::sim::DacLatency;

/// An engineering value in the core's `Fx` range, read from a TOML number.
/// Out-of-range or non-finite numbers are refused where they stand in the
/// file (line and column).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FxValue(pub Fx);

impl<'de> Deserialize<'de> for FxValue {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let v = f64::deserialize(d)?;
        // Round to nearest the way the core's literals do.
        if !v.is_finite() || v < Fx::MIN.to_num::<f64>() || v > Fx::MAX.to_num::<f64>() {
            return Err(serde::de::Error::custom(format!(
                "{v} is outside the core's fixed-point range {} ..= {} (I16F16)",
                Fx::MIN,
                Fx::MAX
            )));
        }
        Ok(FxValue(Fx::from_num(v)))
    }
}

/// A calibration gain per ADC count in the core's `Gain` range.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GainValue(pub Gain);

impl<'de> Deserialize<'de> for GainValue {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let v = f64::deserialize(d)?;
        if !v.is_finite() || v < Gain::MIN.to_num::<f64>() || v > Gain::MAX.to_num::<f64>() {
            return Err(serde::de::Error::custom(format!(
                "{v} is outside the core's gain range {} ..= {} (I8F24)",
                Gain::MIN,
                Gain::MAX
            )));
        }
        Ok(GainValue(Gain::from_num(v)))
    }
}

/// A drive latency in whole ticks, refused where it stands in the file when
/// out of range.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LatencyValue(pub DacLatency);

impl<'de> Deserialize<'de> for LatencyValue {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let v = u32::deserialize(d)?;
        DacLatency::ticks(v)
            .map(LatencyValue)
            .map_err(serde::de::Error::custom)
    }
}

/// Built-in simulated modules a board file can name.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ModuleName {
    /// [`DemoModule::visible`]: invented 650 nm, 30 mW class.
    Visible,
    /// [`DemoModule::pump`]: invented 976 nm, 5 W class pump.
    Pump,
}

impl ModuleName {
    /// The name as written in files.
    pub fn as_str(self) -> &'static str {
        match self {
            ModuleName::Visible => "visible",
            ModuleName::Pump => "pump",
        }
    }

    /// The module's parameters.
    pub fn module(self) -> DemoModule {
        match self {
            ModuleName::Visible => DemoModule::visible(),
            ModuleName::Pump => DemoModule::pump(),
        }
    }
}

/// A whole board file.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BoardFile {
    /// Board name (reports, export).
    pub name: String,
    /// Simulated module the board drives.
    pub module: ModuleName,
    /// Control tick rate, Hz.
    pub tick_hz: u32,
    /// Whole ticks from a tick's sampling instant until the drive computed
    /// from it takes effect (host only: the simulator's and the loop
    /// analysis's timing; not part of the exported configuration or its
    /// hash). Default 1.
    #[serde(default)]
    pub dac_latency_ticks: Option<LatencyValue>,
    /// Drive-current limits.
    pub current: CurrentSection,
    /// Accepted power setpoints.
    pub power: PowerSection,
    /// Ramps and the emission delay.
    pub ramp: RampSection,
    /// Power-loop gains and slew.
    pub apc: ApcSection,
    /// Temperature derating.
    pub derating: DeratingSection,
    /// Protection limits and debounces.
    pub protection: ProtectionSection,
    /// ADC and DAC calibration.
    pub calibration: CalibrationSection,
    /// Temperature table and sensor fault rails.
    pub temperature: TemperatureSection,
    /// Pass lines of the simulator's loop checks (host only; not part of
    /// the exported configuration or its hash).
    #[serde(default)]
    pub loop_check: Option<LoopCheckSection>,
}

/// `[loop_check]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoopCheckSection {
    /// Largest overshoot of the optical power after a setpoint step, % of
    /// the step, that `loop-gate` accepts.
    pub max_overshoot_pct: f64,
}

/// `[current]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CurrentSection {
    /// Diode absolute maximum, mA.
    pub absolute_max_ma: FxValue,
    /// Operating ceiling, mA.
    pub ceiling_ma: FxValue,
}

/// `[power]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PowerSection {
    /// Lowest APC setpoint, mW.
    pub min_setpoint_mw: FxValue,
    /// Highest APC setpoint, mW.
    pub max_setpoint_mw: FxValue,
}

/// `[ramp]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RampSection {
    /// Enable-to-current delay, ms.
    pub emission_delay_ms: u32,
    /// Soft-start rate, mA/ms.
    pub soft_start_ma_per_ms: FxValue,
    /// Soft-stop rate, mA/ms.
    pub soft_stop_ma_per_ms: FxValue,
    /// Fraction of the setpoint where soft start hands over to APC.
    pub handover_fraction: FxValue,
    /// Setpoint ramp, mW/ms.
    pub setpoint_mw_per_ms: FxValue,
}

/// `[apc]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ApcSection {
    /// Proportional gain, mA/mW.
    pub kp_ma_per_mw: FxValue,
    /// Integral gain, mA/(mW·ms).
    pub ki_ma_per_mw_ms: FxValue,
    /// Output slew limit, mA/ms.
    pub slew_ma_per_ms: FxValue,
}

/// `[derating]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DeratingSection {
    /// Knee, degC.
    pub knee_degc: FxValue,
    /// Cut-off (and over-temperature trip), degC.
    pub cutoff_degc: FxValue,
    /// Ceiling at the cut-off, mA.
    pub floor_ma: FxValue,
}

/// `[protection]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ProtectionSection {
    /// Overcurrent trip, mA.
    pub overcurrent_ma: FxValue,
    /// Overcurrent debounce, ticks.
    pub overcurrent_debounce_ticks: u16,
    /// Monitor runaway trip, mW.
    pub runaway_mw: FxValue,
    /// Runaway debounce, ticks.
    pub runaway_debounce_ticks: u16,
    /// Monitor reading meaning "no light", mW.
    pub monitor_loss_floor_mw: FxValue,
    /// Drive at or above which monitor loss is checked, mA.
    pub monitor_loss_drive_ma: FxValue,
    /// Monitor-loss debounce, ticks.
    pub monitor_loss_debounce_ticks: u16,
    /// Sensor open/short debounce, ticks.
    pub sensor_debounce_ticks: u16,
    /// Over-temperature debounce, ticks.
    pub over_temp_debounce_ticks: u16,
    /// Interlock debounce, ticks.
    pub interlock_debounce_ticks: u16,
    /// Supply window low end, mV.
    pub supply_min_mv: FxValue,
    /// Supply window high end, mV.
    pub supply_max_mv: FxValue,
    /// Supply debounce, ticks.
    pub supply_debounce_ticks: u16,
    /// Allowed sensed-versus-commanded difference, mA.
    pub mismatch_tolerance_ma: FxValue,
    /// Mismatch debounce, ticks.
    pub mismatch_debounce_ticks: u16,
    /// Missing ticks that trip.
    pub missed_tick_limit: u16,
}

/// Where the calibration comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CalibrationSource {
    /// The module's nominal factory calibration at 25 degC
    /// ([`board::calibrate`]); channels given in the file replace it.
    Module,
    /// Every channel given in the file.
    Explicit,
}

/// `[calibration]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationSection {
    /// `module` or `explicit`.
    pub from: CalibrationSource,
    /// Monitor channel.
    pub monitor: Option<MonitorCal>,
    /// Current-sense channel.
    pub current_sense: Option<CurrentSenseCal>,
    /// Supply channel.
    pub supply: Option<SupplyCal>,
    /// Current-source DAC.
    pub dac: Option<DacSection>,
}

/// `[calibration.monitor]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MonitorCal {
    /// Reading at zero light, counts.
    pub offset_counts: i32,
    /// Front-facet mW per count.
    pub mw_per_count: GainValue,
    /// Highest ADC count.
    pub full_scale_counts: u16,
}

/// `[calibration.current_sense]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CurrentSenseCal {
    /// Reading at zero current, counts.
    pub offset_counts: i32,
    /// mA per count.
    pub ma_per_count: GainValue,
    /// Highest ADC count.
    pub full_scale_counts: u16,
}

/// `[calibration.supply]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SupplyCal {
    /// Reading at zero volts, counts.
    pub offset_counts: i32,
    /// Supply mV per count (divider included).
    pub mv_per_count: GainValue,
    /// Highest ADC count.
    pub full_scale_counts: u16,
}

/// `[calibration.dac]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DacSection {
    /// Codes per mA.
    pub codes_per_ma: FxValue,
    /// Code at zero current.
    pub offset_codes: i32,
    /// Highest code.
    pub max_code: u16,
}

/// Where the temperature table comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum TableSource {
    /// Built from the module's sensor equation and front end.
    Sensor,
    /// Given as points, inline (`table`) or in a CSV file (`table_csv`).
    Explicit,
}

/// Which rail an open sensor reads, as written in files.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RailName {
    /// Open reads the high rail.
    High,
    /// Open reads the low rail.
    Low,
}

/// One table point.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TablePoint {
    /// ADC counts.
    pub counts: u16,
    /// Temperature, degC.
    pub degc: FxValue,
}

/// `[temperature]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TemperatureSection {
    /// `sensor` or `explicit`.
    pub from: TableSource,
    /// Sensor: lowest table temperature, degC.
    pub table_min_degc: Option<f64>,
    /// Sensor: highest table temperature, degC.
    pub table_max_degc: Option<f64>,
    /// Sensor: number of points (at most the core's table length).
    pub table_points: Option<usize>,
    /// Explicit: the points, counts strictly increasing.
    pub table: Option<Vec<TablePoint>>,
    /// Explicit: a CSV file `counts,degc` (header line), relative to the board file.
    pub table_csv: Option<String>,
    /// Counts at or below this are a sensor fault (sensor: default 1 % of full scale).
    pub low_fault_counts: Option<u16>,
    /// Counts at or above this are a sensor fault (sensor: default full scale less 1 %).
    pub high_fault_counts: Option<u16>,
    /// Rail an open sensor reads (sensor: default from the front-end topology).
    pub open_rail: Option<RailName>,
}

/// Why a board file could not be used.
#[derive(Debug)]
pub enum BoardFileError {
    /// The file could not be read.
    Read {
        /// The file.
        path: PathBuf,
        /// The system's reason.
        source: std::io::Error,
    },
    /// Not valid TOML or not this schema: the message names the line, the
    /// column and what was expected.
    Parse {
        /// The file.
        path: PathBuf,
        /// The TOML reader's message.
        message: String,
    },
    /// The values do not go together (a key missing for the chosen source,
    /// a key that does not belong to it, a table too long).
    Invalid {
        /// The file.
        path: PathBuf,
        /// The key at fault, as `section.key`.
        key: String,
        /// What is wrong.
        why: String,
    },
    /// The core refused the configuration.
    Refused {
        /// The file.
        path: PathBuf,
        /// The core's reason.
        source: ConfigError,
    },
}

impl fmt::Display for BoardFileError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BoardFileError::Read { path, source } => write!(f, "{}: {source}", path.display()),
            BoardFileError::Parse { path, message } => {
                write!(f, "{}: {}", path.display(), message.trim_end())
            }
            BoardFileError::Invalid { path, key, why } => {
                write!(f, "{}: {key}: {why}", path.display())
            }
            BoardFileError::Refused { path, source } => write!(
                f,
                "{}: board configuration refused by the core: {source}",
                path.display()
            ),
        }
    }
}

impl std::error::Error for BoardFileError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            BoardFileError::Read { source, .. } => Some(source),
            BoardFileError::Refused { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// A board file read, converted and validated.
#[derive(Clone, Debug)]
pub struct LoadedBoard {
    /// Board name from the file.
    pub name: String,
    /// The file (for `parse_board`: the base folder joined with `board.toml`).
    pub path: PathBuf,
    /// Name of the simulated module.
    pub module_name: &'static str,
    /// The simulated module.
    pub module: DemoModule,
    /// The core configuration the file describes.
    pub config: Config,
    /// The same, validated by the core.
    pub valid: ValidConfig,
    /// The board's overshoot limit for the loop checks, % of the step
    /// (`[loop_check] max_overshoot_pct`), when the file sets one.
    pub max_overshoot_pct: Option<f64>,
    /// Ticks from a sample to its drive taking effect
    /// (`dac_latency_ticks`, default 1).
    pub latency: DacLatency,
}

/// Read and validate a board file.
pub fn load_board(path: &Path) -> Result<LoadedBoard, BoardFileError> {
    let text = std::fs::read_to_string(path).map_err(|source| BoardFileError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let base = path.parent().unwrap_or_else(|| Path::new(""));
    let mut b = parse_board(&text, base).map_err(|e| e.with_path(path))?;
    b.path = path.to_path_buf();
    Ok(b)
}

/// Parse and validate board-file text; files it refers to are read
/// relative to `base_dir`.
pub fn parse_board(text: &str, base_dir: &Path) -> Result<LoadedBoard, BoardFileError> {
    let path = base_dir.join("board.toml");
    let file: BoardFile = toml::from_str(text).map_err(|e| BoardFileError::Parse {
        path: path.clone(),
        message: e.to_string(),
    })?;
    let module = file.module.module();
    let latency = file
        .dac_latency_ticks
        .map_or(DacLatency::default(), |l| l.0);
    let max_overshoot_pct = match &file.loop_check {
        Some(l) if !(l.max_overshoot_pct.is_finite() && l.max_overshoot_pct >= 0.0) => {
            return Err(BoardFileError::Invalid {
                path,
                key: "loop_check.max_overshoot_pct".into(),
                why: format!("must be a percentage >= 0, not {}", l.max_overshoot_pct),
            })
        }
        l => l.as_ref().map(|l| l.max_overshoot_pct),
    };
    let config =
        to_config(&file, &module, base_dir).map_err(|(key, why)| BoardFileError::Invalid {
            path: path.clone(),
            key,
            why,
        })?;
    let valid = config
        .clone()
        .validate()
        .map_err(|source| BoardFileError::Refused {
            path: path.clone(),
            source,
        })?;
    Ok(LoadedBoard {
        name: file.name,
        path,
        module_name: file.module.as_str(),
        module,
        config,
        valid,
        max_overshoot_pct,
        latency,
    })
}

impl BoardFileError {
    fn with_path(self, p: &Path) -> Self {
        let path = p.to_path_buf();
        match self {
            BoardFileError::Read { source, .. } => BoardFileError::Read { path, source },
            BoardFileError::Parse { message, .. } => BoardFileError::Parse { path, message },
            BoardFileError::Invalid { key, why, .. } => BoardFileError::Invalid { path, key, why },
            BoardFileError::Refused { source, .. } => BoardFileError::Refused { path, source },
        }
    }
}

type KeyError = (String, String);

fn invalid(key: &str, why: impl Into<String>) -> KeyError {
    (key.to_string(), why.into())
}

/// Build the core configuration a parsed file describes for `module`.
pub fn to_config(f: &BoardFile, module: &DemoModule, base_dir: &Path) -> Result<Config, KeyError> {
    let p = &f.protection;
    let mut cfg = Config {
        tick_hz: f.tick_hz,
        current: CurrentLimits {
            absolute_max_ma: f.current.absolute_max_ma.0,
            ceiling_ma: f.current.ceiling_ma.0,
        },
        power: PowerRange {
            min_setpoint_mw: f.power.min_setpoint_mw.0,
            max_setpoint_mw: f.power.max_setpoint_mw.0,
        },
        ramp: Ramps {
            emission_delay_ms: f.ramp.emission_delay_ms,
            soft_start_ma_per_ms: f.ramp.soft_start_ma_per_ms.0,
            soft_stop_ma_per_ms: f.ramp.soft_stop_ma_per_ms.0,
            handover_fraction: f.ramp.handover_fraction.0,
            setpoint_mw_per_ms: f.ramp.setpoint_mw_per_ms.0,
        },
        apc: ApcGains {
            kp_ma_per_mw: f.apc.kp_ma_per_mw.0,
            ki_ma_per_mw_ms: f.apc.ki_ma_per_mw_ms.0,
            slew_ma_per_ms: f.apc.slew_ma_per_ms.0,
        },
        derating: Derating {
            knee_degc: f.derating.knee_degc.0,
            cutoff_degc: f.derating.cutoff_degc.0,
            floor_ma: f.derating.floor_ma.0,
        },
        protection: Protection {
            overcurrent_ma: p.overcurrent_ma.0,
            overcurrent_debounce: p.overcurrent_debounce_ticks,
            runaway_mw: p.runaway_mw.0,
            runaway_debounce: p.runaway_debounce_ticks,
            monitor_loss_floor_mw: p.monitor_loss_floor_mw.0,
            monitor_loss_drive_ma: p.monitor_loss_drive_ma.0,
            monitor_loss_debounce: p.monitor_loss_debounce_ticks,
            sensor_debounce: p.sensor_debounce_ticks,
            over_temp_debounce: p.over_temp_debounce_ticks,
            interlock_debounce: p.interlock_debounce_ticks,
            supply_min_mv: p.supply_min_mv.0,
            supply_max_mv: p.supply_max_mv.0,
            supply_debounce: p.supply_debounce_ticks,
            mismatch_tolerance_ma: p.mismatch_tolerance_ma.0,
            mismatch_debounce: p.mismatch_debounce_ticks,
            missed_tick_limit: p.missed_tick_limit,
        },
        calibration: calibration(&f.calibration, module)?,
    };
    cfg.calibration.temperature = temperature(&f.temperature, module, base_dir)?;
    Ok(cfg)
}

fn calibration(c: &CalibrationSection, module: &DemoModule) -> Result<Calibration, KeyError> {
    let derived = match c.from {
        CalibrationSource::Module => Some(module_calibration(module)),
        CalibrationSource::Explicit => None,
    };
    let need = |key: &str| {
        invalid(
            &format!("calibration.{key}"),
            "missing: with from = \"explicit\" every channel (monitor, current_sense, supply, dac) is given",
        )
    };
    let monitor = match (&c.monitor, &derived) {
        (Some(m), _) => AdcCal {
            offset_counts: m.offset_counts,
            units_per_count: m.mw_per_count.0,
            full_scale_counts: m.full_scale_counts,
        },
        (None, Some(d)) => d.monitor,
        (None, None) => return Err(need("monitor")),
    };
    let current_sense = match (&c.current_sense, &derived) {
        (Some(m), _) => AdcCal {
            offset_counts: m.offset_counts,
            units_per_count: m.ma_per_count.0,
            full_scale_counts: m.full_scale_counts,
        },
        (None, Some(d)) => d.current_sense,
        (None, None) => return Err(need("current_sense")),
    };
    let supply = match (&c.supply, &derived) {
        (Some(m), _) => AdcCal {
            offset_counts: m.offset_counts,
            units_per_count: m.mv_per_count.0,
            full_scale_counts: m.full_scale_counts,
        },
        (None, Some(d)) => d.supply,
        (None, None) => return Err(need("supply")),
    };
    let dac = match (&c.dac, &derived) {
        (Some(m), _) => DacCal {
            codes_per_ma: m.codes_per_ma.0,
            offset_codes: m.offset_codes,
            max_code: m.max_code,
        },
        (None, Some(d)) => d.dac,
        (None, None) => return Err(need("dac")),
    };
    Ok(Calibration {
        monitor,
        current_sense,
        supply,
        dac,
        // Filled in by `temperature`.
        temperature: TempCal {
            table: heapless::Vec::new(),
            low_fault_counts: 0,
            high_fault_counts: 0,
            open_rail: Rail::High,
        },
    })
}

/// The module's nominal factory calibration (the ADC and DAC channels of
/// [`board::calibrate`]).
fn module_calibration(module: &DemoModule) -> Calibration {
    board::calibrate(diodestat_core::example::config(), module).calibration
}

fn temperature(
    t: &TemperatureSection,
    module: &DemoModule,
    base_dir: &Path,
) -> Result<TempCal, KeyError> {
    let key = |k: &str| format!("temperature.{k}");
    match t.from {
        TableSource::Sensor => {
            for (k, given) in [
                ("table", t.table.is_some()),
                ("table_csv", t.table_csv.is_some()),
            ] {
                if given {
                    return Err(invalid(
                        &key(k),
                        "belongs to from = \"explicit\"; with from = \"sensor\" the table is built from the sensor equation",
                    ));
                }
            }
            let min = t.table_min_degc.ok_or_else(|| {
                invalid(
                    &key("table_min_degc"),
                    "missing (needed with from = \"sensor\")",
                )
            })?;
            let max = t.table_max_degc.ok_or_else(|| {
                invalid(
                    &key("table_max_degc"),
                    "missing (needed with from = \"sensor\")",
                )
            })?;
            let points = t.table_points.ok_or_else(|| {
                invalid(
                    &key("table_points"),
                    "missing (needed with from = \"sensor\")",
                )
            })?;
            if !(min.is_finite() && max.is_finite() && min < max) {
                return Err(invalid(
                    &key("table_max_degc"),
                    format!("table range {min} ..= {max} degC is empty"),
                ));
            }
            if !(2..=TEMP_TABLE_LEN).contains(&points) {
                return Err(invalid(
                    &key("table_points"),
                    format!("{points} points; the core's table holds 2 to {TEMP_TABLE_LEN}"),
                ));
            }
            let mut cal = board::temp_cal_range(module, min, max, points);
            if let Some(v) = t.low_fault_counts {
                cal.low_fault_counts = v;
            }
            if let Some(v) = t.high_fault_counts {
                cal.high_fault_counts = v;
            }
            if let Some(r) = t.open_rail {
                cal.open_rail = rail(r);
            }
            Ok(cal)
        }
        TableSource::Explicit => {
            for (k, given) in [
                ("table_min_degc", t.table_min_degc.is_some()),
                ("table_max_degc", t.table_max_degc.is_some()),
                ("table_points", t.table_points.is_some()),
            ] {
                if given {
                    return Err(invalid(
                        &key(k),
                        "belongs to from = \"sensor\"; with from = \"explicit\" give `table` or `table_csv`",
                    ));
                }
            }
            let points: Vec<TempPoint> = match (&t.table, &t.table_csv) {
                (Some(tab), None) => tab
                    .iter()
                    .map(|p| TempPoint {
                        counts: p.counts,
                        degc: p.degc.0,
                    })
                    .collect(),
                (None, Some(csv)) => read_table_csv(&base_dir.join(csv))
                    .map_err(|why| invalid(&key("table_csv"), why))?,
                (Some(_), Some(_)) => {
                    return Err(invalid(
                        &key("table_csv"),
                        "give either `table` or `table_csv`, not both",
                    ))
                }
                (None, None) => {
                    return Err(invalid(
                        &key("table"),
                        "missing: with from = \"explicit\" give `table` or `table_csv`",
                    ))
                }
            };
            if points.len() > TEMP_TABLE_LEN {
                return Err(invalid(
                    &key("table"),
                    format!(
                        "{} points; the core's table holds at most {TEMP_TABLE_LEN}",
                        points.len()
                    ),
                ));
            }
            let mut table = heapless::Vec::new();
            for p in points {
                // Cannot fail: the length was checked above.
                let _ = table.push(p);
            }
            let req = |k: &str| invalid(&key(k), "missing (needed with from = \"explicit\")");
            Ok(TempCal {
                table,
                low_fault_counts: t.low_fault_counts.ok_or_else(|| req("low_fault_counts"))?,
                high_fault_counts: t
                    .high_fault_counts
                    .ok_or_else(|| req("high_fault_counts"))?,
                open_rail: rail(t.open_rail.ok_or_else(|| req("open_rail"))?),
            })
        }
    }
}

fn rail(r: RailName) -> Rail {
    match r {
        RailName::High => Rail::High,
        RailName::Low => Rail::Low,
    }
}

/// Read a `counts,degc` table (one header line, then one point a line;
/// blank lines and lines starting with `#` are skipped).
fn read_table_csv(path: &Path) -> Result<Vec<TempPoint>, String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let mut out = Vec::new();
    let mut header = true;
    for (n, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        if header {
            header = false;
            if line.replace(' ', "") != "counts,degc" {
                return Err(format!(
                    "{} line {}: expected the header `counts,degc`, found `{line}`",
                    path.display(),
                    n + 1
                ));
            }
            continue;
        }
        let bad = |what: &str| format!("{} line {}: {what} in `{line}`", path.display(), n + 1);
        let (c, d) = line
            .split_once(',')
            .ok_or_else(|| bad("expected `counts,degc`"))?;
        let counts: u16 = c
            .trim()
            .parse()
            .map_err(|_| bad("counts must be an integer 0..=65535"))?;
        let degc: f64 = d.trim().parse().map_err(|_| bad("degc must be a number"))?;
        if !(degc.is_finite() && degc.abs() < 32767.0) {
            return Err(bad("degc outside the core's fixed-point range"));
        }
        out.push(TempPoint {
            counts,
            degc: Fx::from_num(degc),
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = r#"
name = "t"
module = "visible"
tick_hz = 20000
[current]
absolute_max_ma = 60
ceiling_ma = 50
[power]
min_setpoint_mw = 1
max_setpoint_mw = 30
[ramp]
emission_delay_ms = 2
soft_start_ma_per_ms = 10
soft_stop_ma_per_ms = 20
handover_fraction = 0.9
setpoint_mw_per_ms = 10
[apc]
kp_ma_per_mw = 0.3
ki_ma_per_mw_ms = 3
slew_ma_per_ms = 20
[derating]
knee_degc = 45
cutoff_degc = 70
floor_ma = 20
[protection]
overcurrent_ma = 55
overcurrent_debounce_ticks = 1
runaway_mw = 36
runaway_debounce_ticks = 1
monitor_loss_floor_mw = 0.3
monitor_loss_drive_ma = 45
monitor_loss_debounce_ticks = 20
sensor_debounce_ticks = 10
over_temp_debounce_ticks = 100
interlock_debounce_ticks = 1
supply_min_mv = 4500
supply_max_mv = 5500
supply_debounce_ticks = 20
mismatch_tolerance_ma = 5
mismatch_debounce_ticks = 4
missed_tick_limit = 3
[calibration]
from = "module"
[temperature]
from = "sensor"
table_min_degc = -20
table_max_degc = 100
table_points = 25
"#;

    fn err(text: &str) -> String {
        parse_board(text, Path::new("dir")).unwrap_err().to_string()
    }

    #[test]
    fn minimal_file_loads() {
        let b = parse_board(MINIMAL, Path::new("dir")).unwrap();
        assert_eq!(b.module_name, "visible");
        assert_eq!(b.config.tick_hz, 20_000);
        assert_eq!(b.path, Path::new("dir").join("board.toml"));
        assert_eq!(b.max_overshoot_pct, None);
    }

    #[test]
    fn loop_check_overshoot_limit_is_read_and_checked() {
        let with = |v: &str| format!("{MINIMAL}[loop_check]\nmax_overshoot_pct = {v}\n");
        let b = parse_board(&with("4.5"), Path::new("dir")).unwrap();
        assert_eq!(b.max_overshoot_pct, Some(4.5));
        let e = err(&with("-1"));
        assert!(e.contains("loop_check.max_overshoot_pct"), "{e}");
        assert!(e.contains("-1"), "{e}");
    }

    #[test]
    fn dac_latency_defaults_to_one_tick_and_is_checked_where_it_stands() {
        let b = parse_board(MINIMAL, Path::new("dir")).unwrap();
        assert_eq!(b.latency, DacLatency::ONE_TICK);
        let with = |v: &str| {
            MINIMAL.replace(
                "tick_hz = 20000",
                &format!("tick_hz = 20000\ndac_latency_ticks = {v}"),
            )
        };
        let b = parse_board(&with("3"), Path::new("dir")).unwrap();
        assert_eq!(b.latency.get(), 3);
        for bad in ["0", "17"] {
            let e = err(&with(bad));
            assert!(e.contains("dac_latency_ticks"), "{e}");
            assert!(e.contains(&format!("{bad} ticks: must be 1..=16")), "{e}");
            assert!(e.contains("line 5"), "{e}");
        }
    }

    #[test]
    fn wrong_type_names_line_column_and_expectation() {
        let e = err(&MINIMAL.replace("ceiling_ma = 50", "ceiling_ma = \"fifty\""));
        assert!(e.contains("line 7, column 14"), "{e}");
        assert!(e.contains("expected f64"), "{e}");
        assert!(e.starts_with("dir/board.toml"), "{e}");
    }

    #[test]
    fn syntax_error_names_line_and_column() {
        let e = err(&MINIMAL.replace("[apc]", "[apc"));
        assert!(e.contains("line 17"), "{e}");
    }

    #[test]
    fn unknown_key_is_refused_with_the_expected_keys() {
        let e = err(&MINIMAL.replace("ceiling_ma = 50", "ceiling_ma = 50\nceiling_mA = 50"));
        assert!(e.contains("unknown field `ceiling_mA`"), "{e}");
        assert!(e.contains("line 8"), "{e}");
        assert!(e.contains("absolute_max_ma"), "{e}");
        let e = err(&format!("{MINIMAL}\n[extra]\nx = 1\n"));
        assert!(e.contains("unknown field `extra`"), "{e}");
    }

    #[test]
    fn value_beyond_fixed_point_range_is_refused_where_it_stands() {
        let e = err(&MINIMAL.replace("absolute_max_ma = 60", "absolute_max_ma = 40000"));
        assert!(e.contains("line 6"), "{e}");
        assert!(e.contains("fixed-point range"), "{e}");
    }

    #[test]
    fn unknown_module_lists_the_built_in_ones() {
        let e = err(&MINIMAL.replace("module = \"visible\"", "module = \"uv\""));
        assert!(e.contains("line 3"), "{e}");
        assert!(e.contains("visible") && e.contains("pump"), "{e}");
    }

    #[test]
    fn core_refusal_names_file_and_reason() {
        let e = err(&MINIMAL.replace("overcurrent_ma = 55", "overcurrent_ma = 45"));
        assert!(e.starts_with("dir/board.toml"), "{e}");
        assert!(e.contains("refused"), "{e}");
        let b = parse_board(
            &MINIMAL.replace("overcurrent_ma = 55", "overcurrent_ma = 45"),
            Path::new("dir"),
        )
        .unwrap_err();
        assert!(matches!(
            b,
            BoardFileError::Refused {
                source: ConfigError::OvercurrentNotAboveCeiling { .. },
                ..
            }
        ));
    }

    #[test]
    fn explicit_calibration_needs_every_channel() {
        let e = err(&MINIMAL.replace("from = \"module\"", "from = \"explicit\""));
        assert!(e.contains("calibration.monitor: missing"), "{e}");
    }

    #[test]
    fn explicit_channel_replaces_the_derived_one() {
        let text = MINIMAL.replace(
            "[calibration]\nfrom = \"module\"",
            "[calibration]\nfrom = \"module\"\n[calibration.dac]\ncodes_per_ma = 60\noffset_codes = 5\nmax_code = 4095",
        );
        let b = parse_board(&text, Path::new("dir")).unwrap();
        assert_eq!(b.config.calibration.dac.codes_per_ma, Fx::from_num(60));
        assert_eq!(b.config.calibration.dac.offset_codes, 5);
        let derived = parse_board(MINIMAL, Path::new("dir")).unwrap();
        assert_eq!(
            b.config.calibration.monitor,
            derived.config.calibration.monitor
        );
    }

    #[test]
    fn explicit_table_inline_and_misplaced_keys() {
        let table = "[temperature]\nfrom = \"explicit\"\nlow_fault_counts = 40\nhigh_fault_counts = 4055\nopen_rail = \"high\"\ntable = [\n  { counts = 1000, degc = 60 },\n  { counts = 2048, degc = 25 },\n  { counts = 3000, degc = 0 },\n]\n";
        let base = MINIMAL.split("[temperature]").next().unwrap().to_string();
        let b = parse_board(&format!("{base}{table}"), Path::new("dir")).unwrap();
        assert_eq!(b.config.calibration.temperature.table.len(), 3);
        assert_eq!(b.valid.counts_to_degc(2048), Fx::from_num(25));
        // A sensor-only key with an explicit table.
        let e = err(&format!("{base}{table}table_points = 5\n"));
        assert!(e.contains("temperature.table_points"), "{e}");
        // An explicit-only key with the sensor table.
        let e = err(&MINIMAL.replace("table_points = 25", "table_points = 25\ntable = []"));
        assert!(e.contains("temperature.table:"), "{e}");
        // Too many sensor points.
        let e = err(&MINIMAL.replace("table_points = 25", "table_points = 40"));
        assert!(e.contains("holds 2 to 33"), "{e}");
    }

    #[test]
    fn explicit_table_from_csv_beside_the_file() {
        let dir = std::env::temp_dir().join(format!("diodestat-boardfile-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(
            dir.join("ntc.csv"),
            "# demo\ncounts,degc\n1000,60\n2048,25.5\n3000,0\n",
        )
        .unwrap();
        let base = MINIMAL.split("[temperature]").next().unwrap().to_string();
        let text = format!("{base}[temperature]\nfrom = \"explicit\"\ntable_csv = \"ntc.csv\"\nlow_fault_counts = 40\nhigh_fault_counts = 4055\nopen_rail = \"high\"\n");
        std::fs::write(dir.join("b.toml"), &text).unwrap();
        let b = load_board(&dir.join("b.toml")).unwrap();
        assert_eq!(b.valid.counts_to_degc(2048), Fx::from_num(25.5));
        assert_eq!(b.path, dir.join("b.toml"));
        std::fs::write(dir.join("ntc.csv"), "counts,degc\n1000;60\n").unwrap();
        let e = load_board(&dir.join("b.toml")).unwrap_err().to_string();
        assert!(e.contains("ntc.csv line 2"), "{e}");
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn missing_file_is_an_error_not_a_panic() {
        let e = load_board(Path::new("no/such/board.toml"))
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("no/such/board.toml"), "{e}");
    }
}
