//! Gain and phase margins, crossover frequencies, stability margin and
//! closed-loop bandwidth of a SISO loop transfer function `L`, with the
//! semantics of python-control's `margin()` / `stability_margins()`:
//!
//! * gain margin as a ratio, `1 / |L(jω₁₈₀)|` at a phase crossover (where
//!   `L` crosses the negative real axis); of several, the one closest to 1
//!   in the log sense (`min |ln GM|`) is reported; none (or only `|L| = 0`
//!   there) gives `GM = ∞` and a NaN frequency;
//! * phase margin in degrees, `rem(∠L, 360) - 180` at a gain crossover
//!   (`|L| = 1`, `ω > 0`); of several, the smallest in magnitude; none
//!   gives `PM = ∞` and a NaN frequency;
//! * frequencies in rad/s (`wcg`: phase crossover, the gain-margin
//!   frequency; `wcp`: gain crossover, the phase-margin frequency), plus
//!   the same in Hz.
//!
//! Numerics: a log-spaced sweep (100 points per decade) over a range taken
//! from the pole and zero frequencies, widened until the magnitude
//! asymptotes cannot cross 1 outside it, and for discrete loops ending
//! exactly at the Nyquist frequency `π/T`; intervals are bisected until the
//! phase moves less than 10° and the magnitude less than 0.3 neper between
//! neighbours; each bracketed crossing is refined with Brent's method on
//! `ln|L|` or on `arg(-L)` (which is continuous near the negative real
//! axis, so no phase unwrapping is needed to locate a crossing).
//!
//! One deliberate difference from python-control 0.10.2: for a discrete
//! loop whose response at the Nyquist frequency is real and negative, that
//! point is reported as a phase crossover (the Nyquist contour does cross
//! the negative real axis there); python-control's root filter keeps only
//! `0 <= ωT < π` and usually drops it. [`Crossings::phase`] marks it with
//! `at_nyquist`.

use super::tf::{Complex, ContinuousTf, DiscreteTf};

/// A loop transfer function whose margins can be computed.
pub trait LoopTransfer {
    /// Open-loop response `L` at `ω` rad/s (`s = jω` or `z = e^{jωT}`).
    fn response(&self, w_rad_s: f64) -> Complex;
    /// Closed-loop response `L / (1 + L)` at `ω` rad/s, evaluated from the
    /// polynomials (finite at the poles of `L`).
    fn closed_loop_response(&self, w_rad_s: f64) -> Complex;
    /// The Nyquist frequency `π/T` for a discrete loop, `None` otherwise.
    fn nyquist_rad_s(&self) -> Option<f64>;
    /// Frequencies of the non-zero poles and zeros, rad/s (`|p|`, or
    /// `|ln z| / T` for a discrete root), to place the sweep.
    fn characteristic_rad_s(&self) -> Vec<f64>;
    /// All closed-loop poles in the stable region.
    fn closed_loop_stable(&self) -> bool;
}

impl LoopTransfer for ContinuousTf {
    fn response(&self, w_rad_s: f64) -> Complex {
        self.freq_response(w_rad_s)
    }

    fn closed_loop_response(&self, w_rad_s: f64) -> Complex {
        let s = Complex::new(0.0, w_rad_s);
        let n = self.num().eval_complex(s);
        n / (self.den().eval_complex(s) + n)
    }

    fn nyquist_rad_s(&self) -> Option<f64> {
        None
    }

    fn characteristic_rad_s(&self) -> Vec<f64> {
        self.poles()
            .into_iter()
            .chain(self.zeros())
            .map(Complex::abs)
            .filter(|w| *w > 0.0 && w.is_finite())
            .collect()
    }

    fn closed_loop_stable(&self) -> bool {
        self.feedback().is_stable()
    }
}

impl LoopTransfer for DiscreteTf {
    fn response(&self, w_rad_s: f64) -> Complex {
        self.freq_response(w_rad_s)
    }

    fn closed_loop_response(&self, w_rad_s: f64) -> Complex {
        let z = Complex::cis(w_rad_s * self.dt());
        let n = self.num().eval_complex(z);
        n / (self.den().eval_complex(z) + n)
    }

    fn nyquist_rad_s(&self) -> Option<f64> {
        Some(DiscreteTf::nyquist_rad_s(self))
    }

