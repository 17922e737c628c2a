//! # diodestat-qemu
//!
//! `diodestat-core` on emulated Cortex-M: a fixed-point plant ([`plant`]),
//! the closed loop around `Controller::step` ([`rig`]), the scenario and its
//! checks ([`scenario`], [`checks`]), and instruction counting under QEMU
//! `-icount shift=0` ([`stopwatch`], [`cost`], [`report`]).
//!
//! The binaries of this package: `qemu-m4` (the full check on mps2-an386),
//! `prove-no-panic` (the control path linked against a panic handler that
//! cannot link) and `rt-baseline` (the same image without the controller,
//! for the size report). `boards/qemu-m0` uses this library for its
//! Cortex-M0 loop check. See `docs/firmware.md`.
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![deny(clippy::float_arithmetic)]

pub mod checks;
pub mod cost;
pub mod plant;
pub mod report;
pub mod rig;
pub mod scenario;
pub mod stopwatch;
