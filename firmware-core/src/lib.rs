//! # diodestat-core
//!
//! The control and protection core for laser-diode driver boards: automatic
//! power control (APC) from the monitor photodiode, constant-current mode
//! (ACC), soft start and soft stop, temperature derating, and latched
//! protection. `no_std`, no heap, no floating point, no `unsafe`, no
//! reachable panic.
//!
//! The core is sans-IO: the board hands it one [`Sample`] of raw ADC counts
//! per tick and applies the [`Drive`] it returns (DAC code and enable line).
//! It never reads a clock or a register. Hardware meets it only in
//! [`DriverBoard`], behind embedded-hal 1.0 traits.
//!
//! **Safety.** Firmware protection complements, never replaces, a hardware
//! current limit, interlock gating of the enable line, an independent
//! watchdog and eye protection. Follow IEC 60825-1, local regulations and
//! your site's laser safety officer.
//!
//! Everything a board uses is re-exported here, flat; the modules are
//! private. By use:
//! - start-up: a [`Config`] (its sections [`CurrentLimits`], [`PowerRange`],
//!   [`Ramps`], [`ApcGains`], [`Derating`], [`Protection`], [`Calibration`]
//!   and the optional [`ForwardVoltage`] and [`Plausibility`]) checked once
//!   by [`Config::validate`] into a [`ValidConfig`], or refused with a
//!   [`ConfigError`] that names the field and its value;
//!   [`ValidConfig::fingerprint`] identifies it ([`Fingerprint`]);
//! - every tick: [`Controller::step`] takes a [`Sample`] of raw counts and
//!   returns a [`Drive`]; requests ([`Request`], refused with a
//!   [`Rejection`]) arrive through [`Controller::request`], from thread mode
//!   through a [`Mailbox`];
//! - the hardware edge (embedded-hal 1.0): [`DriverBoard`] around a
//!   [`CurrentDac`] ([`SpiDac`], [`PwmDac`]) and the enable and interlock
//!   pins; every hardware error latches its own fault ([`EdgeError`]);
//! - faults: [`Fault`], [`FaultSet`], the log [`FaultLog`] read through a
//!   [`Cursor`]; the latch across a reset: [`LatchRecord`], kept in flash
//!   by [`LatchStore`];
//! - counts and engineering units: [`Fx`] and [`Gain`], the conversions of
//!   an ADC channel ([`AdcCal::to_units`], [`AdcCal::counts_for`]) and of
//!   the DAC ([`DacCal::code`]), and those of a validated configuration
//!   ([`ValidConfig::monitor_ou`], [`ValidConfig::current_iu`],
//!   [`ValidConfig::supply_vu`], [`ValidConfig::counts_to_degc`],
//!   [`ValidConfig::dac_code`]).
//!
//! Features (all off by default): `defmt` derives `defmt::Format` on every
//! public type; `serde` derives `Serialize` and `Deserialize` on the
//! configuration types (no_std: serde without its default features);
//! `demo` adds `example::config()`, an invented demo configuration for
//! examples, tests and the QEMU images, never for a product.
//!
//! ```
//! use diodestat_core::{Controller, Request, Sample, Fx};
//! # let cfg = diodestat_core::example::config();
//! // `cfg` is a `Config`; validate it once at start-up.
//! let valid = cfg.validate().expect("configuration refused");
//! let mut ctl = Controller::new(valid);
//!
//! // In the tick interrupt: raw counts in, DAC code and enable out.
//! let sample = Sample { tick: 0, monitor_counts: 0, current_counts: 0,
//!                       temp_counts: 2048, supply_counts: 2500, interlock_closed: true,
//!                       forward_counts: None, external_fault: false };
//! let drive = ctl.step(&sample);
//! assert!(!drive.enable);
//!
//! ctl.request(Request::SetPower(Fx::from_num(5))).unwrap();
//! ctl.request(Request::Enable).unwrap();
//! ```
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![deny(missing_debug_implementations)]
#![deny(clippy::float_arithmetic)]
#![cfg_attr(
    not(test),
    deny(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing
    )
)]

mod apc;
mod config;
mod controller;
mod edge;
#[cfg(any(test, feature = "demo"))]
pub mod example;
mod fault;
mod fingerprint;
#[cfg(feature = "serde")]
mod form;
mod io;
mod mailbox;
mod persist;
mod protect;
mod request;
mod store;
mod temp_table;
mod units;

pub use config::{
    debounce_key, debounce_ticks, fast_debounce_max, AdcCal, ApcGains, Calibration, Channel,
    Config, ConfigError, CurrentLimits, DacCal, Derating, DiodePoint, ForwardVoltage, Plausibility,
    PowerRange, Protection, Rail, RampKind, Ramps, TempCal, ValidConfig, DIODE_POINTS,
    FAST_DEBOUNCE_MAX_US, MAX_INTERMITTENT_WEIGHT, TEMP_COVER_MARGIN_DEGC,
};
pub use controller::Controller;
pub use edge::{
    AdcCounts, CurrentDac, DacRangeError, DacWidth, DriverBoard, EdgeError, EdgeErrorOf,
    InterlockLevel, PwmDac, SpiDac, StartError, StartResult,
};
pub use fault::{Cursor, Entry, Fault, FaultLog, FaultRecord, FaultSet, Unread, FAULT_RING_LEN};
pub use fingerprint::Fingerprint;
#[cfg(feature = "serde")]
pub use form::{
    ApcForm, CurrentForm, Decimal, DeratingForm, FormError, PowerForm, ProtectionForm, Quantity,
    RampForm, Written,
};
pub use io::{Drive, Mode, Sample, State, Status, Warnings};
pub use mailbox::{Full, Mailbox, Packed, MESSAGE_WORDS};
pub use persist::{crc32, LatchRecord, RestoreError, LATCH_RECORD_LEN};
pub use protect::{Measurements, SLOW_EVERY};
pub use request::{Rejection, Request};
pub use store::{LatchStore, StoreError, MAX_SLOT_LEN};
pub use temp_table::{TempPoint, TEMP_TABLE_LEN};
pub use units::{Fx, Gain, Units};
