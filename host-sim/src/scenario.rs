//! Scenario files (TOML, diodestat's own schema; see `docs/scenarios.md`):
//! which board file (and through it the module and the tick rate), the
//! duration, the ambient, timed events (requests, ambient changes,
//! injected hardware faults) and expectations (`[[expect]]`: what the run
//! must show; evaluated in `crate::expect`).

use std::fmt;
use std::path::{Path, PathBuf};

use diodestat_core::{Fault, State};
use serde::{Deserialize, Serialize};
use toml::Spanned;

use crate::locate::{keys, locate, plain_message, Place, Seg};
use crate::plant::DemoModule;

/// A whole scenario.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Scenario {
    /// Free-text name.
    pub name: String,
    /// Board configuration file, relative to the scenario file (see
    /// `docs/board-config.md`); it names the simulated module.
    pub board: String,
    /// Run length, ms.
    pub duration_ms: f64,
    /// Starting ambient, degC.
    pub ambient_c: f64,
    /// Noise seed.
    #[serde(default)]
    pub seed: u64,
    /// Diode model: quasi-static (default) or the dynamic rate equations.
    #[serde(default)]
    pub diode_model: DiodeModel,
    /// Write every n-th tick to the trace (1 = every tick).
    #[serde(default = "one")]
    pub trace_every: u32,
    /// How much faster the diode's aging clock runs than simulated time
    /// (1, the default: real time; 3.6e6: an hour of aging per simulated
    /// millisecond), so a run of seconds can show the threshold and slope
    /// drift of thousands of hours.
    #[serde(default = "real_time")]
    pub aging_speedup: f64,
    /// Timed events.
    #[serde(default, rename = "event")]
    pub events: Vec<Event>,
    /// Expectations, each with its place in the file.
    #[serde(default, rename = "expect", skip_serializing)]
    pub expects: Vec<Spanned<Expect>>,
}

fn one() -> u32 {
    1
}

fn real_time() -> f64 {
    1.0
}

/// Largest `aging_speedup`: 1e10 (a simulated second ages the diode by
/// about 2.8 million hours).
pub const MAX_AGING_SPEEDUP: f64 = 1e10;

impl Scenario {
    /// The time of the first event whose `do` is `name`, ms.
    pub fn first_event(&self, name: &str) -> Option<f64> {
        self.events
            .iter()
            .filter(|e| e.action.name() == name)
            .map(|e| e.at_ms)
            .reduce(f64::min)
    }

    /// The board file of a scenario read from `scenario_path`.
    pub fn board_path(&self, scenario_path: &Path) -> PathBuf {
        scenario_path
            .parent()
            .unwrap_or_else(|| Path::new(""))
            .join(&self.board)
    }
}

/// Which diode model to integrate.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum DiodeModel {
    /// Steady state of the rate equations at every tick.
    #[default]
    QuasiStatic,
    /// The rate equations integrated across each tick.
    Dynamic,
}

/// One timed event.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Event {
    /// When, ms from the start.
    pub at_ms: f64,
    /// What.
    #[serde(flatten)]
    pub action: Action,
}

/// What an event does.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "do", rename_all = "kebab-case")]
pub enum Action {
    /// Request emission.
    Enable,
    /// Request soft stop.
    Disable,
    /// APC power setpoint, mW.
    SetPower {
        /// Setpoint.
        mw: f64,
    },
    /// ACC current setpoint, mA.
    SetCurrent {
        /// Setpoint.
        ma: f64,
    },
    /// Switch mode.
    Mode {
        /// `apc` or `acc`.
        mode: ModeName,
    },
    /// Request a fault clear.
    Clear,
    /// Ambient steps to a value.
    AmbientStep {
        /// New ambient, degC.
        to_c: f64,
    },
    /// Ambient ramps linearly.
    AmbientRamp {
        /// Final ambient, degC.
        to_c: f64,
        /// Ramp duration, ms.
        over_ms: f64,
    },
    /// Inject a hardware fault.
    Inject {
        /// The fault.
        fault: HwFault,
    },
    /// Remove an injected hardware fault (repair).
    Repair {
        /// The fault.
        fault: HwFault,
    },
}

impl Action {
    /// Its `do` value in scenario files.
    pub fn name(&self) -> &'static str {
        match self {
            Action::Enable => "enable",
            Action::Disable => "disable",
            Action::SetPower { .. } => "set-power",
            Action::SetCurrent { .. } => "set-current",
            Action::Mode { .. } => "mode",
            Action::Clear => "clear",
            Action::AmbientStep { .. } => "ambient-step",
            Action::AmbientRamp { .. } => "ambient-ramp",
            Action::Inject { .. } => "inject",
            Action::Repair { .. } => "repair",
        }
    }
}

/// Mode names in scenario files.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ModeName {
    /// Automatic power control.
    Apc,
    /// Constant current.
    Acc,
}

/// Hardware faults the injector offers.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case", deny_unknown_fields)]
pub enum HwFault {
    /// Temperature sensor open circuit.
    SensorOpen,
    /// Temperature sensor short circuit.
    SensorShort,
    /// Monitor photodiode open.
    MonitorOpen,
    /// Monitor responsivity multiplied by `factor` (< 1 degrades).
    MonitorDegrade {
        /// Responsivity factor.
        factor: f64,
    },
    /// Current source fails high; only the enable line stops it.
    SourceFailHigh,
    /// DAC stuck at a code.
    DacStuck {
        /// Stuck code.
        code: u16,
    },
    /// Current-sense gain multiplied by `factor`.
    SenseGain {
        /// Gain factor.
        factor: f64,
    },
    /// Safety interlock opens.
    InterlockOpen,
    /// Supply sags to a voltage.
    SupplySag {
        /// Supply, V.
        to_v: f64,
    },
    /// Heatsink thermal resistance multiplied by `factor` (fan loss).
    HeatsinkLoss {
        /// Resistance factor.
        factor: f64,
    },
    /// The diode ages by `hours` at its aging reference conditions at once
    /// (a part aged before the run; the aging during the run follows the
    /// scenario's `aging_speedup`).
    Aging {
        /// Operating hours.
        hours: f64,
    },
    /// An ADC channel sticks at a code.
    AdcStuck {
        /// Channel.
        channel: AdcChannel,
        /// Code.
        code: u16,
    },
    /// The board misses `ticks` control ticks (outputs held).
    MissedTicks {
        /// Number of ticks.
        ticks: u32,
    },
    /// An intermittent monitor contact: the photodiode reads open on a
    /// random `open_fraction` of the ticks (seeded).
    MonitorIntermittent {
        /// Fraction of ticks open, 0 to 1.
        open_fraction: f64,
    },
    /// A slowly degrading monitor: its responsivity falls by `per_s` of
    /// its nominal value every second from the injection (never below 0).
    MonitorDrift {
        /// Loss of responsivity per second, fraction of nominal.
        per_s: f64,
    },
    /// The board's external fault input (a hardware comparator, a watchdog
    /// pre-warning) is asserted.
    ExternalFault,
    /// The current DAC's bus fails: writes do not reach the DAC, which
    /// keeps the code it had.
    DacBus,
    /// The enable line's output fails: writes do not reach the line, which
    /// stays at the level it had.
    EnablePin,
    /// The interlock input cannot be read.
    InterlockPin,
}

