//! The file form of the configuration's controller sections (feature
//! `serde`): `[current]`, `[power]`, `[ramp]`, `[apc]`, `[derating]` and
//! `[protection]` of a board file as the core reads them, with their keys in
//! engineering units, each in the milli unit or the SI unit
//! (`absolute_max_ma` or `absolute_max_a`, `_mw` or `_w`, `_mv` or `_v`:
//! exactly one of the two), values exact decimals ([`Decimal`]). Each
//! section converts into its [`crate::Config`] section in the board's
//! [`Units`] (`to_section`), refusing a value those units cannot hold with
//! its key ([`FormError`]). Integer arithmetic only: a TOML float is read
//! by its shortest decimal digits.

use core::fmt::Write as _;

use crate::config::{ApcGains, CurrentLimits, Derating, PowerRange, Protection, Ramps};
use crate::units::{Fx, Units};

/// An exact decimal as written in a file: `mantissa × 10^exp`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Decimal {
    /// The digits, signed.
    pub mantissa: i64,
    /// The power of ten.
    pub exp: i16,
}

impl Decimal {
    /// `mantissa × 10^exp`.
    pub const fn new(mantissa: i64, exp: i16) -> Self {
        Decimal { mantissa, exp }
    }

    /// Fixed-point bits with `frac` fractional bits of `self × 10^shift`,
    /// rounded to nearest (ties to even); `None` when the magnitude
    /// exceeds `i32::MAX` bits.
    pub fn to_bits(self, shift: i32, frac: u32) -> Option<i32> {
        let m = i128::from(self.mantissa);
        let k = i32::from(self.exp).checked_add(shift)?;
        let one = 1i128.checked_shl(frac)?;
        let limit = i128::from(i32::MAX);
        if m == 0 {
            return Some(0);
        }
        if k >= 0 {
            let p = 10i128.checked_pow(u32::try_from(k).ok()?)?;
            let v = m.checked_mul(p)?.checked_mul(one)?;
            return if v.abs() <= limit {
                i32::try_from(v).ok()
            } else {
                None
            };
        }
        let num = m.checked_mul(one)?;
        // |num| < 2^(63 + frac) <= 2^95 < 10^29: beyond 10^38 it rounds to 0.
        let Some(den) = 10i128.checked_pow(k.unsigned_abs()) else {
            return Some(0);
        };
        if num.abs() > limit.checked_mul(den)? {
            return None;
        }
        let q = num.div_euclid(den);
        let r = num.rem_euclid(den);
        let q = match r.cmp(&(den - r)) {
            core::cmp::Ordering::Greater => q + 1,
            core::cmp::Ordering::Equal => q + (q & 1),
            core::cmp::Ordering::Less => q,
        };
        i32::try_from(q).ok()
    }
}

/// Up to 40 bytes of formatted text, on the stack.
struct Buf {
    b: [u8; 40],
    n: usize,
}

impl core::fmt::Write for Buf {
    fn write_str(&mut self, s: &str) -> core::fmt::Result {
        let end = self.n.checked_add(s.len()).ok_or(core::fmt::Error)?;
        self.b
            .get_mut(self.n..end)
            .ok_or(core::fmt::Error)?
            .copy_from_slice(s.as_bytes());
        self.n = end;
        Ok(())
    }
}

/// The decimal of a float's shortest round-trip digits (`{:e}`: `-1.25e-3`).
fn parse_exp_text(s: &[u8]) -> Option<Decimal> {
    let (neg, s) = match s.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, s),
    };
    let e_at = s.iter().position(|&c| c == b'e')?;
    let (digits, exp) = (s.get(..e_at)?, s.get(e_at + 1..)?);
    let mut m: i64 = 0;
    let mut frac: i32 = 0;
    let mut seen_point = false;
    for &c in digits {
        match c {
            b'.' => seen_point = true,
            b'0'..=b'9' => {
                m = m.checked_mul(10)?.checked_add(i64::from(c - b'0'))?;
                if seen_point {
                    frac += 1;
                }
            }
            _ => return None,
        }
    }
    let (eneg, exp) = match exp.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, exp),
    };
    let mut e: i32 = 0;
    for &c in exp {
        if !c.is_ascii_digit() {
            return None;
        }
        e = e.checked_mul(10)?.checked_add(i32::from(c - b'0'))?;
    }
    let e = if eneg { -e } else { e };
    Some(Decimal {
        mantissa: if neg { -m } else { m },
        exp: i16::try_from(e.checked_sub(frac)?).ok()?,
    })
}

