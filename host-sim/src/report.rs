//! Run reports: the run summary ([`Summary`]: step figures, refused
//! requests, unreachable setpoints with the shortfall, warnings with when,
//! faults with their latency, expectations; printed as text and written as
//! `summary.json`), the SVG plot of a run (drawn from its min/max envelope,
//! see `crate::trace`) and the L-I-V plot. The CSV trace is streamed by
//! `crate::trace::CsvTrace` while the run goes.

use std::fmt::Write as _;
use std::path::Path;

use diodestat_core::{Fault, State};
use plotters::prelude::*;
use serde::Serialize;

use crate::expect::Outcome;
use crate::liv::LivCurve;
use crate::safety::SAFETY_CAUTION;
use crate::scenario::{Action, ModeName, Scenario};
use crate::sim::{Happening, RunResult, TraceRow};
use crate::step_response::{on_ceiling, overshoot_pct, settled_from, SETTLING_BAND};
use crate::trace::Channel;

/// Step-response figures of one stretch of regulation: from the hand-over
/// or from an accepted setpoint or mode request, up to the next scenario
/// event or the end of Regulating (so a later fault or ambient step does
/// not count as overshoot of the step before it). Refused requests start
/// no stretch.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Figures {
    /// What started the stretch.
    pub label: String,
    /// Start of the stretch, ms.
    pub start_ms: f64,
    /// Mode in force during the stretch (`apc` or `acc`).
    pub mode: &'static str,
    /// Optical power before the stretch, mW (0 for the hand-over).
    pub initial_mw: f64,
    /// Final value (mean of the last 5 % of the stretch), mW.
    pub final_mw: f64,
    /// Overshoot beyond the final value, percent of the step.
    pub overshoot_pct: f64,
    /// From the start of the stretch until the power stays within ±1 % of
    /// the final value, ms (`None`: it never settles in the stretch).
    pub settling_ms: Option<f64>,
    /// The drive ended the stretch on its ceiling: the request was beyond
    /// what the ceiling in force allows.
    pub on_ceiling: bool,
    /// The setpoint in force (mW in APC, mA in ACC), if one was requested.
    pub target: Option<Target>,
}

/// A setpoint in force, what the run reached and how far short it fell.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Target {
    /// The setpoint.
    pub setpoint: f64,
    /// Its unit: `mW` (APC, front power) or `mA` (ACC, drive current).
    pub unit: &'static str,
    /// Reached (final front power, or final drive current), same unit.
    pub reached: f64,
    /// Setpoint minus reached, when the drive sat on its ceiling.
    pub shortfall: Option<f64>,
}

/// Fewest trace rows a stretch needs for its figures to mean anything.
const MIN_ROWS: usize = 20;

/// Shortest time on the ceiling reported as an unreachable setpoint, ms
/// (shorter touches are slew transients).
pub const MIN_ON_CEILING_MS: f64 = 5.0;

/// The requests a run refused: indices into the scenario's events.
fn refused_events(res: &RunResult) -> Vec<usize> {
    res.happenings
        .iter()
        .filter_map(|h| match h {
            Happening::Rejected { event, .. } => Some(*event),
            _ => None,
        })
        .collect()
}

/// Setpoints and mode in force after every accepted request up to `t_ms`
/// (inclusive): (power setpoint mW, current setpoint mA, mode).
fn in_force(sc: &Scenario, refused: &[usize], t_ms: f64) -> (Option<f64>, Option<f64>, ModeName) {
    let mut order: Vec<usize> = (0..sc.events.len()).collect();
    order.sort_by(|&a, &b| sc.events[a].at_ms.total_cmp(&sc.events[b].at_ms));
    let (mut p, mut i, mut mode) = (None, None, ModeName::Apc);
    for k in order {
        let e = &sc.events[k];
        if e.at_ms > t_ms || refused.contains(&k) {
            continue;
        }
        match e.action {
            Action::SetPower { mw } => p = Some(mw),
            Action::SetCurrent { ma } => i = Some(ma),
            Action::Mode { mode: m } => mode = m,
            _ => {}
        }
    }
    (p, i, mode)
}

fn mode_name(m: ModeName) -> &'static str {
    match m {
        ModeName::Apc => "apc",
        ModeName::Acc => "acc",
    }
}

/// The figures of every stretch of regulation that starts at the hand-over,
/// an accepted set-power or set-current request or an accepted mode change.
pub fn figures(sc: &Scenario, res: &RunResult) -> Vec<Figures> {
    let tr = &res.trace;
    let ms = |r: &TraceRow| r.t_s * 1e3;
    let refused = refused_events(res);
    let mut starts: Vec<(f64, String)> = Vec::new();
    // Every hand-over from soft start to regulation (each enable).
    let mut last = State::Off;
    for h in &res.happenings {
        if let Happening::State { tick, state } = h {
            if *state == State::Regulating && last == State::Ramping {
                let t = *tick as f64 * 1e3 / f64::from(res.tick_hz);
                // From the first traced row in regulation.
                if let Some(r) = tr
                    .iter()
                    .find(|r| ms(r) >= t && r.state == State::Regulating)
                {
                    starts.push((ms(r), "start-up (from hand-over)".into()));
                }
            }
            last = *state;
        }
    }
    for (k, e) in sc.events.iter().enumerate() {
        if refused.contains(&k) {
            continue;
        }
        match e.action {
            Action::SetPower { mw } => starts.push((e.at_ms, format!("set power {mw} mW"))),
            Action::SetCurrent { ma } => starts.push((e.at_ms, format!("set current {ma} mA"))),
            Action::Mode { mode } => {
                starts.push((e.at_ms, format!("mode {}", mode_name(mode).to_uppercase())))
            }
            _ => {}
        }
    }
    starts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut out = Vec::new();
    for (t0, label) in starts {
        let Some(a) = tr.iter().position(|r| ms(r) >= t0) else {
            continue;
        };
        if tr[a].state != State::Regulating {
            continue;
        }
        // The stretch ends at the next event after its start, or when
        // Regulating ends.
        let t_end = sc
            .events
            .iter()
            .map(|e| e.at_ms)
            .filter(|&t| t > t0)
            .fold(f64::INFINITY, f64::min);
        let b = tr[a..]
            .iter()
            .position(|r| ms(r) >= t_end || r.state != State::Regulating)
            .map_or(tr.len(), |n| a + n);
        let w: Vec<f64> = tr[a..b].iter().map(|r| r.p_mw).collect();
        if w.len() < MIN_ROWS {
            continue;
        }
        let n_tail = w.len() / 20;
        let tail = &w[w.len() - n_tail..];
        let final_mw = tail.iter().sum::<f64>() / tail.len() as f64;
        let initial_mw = if label.starts_with("start-up") {
            0.0
        } else {
            a.checked_sub(1).map_or(0.0, |i| tr[i].p_mw)
        };
        let row_ms = if w.len() > 1 {
            ms(&tr[a + 1]) - ms(&tr[a])
        } else {
            0.0
        };
        let on_ceiling = on_ceiling(&tr[b - n_tail..b]);
        let (p_sp, i_sp, mode) = in_force(sc, &refused, t0);
        let target = match mode {
            ModeName::Apc => p_sp.map(|sp| (sp, "mW", final_mw)),
            ModeName::Acc => i_sp.map(|sp| {
                let i = tr[b - n_tail..b].iter().map(|r| r.i_ma).sum::<f64>() / n_tail as f64;
                (sp, "mA", i)
            }),
        }
        .map(|(setpoint, unit, reached)| Target {
            setpoint,
            unit,
            reached,
            shortfall: on_ceiling.then_some(setpoint - reached),
        });
        out.push(Figures {
            label,
            mode: mode_name(mode),
            on_ceiling,
            start_ms: ms(&tr[a]),
            initial_mw,
            final_mw,
            overshoot_pct: overshoot_pct(&w, initial_mw, final_mw),
            settling_ms: settled_from(&w, final_mw, SETTLING_BAND * final_mw.abs())
                .map(|i| i as f64 * row_ms),
            target,
        });
    }
    out
}

/// A request the core refused.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Refused {
    /// When, ms.
    pub at_ms: f64,
    /// The request, as in the scenario file.
    pub request: String,
    /// The core's reason.
    pub reason: String,
}

