//! The configuration boundary's unit conversions: a board's units
//! ([`Units`], a decade of the ampere, watt and volt each) to and from the
//! milliampere, milliwatt and millivolt the simulator, its files and its
//! reports use, and the choice of units for a board file ([`choose`]).
//!
//! The core computes in the board's units (fields ending `_iu`, `_ou`,
//! `_vu`); everything engineering happens here, on the host. Also the
//! text of an engineering value in reports ([`sig_text`]).

use diodestat_core::{Fault, Fx, Gain, Units};

/// `v` to `digits` significant digits (to the unit when it has more
/// digits before the point; at most 12 decimals), without
/// trailing zeros or float noise: 3333.3333333333335 to 6 digits is
/// "3333.33", 0.4000000000000001 is "0.4".
pub fn sig_text(v: f64, digits: i32) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let decimals = (digits - 1 - v.abs().log10().floor() as i32).clamp(0, 12) as usize;
    let s = format!("{v:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

/// The engineering unit a [`diodestat_core::Fault::unit`] stands for in
/// reports: `iu` is mA, `ou` mW, `vu` mV; others unchanged.
pub fn eng_unit(unit: &'static str) -> &'static str {
    match unit {
        "iu" => "mA",
        "ou" => "mW",
        "vu" => "mV",
        u => u,
    }
}

/// Conversions between a board's units and mA, mW, mV.
pub trait Scale {
    /// Milliampere per current unit.
    fn ma_per_iu(&self) -> f64;
    /// Milliwatt per optical-power unit.
    fn mw_per_ou(&self) -> f64;
    /// Millivolt per voltage unit.
    fn mv_per_vu(&self) -> f64;

    /// A current in the board's unit, in mA.
    fn ma(&self, v: Fx) -> f64 {
        v.to_num::<f64>() * self.ma_per_iu()
    }
    /// An optical power in the board's unit, in mW.
    fn mw(&self, v: Fx) -> f64 {
        v.to_num::<f64>() * self.mw_per_ou()
    }
    /// A voltage in the board's unit, in mV.
    fn mv(&self, v: Fx) -> f64 {
        v.to_num::<f64>() * self.mv_per_vu()
    }
    /// A current in mA, in the board's unit (saturating).
    fn iu(&self, ma: f64) -> Fx {
        Fx::saturating_from_num(ma / self.ma_per_iu())
    }
    /// An optical power in mW, in the board's unit (saturating).
    fn ou(&self, mw: f64) -> Fx {
        Fx::saturating_from_num(mw / self.mw_per_ou())
    }
    /// A voltage in mV, in the board's unit (saturating).
    fn vu(&self, mv: f64) -> Fx {
        Fx::saturating_from_num(mv / self.mv_per_vu())
    }
    /// A loop gain in current units per power unit, in mA/mW.
    fn ma_per_mw(&self, v: Fx) -> f64 {
        v.to_num::<f64>() * self.ma_per_iu() / self.mw_per_ou()
    }
    /// DAC codes per current unit, in codes per mA.
    fn codes_per_ma(&self, v: Fx) -> f64 {
        v.to_num::<f64>() / self.ma_per_iu()
    }
    /// A fault record's measured value or limit in the engineering unit
    /// [`diodestat_core::Fault::unit`] names once converted: mA for a
    /// current (`iu`), mW for a power (`ou`), mV for a voltage (`vu`),
    /// the value itself for anything else (degC, counts, ticks).
    fn record(&self, fault: Fault, v: Fx) -> f64 {
        let x = v.to_num::<f64>();
        match fault.unit() {
            "iu" => x * self.ma_per_iu(),
            "ou" => x * self.mw_per_ou(),
            "vu" => x * self.mv_per_vu(),
            _ => x,
        }
    }
    /// A gain of units per ADC count as f64, scaled by `per_unit` (mA per
    /// current unit, say).
    fn per_count(&self, g: Gain, per_unit: f64) -> f64 {
        g.to_num::<f64>() * per_unit
    }
}

fn decade(e: i8) -> f64 {
    10f64.powi(i32::from(e) + 3)
}

impl Scale for Units {
    fn ma_per_iu(&self) -> f64 {
        decade(self.current_exp)
    }
    fn mw_per_ou(&self) -> f64 {
        decade(self.power_exp)
    }
    fn mv_per_vu(&self) -> f64 {
        decade(self.voltage_exp)
    }
}

/// Largest value a board's unit is chosen to hold, in units: just inside
/// the core's `Fx` range (32 767.99); validation checks the sums and
/// products the core forms with them exactly.
pub const MAX_UNITS: f64 = 32_000.0;

/// Smallest full scale, in units, that [`choose_decade`] accepts before it
/// takes a smaller unit: at 20 units a 16.16 step per tick at a 100 kHz
/// tick is 7.6e-5 of full scale per ms (docs/architecture.md).
pub const MIN_FULL_SCALE_UNITS: f64 = 20.0;

/// The decade (exponent of ten, relative to the SI unit) for one quantity:
/// the milli unit unless `largest` (the largest value of that quantity the
/// board names, in milli units) exceeds [`MAX_UNITS`] (then larger decades)
/// or `full_scale` (the channel's full scale, in milli units) is below
/// [`MIN_FULL_SCALE_UNITS`] (then smaller ones). `None` when no decade in
/// [`Units::MIN_EXP`] ..= [`Units::MAX_EXP`] does both.
pub fn choose_decade(largest: f64, full_scale: f64) -> Option<i8> {
    let fits = |e: i8| {
        let per = decade(e);
        largest / per <= MAX_UNITS && full_scale / per >= MIN_FULL_SCALE_UNITS
    };
    if fits(-3) {
        return Some(-3);
    }
    if largest / decade(-3) > MAX_UNITS {
        (-2..=Units::MAX_EXP).find(|&e| fits(e))
    } else {
        (Units::MIN_EXP..=-4).rev().find(|&e| fits(e))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sig_text_gives_the_digits_asked_for_and_no_float_noise() {
        assert_eq!(sig_text(3333.3333333333335, 6), "3333.33");
        assert_eq!(sig_text(0.4000000000000001, 6), "0.4");
        assert_eq!(sig_text(16.666666666666668, 6), "16.6667");
        assert_eq!(sig_text(0.123456, 4), "0.1235");
        assert_eq!(sig_text(500.0, 4), "500");
        assert_eq!(sig_text(123456.7, 4), "123457");
        assert_eq!(sig_text(-0.0012345, 3), "-0.00123");
        assert_eq!(sig_text(0.0, 4), "0");
        assert_eq!(sig_text(f64::INFINITY, 4), "inf");
    }

    #[test]
    fn milli_units_are_the_identity() {
        let u = Units::MILLI;
        assert_eq!(u.ma(Fx::from_num(55)), 55.0);
        assert_eq!(u.iu(55.0), Fx::from_num(55));
        assert_eq!(u.ma_per_mw(Fx::from_num(0.5)), 0.5);
    }

    #[test]
    fn decades_scale_both_ways() {
        let u = Units {
            current_exp: -2,
            power_exp: -5,
            voltage_exp: -1,
        };
        assert_eq!(u.ma(Fx::from_num(3000)), 30_000.0);
        assert_eq!(u.iu(40_000.0), Fx::from_num(4000));
        assert!((u.mw(Fx::from_num(50)) - 0.5).abs() < 1e-12);
        assert_eq!(u.mv(Fx::from_num(480)), 48_000.0);
        // 0.5 current units per power unit is 500 mA/mW.
        assert_eq!(u.ma_per_mw(Fx::from_num(0.5)), 500.0);
        assert_eq!(u.codes_per_ma(Fx::from_num(10)), 1.0);
    }

    #[test]
    fn the_decade_follows_the_largest_value_and_the_full_scale() {
        // Shipped boards: milli.
        assert_eq!(choose_decade(60.0, 60.0), Some(-3));
        assert_eq!(choose_decade(8000.0, 8000.0), Some(-3));
        // A 150 A bar driver: 10 mA units (15 000 of them).
        assert_eq!(choose_decade(150_000.0, 150_000.0), Some(-2));
        // A 60 V supply channel: 10 mV units.
        assert_eq!(choose_decade(60_000.0, 60_000.0), Some(-2));
        // A 30 A source with a 40 A rating: 10 mA.
        assert_eq!(choose_decade(40_000.0, 30_000.0), Some(-2));
        // A 1 mA VCSEL driver: 10 uA (full scale 100 units).
        assert_eq!(choose_decade(1.0, 1.0), Some(-5));
        // 0.1 mW optical full scale: 1 uW.
        assert_eq!(choose_decade(0.1, 0.1), Some(-6));
        // Nothing fits a full scale far below the largest value.
        assert_eq!(choose_decade(1e9, 1e-6), None);
    }
}
