//! The power loop in the time domain, on the full nonlinear simulator
//! ([`crate::sim`]: the real core against the diode, driver, thermal path
//! and converters) at each plant corner: a setpoint step down and back up,
//! an ambient step, and a hold with the converter noise switched off to
//! expose limit cycles, quantisation ones included.
//!
//! A corner is simulated by the module with the corner's threshold and
//! slope spread in its diode parameters ([`PlantCorner::diode_params`]) and
//! the corner's aging, tracking-ratio and cooling factors injected at the
//! first tick through the simulator's own fault hooks (aging, monitor
//! degradation, heatsink loss), the same hooks the fault campaign uses.
//!
//! The run, at the corner's setpoint `sp` and the other level (see
//! below):
//!
//! ```text
//!  0        enable at sp (soft start, hand-over to the power loop)
//!  t_away   setpoint sp -> other    measured for window_ms
//!  t_back   setpoint other -> sp    measured for window_ms
//!  t_amb    ambient +ambient_step_c measured for ambient_window_ms
//! ```
//!
//! Figures, all on the true front-facet power (what leaves the module):
//!
//! * **overshoot**: the excursion beyond the final value, in percent of
//!   the step (final minus initial), the usual definition of maximum
//!   percent overshoot (K. Ogata, *Modern Control Engineering*, 5th ed.,
//!   Prentice Hall 2010, sec. 5-3) applied to a step between two levels;
//! * **settling time**: from the setpoint change until the power stays
//!   within ±1 % of its final value (the final value is the mean of the
//!   last tenth of the window); `None` when it is not inside the band by
//!   the end of the window;
//! * **steady-state error**: setpoint minus the mean monitor reading over
//!   the last tenth of the window, in percent of the setpoint (the loop's
//!   own error; the optical power differs further by the monitor's
//!   tracking error, which no loop can see);
//! * **ambient step**: the largest deviation of the power from its value
//!   before the step, in percent, and the time until it stays within ±1 %
//!   of that value again;
//! * **limit cycle**: on a second run with the converter noise off (noise
//!   dithers quantisation cycles away and hides them), the last
//!   `hold_ms` of each steady hold is detrended and its normalised
//!   autocorrelation searched for a periodic peak (≥ 0.5 after the first
//!   zero crossing). A periodic oscillation is a **limit cycle** when its
//!   peak-to-peak amplitude exceeds 2.5 DAC steps of optical power; the
//!   hunting of an integrating loop by one DAC code either side of the
//!   operating point (two steps peak to peak, set by the DAC step and the
//!   monitor ADC count) is reported but not counted, as no loop with an
//!   integrator and quantised converters avoids it (common practice).
//!
//! When the setpoint needs more current than the ceiling in force (the
//! configured ceiling or its derating), the power sits on the ceiling and
//! the loop does not regulate; the step is then marked `on_ceiling` and its
//! overshoot and settling are not judged (the margins report flags the
//! same corners from the operating point).
//!
//! The other level is `sp·(1 - step_fraction)`; when that is below the
//! configuration's lowest setpoint the steps go to `sp·(1 + step_fraction)`
//! instead (capped at the highest setpoint).
//!
//! The linear model predicts these responses at small amplitude;
//! [`small_step_agreement`] compares a small setpoint step of the
//! simulator with it. Both are timed alike: the simulator applies each
//! drive the corner loop's `delay_ticks` after its sample (the board's
//! latency) and filters the continuous monitor signal exactly, so the
//! matching linear loop is the very one the margins are taken on
//! ([`Discretisation::ExactZoh`] with the board's delay).

use crate::units::Scale;
use diodestat_core::{State, ValidConfig};
use rayon::prelude::*;

use crate::plant::{DemoModule, PlantError};
use crate::scenario::{Action, DiodeModel, Event, HwFault, Scenario};
use crate::sim::{self, DacLatency, Happening, RunResult, TraceRow};

use crate::step_response::{on_ceiling, overshoot_pct, settled_from, SETTLING_BAND};

use super::corners::{CornerLoop, PlantCorner};
use super::loop_model::{closed_loop_step_front_with, Discretisation};

pub use crate::oscillation::{detrend, periodicity, LIMIT_CYCLE_MIN_STEPS, PERIODIC_CORRELATION};

