//! Scenario files (TOML, diodestat's own schema; see `docs/scenarios.md`):
//! which board file (and through it the module and the tick rate), the
//! duration, the ambient, timed events (requests, ambient changes,
//! injected hardware faults) and expectations (`[[expect]]`: what the run
//! must show; evaluated in `crate::expect`).

use std::path::{Path, PathBuf};

use diodestat_core::{Fault, State};
use serde::{Deserialize, Serialize};
use toml::Spanned;

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
    /// The diode ages by `hours` at once.
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
        }
    }
}

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

/// Parse a scenario; the error names the line, column and what was expected.
pub fn parse(text: &str) -> Result<Scenario, String> {
    let mut sc: Scenario =
        toml::from_str(text).map_err(|e| expect_error(text).unwrap_or(e.to_string()))?;
    for e in &mut sc.expects {
        let line = line_of(text, e.span().start);
        e.get_mut().line = line;
    }
    if !(sc.duration_ms > 0.0 && sc.duration_ms.is_finite()) {
        return Err("duration_ms must be a positive number".into());
    }
    if sc.trace_every == 0 {
        return Err("trace_every must be at least 1".into());
    }
    for e in &sc.events {
        if !(e.at_ms >= 0.0 && e.at_ms.is_finite()) {
            return Err(format!("event at_ms {} must be >= 0", e.at_ms));
        }
    }
    check_expects(&sc)?;
    Ok(sc)
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
            .unwrap_err();
        assert!(err.contains("unknown field `module`"), "{err}");
        assert!(err.contains("board"), "{err}");
    }

    const HEAD: &str = "name = \"t\"\nboard = \"b.toml\"\nduration_ms = 100\nambient_c = 25\n\
                        [[event]]\nat_ms = 50\ndo = \"inject\"\nfault = { kind = \"monitor-open\" }\n";

    /// The scenario head (8 lines) with `tail` after it.
    fn with(tail: &str) -> Result<Scenario, String> {
        parse(&format!("{HEAD}{tail}"))
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
            .unwrap_err();
        assert!(err.contains("line 3"), "{err}");
    }
}
