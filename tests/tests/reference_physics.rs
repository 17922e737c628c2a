//! Reference checks of the physics plant models against published values
//! and against their own analytic figures.
//!
//! Status marks follow `references.md`: P published and seen, P2 published
//! but seen in a secondary copy, C computed from the stated formula with the
//! exact constants, `from memory` recalled without a source, `common
//! practice` a rule of thumb.

use diodestat_sim::plant::{
    c_to_k, from_toml, ideal_responsivity_a_per_w, ideal_slope_w_per_a, photon_energy_j,
    thermal_voltage_v, varshni_ev, DemoModule, Diode, DiodeOutput, DiodeParams, DriverParams,
    Monitor, MonitorParams, Ntc, Rtd, SensorChain, SensorChainParams, TempSensor, Thermal,
    ThermalParams, C, H, K_B, Q, VARSHNI_ALAS_GAMMA, VARSHNI_GAAS, VARSHNI_INAS, VARSHNI_INP,
};

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// The in-plane example set of the rate-equation chapter, written out in full.
/// Source (P2): L. A. Coldren, S. W. Corzine, M. L. Mashanovitch, *Diode
/// Lasers and Photonic Integrated Circuits*, 2nd ed., Wiley 2012, ch. 2 and 5,
/// example in-plane laser, as reproduced in secondary public code (not
/// checked against the book's table). Wavelength 980 nm is an assumption
/// (`from memory`); T0, T1, electrical, damage and aging rows are demo values.
const TEXTBOOK_TOML: &str = r#"
width_um = 2.0
length_um = 250.0
thickness_nm = 8.0
confinement = 0.032
group_index = 4.2
alpha_i_per_cm = 5.0
r_front = 0.32
r_back = 0.32
eta_i = 0.8
a_per_s = 0.0
b_cm3_per_s = 0.8e-10
c_cm6_per_s = 3.5e-30
eps_cm3 = 1.5e-17
beta_sp = 8.7e-5
wavelength_nm = 980.0
wavelength_drift_nm_per_k = 0.3
t_ref_c = 25.0
t0_k = 120.0
t1_k = 400.0
ideality = 1.5
i_s_a = 1.0e-18
i_s_activation_ev = 1.6
r_s_ohm = 10.0
damage_power_w = 0.05
damage_filter_ns = 100.0
threshold_rise_per_khour = 0.01
slope_loss_per_khour = 0.005

[gain]
model = "log"
g0_per_cm = 1800.0
n_tr_per_cm3 = 1.8e18
n_s_per_cm3 = -0.4e18
"#;

fn textbook() -> DiodeParams {
    from_toml(TEXTBOOK_TOML).expect("textbook set parses")
}

/// Integrates the rate equations from zero carriers and photons at constant
/// current until the output stops changing (relative 1e-10 over 1 ns, after
/// at least 20 ns).
fn dynamic_steady_state(d: &mut Diode, i_a: f64, t_k: f64) -> DiodeOutput {
    let mut prev = d.step_dynamic(i_a, t_k, 20e-9);
    for _ in 0..5000 {
        let out = d.step_dynamic(i_a, t_k, 1e-9);
        let scale = out.s_m3.abs().max(1e-30);
        if (out.s_m3 - prev.s_m3).abs() <= 1e-10 * scale
            && (out.n_m3 - prev.n_m3).abs() <= 1e-10 * out.n_m3
        {
            return out;
        }
        prev = out;
    }
    panic!("no steady state within 5 us");
}

/// Threshold (intercept) and slope (both facets) of a straight line through
/// the L-I points at `i1` and `i2`.
fn li_fit(p1: f64, p2: f64, i1: f64, i2: f64) -> (f64, f64) {
    let slope = (p2 - p1) / (i2 - i1);
    (i1 - p1 / slope, slope)
}

#[test]
fn codata_2018_constants_are_exact() {
    // Source (P): CODATA 2018, Tiesinga et al., Rev. Mod. Phys. 93, 025010
    // (2021); SI Brochure, 9th ed. (2019): h, c, e, k_B exact by definition.
    assert_eq!(H, 6.626_070_15e-34);
    assert_eq!(C, 299_792_458.0);
    assert_eq!(Q, 1.602_176_634e-19);
    assert_eq!(K_B, 1.380_649e-23);
    // (C) hc/e = 1.2398419843 eV um; kT/e at 300 K = 25.852 mV.
    assert!(rel(H * C / Q * 1e6, 1.239_841_984_3) < 1e-10);
    assert!((thermal_voltage_v(300.0) * 1e3 - 25.852).abs() < 5e-4);
}

