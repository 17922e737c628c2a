//! Board configuration: what the user writes ([`Config`]), what the
//! controller runs on ([`ValidConfig`]), and every reason a configuration is
//! refused ([`ConfigError`]).
//!
//! A [`ValidConfig`] can only be made by [`Config::validate`]; it holds the
//! per-tick quantities derived once from the rates and delays, so the
//! control tick never divides by the tick rate.

use crate::fault::{Fault, SLOTS};
use crate::temp_table::{self, TempPoint, Window, TEMP_TABLE_LEN};
use crate::units::{ms_to_ticks, per_tick, scale_counts, Fx, Gain, Units};

/// The complete board configuration, in engineering units.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Config {
    /// Control tick rate in hertz (one `step` per tick).
    pub tick_hz: u32,
    /// Drive-current limits.
    pub current: CurrentLimits,
    /// Range of optical power setpoints accepted in APC.
    pub power: PowerRange,
    /// Soft start, soft stop, emission delay and setpoint ramps.
    pub ramp: Ramps,
    /// The automatic-power-control loop.
    pub apc: ApcGains,
    /// Temperature derating of the current ceiling.
    pub derating: Derating,
    /// Protection limits and debounce counts.
    pub protection: Protection,
    /// ADC and DAC calibration and the temperature-sensor table.
    pub calibration: Calibration,
    /// The forward-voltage channel and its protections (diode open, diode
    /// short), on boards that measure it.
    pub forward_voltage: Option<ForwardVoltage>,
    /// Current-for-power plausibility (end-of-life warning and fault), when
    /// the diode's threshold and slope over temperature are known.
    pub plausibility: Option<Plausibility>,
}

/// The forward-voltage channel: a diode open reads at the current source's
/// compliance, a shorted diode below a floor, while the source drives.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct ForwardVoltage {
    /// The channel's calibration, vu.
    pub cal: AdcCal,
    /// Reading at or above which the diode is open (the source at its
    /// compliance), vu.
    pub open_vu: Fx,
    /// Reading at or below which the diode is shorted, vu.
    pub short_vu: Fx,
    /// Both apply while the command that produced the sample is at or above
    /// this, iu (above zero; below it the voltage says little).
    pub min_drive_iu: Fx,
    /// Debounce of both, ticks.
    pub debounce: u16,
}

/// Largest number of temperature points of [`Plausibility`].
pub const DIODE_POINTS: usize = 8;

/// The healthy diode at one temperature, for [`Plausibility`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct DiodePoint {
    /// Case temperature as the core measures it, degC.
    pub degc: Fx,
    /// Threshold current, iu.
    pub threshold_iu: Fx,
    /// Slope efficiency, front-facet ou per iu.
    pub slope_ou_per_iu: Fx,
}

/// Current-for-power plausibility. The current the healthy diode needs for
/// the measured power `P` at the measured temperature `T` is
/// `I(P, T) = I_th(T) + P / η(T)`, linear between the points (held at the
/// end points outside them). A sensed current above
/// `(1 + margin) × I(P, T) + allowance` is implausible: the warning margin
/// raises [`crate::Warnings::end_of_life`], the fault margin is the
/// [`crate::Fault::PowerImplausible`] condition. Evaluated every
/// [`crate::protect::SLOW_EVERY`] ticks and held in between.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Plausibility {
    /// The healthy diode over temperature, temperatures strictly increasing.
    pub points: heapless::Vec<DiodePoint, DIODE_POINTS>,
    /// Warning margin, a fraction of `I(P, T)` (aging allowed before the
    /// warning).
    pub warning_margin: Fx,
    /// Fault margin, a fraction of `I(P, T)`, at least the warning margin.
    pub fault_margin: Fx,
    /// Absolute allowance for sense and calibration error, iu.
    pub allowance_iu: Fx,
    /// Debounce of the fault, ticks.
    pub debounce: u16,
}

/// Drive-current limits.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct CurrentLimits {
    /// Absolute maximum current of the diode (datasheet rating), iu.
    pub absolute_max_iu: Fx,
    /// Operating ceiling below the absolute maximum, iu. No path commands more.
    pub ceiling_iu: Fx,
}

/// Accepted optical power setpoints, front-facet ou as calibrated on the monitor.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct PowerRange {
    /// Lowest setpoint, ou.
    pub min_setpoint_ou: Fx,
    /// Highest setpoint, ou.
    pub max_setpoint_ou: Fx,
}

/// Ramps and delays. Rates are per millisecond; the core converts them to
/// per-tick steps once.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Ramps {
    /// Delay between the enable request and the start of current, ms (may be 0).
    pub emission_delay_ms: u32,
    /// Soft-start current rate, iu/ms. Also bounds how fast the ceiling
    /// envelope rises after the hand-over.
    pub soft_start_iu_per_ms: Fx,
    /// Soft-stop current rate, iu/ms.
    pub soft_stop_iu_per_ms: Fx,
    /// Fraction of the power setpoint at which soft start hands over to the
    /// power loop, in (0, 1].
    pub handover_fraction: Fx,
    /// Power setpoint ramp, ou/ms.
    pub setpoint_ou_per_ms: Fx,
}

/// Gains and slew limit of the discrete PI power loop and the ACC slew.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct ApcGains {
    /// Proportional gain, iu per ou of error.
    pub kp_iu_per_ou: Fx,
    /// Integral gain, iu per (ou × ms) of error.
    pub ki_iu_per_ou_ms: Fx,
    /// Output slew limit, iu/ms (APC and ACC).
    pub slew_iu_per_ms: Fx,
}

/// Temperature derating: full ceiling below the knee, linear to the floor at
/// the cut-off, over-temperature fault at and beyond the cut-off.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Derating {
    /// Temperature where derating starts, degC.
    pub knee_degc: Fx,
    /// Temperature where the ceiling reaches the floor and over-temperature trips, degC.
    pub cutoff_degc: Fx,
    /// Ceiling at the cut-off, iu.
    pub floor_iu: Fx,
}

/// Protection limits. A limit is the first value that trips; a debounce `N`
/// is the number of consecutive ticks a steady condition must hold
/// (1 = at once). Conditions that come and go are integrated: see
/// [`Protection::intermittent_weight`] and `protect.rs`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Protection {
    /// Overcurrent trip, iu (sensed).
    pub overcurrent_iu: Fx,
    /// Overcurrent debounce, ticks.
    pub overcurrent_debounce: u16,
    /// Monitor power runaway trip, ou.
    pub runaway_ou: Fx,
    /// Runaway debounce, ticks.
    pub runaway_debounce: u16,
    /// Monitor-loss floor: the monitor reading below which there is "no light", ou.
    pub monitor_loss_floor_ou: Fx,
    /// Monitor loss applies while the commanded drive is at or above this, iu
    /// (set it near the ceiling, and above the hottest threshold current).
    pub monitor_loss_drive_iu: Fx,
    /// Monitor-loss debounce, ticks.
    pub monitor_loss_debounce: u16,
    /// Sensor open/short debounce, ticks.
    pub sensor_debounce: u16,
    /// Over-temperature debounce, ticks.
    pub over_temp_debounce: u16,
    /// Interlock debounce, ticks.
    pub interlock_debounce: u16,
    /// Supply window low end, vu.
    pub supply_min_vu: Fx,
    /// Supply window high end, vu.
    pub supply_max_vu: Fx,
    /// Supply debounce, ticks.
    pub supply_debounce: u16,
    /// Allowed difference between sensed current and the previous command, iu.
    pub mismatch_tolerance_iu: Fx,
    /// Mismatch debounce, ticks.
    pub mismatch_debounce: u16,
    /// Number of missing ticks (gap in the tick index) that trips.
    pub missed_tick_limit: u16,
    /// Debounce of the external fault input, ticks.
    pub external_debounce: u16,
    /// Weight `w` of a tick with the condition present in the leaky
    /// debounce (a clean tick counts −1, a protection trips at `w × N`): a
    /// condition present in more than `1 / (w + 1)` of the ticks trips
    /// within the bound documented in `protect.rs`. 1 to
    /// [`MAX_INTERMITTENT_WEIGHT`].
    pub intermittent_weight: u16,
}