    fn characteristic_rad_s(&self) -> Vec<f64> {
        let dt = self.dt();
        let wn = DiscreteTf::nyquist_rad_s(self);
        self.poles()
            .into_iter()
            .chain(self.zeros())
            .filter(|z| z.abs() > 0.0)
            .map(|z| z.ln().abs() / dt)
            .filter(|w| *w > 1e-9 * wn && w.is_finite())
            .collect()
    }

    fn closed_loop_stable(&self) -> bool {
        self.feedback().is_stable()
    }
}

/// A phase crossover: `L` on the negative real axis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PhaseCrossover {
    /// Frequency, rad/s.
    pub w_rad_s: f64,
    /// Gain margin there, `1 / |L|`.
    pub gm_ratio: f64,
    /// The crossing is the Nyquist frequency of a discrete loop.
    pub at_nyquist: bool,
}

/// A gain crossover: `|L| = 1`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GainCrossover {
    /// Frequency, rad/s.
    pub w_rad_s: f64,
    /// Phase margin there, `rem(∠L, 360°) - 180°`, degrees.
    pub pm_deg: f64,
}

/// Every crossing found, sorted by frequency (python-control's
/// `stability_margins(..., returnall=True)`).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Crossings {
    /// Phase crossovers (gain-margin candidates).
    pub phase: Vec<PhaseCrossover>,
    /// Gain crossovers (phase-margin candidates).
    pub gain: Vec<GainCrossover>,
    /// Smallest distance of the Nyquist curve to -1, `min |1 + L|`.
    pub sm: f64,
    /// Where that is, rad/s (NaN if not found).
    pub wsm_rad_s: f64,
}

/// The margins of one loop.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Margins {
    /// Gain margin as a ratio (∞ without a phase crossover).
    pub gm_ratio: f64,
    /// Gain margin, dB (`20·log10(gm_ratio)`).
    pub gm_db: f64,
    /// Phase margin, degrees (∞ without a gain crossover).
    pub pm_deg: f64,
    /// Stability margin `min |1 + L|` (the inverse of the peak sensitivity).
    pub sm: f64,
    /// Phase-crossover frequency (of the gain margin), rad/s; NaN if none.
    pub wcg_rad_s: f64,
    /// Gain-crossover frequency (of the phase margin), rad/s; NaN if none.
    pub wcp_rad_s: f64,
    /// Frequency of the stability margin, rad/s.
    pub wsm_rad_s: f64,
    /// `wcg_rad_s` in Hz.
    pub fcg_hz: f64,
    /// `wcp_rad_s` in Hz.
    pub fcp_hz: f64,
    /// Closed-loop (`L/(1+L)`) bandwidth: the lowest frequency where the
    /// magnitude is 3 dB below its DC value, Hz; ∞ if it never drops (up
    /// to the Nyquist frequency for a discrete loop), NaN if the DC gain
    /// is zero or infinite.
    pub bandwidth_hz: f64,
    /// All closed-loop poles stable (left half plane / inside the unit circle).
    pub closed_loop_stable: bool,
}

impl Margins {
    /// The margins meet `pm >= min_pm_deg`, `gm >= min_gm_db` and the
    /// closed loop is stable.
    pub fn meets(&self, min_pm_deg: f64, min_gm_db: f64) -> bool {
        self.closed_loop_stable && self.pm_deg >= min_pm_deg && self.gm_db >= min_gm_db
    }
}

/// Pass line for phase margin, degrees (`common practice`).
pub const PASS_PM_DEG: f64 = 45.0;
/// Pass line for gain margin, dB (`common practice`).
pub const PASS_GM_DB: f64 = 6.0;

const PER_DECADE: f64 = 100.0;
const MAX_PHASE_STEP: f64 = 10.0 * std::f64::consts::PI / 180.0;
const MAX_LNMAG_STEP: f64 = 0.3;
const MAX_DEPTH: u32 = 16;

fn two_pi() -> f64 {
    2.0 * std::f64::consts::PI
}

