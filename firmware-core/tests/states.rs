//! The state machine: every transition, the emission delay, soft start,
//! hand-over, setpoint ramp, soft stop, bumpless mode transfer and
//! anti-windup, closed around the linear plant of `common`.

mod common;

use common::*;
use diodestat_core::{Fault, Fx, Mode, Request, State};

fn fx(v: f64) -> Fx {
    Fx::from_num(v)
}

/// The drive change a bumpless transfer into APC may cause on its first
/// tick: the setpoint starts at the measured power and moves one setpoint
/// step, so the PI output moves by at most (kp + ki) × step; plus rounding.
fn apc_transfer_bound(r: &Rig) -> Fx {
    let cfg = r.cfg();
    let ki = Fx::from_num(cfg.ki_per_tick());
    (cfg.kp() + ki) * cfg.setpoint_ou_per_tick() + Fx::from_bits(64)
}

#[test]
fn off_arming_ramping_regulating_stopping_off() {
    let cfg = demo();
    let delay = ticks_for_ms(cfg.config().ramp.emission_delay_ms, cfg.config().tick_hz);
    assert!(delay > 0, "the demo has an emission delay");
    let mut r = Rig::new(cfg);
    assert_eq!(r.last.status.state, State::Off);
    assert!(!r.last.enable);
    r.req(Request::SetPower(fx(15.0)));
    r.req(Request::Enable);
    let mut seen: Vec<(State, u32)> = Vec::new();
    let mut note = |st: State| match seen.last_mut() {
        Some((s, n)) if *s == st => *n += 1,
        _ => seen.push((st, 1)),
    };
    for _ in 0..20_000 {
        let d = r.step();
        note(d.status.state);
        assert_eq!(d.enable, d.status.state.is_emitting());
        if !d.enable {
            assert_eq!(d.dac_code, 0);
        }
    }
    // Regulated to the setpoint within two monitor counts.
    let count = r.cfg().monitor_ou(1) - r.cfg().monitor_ou(0);
    let mon = r.ctl.measurements().monitor_ou;
    assert!((mon - fx(15.0)).abs() <= count * 2, "monitor {mon} mW");
    r.req(Request::Disable);
    for _ in 0..2_000 {
        let d = r.step();
        note(d.status.state);
        assert_eq!(d.enable, d.status.state.is_emitting());
    }
    let states: Vec<State> = seen.iter().map(|(s, _)| *s).collect();
    assert_eq!(
        states,
        [
            State::Arming,
            State::Ramping,
            State::Regulating,
            State::Stopping,
            State::Off
        ]
    );
    assert_eq!(seen[0].1, delay, "Arming lasts the emission delay");
    assert_eq!(r.last.dac_code, 0);
    assert!(r.ctl.faults().is_empty());
}

#[test]
fn zero_emission_delay_emits_on_the_first_step() {
    let mut r = Rig::new(demo_with(|c| c.ramp.emission_delay_ms = 0));
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(fx(20.0)));
    r.req(Request::Enable);
    assert_eq!(
        r.ctl.state(),
        State::Arming,
        "accepted, effective next tick"
    );
    let step = per_tick(
        r.cfg().config().ramp.soft_start_iu_per_ms,
        r.cfg().config().tick_hz,
    );
    let d = r.step();
    assert_eq!(d.status.state, State::Ramping);
    assert!(d.enable);
    assert_eq!(r.ctl.drive_iu(), step);
    assert_eq!(d.dac_code, r.cfg().dac_code(step));
}

