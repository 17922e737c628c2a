//! Every protection in one place: the condition each one watches, its
//! limit, its debounce, and in which states it is armed.
//!
//! A limit is the first value that trips (upper limits trip at `>=`, lower
//! limits at `<=`). A condition must hold for `debounce` consecutive ticks.
//! Conditions are evaluated in every state, so a clear request can be
//! refused while one is still present; a protection *trips* only in the
//! states where it is armed:
//!
//! | protection | armed in |
//! |---|---|
//! | overcurrent, monitor runaway, drive mismatch | every state (light or current while off is a hardware failure) |
//! | interlock, sensor open/short, over-temperature, supply, missed ticks | Arming, Ramping, Regulating, Stopping (in Off they refuse `Enable`) |
//! | monitor loss | Ramping, Regulating (it needs drive) |

use crate::config::{Rail, ValidConfig};
use crate::fault::{Fault, FaultLog, FaultRecord, FaultSet};
use crate::io::State;
use crate::temp_table::Window;
use crate::units::Fx;

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
    /// Ticks missing before this sample (0 when the index stepped by one).
    pub missed_ticks: u32,
}

impl Measurements {
    /// Calibrate a sample. `temp_segment` is the temperature table window
    /// of the previous sample (updated; see
    /// [`crate::temp_table::degc_cached`]). Also returns the sensor-rail
    /// conditions present (open, short) as a mask, for [`Protections::check`];
    /// it is empty exactly when `sensor_at_rail` is false.
    #[inline]
    pub(crate) fn from_sample(
        cfg: &ValidConfig,
        s: &crate::io::Sample,
        missed_ticks: u32,
        temp_segment: &mut Window,
    ) -> (Self, u16) {
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
        let m = Measurements {
            monitor_mw: cfg.monitor_mw(s.monitor_counts),
            current_ma: cfg.current_ma(s.current_counts),
            temp_degc,
            temp_counts: s.temp_counts,
            sensor_at_rail: rails != 0,
            supply_mv: cfg.supply_mv(s.supply_counts),
            interlock_closed: s.interlock_closed,
            missed_ticks,
        };
        (m, rails)
    }
}

/// Debounce counters of every protection.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct Protections {
    counters: [u16; Fault::COUNT],
    /// Bit mask (as [`FaultSet`]) of the counters that are not zero.
    counting: u16,
}

/// Result of one evaluation.
pub(crate) struct Verdict {
    /// Conditions present in this sample (not debounced).
    pub present: FaultSet,
    /// Faults that tripped on this sample.
    pub tripped: FaultSet,
}

/// Bit of `fault` in a [`FaultSet`] mask.
const fn bit(fault: Fault) -> u16 {
    fault.bit()
}

/// Faults armed in every state (light or current while off is a hardware
/// failure).
const ALWAYS_ARMED: u16 =
    bit(Fault::Overcurrent) | bit(Fault::MonitorRunaway) | bit(Fault::DriveMismatch);

/// Every fault.
const ALL_FAULTS: u16 = (1 << Fault::COUNT) - 1;

/// The faults armed in `state`, as a mask.
const fn armed(state: State) -> u16 {
    match state {
        State::Off | State::Latched => ALWAYS_ARMED,
        State::Arming | State::Stopping => ALL_FAULTS & !bit(Fault::MonitorLoss),
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
    rails: u16,
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
    rails: u16,
    last_cmd_ma: Fx,
    light_expected_ma: impl Fn() -> Fx,
) -> u16 {
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
            m.missed_ticks >= u32::from(p.missed_tick_limit),
            Fault::MissedTicks,
        )
}

/// Record a tripped fault in the log. Out of line: it runs once per trip.
#[cold]
#[inline(never)]
fn record_trip(
    log: &mut FaultLog,
    cfg: &ValidConfig,
    m: &Measurements,
    last_cmd_ma: Fx,
    fault: Fault,
    tick: u32,
) {
    log.record(trip_record(cfg, m, last_cmd_ma, fault, tick));
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

impl Protections {
    /// Forget all debounce history (after an accepted clear).
    pub(crate) fn reset(&mut self) {
        self.counters = [0; Fault::COUNT];
        self.counting = 0;
    }

    /// Evaluate every protection on one sample. `last_cmd_ma` is the current
    /// the source was commanded during the tick that produced the sample
    /// (zero when it was disabled); `light_expected_ma` the command at or
    /// above which the monitor must see light (see
    /// [`crate::controller`]: the configured monitor-loss drive, or a lower
    /// ceiling in force while regulating); `rails` the sensor-rail
    /// conditions from [`Measurements::from_sample`]. Tripped faults not
    /// already in `active` are recorded in `log`, in bit order.
    ///
    /// The usual tick (no condition present, no debounce running) costs the
    /// comparisons of [`quiet`]; the mask is built and the counters are
    /// walked only when a condition is present or a debounce running, and
    /// then only for those faults.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn check(
        &mut self,
        cfg: &ValidConfig,
        m: &Measurements,
        rails: u16,
        tick: u32,
        last_cmd_ma: Fx,
        light_expected_ma: impl Fn() -> Fx,
        state: State,
        active: FaultSet,
        log: &mut FaultLog,
    ) -> Verdict {
        if self.counting == 0 && quiet(cfg, m, rails, last_cmd_ma, &light_expected_ma) {
            return Verdict {
                present: FaultSet::EMPTY,
                tripped: FaultSet::EMPTY,
            };
        }
        let present = present_mask(cfg, m, rails, last_cmd_ma, light_expected_ma);
        if present | self.counting == 0 {
            return Verdict {
                present: FaultSet::EMPTY,
                tripped: FaultSet::EMPTY,
            };
        }
        let may_trip = armed(state) & !active.bits();
        let mut tripped = FaultSet::EMPTY;
        // Walk the faults present or counting, lowest bit first (the order
        // of the records); every other counter is zero already.
        let mut todo = present | self.counting;
        while todo != 0 {
            let i = todo.trailing_zeros() as usize;
            todo &= todo - 1;
            let (Some(counter), Some(&debounce)) =
                (self.counters.get_mut(i), cfg.t.debounce.get(i))
            else {
                continue;
            };
            // The bit of fault `i` (a fault's bit is its discriminant).
            let b = 1u16 << i;
            if present & b == 0 {
                *counter = 0;
                continue;
            }
            *counter = counter.saturating_add(1);
            if *counter >= debounce && may_trip & b != 0 {
                if let Some(&fault) = Fault::ALL.get(i) {
                    tripped.insert(fault);
                    record_trip(log, cfg, m, last_cmd_ma, fault, tick);
                }
            }
        }
        // A counter is non-zero exactly while its condition is present.
        self.counting = present;
        Verdict {
            present: FaultSet::from_bits(present),
            tripped,
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
    ) -> u16 {
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
                m.missed_ticks >= u32::from(p.missed_tick_limit),
                Fault::MissedTicks,
            )
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
                };
                let mut window = Window::NONE;
                let (base, rails) = Measurements::from_sample(&cfg, &sample, 0, &mut window);
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
                    missed_ticks: rng.next() % 6,
                    ..base
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
