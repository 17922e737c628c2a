//! Fitting a module's diode to measured L-I-V sweeps: the sweep CSV
//! reader, the per-sweep fits (threshold by two methods, slope efficiency,
//! series resistance and turn-on voltage, kinks and roll-over, residuals
//! and confidence intervals), T0 and T1 across case temperatures, the
//! module file written from a template, the report and the plot, and
//! all of it written at once ([`write_fit`], the outputs of `diodestat fit`).
//! Methods and their sources are in `docs/fit.md`.
//!
//! The fits assume the junction at the case temperature: pulsed or
//! low-duty sweeps, as parameter extraction uses them (common practice).

use std::fmt;
use std::path::{Path, PathBuf};

use plotters::prelude::*;
use serde::Serialize;

use crate::files::{self, FileError, Staging};
use crate::module_file::{self, ModuleFile, ModuleFileError};
use crate::plant::{c_to_k, thermal_voltage_v};
use crate::safety::SAFETY_CAUTION;

/// Two-sided 95 % interval half-width in standard errors (normal
/// approximation; the sweeps have tens to hundreds of points).
pub const Z95: f64 = 1.959_964;
/// Default relative slope step reported as a kink.
pub const KINK_TOL: f64 = 0.10;
/// Ideality assumed when the V-I curve cannot separate it from the series
/// resistance (common practice for laser diodes, from memory).
pub const FALLBACK_IDEALITY: f64 = 2.0;
/// Most rows read from one sweep file.
pub const MAX_ROWS: usize = 100_000;
/// Case temperatures closer than this belong to one sweep, K.
pub const SAME_CASE_K: f64 = 0.25;

/// One measured point.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Point {
    /// Current, A.
    pub i_a: f64,
    /// Front-facet optical power, W.
    pub p_w: f64,
    /// Forward voltage, V.
    pub v_v: f64,
}

/// The points measured at one case temperature, current increasing.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Sweep {
    /// Case temperature, degC (mean of the sweep's rows).
    pub case_c: f64,
    /// The points.
    pub points: Vec<Point>,
}

/// Why a sweep file or a fit was refused.
#[derive(Debug)]
pub enum FitError {
    /// The file could not be read.
    Read(FileError),
    /// The header is not a set of known columns with units.
    Header {
        /// The sweep file.
        path: PathBuf,
        /// Line of the header.
        line: usize,
        /// What is wrong.
        why: String,
    },
    /// A value in a row is not a finite number in range.
    Value {
        /// The sweep file.
        path: PathBuf,
        /// Line, from 1.
        line: usize,
        /// Column name as written in the header.
        column: String,
        /// The value as written.
        value: String,
        /// What the value must be.
        why: String,
    },
    /// A sweep cannot be fitted (too few points, no lasing, ...).
    Sweep {
        /// The sweep file.
        path: PathBuf,
        /// Case temperature of the sweep, degC.
        case_c: f64,
        /// What is wrong.
        why: String,
    },
    /// The template module file could not be used.
    Template(ModuleFileError),
    /// The fitted figures do not make a valid module.
    Module(String),
}

impl fmt::Display for FitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FitError::Read(e) => write!(f, "{e}"),
            FitError::Header { path, line, why } => {
                write!(f, "{}: line {line}: header: {why}", path.display())
            }
            FitError::Value {
                path,
                line,
                column,
                value,
                why,
            } => write!(
                f,
                "{}: line {line}: {column} = {value}: {why}",
                path.display()
            ),
            FitError::Sweep { path, case_c, why } => {
                write!(f, "{}: sweep at case {case_c} degC: {why}", path.display())
            }
            FitError::Template(e) => write!(f, "--template: {e}"),
            FitError::Module(why) => write!(f, "fitted module: {why}"),
        }
    }
}

impl std::error::Error for FitError {}

/// Column kinds and the factor from the header's unit to SI.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Col {
    Current(f64),
    Power(f64),
    Voltage(f64),
    /// Offset to degC.
    Case(f64),
}

fn column(name: &str) -> Option<Col> {
    Some(match name.trim() {
        "current_a" => Col::Current(1.0),
        "current_ma" => Col::Current(1e-3),
        "power_w" => Col::Power(1.0),
        "power_mw" => Col::Power(1e-3),
        "voltage_v" => Col::Voltage(1.0),
        "voltage_mv" => Col::Voltage(1e-3),
        "case_c" => Col::Case(0.0),
        "case_k" => Col::Case(-273.15),
        _ => return None,
    })
}

const COLUMNS_HELP: &str = "expected the four columns current_a|current_ma, power_w|power_mw, \
     voltage_v|voltage_mv and case_c|case_k, in any order";

