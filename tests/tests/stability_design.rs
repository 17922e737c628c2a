//! PI gain design over plant corners: the design meets its margins at every
//! corner (checked here from the returned gains, independently of the
//! search), reaches the target when it can, reports a clear error when it
//! cannot, and its gains are exactly what the core runs on.

use diodestat_core::{example, Fx};
use diodestat_sim::stability::{
    design_pi, loop_margins, open_loop, write_bode_svg, BodeLoop, DesignError, DesignSpec, Limit,
    LoopParams, Reference, DESIGN_GM_DB, DESIGN_PM_DEG,
};

fn corner(slope: f64, monitor_gain: f64, driver_hz: f64, delay: u32) -> LoopParams {
    LoopParams {
        tick_hz: 20_000.0,
        kp_ma_per_mw: 0.3,
        ki_per_tick: 0.15,
        dac_gain: 1.0,
        driver_bandwidth_hz: driver_hz,
        slope_mw_per_ma: slope,
        monitor_gain,
        monitor_filter_hz: 5_000.0,
        delay_ticks: delay,
    }
}

/// Nominal, cold (steeper slope), hot (shallower), aged, tracking spread
/// high and low, slow driver.
fn corners() -> Vec<LoopParams> {
    vec![
        corner(0.9, 1.0, 200e3, 1),
        corner(1.05, 1.0, 200e3, 1),
        corner(0.7, 1.0, 200e3, 1),
        corner(0.6, 0.9, 200e3, 1),
        corner(0.9, 1.2, 200e3, 1),
        corner(0.9, 0.8, 200e3, 1),
        corner(0.9, 1.0, 50e3, 1),
    ]
}

#[test]
fn reachable_target_is_met_with_margins_at_every_corner() {
    let cs = corners();
    let spec = DesignSpec::new(400.0);
    let d = design_pi(&cs, &spec).expect("400 Hz is reachable");
    println!(
        "kp {} mA/mW, ki {} mA/(mW ms) = {} per tick, zero {:.1} Hz, crossover {:.1} Hz, \
         worst PM {:.2} deg, worst GM {:.2} dB",
        d.kp,
        d.ki_ma_per_mw_ms,
        d.ki_per_tick,
        d.zero_hz,
        d.crossover_hz,
        d.worst_pm_deg,
        d.worst_gm_db
    );
    assert!(d.target_met);
    assert!(
        (d.crossover_hz - 400.0).abs() < 0.005 * 400.0,
        "{}",
        d.crossover_hz
    );
    // Independent check from the returned gains.
    let mut highest = 0.0f64;
    for (i, c) in cs.iter().enumerate() {
        let m = loop_margins(&d.apply(c));
        println!(
            "corner {i}: PM {:.2} deg at {:.1} Hz, GM {:.2} dB, BW {:.1} Hz",
            m.pm_deg, m.fcp_hz, m.gm_db, m.bandwidth_hz
        );
        assert!(m.closed_loop_stable, "corner {i}");
        assert!(m.pm_deg >= DESIGN_PM_DEG, "corner {i}: PM {}", m.pm_deg);
        assert!(m.gm_db >= DESIGN_GM_DB, "corner {i}: GM {}", m.gm_db);
        assert_eq!(m, d.corners[i].margins);
        highest = highest.max(m.fcp_hz);
    }
    // The target refers to the highest-gain corner: none crosses above it.
    assert!((highest - d.crossover_hz).abs() < 1e-9 * highest);
    // The zero lies in the searched range: not below a twentieth of the
    // crossover, kp at least 1 % of kp + ki.
    assert!(d.zero_hz >= 0.05 * 400.0 * 0.99, "{}", d.zero_hz);
    assert!(d.kp_ma_per_mw / (d.kp_ma_per_mw + d.ki_per_tick_f64) >= 0.0099);

    let svg = std::path::PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("stability_design.svg");
    let tfs: Vec<_> = cs.iter().map(|c| open_loop(&d.apply(c))).collect();
    let names = [
        "nominal",
        "cold",
        "hot",
        "aged",
        "tracking +20%",
        "tracking -20%",
        "50 kHz driver",
    ];
    let bl: Vec<_> = tfs
        .iter()
        .zip(names)
        .map(|(tf, label)| BodeLoop { label, tf })
        .collect();
    write_bode_svg(&svg, "designed PI at the corners", &bl).unwrap();
    println!("Bode plot: {}", svg.display());
}

