//! Seeded, deterministic pseudo-random numbers for sensor and ADC noise.
//!
//! The generator is xoshiro256** (Blackman and Vigna, 2018) seeded through
//! SplitMix64, so a given seed gives the same stream on every run.
//!
//! Normal deviates for the noise models come from the ziggurat method
//! ([`Rng::normal`]; Marsaglia and Tsang, "The Ziggurat Method for
//! Generating Random Variables", J. Stat. Software 5(8), 2000, 128 layers,
//! with the independent-bits arrangement of Doornik, "An Improved Ziggurat
//! Method to Generate Normal Random Samples", 2005): about 99 % of the
//! draws cost one 64-bit word, one multiply and one compare. The
//! Box-Muller transform ([`Rng::gaussian`]) is kept as the textbook
//! reference the ziggurat is checked against.

/// SplitMix64 step: advances `state` and returns the next output.
///
/// Used only to expand a 64-bit seed into the xoshiro256** state.
#[inline]
pub fn splitmix64(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Number of ziggurat layers (a power of two: the layer index is 7 bits).
const ZIG_LAYERS: usize = 128;
/// Start of the tail, the right edge of the base layer (Marsaglia and
/// Tsang 2000, the 128-layer normal ziggurat).
const ZIG_R: f64 = 3.442_619_855_899;
/// Area of every layer, the base layer including the tail (same source).
const ZIG_V: f64 = 9.912_563_035_262_17e-3;

/// Layer edges of the normal ziggurat for f(x) = exp(-x^2/2).
///
/// Layer `i` spans heights `f(x[i]) ..= f(x[i+1])` and widths `0 ..= x[i]`;
/// `x[0] = V / f(R)` is the pseudo width of the base layer (rectangle plus
/// tail), `x[1] = R`, `x[i+1] = f^-1(V / x[i] + f(x[i]))` and `x[128] = 0`.
///
/// `signed[k]` and `next[k]` serve the accept-at-once test of the low 8
/// bits `k` of a word (the layer and the sign) by one table look-up each:
/// `signed[k]` is `x[k & 127]` times 2^-53 (the scale of the 53-bit
/// uniform, exact: a power of two on normal numbers), negated when bit 7
/// is set, `next[k]` is `x[(k & 127) + 1]`.
#[derive(Debug)]
struct Ziggurat {
    x: [f64; ZIG_LAYERS + 1],
    f: [f64; ZIG_LAYERS + 1],
    signed: [f64; 2 * ZIG_LAYERS],
    next: [f64; 2 * ZIG_LAYERS],
}

impl Ziggurat {
    fn new() -> Self {
        let pdf = |x: f64| (-0.5 * x * x).exp();
        let mut x = [0.0; ZIG_LAYERS + 1];
        x[0] = ZIG_V / pdf(ZIG_R);
        x[1] = ZIG_R;
        for i in 1..ZIG_LAYERS - 1 {
            x[i + 1] = (-2.0 * (ZIG_V / x[i] + pdf(x[i])).ln()).sqrt();
        }
        x[ZIG_LAYERS] = 0.0;
        let mut f = [0.0; ZIG_LAYERS + 1];
        for (fi, xi) in f.iter_mut().zip(x.iter()) {
            *fi = pdf(*xi);
        }
        let mut signed = [0.0; 2 * ZIG_LAYERS];
        let mut next = [0.0; 2 * ZIG_LAYERS];
        for k in 0..2 * ZIG_LAYERS {
            let i = k & (ZIG_LAYERS - 1);
            let w = x[i] * UNIT_SCALE;
            signed[k] = if k & ZIG_LAYERS != 0 { -w } else { w };
            next[k] = x[i + 1];
        }
        Self { x, f, signed, next }
    }

    /// The point a 64-bit word picks in its layer (bits 0-6 the layer,
    /// bits 11-63 the uniform), and whether it lies under the next layer's
    /// edge (accepted at once).
    #[inline]
    fn candidate(&self, u: u64) -> (f64, bool) {
        let i = (u & (ZIG_LAYERS as u64 - 1)) as usize;
        let x = unit_of(u) * self.x[i];
        (x, x < self.x[i + 1])
    }

    /// [`Ziggurat::candidate`] with the sign of bit 7 already applied: the
    /// same point, negated when bit 7 is set (the product of the uniform
    /// and a negated width is the negated product, bit for bit), and the
    /// same acceptance. The uniform's 2^-53 is in the table, so the one
    /// rounded product is that of the 53-bit integer and the scaled width,
    /// the same value as the uniform times the width.
    #[inline(always)]
    fn candidate_signed(&self, u: u64) -> (f64, bool) {
        let k = (u & (2 * ZIG_LAYERS as u64 - 1)) as usize;
        let x = ((u >> 11) as i64) as f64 * self.signed[k];
        (x, x.abs() < self.next[k])
    }

    fn get() -> &'static Ziggurat {
        static TABLE: std::sync::OnceLock<Ziggurat> = std::sync::OnceLock::new();
        TABLE.get_or_init(Ziggurat::new)
    }
}

