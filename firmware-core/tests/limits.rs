//! Each protection trips at its limit, not one LSB below it, and respects
//! its debounce; fast faults zero the drive in the same step.

use diodestat_core::*;

struct Rig {
    ctl: Controller,
    tick: u32,
    s: Sample,
}

impl Rig {
    /// A controller regulating in ACC at 30 mA with healthy readings.
    fn regulating() -> Rig {
        let cfg = example::config().validate().unwrap();
        let mut r = Rig {
            ctl: Controller::new(cfg),
            tick: 0,
            s: Sample {
                tick: 0,
                monitor_counts: 1000,
                current_counts: 0,
                temp_counts: 2048,
                supply_counts: 2457,
                interlock_closed: true,
            },
        };
        r.step();
        r.ctl.request(Request::SetMode(Mode::Acc)).unwrap();
        r.ctl
            .request(Request::SetCurrentMa(Fx::from_num(30)))
            .unwrap();
        r.ctl.request(Request::Enable).unwrap();
        for _ in 0..400 {
            // Sense follows the command.
            let want = r.ctl.drive_ma();
            r.s.current_counts = counts_for(&r.ctl, want);
            r.step();
        }
        assert_eq!(r.ctl.state(), State::Regulating);
        r
    }

    fn step(&mut self) -> Drive {
        self.s.tick = self.tick;
        self.tick += 1;
        self.ctl.step(&self.s)
    }
}

/// Sense counts whose calibrated reading is closest to `ma` from below.
fn counts_for(ctl: &Controller, ma: Fx) -> u16 {
    (0u16..4096)
        .rev()
        .find(|c| ctl.config().current_ma(*c) <= ma)
        .unwrap_or(0)
}

#[test]
fn runaway_trips_at_its_limit_in_the_same_step() {
    let mut r = Rig::regulating();
    let limit = r.ctl.config().config().protection.runaway_mw;
    // The highest count below the limit does not trip.
    let below = (0u16..4096)
        .rev()
        .find(|c| r.ctl.config().monitor_mw(*c) < limit)
        .unwrap();
    r.s.monitor_counts = below;
    let d = r.step();
    assert!(d.enable);
    assert_eq!(r.ctl.faults(), FaultSet::EMPTY);
    // The first count at the limit trips in the very step that sees it.
    r.s.monitor_counts = below + 1;
    assert!(r.ctl.config().monitor_mw(below + 1) >= limit);
    let d = r.step();
    assert!(!d.enable);
    assert_eq!(d.dac_code, 0);
    assert!(d.status.faults.contains(Fault::MonitorRunaway));
    let rec = r.ctl.fault_log().first().unwrap();
    assert_eq!(rec.fault, Fault::MonitorRunaway);
    assert_eq!(rec.limit, limit);
}

#[test]
fn supply_under_respects_debounce() {
    let mut r = Rig::regulating();
    let n = r.ctl.config().config().protection.supply_debounce;
    r.s.supply_counts = 0;
    for _ in 1..n {
        r.s.current_counts = counts_for(&r.ctl, r.ctl.drive_ma());
        assert!(r.step().enable);
    }
    r.s.current_counts = counts_for(&r.ctl, r.ctl.drive_ma());
    let d = r.step();
    assert!(!d.enable);
    assert!(d.status.faults.contains(Fault::SupplyUnder));
}

#[test]
fn interlock_latches_and_clear_needs_it_closed() {
    let mut r = Rig::regulating();
    r.s.interlock_closed = false;
    let d = r.step();
    assert!(!d.enable && d.dac_code == 0);
    assert_eq!(r.ctl.state(), State::Latched);
    assert_eq!(
        r.ctl.request(Request::ClearFaults),
        Err(Rejection::ConditionPresent {
            fault: Fault::InterlockOpen
        })
    );
    r.s.interlock_closed = true;
    r.s.current_counts = 0;
    for _ in 0..5 {
        assert_eq!(r.step().status.state, State::Latched);
    }
    r.ctl.request(Request::ClearFaults).unwrap();
    assert_eq!(r.step().status.state, State::Off);
}

#[test]
fn missed_ticks_trip_at_the_limit() {
    let mut r = Rig::regulating();
    let limit = u32::from(r.ctl.config().config().protection.missed_tick_limit);
    r.tick += limit - 1; // a gap of limit-1 missing ticks: no trip
    r.s.current_counts = counts_for(&r.ctl, r.ctl.drive_ma());
    assert!(r.step().enable);
    r.tick += limit; // limit missing ticks: trips
    r.s.current_counts = counts_for(&r.ctl, r.ctl.drive_ma());
    let d = r.step();
    assert!(!d.enable);
    assert!(d.status.faults.contains(Fault::MissedTicks));
}