/// The drive held on its ceiling for at least [`MIN_ON_CEILING_MS`]: the
/// setpoint in force was beyond reach.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Unreached {
    /// From, ms.
    pub from_ms: f64,
    /// To, ms (`None`: until the end of the run).
    pub to_ms: Option<f64>,
    /// Drive on the ceiling at the end of the stretch, mA.
    pub ceiling_ma: f64,
    /// Mode in force.
    pub mode: &'static str,
    /// The setpoint, what was reached, the shortfall (`None` when no
    /// setpoint was requested).
    pub target: Option<Target>,
}

/// A span of a warning of the core.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WarningNote {
    /// `derating`, `at-ceiling` or `sensor-suspect`.
    pub warning: &'static str,
    /// Raised at, ms.
    pub from_ms: f64,
    /// Cleared at, ms (`None`: still raised at the end of the run).
    pub to_ms: Option<f64>,
    /// Times raised in this span (raisings closer than the larger of 10 ms
    /// and 1 % of the run are one span).
    pub raised: u32,
    /// Time within the span with the warning raised, ms.
    pub raised_ms: f64,
}

/// A fault the core latched.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FaultNote {
    /// When, ms.
    pub at_ms: f64,
    /// The fault.
    pub fault: &'static str,
    /// Measured value at the trip.
    pub measured: f64,
    /// The limit.
    pub limit: f64,
    /// Unit of both.
    pub unit: &'static str,
    /// Time since the last injected hardware fault, ms.
    pub latency_ms: Option<f64>,
}

/// One line of the run's timeline.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TimelineEntry {
    /// When, ms.
    pub at_ms: f64,
    /// `state`, `inject`, `fault`, `refused`, `warning`, `facet-damage`.
    pub kind: &'static str,
    /// What, in words.
    pub what: String,
}

/// Everything the run summary says, for the text and for `summary.json`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Summary {
    /// Scenario name.
    pub scenario: String,
    /// The core's fingerprint of the board configuration the run used (16
    /// hex digits; what the firmware reports at start).
    pub config_fingerprint: Option<String>,
    /// Ticks run.
    pub ticks: u64,
    /// Tick rate, Hz.
    pub tick_hz: u32,
    /// Length of the run, ms.
    pub duration_ms: f64,
    /// Ticks between the rows the step figures are computed from: more
    /// than the scenario's `trace_every` when the run is longer than the
    /// rows kept in memory ([`crate::trace::RETAINED_ROWS`]).
    pub figures_stride: u64,
    /// Whether the step figures come from a trace thinned beyond
    /// `trace_every` (`figures_stride` is larger).
    pub figures_thinned: bool,
    /// Step-response figures of each stretch of regulation.
    pub steps: Vec<Figures>,
    /// Requests the core refused.
    pub refused: Vec<Refused>,
    /// Setpoints the drive could not reach.
    pub unreached: Vec<Unreached>,
    /// Warnings of the core with when.
    pub warnings: Vec<WarningNote>,
    /// Warning spans not kept (more than 64 of one warning).
    pub warning_spans_dropped: u64,
    /// Faults latched.
    pub faults: Vec<FaultNote>,
    /// Fault records the core's log overwrote before the run read them.
    pub faults_lost: u32,
    /// Limit cycles, ringing, hunting and a drive pinned on its ceiling,
    /// found on every tick of each stretch of regulation
    /// ([`crate::oscillation`]), in words.
    pub loop_findings: Vec<String>,
    /// Highest front-facet power of any tick, mW.
    pub peak_mw: f64,
    /// Whether the facet reached its damage limit.
    pub facet_damage: bool,
    /// State at the end.
    pub final_state: &'static str,
    /// Every event in order.
    pub timeline: Vec<TimelineEntry>,
    /// The scenario's expectations and their verdicts.
    pub expectations: Vec<Outcome>,
    /// The safety caution.
    pub caution: &'static str,
}

/// A scenario event as written in the file.
fn request_text(a: &Action) -> String {
    match a {
        Action::Enable => "enable".into(),
        Action::Disable => "disable".into(),
        Action::Clear => "clear".into(),
        Action::SetPower { mw } => format!("set-power {mw} mW"),
        Action::SetCurrent { ma } => format!("set-current {ma} mA"),
        Action::Mode { mode } => format!("mode {}", mode_name(*mode)),
        Action::AmbientStep { to_c } => format!("ambient-step to {to_c} degC"),
        Action::AmbientRamp { to_c, over_ms } => {
            format!("ambient-ramp to {to_c} degC over {over_ms} ms")
        }
        Action::Inject { fault } => format!("inject {}", fault.name()),
        Action::Repair { fault } => format!("repair {}", fault.name()),
    }
}

/// The summary of a run and its expectations' verdicts.
pub fn summary(sc: &Scenario, res: &RunResult, expectations: Vec<Outcome>) -> Summary {
    let ms = |tick: u64| tick as f64 * 1e3 / f64::from(res.tick_hz);
    let refused_idx = refused_events(res);
    let mut refused = Vec::new();
    let mut faults = Vec::new();
    let mut timeline = Vec::new();
    let mut injected: Option<u64> = None;
    for h in &res.happenings {
        let (tick, kind, what) = match h {
            Happening::Injected { tick, fault } => {
                injected = Some(*tick);
                (*tick, "inject", format!("injected {fault}"))
            }
            Happening::Fault {
                tick,
                fault,
                measured,
                limit,
            } => {
                let unit = Fault::ALL
                    .iter()
                    .find(|f| f.name() == *fault)
                    .map_or("", |f| crate::units::eng_unit(f.unit()));
                let latency_ms = injected.map(|i| ms(tick - i));
                faults.push(FaultNote {
                    at_ms: ms(*tick),
                    fault,
                    measured: *measured,
                    limit: *limit,
                    unit,
                    latency_ms,
                });
                let lat = latency_ms.map_or(String::new(), |l| {
                    format!(
                        ", {} = {l:.3} ms after the injection",
                        crate::expect::ticks(tick - injected.unwrap_or(*tick))
                    )
                });
                (
                    *tick,
                    "fault",
                    format!(
                        "FAULT {fault} latched (measured {measured:.3} {unit}, limit {limit:.3} {unit}){lat}"
                    ),
                )
            }
            Happening::State { tick, state } => (*tick, "state", format!("-> {}", state.name())),
            Happening::Rejected { tick, event, why } => {
                let request = sc
                    .events
                    .get(*event)
                    .map_or_else(|| "?".into(), |e| request_text(&e.action));
                refused.push(Refused {
                    at_ms: ms(*tick),
                    request: request.clone(),
                    reason: why.clone(),
                });
                (*tick, "refused", format!("REFUSED {request}: {why}"))
            }
            Happening::FacetDamage { tick } => (*tick, "facet-damage", "FACET DAMAGE".into()),
        };
        timeline.push(TimelineEntry {
            at_ms: ms(tick),
            kind,
            what,
        });
    }
    let mut warnings = Vec::new();
    let mut unreached = Vec::new();
    for s in &res.warning_spans {
        let (from_ms, to_ms) = (ms(s.from_tick), s.to_tick.map(ms));
        warnings.push(WarningNote {
            warning: s.warning,
            from_ms,
            to_ms,
            raised: s.raised,
            raised_ms: ms(s.raised_ticks),
        });
        timeline.push(TimelineEntry {
            at_ms: from_ms,
            kind: "warning",
            what: format!("warning {} raised", s.warning),
        });
        if let Some(t) = to_ms {
            timeline.push(TimelineEntry {
                at_ms: t,
                kind: "warning",
                what: format!(
                    "warning {} cleared{}",
                    s.warning,
                    if s.raised > 1 {
                        format!(
                            " (raised {} times since {})",
                            s.raised,
                            when(from_ms, ms(res.ticks))
                        )
                    } else {
                        String::new()
                    }
                ),
            });
        }
        let end_ms = to_ms.unwrap_or(ms(res.ticks));
        if s.warning == "at-ceiling" && end_ms - from_ms >= MIN_ON_CEILING_MS {
            let (p_sp, i_sp, _) = in_force(sc, &refused_idx, end_ms);
            let target = match s.last_mode {
                diodestat_core::Mode::Apc => p_sp.map(|sp| (sp, "mW", s.last_p_mw)),
                diodestat_core::Mode::Acc => i_sp.map(|sp| (sp, "mA", s.last_drive_ma)),
            }
            .map(|(setpoint, unit, reached)| Target {
                setpoint,
                unit,
                reached,
                shortfall: Some(setpoint - reached),
            });
            unreached.push(Unreached {
                from_ms,
                to_ms,
                ceiling_ma: s.last_drive_ma,
                mode: match s.last_mode {
                    diodestat_core::Mode::Apc => "apc",
                    diodestat_core::Mode::Acc => "acc",
                },
                target,
            });
        }
    }
    // Stable: at one time, the order of the run (then warnings).
    timeline.sort_by(|a, b| a.at_ms.total_cmp(&b.at_ms));
    Summary {
        scenario: sc.name.clone(),
        config_fingerprint: res.config_fingerprint.map(|f| f.to_string()),
        ticks: res.ticks,
        tick_hz: res.tick_hz,
        duration_ms: ms(res.ticks),
        figures_stride: res.trace_stride,
        figures_thinned: res.trace_stride > u64::from(sc.trace_every.max(1)),
        steps: figures(sc, res),
        refused,
        unreached,
        warnings,
        warning_spans_dropped: res.warning_spans_dropped,
        faults,
        faults_lost: res.faults_lost,
        loop_findings: res.loop_findings.iter().map(|f| f.to_string()).collect(),
        peak_mw: res.peak_mw,
        facet_damage: res.damaged,
        final_state: res.final_state.name(),
        timeline,
        expectations,
        caution: SAFETY_CAUTION,
    }
}

