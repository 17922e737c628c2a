//! Every protection: it trips at its limit and not one LSB (one ADC count,
//! one tick) short of it, it respects its debounce, the tripping step
//! already returns enable low and DAC zero, it is armed exactly in the
//! states `protect.rs` documents, and the fault log records it. Then the
//! temperature derating of the ceiling.

mod common;

use common::*;
use diodestat_core::{
    Fault, FaultRecord, Fx, Mode, Rail, Request, Sample, State, ValidConfig, FAULT_RING_LEN,
};

fn fx(v: f64) -> Fx {
    Fx::from_num(v)
}

/// The configured debounce of a fault (the tick-index faults have none: 1).
fn debounce(cfg: &ValidConfig, f: Fault) -> u16 {
    diodestat_core::debounce_ticks(cfg.config(), f)
}

/// The demo with the fast faults debounced over several ticks, so that
/// "N-1 ticks do not trip" is a real check for them too.
fn debounced_cfg() -> ValidConfig {
    demo_with(|c| {
        c.protection.overcurrent_debounce = 3;
        c.protection.runaway_debounce = 2;
        c.protection.interlock_debounce = 3;
    })
}

const FS: u16 = 4095;

struct LimitCase {
    fault: Fault,
    cfg: ValidConfig,
    /// ACC current the controller regulates at while the case runs.
    acc_iu: Fx,
    /// Puts the reading exactly at the limit.
    at: Box<dyn Fn(&mut Sample)>,
    /// Puts the reading one LSB short of the limit.
    short: Box<dyn Fn(&mut Sample)>,
    measured: Fx,
    limit: Fx,
}

fn check_limit(case: &LimitCase) {
    let f = case.fault;
    let n = u32::from(debounce(&case.cfg, f));
    let rig = || Rig::regulating_acc(case.cfg.clone(), case.acc_iu);

    // One LSB short of the limit, for well over the debounce: no condition.
    let mut r = rig();
    for k in 0..n + 10 {
        let d = r.step_with(&case.short);
        assert!(d.enable, "{f}: short of the limit, tick {k}");
        assert!(!r.ctl.conditions().contains(f), "{f}: short of the limit");
    }
    assert!(r.ctl.faults().is_empty(), "{f}: {:?}", r.ctl.faults());

    // At the limit: N-1 ticks present but not tripped.
    let mut r = rig();
    for k in 1..n {
        let d = r.step_with(&case.at);
        assert!(d.enable, "{f}: tripped after {k} of {n} ticks");
        assert!(r.ctl.conditions().contains(f));
        assert!(d.status.faults.is_empty(), "{f}: {:?}", d.status.faults);
    }
    // The N-th latches, and that very step already shuts the drive.
    let d = r.step_with(&case.at);
    assert!(!d.enable, "{f}: enable after {n} ticks at the limit");
    assert_eq!(d.dac_code, 0, "{f}");
    assert_eq!(d.status.state, State::Latched, "{f}");
    assert_eq!(d.status.faults.iter().collect::<Vec<_>>(), [f], "{f}");
    assert_eq!(
        r.ctl.fault_log().first(),
        Some(&FaultRecord {
            fault: f,
            tick: r.s.tick,
            measured: case.measured,
            limit: case.limit,
        }),
        "{f}"
    );

    // A tick back inside the limit does not restart the count (the leaky
    // debounce of `protect.rs`): it takes one weight's worth less than a
    // present tick adds, so the condition trips on its second tick back.
    if n > 1 {
        let mut r = rig();
        for _ in 1..n {
            r.step_with(&case.at);
        }
        r.step_with(&case.short);
        let d = r.step_with(&case.at);
        assert!(
            d.enable,
            "{f}: one clean tick took less than one present tick"
        );
        let d = r.step_with(&case.at);
        assert!(!d.enable, "{f}: the count restarted on one clean tick");
        assert!(d.status.faults.contains(f));
    }
}

fn overcurrent_case(cfg: ValidConfig) -> LimitCase {
    // A wide mismatch tolerance keeps the drive-mismatch check out of it.
    let mut c = cfg.config().clone();
    c.protection.mismatch_tolerance_iu = fx(45.0);
    let cfg = c.validate().unwrap();
    let limit = cfg.config().protection.overcurrent_iu;
    let at = lowest_at_or_above(|c| cfg.current_iu(c), limit, FS);
    LimitCase {
        fault: Fault::Overcurrent,
        measured: cfg.current_iu(at),
        limit,
        acc_iu: fx(15.0),
        at: Box::new(move |s| s.current_counts = at),
        short: Box::new(move |s| s.current_counts = at - 1),
        cfg,
    }
}

