//! The automatic-power-control loop: a discrete PI controller on the
//! monitor power with conditional-integration anti-windup, an output slew
//! limit and a hard ceiling.
//!
//! Per tick, with error `e = setpoint - monitor`:
//!
//! ```text
//! I[n] = I[n-1] + ki·e[n]          (skipped while the output is limited in the direction of e)
//! u[n] = clamp(kp·e[n] + I[n], prev ± slew, 0..=ceiling)
//! ```
//!
//! so `C(z) = kp + ki·z/(z-1)`. The integrator holds 40 fractional bits so
//! that small per-tick integral gains do not lose resolution.

use crate::units::{sat_i32, Fx, Gain};

const FRAC: u32 = 40;
const FX_FRAC: u32 = 16;

/// PI state.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PowerLoop {
    /// Integrator in iu with 40 fractional bits.
    integ: i64,
}

/// Limits for one PI step, as the controller holds them: the previous
/// output is never negative, the slew is positive (validation) and the
/// ceiling is never negative (the lowest ceiling is the derating floor,
/// which validation keeps at or above zero, or the envelope, which starts
/// at zero and only rises by a positive step or follows a drive) and below
/// `Fx::MAX` (validation keeps the configured ceiling below the
/// overcurrent limit). The step relies on these.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Limits {
    /// Output of the previous tick, iu; at least zero.
    pub prev_iu: Fx,
    /// Slew per tick, iu; positive.
    pub slew_iu: Fx,
    /// Ceiling for this tick, iu; at least zero, below `Fx::MAX`.
    pub ceiling_iu: Fx,
}

#[inline]
fn to_wide(v: Fx) -> i64 {
    (v.to_bits() as i64) << (FRAC - FX_FRAC)
}

/// `sat_i32(w >> 24)` with one range test of the high word: `w >> 24` fits
/// i32 exactly when the high word of `w` lies in [-2^23, 2^23).
#[inline]
fn from_wide(w: i64) -> Fx {
    let high = (w >> 32) as i32;
    let bits = if (high.wrapping_add(1 << 23) as u32) < (1 << 24) {
        (w >> (FRAC - FX_FRAC)) as i32
    } else if high < 0 {
        i32::MIN
    } else {
        i32::MAX
    };
    Fx::from_bits(bits)
}

impl PowerLoop {
    /// Set the integrator so that, at zero error, the output is `out_iu`
    /// (bumpless hand-over and transfer).
    pub(crate) fn preset(&mut self, out_iu: Fx) {
        self.integ = to_wide(out_iu);
    }

    /// The integrator value, iu.
    pub fn integrator_iu(&self) -> Fx {
        from_wide(self.integ)
    }

