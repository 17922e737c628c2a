//! Every protection in one place: the condition each one watches, its
//! limit, its debounce, and in which states it is armed.
//!
//! A limit is the first value that trips (upper limits trip at `>=`, lower
//! limits at `<=`). Conditions are evaluated in every state, so a clear or
//! an enable request can be refused while one is still present; a
//! protection *trips* only in the states where it is armed:
//!
//! | protection | armed in |
//! |---|---|
//! | overcurrent, monitor runaway, drive mismatch, external fault | every state (light or current while off is a hardware failure; so is a board fault input) |
//! | interlock, sensor open/short, over-temperature, supply, missed ticks, tick order | Arming, Ramping, Regulating, Stopping (in Off they refuse `Enable`) |
//! | monitor loss, power implausible, diode open/short | Ramping, Regulating (they need drive) |
//!
//! ## The leaky debounce and its bound
//!
//! Each protection has a level `L` (starting at 0). A tick with its
//! condition present adds the weight `w`
//! ([`crate::config::Protection::intermittent_weight`]), a tick without
//! takes 1 away (never below 0); it trips when `L >= w·N`, `N` its debounce
//! (the level is held at `w·N`). A steady condition therefore trips on its
//! `N`-th tick, exactly as a consecutive-tick debounce would, but a clean
//! tick no longer restarts the count.
//!
//! **Bound.** Over any `n` consecutive ticks in which the condition is
//! present on `k` of them, `L` rises by at least `(w + 1)·k − n` (a present
//! tick adds `w`, a clean one takes at most 1, and the floor at 0 only
//! helps). So while the protection is armed it has tripped by the first
//! tick at which `(w + 1)·k − n >= w·N`. For a condition present in a
//! fraction `d > 1/(w + 1)` of the ticks (`k >= d·n` over every such
//! stretch), that is within
//!
//! ```text
//! n_max = ceil( w·N / ((w + 1)·d − 1) ) ticks.
//! ```
//!
//! Example: `w = 3`, `N = 20`, `d = 0.95` (an open contact that reads light
//! one tick in twenty): at most 22 ticks; `d = 0.5`: at most 60 ticks. A
//! condition present in at most `1/(w + 1)` of the ticks may never trip.
//!
//! The fast protections ([`Fault::is_fast`]) have their `N` bounded by
//! validation ([`crate::config::FAST_DEBOUNCE_MAX_US`]), so their bound is
//! at most `w·N_max / ((w + 1)·d − 1)` ticks of a tick rate's 500 µs.
//!
//! Current-for-power plausibility ([`crate::config::Plausibility`]) is a
//! slow protection: it is evaluated every [`SLOW_EVERY`] ticks and its
//! condition is held in between (it counts on every tick like the others).

use crate::config::{Plausibility, Rail, ValidConfig};
use crate::fault::{Fault, FaultLog, FaultRecord, FaultSet};
use crate::io::State;
use crate::temp_table::Window;
use crate::units::{scale_counts, Fx};

/// Calibrated measurements of one sample, plus the tick gap.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Measurements {
    /// Monitor reading, front-facet mW.
    pub monitor_mw: Fx,
    /// Sensed drive current, mA.
    pub current_ma: Fx,
    /// Temperature, degC (meaningless while `sensor_at_rail`).
    pub temp_degc: Fx,
    /// Raw temperature counts.
    pub temp_counts: u16,
    /// Temperature sensor reads at a fault rail.
    pub sensor_at_rail: bool,
    /// Supply, mV.
    pub supply_mv: Fx,
    /// Interlock closed.
    pub interlock_closed: bool,
    /// Ticks missing before this sample: the index step less one (0 when
    /// it stepped by one). A repeated index reads `u32::MAX` and a backward
    /// one at least `2^31 - 1` ([`Fault::TickOrder`]).
    pub missed_ticks: u32,
    /// Forward voltage, mV (zero on a board without the channel).
    pub forward_mv: Fx,
    /// The external fault input is asserted.
    pub external_fault: bool,
}

