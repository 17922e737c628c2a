//! exp and ln of arguments that move little from one tick to the next
//! (temperatures, drive currents): each keeps the function at the last
//! point it evaluated exactly and continues from there with the Taylor
//! series, which is exact to rounding inside a small radius.
//!
//! - [`ExpNear`]: exp(x) = exp(x0) exp(d), d = x - x0, with exp(d) by its
//!   [2/2] Padé approximant (12 + 6d + d^2) / (12 - 6d + d^2) for
//!   |d| <= 2^-9, whose relative error is d^5/720 + O(d^6) < 4e-17, a
//!   fifth of an ulp (Baker and Graves-Morris, *Padé Approximants*, 2nd
//!   ed., Cambridge University Press 1996, the Padé table of exp;
//!   `from memory`); the result is within 3 ulp of the library `exp`.
//! - [`LnNear`]: ln(x) = ln(x0) + ln1p(u), u = (x - x0) / x0, with
//!   ln1p(u) = 2 atanh(w), w = u / (2 + u), summed to w^3 for |u| <= 2^-10
//!   (first omitted term 2 w^5 / 5 < 1.2e-17, a twentieth of an ulp of 1).
//!
//! Outside the radius (and on the first call) the library function is
//! called and its point becomes the new centre.

/// Radius of the exp continuation in the argument.
const EXP_RADIUS: f64 = 1.0 / 512.0;
/// Radius of the ln continuation in the relative argument.
const LN_RADIUS: f64 = 1.0 / 1024.0;

/// exp of a slowly moving argument.
#[derive(Clone, Copy, Debug)]
pub struct ExpNear {
    x0: f64,
    e0: f64,
}

impl Default for ExpNear {
    fn default() -> Self {
        Self::new()
    }
}

impl ExpNear {
    /// No centre yet: the first call evaluates `exp` directly.
    pub const fn new() -> Self {
        Self {
            x0: f64::NAN,
            e0: f64::NAN,
        }
    }

    /// exp(x).
    #[inline]
    pub fn exp(&mut self, x: f64) -> f64 {
        let d = x - self.x0;
        if d.abs() <= EXP_RADIUS {
            // Padé [2/2]: fewer operations than the degree-5 series
            // (a division costs one instruction like a multiply).
            let even = 12.0 + d * d;
            let odd = 6.0 * d;
            self.e0 * (even + odd) / (even - odd)
        } else {
            self.recentre(x)
        }
    }

    #[cold]
    #[inline(never)]
    fn recentre(&mut self, x: f64) -> f64 {
        self.x0 = x;
        self.e0 = x.exp();
        self.e0
    }
}

/// Natural logarithm of a slowly moving positive argument.
#[derive(Clone, Copy, Debug)]
pub struct LnNear {
    x0: f64,
    inv_x0: f64,
    l0: f64,
}

impl Default for LnNear {
    fn default() -> Self {
        Self::new()
    }
}

impl LnNear {
    /// No centre yet: the first call evaluates `ln` directly.
    pub const fn new() -> Self {
        Self {
            x0: f64::NAN,
            inv_x0: f64::NAN,
            l0: f64::NAN,
        }
    }

    /// ln(x) (NaN for x < 0, -inf at 0, as the library function).
    #[inline]
    pub fn ln(&mut self, x: f64) -> f64 {
        let u = (x - self.x0) * self.inv_x0;
        if u.abs() <= LN_RADIUS {
            // ln1p(u) = 2 atanh(u / (2 + u)) = 2 w + 2 w^3 / 3 + O(w^5).
            let w = u / (2.0 + u);
            let w2 = w * w;
            self.l0 + (w + w) * (1.0 + w2 * (1.0 / 3.0))
        } else {
            self.recentre(x)
        }
    }

    #[cold]
    #[inline(never)]
    fn recentre(&mut self, x: f64) -> f64 {
        let l = x.ln();
        if x > 0.0 && x.is_finite() {
            self.x0 = x;
            self.inv_x0 = 1.0 / x;
            self.l0 = l;
        }
        l
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plant::Rng;

    fn ulps(a: f64, b: f64) -> f64 {
        (a - b).abs() / (f64::EPSILON * b.abs())
    }

    #[test]
    fn exp_near_follows_the_library_exp() {
        // Random walks with steps inside and beyond the radius, around
        // arguments of the size the plant uses (|x| up to 40).
        let mut rng = Rng::new(21);
        let mut worst = 0.0f64;
        let mut continued = 0usize;
        for start in [-40.0, -3.0, -0.2, 0.0, 0.15, 2.5, 37.0] {
            let mut e = ExpNear::new();
            let mut x: f64 = start;
            for k in 0..20_000 {
                let scale = if k % 97 == 0 { 1e-2 } else { 4e-4 };
                x += scale * (rng.uniform() - 0.5);
                let before = e.x0;
                let v = e.exp(x);
                if e.x0 == before {
                    continued += 1;
                }
                worst = worst.max(ulps(v, x.exp()));
            }
        }
        assert!(continued > 100_000, "continuation used {continued} times");
        assert!(worst <= 3.0, "worst {worst} ulp");
    }

    #[test]
    fn ln_near_follows_the_library_ln() {
        let mut rng = Rng::new(22);
        let mut worst = 0.0f64;
        for start in [3e-3f64, 0.05, 1.7, 2e16, 1e15] {
            let mut l = LnNear::new();
            let mut x = start;
            for k in 0..20_000 {
                let scale = if k % 89 == 0 { 1e-2 } else { 2e-4 };
                x *= 1.0 + scale * (rng.uniform() - 0.5);
                let v = l.ln(x);
                // Absolute error in ulps of the logarithm's own size (the
                // value is used added to other terms, never alone near 0).
                let err = (v - x.ln()).abs() / (f64::EPSILON * x.ln().abs().max(1.0));
                worst = worst.max(err);
            }
        }
        assert!(worst <= 3.0, "worst {worst} ulp");
        // The same argument twice in a row gives the same bits, whether the
        // first call continued or re-centred (the forward voltage reuses
        // the last value at an unchanged current on this ground).
        let mut l = LnNear::new();
        let mut x = 0.7f64;
        for k in 0..5_000 {
            x *= 1.0 + if k % 37 == 0 { 1e-2 } else { 1e-4 } * (rng.uniform() - 0.5);
            let a = l.ln(x);
            assert_eq!(a.to_bits(), l.ln(x).to_bits(), "{x}");
        }
        let mut l = LnNear::new();
        assert!(l.ln(-1.0).is_nan());
        assert_eq!(l.ln(0.0), f64::NEG_INFINITY);
        assert_eq!(l.ln(1.0), 0.0);
    }
}