/// Longest debounce of a fast protection ([`Fault::is_fast`]), µs: at the
/// configured tick rate, `max(1, tick_hz × 500 µs)` ticks (10 at 20 kHz).
pub const FAST_DEBOUNCE_MAX_US: u32 = 500;

/// How far above the derating cut-off the temperature table must reach,
/// degC (our design choice: the table's own points, not an extrapolated
/// end segment, decide the over-temperature trip and a few degrees beyond).
pub const TEMP_COVER_MARGIN_DEGC: Fx = Fx::lit("10");

/// Largest [`Protection::intermittent_weight`].
pub const MAX_INTERMITTENT_WEIGHT: u16 = 255;

/// The configuration key of a fault's debounce, as in [`Config`] (from the
/// protection table, [`Fault::debounce_key`]).
pub const fn debounce_key(fault: Fault) -> &'static str {
    fault.debounce_key()
}

/// A linear ADC channel: `value = (counts - offset_counts) × units_per_count`,
/// in the unit `unit_exp` names.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct AdcCal {
    /// Reading at zero input, counts.
    pub offset_counts: i32,
    /// Engineering units per count (ou, iu or vu per count).
    #[cfg_attr(feature = "serde", serde(with = "gain_bits"))]
    pub units_per_count: Gain,
    /// Highest count the ADC returns (for example 4095 for 12 bits).
    pub full_scale_counts: u16,
    /// The unit the channel reads in, a decade of the SI unit: `10^unit_exp`
    /// W for the monitor, A for the current sense, V for the supply and the
    /// forward voltage (-3: mW, mA, mV). It makes the board's [`Units`]
    /// ([`Config::units`]) and sits in the struct's padding, so the
    /// configuration is no larger for it.
    pub unit_exp: i8,
}

/// The serde form of a [`Gain`] field: its raw bits as `{ bits }`, the
/// same shape as an [`Fx`], under the struct name `Gain` (an [`Fx`] goes
/// under `FixedI32`), so a serializer can tell the two apart (the
/// simulator's export writes `Gain::from_bits` for it). Every `Gain` field
/// of the configuration carries `#[serde(with = "gain_bits")]`.
#[cfg(feature = "serde")]
mod gain_bits {
    use super::Gain;
    use serde::ser::SerializeStruct;

    pub fn serialize<S: serde::Serializer>(g: &Gain, s: S) -> Result<S::Ok, S::Error> {
        let mut st = s.serialize_struct("Gain", 1)?;
        st.serialize_field("bits", &g.to_bits())?;
        st.end()
    }

    pub fn deserialize<'de, D: serde::Deserializer<'de>>(d: D) -> Result<Gain, D::Error> {
        <Gain as serde::Deserialize>::deserialize(d)
    }
}

/// The DAC that sets the current source: `code = drive_iu × codes_per_iu + offset_codes`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct DacCal {
    /// Codes per iu.
    pub codes_per_iu: Fx,
    /// Code at zero current.
    pub offset_codes: i32,
    /// Highest code (for example 4095 for 12 bits).
    pub max_code: u16,
    /// The current unit of `codes_per_iu`, `10^unit_exp` A: the current
    /// sense's (validation refuses another).
    pub unit_exp: i8,
}

/// Which ADC rail an open temperature sensor reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Rail {
    /// Open sensor reads at or above `high_fault_counts`.
    High,
    /// Open sensor reads at or below `low_fault_counts`.
    Low,
}

/// The temperature sensor channel: a conversion table built on the host from
/// the sensor's published equation, and the rails that mean open or short.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct TempCal {
    /// Points sorted by strictly increasing counts; temperatures strictly
    /// monotonic (rising or falling).
    pub table: heapless::Vec<TempPoint, TEMP_TABLE_LEN>,
    /// Counts at or below this are a sensor fault.
    pub low_fault_counts: u16,
    /// Counts at or above this are a sensor fault.
    pub high_fault_counts: u16,
    /// Which rail an open sensor goes to (the other is a short).
    pub open_rail: Rail,
}

/// All calibration.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
pub struct Calibration {
    /// Monitor photodiode channel, in front-facet ou.
    pub monitor: AdcCal,
    /// Drive-current sense channel, iu.
    pub current_sense: AdcCal,
    /// Supply voltage channel, vu.
    pub supply: AdcCal,
    /// Current-source DAC.
    pub dac: DacCal,
    /// Temperature sensor.
    pub temperature: TempCal,
}

/// Which ramp a [`ConfigError`] is about.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RampKind {
    /// `ramp.soft_start_iu_per_ms`.
    SoftStart,
    /// `ramp.soft_stop_iu_per_ms`.
    SoftStop,
    /// `ramp.setpoint_ou_per_ms`.
    Setpoint,
    /// `apc.slew_iu_per_ms`.
    Slew,
}

/// Which ADC channel a [`ConfigError`] is about.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Channel {
    /// Monitor photodiode.
    Monitor,
    /// Current sense.
    CurrentSense,
    /// Supply.
    Supply,
    /// The DAC.
    Dac,
    /// Forward voltage.
    ForwardVoltage,
}

