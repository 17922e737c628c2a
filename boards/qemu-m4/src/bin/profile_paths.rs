//! The profiling image for `boards/profile-step.sh`: brings the demo
//! controller to regulation against the plant, records a block of
//! regulating samples and a block of latched samples (current source stuck
//! high) and the one step that trips on it, then replays each block on a
//! clone of its controller several times (the trip step `BLOCK × REPLAYS`
//! times, so that every path is counted over the same number of steps), each replay between two calls of a marker function. The script
//! traces the markers with `step`, so it can count the instructions of each
//! path alone. Prints nothing but the closing line; exits with failure if
//! the scenario did not reach the paths.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use core::hint::black_box;
use core::panic::PanicInfo;

use cortex_m_rt::entry;
use cortex_m_semihosting::{debug, hprintln};
use diodestat_core::{example, Controller, Fx, State};
use diodestat_qemu::checks::Checks;
use diodestat_qemu::cost::NoSnapshots;
use diodestat_qemu::plant::{Plant, PlantParams};
use diodestat_qemu::rig::{Recording, Rig};
use diodestat_qemu::scenario;

/// Samples per block.
const BLOCK: usize = 200;
/// Replays of each block.
const REPLAYS: u32 = 10;

#[panic_handler]
fn panic(info: &PanicInfo) -> ! {
    hprintln!("panic: {}", info);
    debug::exit(debug::EXIT_FAILURE);
    loop {
        cortex_m::asm::wfi();
    }
}

/// Start of the replays of a path (`path` 0: regulating, 1: latched, 2:
/// the fault trip).
#[inline(never)]
fn diodestat_profile_begin(path: u32) {
    // The two markers must differ, or they are folded into one.
    black_box(path | 0x100);
}

/// End of the replays of a path.
#[inline(never)]
fn diodestat_profile_end(path: u32) {
    black_box(path | 0x200);
}

fn replay<const N: usize>(path: u32, rec: &Recording<N>) -> bool {
    let Some(start) = rec.start.as_ref() else {
        return false;
    };
    diodestat_profile_begin(path);
    for _ in 0..REPLAYS * (BLOCK / N) as u32 {
        let mut ctl: Controller = start.clone();
        let ctl = black_box(&mut ctl);
        for s in &rec.samples {
            black_box(ctl.step(black_box(s)));
        }
    }
    diodestat_profile_end(path);
    true
}

#[entry]
fn main() -> ! {
    let mut c = Checks::new();
    let ok = match example::config().validate() {
        Ok(valid) => {
            let mut rig: Rig<NoSnapshots> =
                Rig::new(Controller::new(valid), Plant::new(PlantParams::DEMO));
            let mut reg: Recording<BLOCK> = Recording::new();
            let mut latched: Recording<BLOCK> = Recording::new();
            let mut trip: Recording<1> = Recording::new();
            // Power-up samples first: enable needs one.
            rig.run(10);
            let started = scenario::start(&mut rig, &mut c, Fx::from_num(5));
            rig.run(200);
            rig.record(&mut reg);
            let regulating = started && rig.ctl.state() == State::Regulating;
            rig.plant.faults.source_stuck_ua = Some(56_000);
            rig.record(&mut trip);
            let tripped = rig.ctl.state() == State::Latched;
            rig.record(&mut latched);
            let held = rig.ctl.state() == State::Latched;
            regulating
                && tripped
                && held
                && replay(0, &reg)
                && replay(1, &latched)
                && replay(2, &trip)
        }
        Err(_) => false,
    };
    hprintln!("profile-paths: {}", if ok { "done" } else { "FAILED" });
    debug::exit(if ok {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    });
    loop {
        cortex_m::asm::wfi();
    }
}
