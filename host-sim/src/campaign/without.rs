//! One protection switched off for a campaign (`diodestat campaign
//! --without NAME`): the board's configuration altered so that the named
//! protection cannot trip within the campaign's runs, everything else as
//! configured. Comparing such a campaign with the board's own shows which
//! single faults that protection must catch for the product to stay in
//! its class (`campaign-needs`, `needs.rs`).
//!
//! A protection is switched off through the configuration the core runs
//! with, never by editing the core:
//!
//! | protection | how |
//! |---|---|
//! | `overcurrent`, `monitor-runaway` | the channel's configured ADC range is doubled and the trip set half way between the real and the doubled full scale: the board's converter never reads that much, so the condition is never present |
//! | `drive-mismatch` | the tolerance set above the current-sense full scale plus the absolute current limit: no sensed current differs from any command by that much |
//! | `monitor-loss`, `over-temperature` | the debounce set to 65 535 ticks; the campaign refuses a run that lasts that long (the condition could then trip) |
//! | `power-implausible` | the plausibility check removed (refused on a board that has none) |
//!
//! The altered configuration passes the core's own validation; its
//! fingerprint, not the board's, is the one the campaign's record carries.
//! This is an analysis of the design, never a configuration to ship.

use diodestat_core::{Config, Fault, Fx, Gain, ValidConfig};

/// The protections a campaign can switch off, in report order.
pub const SWITCHABLE: [Fault; 6] = [
    Fault::Overcurrent,
    Fault::MonitorRunaway,
    Fault::DriveMismatch,
    Fault::MonitorLoss,
    Fault::OverTemperature,
    Fault::PowerImplausible,
];

/// Debounce, ticks, that holds a tick-speed protection off for a run
/// shorter than it.
pub const HOLD_TICKS: u16 = u16::MAX;

/// Why a protection cannot be switched off for this campaign.
#[derive(Clone, Debug, PartialEq)]
pub enum WithoutError {
    /// The name is not one of [`SWITCHABLE`].
    Unknown {
        /// The name given.
        name: String,
    },
    /// The board does not configure that protection.
    NotConfigured {
        /// The protection.
        name: &'static str,
    },
    /// The core refused the altered configuration.
    Refused {
        /// The protection.
        name: &'static str,
        /// The core's reason.
        why: String,
    },
    /// A run of the selection lasts as long as the debounce that holds
    /// the protection off.
    RunTooLong {
        /// The protection.
        name: &'static str,
        /// The hold, s.
        hold_s: f64,
        /// The longest run of the selection, s.
        run_s: f64,
    },
}

/// The names [`SWITCHABLE`] accepts, comma-separated.
pub fn names() -> String {
    SWITCHABLE
        .iter()
        .map(|f| f.name())
        .collect::<Vec<_>>()
        .join(", ")
}

impl std::fmt::Display for WithoutError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            WithoutError::Unknown { name } => write!(
                f,
                "--without {name:?}: not a protection the campaign can switch off (one of: {})",
                names()
            ),
            WithoutError::NotConfigured { name } => write!(
                f,
                "--without {name}: the board does not configure this protection, there is nothing to switch off"
            ),
            WithoutError::Refused { name, why } => write!(
                f,
                "--without {name}: the core refuses the configuration with it switched off: {why}"
            ),
            WithoutError::RunTooLong { name, hold_s, run_s } => write!(
                f,
                "--without {name}: the protection is held off for {hold_s:.3} s ({HOLD_TICKS} ticks) but a run of this selection lasts up to {run_s:.3} s: give a shorter --slow-bound-s"
            ),
        }
    }
}

impl std::error::Error for WithoutError {}

/// A configuration with one protection switched off.
#[derive(Clone, Debug)]
pub struct Switched {
    /// The protection.
    pub fault: Fault,
    /// The altered configuration.
    pub cfg: ValidConfig,
    /// For a protection held off by its debounce, the hold, ticks.
    pub hold_ticks: Option<u16>,
}

/// How `fault` is switched off, for reports.
pub fn how(fault: Fault) -> &'static str {
    match fault {
        Fault::Overcurrent => {
            "current-sense range doubled in the configuration, trip at 1.5 times the real full scale (never read)"
        }
        Fault::MonitorRunaway => {
            "monitor range doubled in the configuration, trip at 1.5 times the real full scale (never read)"
        }
        Fault::DriveMismatch => {
            "tolerance above the sense full scale plus the absolute current limit (never exceeded)"
        }
        Fault::MonitorLoss | Fault::OverTemperature => {
            "debounce 65 535 ticks, longer than every run of the campaign"
        }
        Fault::PowerImplausible => "plausibility check removed",
        _ => "not switchable",
    }
}

fn to_f64(g: Gain) -> f64 {
    g.to_num::<f64>()
}

fn fx(v: f64) -> Fx {
    Fx::saturating_from_num(v)
}

/// Full scale of an ADC channel as configured, engineering units.
fn full_scale(cal: &diodestat_core::AdcCal) -> f64 {
    f64::from(i32::from(cal.full_scale_counts) - cal.offset_counts) * to_f64(cal.units_per_count)
}

/// Double a channel's configured range; the new full scale, engineering
/// units. The board's converter still reads at most its own full scale.
fn widen(cal: &mut diodestat_core::AdcCal) -> f64 {
    cal.full_scale_counts = cal
        .full_scale_counts
        .saturating_mul(2)
        .max(cal.full_scale_counts);
    full_scale(cal)
}