#[test]
fn emission_delay_is_whole_ticks_rounded_up() {
    for (hz, ms) in [(20_000u32, 2u32), (1_500, 1), (1_000, 7), (3_000, 5)] {
        let cfg = demo_with(|c| {
            c.tick_hz = hz;
            c.ramp.emission_delay_ms = ms;
            // A fast debounce is bounded in time (500 us).
            let fast_max = diodestat_core::fast_debounce_max(hz);
            c.protection.mismatch_debounce = c.protection.mismatch_debounce.min(fast_max);
        });
        let n = ticks_for_ms(ms, hz);
        assert_eq!(cfg.emission_delay_ticks(), n);
        let mut r = Rig::new(cfg);
        r.req(Request::SetMode(Mode::Acc));
        r.req(Request::SetCurrent(fx(20.0)));
        r.req(Request::Enable);
        for k in 0..n {
            let d = r.step();
            assert_eq!(d.status.state, State::Arming, "{hz} Hz {ms} ms tick {k}");
            assert!(!d.enable);
            assert_eq!(d.dac_code, 0);
        }
        let d = r.step();
        assert_eq!(d.status.state, State::Ramping, "{hz} Hz {ms} ms");
        assert!(d.enable);
    }
}

#[test]
fn disable_in_off_is_accepted_and_changes_nothing() {
    let mut r = Rig::new(demo());
    r.req(Request::Disable);
    assert_eq!(r.ctl.state(), State::Off);
    for _ in 0..100 {
        let d = r.step();
        assert_eq!(d.status.state, State::Off);
        assert!(!d.enable);
    }
}

#[test]
fn disable_in_arming_returns_to_off_without_emitting() {
    let cfg = demo();
    let delay = cfg.emission_delay_ticks();
    let mut r = Rig::new(cfg);
    r.req(Request::Enable);
    r.run(delay / 2);
    assert_eq!(r.ctl.state(), State::Arming);
    r.req(Request::Disable);
    assert_eq!(r.ctl.state(), State::Off);
    for _ in 0..2 * delay {
        let d = r.step();
        assert_eq!(d.status.state, State::Off);
        assert!(!d.enable);
        assert_eq!(d.dac_code, 0);
    }
}

/// After a Disable the drive falls by exactly the soft-stop step per tick
/// and the state is Off on the step that reaches zero.
fn assert_soft_stop(r: &mut Rig) {
    let stop = per_tick(
        r.cfg().config().ramp.soft_stop_iu_per_ms,
        r.cfg().config().tick_hz,
    );
    let d0 = r.ctl.drive_iu();
    assert!(d0 > stop * 3, "starts from a real drive");
    r.req(Request::Disable);
    assert_eq!(r.ctl.state(), State::Stopping);
    let mut k = 0i32;
    loop {
        k += 1;
        let d = r.step();
        let want = (d0 - stop * k).max(Fx::ZERO);
        assert_eq!(r.ctl.drive_iu(), want, "soft-stop tick {k}");
        if want == Fx::ZERO {
            assert_eq!(d.status.state, State::Off);
            assert!(!d.enable);
            assert_eq!(d.dac_code, 0);
            break;
        }
        assert_eq!(d.status.state, State::Stopping);
        assert!(d.enable);
        assert_eq!(d.dac_code, r.cfg().dac_code(want));
    }
    // Ceil(d0 / stop) steps.
    let n = (d0.to_bits() as i64 + stop.to_bits() as i64 - 1) / stop.to_bits() as i64;
    assert_eq!(i64::from(k), n);
    for _ in 0..100 {
        assert_eq!(r.step().status.state, State::Off);
    }
}

#[test]
fn disable_in_ramping_soft_stops_from_the_present_drive() {
    let mut r = Rig::new(demo());
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(fx(45.0)));
    r.req(Request::Enable);
    r.run_until(10_000, |c, _| {
        c.state() == State::Ramping && c.drive_iu() >= fx(20.0)
    })
    .unwrap();
    assert_soft_stop(&mut r);
}

#[test]
fn disable_in_regulating_soft_stops() {
    let mut r = Rig::regulating_apc(demo(), fx(18.0), 2_000);
    assert_soft_stop(&mut r);
    let mut r = Rig::regulating_acc(demo(), fx(37.5));
    assert_soft_stop(&mut r);
}