/// Parse sweep CSV text (`path` names the file in messages): `#` comment
/// lines and blank lines skipped, a header naming the four columns with
/// their units, then one row per point. Rows are grouped into sweeps by
/// case temperature (within [`SAME_CASE_K`]), in order of first
/// appearance; each sweep is sorted by current.
pub fn parse_sweeps(text: &str, path: &Path) -> Result<Vec<Sweep>, FitError> {
    let mut lines = text
        .lines()
        .enumerate()
        .map(|(k, l)| (k + 1, l.trim()))
        .filter(|(_, l)| !l.is_empty() && !l.starts_with('#'));
    let header_err = |line: usize, why: String| FitError::Header {
        path: path.to_path_buf(),
        line,
        why,
    };
    let Some((hline, header)) = lines.next() else {
        return Err(header_err(1, format!("no header: {COLUMNS_HELP}")));
    };
    let names: Vec<&str> = header.split(',').map(str::trim).collect();
    let mut idx = [usize::MAX; 4];
    let mut scale = [1.0; 4];
    for (k, n) in names.iter().enumerate() {
        let c = column(n)
            .ok_or_else(|| header_err(hline, format!("unknown column `{n}`: {COLUMNS_HELP}")))?;
        let (slot, s) = match c {
            Col::Current(s) => (0, s),
            Col::Power(s) => (1, s),
            Col::Voltage(s) => (2, s),
            Col::Case(s) => (3, s),
        };
        if idx[slot] != usize::MAX {
            return Err(header_err(
                hline,
                format!("column `{n}` repeats a quantity"),
            ));
        }
        idx[slot] = k;
        scale[slot] = s;
    }
    if idx.contains(&usize::MAX) {
        return Err(header_err(hline, COLUMNS_HELP.to_string()));
    }
    let mut sweeps: Vec<(Vec<f64>, Vec<Point>)> = Vec::new();
    let mut rows = 0usize;
    for (line, l) in lines {
        rows += 1;
        if rows > MAX_ROWS {
            return Err(header_err(line, format!("more than {MAX_ROWS} rows")));
        }
        let cells: Vec<&str> = l.split(',').map(str::trim).collect();
        if cells.len() != names.len() {
            return Err(FitError::Value {
                path: path.to_path_buf(),
                line,
                column: "row".into(),
                value: l.chars().take(40).collect(),
                why: format!("{} values; the header has {}", cells.len(), names.len()),
            });
        }
        let mut v = [0.0; 4];
        for slot in 0..4 {
            let cell = cells[idx[slot]];
            let bad = |why: &str| FitError::Value {
                path: path.to_path_buf(),
                line,
                column: names[idx[slot]].to_string(),
                value: cell.chars().take(40).collect(),
                why: why.to_string(),
            };
            let x: f64 = cell.parse().map_err(|_| bad("not a number"))?;
            if !x.is_finite() {
                return Err(bad("must be finite"));
            }
            v[slot] = if slot == 3 {
                x + scale[3]
            } else {
                x * scale[slot]
            };
            let ok = match slot {
                0 => (0.0..=1000.0).contains(&v[0]),
                1 => (-1.0..=10_000.0).contains(&v[1]),
                2 => (-1.0..=100.0).contains(&v[2]),
                _ => (-100.0..=200.0).contains(&v[3]),
            };
            if !ok {
                return Err(bad(match slot {
                    0 => "current must be in 0 ..= 1000 A",
                    1 => "power must be in -1 ..= 10000 W",
                    2 => "voltage must be in -1 ..= 100 V",
                    _ => "case temperature must be in -100 ..= 200 degC",
                }));
            }
        }
        let p = Point {
            i_a: v[0],
            p_w: v[1],
            v_v: v[2],
        };
        match sweeps.iter_mut().find(|(t, _)| {
            let mean = t.iter().sum::<f64>() / t.len() as f64;
            (mean - v[3]).abs() < SAME_CASE_K
        }) {
            Some((t, pts)) => {
                t.push(v[3]);
                pts.push(p);
            }
            None => sweeps.push((vec![v[3]], vec![p])),
        }
    }
    if sweeps.is_empty() {
        return Err(header_err(hline, "no rows after the header".into()));
    }
    Ok(sweeps
        .into_iter()
        .map(|(t, mut pts)| {
            pts.sort_by(|a, b| a.i_a.total_cmp(&b.i_a));
            Sweep {
                case_c: t.iter().sum::<f64>() / t.len() as f64,
                points: pts,
            }
        })
        .collect())
}

/// Linear least squares: coefficients, their covariance and the residual
/// sum of squares, or `None` when the basis is degenerate.
struct Lsq {
    beta: Vec<f64>,
    cov: Vec<Vec<f64>>,
    sse: f64,
    dof: usize,
}

fn invert(mut a: Vec<Vec<f64>>) -> Option<Vec<Vec<f64>>> {
    let n = a.len();
    let mut inv: Vec<Vec<f64>> = (0..n)
        .map(|i| (0..n).map(|j| f64::from(u8::from(i == j))).collect())
        .collect();
    for c in 0..n {
        let piv = (c..n).max_by(|&x, &y| a[x][c].abs().total_cmp(&a[y][c].abs()))?;
        if a[piv][c].abs() < 1e-300 {
            return None;
        }
        a.swap(c, piv);
        inv.swap(c, piv);
        let d = a[c][c];
        for j in 0..n {
            a[c][j] /= d;
            inv[c][j] /= d;
        }
        for r in 0..n {
            if r != c {
                let f = a[r][c];
                for j in 0..n {
                    a[r][j] -= f * a[c][j];
                    inv[r][j] -= f * inv[c][j];
                }
            }
        }
    }
    Some(inv)
}

/// Least squares of `y` on the rows `x` (each a basis evaluation); the
/// columns are scaled to unit norm before the normal equations are solved.
fn lsq(x: &[Vec<f64>], y: &[f64]) -> Option<Lsq> {
    let p = x.first()?.len();
    let n = y.len();
    if n < p {
        return None;
    }
    let norms: Vec<f64> = (0..p)
        .map(|j| {
            x.iter()
                .map(|r| r[j] * r[j])
                .sum::<f64>()
                .sqrt()
                .max(1e-300)
        })
        .collect();
    let xs: Vec<Vec<f64>> = x
        .iter()
        .map(|r| r.iter().zip(&norms).map(|(v, s)| v / s).collect())
        .collect();
    let mut ata = vec![vec![0.0; p]; p];
    let mut aty = vec![0.0; p];
    for (r, &yi) in xs.iter().zip(y) {
        for i in 0..p {
            aty[i] += r[i] * yi;
            for j in 0..p {
                ata[i][j] += r[i] * r[j];
            }
        }
    }
    let inv = invert(ata)?;
    let bs: Vec<f64> = (0..p)
        .map(|i| (0..p).map(|j| inv[i][j] * aty[j]).sum())
        .collect();
    let sse: f64 = xs
        .iter()
        .zip(y)
        .map(|(r, &yi)| {
            let f: f64 = r.iter().zip(&bs).map(|(a, b)| a * b).sum();
            (yi - f).powi(2)
        })
        .sum();
    let dof = n.saturating_sub(p).max(1);
    let s2 = sse / dof as f64;
    let beta = bs.iter().zip(&norms).map(|(b, s)| b / s).collect();
    let cov = (0..p)
        .map(|i| {
            (0..p)
                .map(|j| s2 * inv[i][j] / (norms[i] * norms[j]))
                .collect()
        })
        .collect();
    Some(Lsq {
        beta,
        cov,
        sse,
        dof,
    })
}