#[test]
fn config_rejections_name_the_values() {
    let mut c = example::config();
    c.tick_hz = 0;
    assert_eq!(c.validate(), Err(ConfigError::TickRateZero));
    let mut c = example::config();
    c.current.ceiling_ma = Fx::from_num(70);
    assert_eq!(
        c.validate(),
        Err(ConfigError::CeilingAboveAbsolute {
            ceiling_ma: Fx::from_num(70),
            absolute_max_ma: Fx::from_num(60)
        })
    );
    let mut c = example::config();
    c.derating.knee_degc = Fx::from_num(80);
    assert_eq!(
        c.validate(),
        Err(ConfigError::DeratingKneeNotBelowCutoff {
            knee_degc: Fx::from_num(80),
            cutoff_degc: Fx::from_num(70)
        })
    );
    let mut c = example::config();
    c.protection.runaway_mw = Fx::from_num(30);
    assert_eq!(
        c.validate(),
        Err(ConfigError::RunawayNotAboveSetpointRange {
            runaway_mw: Fx::from_num(30),
            max_setpoint_mw: Fx::from_num(30)
        })
    );
    let mut c = example::config();
    c.protection.mismatch_debounce = 0;
    assert_eq!(
        c.validate(),
        Err(ConfigError::DebounceZero {
            fault: Fault::DriveMismatch
        })
    );
    let mut c = example::config();
    c.ramp.soft_start_ma_per_ms = Fx::ZERO;
    assert_eq!(
        c.validate(),
        Err(ConfigError::RampRateNotPositive {
            which: config::RampKind::SoftStart,
            per_ms: Fx::ZERO
        })
    );
    let mut c = example::config();
    c.calibration.temperature.table.swap(0, 1);
    assert_eq!(
        c.validate(),
        Err(ConfigError::TempTableNotMonotonic { index: 1 })
    );
}