/// ADC channels of the simulated board.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum AdcChannel {
    /// Monitor photodiode.
    Monitor,
    /// Current sense.
    Current,
    /// Temperature.
    Temperature,
    /// Supply.
    Supply,
}

impl HwFault {
    /// A short stable name.
    pub fn name(&self) -> &'static str {
        match self {
            HwFault::SensorOpen => "sensor-open",
            HwFault::SensorShort => "sensor-short",
            HwFault::MonitorOpen => "monitor-open",
            HwFault::MonitorDegrade { .. } => "monitor-degrade",
            HwFault::SourceFailHigh => "source-fail-high",
            HwFault::DacStuck { .. } => "dac-stuck",
            HwFault::SenseGain { .. } => "sense-gain",
            HwFault::InterlockOpen => "interlock-open",
            HwFault::SupplySag { .. } => "supply-sag",
            HwFault::HeatsinkLoss { .. } => "heatsink-loss",
            HwFault::Aging { .. } => "aging",
            HwFault::AdcStuck { .. } => "adc-stuck",
            HwFault::MissedTicks { .. } => "missed-ticks",
            HwFault::MonitorIntermittent { .. } => "monitor-intermittent",
            HwFault::MonitorDrift { .. } => "monitor-drift",
            HwFault::ExternalFault => "external-fault",
            HwFault::DacBus => "dac-bus",
            HwFault::EnablePin => "enable-pin",
            HwFault::InterlockPin => "interlock-pin",
        }
    }
}

/// Longest run, ms of simulated time (one hour).
pub const MAX_DURATION_MS: f64 = 3_600_000.0;

/// Most control ticks in one run: the run's tick counter and the plant's
/// sample counter stay far from 32 bits, and a run ends in minutes.
pub const MAX_TICKS: f64 = 1e9;

/// Most rows in `trace.csv`. The trace streams to disk and the run keeps
/// a bounded number of rows in memory (`crate::trace`), so the bound is
/// the file: about 150 bytes a row, 1.5 GB at this many rows. A run whose
/// file would be larger is refused with the `trace_every` that makes it fit.
pub const MAX_TRACE_ROWS: f64 = 1e7;

/// Ambient range the plant models are run in, degC: the extended
/// temperature grade of electronic parts, -55 to +125 degC (common
/// practice).
pub const AMBIENT_RANGE_C: (f64, f64) = (-55.0, 125.0);

/// Largest magnitude of a setpoint in an event, the core's fixed-point
/// range (the core itself refuses setpoints outside the board's limits,
/// and the run shows the refusal).
pub const SETPOINT_LIMIT: f64 = 32767.0;

/// Accepted range of the `monitor-degrade` and `sense-gain` factors.
pub const GAIN_FACTOR_RANGE: (f64, f64) = (0.0, 10.0);

/// Accepted range of the `heatsink-loss` factor: a loss raises the
/// heatsink's thermal resistance; 1000 times is a stopped fan on a heatsink
/// that relied on it.
pub const HEATSINK_FACTOR_RANGE: (f64, f64) = (1.0, 1000.0);

/// Largest `aging` step, operating hours (about 114 years).
pub const MAX_AGING_HOURS: f64 = 1e6;

/// Longest text of `name`, characters.
pub const MAX_NAME_CHARS: usize = 200;

/// Why a scenario cannot be run.
#[derive(Clone, Debug, PartialEq)]
pub enum ScenarioError {
    /// Not valid TOML or not this schema: the TOML reader's message names
    /// the line, the column and what was expected.
    Parse {
        /// The message.
        message: String,
    },
    /// A value refused where it stands.
    Value {
        /// The key, as `event[2].fault.factor` (events counted from 1).
        key: String,
        /// Where it stands and how it is written.
        place: Option<Place>,
        /// What is wrong and what is accepted.
        why: String,
    },
}

impl fmt::Display for ScenarioError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ScenarioError::Parse { message } => write!(f, "{}", message.trim_end()),
            ScenarioError::Value {
                key,
                place: Some(p),
                why,
            } => write!(
                f,
                "line {}, column {}: {key} = {}: {why}",
                p.line, p.column, p.text
            ),
            ScenarioError::Value {
                key,
                place: None,
                why,
            } => write!(f, "{key}: {why}"),
        }
    }
}

impl std::error::Error for ScenarioError {}

/// One expectation: what the run must show. `name` is an optional label
/// for reports (the test case name in JUnit XML).
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(try_from = "RawExpect")]
pub struct Expect {
    /// Line of the entry in its file (1-based; 0 when not read from a file).
    pub line: usize,
    /// Optional label.
    pub name: Option<String>,
    /// What is checked.
    pub check: Check,
}

/// The kinds of expectation (`check = ...` in the file).
#[derive(Clone, Debug, PartialEq)]
pub enum Check {
    /// `check = "state"`: the controller is in `state` at `at_ms` (after
    /// the core's step of that tick).
    State {
        /// When, ms.
        at_ms: f64,
        /// The state.
        state: State,
    },
    /// `check = "fault"`: `fault` latches no later than `within_ms` after
    /// the reference (`after_ms`, the first injection `after_inject`, or
    /// the first event `after_event`),
    /// and not before it.
    Fault {
        /// The core's fault.
        fault: Fault,
        /// The reference moment.
        after: After,
        /// Deadline after the reference, ms.
        within_ms: f64,
    },
    /// `check = "power-band"`: front-facet optical power (the plant's, not
    /// the monitor reading) stays within `min_mw..=max_mw` at every tick
    /// from `from_ms` up to, not including, `to_ms`.
    PowerBand {
        /// Start of the interval, ms.
        from_ms: f64,
        /// End of the interval, ms.
        to_ms: f64,
        /// Lowest allowed power, mW.
        min_mw: f64,
        /// Highest allowed power, mW.
        max_mw: f64,
    },
    /// `check = "never-above"`: front-facet optical power never exceeds
    /// `mw` at any tick from `from_ms` (default 0) up to, not including,
    /// `to_ms` (default: to the end of the run).
    NeverAbove {
        /// The level, mW.
        mw: f64,
        /// Start of the interval, ms.
        from_ms: f64,
        /// End of the interval, ms (`None`: the end of the run).
        to_ms: Option<f64>,
    },
}

