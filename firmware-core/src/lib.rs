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
//! It never reads a clock or a register. Hardware meets it only in [`edge`],
//! behind embedded-hal 1.0 traits.
//!
//! **Safety.** Firmware protection complements, never replaces, a hardware
//! current limit, interlock gating of the enable line, an independent
//! watchdog and eye protection. Follow IEC 60825-1, local regulations and
//! your site's laser safety officer.
//!
//! Where to look:
//! - the state machine and the tick sequence: [`controller`];
//! - the power loop: [`apc`];
//! - every protection, its limit, debounce and arming: [`protect`];
//! - the configuration and each reason it is refused: [`config`];
//! - the fault log and its reader: [`fault`]; the latch across a reset:
//!   [`persist`], kept in flash by [`store`]; requests from thread mode to
//!   the tick: [`mailbox`].
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
//! ctl.request(Request::SetPowerMw(Fx::from_num(5))).unwrap();
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

pub mod apc;
pub mod config;
pub mod controller;
pub mod edge;
pub mod example;
pub mod fault;
pub mod io;
pub mod mailbox;
pub mod persist;
pub mod protect;
pub mod request;
pub mod store;
pub mod temp_table;
pub mod units;

pub use config::{Config, ConfigError, ValidConfig};
pub use controller::Controller;
pub use fault::{Fault, FaultLog, FaultRecord, FaultSet};
pub use io::{Drive, Mode, Sample, State, Status, Warnings};
pub use request::{Rejection, Request};
pub use temp_table::TempPoint;
pub use units::{Fx, Gain};
