//! Board configuration files (TOML, diodestat's own schema; see
//! `docs/board-config.md`): the diode's limits, ramps, loop gains,
//! derating, protections, calibration, temperature table and tick rate of
//! one board, and the simulated module it drives. [`load_board`] reads a
//! file into the core's [`Config`] and validates it, so the simulator runs
//! and `diodestat export` emits exactly what the file says.
//!
//! Calibration is either given channel by channel or derived from the
//! module's nominal hardware by the factory calibration of [`crate::calibration`];
//! the temperature table is either built from the module's sensor equation
//! or given as points (inline or in a CSV file beside the board file).

use std::fmt;
use std::path::{Path, PathBuf};

use diodestat_core::TEMP_TABLE_LEN;
use diodestat_core::{
    ApcForm, Calibration, CurrentForm, CurrentSenseForm, DacForm, Decimal, DeratingForm,
    DiodePoint, FormError, MonitorForm, Plausibility, PlausibilityForm, PowerForm, ProtectionForm,
    Quantity, Rail, RampForm, SupplyForm, TempCal, TempPointForm, Written,
};
use diodestat_core::{Config, ConfigError, Fx, Gain, TempPoint, Units, ValidConfig};
use serde::{Deserialize, Deserializer};

use crate::calibration;
use crate::campaign::verdict::{PassLines, SourceType};
use crate::files::{self, FileError};
use crate::laser_class::LaserClass;
use crate::locate::{locate, plain_message, Place, Seg};
use crate::module_file;
use crate::plant::DemoModule;
use crate::sim::DacLatency;
use crate::units::{self, Scale};

/// Longest board name, characters.
pub const MAX_NAME_CHARS: usize = 64;

/// Punctuation a board name may hold besides letters, digits and spaces:
/// nothing that could end a string, a comment or a line in exported source.
pub const NAME_PUNCTUATION: &str = "- _ . + ( ) /";

/// Range a sensor-built temperature table may span, degC.
pub const SENSOR_TABLE_RANGE_C: (f64, f64) = (-100.0, 300.0);

/// Whether a board name is plain text that can go into reports and into
/// a comment of exported source unchanged.
pub fn name_is_plain(name: &str) -> bool {
    let n = name.chars().count();
    (1..=MAX_NAME_CHARS).contains(&n)
        && name.chars().all(|c| {
            c.is_ascii_alphanumeric() || matches!(c, ' ' | '-' | '_' | '.' | '+' | '(' | ')' | '/')
        })
}

/// The place of a `section.key` in a board file's text.
fn place_of(text: &str, key: &str) -> Option<Box<Place>> {
    let segs: Vec<Seg<'_>> = key.split('.').map(Seg::Key).collect();
    locate(text, &segs).map(Box::new)
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

/// A whole board file.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BoardFile {
    /// Board name (reports, export).
    pub name: String,
    /// Simulated module the board drives: a module file, relative to the
    /// board file (or a built-in demo module's name, `visible` or `pump`).
    pub module: String,
    /// Control tick rate, Hz.
    pub tick_hz: u32,
    /// Whole ticks from a tick's sampling instant until the drive computed
    /// from it takes effect (host only: the simulator's and the loop
    /// analysis's timing; not part of the exported configuration or its
    /// hash). Default 1.
    #[serde(default)]
    pub dac_latency_ticks: Option<LatencyValue>,
    /// Drive-current limits (the core's file form).
    pub current: CurrentForm,
    /// Accepted power setpoints (the core's file form).
    pub power: PowerForm,
    /// Ramps and the emission delay (the core's file form).
    pub ramp: RampForm,
    /// Power-loop gains and slew (the core's file form).
    pub apc: ApcForm,
    /// Temperature derating (the core's file form).
    pub derating: DeratingForm,
    /// Protection limits and debounces (the core's file form).
    pub protection: ProtectionForm,
    /// ADC and DAC calibration.
    pub calibration: CalibrationSection,
    /// Temperature table and sensor fault rails.
    pub temperature: TemperatureSection,
    /// Pass lines of the simulator's loop checks (host only; not part of
    /// the exported configuration or its hash).
    #[serde(default)]
    pub loop_check: Option<LoopCheckSection>,
    /// Current-for-power plausibility (optional).
    #[serde(default)]
    pub plausibility: Option<PlausibilityForm>,
    /// The campaign's pass lines: intended laser class, accessible
    /// fraction, source type and rating allowances (host only; not part
    /// of the exported configuration or its hash).
    #[serde(default)]
    pub laser_safety: Option<LaserSafetySection>,
}

/// `[laser_safety]`: what the fault campaign judges a board against,
/// independent of the controller's settings (docs/campaign.md).
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LaserSafetySection {
    /// Intended laser class of the product: "1", "1M", "2", "2M", "3R",
    /// "3B" or "4".
    pub intended_class: String,
    /// Fraction of the front-facet power accessible outside the product,
    /// in (0, 1].
    pub accessible_fraction: f64,
    /// Source type; only "small" (C6 = 1) is covered.
    #[serde(default = "small_source")]
    pub source: String,
    /// Energy above the module's rated power a case may deliver, uJ.
    pub over_power_allowance_uj: f64,
    /// Charge above the module's rated current a case may drive, uC.
    pub over_current_allowance_uc: f64,
}

fn small_source() -> String {
    "small".into()
}

/// The pass lines a `[laser_safety]` section declares for `module`.
fn laser_safety(s: &LaserSafetySection, module: &DemoModule) -> Result<PassLines, KeyError> {
    let class = LaserClass::parse(&s.intended_class).ok_or_else(|| {
        invalid(
            "laser_safety.intended_class",
            "must be one of \"1\", \"1M\", \"2\", \"2M\", \"3R\", \"3B\", \"4\" (IEC 60825-1 classes)",
        )
    })?;
    if !(s.accessible_fraction.is_finite()
        && s.accessible_fraction > 0.0
        && s.accessible_fraction <= 1.0)
    {
        return Err(invalid(
            "laser_safety.accessible_fraction",
            "must be a fraction of the front-facet power in (0, 1]",
        ));
    }
    let source = match s.source.as_str() {
        "small" => SourceType::Small,
        _ => {
            return Err(invalid(
                "laser_safety.source",
                "only \"small\" is covered (an apparent source of at most 1.5 mrad, C6 = 1); \
                 an extended source needs the standard's C6 and is not computed",
            ))
        }
    };
    for (key, v) in [
        (
            "laser_safety.over_power_allowance_uj",
            s.over_power_allowance_uj,
        ),
        (
            "laser_safety.over_current_allowance_uc",
            s.over_current_allowance_uc,
        ),
    ] {
        if !(v.is_finite() && v >= 0.0) {
            return Err(invalid(key, "must be a finite allowance >= 0"));
        }
    }
    PassLines::new(
        class,
        s.accessible_fraction,
        source,
        module,
        s.over_power_allowance_uj,
        s.over_current_allowance_uc,
    )
    .map_err(|e| invalid("laser_safety.intended_class", e.to_string()))
}

/// `[loop_check]`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoopCheckSection {
    /// Largest overshoot of the optical power after a setpoint step, % of
    /// the step, that `loop-gate` accepts.
    pub max_overshoot_pct: f64,
}

/// Where the calibration comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CalibrationSource {
    /// The module's nominal factory calibration at 25 degC
    /// ([`calibration::calibrate`]); channels given in the file replace it.
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
    /// Monitor channel (the core's file form).
    pub monitor: Option<MonitorForm>,
    /// Current-sense channel (the core's file form).
    pub current_sense: Option<CurrentSenseForm>,
    /// Supply channel (the core's file form).
    pub supply: Option<SupplyForm>,
    /// Current-source DAC (the core's file form).
    pub dac: Option<DacForm>,
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
    pub table: Option<Vec<TempPointForm>>,
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
    /// The file could not be read (missing, a folder, too large, not text);
    /// the message names the key or option the path came from.
    Read(FileError),
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
        /// Where the key stands in the file, when it is written there.
        place: Option<Box<Place>>,
        /// What is wrong.
        why: String,
    },
    /// The core refused the configuration: the board-file key it is about,
    /// its place and value as written, and what the key must satisfy.
    Refused {
        /// The file.
        path: PathBuf,
        /// The board-file key, as `section.key`.
        key: String,
        /// Where the key stands in the file (for a calibration derived from
        /// the module: `calibration.from`).
        place: Option<Box<Place>>,
        /// What the key must satisfy, in the file's units.
        why: String,
        /// The core's refusal.
        source: ConfigError,
    },
}