/// How often the slow protections (current-for-power plausibility) are
/// evaluated, ticks (a power of two: the tick index's low bits are zero).
pub const SLOW_EVERY: u32 = 32;

/// A `missed_ticks` at or above this is a repeated or backward index.
const TICK_ORDER_MISSED: u32 = i32::MAX as u32;

impl Measurements {
    /// Calibrate a sample. `temp_segment` is the temperature table window
    /// of the previous sample (updated; see
    /// [`crate::temp_table::degc_cached`]); `last_cmd_ma` the command that
    /// produced the sample. Also returns the conditions read straight off
    /// the sample (sensor open, short; external fault; diode open, short)
    /// as a mask, for [`Protections::check`]; its sensor bits are empty
    /// exactly when `sensor_at_rail` is false.
    #[inline]
    pub(crate) fn from_sample(
        cfg: &ValidConfig,
        s: &crate::io::Sample,
        missed_ticks: u32,
        last_cmd_ma: Fx,
        temp_segment: &mut Window,
    ) -> (Self, u32) {
        // The temperature first: its window may have to be found again (a
        // call), before any other value is live.
        let temp_degc = cfg.counts_to_degc_cached(s.temp_counts, temp_segment);
        let tc = &cfg.config().calibration.temperature;
        // The rail faults (open or short, per the configured open rail) as
        // mask bits derived at validation (both non-zero).
        let rails = if s.temp_counts <= tc.low_fault_counts {
            cfg.t.low_rail_bit
        } else {
            0
        } | if s.temp_counts >= tc.high_fault_counts {
            cfg.t.high_rail_bit
        } else {
            0
        };
        let mut direct = rails;
        if s.external_fault {
            direct |= bit(Fault::ExternalFault);
        }
        let mut forward_mv = Fx::ZERO;
        if let (Some(fv), Some(counts)) = (&cfg.config().forward_voltage, s.forward_counts) {
            forward_mv = scale_counts(
                i32::from(counts) - fv.cal.offset_counts,
                fv.cal.units_per_count,
            );
            if last_cmd_ma >= fv.min_drive_ma {
                if forward_mv >= fv.open_mv {
                    direct |= bit(Fault::DiodeOpen);
                }
                if forward_mv <= fv.short_mv {
                    direct |= bit(Fault::DiodeShort);
                }
            }
        }
        let m = Measurements {
            monitor_mw: cfg.monitor_mw(s.monitor_counts),
            current_ma: cfg.current_ma(s.current_counts),
            temp_degc,
            temp_counts: s.temp_counts,
            sensor_at_rail: rails != 0,
            supply_mv: cfg.supply_mv(s.supply_counts),
            interlock_closed: s.interlock_closed,
            missed_ticks,
            forward_mv,
            external_fault: s.external_fault,
        };
        (m, direct)
    }
}

/// The leaky debounce level of every protection, and the slow conditions.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct Protections {
    levels: [u32; Fault::COUNT],
    /// Bit mask (as [`FaultSet`]) of the levels that are not zero.
    counting: u32,
    /// Slow conditions present at their latest evaluation, held.
    slow: u32,
}

/// Result of one evaluation.
pub(crate) struct Verdict {
    /// Conditions present in this sample (not debounced).
    pub present: FaultSet,
    /// Faults that tripped on this sample.
    pub tripped: FaultSet,
}

/// Bit of `fault` in a [`FaultSet`] mask.
const fn bit(fault: Fault) -> u32 {
    fault.bit()
}

/// Faults armed in every state (light or current while off is a hardware
/// failure).
const ALWAYS_ARMED: u32 = bit(Fault::Overcurrent)
    | bit(Fault::MonitorRunaway)
    | bit(Fault::DriveMismatch)
    | bit(Fault::ExternalFault);

/// Every fault.
const ALL_FAULTS: u32 = Fault::ALL_BITS;

/// Faults that need drive: armed only while ramping or regulating.
const NEED_DRIVE: u32 = bit(Fault::MonitorLoss)
    | bit(Fault::PowerImplausible)
    | bit(Fault::DiodeOpen)
    | bit(Fault::DiodeShort);