fn runaway_case(cfg: ValidConfig) -> LimitCase {
    let limit = cfg.config().protection.runaway_ou;
    let at = lowest_at_or_above(|c| cfg.monitor_ou(c), limit, FS);
    LimitCase {
        fault: Fault::MonitorRunaway,
        measured: cfg.monitor_ou(at),
        limit,
        acc_iu: fx(15.0),
        at: Box::new(move |s| s.monitor_counts = at),
        short: Box::new(move |s| s.monitor_counts = at - 1),
        cfg,
    }
}

fn interlock_case(cfg: ValidConfig) -> LimitCase {
    LimitCase {
        fault: Fault::InterlockOpen,
        measured: Fx::ZERO,
        limit: Fx::ONE,
        acc_iu: fx(15.0),
        at: Box::new(|s| s.interlock_closed = false),
        short: Box::new(|s| s.interlock_closed = true),
        cfg,
    }
}

#[test]
fn overcurrent_at_its_limit() {
    check_limit(&overcurrent_case(demo()));
    check_limit(&overcurrent_case(debounced_cfg()));
}

#[test]
fn monitor_runaway_at_its_limit() {
    check_limit(&runaway_case(demo()));
    check_limit(&runaway_case(debounced_cfg()));
}

#[test]
fn interlock_open() {
    check_limit(&interlock_case(demo()));
    check_limit(&interlock_case(debounced_cfg()));
}

#[test]
fn monitor_loss_at_the_monitor_floor() {
    let cfg = demo();
    let p = cfg.config().protection;
    let at = highest_at_or_below(|c| cfg.monitor_ou(c), p.monitor_loss_floor_ou, FS);
    check_limit(&LimitCase {
        fault: Fault::MonitorLoss,
        measured: cfg.monitor_ou(at),
        limit: p.monitor_loss_floor_ou,
        acc_iu: p.monitor_loss_drive_iu + fx(3.0),
        at: Box::new(move |s| s.monitor_counts = at),
        short: Box::new(move |s| s.monitor_counts = at + 1),
        cfg,
    });
}

#[test]
fn monitor_loss_applies_from_its_drive_level() {
    let cfg = demo();
    let p = cfg.config().protection;
    let n = u32::from(p.monitor_loss_debounce);
    // At the drive level: trips after the debounce.
    let mut r = Rig::regulating_acc(cfg.clone(), p.monitor_loss_drive_iu);
    for _ in 1..n {
        assert!(r.step_with(|s| s.monitor_counts = 0).enable);
    }
    let d = r.step_with(|s| s.monitor_counts = 0);
    assert!(!d.enable);
    assert!(d.status.faults.contains(Fault::MonitorLoss));
    // One LSB below the drive level: never.
    let mut r = Rig::regulating_acc(cfg, p.monitor_loss_drive_iu - Fx::DELTA);
    for _ in 0..n * 10 {
        assert!(r.step_with(|s| s.monitor_counts = 0).enable);
        assert!(!r.ctl.conditions().contains(Fault::MonitorLoss));
    }
}

#[test]
fn monitor_loss_on_a_derated_ceiling_below_its_drive_level() {
    // A hot mount derates the ceiling below the monitor-loss drive level;
    // the monitor then opens. The power loop winds up to the derated
    // ceiling and must latch monitor loss there, not sit blind on it.
    let cfg = demo();
    let c = cfg.config().clone();
    let p = c.protection;
    let hot = temp_counts_for(&cfg, fx(60.0));
    let mut r = Rig::regulating_apc(cfg.clone(), fx(5.0), 200);
    r.s.temp_counts = hot;
    r.run(200);
    let ceiling = r.ctl.ceiling_iu();
    assert!(ceiling < p.monitor_loss_drive_iu, "{ceiling} mA");
    assert_eq!(r.ctl.state(), State::Regulating);
    r.monitor_override = Some(0);
    let n = r
        .run_until(100_000, |ctl, _| ctl.state() == State::Latched)
        .expect("monitor loss latches on the derated ceiling");
    assert!(r.ctl.faults().contains(Fault::MonitorLoss));
    // It took the wind-up to the ceiling plus the debounce, no more.
    let wind_up = ((ceiling - fx(5.0)) / cfg.slew_iu_per_tick()).to_num::<u32>() + 2;
    assert!(
        n <= wind_up + u32::from(p.monitor_loss_debounce) + 50,
        "{n} ticks"
    );
    // In ACC on the same derated ceiling a dark monitor is no fault: the
    // configured drive level alone applies.
    let mut r = Rig::regulating_acc(cfg, c.current.ceiling_iu);
    r.s.temp_counts = hot;
    r.monitor_override = Some(0);
    for _ in 0..10 * u32::from(p.monitor_loss_debounce) {
        assert!(r.step().enable);
    }
}

