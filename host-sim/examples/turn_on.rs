//! Turn-on transient of the rate equations: times the dynamic integrator
//! (and the quasi-static solver) and optionally writes the problem as JSON
//! for the reference solver script `tests/scripts/dynamic_speed.py`.
//!
//! Usage: `turn_on [--set textbook|visible|pump] [--mult 3] [--t-end 1e-8]
//! [--rtol 1e-6] [--atol 1e-9] [--reps 200] [--json PATH]`
//!
//! Prints one JSON line with the timing and the final state.

use std::time::Instant;

use diodestat_sim::plant::{c_to_k, Diode, DiodeParams};

fn arg<T: std::str::FromStr>(args: &[String], name: &str, default: T) -> T {
    args.iter()
        .position(|a| a == name)
        .and_then(|i| args.get(i + 1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let set: String = arg(&args, "--set", "textbook".to_string());
    let mult: f64 = arg(&args, "--mult", 3.0);
    let t_end: f64 = arg(&args, "--t-end", 10e-9);
    let rtol: f64 = arg(&args, "--rtol", 1e-6);
    let atol: f64 = arg(&args, "--atol", 1e-9);
    let reps: usize = arg(&args, "--reps", 200);
    let json: String = arg(&args, "--json", String::new());

    let params = match set.as_str() {
        "visible" => DiodeParams::demo_visible(),
        "pump" => DiodeParams::demo_pump(),
        _ => DiodeParams::textbook_in_plane(),
    };
    let t_k = c_to_k(params.t_ref_c);
    let proto = Diode::new(params).expect("valid parameters");
    let i_a = mult * proto.threshold_current_a(t_k);

    if !json.is_empty() {
        let problem = serde_json::json!({
            "coefficients": proto.rate_coefficients(t_k),
            "i_a": i_a,
            "t_end_s": t_end,
            "rtol": rtol,
            "atol": atol,
            "n0_m3": 0.0,
            "s0_m3": 0.0,
        });
        std::fs::write(&json, serde_json::to_string_pretty(&problem).unwrap()).expect("write JSON");
    }

    // Whole transient in one call, repeated.
    let mut last = None;
    let mut stats = Default::default();
    let start = Instant::now();
    for _ in 0..reps {
        let mut d = proto.clone();
        d.set_tolerance(rtol, atol);
        let out = d.step_dynamic(i_a, t_k, t_end);
        stats = d.stats();
        last = Some((out, d.carrier_density_m3()));
    }
    let per_run = start.elapsed().as_secs_f64() / reps as f64;
    let (out, n_final) = last.expect("at least one repetition");

    // Peak of the first relaxation spike, sampled every 1 ps.
    let mut d = proto.clone();
    d.set_tolerance(rtol, atol);
    let (mut p_peak, mut t_peak) = (0.0f64, 0.0f64);
    let steps = (t_end / 1e-12).round() as usize;
    for k in 1..=steps {
        let p = d.step_dynamic(i_a, t_k, 1e-12).p_front_w;
        if p > p_peak {
            p_peak = p;
            t_peak = k as f64 * 1e-12;
        }
    }

    // Quasi-static solver cost.
    let n_qs = 2_000_000usize;
    let start = Instant::now();
    let mut acc = 0.0;
    for k in 0..n_qs {
        let i = i_a * (0.5 + 1.5 * (k % 1000) as f64 / 1000.0);
        acc += std::hint::black_box(&proto)
            .quasi_static(std::hint::black_box(i), t_k)
            .p_front_w;
    }
    let qs_ns = start.elapsed().as_secs_f64() / n_qs as f64 * 1e9;
    std::hint::black_box(acc);

    println!(
        "{}",
        serde_json::json!({
            "set": set,
            "i_a": i_a,
            "t_end_s": t_end,
            "rtol": rtol,
            "atol": atol,
            "reps": reps,
            "rust_s_per_run": per_run,
            "steps": stats.steps,
            "rejected": stats.rejected,
            "f_evals": stats.f_evals,
            "jac_evals": stats.jac_evals,
            "p_final_w": out.p_front_w,
            "n_final_m3": n_final,
            "s_final_m3": out.s_m3,
            "p_peak_w": p_peak,
            "t_peak_s": t_peak,
            "quasi_static_ns_per_call": qs_ns,
        })
    );
}
