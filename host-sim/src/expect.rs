//! Evaluation of a scenario's expectations (`[[expect]]`, schema in
//! `crate::scenario`) against its run: each gives pass or fail with what
//! was measured. States and faults come from the run's events, optical
//! power from windows the simulator fills at every tick (never from the
//! decimated trace), so `trace_every` cannot hide a spike.

use serde::Serialize;

use diodestat_core::State;

use crate::scenario::{After, Check, Expect, Scenario};
use crate::sim::{tick_at, Happening, PowerWindow, RunResult};

/// The verdict on one expectation.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Outcome {
    /// Line of the `[[expect]]` entry in the scenario file.
    pub line: usize,
    /// The `check` kind.
    pub check: &'static str,
    /// The entry's `name`, else its description.
    pub name: String,
    /// What was expected, in words with the numbers.
    pub expected: String,
    /// Whether the run showed it.
    pub passed: bool,
    /// What the run showed, in words with the numbers.
    pub measured: String,
}

/// The `check` key of an expectation.
pub fn kind(c: &Check) -> &'static str {
    match c {
        Check::State { .. } => "state",
        Check::Fault { .. } => "fault",
        Check::PowerBand { .. } => "power-band",
        Check::NeverAbove { .. } => "never-above",
    }
}

/// An expectation in words.
pub fn describe(e: &Expect) -> String {
    match &e.check {
        Check::State { at_ms, state } => format!("state is {} at {at_ms} ms", state.name()),
        Check::Fault {
            fault,
            after,
            within_ms,
        } => format!(
            "{} latches within {within_ms} ms after {}",
            fault.name(),
            match after {
                After::Ms(t) => format!("{t} ms"),
                After::Inject(k) => format!("the {k} injection"),
            }
        ),
        Check::PowerBand {
            from_ms,
            to_ms,
            min_mw,
            max_mw,
        } => format!(
            "front power within {} to {} mW from {from_ms} to {to_ms} ms",
            num(*min_mw),
            num(*max_mw)
        ),
        Check::NeverAbove { mw, from_ms, to_ms } => format!(
            "front power never above {} mW {}",
            num(*mw),
            match to_ms {
                Some(t) => format!("from {from_ms} to {t} ms"),
                None if *from_ms == 0.0 => "over the whole run".to_string(),
                None => format!("from {from_ms} ms to the end"),
            }
        ),
    }
}

/// A number as written, without float noise (4 significant decimals).
fn num(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    s.to_string()
}

/// The power window an expectation needs, if any.
fn window(c: &Check, tick_hz: u32) -> Option<PowerWindow> {
    match c {
        Check::PowerBand { from_ms, to_ms, .. } => Some(PowerWindow::new(
            tick_at(*from_ms, tick_hz),
            tick_at(*to_ms, tick_hz),
        )),
        Check::NeverAbove { from_ms, to_ms, .. } => Some(PowerWindow::new(
            tick_at(*from_ms, tick_hz),
            to_ms.map_or(u64::MAX, |t| tick_at(t, tick_hz)),
        )),
        Check::State { .. } | Check::Fault { .. } => None,
    }
}

/// The power windows of a scenario's expectations at `tick_hz`, for
/// `sim::run_watching`; [`evaluate`] reads them back in the same order.
pub fn windows(sc: &Scenario, tick_hz: u32) -> Vec<PowerWindow> {
    sc.expects
        .iter()
        .filter_map(|e| window(&e.get_ref().check, tick_hz))
        .collect()
}

