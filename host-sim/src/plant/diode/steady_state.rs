//! The exact steady state of the rate equations (quasi-static mode):
//! bracketed Halley iteration from the cold start, the anchored Halley
//! step of the fast path, and the dark state after facet damage.

use super::model::Model;

/// Exact steady state (N, S) of the rate equations at recombination
/// multiplier `f` and injection rate `j` (1/(m^3 s)).
pub(super) fn steady_state(m: &Model, f: f64, j: f64) -> (f64, f64) {
    if j.is_nan() || j <= 0.0 {
        return (0.0, 0.0);
    }
    let gt = m.gamma * m.tau_p;
    let gv = m.gamma * m.v_g;
    let (fa, fb, fc) = (f * m.a, f * m.b * (1.0 - m.beta), f * m.c);
    let sig_c = m.gamma * m.beta * f * m.b;
    // Initial guess: root of the quadratic expansion about N_th.
    let k = gv * m.dgdn_th;
    let a2 = gt * k * f * m.rtp_th;
    let b1 = gt * k * (j - f * m.rt_th);
    let sig = sig_c * m.n_th * m.n_th;
    let disc = (b1 * b1 + 4.0 * a2 * sig).sqrt();
    let x = if b1 >= 0.0 {
        if b1 + disc > 0.0 {
            2.0 * sig / (b1 + disc)
        } else {
            0.0
        }
    } else {
        (disc - b1) / (2.0 * a2)
    };
    let mut n = m.n_th - x;
    if b1 > 0.0 {
        // Gain compression lifts the clamped density above N_th by about
        // g_th eps S / (dg/dN).
        let s_est = gt * (j - f * m.rt_th);
        n += m.eps * s_est / (gv * m.tau_p * m.dgdn_th);
    }
    let (mut lo, mut hi) = (0.0f64, f64::INFINITY);
    if j < f * m.rt_th {
        // Below threshold the root lies under the density where all the
        // injection recombines (S = 0). Newton on that convex equation from
        // N_th stays above its root, so every iterate is an upper bound.
        let mut nd = m.n_th;
        if fc > 0.0 {
            nd = nd.min((j / fc).cbrt());
        }
        if fb > 0.0 {
            nd = nd.min((j / fb).sqrt());
        }
        if fa > 0.0 {
            nd = nd.min(j / fa);
        }
        for _ in 0..4 {
            let g = ((fc * nd + fb) * nd + fa) * nd - j;
            let gp = (3.0 * fc * nd + 2.0 * fb) * nd + fa;
            nd -= g / gp;
        }
        hi = nd;
        if !(n < nd && n > 0.0) {
            n = nd * (1.0 - 1e-9);
        }
    }
    if n.is_nan() || n <= 0.0 {
        n = m.n_th;
    }
    for _ in 0..200 {
        let rt = ((fc * n + fb) * n + fa) * n;
        let s = gt * (j - rt);
        if s <= 0.0 {
            // Past the density where all injection recombines: root is below.
            hi = n;
            n = 0.5 * (lo + hi);
            continue;
        }
        let rtp = (3.0 * fc * n + 2.0 * fb) * n + fa;
        let (gn, gnp, gnpp) = m.gain3(n);
        let inv_den = 1.0 / (1.0 + m.eps * s);
        let g = gn * inv_den;
        let d = m.inv_tau_p - gv * g;
        let fval = s * d - sig_c * n * n;
        if fval > 0.0 {
            lo = n;
        } else {
            hi = n;
        }
        let sp = -gt * rtp;
        let dp = -gv * inv_den * (gnp - g * m.eps * sp);
        let dfdn = sp * d + s * dp - 2.0 * sig_c * n;
        if dfdn < 0.0 {
            let spp = -gt * (2.0 * fb + 6.0 * fc * n);
            let wp = -m.eps * sp * inv_den;
            let wpp = -m.eps * spp * inv_den + 2.0 * wp * wp;
            // h = g_N w with w = 1/(1 + eps S): h'' = g'' w + 2 g' w' + g w''.
            let hpp = inv_den * (gnpp + 2.0 * gnp * wp + gn * wpp);
            let fpp = spp * d + 2.0 * sp * dp - s * gv * hpp - 2.0 * sig_c;
            // Halley step (cubic convergence); its error is about
            // (F'' step / F')^2 step, so stop once that is below 1e-12 N.
            let step = fval * dfdn / (dfdn * dfdn - 0.5 * fval * fpp);
            let q = fpp * step;
            let done = step.abs() <= 1e-12 * n
                || (step.abs() <= 1e-3 * n && (q * q * step).abs() <= 1e-12 * n * dfdn * dfdn);
            if done {
                let n_new = n - step;
                let rt_new = ((fc * n_new + fb) * n_new + fa) * n_new;
                let s_new = gt * (j - rt_new);
                if d - dp * step > 0.5 * m.inv_tau_p {
                    // Far below threshold the balance S = Gamma tau_p (J - R)
                    // cancels; the photon equation S = spont / D is the
                    // better conditioned form there.
                    let (gn2, _) = m.gain(n_new);
                    let d2 = m.inv_tau_p - gv * gn2 / (1.0 + m.eps * s_new.max(0.0));
                    return (n_new, sig_c * n_new * n_new / d2);
                }
                return (n_new, s_new.max(0.0));
            }
            let n_new = n - step;
            if n_new > lo && n_new < hi {
                n = n_new;
                continue;
            }
        }
        if hi.is_finite() {
            if hi - lo <= 1e-15 * hi {
                break;
            }
            n = 0.5 * (lo + hi);
        } else {
            n *= 2.0;
        }
    }
    // Bracket collapsed without convergence of the iteration (not met in practice).
    let rt = ((fc * n + fb) * n + fa) * n;
    let s_bal = (gt * (j - rt)).max(0.0);
    let (gn, _) = m.gain(n);
    let d = m.inv_tau_p - gv * gn / (1.0 + m.eps * s_bal);
    let s = if d > 0.5 * m.inv_tau_p {
        sig_c * n * n / d
    } else {
        s_bal
    };
    (n, s)
}

