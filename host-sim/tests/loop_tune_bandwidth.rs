//! `design_for_bandwidth` on the shipped red and pump boards, with the
//! corners `loop-tune` uses: every reachable bandwidth target is met within
//! `BANDWIDTH_TOL`, and the highest reachable bandwidth it reports is not
//! exceeded by the design at any crossover (the design family it searches).

use std::path::Path;

use diodestat_sim::board_file::load_board;
use diodestat_sim::stability::assessment::default_setpoint_mw;
use diodestat_sim::stability::{
    design_for_bandwidth, design_pi, loop_margins, standard_corner_loops, DesignError, DesignSpec,
    LoopParams, BANDWIDTH_TOL, DESIGN_GM_DB, DESIGN_PM_DEG,
};

/// The corners `loop-tune` designs over for a shipped board.
fn corners(name: &str) -> Vec<LoopParams> {
    let b = load_board(
        &Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples")
            .join(name)
            .join("board.toml"),
    )
    .unwrap();
    standard_corner_loops(
        &b.module,
        &b.valid,
        default_setpoint_mw(&b.valid),
        b.latency,
    )
    .unwrap()
    .iter()
    .map(|l| l.params)
    .collect()
}

/// The highest reachable slowest-corner bandwidth, from the refusal of a
/// target far out of reach.
fn highest_reachable(p: &[LoopParams], target: f64) -> f64 {
    match design_for_bandwidth(p, target, &DesignSpec::new(1.0)) {
        Err(DesignError::BandwidthUnreachable { best_hz, .. }) => best_hz,
        other => panic!("{other:?}"),
    }
}

/// The slowest corner's bandwidth measured again from the quantised gains.
fn measured(p: &[LoopParams], target: f64) -> f64 {
    let d = design_for_bandwidth(p, target, &DesignSpec::new(target))
        .unwrap_or_else(|e| panic!("{target} Hz: {e}"));
    assert!(d.worst_pm_deg >= DESIGN_PM_DEG && d.worst_gm_db >= DESIGN_GM_DB);
    p.iter()
        .map(|c| loop_margins(&d.apply(c)).bandwidth_hz)
        .fold(f64::INFINITY, f64::min)
}

fn check_board(name: &str, fixed_targets: &[f64]) {
    let p = corners(name);
    // The highest reachable bandwidth as reported for a far target and
    // for one just out of reach (the red board said 1233.1 Hz for 2000 Hz
    // while a 1014 Hz crossover design reached 1257.4 Hz).
    let best = highest_reachable(&p, 1.0e5);
    let best_near = highest_reachable(&p, 1.6 * best);
    // No crossover design beats either: from the highest crossover the
    // margins allow down to 5 % below it.
    let ceiling = match design_pi(&p, &DesignSpec::new(0.45 * p[0].tick_hz)) {
        Err(DesignError::TargetUnreachable { best_hz, .. }) => best_hz,
        other => panic!("{name}: {other:?}"),
    };
    for i in 0..=20 {
        let d = design_pi(
            &p,
            &DesignSpec::new(ceiling * (1.0 - 0.0025 * f64::from(i))),
        )
        .unwrap();
        let bw = d.min_bandwidth_hz();
        assert!(
            bw <= best.min(best_near) * (1.0 + 1e-9),
            "{name}: crossover {:.1} Hz gives {bw:.1} Hz above the reported highest \
             {best:.1} / {best_near:.1} Hz",
            d.crossover_hz,
        );
    }
    let mut targets = fixed_targets.to_vec();
    targets.extend([0.5 * best, 0.9 * best, 0.97 * best, 0.99 * best]);
    for t in targets {
        let bw = measured(&p, t);
        assert!(
            bw >= t && bw <= t * (1.0 + BANDWIDTH_TOL),
            "{name}: target {t:.1} Hz, got {bw:.1} Hz (highest reachable {best:.1} Hz)"
        );
    }
}

#[test]
fn red_board_bandwidth_targets_are_met_up_to_the_reported_maximum() {
    // 1100 and 1200 Hz came back as 1233 Hz (outside any tolerance) before.
    check_board("demo-red-30", &[1100.0, 1200.0]);
}

#[test]
fn pump_boards_bandwidth_targets_are_met_up_to_the_reported_maximum() {
    check_board("demo-pump-5w", &[]);
    check_board("demo-pump-18w", &[]);
}
