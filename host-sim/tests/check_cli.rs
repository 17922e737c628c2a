//! `diodestat run` and `diodestat check` on scenarios with expectations:
//! exit status, printed verdicts with what was measured, the summary files
//! and the JUnit report.

mod common;

use common::{board_text_for_copy, diodestat, root};
use std::path::PathBuf;

/// A scratch folder (under the target folder) with the demo red board and
/// its start-up scenario, plus `extra` appended to the scenario.
fn scratch(tag: &str, extra: &str) -> PathBuf {
    let dir = root().join("target/tmp").join(format!("check-cli-{tag}"));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let ex = root().join("examples/demo-red-30");
    std::fs::write(
        dir.join("board.toml"),
        board_text_for_copy(&ex.join("board.toml")),
    )
    .unwrap();
    let sc = std::fs::read_to_string(ex.join("startup.toml")).unwrap();
    std::fs::write(dir.join("startup.toml"), format!("{sc}{extra}")).unwrap();
    dir
}

#[test]
fn run_passes_the_shipped_expectations_and_writes_both_summaries() {
    let dir = scratch("pass", "");
    let out = dir.join("out");
    let (ok, text) = diodestat(&[
        "run",
        dir.join("startup.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(ok, "{text}");
    assert!(text.contains("expectations: 8 of 8 passed"), "{text}");
    assert!(
        text.contains(
            "  PASS holds 15 mW: front power within 14.85 to 15.15 mW from 12 to 40 ms (line "
        ),
        "{text}"
    );
    let summary = std::fs::read_to_string(out.join("summary.txt")).unwrap();
    assert!(
        text.contains(&summary),
        "the printed summary is summary.txt"
    );
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    assert_eq!(json["expectations"].as_array().unwrap().len(), 8);
    assert_eq!(json["final_state"], "latched");
}

#[test]
fn run_exits_non_zero_when_an_expectation_fails() {
    let dir = scratch(
        "fail",
        "\n[[expect]]\nname = \"too tight\"\ncheck = \"never-above\"\nmw = 20.1\n",
    );
    let out = dir.join("out");
    let (ok, text) = diodestat(&[
        "run",
        dir.join("startup.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok, "{text}");
    assert!(text.contains("expectations: 8 of 9 passed"), "{text}");
    assert!(
        text.contains(
            "  FAIL too tight: front power never above 20.1 mW over the whole run (line "
        ),
        "{text}"
    );
    assert!(
        text.contains("measured peak 20.3584 mW at 100.600 ms"),
        "{text}"
    );
    assert!(text.contains("error: 1 of 9 expectations failed"), "{text}");
    // The outputs are written all the same, for the reviewer.
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    assert_eq!(json["expectations"][8]["passed"], false);
}

#[test]
fn a_malformed_expectation_is_refused_before_any_output() {
    let dir = scratch(
        "bad",
        "\n[[expect]]\ncheck = \"state\"\nat_ms = 5\nstate = \"lasing\"\n",
    );
    let out = dir.join("out");
    let (ok, text) = diodestat(&[
        "run",
        dir.join("startup.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok, "{text}");
    assert!(
        text.contains("startup.toml: line 97: [[expect]] `state` = \"lasing\" is not a state"),
        "{text}"
    );
    assert!(!out.exists());
}

#[test]
fn check_runs_a_suite_writes_junit_and_fails_on_any_failure() {
    let dir = scratch(
        "suite",
        "\n[[expect]]\ncheck = \"fault\"\nfault = \"monitor-loss\"\nafter_inject = \"monitor-open\"\nwithin_ms = 0.5\n",
    );
    let junit = dir.join("junit.xml");
    let (ok, text) = diodestat(&[
        "check",
        "examples/demo-red-30/startup.toml",
        "examples/demo-pump-5w/startup.toml",
        dir.to_str().unwrap(),
        "--junit",
        junit.to_str().unwrap(),
    ]);
    assert!(!ok, "{text}");
    assert!(text.contains("3 scenarios, 2 passed, 1 failed"), "{text}");
    assert!(text.contains("expected monitor-loss latches within 0.5 ms after the monitor-open injection; measured latched at 101.500 ms"), "{text}");
    let xml = std::fs::read_to_string(&junit).unwrap();
    assert!(xml.starts_with("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<testsuites name=\"diodestat check\" tests=\"25\" failures=\"1\" errors=\"0\""), "{xml}");
    // The shipped scenarios alone pass.
    let (ok, text) = diodestat(&[
        "check",
        "examples/demo-red-30/startup.toml",
        "examples/demo-red-30/modes-and-interlock.toml",
        "examples/demo-pump-5w/startup.toml",
    ]);
    assert!(ok, "{text}");
    assert!(text.contains("3 scenarios, 3 passed, 0 failed"), "{text}");
}
