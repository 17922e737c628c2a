//! The safety caution on the output of the commands that report on a diode,
//! a loop or a campaign: `liv` and `loop-gate` print it, `fit` prints it and
//! writes it into `fit.md`, and a campaign with an unsafe case prints the
//! case (its setpoint rounded as in the report) and the caution.

mod common;

use common::{diodestat_output, root};
use std::path::PathBuf;

use diodestat_sim::safety::SAFETY_CAUTION;

/// Runs `diodestat` in the repository root; its success and its stdout.
fn diodestat(args: &[&str]) -> (bool, String) {
    let out = diodestat_output(args);
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
    )
}

fn scratch(tag: &str) -> PathBuf {
    let dir = root().join("target/tmp").join(format!("caution-cli-{tag}"));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

#[test]
fn liv_prints_the_caution() {
    let out = scratch("liv");
    let (ok, text) = diodestat(&["liv", "visible", "--out", out.to_str().unwrap()]);
    assert!(ok, "{text}");
    assert!(text.contains(SAFETY_CAUTION), "{text}");
}

#[test]
fn fit_prints_the_caution_and_writes_it_into_its_report() {
    let out = scratch("fit");
    let (ok, text) = diodestat(&[
        "fit",
        "examples/bench-808/sweeps.csv",
        "--template",
        "examples/modules/bench-808-datasheet.toml",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(ok, "{text}");
    assert!(text.contains(SAFETY_CAUTION), "{text}");
    let md = std::fs::read_to_string(out.join("fit.md")).unwrap();
    assert!(md.contains(SAFETY_CAUTION), "{md}");
}

#[test]
fn loop_gate_prints_the_caution() {
    let out = scratch("loop-gate");
    let (ok, text) = diodestat(&[
        "loop-gate",
        "examples/demo-red-30/board.toml",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(ok, "{text}");
    assert!(text.contains(SAFETY_CAUTION), "{text}");
}

#[test]
fn an_unsafe_campaign_case_is_printed_with_its_setpoint_rounded_and_the_caution() {
    // The VCSEL board's setpoint (two thirds of 0.6 mW) runs as the core's
    // fixed-point value 0.400004 mW; the printed line rounds it as the
    // report's tables do (4 decimals).
    let out = scratch("campaign-unsafe");
    let (ok, text) = diodestat(&[
        "campaign",
        "examples/demo-vcsel-850/board.toml",
        "--without",
        "monitor-loss",
        "--faults",
        "monitor-open",
        "--moments",
        "steady",
        "--corners",
        "nominal",
        "--slow-bound-s",
        "2",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok, "{text}");
    assert!(
        text.contains("UNSAFE: monitor-open steady nominal 0.4000 mW: "),
        "{text}"
    );
    assert!(text.contains(SAFETY_CAUTION), "{text}");
}