/// A value with its 95 % confidence half-width.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Est {
    /// The estimate.
    pub value: f64,
    /// Half-width of its 95 % confidence interval (normal approximation).
    pub ci95: f64,
}

impl Est {
    fn new(value: f64, var: f64) -> Self {
        Self {
            value,
            ci95: Z95 * var.max(0.0).sqrt(),
        }
    }
}

/// The two-segment (hinge) fit `P = a + b I + c max(0, I - I_th)`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Hinge {
    /// Offset a, W.
    pub a_w: f64,
    /// Below-threshold slope b, W/A.
    pub b_w_per_a: f64,
    /// Slope step c at threshold, W/A.
    pub c_w_per_a: f64,
    /// Threshold current, A.
    pub i_th_a: f64,
}

impl Hinge {
    /// Power the fit gives at `i_a`, W.
    pub fn power_w(&self, i_a: f64) -> f64 {
        self.a_w + self.b_w_per_a * i_a + self.c_w_per_a * (i_a - self.i_th_a).max(0.0)
    }
}

fn hinge_sse(pts: &[Point], t: f64) -> Option<(Lsq, f64)> {
    let x: Vec<Vec<f64>> = pts
        .iter()
        .map(|p| vec![1.0, p.i_a, (p.i_a - t).max(0.0)])
        .collect();
    let y: Vec<f64> = pts.iter().map(|p| p.p_w).collect();
    lsq(&x, &y).map(|l| {
        let s = l.sse;
        (l, s)
    })
}

/// Least-squares hinge fit over `pts` (at least 6): the break scanned over
/// the intervals between points, then refined by golden-section search in
/// the best bracket; covariance of (a, b, c, I_th) from the Jacobian at
/// the optimum.
fn fit_hinge(pts: &[Point]) -> Option<(Hinge, [[f64; 4]; 4], f64, usize)> {
    let n = pts.len();
    if n < 6 {
        return None;
    }
    let mut best = (f64::INFINITY, 2usize);
    for k in 2..n - 2 {
        if let Some((_, s)) = hinge_sse(pts, pts[k].i_a) {
            if s < best.0 {
                best = (s, k);
            }
        }
    }
    let (mut lo, mut hi) = (pts[best.1 - 1].i_a, pts[best.1 + 1].i_a);
    let g = 0.5 * (5f64.sqrt() - 1.0);
    let f = |t: f64| hinge_sse(pts, t).map_or(f64::INFINITY, |(_, s)| s);
    let (mut x1, mut x2) = (hi - g * (hi - lo), lo + g * (hi - lo));
    let (mut f1, mut f2) = (f(x1), f(x2));
    for _ in 0..200 {
        if f1 < f2 {
            hi = x2;
            x2 = x1;
            f2 = f1;
            x1 = hi - g * (hi - lo);
            f1 = f(x1);
        } else {
            lo = x1;
            x1 = x2;
            f1 = f2;
            x2 = lo + g * (hi - lo);
            f2 = f(x2);
        }
        if hi - lo < 1e-12 * hi.abs().max(1e-9) {
            break;
        }
    }
    let t = 0.5 * (lo + hi);
    let (l, sse) = hinge_sse(pts, t)?;
    let h = Hinge {
        a_w: l.beta[0],
        b_w_per_a: l.beta[1],
        c_w_per_a: l.beta[2],
        i_th_a: t,
    };
    // Covariance of all four from the Jacobian (Gauss-Newton form).
    let dof = n - 4;
    let s2 = sse / dof as f64;
    let mut jtj = vec![vec![0.0; 4]; 4];
    for p in pts {
        let on = f64::from(u8::from(p.i_a > t));
        let j = [1.0, p.i_a, (p.i_a - t).max(0.0), -h.c_w_per_a * on];
        for r in 0..4 {
            for c in 0..4 {
                jtj[r][c] += j[r] * j[c];
            }
        }
    }
    let inv = invert(jtj)?;
    let mut cov = [[0.0; 4]; 4];
    for r in 0..4 {
        for c in 0..4 {
            cov[r][c] = s2 * inv[r][c];
        }
    }
    Some((h, cov, sse, dof))
}

/// Threshold at the peak of d²P/dI²: a quadratic fitted over a sliding
/// window of `2k + 1` points gives the second derivative at each point;
/// the peak is refined by a parabola through its neighbours.
fn second_derivative_peak(pts: &[Point]) -> Option<f64> {
    let n = pts.len();
    let k = (n / 40).max(2);
    if n < 2 * k + 3 {
        return None;
    }
    let d2: Vec<(f64, f64)> = (k..n - k)
        .filter_map(|c| {
            let w = &pts[c - k..=c + k];
            let x0 = pts[c].i_a;
            let x: Vec<Vec<f64>> = w
                .iter()
                .map(|p| vec![1.0, p.i_a - x0, (p.i_a - x0).powi(2)])
                .collect();
            let y: Vec<f64> = w.iter().map(|p| p.p_w).collect();
            lsq(&x, &y).map(|l| (x0, 2.0 * l.beta[2]))
        })
        .collect();
    let m = (0..d2.len()).max_by(|&a, &b| d2[a].1.total_cmp(&d2[b].1))?;
    if m == 0 || m + 1 >= d2.len() {
        return Some(d2[m].0);
    }
    let (y0, y1, y2) = (d2[m - 1].1, d2[m].1, d2[m + 1].1);
    let denom = y0 - 2.0 * y1 + y2;
    let h = 0.5 * (d2[m + 1].0 - d2[m - 1].0);
    let off = if denom.abs() > 0.0 {
        (0.5 * (y0 - y2) / denom).clamp(-1.0, 1.0)
    } else {
        0.0
    };
    Some(d2[m].0 + off * h)
}

/// A slope step above threshold beyond the kink tolerance.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Kink {
    /// Current of the step, A.
    pub i_a: f64,
    /// Slope below the step, W/A.
    pub slope_before_w_per_a: f64,
    /// Slope above the step, W/A.
    pub slope_after_w_per_a: f64,
}