impl<'de> serde::Deserialize<'de> for Decimal {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl serde::de::Visitor<'_> for V {
            type Value = Decimal;
            fn expecting(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
                f.write_str("a number")
            }
            fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<Decimal, E> {
                Ok(Decimal::new(v, 0))
            }
            fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<Decimal, E> {
                i64::try_from(v)
                    .map(|v| Decimal::new(v, 0))
                    .map_err(|_| E::custom(format_args!("{v} is too large")))
            }
            fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<Decimal, E> {
                if !v.is_finite() {
                    return Err(E::custom(format_args!("{v} is not a finite number")));
                }
                let mut buf = Buf { b: [0; 40], n: 0 };
                write!(buf, "{v:e}")
                    .ok()
                    .and_then(|()| buf.b.get(..buf.n))
                    .and_then(parse_exp_text)
                    .ok_or_else(|| E::custom(format_args!("{v} has too many digits")))
            }
        }
        d.deserialize_any(V)
    }
}

/// The quantity of a file key, which sets the board unit it converts into.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Quantity {
    /// A current (or a current per ms): `_ma` or `_a`.
    Current,
    /// An optical power (or a power per ms): `_mw` or `_w`.
    Power,
    /// A voltage: `_mv` or `_v`.
    Voltage,
    /// A current per optical power (a loop gain): `_ma_per_mw` or
    /// `_a_per_w`, the same number.
    CurrentPerPower,
    /// A temperature in degC or a fraction: in the core's range as written.
    Plain,
}

/// A value as written: its key, the decimal, what it measures and whether
/// the key names the SI unit (`_a`, `_w`, `_v`) rather than the milli unit.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Written {
    /// The board-file key as written, `section.key`.
    pub key: &'static str,
    /// The value.
    pub value: Decimal,
    /// What it measures.
    pub quantity: Quantity,
    /// The key's unit is the SI unit (A, W, V), not the milli unit.
    pub si: bool,
}

impl Written {
    /// The power of ten from the key's unit to the board's unit.
    pub fn shift(&self, u: Units) -> i32 {
        let file = if self.si { 0 } else { -3 };
        let board = match self.quantity {
            Quantity::Current => i32::from(u.current_exp),
            Quantity::Power => i32::from(u.power_exp),
            Quantity::Voltage => i32::from(u.voltage_exp),
            Quantity::CurrentPerPower => {
                return i32::from(u.power_exp) - i32::from(u.current_exp);
            }
            Quantity::Plain => return 0,
        };
        file - board
    }

    /// The value in the board's units, or the refusal naming the key.
    pub fn to_fx(&self, u: Units) -> Result<Fx, FormError> {
        self.value
            .to_bits(self.shift(u), 16)
            .map(Fx::from_bits)
            .ok_or(FormError::DoesNotFit {
                written: *self,
                shift: self.shift(u),
            })
    }

    /// The value in milli units (mA, mW, mV; a plain value or a gain as
    /// written).
    pub fn milli(&self) -> Decimal {
        let up = match self.quantity {
            Quantity::Current | Quantity::Power | Quantity::Voltage if self.si => 3,
            _ => 0,
        };
        Decimal::new(self.value.mantissa, self.value.exp.saturating_add(up))
    }
}

