//! Relinks when the memory layout changes. `memory.x` (the micro:bit's
//! nRF51: 256 KiB flash, 16 KiB RAM) is found by the linker in this
//! package's directory, the directory cargo links from.

fn main() {
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
}