/// Local slope over `w` by least squares.
fn local_slope(w: &[Point]) -> Option<f64> {
    let x: Vec<Vec<f64>> = w.iter().map(|p| vec![1.0, p.i_a]).collect();
    let y: Vec<f64> = w.iter().map(|p| p.p_w).collect();
    lsq(&x, &y).map(|l| l.beta[1])
}

/// Kinks: at each point above 1.3 I_th the slopes of the `m` points
/// before and after it are compared; runs of points whose step exceeds
/// `tol` of the fitted slope are one kink, placed at the largest step.
fn kinks(pts: &[Point], i_th: f64, slope: f64, tol: f64) -> Vec<Kink> {
    let n = pts.len();
    let m = (n / 20).max(5);
    let mut out: Vec<Kink> = Vec::new();
    let mut run: Option<(f64, Kink)> = None;
    for c in m..n.saturating_sub(m) {
        if pts[c].i_a < 1.3 * i_th {
            continue;
        }
        let (Some(sl), Some(sr)) = (local_slope(&pts[c - m..=c]), local_slope(&pts[c..=c + m]))
        else {
            continue;
        };
        let step = (sr - sl).abs() / slope.abs().max(1e-300);
        if step > tol {
            let k = Kink {
                i_a: pts[c].i_a,
                slope_before_w_per_a: sl,
                slope_after_w_per_a: sr,
            };
            run = match run {
                Some((s, best)) if s >= step => Some((s, best)),
                _ => Some((step, k)),
            };
        } else if let Some((_, k)) = run.take() {
            out.push(k);
        }
    }
    if let Some((_, k)) = run {
        out.push(k);
    }
    out
}

/// The V-I fit `V = a ln I + b + R_s I` above threshold.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct VFit {
    /// Series resistance, ohm.
    pub r_s_ohm: Est,
    /// Junction voltage at the threshold current, V.
    pub turn_on_v: Est,
    /// Ideality factor n = a / (k_B T / q).
    pub ideality: Est,
    /// Whether the ideality was fixed at [`FALLBACK_IDEALITY`] because
    /// the curve could not separate it from the series resistance.
    pub ideality_fixed: bool,
    /// Root-mean-square residual, V.
    pub rms_v: f64,
    /// a, V.
    pub a_v: f64,
    /// b, V.
    pub b_v: f64,
}

impl VFit {
    /// Voltage the fit gives at `i_a` (above 0), V.
    pub fn voltage_v(&self, i_a: f64) -> f64 {
        self.a_v * i_a.ln() + self.b_v + self.r_s_ohm.value * i_a
    }
}

fn fit_v(pts: &[Point], i_th: f64, case_c: f64) -> Option<VFit> {
    let above: Vec<&Point> = pts
        .iter()
        .filter(|p| p.i_a >= 1.2 * i_th && p.i_a > 0.0)
        .collect();
    if above.len() < 5 {
        return None;
    }
    let vt = thermal_voltage_v(c_to_k(case_c));
    let x: Vec<Vec<f64>> = above.iter().map(|p| vec![p.i_a.ln(), 1.0, p.i_a]).collect();
    let y: Vec<f64> = above.iter().map(|p| p.v_v).collect();
    let l = lsq(&x, &y)?;
    let a_ok = l.beta[0] > 0.0 && Z95 * l.cov[0][0].sqrt() < 0.5 * l.beta[0];
    let ln_th = i_th.ln();
    if a_ok {
        // V_on = a ln I_th + b; its variance through the covariance.
        let var_von = ln_th * ln_th * l.cov[0][0] + l.cov[1][1] + 2.0 * ln_th * l.cov[0][1];
        return Some(VFit {
            r_s_ohm: Est::new(l.beta[2], l.cov[2][2]),
            turn_on_v: Est::new(l.beta[0] * ln_th + l.beta[1], var_von),
            ideality: Est::new(l.beta[0] / vt, l.cov[0][0] / (vt * vt)),
            ideality_fixed: false,
            rms_v: (l.sse / above.len() as f64).sqrt(),
            a_v: l.beta[0],
            b_v: l.beta[1],
        });
    }
    let a = FALLBACK_IDEALITY * vt;
    let x: Vec<Vec<f64>> = above.iter().map(|p| vec![1.0, p.i_a]).collect();
    let y: Vec<f64> = above.iter().map(|p| p.v_v - a * p.i_a.ln()).collect();
    let l = lsq(&x, &y)?;
    Some(VFit {
        r_s_ohm: Est::new(l.beta[1], l.cov[1][1]),
        turn_on_v: Est::new(a * ln_th + l.beta[0], l.cov[0][0]),
        ideality: Est::new(FALLBACK_IDEALITY, 0.0),
        ideality_fixed: true,
        rms_v: (l.sse / above.len() as f64).sqrt(),
        a_v: a,
        b_v: l.beta[0],
    })
}

/// Everything fitted from one sweep.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SweepFit {
    /// Case temperature, degC.
    pub case_c: f64,
    /// Points in the sweep.
    pub points: usize,
    /// Points used by the L-I fit (up to the peak, or to 70 % of the peak
    /// power after a roll-over).
    pub fit_points: usize,
    /// Threshold by the two-segment fit, A.
    pub threshold_a: Est,
    /// Threshold at the peak of d²P/dI², A.
    pub threshold_d2_a: Option<f64>,
    /// Slope efficiency above threshold, W/A.
    pub slope_w_per_a: Est,
    /// The two-segment fit.
    pub hinge: Hinge,
    /// Root-mean-square residual of the L-I fit, W.
    pub rms_w: f64,
    /// Largest residual of the L-I fit, W.
    pub max_residual_w: f64,
    /// The V-I fit.
    pub v: VFit,
    /// Kinks found.
    pub kinks: Vec<Kink>,
    /// Current and power of a roll-over (the peak of a curve that falls
    /// by more than 2 % after it), A and W.
    pub roll_over: Option<(f64, f64)>,
}