/// What the time-domain run does (see the module documentation).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StepPlan {
    /// Step size as a fraction of the corner's setpoint.
    pub step_fraction: f64,
    /// From the start to the first setpoint change, ms.
    pub settle_ms: f64,
    /// Length of each step window, ms.
    pub window_ms: f64,
    /// Ambient step, degC (added to the corner's ambient).
    pub ambient_step_c: f64,
    /// Window after the ambient step, ms.
    pub ambient_window_ms: f64,
    /// Steady stretch searched for limit cycles at the end of each hold, ms.
    pub hold_ms: f64,
    /// Noise seed of the noisy run.
    pub seed: u64,
}

impl StepPlan {
    /// The plan for a board: 20 % steps, 40 ms windows, +10 degC ambient
    /// step watched for 500 ms, 20 ms limit-cycle windows, and a settling
    /// time long enough for the configured emission delay and soft start
    /// to the ceiling plus 50 ms.
    pub fn for_config(cfg: &ValidConfig) -> Self {
        let c = cfg.config();
        let ramp = c.units().ma(c.ramp.soft_start_iu_per_ms);
        let soft_ms = if ramp > 0.0 {
            c.units().ma(c.current.ceiling_iu) / ramp
        } else {
            0.0
        };
        StepPlan {
            step_fraction: 0.2,
            settle_ms: 0.5 + f64::from(c.ramp.emission_delay_ms) + soft_ms + 50.0,
            window_ms: 40.0,
            ambient_step_c: 10.0,
            ambient_window_ms: 500.0,
            hold_ms: 20.0,
            seed: 1,
        }
    }

    fn check(&self) -> Result<(), TimeDomainError> {
        let bad = |what: &'static str, value: f64| {
            Err(TimeDomainError::Plan {
                what,
                value,
                requirement: "positive and finite",
            })
        };
        let pos = |v: f64| v > 0.0 && v.is_finite();
        if !(pos(self.step_fraction) && self.step_fraction < 1.0) {
            return Err(TimeDomainError::Plan {
                what: "step_fraction",
                value: self.step_fraction,
                requirement: "between 0 and 1",
            });
        }
        for (what, v) in [
            ("settle_ms", self.settle_ms),
            ("window_ms", self.window_ms),
            ("ambient_window_ms", self.ambient_window_ms),
            ("hold_ms", self.hold_ms),
        ] {
            if !pos(v) {
                return bad(what, v);
            }
        }
        if !self.ambient_step_c.is_finite() {
            return bad("ambient_step_c", self.ambient_step_c);
        }
        for (what, v) in [("settle_ms", self.settle_ms), ("window_ms", self.window_ms)] {
            if v < 1.0 {
                return Err(TimeDomainError::Plan {
                    what,
                    value: v,
                    requirement: "at least 1 ms",
                });
            }
        }
        if self.hold_ms > self.window_ms.min(self.settle_ms) {
            return Err(TimeDomainError::Plan {
                what: "hold_ms",
                value: self.hold_ms,
                requirement: "no longer than the settling time and the step window",
            });
        }
        Ok(())
    }
}

/// Why a time-domain run could not be made.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum TimeDomainError {
    /// A plant model refused the corner.
    #[error("corner {corner}: {source}")]
    Plant {
        /// Corner name.
        corner: String,
        /// The model's error.
        source: PlantError,
    },
    /// A plan value is out of range.
    #[error("time-domain plan: {what} = {value} must be {requirement}")]
    Plan {
        /// Which value.
        what: &'static str,
        /// Its value.
        value: f64,
        /// What it must be.
        requirement: &'static str,
    },
}

/// Figures of one setpoint step.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StepFigures {
    /// Setpoint before the step, mW.
    pub from_setpoint_mw: f64,
    /// Setpoint after the step, mW.
    pub to_setpoint_mw: f64,
    /// Mean optical power over the 2 ms before the step, mW.
    pub initial_mw: f64,
    /// Mean optical power over the last tenth of the window, mW.
    pub final_mw: f64,
    /// Excursion beyond the final value, % of the step (≥ 0).
    pub overshoot_pct: f64,
    /// Time to stay within ±1 % of the final value, ms.
    pub settling_ms: Option<f64>,
    /// Setpoint minus the mean monitor reading at the end, % of the
    /// setpoint.
    pub error_pct: f64,
    /// The core stayed in regulation through the window.
    pub regulating: bool,
    /// The drive sat on the ceiling over most of the last tenth of the
    /// window: the loop did not regulate.
    pub on_ceiling: bool,
}