/// Why a [`Config`] was refused. Each variant carries the offending values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ConfigError {
    /// A channel's `unit_exp` lies outside [`Units::MIN_EXP`] ..=
    /// [`Units::MAX_EXP`], or differs from the channel it must agree with
    /// (the DAC's from the current sense's, the forward voltage's from the
    /// supply's).
    UnitOutOfRange {
        /// The channel.
        channel: Channel,
        /// Its configured decade.
        unit_exp: i8,
    },
    /// `tick_hz` is zero.
    TickRateZero,
    /// `tick_hz` above the 1 MHz the per-tick arithmetic is sized for.
    TickRateTooHigh {
        /// Configured rate.
        tick_hz: u32,
    },
    /// The absolute maximum current is zero or negative.
    AbsoluteLimitNotPositive {
        /// Configured value.
        absolute_max_iu: Fx,
    },
    /// The ceiling is zero or negative.
    CeilingNotPositive {
        /// Configured value.
        ceiling_iu: Fx,
    },
    /// The ceiling is above the absolute limit.
    CeilingAboveAbsolute {
        /// Configured ceiling.
        ceiling_iu: Fx,
        /// Configured absolute limit.
        absolute_max_iu: Fx,
    },
    /// The overcurrent trip is not above the ceiling (it would trip in normal use).
    OvercurrentNotAboveCeiling {
        /// Configured trip.
        overcurrent_iu: Fx,
        /// Configured ceiling.
        ceiling_iu: Fx,
    },
    /// The overcurrent trip is above the absolute limit.
    OvercurrentAboveAbsolute {
        /// Configured trip.
        overcurrent_iu: Fx,
        /// Configured absolute limit.
        absolute_max_iu: Fx,
    },
    /// A ramp or slew rate is zero or negative.
    RampRateNotPositive {
        /// Which rate.
        which: RampKind,
        /// Configured rate per ms.
        per_ms: Fx,
    },
    /// A ramp rate is so small it rounds to zero per tick.
    RampRateBelowResolution {
        /// Which rate.
        which: RampKind,
        /// Configured rate per ms.
        per_ms: Fx,
        /// Tick rate.
        tick_hz: u32,
    },
    /// The emission delay does not fit in a 32-bit tick count.
    EmissionDelayTooLong {
        /// Configured delay.
        emission_delay_ms: u32,
    },
    /// The hand-over fraction is not in (0, 1].
    HandoverFractionOutOfRange {
        /// Configured fraction.
        fraction: Fx,
    },
    /// The power setpoint range is empty or negative.
    PowerRangeInvalid {
        /// Configured minimum.
        min_setpoint_ou: Fx,
        /// Configured maximum.
        max_setpoint_ou: Fx,
    },
    /// The runaway trip is not above the highest setpoint.
    RunawayNotAboveSetpointRange {
        /// Configured trip.
        runaway_ou: Fx,
        /// Highest setpoint.
        max_setpoint_ou: Fx,
    },
    /// The monitor-loss floor is not below the lowest setpoint's hand-over level.
    MonitorLossFloorNotBelowSetpoints {
        /// Configured floor.
        floor_ou: Fx,
        /// `handover_fraction × min_setpoint_ou`.
        lowest_handover_ou: Fx,
    },
    /// The monitor-loss floor is negative.
    MonitorLossFloorNegative {
        /// Configured floor.
        floor_ou: Fx,
    },
    /// The monitor-loss drive level is not positive or is above the ceiling
    /// (the check could never apply).
    MonitorLossDriveOutOfRange {
        /// Configured level.
        drive_iu: Fx,
        /// Configured ceiling.
        ceiling_iu: Fx,
    },
    /// The derating knee is not below the cut-off.
    DeratingKneeNotBelowCutoff {
        /// Configured knee.
        knee_degc: Fx,
        /// Configured cut-off.
        cutoff_degc: Fx,
    },
    /// The derating floor is negative or above the ceiling.
    DeratingFloorOutOfRange {
        /// Configured floor.
        floor_iu: Fx,
        /// Configured ceiling.
        ceiling_iu: Fx,
    },
    /// The temperature table has fewer than two points.
    TempTableTooShort {
        /// Points given.
        len: usize,
    },
    /// Table counts do not strictly increase, or temperatures are not strictly
    /// monotonic, at point `index`.
    TempTableNotMonotonic {
        /// Index of the first offending point.
        index: usize,
    },
    /// The sensor fault rails are inverted or overlap the table.
    SensorRailsInconsistent {
        /// Configured low rail.
        low_fault_counts: u16,
        /// Configured high rail.
        high_fault_counts: u16,
    },
    /// A debounce count is zero.
    DebounceZero {
        /// The protection.
        fault: Fault,
    },
    /// `missed_tick_limit` is zero (every tick would trip).
    MissedTickLimitZero,
    /// A loop gain is negative (or the proportional gain is zero).
    GainNotPositive {
        /// `true` for the proportional gain, `false` for the integral gain.
        proportional: bool,
        /// Configured gain.
        gain: Fx,
    },
    /// `kp × runaway_ou` does not fit the fixed-point range.
    ProportionalGainOverflow {
        /// Configured gain.
        kp_iu_per_ou: Fx,
        /// The error range it must handle.
        runaway_ou: Fx,
    },
    /// The integral gain per tick does not fit (or rounds to zero).
    IntegralGainOutOfRange {
        /// Configured gain.
        ki_iu_per_ou_ms: Fx,
        /// Tick rate.
        tick_hz: u32,
    },
    /// A calibration gain is zero or negative.
    CalibrationGainNotPositive {
        /// Channel.
        channel: Channel,
    },
    /// A calibration offset lies outside the converter's range.
    CalibrationOffsetOutOfRange {
        /// Channel.
        channel: Channel,
        /// Configured offset.
        offset: i32,
        /// Full scale.
        full_scale: u16,
    },
    /// The ceiling needs a DAC code above the DAC's maximum.
    CeilingNotRepresentable {
        /// Configured ceiling.
        ceiling_iu: Fx,
        /// Code it would need (saturated).
        code: i32,
        /// DAC maximum.
        max_code: u16,
    },
    /// The runaway trip is above what the monitor channel can read.
    RunawayBeyondMonitorRange {
        /// Configured trip.
        runaway_ou: Fx,
        /// Monitor full-scale reading.
        full_scale_ou: Fx,
    },
    /// The overcurrent trip is above what the current sense can read.
    OvercurrentBeyondSenseRange {
        /// Configured trip.
        overcurrent_iu: Fx,
        /// Current-sense full-scale reading.
        full_scale_iu: Fx,
    },
    /// The supply window is empty or beyond the supply channel's range.
    SupplyWindowInvalid {
        /// Configured minimum.
        supply_min_vu: Fx,
        /// Configured maximum.
        supply_max_vu: Fx,
        /// Supply full-scale reading.
        full_scale_vu: Fx,
    },
    /// The mismatch tolerance is zero or negative.
    MismatchToleranceNotPositive {
        /// Configured tolerance.
        tolerance_iu: Fx,
    },
    /// A fast protection's debounce is longer than
    /// [`FAST_DEBOUNCE_MAX_US`] allows at the tick rate.
    FastDebounceTooLong {
        /// The protection (its key: [`debounce_key`]).
        fault: Fault,
        /// Configured debounce, ticks.
        debounce: u16,
        /// Longest accepted, ticks.
        max: u16,
    },
    /// `protection.intermittent_weight` is 0 or above
    /// [`MAX_INTERMITTENT_WEIGHT`].
    IntermittentWeightOutOfRange {
        /// Configured weight.
        weight: u16,
    },
    /// The temperature table does not reach
    /// [`TEMP_COVER_MARGIN_DEGC`] above the derating cut-off: beyond its
    /// end the last segment is extrapolated and over-temperature trips late.
    TempTableShortOfCutoff {
        /// The table's hottest point, degC.
        hottest_degc: Fx,
        /// Cut-off plus margin, degC.
        needed_degc: Fx,
    },
    /// The forward-voltage limits are not `0 <= short < open <= full scale`.
    ForwardVoltageLimitsInvalid {
        /// Configured short floor.
        short_vu: Fx,
        /// Configured open (compliance) level.
        open_vu: Fx,
        /// The channel's full-scale reading.
        full_scale_vu: Fx,
    },
    /// The forward-voltage drive level is not in (0, ceiling].
    ForwardDriveOutOfRange {
        /// Configured level.
        min_drive_iu: Fx,
        /// Configured ceiling.
        ceiling_iu: Fx,
    },
    /// A plausibility point is out of order (temperatures not strictly
    /// increasing), has a negative threshold or a slope not positive, or
    /// there is none (`index` 0 of an empty list).
    PlausibilityPointInvalid {
        /// Index of the first offending point.
        index: usize,
    },
    /// The plausibility margins are not `0 <= warning <= fault <= 4`, or the
    /// allowance is negative.
    PlausibilityMarginsInvalid {
        /// Configured warning margin.
        warning_margin: Fx,
        /// Configured fault margin.
        fault_margin: Fx,
        /// Configured allowance, iu.
        allowance_iu: Fx,
    },
}

