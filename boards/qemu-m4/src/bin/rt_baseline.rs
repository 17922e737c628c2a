//! The `prove-no-panic` image without the controller: the same start-up,
//! volatile inputs and outputs and loop. `boards/size-report.sh` subtracts
//! its size from `prove-no-panic` to give the size of the core alone.
#![no_std]
#![no_main]
#![deny(unsafe_code)]

use core::panic::PanicInfo;

use cortex_m_rt::entry;

extern "C" {
    /// Defined nowhere, as in `prove-no-panic`.
    fn diodestat_panic_reachable() -> !;
}

#[panic_handler]
#[allow(unsafe_code)]
fn panic(_: &PanicInfo) -> ! {
    // SAFETY: never linked; see `prove-no-panic`.
    unsafe { diodestat_panic_reachable() }
}

static mut INPUT: [u32; 8] = [0; 8];
static mut OUTPUT: [u32; 4] = [0; 4];

#[entry]
#[allow(unsafe_code)]
fn main() -> ! {
    loop {
        // SAFETY: volatile accesses to aligned, initialised statics;
        // single-threaded.
        unsafe {
            let v = core::ptr::read_volatile(&raw const INPUT[0]);
            core::ptr::write_volatile(&raw mut OUTPUT[0], v);
        }
    }
}
