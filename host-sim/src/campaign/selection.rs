//! What a campaign runs: the injection moments ([`Moment`]) and the
//! selection of faults, moments, corners, setpoints, ambient range and
//! shard ([`Selection`]), with the reasons a selection cannot run.

use serde::{Deserialize, Serialize};

/// When the fault is injected.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Moment {
    /// During soft start.
    SoftStart,
    /// In steady regulation.
    Steady,
    /// Right after a setpoint change.
    SetpointChange,
    /// While derating (hot mount).
    Derating,
    /// Latent: present before the enable request (a fault the board
    /// powered up with). Events that are not a standing state (missed
    /// ticks) are not run at this moment.
    Latent,
    /// During the soft stop after a disable request: the stop is the safe
    /// state, so no fault must latch, but the power lines still hold.
    SoftStop,
    /// The fault latches, the operator clears it and enables again with
    /// the fault still present: the second start must be refused or
    /// latch. Run for the standing faults that must latch.
    ClearRetry,
}

impl Moment {
    /// Every moment, in campaign order.
    pub const ALL: [Moment; 7] = [
        Moment::SoftStart,
        Moment::Steady,
        Moment::SetpointChange,
        Moment::Derating,
        Moment::Latent,
        Moment::SoftStop,
        Moment::ClearRetry,
    ];

    /// The name on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Moment::SoftStart => "soft-start",
            Moment::Steady => "steady",
            Moment::SetpointChange => "setpoint-change",
            Moment::Derating => "derating",
            Moment::Latent => "latent",
            Moment::SoftStop => "soft-stop",
            Moment::ClearRetry => "clear-retry",
        }
    }

    /// The moment a name stands for.
    pub fn parse(s: &str) -> Option<Moment> {
        Self::ALL.into_iter().find(|m| m.name() == s)
    }
}

/// Default ambient of the cold corner, degC.
pub const COLD_C: f64 = 0.0;
/// Default ambient of the hot corner, degC.
pub const HOT_C: f64 = 40.0;

/// What to run: a subset of the faults, moments, corners and setpoints,
/// the ambient range, the slow faults' bound and the shard.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Selection {
    /// Fault labels or kinds to run (`None`: all).
    pub faults: Option<Vec<String>>,
    /// Moments (`None`: all).
    pub moments: Option<Vec<Moment>>,
    /// Corner names (`None`: all).
    pub corners: Option<Vec<String>>,
    /// Ambient of the cold corner, degC.
    pub cold_c: f64,
    /// Ambient of the hot corner, degC.
    pub hot_c: f64,
    /// Setpoints, mW (`None`: two thirds of the board's highest).
    pub setpoints_mw: Option<Vec<f64>>,
    /// Longest watch window of a slow fault, s.
    pub slow_bound_s: f64,
    /// Monte Carlo: `(n, seed)` replaces the corners with `n` parts drawn
    /// from the module's tolerances.
    pub parts: Option<(u32, u64)>,
    /// This run's slice: `(k, n)` runs the cases numbered k-1 modulo n.
    pub shard: Option<(u32, u32)>,
    /// A protection switched off for this campaign (`campaign::without`,
    /// `--without`).
    #[serde(default)]
    pub without: Option<String>,
}

impl Default for Selection {
    fn default() -> Self {
        Selection {
            faults: None,
            moments: None,
            corners: None,
            cold_c: COLD_C,
            hot_c: HOT_C,
            setpoints_mw: None,
            slow_bound_s: 20.0,
            parts: None,
            shard: None,
            without: None,
        }
    }
}

/// Why a selection cannot run on a board.
#[derive(Clone, Debug, PartialEq)]
pub enum SelectionError {
    /// A fault name matches no fault of the campaign.
    Fault(String, Vec<String>),
    /// A corner name matches no corner.
    Corner(String),
    /// A setpoint lies outside the board's range.
    Setpoint {
        /// The setpoint, mW.
        mw: f64,
        /// Board range, mW.
        min: f64,
        /// Board range, mW.
        max: f64,
    },
    /// The ambient range is not cold < hot, or the bound not positive.
    Range(&'static str),
    /// The shard is not 1 <= K <= N.
    Shard(u32, u32),
    /// No case is left.
    Empty,
}

impl std::fmt::Display for SelectionError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SelectionError::Fault(s, known) => write!(
                f,
                "--faults: {s:?} names no fault of the campaign (kinds or labels: {})",
                known.join(", ")
            ),
            SelectionError::Corner(s) => write!(
                f,
                "--corners: {s:?} names no corner (nominal, cold, hot, tracking-low, aged, threshold-high, slope-low)"
            ),
            SelectionError::Setpoint { mw, min, max } => write!(
                f,
                "--setpoints-mw: {mw} mW is outside the board's setpoint range {min} ..= {max} mW"
            ),
            SelectionError::Range(why) => write!(f, "{why}"),
            SelectionError::Shard(k, n) => {
                write!(f, "--shard {k}/{n}: K must be 1 to N and N at least 1")
            }
            SelectionError::Empty => write!(f, "the selection leaves no case to run"),
        }
    }
}

impl std::error::Error for SelectionError {}