/// The faults armed in `state`, as a mask.
const fn armed(state: State) -> u32 {
    match state {
        State::Off | State::Latched => ALWAYS_ARMED,
        State::Arming | State::Stopping => ALL_FAULTS & !NEED_DRIVE,
        State::Ramping | State::Regulating => ALL_FAULTS,
    }
}

fn saturating_fx(v: u32) -> Fx {
    Fx::checked_from_num(v).unwrap_or(Fx::MAX)
}

/// `|sensed - commanded|`, mA.
fn mismatch_ma(m: &Measurements, last_cmd_ma: Fx) -> Fx {
    m.current_ma.saturating_sub(last_cmd_ma).saturating_abs()
}

/// `|sensed - commanded| < tolerance` (the absolute value saturating, as
/// [`mismatch_ma`]), as a window of the difference: the same test for
/// every tolerance (the negated tolerance is derived at validation,
/// wrapping, so a tolerance of `Fx::MIN` gives an empty window as the
/// saturated absolute value does).
#[inline]
fn mismatch_within(cfg: &ValidConfig, m: &Measurements, last_cmd_ma: Fx) -> bool {
    difference_within(
        m.current_ma,
        last_cmd_ma,
        cfg.config().protection.mismatch_tolerance_ma,
        cfg.t.neg_mismatch_tolerance_ma,
    )
}

/// `|a - b|` (saturating) below `tol`, with `neg_tol = tol.wrapping_neg()`.
#[inline]
fn difference_within(a: Fx, b: Fx, tol: Fx, neg_tol: Fx) -> bool {
    let diff = a.saturating_sub(b);
    diff > neg_tol && diff < tol
}

/// Whether no condition at all is present in one sample: the negation of
/// every comparison in [`present_mask`], tested one after the other so
/// that the usual tick stops at none and builds no mask.
#[inline]
fn quiet(
    cfg: &ValidConfig,
    m: &Measurements,
    rails: u32,
    last_cmd_ma: Fx,
    light_expected_ma: impl Fn() -> Fx,
) -> bool {
    let c = cfg.config();
    let p = &c.protection;
    rails == 0
        && m.current_ma < p.overcurrent_ma
        && m.monitor_mw < p.runaway_mw
        && m.interlock_closed
        && m.supply_mv > p.supply_min_mv
        && m.supply_mv < p.supply_max_mv
        && m.temp_degc < c.derating.cutoff_degc
        && mismatch_within(cfg, m, last_cmd_ma)
        && m.missed_ticks < u32::from(p.missed_tick_limit)
        && !(m.monitor_mw <= p.monitor_loss_floor_mw
            && last_cmd_ma > Fx::ZERO
            && last_cmd_ma >= light_expected_ma())
}

/// The conditions present in one sample, as a mask. Each is a plain
/// comparison of a calibrated value with its limit; `rails` are the
/// sensor-rail conditions from [`Measurements::from_sample`].
#[inline]
fn present_mask(
    cfg: &ValidConfig,
    m: &Measurements,
    rails: u32,
    last_cmd_ma: Fx,
    light_expected_ma: impl Fn() -> Fx,
) -> u32 {
    let c = cfg.config();
    let p = &c.protection;
    let flag = |on: bool, fault: Fault| if on { bit(fault) } else { 0 };
    rails
        | flag(m.current_ma >= p.overcurrent_ma, Fault::Overcurrent)
        | flag(m.monitor_mw >= p.runaway_mw, Fault::MonitorRunaway)
        | flag(
            m.monitor_mw <= p.monitor_loss_floor_mw
                && last_cmd_ma > Fx::ZERO
                && last_cmd_ma >= light_expected_ma(),
            Fault::MonitorLoss,
        )
        | flag(
            rails == 0 && m.temp_degc >= c.derating.cutoff_degc,
            Fault::OverTemperature,
        )
        | flag(!m.interlock_closed, Fault::InterlockOpen)
        | flag(m.supply_mv <= p.supply_min_mv, Fault::SupplyUnder)
        | flag(m.supply_mv >= p.supply_max_mv, Fault::SupplyOver)
        | flag(!mismatch_within(cfg, m, last_cmd_ma), Fault::DriveMismatch)
        | flag(
            m.missed_ticks >= u32::from(p.missed_tick_limit) && m.missed_ticks < TICK_ORDER_MISSED,
            Fault::MissedTicks,
        )
        | flag(m.missed_ticks >= TICK_ORDER_MISSED, Fault::TickOrder)
}

