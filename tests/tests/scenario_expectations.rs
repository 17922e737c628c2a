//! Scenario expectations end to end: every shipped scenario states what it
//! demonstrates and shows it; a deliberately wrong expectation fails with
//! what was measured; a suite's JUnit XML is read back by an independent
//! XML parser (Python 3 standard library `xml.etree.ElementTree`).

use std::path::PathBuf;

use diodestat_sim::check::{self, Case};

fn example(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../examples")
        .join(rel)
}

/// A scratch folder with the demo red board and `files` (name, text).
fn scratch(tag: &str, files: &[(&str, String)]) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("diodestat-expect-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    // The board file with its module file beside it.
    let board = std::fs::read_to_string(example("demo-red-30/board.toml")).unwrap();
    let board = board.replace("\"../modules/demo-red-650.toml\"", "\"module.toml\"");
    std::fs::write(dir.join("board.toml"), board).unwrap();
    std::fs::copy(
        example("modules/demo-red-650.toml"),
        dir.join("module.toml"),
    )
    .unwrap();
    for (name, text) in files {
        std::fs::write(dir.join(name), text).unwrap();
    }
    dir
}

fn red_startup() -> String {
    std::fs::read_to_string(example("demo-red-30/startup.toml")).unwrap()
}

/// The shipped scenarios but the 400 s heatsink run and the red board's
/// 300 s warm hold (8 and 6 million ticks; too
/// slow unoptimised: `.ci/run` checks it with `diodestat check examples`).
#[test]
fn every_shipped_scenario_shows_what_it_expects() {
    for rel in [
        "demo-red-30/startup.toml",
        "demo-red-30/modes-and-interlock.toml",
        "demo-pump-5w/startup.toml",
        "demo-pump-18w/startup.toml",
        "bench-808/startup.toml",
        "demo-vcsel-850/startup.toml",
    ] {
        let ran = check::run_file(&example(rel)).unwrap();
        assert!(ran.outcomes.len() >= 5, "{rel}: {:?}", ran.outcomes);
        for o in &ran.outcomes {
            assert!(
                o.passed,
                "{rel} line {}: {} / {}",
                o.line, o.expected, o.measured
            );
        }
        // Each shows a regulated power, a bound and a fault or a stop.
        let kinds: Vec<&str> = ran.outcomes.iter().map(|o| o.check).collect();
        for k in ["power-band", "never-above", "state"] {
            assert!(kinds.contains(&k), "{rel} has no {k} expectation");
        }
    }
    // Every scenario in examples/ is found by the suite and has expectations.
    let files = check::collect(&[example("")]).unwrap();
    assert_eq!(files.len(), 9, "{files:?}");
    for f in files {
        let sc = diodestat_sim::scenario::parse(&std::fs::read_to_string(&f).unwrap()).unwrap();
        assert!(sc.expects.len() >= 4, "{}", f.display());
    }
}

/// Each wrong expectation, added alone to the red start-up, fails and says
/// what was measured; the shipped ones still pass beside it.
#[test]
fn a_deliberately_wrong_expectation_fails() {
    let wrong = [
        (
            "check = \"fault\"\nfault = \"monitor-loss\"\nafter_inject = \"monitor-open\"\nwithin_ms = 0.5",
            "latched at 101.500 ms, 30 ticks = 1.500 ms after the monitor-open injection",
        ),
        (
            "check = \"power-band\"\nfrom_ms = 12\nto_ms = 40\nmw = 16\ntolerance_pct = 1",
            "below the band",
        ),
        ("check = \"state\"\nat_ms = 15\nstate = \"off\"", "regulating at 15 ms"),
        ("check = \"never-above\"\nmw = 20.1", "peak 20.35"),
        (
            "check = \"fault\"\nfault = \"overcurrent\"\nafter_ms = 0\nwithin_ms = 120",
            "never latched",
        ),
    ];
    for (k, (body, measured)) in wrong.iter().enumerate() {
        let dir = scratch(
            &format!("wrong{k}"),
            &[("s.toml", format!("{}\n[[expect]]\n{body}\n", red_startup()))],
        );
        let ran = check::run_file(&dir.join("s.toml")).unwrap();
        let (last, rest) = ran.outcomes.split_last().unwrap();
        assert!(!last.passed, "{body}: {last:?}");
        assert!(
            last.measured.contains(measured),
            "{body}: {}",
            last.measured
        );
        assert!(rest.iter().all(|o| o.passed), "{rest:?}");
        let _ = std::fs::remove_dir_all(&dir);
    }
}

