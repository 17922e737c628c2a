//! Rational transfer functions over `f64` polynomials: continuous
//! ([`ContinuousTf`], in `s`) and discrete ([`DiscreteTf`], in `z`, with a
//! sample time), with products, unity feedback, poles and zeros, frequency
//! response (`s = jω`, `z = e^{jωT}`), zero-order-hold discretisation and
//! simulation of the difference equation.
//!
//! Polynomials are stored in ascending powers (`c[0] + c[1]·x + …`);
//! [`Poly::from_descending`] and [`Poly::descending`] use the highest-power
//! first order of numpy and python-control.

use std::fmt;
use std::ops::{Add, Div, Mul, Neg, Sub};

/// A complex number (just what the frequency-domain code needs).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Complex {
    /// Real part.
    pub re: f64,
    /// Imaginary part.
    pub im: f64,
}

impl Complex {
    /// `re + j·im`.
    pub const fn new(re: f64, im: f64) -> Self {
        Complex { re, im }
    }

    /// A real number.
    pub const fn real(re: f64) -> Self {
        Complex { re, im: 0.0 }
    }

    /// `e^{jθ}`.
    pub fn cis(theta: f64) -> Self {
        Complex::new(theta.cos(), theta.sin())
    }

    /// Magnitude.
    pub fn abs(self) -> f64 {
        self.re.hypot(self.im)
    }

    /// Argument in (-π, π].
    pub fn arg(self) -> f64 {
        self.im.atan2(self.re)
    }

    /// Complex conjugate.
    pub fn conj(self) -> Self {
        Complex::new(self.re, -self.im)
    }

    /// `e^{self}`.
    pub fn exp(self) -> Self {
        Complex::cis(self.im) * self.re.exp()
    }

    /// Principal natural logarithm.
    pub fn ln(self) -> Self {
        Complex::new(self.abs().ln(), self.arg())
    }

    /// Both parts finite.
    pub fn is_finite(self) -> bool {
        self.re.is_finite() && self.im.is_finite()
    }
}

impl Add for Complex {
    type Output = Complex;
    fn add(self, o: Complex) -> Complex {
        Complex::new(self.re + o.re, self.im + o.im)
    }
}

impl Sub for Complex {
    type Output = Complex;
    fn sub(self, o: Complex) -> Complex {
        Complex::new(self.re - o.re, self.im - o.im)
    }
}

impl Mul for Complex {
    type Output = Complex;
    fn mul(self, o: Complex) -> Complex {
        Complex::new(
            self.re * o.re - self.im * o.im,
            self.re * o.im + self.im * o.re,
        )
    }
}

impl Mul<f64> for Complex {
    type Output = Complex;
    fn mul(self, k: f64) -> Complex {
        Complex::new(self.re * k, self.im * k)
    }
}

impl Div for Complex {
    type Output = Complex;
    /// Smith's algorithm (no overflow for large parts). Division by zero
    /// gives an infinite or NaN result, as for `f64`.
    fn div(self, o: Complex) -> Complex {
        if o.re == 0.0 && o.im == 0.0 {
            return Complex::new(self.re / 0.0, self.im / 0.0);
        }
        if o.re.abs() >= o.im.abs() {
            let r = o.im / o.re;
            let d = o.re + o.im * r;
            Complex::new((self.re + self.im * r) / d, (self.im - self.re * r) / d)
        } else {
            let r = o.re / o.im;
            let d = o.re * r + o.im;
            Complex::new((self.re * r + self.im) / d, (self.im * r - self.re) / d)
        }
    }
}

impl Neg for Complex {
    type Output = Complex;
    fn neg(self) -> Complex {
        Complex::new(-self.re, -self.im)
    }
}

impl fmt::Display for Complex {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.im >= 0.0 {
            write!(f, "{}+{}j", self.re, self.im)
        } else {
            write!(f, "{}{}j", self.re, self.im)
        }
    }
}

/// A real polynomial, coefficients in ascending powers, without trailing
/// zero coefficients (the zero polynomial is `[0.0]`).
#[derive(Clone, Debug, PartialEq)]
pub struct Poly {
    c: Vec<f64>,
}

impl Poly {
    /// From coefficients in ascending powers (`c[0] + c[1]·x + …`).
    pub fn new(ascending: Vec<f64>) -> Self {
        let mut c = ascending;
        while c.len() > 1 && c.last() == Some(&0.0) {
            c.pop();
        }
        if c.is_empty() {
            c.push(0.0);
        }
        Poly { c }
    }

    /// From coefficients in descending powers, as numpy and python-control
    /// write them (`[1, 2, 3]` is `x² + 2x + 3`).
    pub fn from_descending(descending: &[f64]) -> Self {
        Poly::new(descending.iter().rev().copied().collect())
    }

    /// The constant `k`.
    pub fn constant(k: f64) -> Self {
        Poly::new(vec![k])
    }

