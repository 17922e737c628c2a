//! The shipped fault campaign: every injectable fault at every moment and
//! corner ends safely on both shipped demo boards (latched where it must
//! latch, no optical excursion beyond the margin for more than one tick, no
//! facet damage).

use std::path::PathBuf;

use diodestat_sim::boardfile::{load_board, LoadedBoard};
use diodestat_sim::{board, campaign, plant::DemoModule};

fn shipped(name: &str) -> LoadedBoard {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../examples")
        .join(name)
        .join("board.toml");
    load_board(&path).unwrap_or_else(|e| panic!("{e}"))
}

fn every_case_is_safe(b: &LoadedBoard) {
    let results = campaign::run(&b.name, &b.module, &b.valid, 0.10, b.latency).unwrap();
    // Five moments; missed ticks (an event, not a standing state) is not
    // run as a latent fault.
    assert_eq!(
        results.len(),
        (campaign::faults().len() * 5 - 1) * campaign::CORNERS.len()
    );
    let bad: Vec<_> = results.iter().filter(|r| !r.safe).collect();
    assert!(bad.is_empty(), "{}: unsafe cases: {bad:#?}", b.name);
    // Fast faults are detected within a tick of reaching the core (a
    // latent one refuses the enable instead).
    for r in results.iter().filter(|r| {
        r.fault == "interlock-open"
            && !r.latched_before_injection
            && r.moment != campaign::Moment::Latent
    }) {
        assert_eq!(r.latency_ticks, Some(0), "{r:?}");
    }
    // The derating moment really is derating: the mount is above the
    // derating knee when the fault arrives; at a normal ambient it is not.
    for r in &results {
        match r.moment {
            campaign::Moment::Derating => assert!(r.derating_at_injection, "{r:?}"),
            _ if r.corner != "hot" => assert!(!r.derating_at_injection, "{r:?}"),
            _ => {}
        }
    }
    // A case can latch before its injection only where the plant corner
    // cannot make light at that moment: the aged diode under a derated
    // ceiling, which the core latches as monitor loss ("no light").
    for r in results.iter().filter(|r| r.latched_before_injection) {
        assert_eq!(
            (r.moment, r.corner),
            (campaign::Moment::Derating, "aged"),
            "{r:?}"
        );
        assert_eq!(r.core_faults.first(), Some(&"monitor-loss"), "{r:?}");
    }
    // Every fault that must latch did.
    for r in results.iter().filter(|r| r.must_latch) {
        assert!(r.detected, "{r:?}");
    }
    // The campaign's operating points are the board's own: the setpoint
    // inside the board's range, the supply sag outside its supply window
    // (set relative to the module's supply, not to the 5 V module's).
    let plan = campaign::Plan::new(&b.module, &b.valid);
    let c = b.valid.config();
    assert!(plan.setpoint_mw <= c.power.max_setpoint_mw.to_num::<f64>());
    assert!(plan.changed_mw >= c.power.min_setpoint_mw.to_num::<f64>());
    assert!(plan.sag_v * 1e3 < c.protection.supply_min_mv.to_num::<f64>());
}

#[test]
fn every_case_of_the_shipped_campaign_is_safe_on_the_red_board() {
    every_case_is_safe(&shipped("demo-red-30"));
}

#[test]
fn every_case_of_the_shipped_campaign_is_safe_on_the_pump_board() {
    every_case_is_safe(&shipped("demo-pump-5w"));
}

#[test]
fn source_failing_high_without_a_hardware_clamp_is_reported_unsafe() {
    // Without the board's hardware current clamp, a source that fails high
    // within one tick overdrives the facet before any firmware can act:
    // the campaign must say so rather than pass.
    let mut module = DemoModule::visible();
    module.driver.fail_high_current_a = 0.150;
    let cfg = board::calibrate(diodestat_core::example::config(), &module)
        .validate()
        .unwrap();
    let c = campaign::CORNERS[0];
    let r = campaign::run_case(
        "visible",
        &module,
        &cfg,
        (diodestat_sim::scenario::HwFault::SourceFailHigh, true),
        campaign::Moment::Steady,
        &c,
        cfg.config().protection.runaway_mw.to_num::<f64>(),
        0.10,
        diodestat_sim::sim::DacLatency::ONE_TICK,
    )
    .unwrap();
    assert!(r.detected);
    assert!(!r.safe, "{r:?}");
}

