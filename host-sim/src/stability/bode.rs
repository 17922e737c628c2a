//! Bode plots (magnitude in dB and unwrapped phase in degrees against
//! frequency in Hz on a log axis) of one or several loops, for example the
//! plant corners of one board, with the gain and phase margins marked.
//! SVG through plotters; the text is SVG text, no font library is needed.

use std::path::Path;

use plotters::coord::Shift;
use plotters::prelude::*;

use super::margins::{margins, LoopTransfer, Margins};

/// One loop on the plot.
pub struct BodeLoop<'a> {
    /// Legend label (for example the corner name).
    pub label: &'a str,
    /// The open loop.
    pub tf: &'a dyn LoopTransfer,
}

/// Sampled Bode data of one loop.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct BodeData {
    /// Frequencies, Hz (log-spaced, increasing).
    pub f_hz: Vec<f64>,
    /// Magnitude, dB.
    pub mag_db: Vec<f64>,
    /// Phase, degrees, unwrapped along the frequency axis from the branch
    /// in (-180, 180] at the first frequency.
    pub phase_deg: Vec<f64>,
}

impl BodeData {
    /// The unwrapped phase at `f_hz`, linearly interpolated in log f
    /// (NaN outside the range).
    pub fn phase_at(&self, f_hz: f64) -> f64 {
        interp(&self.f_hz, &self.phase_deg, f_hz)
    }

    /// The magnitude in dB at `f_hz`, interpolated (NaN outside the range).
    pub fn mag_db_at(&self, f_hz: f64) -> f64 {
        interp(&self.f_hz, &self.mag_db, f_hz)
    }
}

fn interp(xs: &[f64], ys: &[f64], x: f64) -> f64 {
    let i = xs.partition_point(|v| *v < x);
    if i == 0 {
        return if xs.first() == Some(&x) {
            ys[0]
        } else {
            f64::NAN
        };
    }
    if i >= xs.len() {
        return f64::NAN;
    }
    let (x0, x1) = (xs[i - 1].ln(), xs[i].ln());
    let t = (x.ln() - x0) / (x1 - x0);
    ys[i - 1] + t * (ys[i] - ys[i - 1])
}

/// Bode data of `l` at `n >= 2` log-spaced frequencies from `f_lo_hz` to
/// `f_hi_hz`, with the phase unwrapped (steps taken as the argument of the
/// ratio of neighbouring responses, so the grid must resolve the phase).
pub fn bode_data<L: LoopTransfer + ?Sized>(
    l: &L,
    f_lo_hz: f64,
    f_hi_hz: f64,
    n: usize,
) -> BodeData {
    let n = n.max(2);
    let two_pi = 2.0 * std::f64::consts::PI;
    let (a, b) = (f_lo_hz.ln(), f_hi_hz.ln());
    let mut d = BodeData::default();
    let mut prev = None;
    let mut phase = 0.0;
    for i in 0..n {
        let f = if i + 1 == n {
            f_hi_hz
        } else {
            (a + (b - a) * i as f64 / (n - 1) as f64).exp()
        };
        let v = l.response(two_pi * f);
        phase = match prev {
            None => v.arg().to_degrees(),
            Some(p) => phase + (v / p).arg().to_degrees(),
        };
        if v.is_finite() && v.abs() > 0.0 {
            prev = Some(v);
        }
        d.f_hz.push(f);
        d.mag_db.push(20.0 * v.abs().log10());
        d.phase_deg.push(phase);
    }
    d
}

/// Plotting failed.
#[derive(Debug, thiserror::Error)]
#[error("Bode plot: {0}")]
pub struct BodeError(pub String);

fn err<E: std::fmt::Display>(e: E) -> BodeError {
    BodeError(e.to_string())
}

const COLORS: [RGBColor; 6] = [
    RGBColor(20, 60, 200),
    RGBColor(200, 30, 30),
    RGBColor(0, 140, 90),
    RGBColor(150, 0, 150),
    RGBColor(240, 140, 0),
    RGBColor(90, 90, 90),
];

fn fmt_hz(f: f64) -> String {
    if !f.is_finite() {
        "-".into()
    } else if f >= 1e3 {
        format!("{:.3} kHz", f / 1e3)
    } else {
        format!("{f:.1} Hz")
    }
}

/// Axis label of a log-axis key point: 1, 2 and 5 of every decade are
/// labelled (`10`, `20`, `50`, `1k`, ...), the other ticks stay bare.
fn fmt_axis_hz(f: f64) -> String {
    if !(f.is_finite() && f > 0.0) {
        return String::new();
    }
    let decade = 10f64.powf(f.log10().floor());
    let mantissa = f / decade;
    if ![1.0, 2.0, 5.0]
        .iter()
        .any(|m| (mantissa - m).abs() < 1e-6 * m)
    {
        return String::new();
    }
    if f >= 1e3 {
        format!("{}k", f / 1e3)
    } else {
        format!("{f}")
    }
}

