//! Fuzz target: L-I-V sweep CSV for `fit`. Any text either parses (and
//! every sweep is then fitted or refused with a message) or is refused
//! with a message; never a panic, a hang or unbounded memory.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match diodestat_sim::fit::parse_sweeps(text, Path::new("fuzz.csv")) {
        Ok(sweeps) => {
            for s in &sweeps {
                assert!(!s.points.is_empty());
                let _ = diodestat_sim::fit::fit_sweep(s, diodestat_sim::fit::KINK_TOL);
            }
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
});