/// Why a section's file form does not convert.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum FormError {
    /// Neither the milli-unit key nor the SI-unit key is given.
    Missing {
        /// The milli-unit key, `section.key`.
        milli: &'static str,
        /// The SI-unit key.
        si: &'static str,
    },
    /// Both are given.
    Both {
        /// The milli-unit key.
        milli: &'static str,
        /// The SI-unit key.
        si: &'static str,
    },
    /// The value does not fit the core's range in the board's units.
    DoesNotFit {
        /// The value as written.
        written: Written,
        /// The power of ten from the key's unit to the board's unit.
        shift: i32,
    },
}

/// The one of two keys given.
fn pick(
    milli: Option<Decimal>,
    si: Option<Decimal>,
    keys: (&'static str, &'static str),
    quantity: Quantity,
) -> Result<Written, FormError> {
    match (milli, si) {
        (Some(value), None) => Ok(Written {
            key: keys.0,
            value,
            quantity,
            si: false,
        }),
        (None, Some(value)) => Ok(Written {
            key: keys.1,
            value,
            quantity,
            si: true,
        }),
        (None, None) => Err(FormError::Missing {
            milli: keys.0,
            si: keys.1,
        }),
        (Some(_), Some(_)) => Err(FormError::Both {
            milli: keys.0,
            si: keys.1,
        }),
    }
}

/// A plain value (degC, fraction) as written.
fn plain(key: &'static str, value: Decimal) -> Written {
    Written {
        key,
        value,
        quantity: Quantity::Plain,
        si: false,
    }
}

/// Accessors of the keys of a form given in either unit: `$get()` is the
/// value written under `$milli` or `$si`.
macro_rules! either {
    ($form:ident, $sec:literal: $($get:ident: $milli:ident | $si:ident, $q:ident;)*) => {
        impl $form {
            $(
                #[doc = concat!("`", $sec, ".", stringify!($milli), "` or `", $sec, ".", stringify!($si), "`.")]
                pub fn $get(&self) -> Result<Written, FormError> {
                    pick(
                        self.$milli,
                        self.$si,
                        (
                            concat!($sec, ".", stringify!($milli)),
                            concat!($sec, ".", stringify!($si)),
                        ),
                        Quantity::$q,
                    )
                }
            )*
        }
    };
}

/// `[current]`: drive-current limits ([`CurrentLimits`]).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CurrentForm {
    /// Diode absolute maximum, mA.
    pub absolute_max_ma: Option<Decimal>,
    /// Diode absolute maximum, A.
    pub absolute_max_a: Option<Decimal>,
    /// Operating ceiling, mA.
    pub ceiling_ma: Option<Decimal>,
    /// Operating ceiling, A.
    pub ceiling_a: Option<Decimal>,
}

either!(CurrentForm, "current":
    absolute_max: absolute_max_ma | absolute_max_a, Current;
    ceiling: ceiling_ma | ceiling_a, Current;
);

impl CurrentForm {
    /// The section in the board's units.
    pub fn to_section(&self, u: Units) -> Result<CurrentLimits, FormError> {
        Ok(CurrentLimits {
            absolute_max_iu: self.absolute_max()?.to_fx(u)?,
            ceiling_iu: self.ceiling()?.to_fx(u)?,
        })
    }
}

/// `[power]`: accepted power setpoints ([`PowerRange`]).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PowerForm {
    /// Lowest APC setpoint, mW.
    pub min_setpoint_mw: Option<Decimal>,
    /// Lowest APC setpoint, W.
    pub min_setpoint_w: Option<Decimal>,
    /// Highest APC setpoint, mW.
    pub max_setpoint_mw: Option<Decimal>,
    /// Highest APC setpoint, W.
    pub max_setpoint_w: Option<Decimal>,
}

either!(PowerForm, "power":
    min_setpoint: min_setpoint_mw | min_setpoint_w, Power;
    max_setpoint: max_setpoint_mw | max_setpoint_w, Power;
);

impl PowerForm {
    /// The section in the board's units.
    pub fn to_section(&self, u: Units) -> Result<PowerRange, FormError> {
        Ok(PowerRange {
            min_setpoint_ou: self.min_setpoint()?.to_fx(u)?,
            max_setpoint_ou: self.max_setpoint()?.to_fx(u)?,
        })
    }
}

