//! Cross-check of the dynamic rate-equation integrator against SciPy.
//!
//! A turn-on transient of the textbook in-plane set (0 -> 3 I_th at t = 0,
//! N = S = 0 before) is integrated by the Rust RODAS4 integrator and by
//! `scipy.integrate.solve_ivp` (Radau, rtol 1e-8, atol 1e-12 on the scaled
//! state, analytic Jacobian) in `tests/scripts/rate_eq_scipy.py`. Compared:
//! the first relaxation spike (peak power and its time), the steady state,
//! and the whole power trajectory. Skipped with a message when SciPy is not
//! installed (CI installs it).
//!
//! Reference: the SciPy values are computed when the test runs, by the
//! SciPy the machine has (CI installs the newest); the script reports its
//! SciPy and NumPy versions, the test prints them and refuses a SciPy
//! older than 1.4 (the first with `solve_ivp`'s analytic-Jacobian Radau as
//! used here; `from memory`). The tolerances below were set against SciPy
//! 1.17.1 with NumPy 2.4.6 on Python 3.11.7, the versions of the last
//! recorded run.

use diodestat_sim::plant::{c_to_k, Diode, DiodeParams};
use diodestat_tests::{python_has, run_script};

const SAMPLE_S: f64 = 0.5e-12;
const T_END_S: f64 = 10e-9;

/// Peak of the first local maximum, refined by a parabola through the
/// three samples around it: (time, power).
fn first_peak(t: &[f64], p: &[f64]) -> (f64, f64) {
    let k = (1..p.len() - 1)
        .find(|&k| p[k] > p[k - 1] && p[k] >= p[k + 1] && p[k] > 1e-3 * p[p.len() - 1])
        .expect("a relaxation spike");
    let (y0, y1, y2) = (p[k - 1], p[k], p[k + 1]);
    let h = t[k + 1] - t[k];
    let denom = y0 - 2.0 * y1 + y2;
    let off = 0.5 * (y0 - y2) / denom;
    (t[k] + off * h, y1 - 0.25 * (y0 - y2) * off)
}

/// Rust trajectory sampled every `SAMPLE_S` at the given tolerance (the
/// sampling caps the step at `SAMPLE_S`).
fn rust_trajectory(p: &DiodeParams, i_a: f64, rtol: f64, atol: f64) -> (Vec<f64>, Vec<f64>) {
    let mut d = Diode::new(p.clone()).unwrap();
    d.set_tolerance(rtol, atol);
    let t_k = c_to_k(p.t_ref_c);
    let n = (T_END_S / SAMPLE_S).round() as usize;
    let mut t = Vec::with_capacity(n);
    let mut pw = Vec::with_capacity(n);
    for k in 1..=n {
        pw.push(d.step_dynamic(i_a, t_k, SAMPLE_S).p_front_w);
        t.push(k as f64 * SAMPLE_S);
    }
    (t, pw)
}

#[test]
fn turn_on_transient_matches_scipy_radau() {
    if !python_has("scipy, numpy") {
        println!("SKIP scipy_transient: python3 with scipy and numpy not found");
        return;
    }
    let p = DiodeParams::textbook_in_plane();
    let probe = Diode::new(p.clone()).unwrap();
    let t_k = c_to_k(p.t_ref_c);
    let i_a = 3.0 * probe.threshold_current_a(t_k);

    let (t, p_rust) = rust_trajectory(&p, i_a, 1e-9, 1e-12);
    let problem = serde_json::json!({
        "coefficients": probe.rate_coefficients(t_k),
        "i_a": i_a,
        "t_end_s": T_END_S,
        "rtol": 1e-8,
        "atol": 1e-12,
        "method": "Radau",
        "n0_m3": 0.0,
        "s0_m3": 0.0,
        "sample_times_s": t,
    });
    let result: serde_json::Value = serde_json::from_str(&run_script(
        "rate_eq_scipy.py",
        &serde_json::to_string(&problem).unwrap(),
    ))
    .unwrap();
    let scipy_version = result["scipy_version"].as_str().unwrap();
    println!(
        "reference: SciPy {scipy_version}, NumPy {} (scipy.integrate.solve_ivp, Radau)",
        result["numpy_version"].as_str().unwrap()
    );
    let mut v = scipy_version
        .split('.')
        .map(|x| x.parse::<u32>().unwrap_or(0));
    let (major, minor) = (v.next().unwrap_or(0), v.next().unwrap_or(0));
    assert!(
        (major, minor) >= (1, 4),
        "SciPy {scipy_version} is older than 1.4"
    );
    let p_py: Vec<f64> = result["p_front_w"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    assert_eq!(p_py.len(), p_rust.len());

    let (tp_r, pk_r) = first_peak(&t, &p_rust);
    let (tp_s, pk_s) = first_peak(&t, &p_py);
    let ss_r = *p_rust.last().unwrap();
    let ss_s = *p_py.last().unwrap();
    let worst = p_rust
        .iter()
        .zip(&p_py)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max)
        / pk_s;
    println!(
        "peak {pk_r:.6e} W at {:.4} ps (Rust) vs {pk_s:.6e} W at {:.4} ps (SciPy): \
         d_peak {:.1e}, d_time {:.1e} ps; final {ss_r:.6e} vs {ss_s:.6e} W (d {:.1e}); \
         worst |dP|/P_peak {worst:.1e}",
        tp_r * 1e12,
        tp_s * 1e12,
        (pk_r - pk_s).abs() / pk_s,
        (tp_r - tp_s).abs() * 1e12,
        (ss_r - ss_s).abs() / ss_s,
    );
    // Tolerances: peak power 1e-6 relative, peak time 0.01 ps, steady state
    // 1e-7 relative, whole trajectory 1e-6 of the peak.
    assert!((pk_r - pk_s).abs() <= 1e-6 * pk_s, "peak power");
    assert!((tp_r - tp_s).abs() <= 0.01e-12, "peak time");
    assert!((ss_r - ss_s).abs() <= 1e-7 * ss_s, "steady state");
    assert!(worst <= 1e-6, "trajectory");
    // The spike is a real overshoot and the end is the quasi-static steady state.
    assert!(pk_s > 3.0 * ss_s);
    let qs = probe.quasi_static(i_a, t_k).p_front_w;
    assert!((ss_s - qs).abs() <= 1e-4 * qs, "SciPy end vs quasi-static");

    // At the production tolerance (rtol 1e-6, atol 1e-9) and with the
    // integrator free to choose its steps (one call per interval between
    // checkpoints), the power at checkpoints around the spike and on the
    // ringing tail stays within 1e-5 of the peak of the SciPy reference.
    let mut d = Diode::new(p.clone()).unwrap();
    let mut t_now = 0.0;
    let mut worst_default = 0.0f64;
    for ps in [800.0, 1200.0, 1341.5, 1600.0, 2500.0, 4000.0, 10000.0] {
        let t_check = ps * 1e-12;
        let out = d.step_dynamic(i_a, t_k, t_check - t_now);
        t_now = t_check;
        let k = (t_check / SAMPLE_S).round() as usize - 1;
        assert!((t[k] - t_check).abs() < 1e-18);
        worst_default = worst_default.max((out.p_front_w - p_py[k]).abs() / pk_s);
    }
    println!(
        "rtol 1e-6 checkpoints: worst |dP|/P_peak {worst_default:.1e} ({} steps)",
        d.stats().steps
    );
    assert!(worst_default <= 1e-5, "default tolerance");
}
