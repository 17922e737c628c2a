//! Instruction counting under QEMU `-icount shift=0`.
//!
//! With `shift=0` every emulated instruction advances emulated time by 1 ns.
//! SysTick, clocked from the processor clock (25 MHz on mps2-an386), then
//! decrements once per 40 instructions. [`Stopwatch::calibrate`] measures
//! that ratio instead of assuming it: it times `cortex_m::asm::delay` for two
//! lengths whose difference is a known number of instructions (the loop is
//! `subs; bne`, two instructions per iteration).
//!
//! A single reading has a resolution of one SysTick count; the callers get
//! finer resolution by timing many repetitions (see [`crate::cost`]).
//!
//! QEMU is not cycle-accurate: these are instructions executed, not CPU
//! cycles (no wait states, pipeline or bus timing).

use cortex_m::peripheral::syst::SystClkSource;
use cortex_m::peripheral::{DCB, DWT, SYST};

/// SysTick is 24 bits wide.
const MASK: u32 = 0x00FF_FFFF;

/// Delay loop lengths for calibration (iterations of `subs; bne`).
const CAL_SHORT: u32 = 1_000;
const CAL_LONG: u32 = 1_001_000;

/// SysTick as a free-running down-counter, with its measured ratio of
/// instructions per count.
#[derive(Debug)]
pub struct Stopwatch {
    /// Instructions timed during calibration.
    cal_instructions: u32,
    /// SysTick counts they took.
    cal_counts: u32,
}

/// What [`Stopwatch::probe_dwt`] found.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DwtProbe {
    /// The DWT reports no cycle counter.
    Absent,
    /// The counter exists but did not advance across a delay loop.
    Frozen,
    /// The counter advanced by this much across the calibration loop.
    Counts(u32),
}

impl Stopwatch {
    /// Start SysTick from the processor clock, free running, no interrupt.
    pub fn start(mut syst: SYST) -> Self {
        syst.disable_interrupt();
        syst.set_clock_source(SystClkSource::Core);
        syst.set_reload(MASK);
        syst.clear_current();
        syst.enable_counter();
        // SYST is dropped here; the counter keeps running and
        // `SYST::get_current` needs no handle.
        let mut sw = Stopwatch {
            cal_instructions: 0,
            cal_counts: 0,
        };
        sw.calibrate();
        sw
    }

    /// The counter now (counts down).
    #[inline(always)]
    pub fn now() -> u32 {
        SYST::get_current()
    }

    /// Counts from `start` to `end` (both from [`Stopwatch::now`]); valid for
    /// intervals under 2^24 counts.
    #[inline(always)]
    pub fn counts(start: u32, end: u32) -> u32 {
        start.wrapping_sub(end) & MASK
    }

    fn time_delay(iterations: u32) -> u32 {
        let t0 = Self::now();
        // `delay(n)` runs n + 1 iterations of a two-instruction loop.
        cortex_m::asm::delay(iterations);
        let t1 = Self::now();
        Self::counts(t0, t1)
    }

    /// Measure instructions per SysTick count from two delay loops; the
    /// difference cancels the call and read overhead.
    pub fn calibrate(&mut self) {
        let short = Self::time_delay(CAL_SHORT);
        let long = Self::time_delay(CAL_LONG);
        self.cal_instructions = 2 * (CAL_LONG - CAL_SHORT);
        self.cal_counts = long.saturating_sub(short);
    }

    /// Instructions and counts measured by the calibration.
    pub fn calibration(&self) -> (u32, u32) {
        (self.cal_instructions, self.cal_counts)
    }

    /// Instructions per count, times 100 (4000 means 40.00).
    pub fn instructions_per_count_x100(&self) -> u32 {
        if self.cal_counts == 0 {
            return 0;
        }
        let x = u64::from(self.cal_instructions) * 100 / u64::from(self.cal_counts);
        u32::try_from(x).unwrap_or(u32::MAX)
    }

    /// Convert `counts` into instructions, times `scale` (to keep fractions
    /// when the counts cover `scale` repetitions). Saturates.
    pub fn instructions_x(&self, counts: u32, scale: u32) -> u64 {
        if self.cal_counts == 0 {
            return 0;
        }
        u64::from(counts) * u64::from(self.cal_instructions) * u64::from(scale)
            / u64::from(self.cal_counts)
    }

    /// Whether the DWT cycle counter works on this machine: enable it and
    /// see whether it advances across the long calibration loop.
    #[cfg(not(armv6m))]
    pub fn probe_dwt(dcb: &mut DCB, dwt: &mut DWT) -> DwtProbe {
        if !DWT::has_cycle_counter() {
            return DwtProbe::Absent;
        }
        dcb.enable_trace();
        dwt.enable_cycle_counter();
        let c0 = DWT::cycle_count();
        cortex_m::asm::delay(CAL_LONG);
        let c1 = DWT::cycle_count();
        match c1.wrapping_sub(c0) {
            0 => DwtProbe::Frozen,
            n => DwtProbe::Counts(n),
        }
    }

    /// ARMv6-M has no DWT cycle counter.
    #[cfg(armv6m)]
    pub fn probe_dwt(_dcb: &mut DCB, _dwt: &mut DWT) -> DwtProbe {
        DwtProbe::Absent
    }
}