/// Fit one sweep.
pub fn fit_sweep(s: &Sweep, kink_tol: f64) -> Result<SweepFit, String> {
    let pts = &s.points;
    if pts.len() < 12 {
        return Err(format!("{} points; at least 12 are needed", pts.len()));
    }
    let peak = (0..pts.len())
        .max_by(|&a, &b| pts[a].p_w.total_cmp(&pts[b].p_w))
        .unwrap_or(0);
    let p_peak = pts[peak].p_w;
    let rolled = pts[peak..].iter().any(|p| p.p_w < 0.98 * p_peak);
    let roll_over = rolled.then_some((pts[peak].i_a, p_peak));
    let used: Vec<Point> = pts[..=peak]
        .iter()
        .copied()
        .filter(|p| !rolled || p.p_w <= 0.7 * p_peak)
        .collect();
    let (h, cov, sse, _dof) =
        fit_hinge(&used).ok_or_else(|| format!("no two-segment fit over {} points", used.len()))?;
    if h.c_w_per_a <= 0.0 || h.i_th_a <= used[0].i_a {
        return Err("no threshold: the light-current curve shows no slope increase".into());
    }
    let slope = h.b_w_per_a + h.c_w_per_a;
    let var_slope = cov[1][1] + cov[2][2] + 2.0 * cov[1][2];
    let resid: Vec<f64> = used.iter().map(|p| p.p_w - h.power_w(p.i_a)).collect();
    let v = fit_v(pts, h.i_th_a, s.case_c)
        .ok_or("fewer than 5 points above 1.2 times the threshold for the V-I fit")?;
    Ok(SweepFit {
        case_c: s.case_c,
        points: pts.len(),
        fit_points: used.len(),
        threshold_a: Est::new(h.i_th_a, cov[3][3]),
        threshold_d2_a: second_derivative_peak(&used),
        slope_w_per_a: Est::new(slope, var_slope),
        hinge: h,
        rms_w: (sse / used.len() as f64).sqrt(),
        max_residual_w: resid.iter().fold(0.0, |m, r| m.max(r.abs())),
        v,
        kinks: kinks(&used, h.i_th_a, slope, kink_tol),
        roll_over,
    })
}

/// T0 and T1 from the thresholds and slopes across case temperatures.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Temperature {
    /// I_th(T) = I_th(T_ref) exp((T - T_ref)/T0), K.
    pub t0_k: Est,
    /// eta_d(T) = eta_d(T_ref) exp(-(T - T_ref)/T1), K (the slope in W/A
    /// corrected for the photon energy, which falls as the wavelength
    /// drifts).
    pub t1_k: Est,
}

/// T0 and T1 by least squares of ln I_th and ln(slope λ(T)) on T; needs
/// two sweeps (three for an interval).
pub fn fit_temperature(
    fits: &[SweepFit],
    drift_nm_per_k: f64,
    wavelength_nm: f64,
) -> Option<Temperature> {
    if fits.len() < 2 {
        return None;
    }
    let t_ref = fits[0].case_c;
    let x: Vec<Vec<f64>> = fits.iter().map(|f| vec![1.0, f.case_c - t_ref]).collect();
    let y0: Vec<f64> = fits.iter().map(|f| f.threshold_a.value.ln()).collect();
    let y1: Vec<f64> = fits
        .iter()
        .map(|f| {
            let lam = wavelength_nm + drift_nm_per_k * (f.case_c - t_ref);
            (f.slope_w_per_a.value * lam).ln()
        })
        .collect();
    let l0 = lsq(&x, &y0)?;
    let l1 = lsq(&x, &y1)?;
    let ci = |l: &Lsq, inv: f64| {
        if l.dof >= 1 && fits.len() >= 3 {
            l.cov[1][1] * inv.powi(4)
        } else {
            f64::NAN
        }
    };
    let t0 = 1.0 / l0.beta[1];
    let t1 = -1.0 / l1.beta[1];
    Some(Temperature {
        t0_k: Est::new(t0, ci(&l0, t0)),
        t1_k: Est::new(t1, ci(&l1, t1)),
    })
}

/// What the fit's 95 % intervals cover, said in `fit.md` and `fit.json`:
/// the noise of the points given the model, not the model's own error.
pub const INTERVAL_SCOPE: &str = "Intervals are 95 % (normal approximation, 1.96 standard \
errors from the residuals) and cover the noise of the points only, given the model. They do \
not cover model error: a real L-I curve departs from the two straight lines of the fit \
(rounding at threshold, gain compression, heating), and the junction is taken at the case \
temperature. On synthetic sweeps of a known part (docs/fit.md) the slope came out \
0.9569 ± 0.0003 W/A against a true 0.962 W/A, a bias over ten times the interval. The difference \
between the two threshold columns and the L-I rms residual against the noise level give a \
sense of the model error.";

/// The whole fit of a sweep file.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FitReport {
    /// What the intervals cover ([`INTERVAL_SCOPE`]).
    pub interval_scope: &'static str,
    /// Per sweep, in order of case temperature.
    pub sweeps: Vec<SweepFit>,
    /// Index of the reference sweep (case temperature nearest 25 degC).
    pub reference: usize,
    /// T0 and T1, when there are two sweeps or more.
    pub temperature: Option<Temperature>,
}

/// Fit every sweep; the wavelength and its drift (from the template) are
/// needed for T1.
pub fn fit_all(
    sweeps: &[Sweep],
    path: &Path,
    kink_tol: f64,
    wavelength_nm: f64,
    drift_nm_per_k: f64,
) -> Result<FitReport, FitError> {
    let mut fits = sweeps
        .iter()
        .map(|s| {
            fit_sweep(s, kink_tol).map_err(|why| FitError::Sweep {
                path: path.to_path_buf(),
                case_c: s.case_c,
                why,
            })
        })
        .collect::<Result<Vec<_>, _>>()?;
    fits.sort_by(|a, b| a.case_c.total_cmp(&b.case_c));
    let reference = (0..fits.len())
        .min_by(|&a, &b| {
            (fits[a].case_c - 25.0)
                .abs()
                .total_cmp(&(fits[b].case_c - 25.0).abs())
        })
        .unwrap_or(0);
    let temperature = fit_temperature(&fits, drift_nm_per_k, wavelength_nm);
    Ok(FitReport {
        interval_scope: INTERVAL_SCOPE,
        sweeps: fits,
        reference,
        temperature,
    })
}

