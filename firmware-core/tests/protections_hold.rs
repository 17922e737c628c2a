//! Protections that hold under intermittent, latent and implausible
//! faults: an intermittent condition still trips, a fast protection cannot
//! be slowed down by its configuration, a temperature table must see past
//! the cut-off, emission never starts with a condition present, and the
//! tick index may only move forward.

mod common;

use common::*;
use diodestat_core::{Fault, Fx, Request, State};

fn fx(v: f64) -> Fx {
    Fx::from_num(v)
}

fn names(f: diodestat_core::FaultSet) -> Vec<&'static str> {
    f.iter().map(|f| f.name()).collect()
}

/// An open monitor contact that reads the real light one tick in twenty:
/// the power loop sits on its ceiling with a dark monitor 95 % of the time.
/// A debounce that restarts on one clean tick never trips; the leaky
/// integrator must.
#[test]
fn an_intermittent_open_monitor_trips_monitor_loss() {
    let cfg = demo();
    let mut r = Rig::regulating_apc(cfg, fx(20.0), 200);
    let mut tripped = None;
    for k in 0..20_000u32 {
        r.monitor_override = if k % 20 == 19 { None } else { Some(0) };
        let d = r.step();
        if d.status.faults.contains(Fault::MonitorLoss) {
            tripped = Some(k);
            break;
        }
    }
    let k = tripped.expect("monitor loss trips on an intermittent open monitor");
    // Within the documented bound (see `protect.rs`): w·N / ((w+1)·d − 1)
    // ticks after the loop reaches its ceiling, d = 19/20; the ceiling is
    // reached within a few hundred ticks of the contact opening.
    assert!(k < 2_000, "tripped after {k} ticks");
}

/// The fast protections promise a trip on the step that sees the sample:
/// a debounce of 65 535 ticks (3.3 s at 20 kHz) breaks that promise and is
/// refused, naming the configuration key.
#[test]
fn a_fast_protection_refuses_a_long_debounce() {
    type Set = fn(&mut diodestat_core::Config);
    let cases: [(&str, Set); 3] = [
        ("protection.overcurrent_debounce", |c| {
            c.protection.overcurrent_debounce = 65_535
        }),
        ("protection.runaway_debounce", |c| {
            c.protection.runaway_debounce = 65_535
        }),
        ("protection.interlock_debounce", |c| {
            c.protection.interlock_debounce = 65_535
        }),
    ];
    for (key, set) in cases {
        let mut c = diodestat_core::example::config();
        set(&mut c);
        let err = c.validate().expect_err(key);
        let text = err.to_string();
        assert!(text.contains(key), "{key}: {text}");
        assert!(text.contains("65535"), "{key}: {text}");
    }
    let mut c = diodestat_core::example::config();
    c.protection.mismatch_debounce = 65_535;
    let text = c.validate().expect_err("mismatch").to_string();
    assert!(text.contains("protection.mismatch_debounce"), "{text}");
}

/// A table that ends at 45 °C with a 70 °C cut-off extrapolates its last
/// segment and trips over-temperature about 13 °C late: refused.
#[test]
fn a_temperature_table_short_of_the_cutoff_is_refused() {
    let mut c = diodestat_core::example::config();
    let keep: heapless::Vec<_, 33> = c
        .calibration
        .temperature
        .table
        .iter()
        .copied()
        .filter(|p| p.degc <= fx(45.0))
        .collect();
    c.calibration.temperature.table = keep;
    let err = c
        .validate()
        .expect_err("a table ending at 45 degC is refused");
    let text = err.to_string();
    assert!(text.contains("45"), "{text}");
    assert!(text.contains("80"), "{text}"); // the 70 degC cut-off plus 10
}

/// A condition that appears during the emission delay, present but not yet
/// debounced when the delay ends (a temperature reading far past the hot
/// end of the table), must hold the start: enable stays low while it is
/// present, and emission starts once it has cleared.
#[test]
fn emission_does_not_start_while_a_condition_is_present() {
    let cfg = demo();
    let hot = 100; // inside the rails, far past the table's hot end
    let healthy = healthy_sample(&cfg, 0).temp_counts;
    let delay = cfg.emission_delay_ticks();
    let mut r = Rig::new(cfg);
    r.req(Request::SetMode(diodestat_core::Mode::Acc));
    r.req(Request::SetCurrent(fx(30.0)));
    r.req(Request::Enable);
    // The delay runs out with the reading present from its last tick on.
    for _ in 0..delay.saturating_sub(1) {
        assert!(!r.step().enable);
    }
    for k in 0..30 {
        let d = r.step_with(|s| s.temp_counts = hot);
        assert!(
            r.ctl.conditions().contains(Fault::OverTemperature),
            "tick {k}"
        );
        assert!(!d.enable, "emission started with a condition present ({k})");
        assert!(r.ctl.start_held(), "the held start is reported ({k})");
    }
    // Cleared before its debounce: the start goes ahead.
    r.s.temp_counts = healthy;
    let n = r
        .run_until(100, |_, d| d.enable)
        .expect("emission starts once the condition clears");
    assert!(n <= 2, "{n}");
    assert!(r.ctl.faults().is_empty());
}