#[test]
fn photon_energy_slope_and_responsivity_table() {
    // (C) references.md table, h nu / q (W/A) and q lambda / (h c) (A/W),
    // computed from the exact CODATA 2018 constants, quoted to 7 digits.
    for (nm, slope, resp) in [
        (650.0, 1.907_449, 0.524_260),
        (808.0, 1.534_458, 0.651_696),
        (980.0, 1.265_145, 0.790_423),
        (1310.0, 0.946_444, 1.056_586),
        (1550.0, 0.799_898, 1.250_159),
    ] {
        let l = nm * 1e-9;
        assert!(
            (ideal_slope_w_per_a(l) - slope).abs() <= 6e-7,
            "{nm} nm slope"
        );
        assert!(
            (ideal_responsivity_a_per_w(l) - resp).abs() <= 6e-7,
            "{nm} nm resp"
        );
        // The two are reciprocal, and h nu / q is the photon energy in eV.
        assert!((ideal_slope_w_per_a(l) * ideal_responsivity_a_per_w(l) - 1.0).abs() < 1e-15);
        assert!(rel(photon_energy_j(l) / Q, ideal_slope_w_per_a(l)) < 1e-15);
    }
}

#[test]
fn textbook_set_reads_from_toml_and_matches_library_copy() {
    // The TOML above and `DiodeParams::textbook_in_plane()` are the same set.
    assert_eq!(textbook(), DiodeParams::textbook_in_plane());
    // Unknown fields are rejected.
    let bad = TEXTBOOK_TOML.replace("eta_i = 0.8", "eta_i = 0.8\neta_j = 0.1");
    assert!(from_toml::<DiodeParams>(&bad).is_err());
}

#[test]
fn textbook_analytic_figures() {
    // (C, from the P2 set above) references.md "Derived from it": alpha_m
    // 45.58 /cm, g_th 1580.5 /cm, N_th 3.769e18 /cm^3, tau_p 2.770 ps,
    // alpha_m/(alpha_i + alpha_m) 0.9011, eta_d 0.7209, I_th 1.060 mA,
    // dg/dN 5.343e-16 cm^2, slope 0.912 W/A both facets and 0.456 W/A per
    // facet at 980 nm (wavelength from memory), f_R 2.02 GHz at 2 I_th and
    // 2.86 GHz at 3 I_th from omega_R^2 = v_g a S / tau_p. Tolerances are the
    // rounding of the quoted digits.
    let d = textbook().derived();
    assert!(rel(d.volume_m3, 4e-18) < 1e-12, "V = 4e-12 cm^3");
    assert!((d.alpha_m_per_m / 100.0 - 45.58).abs() < 0.005);
    assert!((d.g_th_per_m / 100.0 - 1580.5).abs() < 0.05);
    assert!(rel(d.n_th_m3 * 1e-6, 3.769e18) < 2e-4);
    assert!((d.tau_p_s * 1e12 - 2.770).abs() < 5e-4);
    assert!((d.eta_d / 0.8 - 0.9011).abs() < 5e-5);
    assert!((d.eta_d - 0.7209).abs() < 5e-5);
    assert!((d.i_th_a * 1e3 - 1.060).abs() < 5e-4);
    assert!(rel(d.dg_dn_m2 * 1e4, 5.343e-16) < 2e-4);
    assert!((d.slope_total_w_per_a - 0.912).abs() < 5e-4);
    assert!((d.slope_w_per_a - 0.456).abs() < 5e-4);
    assert!((d.f_r_hz(2.0 * d.i_th_a) * 1e-9 - 2.02).abs() < 0.005);
    assert!((d.f_r_hz(3.0 * d.i_th_a) * 1e-9 - 2.86).abs() < 0.005);
    // Slope equals eta_d h nu / q exactly.
    assert!(rel(d.slope_total_w_per_a, d.eta_d * ideal_slope_w_per_a(980e-9)) < 1e-14);
}