#[test]
fn disable_in_stopping_keeps_the_same_soft_stop() {
    let mut a = Rig::regulating_acc(demo(), fx(40.0));
    a.req(Request::Disable);
    a.run(5);
    let mut b = a.clone();
    b.req(Request::Disable);
    assert_eq!(b.ctl.state(), State::Stopping);
    for _ in 0..100 {
        let (da, db) = (a.step(), b.step());
        assert_eq!(da, db);
    }
    assert_eq!(b.ctl.state(), State::Off);
}

#[test]
fn latched_leaves_only_through_clear_faults_and_only_to_off() {
    let mut r = Rig::regulating_apc(demo(), fx(15.0), 1_000);
    let d = r.step_with(|s| s.interlock_closed = false);
    assert_eq!(d.status.state, State::Latched);
    // Nothing but an accepted clear leaves Latched.
    r.s.interlock_closed = true;
    for _ in 0..5_000 {
        let d = r.step();
        assert_eq!(d.status.state, State::Latched);
        assert!(!d.enable);
        assert_eq!(d.dac_code, 0);
    }
    r.req(Request::Disable);
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetMode(Mode::Apc));
    assert_eq!(r.step().status.state, State::Latched);
    assert!(r.ctl.request(Request::Enable).is_err());
    // A condition present refuses the clear.
    r.step_with(|s| s.interlock_closed = false);
    assert!(r.ctl.request(Request::ClearFaults).is_err());
    assert_eq!(r.ctl.state(), State::Latched);
    r.s.interlock_closed = true;
    r.step();
    // No condition: the clear goes to Off, and the laser does not restart.
    r.req(Request::ClearFaults);
    assert_eq!(r.ctl.state(), State::Off);
    assert!(r.ctl.faults().is_empty());
    assert_eq!(
        r.ctl.fault_log().first().map(|f| f.fault),
        Some(Fault::InterlockOpen),
        "the log keeps the record"
    );
    for _ in 0..5_000 {
        let d = r.step();
        assert_eq!(d.status.state, State::Off);
        assert!(!d.enable);
    }
    // And it can be enabled again.
    r.req(Request::Enable);
    r.run_until(10_000, |c, _| c.state() == State::Regulating)
        .unwrap();
}

#[test]
fn soft_start_rises_by_the_configured_rate_to_the_acc_setpoint() {
    let cfg = demo_with(|c| c.ramp.emission_delay_ms = 0);
    let ss = per_tick(cfg.config().ramp.soft_start_iu_per_ms, cfg.config().tick_hz);
    assert_eq!(cfg.soft_start_iu_per_tick(), ss);
    let target = fx(30.0);
    let mut r = Rig::new(cfg);
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(target));
    r.req(Request::Enable);
    let mut k = 0i32;
    loop {
        k += 1;
        let d = r.step();
        let want = (ss * k).min(target);
        assert_eq!(r.ctl.drive_iu(), want, "tick {k}");
        assert_eq!(d.dac_code, r.cfg().dac_code(want));
        assert!(r.ctl.ceiling_iu() >= want);
        if want == target {
            assert_eq!(d.status.state, State::Regulating);
            break;
        }
        assert_eq!(d.status.state, State::Ramping);
    }
    // Ceil(target / step) ticks of soft start.
    let n = (target.to_bits() + ss.to_bits() - 1) / ss.to_bits();
    assert_eq!(k, n);
    // Then it stays at the setpoint.
    for _ in 0..1_000 {
        r.step();
        assert_eq!(r.ctl.drive_iu(), target);
    }
}

