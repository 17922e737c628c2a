//! Run reports: the printed summary (settling, overshoot, peak power,
//! faults with their latency), the SVG plot of a run (drawn from its min/max
//! envelope, see `crate::trace`) and the L-I-V plot. The CSV trace is
//! streamed by `crate::trace::CsvTrace` while the run goes.

use std::fmt::Write as _;
use std::path::Path;

use diodestat_core::State;
use plotters::prelude::*;

use crate::liv::LivCurve;
use crate::scenario::{Action, Scenario};
use crate::sim::{Happening, RunResult, TraceRow};
use crate::stability::time_domain::{on_ceiling, overshoot_pct, settled_from, SETTLING_BAND};
use crate::trace::Channel;

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
    if res.trace_stride > u64::from(sc.trace_every.max(1)) {
        let _ = writeln!(
            s,
            "step figures use one tick in {}: the run is longer than the {} rows kept in memory \
             (trace.csv has one tick in {}, the plot every tick's extremes)",
            res.trace_stride,
            crate::trace::RETAINED_ROWS,
            sc.trace_every.max(1)
        );
    }
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
pub fn write_svg(path: &Path, name: &str, res: &RunResult) -> Result<(), String> {
    let svg = plot_svg(name, res)?;
    std::fs::write(path, svg).map_err(|e| format!("{}: {e}", path.display()))
}

/// The plot of [`write_svg`] as an SVG document.
pub fn plot_svg(name: &str, res: &RunResult) -> Result<String, String> {
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
        for (area, (title, unit, lines)) in areas.iter().zip(panels.iter()) {
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
            if lo > hi {
                (lo, hi) = (0.0, 1.0);
            }
            if hi - lo < 1e-9 * hi.abs().max(1e-6) {
                (lo, hi) = (lo - 0.5 * lo.abs().max(1e-3), hi + 0.5 * hi.abs().max(1e-3));
            }
            // Room above the data for the legend (one row per line).
            let head = 0.15 + 0.15 * lines.len() as f64;
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
            let fit = c.fit.map_or(String::new(), |f| {
                format!(
                    ": threshold {:.*} {} (dot), slope {:.3} W/A (dashed)",
                    if cu.per_base < 1.0 { 3 } else { 2 },
                    f.threshold_ma * cu.per_base,
                    cu.name,
                    f.slope_w_per_a
                )
            });
            chart
                .draw_series(LineSeries::new(
                    c.points
                        .iter()
                        .map(|p| (p.i_ma * cu.per_base, p.p_mw * pu.per_base)),
                    col.stroke_width(2),
                ))
                .map_err(|x| e(&x))?
                .label(format!("{}{fit}", c.heating.label()))
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 16, y)], col.stroke_width(2))
                });
            if let Some(f) = c.fit {
                let th = f.threshold_ma * cu.per_base;
                // The fitted line, from the threshold across the plot, so that
                // a roll-over shows as the curve falling away from it.
                let to_ma = i_max;
                let line = |i_ma: f64| (i_ma - f.threshold_ma) * f.slope_w_per_a;
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(th, 0.0), (to_ma * cu.per_base, line(to_ma) * pu.per_base)],
                        5,
                        4,
                        col.mix(0.8).stroke_width(1),
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
        let svg = plot_svg("t", &res).unwrap();
        assert!(svg.contains("<polygon"), "no band drawn");
        let steady = result(100_000, |t| row(t, 12.0, 40.0));
        assert!(!plot_svg("t", &steady).unwrap().contains("<polygon"));
    }

    /// Where front power and monitor reading agree, both stay visible:
    /// the monitor wide and pale underneath, the front power narrow and
    /// dark on top of it.
    #[test]
    fn front_power_is_drawn_over_the_monitor_reading() {
        let res = result(3_000, |t| row(t, 12.0, 40.0));
        let svg = plot_svg("t", &res).unwrap();
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
        let svg = plot_svg("t", &big).unwrap();
        assert!(svg.contains("\nW\n") && svg.contains("\nA\n") && svg.contains("time (s)"));
        let small = result(2_000, |t| row(t, 20.0, 45.0));
        let svg = plot_svg("t", &small).unwrap();
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
        assert!(plot_svg("t", &res).is_ok());
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
    #[test]
    fn liv_plot_marks_threshold_and_slope() {
        use crate::liv::{sweep, Heating};
        let m = crate::plant::DemoModule::pump();
        let curves = [
            sweep(&m, Heating::Isothermal { junction_c: 25.0 }, 8000.0, 100).unwrap(),
            sweep(&m, Heating::SelfHeated { case_c: 25.0 }, 8000.0, 100).unwrap(),
        ];
        let svg = liv_svg("pump", &curves).unwrap();
        for c in &curves {
            let f = c.fit.unwrap();
            assert!(svg.contains(&format!("threshold {:.3} A (dot)", f.threshold_ma * 1e-3)));
            assert!(svg.contains(&format!("slope {:.3} W/A (dashed)", f.slope_w_per_a)));
        }
        assert_eq!(svg.matches("<circle").count(), 2);
        assert!(svg.contains("current (A)") && svg.contains("front (W)"));
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