/// `x` with the sign bit 7 of `u` gives it (set: negative).
/// The top 53 bits of `u` as a fraction in [0, 1). They fit an i64, whose
/// conversion to f64 is one instruction (the u64 one is several on x86-64
/// without AVX-512) and exact below 2^53, so the value is the same.
#[inline(always)]
fn unit_of(u: u64) -> f64 {
    ((u >> 11) as i64) as f64 * UNIT_SCALE
}

/// 2^-53, the unit of the 53-bit uniform.
const UNIT_SCALE: f64 = 1.0 / (1u64 << 53) as f64;

#[inline]
fn with_sign(x: f64, u: u64) -> f64 {
    f64::from_bits(x.to_bits() ^ ((u & ZIG_LAYERS as u64) << 56))
}

/// xoshiro256** generator with a cached Box-Muller deviate and the shared
/// ziggurat table.
#[derive(Clone, Debug)]
pub struct Rng {
    s: [u64; 4],
    spare: Option<f64>,
    zig: &'static Ziggurat,
}

impl Rng {
    /// Creates a generator whose state is expanded from `seed` by SplitMix64.
    pub fn new(seed: u64) -> Self {
        let mut sm = seed;
        let s = [
            splitmix64(&mut sm),
            splitmix64(&mut sm),
            splitmix64(&mut sm),
            splitmix64(&mut sm),
        ];
        Self {
            s,
            spare: None,
            zig: Ziggurat::get(),
        }
    }

