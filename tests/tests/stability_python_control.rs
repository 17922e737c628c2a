//! Cross-check of the loop margins against python-control: diodestat
//! discrete loops (from `LoopParams` with realistic numbers) are written as
//! num/den/dt JSON, `tests/scripts/margins_control.py` runs
//! `control.margin` and `control.stability_margins` on
//! `control.tf(num, den, dt)` (python-control 0.10.2 when this was
//! written), and the results are compared.
//!
//! Tolerances: gain margin, stability margin, crossing frequencies and
//! bandwidth within 1e-7 relative, phase margin within 1e-6 degrees; the
//! frequency of the stability margin (the location of a flat minimum, which
//! python-control finds with scipy's `minimize` at its default tolerance)
//! within 1e-4 relative. Both sides solve the same equations far more
//! precisely than a design needs (0.5 % / 0.1°): python-control by
//! polynomial roots on the unit circle, diodestat by Brent refinement of a
//! sweep; the crossing conditions |L| = 1 and ∠L = -180° are also checked
//! on the diodestat side to 1e-10. python-control's discrete
//! stability-margin search runs over ωT in [0, 2π], so it may report the
//! mirror frequency 2π/T - ω of the same point; either is accepted.
//!
//! Skips with a printed line when `python3 -c "import control"` fails; CI
//! installs python-control with pip.

use std::path::PathBuf;

use diodestat_sim::stability::{
    crossings, margins, open_loop_with, write_bode_svg, BodeLoop, DiscreteTf, Discretisation,
    LoopParams, Margins, Poly, PASS_GM_DB, PASS_PM_DEG,
};
use diodestat_tests::{python_has, run_script};
use serde_json::{json, Value};

const RTOL: f64 = 1e-7;
const PM_TOL_DEG: f64 = 1e-6;
const WSM_RTOL: f64 = 1e-4;

fn nominal() -> LoopParams {
    LoopParams {
        tick_hz: 20_000.0,
        kp_ma_per_mw: 0.3,
        ki_per_tick: 0.15,
        dac_gain: 1.0,
        driver_bandwidth_hz: 200_000.0,
        slope_mw_per_ma: 0.9,
        monitor_gain: 1.0,
        monitor_filter_hz: 5_000.0,
        delay_ticks: 1,
    }
}

/// `(name, loop, python-control method)`.
fn cases() -> Vec<(&'static str, DiscreteTf, &'static str)> {
    let n = nominal();
    let exact = Discretisation::ExactZoh;
    vec![
        ("nominal", open_loop_with(&n, exact), "best"),
        (
            "high gain (slope 1.3, monitor 1.15)",
            open_loop_with(
                &LoopParams {
                    slope_mw_per_ma: 1.3,
                    monitor_gain: 1.15,
                    ..n
                },
                exact,
            ),
            "best",
        ),
        (
            "low gain aged (slope 0.55, monitor 0.85)",
            open_loop_with(
                &LoopParams {
                    slope_mw_per_ma: 0.55,
                    monitor_gain: 0.85,
                    ..n
                },
                exact,
            ),
            "best",
        ),
        (
            "aggressive (kp 0.9, ki 0.5, slope 1.3)",
            open_loop_with(
                &LoopParams {
                    kp_ma_per_mw: 0.9,
                    ki_per_tick: 0.5,
                    slope_mw_per_ma: 1.3,
                    ..n
                },
                exact,
            ),
            "best",
        ),
        (
            "no extra delay, sampled smoother",
            open_loop_with(
                &LoopParams {
                    delay_ticks: 0,
                    ..n
                },
                Discretisation::SampledSmoother,
            ),
            "best",
        ),
        (
            "cascade ZOH",
            open_loop_with(&n, Discretisation::CascadeZoh),
            "best",
        ),
    ]
}

/// The loop with coefficients below 1e-15 of the largest set to zero, fed to
/// both sides. The driver pole at z = e^{-2π·200 kHz·T} ≈ 5e-28 leaves
/// coefficients of that size (or rounding noise near 1e-18 from the matrix
/// exponential); to within rounding it is a pole at z = 0, a pure delay.
/// Left in, a 1e-28 coefficient makes python-control's default ('poly')
/// method lose the gain crossover of the cascade and smoother loops: the
/// roots of its reversed polynomial come out 1.5 % off the unit circle and
/// its filter drops them (PM = inf).
fn clean(l: &DiscreteTf) -> DiscreteTf {
    let f = |p: &Poly| {
        let big = p.coeffs().iter().fold(0.0f64, |m, c| m.max(c.abs()));
        Poly::new(
            p.coeffs()
                .iter()
                .map(|c| if c.abs() < 1e-15 * big { 0.0 } else { *c })
                .collect(),
        )
    };
    DiscreteTf::new(f(l.num()), f(l.den()), l.dt())
}