/// A time in a summary of a run of `run_ms`: ms, or s for runs of 10 s
/// and more.
fn when(t_ms: f64, run_ms: f64) -> String {
    if run_ms >= 10_000.0 {
        format!("{:.3} s", t_ms / 1e3)
    } else {
        format!("{t_ms:.3} ms")
    }
}

/// Shortfall in words: "600.000 mW (13.3 %) short of the 4500 mW setpoint".
fn shortfall_text(t: &Target) -> String {
    match t.shortfall {
        Some(d) => format!(
            "{d:.3} {u} ({:.1} %) short of the {} {u} setpoint",
            100.0 * d / t.setpoint,
            t.setpoint,
            u = t.unit
        ),
        None => format!("setpoint {} {}", t.setpoint, t.unit),
    }
}

impl Summary {
    /// A time as the text gives it (ms; s for runs of 10 s and more).
    fn when(&self, t_ms: f64) -> String {
        when(t_ms, self.duration_ms)
    }

    /// The summary as printed text (and `summary.txt`).
    pub fn text(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "scenario: {}", self.scenario);
        if let Some(f) = &self.config_fingerprint {
            let _ = writeln!(s, "configuration fingerprint: {f}");
        }
        let _ = writeln!(
            s,
            "ticks: {} at {} Hz ({})",
            self.ticks,
            self.tick_hz,
            self.when(self.duration_ms)
        );
        if self.figures_thinned {
            let _ = writeln!(
                s,
                "step figures use one tick in {}: the run is longer than the {} rows kept in memory \
                 (trace.csv has every recorded tick, the plot every tick's extremes)",
                self.figures_stride,
                crate::trace::RETAINED_ROWS,
            );
        }
        if !self.steps.is_empty() {
            let _ = writeln!(s, "steps:");
        }
        for f in &self.steps {
            let settle = f.settling_ms.map_or(
                "does not settle to ±1 % before the next event".into(),
                |t| format!("settles to ±1 % in {t:.3} ms"),
            );
            let ceiling = match (&f.target, f.on_ceiling) {
                (Some(t), true) => format!(
                    "; DRIVE ON ITS CEILING: {:.3} {}, {}",
                    t.reached,
                    t.unit,
                    shortfall_text(t)
                ),
                (None, true) => "; DRIVE ON ITS CEILING: the request is beyond reach".into(),
                // In ACC the setpoint is a current: say what the drive reached.
                (Some(t), false) if t.unit == "mA" => {
                    format!("; setpoint {} mA, drive {:.3} mA", t.setpoint, t.reached)
                }
                _ => String::new(),
            };
            let _ =
                writeln!(
                s,
                "  t={} {}: {:.3} -> {:.3} mW, overshoot {:.2} % of the step, {settle}{ceiling}",
                self.when(f.start_ms),
                f.label, f.initial_mw, f.final_mw, f.overshoot_pct,
            );
        }
        if !self.refused.is_empty() {
            let _ = writeln!(s, "refused requests (not applied):");
        }
        for r in &self.refused {
            let _ = writeln!(s, "  t={} {}: {}", self.when(r.at_ms), r.request, r.reason);
        }
        if !self.unreached.is_empty() {
            let _ = writeln!(s, "setpoint not reached (drive held on its ceiling):");
        }
        for u in &self.unreached {
            let until = u.to_ms.map_or("the end".into(), |t| self.when(t));
            let what = u
                .target
                .as_ref()
                .map_or("no setpoint requested".to_string(), |t| {
                    format!(
                        "{} {:.3} {}, {}",
                        if t.unit == "mW" {
                            "front power"
                        } else {
                            "drive"
                        },
                        t.reached,
                        t.unit,
                        shortfall_text(t)
                    )
                });
            let _ = writeln!(
                s,
                "  t={} to {until}, {}: ceiling {:.3} mA; {what}",
                self.when(u.from_ms),
                u.mode.to_uppercase(),
                u.ceiling_ma
            );
        }
        if !self.warnings.is_empty() {
            let _ = writeln!(s, "warnings:");
        }
        for w in &self.warnings {
            let until = w.to_ms.map_or("the end".into(), |t| self.when(t));
            let span_ms = w.to_ms.unwrap_or(self.duration_ms) - w.from_ms;
            let times = if w.raised > 1 {
                format!(
                    " (raised {} times, {:.0} % of the span)",
                    w.raised,
                    100.0 * w.raised_ms / span_ms.max(f64::MIN_POSITIVE)
                )
            } else {
                String::new()
            };
            let _ = writeln!(
                s,
                "  {} from t={} to {until}{times}",
                w.warning,
                self.when(w.from_ms)
            );
        }
        if self.warning_spans_dropped > 0 {
            let _ = writeln!(
                s,
                "  ... and {} more warning spans not kept",
                self.warning_spans_dropped
            );
        }
        for f in &self.loop_findings {
            let _ = writeln!(s, "loop: {f}");
        }
        if self.faults_lost > 0 {
            let _ = writeln!(
                s,
                "FAULT RECORDS LOST: {} (the core's log overwrote them before they were read)",
                self.faults_lost
            );
        }
        let _ = writeln!(s, "peak optical power: {:.3} mW", self.peak_mw);
        let _ = writeln!(
            s,
            "facet damage: {}",
            if self.facet_damage { "YES" } else { "no" }
        );
        let _ = writeln!(s, "timeline:");
        for t in &self.timeline {
            let _ = writeln!(s, "  t={} {}", self.when(t.at_ms), t.what);
        }
        let _ = writeln!(s, "final state: {}", self.final_state);
        if !self.expectations.is_empty() {
            let failed = self.expectations.iter().filter(|o| !o.passed).count();
            let _ = writeln!(
                s,
                "expectations: {} of {} passed",
                self.expectations.len() - failed,
                self.expectations.len()
            );
            s.push_str(&crate::expect::text(&self.expectations));
        } else {
            let _ = writeln!(
                s,
                "expectations: none (add [[expect]] entries to make the scenario a test; \
                 see docs/scenarios.md)"
            );
        }
        let _ = writeln!(s, "CAUTION: {}", self.caution);
        s
    }

    /// The summary as JSON (`summary.json`): the same figures as the text.
    pub fn json(&self) -> String {
        // Serialising plain data (strings, numbers, options) cannot fail;
        // NaN and infinite values become null.
        serde_json::to_string_pretty(self).unwrap_or_default()
    }
}

/// How a plot axis shows a quantity: a unit name and the factor from the
/// base unit (ms, mW, mA) to it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct AxisUnit {
    /// Unit name on the axis.
    pub name: &'static str,
    /// Value in this unit per base unit.
    pub per_base: f64,
}

/// Time in ms up to 10 s, then in s.
pub fn time_unit(t_end_ms: f64) -> AxisUnit {
    if t_end_ms >= 10_000.0 {
        AxisUnit {
            name: "s",
            per_base: 1e-3,
        }
    } else {
        AxisUnit {
            name: "ms",
            per_base: 1.0,
        }
    }
}

/// A milli-unit (mW, mA) up to 2000, then the whole unit (W, A).
pub fn milli_unit(largest: f64, milli: &'static str, whole: &'static str) -> AxisUnit {
    if largest.abs() >= 2000.0 {
        AxisUnit {
            name: whole,
            per_base: 1e-3,
        }
    } else {
        AxisUnit {
            name: milli,
            per_base: 1.0,
        }
    }
}

