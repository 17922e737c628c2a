//! Run reports: the printed summary (settling, overshoot, peak power,
//! faults with their latency), the CSV trace and the SVG plot.

use std::fmt::Write as _;
use std::path::Path;

use diodestat_core::State;
use plotters::prelude::*;

use crate::scenario::{Action, Scenario};
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
/// or from a setpoint request, up to the next scenario event or the end of
/// Regulating (so a later fault or ambient step does not count as
/// overshoot of the step before it).
#[derive(Clone, Debug, PartialEq)]
pub struct Figures {
    /// What started the stretch.
    pub label: String,
    /// Start of the stretch, ms.
    pub start_ms: f64,
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
}

/// Fewest trace rows a stretch needs for its figures to mean anything.
const MIN_ROWS: usize = 20;

/// The figures of every stretch of regulation that starts at the hand-over,
/// a set-power or set-current request or a mode change.
pub fn figures(sc: &Scenario, res: &RunResult) -> Vec<Figures> {
    let tr = &res.trace;
    let ms = |r: &TraceRow| r.t_s * 1e3;
    let mut starts: Vec<(f64, String)> = Vec::new();
    if let Some(h) = tr.iter().find(|r| r.state == State::Regulating) {
        starts.push((ms(h), "start-up (from hand-over)".into()));
    }
    for e in &sc.events {
        match e.action {
            Action::SetPower { mw } => starts.push((e.at_ms, format!("set power {mw} mW"))),
            Action::SetCurrent { ma } => starts.push((e.at_ms, format!("set current {ma} mA"))),
            Action::Mode { mode } => starts.push((
                e.at_ms,
                format!("mode {}", format!("{mode:?}").to_uppercase()),
            )),
            _ => {}
        }
    }
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
        let tail = &w[w.len() - w.len() / 20..];
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
        let on_ceiling = on_ceiling(&tr[b - tail.len()..b]);
        out.push(Figures {
            label,
            on_ceiling,
            start_ms: ms(&tr[a]),
            initial_mw,
            final_mw,
            overshoot_pct: overshoot_pct(&w, initial_mw, final_mw),
            settling_ms: settled_from(&w, final_mw, SETTLING_BAND * final_mw.abs())
                .map(|i| i as f64 * row_ms),
        });
    }
    out
}

/// The printed summary.
pub fn summary(sc: &Scenario, res: &RunResult) -> String {
    let mut s = String::new();
    let dt_us = 1e6 / f64::from(res.tick_hz);
    let _ = writeln!(s, "scenario: {}", sc.name);
    let _ = writeln!(
        s,
        "ticks: {} at {} Hz ({:.1} ms)",
        res.ticks,
        res.tick_hz,
        res.ticks as f64 * dt_us / 1e3
    );
    for f in figures(sc, res) {
        let settle = f.settling_ms.map_or(
            "does not settle to ±1 % before the next event".into(),
            |t| format!("settles to ±1 % in {t:.3} ms"),
        );
        let _ = writeln!(
            s,
            "t={:.3} ms {}: {:.3} -> {:.3} mW, overshoot {:.2} % of the step, {settle}{}",
            f.start_ms,
            f.label,
            f.initial_mw,
            f.final_mw,
            f.overshoot_pct,
            if f.on_ceiling {
                " (drive on its ceiling: the request is beyond reach)"
            } else {
                ""
            }
        );
    }
    for f in &res.loop_findings {
        let _ = writeln!(s, "loop: {f}");
    }
    let _ = writeln!(s, "peak optical power: {:.3} mW", res.peak_mw);
    let _ = writeln!(
        s,
        "facet damage: {}",
        if res.damaged { "YES" } else { "no" }
    );
    let mut injected: Option<u64> = None;
    for h in &res.happenings {
        match h {
            Happening::Injected { tick, fault } => {
                injected = Some(*tick);
                let _ = writeln!(
                    s,
                    "  t={:.3} ms injected {fault}",
                    *tick as f64 * dt_us / 1e3
                );
            }
            Happening::Fault {
                tick,
                fault,
                measured,
                limit,
            } => {
                let lat = injected
                    .map(|i| {
                        format!(
                            ", latency {} ticks = {:.0} us",
                            tick - i,
                            (tick - i) as f64 * dt_us
                        )
                    })
                    .unwrap_or_default();
                let _ = writeln!(
                    s,
                    "  t={:.3} ms FAULT {fault} (measured {measured:.3}, limit {limit:.3}){lat}",
                    *tick as f64 * dt_us / 1e3
                );
            }
            Happening::State { tick, state } => {
                let _ = writeln!(
                    s,
                    "  t={:.3} ms -> {}",
                    *tick as f64 * dt_us / 1e3,
                    state.name()
                );
            }
            Happening::Rejected { tick, why } => {
                let _ = writeln!(
                    s,
                    "  t={:.3} ms request refused: {why}",
                    *tick as f64 * dt_us / 1e3
                );
            }
            Happening::FacetDamage { tick } => {
                let _ = writeln!(s, "  t={:.3} ms FACET DAMAGE", *tick as f64 * dt_us / 1e3);
            }
        }
    }
    let _ = writeln!(s, "final state: {}", res.final_state.name());
    let _ = writeln!(s, "CAUTION: {SAFETY_CAUTION}");
    s
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