impl core::fmt::Display for ConfigError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        use ConfigError::*;
        match *self {
            UnitOutOfRange { channel, unit_exp } => write!(
                f,
                "{channel:?} unit 1e{unit_exp} outside 1e{} ..= 1e{} or not its quantity's (the DAC's is the current sense's, the forward voltage's the supply's)",
                Units::MIN_EXP,
                Units::MAX_EXP
            ),
            TickRateZero => write!(f, "tick rate is zero"),
            TickRateTooHigh { tick_hz } => write!(f, "tick rate {tick_hz} Hz above 1 MHz"),
            AbsoluteLimitNotPositive { absolute_max_iu } => {
                write!(f, "absolute current limit {absolute_max_iu} iu is not positive")
            }
            CeilingNotPositive { ceiling_iu } => write!(f, "ceiling {ceiling_iu} iu is not positive"),
            CeilingAboveAbsolute { ceiling_iu, absolute_max_iu } => {
                write!(f, "ceiling {ceiling_iu} iu above absolute limit {absolute_max_iu} iu")
            }
            OvercurrentNotAboveCeiling { overcurrent_iu, ceiling_iu } => {
                write!(f, "overcurrent trip {overcurrent_iu} iu not above ceiling {ceiling_iu} iu")
            }
            OvercurrentAboveAbsolute { overcurrent_iu, absolute_max_iu } => write!(
                f,
                "overcurrent trip {overcurrent_iu} iu above absolute limit {absolute_max_iu} iu"
            ),
            RampRateNotPositive { which, per_ms } => {
                write!(f, "{which:?} rate {per_ms}/ms is not positive")
            }
            RampRateBelowResolution { which, per_ms, tick_hz } => {
                write!(f, "{which:?} rate {per_ms}/ms rounds to zero per tick at {tick_hz} Hz")
            }
            EmissionDelayTooLong { emission_delay_ms } => {
                write!(f, "emission delay {emission_delay_ms} ms overflows the tick count")
            }
            HandoverFractionOutOfRange { fraction } => {
                write!(f, "hand-over fraction {fraction} not in (0, 1]")
            }
            PowerRangeInvalid { min_setpoint_ou, max_setpoint_ou } => write!(
                f,
                "power setpoint range {min_setpoint_ou}..{max_setpoint_ou} ou is empty or negative"
            ),
            RunawayNotAboveSetpointRange { runaway_ou, max_setpoint_ou } => write!(
                f,
                "runaway trip {runaway_ou} ou not above the highest setpoint {max_setpoint_ou} ou"
            ),
            MonitorLossFloorNotBelowSetpoints { floor_ou, lowest_handover_ou } => write!(
                f,
                "monitor-loss floor {floor_ou} ou not below the lowest hand-over level {lowest_handover_ou} ou"
            ),
            MonitorLossFloorNegative { floor_ou } => {
                write!(f, "monitor-loss floor {floor_ou} ou is negative")
            }
            MonitorLossDriveOutOfRange { drive_iu, ceiling_iu } => write!(
                f,
                "monitor-loss drive level {drive_iu} iu not in (0, ceiling {ceiling_iu} iu]"
            ),
            DeratingKneeNotBelowCutoff { knee_degc, cutoff_degc } => write!(
                f,
                "derating knee {knee_degc} degC not below cut-off {cutoff_degc} degC"
            ),
            DeratingFloorOutOfRange { floor_iu, ceiling_iu } => {
                write!(f, "derating floor {floor_iu} iu not in [0, ceiling {ceiling_iu} iu]")
            }
            TempTableTooShort { len } => write!(f, "temperature table has {len} points, needs 2"),
            TempTableNotMonotonic { index } => {
                write!(f, "temperature table not strictly monotonic at point {index}")
            }
            SensorRailsInconsistent { low_fault_counts, high_fault_counts } => write!(
                f,
                "sensor fault rails {low_fault_counts}/{high_fault_counts} counts inverted or inside the table"
            ),
            DebounceZero { fault } => write!(f, "debounce of {fault} is zero"),
            MissedTickLimitZero => write!(f, "missed-tick limit is zero"),
            GainNotPositive { proportional, gain } => write!(
                f,
                "{} gain {gain} is not positive",
                if proportional { "proportional" } else { "integral" }
            ),
            ProportionalGainOverflow { kp_iu_per_ou, runaway_ou } => write!(
                f,
                "kp {kp_iu_per_ou} iu/ou times {runaway_ou} ou overflows the fixed-point range"
            ),
            IntegralGainOutOfRange { ki_iu_per_ou_ms, tick_hz } => write!(
                f,
                "ki {ki_iu_per_ou_ms} iu/(ou ms) at {tick_hz} Hz does not fit the per-tick gain"
            ),
            CalibrationGainNotPositive { channel } => {
                write!(f, "{channel:?} calibration gain is not positive")
            }
            CalibrationOffsetOutOfRange { channel, offset, full_scale } => write!(
                f,
                "{channel:?} calibration offset {offset} outside 0..={full_scale}"
            ),
            CeilingNotRepresentable { ceiling_iu, code, max_code } => write!(
                f,
                "ceiling {ceiling_iu} iu needs DAC code {code} above {max_code}"
            ),
            RunawayBeyondMonitorRange { runaway_ou, full_scale_ou } => write!(
                f,
                "runaway trip {runaway_ou} ou beyond the monitor full scale {full_scale_ou} ou"
            ),
            OvercurrentBeyondSenseRange { overcurrent_iu, full_scale_iu } => write!(
                f,
                "overcurrent trip {overcurrent_iu} iu beyond the sense full scale {full_scale_iu} iu"
            ),
            SupplyWindowInvalid { supply_min_vu, supply_max_vu, full_scale_vu } => write!(
                f,
                "supply window {supply_min_vu}..{supply_max_vu} vu empty or beyond full scale {full_scale_vu} vu"
            ),
            MismatchToleranceNotPositive { tolerance_iu } => {
                write!(f, "mismatch tolerance {tolerance_iu} iu is not positive")
            }
            FastDebounceTooLong { fault, debounce, max } => write!(
                f,
                "{} = {debounce} ticks: {fault} is a fast protection, at most {max} ticks ({} us) at this tick rate",
                debounce_key(fault),
                FAST_DEBOUNCE_MAX_US
            ),
            IntermittentWeightOutOfRange { weight } => write!(
                f,
                "protection.intermittent_weight = {weight} not in 1..={MAX_INTERMITTENT_WEIGHT}"
            ),
            TempTableShortOfCutoff { hottest_degc, needed_degc } => write!(
                f,
                "temperature table ends at {hottest_degc} degC: it must reach the derating cut-off plus {} degC, {needed_degc} degC",
                TEMP_COVER_MARGIN_DEGC
            ),
            ForwardVoltageLimitsInvalid { short_vu, open_vu, full_scale_vu } => write!(
                f,
                "forward_voltage short {short_vu} vu / open {open_vu} vu not 0 <= short < open <= full scale {full_scale_vu} vu"
            ),
            ForwardDriveOutOfRange { min_drive_iu, ceiling_iu } => write!(
                f,
                "forward_voltage.min_drive_iu = {min_drive_iu} iu not in (0, ceiling {ceiling_iu} iu]"
            ),
            PlausibilityPointInvalid { index } => write!(
                f,
                "plausibility.points[{index}]: temperatures must rise strictly, thresholds be >= 0 and slopes > 0 (and one point at least)"
            ),
            PlausibilityMarginsInvalid { warning_margin, fault_margin, allowance_iu } => write!(
                f,
                "plausibility margins warning {warning_margin} / fault {fault_margin} not 0 <= warning <= fault <= 4, or allowance {allowance_iu} iu negative"
            ),
        }
    }
}