/// Frequency ratio between gain-margin bars of corners that share a phase
/// crossover: a few pixels apart on the plot's log axis (drawing only; the
/// legend and the label give each corner's own frequency and margin).
const GM_BAR_STEP: f64 = 1.04;

/// Text height of the margin labels, px.
const MARK_FONT_PX: f64 = 13.0;
/// Average advance of one character of the margin labels, px (generous).
const MARK_CHAR_PX: f64 = 7.0;

/// Moves label boxes (left, top, width; px) down by whole rows, in the
/// order given, until none overlaps one placed before it; a box pushed past
/// `bottom_px` goes above its anchor instead.
pub fn stack_labels(boxes: &mut [(f64, f64, f64)], row_px: f64, top_px: f64, bottom_px: f64) {
    for i in 0..boxes.len() {
        let (x, y0, w) = boxes[i];
        let free = |y: f64, placed: &[(f64, f64, f64)]| {
            placed
                .iter()
                .all(|&(a, b, c)| x + w <= a || a + c <= x || y + row_px <= b || b + row_px <= y)
        };
        let mut y = y0;
        let mut tries = 0;
        while !free(y, &boxes[..i]) && tries < 64 {
            y += row_px;
            tries += 1;
        }
        if y + row_px > bottom_px || tries == 64 {
            y = y0;
            tries = 0;
            while !free(y, &boxes[..i]) && y - row_px >= top_px && tries < 64 {
                y -= row_px;
                tries += 1;
            }
        }
        boxes[i].1 = y;
    }
}

/// One-line summary of the margins, as written on the plot.
pub fn margin_text(m: &Margins) -> String {
    let pm = if m.pm_deg.is_finite() {
        format!("PM {:.1} deg @ {}", m.pm_deg, fmt_hz(m.fcp_hz))
    } else {
        "PM inf".into()
    };
    let gm = if m.gm_db.is_finite() {
        format!("GM {:.1} dB @ {}", m.gm_db, fmt_hz(m.fcg_hz))
    } else {
        "GM inf".into()
    };
    let bw = if m.bandwidth_hz.is_finite() {
        format!(", BW {}", fmt_hz(m.bandwidth_hz))
    } else {
        String::new()
    };
    format!("{pm}, {gm}{bw}")
}

/// The frequency range, Hz, covering every loop's poles, zeros and
/// crossovers, up to the highest Nyquist frequency for discrete loops.
fn plot_range(loops: &[BodeLoop<'_>], ms: &[Margins]) -> (f64, f64) {
    let two_pi = 2.0 * std::f64::consts::PI;
    let mut lo = f64::INFINITY;
    let mut hi: f64 = 0.0;
    let mut nyq: f64 = 0.0;
    for (l, m) in loops.iter().zip(ms) {
        let mut ws = l.tf.characteristic_rad_s();
        ws.extend([m.wcp_rad_s, m.wcg_rad_s]);
        for w in ws.into_iter().filter(|w| w.is_finite() && *w > 0.0) {
            lo = lo.min(w / two_pi);
            hi = hi.max(w / two_pi);
        }
        if let Some(w) = l.tf.nyquist_rad_s() {
            nyq = nyq.max(w / two_pi);
        }
    }
    if !lo.is_finite() {
        lo = 0.01;
        hi = 100.0;
    }
    // Start on a whole decade, so every decade of the axis is labelled.
    let lo = 10f64.powf((lo / 10.0).log10().floor());
    let hi = if nyq > 0.0 {
        nyq
    } else {
        10f64.powf((hi * 10.0).log10().ceil())
    };
    if hi > lo * 1.01 {
        (lo, hi)
    } else {
        (hi / 1e3, hi)
    }
}

fn finite_range(vals: impl Iterator<Item = f64>, floor_span: f64) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in vals.filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return (-1.0, 1.0);
    }
    if hi - lo < floor_span {
        let c = 0.5 * (hi + lo);
        lo = c - floor_span / 2.0;
        hi = c + floor_span / 2.0;
    }
    let pad = 0.06 * (hi - lo);
    (lo - pad, hi + pad)
}

/// The Bode plot of `loops` as an SVG document.
pub fn bode_svg(title: &str, loops: &[BodeLoop<'_>]) -> Result<String, BodeError> {
    if loops.is_empty() {
        return Err(BodeError("no loops to plot".into()));
    }
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (1000, 800)).into_drawing_area();
        draw(&root, title, loops)?;
        root.present().map_err(err)?;
    }
    Ok(buf)
}

