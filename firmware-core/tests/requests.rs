//! Every request and every rejection: out of range (with the exact bounds),
//! not allowed in the state, a condition still present, no sample yet; and
//! the requests that are always accepted.

mod common;

use common::*;
use diodestat_core::{Controller, Fault, Fx, Mode, Rejection, Request, State};

fn fx(v: f64) -> Fx {
    Fx::from_num(v)
}

/// Rigs in each state a request can meet.
fn rigs() -> Vec<(State, Rig)> {
    let off = Rig::new(demo());
    let mut arming = Rig::new(demo());
    arming.req(Request::Enable);
    arming.run(3);
    let mut ramping = Rig::new(demo());
    ramping.req(Request::SetMode(Mode::Acc));
    ramping.req(Request::SetCurrent(fx(40.0)));
    ramping.req(Request::Enable);
    ramping
        .run_until(10_000, |c, _| c.state() == State::Ramping)
        .unwrap();
    let regulating = Rig::regulating_apc(demo(), fx(10.0), 100);
    let mut stopping = regulating.clone();
    stopping.req(Request::Disable);
    stopping.step();
    let mut latched = regulating.clone();
    latched.step_with(|s| s.interlock_closed = false);
    latched.s.interlock_closed = true;
    latched.step();
    let all = vec![
        (State::Off, off),
        (State::Arming, arming),
        (State::Ramping, ramping),
        (State::Regulating, regulating),
        (State::Stopping, stopping),
        (State::Latched, latched),
    ];
    for (st, r) in &all {
        assert_eq!(r.ctl.state(), *st);
    }
    all
}

#[test]
fn enable_before_any_sample_is_refused() {
    let mut ctl = Controller::new(demo());
    assert_eq!(ctl.request(Request::Enable), Err(Rejection::NoSampleYet));
    assert_eq!(ctl.state(), State::Off);
    ctl.step(&healthy_sample(ctl.config(), 0));
    assert_eq!(ctl.request(Request::Enable), Ok(()));
    assert_eq!(ctl.state(), State::Arming);
}

#[test]
fn enable_is_refused_outside_off() {
    for (st, mut r) in rigs() {
        if st == State::Off {
            continue;
        }
        assert_eq!(
            r.ctl.request(Request::Enable),
            Err(Rejection::NotAllowed { state: st })
        );
        assert_eq!(r.ctl.state(), st);
    }
}

#[test]
fn clear_faults_is_refused_outside_latched() {
    for (st, mut r) in rigs() {
        if st == State::Latched {
            continue;
        }
        assert_eq!(
            r.ctl.request(Request::ClearFaults),
            Err(Rejection::NotAllowed { state: st })
        );
        assert_eq!(r.ctl.state(), st);
    }
}

#[test]
fn enable_is_refused_while_a_condition_is_present() {
    let cfg = demo();
    let c = cfg.config().clone();
    let tc = c.calibration.temperature.clone();
    let hot = temp_counts_for(&cfg, c.derating.cutoff_degc + fx(2.0));
    let limit = u32::from(c.protection.missed_tick_limit);
    type Poke = Box<dyn Fn(&mut diodestat_core::Sample)>;
    let cases: Vec<(Fault, Poke)> = vec![
        (
            Fault::InterlockOpen,
            Box::new(|s| s.interlock_closed = false),
        ),
        (Fault::SupplyUnder, Box::new(|s| s.supply_counts = 0)),
        (Fault::SupplyOver, Box::new(|s| s.supply_counts = 4095)),
        (
            Fault::SensorOpen,
            Box::new(move |s| s.temp_counts = tc.high_fault_counts),
        ),
        (
            Fault::SensorShort,
            Box::new(move |s| s.temp_counts = tc.low_fault_counts),
        ),
        (
            Fault::OverTemperature,
            Box::new(move |s| s.temp_counts = hot),
        ),
        (Fault::MissedTicks, Box::new(move |s| s.tick += limit)),
    ];
    for (fault, poke) in cases {
        let mut r = Rig::new(cfg.clone());
        let d = r.step_with(&poke);
        assert_eq!(d.status.state, State::Off, "{fault} is not armed in Off");
        assert_eq!(
            r.ctl.request(Request::Enable),
            Err(Rejection::ConditionPresent { fault })
        );
        assert_eq!(r.ctl.state(), State::Off);
    }
    // Several at once: the first in bit order is named.
    let mut r = Rig::new(cfg.clone());
    r.step_with(|s| {
        s.supply_counts = 0;
        s.interlock_closed = false;
    });
    assert!((Fault::InterlockOpen as u8) < (Fault::SupplyUnder as u8));
    assert_eq!(
        r.ctl.request(Request::Enable),
        Err(Rejection::ConditionPresent {
            fault: Fault::InterlockOpen
        })
    );
    // Once the sample is healthy again the enable is accepted.
    r.s = healthy_sample(&cfg, r.s.tick);
    r.step();
    assert_eq!(r.ctl.request(Request::Enable), Ok(()));
}