/// The sweep range `[lo, hi]` in rad/s.
fn sweep_range<L: LoopTransfer + ?Sized>(l: &L) -> (f64, f64) {
    let ch = l.characteristic_rad_s();
    let (mut lo, mut hi) = if ch.is_empty() {
        (1e-2, 1e2)
    } else {
        let mn = ch.iter().copied().fold(f64::INFINITY, f64::min);
        let mx = ch.iter().copied().fold(0.0, f64::max);
        (mn / 100.0, mx * 100.0)
    };
    let lnmag = |w: f64| l.response(w).abs().ln();
    match l.nyquist_rad_s() {
        Some(wn) => {
            hi = wn;
            lo = lo.min(wn * 1e-3);
        }
        None => hi = extend(hi, 10.0, &lnmag, 0.0),
    }
    lo = extend(lo, 0.1, &lnmag, 0.0);
    (lo, hi)
}

/// Moves `w` by factors of `factor` while `g(w) - level` changes sign or
/// approaches zero (up to 30 decades), then one factor more so that a
/// crossing never sits on the end of the range.
fn extend(mut w: f64, factor: f64, g: &dyn Fn(f64) -> f64, level: f64) -> f64 {
    for _ in 0..30 {
        let a = g(w) - level;
        let b = g(w * factor) - level;
        if !(a.is_finite() && b.is_finite()) {
            break;
        }
        if a.signum() != b.signum() || b.abs() < a.abs() - 1e-2 {
            w *= factor;
        } else {
            break;
        }
    }
    w * factor
}

/// Log-spaced samples of `f` on `[lo, hi]` (both included), refined so that
/// neighbours differ by less than 10° in phase and 0.3 neper in magnitude.
fn sweep(f: &dyn Fn(f64) -> Complex, lo: f64, hi: f64) -> Vec<(f64, Complex)> {
    let decades = (hi / lo).log10().max(1e-3);
    let n = (decades * PER_DECADE).ceil().max(2.0) as usize;
    let (xlo, xhi) = (lo.ln(), hi.ln());
    let mut pts = Vec::with_capacity(n + 1);
    let mut prev: Option<(f64, Complex)> = None;
    for i in 0..=n {
        let x = if i == n {
            xhi
        } else {
            xlo + (xhi - xlo) * i as f64 / n as f64
        };
        let w = if i == n { hi } else { x.exp() };
        let v = f(w);
        if let Some(p) = prev {
            refine(f, p, (w, v), MAX_DEPTH, &mut pts);
        }
        pts.push((w, v));
        prev = Some((w, v));
    }
    pts
}

fn refine(
    f: &dyn Fn(f64) -> Complex,
    a: (f64, Complex),
    b: (f64, Complex),
    depth: u32,
    out: &mut Vec<(f64, Complex)>,
) {
    if depth == 0 || !(a.1.is_finite() && b.1.is_finite()) {
        return;
    }
    let dphase = (b.1 / a.1).arg().abs();
    let dmag = (b.1.abs().ln() - a.1.abs().ln()).abs();
    let big = !(dphase <= MAX_PHASE_STEP && dmag <= MAX_LNMAG_STEP);
    if !big {
        return;
    }
    let wm = (a.0 * b.0).sqrt();
    if !(wm > a.0 && wm < b.0) {
        return;
    }
    let m = (wm, f(wm));
    refine(f, a, m, depth - 1, out);
    out.push(m);
    refine(f, m, b, depth - 1, out);
}

/// Brent's root finder (van Wijngaarden-Dekker-Brent) on `[a, b]` with
/// `f(a)·f(b) <= 0`, to absolute tolerance `tol` in `x`.
pub(crate) fn brent(f: &dyn Fn(f64) -> f64, a: f64, b: f64, tol: f64) -> f64 {
    let (mut a, mut b) = (a, b);
    let (mut fa, mut fb) = (f(a), f(b));
    if fa == 0.0 {
        return a;
    }
    if fb == 0.0 {
        return b;
    }
    let (mut c, mut fc) = (b, fb);
    let mut d = b - a;
    let mut e = d;
    for _ in 0..200 {
        if (fb > 0.0) == (fc > 0.0) {
            c = a;
            fc = fa;
            d = b - a;
            e = d;
        }
        if fc.abs() < fb.abs() {
            a = b;
            b = c;
            c = a;
            fa = fb;
            fb = fc;
            fc = fa;
        }
        let tol1 = 2.0 * f64::EPSILON * b.abs() + 0.5 * tol;
        let xm = 0.5 * (c - b);
        if xm.abs() <= tol1 || fb == 0.0 {
            return b;
        }
        if e.abs() >= tol1 && fa.abs() > fb.abs() {
            let s = fb / fa;
            let (mut p, mut q);
            if a == c {
                p = 2.0 * xm * s;
                q = 1.0 - s;
            } else {
                let q0 = fa / fc;
                let r = fb / fc;
                p = s * (2.0 * xm * q0 * (q0 - r) - (b - a) * (r - 1.0));
                q = (q0 - 1.0) * (r - 1.0) * (s - 1.0);
            }
            if p > 0.0 {
                q = -q;
            }
            p = p.abs();
            let min1 = 3.0 * xm * q - (tol1 * q).abs();
            let min2 = (e * q).abs();
            if 2.0 * p < min1.min(min2) {
                e = d;
                d = p / q;
            } else {
                d = xm;
                e = d;
            }
        } else {
            d = xm;
            e = d;
        }
        a = b;
        fa = fb;
        b += if d.abs() > tol1 { d } else { tol1.copysign(xm) };
        fb = f(b);
    }
    b
}