/// Read and parse a sweep file.
pub fn load_sweeps(path: &Path) -> Result<Vec<Sweep>, FitError> {
    let text = files::read_text(path, "SWEEPS").map_err(FitError::Read)?;
    parse_sweeps(&text, path)
}

/// The template module file with its diode figures replaced by the fitted
/// ones (and its `[diode.structure]` removed, so the rate-equation
/// parameters are derived from the fitted figures); checked by loading.
pub fn fitted_module(
    template: &ModuleFile,
    report: &FitReport,
    name: &str,
) -> Result<ModuleFile, FitError> {
    let r = &report.sweeps[report.reference];
    let mut m = template.clone();
    m.name = name.to_string();
    let d = &mut m.diode;
    d.reference_c = round_to(r.case_c, 2);
    d.threshold_ma = round_to(r.threshold_a.value * 1e3, 4);
    d.slope_w_per_a = round_to(r.slope_w_per_a.value, 5);
    d.series_resistance_ohm = round_to(r.v.r_s_ohm.value, 5);
    d.turn_on_v = round_to(r.v.turn_on_v.value, 5);
    d.ideality = round_to(r.v.ideality.value, 4);
    if let Some(t) = report.temperature {
        d.t0_k = round_to(t.t0_k.value, 2);
        d.t1_k = round_to(t.t1_k.value, 1);
    }
    d.structure = None;
    m.to_module()
        .map_err(|(key, why)| FitError::Module(format!("{key}: {why}")))?;
    Ok(m)
}

/// `v` rounded to `digits` significant decimals after the point.
fn round_to(v: f64, digits: i32) -> f64 {
    let s = 10f64.powi(digits);
    (v * s).round() / s
}

fn ci_text(e: &Est, scale: f64, prec: usize) -> String {
    if e.ci95.is_finite() {
        format!("{:.*} ± {:.*}", prec, e.value * scale, prec, e.ci95 * scale)
    } else {
        format!("{:.*} (no interval)", prec, e.value * scale)
    }
}

/// The fit report as Markdown.
pub fn markdown(report: &FitReport, sweeps_name: &str, module_name: &str) -> String {
    let mut s = format!(
        "# Fit of {sweeps_name}\n\nMethods in docs/fit.md. {INTERVAL_SCOPE} The junction \
         is taken at the case temperature (pulsed or low-duty sweeps). Module written: \
         `{module_name}`.\n\n\
         > **Caution.** {SAFETY_CAUTION} A fitted module feeds a simulation; it does not \
         qualify a part.\n\n\
         | case °C | points (fit) | threshold, two-segment (mA) | threshold, d²P/dI² peak (mA) \
         | slope (W/A) | L-I rms residual (mW) | R_s (Ω) | turn-on (V) | ideality | V-I rms (mV) |\n\
         |---|---|---|---|---|---|---|---|---|---|\n"
    );
    for f in &report.sweeps {
        s.push_str(&format!(
            "| {:.2} | {} ({}) | {} | {} | {} | {:.4} | {} | {} | {}{} | {:.3} |\n",
            f.case_c,
            f.points,
            f.fit_points,
            ci_text(&f.threshold_a, 1e3, 3),
            f.threshold_d2_a
                .map_or("—".into(), |t| format!("{:.3}", t * 1e3)),
            ci_text(&f.slope_w_per_a, 1.0, 4),
            f.rms_w * 1e3,
            ci_text(&f.v.r_s_ohm, 1.0, 4),
            ci_text(&f.v.turn_on_v, 1.0, 4),
            ci_text(&f.v.ideality, 1.0, 3),
            if f.v.ideality_fixed { " (fixed)" } else { "" },
            f.v.rms_v * 1e3,
        ));
    }
    s.push_str("\n## Kinks and roll-over\n\n");
    for f in &report.sweeps {
        let k = if f.kinks.is_empty() {
            "no kinks".to_string()
        } else {
            f.kinks
                .iter()
                .map(|k| {
                    format!(
                        "kink at {:.2} mA (slope {:.3} → {:.3} W/A)",
                        k.i_a * 1e3,
                        k.slope_before_w_per_a,
                        k.slope_after_w_per_a
                    )
                })
                .collect::<Vec<_>>()
                .join("; ")
        };
        let r = f.roll_over.map_or("no roll-over".into(), |(i, p)| {
            format!("roll-over at {:.2} mA, peak {:.3} mW", i * 1e3, p * 1e3)
        });
        s.push_str(&format!("- {:.2} °C: {k}; {r}\n", f.case_c));
    }
    s.push_str("\n## Temperature\n\n");
    match &report.temperature {
        Some(t) => s.push_str(&format!(
            "T0 = {} K, T1 = {} K (from {} sweeps; reference {:.2} °C).\n",
            ci_text(&t.t0_k, 1.0, 1),
            ci_text(&t.t1_k, 1.0, 1),
            report.sweeps.len(),
            report.sweeps[report.reference].case_c
        )),
        None => s.push_str("One sweep only: T0 and T1 are kept from the template.\n"),
    }
    s
}