    /// `x^k`.
    pub fn monomial(k: usize) -> Self {
        let mut c = vec![0.0; k + 1];
        c[k] = 1.0;
        Poly { c }
    }

    /// The monic polynomial with the given roots. Non-real roots must come
    /// in conjugate pairs; the imaginary parts of the product (rounding
    /// only) are dropped.
    pub fn from_roots(roots: &[Complex]) -> Self {
        let mut c = vec![Complex::real(1.0)];
        for &r in roots {
            let mut n = vec![Complex::default(); c.len() + 1];
            for (i, &ci) in c.iter().enumerate() {
                n[i + 1] = n[i + 1] + ci;
                n[i] = n[i] - ci * r;
            }
            c = n;
        }
        Poly::new(c.iter().map(|z| z.re).collect())
    }

    /// Coefficients in ascending powers.
    pub fn coeffs(&self) -> &[f64] {
        &self.c
    }

    /// Coefficients in descending powers.
    pub fn descending(&self) -> Vec<f64> {
        self.c.iter().rev().copied().collect()
    }

    /// Degree (0 for a constant, including the zero polynomial).
    pub fn degree(&self) -> usize {
        self.c.len() - 1
    }

    /// `true` for the zero polynomial.
    pub fn is_zero(&self) -> bool {
        self.c.len() == 1 && self.c[0] == 0.0
    }

    /// Highest-power coefficient.
    pub fn leading(&self) -> f64 {
        self.c[self.c.len() - 1]
    }

    /// Value at a real point (Horner).
    pub fn eval(&self, x: f64) -> f64 {
        self.c.iter().rev().fold(0.0, |acc, &k| acc * x + k)
    }

    /// Value at a complex point (Horner).
    pub fn eval_complex(&self, x: Complex) -> Complex {
        self.c
            .iter()
            .rev()
            .fold(Complex::default(), |acc, &k| acc * x + Complex::real(k))
    }

    /// `k·p`.
    pub fn scale(&self, k: f64) -> Poly {
        Poly::new(self.c.iter().map(|v| v * k).collect())
    }

    /// `p(a·x)`: coefficient `k` multiplied by `a^k`.
    pub fn scale_argument(&self, a: f64) -> Poly {
        let mut f = 1.0;
        let mut out = Vec::with_capacity(self.c.len());
        for &v in &self.c {
            out.push(v * f);
            f *= a;
        }
        Poly::new(out)
    }

    /// First derivative.
    pub fn derivative(&self) -> Poly {
        if self.c.len() == 1 {
            return Poly::constant(0.0);
        }
        Poly::new(
            self.c
                .iter()
                .enumerate()
                .skip(1)
                .map(|(k, v)| v * k as f64)
                .collect(),
        )
    }

    /// Number of roots exactly at zero (trailing zero coefficients).
    pub fn zeros_at_origin(&self) -> usize {
        if self.is_zero() {
            return 0;
        }
        self.c.iter().take_while(|v| **v == 0.0).count()
    }

    /// All complex roots, with multiplicity (Aberth-Ehrlich iteration with
    /// a Newton polish; exact zeros at the origin are split off first).
    /// The zero polynomial and constants have no roots.
    pub fn roots(&self) -> Vec<Complex> {
        if self.is_zero() {
            return Vec::new();
        }
        let k0 = self.zeros_at_origin();
        let mut out = vec![Complex::default(); k0];
        let c = &self.c[k0..];
        out.extend(roots_nonzero(c));
        out
    }
}

/// Roots of a polynomial (ascending coefficients) with `c[0] != 0`.
fn roots_nonzero(c: &[f64]) -> Vec<Complex> {
    let n = c.len() - 1;
    match n {
        0 => Vec::new(),
        1 => vec![Complex::real(-c[0] / c[1])],
        2 => quadratic_roots(c[2], c[1], c[0]),
        _ => aberth(c),
    }
}

/// Roots of `a x² + b x + c` without cancellation.
fn quadratic_roots(a: f64, b: f64, c: f64) -> Vec<Complex> {
    let disc = b * b - 4.0 * a * c;
    if disc >= 0.0 {
        let sq = disc.sqrt();
        let q = if b >= 0.0 {
            -0.5 * (b + sq)
        } else {
            -0.5 * (b - sq)
        };
        if q == 0.0 {
            return vec![Complex::default(), Complex::default()];
        }
        vec![Complex::real(q / a), Complex::real(c / q)]
    } else {
        let re = -b / (2.0 * a);
        let im = (-disc).sqrt() / (2.0 * a.abs());
        vec![Complex::new(re, im), Complex::new(re, -im)]
    }
}