#[test]
fn sensor_open_and_short_at_the_rails_for_both_polarities() {
    for open_rail in [Rail::High, Rail::Low] {
        let cfg = demo_with(|c| c.calibration.temperature.open_rail = open_rail);
        let tc = cfg.config().calibration.temperature.clone();
        let (hi, lo) = (tc.high_fault_counts, tc.low_fault_counts);
        let (open_at, open_short, short_at, short_short) = match open_rail {
            Rail::High => (hi, hi - 1, lo, lo + 1),
            Rail::Low => (lo, lo + 1, hi, hi - 1),
        };
        for (fault, at, short) in [
            (Fault::SensorOpen, open_at, open_short),
            (Fault::SensorShort, short_at, short_short),
        ] {
            check_limit(&LimitCase {
                fault,
                measured: Fx::from_num(at),
                limit: Fx::from_num(at),
                acc_iu: fx(15.0),
                at: Box::new(move |s| s.temp_counts = at),
                short: Box::new(move |s| s.temp_counts = short),
                cfg: cfg.clone(),
            });
        }
    }
}

#[test]
fn over_temperature_at_the_cutoff() {
    let cfg = demo();
    let cutoff = cfg.config().derating.cutoff_degc;
    let tc = cfg.config().calibration.temperature.clone();
    // Adjacent counts on either side of the cut-off.
    let (at, short) = (tc.low_fault_counts + 1..tc.high_fault_counts - 1)
        .flat_map(|c| [(c, c + 1), (c + 1, c)])
        .find(|(a, b)| cfg.counts_to_degc(*a) >= cutoff && cfg.counts_to_degc(*b) < cutoff)
        .expect("the table spans the cut-off");
    check_limit(&LimitCase {
        fault: Fault::OverTemperature,
        measured: cfg.counts_to_degc(at),
        limit: cutoff,
        acc_iu: fx(15.0),
        at: Box::new(move |s| s.temp_counts = at),
        short: Box::new(move |s| s.temp_counts = short),
        cfg,
    });
}

#[test]
fn supply_under_and_over_at_the_window_edges() {
    let cfg = demo();
    let p = cfg.config().protection;
    let under = highest_at_or_below(|c| cfg.supply_vu(c), p.supply_min_vu, FS);
    let over = lowest_at_or_above(|c| cfg.supply_vu(c), p.supply_max_vu, FS);
    check_limit(&LimitCase {
        fault: Fault::SupplyUnder,
        measured: cfg.supply_vu(under),
        limit: p.supply_min_vu,
        acc_iu: fx(15.0),
        at: Box::new(move |s| s.supply_counts = under),
        short: Box::new(move |s| s.supply_counts = under + 1),
        cfg: cfg.clone(),
    });
    check_limit(&LimitCase {
        fault: Fault::SupplyOver,
        measured: cfg.supply_vu(over),
        limit: p.supply_max_vu,
        acc_iu: fx(15.0),
        at: Box::new(move |s| s.supply_counts = over),
        short: Box::new(move |s| s.supply_counts = over - 1),
        cfg,
    });
}

#[test]
fn drive_mismatch_above_and_below_the_command() {
    let cfg = demo();
    let tol = cfg.config().protection.mismatch_tolerance_iu;
    let cmd = fx(15.0);
    let high = lowest_at_or_above(|c| cfg.current_iu(c) - cmd, tol, FS);
    let low = highest_at_or_below(|c| cfg.current_iu(c) - cmd, -tol, FS);
    check_limit(&LimitCase {
        fault: Fault::DriveMismatch,
        measured: cfg.current_iu(high) - cmd,
        limit: tol,
        acc_iu: cmd,
        at: Box::new(move |s| s.current_counts = high),
        short: Box::new(move |s| s.current_counts = high - 1),
        cfg: cfg.clone(),
    });
    check_limit(&LimitCase {
        fault: Fault::DriveMismatch,
        measured: cmd - cfg.current_iu(low),
        limit: tol,
        acc_iu: cmd,
        at: Box::new(move |s| s.current_counts = low),
        short: Box::new(move |s| s.current_counts = low + 1),
        cfg,
    });
}