/// Measured points against the fitted curves: L-I above, V-I below, one
/// colour per case temperature.
pub fn svg(report: &FitReport, sweeps: &[Sweep], title: &str) -> Result<String, String> {
    let e = |x: &dyn fmt::Display| x.to_string();
    let i_max = sweeps
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.i_a))
        .fold(1e-9, f64::max)
        * 1e3;
    let p_max = sweeps
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.p_w))
        .fold(1e-9, f64::max)
        * 1e3;
    let v_max = sweeps
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.v_v))
        .fold(1e-9, f64::max);
    // The voltage axis starts below the lowest voltage above a tenth of
    // the current range, so the V-I curves fill the panel.
    let v_lo = sweeps
        .iter()
        .flat_map(|s| s.points.iter())
        .filter(|p| p.i_a * 1e3 > 0.1 * i_max)
        .map(|p| p.v_v)
        .fold(v_max, f64::min);
    let v_lo = (v_lo - 0.1 * (v_max - v_lo)).max(0.0);
    let colors = [
        RGBColor(20, 60, 200),
        RGBColor(200, 30, 30),
        RGBColor(0, 140, 90),
        RGBColor(150, 0, 150),
        RGBColor(240, 140, 0),
        RGBColor(90, 90, 90),
    ];
    let fit_of = |s: &Sweep| {
        report
            .sweeps
            .iter()
            .find(|f| (f.case_c - s.case_c).abs() < 1e-9)
    };
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (900, 760)).into_drawing_area();
        root.fill(&WHITE).map_err(|x| e(&x))?;
        let (top, bottom) = root.split_vertically(460);
        let mut chart = ChartBuilder::on(&top)
            .caption(
                format!("{title}: measured (dots) and fitted (black lines)"),
                ("sans-serif", 18),
            )
            .margin(10)
            .x_label_area_size(34)
            .y_label_area_size(64)
            .build_cartesian_2d(0.0..i_max * 1.02, 0.0..p_max * 1.25)
            .map_err(|x| e(&x))?;
        chart
            .configure_mesh()
            .x_desc("current (mA)")
            .y_desc("optical power, front (mW)")
            .draw()
            .map_err(|x| e(&x))?;
        for (k, s) in sweeps.iter().enumerate() {
            let col = colors[k % colors.len()];
            chart
                .draw_series(
                    s.points
                        .iter()
                        .map(|p| Circle::new((p.i_a * 1e3, p.p_w * 1e3), 2, col.filled())),
                )
                .map_err(|x| e(&x))?;
            if let Some(f) = fit_of(s) {
                let h = f.hinge;
                let last = f.fit_points.min(s.points.len()).saturating_sub(1);
                let to = s.points[last].i_a;
                let xs = [s.points[0].i_a, h.i_th_a, to];
                chart
                    .draw_series(LineSeries::new(
                        xs.iter().map(|&i| (i * 1e3, h.power_w(i) * 1e3)),
                        BLACK.stroke_width(1),
                    ))
                    .map_err(|x| e(&x))?
                    .label(format!(
                        "case {:.1} °C: threshold {:.2} mA, slope {:.3} W/A",
                        f.case_c,
                        f.threshold_a.value * 1e3,
                        f.slope_w_per_a.value
                    ))
                    .legend(move |(x, y)| Circle::new((x + 8, y), 3, col.filled()));
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
            .build_cartesian_2d(0.0..i_max * 1.02, v_lo..v_max + 0.05 * (v_max - v_lo))
            .map_err(|x| e(&x))?;
        vchart
            .configure_mesh()
            .x_desc("current (mA)")
            .y_desc("forward voltage (V); fit above 1.2 × threshold")
            .draw()
            .map_err(|x| e(&x))?;
        for (k, s) in sweeps.iter().enumerate() {
            let col = colors[k % colors.len()];
            vchart
                .draw_series(
                    s.points
                        .iter()
                        .filter(|p| p.v_v >= v_lo)
                        .map(|p| Circle::new((p.i_a * 1e3, p.v_v), 2, col.filled())),
                )
                .map_err(|x| e(&x))?;
            if let Some(f) = fit_of(s) {
                let from = 1.2 * f.threshold_a.value;
                let to = s.points.last().map_or(from, |p| p.i_a);
                vchart
                    .draw_series(LineSeries::new(
                        (0..=60).map(|j| {
                            let i = from + (to - from) * f64::from(j) / 60.0;
                            (i * 1e3, f.v.voltage_v(i))
                        }),
                        BLACK.stroke_width(1),
                    ))
                    .map_err(|x| e(&x))?;
            }
        }
        root.present().map_err(|x| e(&x))?;
    }
    Ok(buf)
}

/// Synthetic sweeps of `module`'s diode, the junction held at each case
/// temperature (a pulsed measurement), `points` currents evenly from 0 to
/// `max_a`, with Gaussian noise of `noise_w` rms on the power and
/// `noise_v` rms on the voltage: known truth for checking the fit, and
/// the source of the shipped invented example sweeps.
pub fn synthetic_sweeps(
    module: &crate::plant::DemoModule,
    case_c: &[f64],
    max_a: f64,
    points: usize,
    (noise_w, noise_v): (f64, f64),
    seed: u64,
) -> Result<Vec<Sweep>, crate::plant::PlantError> {
    let diode = crate::plant::Diode::new(module.diode.clone())?;
    let mut rng = crate::plant::Rng::new(seed);
    Ok(case_c
        .iter()
        .map(|&t| {
            let t_k = c_to_k(t);
            let points = (0..points)
                .map(|k| {
                    let i = max_a * k as f64 / (points - 1) as f64;
                    let o = diode.quasi_static(i, t_k);
                    Point {
                        i_a: i,
                        p_w: o.p_front_w + noise_w * rng.gaussian(),
                        v_v: o.v_f_v + noise_v * rng.gaussian(),
                    }
                })
                .collect();
            Sweep { case_c: t, points }
        })
        .collect())
}

/// Sweeps as CSV in the units `fit` reads (mA, mW, V, degC), after the
/// `comment` lines (each written with a leading `# `).
pub fn sweeps_csv(sweeps: &[Sweep], comment: &[&str]) -> String {
    let mut s: String = comment.iter().map(|c| format!("# {c}\n")).collect();
    s.push_str("current_ma,power_mw,voltage_v,case_c\n");
    for w in sweeps {
        for p in &w.points {
            s.push_str(&format!(
                "{:.3},{:.5},{:.5},{}\n",
                p.i_a * 1e3,
                p.p_w * 1e3,
                p.v_v,
                w.case_c
            ));
        }
    }
    s
}

/// What `fit` wrote and found.
pub struct FitOutcome {
    /// The report.
    pub report: FitReport,
    /// The Markdown report (also printed).
    pub markdown: String,
}