/// A carrier density N_a and the parts of the steady-state equation that
/// depend on N alone, evaluated there once (at f = 1, with
/// R0(N) = A N + (1 - beta) B N^2 + C N^3):
/// Gamma tau_p R0 and its first two derivatives, 1/tau_p - Gamma v_g g_N
/// and Gamma v_g times the first two derivatives of g_N.
#[derive(Clone, Copy, Debug)]
pub(super) struct Anchor {
    pub(super) n: f64,
    pub(super) nn: f64,
    pub(super) p0: f64,
    pub(super) p1: f64,
    pub(super) p2: f64,
    pub(super) e0: f64,
    pub(super) gv_gp: f64,
    pub(super) gv_gpp: f64,
}

impl Anchor {
    pub(super) fn at(m: &Model, n: f64) -> Self {
        let (gt, gv) = (m.gt, m.gv);
        let (a0, b0, c0) = (m.a, m.b * (1.0 - m.beta), m.c);
        let (g, gp, gpp) = m.gain3(n);
        Self {
            n,
            nn: n * n,
            p0: gt * ((c0 * n + b0) * n + a0) * n,
            p1: gt * ((3.0 * c0 * n + 2.0 * b0) * n + a0),
            p2: gt * (6.0 * c0 * n + 2.0 * b0),
            e0: m.inv_tau_p - gv * g,
            gv_gp: gv * gp,
            gv_gpp: gv * gpp,
        }
    }
}

/// Outcome of one Halley step of [`halley_from`].
#[derive(Clone, Copy, Debug)]
pub(super) struct HalleyStep {
    /// The new density, 1/m^3.
    pub(super) n: f64,
    /// The photon density there, 1/m^3.
    pub(super) s: f64,
    /// Whether the stopping rule of [`steady_state`] holds for this step
    /// (predicted error below 1e-12 N).
    pub(super) converged: bool,
}

/// One Halley step toward the steady state above threshold, from the
/// anchor `a`; `None` where the general [`steady_state`] must decide
/// (photon density not positive, slope of the wrong sign, a step out of
/// the physical range, or too close to threshold, where the photon
/// equation is the better conditioned form).
///
/// The equation is that of [`steady_state`] multiplied through by
/// w = 1 + eps S > 0, so its evaluation has no division: with
/// S = Gamma tau_p (J - f R0(N)) and sigma = Gamma beta f B,
/// `G(N) = c2 S^2 + c1(N) S + k0(N)`, `c2 = eps / tau_p`,
/// `c1 = 1/tau_p - Gamma v_g g_N(N) - eps sigma N^2`, `k0 = -sigma N^2`.
/// G = w F vanishes exactly where F does (G' = w F' there). Everything
/// that depends on N alone comes from the anchor, so the step needs only
/// the operations that involve J and f. S at the new N follows from the
/// exact Taylor expansion of the cubic S(N).
#[inline(always)]
pub(super) fn halley_from(m: &Model, f: f64, j: f64, a: &Anchor) -> Option<HalleyStep> {
    let (n, nn) = (a.n, a.nn);
    let (ea, c2) = (m.inv_tau_p, m.c2);
    let sigma = m.sigma1 * f;
    let sig_eps = sigma * m.eps;
    let s = m.gt * j - f * a.p0;
    let (sp, spp) = (-f * a.p1, -f * a.p2);
    let c1 = a.e0 - sig_eps * nn;
    let c1p = -a.gv_gp - 2.0 * sig_eps * n;
    let c1pp = -a.gv_gpp - 2.0 * sig_eps;
    let (k0, k0p, k0pp) = (-sigma * nn, -2.0 * sigma * n, -2.0 * sigma);
    let lin = 2.0 * c2 * s + c1;
    let gval = (c2 * s + c1) * s + k0;
    let d1 = lin * sp + c1p * s + k0p;
    let d2 = 2.0 * c2 * sp * sp + lin * spp + 2.0 * c1p * sp + c1pp * s + k0pp;
    if !(s > 0.0 && d1 < 0.0) {
        return None;
    }
    let step = gval * d1 / (d1 * d1 - 0.5 * gval * d2);
    let n_new = n - step;
    // The third derivative of S is the same at every N.
    let s3_6 = m.s3_1 * f * (1.0 / 6.0);
    let s_new = s - step * (sp - step * (0.5 * spp - step * s3_6));
    if !(n_new > 0.0 && s_new > 0.0) || sigma * n_new * n_new > 0.5 * ea * s_new {
        return None;
    }
    let q = d2 * step;
    let converged = step.abs() <= 1e-12 * n
        || (step.abs() <= 1e-3 * n && (q * q * step).abs() <= 1e-12 * n * d1 * d1);
    Some(HalleyStep {
        n: n_new,
        s: s_new,
        converged,
    })
}