#[test]
fn quasi_static_li_reproduces_threshold_and_slope() {
    // Analytic threshold I_th = q V R(N_th) / eta_i and slope
    // eta_d h nu / q (both facets) against the L-I line through 2 I_th and
    // 4 I_th of the exact steady state, which also carries gain compression
    // and spontaneous emission. Source of both formulas and of the set:
    // Coldren, Corzine, Mashanovitch, Diode Lasers and Photonic Integrated
    // Circuits, 2nd ed., Wiley 2012, ch. 2 (threshold current and
    // differential efficiency above threshold) (P2); the quoted 1.060 mA and
    // 0.912 W/A are computed from that set (C, references.md). Tolerance 1 %
    // (brief); achieved < 0.3 %.
    let p = textbook();
    let d = Diode::new(p.clone()).unwrap();
    let fig = p.derived();
    let t = c_to_k(p.t_ref_c);
    let (i1, i2) = (2.0 * fig.i_th_a, 4.0 * fig.i_th_a);
    let o1 = d.quasi_static(i1, t);
    let o2 = d.quasi_static(i2, t);
    let (ith, slope) = li_fit(
        o1.p_front_w + o1.p_back_w,
        o2.p_front_w + o2.p_back_w,
        i1,
        i2,
    );
    eprintln!("quasi-static: I_th {ith:.6e} A, slope {slope:.6} W/A");
    assert!(
        rel(ith, fig.i_th_a) < 0.003,
        "I_th fit {ith} vs {}",
        fig.i_th_a
    );
    assert!(rel(slope, fig.slope_total_w_per_a) < 0.005, "slope {slope}");
    // Against the quoted (rounded) values 1.060 mA and 0.912 W/A: 1 %.
    assert!(rel(ith, 1.060e-3) < 0.01);
    assert!(rel(slope, 0.912) < 0.01);
    // Each facet carries half (R1 = R2).
    assert!(rel(o2.p_front_w, o2.p_back_w) < 1e-12);
}

#[test]
fn dynamic_steady_state_reproduces_threshold_and_slope() {
    // Same check with the rate equations integrated from N = S = 0 to
    // steady state (RODAS4, rtol 1e-6). Source as above: Coldren, Corzine,
    // Mashanovitch, 2nd ed., Wiley 2012, ch. 2 (formulas) and ch. 5 (the
    // rate equations integrated here) (P2); 1.060 mA and 0.912 W/A computed
    // from the set (C). Tolerance 1 % (brief).
    let p = textbook();
    let fig = p.derived();
    let t = c_to_k(p.t_ref_c);
    let (i1, i2) = (2.0 * fig.i_th_a, 4.0 * fig.i_th_a);
    let o1 = dynamic_steady_state(&mut Diode::new(p.clone()).unwrap(), i1, t);
    let o2 = dynamic_steady_state(&mut Diode::new(p.clone()).unwrap(), i2, t);
    let (ith, slope) = li_fit(
        o1.p_front_w + o1.p_back_w,
        o2.p_front_w + o2.p_back_w,
        i1,
        i2,
    );
    eprintln!("dynamic: I_th {ith:.6e} A, slope {slope:.6} W/A");
    assert!(rel(ith, fig.i_th_a) < 0.003, "I_th fit {ith}");
    assert!(rel(slope, fig.slope_total_w_per_a) < 0.005, "slope {slope}");
    assert!(rel(ith, 1.060e-3) < 0.01);
    assert!(rel(slope, 0.912) < 0.01);
}

#[test]
fn dynamic_and_quasi_static_agree_in_steady_state() {
    // The two modes are one set of equations: the integrated steady state
    // must equal the solved one, below, near and above threshold and at
    // several junction temperatures, for all three parameter sets.
    // Tolerance: 1e-6 relative on S and N (achieved below 1e-9).
    let mut worst = 0.0f64;
    for p in [
        textbook(),
        DiodeParams::demo_visible(),
        DiodeParams::demo_pump(),
    ] {
        let t_ref = c_to_k(p.t_ref_c);
        for dt in [-20.0, 0.0, 35.0] {
            let t = t_ref + dt;
            let probe = Diode::new(p.clone()).unwrap();
            let ith = probe.threshold_current_a(t);
            for x in [0.5, 0.95, 1.05, 2.0, 5.0] {
                let i = x * ith;
                let qs = probe.quasi_static(i, t);
                let dy = dynamic_steady_state(&mut Diode::new(p.clone()).unwrap(), i, t);
                assert!(
                    rel(dy.s_m3, qs.s_m3) < 1e-6,
                    "S at {x} I_th, dT {dt}: {} vs {}",
                    dy.s_m3,
                    qs.s_m3
                );
                assert!(rel(dy.n_m3, qs.n_m3) < 1e-6, "N at {x} I_th");
                assert!(rel(dy.p_front_w, qs.p_front_w) < 1e-6);
                worst = worst.max(rel(dy.s_m3, qs.s_m3)).max(rel(dy.n_m3, qs.n_m3));
            }
        }
    }
    eprintln!("dynamic vs quasi-static: worst relative difference {worst:.2e}");
}