#[test]
fn missed_ticks_at_the_limit() {
    let cfg = demo();
    let limit = u32::from(cfg.config().protection.missed_tick_limit);
    let mut r = Rig::regulating_acc(cfg.clone(), fx(15.0));
    // A gap of limit-1 missing ticks does not trip.
    let d = r.step_with(|s| s.tick += limit - 1);
    assert!(d.enable);
    assert_eq!(r.ctl.measurements().missed_ticks, limit - 1);
    assert!(!r.ctl.conditions().contains(Fault::MissedTicks));
    // A gap of `limit` trips at once.
    let d = r.step_with(|s| s.tick += limit);
    assert!(!d.enable);
    assert_eq!(d.dac_code, 0);
    assert_eq!(
        d.status.faults.iter().collect::<Vec<_>>(),
        [Fault::MissedTicks]
    );
    assert_eq!(
        r.ctl.fault_log().first(),
        Some(&FaultRecord {
            fault: Fault::MissedTicks,
            tick: r.s.tick,
            measured: Fx::from_num(limit),
            limit: Fx::from_num(limit),
        })
    );
}

#[test]
fn the_tick_index_wraps_without_a_missed_tick() {
    let mut r = Rig::new(demo());
    // Move the index near the wrap while off (a gap is only a condition in Off).
    r.s.tick = u32::MAX - 300;
    r.step();
    r.step();
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(fx(20.0)));
    r.req(Request::Enable);
    for _ in 0..600 {
        r.step();
        assert_eq!(r.ctl.measurements().missed_ticks, 0);
    }
    assert!(r.s.tick < 1_000, "wrapped");
    assert_eq!(r.ctl.state(), State::Regulating);
}

// ---------------------------------------------------------------------------
// Arming per state.

#[derive(Clone, Copy, Debug, PartialEq)]
enum In {
    Off,
    Arming,
    Ramping,
    Regulating,
    Stopping,
    Latched,
}

const STATES: [In; 6] = [
    In::Off,
    In::Arming,
    In::Ramping,
    In::Regulating,
    In::Stopping,
    In::Latched,
];

/// The table of `protect.rs`, restated.
fn documented_armed(f: Fault, s: In) -> bool {
    match f {
        Fault::Overcurrent
        | Fault::MonitorRunaway
        | Fault::DriveMismatch
        | Fault::ExternalFault => true,
        Fault::MonitorLoss | Fault::PowerImplausible | Fault::DiodeOpen | Fault::DiodeShort => {
            matches!(s, In::Ramping | In::Regulating)
        }
        _ => matches!(s, In::Arming | In::Ramping | In::Regulating | In::Stopping),
    }
}

/// Long delay and slow ramps so every state lasts far longer than any
/// debounce; monitor loss applies from 1 mA so it can be present while
/// ramping.
fn matrix_cfg() -> ValidConfig {
    demo_with(|c| {
        c.ramp.emission_delay_ms = 100;
        c.ramp.soft_start_iu_per_ms = fx(0.2);
        c.ramp.soft_stop_iu_per_ms = fx(0.2);
        c.protection.monitor_loss_drive_iu = Fx::ONE;
        c.forward_voltage = Some(forward_demo());
        c.plausibility = Some(plausibility_demo());
    })
}

/// A forward-voltage channel for the tests: 1 mV per count, open at
/// 3 000 mV, short at 500 mV, from 1 mA.
fn forward_demo() -> diodestat_core::ForwardVoltage {
    diodestat_core::ForwardVoltage {
        cal: diodestat_core::AdcCal {
            offset_counts: 0,
            units_per_count: diodestat_core::Gain::ONE,
            full_scale_counts: FS,
            unit_exp: -3,
        },
        open_vu: fx(3000.0),
        short_vu: fx(500.0),
        min_drive_iu: Fx::ONE,
        debounce: 3,
    }
}

/// A plausibility check for the tests: 0.5 mA threshold and 0.55 mW/mA at
/// every temperature, margins 5 % and 10 %, 0.2 mA allowance (10 mA for
/// the 5 mW the matrix's monitor reads is plausible: the bound is 10.75 mA),
/// debounced over longer than monitor loss (a dark monitor with current is
/// implausible too).
fn plausibility_demo() -> diodestat_core::Plausibility {
    let pt = |t: f64| diodestat_core::DiodePoint {
        degc: fx(t),
        threshold_iu: fx(0.5),
        slope_ou_per_iu: fx(0.55),
    };
    diodestat_core::Plausibility {
        points: heapless::Vec::from_slice(&[pt(-20.0), pt(100.0)]).unwrap(),
        warning_margin: fx(0.05),
        fault_margin: fx(0.1),
        allowance_iu: fx(0.2),
        debounce: 200,
    }
}