/// Figures of the ambient step.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DisturbanceFigures {
    /// Ambient before and after, degC.
    pub from_c: f64,
    /// Ambient after the step, degC.
    pub to_c: f64,
    /// Mean optical power over the 2 ms before the step, mW.
    pub before_mw: f64,
    /// Largest deviation from `before_mw`, % of it.
    pub peak_dev_pct: f64,
    /// Time until the power stays within ±1 % of `before_mw` (0 if it
    /// never left), ms; `None` if still outside at the end of the window.
    pub recovery_ms: Option<f64>,
    /// Setpoint minus the mean monitor reading at the end, % of the
    /// setpoint.
    pub error_pct: f64,
    /// The core stayed in regulation through the window.
    pub regulating: bool,
    /// The drive sat on the ceiling over most of the last tenth of the
    /// window.
    pub on_ceiling: bool,
}

/// A periodic oscillation of the optical power in a steady hold.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Oscillation {
    /// Which hold: "at setpoint", "at the other level", "before the ambient step".
    pub hold: &'static str,
    /// Period, ticks.
    pub period_ticks: usize,
    /// Frequency, Hz.
    pub freq_hz: f64,
    /// Normalised autocorrelation at the period.
    pub correlation: f64,
    /// Peak-to-peak amplitude (detrended), mW.
    pub pp_mw: f64,
    /// Peak-to-peak amplitude, % of the mean power.
    pub pp_pct: f64,
    /// Peak-to-peak amplitude in DAC steps of optical power.
    pub pp_steps: f64,
}

impl Oscillation {
    /// Larger than the one-step hunting of an integrating loop: a limit
    /// cycle.
    pub fn is_limit_cycle(&self) -> bool {
        self.pp_steps > LIMIT_CYCLE_MIN_STEPS
    }
}

/// The time-domain results of one corner.
#[derive(Clone, Debug, PartialEq)]
pub struct CornerResponse {
    /// Corner name.
    pub corner: String,
    /// The step from the setpoint to the other level.
    pub away: StepFigures,
    /// The step back to the setpoint.
    pub back: StepFigures,
    /// The ambient step at the setpoint.
    pub ambient: DisturbanceFigures,
    /// The largest periodic oscillation found in the noise-free holds.
    pub oscillation: Option<Oscillation>,
    /// Optical power of one DAC step at the operating point, mW.
    pub dac_step_mw: f64,
    /// Faults the core latched in either run.
    pub faults: Vec<&'static str>,
    /// State at the end of the noisy run.
    pub final_state: State,
}

impl CornerResponse {
    /// The larger overshoot of the two steps that regulated (not on the
    /// ceiling), %; `None` if neither did.
    pub fn overshoot_pct(&self) -> Option<f64> {
        [&self.away, &self.back]
            .into_iter()
            .filter(|s| !s.on_ceiling)
            .map(|s| s.overshoot_pct)
            .reduce(f64::max)
    }

    /// Some window ended with the drive on the ceiling.
    pub fn on_ceiling(&self) -> bool {
        self.away.on_ceiling || self.back.on_ceiling || self.ambient.on_ceiling
    }

    /// The limit cycle, if the oscillation found is one.
    pub fn limit_cycle(&self) -> Option<&Oscillation> {
        self.oscillation.as_ref().filter(|o| o.is_limit_cycle())
    }
}

/// `module` as the simulator sees it at `corner`: the diode with the
/// corner's threshold and slope spread; with `quiet` the converter and
/// sensor noise is switched off.
pub fn corner_module(module: &DemoModule, corner: &PlantCorner, quiet: bool) -> DemoModule {
    let mut m = module.clone();
    m.diode = corner.diode_params(module);
    if quiet {
        m.adc.noise_lsb_rms = 0.0;
        m.sensor.front_end.noise_lsb_rms = 0.0;
    }
    m
}

