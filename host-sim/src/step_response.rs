//! Figures of a step response on a run's trace: where it settles within a
//! band, its overshoot, and whether the drive sat on its ceiling (so the
//! loop did not regulate). Used by the run summary and the time-domain
//! loop checks alike.

use crate::trace::TraceRow;

/// Settling band, fraction of the final value (±1 %).
pub const SETTLING_BAND: f64 = 0.01;

/// Index from which every later value stays within `band` of `target`
/// (0: always inside; `None`: the last value is outside).
pub fn settled_from(xs: &[f64], target: f64, band: f64) -> Option<usize> {
    match xs.iter().rposition(|x| (x - target).abs() > band) {
        None => Some(0),
        Some(i) if i + 1 < xs.len() => Some(i + 1),
        Some(_) => None,
    }
}

/// Overshoot of `xs` beyond `final_value`, in percent of the step from
/// `initial` (in the direction of the step; 0 if it never passes it).
pub fn overshoot_pct(xs: &[f64], initial: f64, final_value: f64) -> f64 {
    let step = final_value - initial;
    if step == 0.0 || !step.is_finite() {
        return 0.0;
    }
    let beyond = xs
        .iter()
        .map(|x| (x - final_value) / step)
        .fold(0.0, f64::max);
    100.0 * beyond
}

/// Most of `rows` have the drive on the ceiling in force.
pub fn on_ceiling(rows: &[TraceRow]) -> bool {
    let n = rows
        .iter()
        .filter(|r| r.cmd_ma >= r.ceiling_ma - 1e-3)
        .count();
    2 * n > rows.len()
}