fn aberth(c: &[f64]) -> Vec<Complex> {
    let n = c.len() - 1;
    let lead = c[n];
    let monic: Vec<f64> = c.iter().map(|v| v / lead).collect();
    let p = Poly::new(monic.clone());
    let dp = p.derivative();
    // Initial guesses on a circle whose radius is the geometric mean of the
    // root magnitudes, |c0|^(1/n), rotated off the real axis.
    let r0 = monic[0].abs().powf(1.0 / n as f64).max(f64::MIN_POSITIVE);
    let mut z: Vec<Complex> = (0..n)
        .map(|k| Complex::cis(2.0 * std::f64::consts::PI * k as f64 / n as f64 + 0.4) * r0)
        .collect();
    for _ in 0..1000 {
        let mut moved = 0.0f64;
        for i in 0..n {
            let pv = p.eval_complex(z[i]);
            if pv.re == 0.0 && pv.im == 0.0 {
                continue;
            }
            let ratio = pv / dp.eval_complex(z[i]);
            let mut sum = Complex::default();
            for (j, &zj) in z.iter().enumerate() {
                if j != i {
                    sum = sum + Complex::real(1.0) / (z[i] - zj);
                }
            }
            let w = ratio / (Complex::real(1.0) - ratio * sum);
            if w.is_finite() {
                z[i] = z[i] - w;
                moved = moved.max(w.abs() / z[i].abs().max(f64::MIN_POSITIVE));
            }
        }
        if moved < 1e-15 {
            break;
        }
    }
    // Newton polish on the original coefficients.
    for zi in z.iter_mut() {
        for _ in 0..3 {
            let d = dp.eval_complex(*zi);
            let step = p.eval_complex(*zi) / d;
            if step.is_finite() {
                *zi = *zi - step;
            }
        }
    }
    z
}

impl Add for &Poly {
    type Output = Poly;
    fn add(self, o: &Poly) -> Poly {
        let n = self.c.len().max(o.c.len());
        Poly::new(
            (0..n)
                .map(|i| self.c.get(i).unwrap_or(&0.0) + o.c.get(i).unwrap_or(&0.0))
                .collect(),
        )
    }
}

impl Sub for &Poly {
    type Output = Poly;
    fn sub(self, o: &Poly) -> Poly {
        self + &o.scale(-1.0)
    }
}

impl Mul for &Poly {
    type Output = Poly;
    fn mul(self, o: &Poly) -> Poly {
        let mut out = vec![0.0; self.c.len() + o.c.len() - 1];
        for (i, a) in self.c.iter().enumerate() {
            for (j, b) in o.c.iter().enumerate() {
                out[i + j] += a * b;
            }
        }
        Poly::new(out)
    }
}

impl fmt::Display for Poly {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut first = true;
        for (k, &v) in self.c.iter().enumerate().rev() {
            if v == 0.0 && !(first && k == 0) {
                continue;
            }
            if !first {
                write!(f, " {} ", if v < 0.0 { '-' } else { '+' })?;
            } else if v < 0.0 {
                write!(f, "-")?;
            }
            first = false;
            let a = v.abs();
            match k {
                0 => write!(f, "{a}")?,
                1 => write!(f, "{a}·x")?,
                _ => write!(f, "{a}·x^{k}")?,
            }
        }
        Ok(())
    }
}

/// A continuous-time rational transfer function `num(s) / den(s)`.
#[derive(Clone, Debug, PartialEq)]
pub struct ContinuousTf {
    num: Poly,
    den: Poly,
}

impl ContinuousTf {
    /// `num(s) / den(s)`.
    ///
    /// # Panics
    /// If `den` is the zero polynomial.
    pub fn new(num: Poly, den: Poly) -> Self {
        assert!(!den.is_zero(), "transfer function denominator is zero");
        ContinuousTf { num, den }
    }

    /// From descending coefficients, as `control.tf(num, den)`.
    pub fn from_descending(num: &[f64], den: &[f64]) -> Self {
        ContinuousTf::new(Poly::from_descending(num), Poly::from_descending(den))
    }

    /// A static gain.
    pub fn gain(k: f64) -> Self {
        ContinuousTf::new(Poly::constant(k), Poly::constant(1.0))
    }

    /// First-order lag with unity DC gain, `a / (s + a)`, `a` in rad/s.
    pub fn first_order_lag(a_rad_s: f64) -> Self {
        ContinuousTf::new(Poly::constant(a_rad_s), Poly::new(vec![a_rad_s, 1.0]))
    }

    /// Numerator.
    pub fn num(&self) -> &Poly {
        &self.num
    }

    /// Denominator.
    pub fn den(&self) -> &Poly {
        &self.den
    }

    /// Value at a complex frequency `s`.
    pub fn eval(&self, s: Complex) -> Complex {
        self.num.eval_complex(s) / self.den.eval_complex(s)
    }

    /// Frequency response at `ω` rad/s, `G(jω)`.
    pub fn freq_response(&self, w_rad_s: f64) -> Complex {
        self.eval(Complex::new(0.0, w_rad_s))
    }