fn rig_in(state: In, pre_latch: Fault) -> Rig {
    let cfg = matrix_cfg();
    let healthy_mon = counts_for(&cfg.config().calibration.monitor, fx(5.0));
    let mut r = Rig::new(cfg);
    r.monitor_override = Some(healthy_mon);
    r.run(5);
    if state == In::Off {
        return r;
    }
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(fx(10.0)));
    r.req(Request::Enable);
    r.run(10);
    if state == In::Arming {
        assert_eq!(r.ctl.state(), State::Arming);
        return r;
    }
    r.run_until(100_000, |c, _| c.drive_iu() >= fx(2.0))
        .unwrap();
    if state == In::Ramping {
        assert_eq!(r.ctl.state(), State::Ramping);
        return r;
    }
    r.run_until(100_000, |c, _| c.state() == State::Regulating)
        .unwrap();
    r.run(10);
    match state {
        In::Regulating => r,
        In::Stopping => {
            r.req(Request::Disable);
            r.run(10);
            assert_eq!(r.ctl.state(), State::Stopping);
            r
        }
        _ => {
            let d = r.step_with(inject(&r, pre_latch));
            assert_eq!(d.status.state, State::Latched);
            r.run(5);
            r
        }
    }
}

/// A sample change that makes `f`'s condition present.
fn inject(r: &Rig, f: Fault) -> impl Fn(&mut Sample) {
    let cfg = r.cfg().clone();
    let c = cfg.config().clone();
    let p = c.protection;
    let tc = c.calibration.temperature.clone();
    let over_temp = (tc.low_fault_counts + 1..tc.high_fault_counts)
        .find(|k| cfg.counts_to_degc(*k) >= c.derating.cutoff_degc)
        .expect("a reading at the cut-off");
    let oc = lowest_at_or_above(|k| cfg.current_iu(k), p.overcurrent_iu, FS);
    let ra = lowest_at_or_above(|k| cfg.monitor_ou(k), p.runaway_ou, FS);
    let mismatch = counts_for(
        &c.calibration.current_sense,
        r.ctl.drive_iu() + p.mismatch_tolerance_iu + Fx::ONE,
    );
    let limit = u32::from(p.missed_tick_limit);
    // Implausible: 2 mA more than commanded (inside the mismatch
    // tolerance) for 0.5 mW (above the monitor-loss floor).
    let plaus_cur = counts_for(&c.calibration.current_sense, r.ctl.drive_iu() + fx(2.0));
    let plaus_mon = counts_for(&c.calibration.monitor, fx(0.5));
    move |s: &mut Sample| match f {
        Fault::Overcurrent => s.current_counts = oc,
        Fault::MonitorRunaway => s.monitor_counts = ra,
        Fault::MonitorLoss => s.monitor_counts = 0,
        Fault::SensorOpen => s.temp_counts = tc.high_fault_counts,
        Fault::SensorShort => s.temp_counts = tc.low_fault_counts,
        Fault::OverTemperature => s.temp_counts = over_temp,
        Fault::InterlockOpen => s.interlock_closed = false,
        Fault::SupplyUnder => s.supply_counts = 0,
        Fault::SupplyOver => s.supply_counts = FS,
        Fault::DriveMismatch => s.current_counts = mismatch,
        Fault::MissedTicks => s.tick += limit,
        Fault::TickOrder => s.tick -= 1,
        Fault::PowerImplausible => {
            s.current_counts = plaus_cur;
            s.monitor_counts = plaus_mon;
        }
        Fault::DiodeOpen => s.forward_counts = Some(FS),
        Fault::DiodeShort => s.forward_counts = Some(0),
        Fault::ExternalFault => s.external_fault = true,
        Fault::DacBus | Fault::EnablePin | Fault::InterlockPin | Fault::RecordCorrupt => {
            unreachable!("{f} is not a sample condition")
        }
    }
}