#[test]
fn apc_soft_start_hands_over_at_the_configured_fraction() {
    let cfg = demo_with(|c| c.ramp.emission_delay_ms = 0);
    let c = cfg.config().clone();
    let ss = per_tick(c.ramp.soft_start_iu_per_ms, c.tick_hz);
    let target = fx(15.0);
    let handover = target * c.ramp.handover_fraction;
    let mut r = Rig::new(cfg);
    r.req(Request::SetPower(target));
    r.req(Request::Enable);
    let mut prev_drive = Fx::ZERO;
    let mut k = 0;
    loop {
        k += 1;
        assert!(k < 1_000, "hands over");
        let d = r.step();
        let reading = r.cfg().monitor_ou(r.s.monitor_counts);
        if d.status.state == State::Regulating {
            assert!(reading >= handover, "hands over at {reading} mW");
            assert_eq!(r.ctl.drive_iu(), prev_drive, "hand-over holds the drive");
            assert_eq!(r.ctl.integrator_iu(), prev_drive, "integrator preset");
            assert_eq!(r.ctl.power_setpoint_ou(), reading, "setpoint at measured");
            break;
        }
        assert_eq!(d.status.state, State::Ramping);
        assert!(reading < handover, "no hand-over below the fraction");
        assert_eq!(r.ctl.drive_iu(), prev_drive + ss, "soft-start step");
        prev_drive = r.ctl.drive_iu();
    }
    // After the hand-over the ceiling envelope keeps rising at the
    // soft-start rate up to the configured ceiling.
    let mut env = r.ctl.ceiling_iu();
    for _ in 0..200 {
        r.step();
        env = (env + ss).min(c.current.ceiling_iu);
        assert_eq!(r.ctl.ceiling_iu(), env);
        assert!(r.ctl.drive_iu() <= env);
    }
    assert_eq!(env, c.current.ceiling_iu);
}

#[test]
fn apc_soft_start_without_light_regulates_from_the_ceiling() {
    // A dead diode: soft start reaches the ceiling without hand-over.
    let cfg = demo_with(|c| c.ramp.emission_delay_ms = 0);
    let ceiling = cfg.config().current.ceiling_iu;
    let mut r = Rig::new(cfg);
    r.plant.slope_ou_per_iu = Fx::ZERO;
    r.req(Request::SetPower(fx(10.0)));
    r.req(Request::Enable);
    r.run_until(1_000, |c, _| c.state() != State::Ramping)
        .unwrap();
    assert_eq!(r.ctl.state(), State::Regulating);
    assert_eq!(r.ctl.drive_iu(), ceiling);
    // Monitor loss then trips (covered in faults.rs); the drive never
    // exceeded the ceiling on the way.
    let d = r.run(100);
    assert_eq!(d.status.state, State::Latched);
    assert!(d.status.faults.contains(Fault::MonitorLoss));
}

#[test]
fn power_setpoint_ramps_at_the_configured_rate() {
    let mut r = Rig::regulating_apc(demo(), fx(10.0), 2_000);
    let c = r.cfg().config().clone();
    let step = per_tick(c.ramp.setpoint_ou_per_ms, c.tick_hz);
    assert_eq!(r.cfg().setpoint_ou_per_tick(), step);
    for (from, to) in [(10.0, 20.0), (20.0, 5.0), (5.0, 5.5)] {
        let (from, to) = (fx(from), fx(to));
        assert_eq!(r.ctl.power_setpoint_ou(), from);
        r.req(Request::SetPower(to));
        assert_eq!(r.ctl.power_target_ou(), to);
        let mut k = 0i32;
        while r.ctl.power_setpoint_ou() != to {
            k += 1;
            r.step();
            let want = if to > from {
                (from + step * k).min(to)
            } else {
                (from - step * k).max(to)
            };
            assert_eq!(r.ctl.power_setpoint_ou(), want, "tick {k}");
        }
        let n = ((to - from).abs().to_bits() + step.to_bits() - 1) / step.to_bits();
        assert_eq!(k, n);
        r.run(5_000);
        let count = r.cfg().monitor_ou(1) - r.cfg().monitor_ou(0);
        let mon = r.ctl.measurements().monitor_ou;
        assert!((mon - to).abs() <= count * 2, "settles at {to}: {mon}");
    }
}

