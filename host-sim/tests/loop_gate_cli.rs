//! The `loop-gate` command: it passes the shipped board configurations and
//! fails the excessive-integral-gain fixture with a non-zero exit and a
//! message naming the configuration, the corner and the figure.

use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn diodestat(args: &[&str]) -> (bool, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_diodestat"))
        .args(args)
        .current_dir(root())
        .output()
        .unwrap();
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    (out.status.success(), text)
}

#[test]
fn gate_fails_the_excessive_integral_gain_fixture() {
    let (ok, text) = diodestat(&["loop-gate", "tests/fixtures/excessive-ki/board.toml"]);
    assert!(!ok, "{text}");
    // The worst corner is linearly unstable; every finding names the
    // configuration, the corner and the figure.
    assert!(
        text.contains("FAIL board excessive-ki, corner cold: linearised closed loop unstable"),
        "{text}"
    );
    assert!(
        text.contains(
            "FAIL board excessive-ki, corner cold: phase margin -0.6 deg is below 45 deg"
        ),
        "{text}"
    );
    assert!(
        text.contains("FAIL board excessive-ki, corner cold: gain margin -0.1 dB is below 6 dB"),
        "{text}"
    );
    assert!(text.contains("limit cycle at"), "{text}");
    assert!(text.contains("error: loop gate failed"), "{text}");
}

#[test]
fn gate_passes_the_shipped_boards() {
    let out = std::env::temp_dir().join("diodestat-loop-gate-test");
    let (ok, text) = diodestat(&["loop-gate", "--out", out.to_str().unwrap()]);
    assert!(ok, "{text}");
    assert!(text.contains("pass demo-red-30"), "{text}");
    assert!(text.contains("pass demo-pump-5w"), "{text}");
    assert!(text.contains("loop gate passed"), "{text}");
    for b in ["demo-red-30", "demo-pump-5w"] {
        let md = std::fs::read_to_string(out.join(b).join("loop-report.md")).unwrap();
        assert!(md.contains("**Worst corner: "), "{md}");
        assert!(md.contains("IEC 60825-1"), "{md}");
        let svg = std::fs::read_to_string(out.join(b).join("bode.svg")).unwrap();
        assert!(svg.starts_with("<svg"), "{b}");
        assert!(out.join(b).join("bode").join("cold.svg").is_file());
    }
}

#[test]
fn tune_refuses_an_unreachable_target_and_proposes_gains_otherwise() {
    let (ok, text) = diodestat(&[
        "loop-tune",
        "examples/demo-red-30/board.toml",
        "--crossover-hz",
        "3000",
    ]);
    assert!(!ok, "{text}");
    assert!(
        text.contains("no PI gains meet the target: target crossover 3000.0 Hz not reachable"),
        "{text}"
    );
    let (ok, text) = diodestat(&[
        "loop-tune",
        "examples/demo-pump-5w/board.toml",
        "--crossover-hz",
        "500",
    ]);
    assert!(ok, "{text}");
    assert!(text.contains("proposed gains: kp_ma_per_mw = "), "{text}");
    assert!(text.contains("ki_ma_per_mw_ms = "), "{text}");
}

#[test]
fn every_loop_command_has_help() {
    for cmd in ["loop-report", "loop-tune", "loop-gate"] {
        let (ok, text) = diodestat(&[cmd, "--help"]);
        assert!(ok && text.contains("Usage: diodestat"), "{cmd}: {text}");
    }
}