/// A repeated tick index (a sample delivered twice, a stalled tick source)
/// and a backward one are a fault of their own.
#[test]
fn a_repeated_or_backward_tick_index_is_a_fault() {
    for back in [0u32, 1, 5] {
        let mut r = Rig::regulating_acc(demo(), fx(20.0));
        // `step_with` advances the index by one first.
        let d = r.step_with(|s| s.tick = s.tick.wrapping_sub(1 + back));
        assert!(!d.enable, "back {back}");
        assert_eq!(d.status.state, State::Latched, "back {back}");
        assert_eq!(names(d.status.faults), ["tick-order"], "back {back}");
    }
}

mod properties {
    use super::*;
    use diodestat_core::Mode;
    use proptest::prelude::*;

    /// A 64-bit LCG (Knuth's MMIX constants, `common practice`).
    fn lcg(x: &mut u64) -> u32 {
        *x = x
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (*x >> 33) as u32
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(96))]

        /// An intermittent condition (the supply under its window on a
        /// random `duty` of the ticks) trips exactly when the leaky level
        /// reaches `w·N`, and by the documented bound: the first tick with
        /// `(w + 1)·k − n >= w·N` (`k` of `n` ticks present). When the duty
        /// is above `1/(w + 1)` that tick comes.
        #[test]
        fn an_intermittent_condition_trips_within_the_bound(
            w in 1u16..8,
            n in 1u16..60,
            duty_permille in 0u32..1000,
            seed in any::<u64>(),
        ) {
            let cfg = demo_with(|c| {
                c.protection.intermittent_weight = w;
                c.protection.supply_debounce = n;
            });
            let mut r = Rig::regulating_acc(cfg, fx(15.0));
            let healthy = r.s.supply_counts;
            let (wu, nu) = (u64::from(w), u64::from(n));
            let trip_at = wu * nu;
            let mut x = seed;
            let (mut level, mut present, mut ticks) = (0u64, 0u64, 0u64);
            let mut bound_tick = None;
            let mut tripped = None;
            for t in 1..=20_000u64 {
                let on = lcg(&mut x) % 1000 < duty_permille;
                let d = r.step_with(|s| s.supply_counts = if on { 0 } else { healthy });
                ticks += 1;
                present += u64::from(on);
                level = if on { (level + wu).min(trip_at) } else { level.saturating_sub(1) };
                if bound_tick.is_none() && (wu + 1) * present >= ticks + trip_at {
                    bound_tick = Some(t);
                }
                if d.status.faults.contains(Fault::SupplyUnder) {
                    tripped = Some(t);
                    break;
                }
                // Not before the level reaches w·N.
                prop_assert!(level < trip_at, "level {level} reached {trip_at} at {t} without a trip");
            }
            if let Some(b) = bound_tick {
                let t = tripped.expect("tripped");
                prop_assert!(t <= b, "tripped at {t}, bound {b}");
                prop_assert!(level >= trip_at);
            }
            // Above the duty 1/(w+1) by a clear margin it trips (by the
            // bound, or before it: the floor at zero only helps).
            if u64::from(duty_permille) * (wu + 1) >= 1000 + 300 {
                prop_assert!(tripped.is_some());
            }
        }

        /// Whatever the samples and requests, enable never rises on a tick
        /// whose sample has a protection condition present, and a start held
        /// in Arming says so.
        #[test]
        fn enable_never_rises_while_a_condition_is_present(seed in any::<u64>()) {
            let cfg = demo_with(|c| c.ramp.emission_delay_ms = 1);
            let mut r = Rig::new(cfg);
            let healthy = r.s;
            let mut x = seed;
            for _ in 0..4_000 {
                if lcg(&mut x).is_multiple_of(40) {
                    let req = match lcg(&mut x) % 5 {
                        0 | 1 => Request::Enable,
                        2 => Request::Disable,
                        3 => Request::ClearFaults,
                        _ => Request::SetMode(if lcg(&mut x).is_multiple_of(2) { Mode::Apc } else { Mode::Acc }),
                    };
                    let _ = r.ctl.request(req);
                }
                let was = r.last.enable;
                let pick = lcg(&mut x) % 64;
                let v = lcg(&mut x);
                let d = r.step_with(|s| {
                    s.temp_counts = healthy.temp_counts;
                    s.supply_counts = healthy.supply_counts;
                    s.interlock_closed = true;
                    match pick {
                        0 => s.temp_counts = (v % 4096) as u16,
                        1 => s.supply_counts = (v % 4096) as u16,
                        2 => s.interlock_closed = false,
                        3 => s.current_counts = (v % 4096) as u16,
                        4 => s.monitor_counts = (v % 4096) as u16,
                        5 => s.external_fault = true,
                        _ => {}
                    }
                    if pick != 5 {
                        s.external_fault = false;
                    }
                });
                if d.enable && !was {
                    prop_assert!(
                        r.ctl.conditions().is_empty(),
                        "enable rose with {:?} present",
                        r.ctl.conditions()
                    );
                }
                if r.ctl.start_held() {
                    prop_assert_eq!(d.status.state, State::Arming);
                    prop_assert!(!d.enable);
                }
            }
        }
    }
}