/// Events that put the simulated plant at `corner` from the first tick.
pub fn corner_events(corner: &PlantCorner) -> Vec<Event> {
    let mut ev = Vec::new();
    let mut inject = |fault| {
        ev.push(Event {
            at_ms: 0.0,
            action: Action::Inject { fault },
        })
    };
    if corner.aged_hours > 0.0 {
        inject(HwFault::Aging {
            hours: corner.aged_hours,
        });
    }
    if corner.tracking_factor != 1.0 {
        inject(HwFault::MonitorDegrade {
            factor: corner.tracking_factor,
        });
    }
    if corner.cooling_factor != 1.0 {
        inject(HwFault::HeatsinkLoss {
            factor: corner.cooling_factor,
        });
    }
    ev
}

/// Tick of a time in ms, rounded as the simulator rounds event times.
fn tick_of(ms: f64, tick_hz: f64) -> usize {
    (ms * 1e-3 * tick_hz).round() as usize
}

fn mean(xs: impl Iterator<Item = f64>) -> f64 {
    let (s, n) = xs.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    if n == 0 {
        f64::NAN
    } else {
        s / n as f64
    }
}

/// The periodic oscillation of a steady stretch of optical power, if any.
pub fn oscillation_in(
    p_mw: &[f64],
    tick_hz: f64,
    dac_step_mw: f64,
    hold: &'static str,
) -> Option<Oscillation> {
    let (period_ticks, correlation) = periodicity(p_mw)?;
    let d = detrend(p_mw);
    let pp = d.iter().fold(f64::MIN, |a, &b| a.max(b)) - d.iter().fold(f64::MAX, |a, &b| a.min(b));
    let m = mean(p_mw.iter().copied());
    Some(Oscillation {
        hold,
        period_ticks,
        freq_hz: tick_hz / period_ticks as f64,
        correlation,
        pp_mw: pp,
        pp_pct: 100.0 * pp / m.abs(),
        pp_steps: pp / dac_step_mw,
    })
}

struct Timeline {
    tick_hz: f64,
    away: usize,
    back: usize,
    amb: usize,
    end: usize,
    pre: usize,
    hold: usize,
}

/// The other level of the steps for `setpoint_mw` (see the module
/// documentation).
pub fn other_level_mw(cfg: &ValidConfig, setpoint_mw: f64, step_fraction: f64) -> f64 {
    let c = cfg.config();
    let p = &c.power;
    let low = setpoint_mw * (1.0 - step_fraction);
    if low >= c.units().mw(p.min_setpoint_ou) {
        low
    } else {
        (setpoint_mw * (1.0 + step_fraction)).min(c.units().mw(p.max_setpoint_ou))
    }
}

fn scenario(corner: &PlantCorner, plan: &StepPlan, low_mw: f64, seed: u64) -> Scenario {
    let t_down = plan.settle_ms;
    let t_up = t_down + plan.window_ms;
    let t_amb = t_up + plan.window_ms;
    let mut events = corner_events(corner);
    events.extend([
        Event {
            at_ms: 0.0,
            action: Action::SetPower {
                mw: corner.setpoint_mw,
            },
        },
        Event {
            at_ms: 0.5,
            action: Action::Enable,
        },
        Event {
            at_ms: t_down,
            action: Action::SetPower { mw: low_mw },
        },
        Event {
            at_ms: t_up,
            action: Action::SetPower {
                mw: corner.setpoint_mw,
            },
        },
        Event {
            at_ms: t_amb,
            action: Action::AmbientStep {
                to_c: corner.ambient_c + plan.ambient_step_c,
            },
        },
    ]);
    Scenario {
        name: format!("loop steps, corner {}", corner.name),
        board: String::new(),
        duration_ms: t_amb + plan.ambient_window_ms,
        ambient_c: corner.ambient_c,
        seed,
        diode_model: DiodeModel::QuasiStatic,
        trace_every: 1,
        aging_speedup: 1.0,
        events,
        expects: Vec::new(),
    }
}

fn faults(r: &RunResult) -> Vec<&'static str> {
    let mut v: Vec<&'static str> = r
        .happenings
        .iter()
        .filter_map(|h| match h {
            Happening::Fault { fault, .. } => Some(*fault),
            _ => None,
        })
        .collect();
    v.dedup();
    v
}