#[test]
fn chosen_zero_has_the_best_worst_corner_stability_margin() {
    // Move the PI zero either way at the same crossover (kp re-placed so the
    // highest-gain corner still crosses at 400 Hz): no feasible neighbour
    // has a clearly larger worst-corner stability margin min |1 + L|.
    let cs = corners();
    let d = design_pi(&cs, &DesignSpec::new(400.0)).unwrap();
    let worst_sm = |kp: f64, ki: f64| {
        let ms: Vec<_> = cs
            .iter()
            .map(|c| loop_margins(&c.with_gains(kp, ki)))
            .collect();
        let ok = ms.iter().all(|m| m.meets(DESIGN_PM_DEG, DESIGN_GM_DB));
        (ok, ms.iter().map(|m| m.sm).fold(f64::INFINITY, f64::min))
    };
    let (ok, sm0) = worst_sm(d.kp_ma_per_mw, d.ki_per_tick_f64);
    assert!(ok);
    let u0 = (d.ki_per_tick_f64 / d.kp_ma_per_mw).ln_1p();
    let wc = 2.0 * std::f64::consts::PI * 400.0;
    for f in [0.5, 0.8, 0.95, 1.05, 1.25, 2.0] {
        let r = (u0 * f).exp_m1();
        let loop_gain = cs
            .iter()
            .map(|c| open_loop(&c.with_gains(1.0, r)).freq_response(wc).abs())
            .fold(0.0, f64::max);
        let kp = 1.0 / loop_gain;
        let (ok, sm) = worst_sm(kp, kp * r);
        println!("zero x{f}: feasible {ok}, worst SM {sm:.5} (design {sm0:.5})");
        assert!(!ok || sm <= sm0 + 2e-3, "zero x{f} is better: {sm} > {sm0}");
    }
}

#[test]
fn unreachable_target_is_refused_with_the_best_crossover() {
    let cs = corners();
    let e = design_pi(&cs, &DesignSpec::new(3_000.0)).unwrap_err();
    println!("{e}");
    let DesignError::TargetUnreachable {
        best_hz,
        limiting_corner,
        limit,
        ..
    } = e.clone()
    else {
        panic!("expected TargetUnreachable, got {e:?}");
    };
    assert!(best_hz > 100.0 && best_hz < 3_000.0, "{best_hz}");
    assert!(limiting_corner < cs.len());
    assert!(matches!(
        limit,
        Limit::PhaseMargin { .. } | Limit::GainMargin { .. }
    ));
    let msg = e.to_string();
    assert!(
        msg.contains("not reachable") && msg.contains("3000.0 Hz"),
        "{msg}"
    );

    // Accepting a lower crossover gives the best one, which meets the margins.
    let spec = DesignSpec {
        min_crossover_hz: 50.0,
        ..DesignSpec::new(3_000.0)
    };
    let d = design_pi(&cs, &spec).unwrap();
    assert!(!d.target_met);
    assert!(
        (d.crossover_hz - best_hz).abs() < 0.01 * best_hz,
        "{} vs {best_hz}",
        d.crossover_hz
    );
    assert!(d.corners.iter().all(|c| c.meets));
    // And it is the best: 3 % more gain (a higher crossover) loses a margin.
    let fails = cs
        .iter()
        .map(|c| loop_margins(&c.with_gains(d.kp_ma_per_mw * 1.03, d.ki_per_tick_f64 * 1.03)))
        .any(|m| !m.meets(DESIGN_PM_DEG, DESIGN_GM_DB));
    assert!(
        fails,
        "the search stopped below the highest feasible crossover"
    );
}

#[test]
fn more_delay_lowers_the_reachable_crossover() {
    let spec = DesignSpec {
        min_crossover_hz: 1.0,
        ..DesignSpec::new(5_000.0)
    };
    let one = design_pi(&[corner(0.9, 1.0, 200e3, 1)], &spec).unwrap();
    let three = design_pi(&[corner(0.9, 1.0, 200e3, 3)], &spec).unwrap();
    println!(
        "best crossover: delay 1 {:.1} Hz, delay 3 {:.1} Hz",
        one.crossover_hz, three.crossover_hz
    );
    assert!(three.crossover_hz < 0.7 * one.crossover_hz);
}

#[test]
fn reference_corner_places_its_own_crossover() {
    let cs = corners();
    let spec = DesignSpec {
        reference: Reference::Corner(3),
        ..DesignSpec::new(200.0)
    };
    let d = design_pi(&cs, &spec).unwrap();
    let m = loop_margins(&d.apply(&cs[3]));
    assert!((m.fcp_hz - 200.0).abs() < 0.005 * 200.0, "{}", m.fcp_hz);
    assert!((d.crossover_hz - m.fcp_hz).abs() < 1e-9 * m.fcp_hz);
}

#[test]
fn designed_gains_are_what_the_core_runs_on() {
    let cs = corners();
    let d = design_pi(&cs, &DesignSpec::new(400.0)).unwrap();
    let mut cfg = example::config();
    assert_eq!(cfg.tick_hz, 20_000);
    cfg.apc.kp_iu_per_ou = d.kp;
    cfg.apc.ki_iu_per_ou_ms = d.ki_ma_per_mw_ms;
    let valid = cfg.validate().expect("designed gains validate");
    assert_eq!(valid.kp(), d.kp);
    assert_eq!(valid.ki_per_tick(), d.ki_per_tick);
    // LoopParams built from the validated configuration are the design's.
    let p = cs[0].with_config_gains(&valid);
    assert_eq!(p.kp_ma_per_mw, d.kp_ma_per_mw);
    assert_eq!(p.ki_per_tick, d.ki_per_tick_f64);
    assert!(d.kp > Fx::ZERO);
}

#[test]
fn target_at_or_above_nyquist_is_refused() {
    let e = design_pi(&corners(), &DesignSpec::new(10_000.0)).unwrap_err();
    assert!(matches!(e, DesignError::TargetAboveNyquist { .. }), "{e}");
    assert!(e.to_string().contains("Nyquist"));
}