/// `[ramp]`: ramps and the emission delay ([`Ramps`]).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RampForm {
    /// Enable-to-current delay, ms.
    pub emission_delay_ms: u32,
    /// Soft-start rate, mA/ms.
    pub soft_start_ma_per_ms: Option<Decimal>,
    /// Soft-start rate, A/ms.
    pub soft_start_a_per_ms: Option<Decimal>,
    /// Soft-stop rate, mA/ms.
    pub soft_stop_ma_per_ms: Option<Decimal>,
    /// Soft-stop rate, A/ms.
    pub soft_stop_a_per_ms: Option<Decimal>,
    /// Fraction of the setpoint where soft start hands over to APC.
    pub handover_fraction: Decimal,
    /// Setpoint ramp, mW/ms.
    pub setpoint_mw_per_ms: Option<Decimal>,
    /// Setpoint ramp, W/ms.
    pub setpoint_w_per_ms: Option<Decimal>,
}

either!(RampForm, "ramp":
    soft_start: soft_start_ma_per_ms | soft_start_a_per_ms, Current;
    soft_stop: soft_stop_ma_per_ms | soft_stop_a_per_ms, Current;
    setpoint: setpoint_mw_per_ms | setpoint_w_per_ms, Power;
);

impl RampForm {
    /// The section in the board's units.
    pub fn to_section(&self, u: Units) -> Result<Ramps, FormError> {
        Ok(Ramps {
            emission_delay_ms: self.emission_delay_ms,
            soft_start_iu_per_ms: self.soft_start()?.to_fx(u)?,
            soft_stop_iu_per_ms: self.soft_stop()?.to_fx(u)?,
            handover_fraction: plain("ramp.handover_fraction", self.handover_fraction).to_fx(u)?,
            setpoint_ou_per_ms: self.setpoint()?.to_fx(u)?,
        })
    }
}

/// `[apc]`: power-loop gains and slew ([`ApcGains`]).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ApcForm {
    /// Proportional gain, mA/mW.
    pub kp_ma_per_mw: Option<Decimal>,
    /// Proportional gain, A/W (the same number).
    pub kp_a_per_w: Option<Decimal>,
    /// Integral gain, mA/(mW·ms).
    pub ki_ma_per_mw_ms: Option<Decimal>,
    /// Integral gain, A/(W·ms) (the same number).
    pub ki_a_per_w_ms: Option<Decimal>,
    /// Output slew limit, mA/ms.
    pub slew_ma_per_ms: Option<Decimal>,
    /// Output slew limit, A/ms.
    pub slew_a_per_ms: Option<Decimal>,
}

either!(ApcForm, "apc":
    kp: kp_ma_per_mw | kp_a_per_w, CurrentPerPower;
    ki: ki_ma_per_mw_ms | ki_a_per_w_ms, CurrentPerPower;
    slew: slew_ma_per_ms | slew_a_per_ms, Current;
);

impl ApcForm {
    /// The section in the board's units.
    pub fn to_section(&self, u: Units) -> Result<ApcGains, FormError> {
        Ok(ApcGains {
            kp_iu_per_ou: self.kp()?.to_fx(u)?,
            ki_iu_per_ou_ms: self.ki()?.to_fx(u)?,
            slew_iu_per_ms: self.slew()?.to_fx(u)?,
        })
    }
}

/// `[derating]`: temperature derating ([`Derating`]).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DeratingForm {
    /// Knee, degC.
    pub knee_degc: Decimal,
    /// Cut-off (and over-temperature trip), degC.
    pub cutoff_degc: Decimal,
    /// Ceiling at the cut-off, mA.
    pub floor_ma: Option<Decimal>,
    /// Ceiling at the cut-off, A.
    pub floor_a: Option<Decimal>,
}

either!(DeratingForm, "derating":
    floor: floor_ma | floor_a, Current;
);

