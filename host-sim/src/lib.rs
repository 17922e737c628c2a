//! diodestat-sim: the host simulator around the very same `diodestat-core`.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod plant;