impl core::error::Error for ConfigError {}

/// A configuration that passed [`Config::validate`], with per-tick values
/// derived from it. Cannot be built any other way.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ValidConfig {
    cfg: Config,
    pub(crate) t: PerTick,
}

/// Quantities per tick, derived once.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct PerTick {
    pub soft_start_iu: Fx,
    pub soft_stop_iu: Fx,
    pub slew_iu: Fx,
    pub setpoint_ou: Fx,
    pub emission_delay: u32,
    pub ki: Gain,
    /// The fault a temperature reading at or below the low rail means
    /// (sensor open or short, per [`TempCal::open_rail`]), as a mask bit.
    pub low_rail_bit: u32,
    /// The fault a reading at or above the high rail means, as a mask bit.
    pub high_rail_bit: u32,
    /// The level of the leaky debounce at which each fault trips
    /// (`intermittent_weight × debounce`), indexed by its bit (the slots
    /// of no fault are 0).
    pub trip_at: [u32; SLOTS],
    /// `intermittent_weight`: what a tick with the condition present adds.
    pub weight: u32,
    /// `-mismatch_tolerance_iu` (wrapping), the lower end of the window of
    /// drive differences that raise no mismatch.
    pub neg_mismatch_tolerance_iu: Fx,
}

const MAX_TICK_HZ: u32 = 1_000_000;

fn positive_rate(which: RampKind, per_ms: Fx, tick_hz: u32) -> Result<Fx, ConfigError> {
    if per_ms <= Fx::ZERO {
        return Err(ConfigError::RampRateNotPositive { which, per_ms });
    }
    match per_tick(per_ms, tick_hz) {
        Some(v) if v > Fx::ZERO => Ok(v),
        _ => Err(ConfigError::RampRateBelowResolution {
            which,
            per_ms,
            tick_hz,
        }),
    }
}

/// Every channel's unit in range, the DAC's equal to the current sense's
/// and the forward voltage's to the supply's (one refusal site: the check
/// costs little flash on Cortex-M0).
fn check_units(c: &Config) -> Result<(), ConfigError> {
    const fn out(e: i8) -> bool {
        e < Units::MIN_EXP || e > Units::MAX_EXP
    }
    let cal = &c.calibration;
    let (m, i, v) = (
        cal.monitor.unit_exp,
        cal.current_sense.unit_exp,
        cal.supply.unit_exp,
    );
    let fv = match &c.forward_voltage {
        Some(f) => f.cal.unit_exp,
        None => v,
    };
    let (channel, unit_exp) = if out(m) {
        (Channel::Monitor, m)
    } else if out(i) {
        (Channel::CurrentSense, i)
    } else if out(v) {
        (Channel::Supply, v)
    } else if cal.dac.unit_exp != i {
        (Channel::Dac, cal.dac.unit_exp)
    } else if fv != v {
        (Channel::ForwardVoltage, fv)
    } else {
        return Ok(());
    };
    Err(ConfigError::UnitOutOfRange { channel, unit_exp })
}

fn check_adc(channel: Channel, cal: &AdcCal) -> Result<Fx, ConfigError> {
    if cal.units_per_count <= Gain::ZERO {
        return Err(ConfigError::CalibrationGainNotPositive { channel });
    }
    if cal.offset_counts < 0 || cal.offset_counts >= i32::from(cal.full_scale_counts) {
        return Err(ConfigError::CalibrationOffsetOutOfRange {
            channel,
            offset: cal.offset_counts,
            full_scale: cal.full_scale_counts,
        });
    }
    Ok(scale_counts(
        i32::from(cal.full_scale_counts) - cal.offset_counts,
        cal.units_per_count,
    ))
}

impl Config {
    /// What the numbers of this configuration mean: the board's current,
    /// optical-power and voltage units (fields ending `_iu`, `_ou`, `_vu`),
    /// as its calibration names them (the current sense's, the monitor's
    /// and the supply's `unit_exp`).
    pub const fn units(&self) -> Units {
        Units {
            current_exp: self.calibration.current_sense.unit_exp,
            power_exp: self.calibration.monitor.unit_exp,
            voltage_exp: self.calibration.supply.unit_exp,
        }
    }