    /// Series connection (product).
    pub fn series(&self, other: &ContinuousTf) -> ContinuousTf {
        ContinuousTf::new(&self.num * &other.num, &self.den * &other.den)
    }

    /// Multiplied by a static gain.
    pub fn scaled(&self, k: f64) -> ContinuousTf {
        ContinuousTf::new(self.num.scale(k), self.den.clone())
    }

    /// Unity negative feedback around this loop: `L / (1 + L)`.
    pub fn feedback(&self) -> ContinuousTf {
        ContinuousTf::new(self.num.clone(), &self.den + &self.num)
    }

    /// Poles (roots of the denominator).
    pub fn poles(&self) -> Vec<Complex> {
        self.den.roots()
    }

    /// Zeros (roots of the numerator).
    pub fn zeros(&self) -> Vec<Complex> {
        self.num.roots()
    }

    /// `deg den - deg num`.
    pub fn relative_degree(&self) -> isize {
        self.den.degree() as isize - self.num.degree() as isize
    }

    /// All poles strictly in the left half plane.
    pub fn is_stable(&self) -> bool {
        self.poles().iter().all(|p| p.re < 0.0)
    }

    /// Zero-order-hold equivalent with sample time `dt_s`: the exact
    /// discrete model of this system driven by a piecewise-constant input
    /// and sampled at the same instants, `(1 - z⁻¹)·Z{G(s)/s}`.
    ///
    /// Computed in state space (controllable canonical form, time scaled
    /// by `dt_s` so the matrices are well conditioned) with the matrix
    /// exponential of `[[A, B], [0, 0]]`, then converted back to a transfer
    /// function with the Faddeev-LeVerrier recursion. The discrete poles
    /// are `e^{p·T}`.
    ///
    /// # Panics
    /// If the system is improper or `dt_s` is not positive and finite.
    pub fn c2d_zoh(&self, dt_s: f64) -> DiscreteTf {
        assert!(
            dt_s > 0.0 && dt_s.is_finite(),
            "sample time must be positive"
        );
        assert!(
            self.relative_degree() >= 0,
            "ZOH discretisation needs a proper transfer function"
        );
        // Time scaling: σ = s·T, G(σ/T) as a polynomial ratio in σ.
        let num = self.num.scale_argument(1.0 / dt_s);
        let den = self.den.scale_argument(1.0 / dt_s);
        let n = den.degree();
        let lead = den.leading();
        let den: Vec<f64> = den.coeffs().iter().map(|v| v / lead).collect();
        let mut numc: Vec<f64> = num.coeffs().iter().map(|v| v / lead).collect();
        numc.resize(n + 1, 0.0);
        if n == 0 {
            return DiscreteTf::gain(numc[0], dt_s);
        }
        // Direct feedthrough and the strictly proper remainder.
        let d = numc[n];
        let b: Vec<f64> = (0..n).map(|i| numc[i] - d * den[i]).collect();
        // Controllable canonical form: x' = A x + B u, y = C x + D u.
        let m = n + 1;
        let mut aug = vec![0.0; m * m];
        for i in 0..n - 1 {
            aug[i * m + i + 1] = 1.0;
        }
        for j in 0..n {
            aug[(n - 1) * m + j] = -den[j];
        }
        aug[(n - 1) * m + n] = 1.0;
        let e = expm(&aug, m);
        let mut ad = vec![0.0; n * n];
        let mut bd = vec![0.0; n];
        for i in 0..n {
            for j in 0..n {
                ad[i * n + j] = e[i * m + j];
            }
            bd[i] = e[i * m + n];
        }
        let (charp, adj) = faddeev_leverrier(&ad, n);
        // den(z) = det(zI - Ad); num(z) = C adj(zI - Ad) Bd + D den(z).
        let mut num_z = vec![0.0; n + 1];
        for (k, mk) in adj.iter().enumerate() {
            // adj = Σ_k M_k z^{n-1-k}
            let mut v = 0.0;
            for i in 0..n {
                let mut row = 0.0;
                for j in 0..n {
                    row += mk[i * n + j] * bd[j];
                }
                v += b[i] * row;
            }
            num_z[n - 1 - k] += v;
        }
        for (i, c) in charp.iter().enumerate() {
            num_z[i] += d * c;
        }
        DiscreteTf::new(Poly::new(num_z), Poly::new(charp), dt_s)
    }
}

