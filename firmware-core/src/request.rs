//! Requests from the user side and the reasons they are refused.

use crate::fault::Fault;
use crate::io::{Mode, State};
use crate::units::Fx;

/// A request to the controller; accepted ones take effect at the next tick.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Request {
    /// Start emission (from Off only).
    Enable,
    /// Stop emission with the soft-stop ramp. Always accepted.
    Disable,
    /// Optical power setpoint for APC, ou.
    SetPower(Fx),
    /// Current setpoint for ACC, iu.
    SetCurrent(Fx),
    /// Choose APC or ACC; the transfer is bumpless.
    SetMode(Mode),
    /// Leave Latched for Off, if no fault condition is still present.
    ClearFaults,
}

/// Why a [`Request`] was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Rejection {
    /// The value is outside the configured range.
    OutOfRange {
        /// Requested value.
        requested: Fx,
        /// Lowest accepted.
        min: Fx,
        /// Highest accepted.
        max: Fx,
    },
    /// The request is not allowed in the current state.
    NotAllowed {
        /// The state.
        state: State,
    },
    /// A fault condition is present in the latest sample (clear, or enable
    /// while a blocking condition such as an open interlock is present).
    ConditionPresent {
        /// The first such condition.
        fault: Fault,
    },
    /// No sample has been seen yet, so conditions are unknown.
    NoSampleYet,
}

impl core::fmt::Display for Rejection {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            Rejection::OutOfRange {
                requested,
                min,
                max,
            } => {
                write!(f, "{requested} outside {min}..={max}")
            }
            Rejection::NotAllowed { state } => write!(f, "not allowed while {}", state.name()),
            Rejection::ConditionPresent { fault } => write!(f, "{fault} condition still present"),
            Rejection::NoSampleYet => write!(f, "no sample seen yet"),
        }
    }
}

impl core::error::Error for Rejection {}
