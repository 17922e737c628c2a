//! Shared helpers of the command-line tests: the repository root, running
//! the `diodestat` binary, and a shipped board file's text for a copy
//! outside `examples/`. Each test file uses some of them.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The repository root (canonical, so paths in messages read cleanly).
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("..")
        .canonicalize()
        .unwrap()
}

/// Run `diodestat ARGS` in the repository root.
pub fn diodestat_output(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_diodestat"))
        .args(args)
        .current_dir(root())
        .output()
        .unwrap()
}

/// Run `diodestat ARGS` in the repository root: whether it succeeded, and
/// its standard output followed by its standard error.
pub fn diodestat(args: &[&str]) -> (bool, String) {
    let out = diodestat_output(args);
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    (out.status.success(), text)
}

/// A shipped board file's text for a copy outside `examples/`: its module
/// file named by absolute path (the copy has no `../modules` beside it).
pub fn board_text_for_copy(board: &Path) -> String {
    let modules = root().join("examples/modules");
    std::fs::read_to_string(board)
        .unwrap()
        .replace("\"../modules/", &format!("\"{}/", modules.display()))
}
