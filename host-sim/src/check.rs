//! Scenarios as tests: read and check one scenario file ([`load`]), run it
//! with its expectations ([`Loaded::run`], [`run_file`]; used by
//! `diodestat run`), and a suite of them (`diodestat
//! check`): which files of a folder are scenarios ([`collect`]), the printed
//! table ([`table`]) and JUnit XML for CI ([`junit`]).

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

use crate::board_file::{load_board_from, LoadedBoard};
use crate::expect::{self, Outcome};
use crate::files;
use crate::scenario::{self, Scenario};
use crate::sim::{self, RunResult};

/// A scenario file, run, with the verdicts on its expectations.
pub struct Ran {
    /// The scenario.
    pub scenario: Scenario,
    /// Its board.
    pub board: LoadedBoard,
    /// The run.
    pub result: RunResult,
    /// One verdict per `[[expect]]`, in file order.
    pub outcomes: Vec<Outcome>,
    /// Wall time of the simulation, s.
    pub seconds: f64,
}

/// A scenario file read and checked against its board, not yet run.
pub struct Loaded {
    /// The scenario.
    pub scenario: Scenario,
    /// Its board.
    pub board: LoadedBoard,
    /// Every file the run reads (the scenario, its board file and the
    /// board's table file): an output must not replace one of them.
    pub inputs: Vec<PathBuf>,
    path: PathBuf,
}

/// Read the scenario at `path` and its board (bounded reads) and check
/// every value before anything runs. Errors name the file, the line and
/// the key, or the key a path came from.
pub fn load(path: &Path) -> Result<Loaded, String> {
    let text = files::read_text(path, "SCENARIO").map_err(|e| e.to_string())?;
    let sc = scenario::parse(&text).map_err(|e| format!("{}: {e}", path.display()))?;
    let board_path = sc.board_path(path);
    let board = load_board_from(&board_path, &format!("{}: board", path.display()))
        .map_err(|e| e.to_string())?;
    scenario::check_for_board(&sc, &text, board.config.tick_hz, &board.module)
        .map_err(|e| format!("{}: {e}", path.display()))?;
    let mut inputs = vec![path.to_path_buf(), board_path];
    inputs.extend(board.table_csv.clone());
    inputs.extend(board.module_file.clone());
    Ok(Loaded {
        scenario: sc,
        board,
        inputs,
        path: path.to_path_buf(),
    })
}

impl Loaded {
    /// Run the scenario and evaluate its expectations.
    pub fn run(self) -> Result<Ran, String> {
        self.run_streamed(&mut crate::trace::NoSink)
    }

    /// [`Loaded::run`], handing every recorded trace row to `sink` as the
    /// run makes it (`trace.csv` streamed to disk).
    pub fn run_streamed(self, sink: &mut dyn crate::trace::TraceSink) -> Result<Ran, String> {
        let Loaded {
            scenario: sc,
            board,
            path,
            ..
        } = self;
        let windows = expect::windows(&sc, board.config.tick_hz);
        let t0 = Instant::now();
        let result = sim::run_streamed(
            &sc,
            &board.module,
            board.valid.clone(),
            board.latency,
            windows,
            sink,
        )
        .map_err(|e| format!("{}: {e}", path.display()))?;
        let seconds = t0.elapsed().as_secs_f64();
        let outcomes = expect::evaluate(&sc, &result);
        Ok(Ran {
            scenario: sc,
            board,
            result,
            outcomes,
            seconds,
        })
    }
}

/// Read, check and run the scenario at `path` and evaluate its
/// expectations ([`load`], then [`Loaded::run`]).
pub fn run_file(path: &Path) -> Result<Ran, String> {
    load(path)?.run()
}

/// Deepest folder level [`collect`] descends to.
const MAX_DEPTH: usize = 8;

/// The scenario files named by `paths`: a file is taken as it is; a folder
/// is searched (sorted, down to 8 levels) for `*.toml` files that are
/// scenarios, i.e. that have a top-level `board` key (board and module
/// files have none) or do not parse as TOML at all (so their error is
/// reported, not skipped).
pub fn collect(paths: &[PathBuf]) -> Result<Vec<PathBuf>, String> {
    let mut out = Vec::new();
    for p in paths {
        if p.is_dir() {
            walk(p, 0, &mut out)?;
        } else if p.is_file() {
            out.push(p.clone());
        } else {
            return Err(format!("{}: no such file or folder", p.display()));
        }
    }
    Ok(out)
}

