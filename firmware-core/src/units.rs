//! Fixed-point number types and the few unit conversions the core needs.
//!
//! Engineering values are [`Fx`] (`I16F16`: ±32 767 with a resolution of
//! 1/65 536) and carry their unit in the field name: `_ma` milliampere,
//! `_mw` milliwatt, `_mv` millivolt, `_degc` degree Celsius. Calibration gains
//! per ADC count need finer resolution and are [`Gain`] (`I8F24`).

/// The core's engineering value: a signed 16.16 fixed-point number.
pub type Fx = fixed::types::I16F16;

/// A fine-resolution gain (signed 8.24 fixed point): units per ADC count,
/// or the integral gain per tick.
pub type Gain = fixed::types::I8F24;

/// Saturate an `i64` into the `i32` range.
#[inline]
pub(crate) const fn sat_i32(v: i64) -> i32 {
    if v > i32::MAX as i64 {
        i32::MAX
    } else if v < i32::MIN as i64 {
        i32::MIN
    } else {
        v as i32
    }
}

/// `counts × gain` in engineering units, saturating.
#[inline]
pub(crate) fn scale_counts(counts: i32, gain: Gain) -> Fx {
    // counts (0 fractional bits) × gain (24) = 24 fractional bits; Fx has 16.
    let wide = i64::from(counts) * i64::from(gain.to_bits());
    // `sat_i32(wide >> 8)` with one range test of the high word: `wide >> 8`
    // fits i32 exactly when `wide` lies in [-2^39, 2^39), that is when its
    // high word lies in [-128, 128).
    let high = (wide >> 32) as i32;
    if (high.wrapping_add(128) as u32) < 256 {
        Fx::from_bits((wide >> 8) as i32)
    } else if high < 0 {
        Fx::MIN
    } else {
        Fx::MAX
    }
}

/// Convert a rate per millisecond into a rate per tick: `rate × 1000 / tick_hz`.
/// Returns `None` when `tick_hz` is zero or the result does not fit.
#[inline]
pub(crate) fn per_tick(rate_per_ms: Fx, tick_hz: u32) -> Option<Fx> {
    if tick_hz == 0 {
        return None;
    }
    let bits = (rate_per_ms.to_bits() as i64).checked_mul(1000)? / tick_hz as i64;
    i32::try_from(bits).ok().map(Fx::from_bits)
}

/// Convert milliseconds into ticks, rounding up. `None` on overflow.
#[inline]
pub(crate) fn ms_to_ticks(ms: u32, tick_hz: u32) -> Option<u32> {
    let t = (ms as u64).checked_mul(tick_hz as u64)?.div_ceil(1000);
    u32::try_from(t).ok()
}

/// Clamp `v` into `[lo, hi]` without panicking when `lo > hi` (then `lo` wins
/// as the lower bound is the safer one for a drive: the caller passes
/// `lo = 0`).
#[inline]
pub(crate) fn clamp_fx(v: Fx, lo: Fx, hi: Fx) -> Fx {
    if v > hi {
        if hi < lo {
            lo
        } else {
            hi
        }
    } else if v < lo {
        lo
    } else {
        v
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn per_tick_divides_by_rate() {
        // 1 mA/ms at 20 kHz = 0.05 mA per tick.
        let r = per_tick(Fx::from_num(1), 20_000).unwrap();
        assert_eq!(r, Fx::from_bits(65_536 * 1000 / 20_000));
        assert_eq!(per_tick(Fx::from_num(1), 0), None);
    }

    #[test]
    fn ms_to_ticks_rounds_up() {
        assert_eq!(ms_to_ticks(0, 20_000), Some(0));
        assert_eq!(ms_to_ticks(1, 20_000), Some(20));
        assert_eq!(ms_to_ticks(1, 1_500), Some(2));
    }

    #[test]
    fn scale_counts_saturates() {
        let g = Gain::from_num(100);
        assert_eq!(scale_counts(i32::MAX, g), Fx::MAX);
        assert_eq!(scale_counts(2, Gain::from_num(1)), Fx::from_num(2));
    }

    #[test]
    fn scale_counts_equals_the_saturated_wide_product() {
        // Every u16 reading less an offset, at gains from the smallest to
        // the largest, against the saturated i64 product.
        for gain_bits in [1, 184_365, 81_940_000, i32::MAX, -1, i32::MIN] {
            let g = Gain::from_bits(gain_bits);
            for counts in (-65_535..=65_535).step_by(13).chain([-65_535, 0, 65_535]) {
                let want = sat_i32((i64::from(counts) * i64::from(gain_bits)) >> 8);
                assert_eq!(
                    scale_counts(counts, g).to_bits(),
                    want,
                    "{counts} × {gain_bits}"
                );
            }
        }
    }

    #[test]
    fn clamp_prefers_low_bound() {
        let z = Fx::ZERO;
        assert_eq!(clamp_fx(Fx::from_num(5), z, Fx::from_num(-1)), z);
        assert_eq!(
            clamp_fx(Fx::from_num(5), z, Fx::from_num(3)),
            Fx::from_num(3)
        );
    }
}
