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
use crate::fault::{Fault, FaultRecord, FaultSet};
use crate::io::State;
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
    pub(crate) fn from_sample(cfg: &ValidConfig, s: &crate::io::Sample, missed_ticks: u32) -> Self {
        let tc = &cfg.config().calibration.temperature;
        Measurements {
            monitor_mw: cfg.monitor_mw(s.monitor_counts),
            current_ma: cfg.current_ma(s.current_counts),
            temp_degc: cfg.counts_to_degc(s.temp_counts),
            temp_counts: s.temp_counts,
            sensor_at_rail: s.temp_counts <= tc.low_fault_counts
                || s.temp_counts >= tc.high_fault_counts,
            supply_mv: cfg.supply_mv(s.supply_counts),
            interlock_closed: s.interlock_closed,
            missed_ticks,
        }
    }
}

/// One evaluated condition.
#[derive(Clone, Copy)]
struct Condition {
    fault: Fault,
    present: bool,
    measured: Fx,
    limit: Fx,
    debounce: u16,
}

/// Debounce counters of every protection.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct Protections {
    counters: [u16; Fault::COUNT],
}

/// Result of one evaluation.
pub(crate) struct Verdict {
    /// Conditions present in this sample (not debounced).
    pub present: FaultSet,
    /// Faults that tripped on this sample.
    pub tripped: FaultSet,
}

fn armed(fault: Fault, state: State) -> bool {
    match fault {
        Fault::Overcurrent | Fault::MonitorRunaway | Fault::DriveMismatch => true,
        Fault::MonitorLoss => matches!(state, State::Ramping | State::Regulating),
        _ => matches!(
            state,
            State::Arming | State::Ramping | State::Regulating | State::Stopping
        ),
    }
}

fn saturating_fx(v: u32) -> Fx {
    Fx::checked_from_num(v).unwrap_or(Fx::MAX)
}

impl Protections {
    /// Forget all debounce history (after an accepted clear).
    pub(crate) fn reset(&mut self) {
        self.counters = [0; Fault::COUNT];
    }

    /// Evaluate every protection on one sample. `last_cmd_ma` is the current
    /// the source was commanded during the tick that produced the sample
    /// (zero when it was disabled). Tripped faults not already in `active`
    /// are passed to `record`.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn check(
        &mut self,
        cfg: &ValidConfig,
        m: &Measurements,
        tick: u32,
        last_cmd_ma: Fx,
        state: State,
        active: FaultSet,
        mut record: impl FnMut(FaultRecord),
    ) -> Verdict {
        let c = cfg.config();
        let p = &c.protection;
        let tc = &c.calibration.temperature;
        // Counts above the Fx range (32 767) saturate in the records.
        let counts = Fx::saturating_from_num(m.temp_counts);
        let (open_at_high, low, high) = (
            tc.open_rail == Rail::High,
            Fx::saturating_from_num(tc.low_fault_counts),
            Fx::saturating_from_num(tc.high_fault_counts),
        );
        let at_low = m.temp_counts <= tc.low_fault_counts;
        let at_high = m.temp_counts >= tc.high_fault_counts;
        let mismatch = (m.current_ma.saturating_sub(last_cmd_ma)).saturating_abs();
        let conditions = [
            Condition {
                fault: Fault::Overcurrent,
                present: m.current_ma >= p.overcurrent_ma,
                measured: m.current_ma,
                limit: p.overcurrent_ma,
                debounce: p.overcurrent_debounce,
            },
            Condition {
                fault: Fault::MonitorRunaway,
                present: m.monitor_mw >= p.runaway_mw,
                measured: m.monitor_mw,
                limit: p.runaway_mw,
                debounce: p.runaway_debounce,
            },
            Condition {
                fault: Fault::MonitorLoss,
                present: last_cmd_ma >= p.monitor_loss_drive_ma
                    && m.monitor_mw <= p.monitor_loss_floor_mw,
                measured: m.monitor_mw,
                limit: p.monitor_loss_floor_mw,
                debounce: p.monitor_loss_debounce,
            },
            Condition {
                fault: Fault::SensorOpen,
                present: if open_at_high { at_high } else { at_low },
                measured: counts,
                limit: if open_at_high { high } else { low },
                debounce: p.sensor_debounce,
            },
            Condition {
                fault: Fault::SensorShort,
                present: if open_at_high { at_low } else { at_high },
                measured: counts,
                limit: if open_at_high { low } else { high },
                debounce: p.sensor_debounce,
            },
            Condition {
                fault: Fault::OverTemperature,
                present: !m.sensor_at_rail && m.temp_degc >= c.derating.cutoff_degc,
                measured: m.temp_degc,
                limit: c.derating.cutoff_degc,
                debounce: p.over_temp_debounce,
            },
            Condition {
                fault: Fault::InterlockOpen,
                present: !m.interlock_closed,
                measured: Fx::from_num(u8::from(m.interlock_closed)),
                limit: Fx::ONE,
                debounce: p.interlock_debounce,
            },
            Condition {
                fault: Fault::SupplyUnder,
                present: m.supply_mv <= p.supply_min_mv,
                measured: m.supply_mv,
                limit: p.supply_min_mv,
                debounce: p.supply_debounce,
            },
            Condition {
                fault: Fault::SupplyOver,
                present: m.supply_mv >= p.supply_max_mv,
                measured: m.supply_mv,
                limit: p.supply_max_mv,
                debounce: p.supply_debounce,
            },
            Condition {
                fault: Fault::DriveMismatch,
                present: mismatch >= p.mismatch_tolerance_ma,
                measured: mismatch,
                limit: p.mismatch_tolerance_ma,
                debounce: p.mismatch_debounce,
            },
            Condition {
                fault: Fault::MissedTicks,
                present: m.missed_ticks >= u32::from(p.missed_tick_limit),
                measured: saturating_fx(m.missed_ticks),
                limit: saturating_fx(u32::from(p.missed_tick_limit)),
                debounce: 1,
            },
        ];
        let mut present = FaultSet::EMPTY;
        let mut tripped = FaultSet::EMPTY;
        for (cond, counter) in conditions.iter().zip(self.counters.iter_mut()) {
            if !cond.present {
                *counter = 0;
                continue;
            }
            present.insert(cond.fault);
            *counter = counter.saturating_add(1);
            if *counter >= cond.debounce && armed(cond.fault, state) && !active.contains(cond.fault)
            {
                tripped.insert(cond.fault);
                record(FaultRecord {
                    fault: cond.fault,
                    tick,
                    measured: cond.measured,
                    limit: cond.limit,
                });
            }
        }
        Verdict { present, tripped }
    }
}