/// Ringing frequency after a 1 % current step at `x` I_th: mean spacing of
/// the zero crossings of P - P_final (half periods of the damped oscillation).
fn ringing_frequency_hz(p: &DiodeParams, x: f64) -> f64 {
    let t = c_to_k(p.t_ref_c);
    let mut d = Diode::new(p.clone()).unwrap();
    d.set_tolerance(1e-9, 1e-12);
    let i0 = x * p.derived().i_th_a;
    let i1 = 1.01 * i0;
    let start = d.step_quasi_static(i0, t);
    d.set_state(start.n_m3, start.s_m3);
    let p_final = d.quasi_static(i1, t).p_front_w;
    let dt = 0.5e-12;
    let mut crossings = Vec::new();
    let mut prev = start.p_front_w - p_final;
    for k in 1..=8000 {
        let e = d.step_dynamic(i1, t, dt).p_front_w - p_final;
        if prev != 0.0 && e.signum() != prev.signum() {
            // Linear interpolation of the crossing time.
            let tc = (k as f64 - 1.0 + prev / (prev - e)) * dt;
            crossings.push(tc);
        }
        prev = e;
    }
    assert!(
        crossings.len() >= 8,
        "too few crossings: {}",
        crossings.len()
    );
    let c = &crossings[1..8];
    let half_period = (c[c.len() - 1] - c[0]) / (c.len() - 1) as f64;
    1.0 / (2.0 * half_period)
}

#[test]
fn relaxation_oscillation_frequency() {
    // omega_R^2 = v_g a S / tau_p (Coldren et al., 2nd ed., ch. 5, P2) against
    // the ringing of the integrated rate equations after a small step.
    // The measured frequency also carries damping, gain compression and the
    // spontaneous terms the simple formula leaves out; tolerance 5 %
    // (achieved 0.6 % at 2 I_th, 0.1 % at 3 I_th).
    let p = textbook();
    let fig = p.derived();
    for (x, quoted_ghz) in [(2.0, 2.02), (3.0, 2.86)] {
        let f = ringing_frequency_hz(&p, x);
        let f_formula = fig.f_r_hz(x * fig.i_th_a);
        eprintln!("f_R at {x} I_th: measured {f:.6e}, formula {f_formula:.6e}");
        assert!(rel(f, f_formula) < 0.05, "{x} I_th: {f} vs {f_formula}");
        assert!(
            rel(f, quoted_ghz * 1e9) < 0.05,
            "{x} I_th vs quoted {quoted_ghz} GHz"
        );
    }
}

#[test]
fn threshold_and_slope_follow_t0_and_t1() {
    // I_th(T) = I_th(T_ref) exp((T - T_ref)/T0) and eta_d(T) = eta_d(T_ref)
    // exp(-(T - T_ref)/T1) (characteristic-temperature model; Coldren et al.,
    // 2nd ed., ch. 2, M corroborated P2). Measured from quasi-static L-I lines
    // through 2 and 4 I_th(T), with eta_d = slope / (h nu(T)/q).
    // Tolerance 0.5 % on the ratios (achieved about 0.05 %).
    for p in [
        textbook(),
        DiodeParams::demo_visible(),
        DiodeParams::demo_pump(),
    ] {
        let d = Diode::new(p.clone()).unwrap();
        let t_ref = c_to_k(p.t_ref_c);
        let measure = |t: f64| {
            let ith = d.threshold_current_a(t);
            let (i1, i2) = (2.0 * ith, 4.0 * ith);
            let o1 = d.quasi_static(i1, t);
            let o2 = d.quasi_static(i2, t);
            let (ith_fit, slope) = li_fit(
                o1.p_front_w + o1.p_back_w,
                o2.p_front_w + o2.p_back_w,
                i1,
                i2,
            );
            (ith_fit, slope / ideal_slope_w_per_a(o2.wavelength_m))
        };
        let (ith0, eta0) = measure(t_ref);
        for dt in [-20.0, 20.0, 40.0, 60.0] {
            let (ith, eta) = measure(t_ref + dt);
            let want_i = (dt / p.t0_k).exp();
            let want_e = (-dt / p.t1_k).exp();
            assert!(rel(ith / ith0, want_i) < 0.005, "I_th ratio at {dt} K");
            assert!(rel(eta / eta0, want_e) < 0.005, "eta_d ratio at {dt} K");
            // The analytic accessors follow the laws exactly.
            assert!(
                rel(
                    d.threshold_current_a(t_ref + dt) / d.threshold_current_a(t_ref),
                    want_i
                ) < 1e-12
            );
            assert!(rel(d.eta_d(t_ref + dt) / d.eta_d(t_ref), want_e) < 1e-12);
        }
        // The dynamic model follows the same map: steady state at 40 K above
        // T_ref, 3 I_th(T), equals the quasi-static value.
        let t = t_ref + 40.0;
        let i = 3.0 * d.threshold_current_a(t);
        let dy = dynamic_steady_state(&mut Diode::new(p.clone()).unwrap(), i, t);
        assert!(rel(dy.p_front_w, d.quasi_static(i, t).p_front_w) < 1e-6);
    }
}

