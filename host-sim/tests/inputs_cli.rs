//! Inputs that once panicked, hung, used unbounded memory or passed as
//! nonsense, each run through the `diodestat` binary: every one is now
//! refused before the run, naming its file, line, column, key or option,
//! value and the accepted range; outputs are replaced whole or not at all.

mod common;

use common::{board_text_for_copy, root};
use std::path::{Path, PathBuf};

fn red_board() -> String {
    root()
        .join("examples/demo-red-30/board.toml")
        .display()
        .to_string()
}

/// [`common::diodestat`], which must not panic on any of these inputs.
fn diodestat(args: &[&str]) -> (bool, String) {
    let (ok, text) = common::diodestat(args);
    assert!(!text.contains("panicked"), "{text}");
    (ok, text)
}

fn scratch(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("diodestat-inputs-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// A scenario on the red demo board with `body` appended (after the
/// top-level keys); returns its path.
fn scenario(dir: &Path, top: &str, body: &str) -> PathBuf {
    let p = dir.join("s.toml");
    std::fs::write(
        &p,
        format!(
            "name = \"t\"\nboard = \"{}\"\nduration_ms = 20\nambient_c = 25\n{top}\n{body}",
            red_board()
        ),
    )
    .unwrap();
    p
}

/// Run a scenario that must be refused; the message must hold every needle.
fn refused(tag: &str, top: &str, body: &str, needles: &[&str]) {
    let d = scratch(tag);
    let s = scenario(&d, top, body);
    let out = d.join("out");
    let (ok, text) = diodestat(&["run", s.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert!(!ok, "{tag}: {text}");
    for n in needles {
        assert!(text.contains(n), "{tag}: missing `{n}` in {text}");
    }
    assert!(!out.exists(), "{tag}: output written for a refused run");
    let _ = std::fs::remove_dir_all(&d);
}

const ENABLE: &str = "[[event]]\nat_ms = 0\ndo = \"enable\"\n";

#[test]
fn nan_setpoint_in_an_event() {
    // Panicked inside `fixed` converting the setpoint.
    refused(
        "nan-setpoint",
        "",
        &format!("{ENABLE}[[event]]\nat_ms = 1\ndo = \"set-power\"\nmw = nan\n"),
        &[
            "s.toml: line 12, column 6: event[2].mw = nan",
            "-32767 ..= 32767 mW",
        ],
    );
}

#[test]
fn non_finite_ambient_or_fault_factor_with_the_dynamic_model() {
    // The rate-equation solver never converged.
    let d = scratch("nan-ambient-2");
    let p = d.join("s.toml");
    std::fs::write(
        &p,
        format!(
            "name = \"t\"\nboard = \"{}\"\nduration_ms = 20\nambient_c = nan\ndiode_model = \"dynamic\"\n",
            red_board()
        ),
    )
    .unwrap();
    let (ok, text) = diodestat(&[
        "run",
        p.to_str().unwrap(),
        "--out",
        d.join("o").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(
        text.contains("line 4, column 13: ambient_c = nan"),
        "{text}"
    );
    assert!(text.contains("-55 ..= 125 degC"), "{text}");
    refused(
        "inf-factor",
        "diode_model = \"dynamic\"",
        &format!("{ENABLE}[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = {{ kind = \"sense-gain\", factor = inf }}\n"),
        &["event[2].fault.factor = inf", "0 ..= 10"],
    );
}

#[test]
fn heatsink_loss_factor_zero() {
    // The thermal step squared its matrix about 2^31 times.
    refused(
        "heatsink-zero",
        "",
        &format!("{ENABLE}[[event]]\nat_ms = 1\ndo = \"inject\"\nfault = {{ kind = \"heatsink-loss\", factor = 0 }}\n"),
        &["line 12, column 44: event[2].fault.factor = 0", "1 ..= 1000"],
    );
}

#[test]
fn ambient_stepping_between_huge_values() {
    // The plot's axis range became infinite and the plotting library looped.
    refused(
        "ambient-1e308",
        "",
        "[[event]]\nat_ms = 1\ndo = \"ambient-step\"\nto_c = 1e308\n[[event]]\nat_ms = 2\ndo = \"ambient-step\"\nto_c = -1e308\n",
        &["event[1].to_c = 1e308", "-55 ..= 125 degC"],
    );
}

/// `liv` on a sweep that never lases printed a threshold and slope read
/// from the spontaneous emission; it now says the sweep stays below
/// threshold, and why.
#[test]
fn liv_below_threshold_prints_no_threshold() {
    let d = scratch("liv-below");
    let out = d.join("o");
    let (ok, text) = diodestat(&[
        "liv",
        "visible",
        "--max-ma",
        "5",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(ok, "{text}");
    assert!(!text.contains("slope"), "{text}");
    assert!(text.contains("stays below threshold"), "{text}");
    assert!(text.contains("5.0 mA is below the threshold"), "{text}");
    let svg = std::fs::read_to_string(out.join("liv.svg")).unwrap();
    assert!(!svg.contains("slope"), "the plot marks a slope");
    assert!(svg.contains("below threshold"));
}

#[test]
fn liv_max_ma_inf_and_other_options_out_of_range() {
    let d = scratch("liv");
    let out = d.join("o");
    let (ok, text) = diodestat(&[
        "liv",
        "visible",
        "--max-ma",
        "inf",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains("'inf' for '--max-ma"), "{text}");
    let (ok, text) = diodestat(&[
        "liv",
        "visible",
        "--max-ma",
        "1e6",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(
        text.contains("--max-ma 1000000: above the visible driver's full scale"),
        "{text}"
    );
    let (ok, text) = diodestat(&[
        "liv",
        "visible",
        "--temps-c",
        "25,nan",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains("'nan' for '--temps-c"), "{text}");
    assert!(!out.exists());
    // `--max-overshoot-pct nan` turned every overshoot finding into a pass.
    let (ok, text) = diodestat(&["loop-gate", "--max-overshoot-pct", "nan"]);
    assert!(!ok);
    assert!(text.contains("'nan' for '--max-overshoot-pct"), "{text}");
    assert!(text.contains("0 ..= 100 %"), "{text}");
    let (ok, text) = diodestat(&["campaign", &red_board(), "--slow-bound-s", "0"]);
    assert!(!ok);
    assert!(text.contains("'0' for '--slow-bound-s"), "{text}");
    let (ok, text) = diodestat(&["campaign", &red_board(), "--shard", "3/2"]);
    assert!(!ok);
    assert!(text.contains("1 <= K <= N"), "{text}");
    let (ok, text) = diodestat(&["campaign", &red_board(), "--faults", "no-such-fault"]);
    assert!(!ok);
    assert!(text.contains("names no fault of the campaign"), "{text}");
    let (ok, text) = diodestat(&["loop-tune", &red_board(), "--crossover-hz", "1e9"]);
    assert!(!ok);
    assert!(
        text.contains("--crossover-hz 1000000000: must be below half"),
        "{text}"
    );
    let (ok, text) = diodestat(&["loop-gate", &red_board(), "--setpoint-mw", "1e6"]);
    assert!(!ok);
    assert!(
        text.contains("--setpoint-mw 1000000: outside board"),
        "{text}"
    );
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn board_or_table_path_naming_an_endless_file() {
    let d = scratch("devzero");
    let p = d.join("s.toml");
    std::fs::write(
        &p,
        "name = \"t\"\nboard = \"/dev/zero\"\nduration_ms = 20\nambient_c = 25\n",
    )
    .unwrap();
    let (ok, text) = diodestat(&[
        "run",
        p.to_str().unwrap(),
        "--out",
        d.join("o").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(
        text.contains("s.toml: board: /dev/zero: larger than the 4194304 bytes"),
        "{text}"
    );
    let (ok, text) = diodestat(&[
        "export",
        "/dev/zero",
        "--out",
        d.join("x.rs").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains("BOARD: /dev/zero: larger than"), "{text}");
    // A table file.
    let board = board_text_for_copy(Path::new(&red_board()));
    let base = board.split("[temperature]").next().unwrap();
    std::fs::write(
        d.join("b.toml"),
        format!("{base}[temperature]\nfrom = \"explicit\"\ntable_csv = \"/dev/zero\"\nlow_fault_counts = 40\nhigh_fault_counts = 4055\nopen_rail = \"high\"\n"),
    )
    .unwrap();
    let (ok, text) = diodestat(&[
        "export",
        d.join("b.toml").to_str().unwrap(),
        "--out",
        d.join("x.rs").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(
        text.contains("temperature.table_csv = \"/dev/zero\": /dev/zero: larger than"),
        "{text}"
    );
    assert!(text.contains("larger than the 4194304 bytes"), "{text}");
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn duration_whose_trace_would_not_fit() {
    // duration_ms = 1e7 held a 5.9 GB trace in memory; the trace now
    // streams, and the file it would write is bounded.
    let d = scratch("long");
    let p = d.join("s.toml");
    let write = |dur: &str, every: u32| {
        std::fs::write(
            &p,
            format!(
                "name = \"t\"\nboard = \"{}\"\nduration_ms = {dur}\nambient_c = 25\ntrace_every = {every}\n",
                red_board()
            ),
        )
        .unwrap()
    };
    write("1e7", 1);
    let (ok, text) = diodestat(&[
        "run",
        p.to_str().unwrap(),
        "--out",
        d.join("o").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(
        text.contains("line 3, column 15: duration_ms = 1e7"),
        "{text}"
    );
    assert!(text.contains("3600000"), "{text}");
    write("600000", 1);
    let (ok, text) = diodestat(&[
        "run",
        p.to_str().unwrap(),
        "--out",
        d.join("o").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains("set trace_every to at least 2"), "{text}");
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn events_at_the_end_and_unknown_event_keys() {
    refused(
        "at-end",
        "",
        "[[event]]\nat_ms = 20\ndo = \"enable\"\n",
        &["event[1].at_ms = 20", "never happens"],
    );
    refused(
        "unknown-key",
        "",
        "[[event]]\nat_ms = 1\ndo = \"set-power\"\nmw = 5\nwhen_ms = 3\n",
        &[
            "line 10, column 1: event[1].when_ms",
            "expected one of at_ms, do, mw",
        ],
    );
}

#[test]
fn board_name_that_would_put_text_into_exported_source() {
    let d = scratch("name");
    let board = board_text_for_copy(Path::new(&red_board()));
    let name_line = board.lines().find(|l| l.starts_with("name")).unwrap();
    std::fs::write(
        d.join("b.toml"),
        board.replace(name_line, "name = \"x`\\npub fn evil() {}\\n//\""),
    )
    .unwrap();
    let out = d.join("x.rs");
    let (ok, text) = diodestat(&[
        "export",
        d.join("b.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains(": name = \"x`"), "{text}");
    assert!(text.contains("letters, digits, space"), "{text}");
    assert!(!out.exists());
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn output_conflicts_are_refused_before_the_run() {
    let d = scratch("conflicts");
    let board = d.join("board.toml");
    std::fs::write(&board, board_text_for_copy(Path::new(&red_board()))).unwrap();
    let before = std::fs::read_to_string(&board).unwrap();
    // --out naming the input file.
    let (ok, text) = diodestat(&[
        "export",
        board.to_str().unwrap(),
        "--out",
        board.to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(
        text.contains("--out") && text.contains("names the input file"),
        "{text}"
    );
    assert_eq!(std::fs::read_to_string(&board).unwrap(), before);
    // An output folder that exists as a file.
    let (ok, text) = diodestat(&[
        "campaign",
        board.to_str().unwrap(),
        "--out",
        board.to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains("exists as a file"), "{text}");
    assert_eq!(std::fs::read_to_string(&board).unwrap(), before);
    // Two boards that map to one output folder.
    let other = d.join("other.toml");
    std::fs::write(&other, board_text_for_copy(Path::new(&red_board()))).unwrap();
    let (ok, text) = diodestat(&[
        "loop-report",
        board.to_str().unwrap(),
        other.to_str().unwrap(),
        "--out",
        d.join("o").to_str().unwrap(),
    ]);
    assert!(!ok);
    assert!(text.contains("both map to this folder"), "{text}");
    assert!(!d.join("o").exists());
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_failed_run_leaves_the_previous_report_whole() {
    let d = scratch("atomic");
    let s = scenario(&d, "", ENABLE);
    let out = d.join("out");
    let (ok, text) = diodestat(&["run", s.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert!(ok, "{text}");
    let trace = std::fs::read_to_string(out.join("trace.csv")).unwrap();
    // The second run cannot put its plot in place: a folder stands there.
    std::fs::remove_file(out.join("plot.svg")).unwrap();
    std::fs::create_dir_all(out.join("plot.svg")).unwrap();
    std::fs::write(
        &s,
        std::fs::read_to_string(&s)
            .unwrap()
            .replace("duration_ms = 20", "duration_ms = 30"),
    )
    .unwrap();
    let (ok, text) = diodestat(&["run", s.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert!(!ok, "{text}");
    assert_eq!(
        std::fs::read_to_string(out.join("trace.csv")).unwrap(),
        trace
    );
    // No temporary is left behind.
    let names: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        names.len(),
        4,
        "trace, plot and the two summaries only: {names:?}"
    );
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn every_shipped_scenario_passes_the_checks() {
    for dir in std::fs::read_dir(root().join("examples")).unwrap() {
        let dir = dir.unwrap().path();
        // examples/modules holds module files, not scenarios.
        if dir.ends_with("modules") {
            continue;
        }
        for f in std::fs::read_dir(&dir).unwrap() {
            let f = f.unwrap().path();
            if f.extension().is_none_or(|e| e != "toml") || f.ends_with("board.toml") {
                continue;
            }
            let text = std::fs::read_to_string(&f).unwrap();
            let sc = diodestat_sim::scenario::parse(&text)
                .unwrap_or_else(|e| panic!("{}: {e}", f.display()));
            let b = diodestat_sim::board_file::load_board(&sc.board_path(&f)).unwrap();
            diodestat_sim::scenario::check_for_board(&sc, &text, b.config.tick_hz, &b.module)
                .unwrap_or_else(|e| panic!("{}: {e}", f.display()));
        }
    }
}