/// Golden-section minimum of `f` on `[a, b]`.
fn golden_min(f: &dyn Fn(f64) -> f64, mut a: f64, mut b: f64, tol: f64) -> (f64, f64) {
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let mut c = b - g * (b - a);
    let mut d = a + g * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..200 {
        if (b - a).abs() <= tol {
            break;
        }
        if fc < fd {
            b = d;
            d = c;
            fd = fc;
            c = b - g * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + g * (b - a);
            fd = f(d);
        }
    }
    if fc < fd {
        (c, fc)
    } else {
        (d, fd)
    }
}

const XTOL: f64 = 1e-13;

/// All phase and gain crossovers and the stability margin of `l`.
pub fn crossings<L: LoopTransfer + ?Sized>(l: &L) -> Crossings {
    let (lo, hi) = sweep_range(l);
    let resp = |w: f64| l.response(w);
    let pts = sweep(&resp, lo, hi);
    let wn = l.nyquist_rad_s();
    let mut out = Crossings {
        sm: f64::INFINITY,
        wsm_rad_s: f64::NAN,
        ..Crossings::default()
    };

    // ω = 0: a finite, real, negative static gain is a phase crossover. A
    // pole at DC (an integrator) evaluates to a huge, rounding-signed value
    // for a discrete loop, so the static gain must also match the response
    // at the start of the sweep.
    let l0 = l.response(0.0);
    let flat = (l.response(lo).abs() / l0.abs()).ln().abs() < 0.1;
    if l0.is_finite() && flat && l0.im.abs() <= 1e-12 * l0.abs() && l0.re < 0.0 {
        out.phase.push(PhaseCrossover {
            w_rad_s: 0.0,
            gm_ratio: 1.0 / l0.abs(),
            at_nyquist: false,
        });
    }

    let harg = |x: f64| (-l.response(x.exp())).arg();
    let hmag = |x: f64| l.response(x.exp()).abs().ln();
    let push_phase = |out: &mut Crossings, w: f64| {
        let v = l.response(w);
        if !(v.is_finite() && v.re < 0.0) {
            return;
        }
        let at_nyquist = wn.is_some_and(|wn| (w - wn).abs() <= 1e-12 * wn);
        if out
            .phase
            .last()
            .is_some_and(|p| (p.w_rad_s - w).abs() <= 1e-9 * w)
        {
            return;
        }
        out.phase.push(PhaseCrossover {
            w_rad_s: w,
            gm_ratio: 1.0 / v.abs(),
            at_nyquist,
        });
    };
    let push_gain = |out: &mut Crossings, w: f64| {
        let v = l.response(w);
        if !v.is_finite() || w <= 0.0 {
            return;
        }
        if out
            .gain
            .last()
            .is_some_and(|g| (g.w_rad_s - w).abs() <= 1e-9 * w)
        {
            return;
        }
        out.gain.push(GainCrossover {
            w_rad_s: w,
            pm_deg: (v.arg().to_degrees()).rem_euclid(360.0) - 180.0,
        });
    };

    for win in pts.windows(2) {
        let ((w0, v0), (w1, v1)) = (win[0], win[1]);
        if !(v0.is_finite() && v1.is_finite()) {
            continue;
        }
        // Phase crossover: arg(-L) changes sign near zero.
        let (h0, h1) = ((-v0).arg(), (-v1).arg());
        let half = std::f64::consts::FRAC_PI_2;
        if h0 == 0.0 && v0.re < 0.0 {
            push_phase(&mut out, w0);
        } else if h0 * h1 < 0.0 && h0.abs() < half && h1.abs() < half {
            let x = brent(&harg, w0.ln(), w1.ln(), XTOL);
            push_phase(&mut out, x.exp());
        }
        // Gain crossover: ln|L| changes sign.
        let (g0, g1) = (v0.abs().ln(), v1.abs().ln());
        if g0 == 0.0 {
            push_gain(&mut out, w0);
        } else if g0 * g1 < 0.0 {
            let x = brent(&hmag, w0.ln(), w1.ln(), XTOL);
            push_gain(&mut out, x.exp());
        }
    }
    // The last sample (the Nyquist frequency of a discrete loop).
    if let Some(&(w, v)) = pts.last() {
        if v.is_finite() && (-v).arg() == 0.0 {
            push_phase(&mut out, w);
        } else if let Some(wn) = wn {
            // L(-1) is real for real coefficients; rounding leaves a tiny
            // imaginary part.
            let v = l.response(wn);
            if v.is_finite() && v.im.abs() <= 1e-9 * v.abs() && v.re < 0.0 {
                push_phase(&mut out, wn);
            }
        }
        if v.is_finite() && v.abs() == 1.0 {
            push_gain(&mut out, w);
        }
    }

    // Stability margin: the smallest |1 + L| on the sweep, refined.
    let dist = |x: f64| (l.response(x.exp()) + Complex::real(1.0)).abs();
    let mut best: Option<usize> = None;
    for (i, (_, v)) in pts.iter().enumerate() {
        let d = (*v + Complex::real(1.0)).abs();
        if d.is_finite() && best.is_none_or(|b| d < (pts[b].1 + Complex::real(1.0)).abs()) {
            best = Some(i);
        }
    }
    if let Some(i) = best {
        let (mut w, mut d) = (pts[i].0, (pts[i].1 + Complex::real(1.0)).abs());
        if i > 0 && i + 1 < pts.len() {
            let (x, dx) = golden_min(&dist, pts[i - 1].0.ln(), pts[i + 1].0.ln(), 1e-12);
            if dx < d {
                w = x.exp();
                d = dx;
            }
        }
        out.sm = d;
        out.wsm_rad_s = w;
    }

    out.phase.sort_by(|a, b| a.w_rad_s.total_cmp(&b.w_rad_s));
    out.gain.sort_by(|a, b| a.w_rad_s.total_cmp(&b.w_rad_s));
    out
}