#[test]
fn pump_source_failing_high_to_the_output_stage_limit_damages_the_facet() {
    // The pump board's 7 A hardware clamp is what keeps a source failing
    // high below the 10 W damage level; at the 12 A the output stage could
    // reach, the one tick before the overcurrent trip is enough to damage
    // the facet, and the campaign reports it.
    let mut b = shipped("demo-pump-5w");
    b.module.driver.fail_high_current_a = 12.0;
    let r = campaign::run_case(
        &b.name,
        &b.module,
        &b.valid,
        (diodestat_sim::scenario::HwFault::SourceFailHigh, true),
        campaign::Moment::Steady,
        &campaign::CORNERS[0],
        b.config.protection.runaway_mw.to_num::<f64>(),
        0.10,
        b.latency,
    )
    .unwrap();
    assert!(r.detected && r.latency_ticks == Some(1), "{r:?}");
    assert!(r.damaged && !r.safe, "{r:?}");
}

/// A slowly degrading monitor on the pump board (responsivity falling 2 %
/// per ms): the current-for-power plausibility check latches it at every
/// moment and corner before the real power passes the module's rated
/// output (5 W).
#[test]
fn plausibility_catches_a_degrading_monitor_before_the_rated_power() {
    let b = shipped("demo-pump-5w");
    let rated_mw = b.module.rated_power_w * 1e3;
    let fault = campaign::faults()
        .into_iter()
        .find(|(f, _)| f.name() == "monitor-drift")
        .expect("the campaign has a degrading monitor");
    let ceiling_mw = b.valid.config().protection.runaway_mw.to_num::<f64>();
    for moment in [
        campaign::Moment::SoftStart,
        campaign::Moment::Steady,
        campaign::Moment::Derating,
        campaign::Moment::Latent,
    ] {
        for corner in &campaign::CORNERS {
            let r = campaign::run_case(
                &b.name, &b.module, &b.valid, fault, moment, corner, ceiling_mw, 0.10, b.latency,
            )
            .unwrap();
            assert_eq!(r.core_faults, ["power-implausible"], "{r:?}");
            assert!(r.peak_mw < rated_mw, "{r:?}");
        }
    }
}

/// An intermittent monitor contact that reads light one tick in twenty
/// latches monitor loss on the red board (which has no plausibility check)
/// within the leaky debounce's bound once the loop sits on its ceiling.
#[test]
fn an_intermittent_monitor_contact_latches_monitor_loss() {
    let b = shipped("demo-red-30");
    let fault = campaign::faults()
        .into_iter()
        .find(|(f, _)| f.name() == "monitor-intermittent")
        .expect("the campaign has an intermittent contact");
    let ceiling_mw = b.valid.config().protection.runaway_mw.to_num::<f64>();
    for corner in &campaign::CORNERS {
        let r = campaign::run_case(
            &b.name,
            &b.module,
            &b.valid,
            fault,
            campaign::Moment::Steady,
            corner,
            ceiling_mw,
            0.10,
            b.latency,
        )
        .unwrap();
        assert!(r.core_faults.contains(&"monitor-loss"), "{r:?}");
        // w = 3, N = 20, d = 0.95: 22 ticks after the ceiling is reached.
        assert!(r.latency_ticks.is_some_and(|t| t < 200), "{r:?}");
    }
}

/// Latent faults (present before the enable request) either refuse the
/// enable or latch: the laser never emits with a standing sensor, interlock
/// or external fault.
#[test]
fn latent_faults_refuse_the_start_or_latch() {
    let b = shipped("demo-red-30");
    let ceiling_mw = b.valid.config().protection.runaway_mw.to_num::<f64>();
    for name in [
        "sensor-open",
        "interlock-open",
        "external-fault",
        "supply-sag",
    ] {
        let fault = campaign::faults()
            .into_iter()
            .find(|(f, _)| f.name() == name)
            .unwrap();
        let corner = &campaign::CORNERS[0];
        let r = campaign::run_case(
            &b.name,
            &b.module,
            &b.valid,
            fault,
            campaign::Moment::Latent,
            corner,
            ceiling_mw,
            0.10,
            b.latency,
        )
        .unwrap();
        assert!(r.detected && r.safe, "{r:?}");
        assert!(r.peak_mw < 1.0, "{name}: emitted {r:?}");
    }
}
