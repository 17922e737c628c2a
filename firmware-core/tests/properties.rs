//! Properties over random sample streams and request sequences (the demo
//! configuration and random valid configurations), closed around the linear
//! plant with random disturbances of every channel:
//! - the DAC code never exceeds `dac_code(min(configured ceiling, derated
//!   ceiling))` for the temperature of that very sample, and
//!   `drive_iu() <= ceiling_iu()`;
//! - enable is low (and the DAC code zero) in Off, Arming and Latched;
//! - Latched is left only by an accepted ClearFaults, and only to Off;
//! - `step` and `request` never panic.

mod common;

use common::*;
use diodestat_core::{example, Config, Fx, Mode, Request, Sample, State, ValidConfig};
use proptest::prelude::*;

#[derive(Clone, Copy, Debug)]
enum Poke {
    None,
    Monitor(u16),
    Current(u16),
    Temp(u16),
    Supply(u16),
    InterlockOpen,
    Gap(u32),
    Raw(u16, u16, u16, u16, bool),
}

fn arb_poke() -> impl Strategy<Value = Poke> {
    prop_oneof![
        600 => Just(Poke::None),
        2 => any::<u16>().prop_map(Poke::Monitor),
        2 => any::<u16>().prop_map(Poke::Current),
        2 => any::<u16>().prop_map(Poke::Temp),
        1 => any::<u16>().prop_map(Poke::Supply),
        1 => Just(Poke::InterlockOpen),
        1 => (0u32..8).prop_map(Poke::Gap),
        1 => (any::<u16>(), any::<u16>(), any::<u16>(), any::<u16>(), any::<bool>())
            .prop_map(|(a, b, c, d, e)| Poke::Raw(a, b, c, d, e)),
    ]
}

fn arb_request() -> impl Strategy<Value = Option<Request>> {
    prop_oneof![
        60 => Just(None),
        3 => Just(Some(Request::Enable)),
        1 => Just(Some(Request::Disable)),
        2 => Just(Some(Request::ClearFaults)),
        1 => (-5i32 * 65_536..40 * 65_536)
            .prop_map(|b| Some(Request::SetPower(Fx::from_bits(b)))),
        1 => (-5i32 * 65_536..70 * 65_536)
            .prop_map(|b| Some(Request::SetCurrent(Fx::from_bits(b)))),
        1 => prop_oneof![Just(Mode::Apc), Just(Mode::Acc)]
            .prop_map(|m| Some(Request::SetMode(m))),
    ]
}

/// The static ceiling for one sample, from the configuration alone: the
/// configured ceiling, the derated one, the floor with the sensor at a rail.
fn static_ceiling(cfg: &ValidConfig, s: &Sample) -> Fx {
    let c = cfg.config();
    let tc = &c.calibration.temperature;
    let derated = if s.temp_counts <= tc.low_fault_counts || s.temp_counts >= tc.high_fault_counts {
        c.derating.floor_iu
    } else {
        cfg.derated_ceiling_iu(cfg.counts_to_degc(s.temp_counts))
    };
    derated.min(c.current.ceiling_iu)
}

fn run(cfg: ValidConfig, steps: &[(Option<Request>, Poke)]) -> Result<(), TestCaseError> {
    let base = healthy_sample(&cfg, 0);
    let mut r = Rig::new(cfg.clone());
    for (i, (req, poke)) in steps.iter().enumerate() {
        if let Some(q) = *req {
            let was = r.ctl.state();
            let res = r.ctl.request(q);
            let now = r.ctl.state();
            if res.is_err() {
                prop_assert_eq!(now, was, "{}: a refused {:?} changed the state", i, q);
            }
            if was == State::Latched && now != State::Latched {
                prop_assert_eq!(q, Request::ClearFaults);
                prop_assert!(res.is_ok());
                prop_assert_eq!(now, State::Off);
            }
            if q == Request::ClearFaults && res.is_ok() {
                prop_assert_eq!(was, State::Latched);
                prop_assert!(r.ctl.faults().is_empty());
            }
            if q == Request::Enable && res.is_ok() {
                prop_assert_eq!(was, State::Off);
                prop_assert_eq!(now, State::Arming);
            }
        }
        let before = r.ctl.state();
        let d = r.step_with(|s| {
            s.temp_counts = base.temp_counts;
            s.supply_counts = base.supply_counts;
            s.interlock_closed = true;
            match *poke {
                Poke::None => {}
                Poke::Monitor(v) => s.monitor_counts = v,
                Poke::Current(v) => s.current_counts = v,
                Poke::Temp(v) => s.temp_counts = v,
                Poke::Supply(v) => s.supply_counts = v,
                Poke::InterlockOpen => s.interlock_closed = false,
                Poke::Gap(g) => s.tick = s.tick.wrapping_add(g),
                Poke::Raw(a, b, c, e, f) => {
                    s.monitor_counts = a;
                    s.current_counts = b;
                    s.temp_counts = c;
                    s.supply_counts = e;
                    s.interlock_closed = f;
                }
            }
        });
        let st = d.status.state;
        let ceiling = static_ceiling(&cfg, &r.s);
        prop_assert!(
            d.dac_code <= cfg.dac_code(ceiling),
            "{}: code {} above the ceiling {} mA (code {})",
            i,
            d.dac_code,
            ceiling,
            cfg.dac_code(ceiling)
        );
        prop_assert!(r.ctl.ceiling_iu() <= ceiling, "{}: ceiling in force", i);
        prop_assert!(r.ctl.drive_iu() <= r.ctl.ceiling_iu(), "{}: drive", i);
        prop_assert!(r.ctl.drive_iu() >= Fx::ZERO);
        prop_assert_eq!(d.enable, st.is_emitting());
        if d.enable {
            prop_assert_eq!(d.dac_code, cfg.dac_code(r.ctl.drive_iu()));
        } else {
            prop_assert_eq!(d.dac_code, 0);
        }
        if matches!(st, State::Off | State::Arming | State::Latched) {
            prop_assert!(!d.enable, "{}: enable in {:?}", i, st);
        }
        prop_assert_eq!(st == State::Latched, !d.status.faults.is_empty());
        if before == State::Latched {
            prop_assert_eq!(st, State::Latched, "{}: a latch cleared itself", i);
        }
        prop_assert_eq!(d.status, r.ctl.status());
    }
    Ok(())
}