    /// Check every field and the relations between them; derive the
    /// per-tick quantities. The first problem found is returned.
    pub fn validate(self) -> Result<ValidConfig, ConfigError> {
        use ConfigError as E;
        let c = &self;
        check_units(c)?;
        // Tick rate.
        if c.tick_hz == 0 {
            return Err(E::TickRateZero);
        }
        if c.tick_hz > MAX_TICK_HZ {
            return Err(E::TickRateTooHigh { tick_hz: c.tick_hz });
        }
        // Current limits.
        let cur = c.current;
        if cur.absolute_max_iu <= Fx::ZERO {
            return Err(E::AbsoluteLimitNotPositive {
                absolute_max_iu: cur.absolute_max_iu,
            });
        }
        if cur.ceiling_iu <= Fx::ZERO {
            return Err(E::CeilingNotPositive {
                ceiling_iu: cur.ceiling_iu,
            });
        }
        if cur.ceiling_iu > cur.absolute_max_iu {
            return Err(E::CeilingAboveAbsolute {
                ceiling_iu: cur.ceiling_iu,
                absolute_max_iu: cur.absolute_max_iu,
            });
        }
        let p = c.protection;
        if p.overcurrent_iu <= cur.ceiling_iu {
            return Err(E::OvercurrentNotAboveCeiling {
                overcurrent_iu: p.overcurrent_iu,
                ceiling_iu: cur.ceiling_iu,
            });
        }
        if p.overcurrent_iu > cur.absolute_max_iu {
            return Err(E::OvercurrentAboveAbsolute {
                overcurrent_iu: p.overcurrent_iu,
                absolute_max_iu: cur.absolute_max_iu,
            });
        }
        // Ramps.
        let r = c.ramp;
        let soft_start_iu = positive_rate(RampKind::SoftStart, r.soft_start_iu_per_ms, c.tick_hz)?;
        let soft_stop_iu = positive_rate(RampKind::SoftStop, r.soft_stop_iu_per_ms, c.tick_hz)?;
        let setpoint_ou = positive_rate(RampKind::Setpoint, r.setpoint_ou_per_ms, c.tick_hz)?;
        let slew_iu = positive_rate(RampKind::Slew, c.apc.slew_iu_per_ms, c.tick_hz)?;
        let emission_delay =
            ms_to_ticks(r.emission_delay_ms, c.tick_hz).ok_or(E::EmissionDelayTooLong {
                emission_delay_ms: r.emission_delay_ms,
            })?;
        if r.handover_fraction <= Fx::ZERO || r.handover_fraction > Fx::ONE {
            return Err(E::HandoverFractionOutOfRange {
                fraction: r.handover_fraction,
            });
        }
        // Power range and the monitor checks that depend on it.
        let pw = c.power;
        if pw.min_setpoint_ou <= Fx::ZERO || pw.min_setpoint_ou > pw.max_setpoint_ou {
            return Err(E::PowerRangeInvalid {
                min_setpoint_ou: pw.min_setpoint_ou,
                max_setpoint_ou: pw.max_setpoint_ou,
            });
        }
        if p.runaway_ou <= pw.max_setpoint_ou {
            return Err(E::RunawayNotAboveSetpointRange {
                runaway_ou: p.runaway_ou,
                max_setpoint_ou: pw.max_setpoint_ou,
            });
        }
        if p.monitor_loss_floor_ou < Fx::ZERO {
            return Err(E::MonitorLossFloorNegative {
                floor_ou: p.monitor_loss_floor_ou,
            });
        }
        let lowest_handover_ou = pw.min_setpoint_ou.saturating_mul(r.handover_fraction);
        if p.monitor_loss_floor_ou >= lowest_handover_ou {
            return Err(E::MonitorLossFloorNotBelowSetpoints {
                floor_ou: p.monitor_loss_floor_ou,
                lowest_handover_ou,
            });
        }
        if p.monitor_loss_drive_iu <= Fx::ZERO || p.monitor_loss_drive_iu > cur.ceiling_iu {
            return Err(E::MonitorLossDriveOutOfRange {
                drive_iu: p.monitor_loss_drive_iu,
                ceiling_iu: cur.ceiling_iu,
            });
        }
        // Derating.
        let d = c.derating;
        if d.knee_degc >= d.cutoff_degc {
            return Err(E::DeratingKneeNotBelowCutoff {
                knee_degc: d.knee_degc,
                cutoff_degc: d.cutoff_degc,
            });
        }
        if d.floor_iu < Fx::ZERO || d.floor_iu > cur.ceiling_iu {
            return Err(E::DeratingFloorOutOfRange {
                floor_iu: d.floor_iu,
                ceiling_iu: cur.ceiling_iu,
            });
        }
        // Debounces: none zero, the fast ones bounded.
        let fast_max = fast_debounce_max(c.tick_hz);
        for fault in Fault::ALL {
            let n = debounce_ticks(c, fault);
            if n == 0 {
                return Err(E::DebounceZero { fault });
            }
            if fault.is_fast() && n > fast_max {
                return Err(E::FastDebounceTooLong {
                    fault,
                    debounce: n,
                    max: fast_max,
                });
            }
        }
        if p.intermittent_weight == 0 || p.intermittent_weight > MAX_INTERMITTENT_WEIGHT {
            return Err(E::IntermittentWeightOutOfRange {
                weight: p.intermittent_weight,
            });
        }
        if p.missed_tick_limit == 0 {
            return Err(E::MissedTickLimitZero);
        }
        if p.mismatch_tolerance_iu <= Fx::ZERO {
            return Err(E::MismatchToleranceNotPositive {
                tolerance_iu: p.mismatch_tolerance_iu,
            });
        }
        // Loop gains.
        let g = c.apc;
        if g.kp_iu_per_ou <= Fx::ZERO {
            return Err(E::GainNotPositive {
                proportional: true,
                gain: g.kp_iu_per_ou,
            });
        }
        if g.ki_iu_per_ou_ms < Fx::ZERO {
            return Err(E::GainNotPositive {
                proportional: false,
                gain: g.ki_iu_per_ou_ms,
            });
        }
        if g.kp_iu_per_ou.checked_mul(p.runaway_ou).is_none() {
            return Err(E::ProportionalGainOverflow {
                kp_iu_per_ou: g.kp_iu_per_ou,
                runaway_ou: p.runaway_ou,
            });
        }
        let ki = ki_per_tick(g.ki_iu_per_ou_ms, c.tick_hz).ok_or(E::IntegralGainOutOfRange {
            ki_iu_per_ou_ms: g.ki_iu_per_ou_ms,
            tick_hz: c.tick_hz,
        })?;
        // Calibration.
        let cal = &c.calibration;
        let monitor_fs = check_adc(Channel::Monitor, &cal.monitor)?;
        let sense_fs = check_adc(Channel::CurrentSense, &cal.current_sense)?;
        let supply_fs = check_adc(Channel::Supply, &cal.supply)?;
        if p.runaway_ou > monitor_fs {
            return Err(E::RunawayBeyondMonitorRange {
                runaway_ou: p.runaway_ou,
                full_scale_ou: monitor_fs,
            });
        }
        if p.overcurrent_iu > sense_fs {
            return Err(E::OvercurrentBeyondSenseRange {
                overcurrent_iu: p.overcurrent_iu,
                full_scale_iu: sense_fs,
            });
        }
        if p.supply_min_vu >= p.supply_max_vu
            || p.supply_min_vu < Fx::ZERO
            || p.supply_max_vu > supply_fs
        {
            return Err(E::SupplyWindowInvalid {
                supply_min_vu: p.supply_min_vu,
                supply_max_vu: p.supply_max_vu,
                full_scale_vu: supply_fs,
            });
        }
        let dac = cal.dac;
        if dac.codes_per_iu <= Fx::ZERO {
            return Err(E::CalibrationGainNotPositive {
                channel: Channel::Dac,
            });
        }
        if dac.offset_codes < 0 || dac.offset_codes >= i32::from(dac.max_code) {
            return Err(E::CalibrationOffsetOutOfRange {
                channel: Channel::Dac,
                offset: dac.offset_codes,
                full_scale: dac.max_code,
            });
        }
        let ceiling_code = dac_code_unclamped(&dac, cur.ceiling_iu);
        if ceiling_code > i64::from(dac.max_code) {
            return Err(E::CeilingNotRepresentable {
                ceiling_iu: cur.ceiling_iu,
                code: crate::units::sat_i32(ceiling_code),
                max_code: dac.max_code,
            });
        }
        // Temperature table.
        let tc = &cal.temperature;
        temp_table::check(&tc.table)?;
        let first_counts = tc.table.first().map_or(0, |p| p.counts);
        let last_counts = tc.table.last().map_or(u16::MAX, |p| p.counts);
        if tc.low_fault_counts >= tc.high_fault_counts
            || tc.low_fault_counts >= first_counts
            || tc.high_fault_counts <= last_counts
        {
            return Err(E::SensorRailsInconsistent {
                low_fault_counts: tc.low_fault_counts,
                high_fault_counts: tc.high_fault_counts,
            });
        }
        // The table's own points must reach past the cut-off: beyond its end
        // the last segment is extrapolated. (The rails lie outside the
        // table, so every reading up to there is between them.)
        let hottest_degc = match (tc.table.first(), tc.table.last()) {
            (Some(a), Some(b)) => a.degc.max(b.degc),
            _ => Fx::MIN,
        };
        let needed_degc = d.cutoff_degc.saturating_add(TEMP_COVER_MARGIN_DEGC);
        if hottest_degc < needed_degc {
            return Err(E::TempTableShortOfCutoff {
                hottest_degc,
                needed_degc,
            });
        }
        if let Some(fv) = &c.forward_voltage {
            let full_scale_vu = check_adc(Channel::ForwardVoltage, &fv.cal)?;
            if fv.short_vu < Fx::ZERO || fv.short_vu >= fv.open_vu || fv.open_vu > full_scale_vu {
                return Err(E::ForwardVoltageLimitsInvalid {
                    short_vu: fv.short_vu,
                    open_vu: fv.open_vu,
                    full_scale_vu,
                });
            }
            if fv.min_drive_iu <= Fx::ZERO || fv.min_drive_iu > cur.ceiling_iu {
                return Err(E::ForwardDriveOutOfRange {
                    min_drive_iu: fv.min_drive_iu,
                    ceiling_iu: cur.ceiling_iu,
                });
            }
        }
        if let Some(pl) = &c.plausibility {
            check_plausibility(pl)?;
        }
        let (low_rail, high_rail) = match tc.open_rail {
            Rail::High => (Fault::SensorShort, Fault::SensorOpen),
            Rail::Low => (Fault::SensorOpen, Fault::SensorShort),
        };
        Ok(ValidConfig {
            t: PerTick {
                soft_start_iu,
                soft_stop_iu,
                slew_iu,
                setpoint_ou,
                emission_delay,
                ki,
                low_rail_bit: low_rail.bit(),
                high_rail_bit: high_rail.bit(),
                trip_at: core::array::from_fn(|i| {
                    u8::try_from(i)
                        .ok()
                        .and_then(Fault::from_index)
                        .map_or(0, |f| {
                            u32::from(debounce_ticks(&self, f))
                                .saturating_mul(u32::from(p.intermittent_weight))
                        })
                }),
                weight: u32::from(p.intermittent_weight),
                neg_mismatch_tolerance_iu: p.mismatch_tolerance_iu.wrapping_neg(),
            },
            cfg: self,
        })
    }
}

