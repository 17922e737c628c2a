//! What a board hands the core each tick ([`Sample`]) and what it applies
//! from the answer ([`Drive`], with its [`Status`]).

use crate::fault::FaultSet;

/// One tick's raw measurements. Counts are straight from the ADCs; the core
/// applies the calibration.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Sample {
    /// Tick index, incremented by one every tick by the board (wraps at
    /// `u32::MAX`). A larger step is a missed tick.
    pub tick: u32,
    /// Monitor photodiode channel, counts.
    pub monitor_counts: u16,
    /// Drive-current sense channel, counts.
    pub current_counts: u16,
    /// Temperature sensor channel, counts.
    pub temp_counts: u16,
    /// Supply voltage channel, counts.
    pub supply_counts: u16,
    /// Safety interlock: `true` when closed (emission permitted).
    pub interlock_closed: bool,
    /// Forward-voltage channel, counts, on boards that measure it (`None`
    /// otherwise; see [`crate::config::ForwardVoltage`]).
    pub forward_counts: Option<u16>,
    /// The board's external fault input (a hardware comparator trip, a
    /// watchdog pre-warning): `true` when asserted. Boards without one
    /// pass `false`.
    pub external_fault: bool,
}

/// Controller state. See [`crate::Controller`] for the transitions.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum State {
    /// No current; enable low.
    #[default]
    Off,
    /// Emission delay running; enable low.
    Arming,
    /// Soft start in current mode.
    Ramping,
    /// Closed-loop APC or ACC.
    Regulating,
    /// Soft stop ramp to zero.
    Stopping,
    /// A fault tripped; enable low until an accepted clear request.
    Latched,
}

impl State {
    /// Whether the current source may carry current in this state.
    pub const fn is_emitting(self) -> bool {
        matches!(self, State::Ramping | State::Regulating | State::Stopping)
    }

    /// A short, stable name.
    pub const fn name(self) -> &'static str {
        match self {
            State::Off => "off",
            State::Arming => "arming",
            State::Ramping => "ramping",
            State::Regulating => "regulating",
            State::Stopping => "stopping",
            State::Latched => "latched",
        }
    }
}

/// Control mode.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Mode {
    /// Automatic power control from the monitor photodiode.
    #[default]
    Apc,
    /// Automatic (constant) current control.
    Acc,
}

/// Warning flags: nothing is wrong yet, but the user should know.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Warnings {
    /// The temperature is above the derating knee: the ceiling is reduced.
    pub derating: bool,
    /// The drive sits at its ceiling: the setpoint is not reachable.
    pub at_ceiling: bool,
    /// The temperature sensor is at a rail (not yet debounced): the ceiling
    /// is held at the derating floor.
    pub sensor_suspect: bool,
    /// End of life approaching: the diode needs more current for its
    /// measured power than the healthy diode plus the warning margin (see
    /// [`crate::config::Plausibility`]). Re-evaluated every
    /// [`crate::protect::SLOW_EVERY`] ticks.
    pub end_of_life: bool,
}

/// Compact status returned with every [`Drive`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Status {
    /// State after this tick.
    pub state: State,
    /// Mode in force.
    pub mode: Mode,
    /// Latched faults.
    pub faults: FaultSet,
    /// Warnings.
    pub warnings: Warnings,
}

/// What the board applies after a tick.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Drive {
    /// DAC code for the current source.
    pub dac_code: u16,
    /// Enable line: `false` shuts the current source off in hardware.
    pub enable: bool,
    /// Status.
    pub status: Status,
}