/// Fit the sweeps in `sweeps_path`, take every figure the sweeps cannot
/// give from the module file `template`, and write `module.toml`,
/// `fit.md`, `fit.json` and `fit.svg` into `out`.
pub fn write_fit(
    sweeps_path: &Path,
    template: &Path,
    name: Option<&str>,
    kink_tol: f64,
    out: &Path,
) -> Result<FitOutcome, String> {
    let outputs = ["module.toml", "fit.md", "fit.json", "fit.svg"];
    files::check_out_dir(
        out,
        "--out",
        &outputs,
        &[sweeps_path.to_path_buf(), template.to_path_buf()],
    )
    .map_err(|e| e.to_string())?;
    let tpl_text = files::read_text(template, "--template").map_err(|e| e.to_string())?;
    module_file::parse_module(&tpl_text, template)
        .map_err(|e| FitError::Template(e).to_string())?;
    let tpl: ModuleFile = toml::from_str(&tpl_text).map_err(|e| e.to_string())?;
    let sweeps = load_sweeps(sweeps_path).map_err(|e| e.to_string())?;
    let report = fit_all(
        &sweeps,
        sweeps_path,
        kink_tol,
        tpl.diode.wavelength_nm,
        tpl.diode.wavelength_drift_nm_per_k,
    )
    .map_err(|e| e.to_string())?;
    let stem = sweeps_path
        .file_stem()
        .map_or("sweeps".into(), |s| s.to_string_lossy().into_owned());
    let default_name = format!("{stem}-fitted");
    let name = name.unwrap_or(&default_name);
    let module = fitted_module(&tpl, &report, name).map_err(|e| e.to_string())?;
    let file_name = |p: &Path| {
        p.file_name()
            .map_or(String::new(), |s| s.to_string_lossy().into_owned())
    };
    let text = format!(
        "# Module file written by `diodestat fit` from {} (diode figures fitted at the\n\
         # reference temperature; T0 and T1 across the sweeps' case temperatures) with\n\
         # every other value taken from the template {}. Schema: docs/module-files.md.\n\
         # The rate-equation parameters are derived from the figures.\n\n{}",
        file_name(sweeps_path),
        file_name(template),
        module_file::to_toml(&module)
    );
    let md = markdown(&report, &file_name(sweeps_path), name);
    let json = serde_json::to_string_pretty(&report).map_err(|e| e.to_string())?;
    let svg = svg(&report, &sweeps, name)?;
    let stage = Staging::new(out).map_err(|e| e.to_string())?;
    for (f, body) in [
        ("module.toml", text.as_str()),
        ("fit.md", md.as_str()),
        ("fit.json", json.as_str()),
        ("fit.svg", svg.as_str()),
    ] {
        std::fs::write(stage.path(f), body)
            .map_err(|e| format!("{}: {e}", out.join(f).display()))?;
    }
    stage.commit().map_err(|e| e.to_string())?;
    Ok(FitOutcome {
        report,
        markdown: md,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line_sweep(noise: f64) -> Sweep {
        // P = 0.8 (I - 30 mA) above, a weak LED slope below; V = 0.05 ln I + 1.8 + 3 I.
        let mut rng = crate::plant::Rng::new(7);
        let points = (0..=100)
            .map(|k| {
                let i = 0.001 * f64::from(k);
                let p = 0.8 * (i - 0.03).max(0.0) + 0.002 * i + noise * rng.gaussian();
                let v = 0.05 * i.max(1e-6).ln() + 1.8 + 3.0 * i;
                Point {
                    i_a: i,
                    p_w: p,
                    v_v: v,
                }
            })
            .collect();
        Sweep {
            case_c: 25.0,
            points,
        }
    }

    #[test]
    fn two_segment_fit_recovers_a_clean_hinge() {
        let f = fit_sweep(&line_sweep(0.0), KINK_TOL).unwrap();
        assert!((f.threshold_a.value - 0.03).abs() < 1e-9, "{f:?}");
        assert!((f.slope_w_per_a.value - 0.802).abs() < 1e-9);
        assert!((f.v.r_s_ohm.value - 3.0).abs() < 1e-6);
        assert!(!f.v.ideality_fixed);
        assert!(f.kinks.is_empty() && f.roll_over.is_none());
        let d2 = f.threshold_d2_a.unwrap();
        assert!((d2 - 0.03).abs() < 0.002, "{d2}");
    }

    #[test]
    fn kinks_and_roll_over_are_found() {
        let mut s = line_sweep(0.0);
        for p in &mut s.points {
            // Slope falls by 30 % above 60 mA, and the curve rolls over above 90 mA.
            if p.i_a > 0.06 {
                p.p_w -= 0.24 * (p.i_a - 0.06);
            }
            if p.i_a > 0.09 {
                p.p_w -= 8.0 * (p.i_a - 0.09);
            }
        }
        let f = fit_sweep(&s, KINK_TOL).unwrap();
        assert!(
            f.kinks.iter().any(|k| (k.i_a - 0.06).abs() < 0.004),
            "{:?}",
            f.kinks
        );
        let (i_peak, _) = f.roll_over.unwrap();
        assert!((i_peak - 0.09).abs() < 0.0015, "{i_peak}");
    }

    #[test]
    fn header_units_and_refusals() {
        let text = "# x\ncurrent_ma,power_mw,voltage_v,case_c\n10,0.1,1.5,25\n20,1,1.6,25.1\n10,0.05,1.5,50\n";
        let s = parse_sweeps(text, Path::new("s.csv")).unwrap();
        assert_eq!(s.len(), 2);
        assert!((s[0].points[1].i_a - 0.02).abs() < 1e-12);
        assert!((s[0].points[1].p_w - 0.001).abs() < 1e-12);
        let e = parse_sweeps(&text.replace("20,1,", "20,x,"), Path::new("s.csv"))
            .unwrap_err()
            .to_string();
        assert_eq!(e, "s.csv: line 4: power_mw = x: not a number");
        let e = parse_sweeps(&text.replace("case_c", "case_f"), Path::new("s.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 2") && e.contains("case_f"), "{e}");
    }
}