fn num(v: &Value) -> f64 {
    match v {
        Value::Number(n) => n.as_f64().unwrap_or(f64::NAN),
        Value::String(s) => match s.as_str() {
            "inf" => f64::INFINITY,
            "-inf" => f64::NEG_INFINITY,
            _ => f64::NAN,
        },
        _ => f64::NAN,
    }
}

fn nums(v: &Value) -> Vec<f64> {
    v.as_array()
        .map_or_else(Vec::new, |a| a.iter().map(num).collect())
}

#[track_caller]
fn same_rel(what: &str, ours: f64, theirs: f64) -> f64 {
    same_within(what, ours, theirs, RTOL)
}

#[track_caller]
fn same_within(what: &str, ours: f64, theirs: f64, rtol: f64) -> f64 {
    if ours.is_infinite() || theirs.is_infinite() || ours.is_nan() || theirs.is_nan() {
        assert!(
            (ours.is_infinite() && theirs.is_infinite() && ours.signum() == theirs.signum())
                || (ours.is_nan() && theirs.is_nan()),
            "{what}: diodestat {ours}, python-control {theirs}"
        );
        return 0.0;
    }
    let d = (ours - theirs).abs() / theirs.abs().max(f64::MIN_POSITIVE);
    assert!(
        d <= rtol,
        "{what}: diodestat {ours}, python-control {theirs} (rel {d:e} > {rtol:e})"
    );
    d
}

#[track_caller]
fn same_deg(what: &str, ours: f64, theirs: f64) -> f64 {
    if !(ours.is_finite() && theirs.is_finite()) {
        assert!(
            ours.is_infinite() && theirs.is_infinite(),
            "{what}: diodestat {ours}, python-control {theirs}"
        );
        return 0.0;
    }
    let d = (ours - theirs).abs();
    assert!(
        d <= PM_TOL_DEG,
        "{what}: diodestat {ours}, python-control {theirs} (|d| {d:e} deg)"
    );
    d
}

