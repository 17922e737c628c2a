//! Aging during a run: the diode ages at every tick at its drive and
//! junction temperature (the Arrhenius law of `plant/diode/aging.rs`), the
//! trace shows the threshold and slope drift, and the power loop raises
//! the drive to hold the power.

use std::path::Path;

use diodestat_sim::board_file::load_board;
use diodestat_sim::plant::Diode;
use diodestat_sim::scenario::parse;
use diodestat_sim::sim;

fn run(speedup: f64) -> (sim::RunResult, diodestat_sim::plant::DemoModule) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/demo-red-30/board.toml");
    let b = load_board(&path).unwrap();
    let sc = parse(&format!(
        "name = \"aging\"\nboard = \"board.toml\"\nduration_ms = 200\nambient_c = 25\nseed = 3\n\
         aging_speedup = {speedup:e}\n\
         [[event]]\nat_ms = 0.5\ndo = \"set-power\"\nmw = 10\n\
         [[event]]\nat_ms = 1\ndo = \"enable\"\n"
    ))
    .unwrap();
    let res = sim::run(&sc, &b.module, b.valid, b.latency).unwrap();
    (res, b.module)
}

/// At 1.8e8 times real time (a simulated millisecond ages the diode by
/// 50 h at the reference conditions) the age grows while the laser is on,
/// the threshold and slope factors follow the module's per-1000-hour
/// rates, and the loop raises the drive to hold 10 mW (below the
/// board's 46 mA ceiling).
#[test]
fn the_trace_shows_the_drift_and_the_loop_compensates() {
    let (res, module) = run(1.8e8);
    let rows = &res.trace;
    let p = &module.diode;
    let mut last = 0.0;
    for r in rows {
        assert!(r.age_h >= last, "age fell at tick {}", r.tick);
        last = r.age_h;
        let kh = r.age_h / 1000.0;
        assert!((r.threshold_factor - (1.0 + p.threshold_rise_per_khour * kh)).abs() < 1e-12);
        assert!((r.slope_factor - (1.0 - p.slope_loss_per_khour * kh)).abs() < 1e-12);
    }
    // Before the enable nothing ages.
    assert!(rows
        .iter()
        .filter(|r| r.t_s < 0.5e-3)
        .all(|r| r.age_h == 0.0));
    let end = rows.last().unwrap();
    assert!(end.age_h > 3000.0, "{}", end.age_h);
    // The acceleration factor over the run: the hours are the integral of
    // AF(I, T_j) dt over the trace (every tick is recorded) within 0.5 %.
    let d = Diode::new(p.clone()).unwrap();
    let dt = rows[1].t_s - rows[0].t_s;
    let integral: f64 = rows
        .iter()
        .map(|r| d.aging_acceleration(r.i_ma * 1e-3, r.tj_c + 273.15) * dt * 1.8e8 / 3600.0)
        .sum();
    assert!(
        (end.age_h / integral - 1.0).abs() < 5e-3,
        "{} vs {integral}",
        end.age_h
    );
    // Power held, drive raised.
    let at = |t: f64| rows.iter().find(|r| r.t_s >= t).unwrap();
    let (early, late) = (at(0.03), end);
    assert!((late.p_mw - 10.0).abs() < 0.1, "{}", late.p_mw);
    assert!((early.p_mw - 10.0).abs() < 0.1, "{}", early.p_mw);
    assert!(
        late.i_ma > early.i_ma + 1.5,
        "{} -> {}",
        early.i_ma,
        late.i_ma
    );
}

/// At real time (the default) a 200 ms run ages the diode by well under a
/// second's worth of hours, and with the clock stopped not at all.
#[test]
fn real_time_aging_is_negligible_and_zero_speedup_stops_it() {
    let (res, _) = run(1.0);
    let age = res.trace.last().unwrap().age_h;
    assert!(age > 0.0 && age < 1e-3, "{age}");
    let (res, _) = run(0.0);
    assert!(res.trace.iter().all(|r| r.age_h == 0.0));
}