/// Writes the Bode plot of `loops` to `path` as SVG.
pub fn write_bode_svg(path: &Path, title: &str, loops: &[BodeLoop<'_>]) -> Result<(), BodeError> {
    let svg = bode_svg(title, loops)?;
    std::fs::write(path, svg).map_err(|e| BodeError(format!("{}: {e}", path.display())))
}

fn draw(
    root: &DrawingArea<SVGBackend<'_>, Shift>,
    title: &str,
    loops: &[BodeLoop<'_>],
) -> Result<(), BodeError> {
    root.fill(&WHITE).map_err(err)?;
    let ms: Vec<Margins> = loops.iter().map(|l| margins(l.tf)).collect();
    let (f_lo, f_hi) = plot_range(loops, &ms);
    let data: Vec<BodeData> = loops
        .iter()
        .map(|l| {
            let top =
                l.tf.nyquist_rad_s()
                    .map_or(f_hi, |w| (w / (2.0 * std::f64::consts::PI)).min(f_hi));
            let decades = (top / f_lo).log10().max(1.0);
            bode_data(l.tf, f_lo, top, (decades * 200.0) as usize)
        })
        .collect();
    let (mag_lo, mag_hi) = {
        let (lo, hi) = finite_range(data.iter().flat_map(|d| d.mag_db.iter().copied()), 20.0);
        // Keep deep notches (zeros near the Nyquist frequency) from
        // squashing the interesting part.
        (lo.max(hi - 160.0), hi)
    };
    let (ph_lo, ph_hi) = finite_range(data.iter().flat_map(|d| d.phase_deg.iter().copied()), 90.0);

    let (upper, lower) = root.split_vertically(400);
    let mut mag = ChartBuilder::on(&upper)
        .caption(format!("{title}: open-loop magnitude"), ("sans-serif", 18))
        .margin(10)
        .x_label_area_size(30)
        .y_label_area_size(60)
        .build_cartesian_2d((f_lo..f_hi).log_scale(), mag_lo..mag_hi)
        .map_err(err)?;
    mag.configure_mesh()
        .x_labels(30)
        .x_max_light_lines(0)
        .x_desc("frequency (Hz)")
        .x_label_formatter(&|v| fmt_axis_hz(*v))
        .y_desc("|L| (dB)")
        .draw()
        .map_err(err)?;
    let mut ph = ChartBuilder::on(&lower)
        .caption("open-loop phase", ("sans-serif", 18))
        .margin(10)
        .x_label_area_size(30)
        .y_label_area_size(60)
        .build_cartesian_2d((f_lo..f_hi).log_scale(), ph_lo..ph_hi)
        .map_err(err)?;
    ph.configure_mesh()
        .x_labels(30)
        .x_max_light_lines(0)
        .x_desc("frequency (Hz)")
        .x_label_formatter(&|v| fmt_axis_hz(*v))
        .y_desc("phase (deg)")
        .draw()
        .map_err(err)?;

    // Reference lines: 0 dB and the odd multiples of -180° in range.
    let grey = RGBColor(110, 110, 110);
    mag.draw_series(DashedLineSeries::new(
        vec![(f_lo, 0.0), (f_hi, 0.0)],
        6,
        4,
        grey.stroke_width(1),
    ))
    .map_err(err)?;
    let mut k = ((ph_hi + 180.0) / 360.0).floor();
    while -180.0 + 360.0 * k >= ph_lo {
        let y = -180.0 + 360.0 * k;
        ph.draw_series(DashedLineSeries::new(
            vec![(f_lo, y), (f_hi, y)],
            6,
            4,
            grey.stroke_width(1),
        ))
        .map_err(err)?;
        k -= 1.0;
    }

    // Margin labels: anchor (px), text, colour; placed after the curves.
    let mut marks: Vec<(i32, i32, String, RGBColor)> = Vec::new();
    // Gain-margin bars already drawn, by frequency: corners that share a
    // phase crossover (a gain spread moves |L|, not the phase) would draw
    // their bars on one line, each hiding the one before, with their
    // labels on top of each other.
    let mut gm_bars: Vec<f64> = Vec::new();
    for (i, ((l, d), m)) in loops.iter().zip(&data).zip(&ms).enumerate() {
        let c = COLORS[i % COLORS.len()];
        let pts = |ys: &[f64]| -> Vec<(f64, f64)> {
            d.f_hz
                .iter()
                .zip(ys)
                .filter(|(_, y)| y.is_finite())
                .map(|(f, y)| (*f, *y))
                .collect()
        };
        mag.draw_series(LineSeries::new(pts(&d.mag_db), c.stroke_width(2)))
            .map_err(err)?
            .label(format!("{}: {}", l.label, margin_text(m)))
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], c.stroke_width(2)));
        ph.draw_series(LineSeries::new(pts(&d.phase_deg), c.stroke_width(2)))
            .map_err(err)?;

        // Phase margin: at the gain crossover, from the phase down (or up)
        // to the -180° line it is measured against.
        if m.pm_deg.is_finite() && m.fcp_hz >= f_lo && m.fcp_hz <= f_hi {
            let f = m.fcp_hz;
            let p = d.phase_at(f);
            mag.draw_series(DashedLineSeries::new(
                vec![(f, mag_lo), (f, mag_hi)],
                3,
                3,
                c.mix(0.6).stroke_width(1),
            ))
            .map_err(err)?;
            mag.draw_series(std::iter::once(Circle::new((f, 0.0), 4, c.filled())))
                .map_err(err)?;
            if p.is_finite() {
                ph.draw_series(std::iter::once(PathElement::new(
                    vec![(f, p), (f, p - m.pm_deg)],
                    c.stroke_width(3),
                )))
                .map_err(err)?;
                let (x, y) = ph.backend_coord(&(f, p - 0.5 * m.pm_deg));
                marks.push((x, y, format!("PM {:.1} deg", m.pm_deg), c));
            }
        }
        // Gain margin: at the phase crossover, from |L| up to 0 dB.
        if m.gm_db.is_finite() && m.fcg_hz >= f_lo && m.fcg_hz <= f_hi {
            let f = m.fcg_hz;
            let y = -m.gm_db;
            ph.draw_series(DashedLineSeries::new(
                vec![(f, ph_lo), (f, ph_hi)],
                3,
                3,
                c.mix(0.6).stroke_width(1),
            ))
            .map_err(err)?;
            let p = d.phase_at(f);
            if p.is_finite() {
                ph.draw_series(std::iter::once(Circle::new((f, p), 4, c.filled())))
                    .map_err(err)?;
            }
            // The bar beside those of earlier corners at the same
            // frequency (within 1 %): GM_BAR_STEP further right for each.
            let same = gm_bars
                .iter()
                .filter(|g| (*g / f).ln().abs() < 0.01)
                .count();
            gm_bars.push(f);
            let fb = f * GM_BAR_STEP.powi(same as i32);
            mag.draw_series(std::iter::once(PathElement::new(
                vec![(fb, y.max(mag_lo)), (fb, 0.0)],
                c.stroke_width(3),
            )))
            .map_err(err)?;
            let (x, y) = mag.backend_coord(&(fb, 0.5 * y.max(mag_lo)));
            marks.push((x, y, format!("GM {:.1} dB", m.gm_db), c));
        }
    }
    // Each margin label right of its mark on a white box, stacked so that
    // labels of several corners at nearly the same frequency do not overlap.
    let (w_px, h_px) = root.dim_in_pixel();
    let row = MARK_FONT_PX + 3.0;
    let mut boxes: Vec<(f64, f64, f64)> = marks
        .iter()
        .map(|(x, y, t, _)| {
            let w = t.chars().count() as f64 * MARK_CHAR_PX;
            // Right of its own mark and of any other mark the text would
            // otherwise run across.
            let mut left = f64::from(*x) + 6.0;
            for (x2, ..) in &marks {
                let x2 = f64::from(*x2);
                if x2 >= f64::from(*x) && x2 < left + w {
                    left = left.max(x2 + 6.0);
                }
            }
            let left = left.min(f64::from(w_px) - w - 4.0);
            (left, f64::from(*y) - row / 2.0, w)
        })
        .collect();
    stack_labels(&mut boxes, row, 0.0, f64::from(h_px));
    for ((_, _, text, c), (x, y, w)) in marks.iter().zip(&boxes) {
        let (x, y) = (*x as i32, *y as i32);
        root.draw(&Rectangle::new(
            [(x - 2, y), (x + *w as i32, y + row as i32 - 1)],
            WHITE.mix(0.85).filled(),
        ))
        .map_err(err)?;
        root.draw(&Text::new(
            text.clone(),
            (x, y + 1),
            ("sans-serif", MARK_FONT_PX).into_font().color(c),
        ))
        .map_err(err)?;
    }
    mag.configure_series_labels()
        .position(SeriesLabelPosition::LowerLeft)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .label_font(("sans-serif", 13))
        .draw()
        .map_err(err)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stability::tf::{ContinuousTf, DiscreteTf};

    #[test]
    fn unwrapped_phase_passes_minus_180() {
        // 2/(s+1)^3: phase -3·atan(ω), -270° at high frequency, unwrapped.
        let l = ContinuousTf::from_descending(&[2.0], &[1.0, 3.0, 3.0, 1.0]);
        let two_pi = 2.0 * std::f64::consts::PI;
        let d = bode_data(&l, 0.01 / two_pi, 100.0 / two_pi, 2000);
        let last = *d.phase_deg.last().unwrap();
        assert!(
            (last - (-3.0 * 100f64.atan().to_degrees())).abs() < 1e-9,
            "{last}"
        );
        let p = d.phase_at(3f64.sqrt() / two_pi);
        assert!((p + 180.0).abs() < 0.05, "{p}");
        let want = 20.0 * 2f64.log10() - 30.0 * (1.0 + 1e-4f64).log10();
        assert!((d.mag_db[0] - want).abs() < 1e-9, "{}", d.mag_db[0]);
    }

    #[test]
    fn svg_has_curves_labels_and_margins() {
        let dt = 1.0 / 20_000.0;
        let a = DiscreteTf::from_descending(&[0.2], &[1.0, -1.0, 0.0], dt);
        let b = a.scaled(2.0);
        let svg = bode_svg(
            "test",
            &[
                BodeLoop {
                    label: "nominal",
                    tf: &a,
                },
                BodeLoop {
                    label: "hot",
                    tf: &b,
                },
            ],
        )
        .unwrap();
        assert!(svg.starts_with("<svg"));
        for want in [
            "nominal: PM",
            "hot: PM",
            "GM ",
            "frequency (Hz)",
            "phase (deg)",
        ] {
            assert!(svg.contains(want), "missing {want}");
        }
        let ma = margins(&a);
        assert!(svg.contains(&format!("PM {:.1} deg", ma.pm_deg)));
        assert!(bode_svg("empty", &[]).is_err());
        // The two loops share their phase crossover (b is a scaled): their
        // gain-margin bars stand side by side, not on one line.
        let mut bars: Vec<&str> = svg
            .split("<polyline")
            .skip(1)
            .map(|el| el.split('>').next().unwrap())
            .filter(|el| el.contains("stroke-width=\"3\""))
            .filter_map(|el| {
                let pts = el.split("points=\"").nth(1)?.split('"').next()?;
                let xs: Vec<&str> = pts
                    .split_whitespace()
                    .map(|p| p.split(',').next().unwrap())
                    .collect();
                (xs.len() == 2 && xs[0] == xs[1]).then_some(xs[0])
            })
            .collect();
        assert_eq!(bars.len(), 4, "two PM and two GM bars");
        bars.sort_unstable();
        bars.dedup();
        assert_eq!(bars.len(), 4, "bars on one line: {bars:?}");
        // Every decade in range is labelled.
        for want in ["\n100\n", "\n1k\n"] {
            assert!(svg.contains(want), "missing decade label {want:?}");
        }
    }

    #[test]
    fn axis_labels_mark_1_2_5_of_each_decade() {
        let l: Vec<String> = [10.0, 20.0, 30.0, 50.0, 100.0, 700.0, 1000.0, 2000.0]
            .iter()
            .map(|f| fmt_axis_hz(*f))
            .collect();
        assert_eq!(l, ["10", "20", "", "50", "100", "", "1k", "2k"]);
    }

    /// Margin labels of several corners at the same spot end up on rows of
    /// their own.
    #[test]
    fn stacked_labels_do_not_overlap() {
        let mut b = vec![(100.0, 50.0, 80.0); 4];
        b.push((400.0, 50.0, 80.0));
        stack_labels(&mut b, 16.0, 0.0, 400.0);
        for i in 0..b.len() {
            for j in i + 1..b.len() {
                let (p, q) = (b[i], b[j]);
                let apart =
                    p.0 + p.2 <= q.0 || q.0 + q.2 <= p.0 || p.1 + 16.0 <= q.1 || q.1 + 16.0 <= p.1;
                assert!(apart, "{p:?} {q:?}");
            }
        }
        assert_eq!(b[4].1, 50.0, "a label with room keeps its place");
        // Near the bottom, labels go up instead.
        let mut c = vec![(0.0, 390.0, 50.0); 3];
        stack_labels(&mut c, 16.0, 0.0, 400.0);
        assert!(c.iter().all(|x| x.1 + 16.0 <= 400.0 + 16.0 && x.1 >= 0.0));
        assert!(c[1].1 < 390.0 && c[2].1 < c[1].1);
    }
}