/// A monitor whose responsivity falls slowly while the power loop holds
/// 8 mW on the linear demo diode (25 mA threshold, 0.9 mW/mA): the loop
/// raises the current, the end-of-life warning comes first (10 % margin),
/// then the plausibility fault latches (20 % margin, 0.5 mA allowance),
/// with the real power still below the setpoint plus the fault margin's
/// worth of current.
#[test]
fn a_degrading_monitor_warns_then_trips_the_plausibility_check() {
    use diodestat_core::{DiodePoint, Plausibility};
    let pt = |t: f64| DiodePoint {
        degc: fx(t),
        threshold_iu: fx(25.0),
        slope_ou_per_iu: fx(0.9),
    };
    let cfg = demo_with(|c| {
        c.plausibility = Some(Plausibility {
            points: heapless::Vec::from_slice(&[pt(-20.0), pt(100.0)]).unwrap(),
            warning_margin: fx(0.1),
            fault_margin: fx(0.2),
            allowance_iu: fx(0.5),
            debounce: 20,
        })
    });
    let mon = cfg.config().calibration.monitor;
    let mut r = Rig::regulating_apc(cfg, fx(8.0), 400);
    assert!(!r.last.status.warnings.end_of_life, "healthy: no warning");
    let (mut warned, mut tripped) = (None, None);
    for k in 0..40_000u32 {
        // The monitor loses 1/40 000 of its responsivity per tick.
        let factor = 1.0 - f64::from(k) / 40_000.0;
        let seen = r.plant.power_ou().to_num::<f64>() * factor;
        let d = r.step_with(|s| s.monitor_counts = counts_for(&mon, fx(seen)));
        if d.status.warnings.end_of_life && warned.is_none() {
            warned = Some(k);
        }
        if d.status.faults.contains(Fault::PowerImplausible) {
            tripped = Some((k, r.plant.power_ou()));
            break;
        }
    }
    let w = warned.expect("the end-of-life warning comes");
    let (t, real) = tripped.expect("the plausibility fault latches");
    assert!(w < t, "warning at {w}, trip at {t}");
    assert_eq!(r.ctl.state(), State::Latched);
    // At the trip the current was at most about 1.2 × (25 + 8/0.9) + 0.5 =
    // 41.2 mA (plus the loop's motion over the debounce and the 32-tick
    // evaluation): real power 0.9 × (41.2 − 25) = 14.6 mW.
    assert!(real < fx(15.5), "real power at the trip {real} mW");
    let rec = r.ctl.fault_log().first().copied().expect("recorded");
    assert_eq!(rec.fault, Fault::PowerImplausible);
    assert!(rec.measured > rec.limit, "{rec:?}");
}

