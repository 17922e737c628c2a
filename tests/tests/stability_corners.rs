//! The power loop of the visible demo board (example configuration,
//! calibrated to the module) at its plant corners: operating points,
//! small-signal loop parameters, margins, the gate and a design over the
//! corners.

use diodestat_core::{example, Fx, ValidConfig};
use diodestat_sim::calibration;
use diodestat_sim::plant::DemoModule;
use diodestat_sim::stability::corners::{markdown, SLOPE_SPREAD, TRACKING_SPREAD};
use diodestat_sim::stability::{
    analyse_corners, design_for_corners, gate, standard_corners, CornerAnalysis, CornerOptions,
    DesignSpec, DESIGN_GM_DB, DESIGN_PM_DEG, PASS_GM_DB, PASS_PM_DEG,
};

const SETPOINT_MW: f64 = 20.0;

fn setup() -> (DemoModule, ValidConfig) {
    let m = DemoModule::visible();
    let cfg = calibration::calibrate(example::config(), &m)
        .validate()
        .unwrap();
    (m, cfg)
}

fn by_name<'a>(a: &'a [CornerAnalysis], name: &str) -> &'a CornerAnalysis {
    a.iter().find(|x| x.corner.corner.name == name).unwrap()
}

#[test]
fn operating_points_and_loop_parameters() {
    let (m, cfg) = setup();
    let corners = standard_corners(&cfg, SETPOINT_MW);
    let a = analyse_corners(&m, &cfg, &corners, &CornerOptions::default()).unwrap();
    println!("{}", markdown(&a, PASS_PM_DEG, PASS_GM_DB));
    assert_eq!(a.len(), corners.len());
    for x in &a {
        let (c, p, l) = (&x.corner.corner, &x.corner.point, &x.corner.params);
        if p.at_ceiling {
            // Flagged only when the setpoint needs more than the ceiling.
            assert!(p.required_ma.is_none_or(|r| r > p.ceiling_ma), "{}", c.name);
            assert!((p.current_ma - p.ceiling_ma).abs() < 1e-6, "{}", c.name);
        } else {
            assert!((p.reading_mw - c.setpoint_mw).abs() < 1e-6, "{}", c.name);
            assert!(p.current_ma <= p.ceiling_ma + 1e-9, "{}", c.name);
        }
        assert!(p.current_ma > p.threshold_ma, "{}: below threshold", c.name);
        assert!(p.tj_c > p.case_c && p.case_c > c.ambient_c, "{}", c.name);
        // Gains exactly as the core runs them.
        assert_eq!(l.kp_ma_per_mw, cfg.kp().to_num::<f64>());
        assert_eq!(l.ki_per_tick, cfg.ki_per_tick().to_num::<f64>());
        assert_eq!(l.tick_hz, 20_000.0);
        assert_eq!(l.driver_bandwidth_hz, m.driver.bandwidth_hz);
    }
    let n = by_name(&a, "nominal").corner.params;
    // The slope falls with temperature (T1 of the diode model).
    let cold = by_name(&a, "cold").corner.params.slope_mw_per_ma;
    let hot = by_name(&a, "hot").corner.params.slope_mw_per_ma;
    assert!(cold > n.slope_mw_per_ma && n.slope_mw_per_ma > hot);
    // Spreads land where they should, up to the small shift of the
    // junction temperature with the operating current.
    let hi = by_name(&a, "slope high").corner.params.slope_mw_per_ma / n.slope_mw_per_ma;
    let lo = by_name(&a, "slope low").corner.params.slope_mw_per_ma / n.slope_mw_per_ma;
    assert!((hi - (1.0 + SLOPE_SPREAD)).abs() < 0.005, "{hi}");
    assert!((lo - (1.0 - SLOPE_SPREAD)).abs() < 0.005, "{lo}");
    let th = by_name(&a, "tracking high").corner.params.monitor_gain / n.monitor_gain;
    let tl = by_name(&a, "tracking low").corner.params.monitor_gain / n.monitor_gain;
    assert!((th - (1.0 + TRACKING_SPREAD)).abs() < 0.002, "{th}");
    assert!((tl - (1.0 - TRACKING_SPREAD)).abs() < 0.002, "{tl}");
    // Higher loop gain, higher crossover.
    let f = |name: &str| by_name(&a, name).margins.fcp_hz;
    assert!(f("tracking high") > f("nominal") && f("nominal") > f("tracking low"));
}

#[test]
fn example_gains_pass_the_common_practice_line_at_every_corner() {
    let (m, cfg) = setup();
    let a = analyse_corners(
        &m,
        &cfg,
        &standard_corners(&cfg, SETPOINT_MW),
        &CornerOptions::default(),
    )
    .unwrap();
    let g = gate(&a, PASS_PM_DEG, PASS_GM_DB);
    for n in &g.not_regulating {
        println!("not regulating: {}: {}", n.corner, n.reason);
    }
    assert!(g.passed(), "{:#?}", g.failures);
    assert_eq!(
        g.not_regulating.len(),
        a.iter().filter(|x| x.corner.point.at_ceiling).count()
    );
}

#[test]
fn aggressive_gains_fail_the_gate() {
    let (m, _) = setup();
    let mut c = calibration::calibrate(example::config(), &m);
    c.apc.kp_iu_per_ou = Fx::from_num(1.2);
    c.apc.ki_iu_per_ou_ms = Fx::from_num(12);
    let cfg = c.validate().unwrap();
    let a = analyse_corners(
        &m,
        &cfg,
        &standard_corners(&cfg, SETPOINT_MW),
        &CornerOptions::default(),
    )
    .unwrap();
    println!("{}", markdown(&a, PASS_PM_DEG, PASS_GM_DB));
    let g = gate(&a, PASS_PM_DEG, PASS_GM_DB);
    assert!(!g.passed());
    for f in &g.failures {
        println!("{}: {}", f.corner, f.reason);
        assert!(f.reason.contains("PM") || f.reason.contains("unstable"));
    }
}

#[test]
fn design_over_the_corners_meets_its_margins_in_the_core() {
    let (m, cfg) = setup();
    let corners = standard_corners(&cfg, SETPOINT_MW);
    let opts = CornerOptions::default();
    let d = design_for_corners(&m, &cfg, &corners, &opts, &DesignSpec::new(400.0)).unwrap();
    println!(
        "designed kp {} mA/mW, ki {} mA/(mW ms) ({} per tick), zero {:.0} Hz, crossover {:.1} Hz, \
         worst PM {:.1} deg, worst GM {:.1} dB",
        d.kp,
        d.ki_ma_per_mw_ms,
        d.ki_per_tick,
        d.zero_hz,
        d.crossover_hz,
        d.worst_pm_deg,
        d.worst_gm_db
    );
    assert!(d.target_met);
    // Put the gains into the configuration and analyse again from scratch.
    let mut c = cfg.config().clone();
    c.apc.kp_iu_per_ou = d.kp;
    c.apc.ki_iu_per_ou_ms = d.ki_ma_per_mw_ms;
    let cfg2 = c.validate().unwrap();
    let a = analyse_corners(&m, &cfg2, &corners, &opts).unwrap();
    println!("{}", markdown(&a, DESIGN_PM_DEG, DESIGN_GM_DB));
    assert!(gate(&a, DESIGN_PM_DEG, DESIGN_GM_DB).passed());
    let top = a.iter().map(|x| x.margins.fcp_hz).fold(0.0, f64::max);
    assert!((top - 400.0).abs() < 2.0, "highest crossover {top} Hz");
}