/// The debounce of `fault`, ticks (from the protection table,
/// [`Fault::debounce_ticks`]; 1 for the tick-index faults, and for the
/// optional protections of a board without them).
pub fn debounce_ticks(c: &Config, fault: Fault) -> u16 {
    fault.debounce_ticks(c)
}

/// Longest debounce of a fast protection at `tick_hz`, ticks.
pub fn fast_debounce_max(tick_hz: u32) -> u16 {
    let n = u64::from(tick_hz) * u64::from(FAST_DEBOUNCE_MAX_US) / 1_000_000;
    u16::try_from(n.max(1)).unwrap_or(u16::MAX)
}

fn check_plausibility(pl: &Plausibility) -> Result<(), ConfigError> {
    if pl.points.is_empty() {
        return Err(ConfigError::PlausibilityPointInvalid { index: 0 });
    }
    let mut prev: Option<Fx> = None;
    for (index, pt) in pl.points.iter().enumerate() {
        if prev.is_some_and(|t| pt.degc <= t)
            || pt.threshold_iu < Fx::ZERO
            || pt.slope_ou_per_iu <= Fx::ZERO
        {
            return Err(ConfigError::PlausibilityPointInvalid { index });
        }
        prev = Some(pt.degc);
    }
    let four = Fx::lit("4");
    if pl.warning_margin < Fx::ZERO
        || pl.warning_margin > pl.fault_margin
        || pl.fault_margin > four
        || pl.allowance_iu < Fx::ZERO
    {
        return Err(ConfigError::PlausibilityMarginsInvalid {
            warning_margin: pl.warning_margin,
            fault_margin: pl.fault_margin,
            allowance_iu: pl.allowance_iu,
        });
    }
    Ok(())
}

/// Integral gain per tick: `ki_ms × 1000 / tick_hz`, as a [`Gain`].
fn ki_per_tick(ki_iu_per_ou_ms: Fx, tick_hz: u32) -> Option<Gain> {
    if tick_hz == 0 {
        return None;
    }
    // Fx has 16 fractional bits, Gain 24: shift up by 8 first.
    let bits = (ki_iu_per_ou_ms.to_bits() as i64).checked_mul(1000 << 8)? / tick_hz as i64;
    let g = Gain::from_bits(i32::try_from(bits).ok()?);
    if ki_iu_per_ou_ms > Fx::ZERO && g == Gain::ZERO {
        return None;
    }
    Some(g)
}

/// [`dac_code_unclamped`] clamped to `[0, max_code]`, in 32 bits: the
/// rounded product `(ma × codes + 2^31) >> 32` lies within ±2^30, and a
/// saturating add of the offset lands on the same side of the clamp limits
/// as the exact 64-bit sum, so the code is the same.
#[inline]
pub(crate) fn dac_code_clamped(dac: &DacCal, ma: Fx) -> u16 {
    let wide = i64::from(ma.to_bits()) * i64::from(dac.codes_per_iu.to_bits());
    let scaled = (wide.wrapping_add(1 << 31) >> 32) as i32;
    let code = scaled.saturating_add(dac.offset_codes);
    if code <= 0 {
        0
    } else if code >= i32::from(dac.max_code) {
        dac.max_code
    } else {
        code as u16
    }
}

/// [`ValidConfig::drive_code`] for the DAC `dac` and the ceiling
/// `ceiling_iu` of a validated configuration.
#[inline]
fn drive_code(dac: &DacCal, ceiling_iu: Fx, drive_iu: Fx) -> u16 {
    // `drive < 0 || drive > ceiling` in one unsigned comparison (the
    // ceiling is positive: a negative drive reads above it).
    if drive_iu.to_bits() as u32 > ceiling_iu.to_bits() as u32 {
        return dac_code_clamped(dac, drive_iu);
    }
    let wide = i64::from(drive_iu.to_bits()) * i64::from(dac.codes_per_iu.to_bits());
    let code = ((wide.wrapping_add(1 << 31) >> 32) as i32).wrapping_add(dac.offset_codes);
    code as u16
}

/// The DAC code for a current without clamping, in i64.
pub(crate) fn dac_code_unclamped(dac: &DacCal, ma: Fx) -> i64 {
    // Fx × Fx = 32 fractional bits; round to nearest.
    let wide = (ma.to_bits() as i64) * (dac.codes_per_iu.to_bits() as i64);
    ((wide + (1 << 31)) >> 32) + i64::from(dac.offset_codes)
}

impl ValidConfig {
    /// The configuration as given.
    pub fn config(&self) -> &Config {
        &self.cfg
    }

    /// Proportional gain of the power loop, iu/ou, exactly as the core uses it.
    pub fn kp(&self) -> Fx {
        self.cfg.apc.kp_iu_per_ou
    }