#[test]
fn acc_setpoint_changes_slew_at_the_configured_rate() {
    let mut r = Rig::regulating_acc(demo(), fx(20.0));
    let c = r.cfg().config().clone();
    let slew = per_tick(c.apc.slew_iu_per_ms, c.tick_hz);
    let ss = per_tick(c.ramp.soft_start_iu_per_ms, c.tick_hz);
    // Right after the soft start the ceiling envelope is still rising at the
    // soft-start rate and bounds a raise.
    let mut probe = r.clone();
    probe.req(Request::SetCurrent(fx(40.0)));
    let before = probe.ctl.drive_iu();
    probe.step();
    assert_eq!(probe.ctl.drive_iu(), before + slew.min(ss));
    // Once the envelope is at the configured ceiling the slew limit rules.
    r.run(1_000);
    assert_eq!(r.ctl.ceiling_iu(), c.current.ceiling_iu);
    assert_eq!(r.cfg().slew_iu_per_tick(), slew);
    for to in [42.25, 3.0, 3.5] {
        let to = fx(to);
        let from = r.ctl.drive_iu();
        r.req(Request::SetCurrent(to));
        let mut k = 0i32;
        while r.ctl.drive_iu() != to {
            k += 1;
            assert!(k < 1_000);
            r.step();
            let want = if to > from {
                (from + slew * k).min(to)
            } else {
                (from - slew * k).max(to)
            };
            assert_eq!(r.ctl.drive_iu(), want);
        }
    }
}

#[test]
fn acc_to_apc_is_bumpless_with_the_target_above_or_below_the_measured_power() {
    for target in [20.0, 5.0] {
        let mut r = Rig::regulating_acc(demo(), fx(40.0));
        r.run(200);
        let bound = apc_transfer_bound(&r);
        let before = r.ctl.drive_iu();
        r.req(Request::SetPower(fx(target)));
        r.req(Request::SetMode(Mode::Apc));
        let d = r.step();
        assert_eq!(d.status.mode, Mode::Apc);
        assert_eq!(d.status.state, State::Regulating);
        let jump = (r.ctl.drive_iu() - before).abs();
        assert!(
            jump <= bound,
            "target {target}: drive moved {jump} mA > {bound}"
        );
        // The setpoint starts from the measured power and ramps.
        let reading = r.cfg().monitor_ou(r.s.monitor_counts);
        let step = r.cfg().setpoint_ou_per_tick();
        assert!((r.ctl.power_setpoint_ou() - reading).abs() <= step);
        // And the loop then settles at the new target.
        r.run(10_000);
        let count = r.cfg().monitor_ou(1) - r.cfg().monitor_ou(0);
        let mon = r.ctl.measurements().monitor_ou;
        assert!((mon - fx(target)).abs() <= count * 2, "{target}: {mon}");
    }
}

#[test]
fn apc_to_acc_is_bumpless_and_then_slews() {
    let mut r = Rig::regulating_apc(demo(), fx(12.0), 3_000);
    let held = r.ctl.drive_iu();
    // Current setpoint equal to the present drive: no change at all.
    r.req(Request::SetCurrent(held));
    r.req(Request::SetMode(Mode::Acc));
    let d = r.step();
    assert_eq!(d.status.mode, Mode::Acc);
    assert_eq!(r.ctl.drive_iu(), held);
    // Back to APC and then to ACC with a distant setpoint: the first step
    // moves by the slew limit, not to the setpoint.
    r.req(Request::SetMode(Mode::Apc));
    r.run(3_000);
    let slew = r.cfg().slew_iu_per_tick();
    let before = r.ctl.drive_iu();
    r.req(Request::SetCurrent(fx(45.0)));
    r.req(Request::SetMode(Mode::Acc));
    r.step();
    assert_eq!(r.ctl.drive_iu(), before + slew);
}