/// The forward-voltage channel (offset 100 counts, 2 mV per count): diode
/// open at the compliance level and diode short at the floor, each at its
/// limit and not one count short of it, after its debounce, only while
/// driving; recorded with the reading and the limit in mV.
#[test]
fn forward_voltage_open_and_short_at_their_limits() {
    use diodestat_core::{AdcCal, FaultRecord, ForwardVoltage, Gain};
    let cfg = demo_with(|c| {
        c.forward_voltage = Some(ForwardVoltage {
            cal: AdcCal {
                offset_counts: 100,
                units_per_count: Gain::from_num(2),
                full_scale_counts: 4095,
                unit_exp: -3,
            },
            open_vu: fx(3000.0),
            short_vu: fx(500.0),
            min_drive_iu: fx(1.0),
            debounce: 3,
        })
    });
    // 1600 counts read 3000 mV, 350 read 500 mV.
    for (fault, at, short, mv) in [
        (Fault::DiodeOpen, 1600u16, 1599u16, 3000.0),
        (Fault::DiodeShort, 350, 351, 500.0),
    ] {
        // Not driving: no condition, whatever the reading.
        let mut off = Rig::new(cfg.clone());
        off.step_with(|s| s.forward_counts = Some(at));
        assert!(off.ctl.conditions().is_empty(), "{fault} while off");
        let mut r = Rig::regulating_acc(cfg.clone(), fx(15.0));
        for _ in 0..10 {
            let d = r.step_with(|s| s.forward_counts = Some(short));
            assert!(d.enable, "{fault}: one count short of the limit");
        }
        assert!(r.ctl.conditions().is_empty(), "{fault}");
        let mut r = Rig::regulating_acc(cfg.clone(), fx(15.0));
        for k in 1..3 {
            let d = r.step_with(|s| s.forward_counts = Some(at));
            assert!(d.enable, "{fault}: tripped after {k} of 3");
            assert!(r.ctl.conditions().contains(fault));
        }
        let d = r.step_with(|s| s.forward_counts = Some(at));
        assert!(!d.enable, "{fault}");
        assert_eq!(d.status.faults.iter().collect::<Vec<_>>(), [fault]);
        assert_eq!(
            r.ctl.fault_log().first(),
            Some(&FaultRecord {
                fault,
                tick: r.s.tick,
                measured: fx(mv),
                limit: fx(mv),
            })
        );
        assert_eq!(r.ctl.measurements().forward_vu, fx(mv));
    }
}

/// The external fault input latches in every state, Off included, in the
/// tick that sees it, and a clear is refused while it is asserted.
#[test]
fn the_external_fault_input_latches_at_once_in_every_state() {
    use diodestat_core::Rejection;
    let mut r = Rig::new(demo());
    let d = r.step_with(|s| s.external_fault = true);
    assert_eq!(d.status.state, State::Latched);
    assert_eq!(names(d.status.faults), ["external-fault"]);
    assert_eq!(
        r.ctl.fault_log().first().map(|x| (x.measured, x.limit)),
        Some((Fx::ONE, Fx::ONE))
    );
    assert_eq!(
        r.ctl.request(Request::ClearFaults),
        Err(Rejection::ConditionPresent {
            fault: Fault::ExternalFault
        })
    );
    r.s.external_fault = false;
    r.step();
    assert_eq!(r.ctl.request(Request::ClearFaults), Ok(()));
    let mut r = Rig::regulating_acc(demo(), fx(20.0));
    let d = r.step_with(|s| s.external_fault = true);
    assert!(!d.enable);
    assert_eq!(d.dac_code, 0);
    assert_eq!(names(d.status.faults), ["external-fault"]);
}

/// An accepted clear forgets the debounce levels: a condition that comes
/// back for fewer ticks than its debounce after a clear does not trip,
/// whatever level it had reached before. (Drive mismatch: armed in Off
/// too, where the clear leaves the controller.)
#[test]
fn a_clear_starts_every_debounce_afresh() {
    let cfg = demo();
    let n = cfg.config().protection.mismatch_debounce;
    let sense = cfg.config().calibration.current_sense;
    let bad = counts_for(&sense, fx(10.0));
    let mut r = Rig::new(cfg);
    for _ in 0..n {
        r.step_with(|s| s.current_counts = bad);
    }
    assert!(r.ctl.faults().contains(Fault::DriveMismatch));
    r.step();
    r.req(Request::ClearFaults);
    for k in 1..n {
        r.step_with(|s| s.current_counts = bad);
        assert!(
            r.ctl.faults().is_empty(),
            "tripped {k} ticks after the clear"
        );
    }
    r.step_with(|s| s.current_counts = bad);
    assert!(r.ctl.faults().contains(Fault::DriveMismatch));
}