/// Values beyond this magnitude are drawn at it, so an absurd input cannot
/// make an axis range infinite.
const PLOT_LIMIT: f64 = 1e100;

fn plot_value(v: f64) -> f64 {
    v.clamp(-PLOT_LIMIT, PLOT_LIMIT)
}

/// Average advance of one character of the plots' 11 px sans-serif text,
/// px (generous, so an estimate never overlaps).
const LABEL_CHAR_PX: f64 = 6.8;
/// Height of one row of event labels, px.
const LABEL_ROW_PX: f64 = 15.0;
/// Most rows of event labels.
const LABEL_ROWS: usize = 6;

/// Where event labels go: each label (anchor x, width, both px) is put
/// just right of its anchor, or just left of it where it would run off
/// the right edge, clamped into `[0, width_px]`, on the first of `rows`
/// rows where it keeps `gap_px` from every label already there. `None`:
/// no row had room.
pub fn place_labels(
    items: &[(f64, f64)],
    width_px: f64,
    rows: usize,
    gap_px: f64,
) -> Vec<Option<(f64, usize)>> {
    let mut taken: Vec<Vec<(f64, f64)>> = vec![Vec::new(); rows];
    items
        .iter()
        .map(|&(x, w)| {
            let w = w.min(width_px);
            let mut left = x + 3.0;
            if left + w > width_px {
                left = x - 3.0 - w;
            }
            let left = left.clamp(0.0, (width_px - w).max(0.0));
            let right = left + w;
            let row = taken.iter().position(|row| {
                row.iter()
                    .all(|&(a, b)| right + gap_px <= a || left >= b + gap_px)
            })?;
            taken[row].push((left, right));
            Some((left, row))
        })
        .collect()
}

/// The label, colour and tick of a happening drawn on the plot (refused
/// requests are listed in the summary only).
fn marker(h: &Happening) -> Option<(u64, RGBColor, String)> {
    Some(match h {
        Happening::State { tick, state } => (*tick, RGBColor(60, 60, 60), state.name().to_string()),
        Happening::Fault { tick, fault, .. } => {
            (*tick, RGBColor(220, 0, 0), format!("FAULT {fault}"))
        }
        Happening::Injected { tick, fault } => {
            (*tick, RGBColor(0, 0, 220), format!("inject {fault}"))
        }
        Happening::FacetDamage { tick } => (*tick, RGBColor(0, 0, 0), "FACET DAMAGE".into()),
        Happening::Rejected { .. } => return None,
    })
}

/// One line of a plot panel: label, colour, channel, drawn wide and pale
/// underneath (`true`) or narrow on top.
type Line = (&'static str, RGBColor, Channel, bool);

/// Plot size, px.
const PLOT_W: u32 = 1100;
const PANEL_H: u32 = 260;
/// Left label area and margin of every panel, px (the event strip lines
/// up with the panels through them).
const Y_LABEL_PX: u32 = 70;
const MARGIN_PX: u32 = 8;

/// Write the SVG plot: optical power (front beside the monitor reading),
/// drive current with its ceiling, and junction, sensed and ambient
/// temperature against time, from the run's min/max envelope (a fast
/// oscillation is a band of its full swing), with state changes, faults
/// and injections marked and labelled in a strip above the panels.
pub fn write_svg(
    path: &Path,
    name: &str,
    res: &RunResult,
    guides: &PlotGuides,
) -> Result<(), String> {
    let svg = plot_svg(name, res, guides)?;
    std::fs::write(path, svg).map_err(|e| format!("{}: {e}", path.display()))
}

/// One stretch of the setpoint in force in a run plot: from `from_ms`
/// (to the next stretch or the end), the power setpoint in APC or the
/// current setpoint in ACC (`None`: none requested yet).
#[derive(Clone, Debug, PartialEq)]
pub struct SetpointStretch {
    /// Start of the stretch, ms.
    pub from_ms: f64,
    /// Power setpoint in force, mW, while the mode is APC.
    pub power_mw: Option<f64>,
    /// Current setpoint in force, mA, while the mode is ACC.
    pub current_ma: Option<f64>,
}

/// Reference lines a run plot draws beside its traces: the setpoint in
/// force (dashed, in the power panel in APC and in the current panel in
/// ACC) and, where the board declares `[laser_safety]`, the front-facet
/// power at which the accessible emission reaches its class limit.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct PlotGuides {
    /// The setpoint in force, stretch by stretch, in time order.
    pub setpoints: Vec<SetpointStretch>,
    /// (front-facet power, mW; legend text) of the class limit.
    pub class_limit: Option<(f64, String)>,
    /// Legend text for an intended class without a limit (Class 4).
    pub class_note: Option<String>,
}

impl PlotGuides {
    /// The setpoints a scenario's accepted requests put in force in `res`.
    pub fn for_run(sc: &Scenario, res: &RunResult) -> Self {
        let refused = refused_events(res);
        let mut times: Vec<f64> = sc.events.iter().map(|e| e.at_ms).collect();
        times.sort_by(f64::total_cmp);
        times.dedup();
        let mut setpoints: Vec<SetpointStretch> = Vec::new();
        for t in std::iter::once(0.0).chain(times) {
            let (p, i, mode) = in_force(sc, &refused, t);
            let (power_mw, current_ma) = match mode {
                ModeName::Apc => (p, None),
                ModeName::Acc => (None, i),
            };
            if setpoints
                .last()
                .is_some_and(|l| l.power_mw == power_mw && l.current_ma == current_ma)
            {
                continue;
            }
            setpoints.push(SetpointStretch {
                from_ms: t,
                power_mw,
                current_ma,
            });
        }
        PlotGuides {
            setpoints,
            ..PlotGuides::default()
        }
    }

    /// The same with a legend line saying that the intended `class` sets
    /// no accessible emission limit (Class 4), so none is drawn.
    pub fn with_unlimited_class(self, class: &str) -> Self {
        PlotGuides {
            class_note: Some(format!("Class {class}: no accessible emission limit")),
            ..self
        }
    }

    /// The same with the class limit line: `class` (its name), its
    /// continuous accessible emission limit `ael_mw` and the accessible
    /// fraction of the front-facet power.
    pub fn with_class_limit(self, class: &str, ael_mw: f64, accessible_fraction: f64) -> Self {
        let front_mw = ael_mw / accessible_fraction;
        PlotGuides {
            class_limit: Some((
                front_mw,
                format!(
                    "Class {class} limit, CW: {} accessible = {} front",
                    mw_text(ael_mw),
                    mw_text(front_mw)
                ),
            )),
            ..self
        }
    }
}

/// A power in mW or W to four significant digits, without trailing zeros.
fn mw_text(mw: f64) -> String {
    let (v, unit) = if mw >= 1000.0 {
        (mw * 1e-3, "W")
    } else {
        (mw, "mW")
    };
    format!("{} {unit}", crate::units::sig_text(v, 4))
}

