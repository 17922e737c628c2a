//! The shipped fault campaign: every injectable fault at every moment and
//! corner ends safely on the demo board (latched where it must latch, no
//! optical excursion beyond the margin for more than one tick, no facet damage).

use diodestat_sim::{board, campaign, plant::DemoModule};

#[test]
fn every_case_of_the_shipped_campaign_is_safe() {
    let module = DemoModule::visible();
    let cfg = board::calibrate(diodestat_core::example::config(), &module)
        .validate()
        .unwrap();
    let results = campaign::run("visible", &module, &cfg, 0.10).unwrap();
    assert_eq!(
        results.len(),
        campaign::faults().len() * 4 * campaign::CORNERS.len()
    );
    let bad: Vec<_> = results.iter().filter(|r| !r.safe).collect();
    assert!(bad.is_empty(), "unsafe cases: {bad:#?}");
    // Fast faults are detected within a tick of reaching the core.
    for r in results.iter().filter(|r| r.fault == "interlock-open") {
        assert_eq!(r.latency_ticks, Some(0), "{r:?}");
    }
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
    )
    .unwrap();
    assert!(r.detected);
    assert!(!r.safe, "{r:?}");
}
