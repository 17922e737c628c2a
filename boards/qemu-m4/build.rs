//! Relinks when the memory layout changes, and sets `cfg(armv6m)` when the
//! library is built for ARMv6-M (no DWT cycle counter there).
//!
//! `memory.x` is found by the linker in this package's directory (the
//! directory cargo links from, this package being its own workspace); no
//! search path is added, so a board that depends on this library (such as
//! `boards/qemu-m0`) links with its own `memory.x`.

use std::env;

fn main() {
    println!("cargo::rustc-check-cfg=cfg(armv6m)");
    if env::var("TARGET")
        .unwrap_or_default()
        .starts_with("thumbv6m")
    {
        println!("cargo:rustc-cfg=armv6m");
    }
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
}
