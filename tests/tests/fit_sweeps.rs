//! `diodestat fit` against known truth and against SciPy.
//!
//! - Synthetic sweeps: the rate-equation model of a module derived from
//!   known figures, swept at four case temperatures with noise, fitted; the
//!   figures must come back within the tolerances stated at each check.
//! - SciPy (`scipy.optimize.curve_fit`, SciPy 1.x, Levenberg-Marquardt) fits
//!   the same models to the same points (`tests/scripts/fit_scipy.py`);
//!   estimates and standard errors must agree.
//! - The shipped invented sweep set is the generator's output, and the
//!   shipped fitted module is what `fit` writes from it.

use std::path::{Path, PathBuf};

use diodestat_sim::fit::{self, Sweep};
use diodestat_sim::module_file::{self, ModuleFile};
use diodestat_tests::{python_has, run_script};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn template() -> ModuleFile {
    let text =
        std::fs::read_to_string(root().join("examples/modules/bench-808-datasheet.toml")).unwrap();
    toml::from_str(&text).unwrap()
}

/// The invented "true" part behind the shipped sweeps: the datasheet
/// module with figures a real part might measure.
pub fn truth() -> ModuleFile {
    let mut m = template();
    m.name = "bench-808-truth".into();
    m.diode.threshold_ma = 19.3;
    m.diode.slope_w_per_a = 0.962;
    m.diode.t0_k = 112.0;
    m.diode.t1_k = 380.0;
    m.diode.series_resistance_ohm = 4.4;
    m.diode.turn_on_v = 1.655;
    m.diode.ideality = 1.9;
    m
}

const CASES_C: [f64; 4] = [15.0, 25.0, 35.0, 45.0];
const NOISE: (f64, f64) = (20e-6, 1e-3);

fn synthetic(seed: u64) -> Vec<Sweep> {
    let m = truth().to_module().unwrap();
    fit::synthetic_sweeps(&m, &CASES_C, 0.060, 241, NOISE, seed).unwrap()
}

#[test]
fn synthetic_sweeps_give_back_the_known_figures() {
    let t = truth();
    for seed in [1, 2, 3] {
        let sw = synthetic(seed);
        let r = fit::fit_all(&sw, Path::new("synthetic"), fit::KINK_TOL, 808.0, 0.28).unwrap();
        let f = &r.sweeps[r.reference];
        assert_eq!(f.case_c, 25.0);
        let th = f.threshold_a.value * 1e3;
        let d2 = f.threshold_d2_a.unwrap() * 1e3;
        let sl = f.slope_w_per_a.value;
        let rs = f.v.r_s_ohm.value;
        let von = f.v.turn_on_v.value;
        let temp = r.temperature.unwrap();
        println!(
            "seed {seed}: threshold {th:.3} (d2 {d2:.3}) mA, slope {sl:.4} W/A, R_s {rs:.3} ohm, \
             V_on {von:.4} V, n {:.3}, T0 {:.1} ± {:.1} K, T1 {:.0} ± {:.0} K",
            f.v.ideality.value, temp.t0_k.value, temp.t0_k.ci95, temp.t1_k.value, temp.t1_k.ci95
        );
        // Threshold and slope: 1 % (the model's L-I curve is a hinge apart
        // from spontaneous emission near threshold and gain compression).
        assert!((th / t.diode.threshold_ma - 1.0).abs() < 0.01, "{th}");
        assert!((sl / t.diode.slope_w_per_a - 1.0).abs() < 0.01, "{sl}");
        // The second-derivative peak: 5 %.
        assert!((d2 / t.diode.threshold_ma - 1.0).abs() < 0.05, "{d2}");
        // Series resistance 3 %, turn-on voltage 5 mV.
        assert!(
            (rs / t.diode.series_resistance_ohm - 1.0).abs() < 0.03,
            "{rs}"
        );
        assert!((von - t.diode.turn_on_v).abs() < 0.005, "{von}");
        // T0 5 %, T1 15 % (a small slope change over 30 K).
        assert!(
            (temp.t0_k.value / t.diode.t0_k - 1.0).abs() < 0.05,
            "{temp:?}"
        );
        assert!(
            (temp.t1_k.value / t.diode.t1_k - 1.0).abs() < 0.15,
            "{temp:?}"
        );
        // No kinks or roll-over in a clean pulsed sweep.
        assert!(r
            .sweeps
            .iter()
            .all(|s| s.kinks.is_empty() && s.roll_over.is_none()));
        // The residual is the noise plus the model's small departure from
        // two straight lines (rounding at threshold): 1 to 1.6 times the noise.
        assert!((1.0..1.6).contains(&(f.rms_w / NOISE.0)), "{}", f.rms_w);
        // The fitted module loads, and its derived model gives the fitted figures.
        let m = fit::fitted_module(&template(), &r, "x").unwrap();
        let (th2, sl2, _) = module_file::figures(&m.to_module().unwrap().diode);
        assert!((th2 / th - 1.0).abs() < 1e-3 && (sl2 / sl - 1.0).abs() < 1e-3);
    }
}