#[test]
fn mode_change_during_soft_start_does_not_jump() {
    // APC soft start at 20 mA (no light yet), switch to ACC at 5 mA.
    let cfg = demo_with(|c| c.ramp.emission_delay_ms = 0);
    let slew = cfg.slew_iu_per_tick();
    let mut r = Rig::new(cfg);
    r.req(Request::SetPower(fx(15.0)));
    r.req(Request::Enable);
    r.run_until(1_000, |c, _| c.drive_iu() >= fx(20.0)).unwrap();
    assert_eq!(r.ctl.state(), State::Ramping);
    r.req(Request::SetCurrent(fx(5.0)));
    r.req(Request::SetMode(Mode::Acc));
    let mut prev = r.ctl.drive_iu();
    for _ in 0..100 {
        r.step();
        let now = r.ctl.drive_iu();
        assert!((now - prev).abs() <= slew, "{prev} -> {now} mA");
        prev = now;
    }
    assert_eq!(r.ctl.state(), State::Regulating);
    assert_eq!(r.ctl.drive_iu(), fx(5.0));

    // ACC soft start with the setpoint lowered under the present drive.
    let cfg = demo_with(|c| c.ramp.emission_delay_ms = 0);
    let mut r = Rig::new(cfg);
    r.req(Request::SetMode(Mode::Acc));
    r.req(Request::SetCurrent(fx(40.0)));
    r.req(Request::Enable);
    r.run_until(1_000, |c, _| c.drive_iu() >= fx(20.0)).unwrap();
    assert_eq!(r.ctl.state(), State::Ramping);
    r.req(Request::SetCurrent(fx(10.0)));
    let mut prev = r.ctl.drive_iu();
    for _ in 0..100 {
        r.step();
        let now = r.ctl.drive_iu();
        assert!((now - prev).abs() <= slew, "{prev} -> {now} mA");
        prev = now;
    }
    assert_eq!(r.ctl.drive_iu(), fx(10.0));
}

#[test]
fn integrator_holds_while_the_output_is_at_the_ceiling() {
    // 30 mW is beyond the plant (22.5 mW at the 50 mA ceiling).
    let mut r = Rig::regulating_apc(demo(), fx(15.0), 2_000);
    let ceiling = r.cfg().config().current.ceiling_iu;
    r.req(Request::SetPower(fx(30.0)));
    r.run_until(2_000, |c, d| {
        d.status.warnings.at_ceiling && c.drive_iu() == ceiling
    })
    .expect("saturates");
    r.step();
    let held = r.ctl.integrator_iu();
    for _ in 0..2_000 {
        let d = r.step();
        assert!(d.status.warnings.at_ceiling);
        assert_eq!(r.ctl.drive_iu(), ceiling);
        assert_eq!(
            r.ctl.integrator_iu(),
            held,
            "no integration while saturated"
        );
    }
    // Conditional integration stopped it below the ceiling (clamping alone
    // would have let it climb to the ceiling).
    assert!(held < ceiling, "integrator {held} mA");
    // Lowering the setpoint: the drive leaves the ceiling as soon as the
    // ramped setpoint passes the measured power.
    let reading = r.ctl.measurements().monitor_ou;
    let step = r.cfg().setpoint_ou_per_tick();
    let n0 = ((fx(30.0) - reading).to_bits() + step.to_bits() - 1) / step.to_bits();
    r.req(Request::SetPower(fx(10.0)));
    let n = r
        .run_until(1_000, |c, _| c.drive_iu() < ceiling)
        .expect("leaves the ceiling");
    assert!(
        n <= n0 as u32 + 2,
        "left the ceiling after {n} ticks (> {n0} + 2)"
    );
}

