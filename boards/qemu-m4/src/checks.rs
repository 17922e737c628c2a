//! Pass/fail bookkeeping, reported over semihosting.

use core::fmt;

use cortex_m_semihosting::{debug, hprintln};

/// Counts of passed and failed checks.
#[derive(Debug, Default)]
pub struct Checks {
    passed: u32,
    failed: u32,
}

impl Checks {
    /// No checks yet.
    pub const fn new() -> Self {
        Checks {
            passed: 0,
            failed: 0,
        }
    }

    /// Record one check; print it with its detail.
    pub fn check(&mut self, name: &str, ok: bool, detail: fmt::Arguments) {
        if ok {
            self.passed += 1;
            hprintln!("  ok    {}: {}", name, detail);
        } else {
            self.failed += 1;
            hprintln!("  FAIL  {}: {}", name, detail);
        }
    }

    /// Passed checks.
    pub fn passed(&self) -> u32 {
        self.passed
    }

    /// Failed checks.
    pub fn failed(&self) -> u32 {
        self.failed
    }

    /// Whether every check passed (and there was at least one).
    pub fn all_passed(&self) -> bool {
        self.failed == 0 && self.passed > 0
    }
}

/// Print a section heading.
pub fn section(title: &str) {
    hprintln!("== {}", title);
}

/// End the QEMU run through semihosting: exit code 0 when `ok`, 1
/// otherwise (the process exit code of `qemu-system-arm`).
pub fn finish(ok: bool) -> ! {
    debug::exit(if ok {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    });
    loop {
        cortex_m::asm::wfi();
    }
}