/// The reference moment of a fault deadline.
#[derive(Clone, Debug, PartialEq)]
pub enum After {
    /// A time, ms from the start (`after_ms`).
    Ms(f64),
    /// The first injection of this hardware fault kind (`after_inject`).
    Inject(String),
    /// The first event with this `do` (`after_event`), e.g. `ambient-step`.
    Event(String),
}

/// The file form of an expectation, checked into an [`Expect`].
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawExpect {
    check: String,
    name: Option<String>,
    at_ms: Option<f64>,
    state: Option<String>,
    fault: Option<String>,
    after_ms: Option<f64>,
    after_inject: Option<String>,
    after_event: Option<String>,
    within_ms: Option<f64>,
    from_ms: Option<f64>,
    to_ms: Option<f64>,
    min_mw: Option<f64>,
    max_mw: Option<f64>,
    mw: Option<f64>,
    tolerance_pct: Option<f64>,
}

/// Every `check` and the keys it takes (besides `check` and `name`).
const CHECK_KEYS: [(&str, &[&str]); 4] = [
    ("state", &["at_ms", "state"]),
    (
        "fault",
        &[
            "fault",
            "after_ms",
            "after_inject",
            "after_event",
            "within_ms",
        ],
    ),
    (
        "power-band",
        &[
            "from_ms",
            "to_ms",
            "min_mw",
            "max_mw",
            "mw",
            "tolerance_pct",
        ],
    ),
    ("never-above", &["mw", "from_ms", "to_ms"]),
];

/// Every controller state, for names in files.
const STATES: [State; 6] = [
    State::Off,
    State::Arming,
    State::Ramping,
    State::Regulating,
    State::Stopping,
    State::Latched,
];

impl RawExpect {
    /// The keys given, besides `check` and `name`, with their values.
    fn present(&self) -> Vec<(&'static str, String)> {
        let mut v = Vec::new();
        let mut num = |k: &'static str, x: Option<f64>| {
            if let Some(x) = x {
                v.push((k, x.to_string()));
            }
        };
        num("at_ms", self.at_ms);
        num("after_ms", self.after_ms);
        num("within_ms", self.within_ms);
        num("from_ms", self.from_ms);
        num("to_ms", self.to_ms);
        num("min_mw", self.min_mw);
        num("max_mw", self.max_mw);
        num("mw", self.mw);
        num("tolerance_pct", self.tolerance_pct);
        for (k, x) in [
            ("state", &self.state),
            ("fault", &self.fault),
            ("after_inject", &self.after_inject),
            ("after_event", &self.after_event),
        ] {
            if let Some(x) = x {
                v.push((k, format!("\"{x}\"")));
            }
        }
        v
    }
}

/// `key` is required by this check.
fn need<T: Clone>(check: &str, key: &str, v: &Option<T>) -> Result<T, String> {
    v.clone()
        .ok_or_else(|| format!("check = \"{check}\" needs `{key}`"))
}

/// A finite number `> 0` (`positive`) or `>= 0`.
fn number(key: &str, v: f64, positive: bool) -> Result<f64, String> {
    let ok = v.is_finite() && if positive { v > 0.0 } else { v >= 0.0 };
    if ok {
        Ok(v)
    } else {
        Err(format!(
            "`{key}` = {v} must be a finite number {}",
            if positive { "> 0" } else { ">= 0" }
        ))
    }
}

impl TryFrom<RawExpect> for Expect {
    type Error = String;

    fn try_from(r: RawExpect) -> Result<Self, String> {
        let c = r.check.as_str();
        let Some((_, keys)) = CHECK_KEYS.iter().find(|(k, _)| *k == c) else {
            let all: Vec<_> = CHECK_KEYS.iter().map(|(k, _)| *k).collect();
            return Err(format!(
                "`check` = \"{c}\" is not a check (expected one of: {})",
                all.join(", ")
            ));
        };
        for (k, v) in r.present() {
            if !keys.contains(&k) {
                return Err(format!(
                    "`{k}` = {v} does not belong to check = \"{c}\" (its keys: {})",
                    keys.join(", ")
                ));
            }
        }
        let check = match c {
            "state" => {
                let name = need(c, "state", &r.state)?;
                let state = STATES
                    .into_iter()
                    .find(|s| s.name() == name)
                    .ok_or_else(|| {
                        let all: Vec<_> = STATES.iter().map(|s| s.name()).collect();
                        format!(
                            "`state` = \"{name}\" is not a state (expected one of: {})",
                            all.join(", ")
                        )
                    })?;
                Check::State {
                    at_ms: number("at_ms", need(c, "at_ms", &r.at_ms)?, false)?,
                    state,
                }
            }
            "fault" => {
                let name = need(c, "fault", &r.fault)?;
                let fault = Fault::ALL
                    .into_iter()
                    .find(|f| f.name() == name)
                    .ok_or_else(|| {
                        let all: Vec<_> = Fault::ALL.iter().map(|f| f.name()).collect();
                        format!(
                            "`fault` = \"{name}\" is not a fault of the core (expected one of: {})",
                            all.join(", ")
                        )
                    })?;
                let after =
                    match (r.after_ms, r.after_inject, r.after_event) {
                        (Some(t), None, None) => After::Ms(number("after_ms", t, false)?),
                        (None, Some(kind), None) => After::Inject(kind),
                        (None, None, Some(event)) => After::Event(event),
                        _ => return Err(
                            "check = \"fault\" needs exactly one of `after_ms`, `after_inject` \
                             and `after_event`"
                                .into(),
                        ),
                    };
                Check::Fault {
                    fault,
                    after,
                    within_ms: number("within_ms", need(c, "within_ms", &r.within_ms)?, true)?,
                }
            }
            "power-band" => {
                let from_ms = number("from_ms", need(c, "from_ms", &r.from_ms)?, false)?;
                let to_ms = number("to_ms", need(c, "to_ms", &r.to_ms)?, false)?;
                let (min_mw, max_mw) = match (r.min_mw, r.max_mw, r.mw, r.tolerance_pct) {
                    (Some(lo), Some(hi), None, None) => {
                        (number("min_mw", lo, false)?, number("max_mw", hi, true)?)
                    }
                    (None, None, Some(mw), Some(pct)) => {
                        let mw = number("mw", mw, true)?;
                        let pct = number("tolerance_pct", pct, true)?;
                        if pct >= 100.0 {
                            return Err(format!("`tolerance_pct` = {pct} must be below 100"));
                        }
                        (mw * (1.0 - pct / 100.0), mw * (1.0 + pct / 100.0))
                    }
                    _ => {
                        return Err(
                            "check = \"power-band\" needs either `min_mw` and `max_mw`, \
                                    or `mw` and `tolerance_pct`"
                                .into(),
                        )
                    }
                };
                if min_mw > max_mw {
                    return Err(format!("`min_mw` = {min_mw} is above `max_mw` = {max_mw}"));
                }
                if from_ms >= to_ms {
                    return Err(format!(
                        "`to_ms` = {to_ms} must be after `from_ms` = {from_ms}"
                    ));
                }
                Check::PowerBand {
                    from_ms,
                    to_ms,
                    min_mw,
                    max_mw,
                }
            }
            _ => {
                let from_ms = number("from_ms", r.from_ms.unwrap_or(0.0), false)?;
                let to_ms = r.to_ms.map(|t| number("to_ms", t, false)).transpose()?;
                if let Some(t) = to_ms.filter(|&t| t <= from_ms) {
                    return Err(format!("`to_ms` = {t} must be after `from_ms` = {from_ms}"));
                }
                Check::NeverAbove {
                    mw: number("mw", need(c, "mw", &r.mw)?, true)?,
                    from_ms,
                    to_ms,
                }
            }
        };
        Ok(Expect {
            line: 0,
            name: r.name,
            check,
        })
    }
}