#[test]
fn every_other_config_rejection() {
    use config::{Channel, RampKind};
    type Breaker = fn(&mut Config);
    type Check = fn(ConfigError) -> bool;
    let cases: Vec<(Breaker, Check)> = vec![
        (
            |c| c.tick_hz = 2_000_000,
            |e| matches!(e, ConfigError::TickRateTooHigh { tick_hz: 2_000_000 }),
        ),
        (
            |c| c.current.absolute_max_ma = Fx::ZERO,
            |e| matches!(e, ConfigError::AbsoluteLimitNotPositive { .. }),
        ),
        (
            |c| c.current.ceiling_ma = Fx::from_num(-1),
            |e| matches!(e, ConfigError::CeilingNotPositive { .. }),
        ),
        (
            |c| c.protection.overcurrent_ma = Fx::from_num(50),
            |e| matches!(e, ConfigError::OvercurrentNotAboveCeiling { .. }),
        ),
        (
            |c| c.protection.overcurrent_ma = Fx::from_num(61),
            |e| matches!(e, ConfigError::OvercurrentAboveAbsolute { .. }),
        ),
        (
            |c| c.ramp.soft_stop_ma_per_ms = Fx::from_bits(1),
            |e| {
                matches!(
                    e,
                    ConfigError::RampRateBelowResolution {
                        which: RampKind::SoftStop,
                        ..
                    }
                )
            },
        ),
        (
            |c| c.ramp.emission_delay_ms = u32::MAX,
            |e| matches!(e, ConfigError::EmissionDelayTooLong { .. }),
        ),
        (
            |c| c.ramp.handover_fraction = Fx::from_num(2),
            |e| matches!(e, ConfigError::HandoverFractionOutOfRange { .. }),
        ),
        (
            |c| c.power.min_setpoint_mw = Fx::from_num(40),
            |e| matches!(e, ConfigError::PowerRangeInvalid { .. }),
        ),
        (
            |c| c.protection.monitor_loss_floor_mw = Fx::from_num(1),
            |e| matches!(e, ConfigError::MonitorLossFloorNotBelowSetpoints { .. }),
        ),
        (
            |c| c.protection.monitor_loss_floor_mw = Fx::from_num(-1),
            |e| matches!(e, ConfigError::MonitorLossFloorNegative { .. }),
        ),
        (
            |c| c.protection.monitor_loss_drive_ma = Fx::from_num(51),
            |e| matches!(e, ConfigError::MonitorLossDriveOutOfRange { .. }),
        ),
        (
            |c| c.derating.floor_ma = Fx::from_num(51),
            |e| matches!(e, ConfigError::DeratingFloorOutOfRange { .. }),
        ),
        (
            |c| c.calibration.temperature.table.truncate(1),
            |e| matches!(e, ConfigError::TempTableTooShort { len: 1 }),
        ),
        (
            |c| c.calibration.temperature.low_fault_counts = 400,
            |e| matches!(e, ConfigError::SensorRailsInconsistent { .. }),
        ),
        (
            |c| c.protection.missed_tick_limit = 0,
            |e| matches!(e, ConfigError::MissedTickLimitZero),
        ),
        (
            |c| c.apc.kp_ma_per_mw = Fx::ZERO,
            |e| {
                matches!(
                    e,
                    ConfigError::GainNotPositive {
                        proportional: true,
                        ..
                    }
                )
            },
        ),
        (
            |c| c.apc.ki_ma_per_mw_ms = Fx::from_num(-1),
            |e| {
                matches!(
                    e,
                    ConfigError::GainNotPositive {
                        proportional: false,
                        ..
                    }
                )
            },
        ),
        (
            |c| c.apc.kp_ma_per_mw = Fx::from_num(2000),
            |e| matches!(e, ConfigError::ProportionalGainOverflow { .. }),
        ),
        (
            |c| c.apc.ki_ma_per_mw_ms = Fx::from_num(30000),
            |e| matches!(e, ConfigError::IntegralGainOutOfRange { .. }),
        ),
        (
            |c| c.calibration.supply.units_per_count = Gain::ZERO,
            |e| {
                matches!(
                    e,
                    ConfigError::CalibrationGainNotPositive {
                        channel: Channel::Supply
                    }
                )
            },
        ),
        (
            |c| c.calibration.monitor.offset_counts = 5000,
            |e| {
                matches!(
                    e,
                    ConfigError::CalibrationOffsetOutOfRange {
                        channel: Channel::Monitor,
                        ..
                    }
                )
            },
        ),
        (
            |c| c.calibration.dac.codes_per_ma = Fx::from_num(100),
            |e| matches!(e, ConfigError::CeilingNotRepresentable { .. }),
        ),
        (
            |c| c.calibration.monitor.units_per_count = Gain::from_num(0.001),
            |e| matches!(e, ConfigError::RunawayBeyondMonitorRange { .. }),
        ),
        (
            |c| c.calibration.current_sense.units_per_count = Gain::from_num(0.001),
            |e| matches!(e, ConfigError::OvercurrentBeyondSenseRange { .. }),
        ),
        (
            |c| c.protection.supply_max_mv = Fx::from_num(10000),
            |e| matches!(e, ConfigError::SupplyWindowInvalid { .. }),
        ),
        (
            |c| c.protection.mismatch_tolerance_ma = Fx::ZERO,
            |e| matches!(e, ConfigError::MismatchToleranceNotPositive { .. }),
        ),
    ];
    for (i, (brk, ok)) in cases.into_iter().enumerate() {
        let mut c = example::config();
        brk(&mut c);
        let e = c.validate().expect_err("must be refused");
        assert!(ok(e), "case {i}: got {e:?}");
    }
}

#[test]
fn overcurrent_trips_at_the_limit_in_the_same_step() {
    let mut r = Rig::regulating();
    let limit = r.ctl.config().config().protection.overcurrent_ma;
    let at = (0u16..4096)
        .find(|c| r.ctl.config().current_ma(*c) >= limit)
        .unwrap();
    r.s.current_counts = at - 1;
    // One count below the limit: a mismatch is present but debounced, not an overcurrent.
    let d = r.step();
    assert!(!d.status.faults.contains(Fault::Overcurrent));
    r.s.current_counts = at;
    let d = r.step();
    assert!(!d.enable && d.dac_code == 0);
    assert!(d.status.faults.contains(Fault::Overcurrent));
}

#[test]
fn sensor_open_debounces_and_holds_the_ceiling_at_the_floor() {
    let mut r = Rig::regulating();
    let n = r.ctl.config().config().protection.sensor_debounce;
    let floor = r.ctl.config().config().derating.floor_ma;
    r.s.temp_counts = 4095;
    for _ in 1..n {
        r.s.current_counts = counts_for(&r.ctl, r.ctl.drive_ma());
        let d = r.step();
        assert!(d.enable);
        assert!(d.status.warnings.sensor_suspect);
        assert!(r.ctl.drive_ma() <= floor);
    }
    r.s.current_counts = counts_for(&r.ctl, r.ctl.drive_ma());
    let d = r.step();
    assert!(!d.enable);
    assert!(d.status.faults.contains(Fault::SensorOpen));
}