    /// Next 64 uniformly distributed bits.
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        let result = self.s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = self.s[1] << 17;
        self.s[2] ^= self.s[0];
        self.s[3] ^= self.s[1];
        self.s[1] ^= self.s[2];
        self.s[0] ^= self.s[3];
        self.s[2] ^= t;
        self.s[3] = self.s[3].rotate_left(45);
        result
    }

    /// Uniform deviate in the half-open interval [0, 1) with 53 random bits.
    #[inline]
    pub fn uniform(&mut self) -> f64 {
        unit_of(self.next_u64())
    }

    /// Standard normal deviate (mean 0, variance 1) by the ziggurat method.
    ///
    /// One 64-bit word gives the layer (bits 0-6), the sign (bit 7) and a
    /// 53-bit uniform (bits 11-63), so the three are independent (Doornik
    /// 2005). A point under the next layer's edge is accepted at once; the
    /// wedge is tested against exp(-x^2/2) and the base layer's overhang is
    /// drawn from the tail beyond R by Marsaglia's method (Marsaglia,
    /// "Generating a variable from the tail of the normal distribution",
    /// Technometrics 6, 1964).
    #[inline(always)]
    pub fn normal(&mut self) -> f64 {
        let u = self.next_u64();
        let (x, inside) = self.zig.candidate_signed(u);
        if inside {
            x
        } else {
            self.normal_edge(u, x.abs())
        }
    }

    /// The draws that fall outside the rectangle under the next layer: the
    /// wedge test (or the tail for the base layer), then fresh draws until
    /// one is accepted.
    #[cold]
    #[inline(never)]
    fn normal_edge(&mut self, first: u64, first_x: f64) -> f64 {
        let z = self.zig;
        let (mut u, mut x) = (first, first_x);
        loop {
            let i = (u & (ZIG_LAYERS as u64 - 1)) as usize;
            if i == 0 {
                return with_sign(self.normal_tail(), u);
            }
            let y = z.f[i] + self.uniform() * (z.f[i + 1] - z.f[i]);
            if y < (-0.5 * x * x).exp() {
                return with_sign(x, u);
            }
            u = self.next_u64();
            let (xn, inside) = z.candidate(u);
            if inside {
                return with_sign(xn, u);
            }
            x = xn;
        }
    }

    /// A deviate of the normal tail beyond R (Marsaglia 1964).
    #[cold]
    fn normal_tail(&mut self) -> f64 {
        loop {
            let a = -(1.0 - self.uniform()).ln() / ZIG_R;
            let b = -(1.0 - self.uniform()).ln();
            if 2.0 * b > a * a {
                return ZIG_R + a;
            }
        }
    }

    /// Standard normal deviate (mean 0, variance 1) by Box-Muller, the
    /// reference for [`Rng::normal`].
    #[inline]
    pub fn gaussian(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        // u1 in (0, 1] so that ln(u1) is finite.
        let u1 = 1.0 - self.uniform();
        let u2 = self.uniform();
        let r = (-2.0 * u1.ln()).sqrt();
        let (s, c) = (core::f64::consts::TAU * u2).sin_cos();
        self.spare = Some(r * s);
        r * c
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unit_of_is_the_u64_conversion() {
        let mut r = Rng::new(3);
        let edges = [0, 1, 1 << 11, u64::MAX, u64::MAX >> 1, 1 << 63];
        for u in edges.into_iter().chain((0..10_000).map(|_| r.next_u64())) {
            let plain = (u >> 11) as f64 * (1.0 / (1u64 << 53) as f64);
            assert_eq!(unit_of(u).to_bits(), plain.to_bits(), "{u:#x}");
        }
    }

    #[test]
    fn splitmix_reference_values() {
        // Source: SplitMix64 from seed 0: first outputs of the reference C code
        // (Steele, Lea, Flood 2014; Vigna's splitmix64.c).
        let mut s = 0u64;
        assert_eq!(splitmix64(&mut s), 0xE220_A839_7B1D_CDAF);
        assert_eq!(splitmix64(&mut s), 0x6E78_9E6A_A1B9_65F4);
    }

    #[test]
    fn deterministic_and_seed_dependent() {
        let mut a = Rng::new(42);
        let mut b = Rng::new(42);
        let mut c = Rng::new(43);
        let va: Vec<u64> = (0..8).map(|_| a.next_u64()).collect();
        let vb: Vec<u64> = (0..8).map(|_| b.next_u64()).collect();
        let vc: Vec<u64> = (0..8).map(|_| c.next_u64()).collect();
        assert_eq!(va, vb);
        assert_ne!(va, vc);
    }

    #[test]
    fn gaussian_moments() {
        let mut r = Rng::new(7);
        let n = 200_000;
        let (mut m1, mut m2, mut m4) = (0.0, 0.0, 0.0);
        let mut tail = 0usize;
        for _ in 0..n {
            let z = r.gaussian();
            if z.abs() > 2.0 {
                tail += 1;
            }
            m1 += z;
            m2 += z * z;
            m4 += z * z * z * z;
        }
        let nf = n as f64;
        let (m1, m2, m4) = (m1 / nf, m2 / nf, m4 / nf);
        assert!(m1.abs() < 0.01, "mean {m1}");
        assert!((m2 - 1.0).abs() < 0.01, "variance {m2}");
        assert!((m4 - 3.0).abs() < 0.06, "fourth moment {m4}");
        // P(|z| > 2) = 0.04550 for the standard normal; binomial sd 0.00047.
        let pt = tail as f64 / nf;
        assert!((pt - 0.0455).abs() < 0.002, "tail {pt}");
    }

    /// Integral of exp(-x^2/2) over [a, b] by composite Simpson (n even).
    fn pdf_integral(a: f64, b: f64, n: usize) -> f64 {
        let h = (b - a) / n as f64;
        let f = |x: f64| (-0.5 * x * x).exp();
        let mut s = f(a) + f(b);
        for k in 1..n {
            let w = if k % 2 == 1 { 4.0 } else { 2.0 };
            s += w * f(a + k as f64 * h);
        }
        s * h / 3.0
    }

    /// Standard normal CDF by quadrature (accurate to about 1e-13 here).
    fn phi(x: f64) -> f64 {
        let half = 0.5;
        let part = pdf_integral(0.0, x.abs(), 4000) / (2.0 * core::f64::consts::PI).sqrt();
        if x >= 0.0 {
            half + part
        } else {
            half - part
        }
    }

    #[test]
    fn ziggurat_layers_close() {
        // Every layer has area V; the base layer is the rectangle R f(R)
        // plus the tail integral, and the recursion must end with a top
        // layer of area V again (Marsaglia and Tsang 2000, sect. 2 and 4).
        let z = Ziggurat::new();
        let tail = pdf_integral(ZIG_R, ZIG_R + 14.0, 20_000);
        let base = ZIG_R * (-0.5 * ZIG_R * ZIG_R).exp() + tail;
        assert!((base / ZIG_V - 1.0).abs() < 1e-10, "base area {base}");
        let top = z.x[ZIG_LAYERS - 1] * (1.0 - z.f[ZIG_LAYERS - 1]);
        assert!((top / ZIG_V - 1.0).abs() < 1e-8, "top area {top}");
        for i in 0..ZIG_LAYERS {
            assert!(z.x[i] > z.x[i + 1], "edges decrease at {i}");
        }
    }

    /// Pearson chi-square of `n` deviates against the normal law over 48
    /// bins of width 1/6 on [-4, 4] plus the two tails (49 degrees of freedom).
    fn chi_square(mut draw: impl FnMut() -> f64, n: usize) -> f64 {
        let edges: Vec<f64> = (0..=48).map(|k| -4.0 + k as f64 / 6.0).collect();
        let mut counts = vec![0usize; 50];
        for _ in 0..n {
            let z = draw();
            let bin = edges.partition_point(|&e| e <= z);
            counts[bin] += 1;
        }
        let mut chi2 = 0.0;
        for (k, &c) in counts.iter().enumerate() {
            let lo = if k == 0 {
                f64::NEG_INFINITY
            } else {
                edges[k - 1]
            };
            let hi = if k == 49 { f64::INFINITY } else { edges[k] };
            let p_lo = if lo.is_finite() { phi(lo) } else { 0.0 };
            let p_hi = if hi.is_finite() { phi(hi) } else { 1.0 };
            let expect = (p_hi - p_lo) * n as f64;
            chi2 += (c as f64 - expect).powi(2) / expect;
        }
        chi2
    }

    #[test]
    fn ziggurat_follows_the_normal_law() {
        // 49 degrees of freedom: the chi-square upper 0.1 % point is 85.35
        // (NIST/SEMATECH e-Handbook of Statistical Methods, sect. 1.3.6.7.4,
        // critical values of the chi-square distribution).
        let n = 1_000_000;
        let mut r = Rng::new(11);
        let chi2_zig = chi_square(|| r.normal(), n);
        assert!(chi2_zig < 85.35, "ziggurat chi-square {chi2_zig}");
        // The Box-Muller reference passes the same test.
        let mut b = Rng::new(11);
        let chi2_bm = chi_square(|| b.gaussian(), n);
        assert!(chi2_bm < 85.35, "Box-Muller chi-square {chi2_bm}");
        // A slightly wrong width (sigma 1.01) is caught: the test can fail.
        let mut w = Rng::new(11);
        let chi2_wide = chi_square(|| 1.01 * w.normal(), n);
        assert!(chi2_wide > 85.35, "sigma 1.01 not caught: {chi2_wide}");
    }

    #[test]
    fn ziggurat_moments_and_tail() {
        let mut r = Rng::new(3);
        let n = 2_000_000;
        let (mut m1, mut m2, mut m4) = (0.0, 0.0, 0.0);
        let (mut beyond, mut beyond_sum) = (0usize, 0.0);
        for _ in 0..n {
            let z = r.normal();
            m1 += z;
            m2 += z * z;
            m4 += z * z * z * z;
            if z.abs() > ZIG_R {
                beyond += 1;
                beyond_sum += z.abs();
            }
        }
        let nf = n as f64;
        let (m1, m2, m4) = (m1 / nf, m2 / nf, m4 / nf);
        // Standard errors: mean 1/sqrt(n) = 7e-4, variance sqrt(2/n) = 1e-3,
        // fourth moment sqrt(96/n) = 7e-3; bounds at about 5 of them.
        assert!(m1.abs() < 3.5e-3, "mean {m1}");
        assert!((m2 - 1.0).abs() < 5e-3, "variance {m2}");
        assert!((m4 - 3.0).abs() < 0.035, "fourth moment {m4}");
        // The tail beyond R (drawn by Marsaglia's method): probability
        // 2 Q(R) and conditional mean of |z| equal to f(R) / Q(R) with
        // f the standard normal density (inverse Mills ratio).
        let q = 1.0 - phi(ZIG_R);
        let expect = 2.0 * q * nf;
        assert!(
            (beyond as f64 - expect).abs() < 5.0 * expect.sqrt(),
            "{beyond} beyond R, expected {expect}"
        );
        let mills = (-0.5 * ZIG_R * ZIG_R).exp() / (2.0 * core::f64::consts::PI).sqrt() / q;
        let mean_tail = beyond_sum / beyond as f64;
        assert!(
            (mean_tail - mills).abs() < 0.02,
            "tail mean {mean_tail} vs {mills}"
        );
    }

    #[test]
    fn signed_candidate_is_the_candidate_with_its_sign() {
        // Every layer and sign with uniforms at the ends and random ones:
        // the one-look-up form gives the same bits and the same acceptance.
        let z = Ziggurat::get();
        let mut r = Rng::new(11);
        let highs = [0u64, 1 << 11, !0x7ff, 1 << 63];
        for k in 0..256u64 {
            for h in highs
                .into_iter()
                .chain((0..200).map(|_| r.next_u64() & !0xff))
            {
                let u = h | k;
                let (x, inside) = z.candidate(u);
                let (xs, inside_s) = z.candidate_signed(u);
                assert_eq!(with_sign(x, u).to_bits(), xs.to_bits(), "{u:#x}");
                assert_eq!(inside, inside_s, "{u:#x}");
            }
        }
    }

    #[test]
    fn ziggurat_is_seeded() {
        let mut a = Rng::new(5);
        let mut b = Rng::new(5);
        let mut c = Rng::new(6);
        let va: Vec<f64> = (0..64).map(|_| a.normal()).collect();
        let vb: Vec<f64> = (0..64).map(|_| b.normal()).collect();
        let vc: Vec<f64> = (0..64).map(|_| c.normal()).collect();
        assert_eq!(va, vb);
        assert_ne!(va, vc);
    }

    #[test]
    fn uniform_range() {
        let mut r = Rng::new(1);
        for _ in 0..10_000 {
            let u = r.uniform();
            assert!((0.0..1.0).contains(&u));
        }
    }
}