#[test]
fn a_suite_reports_pass_fail_and_error_and_writes_valid_junit() {
    let good = red_startup().replace(
        "name = \"demo-red-30 start-up and monitor loss\"",
        "name = \"red <start-up> & \\\"quotes\\\"\"",
    );
    let wrong = format!(
        "{}\n[[expect]]\nname = \"too fast <on purpose>\"\ncheck = \"fault\"\nfault = \"monitor-loss\"\n\
         after_inject = \"monitor-open\"\nwithin_ms = 0.5\n",
        red_startup()
    );
    let none =
        "name = \"no expectations\"\nboard = \"board.toml\"\nduration_ms = 5\nambient_c = 25\n";
    let broken = "name = \"broken\"\nboard = \"missing.toml\"\nduration_ms = 5\nambient_c = 25\n";
    let dir = scratch(
        "suite",
        &[
            ("a-good.toml", good),
            ("b-wrong.toml", wrong),
            ("c-none.toml", none.into()),
            ("d-broken.toml", broken.into()),
        ],
    );
    // The board file in the folder is not a scenario.
    let files = check::collect(std::slice::from_ref(&dir)).unwrap();
    let names: Vec<_> = files
        .iter()
        .map(|f| f.file_name().unwrap().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        names,
        [
            "a-good.toml",
            "b-wrong.toml",
            "c-none.toml",
            "d-broken.toml"
        ]
    );
    let cases: Vec<Case> = files.iter().map(|f| Case::run(f)).collect();
    let passed: Vec<bool> = cases.iter().map(Case::passed).collect();
    assert_eq!(passed, [true, false, false, false]);

    let table = check::table(&cases);
    assert!(table.contains("8/8 passed  PASS"), "{table}");
    assert!(table.contains("8/9 passed  FAIL"), "{table}");
    assert!(table.contains("ERROR"), "{table}");
    assert!(
        table.contains(&format!("FAIL {}:", dir.join("b-wrong.toml").display())),
        "{table}"
    );
    assert!(table.contains("4 scenarios, 1 passed, 3 failed"), "{table}");

    let xml = check::junit(&cases);
    if !diodestat_tests::python_has("xml.etree.ElementTree") {
        println!("skipped: python3 not available to read the JUnit XML back");
        return;
    }
    let out = diodestat_tests::run_script(
        "junit_check.py",
        &serde_json::json!({ "xml": xml }).to_string(),
    );
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["root"], "testsuites");
    let suites = v["suites"].as_array().unwrap();
    assert_eq!(suites.len(), 4);
    // Counts as written agree with the cases found.
    for s in suites {
        let cases = s["cases"].as_array().unwrap();
        assert_eq!(s["tests"].as_u64().unwrap() as usize, cases.len());
        let f = cases.iter().filter(|c| !c["failure"].is_null()).count();
        let e = cases.iter().filter(|c| !c["error"].is_null()).count();
        assert_eq!(s["failures"].as_u64().unwrap() as usize, f);
        assert_eq!(s["errors"].as_u64().unwrap() as usize, e);
    }
    // Escaped text comes back as it was.
    assert_eq!(
        suites[0]["cases"][0]["classname"],
        "red <start-up> & \"quotes\""
    );
    assert_eq!(suites[0]["failures"], 0);
    let wrong_cases = suites[1]["cases"].as_array().unwrap();
    let last = wrong_cases.last().unwrap();
    // The added entry starts after the file and one blank line.
    let line = red_startup().lines().count() + 2;
    assert_eq!(last["name"], format!("line {line}: too fast <on purpose>"));
    assert!(
        last["failure"]
            .as_str()
            .unwrap()
            .contains("expected monitor-loss latches within 0.5 ms"),
        "{last}"
    );
    assert_eq!(suites[2]["failures"], 1);
    assert_eq!(suites[3]["errors"], 1);
    assert!(suites[3]["cases"][0]["error"]
        .as_str()
        .unwrap()
        .contains("missing.toml"));
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn xml_escape_handles_markup_and_control_characters() {
    assert_eq!(
        check::xml_escape("a<b>&\"c'\u{1}\n"),
        "a&lt;b&gt;&amp;&quot;c&apos;\u{FFFD}\n"
    );
}
