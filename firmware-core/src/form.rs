//! The file form of the configuration (feature `serde`): the sections of
//! a board file the core owns (`[current]`, `[power]`, `[ramp]`, `[apc]`,
//! `[derating]`, `[protection]`, the `[calibration.*]` channels,
//! `[plausibility]` and the points of a given temperature table) as the core
//! reads them, with their keys in engineering units, each current, power
//! and voltage in the milli unit or the SI unit (`absolute_max_ma` or
//! `absolute_max_a`, `_mw` or `_w`, `_mv` or `_v`: exactly one of the two),
//! values exact decimals ([`Decimal`]). Each section converts into its
//! [`crate::Config`] section in the board's [`Units`] (`to_section`),
//! refusing a value those units cannot hold with its key ([`FormError`]).
//! Integer arithmetic only: a TOML float is read by its shortest decimal
//! digits (`core::fmt`), and rounded to the core's fixed point to nearest,
//! ties to even.

use core::fmt::Write as _;

use crate::config::{
    AdcCal, ApcGains, CurrentLimits, DacCal, Derating, DiodePoint, Plausibility, PowerRange,
    Protection, Ramps, DIODE_POINTS,
};
use crate::temp_table::TempPoint;
use crate::units::{Fx, Gain, Units};

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
        // Refused when strictly beyond the largest step, as `|x| <= MAX`.
        let (whole, part) = (num.abs() / den, num.abs() % den);
        if whole > limit || (whole == limit && part != 0) {
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
    /// DAC codes per current: `codes_per_ma` or `codes_per_a`.
    PerCurrent,
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
            Quantity::PerCurrent => return i32::from(u.current_exp) - if self.si { 0 } else { -3 },
        };
        file - board
    }

    /// The value in the board's units, or the refusal naming the key.
    pub fn to_fx(&self, u: Units) -> Result<Fx, FormError> {
        self.bits(u, 16, false).map(Fx::from_bits)
    }

    /// The value's bits with `frac` fractional bits in the board's units;
    /// refused when beyond the range, or when a value other than 0 rounds
    /// to 0 (a gain or a rate written as not zero would silently be off).
    fn bits(&self, u: Units, frac: u32, gain: bool) -> Result<i32, FormError> {
        let shift = self.shift(u);
        match self.value.to_bits(shift, frac) {
            None => Err(FormError::DoesNotFit {
                written: *self,
                shift,
                gain,
            }),
            Some(0) if self.value.mantissa != 0 => Err(FormError::BelowStep {
                written: *self,
                shift,
                gain,
            }),
            Some(b) => Ok(b),
        }
    }

    /// The value in the board's units as a calibration gain per count
    /// ([`Gain`]), or the refusal naming the key.
    pub fn to_gain(&self, u: Units) -> Result<Gain, FormError> {
        self.bits(u, 24, true).map(Gain::from_bits)
    }

    /// The value in milli units (mA, mW, mV; a plain value or a gain as
    /// written).
    pub fn milli(&self) -> Decimal {
        let up = match self.quantity {
            Quantity::Current | Quantity::Power | Quantity::Voltage if self.si => 3,
            Quantity::PerCurrent if self.si => -3,
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
        /// The value is a calibration gain per count ([`Gain`]), not an
        /// [`Fx`].
        gain: bool,
    },
    /// The value is not 0 but rounds to 0 in the board's units.
    BelowStep {
        /// The value as written.
        written: Written,
        /// The power of ten from the key's unit to the board's unit.
        shift: i32,
        /// The value is a calibration gain per count ([`Gain`]).
        gain: bool,
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

/// `[calibration.monitor]`: the monitor photodiode channel ([`AdcCal`],
/// in the board's power unit).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MonitorForm {
    /// Reading at zero light, counts.
    pub offset_counts: i32,
    /// Front-facet mW per count.
    pub mw_per_count: Option<Decimal>,
    /// Front-facet W per count.
    pub w_per_count: Option<Decimal>,
    /// Highest ADC count.
    pub full_scale_counts: u16,
}

either!(MonitorForm, "calibration.monitor":
    per_count: mw_per_count | w_per_count, Power;
);

/// `[calibration.current_sense]`: the current-sense channel ([`AdcCal`],
/// in the board's current unit).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CurrentSenseForm {
    /// Reading at zero current, counts.
    pub offset_counts: i32,
    /// mA per count.
    pub ma_per_count: Option<Decimal>,
    /// A per count.
    pub a_per_count: Option<Decimal>,
    /// Highest ADC count.
    pub full_scale_counts: u16,
}

either!(CurrentSenseForm, "calibration.current_sense":
    per_count: ma_per_count | a_per_count, Current;
);

/// `[calibration.supply]`: the supply channel ([`AdcCal`], in the board's
/// voltage unit).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SupplyForm {
    /// Reading at zero volts, counts.
    pub offset_counts: i32,
    /// Supply mV per count (divider included).
    pub mv_per_count: Option<Decimal>,
    /// Supply V per count (divider included).
    pub v_per_count: Option<Decimal>,
    /// Highest ADC count.
    pub full_scale_counts: u16,
}

