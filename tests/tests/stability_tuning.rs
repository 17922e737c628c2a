//! PI gain design on the shipped boards over their plant corners: a
//! crossover target and a bandwidth target on both demo modules, and the
//! refusal of targets no gains can meet.

use std::path::Path;

use diodestat_sim::board_file::{load_board, LoadedBoard};
use diodestat_sim::stability::assessment::default_setpoint_mw;
use diodestat_sim::stability::{
    corner_loop, design_for_bandwidth, design_pi, loop_margins, standard_corners, CornerOptions,
    DesignError, DesignSpec, LoopParams, DESIGN_GM_DB, DESIGN_PM_DEG,
};

fn corners(name: &str) -> (LoadedBoard, Vec<LoopParams>) {
    let b = load_board(
        &Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples")
            .join(name)
            .join("board.toml"),
    )
    .unwrap();
    let p = standard_corners(&b.valid, default_setpoint_mw(&b.valid))
        .iter()
        .map(|c| {
            corner_loop(&b.module, &b.valid, c, &CornerOptions::default())
                .unwrap()
                .params
        })
        .collect();
    (b, p)
}

#[test]
fn crossover_and_bandwidth_targets_on_both_modules() {
    for name in ["demo-red-30", "demo-pump-5w"] {
        let (_, p) = corners(name);
        // Crossover target: met, margins kept at every corner, checked
        // again here from the quantised gains.
        let d = design_pi(&p, &DesignSpec::new(600.0)).unwrap();
        assert!(
            d.target_met && (d.crossover_hz - 600.0).abs() < 3.0,
            "{name}"
        );
        for c in &p {
            let m = loop_margins(&d.apply(c));
            assert!(m.meets(DESIGN_PM_DEG, DESIGN_GM_DB), "{name}: {m:?}");
            assert!(m.fcp_hz <= 600.0 * 1.005, "{name}: {}", m.fcp_hz);
        }
        // Bandwidth target: the slowest corner reaches it, and only just
        // (the lowest crossover that does).
        let d = design_for_bandwidth(&p, 500.0, &DesignSpec::new(500.0)).unwrap();
        let slowest = p
            .iter()
            .map(|c| loop_margins(&d.apply(c)).bandwidth_hz)
            .fold(f64::INFINITY, f64::min);
        assert!((500.0..505.0).contains(&slowest), "{name}: {slowest}");
        assert!(d.worst_pm_deg >= DESIGN_PM_DEG && d.worst_gm_db >= DESIGN_GM_DB);
    }
}

#[test]
fn unreachable_targets_are_refused() {
    let (_, p) = corners("demo-red-30");
    let e = design_pi(&p, &DesignSpec::new(3000.0)).unwrap_err();
    assert!(
        matches!(e, DesignError::TargetUnreachable { best_hz, .. } if best_hz < 3000.0),
        "{e}"
    );
    let e = design_for_bandwidth(&p, 5000.0, &DesignSpec::new(5000.0)).unwrap_err();
    assert!(
        e.to_string()
            .starts_with("target bandwidth 5000.0 Hz not reachable"),
        "{e}"
    );
    match e {
        DesignError::BandwidthUnreachable {
            target_hz, best_hz, ..
        } => {
            assert_eq!(target_hz, 5000.0);
            assert!(best_hz < 5000.0 && best_hz > 100.0, "{best_hz}");
        }
        other => panic!("{other}"),
    }
}
