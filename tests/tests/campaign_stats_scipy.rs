//! The campaign's one-sided 95 % Clopper-Pearson upper bound against
//! `scipy.stats.beta.ppf(0.95, k + 1, n - k)` (SciPy, the version the
//! script reports) in `tests/scripts/clopper_pearson.py`. Skipped with a
//! message when SciPy is not installed (CI installs it).

use diodestat_sim::campaign::stats::clopper_pearson_upper;
use diodestat_tests::{python_has, run_script};

#[test]
fn clopper_pearson_matches_scipy() {
    if !python_has("scipy") {
        eprintln!("skipped: python3 with scipy not found");
        return;
    }
    let cases: Vec<(u64, u64)> = vec![
        (0, 20),
        (1, 20),
        (0, 1000),
        (3, 1000),
        (17, 1000),
        (0, 20_000),
        (12, 20_000),
        (19, 20),
        (50, 100),
    ];
    let input = serde_json::json!({ "confidence": 0.95, "cases": cases }).to_string();
    let out: serde_json::Value =
        serde_json::from_str(&run_script("clopper_pearson.py", &input)).unwrap();
    let want: Vec<f64> = serde_json::from_value(out["upper"].clone()).unwrap();
    for ((k, n), w) in cases.iter().zip(want) {
        let got = clopper_pearson_upper(*k, *n, 0.95).unwrap();
        assert!(
            (got - w).abs() <= 1e-9 * w.max(1e-6),
            "k = {k}, n = {n}: {got} vs scipy {w} ({})",
            out["scipy"]
        );
    }
}
