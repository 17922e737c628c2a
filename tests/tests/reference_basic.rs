//! Reference checks of the plant models against published values.

use diodestat_sim::plant::{
    c_to_k, ideal_responsivity_a_per_w, ideal_slope_w_per_a, DemoModule, Diode, Ntc, Rtd, C, H,
    K_B, Q, VARSHNI_GAAS, VARSHNI_INP,
};

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs()
}

#[test]
fn codata_2018_exact_constants() {
    // Source: CODATA 2018 (Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)); SI Brochure, 9th ed.: exact values.
    assert_eq!(H, 6.626_070_15e-34);
    assert_eq!(C, 299_792_458.0);
    assert_eq!(Q, 1.602_176_634e-19);
    assert_eq!(K_B, 1.380_649e-23);
    // hc/e = 1.2398419843 eV um (computed from the exact constants).
    assert!(close(H * C / Q * 1e6, 1.239_841_984_3, 1e-9));
}

#[test]
fn ideal_slope_and_responsivity_codata() {
    // Computed from the CODATA 2018 exact constants: h nu / q (W/A) and q lambda / (h c) (A/W).
    for (nm, slope, resp) in [
        (650.0, 1.907_449, 0.524_260),
        (808.0, 1.534_458, 0.651_696),
        (980.0, 1.265_145, 0.790_423),
        (1310.0, 0.946_444, 1.056_586),
        (1550.0, 0.799_898, 1.250_159),
    ] {
        assert!(close(ideal_slope_w_per_a(nm * 1e-9), slope, 1e-6), "{nm}");
        assert!(
            close(ideal_responsivity_a_per_w(nm * 1e-9), resp, 1e-6),
            "{nm}"
        );
    }
}

#[test]
fn pt100_iec_60751_callendar_van_dusen() {
    // Source: IEC 60751:2008, Callendar-Van Dusen with A = 3.9083e-3, B = -5.775e-7, C = -4.183e-12;
    // tabulated Pt100 values 60.26, 100.00, 138.51, 175.86 ohm (formula values to 4 decimals).
    let pt = Rtd { r0_ohm: 100.0 };
    for (t, r) in [
        (-100.0, 60.2558),
        (0.0, 100.0),
        (100.0, 138.5055),
        (200.0, 175.8560),
    ] {
        let got = pt.resistance_ohm(c_to_k(t));
        assert!((got - r).abs() < 5e-4, "{t} C: {got}");
        assert!((pt.temperature_k(got) - c_to_k(t)).abs() < 1e-6);
    }
}

#[test]
fn ntc_beta_and_steinhart_hart() {
    // Beta equation R = R25 exp(B (1/T - 1/298.15 K)), R25 = 10 kohm, B = 3380 K:
    // 0 C 28 224 ohm, 50 C 4 160 ohm, 85 C 1 497 ohm (values computed from the formula).
    let ntc = Ntc::Beta {
        r25_ohm: 10_000.0,
        beta_k: 3380.0,
    };
    for (t, r) in [(0.0, 28_224.0), (50.0, 4_160.0), (85.0, 1_497.0)] {
        let got = ntc.resistance_ohm(c_to_k(t));
        assert!(close(got, r, 5e-4), "{t} C: {got}");
        assert!((ntc.temperature_k(got) - c_to_k(t)).abs() < 1e-6);
    }
    // Steinhart and Hart, "Calibration curves for thermistors", Deep-Sea Research 15 (1968) 497-503:
    // with A = 1.40e-3, B = 2.37e-4, C = 9.90e-8 -> 3000 ohm 298.66 K, 10 kohm 273.21 K (computed).
    let sh = Ntc::SteinhartHart {
        a: 1.40e-3,
        b: 2.37e-4,
        c: 9.90e-8,
    };
    assert!((sh.temperature_k(3000.0) - 298.66).abs() < 0.01);
    assert!((sh.temperature_k(10_000.0) - 273.21).abs() < 0.01);
    assert!(close(
        sh.resistance_ohm(sh.temperature_k(4321.0)),
        4321.0,
        1e-9
    ));
}

#[test]
fn varshni_gaas_and_inp_at_300_k() {
    // Vurgaftman, Meyer, Ram-Mohan, J. Appl. Phys. 89, 5815 (2001) (secondary copy):
    // GaAs 1.519 eV, 0.5405 meV/K, 204 K -> 1.4225 eV at 300 K; InP -> 1.3529 eV.
    assert!((VARSHNI_GAAS.eg_ev(300.0) - 1.4225).abs() < 1e-4);
    assert!((VARSHNI_INP.eg_ev(300.0) - 1.3529).abs() < 1e-4);
}

#[test]
fn threshold_follows_characteristic_temperature() {
    // Textbook characteristic-temperature model I_th(T) = I_th(T_ref) exp((T - T_ref)/T0)
    // (Coldren, Corzine, Mashanovitch, Diode Lasers and Photonic Integrated Circuits, 2nd ed., 2012).
    let m = DemoModule::visible();
    let d = Diode::new(m.diode.clone()).unwrap();
    let t0 = m.diode.t0_k;
    let tref = m.diode.t_ref_c;
    let i_ref = d.threshold_current_a(c_to_k(tref));
    for dt in [-20.0, 10.0, 30.0] {
        let want = i_ref * (dt / t0).exp();
        assert!(close(d.threshold_current_a(c_to_k(tref + dt)), want, 1e-9));
        // The quasi-static model is dark below and lasing above that threshold.
        let ith = want;
        let below = d.quasi_static(ith * 0.9, c_to_k(tref + dt)).p_front_w;
        let above = d.quasi_static(ith * 1.5, c_to_k(tref + dt)).p_front_w;
        assert!(above > 20.0 * below.max(1e-9), "{dt}: {below} {above}");
    }
}
