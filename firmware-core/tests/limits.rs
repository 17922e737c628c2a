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