fn walk(dir: &Path, depth: usize, out: &mut Vec<PathBuf>) -> Result<(), String> {
    let mut entries: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| format!("{}: {e}", dir.display()))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            if depth + 1 < MAX_DEPTH && !p.is_symlink() {
                walk(&p, depth + 1, out)?;
            }
        } else if p.extension().is_some_and(|x| x == "toml") && is_scenario(&p) {
            out.push(p);
        }
    }
    Ok(())
}

/// Whether a TOML file in a folder is a scenario (see [`collect`]).
fn is_scenario(p: &Path) -> bool {
    match std::fs::read_to_string(p)
        .ok()
        .and_then(|t| t.parse::<toml::Table>().ok())
    {
        Some(t) => t.contains_key("board"),
        None => true,
    }
}

/// One scenario of a suite.
pub struct Case {
    /// Its file.
    pub file: PathBuf,
    /// Its name, when it parsed.
    pub name: Option<String>,
    /// The verdicts, or why the scenario could not run.
    pub outcome: Result<Vec<Outcome>, String>,
    /// Wall time, s.
    pub seconds: f64,
}

impl Case {
    /// Run the scenario at `file`.
    pub fn run(file: &Path) -> Case {
        let t0 = Instant::now();
        let r = run_file(file);
        let seconds = t0.elapsed().as_secs_f64();
        match r {
            Ok(ran) => Case {
                file: file.to_path_buf(),
                name: Some(ran.scenario.name),
                outcome: Ok(ran.outcomes),
                seconds,
            },
            Err(e) => Case {
                file: file.to_path_buf(),
                name: None,
                outcome: Err(e),
                seconds,
            },
        }
    }

    /// Passed: it ran, states at least one expectation, and every one held.
    pub fn passed(&self) -> bool {
        matches!(&self.outcome, Ok(o) if !o.is_empty() && o.iter().all(|o| o.passed))
    }
}

/// The message of a scenario that states no expectation.
pub const NO_EXPECTATIONS: &str =
    "the scenario states no [[expect]]: a suite needs each scenario to say what it must show";

/// The printed table of a suite: one row per scenario, then every failure
/// with its file and line.
pub fn table(cases: &[Case]) -> String {
    let w = cases
        .iter()
        .map(|c| c.file.display().to_string().chars().count())
        .max()
        .unwrap_or(8)
        .max(8);
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{:<w$}  {:>12}  result  time",
        "scenario", "expectations"
    );
    for c in cases {
        let (count, result) = match &c.outcome {
            Ok(o) => (
                format!(
                    "{}/{} passed",
                    o.iter().filter(|o| o.passed).count(),
                    o.len()
                ),
                if c.passed() { "PASS" } else { "FAIL" },
            ),
            Err(_) => ("-".to_string(), "ERROR"),
        };
        let _ = writeln!(
            s,
            "{:<w$}  {count:>12}  {result:<6}  {:.2} s",
            c.file.display(),
            c.seconds
        );
    }
    for c in cases {
        match &c.outcome {
            Err(e) => {
                let _ = writeln!(s, "ERROR {}: {e}", c.file.display());
            }
            Ok(o) if o.is_empty() => {
                let _ = writeln!(s, "FAIL {}: {NO_EXPECTATIONS}", c.file.display());
            }
            Ok(o) => {
                for x in o.iter().filter(|x| !x.passed) {
                    let _ = writeln!(
                        s,
                        "FAIL {}:{}: expected {}; measured {}",
                        c.file.display(),
                        x.line,
                        x.expected,
                        x.measured
                    );
                }
            }
        }
    }
    let failed = cases.iter().filter(|c| !c.passed()).count();
    let _ = writeln!(
        s,
        "{} scenarios, {} passed, {failed} failed",
        cases.len(),
        cases.len() - failed
    );
    s
}

/// Text escaped for XML attribute values and character data; characters
/// XML 1.0 cannot carry become U+FFFD.
pub fn xml_escape(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&apos;"),
            '\t' | '\n' | '\r' => o.push(ch),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => o.push('\u{FFFD}'),
            c => o.push(c),
        }
    }
    o
}

