//! Run reports: the run summary ([`Summary`]: step figures, refused
//! requests, unreachable setpoints with the shortfall, warnings with when,
//! faults with their latency, expectations; printed as text and written as
//! `summary.json`), the CSV trace and the SVG plot.

use std::fmt::Write as _;
use std::path::Path;

use diodestat_core::{Fault, State};
use plotters::prelude::*;
use serde::Serialize;

use crate::expect::Outcome;
use crate::scenario::{Action, ModeName, Scenario};
use crate::sim::{Happening, RunResult, TraceRow};
use crate::stability::time_domain::{on_ceiling, overshoot_pct, settled_from, SETTLING_BAND};

/// One line of a plot panel: label, colour, value of a trace row.
type Line = (
    &'static str,
    RGBColor,
    Box<dyn Fn(&crate::sim::TraceRow) -> f64>,
);
/// One plot panel: title, unit, lines.
type Panel = (&'static str, &'static str, Vec<Line>);

/// The safety caution every report carries.
pub const SAFETY_CAUTION: &str = "Simulation results complement, never replace, a hardware current limit, \
interlock gating of the enable line, an independent watchdog and eye protection. Follow IEC 60825-1, \
local regulations and your site's laser safety officer.";

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
    /// Ticks run.
    pub ticks: u64,
    /// Tick rate, Hz.
    pub tick_hz: u32,
    /// Length of the run, ms.
    pub duration_ms: f64,
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
                    .map_or("", |f| f.unit());
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
        ticks: res.ticks,
        tick_hz: res.tick_hz,
        duration_ms: ms(res.ticks),
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
        let _ = writeln!(
            s,
            "ticks: {} at {} Hz ({})",
            self.ticks,
            self.tick_hz,
            self.when(self.duration_ms)
        );
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

/// Write the trace as CSV.
pub fn write_csv(path: &Path, res: &RunResult) -> std::io::Result<()> {
    let mut s = String::from(
        "tick,t_s,state,p_mw,i_ma,cmd_ma,ceiling_ma,monitor_mw,tj_c,sensed_c,ambient_c\n",
    );
    for r in &res.trace {
        let _ = writeln!(
            s,
            "{},{:.7},{},{:.6},{:.6},{:.6},{:.6},{:.6},{:.4},{:.4},{:.4}",
            r.tick,
            r.t_s,
            r.state.name(),
            r.p_mw,
            r.i_ma,
            r.cmd_ma,
            r.ceiling_ma,
            r.monitor_mw,
            r.tj_c,
            r.sensed_c,
            r.ambient_c
        );
    }
    std::fs::write(path, s)
}

/// Write the SVG plot: optical power, drive current, junction and sensed
/// temperature against time, with state changes and faults marked.
pub fn write_svg(path: &Path, name: &str, res: &RunResult) -> Result<(), String> {
    let e = |x: String| x;
    let root = SVGBackend::new(path, (1100, 800)).into_drawing_area();
    root.fill(&WHITE).map_err(|x| e(x.to_string()))?;
    let panels = root.split_evenly((3, 1));
    let t_end = res.trace.last().map_or(1e-3, |r| r.t_s).max(1e-6) * 1e3;
    let dt_ms = 1e3 / f64::from(res.tick_hz);
    let series: [Panel; 3] = [
        (
            "optical power",
            "mW",
            vec![
                ("front power", RGBColor(200, 30, 30), Box::new(|r| r.p_mw)),
                (
                    "monitor reading",
                    RGBColor(240, 140, 0),
                    Box::new(|r| r.monitor_mw),
                ),
            ],
        ),
        (
            "drive current",
            "mA",
            vec![
                ("actual", RGBColor(20, 60, 200), Box::new(|r| r.i_ma)),
                (
                    "ceiling",
                    RGBColor(120, 120, 120),
                    Box::new(|r| r.ceiling_ma),
                ),
            ],
        ),
        (
            "temperature",
            "degC",
            vec![
                ("junction", RGBColor(150, 0, 150), Box::new(|r| r.tj_c)),
                (
                    "sensed (case)",
                    RGBColor(0, 140, 90),
                    Box::new(|r| r.sensed_c),
                ),
                ("ambient", RGBColor(90, 90, 90), Box::new(|r| r.ambient_c)),
            ],
        ),
    ];
    for (i, (panel, (title, unit, lines))) in panels.iter().zip(series.iter()).enumerate() {
        let (mut lo, mut hi) = (f64::MAX, f64::MIN);
        for r in &res.trace {
            for (_, _, f) in lines {
                let v = f(r);
                if v.is_finite() {
                    lo = lo.min(v);
                    hi = hi.max(v);
                }
            }
        }
        if !(lo.is_finite() && hi.is_finite()) || lo >= hi {
            lo = lo.min(0.0);
            hi = lo + 1.0;
        }
        let pad = (hi - lo) * 0.08;
        let caption = if i == 0 {
            format!("{name}: {title}")
        } else {
            title.to_string()
        };
        let mut chart = ChartBuilder::on(panel)
            .caption(caption, ("sans-serif", 18))
            .margin(8)
            .x_label_area_size(30)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..t_end, (lo - pad)..(hi + pad))
            .map_err(|x| e(x.to_string()))?;
        chart
            .configure_mesh()
            .x_desc("time (ms)")
            .y_desc(*unit)
            .draw()
            .map_err(|x| e(x.to_string()))?;
        for (label, color, f) in lines {
            let c = *color;
            chart
                .draw_series(LineSeries::new(
                    res.trace.iter().map(|r| (r.t_s * 1e3, f(r))),
                    c,
                ))
                .map_err(|x| e(x.to_string()))?
                .label(*label)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], c));
        }
        // Marker labels go on the first of four rows where they do not
        // run into the previous label of that row.
        let min_gap = t_end * 0.07;
        let mut row_end = [f64::MIN; 4];
        for h in &res.happenings {
            let (tick, color, text) = match h {
                Happening::State { tick, state } => {
                    (*tick, RGBColor(60, 60, 60), state.name().to_string())
                }
                Happening::Fault { tick, fault, .. } => {
                    (*tick, RGBColor(220, 0, 0), format!("FAULT {fault}"))
                }
                Happening::Injected { tick, fault } => {
                    (*tick, RGBColor(0, 0, 220), format!("inject {fault}"))
                }
                Happening::FacetDamage { tick } => {
                    (*tick, RGBColor(0, 0, 0), "FACET DAMAGE".into())
                }
                Happening::Rejected { .. } => continue,
            };
            let x = tick as f64 * dt_ms;
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(x, lo - pad), (x, hi + pad)],
                    color.mix(0.5),
                )))
                .map_err(|x| e(x.to_string()))?;
            if i == 0 {
                let row = row_end
                    .iter()
                    .position(|&end| x >= end + min_gap)
                    .unwrap_or(row_end.len() - 1);
                row_end[row] = x;
                let y = hi + pad * 0.5 - row as f64 * (hi - lo) * 0.07;
                chart
                    .draw_series(std::iter::once(Text::new(
                        text,
                        (x, y),
                        ("sans-serif", 11).into_font().color(&color),
                    )))
                    .map_err(|x| e(x.to_string()))?;
            }
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.8))
            .border_style(BLACK)
            .draw()
            .map_err(|x| e(x.to_string()))?;
    }
    root.present().map_err(|x| e(x.to_string()))?;
    Ok(())
}