#[test]
fn self_heating_rolls_the_li_curve_over() {
    // Thermal roll-over (common practice): with the junction temperature set
    // by the dissipation I V_f - P_opt through the thermal resistance, the
    // L-I curve reaches a maximum and falls. Visible demo diode on its demo
    // thermal path with the heatsink resistance raised fourfold.
    let m = DemoModule::visible();
    let d = Diode::new(m.diode.clone()).unwrap();
    let mut th = Thermal::new(m.thermal.clone(), c_to_k(25.0)).unwrap();
    th.heatsink_loss_factor = 4.0;
    let t_amb = c_to_k(25.0);
    let power_at = |i: f64| {
        // Fixed point T_j = T_amb + R_th (I V_f - P).
        let mut tj = t_amb;
        let mut out = d.quasi_static(i, tj);
        for _ in 0..200 {
            let p_diss = i * out.v_f_v - out.p_front_w - out.p_back_w;
            let t_new = th.steady_state_k(p_diss, t_amb)[0];
            if (t_new - tj).abs() < 1e-9 {
                break;
            }
            tj = 0.5 * (tj + t_new);
            out = d.quasi_static(i, tj);
        }
        out.p_front_w
    };
    let currents: Vec<f64> = (1..=60).map(|k| k as f64 * 5e-3).collect();
    let powers: Vec<f64> = currents.iter().map(|&i| power_at(i)).collect();
    let (k_max, p_max) = powers
        .iter()
        .enumerate()
        .fold((0, 0.0), |a, (k, &p)| if p > a.1 { (k, p) } else { a });
    assert!(
        k_max > 5 && k_max < currents.len() - 5,
        "maximum inside the range"
    );
    assert!(
        powers[currents.len() - 1] < 0.9 * p_max,
        "falls after the maximum"
    );
}

#[test]
fn forward_voltage_diode_equation() {
    // V_f = n k T / q ln(1 + I / I_s) + I R_s (physics.md) at T_ref. Away from
    // it, I_s(T) = I_s (T/T_ref)^(3/n) exp(E_a/(n k T_ref) - E_b(T)/(n k T)),
    // E_b(T) = E_a + Eg(T) - Eg(T_ref) with GaAs's Varshni gap: at T_ref,
    // dV/dT = (V_j - E_a/q)/T + (1/q) dEg/dT - 3k/q (Schubert, Light-Emitting
    // Diodes, 2nd ed., Cambridge University Press 2006, ch. 6, `from memory`).
    let p = DiodeParams::demo_pump();
    let t = c_to_k(p.t_ref_c);
    let d = Diode::new(p.clone()).unwrap();
    for i in [1e-9, 1e-3, 0.5, 5.0] {
        let want = p.ideality * thermal_voltage_v(t) * (i / p.i_s_a).ln_1p() + i * p.r_s_ohm;
        assert!(rel(d.forward_voltage(i, t), want) < 1e-12, "{i} A");
    }
    let i = 5.0;
    let vj = d.forward_voltage(i, t) - i * p.r_s_ohm;
    let dvdt = (d.forward_voltage(i, t + 0.01) - d.forward_voltage(i, t - 0.01)) / 0.02;
    let v = VARSHNI_GAAS;
    let deg_dt = -v.alpha_ev_per_k * t * (t + 2.0 * v.beta_k) / ((t + v.beta_k) * (t + v.beta_k));
    let k_over_q = thermal_voltage_v(t) / t;
    assert!(
        rel(
            dvdt,
            (vj - p.i_s_activation_ev) / t + deg_dt - 3.0 * k_over_q
        ) < 1e-5,
        "dV/dT {dvdt}"
    );
    // 30 K above T_ref, against the closed form of I_s(T).
    let t1 = t + 30.0;
    let eb = p.i_s_activation_ev + v.eg_ev(t1) - v.eg_ev(t);
    let i_s1 = p.i_s_a
        * (t1 / t).powf(3.0 / p.ideality)
        * (p.i_s_activation_ev / (p.ideality * k_over_q * t) - eb / (p.ideality * k_over_q * t1))
            .exp();
    let want = p.ideality * thermal_voltage_v(t1) * (i / i_s1).ln_1p() + i * p.r_s_ohm;
    assert!(rel(d.forward_voltage(i, t1), want) < 1e-12);
}