/// A plausibility configuration on the linear demo diode (25 mA threshold,
/// 0.9 mW/mA at every temperature): 10 % warning margin, 20 % fault
/// margin, 0.5 mA allowance, debounce `n` ticks.
fn plausible_demo(n: u16) -> diodestat_core::ValidConfig {
    use diodestat_core::{DiodePoint, Plausibility};
    let pt = |t: f64| DiodePoint {
        degc: fx(t),
        threshold_iu: fx(25.0),
        slope_ou_per_iu: fx(0.9),
    };
    demo_with(|c| {
        c.plausibility = Some(Plausibility {
            points: heapless::Vec::from_slice(&[pt(-20.0), pt(100.0)]).unwrap(),
            warning_margin: fx(0.1),
            fault_margin: fx(0.2),
            allowance_iu: fx(0.5),
            debounce: n,
        })
    })
}

/// A rig in ACC at 40 mA (the healthy diode makes 13.5 mW there), stepped
/// to the fifth tick after an evaluation of the slow protections, with its
/// monitor then reading 2 mW: the current the healthy diode needs for
/// 2 mW is 25 + 2/0.9 = 27.2 mA, the fault bound 1.2 × 27.2 + 0.5 =
/// 33.2 mA, below the 40 mA sensed; 2 mW is above the monitor-loss floor
/// (0.3 mW). Returns the rig and the tick the monitor dropped on.
fn acc_rig_with_a_dark_monitor(n: u16) -> (Rig, u32) {
    use diodestat_core::SLOW_EVERY;
    let cfg = plausible_demo(n);
    let dark = counts_for(&cfg.config().calibration.monitor, fx(2.0));
    let mut r = Rig::regulating_acc(cfg, fx(40.0));
    r.run(2 * SLOW_EVERY);
    assert!(!r.ctl.conditions().contains(Fault::PowerImplausible));
    assert!(!r.last.status.warnings.end_of_life, "healthy: no warning");
    while r.s.tick % SLOW_EVERY != 4 {
        r.step();
    }
    r.monitor_override = Some(dark);
    let dropped = r.s.tick + 1;
    (r, dropped)
}

/// The plausibility check runs on the ticks whose index is a multiple of
/// `SLOW_EVERY` (32) and its verdict is held in between: a monitor that
/// drops between two evaluations is seen at the next one (the condition
/// and the end-of-life warning on that tick, not before), and a monitor
/// that recovers between two evaluations is still counted as implausible
/// up to the next one.
#[test]
fn the_plausibility_check_runs_every_32_ticks_and_holds_its_verdict() {
    use diodestat_core::SLOW_EVERY;
    let (mut r, dropped) = acc_rig_with_a_dark_monitor(1_000);
    let seen = dropped.next_multiple_of(SLOW_EVERY);
    while r.s.tick < seen - 1 {
        let d = r.step();
        assert!(!r.ctl.conditions().contains(Fault::PowerImplausible));
        assert!(!d.status.warnings.end_of_life, "tick {}", r.s.tick);
    }
    let d = r.step();
    assert_eq!(r.s.tick, seen);
    assert!(r.ctl.conditions().contains(Fault::PowerImplausible));
    assert!(d.status.warnings.end_of_life);
    // The monitor recovers three ticks later: held to the next evaluation.
    r.run(2);
    r.monitor_override = None;
    while r.s.tick < seen + SLOW_EVERY - 1 {
        let d = r.step();
        assert!(
            r.ctl.conditions().contains(Fault::PowerImplausible),
            "tick {}",
            r.s.tick
        );
        assert!(d.status.warnings.end_of_life, "tick {}", r.s.tick);
    }
    let d = r.step();
    assert!(!r.ctl.conditions().contains(Fault::PowerImplausible));
    assert!(!d.status.warnings.end_of_life);
    assert_eq!(r.ctl.state(), State::Regulating);
}

/// With a debounce longer than the evaluation period, the held condition
/// goes on counting across the next evaluation and the fault latches on
/// its `n`-th tick, counted from the evaluation that saw it.
#[test]
fn a_plausibility_debounce_longer_than_the_evaluation_period_trips_on_time() {
    use diodestat_core::SLOW_EVERY;
    let n = 40u16;
    assert!(u32::from(n) > SLOW_EVERY);
    let (mut r, dropped) = acc_rig_with_a_dark_monitor(n);
    let seen = dropped.next_multiple_of(SLOW_EVERY);
    let latched = seen + u32::from(n) - 1;
    while r.s.tick < latched - 1 {
        let d = r.step();
        assert!(d.status.faults.is_empty(), "tripped at tick {}", r.s.tick);
    }
    let d = r.step();
    assert_eq!(r.s.tick, latched);
    assert_eq!(names(d.status.faults), ["power-implausible"]);
    let rec = r.ctl.fault_log().first().copied().expect("recorded");
    assert_eq!((rec.fault, rec.tick), (Fault::PowerImplausible, latched));
}