/// The plot of [`write_svg`] as an SVG document.
pub fn plot_svg(name: &str, res: &RunResult, guides: &PlotGuides) -> Result<String, String> {
    let e = |x: &dyn std::fmt::Display| x.to_string();
    let bins = res.envelope.bins();
    let dt_ms = 1e3 / f64::from(res.tick_hz.max(1));
    let t_end_ms = bins
        .last()
        .map_or(1.0, |b| b.last_tick as f64 * dt_ms)
        .max(1e-3);
    let tu = time_unit(t_end_ms);
    let x_end = t_end_ms * tu.per_base;
    let largest = |cs: &[Channel]| {
        bins.iter()
            .flat_map(|b| cs.iter().map(move |c| b.max(*c).abs().max(b.min(*c).abs())))
            .filter(|v| v.is_finite())
            .fold(0.0, f64::max)
    };
    let pu = milli_unit(largest(&[Channel::FrontMw, Channel::MonitorMw]), "mW", "W");
    let cu = milli_unit(
        largest(&[Channel::CurrentMa, Channel::CeilingMa]),
        "mA",
        "A",
    );
    let degc = AxisUnit {
        name: "degC",
        per_base: 1.0,
    };
    let panels: [(&str, AxisUnit, Vec<Line>); 3] = [
        (
            "optical power",
            pu,
            vec![
                (
                    "monitor reading (as the core sees it)",
                    RGBColor(245, 160, 40),
                    Channel::MonitorMw,
                    true,
                ),
                (
                    "front power",
                    RGBColor(190, 20, 20),
                    Channel::FrontMw,
                    false,
                ),
            ],
        ),
        (
            "drive current",
            cu,
            vec![
                ("ceiling", RGBColor(150, 150, 150), Channel::CeilingMa, true),
                ("actual", RGBColor(20, 60, 200), Channel::CurrentMa, false),
            ],
        ),
        (
            "temperature",
            degc,
            vec![
                ("ambient", RGBColor(90, 90, 90), Channel::AmbientC, false),
                (
                    "sensed (case)",
                    RGBColor(0, 140, 90),
                    Channel::SensedC,
                    false,
                ),
                ("junction", RGBColor(150, 0, 150), Channel::JunctionC, false),
            ],
        ),
    ];

    // Event labels: laid out first, so the strip is as tall as it needs.
    let plot_w_px = f64::from(PLOT_W - 2 * MARGIN_PX - Y_LABEL_PX);
    let marks: Vec<(u64, RGBColor, String)> = res.happenings.iter().filter_map(marker).collect();
    let to_px = |tick: u64| (tick as f64 * dt_ms * tu.per_base) / x_end * plot_w_px;
    let items: Vec<(f64, f64)> = marks
        .iter()
        .map(|(t, _, s)| (to_px(*t), s.chars().count() as f64 * LABEL_CHAR_PX))
        .collect();
    let placed = place_labels(&items, plot_w_px, LABEL_ROWS, 6.0);
    let rows_used = placed.iter().flatten().map(|p| p.1 + 1).max().unwrap_or(0);
    let dropped = placed.iter().filter(|p| p.is_none()).count();
    let strip_h = 30 + (rows_used.max(1) as u32) * LABEL_ROW_PX as u32 + 6;

    let mut buf = String::new();
    {
        let root =
            SVGBackend::with_string(&mut buf, (PLOT_W, strip_h + 3 * PANEL_H)).into_drawing_area();
        root.fill(&WHITE).map_err(|x| e(&x))?;
        let (strip, rest) = root.split_vertically(strip_h);
        let areas = rest.split_evenly((3, 1));
        let title = if dropped > 0 {
            format!("{name}  (+{dropped} more events: see the summary)")
        } else {
            name.to_string()
        };
        let mut top = ChartBuilder::on(&strip)
            .caption(title, ("sans-serif", 18))
            .margin(MARGIN_PX)
            .margin_bottom(0)
            .y_label_area_size(Y_LABEL_PX)
            .build_cartesian_2d(0.0..plot_w_px, 0.0..(rows_used.max(1) as f64))
            .map_err(|x| e(&x))?;
        for ((_, color, text), p) in marks.iter().zip(&placed) {
            if let Some((left, row)) = p {
                top.draw_series(std::iter::once(Text::new(
                    text.clone(),
                    (*left, rows_used.max(1) as f64 - *row as f64),
                    ("sans-serif", 11).into_font().color(color),
                )))
                .map_err(|x| e(&x))?;
            }
        }
        for (k, (area, (title, unit, lines))) in areas.iter().zip(panels.iter()).enumerate() {
            let (mut lo, mut hi) = (f64::MAX, f64::MIN);
            for b in bins {
                for (_, _, c, _) in lines {
                    for v in [b.min(*c), b.max(*c)] {
                        if v.is_finite() {
                            lo = lo.min(plot_value(v) * unit.per_base);
                            hi = hi.max(plot_value(v) * unit.per_base);
                        }
                    }
                }
            }
            // The setpoint stretches of this panel, in its unit: power in
            // the first panel, current in the second.
            let stretches: Vec<(f64, f64, f64)> = guides
                .setpoints
                .iter()
                .enumerate()
                .filter_map(|(j, s)| {
                    let v = match k {
                        0 => s.power_mw,
                        1 => s.current_ma,
                        _ => None,
                    }?;
                    let to = guides
                        .setpoints
                        .get(j + 1)
                        .map_or(t_end_ms, |n| n.from_ms.min(t_end_ms));
                    (s.from_ms < t_end_ms).then_some((
                        s.from_ms * tu.per_base,
                        to * tu.per_base,
                        v * unit.per_base,
                    ))
                })
                .collect();
            for &(_, _, v) in &stretches {
                lo = lo.min(v);
                hi = hi.max(v);
            }
            // The class limit joins the power panel's range when it is
            // within three times the largest power drawn; else the legend
            // says it is off the scale.
            let class = match (k, &guides.class_limit, &guides.class_note) {
                (0, Some((mw, text)), _) => {
                    let v = mw * unit.per_base;
                    let on_scale = lo <= hi && v <= 3.0 * hi.max(0.0);
                    if on_scale {
                        hi = hi.max(v);
                    }
                    Some((v, text.clone(), on_scale))
                }
                (0, None, Some(note)) => Some((f64::NAN, note.clone(), false)),
                _ => None,
            };
            if lo > hi {
                (lo, hi) = (0.0, 1.0);
            }
            if hi - lo < 1e-9 * hi.abs().max(1e-6) {
                (lo, hi) = (lo - 0.5 * lo.abs().max(1e-3), hi + 0.5 * hi.abs().max(1e-3));
            }
            // Room above the data for the legend (one row per line).
            let extra = usize::from(!stretches.is_empty()) + usize::from(class.is_some());
            let head = 0.15 + 0.2 * (lines.len() + extra) as f64;
            let (lo, hi) = (lo - (hi - lo) * 0.06, hi + (hi - lo) * head);
            let mut chart = ChartBuilder::on(area)
                .caption(*title, ("sans-serif", 15))
                .margin(MARGIN_PX)
                .x_label_area_size(32)
                .y_label_area_size(Y_LABEL_PX)
                .build_cartesian_2d(0.0..x_end, lo..hi)
                .map_err(|x| e(&x))?;
            chart
                .configure_mesh()
                .x_desc(format!("time ({})", tu.name))
                .y_desc(unit.name)
                .draw()
                .map_err(|x| e(&x))?;
            for (tick, color, _) in &marks {
                let x = *tick as f64 * dt_ms * tu.per_base;
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(x, lo), (x, hi)],
                        color.mix(0.45),
                    )))
                    .map_err(|x| e(&x))?;
            }
            for &(label, color, ch, under) in lines {
                let t = |b: &crate::trace::Bin| {
                    0.5 * (b.first_tick + b.last_tick) as f64 * dt_ms * tu.per_base
                };
                let v = |x: f64| plot_value(x) * unit.per_base;
                let upper: Vec<(f64, f64)> = bins
                    .iter()
                    .filter(|b| b.max(ch).is_finite())
                    .map(|b| (t(b), v(b.max(ch))))
                    .collect();
                let lower: Vec<(f64, f64)> = bins
                    .iter()
                    .filter(|b| b.min(ch).is_finite())
                    .map(|b| (t(b), v(b.min(ch))))
                    .collect();
                let band = bins.iter().any(|b| b.max(ch) > b.min(ch));
                let style = if under {
                    color.mix(0.55).stroke_width(5)
                } else {
                    color.stroke_width(1)
                };
                if band {
                    let poly: Vec<(f64, f64)> =
                        upper.iter().chain(lower.iter().rev()).copied().collect();
                    chart
                        .draw_series(std::iter::once(Polygon::new(
                            poly,
                            color.mix(if under { 0.35 } else { 0.5 }).filled(),
                        )))
                        .map_err(|x| e(&x))?;
                    chart
                        .draw_series(LineSeries::new(lower, style))
                        .map_err(|x| e(&x))?;
                }
                chart
                    .draw_series(LineSeries::new(upper, style))
                    .map_err(|x| e(&x))?
                    .label(label)
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], style));
            }
            if !stretches.is_empty() {
                // A step line: each stretch level, joined at the changes.
                let mut path: Vec<(f64, f64)> = Vec::new();
                for (j, &(from, to, v)) in stretches.iter().enumerate() {
                    let joined = j > 0 && stretches[j - 1].1 >= from;
                    if !joined && !path.is_empty() {
                        chart
                            .draw_series(DashedLineSeries::new(
                                std::mem::take(&mut path),
                                6,
                                4,
                                BLACK.stroke_width(1),
                            ))
                            .map_err(|x| e(&x))?;
                    }
                    path.push((from, v));
                    path.push((to, v));
                }
                chart
                    .draw_series(DashedLineSeries::new(path, 6, 4, BLACK.stroke_width(1)))
                    .map_err(|x| e(&x))?
                    .label("setpoint in force")
                    .legend(|(x, y)| {
                        PathElement::new(vec![(x, y), (x + 16, y)], BLACK.stroke_width(1))
                    });
            }
            if let Some((v, text, on_scale)) = class {
                let col = RGBColor(120, 0, 170);
                let pts = if on_scale {
                    vec![(0.0, v), (x_end, v)]
                } else {
                    Vec::new()
                };
                let label = if on_scale || v.is_nan() {
                    text
                } else {
                    format!("{text} (above the scale)")
                };
                chart
                    .draw_series(DashedLineSeries::new(pts, 10, 4, col.stroke_width(2)))
                    .map_err(|x| e(&x))?
                    .label(label)
                    .legend(move |(x, y)| {
                        PathElement::new(vec![(x, y), (x + 16, y)], col.stroke_width(2))
                    });
            }
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperRight)
                .background_style(WHITE.mix(0.85))
                .border_style(BLACK)
                .label_font(("sans-serif", 12))
                .draw()
                .map_err(|x| e(&x))?;
        }
        root.present().map_err(|x| e(&x))?;
    }
    Ok(buf)
}