    /// Integral gain per tick, iu/ou, exactly as the core uses it. The loop
    /// is `u[n] = kp·e[n] + I[n]`, `I[n] = I[n-1] + ki·e[n]`, i.e.
    /// `C(z) = kp + ki·z/(z-1)`.
    pub fn ki_per_tick(&self) -> Gain {
        self.t.ki
    }

    /// Soft-start step per tick, iu.
    pub fn soft_start_iu_per_tick(&self) -> Fx {
        self.t.soft_start_iu
    }

    /// Soft-stop step per tick, iu.
    pub fn soft_stop_iu_per_tick(&self) -> Fx {
        self.t.soft_stop_iu
    }

    /// Output slew limit per tick, iu.
    pub fn slew_iu_per_tick(&self) -> Fx {
        self.t.slew_iu
    }

    /// Setpoint ramp per tick, ou.
    pub fn setpoint_ou_per_tick(&self) -> Fx {
        self.t.setpoint_ou
    }

    /// Emission delay in ticks.
    pub fn emission_delay_ticks(&self) -> u32 {
        self.t.emission_delay
    }

    /// The temperature conversion the core uses: counts to degC.
    pub fn counts_to_degc(&self, counts: u16) -> Fx {
        temp_table::degc(&self.cfg.calibration.temperature.table, counts)
    }

    /// [`ValidConfig::counts_to_degc`] through the table segment of the
    /// previous reading (`segment`, updated); the same result.
    #[inline]
    pub(crate) fn counts_to_degc_cached(&self, counts: u16, segment: &mut Window) -> Fx {
        temp_table::degc_cached(&self.cfg.calibration.temperature.table, counts, segment)
    }

    /// The DAC code the core would send for a current (clamped to the DAC range).
    #[inline]
    pub fn dac_code(&self, ma: Fx) -> u16 {
        dac_code_clamped(&self.cfg.calibration.dac, ma)
    }

    /// [`ValidConfig::dac_code`] of a drive the controller commands: one
    /// within `[0, current.ceiling_iu]`. There no clamp is reached: the
    /// rounded product rises with the drive, from 0 at zero to at most the
    /// ceiling's code, which validation keeps at or below `max_code` after
    /// the offset (`0 <= offset_codes`, `codes_per_iu > 0`); so the code is
    /// the product plus the offset, without saturation (the product is
    /// below 2^62, its rounded high word below 2^30). A drive outside that
    /// range (never commanded) is clamped to the DAC range all the same.
    #[inline]
    pub(crate) fn drive_code(&self, drive_iu: Fx) -> u16 {
        drive_code(
            &self.cfg.calibration.dac,
            self.cfg.current.ceiling_iu,
            drive_iu,
        )
    }

    /// Temperature-derated current ceiling at `degc`, iu: the configured
    /// ceiling below the knee, linear to the floor at the cut-off, the floor
    /// beyond. (The absolute limit is always above it.)
    pub fn derated_ceiling_iu(&self, degc: Fx) -> Fx {
        let d = &self.cfg.derating;
        let top = self.cfg.current.ceiling_iu;
        if degc <= d.knee_degc {
            return top;
        }
        if degc >= d.cutoff_degc {
            return d.floor_iu;
        }
        // top - (top - floor) × (T - knee) / (cutoff - knee), in i64.
        let span = (top.to_bits() as i64) - (d.floor_iu.to_bits() as i64);
        let num = (degc.to_bits() as i64) - (d.knee_degc.to_bits() as i64);
        let den = (d.cutoff_degc.to_bits() as i64) - (d.knee_degc.to_bits() as i64);
        let drop = if den > 0 { span * num / den } else { span };
        Fx::from_bits(crate::units::sat_i32(top.to_bits() as i64 - drop))
    }

    /// Monitor reading in ou for raw counts.
    pub fn monitor_ou(&self, counts: u16) -> Fx {
        let c = &self.cfg.calibration.monitor;
        scale_counts(i32::from(counts) - c.offset_counts, c.units_per_count)
    }

    /// Sensed current in iu for raw counts.
    pub fn current_iu(&self, counts: u16) -> Fx {
        let c = &self.cfg.calibration.current_sense;
        scale_counts(i32::from(counts) - c.offset_counts, c.units_per_count)
    }

    /// Supply in vu for raw counts.
    pub fn supply_vu(&self, counts: u16) -> Fx {
        let c = &self.cfg.calibration.supply;
        scale_counts(i32::from(counts) - c.offset_counts, c.units_per_count)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dac_code_equals_the_clamped_wide_code() {
        // Every magnitude of current, gain and offset, and every DAC width,
        // against the i64 code clamped to the DAC range.
        let mut x: u64 = 99;
        let mut next = || {
            // A 64-bit LCG (Knuth's MMIX constants, `common practice`).
            x = x
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            let raw = (x >> 32) as i32;
            raw >> ((x >> 27) & 31)
        };
        let extremes = [i32::MIN, -1, 0, 1, 65_535, i32::MAX];
        for round in 0..400_000u32 {
            let mut pick = |k: u32| {
                if (round + k).is_multiple_of(7) {
                    extremes[(round as usize + k as usize) % extremes.len()]
                } else {
                    next()
                }
            };
            let dac = DacCal {
                codes_per_iu: Fx::from_bits(pick(0)),
                offset_codes: pick(1),
                max_code: pick(2) as u16,
                unit_exp: -3,
            };
            let ma = Fx::from_bits(pick(3));
            let want = dac_code_unclamped(&dac, ma).clamp(0, i64::from(dac.max_code)) as u16;
            assert_eq!(dac_code_clamped(&dac, ma), want, "{dac:?} {ma}");
        }
    }

    #[test]
    fn the_drive_code_equals_the_clamped_code() {
        // DACs and ceilings as validation accepts them (a positive gain, an
        // offset below the largest code, the ceiling's code at or below
        // it), drives from zero to the ceiling and beyond either end.
        let mut x: u64 = 7;
        let mut next = || {
            // A 64-bit LCG (Knuth's MMIX constants, `common practice`).
            x = x
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (x >> 32) as u32
        };
        let mut checked = 0u32;
        for _ in 0..200_000 {
            let max_code = (next() as u16).max(1);
            let dac = DacCal {
                codes_per_iu: Fx::from_bits(((next() >> (next() % 31)) as i32).max(1)),
                offset_codes: (next() % u32::from(max_code)) as i32,
                max_code,
                unit_exp: -3,
            };
            let ceiling = Fx::from_bits(((next() >> (next() % 31)) as i32).max(1));
            if dac_code_unclamped(&dac, ceiling) > i64::from(max_code) {
                continue;
            }
            let r = next();
            let drive = match r % 5 {
                0 => Fx::ZERO,
                1 => ceiling,
                2 => Fx::from_bits(next() as i32),
                _ => Fx::from_bits(
                    ((u64::from(next()) * u64::from(ceiling.to_bits() as u32)) >> 32) as i32,
                ),
            };
            assert_eq!(
                drive_code(&dac, ceiling, drive),
                dac_code_clamped(&dac, drive),
                "{dac:?} ceiling {ceiling} drive {drive}"
            );
            checked += 1;
        }
        assert!(checked > 10_000, "{checked} cases");
    }
}