/// Matrix exponential of an `m × m` row-major matrix: scaling so the
/// 1-norm is at most 1/2, Taylor series to machine precision, squaring.
fn expm(a: &[f64], m: usize) -> Vec<f64> {
    let norm = (0..m)
        .map(|j| (0..m).map(|i| a[i * m + j].abs()).sum::<f64>())
        .fold(0.0, f64::max);
    let mut s = 0u32;
    let mut scale = 1.0;
    while norm * scale > 0.5 {
        scale *= 0.5;
        s += 1;
    }
    let a: Vec<f64> = a.iter().map(|v| v * scale).collect();
    let mut result = identity(m);
    let mut term = identity(m);
    for k in 1..40 {
        term = matmul(&term, &a, m);
        let inv = 1.0 / k as f64;
        term.iter_mut().for_each(|v| *v *= inv);
        let mut big = 0.0f64;
        for (r, t) in result.iter_mut().zip(&term) {
            *r += t;
            big = big.max(t.abs());
        }
        if big < 1e-18 {
            break;
        }
    }
    for _ in 0..s {
        result = matmul(&result, &result, m);
    }
    result
}

fn identity(m: usize) -> Vec<f64> {
    let mut i = vec![0.0; m * m];
    for k in 0..m {
        i[k * m + k] = 1.0;
    }
    i
}

fn matmul(a: &[f64], b: &[f64], m: usize) -> Vec<f64> {
    let mut c = vec![0.0; m * m];
    for i in 0..m {
        for k in 0..m {
            let aik = a[i * m + k];
            if aik == 0.0 {
                continue;
            }
            for j in 0..m {
                c[i * m + j] += aik * b[k * m + j];
            }
        }
    }
    c
}

/// Characteristic polynomial `det(zI - A)` (ascending, monic) and the
/// matrices `M_k` with `adj(zI - A) = Σ_k M_k z^{n-1-k}`.
fn faddeev_leverrier(a: &[f64], n: usize) -> (Vec<f64>, Vec<Vec<f64>>) {
    let mut c = vec![0.0; n + 1];
    c[n] = 1.0;
    let mut ms = Vec::with_capacity(n);
    let mut mk = identity(n);
    for k in 1..=n {
        let am = matmul(a, &mk, n);
        let tr: f64 = (0..n).map(|i| am[i * n + i]).sum();
        let ck = -tr / k as f64;
        c[n - k] = ck;
        ms.push(mk);
        let mut next = am;
        for i in 0..n {
            next[i * n + i] += ck;
        }
        mk = next;
    }
    (c, ms)
}

/// A discrete-time rational transfer function `num(z) / den(z)` with
/// sample time `dt` seconds.
#[derive(Clone, Debug, PartialEq)]
pub struct DiscreteTf {
    num: Poly,
    den: Poly,
    dt: f64,
}

impl DiscreteTf {
    /// `num(z) / den(z)` with sample time `dt_s`.
    ///
    /// # Panics
    /// If `den` is zero or `dt_s` is not positive and finite.
    pub fn new(num: Poly, den: Poly, dt_s: f64) -> Self {
        assert!(!den.is_zero(), "transfer function denominator is zero");
        assert!(
            dt_s > 0.0 && dt_s.is_finite(),
            "sample time must be positive"
        );
        DiscreteTf { num, den, dt: dt_s }
    }

    /// From descending coefficients, as `control.tf(num, den, dt)`.
    pub fn from_descending(num: &[f64], den: &[f64], dt_s: f64) -> Self {
        DiscreteTf::new(Poly::from_descending(num), Poly::from_descending(den), dt_s)
    }

    /// A static gain.
    pub fn gain(k: f64, dt_s: f64) -> Self {
        DiscreteTf::new(Poly::constant(k), Poly::constant(1.0), dt_s)
    }

    /// Pure delay of `d` samples, `z^-d = 1 / z^d`.
    pub fn delay(d: u32, dt_s: f64) -> Self {
        DiscreteTf::new(Poly::constant(1.0), Poly::monomial(d as usize), dt_s)
    }

    /// Exact ZOH equivalent of the first-order lag `a / (s + a)`:
    /// `(1 - e^{-aT}) / (z - e^{-aT})`, `a` in rad/s.
    pub fn zoh_first_order_lag(a_rad_s: f64, dt_s: f64) -> Self {
        let p = (-a_rad_s * dt_s).exp();
        DiscreteTf::new(Poly::constant(1.0 - p), Poly::new(vec![-p, 1.0]), dt_s)
    }

    /// Numerator.
    pub fn num(&self) -> &Poly {
        &self.num
    }

    /// Denominator.
    pub fn den(&self) -> &Poly {
        &self.den
    }

    /// Sample time, s.
    pub fn dt(&self) -> f64 {
        self.dt
    }

    /// Nyquist frequency `π / T`, rad/s.
    pub fn nyquist_rad_s(&self) -> f64 {
        std::f64::consts::PI / self.dt
    }

    /// Value at a complex `z`.
    pub fn eval(&self, z: Complex) -> Complex {
        self.num.eval_complex(z) / self.den.eval_complex(z)
    }

    /// Frequency response at `ω` rad/s, `H(e^{jωT})`.
    pub fn freq_response(&self, w_rad_s: f64) -> Complex {
        self.eval(Complex::cis(w_rad_s * self.dt))
    }

