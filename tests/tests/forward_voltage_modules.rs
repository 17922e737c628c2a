//! Forward voltage against junction temperature for every shipped module
//! file: at fixed current it falls, as real diodes do (of order -1 to
//! -2 mV/K; silicon about -2 mV/K: Sedra and Smith, *Microelectronic
//! Circuits*, diode temperature dependence, `from memory`), from a tenth
//! of the threshold to the module's rated current and from 0 to 80 degC.
//! One test per module file under `examples/modules`; each must fall by at
//! least 0.5 mV/K everywhere on that grid (the shipped files fall by 1.3 to
//! 1.7 mV/K at their rated current; before the temperature law of
//! `plant/diode/voltage.rs`, the VCSEL and the 808 nm modules rose by up
//! to +0.68 mV/K).

use std::path::PathBuf;

use diodestat_sim::module_file;
use diodestat_sim::plant::Diode;

const ZERO_C_K: f64 = 273.15;

/// The steepest (least negative) dV_f/dT over the grid, V/K, and where.
fn least_fall(file: &str) -> (f64, f64, f64) {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/modules")
        .join(file);
    let m = module_file::load_module(&path, "MODULE").unwrap().module;
    let d = Diode::new(m.diode.clone()).unwrap();
    let i_lo = 0.1 * d.derived().i_th_a;
    let i_hi = m.rated_current_a;
    let mut worst = (f64::NEG_INFINITY, 0.0, 0.0);
    for k in 0..=24 {
        let i = i_lo * (i_hi / i_lo).powf(k as f64 / 24.0);
        for c in [0.0, 25.0, 50.0, 80.0] {
            let t = c + ZERO_C_K;
            let s = (d.forward_voltage(i, t + 0.01) - d.forward_voltage(i, t - 0.01)) / 0.02;
            if s > worst.0 {
                worst = (s, i, c);
            }
        }
    }
    worst
}

fn assert_falls(file: &str) {
    let (s, i, c) = least_fall(file);
    println!(
        "{file}: least fall {:.3} mV/K at {:.4} A, {c} degC",
        s * 1e3,
        i
    );
    assert!(
        s < -0.5e-3,
        "{file}: dV_f/dT = {:.3} mV/K at {:.4} A, {c} degC",
        s * 1e3,
        i
    );
}

#[test]
fn vcsel_850_falls() {
    assert_falls("demo-vcsel-850.toml");
}

#[test]
fn bench_808_datasheet_falls() {
    assert_falls("bench-808-datasheet.toml");
}

#[test]
fn bench_808_fitted_falls() {
    assert_falls("bench-808-fitted.toml");
}

#[test]
fn pump_976_falls() {
    assert_falls("demo-pump-976.toml");
}

#[test]
fn pump_976_18w_falls() {
    assert_falls("demo-pump-976-18w.toml");
}

#[test]
fn red_650_falls() {
    assert_falls("demo-red-650.toml");
}

/// Every module file under `examples/modules` has its test above.
#[test]
fn every_module_file_is_covered() {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../examples/modules");
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".toml"))
        .collect();
    names.sort();
    assert_eq!(
        names,
        [
            "bench-808-datasheet.toml",
            "bench-808-fitted.toml",
            "demo-pump-976-18w.toml",
            "demo-pump-976.toml",
            "demo-red-650.toml",
            "demo-vcsel-850.toml",
        ]
    );
}