#[test]
fn wavelength_drift_and_varshni() {
    // Varshni Eg(T) = Eg(0) - alpha T^2/(T + beta); Vurgaftman, Meyer,
    // Ram-Mohan, J. Appl. Phys. 89, 5815 (2001) (P2): GaAs 1.4225 eV and InP
    // 1.3529 eV at 300 K; InAs 0.3538 eV, AlAs (Gamma) 3.003 eV (C).
    assert!((VARSHNI_GAAS.eg_ev(300.0) - 1.4225).abs() < 5e-5);
    assert!((VARSHNI_INP.eg_ev(300.0) - 1.3529).abs() < 5e-5);
    assert!((VARSHNI_INAS.eg_ev(300.0) - 0.3538).abs() < 5e-5);
    assert!((VARSHNI_ALAS_GAMMA.eg_ev(300.0) - 3.003).abs() < 5e-4);
    assert_eq!(varshni_ev(1.519, 0.5405e-3, 204.0, 0.0), 1.519);
    // Lasing-wavelength drift is the stated nm/K (Fabry-Perot 0.3-0.4 nm/K,
    // common practice).
    let p = DiodeParams::demo_pump();
    let d = Diode::new(p.clone()).unwrap();
    let t = c_to_k(p.t_ref_c);
    let drift = (d.wavelength_m(t + 10.0) - d.wavelength_m(t)) / 10.0 * 1e9;
    assert!((drift - p.wavelength_drift_nm_per_k).abs() < 1e-9);
    assert!((0.3..=0.4).contains(&drift));
}

#[test]
fn pt100_callendar_van_dusen_iec_60751() {
    // IEC 60751 Callendar-Van Dusen, A = 3.9083e-3, B = -5.775e-7,
    // C = -4.183e-12 (C below 0 degC only). Formula values (C): -100 degC
    // 60.2558 ohm, 0 degC 100.0000, 100 degC 138.5055, 200 degC 175.8560;
    // published tables round to 60.26, 100.00, 138.51, 175.86 (P2).
    let pt = Rtd::nominal(100.0);
    for (t_c, formula, table) in [
        (-100.0, 60.2558, 60.26),
        (0.0, 100.0, 100.00),
        (100.0, 138.5055, 138.51),
        (200.0, 175.8560, 175.86),
    ] {
        let r = pt.resistance_ohm(c_to_k(t_c));
        assert!((r - formula).abs() < 5e-5, "{t_c} degC: {r}");
        assert!((r - table).abs() <= 0.005 + 1e-9, "{t_c} degC table");
        assert!((pt.temperature_k(r) - c_to_k(t_c)).abs() < 1e-9, "inverse");
    }
    // Round trip across the standard range -200..850 degC.
    for k in 0..=105 {
        let t = c_to_k(-200.0 + 10.0 * k as f64);
        assert!((pt.temperature_k(pt.resistance_ohm(t)) - t).abs() < 1e-9);
    }
}

