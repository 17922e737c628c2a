//! Fixed-point number types, the board's units ([`Units`]) and the
//! conversions between counts and those units: of an ADC channel
//! ([`AdcCal::to_units`], [`AdcCal::counts_for`]) and of the current DAC
//! ([`DacCal::code`]), plus the core's private rate and time helpers.
//!
//! Every value the core computes with is an [`Fx`] (`I16F16`: ±32 767 with
//! a resolution of 1/65 536) in one of the board's units, and the field name
//! says which: `_iu` the board's current unit, `_ou` its optical-power unit,
//! `_vu` its voltage unit, `_degc` degree Celsius. Each unit is a power of
//! ten of the ampere, watt or volt, chosen per board ([`Units`]; the
//! simulator's board-file loader picks them from the file), so that one core
//! serves a 1 mA VCSEL driver (current unit 10 µA) and a 150 A bar driver
//! (current unit 10 mA) with the same arithmetic: engineering units exist
//! only at the configuration boundary. Calibration gains per ADC count need
//! finer resolution and are [`Gain`] (`I8F24`). The choice and its measured
//! range and resolution are in `docs/architecture.md` (numeric range).

use crate::config::{dac_code_clamped, AdcCal, DacCal};

/// The core's number: a signed 16.16 fixed-point value in one of the
/// board's units.
pub type Fx = fixed::types::I16F16;

/// A fine-resolution gain (signed 8.24 fixed point): units per ADC count,
/// or the integral gain per tick.
pub type Gain = fixed::types::I8F24;

impl AdcCal {
    /// The engineering value of a raw reading, in the channel's unit:
    /// `(counts - offset_counts) × units_per_count`, rounded toward minus
    /// infinity to the [`Fx`] resolution and saturated at its range. The
    /// conversion the core itself applies every tick.
    #[inline]
    pub fn to_units(&self, counts: u16) -> Fx {
        scale_counts(i32::from(counts) - self.offset_counts, self.units_per_count)
    }

    /// The reading at which the channel shows `value` (a comparator or
    /// window threshold in counts, say): `offset_counts + value /
    /// units_per_count`, rounded to the nearest count (halves up) and held
    /// within `[0, full_scale_counts]`. `None` when `units_per_count` is not
    /// positive (a configuration [`crate::Config::validate`] refuses).
    pub fn counts_for(&self, value: Fx) -> Option<u16> {
        let den = i64::from(self.units_per_count.to_bits());
        if den <= 0 {
            return None;
        }
        // value has 16 fractional bits, the gain 24: shift value up by 8.
        let num = i64::from(value.to_bits()) << 8;
        let steps = (2 * num + den).div_euclid(2 * den);
        let counts = steps.saturating_add(i64::from(self.offset_counts));
        let top = i64::from(self.full_scale_counts);
        Some(counts.clamp(0, top) as u16)
    }
}

impl DacCal {
    /// The DAC code for a drive current in iu: `ma × codes_per_iu +
    /// offset_codes`, rounded to the nearest code and held within
    /// `[0, max_code]`. The conversion the core applies to every drive it
    /// returns.
    #[inline]
    pub fn code(&self, ma: Fx) -> u16 {
        dac_code_clamped(self, ma)
    }
}

/// The board's units: the current unit is `10^current_exp` A, the optical
/// power unit `10^power_exp` W and the voltage unit `10^voltage_exp` V.
/// The core never converts with them (its arithmetic is the same in any
/// unit); they say what its numbers mean. A configuration names them in
/// its calibration (each channel's `unit_exp`, [`crate::Config::units`]),
/// they enter its fingerprint, and validation keeps them in
/// [`Units::MIN_EXP`] ..= [`Units::MAX_EXP`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Units {
    /// Decade of the current unit: -3 is the milliampere, -5 10 µA.
    pub current_exp: i8,
    /// Decade of the optical power unit: -3 is the milliwatt.
    pub power_exp: i8,
    /// Decade of the voltage unit: -3 is the millivolt.
    pub voltage_exp: i8,
}