impl Expect {
    /// The times this expectation names, with their keys, ms.
    fn times(&self) -> Vec<(&'static str, f64)> {
        match &self.check {
            Check::State { at_ms, .. } => vec![("at_ms", *at_ms)],
            Check::Fault { after, .. } => match after {
                After::Ms(t) => vec![("after_ms", *t)],
                After::Inject(_) | After::Event(_) => vec![],
            },
            Check::PowerBand { from_ms, to_ms, .. } => {
                vec![("from_ms", *from_ms), ("to_ms", *to_ms)]
            }
            Check::NeverAbove { from_ms, to_ms, .. } => {
                let mut v = vec![("from_ms", *from_ms)];
                v.extend(to_ms.map(|t| ("to_ms", t)));
                v
            }
        }
    }
}

/// The error of the first malformed `[[expect]]` entry of `text`, with its
/// line (the TOML reader places such errors at the first entry of the
/// array, so they are looked for again entry by entry).
fn expect_error(text: &str) -> Option<String> {
    #[derive(Deserialize)]
    struct Entries {
        #[serde(default)]
        expect: Vec<Spanned<toml::Table>>,
    }
    let entries: Entries = toml::from_str(text).ok()?;
    entries.expect.into_iter().find_map(|e| {
        let line = line_of(text, e.span().start);
        toml::Value::Table(e.into_inner())
            .try_into::<Expect>()
            .err()
            .map(|err| format!("line {line}: [[expect]] {}", err.message()))
    })
}

/// Line (1-based) of a byte offset in `text`.
fn line_of(text: &str, offset: usize) -> usize {
    text.get(..offset).map_or(0, |s| s.matches('\n').count()) + 1
}

/// The checks of expectations against the rest of the scenario: times
/// inside the run, injections that the scenario makes.
fn check_expects(sc: &Scenario) -> Result<(), String> {
    let injected: Vec<&str> = sc
        .events
        .iter()
        .filter_map(|e| match &e.action {
            Action::Inject { fault } => Some(fault.name()),
            _ => None,
        })
        .collect();
    for e in &sc.expects {
        let x = e.get_ref();
        let line = x.line;
        for (key, t) in x.times() {
            if t > sc.duration_ms {
                return Err(format!(
                    "line {line}: [[expect]] `{key}` = {t} is after the end of the run \
                     (duration_ms = {})",
                    sc.duration_ms
                ));
            }
        }
        if let Check::Fault {
            after: After::Inject(kind),
            ..
        } = &x.check
        {
            if !injected.contains(&kind.as_str()) {
                return Err(format!(
                    "line {line}: [[expect]] `after_inject` = \"{kind}\" is not injected by any \
                     event of this scenario (injected: {})",
                    if injected.is_empty() {
                        "none".to_string()
                    } else {
                        injected.join(", ")
                    }
                ));
            }
        }
        if let Check::Fault {
            after: After::Event(name),
            ..
        } = &x.check
        {
            if sc.first_event(name).is_none() {
                let mut present: Vec<&str> = sc.events.iter().map(|e| e.action.name()).collect();
                present.dedup();
                return Err(format!(
                    "line {line}: [[expect]] `after_event` = \"{name}\" is no event of this \
                     scenario (its events: {})",
                    if present.is_empty() {
                        "none".to_string()
                    } else {
                        present.join(", ")
                    }
                ));
            }
        }
    }
    Ok(())
}

/// Builds errors for values at their place in one file.
struct Where<'t> {
    text: &'t str,
}

