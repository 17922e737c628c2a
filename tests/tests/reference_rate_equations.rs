//! Rate-equation checks on the demo diodes: the steady state of the
//! integrated rate equations and the quasi-static model reproduce the
//! analytic threshold current and slope efficiency eta_d (h nu / q).
//!
//! Source for the model and the analytic threshold/slope: Coldren,
//! Corzine, Mashanovitch, *Diode Lasers and Photonic Integrated Circuits*,
//! 2nd ed., 2012, ch. 2 (above-threshold P = eta_d (h nu / q)(I - I_th),
//! eta_d = eta_i alpha_m / (alpha_i + alpha_m)).

use diodestat_sim::plant::{c_to_k, DemoModule, Diode};

fn check(module: &DemoModule) {
    let mut d = Diode::new(module.diode.clone()).unwrap();
    let der = d.derived();
    let t = c_to_k(module.diode.t_ref_c);
    let ith = der.i_th_a;
    // Slope from two quasi-static points well above threshold, threshold by extrapolation.
    let (i1, i2) = (2.0 * ith, 3.0 * ith);
    let p1 = d.quasi_static(i1, t).p_front_w;
    let p2 = d.quasi_static(i2, t).p_front_w;
    let slope = (p2 - p1) / (i2 - i1);
    let ith_fit = i1 - p1 / slope;
    assert!(
        (slope / der.slope_w_per_a - 1.0).abs() < 0.01,
        "slope {slope} vs {}",
        der.slope_w_per_a
    );
    assert!(
        (ith_fit / ith - 1.0).abs() < 0.01,
        "threshold {ith_fit} vs {ith}"
    );
    // The dynamic integrator settles to the quasi-static power (within 1 %).
    let mut p_dyn = 0.0;
    for _ in 0..400 {
        p_dyn = d.step_dynamic(i2, t, 50e-9).p_front_w;
    }
    assert!(
        (p_dyn / p2 - 1.0).abs() < 0.01,
        "dynamic {p_dyn} vs quasi-static {p2}"
    );
}

#[test]
fn visible_demo_threshold_and_slope_match_the_analytic_values() {
    check(&DemoModule::visible());
}

#[test]
fn pump_demo_threshold_and_slope_match_the_analytic_values() {
    check(&DemoModule::pump());
}