/// `path: line L, column C: key = value` (or `path: key` when the key is
/// not written in the file).
fn at(
    f: &mut fmt::Formatter<'_>,
    path: &Path,
    key: &str,
    place: &Option<Box<Place>>,
) -> fmt::Result {
    match place {
        Some(p) => write!(
            f,
            "{}: line {}, column {}: {key} = {}",
            path.display(),
            p.line,
            p.column,
            p.text
        ),
        None => write!(f, "{}: {key}", path.display()),
    }
}

impl fmt::Display for BoardFileError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BoardFileError::Read(e) => write!(f, "{e}"),
            BoardFileError::Parse { path, message } => {
                write!(f, "{}: {}", path.display(), message.trim_end())
            }
            BoardFileError::Invalid {
                path,
                key,
                place,
                why,
            } => {
                at(f, path, key, place)?;
                write!(f, ": {why}")
            }
            BoardFileError::Refused {
                path,
                key,
                place,
                why,
                ..
            } => {
                at(f, path, key, place)?;
                write!(f, ": {why} (refused by the core's configuration check)")
            }
        }
    }
}

impl std::error::Error for BoardFileError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            BoardFileError::Read(source) => Some(source),
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
    /// Name of the simulated module (the module file's `name`).
    pub module_name: String,
    /// The simulated module.
    pub module: DemoModule,
    /// The core configuration the file describes.
    pub config: Config,
    /// The same, validated by the core.
    pub valid: ValidConfig,
    /// The board's overshoot limit for the loop checks, % of the step
    /// (`[loop_check] max_overshoot_pct`), when the file sets one.
    pub max_overshoot_pct: Option<f64>,
    /// The temperature table file the board file names
    /// (`temperature.table_csv`), an input of every command.
    pub table_csv: Option<PathBuf>,
    /// Ticks from a sample to its drive taking effect
    /// (`dac_latency_ticks`, default 1).
    pub latency: DacLatency,
    /// The module file the board file names (`module`), an input of every
    /// command; `None` for a built-in demo module.
    pub module_file: Option<PathBuf>,
    /// The campaign's pass lines (`[laser_safety]` with the module's
    /// ratings), when the file declares them.
    pub pass_lines: Option<PassLines>,
}

/// Read and validate a board file named on the command line.
pub fn load_board(path: &Path) -> Result<LoadedBoard, BoardFileError> {
    load_board_from(path, "BOARD")
}

/// Read and validate a board file whose path came from `origin` (an
/// option, an argument or a key such as a scenario's `board`), which a
/// read error names.
pub fn load_board_from(path: &Path, origin: &str) -> Result<LoadedBoard, BoardFileError> {
    let text = files::read_text(path, origin).map_err(BoardFileError::Read)?;
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
        message: plain_message(&e.to_string()),
    })?;
    let invalid_at = |key: String, why: String| BoardFileError::Invalid {
        path: path.clone(),
        place: place_of(text, &key),
        key,
        why,
    };
    if !name_is_plain(&file.name) {
        return Err(invalid_at(
            "name".into(),
            format!(
                "must be 1 to {MAX_NAME_CHARS} characters of letters, digits, space and {NAME_PUNCTUATION} \
                 (the name is written into reports and exported source)"
            ),
        ));
    }
    let loaded_module = module_file::resolve(&file.module, base_dir, "module")
        .map_err(|why| invalid_at("module".into(), why))?;
    let module = loaded_module.module;
    let latency = file
        .dac_latency_ticks
        .map_or(DacLatency::default(), |l| l.0);
    let max_overshoot_pct = match &file.loop_check {
        Some(l)
            if !(l.max_overshoot_pct.is_finite()
                && (0.0..=100.0).contains(&l.max_overshoot_pct)) =>
        {
            return Err(invalid_at(
                "loop_check.max_overshoot_pct".into(),
                "must be a percentage of the step in 0 ..= 100".into(),
            ))
        }
        l => l.as_ref().map(|l| l.max_overshoot_pct),
    };
    let pass_lines = file
        .laser_safety
        .as_ref()
        .map(|l| laser_safety(l, &module))
        .transpose()
        .map_err(|(key, why)| invalid_at(key, why))?;
    let config = to_config(&file, &module, base_dir).map_err(|(key, why)| invalid_at(key, why))?;
    let valid = config.clone().validate().map_err(|source| {
        let (key, why) = refusal(&source, &config, &file, text);
        let place = place_of(text, &key).or_else(|| {
            key.starts_with("calibration.")
                .then(|| place_of(text, "calibration.from"))
                .flatten()
        });
        BoardFileError::Refused {
            path: path.clone(),
            key,
            place,
            why,
            source,
        }
    })?;
    Ok(LoadedBoard {
        name: file.name,
        path,
        module_name: loaded_module.name,
        module_file: loaded_module.path,
        module,
        config,
        valid,
        max_overshoot_pct,
        table_csv: file
            .temperature
            .table_csv
            .as_ref()
            .map(|c| base_dir.join(c)),
        latency,
        pass_lines,
    })
}

impl BoardFileError {
    fn with_path(self, p: &Path) -> Self {
        let path = p.to_path_buf();
        match self {
            BoardFileError::Read(e) => BoardFileError::Read(e),
            BoardFileError::Parse { message, .. } => BoardFileError::Parse { path, message },
            BoardFileError::Invalid {
                key, place, why, ..
            } => BoardFileError::Invalid {
                path,
                key,
                place,
                why,
            },
            BoardFileError::Refused {
                key,
                place,
                why,
                source,
                ..
            } => BoardFileError::Refused {
                path,
                key,
                place,
                why,
                source,
            },
        }
    }
}

type KeyError = (String, String);

fn invalid(key: &str, why: impl Into<String>) -> KeyError {
    (key.to_string(), why.into())
}

/// A decimal as the `f64` nearest to it.
fn decimal_f64(d: Decimal) -> f64 {
    format!("{}e{}", d.mantissa, d.exp)
        .parse()
        .unwrap_or(f64::NAN)
}

/// A value of the core's file form in milli units (mA, mW, mV), for the
/// choice of the board's units.
fn milli(w: Result<Written, FormError>) -> Result<f64, KeyError> {
    w.map(|w| decimal_f64(w.milli())).map_err(form_error)
}

/// The unit a key of the core's file form names, as text.
fn unit_text(w: &Written) -> String {
    let base = match (w.quantity, w.si) {
        (Quantity::Current, false) => "mA",
        (Quantity::Current, true) => "A",
        (Quantity::Power, false) => "mW",
        (Quantity::Power, true) => "W",
        (Quantity::Voltage, false) => "mV",
        (Quantity::Voltage, true) => "V",
        (Quantity::CurrentPerPower, si) => {
            let per_ms = w.key.ends_with("_ms");
            return match (si, per_ms) {
                (false, false) => "mA/mW",
                (false, true) => "mA/(mW ms)",
                (true, false) => "A/W",
                (true, true) => "A/(W ms)",
            }
            .into();
        }
        (Quantity::Plain, _) => "",
        (Quantity::PerCurrent, false) => "codes/mA",
        (Quantity::PerCurrent, true) => "codes/A",
    };
    if w.key.ends_with("_per_ms") {
        format!("{base}/ms")
    } else {
        base.into()
    }
}