fn regulating(rows: &[TraceRow]) -> bool {
    !rows.is_empty() && rows.iter().all(|r| r.state == State::Regulating)
}

fn step_figures(
    trace: &[TraceRow],
    tl: &Timeline,
    start: usize,
    end: usize,
    from_sp: f64,
    to_sp: f64,
) -> StepFigures {
    let p: Vec<f64> = trace[start..end].iter().map(|r| r.p_mw).collect();
    let tail = ((end - start) / 10).max(1);
    let initial = mean(trace[start - tl.pre..start].iter().map(|r| r.p_mw));
    let final_mw = mean(p[p.len() - tail..].iter().copied());
    let reading = mean(trace[end - tail..end].iter().map(|r| r.monitor_mw));
    StepFigures {
        from_setpoint_mw: from_sp,
        to_setpoint_mw: to_sp,
        initial_mw: initial,
        final_mw,
        overshoot_pct: overshoot_pct(&p, initial, final_mw),
        settling_ms: settled_from(&p, final_mw, SETTLING_BAND * final_mw.abs())
            .map(|i| i as f64 * 1e3 / tl.tick_hz),
        error_pct: 100.0 * (to_sp - reading) / to_sp,
        regulating: regulating(&trace[start..end]),
        on_ceiling: on_ceiling(&trace[end - tail..end]),
    }
}

/// The simulator's latency for `corner`: the whole-tick delay of its
/// linear loop, so both are timed alike.
fn latency_of(corner: &CornerLoop) -> Result<DacLatency, TimeDomainError> {
    let d = corner.params.delay_ticks;
    DacLatency::ticks(d).map_err(|_| TimeDomainError::Plan {
        what: "delay_ticks",
        value: f64::from(d),
        requirement: "1..=16 ticks (the simulator cannot apply a drive at its sampling instant)",
    })
}

/// Runs the time-domain checks of one corner (its loop from
/// [`super::corner_loop`] gives the DAC step in optical power, its delay
/// the simulator's latency).
pub fn corner_response(
    module: &DemoModule,
    cfg: &ValidConfig,
    corner: &CornerLoop,
    plan: &StepPlan,
) -> Result<CornerResponse, TimeDomainError> {
    plan.check()?;
    let c = &corner.corner;
    let tick_hz = f64::from(cfg.config().tick_hz);
    let low = other_level_mw(cfg, c.setpoint_mw, plan.step_fraction);
    let t_away = tick_of(plan.settle_ms, tick_hz);
    let t_back = tick_of(plan.settle_ms + plan.window_ms, tick_hz);
    let t_amb = tick_of(plan.settle_ms + 2.0 * plan.window_ms, tick_hz);
    if t_away < 2 || t_back < t_away + 10 {
        return Err(TimeDomainError::Plan {
            what: "settle_ms",
            value: plan.settle_ms,
            requirement: "at least two ticks, with windows of at least ten ticks",
        });
    }
    let tl = Timeline {
        tick_hz,
        away: t_away,
        back: t_back,
        amb: t_amb,
        end: t_amb + tick_of(plan.ambient_window_ms, tick_hz),
        pre: tick_of(2.0, tick_hz).max(1).min(t_away),
        hold: tick_of(plan.hold_ms, tick_hz).max(8),
    };
    let plant_err = |source| TimeDomainError::Plant {
        corner: c.name.clone(),
        source,
    };
    let latency = latency_of(corner)?;
    let noisy = sim::run(
        &scenario(c, plan, low, plan.seed),
        &corner_module(module, c, false),
        cfg.clone(),
        latency,
    )
    .map_err(plant_err)?;
    let quiet = sim::run(
        &scenario(c, plan, low, 0),
        &corner_module(module, c, true),
        cfg.clone(),
        latency,
    )
    .map_err(plant_err)?;
    let tr = &noisy.trace;
    let end = tl.end.min(tr.len());
    let away = step_figures(tr, &tl, tl.away, tl.back, c.setpoint_mw, low);
    let back = step_figures(tr, &tl, tl.back, tl.amb, low, c.setpoint_mw);
    let before = mean(tr[tl.amb - tl.pre..tl.amb].iter().map(|r| r.p_mw));
    let pa: Vec<f64> = tr[tl.amb..end].iter().map(|r| r.p_mw).collect();
    let tail = ((end - tl.amb) / 10).max(1);
    let reading = mean(tr[end - tail..end].iter().map(|r| r.monitor_mw));
    let ambient = DisturbanceFigures {
        from_c: c.ambient_c,
        to_c: c.ambient_c + plan.ambient_step_c,
        before_mw: before,
        peak_dev_pct: 100.0 * pa.iter().map(|p| (p - before).abs()).fold(0.0, f64::max)
            / before.abs(),
        recovery_ms: settled_from(&pa, before, SETTLING_BAND * before.abs())
            .map(|i| i as f64 * 1e3 / tick_hz),
        error_pct: 100.0 * (c.setpoint_mw - reading) / c.setpoint_mw,
        regulating: regulating(&tr[tl.amb..end]),
        on_ceiling: on_ceiling(&tr[end - tail..end]),
    };
    let dac_step_mw = corner.params.slope_mw_per_ma * corner.params.dac_gain
        / cfg
            .config()
            .units()
            .codes_per_ma(cfg.config().calibration.dac.codes_per_iu);
    let q = &quiet.trace;
    let oscillation = [
        (tl.away, "at setpoint"),
        (tl.back, "at the other level"),
        (tl.amb, "before the ambient step"),
    ]
    .into_iter()
    .filter(|(t, _)| *t <= q.len() && *t >= tl.hold)
    .filter_map(|(t, hold)| {
        let p: Vec<f64> = q[t - tl.hold..t].iter().map(|r| r.p_mw).collect();
        oscillation_in(&p, tick_hz, dac_step_mw, hold)
    })
    .max_by(|a, b| a.pp_mw.total_cmp(&b.pp_mw));
    let mut all_faults = faults(&noisy);
    for f in faults(&quiet) {
        if !all_faults.contains(&f) {
            all_faults.push(f);
        }
    }
    Ok(CornerResponse {
        corner: c.name.clone(),
        away,
        back,
        ambient,
        oscillation,
        dac_step_mw,
        faults: all_faults,
        final_state: noisy.final_state,
    })
}