/// Opacity of the measured or simulated curves of the L-I-V plot, under
/// their fitted lines.
const LIV_CURVE_OPACITY: f64 = 0.4;

/// Write the L-I-V plot of `curves` to `path` (see [`liv_svg`]).
pub fn write_liv_svg(path: &Path, name: &str, curves: &[LivCurve]) -> Result<(), String> {
    let svg = liv_svg(name, curves)?;
    std::fs::write(path, svg).map_err(|e| format!("{}: {e}", path.display()))
}

/// The L-I-V plot: optical power and forward voltage against current, one
/// line per sweep, each with its threshold (a dashed vertical line and its
/// value) and its slope (the fitted line, dashed, and its value) marked.
/// mW and mA become W and A for big modules.
pub fn liv_svg(name: &str, curves: &[LivCurve]) -> Result<String, String> {
    let e = |x: &dyn std::fmt::Display| x.to_string();
    let pts = || curves.iter().flat_map(|c| c.points.iter());
    let i_max = pts()
        .map(|p| p.i_ma)
        .filter(|v| v.is_finite())
        .fold(1e-9, f64::max);
    let p_max = pts()
        .map(|p| p.p_mw)
        .filter(|v| v.is_finite())
        .fold(1e-9, f64::max);
    let v_max = pts()
        .map(|p| p.v_f_v)
        .filter(|v| v.is_finite())
        .fold(1e-9, f64::max);
    let cu = milli_unit(i_max, "mA", "A");
    let pu = milli_unit(p_max, "mW", "W");
    let colors = [
        RGBColor(20, 60, 200),
        RGBColor(200, 30, 30),
        RGBColor(0, 140, 90),
        RGBColor(150, 0, 150),
        RGBColor(240, 140, 0),
        RGBColor(90, 90, 90),
    ];
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (900, 760)).into_drawing_area();
        root.fill(&WHITE).map_err(|x| e(&x))?;
        let (top, bottom) = root.split_vertically(480);
        let x_end = i_max * cu.per_base;
        // Room above the curves for the legend (one row per curve).
        let p_top = p_max * pu.per_base * (1.12 + 0.09 * curves.len() as f64);
        let mut chart = ChartBuilder::on(&top)
            .caption(format!("{name}: L-I-V"), ("sans-serif", 18))
            .margin(10)
            .x_label_area_size(34)
            .y_label_area_size(64)
            .build_cartesian_2d(0.0..x_end, 0.0..p_top)
            .map_err(|x| e(&x))?;
        chart
            .configure_mesh()
            .x_desc(format!("current ({})", cu.name))
            .y_desc(format!("optical power, front ({})", pu.name))
            .draw()
            .map_err(|x| e(&x))?;
        for (k, c) in curves.iter().enumerate() {
            let col = colors[k % colors.len()];
            let fit = if c.below.is_some() {
                ": below threshold".to_string()
            } else {
                c.fit.map_or(String::new(), |f| {
                    format!(
                        ": threshold {:.*} {} (dot), slope {:.3} W/A (dashed)",
                        if cu.per_base < 1.0 { 3 } else { 2 },
                        f.threshold_ma * cu.per_base,
                        cu.name,
                        f.slope_w_per_a
                    )
                })
            };
            // The curve broad and pale, so that the fitted line drawn on
            // top of it (below) shows where the two coincide.
            chart
                .draw_series(LineSeries::new(
                    c.points
                        .iter()
                        .map(|p| (p.i_ma * cu.per_base, p.p_mw * pu.per_base)),
                    col.mix(LIV_CURVE_OPACITY).stroke_width(5),
                ))
                .map_err(|x| e(&x))?
                .label(format!("{}{fit}", c.heating.label()))
                .legend(move |(x, y)| {
                    PathElement::new(
                        vec![(x, y), (x + 16, y)],
                        col.mix(LIV_CURVE_OPACITY).stroke_width(5),
                    )
                });
        }
        // Threshold and fitted slope of every curve, over all the curves.
        for (k, c) in curves.iter().enumerate() {
            let col = colors[k % colors.len()];
            if let Some(f) = c.fit {
                let th = f.threshold_ma * cu.per_base;
                // The fitted line, from the threshold across the plot, so that
                // a roll-over shows as the curve falling away from it.
                let to_ma = i_max;
                let line = |i_ma: f64| (i_ma - f.threshold_ma) * f.slope_w_per_a;
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(th, 0.0), (to_ma * cu.per_base, line(to_ma) * pu.per_base)],
                        8,
                        5,
                        col.stroke_width(2),
                    ))
                    .map_err(|x| e(&x))?;
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(th, 0.0), (th, 0.25 * p_max * pu.per_base)],
                        3,
                        3,
                        col.stroke_width(1),
                    ))
                    .map_err(|x| e(&x))?;
                chart
                    .draw_series(std::iter::once(Circle::new((th, 0.0), 4, col.filled())))
                    .map_err(|x| e(&x))?;
            }
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .label_font(("sans-serif", 12))
            .draw()
            .map_err(|x| e(&x))?;
        let mut vchart = ChartBuilder::on(&bottom)
            .margin(10)
            .x_label_area_size(34)
            .y_label_area_size(64)
            .build_cartesian_2d(0.0..x_end, 0.0..v_max * 1.1)
            .map_err(|x| e(&x))?;
        vchart
            .configure_mesh()
            .x_desc(format!("current ({})", cu.name))
            .y_desc("forward voltage (V)")
            .draw()
            .map_err(|x| e(&x))?;
        for (k, c) in curves.iter().enumerate() {
            let col = colors[k % colors.len()];
            vchart
                .draw_series(LineSeries::new(
                    c.points.iter().map(|p| (p.i_ma * cu.per_base, p.v_f_v)),
                    col.stroke_width(2),
                ))
                .map_err(|x| e(&x))?;
        }
        root.present().map_err(|x| e(&x))?;
    }
    Ok(buf)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::trace::{Envelope, TraceRow};
    use diodestat_core::{FaultSet, Mode, Warnings};
    use proptest::prelude::*;

    fn row(tick: u64, p_mw: f64, i_ma: f64) -> TraceRow {
        TraceRow {
            tick,
            t_s: tick as f64 * 5e-5,
            state: State::Regulating,
            mode: Mode::Apc,
            enable: true,
            dac_code: 100,
            faults: FaultSet::EMPTY,
            warnings: Warnings::default(),
            p_mw,
            i_ma,
            cmd_ma: i_ma,
            ceiling_ma: i_ma,
            monitor_mw: p_mw,
            tj_c: 25.0,
            sensed_c: 25.0,
            ambient_c: 25.0,
            supply_v: 5.0,
            supply_sensed_v: 5.0,
            v_f_v: 2.0,
            wavelength_nm: 650.0,
            age_h: 0.0,
            threshold_factor: 1.0,
            slope_factor: 1.0,
        }
    }

    fn result(n: u64, f: impl Fn(u64) -> TraceRow) -> RunResult {
        let mut res = RunResult {
            tick_hz: 20_000,
            envelope: Envelope::new(n),
            ..RunResult::default()
        };
        for t in 0..n {
            res.envelope.add(&f(t));
        }
        res.ticks = n;
        res
    }

    /// A power alternating every tick between 10 and 14 mW is drawn as a
    /// filled band spanning both, not as a line at one of them.
    #[test]
    fn a_tick_to_tick_oscillation_is_drawn_as_a_band() {
        let res = result(100_000, |t| {
            row(t, if t % 2 == 0 { 10.0 } else { 14.0 }, 40.0)
        });
        let svg = plot_svg("t", &res, &PlotGuides::default()).unwrap();
        assert!(svg.contains("<polygon"), "no band drawn");
        let steady = result(100_000, |t| row(t, 12.0, 40.0));
        assert!(!plot_svg("t", &steady, &PlotGuides::default())
            .unwrap()
            .contains("<polygon"));
    }

    /// Where front power and monitor reading agree, both stay visible:
    /// the monitor wide and pale underneath, the front power narrow and
    /// dark on top of it.
    #[test]
    fn front_power_is_drawn_over_the_monitor_reading() {
        let res = result(3_000, |t| row(t, 12.0, 40.0));
        let svg = plot_svg("t", &res, &PlotGuides::default()).unwrap();
        let line = |color: &str| {
            svg.find(&format!(
                "<polyline fill=\"none\" opacity=\"0.55\" stroke=\"{color}\" stroke-width=\"5\""
            ))
            .or_else(|| svg.find(&format!("stroke=\"{color}\" stroke-width=\"1\" points")))
            .unwrap_or_else(|| panic!("no line of {color}"))
        };
        // Monitor (245, 160, 40) wide, front (190, 20, 20) narrow, drawn after it.
        assert!(line("#F5A028") < line("#BE1414"));
    }

    /// Big boards in W and A, long runs in s; small ones in mW, mA, ms.
    #[test]
    fn units_scale_with_the_board_and_the_run() {
        let big = result(400_000, |t| row(t, 4500.0, 5200.0));
        let svg = plot_svg("t", &big, &PlotGuides::default()).unwrap();
        assert!(svg.contains("\nW\n") && svg.contains("\nA\n") && svg.contains("time (s)"));
        let small = result(2_000, |t| row(t, 20.0, 45.0));
        let svg = plot_svg("t", &small, &PlotGuides::default()).unwrap();
        assert!(svg.contains("\nmW\n") && svg.contains("\nmA\n") && svg.contains("time (ms)"));
    }

    /// Absurd values (an ambient of ±1e308) still give a finite plot.
    #[test]
    fn absurd_values_do_not_break_the_axes() {
        let res = result(1_000, |t| {
            let mut r = row(t, 1.0, 1.0);
            r.ambient_c = if t % 2 == 0 { 1e308 } else { -1e308 };
            r.tj_c = f64::NAN;
            r
        });
        assert!(plot_svg("t", &res, &PlotGuides::default()).is_ok());
    }

    /// Labels of events at the same moment go on separate rows; one at the
    /// right edge is turned to the left of its marker.
    #[test]
    fn labels_stack_and_turn_at_the_edge() {
        let p = place_labels(&[(10.0, 50.0), (12.0, 50.0), (995.0, 80.0)], 1000.0, 4, 4.0);
        assert_eq!(p[0], Some((13.0, 0)));
        assert_eq!(p[1].map(|x| x.1), Some(1));
        let (left, _) = p[2].unwrap();
        assert!(left + 80.0 <= 1000.0 && left < 995.0);
        // No room left: None, counted as dropped by the plot.
        let many = vec![(500.0, 100.0); 5];
        assert_eq!(place_labels(&many, 1000.0, 4, 4.0)[4], None);
    }

    /// The L-I-V plot marks each curve's threshold (a dot on the current
    /// axis) and states threshold and slope in the legend, in A and W for
    /// a big module.
    /// Two 100-point sweeps of `m` to `max_ma`.
    fn two_sweeps(
        m: &crate::plant::DemoModule,
        a: crate::liv::Heating,
        b: crate::liv::Heating,
        max_ma: f64,
    ) -> [LivCurve; 2] {
        [a, b].map(|h| crate::liv::sweep(m, h, max_ma, 100).unwrap())
    }

    #[test]
    fn liv_plot_marks_threshold_and_slope() {
        use crate::liv::Heating;
        let curves = two_sweeps(
            &crate::plant::DemoModule::pump(),
            Heating::Isothermal { junction_c: 25.0 },
            Heating::SelfHeated { case_c: 25.0 },
            8000.0,
        );
        let svg = liv_svg("pump", &curves).unwrap();
        for c in &curves {
            let f = c.fit.unwrap();
            assert!(svg.contains(&format!("threshold {:.3} A (dot)", f.threshold_ma * 1e-3)));
            assert!(svg.contains(&format!("slope {:.3} W/A (dashed)", f.slope_w_per_a)));
        }
        assert_eq!(svg.matches("<circle").count(), 2);
        assert!(svg.contains("current (A)") && svg.contains("front (W)"));
    }

    /// The fitted slope line is drawn over the curves, not under its own:
    /// every curve is drawn (broad and pale) before any fitted line, and
    /// each fitted line in its curve's full colour.
    #[test]
    fn liv_plot_draws_the_fitted_line_over_its_curve() {
        use crate::liv::Heating;
        let curves = two_sweeps(
            &crate::plant::DemoModule::visible(),
            Heating::Isothermal { junction_c: 25.0 },
            Heating::Isothermal { junction_c: 60.0 },
            60.0,
        );
        let svg = liv_svg("red", &curves).unwrap();
        let pale = format!("opacity=\"{LIV_CURVE_OPACITY}\"");
        let last_curve = svg
            .match_indices("<polyline")
            .filter(|(i, _)| {
                // A curve (not its two-point legend sample).
                let el = svg[*i..].split('>').next().unwrap();
                el.contains(&pale) && el.matches(',').count() > 2
            })
            .map(|(i, _)| i)
            .last()
            .expect("pale curves");
        for col in ["#143CC8", "#C81E1E"] {
            let fitted = svg
                .match_indices("<polyline")
                .map(|(i, _)| (i, svg[i..].split('>').next().unwrap()))
                .find(|(_, el)| {
                    el.contains(&format!("stroke=\"{col}\""))
                        && el.contains("stroke-width=\"2\"")
                        && el.contains("opacity=\"1\"")
                })
                .unwrap_or_else(|| panic!("no full-colour line in {col}"))
                .0;
            assert!(fitted > last_curve, "{col}: fitted line under a curve");
        }
    }

    /// A run plot draws the setpoint in force (its stretches follow the
    /// accepted requests, not the refused one) and, given one, the class
    /// limit line with its legend.
    #[test]
    fn run_plot_shows_the_setpoint_and_the_class_limit() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples/demo-red-30/board.toml");
        let b = crate::board_file::load_board(&path).unwrap();
        let sc = crate::scenario::parse(
            "name = \"sp\"\nboard = \"board.toml\"\nduration_ms = 30\nambient_c = 25\nseed = 3\n\
             [[event]]\nat_ms = 0.5\ndo = \"set-power\"\nmw = 15\n\
             [[event]]\nat_ms = 1\ndo = \"enable\"\n\
             [[event]]\nat_ms = 15\ndo = \"set-power\"\nmw = 12\n\
             [[event]]\nat_ms = 20\ndo = \"set-power\"\nmw = 40\n",
        )
        .unwrap();
        let res = crate::sim::run(&sc, &b.module, b.valid, b.latency).unwrap();
        let g = PlotGuides::for_run(&sc, &res);
        let levels: Vec<(f64, Option<f64>)> = g
            .setpoints
            .iter()
            .map(|s| (s.from_ms, s.power_mw))
            .collect();
        assert_eq!(
            levels,
            [(0.0, None), (0.5, Some(15.0)), (15.0, Some(12.0))],
            "{g:?}"
        );
        let svg = plot_svg("sp", &res, &g).unwrap();
        assert!(svg.contains("setpoint in force"));
        assert!(!svg.contains("Class "));
        let g = g.with_class_limit("1", 0.78, 0.5);
        assert_eq!(g.class_limit.as_ref().unwrap().0, 1.56);
        let svg = plot_svg("sp", &res, &g).unwrap();
        assert!(svg.contains("Class 1 limit, CW: 0.78 mW accessible = 1.56 mW front\n"));
        // A limit far above the run (Class 3B on this board) is named in
        // the legend, not drawn.
        let none = PlotGuides::for_run(&sc, &res).with_unlimited_class("4");
        let svg = plot_svg("sp", &res, &none).unwrap();
        assert!(svg.contains("Class 4: no accessible emission limit"));
        assert_eq!(mw_text(0.785_41), "0.7854 mW");
        assert_eq!(mw_text(1.570_9), "1.571 mW");
        assert_eq!(mw_text(18_000.0), "18 W");
        assert_eq!(mw_text(2_345.6), "2.346 W");
        let far = g.with_class_limit("3B", 500.0, 1.0);
        let svg = plot_svg("sp", &res, &far).unwrap();
        assert!(
            svg.contains("Class 3B limit, CW: 500 mW accessible = 500 mW front (above the scale)")
        );
    }

    proptest! {
        /// Placed labels never leave the plot width and never overlap
        /// another on the same row.
        #[test]
        fn placed_labels_neither_overlap_nor_leave_the_plot(
            items in proptest::collection::vec((0.0f64..1000.0, 1.0f64..300.0), 0..40),
        ) {
            let p = place_labels(&items, 1000.0, 6, 4.0);
            let boxes: Vec<(f64, f64, usize)> = p
                .iter()
                .zip(&items)
                .filter_map(|(p, (_, w))| p.map(|(l, r)| (l, l + w, r)))
                .collect();
            for (i, a) in boxes.iter().enumerate() {
                prop_assert!(a.0 >= 0.0 && a.1 <= 1000.0 + 1e-9);
                for b in &boxes[i + 1..] {
                    prop_assert!(a.2 != b.2 || a.1 + 4.0 <= b.0 || b.1 + 4.0 <= a.0);
                }
            }
        }
    }
}