/// The key and message of a refusal of the core's file form.
fn form_error(e: FormError) -> KeyError {
    match e {
        FormError::Missing { milli, si } => invalid(
            milli,
            format!("missing: give `{milli}` or, in the SI unit, `{si}`"),
        ),
        FormError::Both { milli, si } => {
            invalid(si, format!("give one of `{milli}` and `{si}`, not both"))
        }
        FormError::BelowStep {
            written,
            shift,
            gain,
        } => {
            let v = decimal_f64(written.value);
            let unit = unit_text(&written);
            let step = 10f64.powi(-shift)
                * if gain {
                    Gain::DELTA.to_num::<f64>()
                } else {
                    Fx::DELTA.to_num::<f64>()
                };
            let unit = if unit.is_empty() {
                String::new()
            } else {
                format!(" {unit}")
            };
            invalid(
                written.key,
                format!(
                    "{v}{unit} is not 0 but rounds to 0 in the board's units: the core counts in steps of \
                     {step}{unit}; give 0 or at least half a step (see docs/board-config.md, units)"
                ),
            )
        }
        FormError::DoesNotFit {
            written,
            shift,
            gain,
        } => {
            let v = decimal_f64(written.value);
            if written.quantity == Quantity::Plain {
                return invalid(
                    written.key,
                    format!(
                        "{v} is outside the core's fixed-point range {} ..= {}",
                        Fx::MIN,
                        Fx::MAX
                    ),
                );
            }
            let unit = unit_text(&written);
            let per = 10f64.powi(-shift);
            if gain {
                let max = Gain::MAX.to_num::<f64>() * per;
                return invalid(
                    written.key,
                    format!("{v} {unit} does not fit the core's calibration gain: accepted -{max} ..= {max} {unit}"),
                );
            }
            let max = Fx::MAX.to_num::<f64>() * per;
            invalid(
                written.key,
                format!(
                    "{v} {unit} does not fit the board's units: accepted -{max} ..= {max} {unit} \
                     (the core counts in steps of {} {unit}; see docs/board-config.md, units)",
                    per * Fx::DELTA.to_num::<f64>()
                ),
            )
        }
    }
}

/// The key of a value as the file writes it: `key` itself, or its twin in
/// the other unit (`current.ceiling_ma` and `current.ceiling_a`) when only
/// that one is written.
fn written_key(text: &str, key: &str) -> String {
    if place_of(text, key).is_some() {
        return key.to_string();
    }
    let (section, name) = key.rsplit_once('.').unwrap_or(("", key));
    let twin: Vec<&str> = name
        .split('_')
        .map(|t| match t {
            "ma" => "a",
            "mw" => "w",
            "mv" => "v",
            "a" => "ma",
            "w" => "mw",
            "v" => "mv",
            t => t,
        })
        .collect();
    let twin = format!("{section}.{}", twin.join("_"));
    if place_of(text, &twin).is_some() {
        twin
    } else {
        key.to_string()
    }
}

/// The key names its value in an SI unit (`_a`, `_w`, `_v`, alone or in
/// a ratio such as `_a_per_w`).
fn is_si_key(key: &str) -> bool {
    let name = key.rsplit_once('.').map_or(key, |(_, n)| n);
    name.split('_').any(|t| matches!(t, "a" | "w" | "v"))
}

/// A number for a message, to 7 significant digits.
fn num_f64_fine(x: f64) -> String {
    if x == 0.0 {
        return "0".into();
    }
    let digits = 6 - x.abs().log10().floor() as i32;
    let r = if digits > 0 {
        let p = 10f64.powi(digits.min(15));
        (x * p).round() / p
    } else {
        x
    };
    format!("{r}")
}

/// The board's units for a parsed file: each quantity's decade from the
/// largest value of it the file names and its channel's full scale
/// ([`units::choose_decade`]).
pub fn board_units(f: &BoardFile, module: &DemoModule) -> Result<Units, KeyError> {
    let fs = calibration::full_scales(module);
    let p = &f.protection;
    let c = &f.calibration;
    let source_ma = match &c.dac {
        Some(d) => match milli(d.codes_per())? {
            codes_per_ma if codes_per_ma > 0.0 => f64::from(d.max_code) / codes_per_ma,
            _ => fs.source_ma,
        },
        None => fs.source_ma,
    };
    let full_scale = |counts: u16, per_count: Result<Written, FormError>| {
        milli(per_count).map(|v| f64::from(counts) * v)
    };
    let sense_ma = match &c.current_sense {
        Some(s) => full_scale(s.full_scale_counts, s.per_count())?,
        None => fs.sense_ma,
    };
    let monitor_mw = match &c.monitor {
        Some(s) => full_scale(s.full_scale_counts, s.per_count())?,
        None => fs.monitor_mw,
    };
    let supply_mv = match &c.supply {
        Some(s) => full_scale(s.full_scale_counts, s.per_count())?,
        None => fs.supply_mv,
    };
    let largest = |vals: &[f64]| vals.iter().fold(0f64, |m, v| m.max(v.abs()));
    let max_setpoint_mw = milli(f.power.max_setpoint())?;
    let current = largest(&[
        milli(f.current.absolute_max())?,
        milli(f.current.ceiling())?,
        milli(p.overcurrent())?,
        milli(p.monitor_loss_drive())?,
        milli(f.derating.floor())?,
        source_ma,
        sense_ma,
    ]);
    let power = largest(&[max_setpoint_mw, milli(p.runaway())?, monitor_mw]);
    let voltage = largest(&[
        milli(p.supply_min())?,
        milli(p.supply_max())?,
        supply_mv,
        module.supply_v * 1100.0,
    ]);
    let pick = |key: &str, largest: f64, full_scale: f64, unit: &str| {
        units::choose_decade(largest, full_scale).ok_or_else(|| {
            invalid(
                key,
                format!(
                    "no unit from 1e{} to 1e{} {unit} holds the largest value, {largest} m{unit}, \
                     within {} units while the full scale, {full_scale} m{unit}, is at least {} units",
                    Units::MIN_EXP,
                    Units::MAX_EXP,
                    units::MAX_UNITS,
                    units::MIN_FULL_SCALE_UNITS
                ),
            )
        })
    };
    let key = |w: Result<Written, FormError>| w.map_or("", |w| w.key);
    Ok(Units {
        current_exp: pick(
            key(f.current.absolute_max()),
            current,
            source_ma.min(current),
            "A",
        )?,
        power_exp: pick(
            key(f.power.max_setpoint()),
            power,
            monitor_mw.min(power).max(max_setpoint_mw),
            "W",
        )?,
        voltage_exp: pick(key(p.supply_max()), voltage, supply_mv.min(voltage), "V")?,
    })
}

/// Build the core configuration a parsed file describes for `module`, in
/// the board's units ([`board_units`]).
pub fn to_config(f: &BoardFile, module: &DemoModule, base_dir: &Path) -> Result<Config, KeyError> {
    let units = board_units(f, module)?;
    to_config_in(f, module, base_dir, units)
}

/// [`to_config`] in the given units (the loader's own choice is
/// [`board_units`]): a value those units cannot hold is refused with its
/// key and the accepted range.
pub fn to_config_in(
    f: &BoardFile,
    module: &DemoModule,
    base_dir: &Path,
    units: Units,
) -> Result<Config, KeyError> {
    let mut cfg = Config {
        tick_hz: f.tick_hz,
        current: f.current.to_section(units).map_err(form_error)?,
        power: f.power.to_section(units).map_err(form_error)?,
        ramp: f.ramp.to_section(units).map_err(form_error)?,
        apc: f.apc.to_section(units).map_err(form_error)?,
        derating: f.derating.to_section(units).map_err(form_error)?,
        protection: f.protection.to_section(units).map_err(form_error)?,
        calibration: calibration(&f.calibration, module, units)?,
        forward_voltage: None,
        plausibility: match &f.plausibility {
            Some(pl) => Some(plausibility(pl, module, units)?),
            None => None,
        },
    };
    cfg.calibration.temperature = temperature(&f.temperature, module, base_dir)?;
    Ok(cfg)
}

