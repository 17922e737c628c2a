//! Property tests: over random sample streams and request sequences the DAC
//! command never exceeds the ceiling, enable is low in Off and Latched, a
//! latched fault never clears itself, and nothing panics.

use diodestat_core::*;
use proptest::prelude::*;

fn arb_sample() -> impl Strategy<Value = (u32, u16, u16, u16, u16, bool)> {
    (
        0u32..3,
        any::<u16>(),
        any::<u16>(),
        0u16..4096,
        0u16..4096,
        prop::bool::weighted(0.97),
    )
}

fn arb_request() -> impl Strategy<Value = Option<Request>> {
    prop_oneof![
        8 => Just(None),
        1 => Just(Some(Request::Enable)),
        1 => Just(Some(Request::Disable)),
        1 => Just(Some(Request::ClearFaults)),
        1 => (-5i32..40).prop_map(|v| Some(Request::SetPowerMw(Fx::from_num(v)))),
        1 => (-5i32..70).prop_map(|v| Some(Request::SetCurrentMa(Fx::from_num(v)))),
        1 => prop_oneof![Just(Mode::Apc), Just(Mode::Acc)].prop_map(|m| Some(Request::SetMode(m))),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn drive_never_exceeds_ceiling_and_latch_holds(
        steps in prop::collection::vec((arb_sample(), arb_request()), 1..400)
    ) {
        let cfg = example::config().validate().unwrap();
        let ceiling_code = cfg.dac_code(cfg.config().current.ceiling_ma);
        let mut ctl = Controller::new(cfg.clone());
        let mut tick = 0u32;
        for ((gap, mon, cur, temp, sup, il), req) in steps {
            let mut cleared = false;
            if let Some(r) = req {
                let was_latched = ctl.state() == State::Latched;
                let ok = ctl.request(r).is_ok();
                if was_latched && r == Request::ClearFaults && ok {
                    cleared = true;
                    prop_assert_eq!(ctl.state(), State::Off);
                }
            }
            let before = ctl.state();
            tick = tick.wrapping_add(gap.max(1));
            let d = ctl.step(&Sample { tick, monitor_counts: mon % 4096, current_counts: cur % 4096,
                temp_counts: temp, supply_counts: sup, interlock_closed: il });
            // Never above the configured ceiling, nor above the ceiling in force.
            prop_assert!(d.dac_code <= ceiling_code);
            prop_assert!(ctl.drive_ma() <= ctl.ceiling_ma() || ctl.drive_ma() == Fx::ZERO);
            prop_assert!(d.dac_code <= cfg.dac_code(ctl.ceiling_ma()));
            if matches!(d.status.state, State::Off | State::Latched | State::Arming) {
                prop_assert!(!d.enable);
                prop_assert_eq!(d.dac_code, 0);
            }
            // A latched controller stays latched unless a clear was accepted.
            if before == State::Latched && !cleared {
                prop_assert_eq!(d.status.state, State::Latched);
            }
        }
    }
}