#[test]
fn each_protection_is_armed_exactly_where_documented() {
    for f in Fault::ALL
        .into_iter()
        .filter(|f| !f.is_latched_outside_step())
    {
        for st in STATES {
            let pre = if f == Fault::Overcurrent {
                Fault::InterlockOpen
            } else {
                Fault::Overcurrent
            };
            let mut r = rig_in(st, pre);
            let before = r.ctl.state();
            // The slow check is evaluated every `SLOW_EVERY` ticks.
            let n = u32::from(debounce(r.cfg(), f))
                + if f == Fault::PowerImplausible {
                    diodestat_core::SLOW_EVERY
                } else {
                    0
                };
            let inj = inject(&r, f);
            let tick0 = r.s.tick;
            for _ in 0..n {
                r.step_with(&inj);
            }
            let armed = documented_armed(f, st);
            let tripped = r.ctl.faults().contains(f);
            assert_eq!(tripped, armed, "{f} in {st:?}: tripped {tripped}");
            if armed {
                assert_eq!(r.ctl.state(), State::Latched, "{f} in {st:?}");
                let rec = r
                    .ctl
                    .fault_log()
                    .first()
                    .into_iter()
                    .chain(r.ctl.fault_log().later())
                    .find(|x| x.fault == f)
                    .copied()
                    .unwrap_or_else(|| panic!("{f} in {st:?} not logged"));
                // (A repeated index trips on the index it repeats.)
                let after = rec.tick > tick0 || (f == Fault::TickOrder && rec.tick == tick0);
                assert!(after && rec.tick <= r.s.tick, "{f} in {st:?}");
            } else {
                assert_eq!(r.ctl.state(), before, "{f} in {st:?} changed state");
                // Evaluated everywhere; monitor loss needs a drive to exist.
                // (Plausibility needs only a sensed current.)
                let needs_drive =
                    matches!(f, Fault::MonitorLoss | Fault::DiodeOpen | Fault::DiodeShort);
                let can_be_present = !needs_drive || before.is_emitting();
                assert_eq!(
                    r.ctl.conditions().contains(f),
                    can_be_present,
                    "{f} in {st:?}: condition"
                );
            }
        }
    }
}

// ---------------------------------------------------------------------------
// The fault log.

fn all_records(r: &Rig) -> Vec<FaultRecord> {
    let log = r.ctl.fault_log();
    log.first()
        .into_iter()
        .chain(log.later())
        .copied()
        .collect()
}

#[test]
fn fault_log_keeps_the_first_apart_and_a_bounded_ring_of_later_ones() {
    let cfg = demo();
    let p = cfg.config().protection;
    let oc = lowest_at_or_above(|k| cfg.current_iu(k), p.overcurrent_iu, FS);
    let ra = lowest_at_or_above(|k| cfg.monitor_ou(k), p.runaway_ou, FS);
    let mut r = Rig::new(cfg.clone());
    let cycles = FAULT_RING_LEN + 4;
    let mut expected = Vec::new();
    for i in 0..cycles {
        // Fast faults are armed in Off: one sample trips, then a clear.
        let d = if i % 2 == 0 {
            r.step_with(|s| s.current_counts = oc)
        } else {
            r.step_with(|s| s.monitor_counts = ra)
        };
        assert_eq!(d.status.state, State::Latched);
        expected.push(if i % 2 == 0 {
            FaultRecord {
                fault: Fault::Overcurrent,
                tick: r.s.tick,
                measured: cfg.current_iu(oc),
                limit: p.overcurrent_iu,
            }
        } else {
            FaultRecord {
                fault: Fault::MonitorRunaway,
                tick: r.s.tick,
                measured: cfg.monitor_ou(ra),
                limit: p.runaway_ou,
            }
        });
        r.step();
        r.req(Request::ClearFaults);
    }
    let log = r.ctl.fault_log();
    assert_eq!(log.first(), expected.first());
    let later: Vec<FaultRecord> = log.later().copied().collect();
    assert_eq!(later.len(), FAULT_RING_LEN);
    assert_eq!(later, expected[cycles - FAULT_RING_LEN..]);
    assert_eq!(log.dropped() as usize, cycles - 1 - FAULT_RING_LEN);
    assert_eq!(log.len(), FAULT_RING_LEN + 1);
}

#[test]
fn simultaneous_trips_are_logged_in_bit_order_with_the_same_tick() {
    let cfg = demo();
    let p = cfg.config().protection;
    let oc = lowest_at_or_above(|k| cfg.current_iu(k), p.overcurrent_iu, FS);
    let ra = lowest_at_or_above(|k| cfg.monitor_ou(k), p.runaway_ou, FS);
    let mut r = Rig::new(cfg);
    let d = r.step_with(|s| {
        s.monitor_counts = ra;
        s.current_counts = oc;
    });
    assert!(d.status.faults.contains(Fault::Overcurrent));
    assert!(d.status.faults.contains(Fault::MonitorRunaway));
    let recs = all_records(&r);
    assert_eq!(recs.len(), 2);
    assert_eq!(recs[0].fault, Fault::Overcurrent);
    assert_eq!(recs[1].fault, Fault::MonitorRunaway);
    assert_eq!(recs[0].tick, r.s.tick);
    assert_eq!(recs[1].tick, r.s.tick);
}