either!(SupplyForm, "calibration.supply":
    per_count: mv_per_count | v_per_count, Voltage;
);

/// An ADC channel in the unit of its quantity.
fn adc(
    offset_counts: i32,
    per_count: Result<Written, FormError>,
    full_scale_counts: u16,
    u: Units,
) -> Result<AdcCal, FormError> {
    let per_count = per_count?;
    Ok(AdcCal {
        offset_counts,
        units_per_count: per_count.to_gain(u)?,
        full_scale_counts,
        unit_exp: match per_count.quantity {
            Quantity::Power => u.power_exp,
            Quantity::Voltage => u.voltage_exp,
            _ => u.current_exp,
        },
    })
}

impl MonitorForm {
    /// The channel in the board's units.
    pub fn to_section(&self, u: Units) -> Result<AdcCal, FormError> {
        adc(
            self.offset_counts,
            self.per_count(),
            self.full_scale_counts,
            u,
        )
    }
}

impl CurrentSenseForm {
    /// The channel in the board's units.
    pub fn to_section(&self, u: Units) -> Result<AdcCal, FormError> {
        adc(
            self.offset_counts,
            self.per_count(),
            self.full_scale_counts,
            u,
        )
    }
}

impl SupplyForm {
    /// The channel in the board's units.
    pub fn to_section(&self, u: Units) -> Result<AdcCal, FormError> {
        adc(
            self.offset_counts,
            self.per_count(),
            self.full_scale_counts,
            u,
        )
    }
}

/// `[calibration.dac]`: the current-source DAC ([`DacCal`], per the board's
/// current unit).
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DacForm {
    /// Codes per mA.
    pub codes_per_ma: Option<Decimal>,
    /// Codes per A.
    pub codes_per_a: Option<Decimal>,
    /// Code at zero current.
    pub offset_codes: i32,
    /// Highest code.
    pub max_code: u16,
}

either!(DacForm, "calibration.dac":
    codes_per: codes_per_ma | codes_per_a, PerCurrent;
);

impl DacForm {
    /// The DAC in the board's units.
    pub fn to_section(&self, u: Units) -> Result<DacCal, FormError> {
        Ok(DacCal {
            codes_per_iu: self.codes_per()?.to_fx(u)?,
            offset_codes: self.offset_codes,
            max_code: self.max_code,
            unit_exp: u.current_exp,
        })
    }
}

/// One point of a temperature table as written: `{ counts, degc }`
/// ([`TempPoint`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TempPointForm {
    /// ADC counts.
    pub counts: u16,
    /// Temperature, degC.
    pub degc: Decimal,
}

impl TempPointForm {
    /// The point; `key` names the table in a refusal.
    pub fn to_point(&self, key: &'static str) -> Result<TempPoint, FormError> {
        Ok(TempPoint {
            counts: self.counts,
            degc: plain(key, self.degc).to_fx(Units::MILLI)?,
        })
    }
}

/// The case temperatures of `[plausibility]`, degC: 1 to [`DIODE_POINTS`].
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PointsDegc(pub heapless::Vec<Decimal, DIODE_POINTS>);

impl Default for PointsDegc {
    /// -20, 0, 20, 40, 60 and 80 degC.
    fn default() -> Self {
        let mut v = heapless::Vec::new();
        for t in [-20, 0, 20, 40, 60, 80] {
            // Cannot fail: six of DIODE_POINTS (8).
            let _ = v.push(Decimal::new(t, 0));
        }
        PointsDegc(v)
    }
}

impl<'de> serde::Deserialize<'de> for PointsDegc {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> serde::de::Visitor<'de> for V {
            type Value = PointsDegc;
            fn expecting(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
                write!(f, "1 to {DIODE_POINTS} temperatures")
            }
            fn visit_seq<A: serde::de::SeqAccess<'de>>(
                self,
                mut seq: A,
            ) -> Result<PointsDegc, A::Error> {
                let mut v = heapless::Vec::new();
                while let Some(t) = seq.next_element::<Decimal>()? {
                    v.push(t).map_err(|_| {
                        serde::de::Error::custom(format_args!(
                            "holds 1 to {DIODE_POINTS} temperatures"
                        ))
                    })?;
                }
                if v.is_empty() {
                    return Err(serde::de::Error::custom(format_args!(
                        "holds 1 to {DIODE_POINTS} temperatures"
                    )));
                }
                Ok(PointsDegc(v))
            }
        }
        d.deserialize_seq(V)
    }
}

