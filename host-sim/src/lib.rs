//! diodestat-sim: the host simulator around the very same `diodestat-core`.
//!
//! It links the firmware core against a physics-based laser diode, current
//! driver, thermal path and sensors ([`plant`]), runs scenarios with
//! injected hardware faults ([`scenario`], [`sim`]) and reports them
//! ([`report`]).
//!
//! **Safety.** Simulation results complement, never replace, a hardware
//! current limit, interlock gating of the enable line, an independent
//! watchdog and eye protection. Follow IEC 60825-1, local regulations and
//! your site's laser safety officer.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod board_file;
pub mod calibration;
pub mod campaign;
pub mod check;
pub mod expect;
pub mod export;
pub mod files;
pub mod fit;
pub mod laser_class;
pub mod liv;
pub mod locate;
pub mod module_file;
pub mod oscillation;
pub mod plant;
pub mod progress;
pub mod report;
pub mod safety;
pub mod scenario;
pub mod sim;
pub mod sim_board;
pub mod stability;
pub mod step_response;
pub mod trace;
pub mod units;