/// The closed-loop bandwidth: the lowest frequency at which
/// `|L/(1+L)|` falls `-dbdrop` dB below its DC magnitude, rad/s (python-
/// control's `bandwidth(dbdrop)` definition, `dbdrop < 0`). ∞ if it never
/// drops (up to the Nyquist frequency for a discrete loop); NaN if the DC
/// gain is zero, infinite or `dbdrop` is not negative.
pub fn bandwidth_rad_s<L: LoopTransfer + ?Sized>(l: &L, dbdrop: f64) -> f64 {
    if dbdrop.is_nan() || dbdrop >= 0.0 {
        return f64::NAN;
    }
    let t0 = l.closed_loop_response(0.0).abs();
    if !(t0.is_finite() && t0 > 0.0) {
        return f64::NAN;
    }
    let level = (t0 * 10f64.powf(dbdrop / 20.0)).ln();
    let g = |w: f64| l.closed_loop_response(w).abs().ln();
    let (mut lo, mut hi) = sweep_range(l);
    lo = extend(lo, 0.1, &g, level);
    if l.nyquist_rad_s().is_none() {
        hi = extend(hi, 10.0, &g, level);
    }
    let resp = |w: f64| l.closed_loop_response(w);
    // Below the sweep start the response is at its DC value.
    let pts = sweep(&resp, lo, hi);
    for win in pts.windows(2) {
        let (a, b) = (win[0].1.abs().ln() - level, win[1].1.abs().ln() - level);
        if a >= 0.0 && b < 0.0 {
            let h = |x: f64| g(x.exp()) - level;
            return brent(&h, win[0].0.ln(), win[1].0.ln(), XTOL).exp();
        }
        if a < 0.0 {
            // Already below at the start of the sweep.
            return win[0].0;
        }
    }
    f64::INFINITY
}