impl DeratingForm {
    /// The section in the board's units.
    pub fn to_section(&self, u: Units) -> Result<Derating, FormError> {
        Ok(Derating {
            knee_degc: plain("derating.knee_degc", self.knee_degc).to_fx(u)?,
            cutoff_degc: plain("derating.cutoff_degc", self.cutoff_degc).to_fx(u)?,
            floor_iu: self.floor()?.to_fx(u)?,
        })
    }
}

fn one() -> u16 {
    1
}

fn default_weight() -> u16 {
    3
}

/// `[protection]`: protection limits and debounces ([`Protection`]).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ProtectionForm {
    /// Overcurrent trip, mA.
    pub overcurrent_ma: Option<Decimal>,
    /// Overcurrent trip, A.
    pub overcurrent_a: Option<Decimal>,
    /// Overcurrent debounce, ticks.
    pub overcurrent_debounce_ticks: u16,
    /// Monitor runaway trip, mW.
    pub runaway_mw: Option<Decimal>,
    /// Monitor runaway trip, W.
    pub runaway_w: Option<Decimal>,
    /// Runaway debounce, ticks.
    pub runaway_debounce_ticks: u16,
    /// Monitor reading meaning "no light", mW.
    pub monitor_loss_floor_mw: Option<Decimal>,
    /// Monitor reading meaning "no light", W.
    pub monitor_loss_floor_w: Option<Decimal>,
    /// Drive at or above which monitor loss is checked, mA.
    pub monitor_loss_drive_ma: Option<Decimal>,
    /// Drive at or above which monitor loss is checked, A.
    pub monitor_loss_drive_a: Option<Decimal>,
    /// Monitor-loss debounce, ticks.
    pub monitor_loss_debounce_ticks: u16,
    /// Sensor open/short debounce, ticks.
    pub sensor_debounce_ticks: u16,
    /// Over-temperature debounce, ticks.
    pub over_temp_debounce_ticks: u16,
    /// Interlock debounce, ticks.
    pub interlock_debounce_ticks: u16,
    /// Supply window low end, mV.
    pub supply_min_mv: Option<Decimal>,
    /// Supply window low end, V.
    pub supply_min_v: Option<Decimal>,
    /// Supply window high end, mV.
    pub supply_max_mv: Option<Decimal>,
    /// Supply window high end, V.
    pub supply_max_v: Option<Decimal>,
    /// Supply debounce, ticks.
    pub supply_debounce_ticks: u16,
    /// Allowed sensed-versus-commanded difference, mA.
    pub mismatch_tolerance_ma: Option<Decimal>,
    /// Allowed sensed-versus-commanded difference, A.
    pub mismatch_tolerance_a: Option<Decimal>,
    /// Mismatch debounce, ticks.
    pub mismatch_debounce_ticks: u16,
    /// Missing ticks that trip.
    pub missed_tick_limit: u16,
    /// External fault input debounce, ticks (default 1).
    #[serde(default = "one")]
    pub external_debounce_ticks: u16,
    /// Weight of a tick with a condition present in the leaky debounce
    /// (default 3: a condition present in more than a quarter of the ticks
    /// trips).
    #[serde(default = "default_weight")]
    pub intermittent_weight: u16,
}

either!(ProtectionForm, "protection":
    overcurrent: overcurrent_ma | overcurrent_a, Current;
    runaway: runaway_mw | runaway_w, Power;
    monitor_loss_floor: monitor_loss_floor_mw | monitor_loss_floor_w, Power;
    monitor_loss_drive: monitor_loss_drive_ma | monitor_loss_drive_a, Current;
    supply_min: supply_min_mv | supply_min_v, Voltage;
    supply_max: supply_max_mv | supply_max_v, Voltage;
    mismatch_tolerance: mismatch_tolerance_ma | mismatch_tolerance_a, Current;
);

