//! The `loop-gate` command: it passes the shipped board configurations and
//! fails the excessive-integral-gain fixture with a non-zero exit and a
//! message naming the configuration, the corner and the figure.

mod common;

use common::{board_text_for_copy, diodestat, root};

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
        text.contains("FAIL board excessive-ki, corner cold: gain margin -0.0 dB is below 6 dB"),
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
        // report.json beside the Markdown, with the same verdict and every corner.
        let json: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(out.join(b).join("report.json")).unwrap(),
        )
        .unwrap();
        assert_eq!(json["board"], b);
        assert_eq!(json["verdict"], "pass");
        let corners = json["corners"].as_array().unwrap();
        assert!(corners.len() >= 10, "{b}: {} corners", corners.len());
        for c in corners {
            assert!(c["margins"]["pm_deg"].as_f64().unwrap() >= 45.0, "{c}");
            assert!(c["margins"]["gm_db"].as_f64().unwrap() >= 6.0, "{c}");
        }
        assert!(md.contains(json["worst_corner"].as_str().unwrap()));
    }
}

/// `loop-tune --write` puts the proposed gains into a copy of a shipped
/// board file, keeping its comments; `--json` writes the design.
#[test]
fn tune_writes_the_gains_in_place_and_the_design_as_json() {
    let dir = std::env::temp_dir().join(format!("diodestat-tune-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let board = dir.join("board.toml");
    let before = board_text_for_copy(&root().join("examples/demo-red-30/board.toml"));
    std::fs::write(&board, &before).unwrap();
    let json = dir.join("tune.json");
    let (ok, text) = diodestat(&[
        "loop-tune",
        board.to_str().unwrap(),
        "--crossover-hz",
        "400",
        "--write",
        "--json",
        json.to_str().unwrap(),
    ]);
    assert!(ok, "{text}");
    let after = std::fs::read_to_string(&board).unwrap();
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let kp = j["proposed"]["kp_ma_per_mw"].as_f64().unwrap();
    let ki = j["proposed"]["ki_ma_per_mw_ms"].as_f64().unwrap();
    assert!(after.contains(&format!("kp_ma_per_mw = {kp}")), "{after}");
    assert!(
        after.contains(&format!("ki_ma_per_mw_ms = {ki}")),
        "{after}"
    );
    // Only the two gain lines changed.
    let changed: Vec<_> = before
        .lines()
        .zip(after.lines())
        .filter(|(a, b)| a != b)
        .map(|(a, _)| a)
        .collect();
    assert_eq!(before.lines().count(), after.lines().count());
    assert!(
        changed
            .iter()
            .all(|l| l.starts_with("kp_ma_per_mw") || l.starts_with("ki_ma_per_mw_ms")),
        "{changed:?}"
    );
    assert_eq!(j["with_proposed_gains"]["verdict"], "pass");
    let _ = std::fs::remove_dir_all(&dir);
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

/// `loop-report` on a board whose verdict is FAIL writes its report and
/// exits non-zero (it exited 0), naming the failing board; on a passing
/// board it exits 0.
#[test]
fn report_exits_non_zero_when_a_verdict_is_fail() {
    let out = std::env::temp_dir().join(format!("diodestat-loop-report-{}", std::process::id()));
    let (ok, text) = diodestat(&[
        "loop-report",
        "tests/fixtures/excessive-ki/board.toml",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok, "{text}");
    assert!(text.contains("verdict: FAIL"), "{text}");
    assert!(
        text.contains("error: loop report: 1 of 1 board configurations FAIL: excessive-ki"),
        "{text}"
    );
    let json: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.join("excessive-ki").join("report.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(json["verdict"], "fail");
    let (ok, text) = diodestat(&[
        "loop-report",
        "examples/demo-pump-5w/board.toml",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(ok, "{text}");
    assert!(text.contains("verdict: pass"), "{text}");
    let _ = std::fs::remove_dir_all(&out);
}

/// A 1.2 Hz crossover is far too slow for the 40 ms step windows of the
/// time-domain check: the steps end 19 % short of the setpoint. loop-tune
/// said "longest settling 27.45 ms" (measured against where the window
/// ended, not the setpoint); it now says the steps did not settle within
/// the window and gives the error at its end instead.
#[test]
fn tune_does_not_claim_a_settling_time_for_steps_that_did_not_settle() {
    let (ok, text) = diodestat(&[
        "loop-tune",
        "examples/demo-pump-5w/board.toml",
        "--crossover-hz",
        "1.2",
    ]);
    assert!(ok, "{text}");
    assert!(text.contains("crossover 1.2 Hz"), "{text}");
    assert!(!text.contains("longest settling"), "{text}");
    assert!(
        text.contains("did not settle within the 40 ms step window"),
        "{text}"
    );
}