/// Record the tripped fault of bit `index` in the log. Out of line: it
/// runs once per trip.
#[cold]
#[inline(never)]
fn record_trip(
    log: &mut FaultLog,
    cfg: &ValidConfig,
    m: &Measurements,
    last_cmd_ma: Fx,
    index: usize,
    tick: u32,
) {
    if let Some(&fault) = Fault::ALL.get(index) {
        log.record(trip_record(cfg, m, last_cmd_ma, fault, tick));
    }
}

/// The record of a tripped fault: the measured value and the limit it
/// reached, in [`Fault::unit`]. Built only when a fault trips.
#[inline]
fn trip_record(
    cfg: &ValidConfig,
    m: &Measurements,
    last_cmd_ma: Fx,
    fault: Fault,
    tick: u32,
) -> FaultRecord {
    let c = cfg.config();
    let p = &c.protection;
    let tc = &c.calibration.temperature;
    // Counts above the Fx range (32 767) saturate in the records.
    let counts = |n: u16| Fx::saturating_from_num(n);
    let open_at_high = tc.open_rail == Rail::High;
    let (measured, limit) = match fault {
        Fault::Overcurrent => (m.current_ma, p.overcurrent_ma),
        Fault::MonitorRunaway => (m.monitor_mw, p.runaway_mw),
        Fault::MonitorLoss => (m.monitor_mw, p.monitor_loss_floor_mw),
        Fault::SensorOpen => (
            counts(m.temp_counts),
            counts(if open_at_high {
                tc.high_fault_counts
            } else {
                tc.low_fault_counts
            }),
        ),
        Fault::SensorShort => (
            counts(m.temp_counts),
            counts(if open_at_high {
                tc.low_fault_counts
            } else {
                tc.high_fault_counts
            }),
        ),
        Fault::OverTemperature => (m.temp_degc, c.derating.cutoff_degc),
        Fault::InterlockOpen => (Fx::from_num(u8::from(m.interlock_closed)), Fx::ONE),
        Fault::SupplyUnder => (m.supply_mv, p.supply_min_mv),
        Fault::SupplyOver => (m.supply_mv, p.supply_max_mv),
        Fault::DriveMismatch => (mismatch_ma(m, last_cmd_ma), p.mismatch_tolerance_ma),
        Fault::MissedTicks => (
            saturating_fx(m.missed_ticks),
            saturating_fx(u32::from(p.missed_tick_limit)),
        ),
        // The index step (0 repeated, negative backward) and the smallest
        // accepted step.
        Fault::TickOrder => (
            Fx::saturating_from_num(m.missed_ticks.wrapping_add(1) as i32),
            Fx::ONE,
        ),
        // The bound at the tripping sample.
        Fault::PowerImplausible => (
            m.current_ma,
            c.plausibility
                .as_ref()
                .map_or(Fx::MAX, |pl| plausibility(pl, m).2),
        ),
        Fault::DiodeOpen => (
            m.forward_mv,
            c.forward_voltage.map_or(Fx::ZERO, |f| f.open_mv),
        ),
        Fault::DiodeShort => (
            m.forward_mv,
            c.forward_voltage.map_or(Fx::ZERO, |f| f.short_mv),
        ),
        Fault::ExternalFault => (Fx::from_num(u8::from(m.external_fault)), Fx::ONE),
        // Never a sample condition: the edge or the boot-time restore
        // latches these with their own record.
        Fault::DacBus | Fault::EnablePin | Fault::InterlockPin | Fault::RecordCorrupt => {
            (Fx::ZERO, Fx::ZERO)
        }
    };
    FaultRecord {
        fault,
        tick,
        measured,
        limit,
    }
}