/// L-I-V curves: (temperature degC, points of (mA, mW, V)).
pub type LivCurves = [(f64, Vec<(f64, f64, f64)>)];

/// Write the L-I-V plot: power and forward voltage against current.
pub fn write_liv_svg(path: &Path, name: &str, curves: &LivCurves) -> Result<(), String> {
    let e = |x: String| x;
    let root = SVGBackend::new(path, (900, 700)).into_drawing_area();
    root.fill(&WHITE).map_err(|x| e(x.to_string()))?;
    let (top, bottom) = root.split_vertically(420);
    let i_max = curves
        .iter()
        .flat_map(|c| c.1.iter().map(|p| p.0))
        .fold(1e-9, f64::max);
    let p_max = curves
        .iter()
        .flat_map(|c| c.1.iter().map(|p| p.1))
        .fold(1e-9, f64::max);
    let v_max = curves
        .iter()
        .flat_map(|c| c.1.iter().map(|p| p.2))
        .fold(1e-9, f64::max);
    let colors = [
        RGBColor(20, 60, 200),
        RGBColor(200, 30, 30),
        RGBColor(0, 140, 90),
        RGBColor(150, 0, 150),
        RGBColor(240, 140, 0),
    ];
    for (area, idx, ymax, unit) in [
        (&top, 1usize, p_max, "optical power (mW)"),
        (&bottom, 2usize, v_max, "forward voltage (V)"),
    ] {
        let mut chart = ChartBuilder::on(area)
            .caption(
                if idx == 1 {
                    format!("{name}: L-I-V")
                } else {
                    String::new()
                },
                ("sans-serif", 18),
            )
            .margin(8)
            .x_label_area_size(30)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..i_max, 0.0..ymax * 1.05)
            .map_err(|x| e(x.to_string()))?;
        chart
            .configure_mesh()
            .x_desc("current (mA)")
            .y_desc(unit)
            .draw()
            .map_err(|x| e(x.to_string()))?;
        for (k, (t, pts)) in curves.iter().enumerate() {
            let c = colors[k % colors.len()];
            chart
                .draw_series(LineSeries::new(
                    pts.iter().map(|p| (p.0, if idx == 1 { p.1 } else { p.2 })),
                    c,
                ))
                .map_err(|x| e(x.to_string()))?
                .label(format!("{t} degC"))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], c));
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.8))
            .border_style(BLACK)
            .draw()
            .map_err(|x| e(x.to_string()))?;
    }
    root.present().map_err(|x| e(x.to_string()))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::boardfile::load_board;
    use crate::scenario::parse;

    /// The demo red board at 50 degC ambient: the derated ceiling holds the
    /// power far below the 25 mW asked for; a 40 mW request is refused (the
    /// board's highest setpoint is 30 mW).
    fn hot_run() -> (Scenario, RunResult) {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples/demo-red-30/board.toml");
        let b = load_board(&path).unwrap();
        let sc = parse(
            "name = \"hot\"\nboard = \"board.toml\"\nduration_ms = 60\nambient_c = 50\nseed = 3\n\
             [[event]]\nat_ms = 0.5\ndo = \"set-power\"\nmw = 25\n\
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
        assert_eq!((t.setpoint, t.unit), (25.0, "mW"));
        // The power reached is what the plant gave at the end.
        let last = res.trace.last().unwrap().p_mw;
        assert!(
            (t.reached - last).abs() < 0.05 * last,
            "{} vs {last}",
            t.reached
        );
        assert_eq!(t.shortfall, Some(25.0 - t.reached));
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
                "{:.3} mW ({:.1} %) short of the 25 mW setpoint",
                25.0 - t.reached,
                4.0 * (25.0 - t.reached)
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