#[cfg(test)]
mod summary_tests {
    use super::*;
    use crate::board_file::load_board;
    use crate::scenario::parse;

    /// The demo red board at 50 degC ambient: the derated ceiling holds the
    /// power far below the 18 mW asked for (the board's highest setpoint,
    /// held at 25 degC); a 40 mW request is refused.
    fn hot_run() -> (Scenario, RunResult) {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples/demo-red-30/board.toml");
        let b = load_board(&path).unwrap();
        let sc = parse(
            "name = \"hot\"\nboard = \"board.toml\"\nduration_ms = 60\nambient_c = 50\nseed = 3\n\
             [[event]]\nat_ms = 0.5\ndo = \"set-power\"\nmw = 18\n\
             [[event]]\nat_ms = 1\ndo = \"enable\"\n\
             [[event]]\nat_ms = 30\ndo = \"set-power\"\nmw = 40\n",
        )
        .unwrap();
        let res = crate::sim::run(&sc, &b.module, b.valid, b.latency).unwrap();
        (sc, res)
    }

    #[test]
    fn refused_requests_are_shown_as_refused_not_as_steps() {
        let (sc, res) = hot_run();
        let s = summary(&sc, &res, Vec::new());
        // The summary names the configuration the run used by its fingerprint.
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples/demo-red-30/board.toml");
        let f = load_board(&path).unwrap().valid.fingerprint().to_string();
        assert_eq!(s.config_fingerprint.as_deref(), Some(f.as_str()));
        assert!(s
            .text()
            .contains(&format!("configuration fingerprint: {f}\n")));
        assert_eq!(s.refused.len(), 1, "{:?}", s.refused);
        let r = &s.refused[0];
        assert_eq!((r.at_ms, r.request.as_str()), (30.0, "set-power 40 mW"));
        assert!(r.reason.contains("40"), "{}", r.reason);
        assert!(
            s.steps.iter().all(|f| !f.label.contains("40")),
            "a refused request was analysed as a step: {:?}",
            s.steps
        );
        let text = s.text();
        assert!(text.contains("refused requests (not applied):\n  t=30.000 ms set-power 40 mW: "));
        assert!(
            text.contains("t=30.000 ms REFUSED set-power 40 mW"),
            "{text}"
        );
        assert!(
            text.contains("expectations: none (add [[expect]] entries"),
            "{text}"
        );
    }