/// [`corner_response`] for every corner, in parallel, in input order.
pub fn corner_responses(
    module: &DemoModule,
    cfg: &ValidConfig,
    corners: &[CornerLoop],
    plan: &StepPlan,
) -> Result<Vec<CornerResponse>, TimeDomainError> {
    corners
        .par_iter()
        .map(|c| corner_response(module, cfg, c, plan))
        .collect()
}

/// Settling band of the small-step comparison, fraction of the step: a
/// small step spans a few tens of DAC codes, so ±1 % of it is below one
/// code and no quantised loop settles there.
pub const AGREEMENT_BAND: f64 = 0.05;

/// A small setpoint step of the simulator against the linear prediction.
#[derive(Clone, Debug, PartialEq)]
pub struct Agreement {
    /// Step, mW of setpoint.
    pub step_mw: f64,
    /// Ticks compared.
    pub ticks: usize,
    /// Simulated optical power change, normalised to its final value.
    pub simulated: Vec<f64>,
    /// Linear prediction, normalised to its final value (1).
    pub predicted: Vec<f64>,
    /// Largest |simulated - predicted|, fraction of the step.
    pub max_dev: f64,
    /// RMS of the difference, fraction of the step.
    pub rms_dev: f64,
    /// Overshoot of the simulated and of the predicted response, %.
    pub overshoot_pct: (f64, f64),
    /// Settling time of each to ±5 % of the step ([`AGREEMENT_BAND`]), ms.
    pub settling_ms: (Option<f64>, Option<f64>),
}