    /// DC gain `H(1)` (infinite with a pole at `z = 1`).
    pub fn dc_gain(&self) -> f64 {
        self.num.eval(1.0) / self.den.eval(1.0)
    }

    /// Series connection (product).
    ///
    /// # Panics
    /// If the sample times differ.
    pub fn series(&self, other: &DiscreteTf) -> DiscreteTf {
        assert!(
            (self.dt - other.dt).abs() <= 1e-12 * self.dt,
            "series connection of systems with different sample times ({} s, {} s)",
            self.dt,
            other.dt
        );
        DiscreteTf::new(&self.num * &other.num, &self.den * &other.den, self.dt)
    }

    /// Multiplied by a static gain.
    pub fn scaled(&self, k: f64) -> DiscreteTf {
        DiscreteTf::new(self.num.scale(k), self.den.clone(), self.dt)
    }

    /// Unity negative feedback around this loop: `L / (1 + L)`.
    pub fn feedback(&self) -> DiscreteTf {
        DiscreteTf::new(self.num.clone(), &self.den + &self.num, self.dt)
    }

    /// Poles (roots of the denominator).
    pub fn poles(&self) -> Vec<Complex> {
        self.den.roots()
    }

    /// Zeros (roots of the numerator).
    pub fn zeros(&self) -> Vec<Complex> {
        self.num.roots()
    }

    /// `deg den - deg num` (negative for a non-causal system).
    pub fn relative_degree(&self) -> isize {
        self.den.degree() as isize - self.num.degree() as isize
    }

    /// All poles strictly inside the unit circle.
    pub fn is_stable(&self) -> bool {
        self.poles().iter().all(|p| p.abs() < 1.0)
    }

    /// Response to the input sequence `u` from rest (direct-form difference
    /// equation, normalised by the leading denominator coefficient).
    ///
    /// # Panics
    /// If the system is not causal (numerator degree above the denominator's).
    pub fn simulate(&self, u: &[f64]) -> Vec<f64> {
        assert!(
            self.relative_degree() >= 0,
            "simulation needs a causal (proper) transfer function"
        );
        let n = self.den.degree();
        let a = self.den.coeffs();
        let b = self.num.coeffs();
        let an = a[n];
        let mut y = vec![0.0; u.len()];
        for k in 0..u.len() {
            let mut acc = 0.0;
            for (i, bi) in b.iter().enumerate() {
                // b_i z^i / z^n multiplies u[k - (n - i)].
                if let Some(idx) = k.checked_sub(n - i) {
                    acc += bi * u[idx];
                }
            }
            for (i, ai) in a.iter().enumerate().take(n) {
                if let Some(idx) = k.checked_sub(n - i) {
                    acc -= ai * y[idx];
                }
            }
            y[k] = acc / an;
        }
        y
    }

    /// Unit-step response, `n` samples from rest.
    pub fn step(&self, n: usize) -> Vec<f64> {
        self.simulate(&vec![1.0; n])
    }
}

impl fmt::Display for ContinuousTf {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "({}) / ({}), x = s", self.num, self.den)
    }
}

