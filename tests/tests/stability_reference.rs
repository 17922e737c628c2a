//! Loop-analysis reference checks: margins of textbook and library loops
//! with published values, and closed forms computed here.
//!
//! Sources: "P" = python-control 0.10.2, control/tests/margin_test.py
//! (the values that test file asserts, with the tolerance it uses where its
//! own figures are rounded coarsely); "C" = computed from the closed form
//! written beside the check.

use diodestat_sim::stability::{
    bandwidth_rad_s, crossings, margins, ContinuousTf, DiscreteTf, Margins, PASS_GM_DB, PASS_PM_DEG,
};

fn tf(num: &[f64], den: &[f64]) -> ContinuousTf {
    ContinuousTf::from_descending(num, den)
}

#[track_caller]
fn near(what: &str, got: f64, want: f64, tol: f64) {
    assert!(
        (got - want).abs() <= tol,
        "{what}: got {got}, want {want} ± {tol}"
    );
}

#[track_caller]
fn rel(what: &str, got: f64, want: f64, rtol: f64) {
    assert!(
        (got - want).abs() <= rtol * want.abs(),
        "{what}: got {got}, want {want} (rtol {rtol})"
    );
}

fn show(name: &str, m: &Margins) {
    println!(
        "{name}: gm {} ({} dB) at {} rad/s, pm {} deg at {} rad/s, sm {} at {} rad/s",
        m.gm_ratio, m.gm_db, m.wcg_rad_s, m.pm_deg, m.wcp_rad_s, m.sm, m.wsm_rad_s
    );
}