#[test]
fn ntc_beta_and_steinhart_hart_values() {
    // Beta equation R = R25 exp(B (1/T - 1/298.15 K)) (P2), R25 = 10 kohm,
    // B = 3380 K: 0 degC 28 224 ohm, 50 degC 4 160 ohm, 85 degC 1 497 ohm (C,
    // rounded to 1 ohm).
    let ntc = Ntc::beta(10_000.0, 3380.0);
    for (t_c, r) in [(0.0, 28_224.0), (50.0, 4_160.0), (85.0, 1_497.0)] {
        let got = ntc.resistance_ohm(c_to_k(t_c));
        assert!((got - r).abs() <= 0.5, "{t_c} degC: {got}");
        assert!((ntc.temperature_k(got) - c_to_k(t_c)).abs() < 1e-9);
    }
    // Steinhart-Hart 1/T = A + B ln R + C (ln R)^3 (J. S. Steinhart,
    // S. R. Hart, "Calibration curves for thermistors", Deep-Sea Research 15
    // (1968) 497-503; P2/M), A = 1.40e-3, B = 2.37e-4, C = 9.90e-8:
    // 3000 ohm -> 298.66 K, 10 kohm -> 273.21 K (C, to 0.01 K).
    let sh = Ntc::steinhart_hart(1.40e-3, 2.37e-4, 9.90e-8);
    for (r, t) in [(3000.0, 298.66), (10_000.0, 273.21)] {
        let got = sh.temperature_k(r);
        assert!((got - t).abs() <= 0.005, "{r} ohm: {got}");
        // Closed-form (cube-root) inverse.
        assert!(rel(sh.resistance_ohm(got), r) < 1e-12);
    }
    for k in 0..=30 {
        let t = c_to_k(-40.0 + 7.0 * k as f64);
        assert!((sh.temperature_k(sh.resistance_ohm(t)) - t).abs() < 1e-9);
        assert!((ntc.temperature_k(ntc.resistance_ohm(t)) - t).abs() < 1e-9);
    }
}

#[test]
fn thermal_ladder_steady_state() {
    // A resistor ladder in steady state: T_j = T_amb + P (R_jc + R_ch + R_ha)
    // (thermal resistances in series, the thermal circuit of Incropera,
    // DeWitt, Bergman, Lavine, Fundamentals of Heat and Mass Transfer, 6th
    // ed., Wiley 2007, sect. 3.1.2-3.1.3, `from memory`), reached by
    // integration at a realistic step, in one huge step, and with the
    // heatsink fault factor.
    for tp in [ThermalParams::demo_visible(), ThermalParams::demo_pump()] {
        let (p, t_amb) = (1.7, c_to_k(31.0));
        let want = t_amb + p * tp.r_total_k_per_w();
        let mut a = Thermal::new(tp.clone(), c_to_k(20.0)).unwrap();
        for _ in 0..4000 {
            a.step(p, t_amb, 5.0);
        }
        assert!(
            (a.t_junction_k() - want).abs() < 1e-6,
            "{} vs {want}",
            a.t_junction_k()
        );
        assert!((a.t_case_k() - (t_amb + p * (tp.r_ch_k_per_w + tp.r_ha_k_per_w))).abs() < 1e-6);
        assert!((a.t_heatsink_k() - (t_amb + p * tp.r_ha_k_per_w)).abs() < 1e-6);
        let mut b = Thermal::new(tp.clone(), c_to_k(20.0)).unwrap();
        b.heatsink_loss_factor = 3.0;
        b.step(p, t_amb, 1e9);
        let want_b = t_amb + p * (tp.r_jc_k_per_w + tp.r_ch_k_per_w + 3.0 * tp.r_ha_k_per_w);
        assert!((b.t_junction_k() - want_b).abs() < 1e-9);
        // Stable and monotone at any step: a 1 us and a 100 s step from the
        // same start stay between start and steady state.
        for dt in [1e-6, 1e2] {
            let mut c = Thermal::new(tp.clone(), t_amb).unwrap();
            let tj = c.step(p, t_amb, dt);
            assert!(tj > t_amb && tj <= want + 1e-12, "dt {dt}: {tj}");
        }
    }
}