/// Carrier density with no optical feedback: f R(N) = j.
pub(super) fn dark_state(m: &Model, f: f64, j: f64) -> f64 {
    if j.is_nan() || j <= 0.0 {
        return 0.0;
    }
    let (fa, fb, fc) = (f * m.a, f * m.b, f * m.c);
    // Start above the root (each term alone would reach j), so Newton on the
    // convex increasing R(N) descends monotonically.
    let mut n = f64::INFINITY;
    if fa > 0.0 {
        n = n.min(j / fa);
    }
    if fb > 0.0 {
        n = n.min((j / fb).sqrt());
    }
    if fc > 0.0 {
        n = n.min((j / fc).cbrt());
    }
    for _ in 0..100 {
        let g = ((fc * n + fb) * n + fa) * n - j;
        let gp = (3.0 * fc * n + 2.0 * fb) * n + fa;
        let dn = g / gp;
        n -= dn;
        if dn.abs() <= 1e-14 * n {
            break;
        }
    }
    n.max(0.0)
}

#[cfg(test)]
mod tests {
    use super::super::params::DiodeParams;
    use super::*;

    /// The in-plane laser of Coldren, Corzine and Mashanovitch, *Diode
    /// Lasers and Photonic Integrated Circuits*, 2nd ed. (Wiley 2012)
    /// (`from memory`, see `DiodeParams::textbook_in_plane`). The checks
    /// below compare the solver with a bisection to machine precision.
    fn textbook() -> DiodeParams {
        DiodeParams::textbook_in_plane()
    }

    /// Brute-force steady state: bisection on F(N) to machine precision.
    fn bisect_steady(m: &Model, f: f64, j: f64) -> (f64, f64) {
        let gt = m.gamma * m.tau_p;
        let eval = |n: f64| {
            let rt = f * (m.a * n + m.b * (1.0 - m.beta) * n * n + m.c * n * n * n);
            let s = gt * (j - rt);
            if s <= 0.0 {
                return (-1.0, s);
            }
            let (gn, _) = m.gain(n);
            let d = m.inv_tau_p - m.gamma * m.v_g * gn / (1.0 + m.eps * s);
            (s * d - m.gamma * m.beta * f * m.b * n * n, s)
        };
        let (mut lo, mut hi) = (0.0, 10.0 * m.n_th);
        for _ in 0..300 {
            let mid = 0.5 * (lo + hi);
            if eval(mid).0 > 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        (lo, eval(lo).1)
    }

    #[test]
    fn steady_state_matches_bisection() {
        for p in [
            textbook(),
            DiodeParams::demo_visible(),
            DiodeParams::demo_pump(),
        ] {
            let m = Model::new(&p);
            for f in [0.7, 1.0, 1.6] {
                for x in [0.01, 0.3, 0.9, 0.99, 1.0, 1.01, 1.1, 2.0, 5.0, 20.0] {
                    let j = x * f * m.rt_th;
                    let (n, s) = steady_state(&m, f, j);
                    let (nb, sb) = bisect_steady(&m, f, j);
                    assert!((n / nb - 1.0).abs() < 1e-10, "N {n} vs {nb} at x={x} f={f}");
                    assert!((s / sb - 1.0).abs() < 1e-6, "S {s} vs {sb} at x={x} f={f}");
                }
            }
        }
    }

    #[test]
    fn dark_state_balances_recombination() {
        let m = Model::new(&textbook());
        for j in [1e30, 1e32, 1e34] {
            let n = dark_state(&m, 1.3, j);
            let r = 1.3 * (m.a * n + m.b * n * n + m.c * n * n * n);
            assert!((r / j - 1.0).abs() < 1e-12);
        }
    }
}