#[test]
fn two_over_s_plus_one_cubed() {
    let l = tf(&[2.0], &[1.0, 3.0, 3.0, 1.0]);
    let m = margins(&l);
    show("2/(s+1)^3", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py, 'type0' K=2:
    // (4.000, 67.6058, 1.7322, 0.7663), asserted there with atol 1e-2 only;
    // the closed form below gives PM 67.5981° at 0.76642 rad/s, which is
    // also what python-control 0.10.2's margin() itself returns.
    near("GM (P)", m.gm_ratio, 4.000, 1e-2);
    near("PM (P)", m.pm_deg, 67.6058, 1e-2);
    near("wcg (P)", m.wcg_rad_s, 1.7322, 1e-2);
    near("wcp (P)", m.wcp_rad_s, 0.7663, 1e-2);
    // C: (1 + j√3)^3 = -8, so L(j√3) = -1/4: GM 4 at √3. |L| = 1 where
    // (1+ω²)^{3/2} = 2, ω = √(2^{2/3} - 1); PM = 180° - 3·atan(ω).
    let wcp = (2f64.powf(2.0 / 3.0) - 1.0).sqrt();
    near("GM (C)", m.gm_ratio, 4.0, 1e-9);
    near("wcg (C)", m.wcg_rad_s, 3f64.sqrt(), 1e-9);
    near("wcp (C)", m.wcp_rad_s, wcp, 1e-9);
    near(
        "PM (C)",
        m.pm_deg,
        180.0 - 3.0 * wcp.atan().to_degrees(),
        1e-7,
    );
    near("GM dB (C)", m.gm_db, 20.0 * 4f64.log10(), 1e-8);
    assert!(m.closed_loop_stable);
}

#[test]
fn type_two_loop() {
    // (s+0.1)/(s^2 (s+1)).
    let l = tf(&[1.0, 0.1], &[1.0, 1.0, 0.0, 0.0]);
    let m = margins(&l);
    show("(s+0.1)/(s^2(s+1))", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py, 'type2':
    // (inf, 44.4594, nan, 0.7907), atol 1e-4.
    assert!(m.gm_ratio.is_infinite() && m.wcg_rad_s.is_nan());
    near("PM (P)", m.pm_deg, 44.4594, 1e-4);
    near("wcp (P)", m.wcp_rad_s, 0.7907, 1e-4);
    // C: |L| = 1 ⇔ x³ + x² - x - 0.01 = 0 with x = ω² (bisection here);
    // PM = 180° + atan(ω/0.1) - 180° - atan(ω).
    let f = |x: f64| x * x * x + x * x - x - 0.01;
    let (mut a, mut b) = (0.1, 1.0);
    for _ in 0..200 {
        let c = 0.5 * (a + b);
        if f(a) * f(c) <= 0.0 {
            b = c;
        } else {
            a = c;
        }
    }
    let w = (0.5 * (a + b)).sqrt();
    near("wcp (C)", m.wcp_rad_s, w, 1e-10);
    near(
        "PM (C)",
        m.pm_deg,
        (w / 0.1).atan().to_degrees() - w.atan().to_degrees(),
        1e-8,
    );
}

#[test]
fn cubic_with_gain_margin_two() {
    let l = tf(&[1.0], &[1.0, 2.0, 3.0, 4.0]);
    let m = margins(&l);
    show("1/(s^3+2s^2+3s+4)", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py:
    // (2., inf, 0.4170, 1.7321, nan, 1.6620), atol 1.5e-3 for margin().
    near("GM (P)", m.gm_ratio, 2.0, 1.5e-3);
    near("wcg (P)", m.wcg_rad_s, 1.7321, 1.5e-3);
    near("SM (P)", m.sm, 0.4170, 1.5e-3);
    near("wsm (P)", m.wsm_rad_s, 1.6620, 1.5e-3);
    assert!(m.pm_deg.is_infinite() && m.wcp_rad_s.is_nan());
    // C: Im den(jω) = 3ω - ω³ = 0 at ω = √3, Re = 4 - 2ω² = -2: L = -1/2.
    near("GM (C)", m.gm_ratio, 2.0, 1e-10);
    near("wcg (C)", m.wcg_rad_s, 3f64.sqrt(), 1e-10);
}

#[test]
fn non_minimum_phase_gain_margin_300() {
    let l = tf(&[-0.01, 0.1], &[1.0, 3.0, 2.0]);
    let m = margins(&l);
    show("0.01(10-s)/((2+s)(1+s))", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py:
    // (300.0, inf, 0.9917, 5.6569, nan, 2.3171), atol 1.5e-3.
    near("GM (P)", m.gm_ratio, 300.0, 1.5e-3);
    near("wcg (P)", m.wcg_rad_s, 5.6569, 1.5e-3);
    near("SM (P)", m.sm, 0.9917, 1.5e-3);
    near("wsm (P)", m.wsm_rad_s, 2.3171, 1.5e-3);
    assert!(m.pm_deg.is_infinite());
    // C: at ω = √32, (2+jω)(1+jω) = -30 + j3√32 = -3(10 - jω): L = -0.01/3.
    rel("GM (C)", m.gm_ratio, 300.0, 1e-10);
    rel("wcg (C)", m.wcg_rad_s, 32f64.sqrt(), 1e-10);
}

#[test]
fn integrator_and_double_lag() {
    let l = tf(&[1.0], &[1.0, 2.0, 1.0, 0.0]);
    let m = margins(&l);
    show("1/(s(s+1)^2)", &m);
    // C: phase -90° - 2·atan(ω) = -180° at ω = 1 where |L| = 1/2: GM 2.
    // |L| = 1 ⇔ ω(1+ω²) = 1 (ω = 0.6823278); PM = 90° - 2·atan(ω) = 21.39°.
    near("GM (C)", m.gm_ratio, 2.0, 1e-10);
    near("wcg (C)", m.wcg_rad_s, 1.0, 1e-10);
    near("wcp (C)", m.wcp_rad_s, 0.6823, 1e-4);
    near("PM (C)", m.pm_deg, 21.39, 5e-3);
    let (mut a, mut b) = (0.0f64, 1.0f64);
    for _ in 0..200 {
        let c = 0.5 * (a + b);
        if c * (1.0 + c * c) < 1.0 {
            a = c;
        } else {
            b = c;
        }
    }
    near("wcp (C exact)", m.wcp_rad_s, a, 1e-10);
    near(
        "PM (C exact)",
        m.pm_deg,
        90.0 - 2.0 * a.atan().to_degrees(),
        1e-8,
    );
}

#[test]
fn ten_over_s_s1_s5() {
    let l = tf(&[10.0], &[1.0, 6.0, 5.0, 0.0]);
    let m = margins(&l);
    show("10/(s(s+1)(s+5))", &m);
    // C: phase crossover where ω² = 5; |L| = 10/(√5·√6·√30) = 1/3: GM 3.
    // PM 25.39° at 1.2271 rad/s (from references.md, C).
    near("GM (C)", m.gm_ratio, 3.0, 1e-10);
    near("wcg (C)", m.wcg_rad_s, 5f64.sqrt(), 1e-10);
    near("wcp (C)", m.wcp_rad_s, 1.2271, 1e-4);
    near("PM (C)", m.pm_deg, 25.39, 5e-3);
}

#[test]
fn several_gain_crossovers_pick_the_smallest_margin() {
    // 8.75 (4s²+0.4s+1) / ((100s+1)(s²+0.22s+1)(s²/100 + 0.008s + 1)).
    let num = [35.0, 3.5, 8.75];
    let d1 = ContinuousTf::from_descending(&[1.0], &[100.0, 1.0]);
    let d2 = ContinuousTf::from_descending(&[1.0], &[1.0, 0.22, 1.0]);
    let d3 = ContinuousTf::from_descending(&[1.0], &[0.01, 0.008, 1.0]);
    let l = tf(&num, &[1.0]).series(&d1).series(&d2).series(&d3);
    let m = margins(&l);
    show("multi-crossover", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py:
    // stability_margins = (2.2716, 97.5941, 0.5591, 10.0053, 0.0850, 9.9918);
    // returnall: PM [97.5941, -157.7844, 134.7359] at [0.0850, 0.9373, 1.0919].
    // atol 1.5e-3 (margin()); the figures are given to 4 decimals.
    near("GM (P)", m.gm_ratio, 2.2716, 1.5e-3);
    near("PM (P)", m.pm_deg, 97.5941, 1.5e-3);
    near("SM (P)", m.sm, 0.5591, 1.5e-3);
    near("wcg (P)", m.wcg_rad_s, 10.0053, 1.5e-3);
    near("wcp (P)", m.wcp_rad_s, 0.0850, 1.5e-3);
    near("wsm (P)", m.wsm_rad_s, 9.9918, 1.5e-3);
    let c = crossings(&l);
    let pms: Vec<f64> = c.gain.iter().map(|g| g.pm_deg).collect();
    let ws: Vec<f64> = c.gain.iter().map(|g| g.w_rad_s).collect();
    assert_eq!(pms.len(), 3, "{pms:?}");
    for (g, w) in pms.iter().zip([97.5941, -157.7844, 134.7359]) {
        near("PM list (P)", *g, w, 1.5e-2);
    }
    for (g, w) in ws.iter().zip([0.0850, 0.9373, 1.0919]) {
        near("wcp list (P)", *g, w, 1.5e-2);
    }
}

#[test]
fn gain_margin_below_one_is_selected_by_log_distance() {
    // (s+0.1)²/(s³(s+1)): conditionally stable, the nearest GM is < 1.
    let l = tf(&[1.0, 0.2, 0.01], &[1.0, 1.0, 0.0, 0.0, 0.0]);
    let m = margins(&l);
    show("type3", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py, 'type3':
    // (0.0626, 37.1748, 0.1119, 0.7951), atol 1.5e-3.
    near("GM (P)", m.gm_ratio, 0.0626, 1.5e-3);
    near("PM (P)", m.pm_deg, 37.1748, 1.5e-3);
    near("wcg (P)", m.wcg_rad_s, 0.1119, 1.5e-3);
    near("wcp (P)", m.wcp_rad_s, 0.7951, 1.5e-3);
}

#[test]
fn negative_phase_margin_of_a_differentiator() {
    // 2s/(s+1).
    let l = tf(&[2.0, 0.0], &[1.0, 1.0]);
    let m = margins(&l);
    // P: python-control 0.10.2, control/tests/margin_test.py, 'typem1' K=2:
    // (inf, -120.0007, nan, 0.5774), atol 1.5e-3.
    near("PM (P)", m.pm_deg, -120.0007, 1.5e-3);
    near("wcp (P)", m.wcp_rad_s, 0.5774, 1.5e-3);
    assert!(m.gm_ratio.is_infinite());
    // C: |L| = 1 at ω = 1/√3 where ∠L = 90° - 30° = 60°: PM = 60 - 180.
    near("PM (C)", m.pm_deg, -120.0, 1e-9);
    near("wcp (C)", m.wcp_rad_s, 1.0 / 3f64.sqrt(), 1e-10);
}

#[test]
fn sampled_third_order_lag() {
    // 2/(s+1)^3 through a ZOH at T = 0.1 s.
    let l = tf(&[2.0], &[1.0, 3.0, 3.0, 1.0]).c2d_zoh(0.1);
    let m = margins(&l);
    show("zoh(2/(s+1)^3, 0.1)", &m);
    // P: python-control 0.10.2, control/tests/margin_test.py,
    // test_stability_margins_discrete: [3.4927, 65.4212, 0.5763, 1.6283,
    // 0.76625, 1.2019], rtol 1e-4.
    rel("GM (P)", m.gm_ratio, 3.4927, 1e-4);
    rel("PM (P)", m.pm_deg, 65.4212, 1e-4);
    rel("SM (P)", m.sm, 0.5763, 1e-4);
    rel("wcg (P)", m.wcg_rad_s, 1.6283, 1e-4);
    rel("wcp (P)", m.wcp_rad_s, 0.76625, 1e-4);
    rel("wsm (P)", m.wsm_rad_s, 1.2019, 1e-4);
}

/// `(name, num, den, dt, [gm, pm, sm, wcg, wcp, wsm], rtol)`.
type Case = (&'static str, Vec<f64>, Vec<f64>, f64, [f64; 6], f64);

#[test]
fn sampled_loops_from_python_control_issues() {
    // P: python-control 0.10.2, control/tests/margin_test.py,
    // test_stability_margins_discrete (gh-465, gh-523 a and b), with the
    // rtol that file uses; [gm, pm, sm, wcg, wcp, wsm].
    let pi2 = 4.0 * std::f64::consts::PI * std::f64::consts::PI;
    let cases: [Case; 3] = [
        (
            "gh-465",
            vec![2.0],
            vec![1.0, 3.0, 2.0, 0.0],
            1e-2,
            [2.955761, 32.398492, 0.429535, 1.403725, 0.749367, 0.923898],
            1e-5,
        ),
        (
            "gh-523a",
            vec![1.1 * pi2],
            vec![1.0, 2.0 * 0.2 * 2.0 * std::f64::consts::PI, pi2],
            0.05,
            [2.3842, 18.161, 0.26953, 11.712, 8.7478, 9.1504],
            1e-4,
        ),
        (
            "gh-523b",
            vec![5e4],
            vec![1.0, 101.0, 10101.0, 10100.0, 10000.0],
            1e-3,
            [18.8766, 26.3564, 0.406841, 9.76358, 2.32933, 2.55986],
            1e-5,
        ),
    ];
    for (name, num, den, dt, r, rtol) in cases {
        let l = tf(&num, &den).c2d_zoh(dt);
        let m = margins(&l);
        show(name, &m);
        let got = [
            m.gm_ratio,
            m.pm_deg,
            m.sm,
            m.wcg_rad_s,
            m.wcp_rad_s,
            m.wsm_rad_s,
        ];
        for (k, (g, w)) in got.iter().zip(r).enumerate() {
            // The published figures carry 5-6 significant digits; allow
            // their last-digit rounding on top of the file's rtol.
            let tol = rtol * w.abs() + 0.5 * 10f64.powi(w.abs().log10().floor() as i32 - 5);
            assert!(
                (g - w).abs() <= tol,
                "{name} [{k}]: got {g}, want {w} ± {tol}"
            );
        }
    }
}

#[test]
fn discrete_phase_crossover_of_a_given_z_polynomial() {
    // P: python-control 0.10.2, control/tests/margin_test.py,
    // test_phase_crossover_frequencies: (3, 11, 3)e-4 / (z³ - 2.7145 z² +
    // 2.4562 z - 0.7408), dt 0.1: real-axis crossings at [1.6235, 0] with
    // gains [-0.28598, 1.88889], atol 1.5e-3.
    let l =
        DiscreteTf::from_descending(&[3e-4, 11e-4, 3e-4], &[1.0, -2.7145, 2.4562, -0.7408], 0.1);
    let c = crossings(&l);
    let neg: Vec<_> = c.phase.iter().filter(|p| !p.at_nyquist).collect();
    assert_eq!(neg.len(), 1, "{:?}", c.phase);
    near("w180 (P)", neg[0].w_rad_s, 1.6235, 1.5e-3);
    near("1/GM (P)", 1.0 / neg[0].gm_ratio, 0.28598, 1.5e-3);
    // The crossing at ω = 0 has a positive gain: not a phase crossover.
    near("L(1) (P)", l.dc_gain(), 1.88889, 1.5e-3);
}

#[test]
fn discrete_integrator_with_one_tick_delay() {
    // L(z) = K/(z(z-1)). With z = e^{jθ}: z(z-1) = 2 sin(θ/2)·e^{j(3θ/2+π/2)},
    // so ∠L = -180° at θ = π/3, where |z(z-1)| = 1: GM = 1/K. |L| = 1 at
    // θ = 2·asin(K/2); PM = 90° - 1.5·θ (C).
    let dt = 1e-3;
    for k in [0.25, 0.5, 0.8] {
        let l = DiscreteTf::from_descending(&[k], &[1.0, -1.0, 0.0], dt);
        let m = margins(&l);
        let th = 2.0 * (k / 2.0).asin();
        rel("GM (C)", m.gm_ratio, 1.0 / k, 1e-10);
        rel(
            "wcg (C)",
            m.wcg_rad_s,
            std::f64::consts::PI / 3.0 / dt,
            1e-10,
        );
        rel("wcp (C)", m.wcp_rad_s, th / dt, 1e-10);
        near("PM (C)", m.pm_deg, 90.0 - 1.5 * th.to_degrees(), 1e-8);
        assert!(m.closed_loop_stable);
        // Closed loop K/(z² - z + K): both poles inside the unit circle for
        // K < 1 (|p|² = K).
        for p in l.feedback().poles() {
            rel("|p|^2 (C)", p.abs() * p.abs(), k, 1e-10);
        }
    }
}

#[test]
fn crossing_at_the_nyquist_frequency_is_reported() {
    // L(z) = 0.5/z: phase -ωT reaches -180° exactly at the Nyquist
    // frequency, where L = -0.5 (C). Reported there with at_nyquist set
    // (python-control 0.10.2 keeps only 0 <= ωT < π and gives GM = inf).
    let dt = 1e-3;
    let l = DiscreteTf::from_descending(&[0.5], &[1.0, 0.0], dt);
    let c = crossings(&l);
    assert_eq!(c.phase.len(), 1);
    assert!(c.phase[0].at_nyquist);
    rel("GM (C)", c.phase[0].gm_ratio, 2.0, 1e-12);
    rel(
        "w (C)",
        c.phase[0].w_rad_s,
        std::f64::consts::PI / dt,
        1e-12,
    );
    assert!(margins(&l).pm_deg.is_infinite());
}

#[test]
fn closed_loop_bandwidth() {
    // C: L = a/s gives T = a/(s+a); |T| = 10^(-3/20) at ω = a·√(10^0.3 - 1).
    for a in [0.5, 30.0, 2e4] {
        let l = tf(&[a], &[1.0, 0.0]);
        rel(
            "bw (C)",
            bandwidth_rad_s(&l, -3.0),
            a * (10f64.powf(0.3) - 1.0).sqrt(),
            1e-9,
        );
    }
    // C: L = K/(z-1) gives T = K/(z - p), p = 1 - K; |T(e^{jθ})| = 10^(-3/20)
    // where 1 - 2p·cos θ + p² = K²·10^0.3.
    let dt = 1e-4;
    for k in [0.1, 0.4] {
        let l = DiscreteTf::from_descending(&[k], &[1.0, -1.0], dt);
        let p = 1.0 - k;
        let th = ((1.0 + p * p - k * k * 10f64.powf(0.3)) / (2.0 * p)).acos();
        rel("bw (C)", bandwidth_rad_s(&l, -3.0), th / dt, 1e-9);
        rel(
            "bw Hz (C)",
            margins(&l).bandwidth_hz,
            th / dt / (2.0 * std::f64::consts::PI),
            1e-9,
        );
    }
    // A gain that never drops (static L = 1, T = 1/2): infinite bandwidth.
    assert!(bandwidth_rad_s(&tf(&[1.0], &[1.0]), -3.0).is_infinite());
}

#[test]
fn pass_line_constants() {
    // Pass line (common practice): PM >= 45°, GM >= 6 dB.
    assert_eq!(PASS_PM_DEG, 45.0);
    assert_eq!(PASS_GM_DB, 6.0);
    // 1/(s(s+1)^2) (PM 21.4°, GM 6.02 dB) fails on phase; 2/(s+1)^3
    // (PM 67.6°, GM 12.04 dB) passes.
    let fail = margins(&tf(&[1.0], &[1.0, 2.0, 1.0, 0.0]));
    assert!(!fail.meets(PASS_PM_DEG, PASS_GM_DB));
    let pass = margins(&tf(&[2.0], &[1.0, 3.0, 3.0, 1.0]));
    assert!(pass.meets(PASS_PM_DEG, PASS_GM_DB));
}