/// Every expectation of `sc` against its run `res` (run with
/// [`windows`] of `sc`).
pub fn evaluate(sc: &Scenario, res: &RunResult) -> Vec<Outcome> {
    let ms = |tick: u64| tick as f64 * 1e3 / f64::from(res.tick_hz);
    let mut windows = res.windows.iter();
    let mut out = Vec::new();
    for e in &sc.expects {
        let e = e.get_ref();
        let (passed, measured) = match &e.check {
            Check::State { at_ms, state } => {
                let seen = state_at(res, tick_at(*at_ms, res.tick_hz));
                (seen == *state, format!("{} at {at_ms} ms", seen.name()))
            }
            Check::Fault {
                fault,
                after,
                within_ms,
            } => {
                let reference = match after {
                    After::Ms(t) => Some((tick_at(*t, res.tick_hz), format!("{t} ms"))),
                    After::Inject(k) => res.happenings.iter().find_map(|h| match h {
                        Happening::Injected { tick, fault } if fault == k => {
                            Some((*tick, format!("the {k} injection at {:.3} ms", ms(*tick))))
                        }
                        _ => None,
                    }),
                };
                match reference {
                    None => (
                        false,
                        format!(
                            "no {} injection took place before the run ended",
                            match after {
                                After::Inject(k) => k.as_str(),
                                After::Ms(_) => "",
                            }
                        ),
                    ),
                    Some((t0, what)) => {
                        let deadline = t0 + tick_at(*within_ms, res.tick_hz);
                        let latched: Vec<u64> = res
                            .happenings
                            .iter()
                            .filter_map(|h| match h {
                                Happening::Fault { tick, fault: f, .. } if *f == fault.name() => {
                                    Some(*tick)
                                }
                                _ => None,
                            })
                            .collect();
                        match (
                            latched.iter().find(|&&t| t >= t0),
                            latched.iter().find(|&&t| t < t0),
                        ) {
                            (Some(&t), _) => (
                                t <= deadline,
                                format!(
                                    "latched at {:.3} ms, {} ticks = {:.3} ms after {what}",
                                    ms(t),
                                    t - t0,
                                    ms(t - t0)
                                ),
                            ),
                            (None, Some(&t)) => {
                                (false, format!("latched at {:.3} ms, before {what}", ms(t)))
                            }
                            (None, None) => (
                                false,
                                format!(
                                    "never latched (run ends at {:.3} ms; reference {what})",
                                    ms(res.ticks)
                                ),
                            ),
                        }
                    }
                }
            }
            Check::PowerBand { min_mw, max_mw, .. } => match windows.next() {
                Some(w) if w.ticks > 0 => {
                    // Both false for NaN: NaN is outside every band.
                    let min_in = w.min_mw >= *min_mw;
                    let max_in = w.max_mw <= *max_mw;
                    let (low, high) = (!min_in, !max_in);
                    let mut m = format!(
                        "{:.4} to {:.4} mW over {} ticks",
                        w.min_mw, w.max_mw, w.ticks
                    );
                    if low {
                        m.push_str(&format!(
                            "; below the band at {:.3} ms ({:.4} mW)",
                            ms(w.min_tick),
                            w.min_mw
                        ));
                    }
                    if high {
                        m.push_str(&format!(
                            "; above the band at {:.3} ms ({:.4} mW)",
                            ms(w.max_tick),
                            w.max_mw
                        ));
                    }
                    (!low && !high, m)
                }
                _ => (false, "no tick of the run falls in the interval".into()),
            },
            Check::NeverAbove { mw, .. } => match windows.next() {
                Some(w) if w.ticks > 0 => (
                    w.max_mw <= *mw,
                    format!("peak {:.4} mW at {:.3} ms", w.max_mw, ms(w.max_tick)),
                ),
                _ => (false, "no tick of the run falls in the interval".into()),
            },
        };
        out.push(Outcome {
            line: e.line,
            check: kind(&e.check),
            name: e.name.clone().unwrap_or_else(|| describe(e)),
            expected: describe(e),
            passed,
            measured,
        });
    }
    out
}

/// The controller state after the core's step at `tick` (at the end of
/// the run when `tick` is beyond it).
fn state_at(res: &RunResult, tick: u64) -> State {
    let tick = tick.min(res.ticks.saturating_sub(1));
    res.happenings
        .iter()
        .rev()
        .find_map(|h| match h {
            Happening::State { tick: t, state } if *t <= tick => Some(*state),
            _ => None,
        })
        .unwrap_or(State::Off)
}

/// The outcomes as printed lines: `PASS`/`FAIL`, what was expected, the
/// line of the entry, and what was measured.
pub fn text(outcomes: &[Outcome]) -> String {
    let mut s = String::new();
    for o in outcomes {
        let label = if o.name == o.expected {
            String::new()
        } else {
            format!("{}: ", o.name)
        };
        s.push_str(&format!(
            "  {} {label}{} (line {}): measured {}\n",
            if o.passed { "PASS" } else { "FAIL" },
            o.expected,
            o.line,
            o.measured
        ));
    }
    s
}