/// Current-for-power plausibility of one sample: whether the sensed
/// current is above the warning bound and above the fault bound, and the
/// fault bound, mA (see [`Plausibility`]). Nothing is implausible while the
/// temperature sensor is at a rail (its own protection covers that).
pub(crate) fn plausibility(pl: &Plausibility, m: &Measurements) -> (bool, bool, Fx) {
    if m.sensor_at_rail {
        return (false, false, Fx::MAX);
    }
    let (threshold_ma, slope) = diode_at(pl, m.temp_degc);
    let power = m.monitor_mw.max(Fx::ZERO);
    // (Validation keeps every slope positive; a zero one reads as infinite.)
    let need_ma = threshold_ma.saturating_add(power.checked_div(slope).unwrap_or(Fx::MAX));
    let bound = |margin: Fx| {
        need_ma
            .saturating_add(need_ma.saturating_mul(margin))
            .saturating_add(pl.allowance_ma)
    };
    let fault_max = bound(pl.fault_margin);
    (
        m.current_ma > bound(pl.warning_margin),
        m.current_ma > fault_max,
        fault_max,
    )
}

/// The healthy diode's threshold (mA) and slope (mW/mA) at `degc`: linear
/// between the points, held at the end points outside them.
fn diode_at(pl: &Plausibility, degc: Fx) -> (Fx, Fx) {
    let (Some(first), Some(last)) = (pl.points.first(), pl.points.last()) else {
        return (Fx::ZERO, Fx::MAX);
    };
    if degc <= first.degc {
        return (first.threshold_ma, first.slope_mw_per_ma);
    }
    for w in pl.points.windows(2) {
        if let [a, b] = w {
            if degc <= b.degc {
                let lerp = |ya: Fx, yb: Fx| {
                    let num = i64::from(degc.to_bits()) - i64::from(a.degc.to_bits());
                    let den = i64::from(b.degc.to_bits()) - i64::from(a.degc.to_bits());
                    let dy = i64::from(yb.to_bits()) - i64::from(ya.to_bits());
                    // 0 <= num <= den < 2^32 and |dy| < 2^32: the
                    // quotient is within |dy|.
                    let step = if den > 0 {
                        dy.saturating_mul(num) / den
                    } else {
                        0
                    };
                    Fx::from_bits(crate::units::sat_i32(
                        i64::from(ya.to_bits()).saturating_add(step),
                    ))
                };
                return (
                    lerp(a.threshold_ma, b.threshold_ma),
                    lerp(a.slope_mw_per_ma, b.slope_mw_per_ma),
                );
            }
        }
    }
    (last.threshold_ma, last.slope_mw_per_ma)
}

impl Protections {
    /// Forget all debounce history (after an accepted clear).
    pub(crate) fn reset(&mut self) {
        self.levels = [0; Fault::COUNT];
        self.counting = 0;
    }

    /// Evaluate the slow protections on one sample (the controller calls
    /// this every [`SLOW_EVERY`] ticks); their conditions are held until the
    /// next evaluation. Returns the end-of-life warning.
    #[cold]
    #[inline(never)]
    pub(crate) fn evaluate_slow(&mut self, cfg: &ValidConfig, m: &Measurements) -> bool {
        let Some(pl) = &cfg.config().plausibility else {
            return false;
        };
        let (warn, fault, _) = plausibility(pl, m);
        self.slow = if fault {
            bit(Fault::PowerImplausible)
        } else {
            0
        };
        warn
    }

