//! What one case of a campaign gives: how the fault was detected
//! ([`Detection`]) and the case's whole record ([`CaseResult`]).

use serde::{Deserialize, Serialize};

use super::selection::Moment;
use super::verdict::Judgement;

/// How a fault was detected.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Detection {
    /// By one of its expected protections, within its reaction limit.
    Expected,
    /// By one of its expected protections, later than its reaction limit.
    Late,
    /// Only by protections not expected for it (a finding).
    Unexpected,
    /// Not detected, and it must be.
    Missed,
    /// Not detected, and it need not be.
    NotRequired,
    /// The core had latched another fault before this one arrived and the
    /// laser stayed off (the corner cannot run at this moment).
    AlreadyLatched,
}

/// One case's outcome.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CaseResult {
    /// Number in the whole campaign.
    pub index: usize,
    /// Fault label.
    pub fault: String,
    /// Fault kind.
    pub kind: String,
    /// Moment.
    pub moment: Moment,
    /// Corner name.
    pub corner: String,
    /// Setpoint, mW.
    pub setpoint_mw: f64,
    /// Whether the fault must latch.
    pub must_latch: bool,
    /// Protections that count as its detection.
    pub expected: Vec<String>,
    /// Protections that caught it (core faults latched from the reference
    /// moment on, and [`super::ENABLE_REFUSED`]).
    pub caught_by: Vec<String>,
    /// How it was detected.
    pub detection: Detection,
    /// Time from the fault reaching the laser (the injection; for a latent
    /// fault the start of emission; at a retry the retry) to the first
    /// latch, ticks.
    pub latency_ticks: Option<u64>,
    /// The same, us.
    pub latency_us: Option<f64>,
    /// Reaction-time limit, us.
    pub reaction_limit_us: Option<f64>,
    /// Watch window after the injection, ms.
    pub watch_ms: f64,
    /// Whether the plant had settled when the window closed (or the laser
    /// was off).
    pub settled: bool,
    /// The record against the pass lines.
    pub judgement: Judgement,
    /// Facet damage.
    pub damaged: bool,
    /// Final state.
    pub final_state: String,
    /// The mount was derating when the fault arrived.
    pub derating_at_injection: bool,
    /// The core had latched a fault before the injection (the corner
    /// cannot run at this moment): the laser was already off.
    pub latched_before_injection: bool,
    /// Why the case is unsafe (empty: safe).
    pub unsafe_reasons: Vec<String>,
    /// A finding for the reviewer (an unexpected detection).
    pub finding: Option<String>,
    /// Safe.
    pub safe: bool,
}