#[test]
fn sensor_tables_are_monotonic_and_exact() {
    // The table the core interpolates: strictly increasing counts, each
    // paired with the exact temperature of that code, and counts() of a
    // noise-free chain at a table temperature returns the table code.
    for params in [
        SensorChainParams::demo_visible(),
        SensorChainParams::demo_pump(),
    ] {
        let mut quiet = params.clone();
        quiet.front_end.noise_lsb_rms = 0.0;
        quiet.front_end.rc_tau_s = 0.0;
        let mut ch = SensorChain::new(quiet).unwrap();
        let table = ch.temp_table(-20.0, 120.0, 64);
        assert!(table.len() >= 32, "{} entries", table.len());
        for w in table.windows(2) {
            assert!(w[0].0 < w[1].0, "counts strictly increase");
        }
        // Temperatures are monotonic too (direction depends on the sensor).
        let rising = table[1].1 > table[0].1;
        for w in table.windows(2) {
            assert_eq!(w[1].1 > w[0].1, rising);
        }
        match params.sensor {
            TempSensor::Ntc(_) => assert!(!rising, "NTC to ground: T falls with counts"),
            TempSensor::Rtd(_) => assert!(rising, "RTD to ground: T rises with counts"),
        }
        for &(code, t_c) in &table {
            assert_eq!(ch.counts(c_to_k(t_c), 1e-3), code);
        }
        // Linear interpolation in the table stays close to the exact curve
        // between entries (NTC: < 0.2 K; RTD is nearly linear).
        let interp = |code: f64| {
            let k = table
                .partition_point(|e| (e.0 as f64) <= code)
                .clamp(1, table.len() - 1);
            let (c0, t0) = (table[k - 1].0 as f64, table[k - 1].1);
            let (c1, t1) = (table[k].0 as f64, table[k].1);
            t0 + (t1 - t0) * (code - c0) / (c1 - c0)
        };
        for t_c in [0.0, 25.0, 47.3, 80.0] {
            let code = ch.counts(c_to_k(t_c), 1e-3);
            let exact = ch.temperature_of_counts_k(code).unwrap() - 273.15;
            assert!((interp(code as f64) - exact).abs() < 0.2, "{t_c} degC");
        }
    }
}

#[test]
fn monitor_responsivity_is_bounded_by_the_ideal() {
    // R_pd <= q lambda / (h c) (physics.md); a responsivity above it is rejected.
    for m in [MonitorParams::demo_visible(), MonitorParams::demo_pump()] {
        let ideal = ideal_responsivity_a_per_w(m.responsivity_wavelength_nm * 1e-9);
        assert!(m.responsivity_a_per_w <= ideal);
        let mut bad = m.clone();
        bad.responsivity_a_per_w = ideal * 1.001;
        assert!(Monitor::new(bad).is_err());
    }
}

#[test]
fn demo_modules_hit_their_design_figures() {
    // Demo values (invented modules): visible 650 nm, I_th 20-30 mA, slope
    // 0.8-1 W/A, T0 70-90 K, ~30 mW rated, damage about 2x rated, driver
    // 12 bit ~60 mA; pump 976 nm, I_th 0.3-0.5 A, slope ~1 W/A, T0
    // 120-150 K, a few W, driver 12 bit ~8 A; monitor 0.1-1 mA at rated power.
    let t25 = c_to_k(25.0);
    for (m, ith_range, slope_range, t0_range, fs_range) in [
        (
            DemoModule::visible(),
            (0.020, 0.030),
            (0.8, 1.0),
            (70.0, 90.0),
            (0.055, 0.065),
        ),
        (
            DemoModule::pump(),
            (0.3, 0.5),
            (0.9, 1.1),
            (120.0, 150.0),
            (7.5, 8.5),
        ),
    ] {
        let d = Diode::new(m.diode.clone()).unwrap();
        let ith = d.threshold_current_a(t25);
        let slope = d.slope_w_per_a(t25);
        assert!((ith_range.0..=ith_range.1).contains(&ith), "I_th {ith}");
        assert!(
            (slope_range.0..=slope_range.1).contains(&slope),
            "slope {slope}"
        );
        assert!((t0_range.0..=t0_range.1).contains(&m.diode.t0_k));
        assert!(rel(m.diode.damage_power_w, 2.0 * m.rated_power_w) < 1e-12);
        // Rated power is reachable inside the driver's full scale at 25 degC.
        let i_rated = ith + m.rated_power_w / slope;
        let fs = DriverParams::full_scale_a(&m.driver);
        assert!(m.driver.dac_bits == 12 && (fs_range.0..=fs_range.1).contains(&fs));
        assert!(i_rated < fs, "rated current {i_rated} A within {fs} A");
        let out = d.quasi_static(i_rated, t25);
        assert!(rel(out.p_front_w, m.rated_power_w) < 0.01);
        // Compliance: the diode voltage at full scale fits under the supply.
        assert!(d.forward_voltage(fs, t25) < m.supply_v - m.driver.compliance_v);
        let mon = Monitor::new(m.monitor.clone()).unwrap();
        let i_mon = mon.current_a(m.rated_power_w, out.wavelength_m, t25);
        assert!((1e-4..=1e-3).contains(&i_mon), "I_mon {i_mon}");
        assert!(mon.voltage_v(i_mon) < m.adc.vref_v);
    }
}
