//! Scenario files (TOML, diodestat's own schema; see `docs/scenarios.md`):
//! which board file (and through it the module and the tick rate), the
//! duration, the ambient, and timed events (requests, ambient changes,
//! injected hardware faults).

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

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
}

fn one() -> u32 {
    1
}

impl Scenario {
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
        }
    }
}

/// Parse a scenario; the error names the line, column and what was expected.
pub fn parse(text: &str) -> Result<Scenario, String> {
    let sc: Scenario = toml::from_str(text).map_err(|e| e.to_string())?;
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

    #[test]
    fn malformed_names_line_and_column() {
        let err = parse("name = \"t\"\nboard = \"b.toml\"\nduration_ms = \"x\"\nambient_c = 1\n")
            .unwrap_err();
        assert!(err.contains("line 3"), "{err}");
    }
}