    /// One PI step. Returns the new output in iu.
    ///
    /// The integrator and the sums are 64-bit; only the error and the
    /// output saturate to the [`Fx`] range. The integrator always
    /// lies within ±2^55 (it is set from an `Fx` shifted by 24 bits, or
    /// clamped to `[0, ceiling]` so shifted), and `|e·ki| <= 2^62`, so the
    /// sums below stay within ±(2^62 + 2^56) and cannot overflow: plain
    /// 64-bit adds give the same values as saturating ones.
    #[inline]
    pub(crate) fn step(
        &mut self,
        kp: Fx,
        ki: Gain,
        setpoint_ou: Fx,
        monitor_ou: Fx,
        lim: Limits,
    ) -> Fx {
        let e = setpoint_ou.saturating_sub(monitor_ou);
        let e_bits = i64::from(e.to_bits());
        // kp·e floored to 16 fractional bits, not saturated (|kp·e| < 2^62).
        let p = (i64::from(kp.to_bits()) * e_bits) >> 16;
        // e (16 fractional bits) × ki (24) = 40 fractional bits.
        let inc = e_bits * i64::from(ki.to_bits());
        let candidate = self.integ.wrapping_add(inc);
        // The output before its limits, `(candidate >> 24) + p` (within
        // ±2^48), saturated once. The reference saturates `p` first (the
        // fixed crate's `kp.saturating_mul(e)`); that gives the same output
        // and the same integrator for the gains validation accepts
        // (`kp > 0`, `ki >= 0`) and an integrator at or above zero: a `p`
        // beyond `Fx::MAX` comes with `e > 0`, so `inc >= 0` and
        // `candidate >= 0`, and both sums saturate to `Fx::MAX`; a `p`
        // below `Fx::MIN` comes with `e < 0`, so `candidate >> 24` is at
        // most the integrator's `Fx::MAX` and both sums are negative,
        // where the limits give zero and the same pushing-down verdict.
        let u = Fx::from_bits(sat_i32((candidate >> (FRAC - FX_FRAC)).wrapping_add(p)));
        // `clamp_fx(clamp_fx(u, lo, hi), 0, ceiling)` with the slew window
        // `lo = prev - slew` and `hi = prev + slew` saturated. Within the
        // limits' invariants (`prev >= 0`, `slew > 0`, `ceiling >= 0`):
        // `prev - slew` cannot overflow, `lo < hi` and `0 <= ceiling`, so
        // each clamp is a min and a max.
        let lo = Fx::from_bits(lim.prev_iu.to_bits().wrapping_sub(lim.slew_iu.to_bits()));
        let hi = lim.prev_iu.saturating_add(lim.slew_iu);
        let out = u.min(hi).max(lo).min(lim.ceiling_iu).max(Fx::ZERO);
        let pushing_up = out < u && e > Fx::ZERO;
        let pushing_down = out > u && e < Fx::ZERO;
        let integ = if pushing_up || pushing_down {
            self.integ
        } else {
            candidate
        };
        // The integrator never holds more than the ceiling nor less than zero.
        let top = to_wide(lim.ceiling_iu);
        self.integ = if integ < 0 {
            0
        } else if integ > top {
            top
        } else {
            integ
        };
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::units::clamp_fx;

    /// The PI step as first written, with saturating 64-bit arithmetic
    /// throughout and the fixed crate's saturating multiply: the reference
    /// the step above must equal bit for bit.
    fn reference_step(
        integ: &mut i64,
        kp: Fx,
        ki: Gain,
        setpoint_ou: Fx,
        monitor_ou: Fx,
        lim: Limits,
    ) -> Fx {
        let e = setpoint_ou.saturating_sub(monitor_ou);
        let p = kp.saturating_mul(e);
        let inc = (e.to_bits() as i64).saturating_mul(ki.to_bits() as i64);
        let candidate = integ.saturating_add(inc);
        let u = Fx::from_bits(sat_i32(
            candidate.saturating_add(to_wide(p)) >> (FRAC - FX_FRAC),
        ));
        let lo = lim.prev_iu.saturating_sub(lim.slew_iu);
        let hi = lim.prev_iu.saturating_add(lim.slew_iu);
        let out = clamp_fx(clamp_fx(u, lo, hi), Fx::ZERO, lim.ceiling_iu);
        let pushing_up = out < u && e > Fx::ZERO;
        let pushing_down = out > u && e < Fx::ZERO;
        if !(pushing_up || pushing_down) {
            *integ = candidate;
        }
        *integ = (*integ).clamp(0, to_wide(lim.ceiling_iu.max(Fx::ZERO)));
        out
    }

    /// A small deterministic generator (64-bit LCG, Knuth's MMIX constants,
    /// `common practice`) for wide test inputs.
    struct Lcg(u64);

    impl Lcg {
        fn bits(&mut self) -> i32 {
            self.0 = self
                .0
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            let raw = (self.0 >> 32) as i32;
            // Every magnitude: shift a random word right by 0 to 31 bits.
            raw >> ((self.0 >> 27) & 31)
        }
    }

    const EXTREMES: [i32; 9] = [
        i32::MIN,
        i32::MIN + 1,
        -65_536,
        -1,
        0,
        1,
        65_536,
        i32::MAX - 1,
        i32::MAX,
    ];

    #[test]
    fn step_equals_the_saturating_reference_over_wide_inputs() {
        let mut rng = Lcg(0x5eed);
        let mut cases = 0u32;
        for round in 0..60_000u32 {
            let mut pick = |k: u32| {
                if (round + k).is_multiple_of(5) {
                    EXTREMES[(round as usize / 5 + k as usize) % EXTREMES.len()]
                } else {
                    rng.bits()
                }
            };
            // Gains as validation accepts them: `kp > 0`, `ki >= 0`.
            let kp = Fx::from_bits((pick(0) & i32::MAX).max(1));
            let ki = Gain::from_bits(pick(1) & i32::MAX);
            let sp = Fx::from_bits(pick(2));
            let mon = Fx::from_bits(pick(3));
            // Limits within their invariants (`prev >= 0`, `slew > 0`,
            // `ceiling >= 0`), from zero (one LSB for the slew) to the top.
            let lim = Limits {
                prev_iu: Fx::from_bits(pick(4) & i32::MAX),
                slew_iu: Fx::from_bits((pick(5) & i32::MAX).max(1)),
                ceiling_iu: Fx::from_bits((pick(6) & i32::MAX).min(i32::MAX - 1)),
            };
            // Integrator states: preset from any drive (at least zero),
            // then a few steps from there.
            let mut pi = PowerLoop::default();
            pi.preset(Fx::from_bits(pick(7) & i32::MAX));
            let mut reference = pi.integ;
            for _ in 0..3 {
                let want = reference_step(&mut reference, kp, ki, sp, mon, lim);
                let got = pi.step(kp, ki, sp, mon, lim);
                assert_eq!(got, want, "{kp} {ki} {sp} {mon} {lim:?}");
                assert_eq!(pi.integ, reference, "{kp} {ki} {sp} {mon} {lim:?}");
                cases += 1;
            }
        }
        assert_eq!(cases, 180_000);
    }

    #[test]
    fn saturating_shifts_equal_the_saturated_wide_values() {
        let mut rng = Lcg(7);
        for _ in 0..200_000 {
            let v = (i64::from(rng.bits()) << 32) | i64::from(rng.bits() as u32);
            for w in [v, v >> 7, v >> 17, v >> 30, i64::MIN, i64::MAX, -1, 0] {
                assert_eq!(from_wide(w).to_bits(), sat_i32(w >> 24), "{w}");
            }
        }
    }

    fn lim(prev: i32, slew: i32, ceil: i32) -> Limits {
        Limits {
            prev_iu: Fx::from_num(prev),
            slew_iu: Fx::from_num(slew),
            ceiling_iu: Fx::from_num(ceil),
        }
    }

    /// An integrator sum beyond the `Fx` range of iu saturates the output
    /// high (it does not wrap): at a high word of exactly 2^23 (the first
    /// sum past the range) and at 1.5 × 2^23.
    #[test]
    fn an_integrator_sum_beyond_the_fx_range_saturates_high() {
        // e = Fx::MAX (2^31 - 1 bits) from zero: the integrator sum is
        // e × ki bits, 2^55 and a little with ki = 1 + 2^-24, 1.5 × 2^55
        // with ki = 1.5.
        for ki_bits in [(1 << 24) + 1, 3 << 23] {
            let mut pi = PowerLoop::default();
            let out = pi.step(
                Fx::ZERO,
                Gain::from_bits(ki_bits),
                Fx::MAX,
                Fx::ZERO,
                lim(10, 1, 50),
            );
            // Pushed up by the slew limit, which holds the integrator.
            assert_eq!(out, Fx::from_num(11), "ki bits {ki_bits}");
            assert_eq!(pi.integrator_iu(), Fx::ZERO, "ki bits {ki_bits}");
        }
    }

    /// A proportional term beyond the `Fx` range saturates high at the
    /// first product past the range: kp = 2, e = 16 384 ou, kp·e = 2^47
    /// in bits (a high word of exactly 2^15).
    #[test]
    fn a_proportional_term_beyond_the_fx_range_saturates_high() {
        let mut pi = PowerLoop::default();
        let out = pi.step(
            Fx::from_num(2),
            Gain::ZERO,
            Fx::from_num(16_384),
            Fx::ZERO,
            lim(10, 1, 50),
        );
        assert_eq!(out, Fx::from_num(11));
        assert_eq!(pi.integrator_iu(), Fx::ZERO);
    }

    #[test]
    fn proportional_and_integral_terms() {
        let mut pi = PowerLoop::default();
        let kp = Fx::from_num(2);
        let ki = Gain::from_num(1) / 4;
        // e = 4: p = 8, I = 1 => u = 9.
        let u = pi.step(kp, ki, Fx::from_num(4), Fx::ZERO, lim(0, 100, 100));
        assert_eq!(u, Fx::from_num(9));
        assert_eq!(pi.integrator_iu(), Fx::from_num(1));
        // Same error: I = 2 => u = 10.
        let u = pi.step(kp, ki, Fx::from_num(4), Fx::ZERO, lim(9, 100, 100));
        assert_eq!(u, Fx::from_num(10));
    }

    #[test]
    fn no_windup_while_clamped() {
        let mut pi = PowerLoop::default();
        let kp = Fx::from_num(1);
        let ki = Gain::from_num(1);
        for _ in 0..100 {
            let u = pi.step(kp, ki, Fx::from_num(50), Fx::ZERO, lim(10, 100, 10));
            assert_eq!(u, Fx::from_num(10));
        }
        // The integrator stopped at the ceiling, it did not wind up to 5000.
        assert!(pi.integrator_iu() <= Fx::from_num(10));
    }

    #[test]
    fn slew_limits_and_ceiling_wins() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(20));
        let u = pi.step(
            Fx::from_num(10),
            Gain::ZERO,
            Fx::from_num(10),
            Fx::ZERO,
            lim(20, 1, 100),
        );
        assert_eq!(u, Fx::from_num(21));
        // Ceiling below prev - slew: the ceiling wins over the slew limit.
        let u = pi.step(
            Fx::from_num(10),
            Gain::ZERO,
            Fx::from_num(10),
            Fx::ZERO,
            lim(20, 1, 5),
        );
        assert_eq!(u, Fx::from_num(5));
    }

    #[test]
    fn no_integration_while_slew_limited_toward_the_error() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(20));
        // A large negative error: u far below prev - slew; the output moves
        // by the slew and the integrator holds.
        let u = pi.step(
            Fx::from_num(1),
            Gain::from_num(1),
            Fx::ZERO,
            Fx::from_num(30),
            lim(20, 1, 100),
        );
        assert_eq!(u, Fx::from_num(19));
        assert_eq!(pi.integrator_iu(), Fx::from_num(20));
    }

    #[test]
    fn integrator_stays_within_zero_and_the_ceiling() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(80));
        let _ = pi.step(Fx::ONE, Gain::ZERO, Fx::ZERO, Fx::ZERO, lim(40, 100, 40));
        assert_eq!(pi.integrator_iu(), Fx::from_num(40));
        let mut pi = PowerLoop::default();
        for _ in 0..10 {
            let u = pi.step(
                Fx::ONE,
                Gain::from_num(1),
                Fx::ZERO,
                Fx::from_num(5),
                lim(0, 100, 40),
            );
            assert_eq!(u, Fx::ZERO);
            assert_eq!(pi.integrator_iu(), Fx::ZERO);
        }
    }

    #[test]
    fn preset_is_bumpless() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(33));
        let u = pi.step(
            Fx::from_num(3),
            Gain::from_num(1),
            Fx::from_num(7),
            Fx::from_num(7),
            lim(33, 1, 100),
        );
        assert_eq!(u, Fx::from_num(33));
    }
}