#[test]
fn integrator_holds_while_the_output_is_at_zero() {
    let mut r = Rig::regulating_apc(demo(), fx(5.0), 2_000);
    // The monitor reads far above the setpoint: the drive goes to zero.
    let cal = r.cfg().config().calibration.monitor;
    r.monitor_override = Some(counts_for(&cal, fx(25.0)));
    r.run_until(1_000, |c, _| c.drive_iu() == Fx::ZERO)
        .expect("drive reaches zero");
    r.step();
    let held = r.ctl.integrator_iu();
    for _ in 0..2_000 {
        r.step();
        assert_eq!(r.ctl.state(), State::Regulating);
        assert_eq!(r.ctl.drive_iu(), Fx::ZERO);
        assert_eq!(r.ctl.integrator_iu(), held);
    }
    assert!(held > Fx::ZERO, "did not wind down to zero");
    // The reading returns: regulation resumes.
    r.monitor_override = None;
    r.run(10_000);
    let count = r.cfg().monitor_ou(1) - r.cfg().monitor_ou(0);
    let mon = r.ctl.measurements().monitor_ou;
    assert!((mon - fx(5.0)).abs() <= count * 2, "{mon}");
}

#[test]
fn regulation_holds_the_setpoint_across_the_range() {
    let cfg = demo();
    let count = cfg.monitor_ou(1) - cfg.monitor_ou(0);
    let min = cfg.config().power.min_setpoint_ou;
    for mw in [min, fx(3.0), fx(10.0), fx(20.0), fx(22.0)] {
        let mut r = Rig::regulating_apc(cfg.clone(), mw, 5_000);
        let mut sum = 0i64;
        let n = 2_000;
        for _ in 0..n {
            r.step();
            let mon = r.ctl.measurements().monitor_ou;
            assert!((mon - mw).abs() <= count * 3, "{mw}: {mon}");
            sum += i64::from(mon.to_bits());
        }
        let mean = Fx::from_bits((sum / n) as i32);
        assert!((mean - mw).abs() <= count, "{mw}: mean {mean}");
        assert!(r.ctl.faults().is_empty());
    }
}

/// APC -> ACC needs nothing from the power loop: the switch leaves its
/// ramped setpoint and its integrator as they were, whatever the monitor
/// reads on that tick (only a switch to APC while regulating starts the
/// loop afresh, from the measured power and the present drive).
#[test]
fn apc_to_acc_leaves_the_power_loop_as_it_was() {
    let cfg = demo();
    let mon = cfg.config().calibration.monitor;
    let mut r = Rig::regulating_apc(cfg, fx(12.0), 1_000);
    let (sp, integ) = (r.ctl.power_setpoint_ou(), r.ctl.integrator_iu());
    assert_eq!(sp, fx(12.0));
    r.req(Request::SetCurrent(r.ctl.drive_iu()));
    r.req(Request::SetMode(Mode::Acc));
    let dim = counts_for(&mon, fx(5.0));
    let d = r.step_with(|s| s.monitor_counts = dim);
    assert_eq!(
        (d.status.mode, d.status.state),
        (Mode::Acc, State::Regulating)
    );
    assert_eq!(r.ctl.power_setpoint_ou(), sp);
    assert_eq!(r.ctl.integrator_iu(), integ);
}

/// In ACC the at-ceiling warning says whether the current setpoint is
/// held on the ceiling in force: off below it, on at it.
#[test]
fn acc_warns_at_the_ceiling_and_not_below_it() {
    let cfg = demo();
    let top = cfg.config().current.ceiling_iu;
    let mut r = Rig::regulating_acc(cfg.clone(), fx(40.0));
    let d = r.run(10);
    assert!(
        !d.status.warnings.at_ceiling,
        "40 mA under a {top} mA ceiling"
    );
    let mut r = Rig::regulating_acc(cfg, top);
    let d = r.run(10);
    assert_eq!(r.ctl.drive_iu(), top);
    assert!(d.status.warnings.at_ceiling, "on the {top} mA ceiling");
}