/// `[plausibility]`: current-for-power plausibility ([`Plausibility`]). The
/// healthy diode's threshold and slope at each case temperature come from
/// the host (the simulator's diode model of the module, at the junction
/// `junction_rise_k` above the case), the margins from the file.
#[derive(Clone, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PlausibilityForm {
    /// How far the junction sits above the case at full drive, K (for the
    /// host's diode model).
    pub junction_rise_k: Decimal,
    /// Case temperatures of the points, degC, rising.
    #[serde(default)]
    pub points_degc: PointsDegc,
    /// Warning margin ("end of life approaching"), fraction.
    pub warning_margin: Decimal,
    /// Fault margin, fraction.
    pub fault_margin: Decimal,
    /// Absolute allowance, mA.
    pub allowance_ma: Option<Decimal>,
    /// Absolute allowance, A.
    pub allowance_a: Option<Decimal>,
    /// Fault debounce, ticks.
    pub debounce_ticks: u16,
}

either!(PlausibilityForm, "plausibility":
    allowance: allowance_ma | allowance_a, Current;
);

impl PlausibilityForm {
    /// The case temperature of each point, degC, or the refusal naming
    /// `plausibility.points_degc`.
    pub fn points_degc(&self) -> Result<heapless::Vec<Fx, DIODE_POINTS>, FormError> {
        let mut out = heapless::Vec::new();
        for &t in &self.points_degc.0 {
            // Cannot fail: as many as the form holds.
            let _ = out.push(plain("plausibility.points_degc", t).to_fx(Units::MILLI)?);
        }
        Ok(out)
    }

    /// The section in the board's units, with the healthy diode's `points`
    /// (one per [`PlausibilityForm::points_degc`], from the host's model).
    pub fn to_section(
        &self,
        u: Units,
        points: heapless::Vec<DiodePoint, DIODE_POINTS>,
    ) -> Result<Plausibility, FormError> {
        Ok(Plausibility {
            points,
            warning_margin: plain("plausibility.warning_margin", self.warning_margin).to_fx(u)?,
            fault_margin: plain("plausibility.fault_margin", self.fault_margin).to_fx(u)?,
            allowance_iu: self.allowance()?.to_fx(u)?,
            debounce: self.debounce_ticks,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A value written as not zero that rounds to 0 in the board's units
    /// is refused (an integral gain of 1e-7 mA/(mW ms) would silently turn
    /// the integral action off); 0 itself and half a step and more pass.
    #[test]
    fn a_value_that_rounds_to_zero_is_refused() {
        let ki = |m, e| Written {
            key: "apc.ki_ma_per_mw_ms",
            value: Decimal::new(m, e),
            quantity: Quantity::CurrentPerPower,
            si: false,
        };
        assert!(matches!(
            ki(1, -7).to_fx(Units::MILLI),
            Err(FormError::BelowStep {
                shift: 0,
                gain: false,
                ..
            })
        ));
        assert_eq!(ki(0, 0).to_fx(Units::MILLI), Ok(Fx::ZERO));
        // 8e-6 is just above half of 2^-16 = 1.53e-5: one step.
        assert_eq!(ki(8, -6).to_fx(Units::MILLI), Ok(Fx::DELTA));
        let gain = Written {
            quantity: Quantity::Current,
            ..ki(1, -12)
        };
        assert!(matches!(
            gain.to_gain(Units::MILLI),
            Err(FormError::BelowStep { gain: true, .. })
        ));
    }

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
        // Tiny values round to zero at every scale of the divisor.
        for e in [-10, -20, -30, -37, -38, -39] {
            assert_eq!(d(1, e).to_bits(0, 16), Some(0), "1e{e}");
            assert_eq!(d(i64::MAX, e - 25).to_bits(0, 24), Some(0), "1e{e}");
        }
        // Below the largest value (32767 + 65535/65536 = 32767.99998474...)
        // it rounds to it; above it, however little, it is refused.
        assert_eq!(d(32_767_999_984, -6).to_bits(0, 16), Some(i32::MAX));
        assert_eq!(d(32_767_999_985, -6).to_bits(0, 16), None);
        assert_eq!(d(-32_767_999_985, -6).to_bits(0, 16), None);
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
        // 68.25 codes per mA is 682.5 codes per 10 mA unit, and 68 250
        // codes per A is the same.
        let k = (
            "calibration.dac.codes_per_ma",
            "calibration.dac.codes_per_a",
        );
        let ma = pick(Some(Decimal::new(6825, -2)), None, k, Quantity::PerCurrent).unwrap();
        let a = pick(None, Some(Decimal::new(68250, 0)), k, Quantity::PerCurrent).unwrap();
        assert_eq!(ma.to_fx(u), Ok(Fx::from_num(682.5)));
        assert_eq!(a.to_fx(u), Ok(Fx::from_num(682.5)));
        assert_eq!(a.milli(), Decimal::new(68250, -3));
        // A gain per count: 0.02 mA per count = 0.002 units of 10 mA.
        let k = (
            "calibration.current_sense.ma_per_count",
            "calibration.current_sense.a_per_count",
        );
        let g = pick(Some(Decimal::new(2, -2)), None, k, Quantity::Current).unwrap();
        assert_eq!(g.to_gain(u), Ok(Gain::from_num(0.002)));
    }
}
