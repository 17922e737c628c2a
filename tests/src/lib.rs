//! Shared helpers for the cross-crate tests: the Python cross-check
//! scripts in `tests/scripts/` (scipy, python-control), run on JSON in and
//! JSON out.

use std::path::PathBuf;
use std::process::Command;

/// Whether `python3` can `import` every module of `modules` (a Python
/// import list, e.g. `"control, scipy"`).
pub fn python_has(modules: &str) -> bool {
    Command::new("python3")
        .args(["-c", &format!("import {modules}")])
        .output()
        .is_ok_and(|o| o.status.success())
}

/// Run `tests/scripts/<script> INPUT OUTPUT` with `input` (JSON text) in a
/// scratch folder and return the JSON text it writes. Panics with the
/// script's standard error when it fails.
pub fn run_script(script: &str, input: &str) -> String {
    let nanos = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_nanos());
    let dir = std::env::temp_dir().join(format!(
        "diodestat-{}-{}-{nanos}",
        script.trim_end_matches(".py"),
        std::process::id()
    ));
    std::fs::create_dir_all(&dir).expect("create scratch dir");
    let (in_path, out_path) = (dir.join("input.json"), dir.join("output.json"));
    std::fs::write(&in_path, input).expect("write the script's input");
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("scripts")
        .join(script);
    let run = Command::new("python3")
        .arg(&path)
        .arg(&in_path)
        .arg(&out_path)
        .output()
        .expect("run python3");
    assert!(
        run.status.success(),
        "{} failed:\n{}",
        path.display(),
        String::from_utf8_lossy(&run.stderr)
    );
    let out = std::fs::read_to_string(&out_path).expect("read the script's output");
    let _ = std::fs::remove_dir_all(&dir);
    out
}