/// The fit's 95 % intervals cover the noise only, not model error: on
/// synthetic sweeps of a known part the slope's bias is many times its
/// interval. The report (`fit.md` and `fit.json`) says so, with the
/// figures measured here.
#[test]
fn the_report_says_its_intervals_cover_noise_only() {
    let t = truth();
    let r = fit::fit_all(
        &synthetic(1),
        Path::new("synthetic"),
        fit::KINK_TOL,
        808.0,
        0.28,
    )
    .unwrap();
    let f = &r.sweeps[r.reference];
    let (sl, ci) = (f.slope_w_per_a.value, f.slope_w_per_a.ci95);
    let bias = t.diode.slope_w_per_a - sl;
    println!(
        "slope {sl:.4} ± {ci:.4} W/A against a true {} W/A",
        t.diode.slope_w_per_a
    );
    assert!(bias > 10.0 * ci, "bias {bias} against the interval {ci}");
    // The figures the statement quotes.
    assert!(fit::INTERVAL_SCOPE.contains(&format!(
        "{sl:.4} ± {ci:.4} W/A against a true {} W/A",
        t.diode.slope_w_per_a
    )));
    let md = fit::markdown(&r, "synthetic.csv", "x");
    assert!(md.contains(fit::INTERVAL_SCOPE));
    assert!(md.contains("They do not cover model error"));
    let json: serde_json::Value = serde_json::to_value(&r).unwrap();
    assert_eq!(json["interval_scope"], fit::INTERVAL_SCOPE);
}

#[test]
fn fit_agrees_with_scipy_curve_fit() {
    if !python_has("scipy, numpy") {
        println!("SKIP fit_agrees_with_scipy_curve_fit: python3 with scipy and numpy not found");
        return;
    }
    let sw = synthetic(1);
    let r = fit::fit_all(&sw, Path::new("synthetic"), fit::KINK_TOL, 808.0, 0.28).unwrap();
    let problem = serde_json::json!({
        "sweeps": sw.iter().zip(&r.sweeps).map(|(s, f)| serde_json::json!({
            "i_a": s.points.iter().map(|p| p.i_a).collect::<Vec<_>>(),
            "p_w": s.points.iter().map(|p| p.p_w).collect::<Vec<_>>(),
            "v_v": s.points.iter().map(|p| p.v_v).collect::<Vec<_>>(),
            "fit_points": f.fit_points,
            "start": f.hinge,
        })).collect::<Vec<_>>(),
    });
    let out: serde_json::Value =
        serde_json::from_str(&run_script("fit_scipy.py", &problem.to_string())).unwrap();
    for (f, py) in r.sweeps.iter().zip(out["sweeps"].as_array().unwrap()) {
        let g = |k: &str| py[k].as_f64().unwrap();
        let rel = |a: f64, b: f64| (a / b - 1.0).abs();
        println!(
            "{} degC: threshold {:.6} / {:.6} mA, slope {:.6} / {:.6} W/A, R_s {:.5} / {:.5} ohm",
            f.case_c,
            f.threshold_a.value * 1e3,
            g("i_th_a") * 1e3,
            f.slope_w_per_a.value,
            g("slope_w_per_a"),
            f.v.r_s_ohm.value,
            g("r_s_ohm")
        );
        assert!(rel(f.threshold_a.value, g("i_th_a")) < 1e-4, "{f:?} {py}");
        assert!(rel(f.slope_w_per_a.value, g("slope_w_per_a")) < 1e-6);
        assert!(rel(f.v.r_s_ohm.value, g("r_s_ohm")) < 1e-6);
        assert!((f.v.turn_on_v.value - g("turn_on_v")).abs() < 1e-6);
        // Standard errors: the same s^2 (J^T J)^-1, 2 %.
        assert!(rel(f.threshold_a.ci95 / fit::Z95, g("i_th_se")) < 0.02);
        assert!(rel(f.slope_w_per_a.ci95 / fit::Z95, g("slope_se")) < 0.02);
        assert!(rel(f.v.r_s_ohm.ci95 / fit::Z95, g("r_s_se")) < 0.02);
    }
}

const SWEEPS_CSV: &str = "examples/bench-808/sweeps.csv";
const FITTED: &str = "examples/modules/bench-808-fitted.toml";

fn shipped_sweeps_text() -> String {
    fit::sweeps_csv(
        &synthetic(808),
        &[
            "INVENTED example bench sweeps, not a measurement: generated by the",
            "rate-equation model of an invented 808 nm part (tests/tests/fit_sweeps.rs, truth())",
            "at four case temperatures with the junction at the case temperature",
            "(pulsed), 0.02 mW rms power noise and 1 mV rms voltage noise.",
            "Regenerate: DIODESTAT_REGEN=1 cargo test -p diodestat-tests --test fit_sweeps",
        ],
    )
}

#[test]
fn shipped_sweeps_are_the_generator_output_and_the_fitted_module_their_fit() {
    let sweeps_path = root().join(SWEEPS_CSV);
    let out = std::env::temp_dir().join(format!("diodestat-fit-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&out);
    if std::env::var_os("DIODESTAT_REGEN").is_some() {
        std::fs::write(&sweeps_path, shipped_sweeps_text()).unwrap();
    }
    assert_eq!(
        std::fs::read_to_string(&sweeps_path).unwrap(),
        shipped_sweeps_text()
    );
    diodestat_sim::fit::write_fit(
        &sweeps_path,
        &root().join("examples/modules/bench-808-datasheet.toml"),
        Some("bench-808-fitted"),
        fit::KINK_TOL,
        &out,
    )
    .unwrap();
    let written = std::fs::read_to_string(out.join("module.toml")).unwrap();
    if std::env::var_os("DIODESTAT_REGEN").is_some() {
        std::fs::write(root().join(FITTED), &written).unwrap();
    }
    assert_eq!(
        std::fs::read_to_string(root().join(FITTED)).unwrap(),
        written
    );
    module_file::load_module(&root().join(FITTED), "MODULE").unwrap();
    let _ = std::fs::remove_dir_all(&out);
}