/// Selected margins (python-control's choice among the crossings), the
/// stability margin and the -3 dB closed-loop bandwidth.
pub fn margins<L: LoopTransfer + ?Sized>(l: &L) -> Margins {
    margins_with(l, true)
}

/// [`margins`], optionally without the bandwidth sweep (NaN then).
pub(crate) fn margins_with<L: LoopTransfer + ?Sized>(l: &L, bandwidth: bool) -> Margins {
    let c = crossings(l);
    let (gm, wcg) = c
        .phase
        .iter()
        .filter(|p| p.gm_ratio.is_finite())
        .min_by(|a, b| a.gm_ratio.ln().abs().total_cmp(&b.gm_ratio.ln().abs()))
        .map_or((f64::INFINITY, f64::NAN), |p| (p.gm_ratio, p.w_rad_s));
    let (pm, wcp) = c
        .gain
        .iter()
        .min_by(|a, b| a.pm_deg.abs().total_cmp(&b.pm_deg.abs()))
        .map_or((f64::INFINITY, f64::NAN), |g| (g.pm_deg, g.w_rad_s));
    Margins {
        gm_ratio: gm,
        gm_db: 20.0 * gm.log10(),
        pm_deg: pm,
        sm: c.sm,
        wcg_rad_s: wcg,
        wcp_rad_s: wcp,
        wsm_rad_s: c.wsm_rad_s,
        fcg_hz: wcg / two_pi(),
        fcp_hz: wcp / two_pi(),
        bandwidth_hz: if bandwidth {
            bandwidth_rad_s(l, -3.0) / two_pi()
        } else {
            f64::NAN
        },
        closed_loop_stable: l.closed_loop_stable(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn brent_finds_roots() {
        let f = |x: f64| x * x - 2.0;
        let r = brent(&f, 0.0, 3.0, 1e-15);
        assert!((r - 2f64.sqrt()).abs() < 1e-14);
        let g = |x: f64| (x - 1.0).powi(3);
        assert!((brent(&g, -2.0, 5.0, 1e-14) - 1.0).abs() < 1e-4);
    }

    #[test]
    fn golden_finds_minimum() {
        let f = |x: f64| (x - 0.3).powi(2) + 1.0;
        let (x, v) = golden_min(&f, -1.0, 2.0, 1e-12);
        assert!((x - 0.3).abs() < 1e-6 && (v - 1.0).abs() < 1e-12);
    }

    #[test]
    fn first_order_has_infinite_margins() {
        // 1/(s+1): |L| < 1 for all ω > 0 and the phase never reaches -180.
        let l = ContinuousTf::from_descending(&[1.0], &[1.0, 1.0]);
        let m = margins(&l);
        assert!(m.gm_ratio.is_infinite() && m.pm_deg.is_infinite());
        assert!(m.wcg_rad_s.is_nan() && m.wcp_rad_s.is_nan());
        // T = 1/(s+2): DC 1/2, -3 dB where |s+2| = 2·10^(3/20).
        let want = (4.0 * 10f64.powf(0.3) - 4.0).sqrt();
        assert!((m.bandwidth_hz * two_pi() - want).abs() < 1e-9 * want);
    }

    #[test]
    fn integrator_crossover_is_its_gain() {
        // k/s: |L| = 1 at ω = k, PM = 90°, from a sweep range that must
        // widen far beyond the (empty) root set.
        for k in [1e-3, 2.0, 5e5] {
            let l = ContinuousTf::from_descending(&[k], &[1.0, 0.0]);
            let m = margins(&l);
            assert!((m.wcp_rad_s - k).abs() < 1e-9 * k, "{k}: {}", m.wcp_rad_s);
            assert!((m.pm_deg - 90.0).abs() < 1e-9);
            assert!(m.gm_ratio.is_infinite());
            assert!(m.closed_loop_stable);
        }
    }

    #[test]
    fn negative_static_gain_is_a_phase_crossover_at_dc() {
        // -0.5/(s+1): on the negative real axis at ω = 0, GM = 2.
        let l = ContinuousTf::from_descending(&[-0.5], &[1.0, 1.0]);
        let c = crossings(&l);
        assert_eq!(c.phase[0].w_rad_s, 0.0);
        assert!((c.phase[0].gm_ratio - 2.0).abs() < 1e-12);
    }
}