impl ProtectionForm {
    /// The section in the board's units.
    pub fn to_section(&self, u: Units) -> Result<Protection, FormError> {
        Ok(Protection {
            overcurrent_iu: self.overcurrent()?.to_fx(u)?,
            overcurrent_debounce: self.overcurrent_debounce_ticks,
            runaway_ou: self.runaway()?.to_fx(u)?,
            runaway_debounce: self.runaway_debounce_ticks,
            monitor_loss_floor_ou: self.monitor_loss_floor()?.to_fx(u)?,
            monitor_loss_drive_iu: self.monitor_loss_drive()?.to_fx(u)?,
            monitor_loss_debounce: self.monitor_loss_debounce_ticks,
            sensor_debounce: self.sensor_debounce_ticks,
            over_temp_debounce: self.over_temp_debounce_ticks,
            interlock_debounce: self.interlock_debounce_ticks,
            supply_min_vu: self.supply_min()?.to_fx(u)?,
            supply_max_vu: self.supply_max()?.to_fx(u)?,
            supply_debounce: self.supply_debounce_ticks,
            mismatch_tolerance_iu: self.mismatch_tolerance()?.to_fx(u)?,
            mismatch_debounce: self.mismatch_debounce_ticks,
            missed_tick_limit: self.missed_tick_limit,
            external_debounce: self.external_debounce_ticks,
            intermittent_weight: self.intermittent_weight,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimals_round_to_nearest_with_ties_to_even() {
        // 1.5 / 65536 lies halfway between 1 and 2 bits: even, 2.
        let d = |m, e| Decimal::new(m, e);
        assert_eq!(d(60, 0).to_bits(0, 16), Some(60 << 16));
        assert_eq!(d(3, -1).to_bits(0, 16), Some(19661)); // 0.3 -> 19660.8
        assert_eq!(d(24, 0).to_bits(2, 16), Some(2400 << 16));
        assert_eq!(d(32768, 0).to_bits(0, 16), None);
        assert_eq!(d(-32767, 0).to_bits(0, 16), Some(-32767 << 16));
        assert_eq!(d(1, -300).to_bits(0, 16), Some(0));
        assert_eq!(d(1, 300).to_bits(0, 16), None);
        // 2^-17 = 0.00000762939453125, a tie between 0 and 1 bit: 0.
        assert_eq!(d(762_939_453_125, -17).to_bits(0, 16), Some(0));
        // 3 × 2^-17: a tie between 1 and 2 bits: 2.
        assert_eq!(d(2_288_818_359_375, -17).to_bits(0, 16), Some(2));
    }

    #[test]
    fn float_text_reads_as_its_digits() {
        let p = |s: &str| parse_exp_text(s.as_bytes());
        assert_eq!(p("1e9"), Some(Decimal::new(1, 9)));
        assert_eq!(p("-1.25e-3"), Some(Decimal::new(-125, -5)));
        assert_eq!(p("4.5e0"), Some(Decimal::new(45, -1)));
        assert_eq!(p("x"), None);
    }

    #[test]
    fn one_of_two_keys() {
        let k = ("current.ceiling_ma", "current.ceiling_a");
        let v = Some(Decimal::new(5, 0));
        assert_eq!(pick(v, None, k, Quantity::Current).map(|w| w.key), Ok(k.0));
        assert_eq!(pick(None, v, k, Quantity::Current).map(|w| w.si), Ok(true));
        assert_eq!(
            pick(v, v, k, Quantity::Current),
            Err(FormError::Both {
                milli: k.0,
                si: k.1
            })
        );
        assert!(matches!(
            pick(None, None, k, Quantity::Current),
            Err(FormError::Missing { .. })
        ));
        // 24 A in 10 mA units, 60 mA in mA.
        let u = Units {
            current_exp: -2,
            ..Units::MILLI
        };
        let a = pick(None, Some(Decimal::new(24, 0)), k, Quantity::Current).unwrap();
        assert_eq!(a.to_fx(u), Ok(Fx::from_num(2400)));
        let ma = pick(Some(Decimal::new(60, 0)), None, k, Quantity::Current).unwrap();
        assert_eq!(ma.to_fx(Units::MILLI), Ok(Fx::from_num(60)));
    }
}