/// Steps the setpoint of the noise-free simulator at `corner` by
/// `fraction` of the setpoint after `settle_ms`, and compares the optical
/// power change over `ticks` ticks with the linear loop at the same
/// corner (the margins' loop: the board's delay, exact ZOH), driven by the
/// setpoint ramp the core applies (its configured mW per tick). The simulated change is
/// normalised by its mean over the last tenth of the window.
pub fn small_step_agreement(
    module: &DemoModule,
    cfg: &ValidConfig,
    corner: &CornerLoop,
    fraction: f64,
    settle_ms: f64,
    ticks: usize,
) -> Result<Agreement, TimeDomainError> {
    let c = &corner.corner;
    let tick_hz = f64::from(cfg.config().tick_hz);
    let bad = |what, value, requirement| {
        Err(TimeDomainError::Plan {
            what,
            value,
            requirement,
        })
    };
    if !(fraction > 0.0 && fraction < 1.0) {
        return bad("fraction", fraction, "between 0 and 1");
    }
    if !(settle_ms >= 1.0 && settle_ms.is_finite()) {
        return bad("settle_ms", settle_ms, "at least 1 ms");
    }
    if ticks < 10 {
        return bad("ticks", ticks as f64, "at least 10");
    }
    let step_mw = c.setpoint_mw * fraction;
    let k0 = tick_of(settle_ms, tick_hz);
    let mut events = corner_events(c);
    events.extend([
        Event {
            at_ms: 0.0,
            action: Action::SetPower { mw: c.setpoint_mw },
        },
        Event {
            at_ms: 0.5,
            action: Action::Enable,
        },
        Event {
            at_ms: k0 as f64 * 1e3 / tick_hz,
            action: Action::SetPower {
                mw: c.setpoint_mw + step_mw,
            },
        },
    ]);
    let sc = Scenario {
        name: format!("small step, corner {}", c.name),
        board: String::new(),
        duration_ms: (k0 + ticks + 2) as f64 * 1e3 / tick_hz,
        ambient_c: c.ambient_c,
        seed: 0,
        diode_model: DiodeModel::QuasiStatic,
        trace_every: 1,
        aging_speedup: 1.0,
        events,
        expects: Vec::new(),
    };
    let res = sim::run(
        &sc,
        &corner_module(module, c, true),
        cfg.clone(),
        latency_of(corner)?,
    )
    .map_err(|source| TimeDomainError::Plant {
        corner: c.name.clone(),
        source,
    })?;
    let p: Vec<f64> = res.trace.iter().map(|r| r.p_mw).collect();
    let before = mean(p[k0.saturating_sub(20)..k0].iter().copied());
    // The sample of tick k0 sees the new setpoint; the power at the end of
    // tick k0 + n - 1 is the linear model's front power at sample n.
    let raw: Vec<f64> = (0..ticks)
        .map(|n| if n == 0 { before } else { p[k0 + n - 1] } - before)
        .collect();
    let fin = mean(raw[ticks - ticks / 10..].iter().copied());
    let simulated: Vec<f64> = raw.iter().map(|x| x / fin).collect();
    let unit = closed_loop_step_front_with(&corner.params, Discretisation::ExactZoh, ticks);
    // The core moves its setpoint toward the request by a configured
    // amount per tick: the linear input is that ramp, the response the
    // sum of the step responses of its increments.
    let rate = cfg.config().units().mw(cfg.setpoint_ou_per_tick());
    let mut inc = Vec::new();
    let mut sp = 0.0;
    while sp < step_mw && inc.len() < ticks {
        let next = if rate > 0.0 {
            (sp + rate).min(step_mw)
        } else {
            step_mw
        };
        inc.push((next - sp) / step_mw);
        sp = next;
    }
    let predicted: Vec<f64> = (0..ticks)
        .map(|n| {
            inc.iter()
                .enumerate()
                .take(n + 1)
                .map(|(k, d)| d * unit[n - k])
                .sum()
        })
        .collect();
    let diffs: Vec<f64> = simulated
        .iter()
        .zip(&predicted)
        .map(|(a, b)| a - b)
        .collect();
    let max_dev = diffs.iter().fold(0.0, |m: f64, d| m.max(d.abs()));
    let rms_dev = (diffs.iter().map(|d| d * d).sum::<f64>() / ticks as f64).sqrt();
    let ms = |i: usize| i as f64 * 1e3 / tick_hz;
    Ok(Agreement {
        step_mw,
        ticks,
        overshoot_pct: (
            overshoot_pct(&simulated, 0.0, 1.0),
            overshoot_pct(&predicted, 0.0, 1.0),
        ),
        settling_ms: (
            settled_from(&simulated, 1.0, AGREEMENT_BAND).map(ms),
            settled_from(&predicted, 1.0, AGREEMENT_BAND).map(ms),
        ),
        simulated,
        predicted,
        max_dev,
        rms_dev,
    })
}