impl Where<'_> {
    fn err(&self, path: &[Seg<'_>], why: String) -> ScenarioError {
        ScenarioError::Value {
            key: key_name(path),
            place: locate(self.text, path),
            why,
        }
    }

    /// `v` must be finite and within `lo ..= hi` (`unit` as written in docs).
    fn range(
        &self,
        path: &[Seg<'_>],
        v: f64,
        lo: f64,
        hi: f64,
        unit: &str,
    ) -> Result<(), ScenarioError> {
        if v.is_finite() && v >= lo && v <= hi {
            Ok(())
        } else {
            Err(self.err(
                path,
                format!("must be a finite number in {lo} ..= {hi}{unit}"),
            ))
        }
    }
}

/// `event[2].fault.factor` from a key path (events counted from 1, as a
/// reader counts them in the file).
fn key_name(path: &[Seg<'_>]) -> String {
    let mut s = String::new();
    for seg in path {
        match seg {
            Seg::Key(k) => {
                if !s.is_empty() {
                    s.push('.');
                }
                s.push_str(k);
            }
            Seg::Index(i) => s.push_str(&format!("[{}]", i + 1)),
        }
    }
    s
}

/// The keys an event of kind `do` may have.
fn event_keys(action: &Action) -> &'static [&'static str] {
    match action {
        Action::Enable | Action::Disable | Action::Clear => &["at_ms", "do"],
        Action::SetPower { .. } => &["at_ms", "do", "mw"],
        Action::SetCurrent { .. } => &["at_ms", "do", "ma"],
        Action::Mode { .. } => &["at_ms", "do", "mode"],
        Action::AmbientStep { .. } => &["at_ms", "do", "to_c"],
        Action::AmbientRamp { .. } => &["at_ms", "do", "to_c", "over_ms"],
        Action::Inject { .. } | Action::Repair { .. } => &["at_ms", "do", "fault"],
    }
}

/// Largest monitor drift, fraction of the nominal responsivity per second.
pub const MAX_DRIFT_PER_S: f64 = 1000.0;

/// The keys a fault table may have.
fn fault_keys(f: &HwFault) -> &'static [&'static str] {
    match f {
        HwFault::MonitorDegrade { .. }
        | HwFault::SenseGain { .. }
        | HwFault::HeatsinkLoss { .. } => &["kind", "factor"],
        HwFault::DacStuck { .. } => &["kind", "code"],
        HwFault::SupplySag { .. } => &["kind", "to_v"],
        HwFault::Aging { .. } => &["kind", "hours"],
        HwFault::AdcStuck { .. } => &["kind", "channel", "code"],
        HwFault::MissedTicks { .. } => &["kind", "ticks"],
        HwFault::MonitorIntermittent { .. } => &["kind", "open_fraction"],
        HwFault::MonitorDrift { .. } => &["kind", "per_s"],
        HwFault::SensorOpen
        | HwFault::SensorShort
        | HwFault::MonitorOpen
        | HwFault::SourceFailHigh
        | HwFault::InterlockOpen
        | HwFault::ExternalFault
        | HwFault::DacBus
        | HwFault::EnablePin
        | HwFault::InterlockPin => &["kind"],
    }
}