#[test]
fn margins_agree_with_python_control() {
    if !python_has("control, scipy") {
        println!(
            "SKIP stability_python_control: `python3 -c \"import control, scipy\"` failed \
             (pip install control scipy); comparison not run"
        );
        return;
    }
    let loops: Vec<_> = cases()
        .into_iter()
        .map(|(n, l, m)| (n, clean(&l), m))
        .collect();
    let spec = json!({
        "cases": loops.iter().map(|(name, l, method)| json!({
            "name": name,
            "num": l.num().descending(),
            "den": l.den().descending(),
            "dt": l.dt(),
            "method": method,
        })).collect::<Vec<_>>()
    });
    let res: Value = serde_json::from_str(&run_script(
        "margins_control.py",
        &serde_json::to_string_pretty(&spec).unwrap(),
    ))
    .unwrap();
    println!("python-control {}", res["python_control"]);
    let py = res["cases"].as_array().expect("cases");
    assert_eq!(py.len(), loops.len());

    let mut worst = [0.0f64; 4];
    for ((name, l, method), p) in loops.iter().zip(py) {
        assert_eq!(p["name"].as_str(), Some(*name));
        assert_eq!(p["method"].as_str(), Some(*method));
        let m: Margins = margins(l);
        let c = crossings(l);
        // python-control drops a phase crossover exactly at the Nyquist
        // frequency (see margins.rs); compare the selection among the others
        // and check a Nyquist crossing against its closed form, 1/|L(-1)|.
        let interior_gm = c
            .phase
            .iter()
            .filter(|x| !x.at_nyquist && x.gm_ratio.is_finite())
            .min_by(|a, b| a.gm_ratio.ln().abs().total_cmp(&b.gm_ratio.ln().abs()))
            .map_or((f64::INFINITY, f64::NAN), |x| (x.gm_ratio, x.w_rad_s));

        let [gm, pm, wcg, wcp] = <[f64; 4]>::try_from(nums(&p["margin"])).expect("4 values");
        let sm6 = nums(&p["stability_margins"]);
        println!(
            "{name}:\n  diodestat      GM {:.6} ({:.4} dB) at {:.4} rad/s, PM {:.5} deg at {:.4} rad/s, \
             SM {:.6} at {:.4}, BW {:.3} Hz\n  python-control GM {gm:.6} at {wcg:.4} rad/s, \
             PM {pm:.5} deg at {wcp:.4} rad/s, SM {:.6} at {:.4}, BW {:.3} Hz ({method}); warnings {}",
            m.gm_ratio,
            m.gm_db,
            m.wcg_rad_s,
            m.pm_deg,
            m.wcp_rad_s,
            m.sm,
            m.wsm_rad_s,
            m.bandwidth_hz,
            sm6[2],
            sm6[5],
            num(&p["bandwidth_rad_s"]) / (2.0 * std::f64::consts::PI),
            p["warnings"]
        );
        for x in c.phase.iter().filter(|x| x.at_nyquist) {
            let v = l.freq_response(l.nyquist_rad_s());
            assert!(v.re < 0.0);
            assert!(
                (x.gm_ratio * v.abs() - 1.0).abs() < 1e-12,
                "{name}: Nyquist GM"
            );
            println!(
                "  diodestat also reports GM {:.6} at the Nyquist frequency",
                x.gm_ratio
            );
        }
        worst[0] = worst[0].max(same_rel(&format!("{name} GM"), interior_gm.0, gm));
        worst[2] = worst[2].max(same_deg(&format!("{name} PM"), m.pm_deg, pm));
        worst[1] = worst[1].max(same_rel(&format!("{name} wcg"), interior_gm.1, wcg));
        worst[1] = worst[1].max(same_rel(&format!("{name} wcp"), m.wcp_rad_s, wcp));
        if sm6[2].is_infinite() && m.wsm_rad_s == l.nyquist_rad_s() {
            // The 'frd' method looks for interior minima only; here |1 + L|
            // is smallest at the Nyquist frequency itself.
            println!("  SM at the Nyquist frequency: not compared ({method} method)");
        } else {
            worst[0] = worst[0].max(same_rel(&format!("{name} SM"), m.sm, sm6[2]));
            let wsm_py = if sm6[5] > l.nyquist_rad_s() {
                2.0 * l.nyquist_rad_s() - sm6[5]
            } else {
                sm6[5]
            };
            worst[3] = worst[3].max(same_within(
                &format!("{name} wsm"),
                m.wsm_rad_s,
                wsm_py,
                WSM_RTOL,
            ));
        }
        // The crossing conditions hold on our side to 1e-10.
        let at_wcp = l.freq_response(m.wcp_rad_s);
        assert!(
            (at_wcp.abs() - 1.0).abs() < 1e-10,
            "{name}: |L(wcp)| = {}",
            at_wcp.abs()
        );
        if m.wcg_rad_s.is_finite() {
            let at_wcg = l.freq_response(m.wcg_rad_s);
            assert!(
                (-at_wcg).arg().abs() < 1e-10,
                "{name}: arg L(wcg) = {}",
                at_wcg.arg()
            );
        }
        worst[1] = worst[1].max(same_rel(
            &format!("{name} bandwidth"),
            m.bandwidth_hz * 2.0 * std::f64::consts::PI,
            num(&p["bandwidth_rad_s"]),
        ));
        // All crossings below the Nyquist frequency, in order.
        let ours_180: Vec<_> = c.phase.iter().filter(|x| !x.at_nyquist).collect();
        // python-control also lists a root at z ≈ 1, the integrator pole,
        // where rounding gives a huge |L| of either sign (GM ~ 1e-14 at
        // ω ~ 0); it is not a crossing and is dropped before comparing.
        let (w180, gm_all): (Vec<f64>, Vec<f64>) = nums(&p["all"]["w180"])
            .into_iter()
            .zip(nums(&p["all"]["gm"]))
            .filter(|(_, g)| *g > 1e-9)
            .unzip();
        assert_eq!(ours_180.len(), w180.len(), "{name}: phase crossovers");
        for ((o, w), g) in ours_180.iter().zip(&w180).zip(&gm_all) {
            same_rel(&format!("{name} w180 list"), o.w_rad_s, *w);
            same_rel(&format!("{name} GM list"), o.gm_ratio, *g);
        }
        let wc = nums(&p["all"]["wc"]);
        let pm_all = nums(&p["all"]["pm"]);
        assert_eq!(c.gain.len(), wc.len(), "{name}: gain crossovers");
        for ((o, w), g) in c.gain.iter().zip(&wc).zip(&pm_all) {
            same_rel(&format!("{name} wc list"), o.w_rad_s, *w);
            same_deg(&format!("{name} PM list"), o.pm_deg, *g);
        }
        // The realistic loops pass the common-practice line.
        if !name.starts_with("aggressive") {
            assert!(
                m.meets(PASS_PM_DEG, PASS_GM_DB),
                "{name}: PM {} GM {} dB",
                m.pm_deg,
                m.gm_db
            );
        }
    }
    println!(
        "worst relative difference: margins {:.2e}, crossing frequencies and bandwidth {:.2e}, \
         SM frequency {:.2e}; worst PM difference {:.2e} deg",
        worst[0], worst[1], worst[3], worst[2]
    );

    let svg = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("stability_python_control.svg");
    let bl: Vec<BodeLoop<'_>> = loops
        .iter()
        .map(|(label, tf, _)| BodeLoop { label, tf })
        .collect();
    write_bode_svg(&svg, "diodestat loops", &bl).unwrap();
    println!("Bode plot: {}", svg.display());
}
