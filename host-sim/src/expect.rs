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
                After::Event(k) => format!("the first {k} event"),
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
                    After::Event(k) => sc
                        .first_event(k)
                        .map(|t| (tick_at(t, res.tick_hz), format!("the {k} event at {t} ms"))),
                };
                match reference {
                    None => (
                        false,
                        format!(
                            "no {} injection took place before the run ended",
                            match after {
                                After::Inject(k) | After::Event(k) => k.as_str(),
                                After::Ms(_) => "",
                            }
                        ),
                    ),
                    Some((t0, what)) => {
                        let deadline = t0.saturating_add(tick_at(*within_ms, res.tick_hz));
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
                                    "latched at {:.3} ms, {} = {:.3} ms after {what}",
                                    ms(t),
                                    ticks(t - t0),
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

/// "1 tick", "2 ticks".
pub fn ticks(n: u64) -> String {
    if n == 1 {
        "1 tick".into()
    } else {
        format!("{n} ticks")
    }
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::parse;

    /// A scenario of 10 ms at 1 kHz (one tick per ms) with `expects`.
    fn scenario(expects: &str) -> Scenario {
        parse(&format!(
            "name = \"t\"\nboard = \"b.toml\"\nduration_ms = 10\nambient_c = 25\n\
             [[event]]\nat_ms = 4\ndo = \"inject\"\nfault = {{ kind = \"interlock-open\" }}\n\
             {expects}"
        ))
        .unwrap()
    }

    /// A run of 10 ticks at 1 kHz: regulating from tick 2, the injection at
    /// tick 4, the interlock fault latching at tick 6; power 5 mW, with
    /// `spike` mW at tick 3.
    fn run(sc: &Scenario, spike: f64) -> RunResult {
        let mut res = RunResult {
            ticks: 10,
            tick_hz: 1000,
            windows: windows(sc, 1000),
            happenings: vec![
                Happening::State {
                    tick: 2,
                    state: State::Regulating,
                },
                Happening::Injected {
                    tick: 4,
                    fault: "interlock-open",
                },
                Happening::State {
                    tick: 6,
                    state: State::Latched,
                },
                Happening::Fault {
                    tick: 6,
                    fault: "interlock-open",
                    measured: 0.0,
                    limit: 1.0,
                },
            ],
            ..RunResult::default()
        };
        for w in &mut res.windows {
            for t in 0..10 {
                w.observe(t, if t == 3 { spike } else { 5.0 });
            }
        }
        res
    }

    fn verdicts(expects: &str, spike: f64) -> Vec<Outcome> {
        let sc = scenario(expects);
        evaluate(&sc, &run(&sc, spike))
    }

    #[test]
    fn state_at_a_time() {
        let e = "[[expect]]\ncheck = \"state\"\nat_ms = ";
        let o = verdicts(
            &format!(
                "{e}1\nstate = \"off\"\n{e}2\nstate = \"regulating\"\n{e}5\nstate = \"regulating\"\n\
                 {e}6\nstate = \"regulating\"\n{e}10\nstate = \"latched\"\n"
            ),
            5.0,
        );
        let passed: Vec<bool> = o.iter().map(|o| o.passed).collect();
        assert_eq!(passed, [true, true, true, false, true]);
        assert_eq!(o[3].measured, "latched at 6 ms");
        assert_eq!(o[3].line, 21);
    }

    #[test]
    fn fault_within_a_deadline_after_an_injection_or_a_time() {
        let f = "[[expect]]\ncheck = \"fault\"\nfault = \"interlock-open\"\n";
        let o = verdicts(
            &format!(
                "{f}after_inject = \"interlock-open\"\nwithin_ms = 2\n\
                 {f}after_inject = \"interlock-open\"\nwithin_ms = 1\n\
                 {f}after_ms = 7\nwithin_ms = 3\n\
                 {f}after_event = \"inject\"\nwithin_ms = 2\n\
                 [[expect]]\ncheck = \"fault\"\nfault = \"overcurrent\"\nafter_ms = 0\nwithin_ms = 9\n"
            ),
            5.0,
        );
        assert!(o[0].passed, "{:?}", o[0]);
        assert!(
            o[0].measured.contains("2 ticks = 2.000 ms after"),
            "{}",
            o[0].measured
        );
        // One tick late.
        assert!(!o[1].passed);
        // Latched before the reference time: it cannot latch again.
        assert!(!o[2].passed);
        assert!(o[2].measured.contains("before 7 ms"), "{}", o[2].measured);
        assert!(o[3].passed, "{:?}", o[3]);
        assert!(
            o[3].measured.contains("after the inject event at 4 ms"),
            "{}",
            o[3].measured
        );
        assert!(!o[4].passed);
        assert!(
            o[4].measured.starts_with("never latched"),
            "{}",
            o[4].measured
        );
    }

    /// A deadline far beyond any run (1e300 ms) neither overflows nor fails
    /// a fault that latched.
    #[test]
    fn a_huge_deadline_does_not_overflow() {
        let o = verdicts(
            "[[expect]]\ncheck = \"fault\"\nfault = \"interlock-open\"\n\
             after_inject = \"interlock-open\"\nwithin_ms = 1e300\n",
            5.0,
        );
        assert!(o[0].passed, "{:?}", o[0]);
    }

    #[test]
    fn power_band_and_never_above_see_every_tick() {
        let band = "[[expect]]\ncheck = \"power-band\"\nfrom_ms = 1\nto_ms = 6\nmw = 5\ntolerance_pct = 1\n";
        let above = "[[expect]]\ncheck = \"never-above\"\nmw = 5.5\n";
        // The interval ends before tick 3 or starts after it: the spike is not in it.
        let late = "[[expect]]\ncheck = \"never-above\"\nmw = 5.5\nfrom_ms = 4\n";
        let early = "[[expect]]\ncheck = \"never-above\"\nmw = 5.5\nto_ms = 3\n";
        let all = format!("{band}{above}{late}{early}");
        let ok = verdicts(&all, 5.0);
        assert!(ok.iter().all(|o| o.passed), "{ok:?}");
        let high = verdicts(&all, 6.0);
        let passed: Vec<bool> = high.iter().map(|o| o.passed).collect();
        assert_eq!(passed, [false, false, true, true]);
        assert!(
            high[0].measured.contains("above the band at 3.000 ms"),
            "{}",
            high[0].measured
        );
        assert_eq!(high[1].measured, "peak 6.0000 mW at 3.000 ms");
        let low = verdicts(&all, 4.0);
        assert!(!low[0].passed && low[0].measured.contains("below the band at 3.000 ms"));
        // NaN power is outside every band and above every level.
        let nan = verdicts(&all, f64::NAN);
        assert!(!nan[0].passed && !nan[1].passed);
    }

    proptest::proptest! {
        /// A window's extremes and count are those of the ticks inside it,
        /// whatever the order of the powers, and the band verdict is the
        /// plain "every tick in the band".
        #[test]
        fn windows_agree_with_a_plain_scan(
            powers in proptest::collection::vec(0.0f64..10.0, 1..200),
            from in 0u64..250,
            len in 1u64..250,
            lo in 0.0f64..10.0,
            width in 0.0f64..10.0,
        ) {
            let mut w = PowerWindow::new(from, from + len);
            for (t, p) in powers.iter().enumerate() {
                w.observe(t as u64, *p);
            }
            let inside: Vec<f64> = powers
                .iter()
                .enumerate()
                .filter(|(t, _)| (from..from + len).contains(&(*t as u64)))
                .map(|(_, p)| *p)
                .collect();
            proptest::prop_assert_eq!(w.ticks as usize, inside.len());
            if !inside.is_empty() {
                let min = inside.iter().cloned().fold(f64::INFINITY, f64::min);
                let max = inside.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
                proptest::prop_assert_eq!((w.min_mw, w.max_mw), (min, max));
                proptest::prop_assert_eq!(powers[w.min_tick as usize], min);
                proptest::prop_assert_eq!(powers[w.max_tick as usize], max);
                let band = inside.iter().all(|p| (lo..=lo + width).contains(p));
                proptest::prop_assert_eq!(w.min_mw >= lo && w.max_mw <= lo + width, band);
            }
        }
    }

    #[test]
    fn descriptions_and_the_printed_lines() {
        let o = verdicts(
            "[[expect]]\nname = \"holds\"\ncheck = \"power-band\"\nfrom_ms = 1\nto_ms = 6\nmin_mw = 4.9\nmax_mw = 5.1\n\
             [[expect]]\ncheck = \"never-above\"\nmw = 5.5\nfrom_ms = 2\n",
            6.0,
        );
        assert_eq!(o[0].name, "holds");
        assert_eq!(
            o[0].expected,
            "front power within 4.9 to 5.1 mW from 1 to 6 ms"
        );
        assert_eq!(
            o[1].name,
            "front power never above 5.5 mW from 2 ms to the end"
        );
        let t = text(&o);
        assert!(t.contains("  FAIL holds: front power within 4.9 to 5.1 mW from 1 to 6 ms (line 9): measured 5.0000 to 6.0000 mW"), "{t}");
        assert!(t.contains("  FAIL front power never above 5.5 mW from 2 ms to the end (line 16): measured peak 6.0000 mW at 3.000 ms"), "{t}");
    }
}
