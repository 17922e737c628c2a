//! Fuzz target: temperature table files (`counts,degc`). Any text either
//! parses into points whose temperatures lie in the core's fixed-point
//! range, or is refused with a message naming the file and line; never a
//! panic or a hang.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match diodestat_sim::board_file::parse_table_csv(text, Path::new("t.csv")) {
        Ok(points) => {
            for p in points {
                assert!(p.degc.to_num::<f64>().abs() < 32767.0);
            }
        }
        Err(e) => assert!(e.starts_with("t.csv line "), "{e}"),
    }
});
