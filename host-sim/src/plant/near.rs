//! exp and ln of arguments that move little from one tick to the next
//! (temperatures, drive currents): each keeps the function at the last
//! point it evaluated exactly and continues from there with the Taylor
//! series, which is exact to rounding inside a small radius.
//!
//! - [`ExpNear`]: exp(x) = exp(x0) exp(d), d = x - x0, with exp(d) summed to
//!   d^5 for |d| <= 2^-9 (first omitted term d^6/720 < 2e-19, below a
//!   tenth of an ulp); the result is within 3 ulp of the library `exp`.
//! - [`LnNear`]: ln(x) = ln(x0) + ln1p(u), u = (x - x0) / x0, with ln1p
//!   summed to u^5 for |u| <= 2^-10 (first omitted term u^6/6 < 2e-19).
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
            // Estrin's grouping: the three pairs are independent, so the
            // polynomial costs three multiply-add levels, not five.
            let d2 = d * d;
            let hi = (1.0 / 24.0) + d * (1.0 / 120.0);
            let mid = 0.5 + d * (1.0 / 6.0);
            let p = (1.0 + d) + d2 * (mid + d2 * hi);
            self.e0 * p
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
            let s =
                u * (1.0 - u * (1.0 / 2.0 - u * (1.0 / 3.0 - u * (1.0 / 4.0 - u * (1.0 / 5.0)))));
            self.l0 + s
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
        let mut l = LnNear::new();
        assert!(l.ln(-1.0).is_nan());
        assert_eq!(l.ln(0.0), f64::NEG_INFINITY);
        assert_eq!(l.ln(1.0), 0.0);
    }
}
