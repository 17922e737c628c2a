//! Fuzz target: scenario files. Any text either passes the checks (and a
//! short one then runs on the visible demo board with finite results) or
//! is refused with a message; never a panic, a hang or unbounded memory.
#![no_main]

use libfuzzer_sys::fuzz_target;

use diodestat_sim::plant::DemoModule;
use diodestat_sim::scenario::{check_for_board, parse};

/// Runs longer than this many ticks are only checked, not run (speed).
const RUN_TICKS: f64 = 2000.0;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(sc) = parse(text) else {
        return;
    };
    let module = DemoModule::visible();
    let cfg = diodestat_sim::calibration::calibrate(diodestat_core::example::config(), &module);
    let tick_hz = cfg.tick_hz;
    let Ok(valid) = cfg.validate() else {
        return;
    };
    if check_for_board(&sc, text, tick_hz, &module).is_err() {
        return;
    }
    if sc.duration_ms * 1e-3 * f64::from(tick_hz) > RUN_TICKS {
        return;
    }
    let res = diodestat_sim::sim::run(&sc, &module, valid, Default::default()).expect("a checked scenario runs");
    assert!(res.peak_mw.is_finite(), "peak {}", res.peak_mw);
    for r in &res.trace {
        assert!(r.ambient_c.is_finite() && r.tj_c.is_finite(), "{r:?}");
    }
});