#[test]
fn an_active_fault_is_logged_once_and_a_later_fast_fault_is_added() {
    let cfg = demo();
    let p = cfg.config().protection;
    let ra = lowest_at_or_above(|k| cfg.monitor_ou(k), p.runaway_ou, FS);
    let mut r = Rig::regulating_acc(cfg, fx(15.0));
    let d = r.step_with(|s| s.interlock_closed = false);
    assert_eq!(d.status.state, State::Latched);
    let t_latch = r.s.tick;
    // The interlock stays open: still one record.
    r.run(200);
    assert_eq!(all_records(&r).len(), 1);
    // A runaway while latched is armed and goes to the ring.
    r.step_with(|s| s.monitor_counts = ra);
    let t_runaway = r.s.tick;
    r.run(50);
    let recs = all_records(&r);
    assert_eq!(recs.len(), 2, "{recs:?}");
    assert_eq!(
        (recs[0].fault, recs[0].tick),
        (Fault::InterlockOpen, t_latch)
    );
    assert_eq!(
        (recs[1].fault, recs[1].tick),
        (Fault::MonitorRunaway, t_runaway)
    );
    assert!(r.ctl.faults().contains(Fault::InterlockOpen));
    assert!(r.ctl.faults().contains(Fault::MonitorRunaway));
}

// ---------------------------------------------------------------------------
// Temperature derating.

/// The documented curve, exactly (i128 rational), for comparison within
/// one LSB.
fn curve(cfg: &ValidConfig, t: Fx) -> Fx {
    let c = cfg.config();
    let (top, floor) = (c.current.ceiling_iu, c.derating.floor_iu);
    let (knee, cut) = (c.derating.knee_degc, c.derating.cutoff_degc);
    if t <= knee {
        return top;
    }
    if t >= cut {
        return floor;
    }
    let span = i128::from(top.to_bits() - floor.to_bits());
    let num = i128::from(t.to_bits()) - i128::from(knee.to_bits());
    let den = i128::from(cut.to_bits()) - i128::from(knee.to_bits());
    Fx::from_bits((i128::from(top.to_bits()) - span * num / den) as i32)
}

#[test]
fn derated_ceiling_is_full_below_the_knee_linear_and_the_floor_from_the_cutoff() {
    let cfg = demo();
    let d = cfg.config().derating;
    let top = cfg.config().current.ceiling_iu;
    let mut prev = top;
    let mut t = d.knee_degc - fx(10.0);
    while t <= d.cutoff_degc + fx(10.0) {
        let got = cfg.derated_ceiling_iu(t);
        let want = curve(&cfg, t);
        assert!((got - want).abs() <= Fx::DELTA, "{t} degC: {got} vs {want}");
        assert!(got <= prev, "non-increasing");
        assert!(got >= d.floor_iu && got <= top);
        prev = got;
        t += fx(0.125);
    }
    assert_eq!(cfg.derated_ceiling_iu(d.knee_degc), top);
    assert_eq!(cfg.derated_ceiling_iu(d.cutoff_degc), d.floor_iu);
    let mid = (d.knee_degc + d.cutoff_degc) / 2;
    let half = (top + d.floor_iu) / 2;
    assert!((cfg.derated_ceiling_iu(mid) - half).abs() <= Fx::DELTA);
}

#[test]
fn the_controller_applies_the_derated_ceiling_in_the_same_tick() {
    let cfg = demo();
    let c = cfg.config().clone();
    let top = c.current.ceiling_iu;
    let tc = c.calibration.temperature.clone();
    let knee_counts = temp_counts_for(&cfg, c.derating.knee_degc);
    assert_eq!(cfg.counts_to_degc(knee_counts), c.derating.knee_degc);
    let cut_counts = temp_counts_for(&cfg, c.derating.cutoff_degc);
    assert_eq!(cfg.counts_to_degc(cut_counts), c.derating.cutoff_degc);
    let probes = [
        temp_counts_for(&cfg, fx(30.0)),
        knee_counts,
        knee_counts - 1, // one count hotter (NTC: counts fall as it heats)
        temp_counts_for(&cfg, fx(57.5)),
        temp_counts_for(&cfg, fx(65.0)),
        cut_counts,
        cut_counts - 30,
    ];
    for counts in probes {
        assert!(counts > tc.low_fault_counts && counts < tc.high_fault_counts);
        let t = cfg.counts_to_degc(counts);
        let want = curve(&cfg, t).min(top);
        // ACC at the full ceiling: the drive sits on whatever ceiling applies.
        let mut r = Rig::regulating_acc(cfg.clone(), top);
        r.run(100);
        let d = r.step_with(|s| s.temp_counts = counts);
        assert!((r.ctl.ceiling_iu() - want).abs() <= Fx::DELTA, "{t} degC");
        assert!(r.ctl.drive_iu() <= r.ctl.ceiling_iu());
        assert!((r.ctl.drive_iu() - want).abs() <= Fx::DELTA, "{t} degC");
        assert!(d.dac_code <= cfg.dac_code(want));
        assert_eq!(d.status.warnings.derating, t > c.derating.knee_degc, "{t}");
        assert!(!d.status.warnings.sensor_suspect);
        // It holds there (short of the over-temperature debounce).
        for _ in 2..c.protection.over_temp_debounce {
            let d = r.step();
            assert!(d.enable, "{t} degC");
            assert!((r.ctl.drive_iu() - want).abs() <= Fx::DELTA);
        }
    }
}