/// The plausibility check of a `[plausibility]` section: the module's
/// threshold and slope at each point's junction temperature.
fn plausibility(
    pl: &PlausibilityForm,
    module: &DemoModule,
    units: Units,
) -> Result<Plausibility, KeyError> {
    let diode = crate::plant::Diode::new(module.diode.clone())
        .map_err(|e| invalid("module", e.to_string()))?;
    let rise_k = decimal_f64(pl.junction_rise_k);
    if !rise_k.is_finite() || rise_k < 0.0 {
        return Err(invalid(
            "plausibility.junction_rise_k",
            format!("must be >= 0 K, not {rise_k}"),
        ));
    }
    let mut points = heapless::Vec::new();
    for degc in pl.points_degc().map_err(form_error)? {
        let tj_k = crate::plant::c_to_k(degc.to_num::<f64>() + rise_k);
        let pt = DiodePoint {
            degc,
            threshold_iu: units.iu(diode.threshold_current_a(tj_k) * 1e3),
            // W/A is mW/mA.
            slope_ou_per_iu: Fx::saturating_from_num(
                diode.slope_w_per_a(tj_k) * units.ma_per_iu() / units.mw_per_ou(),
            ),
        };
        // Cannot fail: one per point of the form, at most DIODE_POINTS.
        let _ = points.push(pt);
    }
    pl.to_section(units, points).map_err(form_error)
}