    /// Evaluate every protection on one sample. `last_cmd_ma` is the current
    /// the source was commanded during the tick that produced the sample
    /// (zero when it was disabled); `light_expected_ma` the command at or
    /// above which the monitor must see light (see
    /// [`crate::controller`]: the configured monitor-loss drive, or a lower
    /// ceiling in force while regulating); `direct` the conditions read
    /// straight off the sample ([`Measurements::from_sample`]). Tripped
    /// faults not already in `active` are recorded in `log`, in bit order.
    ///
    /// The usual tick (no condition present, no level above zero) costs
    /// the comparisons of [`quiet`]; the mask is built only when a
    /// condition is present, and the levels are walked only when one is
    /// present or above zero, and then only for those faults.
    #[inline(always)]
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn check(
        &mut self,
        cfg: &ValidConfig,
        m: &Measurements,
        direct: u32,
        tick: u32,
        last_cmd_ma: Fx,
        light_expected_ma: impl Fn() -> Fx,
        state: State,
        active: FaultSet,
        log: &mut FaultLog,
    ) -> Verdict {
        let calm = quiet(cfg, m, direct, last_cmd_ma, &light_expected_ma);
        if calm && self.counting | self.slow == 0 {
            return Verdict {
                present: FaultSet::EMPTY,
                tripped: FaultSet::EMPTY,
            };
        }
        // A level decaying after its condition went needs no mask.
        let present = if calm {
            0
        } else {
            present_mask(cfg, m, direct, last_cmd_ma, light_expected_ma)
        } | self.slow;
        let may_trip = armed(state) & !active.bits();
        self.walk(cfg, m, present, tick, last_cmd_ma, may_trip, log)
    }