#[test]
fn a_sensor_at_a_rail_holds_the_ceiling_at_the_floor_until_it_trips() {
    let cfg = demo();
    let c = cfg.config().clone();
    let floor = c.derating.floor_iu;
    let tc = c.calibration.temperature.clone();
    let n = c.protection.sensor_debounce;
    for (counts, fault) in [
        (tc.high_fault_counts, Fault::SensorOpen),
        (u16::MAX, Fault::SensorOpen),
        (tc.low_fault_counts, Fault::SensorShort),
        (0, Fault::SensorShort),
    ] {
        for apc in [false, true] {
            let mut r = if apc {
                Rig::regulating_apc(cfg.clone(), fx(20.0), 1_000)
            } else {
                Rig::regulating_acc(cfg.clone(), c.current.ceiling_iu)
            };
            assert!(r.ctl.drive_iu() > floor);
            for _ in 1..n {
                let d = r.step_with(|s| s.temp_counts = counts);
                assert!(d.enable);
                assert_eq!(r.ctl.ceiling_iu(), floor, "{counts} counts");
                assert!(r.ctl.drive_iu() <= floor);
                assert!(d.dac_code <= cfg.dac_code(floor));
                assert!(d.status.warnings.sensor_suspect);
                assert!(!d.status.warnings.derating);
            }
            let d = r.step_with(|s| s.temp_counts = counts);
            assert!(!d.enable);
            assert!(
                d.status.faults.contains(fault),
                "{counts}: {:?}",
                d.status.faults
            );
        }
    }
}

#[test]
fn counts_beyond_the_fixed_point_range_do_not_panic_and_saturate_in_the_record() {
    // A 16-bit converter and a missed-tick limit above 32 767 are valid.
    let cfg = demo_with(|c| c.protection.missed_tick_limit = 40_000);
    let mut r = Rig::regulating_acc(cfg, fx(15.0));
    let d = r.step_with(|s| s.tick += 40_000);
    assert!(!d.enable);
    let rec = *r.ctl.fault_log().first().unwrap();
    assert_eq!(rec.fault, Fault::MissedTicks);
    assert_eq!((rec.measured, rec.limit), (Fx::MAX, Fx::MAX));

    let mut r = Rig::regulating_acc(demo(), fx(15.0));
    for _ in 0..demo().config().protection.sensor_debounce {
        r.step_with(|s| s.temp_counts = 60_000);
    }
    let rec = *r.ctl.fault_log().first().unwrap();
    assert_eq!(rec.fault, Fault::SensorOpen);
    assert_eq!(rec.measured, Fx::MAX);
}

#[test]
fn the_derated_ceiling_also_bounds_the_soft_stop_and_the_soft_start() {
    let cfg = demo();
    let c = cfg.config().clone();
    let hot = temp_counts_for(&cfg, c.derating.cutoff_degc);
    let floor = c.derating.floor_iu;
    // Soft stop from the full ceiling: a hot sample pulls the drive under
    // the floor in that tick.
    let mut r = Rig::regulating_acc(cfg.clone(), c.current.ceiling_iu);
    r.req(Request::Disable);
    r.run(3);
    assert_eq!(r.ctl.state(), State::Stopping);
    assert!(r.ctl.drive_iu() > floor);
    let d = r.step_with(|s| s.temp_counts = hot);
    assert!(r.ctl.drive_iu() <= floor);
    assert!(d.dac_code <= cfg.dac_code(floor));
    // Soft start towards the full ceiling, hot: it stops at the floor.
    let mut r = Rig::new(cfg.clone());
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(c.current.ceiling_iu));
    r.req(Request::Enable);
    r.s.temp_counts = hot;
    for _ in 1..c.protection.over_temp_debounce {
        let d = r.step();
        assert!(r.ctl.drive_iu() <= floor);
        assert!(d.dac_code <= cfg.dac_code(floor));
    }
}