fn calibration(
    c: &CalibrationSection,
    module: &DemoModule,
    units: Units,
) -> Result<Calibration, KeyError> {
    let derived = match c.from {
        CalibrationSource::Module => Some(module_calibration(module, units)),
        CalibrationSource::Explicit => None,
    };
    let need = |key: &str| {
        invalid(
            &format!("calibration.{key}"),
            "missing: with from = \"explicit\" every channel (monitor, current_sense, supply, dac) is given",
        )
    };
    let monitor = match (&c.monitor, &derived) {
        (Some(m), _) => m.to_section(units).map_err(form_error)?,
        (None, Some(d)) => d.monitor,
        (None, None) => return Err(need("monitor")),
    };
    let current_sense = match (&c.current_sense, &derived) {
        (Some(m), _) => m.to_section(units).map_err(form_error)?,
        (None, Some(d)) => d.current_sense,
        (None, None) => return Err(need("current_sense")),
    };
    let supply = match (&c.supply, &derived) {
        (Some(m), _) => m.to_section(units).map_err(form_error)?,
        (None, Some(d)) => d.supply,
        (None, None) => return Err(need("supply")),
    };
    let dac = match (&c.dac, &derived) {
        (Some(m), _) => m.to_section(units).map_err(form_error)?,
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
/// [`calibration::calibrate`]).
fn module_calibration(module: &DemoModule, units: Units) -> Calibration {
    calibration::calibrate_in(diodestat_core::example::config(), module, units).calibration
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
            let (lo, hi) = SENSOR_TABLE_RANGE_C;
            for (k, v) in [("table_min_degc", min), ("table_max_degc", max)] {
                if !(v.is_finite() && (lo..=hi).contains(&v)) {
                    return Err(invalid(
                        &key(k),
                        format!("must be a temperature in {lo} ..= {hi} degC"),
                    ));
                }
            }
            if min >= max {
                return Err(invalid(
                    &key("table_max_degc"),
                    format!("must be above table_min_degc = {min} degC (the table range is empty)"),
                ));
            }
            if !(2..=TEMP_TABLE_LEN).contains(&points) {
                return Err(invalid(
                    &key("table_points"),
                    format!("{points} points; the core's table holds 2 to {TEMP_TABLE_LEN}"),
                ));
            }
            let mut cal = calibration::temp_cal_range(module, min, max, points);
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
                    .enumerate()
                    .map(|(i, p)| {
                        p.to_point("temperature.table").map_err(|e| {
                            let (key, why) = form_error(e);
                            (key, format!("point {}: degc {why}", i + 1))
                        })
                    })
                    .collect::<Result<_, _>>()?,
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

/// Read a `counts,degc` table file (at most [`files::MAX_INPUT_BYTES`]).
fn read_table_csv(path: &Path) -> Result<Vec<TempPoint>, String> {
    // The caller names the key `temperature.table_csv`.
    let text = files::read_text(path, "temperature.table_csv").map_err(|e| e.detail())?;
    parse_table_csv(&text, path)
}

/// Parse a `counts,degc` table (one header line, then one point a line;
/// blank lines and lines starting with `#` are skipped); messages name
/// `path` and the line.
pub fn parse_table_csv(text: &str, path: &Path) -> Result<Vec<TempPoint>, String> {
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

/// A value of the core's fixed-point types, as text.
fn num(v: Fx) -> String {
    num_f64(v.to_num::<f64>())
}

/// An engineering value as text, to 1e-4 or four significant digits.
fn num_f64(x: f64) -> String {
    let r = (x * 1e4).round() / 1e4;
    if r == 0.0 && x != 0.0 {
        format!("{x:.4e}")
    } else {
        format!("{r}")
    }
}

/// The board-file key a [`ConfigError`] is about, as `text` (the file)
/// writes it, and what that key must satisfy, in the file's words: every
/// key it names spelled as the file writes it, and its currents, powers and
/// voltages in the refused key's own unit (mA, mW, mV, or A, W, V for a key
/// written in SI, such as `current.ceiling_a`).
pub fn refusal(e: &ConfigError, c: &Config, f: &BoardFile, text: &str) -> (String, String) {
    let milli = Wording { text, si: false };
    let (key, why) = refusal_in(e, c, f, &milli);
    let key = milli.key(&key);
    if is_si_key(&key) {
        let (_, why) = refusal_in(e, c, f, &Wording { text, si: true });
        (key, why)
    } else {
        (key, why)
    }
}

/// How a refusal states keys and values: each key as the file writes it,
/// and values in the milli units or, with `si`, in A, W and V.
struct Wording<'t> {
    /// The board file.
    text: &'t str,
    /// Values in A, W and V rather than mA, mW and mV.
    si: bool,
}

impl Wording<'_> {
    /// `key` as the file writes it (`current.ceiling_a` for
    /// `current.ceiling_ma` in a file that writes amperes).
    fn key(&self, key: &str) -> String {
        written_key(self.text, key)
    }

    /// A unit in milli form (`mA`, `mA/ms`, `codes/mA`, `mA/(mW ms)`) in
    /// this wording, and the factor from a value in the milli unit to it.
    fn unit(&self, milli: &'static str) -> (&'static str, f64) {
        if !self.si {
            return (milli, 1.0);
        }
        match milli {
            "mA" => ("A", 1e-3),
            "mW" => ("W", 1e-3),
            "mV" => ("V", 1e-3),
            "mA/ms" => ("A/ms", 1e-3),
            "mW/ms" => ("W/ms", 1e-3),
            "mV/ms" => ("V/ms", 1e-3),
            "mA/mW" => ("A/W", 1.0),
            "mA/(mW ms)" => ("A/(W ms)", 1.0),
            "codes/mA" => ("codes/A", 1e3),
            other => (other, 1.0),
        }
    }

    /// The unit name of `milli` in this wording.
    fn u(&self, milli: &'static str) -> &'static str {
        self.unit(milli).0
    }

    /// `v`, a value in the milli unit `milli`, as a number in this
    /// wording's unit: to 1e-4 or four significant digits in milli units,
    /// to seven significant digits in SI (a milli value's resolution).
    fn n(&self, v: f64, milli: &'static str) -> String {
        let (_, factor) = self.unit(milli);
        if self.si {
            num_f64_fine(v * factor)
        } else {
            num_f64(v)
        }
    }
}

/// [`refusal`] in the wording `w`, with the refused key as the core names
/// it (milli form).
fn refusal_in(e: &ConfigError, c: &Config, f: &BoardFile, w: &Wording) -> (String, String) {
    use diodestat_core::{Channel, RampKind};
    use ConfigError as E;
    let k = |s: &str| s.to_string();
    let key = |s: &str| w.key(s);
    let u = c.units();
    let ma = |v: Fx| w.n(u.ma(v), "mA");
    let mw = |v: Fx| w.n(u.mw(v), "mW");
    let mv = |v: Fx| w.n(u.mv(v), "mV");
    let (u_ma, u_mw, u_mv) = (w.u("mA"), w.u("mW"), w.u("mV"));
    let tick_ms = f64::from(c.tick_hz) / 1e3;
    let ramp_key = |rk: RampKind| match rk {
        RampKind::SoftStart => ("ramp.soft_start_ma_per_ms", "mA/ms", u.ma_per_iu()),
        RampKind::SoftStop => ("ramp.soft_stop_ma_per_ms", "mA/ms", u.ma_per_iu()),
        RampKind::Setpoint => ("ramp.setpoint_mw_per_ms", "mW/ms", u.mw_per_ou()),
        RampKind::Slew => ("apc.slew_ma_per_ms", "mA/ms", u.ma_per_iu()),
    };
    let channel = |ch: Channel| match ch {
        Channel::Monitor => ("monitor", "mw_per_count"),
        Channel::CurrentSense => ("current_sense", "ma_per_count"),
        Channel::Supply => ("supply", "mv_per_count"),
        Channel::Dac => ("dac", "codes_per_ma"),
        Channel::ForwardVoltage => ("forward_voltage", "mv_per_count"),
    };
    let max_fx = Fx::MAX.to_num::<f64>();
    let res = Fx::DELTA.to_num::<f64>();
    match *e {
        // The loader picks the units itself and gives every channel its
        // quantity's unit; a hand-built `Config` may not.
        E::UnitOutOfRange { channel: ch, .. } => {
            let (sec, _) = channel(ch);
            (
                format!("calibration.{sec}"),
                format!(
                    "the channel's unit must be a decade 1e{} ..= 1e{} of its SI unit, the same as its quantity's other channels",
                    Units::MIN_EXP,
                    Units::MAX_EXP
                ),
            )
        }
        E::TickRateZero | E::TickRateTooHigh { .. } => {
            (k("tick_hz"), "must be 1 ..= 1000000 Hz".into())
        }
        E::AbsoluteLimitNotPositive { .. } => (k("current.absolute_max_ma"), format!("must be above 0 {u_ma}")),
        E::CeilingNotPositive { .. } => (k("current.ceiling_ma"), format!("must be above 0 {u_ma}")),
        E::CeilingAboveAbsolute { absolute_max_iu, .. } => (
            k("current.ceiling_ma"),
            format!(
                "must not exceed {} = {} {u_ma}",
                key("current.absolute_max_ma"),
                ma(absolute_max_iu)
            ),
        ),
        E::OvercurrentNotAboveCeiling { ceiling_iu, .. } => (
            k("protection.overcurrent_ma"),
            format!(
                "must be above {} = {} {u_ma} (at or below it the trip fires in normal use)",
                key("current.ceiling_ma"),
                ma(ceiling_iu)
            ),
        ),
        E::OvercurrentAboveAbsolute { absolute_max_iu, .. } => (
            k("protection.overcurrent_ma"),
            format!(
                "must not exceed {} = {} {u_ma}",
                key("current.absolute_max_ma"),
                ma(absolute_max_iu)
            ),
        ),
        E::RampRateNotPositive { which, .. } => {
            let (name, unit, _) = ramp_key(which);
            (k(name), format!("must be above 0 {}", w.u(unit)))
        }
        E::RampRateBelowResolution { which, per_ms, tick_hz } => {
            let (name, milli_unit, scale) = ramp_key(which);
            let (unit, factor) = w.unit(milli_unit);
            let per_tick = per_ms.to_num::<f64>() / tick_ms;
            let why = if per_tick >= max_fx {
                let per = unit.trim_end_matches("/ms");
                format!(
                    "is {} {per} per tick at tick_hz = {tick_hz}, beyond the {} {per} per tick the core holds; \
                     at most {} {unit} at this tick rate",
                    w.n((per_tick * scale).round(), milli_unit),
                    w.n(max_fx.floor() * scale, milli_unit),
                    w.n((max_fx * tick_ms).floor() * scale, milli_unit)
                )
            } else {
                // Three more decimals in the SI unit: the same resolution.
                let decimals = if w.si { 9 } else { 6 };
                format!(
                    "rounds to zero per tick at tick_hz = {tick_hz}; at least {:.decimals$} {unit} at this tick rate",
                    res * tick_ms * scale * factor
                )
            };
            (k(name), why)
        }
        E::EmissionDelayTooLong { .. } => (
            k("ramp.emission_delay_ms"),
            format!(
                "does not fit the 32-bit tick count at tick_hz = {}; at most {:.0} ms",
                c.tick_hz,
                f64::from(u32::MAX) / tick_ms
            ),
        ),
        E::HandoverFractionOutOfRange { .. } => {
            (k("ramp.handover_fraction"), "must be in (0, 1]".into())
        }
        E::PowerRangeInvalid { max_setpoint_ou, .. } => (
            k("power.min_setpoint_mw"),
            format!(
                "must be above 0 {u_mw} and not above {} = {} {u_mw}",
                key("power.max_setpoint_mw"),
                mw(max_setpoint_ou)
            ),
        ),
        E::RunawayNotAboveSetpointRange { max_setpoint_ou, .. } => (
            k("protection.runaway_mw"),
            format!(
                "must be above {} = {} {u_mw}",
                key("power.max_setpoint_mw"),
                mw(max_setpoint_ou)
            ),
        ),
        E::MonitorLossFloorNotBelowSetpoints { lowest_handover_ou, .. } => (
            k("protection.monitor_loss_floor_mw"),
            format!(
                "must be below the lowest hand-over level ramp.handover_fraction x {} = {} {u_mw}",
                key("power.min_setpoint_mw"),
                mw(lowest_handover_ou)
            ),
        ),
        E::MonitorLossFloorNegative { .. } => {
            (k("protection.monitor_loss_floor_mw"), format!("must be 0 {u_mw} or more"))
        }
        E::MonitorLossDriveOutOfRange { ceiling_iu, .. } => (
            k("protection.monitor_loss_drive_ma"),
            format!(
                "must be in (0, {} = {}] {u_ma}",
                key("current.ceiling_ma"),
                ma(ceiling_iu)
            ),
        ),
        E::DeratingKneeNotBelowCutoff { cutoff_degc, .. } => (
            k("derating.knee_degc"),
            format!("must be below derating.cutoff_degc = {} degC", num(cutoff_degc)),
        ),
        E::DeratingFloorOutOfRange { ceiling_iu, .. } => (
            k("derating.floor_ma"),
            format!(
                "must be in 0 ..= {} = {} {u_ma}",
                key("current.ceiling_ma"),
                ma(ceiling_iu)
            ),
        ),
        E::TempTableTooShort { len } => (
            k(table_key(f)),
            format!("has {len} points; the table needs at least 2"),
        ),
        E::TempTableNotMonotonic { index } => (
            k(table_key(f)),
            format!(
                "point {} breaks the order: counts must strictly increase and degc strictly rise or strictly fall",
                index + 1
            ),
        ),
        E::SensorRailsInconsistent { low_fault_counts, high_fault_counts } => {
            let t = &c.calibration.temperature.table;
            let (first, last) = (
                t.first().map_or(0, |p| p.counts),
                t.last().map_or(0, |p| p.counts),
            );
            (
                k("temperature.low_fault_counts"),
                format!(
                    "low_fault_counts = {low_fault_counts} must be below the table's first point ({first} counts) \
                     and high_fault_counts = {high_fault_counts} above its last ({last} counts)"
                ),
            )
        }
        E::DebounceZero { fault } => {
            (k(debounce_board_key(fault)), "must be at least 1 tick".into())
        }
        E::FastDebounceTooLong { fault, max, .. } => (
            k(debounce_board_key(fault)),
            format!(
                "must be 1 ..= {max} ticks at tick_hz = {} (a fast protection trips within {} us)",
                c.tick_hz,
                diodestat_core::FAST_DEBOUNCE_MAX_US
            ),
        ),
        E::IntermittentWeightOutOfRange { .. } => (
            k("protection.intermittent_weight"),
            format!(
                "must be 1 ..= {}",
                diodestat_core::MAX_INTERMITTENT_WEIGHT
            ),
        ),
        E::TempTableShortOfCutoff { hottest_degc, needed_degc } => (
            k(table_key(f)),
            format!(
                "reaches {} degC; it must reach derating.cutoff_degc + {} = {} degC so that over-temperature is read from the table",
                num(hottest_degc),
                num(diodestat_core::TEMP_COVER_MARGIN_DEGC),
                num(needed_degc)
            ),
        ),
        E::ForwardVoltageLimitsInvalid { full_scale_vu, .. } => (
            k("forward_voltage.open_mv"),
            format!(
                "needs 0 <= {} < {} <= {} {u_mv} (the channel's full scale)",
                key("forward_voltage.short_mv"),
                key("forward_voltage.open_mv"),
                mv(full_scale_vu)
            ),
        ),
        E::ForwardDriveOutOfRange { ceiling_iu, .. } => (
            k("forward_voltage.min_drive_ma"),
            format!(
                "must be in (0, {} = {}] {u_ma}",
                key("current.ceiling_ma"),
                ma(ceiling_iu)
            ),
        ),
        E::PlausibilityPointInvalid { index } => (
            k("plausibility.points_degc"),
            format!(
                "point {} is out of order or gives the diode a negative threshold or a slope not above 0",
                index + 1
            ),
        ),
        E::PlausibilityMarginsInvalid { .. } => (
            k("plausibility.fault_margin"),
            format!(
                "needs 0 <= plausibility.warning_margin <= plausibility.fault_margin <= 4 and {} >= 0",
                key("plausibility.allowance_ma")
            ),
        ),
        E::MissedTickLimitZero => (k("protection.missed_tick_limit"), "must be at least 1 tick".into()),
        E::GainNotPositive { proportional: true, .. } => {
            (k("apc.kp_ma_per_mw"), format!("must be above 0 {}", w.u("mA/mW")))
        }
        E::GainNotPositive { proportional: false, .. } => {
            (k("apc.ki_ma_per_mw_ms"), format!("must be 0 {} or more", w.u("mA/(mW ms)")))
        }
        E::ProportionalGainOverflow { runaway_ou, .. } => (
            k("apc.kp_ma_per_mw"),
            format!(
                "times {} = {} {u_mw} must stay below {} {u_ma} (the core's range in the board's current unit); at most {:.4e} {}",
                key("protection.runaway_mw"),
                mw(runaway_ou),
                w.n(max_fx * u.ma_per_iu(), "mA"),
                max_fx / runaway_ou.to_num::<f64>().max(res) * u.ma_per_iu() / u.mw_per_ou(),
                w.u("mA/mW")
            ),
        ),
        E::IntegralGainOutOfRange { tick_hz, .. } => (
            k("apc.ki_ma_per_mw_ms"),
            format!(
                "per tick at tick_hz = {tick_hz} it rounds to zero or overflows the core's per-tick gain; \
                 accepted about {:.3e} ..= {:.4e} {} at this tick rate",
                diodestat_core::Gain::DELTA.to_num::<f64>() * tick_ms * u.ma_per_iu() / u.mw_per_ou(),
                diodestat_core::Gain::MAX.to_num::<f64>() * tick_ms * u.ma_per_iu() / u.mw_per_ou(),
                w.u("mA/(mW ms)")
            ),
        ),
        E::CalibrationGainNotPositive { channel: ch } => {
            let (sec, key) = channel(ch);
            (format!("calibration.{sec}.{key}"), "must be above 0".into())
        }
        E::CalibrationOffsetOutOfRange { channel: ch, full_scale, .. } => {
            let (sec, _) = channel(ch);
            (
                format!("calibration.{sec}.offset_counts"),
                format!(
                    "must be in 0 ..= {} counts (below full_scale_counts = {full_scale})",
                    i32::from(full_scale) - 1
                ),
            )
        }
        E::CeilingNotRepresentable { code, max_code, .. } => (
            k("current.ceiling_ma"),
            format!("needs DAC code {code}, above calibration.dac.max_code = {max_code}"),
        ),
        E::RunawayBeyondMonitorRange { full_scale_ou, .. } => (
            k("protection.runaway_mw"),
            format!(
                "must not exceed what the monitor channel reads at full scale, {} {u_mw}",
                mw(full_scale_ou)
            ),
        ),
        E::OvercurrentBeyondSenseRange { full_scale_iu, .. } => (
            k("protection.overcurrent_ma"),
            format!(
                "must not exceed what the current sense reads at full scale, {} {u_ma}",
                ma(full_scale_iu)
            ),
        ),
        E::SupplyWindowInvalid { supply_max_vu, full_scale_vu, .. } => (
            k("protection.supply_min_mv"),
            format!(
                "the window {} ..= {} = {} {u_mv} must be non-empty and within the supply channel's full scale {} {u_mv}",
                key("protection.supply_min_mv"),
                key("protection.supply_max_mv"),
                mv(supply_max_vu),
                mv(full_scale_vu)
            ),
        ),
        E::MismatchToleranceNotPositive { .. } => {
            (k("protection.mismatch_tolerance_ma"), format!("must be above 0 {u_ma}"))
        }
    }
}

/// The board-file key of a fault's debounce.
fn debounce_board_key(fault: diodestat_core::Fault) -> &'static str {
    use diodestat_core::Fault;
    match fault {
        Fault::Overcurrent => "protection.overcurrent_debounce_ticks",
        Fault::MonitorRunaway => "protection.runaway_debounce_ticks",
        Fault::MonitorLoss => "protection.monitor_loss_debounce_ticks",
        Fault::SensorOpen | Fault::SensorShort => "protection.sensor_debounce_ticks",
        Fault::OverTemperature => "protection.over_temp_debounce_ticks",
        Fault::InterlockOpen => "protection.interlock_debounce_ticks",
        Fault::SupplyUnder | Fault::SupplyOver => "protection.supply_debounce_ticks",
        Fault::DriveMismatch => "protection.mismatch_debounce_ticks",
        Fault::ExternalFault => "protection.external_debounce_ticks",
        Fault::PowerImplausible => "plausibility.debounce_ticks",
        Fault::DiodeOpen | Fault::DiodeShort => "forward_voltage.debounce_ticks",
        Fault::MissedTicks
        | Fault::TickOrder
        | Fault::DacBus
        | Fault::EnablePin
        | Fault::InterlockPin
        | Fault::RecordCorrupt => "protection.missed_tick_limit",
    }
}

/// The key that holds the temperature table of a file.
fn table_key(f: &BoardFile) -> &'static str {
    match (f.temperature.from, &f.temperature.table_csv) {
        (TableSource::Sensor, _) => "temperature.table_points",
        (TableSource::Explicit, Some(_)) => "temperature.table_csv",
        (TableSource::Explicit, None) => "temperature.table",
    }
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

    /// A file that writes its currents in amperes is refused in amperes:
    /// the limit, the accepted range and the keys they name as written
    /// (the core's check stated them in mA, as `current.ceiling_ma`).
    #[test]
    fn refusal_of_an_si_key_speaks_its_unit() {
        let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/demo-pump-18w");
        let text = std::fs::read_to_string(dir.join("board.toml")).unwrap();
        let bad = |from: &str, to: &str| {
            assert!(text.contains(from), "{from}");
            parse_board(&text.replace(from, to), &dir)
                .unwrap_err()
                .to_string()
        };
        let e = bad("ceiling_a = 22 ", "ceiling_a = 30 ");
        assert!(
            e.contains("current.ceiling_a = 30: must not exceed current.absolute_max_a = 24 A"),
            "{e}"
        );
        let e = bad("monitor_loss_drive_a = 18 ", "monitor_loss_drive_a = 25 ");
        assert!(
            e.contains("monitor_loss_drive_a = 25: must be in (0, current.ceiling_a = 22] A"),
            "{e}"
        );
        assert!(!e.contains("mA"), "{e}");
        // The milli-unit file keeps its units.
        let e = err(&MINIMAL.replace("ceiling_ma = 50", "ceiling_ma = 70"));
        assert!(e.contains("current.absolute_max_ma = 60 mA"), "{e}");
        // Ranges, ratios, windows and per-tick resolutions are stated in
        // the refused key's unit where the message is made.
        let e = bad("floor_a = 10", "floor_a = 23");
        assert!(
            e.contains("floor_a = 23: must be in 0 ..= current.ceiling_a = 22 A"),
            "{e}"
        );
        let e = bad("kp_a_per_w = 0.0879", "kp_a_per_w = 0");
        assert!(e.contains("kp_a_per_w = 0: must be above 0 A/W"), "{e}");
        let e = bad("supply_min_v = 43.2", "supply_min_v = 53");
        assert!(
            e.contains(
                "the window protection.supply_min_v ..= protection.supply_max_v = 52.8 V must be non-empty"
            ),
            "{e}"
        );
        let e = bad(
            "soft_start_a_per_ms = 2 ",
            "soft_start_a_per_ms = 0.0000001 ",
        );
        assert!(e.contains("A/ms at this tick rate"), "{e}");
        assert!(!e.contains("at least 0.000000 "), "{e}");
        {
            assert!(
                !e.contains("mA") && !e.contains("mW") && !e.contains("mV"),
                "{e}"
            );
        }
        // A milli key in the same file keeps its unit while naming the
        // SI keys as written.
        let e = bad("allowance_ma = 400", "allowance_ma = -1");
        assert!(!e.contains(" A "), "{e}");
        assert!(is_si_key("apc.kp_a_per_w") && !is_si_key("apc.kp_ma_per_mw"));
        // A gain written as not zero that rounds to 0 is refused, not
        // turned off.
        let e = bad("ki_a_per_w_ms = 3.4735", "ki_a_per_w_ms = 0.0000001");
        assert!(
            e.contains(
                "apc.ki_a_per_w_ms = 0.0000001: 0.0000001 A/(W ms) is not 0 but rounds to 0"
            ),
            "{e}"
        );
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
        assert!(e.contains("expected a number"), "{e}");
        assert!(!e.contains("f64"), "{e}");
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
    fn value_beyond_the_boards_units_is_refused_where_it_stands() {
        // The current unit is the milliampere here (a 60 mA source): a
        // tolerance of 1e9 mA does not fit.
        let e = err(&MINIMAL.replace("mismatch_tolerance_ma = 5", "mismatch_tolerance_ma = 1e9"));
        assert!(e.contains("line 39"), "{e}");
        assert!(e.contains("protection.mismatch_tolerance_ma"), "{e}");
        assert!(
            e.contains("1000000000 mA does not fit the board's units: accepted -32767.99998474121 ..= 32767.99998474121 mA"),
            "{e}"
        );
        // No decade holds 1e12 mA beside a 60 mA source.
        let e = err(&MINIMAL.replace("absolute_max_ma = 60", "absolute_max_ma = 1e12"));
        assert!(e.contains("line 6"), "{e}");
        assert!(e.contains("current.absolute_max_ma"), "{e}");
        assert!(e.contains("no unit from 1e-9 to 1e0 A holds"), "{e}");
        // A temperature still meets the core's range where it stands.
        let e = err(&MINIMAL.replace("knee_degc = 45", "knee_degc = 40000"));
        assert!(e.contains("line 22"), "{e}");
        assert!(e.contains("fixed-point range"), "{e}");
    }

    #[test]
    fn si_unit_keys_give_the_same_configuration() {
        let si = MINIMAL
            .replace("absolute_max_ma = 60", "absolute_max_a = 0.06")
            .replace("max_setpoint_mw = 30", "max_setpoint_w = 0.03")
            .replace("soft_start_ma_per_ms = 10", "soft_start_a_per_ms = 0.01")
            .replace("kp_ma_per_mw = 0.3", "kp_a_per_w = 0.3")
            .replace("ki_ma_per_mw_ms = 3", "ki_a_per_w_ms = 3")
            .replace("floor_ma = 20", "floor_a = 0.02")
            .replace("supply_min_mv = 4500", "supply_min_v = 4.5")
            .replace("supply_max_mv = 5500", "supply_max_v = 5.5");
        let a = parse_board(&si, Path::new("dir")).unwrap();
        let b = parse_board(MINIMAL, Path::new("dir")).unwrap();
        assert_eq!(a.config, b.config);
        assert_eq!(a.valid.fingerprint(), b.valid.fingerprint());
    }

    #[test]
    fn calibration_and_plausibility_keys_in_either_unit() {
        let cal = |dac: &str, sense: &str, allowance: &str| {
            MINIMAL.replace(
                "[calibration]\nfrom = \"module\"",
                &format!("[calibration]\nfrom = \"module\"\n[calibration.dac]\n{dac}\noffset_codes = 5\nmax_code = 4095\n[calibration.current_sense]\noffset_counts = 0\n{sense}\nfull_scale_counts = 4095"),
            ) + &format!("[plausibility]\njunction_rise_k = 5\nwarning_margin = 0.1\nfault_margin = 0.2\n{allowance}\ndebounce_ticks = 20\n")
        };
        let milli = cal(
            "codes_per_ma = 60",
            "ma_per_count = 0.02",
            "allowance_ma = 2",
        );
        let si = cal(
            "codes_per_a = 60000",
            "a_per_count = 0.00002",
            "allowance_a = 0.002",
        );
        let a = parse_board(&milli, Path::new("dir")).unwrap_or_else(|e| panic!("{e}"));
        let b = parse_board(&si, Path::new("dir")).unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(a.config, b.config);
        assert_eq!(a.config.calibration.dac.codes_per_iu, Fx::from_num(60));
        assert_eq!(a.config.plausibility.as_ref().unwrap().points.len(), 6);
        // A gain per count beyond the core's calibration gain.
        let e = err(&cal(
            "codes_per_ma = 60",
            "ma_per_count = 300",
            "allowance_ma = 2",
        )
        .replace(
            "ma_per_count = 300\nfull_scale_counts = 4095",
            "ma_per_count = 300\nfull_scale_counts = 100",
        ));
        assert!(
            e.contains("calibration.current_sense.ma_per_count = 300: 300 mA does not fit the core's calibration gain: accepted -127.99999994039536 ..= 127.99999994039536 mA"),
            "{e}"
        );
        // Nine plausibility temperatures.
        let e = err(&format!(
            "{}points_degc = [1, 2, 3, 4, 5, 6, 7, 8, 9]\n",
            cal(
                "codes_per_ma = 60",
                "ma_per_count = 0.02",
                "allowance_ma = 2"
            )
        ));
        assert!(e.contains("holds 1 to 8 temperatures"), "{e}");
        assert!(e.contains("points_degc"), "{e}");
    }

    #[test]
    fn a_table_temperature_beyond_the_cores_range_names_its_point() {
        let table = "[temperature]\nfrom = \"explicit\"\nlow_fault_counts = 40\nhigh_fault_counts = 4055\nopen_rail = \"high\"\ntable = [\n  { counts = 1000, degc = 90 },\n  { counts = 2048, degc = 40000 },\n]\n";
        let base = MINIMAL.split("[temperature]").next().unwrap().to_string();
        let e = err(&format!("{base}{table}"));
        assert!(
            e.contains("temperature.table = [")
                && e.contains("point 2: degc 40000 is outside the core's fixed-point range"),
            "{e}"
        );
    }

    #[test]
    fn exactly_one_of_the_two_unit_keys() {
        let e = err(&MINIMAL.replace("ceiling_ma = 50", "ceiling_ma = 50\nceiling_a = 0.05"));
        assert!(e.contains("line 8"), "{e}");
        assert!(
            e.contains("current.ceiling_a = 0.05: give one of `current.ceiling_ma` and `current.ceiling_a`, not both"),
            "{e}"
        );
        let e = err(&MINIMAL.replace("ceiling_ma = 50\n", ""));
        assert!(
            e.contains("current.ceiling_ma: missing: give `current.ceiling_ma` or, in the SI unit, `current.ceiling_a`"),
            "{e}"
        );
        // A refusal of the core names the key as written, and states the
        // limit in that key's unit (the other key keeps its spelling).
        let e = err(&MINIMAL.replace("overcurrent_ma = 55", "overcurrent_a = 0.045"));
        assert!(e.contains("line 26, column 17: protection.overcurrent_a = 0.045: must be above current.ceiling_ma = 0.05 A"), "{e}");
        // A value beyond the units, in the key's unit.
        let e = err(&MINIMAL.replace("mismatch_tolerance_ma = 5", "mismatch_tolerance_a = 1e6"));
        assert!(
            e.contains("protection.mismatch_tolerance_a = 1e6: 1000000 A does not fit the board's units: accepted -32.76799998474121 ..= 32.76799998474121 A"),
            "{e}"
        );
    }

    #[test]
    fn missing_module_file_names_the_key_and_the_built_in_ones() {
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
    fn core_refusals_name_the_key_line_and_value_in_file_units() {
        // Each was reported as a core enum or a wrong range before.
        let e = err(&MINIMAL.replace("soft_start_ma_per_ms = 10", "soft_start_ma_per_ms = 0.0001"));
        assert!(
            e.contains("line 13, column 24: ramp.soft_start_ma_per_ms = 0.0001"),
            "{e}"
        );
        assert!(
            e.contains("rounds to zero per tick at tick_hz = 20000; at least 0.000305 mA/ms"),
            "{e}"
        );
        assert!(!e.contains("SoftStart"), "{e}");
        let e = err(&MINIMAL
            .replace("soft_start_ma_per_ms = 10", "soft_start_ma_per_ms = 500")
            .replace("tick_hz = 20000", "tick_hz = 10"));
        assert!(e.contains("ramp.soft_start_ma_per_ms = 500"), "{e}");
        assert!(
            e.contains("is 50000 mA per tick at tick_hz = 10, beyond the 32767 mA per tick")
                && e.contains("at most 327 mA/ms"),
            "{e}"
        );
        assert!(!e.contains("rounds to zero"), "{e}");
        let e = err(&MINIMAL.replace(
            "overcurrent_debounce_ticks = 1",
            "overcurrent_debounce_ticks = 70000",
        ));
        assert!(e.contains("expected an integer in 0 ..= 65535"), "{e}");
        assert!(!e.contains("u16"), "{e}");
        let text = MINIMAL.replace(
            "[calibration]\nfrom = \"module\"",
            "[calibration]\nfrom = \"module\"\n[calibration.dac]\ncodes_per_ma = 60\noffset_codes = 5\nmax_code = 4095\n[calibration.supply]\noffset_counts = 4095\nmv_per_count = 2\nfull_scale_counts = 4095",
        );
        let e = err(&text);
        assert!(e.contains("calibration.supply.offset_counts = 4095"), "{e}");
        assert!(e.contains("0 ..= 4094 counts"), "{e}");
        assert!(!e.contains("Supply"), "{e}");
        let e = err(&MINIMAL.replace("overcurrent_ma = 55", "overcurrent_ma = 45"));
        assert!(
            e.contains("protection.overcurrent_ma = 45: must be above current.ceiling_ma = 50 mA"),
            "{e}"
        );
    }

    #[test]
    fn every_core_refusal_names_a_board_file_key() {
        // A refusal of each kind the file can cause maps to a key the file has.
        let file: BoardFile = toml::from_str(MINIMAL).unwrap();
        let b = parse_board(MINIMAL, Path::new("dir")).unwrap();
        let all = [
            ConfigError::TickRateZero,
            ConfigError::MissedTickLimitZero,
            ConfigError::TempTableTooShort { len: 1 },
            ConfigError::TempTableNotMonotonic { index: 3 },
            ConfigError::DebounceZero {
                fault: diodestat_core::Fault::SensorShort,
            },
            ConfigError::GainNotPositive {
                proportional: false,
                gain: Fx::ZERO,
            },
            ConfigError::CalibrationGainNotPositive {
                channel: diodestat_core::Channel::Dac,
            },
        ];
        for e in all {
            let (key, why) = refusal(&e, &b.config, &file, MINIMAL);
            assert!(
                place_of(MINIMAL, &key).is_some() || key.starts_with("calibration."),
                "{e:?} -> {key}"
            );
            assert!(!why.contains("Fx") && !why.contains("::"), "{why}");
        }
    }

    #[test]
    fn names_that_would_put_text_into_exported_source_are_refused() {
        for bad in ["a\\nfn evil() {}", "x\\\"", "a*/b", "", "a`b"] {
            let e = err(&MINIMAL.replace("name = \"t\"", &format!("name = \"{bad}\"")));
            assert!(e.contains("line 2, column 8: name"), "{bad}: {e}");
        }
        assert!(name_is_plain("Demo red 30 mW (rev. B) / 650-nm"));
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
        assert_eq!(b.config.calibration.dac.codes_per_iu, Fx::from_num(60));
        assert_eq!(b.config.calibration.dac.offset_codes, 5);
        let derived = parse_board(MINIMAL, Path::new("dir")).unwrap();
        assert_eq!(
            b.config.calibration.monitor,
            derived.config.calibration.monitor
        );
    }

    #[test]
    fn explicit_table_inline_and_misplaced_keys() {
        let table = "[temperature]\nfrom = \"explicit\"\nlow_fault_counts = 40\nhigh_fault_counts = 4055\nopen_rail = \"high\"\ntable = [\n  { counts = 1000, degc = 90 },\n  { counts = 2048, degc = 25 },\n  { counts = 3000, degc = 0 },\n]\n";
        let base = MINIMAL.split("[temperature]").next().unwrap().to_string();
        let b = parse_board(&format!("{base}{table}"), Path::new("dir")).unwrap();
        assert_eq!(b.config.calibration.temperature.table.len(), 3);
        assert_eq!(b.valid.counts_to_degc(2048), Fx::from_num(25));
        // A sensor-only key with an explicit table.
        let e = err(&format!("{base}{table}table_points = 5\n"));
        assert!(e.contains("temperature.table_points"), "{e}");
        // An explicit-only key with the sensor table.
        let e = err(&MINIMAL.replace("table_points = 25", "table_points = 25\ntable = []"));
        assert!(e.contains("temperature.table = []"), "{e}");
        // Too many sensor points.
        let e = err(&MINIMAL.replace("table_points = 25", "table_points = 40"));
        assert!(e.contains("holds 2 to 33"), "{e}");
    }

    #[test]
    fn explicit_table_from_csv_beside_the_file() {
        let dir = std::env::temp_dir().join(format!("diodestat-board_file-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(
            dir.join("ntc.csv"),
            "# demo\ncounts,degc\n1000,90\n2048,25.5\n3000,0\n",
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
        assert!(e.starts_with("BOARD: no/such/board.toml"), "{e}");
        let e = load_board_from(Path::new("/dev/zero"), "board")
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("board: /dev/zero"), "{e}");
        assert!(
            e.contains(&format!("{} bytes", files::MAX_INPUT_BYTES)),
            "{e}"
        );
    }
}