    /// Move the levels of the faults present or counting (`present`: the
    /// conditions of this sample) and trip those that reach their level.
    /// Out of line: the usual tick does not come here.
    #[inline(never)]
    #[allow(clippy::too_many_arguments)]
    fn walk(
        &mut self,
        cfg: &ValidConfig,
        m: &Measurements,
        present: u32,
        tick: u32,
        last_cmd_ma: Fx,
        may_trip: u32,
        log: &mut FaultLog,
    ) -> Verdict {
        if present | self.counting == 0 {
            return Verdict {
                present: FaultSet::EMPTY,
                tripped: FaultSet::EMPTY,
            };
        }
        let weight = cfg.t.weight;
        let mut tripped = 0;
        let mut counting = 0;
        // Walk the faults present or counting, lowest bit first (the order
        // of the records); every other level is zero already.
        let mut todo = present | self.counting;
        while todo != 0 {
            let i = todo.trailing_zeros() as usize;
            todo &= todo - 1;
            let (Some(level), Some(&trip_at)) = (self.levels.get_mut(i), cfg.t.trip_at.get(i))
            else {
                continue;
            };
            // The bit of fault `i` (a fault's bit is its discriminant).
            let b = 1u32 << i;
            if present & b == 0 {
                *level = level.saturating_sub(1);
            } else {
                *level = level.saturating_add(weight).min(trip_at);
                if *level >= trip_at && may_trip & b != 0 {
                    tripped |= b;
                    record_trip(log, cfg, m, last_cmd_ma, i, tick);
                }
            }
            if *level != 0 {
                counting |= b;
            }
        }
        self.counting = counting;
        Verdict {
            present: FaultSet::from_bits(present),
            tripped: FaultSet::from_bits(tripped),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 64-bit LCG (Knuth's MMIX constants, `common practice`).
    struct Lcg(u64);

    impl Lcg {
        fn next(&mut self) -> u32 {
            self.0 = self
                .0
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (self.0 >> 32) as u32
        }

        /// Any `Fx`, or one within a few LSB or a few units of `near`.
        fn fx_near(&mut self, near: Fx) -> Fx {
            let r = self.next();
            match r % 4 {
                0 => Fx::from_bits(self.next() as i32),
                1 => near.saturating_add(Fx::from_bits(((r >> 8) % 7) as i32 - 3)),
                2 => near.saturating_add(Fx::from_bits(((r >> 8) % 0x4_0000) as i32 - 0x2_0000)),
                _ => [Fx::MIN, Fx::ZERO, Fx::MAX, near][(r >> 8) as usize % 4],
            }
        }
    }

    #[test]
    fn the_healthy_diode_is_interpolated_and_held_at_the_ends() {
        use crate::config::DiodePoint;
        let pt = |t: i32, th: i32, sl: f64| DiodePoint {
            degc: Fx::from_num(t),
            threshold_ma: Fx::from_num(th),
            slope_mw_per_ma: Fx::from_num(sl),
        };
        let pl = Plausibility {
            points: heapless::Vec::from_slice(&[pt(0, 20, 1.0), pt(40, 40, 0.5), pt(80, 80, 0.25)])
                .unwrap(),
            warning_margin: Fx::from_num(0.25),
            fault_margin: Fx::from_num(0.5),
            allowance_ma: Fx::ONE,
            debounce: 1,
        };
        let at = |t: i32| diode_at(&pl, Fx::from_num(t));
        let f = |th: f64, sl: f64| (Fx::from_num(th), Fx::from_num(sl));
        assert_eq!(at(-10), f(20.0, 1.0));
        assert_eq!(at(0), f(20.0, 1.0));
        assert_eq!(at(20), f(30.0, 0.75));
        assert_eq!(at(40), f(40.0, 0.5));
        assert_eq!(at(60), f(60.0, 0.375));
        assert_eq!(at(80), f(80.0, 0.25));
        assert_eq!(at(100), f(80.0, 0.25));
        // At 20 degC and 15 mW the healthy diode needs 30 + 15/0.75 = 50 mA:
        // the warning bound is 50 × 1.25 + 1 = 63.5 mA, the fault bound
        // 50 × 1.5 + 1 = 76 mA; each is the last plausible current.
        let m = |ma: Fx| Measurements {
            monitor_mw: Fx::from_num(15),
            current_ma: ma,
            temp_degc: Fx::from_num(20),
            ..Measurements::default()
        };
        let (warn, fault) = (Fx::from_num(63.5), Fx::from_num(76));
        assert_eq!(plausibility(&pl, &m(warn)), (false, false, fault));
        assert_eq!(
            plausibility(&pl, &m(warn + Fx::DELTA)),
            (true, false, fault)
        );
        assert_eq!(plausibility(&pl, &m(fault)), (true, false, fault));
        assert_eq!(
            plausibility(&pl, &m(fault + Fx::DELTA)),
            (true, true, fault)
        );
        // No verdict while the sensor is at a rail.
        let rail = Measurements {
            sensor_at_rail: true,
            ..m(Fx::MAX)
        };
        assert_eq!(plausibility(&pl, &rail), (false, false, Fx::MAX));
    }

    #[test]
    fn difference_window_equals_the_saturated_absolute_difference() {
        let mut rng = Lcg(11);
        let extremes = [
            Fx::MIN,
            Fx::from_bits(i32::MIN + 1),
            -Fx::ONE,
            Fx::ZERO,
            Fx::ONE,
            Fx::MAX,
        ];
        for _ in 0..300_000 {
            let a = rng.fx_near(Fx::ZERO);
            let b = rng.fx_near(a);
            let tol = if rng.next().is_multiple_of(8) {
                extremes[rng.next() as usize % extremes.len()]
            } else {
                rng.fx_near(Fx::from_num(5))
            };
            let want = a.saturating_sub(b).saturating_abs() < tol;
            assert_eq!(
                difference_within(a, b, tol, tol.wrapping_neg()),
                want,
                "{a} {b} {tol}"
            );
        }
    }

    /// The mask as first written: sensor rails from the open rail, the
    /// mismatch from the saturated absolute difference, the monitor-loss
    /// terms in their first order.
    fn reference_mask(
        cfg: &ValidConfig,
        m: &Measurements,
        last_cmd_ma: Fx,
        light_expected_ma: Fx,
    ) -> u32 {
        let c = cfg.config();
        let p = &c.protection;
        let tc = &c.calibration.temperature;
        let at_low = m.temp_counts <= tc.low_fault_counts;
        let at_high = m.temp_counts >= tc.high_fault_counts;
        let (open, short) = match tc.open_rail {
            Rail::High => (at_high, at_low),
            Rail::Low => (at_low, at_high),
        };
        let flag = |on: bool, fault: Fault| if on { bit(fault) } else { 0 };
        flag(m.current_ma >= p.overcurrent_ma, Fault::Overcurrent)
            | flag(m.monitor_mw >= p.runaway_mw, Fault::MonitorRunaway)
            | flag(
                last_cmd_ma >= light_expected_ma
                    && last_cmd_ma > Fx::ZERO
                    && m.monitor_mw <= p.monitor_loss_floor_mw,
                Fault::MonitorLoss,
            )
            | flag(open, Fault::SensorOpen)
            | flag(short, Fault::SensorShort)
            | flag(
                !m.sensor_at_rail && m.temp_degc >= c.derating.cutoff_degc,
                Fault::OverTemperature,
            )
            | flag(!m.interlock_closed, Fault::InterlockOpen)
            | flag(m.supply_mv <= p.supply_min_mv, Fault::SupplyUnder)
            | flag(m.supply_mv >= p.supply_max_mv, Fault::SupplyOver)
            | flag(
                mismatch_ma(m, last_cmd_ma) >= p.mismatch_tolerance_ma,
                Fault::DriveMismatch,
            )
            | flag(
                (u32::from(p.missed_tick_limit)..=i32::MAX as u32 - 1).contains(&m.missed_ticks),
                Fault::MissedTicks,
            )
            | flag(m.missed_ticks > i32::MAX as u32 - 1, Fault::TickOrder)
    }

    #[test]
    fn mask_and_quiet_test_equal_the_reference_mask() {
        let mut rng = Lcg(23);
        for open_rail in [Rail::High, Rail::Low] {
            let mut c = crate::example::config();
            c.calibration.temperature.open_rail = open_rail;
            let cfg = c.validate().unwrap();
            let c = cfg.config().clone();
            let p = c.protection;
            let tc = &c.calibration.temperature;
            for _ in 0..200_000 {
                let last_cmd = rng.fx_near(Fx::from_num(40));
                let temp_counts = match rng.next() % 4 {
                    0 => rng.next() as u16,
                    1 => tc
                        .low_fault_counts
                        .saturating_add((rng.next() % 5) as u16)
                        .saturating_sub(2),
                    2 => tc
                        .high_fault_counts
                        .saturating_add((rng.next() % 5) as u16)
                        .saturating_sub(2),
                    _ => 2_048,
                };
                let sample = crate::io::Sample {
                    tick: 0,
                    monitor_counts: 0,
                    current_counts: 0,
                    temp_counts,
                    supply_counts: 0,
                    interlock_closed: true,
                    forward_counts: None,
                    external_fault: false,
                };
                let mut window = Window::NONE;
                let (base, rails) =
                    Measurements::from_sample(&cfg, &sample, 0, Fx::ZERO, &mut window);
                let choice = rng.next();
                let (monitor_near, current_near, supply_near) = (
                    [p.runaway_mw, p.monitor_loss_floor_mw][choice as usize % 2],
                    [p.overcurrent_ma, last_cmd][(choice >> 1) as usize % 2],
                    [p.supply_min_mv, p.supply_max_mv][(choice >> 2) as usize % 2],
                );
                let m = Measurements {
                    monitor_mw: rng.fx_near(monitor_near),
                    current_ma: rng.fx_near(current_near),
                    temp_degc: rng.fx_near(c.derating.cutoff_degc),
                    supply_mv: rng.fx_near(supply_near),
                    interlock_closed: !rng.next().is_multiple_of(16),
                    missed_ticks: match rng.next() % 8 {
                        0 => u32::MAX - rng.next() % 4,
                        1 => TICK_ORDER_MISSED - 1 + rng.next() % 3,
                        k => k - 2,
                    },
                    ..base
                };
                // Half the time the command matches the sensed current, so
                // that no mismatch hides the other comparisons from `quiet`.
                let last_cmd = if rng.next().is_multiple_of(2) {
                    m.current_ma
                } else {
                    last_cmd
                };
                let light = rng.fx_near(last_cmd);
                let want = reference_mask(&cfg, &m, last_cmd, light);
                let got = present_mask(&cfg, &m, rails, last_cmd, || light);
                assert_eq!(got, want, "{m:?} {last_cmd} {light}");
                assert_eq!(quiet(&cfg, &m, rails, last_cmd, || light), want == 0);
            }
        }
    }
}
