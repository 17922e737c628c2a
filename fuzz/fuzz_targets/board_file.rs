//! Fuzz target: board files. Any text either loads (and then exports to
//! source whose fingerprint line and name comment are intact) or is refused with a
//! message; never a panic, a hang or unbounded memory.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    // Files a board names are looked up under a folder that does not exist.
    match diodestat_sim::board_file::parse_board(text, Path::new("fuzz-no-such-folder")) {
        Ok(b) => {
            assert!(diodestat_sim::board_file::name_is_plain(&b.name));
            let src = diodestat_sim::export::rust_module(&b.name, &b.valid);
            assert_eq!(src.lines().next().map(|l| l.starts_with("//! ")), Some(true));
            assert!(src.contains(&format!("Fingerprint::from_u64(0x{})", b.valid.fingerprint())));
        }
        Err(e) => {
            let msg = e.to_string();
            assert!(!msg.is_empty());
        }
    }
});