impl Units {
    /// Milliampere, milliwatt and millivolt.
    pub const MILLI: Units = Units {
        current_exp: -3,
        power_exp: -3,
        voltage_exp: -3,
    };
    /// Smallest decade accepted (10^-9: nanoampere, nanowatt, nanovolt).
    pub const MIN_EXP: i8 = -9;
    /// Largest decade accepted (10^0: ampere, watt, volt).
    pub const MAX_EXP: i8 = 0;

    /// Whether every decade lies in [`Units::MIN_EXP`] ..= [`Units::MAX_EXP`].
    pub const fn is_valid(&self) -> bool {
        const fn ok(e: i8) -> bool {
            e >= Units::MIN_EXP && e <= Units::MAX_EXP
        }
        ok(self.current_exp) && ok(self.power_exp) && ok(self.voltage_exp)
    }
}

impl Default for Units {
    fn default() -> Self {
        Units::MILLI
    }
}

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

    fn cal(offset_counts: i32, gain_bits: i32, full_scale_counts: u16) -> AdcCal {
        AdcCal {
            offset_counts,
            units_per_count: Gain::from_bits(gain_bits),
            full_scale_counts,
            unit_exp: -3,
        }
    }

    #[test]
    fn counts_for_rounds_to_the_nearest_count_within_the_range() {
        // 0.5 mA per count from an offset of 10 counts, 12 bits.
        let c = cal(10, 1 << 23, 4095);
        assert_eq!(c.to_units(12), Fx::from_num(1));
        assert_eq!(c.counts_for(Fx::from_num(1)), Some(12));
        // 1.24 mA is 2.48 counts: 2 counts; 1.25 mA, 2.5 counts: halves up.
        assert_eq!(c.counts_for(Fx::from_num(1.24)), Some(12));
        assert_eq!(c.counts_for(Fx::from_num(1.25)), Some(13));
        // Below zero counts and above full scale: held at the ends.
        assert_eq!(c.counts_for(Fx::from_num(-100)), Some(0));
        assert_eq!(c.counts_for(Fx::from_num(-5)), Some(0));
        assert_eq!(c.counts_for(Fx::from_num(-4.75)), Some(1));
        assert_eq!(c.counts_for(Fx::MAX), Some(4095));
        assert_eq!(cal(0, 0, 4095).counts_for(Fx::ONE), None);
        assert_eq!(cal(0, -5, 4095).counts_for(Fx::ONE), None);
    }

    proptest::proptest! {
        /// A reading converted to units and back is the same reading, for
        /// every gain of at least 2^-14 units per count (coarser than the
        /// `Fx` resolution) that keeps the full scale inside the `Fx` range.
        #[test]
        fn counts_for_inverts_to_units(
            offset in 0i32..2048,
            gain_bits in 1024i32..(1 << 24),
            counts in 0u16..=4095,
        ) {
            let c = cal(offset, gain_bits, 4095);
            proptest::prop_assert_eq!(c.counts_for(c.to_units(counts)), Some(counts));
        }

        /// `DacCal::code` is the clamped, rounded code the core sends.
        #[test]
        fn dac_code_is_the_clamped_rounded_code(
            ma_bits in 0i32..(100 << 16),
            codes_bits in 1i32..(200 << 16),
            offset in -100i32..100,
        ) {
            let d = DacCal { codes_per_iu: Fx::from_bits(codes_bits), offset_codes: offset, max_code: 4095, unit_exp: -3 };
            let exact = i64::from(ma_bits) * i64::from(codes_bits);
            let want = (((exact + (1 << 31)) >> 32) + i64::from(offset)).clamp(0, 4095) as u16;
            proptest::prop_assert_eq!(d.code(Fx::from_bits(ma_bits)), want);
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