/// Random configurations around the demo; most pass validation.
fn arb_config() -> impl Strategy<Value = Config> {
    (
        (1_000u32..=200_000, 10i32..=50, 0u32..=3, 50i32..=100),
        (1i32..=1000, 1i32..=1000, 1i32..=1000, 1i32..=1000),
        (1i32..=200, 0i32..=200),
        (30i32..=60, 1i32..=40, 0i32..=100),
        prop::array::uniform8(1u16..=50),
        (1u16..=10, 1i32..=10),
    )
        .prop_map(
            |(
                (hz, ceil, delay, ho),
                (ss, st, sp, sl),
                (kp, ki),
                (knee, span, fl),
                deb,
                (mt, tol),
            )| {
                let mut c = example::config();
                let tenth = |v: i32| Fx::from_num(v) / 10;
                c.tick_hz = hz;
                c.current.ceiling_iu = Fx::from_num(ceil);
                c.ramp.emission_delay_ms = delay;
                c.ramp.handover_fraction = Fx::from_num(ho) / 100;
                c.ramp.soft_start_iu_per_ms = tenth(ss);
                c.ramp.soft_stop_iu_per_ms = tenth(st);
                c.ramp.setpoint_ou_per_ms = tenth(sp);
                c.apc.slew_iu_per_ms = tenth(sl);
                c.apc.kp_iu_per_ou = Fx::from_num(kp) / 100;
                c.apc.ki_iu_per_ou_ms = tenth(ki);
                c.derating.knee_degc = Fx::from_num(knee);
                c.derating.cutoff_degc = Fx::from_num(knee + span);
                c.derating.floor_iu = c.current.ceiling_iu * Fx::from_num(fl) / 100;
                c.protection.monitor_loss_drive_iu = c.current.ceiling_iu * Fx::from_num(0.9);
                c.protection.overcurrent_debounce = deb[0];
                c.protection.runaway_debounce = deb[1];
                c.protection.monitor_loss_debounce = deb[2];
                c.protection.sensor_debounce = deb[3];
                c.protection.over_temp_debounce = deb[4];
                c.protection.interlock_debounce = deb[5];
                c.protection.supply_debounce = deb[6];
                c.protection.mismatch_debounce = deb[7];
                c.protection.missed_tick_limit = mt;
                c.protection.mismatch_tolerance_iu = Fx::from_num(tol);
                c
            },
        )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn invariants_hold_on_the_demo_configuration(
        steps in prop::collection::vec((arb_request(), arb_poke()), 1..1500)
    ) {
        run(demo(), &steps)?;
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 96, ..ProptestConfig::default() })]

    #[test]
    fn invariants_hold_on_random_valid_configurations(
        cfg in arb_config(),
        steps in prop::collection::vec((arb_request(), arb_poke()), 1..1500)
    ) {
        let valid = cfg.validate();
        prop_assume!(valid.is_ok());
        run(valid.unwrap(), &steps)?;
    }

    #[test]
    fn raw_random_samples_never_panic_or_emit_while_latched(
        samples in prop::collection::vec(
            (any::<u32>(), any::<u16>(), any::<u16>(), any::<u16>(), any::<u16>(), any::<bool>(),
             arb_request()),
            1..300)
    ) {
        let cfg = demo();
        let mut ctl = diodestat_core::Controller::new(cfg.clone());
        for (tick, m, c, t, v, il, req) in samples {
            if let Some(q) = req {
                let _ = ctl.request(q);
            }
            let before = ctl.state();
            let s = Sample { tick, monitor_counts: m, current_counts: c, temp_counts: t,
                             supply_counts: v, interlock_closed: il,
                             forward_counts: None, external_fault: false };
            let d = ctl.step(&s);
            prop_assert!(d.dac_code <= cfg.dac_code(static_ceiling(&cfg, &s)));
            prop_assert!(ctl.drive_iu() <= ctl.ceiling_iu());
            if before == State::Latched {
                prop_assert_eq!(d.status.state, State::Latched);
                prop_assert!(!d.enable);
            }
        }
    }
}