/// The suite as JUnit XML: one `<testsuite>` per scenario file, one
/// `<testcase>` per expectation with a `<failure>` when it failed; a
/// scenario that could not run is one test case with an `<error>`, one
/// without expectations one with a `<failure>`.
pub fn junit(cases: &[Case]) -> String {
    let mut s = String::from("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let count = |c: &Case| match &c.outcome {
        Ok(o) if o.is_empty() => (1, 1, 0),
        Ok(o) => (o.len(), o.iter().filter(|x| !x.passed).count(), 0),
        Err(_) => (1, 0, 1),
    };
    let (mut tests, mut failures, mut errors, mut time) = (0, 0, 0, 0.0);
    for c in cases {
        let (t, f, e) = count(c);
        tests += t;
        failures += f;
        errors += e;
        time += c.seconds;
    }
    let _ = writeln!(
        s,
        "<testsuites name=\"diodestat check\" tests=\"{tests}\" failures=\"{failures}\" \
         errors=\"{errors}\" time=\"{time:.3}\">"
    );
    for c in cases {
        let (t, f, e) = count(c);
        let file = xml_escape(&c.file.display().to_string());
        let _ = writeln!(
            s,
            "  <testsuite name=\"{file}\" tests=\"{t}\" failures=\"{f}\" errors=\"{e}\" \
             skipped=\"0\" time=\"{:.3}\">",
            c.seconds
        );
        let class = xml_escape(c.name.as_deref().unwrap_or(&c.file.display().to_string()));
        match &c.outcome {
            Err(err) => {
                let _ = writeln!(
                    s,
                    "    <testcase classname=\"{class}\" name=\"run\" time=\"{:.3}\">\n      \
                     <error message=\"the scenario could not run\" type=\"error\">{}</error>\n    \
                     </testcase>",
                    c.seconds,
                    xml_escape(err)
                );
            }
            Ok(o) if o.is_empty() => {
                let _ = writeln!(
                    s,
                    "    <testcase classname=\"{class}\" name=\"expectations\" time=\"0\">\n      \
                     <failure message=\"no expectations\" type=\"expectation\">{}</failure>\n    \
                     </testcase>",
                    xml_escape(NO_EXPECTATIONS)
                );
            }
            Ok(o) => {
                for x in o {
                    let name = xml_escape(&format!("line {}: {}", x.line, x.name));
                    if x.passed {
                        let _ = writeln!(
                            s,
                            "    <testcase classname=\"{class}\" name=\"{name}\" time=\"0\"/>"
                        );
                    } else {
                        let _ = writeln!(
                            s,
                            "    <testcase classname=\"{class}\" name=\"{name}\" time=\"0\">\n      \
                             <failure message=\"{}\" type=\"expectation\">{}</failure>\n    \
                             </testcase>",
                            xml_escape(&format!("measured {}", x.measured)),
                            xml_escape(&format!(
                                "{}:{}: expected {}; measured {}",
                                c.file.display(),
                                x.line,
                                x.expected,
                                x.measured
                            ))
                        );
                    }
                }
            }
        }
        let _ = writeln!(s, "  </testsuite>");
    }
    s.push_str("</testsuites>\n");
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    proptest::proptest! {
        /// Escaped text holds no markup character and no character XML 1.0
        /// refuses, and unescaping the five entities gives the text back
        /// (control characters aside).
        #[test]
        fn escaped_text_is_plain_xml_character_data(s in "\\PC*|[<>&\"'\\x00-\\x1f]*") {
            let e = xml_escape(&s);
            proptest::prop_assert!(!e.contains('<') && !e.contains('>') && !e.contains('"'));
            proptest::prop_assert!(e
                .chars()
                .all(|c| (c as u32) >= 0x20 || matches!(c, '\t' | '\n' | '\r')));
            let back = e
                .replace("&lt;", "<")
                .replace("&gt;", ">")
                .replace("&quot;", "\"")
                .replace("&apos;", "'")
                .replace("&amp;", "&");
            let plain: String = s
                .chars()
                .map(|c| {
                    if (c as u32) < 0x20 && !matches!(c, '\t' | '\n' | '\r') {
                        '\u{FFFD}'
                    } else {
                        c
                    }
                })
                .collect();
            proptest::prop_assert_eq!(back, plain);
        }
    }
}