/// `cfg` with the protection `name` switched off.
pub fn switch_off(cfg: &ValidConfig, name: &str) -> Result<Switched, WithoutError> {
    let fault = SWITCHABLE
        .into_iter()
        .find(|f| f.name() == name)
        .ok_or_else(|| WithoutError::Unknown { name: name.into() })?;
    let mut c: Config = cfg.config().clone();
    let mut hold_ticks = None;
    match fault {
        Fault::Overcurrent => {
            let real = full_scale(&c.calibration.current_sense);
            let wide = widen(&mut c.calibration.current_sense);
            let trip = fx(0.5 * (real + wide));
            if trip.to_num::<f64>() <= real {
                return Err(WithoutError::Refused {
                    name: fault.name(),
                    why: "the current-sense range cannot be widened".into(),
                });
            }
            c.protection.overcurrent_iu = trip;
            c.current.absolute_max_iu = c.current.absolute_max_iu.max(trip);
        }
        Fault::MonitorRunaway => {
            let real = full_scale(&c.calibration.monitor);
            let wide = widen(&mut c.calibration.monitor);
            let trip = fx(0.5 * (real + wide));
            if trip.to_num::<f64>() <= real {
                return Err(WithoutError::Refused {
                    name: fault.name(),
                    why: "the monitor range cannot be widened".into(),
                });
            }
            c.protection.runaway_ou = trip;
        }
        Fault::DriveMismatch => {
            let sense = full_scale(&c.calibration.current_sense);
            let limit = c.current.absolute_max_iu.to_num::<f64>();
            c.protection.mismatch_tolerance_iu = fx(sense + limit + 1.0);
        }
        Fault::MonitorLoss => {
            c.protection.monitor_loss_debounce = HOLD_TICKS;
            hold_ticks = Some(HOLD_TICKS);
        }
        Fault::OverTemperature => {
            c.protection.over_temp_debounce = HOLD_TICKS;
            hold_ticks = Some(HOLD_TICKS);
        }
        Fault::PowerImplausible => {
            if c.plausibility.take().is_none() {
                return Err(WithoutError::NotConfigured { name: fault.name() });
            }
        }
        _ => return Err(WithoutError::Unknown { name: name.into() }),
    }
    let cfg = c.validate().map_err(|e| WithoutError::Refused {
        name: fault.name(),
        why: e.to_string(),
    })?;
    Ok(Switched {
        fault,
        cfg,
        hold_ticks,
    })
}

impl Switched {
    /// Refuse a selection whose longest run (`run_ms`) could last as long
    /// as the debounce hold at the board's tick rate.
    pub fn check_run(&self, run_ms: f64) -> Result<(), WithoutError> {
        let Some(hold) = self.hold_ticks else {
            return Ok(());
        };
        let hold_s = f64::from(hold) / f64::from(self.cfg.config().tick_hz);
        let run_s = run_ms * 1e-3;
        if run_s >= hold_s {
            return Err(WithoutError::RunTooLong {
                name: self.fault.name(),
                hold_s,
                run_s,
            });
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> ValidConfig {
        crate::board_file::load_board(std::path::Path::new(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../examples/demo-pump-5w/board.toml"
        )))
        .expect("shipped board")
        .valid
    }

    #[test]
    fn unknown_names_are_refused_with_the_list() {
        let e = switch_off(&demo(), "runaway").unwrap_err();
        let text = e.to_string();
        assert!(text.contains("\"runaway\""), "{text}");
        for f in SWITCHABLE {
            assert!(text.contains(f.name()), "{text}");
        }
        // A protection of the core that a campaign cannot switch off.
        assert!(matches!(
            switch_off(&demo(), "interlock-open"),
            Err(WithoutError::Unknown { .. })
        ));
    }

    #[test]
    fn the_trips_move_beyond_what_the_board_reads() {
        let cfg = demo();
        let c = cfg.config();
        let mon = full_scale(&c.calibration.monitor);
        let sense = full_scale(&c.calibration.current_sense);
        let s = switch_off(&cfg, "monitor-runaway").unwrap();
        assert!(s.cfg.config().protection.runaway_ou.to_num::<f64>() > mon);
        // Only the trip and the range changed: the calibration gain is the
        // board's, so every reading is the same.
        assert_eq!(
            s.cfg.config().calibration.monitor.units_per_count,
            c.calibration.monitor.units_per_count
        );
        let s = switch_off(&cfg, "overcurrent").unwrap();
        assert!(s.cfg.config().protection.overcurrent_iu.to_num::<f64>() > sense);
        let s = switch_off(&cfg, "drive-mismatch").unwrap();
        assert!(
            s.cfg
                .config()
                .protection
                .mismatch_tolerance_iu
                .to_num::<f64>()
                > sense + c.current.ceiling_iu.to_num::<f64>()
        );
        assert_ne!(s.cfg.fingerprint(), cfg.fingerprint());
    }

    #[test]
    fn a_debounce_hold_refuses_runs_as_long_as_itself() {
        let s = switch_off(&demo(), "monitor-loss").unwrap();
        let hz = f64::from(s.cfg.config().tick_hz);
        let hold_ms = f64::from(HOLD_TICKS) / hz * 1e3;
        assert!(s.check_run(hold_ms - 1.0).is_ok());
        assert!(matches!(
            s.check_run(hold_ms),
            Err(WithoutError::RunTooLong { .. })
        ));
        // A trip moved out of reach needs no bound.
        let s = switch_off(&demo(), "monitor-runaway").unwrap();
        assert!(s.check_run(1e9).is_ok());
    }

    #[test]
    fn plausibility_is_removed_or_refused_where_absent() {
        let s = switch_off(&demo(), "power-implausible").unwrap();
        assert!(s.cfg.config().plausibility.is_none());
        let mut c = demo().config().clone();
        c.plausibility = None;
        let bare = c.validate().unwrap();
        assert!(matches!(
            switch_off(&bare, "power-implausible"),
            Err(WithoutError::NotConfigured { .. })
        ));
    }
}
