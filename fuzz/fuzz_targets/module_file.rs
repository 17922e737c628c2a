//! Fuzz target: module files. Any text either loads (and then gives a
//! diode model) or is refused with a message; never a panic, a hang or
//! unbounded memory.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match diodestat_sim::module_file::parse_module(text, Path::new("fuzz.toml")) {
        Ok(m) => {
            assert!(diodestat_sim::plant::Diode::new(m.module.diode.clone()).is_ok());
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
});
