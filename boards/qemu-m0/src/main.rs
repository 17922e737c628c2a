//! The Cortex-M0 (thumbv6m) image: the core on an ARMv6-M CPU, run on
//! QEMU's micro:bit model (nRF51, 16 KiB RAM). A short loop check: soft
//! start to regulation, a setpoint change, the monitor photodiode and then
//! the interlock opening, requests through the mailbox and the latch across
//! a reset, and the cost of `step` (ARMv6-M has no 64-bit
//! multiply and no divide instruction: those go through `__aeabi_lmul` and
//! `__aeabi_ldivmod`). The SysTick ratio is calibrated as on the M4 (the
//! micro:bit model clocks it at 16 MHz of emulated time: 62.5 instructions
//! per count under `-icount shift=0`).
//!
//! Build and run (from `boards/qemu-m0`): `cargo run --release`.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use core::panic::PanicInfo;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use diodestat_core::{example, Controller};
use diodestat_qemu::checks::{finish, section, Checks};
use diodestat_qemu::cost::NoSnapshots;
use diodestat_qemu::plant::{Plant, PlantParams};
use diodestat_qemu::report;
use diodestat_qemu::rig::{Recording, Rig};
use diodestat_qemu::scenario;
use diodestat_qemu::stopwatch::Stopwatch;

/// Samples per replayed block (small: 16 KiB of RAM).
const BLOCK: usize = 64;

#[panic_handler]
fn panic(info: &PanicInfo) -> ! {
    hprintln!("panic: {}", info);
    finish(false)
}

#[entry]
fn main() -> ! {
    hprintln!("diodestat qemu-m0: diodestat-core on Cortex-M0 (QEMU microbit, -icount shift=0)");
    let mut c = Checks::new();
    let Some(cp) = cortex_m::Peripherals::take() else {
        hprintln!("core peripherals already taken");
        finish(false);
    };
    let sw = Stopwatch::start(cp.SYST);
    let (instr, counts) = sw.calibration();
    let timed = counts > 0;
    if timed {
        hprintln!("  SysTick: {} instructions in {} counts", instr, counts);
    } else {
        hprintln!("  SysTick does not advance on this machine: no cost figures");
    }
    let valid = match example::config().validate() {
        Ok(v) => v,
        Err(e) => {
            hprintln!("demo configuration refused: {}", e);
            finish(false);
        }
    };
    hprintln!(
        "  Controller is {} bytes; demo configuration fingerprint {}",
        core::mem::size_of::<Controller>(),
        valid.fingerprint()
    );
    // No snapshots of the slowest steps: they would not fit in 16 KiB.
    let mut rig: Rig<NoSnapshots> = Rig::new(Controller::new(valid), Plant::new(PlantParams::DEMO));
    scenario::startup_and_regulation(&mut rig, &mut c);
    let mut rec: Recording<BLOCK> = Recording::new();
    rig.record(&mut rec);
    let reg_block = report::block_mean_x10(&sw, &rec);
    scenario::monitor_open(&mut rig, &mut c);
    scenario::interlock_open(&mut rig, &mut c);
    scenario::mailbox_and_reset(&mut rig, &mut c);
    if timed {
        section("cost of Controller::step on Cortex-M0 (instructions per tick)");
        let _ = report::print_table(&sw, &rig.stats, &rig.snapshots, reg_block, None);
        report::print_side_costs(&sw);
    }
    hprintln!("qemu-m0: {} passed, {} failed", c.passed(), c.failed());
    finish(c.all_passed());
}