#[test]
fn clear_faults_is_refused_while_any_condition_is_present() {
    let mut r = Rig::regulating_acc(demo(), fx(15.0));
    r.step_with(|s| s.interlock_closed = false);
    assert_eq!(r.ctl.state(), State::Latched);
    assert_eq!(
        r.ctl.request(Request::ClearFaults),
        Err(Rejection::ConditionPresent {
            fault: Fault::InterlockOpen
        })
    );
    // The latched fault is gone but another condition is present.
    r.step_with(|s| {
        s.interlock_closed = true;
        s.supply_counts = 0;
    });
    assert_eq!(
        r.ctl.request(Request::ClearFaults),
        Err(Rejection::ConditionPresent {
            fault: Fault::SupplyUnder
        })
    );
    assert_eq!(r.ctl.state(), State::Latched);
    r.s = healthy_sample(r.cfg(), r.s.tick);
    r.step();
    assert_eq!(r.ctl.request(Request::ClearFaults), Ok(()));
    assert_eq!(r.ctl.state(), State::Off);
    assert!(r.ctl.faults().is_empty());
}

#[test]
fn power_setpoint_range_is_the_configured_one() {
    let mut r = Rig::new(demo());
    let p = r.cfg().config().power;
    let (min, max) = (p.min_setpoint_ou, p.max_setpoint_ou);
    assert_eq!(
        r.ctl.power_target_ou(),
        min,
        "starts at the lowest setpoint"
    );
    for bad in [
        min - Fx::DELTA,
        max + Fx::DELTA,
        Fx::ZERO,
        -Fx::ONE,
        Fx::MAX,
    ] {
        assert_eq!(
            r.ctl.request(Request::SetPower(bad)),
            Err(Rejection::OutOfRange {
                requested: bad,
                min,
                max
            })
        );
        assert_eq!(r.ctl.power_target_ou(), min, "a refusal changes nothing");
    }
    for good in [min, max, (min + max) / 2] {
        assert_eq!(r.ctl.request(Request::SetPower(good)), Ok(()));
        assert_eq!(r.ctl.power_target_ou(), good);
    }
}

#[test]
fn current_setpoint_range_is_zero_to_the_ceiling() {
    let mut r = Rig::new(demo());
    let max = r.cfg().config().current.ceiling_iu;
    for bad in [-Fx::DELTA, max + Fx::DELTA, Fx::MIN] {
        assert_eq!(
            r.ctl.request(Request::SetCurrent(bad)),
            Err(Rejection::OutOfRange {
                requested: bad,
                min: Fx::ZERO,
                max
            })
        );
        assert_eq!(r.ctl.current_target_iu(), Fx::ZERO);
    }
    for good in [Fx::ZERO, max, max / 3] {
        assert_eq!(r.ctl.request(Request::SetCurrent(good)), Ok(()));
        assert_eq!(r.ctl.current_target_iu(), good);
    }
}

#[test]
fn setpoints_are_accepted_in_every_state() {
    for (st, mut r) in rigs() {
        assert_eq!(r.ctl.request(Request::SetPower(fx(7.0))), Ok(()), "{st:?}");
        assert_eq!(
            r.ctl.request(Request::SetCurrent(fx(7.0))),
            Ok(()),
            "{st:?}"
        );
        assert_eq!(r.ctl.state(), st);
    }
}

#[test]
fn disable_and_set_mode_are_always_accepted() {
    for (st, mut r) in rigs() {
        assert_eq!(r.ctl.request(Request::SetMode(Mode::Acc)), Ok(()));
        assert_eq!(r.ctl.request(Request::SetMode(Mode::Apc)), Ok(()));
        assert_eq!(r.ctl.request(Request::Disable), Ok(()), "{st:?}");
        let after = match st {
            State::Arming => State::Off,
            State::Ramping | State::Regulating => State::Stopping,
            other => other,
        };
        assert_eq!(r.ctl.state(), after, "Disable in {st:?}");
    }
}

#[test]
fn a_mode_request_takes_effect_at_the_next_tick() {
    let mut r = Rig::regulating_apc(demo(), fx(10.0), 100);
    r.req(Request::SetMode(Mode::Acc));
    assert_eq!(r.ctl.mode(), Mode::Apc);
    let d = r.step();
    assert_eq!(d.status.mode, Mode::Acc);
    assert_eq!(r.ctl.mode(), Mode::Acc);
}

#[test]
fn a_setpoint_request_takes_effect_at_the_next_tick() {
    let mut r = Rig::regulating_acc(demo(), fx(10.0));
    r.run(1_000);
    r.req(Request::SetCurrent(fx(20.0)));
    assert_eq!(r.ctl.drive_iu(), fx(10.0));
    r.step();
    assert!(r.ctl.drive_iu() > fx(10.0));
}

#[test]
fn rejections_display_their_values() {
    let s = Rejection::OutOfRange {
        requested: fx(40.0),
        min: fx(1.0),
        max: fx(30.0),
    }
    .to_string();
    assert!(
        s.contains("40") && s.contains('1') && s.contains("30"),
        "{s}"
    );
    let s = Rejection::NotAllowed {
        state: State::Latched,
    }
    .to_string();
    assert!(s.contains(State::Latched.name()), "{s}");
    let s = Rejection::ConditionPresent {
        fault: Fault::InterlockOpen,
    }
    .to_string();
    assert!(s.contains(Fault::InterlockOpen.name()), "{s}");
    assert!(!Rejection::NoSampleYet.to_string().is_empty());
}