impl fmt::Display for DiscreteTf {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "({}) / ({}), x = z, dt = {} s",
            self.num, self.den, self.dt
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol * (1.0 + b.abs())
    }

    fn sorted_re(mut v: Vec<Complex>) -> Vec<Complex> {
        v.sort_by(|a, b| a.re.total_cmp(&b.re).then(a.im.total_cmp(&b.im)));
        v
    }

    #[test]
    fn poly_trims_and_converts_orders() {
        let p = Poly::new(vec![3.0, 2.0, 1.0, 0.0, 0.0]);
        assert_eq!(p.degree(), 2);
        assert_eq!(p.descending(), vec![1.0, 2.0, 3.0]);
        assert_eq!(Poly::from_descending(&[1.0, 2.0, 3.0]), p);
        assert!(Poly::new(vec![]).is_zero());
        assert_eq!(Poly::new(vec![0.0, 0.0]).degree(), 0);
    }

    #[test]
    fn poly_arithmetic() {
        let a = Poly::from_descending(&[1.0, 1.0]); // x + 1
        let b = Poly::from_descending(&[1.0, -1.0]); // x - 1
        assert_eq!((&a * &b).descending(), vec![1.0, 0.0, -1.0]);
        assert_eq!((&a + &b).descending(), vec![2.0, 0.0]);
        assert_eq!((&a - &a), Poly::constant(0.0));
        assert_eq!(a.eval(2.0), 3.0);
        let p = Poly::from_descending(&[2.0, -3.0, 0.0, 5.0]);
        assert_eq!(p.derivative().descending(), vec![6.0, -6.0, 0.0]);
        let z = p.eval_complex(Complex::new(0.5, -1.5));
        // 2 z^3 - 3 z^2 + 5 at z = 0.5 - 1.5j, expanded by hand.
        let zz = Complex::new(0.5, -1.5);
        let want = zz * zz * zz * 2.0 - zz * zz * 3.0 + Complex::real(5.0);
        assert!(close(z.re, want.re, 1e-14) && close(z.im, want.im, 1e-14));
        assert_eq!(
            p.scale_argument(2.0).descending(),
            vec![16.0, -12.0, 0.0, 5.0]
        );
    }

    #[test]
    fn roots_of_known_polynomials() {
        // (x+1)^3
        let r = Poly::from_descending(&[1.0, 3.0, 3.0, 1.0]).roots();
        assert_eq!(r.len(), 3);
        for z in &r {
            // A triple root is only determined to about eps^(1/3).
            assert!((*z - Complex::real(-1.0)).abs() < 1e-4, "{z}");
        }
        // x^3 + 2x^2 + 3x + 4 has a real root near -1.6506 and a pair.
        let p = Poly::from_descending(&[1.0, 2.0, 3.0, 4.0]);
        for z in p.roots() {
            assert!(p.eval_complex(z).abs() < 1e-12, "{z}");
        }
        // Widely spread roots, as in a loop with 5 kHz and 200 kHz poles.
        let want = [-1.0, -31_415.9, -1_256_637.0, -3.0];
        let p = Poly::from_roots(&want.map(Complex::real));
        let got = sorted_re(p.roots());
        let mut w = want.to_vec();
        w.sort_by(f64::total_cmp);
        for (g, w) in got.iter().zip(&w) {
            assert!(
                close(g.re, *w, 1e-9) && g.im.abs() < 1e-6 * w.abs(),
                "{g} vs {w}"
            );
        }
        // Zeros at the origin are exact.
        let r = Poly::from_descending(&[1.0, -2.0, 0.0, 0.0]).roots();
        assert_eq!(r.iter().filter(|z| z.abs() == 0.0).count(), 2);
        assert!(r.iter().any(|z| close(z.re, 2.0, 1e-14)));
        // Complex pair.
        let r = sorted_re(Poly::from_descending(&[1.0, 2.0, 5.0]).roots());
        assert!(close(r[0].re, -1.0, 1e-14) && close(r[0].im.abs(), 2.0, 1e-14));
    }

    #[test]
    fn from_roots_round_trip() {
        let p = Poly::from_roots(&[
            Complex::new(-1.0, 2.0),
            Complex::new(-1.0, -2.0),
            Complex::real(3.0),
        ]);
        // (x^2 + 2x + 5)(x - 3) = x^3 - x^2 - x - 15
        assert_eq!(p.descending(), vec![1.0, -1.0, -1.0, -15.0]);
    }

    #[test]
    fn complex_division_and_functions() {
        let a = Complex::new(1.0, 2.0);
        let b = Complex::new(3.0, -4.0);
        let q = a / b;
        let back = q * b;
        assert!(close(back.re, 1.0, 1e-15) && close(back.im, 2.0, 1e-15));
        let big = Complex::new(1e300, 1e300) / Complex::new(1e300, 1e300);
        assert!(close(big.re, 1.0, 1e-15) && big.im.abs() < 1e-15);
        let e = Complex::new(0.0, std::f64::consts::PI).exp();
        assert!(close(e.re, -1.0, 1e-15) && e.im.abs() < 1e-15);
        assert!(close(
            Complex::new(-1.0, 0.0).ln().im,
            std::f64::consts::PI,
            1e-15
        ));
        assert!(!(Complex::real(1.0) / Complex::default()).is_finite());
    }

    #[test]
    fn continuous_response_and_feedback() {
        // 2 / (s + 1)^3 at ω = √3: (1 + j√3)^3 = -8, so G = -1/4.
        let g = ContinuousTf::from_descending(&[2.0], &[1.0, 3.0, 3.0, 1.0]);
        let v = g.freq_response(3f64.sqrt());
        assert!(close(v.re, -0.25, 1e-14) && v.im.abs() < 1e-14, "{v}");
        let t = g.feedback();
        assert_eq!(t.den().descending(), vec![1.0, 3.0, 3.0, 3.0]);
        assert!(t.is_stable());
        assert!(!ContinuousTf::from_descending(&[1.0], &[1.0, -1.0]).is_stable());
        assert_eq!(g.relative_degree(), 3);
    }

    #[test]
    fn zoh_first_order_matches_closed_form() {
        let (a, dt) = (2.0 * std::f64::consts::PI * 5_000.0, 1.0 / 20_000.0);
        let exact = DiscreteTf::zoh_first_order_lag(a, dt);
        let gen = ContinuousTf::first_order_lag(a).c2d_zoh(dt);
        let p = (-a * dt).exp();
        assert!(close(gen.den().coeffs()[0], -p, 1e-13));
        assert!(close(gen.num().coeffs()[0], 1.0 - p, 1e-13));
        assert_eq!(gen.num().degree(), 0);
        for w in [10.0, 1e3, 3e4, 6e4] {
            let (x, y) = (exact.freq_response(w), gen.freq_response(w));
            assert!((x - y).abs() < 1e-12, "{x} vs {y}");
        }
    }

    #[test]
    fn zoh_two_poles_matches_partial_fractions() {
        // ZOH of a1 a2 / ((s+a1)(s+a2)): from the sampled step response
        // 1 - c1 p1^k + c2 p2^k with c1 = a2/(a2-a1), c2 = a1/(a2-a1).
        let (a1, a2, dt) = (1_256_637.06, 31_415.93, 5e-5);
        let g = ContinuousTf::first_order_lag(a1).series(&ContinuousTf::first_order_lag(a2));
        let d = g.c2d_zoh(dt);
        let (p1, p2) = ((-a1 * dt).exp(), (-a2 * dt).exp());
        let (c1, c2) = (a2 / (a2 - a1), a1 / (a2 - a1));
        let b1 = -(p1 + p2) + c1 * (1.0 + p2) - c2 * (1.0 + p1);
        let b0 = p1 * p2 - c1 * p2 + c2 * p1;
        let lead = d.den().leading();
        let num = d.num().scale(1.0 / lead);
        assert!(
            close(num.coeffs()[1], b1, 1e-10),
            "{} vs {b1}",
            num.coeffs()[1]
        );
        assert!(
            close(num.coeffs()[0], b0, 1e-10),
            "{} vs {b0}",
            num.coeffs()[0]
        );
        let step = d.step(10);
        for (k, y) in step.iter().enumerate() {
            let want = 1.0 - c1 * p1.powi(k as i32) + c2 * p2.powi(k as i32);
            assert!((y - want).abs() < 1e-12, "k={k}: {y} vs {want}");
        }
    }

    #[test]
    fn zoh_integrators_and_repeated_poles() {
        let dt = 0.1;
        // 1/s -> T/(z-1)
        let d = ContinuousTf::from_descending(&[1.0], &[1.0, 0.0]).c2d_zoh(dt);
        assert!(close(d.num().coeffs()[0], dt, 1e-14));
        assert!(close(d.den().coeffs()[0], -1.0, 1e-14));
        // 1/s^2 -> T^2 (z+1) / (2 (z-1)^2)
        let d = ContinuousTf::from_descending(&[1.0], &[1.0, 0.0, 0.0]).c2d_zoh(dt);
        let n = d.num().coeffs();
        assert!(close(n[1], dt * dt / 2.0, 1e-13) && close(n[0], dt * dt / 2.0, 1e-13));
        assert_eq!(d.den().descending(), vec![1.0, -2.0, 1.0]);
        // a^2/(s+a)^2: sampled step 1 - p^k - a k T p^k.
        let a = 3.0;
        let g = ContinuousTf::first_order_lag(a).series(&ContinuousTf::first_order_lag(a));
        let s = g.c2d_zoh(dt).step(20);
        let p = (-a * dt).exp();
        for (k, y) in s.iter().enumerate() {
            let kf = k as f64;
            let want = 1.0 - p.powf(kf) - a * kf * dt * p.powf(kf);
            assert!((y - want).abs() < 1e-13, "k={k}: {y} vs {want}");
        }
        // Biproper: (s+2)/(s+1) keeps its feedthrough of 1.
        let d = ContinuousTf::from_descending(&[1.0, 2.0], &[1.0, 1.0]).c2d_zoh(dt);
        assert!(close(d.step(1)[0], 1.0, 1e-14));
        assert!(close(d.dc_gain(), 2.0, 1e-13));
    }

    #[test]
    fn discrete_helpers() {
        let dt = 1e-3;
        let dly = DiscreteTf::delay(2, dt);
        assert_eq!(dly.step(4), vec![0.0, 0.0, 1.0, 1.0]);
        let v = dly.freq_response(100.0);
        assert!(close(v.arg(), -2.0 * 100.0 * dt, 1e-14) && close(v.abs(), 1.0, 1e-15));
        let g = DiscreteTf::zoh_first_order_lag(50.0, dt);
        assert!(close(g.dc_gain(), 1.0, 1e-14));
        let l = g.series(&DiscreteTf::gain(4.0, dt));
        assert!(close(l.feedback().dc_gain(), 0.8, 1e-14));
        assert!(l.feedback().is_stable());
        assert!(!DiscreteTf::from_descending(&[1.0], &[1.0, -1.5], dt).is_stable());
        assert!(close(g.nyquist_rad_s(), std::f64::consts::PI * 1e3, 1e-15));
    }

    #[test]
    #[should_panic(expected = "different sample times")]
    fn series_refuses_mixed_sample_times() {
        let _ = DiscreteTf::gain(1.0, 1e-3).series(&DiscreteTf::gain(1.0, 2e-3));
    }
}