    #[test]
    fn an_unreachable_setpoint_is_reported_with_its_shortfall() {
        let (sc, res) = hot_run();
        let s = summary(&sc, &res, Vec::new());
        assert_eq!(s.unreached.len(), 1, "{:?}", s.unreached);
        let u = &s.unreached[0];
        assert!(u.from_ms < 10.0 && u.to_ms.is_none(), "{u:?}");
        let t = u.target.as_ref().unwrap();
        assert_eq!((t.setpoint, t.unit), (18.0, "mW"));
        // The power reached is what the plant gave at the end.
        let last = res.trace.last().unwrap().p_mw;
        assert!(
            (t.reached - last).abs() < 0.05 * last,
            "{} vs {last}",
            t.reached
        );
        assert_eq!(t.shortfall, Some(18.0 - t.reached));
        assert!(t.reached < 20.0, "{t:?}");
        // The ceiling it sits on is the derated one, below the 50 mA ceiling.
        assert!(u.ceiling_ma < 48.0, "{}", u.ceiling_ma);
        // The start-up step says so too.
        let step = &s.steps[0];
        assert!(step.on_ceiling);
        assert!(step.target.as_ref().unwrap().shortfall.unwrap() > 5.0);
        let text = s.text();
        assert!(
            text.contains("setpoint not reached (drive held on its ceiling):"),
            "{text}"
        );
        assert!(
            text.contains(&format!(
                "{:.3} mW ({:.1} %) short of the 18 mW setpoint",
                18.0 - t.reached,
                100.0 * (18.0 - t.reached) / 18.0
            )),
            "{text}"
        );
    }

    /// Each enable gives a start-up step, in time order with the others.
    #[test]
    fn every_hand_over_is_a_start_up_step() {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/demo-red-30");
        let b = load_board(&dir.join("board.toml")).unwrap();
        let sc =
            parse(&std::fs::read_to_string(dir.join("modes-and-interlock.toml")).unwrap()).unwrap();
        let res = crate::sim::run(&sc, &b.module, b.valid, b.latency).unwrap();
        let steps = figures(&sc, &res);
        let labels: Vec<&str> = steps.iter().map(|f| f.label.as_str()).collect();
        assert_eq!(
            labels,
            [
                "start-up (from hand-over)",
                "mode ACC",
                "mode APC",
                "start-up (from hand-over)"
            ]
        );
        assert!(steps[3].start_ms > 60.0);
        let acc = steps[1].target.as_ref().unwrap();
        assert_eq!((acc.setpoint, acc.unit), (35.0, "mA"));
        assert!((acc.reached - 35.0).abs() < 0.5, "{acc:?}");
    }

    #[test]
    fn warnings_are_shown_with_when() {
        let (sc, res) = hot_run();
        let s = summary(&sc, &res, Vec::new());
        let derating = s.warnings.iter().find(|w| w.warning == "derating").unwrap();
        assert_eq!((derating.from_ms, derating.to_ms), (0.0, None));
        assert!(s.warnings.iter().any(|w| w.warning == "at-ceiling"));
        let text = s.text();
        assert!(
            text.contains("warnings:\n  derating from t=0.000 ms to the end"),
            "{text}"
        );
        assert!(
            text.contains("t=0.000 ms warning derating raised\n"),
            "{text}"
        );
    }

    #[test]
    fn the_json_summary_holds_the_same_figures_as_the_text() {
        let (sc, res) = hot_run();
        let s = summary(&sc, &res, Vec::new());
        let j: serde_json::Value = serde_json::from_str(&s.json()).unwrap();
        assert_eq!(j["scenario"], "hot");
        assert_eq!(j["ticks"], res.ticks);
        // Numbers survive JSON to the last digit or so (serde_json parses
        // without exact round trip).
        let same = |v: &serde_json::Value, x: f64| {
            let y = v.as_f64().unwrap();
            assert!((y - x).abs() <= 1e-12 * x.abs(), "{y} vs {x}");
        };
        same(&j["peak_mw"], s.peak_mw);
        assert_eq!(j["final_state"], s.final_state);
        assert_eq!(j["steps"].as_array().unwrap().len(), s.steps.len());
        same(&j["steps"][0]["final_mw"], s.steps[0].final_mw);
        assert_eq!(j["refused"][0]["request"], "set-power 40 mW");
        let t = s.unreached[0].target.as_ref().unwrap();
        same(
            &j["unreached"][0]["target"]["shortfall"],
            t.shortfall.unwrap(),
        );
        assert_eq!(j["warnings"][0]["warning"], s.warnings[0].warning);
        assert_eq!(j["caution"], SAFETY_CAUTION);
        // Every figure the text prints is in the JSON.
        let text = s.text();
        assert!(text.contains(&format!(
            "peak optical power: {:.3} mW",
            j["peak_mw"].as_f64().unwrap()
        )));
        assert!(text.contains(&format!(
            "ceiling {:.3} mA",
            j["unreached"][0]["ceiling_ma"].as_f64().unwrap()
        )));
    }
}