fn unknown_keys(
    w: &Where<'_>,
    path: &[Seg<'_>],
    allowed: &[&str],
    what: &str,
) -> Result<(), ScenarioError> {
    for (k, place) in keys(w.text, path) {
        if !allowed.contains(&k.as_str()) {
            let mut p = path.to_vec();
            p.push(Seg::Key(&k));
            return Err(ScenarioError::Value {
                key: key_name(&p),
                place: Some(place),
                why: format!(
                    "unknown key for {what}; expected one of {}",
                    allowed.join(", ")
                ),
            });
        }
    }
    Ok(())
}

/// Parse a scenario and refuse, at its place in the file, every value that
/// cannot be run whatever the board: non-finite or physically meaningless
/// numbers, events at or after the end of the run, unknown keys inside
/// events, a run longer than [`MAX_DURATION_MS`]. [`check_for_board`] then
/// checks what depends on the board.
pub fn parse(text: &str) -> Result<Scenario, ScenarioError> {
    let mut sc: Scenario = toml::from_str(text).map_err(|e| ScenarioError::Parse {
        message: expect_error(text).unwrap_or_else(|| plain_message(&e.to_string())),
    })?;
    for e in &mut sc.expects {
        let line = line_of(text, e.span().start);
        e.get_mut().line = line;
    }
    let w = Where { text };
    if sc.name.chars().count() > MAX_NAME_CHARS || sc.name.chars().any(char::is_control) {
        return Err(w.err(
            &[Seg::Key("name")],
            format!("must be one line of at most {MAX_NAME_CHARS} characters"),
        ));
    }
    if !(sc.duration_ms > 0.0 && sc.duration_ms <= MAX_DURATION_MS) {
        return Err(w.err(
            &[Seg::Key("duration_ms")],
            format!("must be a number in (0, {MAX_DURATION_MS}] ms (one hour of simulated time)"),
        ));
    }
    let (alo, ahi) = AMBIENT_RANGE_C;
    w.range(&[Seg::Key("ambient_c")], sc.ambient_c, alo, ahi, " degC")?;
    if sc.trace_every == 0 {
        return Err(w.err(&[Seg::Key("trace_every")], "must be at least 1".into()));
    }
    w.range(
        &[Seg::Key("aging_speedup")],
        sc.aging_speedup,
        0.0,
        MAX_AGING_SPEEDUP,
        "",
    )?;
    for (i, e) in sc.events.iter().enumerate() {
        let ev = [Seg::Key("event"), Seg::Index(i)];
        let at = |k: &'static str| [ev[0], ev[1], Seg::Key(k)];
        unknown_keys(&w, &ev, event_keys(&e.action), "this event")?;
        if !(e.at_ms >= 0.0 && e.at_ms < sc.duration_ms) {
            return Err(w.err(
                &at("at_ms"),
                format!(
                    "must be in 0 ..< duration_ms = {} ms (an event at or after the end never happens)",
                    sc.duration_ms
                ),
            ));
        }
        let lim = SETPOINT_LIMIT;
        match &e.action {
            Action::SetPower { mw } => w.range(&at("mw"), *mw, -lim, lim, " mW")?,
            Action::SetCurrent { ma } => w.range(&at("ma"), *ma, -lim, lim, " mA")?,
            Action::AmbientStep { to_c } => w.range(&at("to_c"), *to_c, alo, ahi, " degC")?,
            Action::AmbientRamp { to_c, over_ms } => {
                w.range(&at("to_c"), *to_c, alo, ahi, " degC")?;
                if !(*over_ms > 0.0 && *over_ms <= MAX_DURATION_MS) {
                    return Err(w.err(
                        &at("over_ms"),
                        format!("must be a number in (0, {MAX_DURATION_MS}] ms"),
                    ));
                }
            }
            Action::Inject { fault } | Action::Repair { fault } => {
                let fp = [ev[0], ev[1], Seg::Key("fault")];
                unknown_keys(&w, &fp, fault_keys(fault), "this fault")?;
                let fk = |k: &'static str| [ev[0], ev[1], Seg::Key("fault"), Seg::Key(k)];
                match *fault {
                    HwFault::MonitorDegrade { factor } | HwFault::SenseGain { factor } => {
                        let (lo, hi) = GAIN_FACTOR_RANGE;
                        w.range(&fk("factor"), factor, lo, hi, "")?;
                    }
                    HwFault::HeatsinkLoss { factor } => {
                        let (lo, hi) = HEATSINK_FACTOR_RANGE;
                        w.range(&fk("factor"), factor, lo, hi, "")?;
                    }
                    HwFault::SupplySag { to_v } => {
                        // The board's nominal supply bounds it in check_for_board.
                        w.range(&fk("to_v"), to_v, 0.0, f64::MAX, " V")?;
                    }
                    HwFault::Aging { hours } => {
                        w.range(&fk("hours"), hours, 0.0, MAX_AGING_HOURS, " h")?;
                    }
                    HwFault::MissedTicks { ticks: 0 } => {
                        return Err(w.err(&fk("ticks"), "must be at least 1".into()));
                    }
                    HwFault::MonitorIntermittent { open_fraction } => {
                        w.range(&fk("open_fraction"), open_fraction, 0.0, 1.0, "")?;
                    }
                    HwFault::MonitorDrift { per_s } => {
                        // Above 1000 per second the monitor is gone within a
                        // tick: that is monitor-open, not a drift.
                        w.range(&fk("per_s"), per_s, 0.0, MAX_DRIFT_PER_S, " /s")?;
                    }
                    _ => {}
                }
            }
            Action::Enable | Action::Disable | Action::Clear | Action::Mode { .. } => {}
        }
    }
    check_expects(&sc).map_err(|message| ScenarioError::Parse { message })?;
    Ok(sc)
}

/// Refuse, at its place in the file, what a scenario asks of a board that
/// the board cannot give: more ticks than [`MAX_TICKS`], a trace longer
/// than [`MAX_TRACE_ROWS`], a supply sag above the module's nominal supply,
/// a stuck code beyond the converter's range. `text` is the scenario file's
/// text, `tick_hz` the board's tick rate.
pub fn check_for_board(
    sc: &Scenario,
    text: &str,
    tick_hz: u32,
    module: &DemoModule,
) -> Result<(), ScenarioError> {
    let w = Where { text };
    let ticks = (sc.duration_ms * 1e-3 * f64::from(tick_hz)).round();
    if ticks > MAX_TICKS {
        return Err(w.err(
            &[Seg::Key("duration_ms")],
            format!(
                "{ticks:.0} ticks at the board's {tick_hz} Hz; a run has at most {MAX_TICKS:.0} ticks ({:.0} ms at this rate)",
                MAX_TICKS / f64::from(tick_hz) * 1e3
            ),
        ));
    }
    let rows = (ticks / f64::from(sc.trace_every)).ceil();
    if rows > MAX_TRACE_ROWS {
        let need = (ticks / MAX_TRACE_ROWS).ceil();
        return Err(w.err(
            &[Seg::Key("duration_ms")],
            format!(
                "with trace_every = {} trace.csv would have {rows:.0} rows, more than the {MAX_TRACE_ROWS:.0} (about 1.5 GB) it may hold; \
                 set trace_every to at least {need:.0} or shorten the run",
                sc.trace_every
            ),
        ));
    }
    let max_code = |bits: u8| (1u32 << bits.min(16)) - 1;
    for (i, e) in sc.events.iter().enumerate() {
        let (Action::Inject { fault } | Action::Repair { fault }) = &e.action else {
            continue;
        };
        let fk = |k: &'static str| {
            [
                Seg::Key("event"),
                Seg::Index(i),
                Seg::Key("fault"),
                Seg::Key(k),
            ]
        };
        match *fault {
            HwFault::SupplySag { to_v } => w.range(
                &fk("to_v"),
                to_v,
                0.0,
                module.supply_v,
                " V (a sag from the module's nominal supply)",
            )?,
            HwFault::DacStuck { code } => {
                let hi = max_code(module.driver.dac_bits);
                if u32::from(code) > hi {
                    return Err(w.err(
                        &fk("code"),
                        format!(
                            "must be a DAC code in 0 ..= {hi} ({}-bit DAC)",
                            module.driver.dac_bits
                        ),
                    ));
                }
            }
            HwFault::AdcStuck { channel, code } => {
                let bits = match channel {
                    AdcChannel::Temperature => module.sensor.front_end.adc_bits,
                    _ => module.adc.bits,
                };
                let hi = max_code(bits);
                if u32::from(code) > hi {
                    return Err(w.err(
                        &fk("code"),
                        format!("must be an ADC code in 0 ..= {hi} ({bits}-bit converter)"),
                    ));
                }
            }
            _ => {}
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_events() {
        let sc = parse(
            r#"
name = "t"
board = "board.toml"
duration_ms = 10
ambient_c = 25
[[event]]
at_ms = 1
do = "set-power"
mw = 5
[[event]]
at_ms = 2
do = "inject"
fault = { kind = "adc-stuck", channel = "monitor", code = 3 }
"#,
        )
        .unwrap();
        assert_eq!(sc.events.len(), 2);
        assert_eq!(sc.events[0].action, Action::SetPower { mw: 5.0 });
        assert_eq!(
            sc.board_path(Path::new("examples/x/s.toml")),
            Path::new("examples/x/board.toml")
        );
    }

    #[test]
    fn the_module_key_is_gone_the_board_names_it() {
        let err = parse("name = \"t\"\nmodule = \"visible\"\nduration_ms = 1\nambient_c = 1\n")
            .unwrap_err()
            .to_string();
        assert!(err.contains("unknown field `module`"), "{err}");
        assert!(err.contains("board"), "{err}");
    }

    const EXPECT_HEAD: &str = "name = \"t\"\nboard = \"b.toml\"\nduration_ms = 100\nambient_c = 25\n\
                        [[event]]\nat_ms = 50\ndo = \"inject\"\nfault = { kind = \"monitor-open\" }\n";

    /// The scenario head (8 lines) with `tail` after it.
    fn with(tail: &str) -> Result<Scenario, String> {
        parse(&format!("{EXPECT_HEAD}{tail}")).map_err(|e| e.to_string())
    }

    #[test]
    fn parses_every_kind_of_expectation_with_its_line() {
        let sc = with(
            "[[expect]]\ncheck = \"state\"\nat_ms = 10\nstate = \"regulating\"\n\
             [[expect]]\nname = \"trips\"\ncheck = \"fault\"\nfault = \"monitor-loss\"\n\
             after_inject = \"monitor-open\"\nwithin_ms = 2\n\
             [[expect]]\ncheck = \"power-band\"\nfrom_ms = 10\nto_ms = 20\nmw = 20\n\
             tolerance_pct = 1\n\
             [[expect]]\ncheck = \"power-band\"\nfrom_ms = 10\nto_ms = 20\nmin_mw = 1\n\
             max_mw = 2\n\
             [[expect]]\ncheck = \"never-above\"\nmw = 30\n\
             [[expect]]\ncheck = \"fault\"\nfault = \"overcurrent\"\nafter_ms = 5\n\
             within_ms = 0.1\n",
        )
        .unwrap();
        let x: Vec<&Expect> = sc.expects.iter().map(|e| e.get_ref()).collect();
        assert_eq!(x.len(), 6);
        assert_eq!(x[0].line, 9);
        assert_eq!(
            x[0].check,
            Check::State {
                at_ms: 10.0,
                state: State::Regulating
            }
        );
        assert_eq!(x[1].name.as_deref(), Some("trips"));
        assert_eq!(
            x[1].check,
            Check::Fault {
                fault: Fault::MonitorLoss,
                after: After::Inject("monitor-open".into()),
                within_ms: 2.0
            }
        );
        let Check::PowerBand { min_mw, max_mw, .. } = x[2].check else {
            panic!("{:?}", x[2].check)
        };
        assert!((min_mw - 19.8).abs() < 1e-12 && (max_mw - 20.2).abs() < 1e-12);
        assert_eq!(
            x[3].check,
            Check::PowerBand {
                from_ms: 10.0,
                to_ms: 20.0,
                min_mw: 1.0,
                max_mw: 2.0
            }
        );
        assert_eq!(
            x[4].check,
            Check::NeverAbove {
                mw: 30.0,
                from_ms: 0.0,
                to_ms: None
            }
        );
        assert_eq!(
            x[5].check,
            Check::Fault {
                fault: Fault::Overcurrent,
                after: After::Ms(5.0),
                within_ms: 0.1
            }
        );
    }

    /// Every malformed expectation is refused with its line and the key.
    #[test]
    fn malformed_expectations_are_refused_with_line_and_key() {
        let cases: [(&str, &[&str]); 15] = [
            (
                "check = \"fault\"\nfault = \"over-temperature\"\nafter_event = \"ambient-step\"\n\
                 within_ms = 1",
                &[
                    "`after_event` = \"ambient-step\" is no event",
                    "its events: inject",
                ],
            ),
            (
                "check = \"sometimes\"",
                &["`check` = \"sometimes\"", "never-above"],
            ),
            (
                "check = \"state\"\nat_ms = 1\nstate = \"regulatin\"",
                &["`state` = \"regulatin\"", "regulating"],
            ),
            (
                "check = \"fault\"\nfault = \"overcurent\"\nafter_ms = 1\nwithin_ms = 1",
                &["`fault` = \"overcurent\"", "overcurrent"],
            ),
            (
                "check = \"state\"\nat_ms = 1\nstate = \"off\"\nmw = 3",
                &["`mw` = 3 does not belong to check = \"state\""],
            ),
            (
                "check = \"state\"\nat_ms = 1\nstate = \"off\"\ncolour = 3",
                &["unknown field `colour`"],
            ),
            ("check = \"state\"\nstate = \"off\"", &["needs `at_ms`"]),
            (
                "check = \"fault\"\nfault = \"overcurrent\"\nafter_ms = 1\n\
                 after_inject = \"monitor-open\"\nwithin_ms = 1",
                &["exactly one of `after_ms`, `after_inject` and `after_event`"],
            ),
            (
                "check = \"fault\"\nfault = \"overcurrent\"\nafter_ms = 1\nwithin_ms = 0",
                &["`within_ms` = 0 must be a finite number > 0"],
            ),
            (
                "check = \"never-above\"\nmw = nan",
                &["`mw` = NaN must be a finite number > 0"],
            ),
            (
                "check = \"power-band\"\nfrom_ms = 1\nto_ms = 2\nmin_mw = 3\nmax_mw = 2",
                &["`min_mw` = 3 is above `max_mw` = 2"],
            ),
            (
                "check = \"power-band\"\nfrom_ms = 2\nto_ms = 2\nmw = 3\ntolerance_pct = 1",
                &["`to_ms` = 2 must be after `from_ms` = 2"],
            ),
            (
                "check = \"power-band\"\nfrom_ms = 1\nto_ms = 2\nmw = 3\nmax_mw = 4",
                &["either `min_mw` and `max_mw`, or `mw` and `tolerance_pct`"],
            ),
            (
                "check = \"state\"\nat_ms = 150\nstate = \"off\"",
                &["`at_ms` = 150 is after the end of the run (duration_ms = 100)"],
            ),
            (
                "check = \"fault\"\nfault = \"overcurrent\"\nafter_inject = \"sensor-open\"\n\
                 within_ms = 1",
                &["`after_inject` = \"sensor-open\"", "injected: monitor-open"],
            ),
        ];
        for (body, wanted) in cases {
            // One good entry first, so the bad one is the second, at line 12.
            let err = with(&format!(
                "[[expect]]\ncheck = \"never-above\"\nmw = 1\n[[expect]]\n{body}\n"
            ))
            .unwrap_err();
            assert!(err.contains("line 12"), "{body}: {err}");
            for w in wanted {
                assert!(err.contains(w), "{body}: wanted `{w}` in: {err}");
            }
        }
    }

    proptest::proptest! {
        /// Any mix of expectation keys and values parses or is refused with
        /// a line; never a panic.
        #[test]
        fn any_expectation_parses_or_is_refused_with_a_line(
            entries in proptest::collection::vec(
                proptest::collection::vec((0usize..16, 0usize..12), 0..6),
                1..4,
            )
        ) {
            const KEYS: [&str; 16] = [
                "check", "name", "at_ms", "state", "fault", "after_ms", "after_inject",
                "after_event", "within_ms", "from_ms", "to_ms", "min_mw", "max_mw", "mw",
                "tolerance_pct", "colour",
            ];
            const VALUES: [&str; 12] = [
                "\"state\"", "\"fault\"", "\"power-band\"", "\"never-above\"",
                "\"monitor-open\"", "\"inject\"", "\"latched\"", "nan", "inf", "-1", "5",
                "1e300",
            ];
            let mut tail = String::new();
            for e in &entries {
                tail.push_str("[[expect]]\n");
                let mut seen = Vec::new();
                for &(k, v) in e {
                    if !seen.contains(&k) {
                        seen.push(k);
                        tail.push_str(&format!("{} = {}\n", KEYS[k], VALUES[v]));
                    }
                }
            }
            if let Err(e) = with(&tail) {
                proptest::prop_assert!(e.contains("line "), "{}", e);
            }
        }
    }

    #[test]
    fn malformed_names_line_and_column() {
        let err = parse("name = \"t\"\nboard = \"b.toml\"\nduration_ms = \"x\"\nambient_c = 1\n")
            .unwrap_err()
            .to_string();
        assert!(err.contains("line 3"), "{err}");
    }

    const HEAD: &str = "name = \"t\"\nboard = \"b.toml\"\nduration_ms = 10\nambient_c = 25\n";

    fn refused(tail: &str) -> String {
        parse(&format!("{HEAD}{tail}")).unwrap_err().to_string()
    }

    #[test]
    fn non_finite_setpoint_is_refused_where_it_stands() {
        let e = refused("[[event]]\nat_ms = 1\ndo = \"set-power\"\nmw = nan\n");
        assert!(e.starts_with("line 8, column 6: event[1].mw = nan"), "{e}");
        assert!(e.contains("-32767 ..= 32767 mW"), "{e}");
    }

    #[test]
    fn events_at_or_after_the_end_are_refused() {
        let e = refused("[[event]]\nat_ms = 10\ndo = \"enable\"\n");
        assert!(e.contains("event[1].at_ms = 10"), "{e}");
        assert!(e.contains("never happens"), "{e}");
        assert!(parse(&format!("{HEAD}[[event]]\nat_ms = 9.9\ndo = \"enable\"\n")).is_ok());
    }

    #[test]
    fn unknown_keys_inside_events_and_faults_are_refused() {
        let e = refused("[[event]]\nat_ms = 1\ndo = \"set-power\"\nmw = 3\nma = 4\n");
        assert!(e.contains("line 9, column 1: event[1].ma"), "{e}");
        assert!(e.contains("expected one of at_ms, do, mw"), "{e}");
        let e = refused(
            "[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = { kind = \"sensor-open\", factor = 2 }\n",
        );
        assert!(e.contains("event[1].fault.factor"), "{e}");
        // Every fault kind with parameters names its own keys.
        assert!(parse(&format!(
            "{HEAD}[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = {{ kind = \"monitor-drift\", per_s = 0.5 }}\n"
        ))
        .is_ok());
        let e = refused(
            "[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = { kind = \"monitor-drift\", per_s = 0.1, factor = 2 }\n",
        );
        assert!(e.contains("factor") && e.contains("per_s"), "{e}");
    }

    #[test]
    fn physically_meaningless_fault_parameters_are_refused() {
        for (fault, key) in [
            ("{ kind = \"heatsink-loss\", factor = 0 }", "factor"),
            ("{ kind = \"heatsink-loss\", factor = inf }", "factor"),
            ("{ kind = \"monitor-degrade\", factor = -1 }", "factor"),
            ("{ kind = \"sense-gain\", factor = nan }", "factor"),
            ("{ kind = \"supply-sag\", to_v = -1 }", "to_v"),
            ("{ kind = \"aging\", hours = 1e300 }", "hours"),
            ("{ kind = \"missed-ticks\", ticks = 0 }", "ticks"),
            (
                "{ kind = \"monitor-intermittent\", open_fraction = 1.5 }",
                "open_fraction",
            ),
            (
                "{ kind = \"monitor-intermittent\", open_fraction = nan }",
                "open_fraction",
            ),
            ("{ kind = \"monitor-drift\", per_s = -0.1 }", "per_s"),
            ("{ kind = \"monitor-drift\", per_s = inf }", "per_s"),
        ] {
            let e = refused(&format!(
                "[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = {fault}\n"
            ));
            assert!(e.contains(&format!("event[1].fault.{key}")), "{e}");
            assert!(e.contains("line 8"), "{e}");
        }
    }

    #[test]
    fn aging_speedup_outside_its_range_is_refused() {
        for bad in ["-1", "nan", "1e11"] {
            let e = refused(&format!("aging_speedup = {bad}\n"));
            assert!(e.contains(&format!("aging_speedup = {bad}")), "{e}");
            assert!(e.contains("10000000000"), "{e}");
        }
        assert_eq!(parse(HEAD).unwrap().aging_speedup, 1.0);
    }

    #[test]
    fn ambient_outside_the_model_range_is_refused() {
        let e = parse(&HEAD.replace("ambient_c = 25", "ambient_c = inf"))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("ambient_c = inf") && e.contains("-55 ..= 125 degC"),
            "{e}"
        );
        let e = refused("[[event]]\nat_ms = 1\ndo = \"ambient-step\"\nto_c = 1e308\n");
        assert!(e.contains("event[1].to_c = 1e308"), "{e}");
        let e = refused("[[event]]\nat_ms = 1\ndo = \"ambient-ramp\"\nto_c = 30\nover_ms = 0\n");
        assert!(e.contains("event[1].over_ms"), "{e}");
    }

    #[test]
    fn duration_is_bounded_and_the_trace_must_fit() {
        let e = parse(&HEAD.replace("duration_ms = 10", "duration_ms = 1e7"))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("duration_ms = 1e7") && e.contains("3600000"),
            "{e}"
        );
        let m = DemoModule::visible();
        let text = HEAD.replace("duration_ms = 10", "duration_ms = 3600000");
        let sc = parse(&text).unwrap();
        let e = check_for_board(&sc, &text, 20_000, &m)
            .unwrap_err()
            .to_string();
        assert!(e.contains("set trace_every to at least 8"), "{e}");
        let text = format!("{text}trace_every = 8\n");
        let sc = parse(&text).unwrap();
        check_for_board(&sc, &text, 20_000, &m).unwrap();
        let e = check_for_board(&sc, &text, 1_000_000, &m)
            .unwrap_err()
            .to_string();
        assert!(e.contains("at most 1000000000 ticks"), "{e}");
    }

    #[test]
    fn board_dependent_fault_values_are_refused() {
        let m = DemoModule::visible();
        for fault in [
            "{ kind = \"supply-sag\", to_v = 12 }",
            "{ kind = \"dac-stuck\", code = 65535 }",
            "{ kind = \"adc-stuck\", channel = \"monitor\", code = 65535 }",
        ] {
            let text = format!("{HEAD}[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = {fault}\n");
            let sc = parse(&text).unwrap();
            let e = check_for_board(&sc, &text, 20_000, &m)
                .unwrap_err()
                .to_string();
            assert!(e.contains("line 8") && e.contains("event[1].fault."), "{e}");
        }
    }
}
