//! The safety caution every report and command output carries.

/// The safety caution every report carries.
pub const SAFETY_CAUTION: &str = "Simulation results complement, never replace, a hardware current limit, \
interlock gating of the enable line, an independent watchdog and eye protection. Follow IEC 60825-1, \
local regulations and your site's laser safety officer.";
