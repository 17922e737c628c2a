//! The closed loop: the very same `diodestat-core` controller against the
//! plant (diode, driver, thermal path, sensors), one core `step` per tick,
//! with timed requests, ambient changes and injected hardware faults.
//!
//! Timing, as on a board:
//!
//! ```text
//!  tick n:   ADC samples ─► core step ─► drive n written ...
//!  tick n+d: ... drive n takes effect (DAC code and enable line) ─► source
//!            follows with its bandwidth ─► diode ─► monitor RC ─► ADC at n+d+1
//! ```
//!
//! * the converters sample at the start of tick `n` (the plant as the last
//!   tick left it);
//! * the drive the core computes from that sample reaches the DAC and the
//!   enable line [`DacLatency`] ticks later (`d` ≥ 1, a board-file setting;
//!   1 is a DAC updated at the next tick): the simulator never applies a
//!   drive before a board could;
//! * the current source moves from its present output toward the new code
//!   with its own bandwidth inside the tick (the dynamic diode model sees
//!   that exponential as pieces of small current change
//!   ([`crate::plant::Driver::ramp_pieces`]), not a
//!   step at the start of the tick);
//! * the monitor front end is an RC filter on the continuous signal, solved
//!   exactly over the tick for the source's exponential.
//!
//! The linear loop analysis (`crate::stability::loop_model`) models the
//! same chain: `z^-d`, the DAC hold, the source lag and the monitor RC,
//! discretised exactly.
//!
//! [`Plant`] evaluates its models on the fast path: the diode steady state
//! from an anchored Halley step, slowly varying exponentials continued from
//! the previous tick, the thermal ladder with the dissipation as its last
//! multiply-add. [`Plant::new_reference`] and [`run_reference`] evaluate the
//! same equations the straightforward way; the tests hold the two to 1e-9
//! in optical power and 1e-8 K in junction temperature, with identical ADC
//! codes, core states and events.
//!
//! Besides the (decimated) trace, a run keeps what reports and
//! expectations need at every tick: the spans of the core's warnings
//! ([`WarningSpan`]) and the optical power over chosen intervals
//! ([`PowerWindow`], see [`run_watching`]). The plot envelope and the
//! loop findings are kept too, unless the caller has no use for them
//! ([`Record`], [`run_recording`]: a campaign's cases).

use diodestat_core::{Fingerprint, Fx, Mode, Request, Sample, State, ValidConfig, Warnings};

use crate::oscillation::{fx_f64 as to_f, CoreScale, CoreTick, Found, Watch};
use crate::plant::{
    c_to_k, k_to_c, Adc, DemoModule, Diode, Driver, Monitor, PlantError, Rng, SensorChain, Thermal,
};
use crate::scenario::{Action, AdcChannel, DiodeModel, Event, HwFault, ModeName, Scenario};
use crate::sim_board::{Bus, Outputs, SimBoard};
use crate::units::Scale;

pub use crate::trace::TraceRow;
use crate::trace::{Envelope, NoSink, Retained, TraceSink, RETAINED_ROWS};

/// Something that happened during a run.
#[derive(Clone, Debug, PartialEq)]
pub enum Happening {
    /// State change.
    State {
        /// Tick.
        tick: u64,
        /// New state.
        state: State,
    },
    /// A fault latched in the core.
    Fault {
        /// Tick.
        tick: u64,
        /// The fault name.
        fault: &'static str,
        /// Measured value.
        measured: f64,
        /// Limit.
        limit: f64,
    },
    /// A request was refused.
    Rejected {
        /// Tick.
        tick: u64,
        /// The refused request: its index in the scenario's events.
        event: usize,
        /// Why.
        why: String,
    },
    /// A hardware fault was injected.
    Injected {
        /// Tick.
        tick: u64,
        /// Which.
        fault: &'static str,
    },
    /// The facet reached the damage limit.
    FacetDamage {
        /// Tick.
        tick: u64,
    },
}

/// The plant around the controller (cloned to fork a run at a moment).
#[derive(Clone)]
pub struct Plant {
    /// Diode.
    pub diode: Diode,
    /// Monitor photodiode.
    pub monitor: Monitor,
    /// Current source.
    pub driver: Driver,
    /// Thermal ladder.
    pub thermal: Thermal,
    /// Case temperature sensor.
    pub sensor: SensorChain,
    /// Monitor ADC.
    pub adc_monitor: Adc,
    /// Current-sense ADC.
    pub adc_current: Adc,
    /// Supply ADC.
    pub adc_supply: Adc,
    /// Supply voltage, V.
    pub supply_v: f64,
    /// Interlock closed.
    pub interlock_closed: bool,
    /// Ticks still to be missed.
    pub missed_left: u32,
    /// Fraction of ticks the monitor contact reads open (intermittent
    /// contact), 0 when healthy.
    pub monitor_open_fraction: f64,
    /// Loss of monitor responsivity per second (a slowly degrading
    /// monitor), fraction of nominal; 0 when healthy.
    pub monitor_drift_per_s: f64,
    /// The board's external fault input asserted.
    pub external_fault: bool,
    /// Divider in front of the supply ADC, supply volts per ADC volt.
    pub supply_divider: f64,
    /// Speed of the diode's aging clock against simulated time (the
    /// scenario's `aging_speedup`; 1: real time, 0: no aging in the run).
    pub aging_speedup: f64,
    /// Draws of the intermittent contact (its own stream: the noise of
    /// the other channels is the same with or without it).
    contact_rng: Rng,
    /// Monitor front-end filter output, V.
    mon_filt_v: f64,
    /// Monitor signal before the filter at the end of the last tick, V.
    mon_in_v: f64,
    /// Cached for one (dt, source rate): the filter's decay exp(-a dt) and
    /// the response to the source's exponential (see `filter_monitor`).
    mon_dt: f64,
    mon_src_rate: f64,
    mon_decay: f64,
    mon_forced: f64,
    /// Evaluate every model the straightforward way (steady state from the
    /// cold initial guess, every exp and ln by the library) instead of
    /// warm-started and continued from the previous tick.
    reference: bool,
    /// Last optical output.
    p_front_w: f64,
    wavelength_m: f64,
    v_f: f64,
}

/// Monitor front-end RC pole of the simulated boards, Hz.
pub const MONITOR_FILTER_HZ: f64 = 5_000.0;

impl Plant {
    /// Build the plant of a module at an ambient temperature, seeded.
    pub fn new(module: &DemoModule, ambient_c: f64, seed: u64) -> Result<Self, PlantError> {
        let t = c_to_k(ambient_c);
        let mut adc = module.adc.clone();
        let mut sensor = module.sensor.clone();
        sensor.front_end.seed ^= seed;
        adc.seed ^= seed;
        let adc_monitor = Adc::new(adc.clone())?;
        adc.seed = adc.seed.wrapping_add(1);
        let adc_current = Adc::new(adc.clone())?;
        adc.seed = adc.seed.wrapping_add(1);
        let adc_supply = Adc::new(adc)?;
        let diode = Diode::new(module.diode.clone())?;
        let wavelength_m = diode.wavelength_m(t);
        Ok(Plant {
            diode,
            monitor: Monitor::new(module.monitor.clone())?,
            driver: Driver::new(module.driver.clone())?,
            thermal: Thermal::new(module.thermal.clone(), t)?,
            sensor: SensorChain::new(sensor)?,
            adc_monitor,
            adc_current,
            adc_supply,
            supply_v: module.supply_v,
            interlock_closed: true,
            missed_left: 0,
            monitor_open_fraction: 0.0,
            monitor_drift_per_s: 0.0,
            external_fault: false,
            supply_divider: module.supply_divider,
            aging_speedup: 1.0,
            contact_rng: Rng::new(seed ^ 0x636f_6e74_6163_7421),
            mon_filt_v: 0.0,
            mon_in_v: 0.0,
            mon_dt: f64::NAN,
            mon_src_rate: f64::NAN,
            mon_decay: 0.0,
            mon_forced: 0.0,
            reference: false,
            p_front_w: 0.0,
            wavelength_m,
            v_f: 0.0,
        })
    }

    /// As [`Plant::new`], evaluating every model the straightforward way
    /// (no warm starts): the reference the fast path is checked against.
    /// (An internal reference, not a published one: keeping the plain
    /// evaluation beside an optimised one to test it is common practice;
    /// the models' published sources are named in `crate::plant` and
    /// `tests/tests/reference_physics.rs`.)
    pub fn new_reference(
        module: &DemoModule,
        ambient_c: f64,
        seed: u64,
    ) -> Result<Self, PlantError> {
        let mut p = Self::new(module, ambient_c, seed)?;
        p.reference = true;
        Ok(p)
    }

    /// Front-facet optical power now, W.
    pub fn p_front_w(&self) -> f64 {
        self.p_front_w
    }

    /// Sample every channel at the start of the tick `tick` (the plant as
    /// the last [`Plant::advance`] left it; the monitor through its front-end
    /// filter).
    pub fn sample(&mut self, tick: u32, dt: f64) -> Sample {
        let t_case = self.thermal.t_case_k();
        let temp_counts = if self.reference {
            self.sensor.counts_reference(t_case, dt)
        } else {
            self.sensor.counts(t_case, dt)
        };
        let i = self.driver.current_a();
        Sample {
            tick,
            monitor_counts: self.adc_monitor.sample(self.mon_filt_v),
            current_counts: self.adc_current.sample(self.driver.sense_voltage(i)),
            temp_counts,
            supply_counts: self.adc_supply.sample(self.supply_v / self.supply_divider),
            interlock_closed: self.interlock_closed,
            forward_counts: None,
            external_fault: self.external_fault,
        }
    }

    /// The monitor front end over the tick just advanced: an RC pole at
    /// [`MONITOR_FILTER_HZ`] on the continuous monitor signal, which moves
    /// from `mon_in_v` toward its end value `v1` as the source does,
    /// `u(t) = v1 + (v0 - v1)·e^{-b t}` (`b` the source's rate, 0 for a
    /// set output). Exact solution of `y' = a (u - y)` over `dt`:
    /// `y(dt) = v1 + (y0 - v1)·e^{-a dt} + (v0 - v1)·a/(a - b)·(e^{-b dt} - e^{-a dt})`
    /// (the limit `a·dt·e^{-a dt}` for `b = a`).
    fn filter_monitor(&mut self, v1: f64, dt: f64) {
        let b = self.driver.last_rate_per_s();
        if dt != self.mon_dt || b != self.mon_src_rate {
            let a = 2.0 * std::f64::consts::PI * MONITOR_FILTER_HZ;
            let q = (-a * dt).exp();
            self.mon_forced = if b <= 0.0 {
                0.0
            } else if ((a - b) * dt).abs() < 1e-9 {
                a * dt * q
            } else {
                a / (a - b) * ((-b * dt).exp() - q)
            };
            self.mon_decay = q;
            self.mon_dt = dt;
            self.mon_src_rate = b;
        }
        let v0 = self.mon_in_v;
        self.mon_filt_v =
            v1 + (self.mon_filt_v - v1) * self.mon_decay + (v0 - v1) * self.mon_forced;
        self.mon_in_v = v1;
    }

    /// Advance the plant by `dt` under a DAC code and enable line (the drive
    /// in effect over this tick).
    pub fn advance(
        &mut self,
        dac_code: u16,
        enable: bool,
        ambient_k: f64,
        model: DiodeModel,
        dt: f64,
    ) {
        let tj = self.thermal.t_junction_k();
        let i = self
            .driver
            .step(dac_code, enable, self.v_f, self.supply_v, dt);
        let out = match model {
            DiodeModel::QuasiStatic if self.reference => {
                self.diode.step_quasi_static_reference(i, tj)
            }
            DiodeModel::QuasiStatic => self.diode.step_quasi_static(i, tj),
            DiodeModel::Dynamic => {
                // The source's rise inside the tick, piece by piece.
                let mut out = None;
                for (h, i_mean) in self.driver.ramp_pieces(dt) {
                    out = Some(self.diode.step_dynamic(i_mean, tj, h));
                }
                match out {
                    Some(o) => o,
                    None => self.diode.step_dynamic(i, tj, dt),
                }
            }
        };
        // Aging over the tick at its drive and junction temperature.
        if self.aging_speedup > 0.0 {
            let dt_age = dt * self.aging_speedup;
            if self.reference {
                self.diode.age_over_reference(i, tj, dt_age);
            } else {
                self.diode.age_over(i, tj, dt_age);
            }
        }
        self.p_front_w = out.p_front_w;
        self.wavelength_m = out.wavelength_m;
        self.v_f = out.v_f_v;
        let p_diss = (i * out.v_f_v - out.p_front_w - out.p_back_w).max(0.0);
        if self.reference {
            self.thermal.step_reference(p_diss, ambient_k, dt);
        } else {
            self.thermal.step(p_diss, ambient_k, dt);
        }
        let t_case = self.thermal.t_case_k();
        if self.monitor_drift_per_s > 0.0 {
            self.monitor.degrade_factor =
                (self.monitor.degrade_factor - self.monitor_drift_per_s * dt).max(0.0);
        }
        // An intermittent contact is open for the whole of a tick, drawn
        // per tick.
        let contact_open = self.monitor_open_fraction > 0.0
            && self.contact_rng.uniform() < self.monitor_open_fraction;
        let i_mon = if contact_open {
            0.0
        } else if self.reference {
            self.monitor
                .current_a(self.p_front_w, self.wavelength_m, t_case)
        } else {
            self.monitor
                .current_a_near(self.p_front_w, self.wavelength_m, t_case)
        };
        let v_mon = self.monitor.voltage_v(i_mon);
        self.filter_monitor(v_mon, dt);
    }

    fn inject(&mut self, f: &HwFault, on: bool) {
        match *f {
            HwFault::SensorOpen => self.sensor.open = on,
            HwFault::SensorShort => self.sensor.short = on,
            HwFault::MonitorOpen => self.monitor.open = on,
            HwFault::MonitorDegrade { factor } => {
                self.monitor.degrade_factor = if on { factor } else { 1.0 }
            }
            HwFault::SourceFailHigh => self.driver.fail_high = on,
            HwFault::DacStuck { code } => self.driver.dac_stuck = on.then_some(code),
            HwFault::SenseGain { factor } => {
                self.driver.sense_gain_error = if on { factor } else { 1.0 }
            }
            HwFault::InterlockOpen => self.interlock_closed = !on,
            HwFault::SupplySag { to_v } => {
                if on {
                    self.supply_v = to_v
                }
            }
            HwFault::HeatsinkLoss { factor } => {
                self.thermal.heatsink_loss_factor = if on { factor } else { 1.0 }
            }
            HwFault::Aging { hours } => {
                if on {
                    self.diode.age(hours)
                }
            }
            HwFault::AdcStuck { channel, code } => {
                let v = on.then_some(code);
                match channel {
                    AdcChannel::Monitor => self.adc_monitor.stuck = v,
                    AdcChannel::Current => self.adc_current.stuck = v,
                    AdcChannel::Supply => self.adc_supply.stuck = v,
                    AdcChannel::Temperature => self.sensor.stuck = v,
                }
            }
            HwFault::MissedTicks { ticks } => self.missed_left = if on { ticks } else { 0 },
            HwFault::MonitorIntermittent { open_fraction } => {
                self.monitor_open_fraction = if on { open_fraction } else { 0.0 }
            }
            HwFault::MonitorDrift { per_s } => {
                self.monitor_drift_per_s = if on { per_s } else { 0.0 };
                if !on {
                    self.monitor.degrade_factor = 1.0;
                }
            }
            HwFault::ExternalFault => self.external_fault = on,
            // The board's buses, not the plant: see `SimBoard::set_failed`.
            HwFault::DacBus | HwFault::EnablePin | HwFault::InterlockPin => {}
        }
    }
}

/// Front-facet optical power over the ticks `from_tick..to_tick` (the end
/// excluded, so a window that ends at an event does not see its effect),
/// seen at every tick (not from the decimated trace).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PowerWindow {
    /// First tick.
    pub from_tick: u64,
    /// End tick (excluded).
    pub to_tick: u64,
    /// Ticks seen (0 when the run ended before `from_tick`).
    pub ticks: u64,
    /// Lowest power, mW, and its tick.
    pub min_mw: f64,
    /// Tick of the lowest power.
    pub min_tick: u64,
    /// Highest power, mW.
    pub max_mw: f64,
    /// Tick of the highest power.
    pub max_tick: u64,
}

impl PowerWindow {
    /// A window over `from_tick..to_tick`, nothing seen yet.
    pub fn new(from_tick: u64, to_tick: u64) -> Self {
        PowerWindow {
            from_tick,
            to_tick,
            ticks: 0,
            min_mw: f64::INFINITY,
            min_tick: from_tick,
            max_mw: f64::NEG_INFINITY,
            max_tick: from_tick,
        }
    }

    /// Take the power of `tick` into account if it falls in the window.
    pub fn observe(&mut self, tick: u64, p_mw: f64) {
        if tick < self.from_tick || tick >= self.to_tick {
            return;
        }
        self.ticks += 1;
        // NaN power counts as out of every band: it becomes both extremes.
        if p_mw < self.min_mw || p_mw.is_nan() {
            self.min_mw = p_mw;
            self.min_tick = tick;
        }
        if p_mw > self.max_mw || p_mw.is_nan() {
            self.max_mw = p_mw;
            self.max_tick = tick;
        }
    }
}

/// The warnings of the core, by the names reports use.
pub const WARNINGS: [&str; 4] = ["derating", "at-ceiling", "sensor-suspect", "end-of-life"];

fn warning_flags(w: Warnings) -> [bool; 4] {
    [w.derating, w.at_ceiling, w.sensor_suspect, w.end_of_life]
}

/// A stretch of ticks during which the core raised a warning. A raising
/// closer to the end of the previous span of the same warning than the
/// merge gap (the larger of [`WARNING_MERGE_MS`] and
/// [`WARNING_MERGE_FRACTION`] of the run) extends that span, so a warning
/// that chatters (a temperature at the knee, a drive at its ceiling with
/// noise) is one span with a count and the time it was actually raised.
#[derive(Clone, Debug, PartialEq)]
pub struct WarningSpan {
    /// One of [`WARNINGS`].
    pub warning: &'static str,
    /// First tick with the warning.
    pub from_tick: u64,
    /// First tick without it again (`None`: still raised at the end).
    pub to_tick: Option<u64>,
    /// Times it was raised within the span (1 unless it came and went).
    pub raised: u32,
    /// Ticks of the span with the warning actually raised.
    pub raised_ticks: u64,
    /// Tick of the latest raising.
    pub last_raised_tick: u64,
    /// Front-facet power at the last tick of the span, mW.
    pub last_p_mw: f64,
    /// Commanded drive at the last tick of the span, mA.
    pub last_drive_ma: f64,
    /// Mode at the last tick of the span.
    pub last_mode: Mode,
}

/// Shortest gap below which a warning raised again continues its previous
/// span, ms.
pub const WARNING_MERGE_MS: f64 = 10.0;

/// The merge gap of warning spans as a fraction of the run, when longer
/// than [`WARNING_MERGE_MS`].
pub const WARNING_MERGE_FRACTION: f64 = 0.01;

/// Most spans kept per warning; later ones are counted in
/// [`RunResult::warning_spans_dropped`].
pub const MAX_WARNING_SPANS: usize = 64;

/// The result of a run.
#[derive(Clone, Debug, Default)]
pub struct RunResult {
    /// Trace rows: every `trace_every`-th tick, evenly thinned further
    /// (see [`RunResult::trace_stride`]) so that at most
    /// [`RETAINED_ROWS`] are kept however long the run.
    pub trace: Vec<TraceRow>,
    /// Ticks between consecutive rows of `trace`.
    pub trace_stride: u64,
    /// Min/max envelope of every tick, for plots.
    pub envelope: Envelope,
    /// Events in order.
    pub happenings: Vec<Happening>,
    /// Ticks run.
    pub ticks: u64,
    /// Peak optical power, mW.
    pub peak_mw: f64,
    /// Whether the facet was damaged.
    pub damaged: bool,
    /// Final state.
    pub final_state: State,
    /// Tick rate, Hz.
    pub tick_hz: u32,
    /// The core's fingerprint of the configuration the run used
    /// (`ValidConfig::fingerprint`); `None` only for results made up by
    /// tests.
    pub config_fingerprint: Option<Fingerprint>,
    /// Fault records the core's log overwrote before the run read them
    /// (read every tick through a cursor, so zero unless one tick logs
    /// more than the ring holds).
    pub faults_lost: u32,
    /// Oscillations, limit cycles and a drive pinned on its ceiling, found
    /// on every tick of each stretch of regulation ([`crate::oscillation`]).
    pub loop_findings: Vec<Found>,
    /// Spans of the core's warnings, in order of their start.
    pub warning_spans: Vec<WarningSpan>,
    /// Warning spans beyond [`MAX_WARNING_SPANS`] per warning, not kept.
    pub warning_spans_dropped: u64,
    /// The power windows asked for by [`run_watching`], filled.
    pub windows: Vec<PowerWindow>,
}

impl RunResult {
    /// Record the warnings of `tick` (`now`) against those of the tick
    /// before (`was`); `prev` holds power, drive and mode of the tick before.
    fn warnings_changed(
        &mut self,
        tick: u64,
        was: Warnings,
        now: Warnings,
        prev: (f64, f64, Mode),
        merge_ticks: u64,
    ) {
        let (was, now) = (warning_flags(was), warning_flags(now));
        for k in 0..WARNINGS.len() {
            let name = WARNINGS[k];
            if was[k] && !now[k] {
                if let Some(s) = self
                    .warning_spans
                    .iter_mut()
                    .rev()
                    .find(|s| s.warning == name && s.to_tick.is_none())
                {
                    s.to_tick = Some(tick);
                    s.raised_ticks += tick - s.last_raised_tick;
                    (s.last_p_mw, s.last_drive_ma, s.last_mode) = prev;
                }
            } else if now[k] && !was[k] {
                let last = self
                    .warning_spans
                    .iter_mut()
                    .rev()
                    .find(|s| s.warning == name);
                match last {
                    Some(s) if s.to_tick.is_some_and(|t| tick - t < merge_ticks) => {
                        s.to_tick = None;
                        s.raised += 1;
                        s.last_raised_tick = tick;
                    }
                    _ => {
                        let kept = self
                            .warning_spans
                            .iter()
                            .filter(|s| s.warning == name)
                            .count();
                        if kept < MAX_WARNING_SPANS {
                            self.warning_spans.push(WarningSpan {
                                warning: name,
                                from_tick: tick,
                                to_tick: None,
                                raised: 1,
                                raised_ticks: 0,
                                last_raised_tick: tick,
                                last_p_mw: f64::NAN,
                                last_drive_ma: f64::NAN,
                                last_mode: prev.2,
                            });
                        } else {
                            self.warning_spans_dropped += 1;
                        }
                    }
                }
            }
        }
    }
}

/// The tick at which something timed at `ms` happens: events, expectations.
pub fn tick_at(ms: f64, tick_hz: u32) -> u64 {
    (ms * 1e-3 * f64::from(tick_hz)).round() as u64
}

/// Whole ticks from the sampling instant of a tick to the instant the drive
/// the core computed from that sample (DAC code and enable line) takes
/// effect: 1 for a DAC updated at the next tick (or written within the
/// tick, rounded up: the simulator never applies a drive before a board
/// could), more for a board that buffers its converters.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct DacLatency(u32);

impl DacLatency {
    /// One tick, the default (the board examples).
    pub const ONE_TICK: DacLatency = DacLatency(1);
    /// Largest latency accepted, ticks.
    pub const MAX_TICKS: u32 = 16;

    /// A latency of `ticks`, 1..=[`DacLatency::MAX_TICKS`].
    pub fn ticks(ticks: u32) -> Result<Self, LatencyError> {
        if (1..=Self::MAX_TICKS).contains(&ticks) {
            Ok(DacLatency(ticks))
        } else {
            Err(LatencyError(ticks))
        }
    }

    /// The latency in ticks.
    pub fn get(self) -> u32 {
        self.0
    }
}

impl Default for DacLatency {
    fn default() -> Self {
        Self::ONE_TICK
    }
}

/// A latency out of range.
#[derive(Clone, Copy, Debug, PartialEq, Eq, thiserror::Error)]
#[error(
    "{0} ticks: must be 1..={max} (a drive cannot take effect at the instant its sample is taken)",
    max = DacLatency::MAX_TICKS
)]
pub struct LatencyError(pub u32);

fn fx(v: f64) -> Fx {
    Fx::saturating_from_num(v)
}

/// What a run records besides what every caller reads (happenings, the
/// trace rows, the warning spans, the power windows, peak, damage and the
/// final state): the parts a caller that never reads them can skip. The
/// rest of the result is the same either way, bit for bit.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Record {
    /// The plot envelope of every tick ([`RunResult::envelope`]; empty
    /// when off).
    pub envelope: bool,
    /// The oscillation, limit-cycle and ceiling watch of every stretch of
    /// regulation ([`RunResult::loop_findings`]; empty when off).
    pub loop_findings: bool,
}

impl Record {
    /// Everything: what `run` and the reports use.
    pub const ALL: Record = Record {
        envelope: true,
        loop_findings: true,
    };
    /// No envelope and no loop findings: what a campaign reads of a case
    /// (its happenings, trace rows and final state).
    pub const VERDICT: Record = Record {
        envelope: false,
        loop_findings: false,
    };
}

impl Default for Record {
    fn default() -> Self {
        Self::ALL
    }
}

/// Run a scenario on a validated board configuration whose drive takes
/// effect `latency` after its sample.
pub fn run(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
) -> Result<RunResult, PlantError> {
    run_streamed(sc, module, cfg, latency, Vec::new(), &mut NoSink)
}

/// [`run`], recording only what `record` asks for besides what every run
/// records ([`Record`]).
pub fn run_recording(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
    record: Record,
) -> Result<RunResult, PlantError> {
    let plant = Plant::new(module, sc.ambient_c, sc.seed)?;
    let mut r = Runner::new(sc, cfg, latency, plant, Vec::new(), record);
    r.run_until(u64::MAX, &mut NoSink);
    Ok(r.finish(&mut NoSink))
}

/// [`run`], also filling `windows` with the optical power of every tick
/// inside them ([`RunResult::windows`], in the same order).
pub fn run_watching(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
    windows: Vec<PowerWindow>,
) -> Result<RunResult, PlantError> {
    run_streamed(sc, module, cfg, latency, windows, &mut NoSink)
}

/// [`run_watching`], also handing every recorded row (every
/// `trace_every`-th tick) to `sink` as it is made, for example to stream
/// `trace.csv` to disk.
pub fn run_streamed(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
    windows: Vec<PowerWindow>,
    sink: &mut dyn TraceSink,
) -> Result<RunResult, PlantError> {
    run_plant(
        sc,
        cfg,
        latency,
        Plant::new(module, sc.ambient_c, sc.seed)?,
        windows,
        sink,
    )
}

/// Ticks between two progress reports to a [`TraceSink`].
const PROGRESS_TICKS: u64 = 1 << 14;

/// [`run`] on the reference plant ([`Plant::new_reference`]): same
/// scenario, same noise, every model evaluated the straightforward way.
pub fn run_reference(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
) -> Result<RunResult, PlantError> {
    run_plant(
        sc,
        cfg,
        latency,
        Plant::new_reference(module, sc.ambient_c, sc.seed)?,
        Vec::new(),
        &mut NoSink,
    )
}

/// The board bus a fault kind fails, if it is one.
fn bus_of(f: &HwFault) -> Option<Bus> {
    match f {
        HwFault::DacBus => Some(Bus::Dac),
        HwFault::EnablePin => Some(Bus::Enable),
        HwFault::InterlockPin => Some(Bus::Interlock),
        _ => None,
    }
}

fn run_plant(
    sc: &Scenario,
    cfg: ValidConfig,
    latency: DacLatency,
    plant: Plant,
    windows: Vec<PowerWindow>,
    sink: &mut dyn TraceSink,
) -> Result<RunResult, PlantError> {
    let mut r = Runner::new(sc, cfg, latency, plant, windows, Record::ALL);
    r.run_until(u64::MAX, sink);
    Ok(r.finish(sink))
}

/// A scenario run to a moment, kept so that several continuations can
/// fork from it: [`Fork::resume`] clones the whole run (plant, board with
/// its core, the drives in flight, everything recorded so far), adds one
/// event and runs to the scenario's end. A continuation is the very
/// computation a run from t = 0 of the scenario with that event last does,
/// so its result is bit-identical (the tests check it).
#[derive(Clone)]
pub struct Fork {
    runner: Runner,
}

/// Why a fork cannot continue with an event.
#[derive(Clone, Copy, Debug, PartialEq, thiserror::Error)]
#[error("an event at {at_ms} ms comes before the fork's moment (tick {fork_tick}): a fork only adds events at or after it")]
pub struct ForkError {
    /// The event's time, ms.
    pub at_ms: f64,
    /// The fork's tick.
    pub fork_tick: u64,
}

/// Run `sc` up to the start of the tick of `at_ms` (every event before it
/// applied, none at or after it) and keep the run for [`Fork::resume`].
pub fn fork_at(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
    at_ms: f64,
) -> Result<Fork, PlantError> {
    fork_recording(sc, module, cfg, latency, at_ms, Record::ALL)
}

/// [`fork_at`], its continuations recording only what `record` asks for
/// ([`run_recording`]).
pub fn fork_recording(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    latency: DacLatency,
    at_ms: f64,
    record: Record,
) -> Result<Fork, PlantError> {
    let plant = Plant::new(module, sc.ambient_c, sc.seed)?;
    let tick_hz = cfg.config().tick_hz;
    let mut runner = Runner::new(sc, cfg, latency, plant, Vec::new(), record);
    runner.run_until(tick_at(at_ms, tick_hz), &mut NoSink);
    Ok(Fork { runner })
}

impl Fork {
    /// The run that continues this fork with `event` added as the
    /// scenario's last event, to the scenario's end.
    pub fn resume(&self, event: &Event) -> Result<RunResult, ForkError> {
        let mut r = self.runner.clone();
        r.add_event(event)?;
        r.run_until(u64::MAX, &mut NoSink);
        Ok(r.finish(&mut NoSink))
    }

    /// [`Fork::resume`], handing every row recorded from the fork's tick
    /// on to `sink` as it is made and keeping none of them: the result's
    /// trace holds the lead-in's rows only ([`Fork::rows`]). For a caller
    /// that reads a few values of each row (a campaign case) and would
    /// otherwise get a fresh vector of every tick's whole row per run.
    pub fn resume_streamed(
        &self,
        event: &Event,
        sink: &mut dyn TraceSink,
    ) -> Result<RunResult, ForkError> {
        let mut r = self.runner.clone();
        r.add_event(event)?;
        r.keep_rows = false;
        r.run_until(u64::MAX, sink);
        Ok(r.finish(sink))
    }

    /// The rows recorded up to the fork, every [`Fork::rows_stride`]-th
    /// tick.
    pub fn rows(&self) -> &[TraceRow] {
        self.runner.kept.rows()
    }

    /// Ticks between consecutive rows of [`Fork::rows`] (as
    /// [`RunResult::trace_stride`]).
    pub fn rows_stride(&self) -> u64 {
        self.runner.kept.stride() * self.runner.trace_every
    }

    /// The tick the fork stands at (the next to run).
    pub fn tick(&self) -> u64 {
        self.runner.tick
    }
}

/// Everything a run carries from one tick to the next.
#[derive(Clone)]
struct Runner {
    plant: Plant,
    board: SimBoard,
    /// Events by tick (stable: same-tick events in scenario order), with
    /// their index in the scenario.
    events: Vec<(u64, usize, Action)>,
    /// Events in the scenario (the index the next added one gets).
    event_count: usize,
    next_event: usize,
    ambient_c: f64,
    ramp: Option<(f64, f64, u64, u64)>, // from, to, start, end
    res: RunResult,
    merge_ticks: u64,
    last_warnings: Warnings,
    prev: (f64, Fx, Mode),
    kept: Retained,
    /// Keep the recorded rows in `kept` (off: only the sink sees them).
    keep_rows: bool,
    last_state: State,
    log_cursor: diodestat_core::Cursor,
    /// The drives on their way to the DAC: a ring of `latency` slots, the
    /// one at `slot` written `latency` ticks ago; `None`: a missed tick
    /// wrote nothing. The board starts with the DAC at zero, enable low.
    lat: usize,
    pipeline: [Option<Outputs>; DacLatency::MAX_TICKS as usize],
    slot: usize,
    applied: Outputs,
    /// The DAC code the core computed in the latest tick it ran.
    last_code: u16,
    /// The loop watch (`None` when the run does not record loop findings).
    watch: Option<Watch<CoreTick>>,
    /// Feed the plot envelope every tick.
    envelope: bool,
    trace_every: u64,
    /// The next tick recorded whole (a multiple of `trace_every`; the
    /// ticks run one by one, so a comparison replaces a division).
    next_trace_tick: u64,
    n_ticks: u64,
    dt: f64,
    tick_hz: u32,
    model: DiodeModel,
    /// The board's units, and mA per current unit and mW per optical unit.
    units: diodestat_core::Units,
    ma_per_iu: f64,
    mw_per_ou: f64,
    /// The next tick to run.
    tick: u64,
}

impl Runner {
    fn new(
        sc: &Scenario,
        cfg: ValidConfig,
        latency: DacLatency,
        mut plant: Plant,
        windows: Vec<PowerWindow>,
        record: Record,
    ) -> Self {
        plant.aging_speedup = sc.aging_speedup;
        let tick_hz = cfg.config().tick_hz;
        let dt = 1.0 / f64::from(tick_hz);
        let n_ticks = (sc.duration_ms * 1e-3 * f64::from(tick_hz)).round() as u64;
        let config_fingerprint = Some(cfg.fingerprint());
        // The core behind its embedded-hal edge, on the board's simulated
        // DAC, enable line and interlock input.
        let board = SimBoard::new(cfg);
        let trace_every = u64::from(sc.trace_every.max(1));
        let mut events: Vec<(u64, usize, Action)> = sc
            .events
            .iter()
            .enumerate()
            .map(|(k, e)| (tick_at(e.at_ms, tick_hz), k, e.action.clone()))
            .collect();
        events.sort_by_key(|e| e.0);
        let units = board.ctl().config().config().units();
        let (ma_per_iu, mw_per_ou) = (units.ma_per_iu(), units.mw_per_ou());
        let watch = record.loop_findings.then(|| {
            Watch::with_scale(
                tick_hz,
                units.ma(board.ctl().config().slew_iu_per_tick()),
                CoreScale {
                    ma_per_iu,
                    mw_per_ou,
                },
            )
        });
        Runner {
            plant,
            board,
            events,
            event_count: sc.events.len(),
            next_event: 0,
            ambient_c: sc.ambient_c,
            ramp: None,
            res: RunResult {
                tick_hz,
                config_fingerprint,
                windows,
                envelope: Envelope::new(if record.envelope { n_ticks } else { 0 }),
                ..RunResult::default()
            },
            merge_ticks: tick_at(
                WARNING_MERGE_MS.max(WARNING_MERGE_FRACTION * sc.duration_ms),
                tick_hz,
            ),
            last_warnings: Warnings::default(),
            prev: (0.0, Fx::ZERO, Mode::Apc),
            kept: Retained::for_rows(RETAINED_ROWS, n_ticks.div_ceil(trace_every)),
            keep_rows: true,
            last_state: State::Off,
            log_cursor: diodestat_core::Cursor::default(),
            lat: latency.get() as usize,
            pipeline: [None::<Outputs>; DacLatency::MAX_TICKS as usize],
            slot: 0,
            applied: Outputs::default(),
            last_code: 0,
            watch,
            envelope: record.envelope,
            trace_every,
            next_trace_tick: 0,
            n_ticks,
            dt,
            tick_hz,
            model: sc.diode_model,
            units,
            ma_per_iu,
            mw_per_ou,
            tick: 0,
        }
    }

    /// Add `event` as the scenario's next (last) event; it must not lie
    /// before the next tick to run.
    fn add_event(&mut self, event: &Event) -> Result<(), ForkError> {
        let at = tick_at(event.at_ms, self.tick_hz);
        if at < self.tick {
            return Err(ForkError {
                at_ms: event.at_ms,
                fork_tick: self.tick,
            });
        }
        // After every event of its tick (sorted stably, it has the highest
        // index).
        let pos = self.events.partition_point(|e| e.0 <= at);
        self.events
            .insert(pos, (at, self.event_count, event.action.clone()));
        self.event_count += 1;
        Ok(())
    }

    /// Apply the timed events of `tick`.
    fn apply_events(&mut self, tick: u64) {
        while let Some((at, event, action)) = self.events.get(self.next_event) {
            if *at > tick {
                break;
            }
            let event = *event;
            self.next_event += 1;
            if let Some(w) = &mut self.watch {
                w.cut();
            }
            let req = match action {
                Action::Enable => Some(Request::Enable),
                Action::Disable => Some(Request::Disable),
                Action::SetPower { mw } => Some(Request::SetPower(fx(*mw / self.mw_per_ou))),
                Action::SetCurrent { ma } => Some(Request::SetCurrent(fx(*ma / self.ma_per_iu))),
                Action::Mode { mode } => Some(Request::SetMode(match mode {
                    ModeName::Apc => Mode::Apc,
                    ModeName::Acc => Mode::Acc,
                })),
                Action::Clear => Some(Request::ClearFaults),
                Action::AmbientStep { to_c } => {
                    self.ambient_c = *to_c;
                    self.ramp = None;
                    None
                }
                Action::AmbientRamp { to_c, over_ms } => {
                    let len = (over_ms * 1e-3 * f64::from(self.tick_hz)).round().max(1.0) as u64;
                    self.ramp = Some((self.ambient_c, *to_c, tick, tick + len));
                    None
                }
                Action::Inject { fault } => {
                    self.plant.inject(fault, true);
                    if let Some(bus) = bus_of(fault) {
                        self.board.set_failed(bus, true);
                    }
                    self.res.happenings.push(Happening::Injected {
                        tick,
                        fault: fault.name(),
                    });
                    None
                }
                Action::Repair { fault } => {
                    self.plant.inject(fault, false);
                    if let Some(bus) = bus_of(fault) {
                        self.board.set_failed(bus, false);
                    }
                    None
                }
            };
            if let Some(r) = req {
                if let Err(why) = self.board.request(r) {
                    self.res.happenings.push(Happening::Rejected {
                        tick,
                        event,
                        why: why.to_string(),
                    });
                }
            }
        }
    }

    /// Run the ticks from the next one up to (excluding) `end`, at most to
    /// the scenario's end.
    fn run_until(&mut self, end: u64, sink: &mut dyn TraceSink) {
        let end = end.min(self.n_ticks);
        let dt = self.dt;
        while self.tick < end {
            let tick = self.tick;
            // Timed events for this tick.
            if self
                .events
                .get(self.next_event)
                .is_some_and(|e| e.0 <= tick)
            {
                self.apply_events(tick);
            }
            if let Some((from, to, start, end)) = self.ramp {
                let x = ((tick - start) as f64 / (end - start) as f64).min(1.0);
                self.ambient_c = from + (to - from) * x;
                if tick >= end {
                    self.ramp = None;
                }
            }
            let ambient_c = self.ambient_c;
            let plant = &mut self.plant;
            let board = &mut self.board;
            let res = &mut self.res;
            // The board samples and steps the core, unless it misses this tick.
            let sample = plant.sample(tick as u32, dt);
            let computed = if plant.missed_left > 0 {
                plant.missed_left -= 1;
                None
            } else {
                // An edge error is latched in the core (and in its log) by the
                // edge itself; what the hardware does is in the outputs.
                let (code, outputs) = board.tick_outputs(&sample);
                self.last_code = code;
                Some(outputs)
            };
            // What the hardware was set to `latency` ticks ago takes effect now.
            if let Some(d) = std::mem::replace(&mut self.pipeline[self.slot], computed) {
                self.applied = d;
            }
            self.slot += 1;
            if self.slot == self.lat {
                self.slot = 0;
            }
            let applied = self.applied;
            plant.advance(
                applied.dac_code,
                applied.enable,
                c_to_k(ambient_c),
                self.model,
                dt,
            );
            let p_mw = plant.p_front_w * 1e3;
            res.peak_mw = res.peak_mw.max(p_mw);
            if !res.windows.is_empty() {
                for w in &mut res.windows {
                    w.observe(tick, p_mw);
                }
            }
            let ctl = board.ctl();
            // Warnings change seldom: the power, drive and mode of the tick
            // before are kept raw and converted only when one does.
            let warnings = ctl.status().warnings;
            if warnings != self.last_warnings {
                let (p, d, m) = self.prev;
                res.warnings_changed(
                    tick,
                    self.last_warnings,
                    warnings,
                    (p, to_f(d) * self.ma_per_iu, m),
                    self.merge_ticks,
                );
                self.last_warnings = warnings;
            }
            self.prev = (p_mw, ctl.drive_iu(), ctl.mode());
            if !res.damaged && plant.diode.damaged() {
                res.damaged = true;
                res.happenings.push(Happening::FacetDamage { tick });
            }
            let st = ctl.state();
            if let Some(w) = &mut self.watch {
                if st == State::Regulating {
                    w.keep(
                        tick,
                        CoreTick {
                            p_mw,
                            drive_iu: ctl.drive_iu(),
                            ceiling_iu: ctl.ceiling_iu(),
                            monitor_ou: ctl.measurements().monitor_ou,
                            target_ou: (ctl.mode() == Mode::Apc).then(|| ctl.power_target_ou()),
                            dac_code: self.last_code,
                        },
                    );
                } else {
                    w.cut();
                }
            }
            if st != self.last_state {
                res.happenings.push(Happening::State { tick, state: st });
                self.last_state = st;
            }
            // Nothing new in the log (nearly every tick): its end is still
            // the cursor, and reading from there would yield nothing.
            if ctl.fault_log().end() != self.log_cursor {
                let unread = ctl.fault_log().since(self.log_cursor);
                res.faults_lost += unread.lost();
                self.log_cursor = unread.resume();
                for e in unread {
                    let r = e.record;
                    res.happenings.push(Happening::Fault {
                        tick,
                        fault: r.fault.name(),
                        measured: self.units.record(r.fault, r.measured),
                        limit: self.units.record(r.fault, r.limit),
                    });
                }
            }
            // Every tick feeds the plot envelope (only what the plots
            // draw); every `trace_every`-th is recorded whole.
            let whole = tick == self.next_trace_tick;
            if self.envelope || whole {
                self.record_tick(tick, p_mw, applied, whole, sink);
            }
            if tick.is_multiple_of(PROGRESS_TICKS) {
                sink.progress(tick, self.n_ticks);
            }
            self.res.ticks = tick + 1;
            self.tick = tick + 1;
        }
    }

    /// Feed the plot envelope with the tick just run and, when `whole`,
    /// record its trace row (the values converted to engineering units
    /// only here).
    fn record_tick(
        &mut self,
        tick: u64,
        p_mw: f64,
        applied: Outputs,
        whole: bool,
        sink: &mut dyn TraceSink,
    ) {
        let (plant, res, ambient_c, dt) = (&self.plant, &mut self.res, self.ambient_c, self.dt);
        let ctl = self.board.ctl();
        let st = ctl.state();
        let m = ctl.measurements();
        let i_ma = plant.driver.current_a() * 1e3;
        let monitor_mw = to_f(m.monitor_ou) * self.mw_per_ou;
        let ceiling_ma = to_f(ctl.ceiling_iu()) * self.ma_per_iu;
        let tj_c = k_to_c(plant.thermal.t_junction_k());
        let sensed_c = to_f(m.temp_degc);
        if self.envelope {
            res.envelope.add_values(
                tick,
                [
                    p_mw, monitor_mw, i_ma, ceiling_ma, tj_c, sensed_c, ambient_c,
                ],
            );
        }
        if whole {
            self.next_trace_tick += self.trace_every;
            let status = ctl.status();
            let (threshold_factor, slope_factor) = plant.diode.aging_factors();
            let row = TraceRow {
                tick,
                t_s: tick as f64 * dt,
                state: st,
                mode: status.mode,
                enable: applied.enable,
                dac_code: applied.dac_code,
                faults: status.faults,
                warnings: status.warnings,
                p_mw,
                i_ma,
                cmd_ma: to_f(ctl.drive_iu()) * self.ma_per_iu,
                ceiling_ma,
                monitor_mw,
                tj_c,
                sensed_c,
                ambient_c,
                supply_v: plant.supply_v,
                supply_sensed_v: to_f(m.supply_vu) * self.units.mv_per_vu() * 1e-3,
                v_f_v: plant.v_f,
                wavelength_nm: plant.wavelength_m * 1e9,
                age_h: plant.diode.age_hours(),
                threshold_factor,
                slope_factor,
            };
            if self.keep_rows {
                self.kept.push(row);
            }
            sink.row(&row);
        }
    }

    /// The result of the run (its end reached).
    fn finish(self, sink: &mut dyn TraceSink) -> RunResult {
        let Runner {
            board,
            mut res,
            watch,
            kept,
            prev,
            trace_every,
            n_ticks,
            ..
        } = self;
        res.final_state = board.ctl().state();
        res.loop_findings = watch.map(Watch::finish).unwrap_or_default();
        for s in res.warning_spans.iter_mut().filter(|s| s.to_tick.is_none()) {
            s.raised_ticks += res.ticks - s.last_raised_tick;
            (s.last_p_mw, s.last_drive_ma, s.last_mode) =
                (prev.0, to_f(prev.1) * self.ma_per_iu, prev.2);
        }
        res.trace_stride = kept.stride() * trace_every;
        res.trace = kept.into_rows();
        sink.progress(n_ticks, n_ticks);
        res
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn to_f_is_the_exact_value() {
        for b in [i32::MIN, -65536, -1, 0, 1, 19661, 65536, i32::MAX] {
            let v = Fx::from_bits(b);
            assert_eq!(to_f(v), v.to_num::<f64>());
        }
    }
    use crate::calibration;
    use crate::scenario::Event;

    fn config(module: &DemoModule) -> ValidConfig {
        calibration::calibrate(diodestat_core::example::config(), module)
            .validate()
            .unwrap()
    }

    fn scenario(seed: u64, setpoint_mw: f64, ms: f64) -> Scenario {
        let ev = |at_ms: f64, action: Action| Event { at_ms, action };
        Scenario {
            name: "equivalence".into(),
            board: String::new(),
            duration_ms: ms,
            ambient_c: 25.0,
            seed,
            diode_model: DiodeModel::QuasiStatic,
            trace_every: 1,
            aging_speedup: 1.0,
            events: vec![
                ev(0.0, Action::SetPower { mw: setpoint_mw }),
                ev(0.1, Action::Enable),
                ev(
                    100.0,
                    Action::AmbientRamp {
                        to_c: 35.0,
                        over_ms: 150.0,
                    },
                ),
                ev(
                    300.0,
                    Action::Inject {
                        fault: HwFault::HeatsinkLoss { factor: 2.5 },
                    },
                ),
                ev(
                    350.0,
                    Action::Inject {
                        fault: HwFault::Aging { hours: 2000.0 },
                    },
                ),
                ev(
                    400.0,
                    Action::SetPower {
                        mw: 0.6 * setpoint_mw,
                    },
                ),
            ],
            expects: Vec::new(),
        }
    }

    /// Open loop: the drive of a closed-loop run applied to the fast and to
    /// the reference plant. Every ADC code is the same (a code could only
    /// differ where the analog value sits within ~1e-9 LSB of a rounding
    /// edge), front power agrees to 1e-9 relative (or 1e-9 of the rated
    /// power near zero), junction temperature to 1e-8 K, forward voltage
    /// to 1e-12 V.
    #[test]
    fn fast_plant_equals_reference_plant() {
        for (name, mw) in [("demo-red-30", 15.0), ("demo-pump-5w", 3000.0)] {
            let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
                .join("../examples")
                .join(name)
                .join("board.toml");
            let board = crate::board_file::load_board(&path).unwrap();
            let (module, cfg) = (board.module, board.valid);
            let dt = 1.0 / f64::from(cfg.config().tick_hz);
            let mut ctl = diodestat_core::Controller::new(cfg);
            ctl.request(Request::SetPower(fx(mw))).unwrap();
            let mut fast = Plant::new(&module, 25.0, 3).unwrap();
            let mut refp = Plant::new_reference(&module, 25.0, 3).unwrap();
            let floor_w = 1e-9 * module.rated_power_w;
            let (mut dp, mut dt_j, mut dv) = (0.0f64, 0.0f64, 0.0f64);
            for tick in 0..8000u32 {
                if tick == 2 {
                    ctl.request(Request::Enable).unwrap();
                }
                let amb = c_to_k(25.0 + 10.0 * (f64::from(tick) / 8000.0));
                if tick == 5000 {
                    fast.thermal.heatsink_loss_factor = 2.0;
                    refp.thermal.heatsink_loss_factor = 2.0;
                }
                let a = fast.sample(tick, dt);
                let b = refp.sample(tick, dt);
                assert_eq!(a, b, "samples at tick {tick}");
                let d = ctl.step(&b);
                for p in [&mut fast, &mut refp] {
                    p.advance(d.dac_code, d.enable, amb, DiodeModel::QuasiStatic, dt);
                }
                let (pa, pb) = (fast.p_front_w(), refp.p_front_w());
                dp = dp.max((pa - pb).abs() / pb.max(floor_w));
                dt_j = dt_j.max((fast.thermal.t_junction_k() - refp.thermal.t_junction_k()).abs());
                dv = dv.max((fast.v_f - refp.v_f).abs());
            }
            assert_eq!(ctl.state(), State::Regulating);
            assert!(dp < 1e-9, "front power differs by {dp:e}");
            assert!(dt_j < 1e-8, "junction differs by {dt_j:e} K");
            assert!(dv < 1e-12, "forward voltage differs by {dv:e} V");
        }
    }

    /// Closed loop through `run` and `run_reference`: the same events and
    /// states, and every trace row within the tolerances above.
    #[test]
    fn run_equals_run_reference() {
        let module = DemoModule::visible();
        let sc = scenario(5, 20.0, 500.0);
        let a = run(&sc, &module, config(&module), DacLatency::ONE_TICK).unwrap();
        let b = run_reference(&sc, &module, config(&module), DacLatency::ONE_TICK).unwrap();
        assert_eq!(a.happenings, b.happenings);
        assert_eq!(a.trace.len(), b.trace.len());
        for (x, y) in a.trace.iter().zip(b.trace.iter()) {
            assert_eq!(x.state, y.state);
            assert_eq!(
                (x.cmd_ma, x.monitor_mw, x.sensed_c),
                (y.cmd_ma, y.monitor_mw, y.sensed_c)
            );
            assert!((x.p_mw - y.p_mw).abs() <= 1e-9 * y.p_mw.max(module.rated_power_w * 1e3));
            assert!((x.tj_c - y.tj_c).abs() < 1e-8, "tick {}", x.tick);
        }
    }

    /// The drive the core computes from the sample of tick n reaches the
    /// source `latency` ticks later, never within tick n (the runner used to
    /// apply it within the tick of its own sample, a tick earlier than any
    /// board can: this failed then with 0 ticks between the two).
    #[test]
    fn drive_takes_effect_latency_ticks_after_its_sample() {
        let module = DemoModule::visible();
        for ticks in [1u32, 3] {
            let latency = DacLatency::ticks(ticks).unwrap();
            let r = run(&scenario(1, 20.0, 20.0), &module, config(&module), latency).unwrap();
            let first_cmd = r.trace.iter().position(|x| x.cmd_ma > 0.0).unwrap();
            let first_i = r.trace.iter().position(|x| x.i_ma > 1e-9).unwrap();
            assert_eq!(first_i - first_cmd, ticks as usize, "latency {ticks}");
        }
        assert!(DacLatency::ticks(0).is_err());
        assert!(DacLatency::ticks(DacLatency::MAX_TICKS + 1).is_err());
    }

    /// In dynamic mode the diode sees the source's rise inside the tick,
    /// not a step at its start. Switched on from zero to 40 mA (about twice
    /// threshold) within one 50 µs tick, the rate equations fed a step ring
    /// with relaxation-oscillation spikes far above the final power (a
    /// source with a finite bandwidth cannot make them); fed the source's
    /// exponential in pieces ([`Driver::ramp_pieces`]) they
    /// stay within a few per cent of it. Both end at the same power. The
    /// output is watched every 10 ps over the first 10 ns of each piece.
    #[test]
    fn dynamic_turn_on_follows_the_source_without_a_spike() {
        let module = DemoModule::visible();
        let dt = 50e-6;
        let t = c_to_k(25.0);
        let mut driver = Driver::new(module.driver.clone()).unwrap();
        let code = (0.040 / driver.setpoint_a(1)).round() as u16;
        driver.step(code, true, 0.0, module.supply_v, dt);
        let watch = |pieces: Vec<(f64, f64)>| {
            let mut d = Diode::new(module.diode.clone()).unwrap();
            let (mut peak, mut last) = (0.0f64, 0.0);
            for (h, i) in pieces {
                let fine = h.min(10e-9);
                let n = (fine / 10e-12).round() as usize;
                for _ in 0..n {
                    let o = d.step_dynamic(i, t, fine / n as f64);
                    peak = peak.max(o.p_front_w);
                }
                last = d.step_dynamic(i, t, h - fine).p_front_w;
                peak = peak.max(last);
            }
            (peak, last)
        };
        let (ramp_peak, ramp_end) = watch(driver.ramp_pieces(dt).collect());
        let (step_peak, step_end) = watch(vec![(dt, driver.current_a())]);
        println!(
            "turn-on to 40 mA: step peaks at {:.2}x, the ramp at {:.3}x the final {:.3} mW",
            step_peak / step_end,
            ramp_peak / ramp_end,
            ramp_end * 1e3
        );
        assert!(
            (ramp_end / step_end - 1.0).abs() < 1e-3,
            "{ramp_end} vs {step_end}"
        );
        assert!(
            step_peak > 2.0 * step_end,
            "step: peak {step_peak} vs {step_end}"
        );
        assert!(
            ramp_peak < 1.05 * ramp_end,
            "ramp: peak {ramp_peak} vs {ramp_end}"
        );
    }

    /// The hot-path conversion equals the fixed crate's, bit for bit.
    #[test]
    fn fx_exact_equals_to_num() {
        for bits in [
            i32::MIN,
            -65_537,
            -1,
            0,
            1,
            3,
            65_535,
            65_536,
            1_234_567,
            i32::MAX,
        ] {
            let v = Fx::from_bits(bits);
            assert_eq!(to_f(v).to_bits(), to_f(v).to_bits(), "{bits}");
        }
    }

    /// A warning that comes and goes within the merge gap is one span with
    /// a count and the ticks it was raised; a later one is a new span.
    #[test]
    fn chattering_warnings_make_one_span() {
        let mut res = RunResult::default();
        let on = Warnings {
            derating: true,
            ..Warnings::default()
        };
        let off = Warnings::default();
        let prev = (1.0, 2.0, Mode::Apc);
        for (tick, was, now) in [(10, off, on), (12, on, off), (15, off, on), (16, on, off)] {
            res.warnings_changed(tick, was, now, prev, 5);
        }
        // 16 -> 30 is longer than the gap of 5 ticks.
        res.warnings_changed(30, off, on, prev, 5);
        assert_eq!(res.warning_spans.len(), 2);
        let s = &res.warning_spans[0];
        assert_eq!(
            (s.warning, s.from_tick, s.to_tick, s.raised, s.raised_ticks),
            ("derating", 10, Some(16), 2, 3)
        );
        assert_eq!((s.last_p_mw, s.last_drive_ma), (1.0, 2.0));
        assert_eq!(res.warning_spans[1].to_tick, None);
    }

    /// A run longer than the retained rows hold streams every row to its
    /// sink while keeping at most `RETAINED_ROWS` evenly spaced rows and
    /// `ENVELOPE_BINS` envelope bins in memory.
    #[test]
    fn long_runs_stream_every_row_and_keep_bounded_memory() {
        struct Count(u64, u64);
        impl TraceSink for Count {
            fn row(&mut self, r: &TraceRow) {
                assert_eq!(r.tick, self.0, "rows arrive in order, none skipped");
                self.0 += 1;
            }
            fn progress(&mut self, done: u64, _: u64) {
                self.1 = done;
            }
        }
        let module = DemoModule::visible();
        let ticks = RETAINED_ROWS as u64 + 20_000;
        let mut sc = scenario(1, 20.0, 0.0);
        sc.duration_ms = ticks as f64 / 20.0;
        let mut sink = Count(0, 0);
        let res = run_streamed(
            &sc,
            &module,
            config(&module),
            DacLatency::ONE_TICK,
            Vec::new(),
            &mut sink,
        )
        .unwrap();
        assert_eq!(res.ticks, ticks);
        assert_eq!((sink.0, sink.1), (ticks, ticks));
        assert!(res.trace.len() <= RETAINED_ROWS);
        assert_eq!(res.trace_stride, 2);
        assert!(res.trace.windows(2).all(|w| w[1].tick - w[0].tick == 2));
        assert!(res.envelope.bins().len() <= crate::trace::ENVELOPE_BINS);
        assert_eq!(res.envelope.bins().last().unwrap().last_tick, ticks - 1);
        // The summary says its figures come from a thinned trace.
        assert!(crate::report::summary(&sc, &res, Vec::new())
            .text()
            .contains("step figures use one tick in 2:"));
    }

    /// The envelope the run builds every tick is the one its full trace
    /// gives: the channels go in where the plots look for them.
    #[test]
    fn envelope_of_a_run_is_the_envelope_of_its_trace() {
        let module = DemoModule::visible();
        let res = run(
            &scenario(2, 20.0, 500.0),
            &module,
            config(&module),
            DacLatency::ONE_TICK,
        )
        .unwrap();
        let mut e = Envelope::new(res.ticks);
        for r in &res.trace {
            e.add(r);
        }
        assert_eq!(res.trace_stride, 1);
        assert_eq!(e, res.envelope);
        assert!(e.ticks_per_bin() > 1);
    }

    /// The same scenario and seed give the same trace bit for bit; another
    /// seed gives another noise realisation.
    #[test]
    fn runs_are_deterministic() {
        let module = DemoModule::visible();
        let a = run(
            &scenario(9, 20.0, 200.0),
            &module,
            config(&module),
            DacLatency::ONE_TICK,
        )
        .unwrap();
        let b = run(
            &scenario(9, 20.0, 200.0),
            &module,
            config(&module),
            DacLatency::ONE_TICK,
        )
        .unwrap();
        let c = run(
            &scenario(10, 20.0, 200.0),
            &module,
            config(&module),
            DacLatency::ONE_TICK,
        )
        .unwrap();
        assert_eq!(a.trace, b.trace);
        assert_eq!(a.happenings, b.happenings);
        assert_ne!(a.trace, c.trace);
    }

    /// A run forked at a moment and continued with one more event is the
    /// very run of the whole scenario from t = 0: every field of the
    /// result is bit-identical (compared through their exact, round-trip
    /// Debug forms), for injections before the enable, during the ramp, in
    /// regulation with a later setpoint change, of a board bus, on a two
    /// tick drive latency, and for one more event on the fork's own tick.
    #[test]
    fn forked_run_equals_the_run_from_t0() {
        let module = DemoModule::visible();
        let cfg = config(&module);
        let ev = |at_ms: f64, action: Action| Event { at_ms, action };
        let inject = |fault| Action::Inject { fault };
        let cases = [
            (0.05, ev(0.05, inject(HwFault::SensorOpen)), 1),
            (2.0, ev(2.0, inject(HwFault::DacStuck { code: 4095 })), 1),
            (20.0, ev(20.0, inject(HwFault::MonitorOpen)), 2),
            (20.0, ev(20.0, inject(HwFault::EnablePin)), 1),
            (25.0, ev(26.0, inject(HwFault::MissedTicks { ticks: 5 })), 3),
            (20.0, ev(20.0, Action::Disable), 1),
        ];
        for (at_ms, extra, lat) in cases {
            let mut sc = scenario(5, 20.0, 60.0);
            sc.events.truncate(2);
            sc.events.push(ev(40.0, Action::SetPower { mw: 10.0 }));
            let latency = DacLatency::ticks(lat).unwrap();
            let fork = fork_at(&sc, &module, cfg.clone(), latency, at_ms).unwrap();
            assert_eq!(fork.tick(), tick_at(at_ms, cfg.config().tick_hz));
            let forked = fork.resume(&extra).unwrap();
            // Resuming does not move the fork: a second continuation is
            // the same again.
            let again = fork.resume(&extra).unwrap();
            let mut whole = sc.clone();
            whole.events.push(extra.clone());
            let full = run(&whole, &module, cfg.clone(), latency).unwrap();
            assert_eq!(format!("{forked:?}"), format!("{full:?}"), "{extra:?}");
            assert_eq!(format!("{again:?}"), format!("{full:?}"), "{extra:?}");
            assert!(full.happenings.len() > 2);
            // Streamed: the fork's rows, then the sink's, are the whole
            // trace; the rest of the result is the same.
            let mut rows = Rows(fork.rows().to_vec());
            let mut streamed = fork.resume_streamed(&extra, &mut rows).unwrap();
            assert_eq!(fork.rows_stride(), full.trace_stride);
            assert_eq!(streamed.trace, fork.rows());
            assert_eq!(rows.0, full.trace, "{extra:?}");
            streamed.trace = full.trace.clone();
            assert_eq!(format!("{streamed:?}"), format!("{full:?}"), "{extra:?}");
        }
    }

    /// A sink that keeps every row.
    struct Rows(Vec<TraceRow>);

    impl TraceSink for Rows {
        fn row(&mut self, row: &TraceRow) {
            self.0.push(*row);
        }
    }

    /// A run that records neither the envelope nor the loop findings has
    /// every other field of the full run's result, bit for bit (compared
    /// through their exact Debug forms), from t = 0 and forked; the two it
    /// skips are empty. A degraded monitor pins the drive on its ceiling,
    /// so the full run has findings to skip.
    #[test]
    fn a_verdict_run_is_the_full_run_less_envelope_and_findings() {
        let module = DemoModule::visible();
        let cfg = config(&module);
        let mut sc = scenario(7, 20.0, 500.0);
        // A monitor reading a third low: the loop drives to its ceiling.
        sc.events[2] = Event {
            at_ms: 100.0,
            action: Action::Inject {
                fault: HwFault::MonitorDegrade { factor: 0.66 },
            },
        };
        let full = run(&sc, &module, cfg.clone(), DacLatency::ONE_TICK).unwrap();
        assert!(!full.envelope.bins().is_empty());
        assert!(!full.loop_findings.is_empty(), "no findings to skip");
        let lean = run_recording(
            &sc,
            &module,
            cfg.clone(),
            DacLatency::ONE_TICK,
            Record::VERDICT,
        )
        .unwrap();
        assert!(lean.envelope.bins().is_empty());
        assert!(lean.loop_findings.is_empty());
        let mut expected = full.clone();
        expected.envelope = lean.envelope.clone();
        expected.loop_findings = Vec::new();
        assert_eq!(format!("{lean:?}"), format!("{expected:?}"));
        let mut lead = sc.clone();
        let last = lead.events.pop().unwrap();
        let fork = fork_recording(
            &lead,
            &module,
            cfg,
            DacLatency::ONE_TICK,
            last.at_ms,
            Record::VERDICT,
        )
        .unwrap();
        let forked = fork.resume(&last).unwrap();
        assert_eq!(format!("{forked:?}"), format!("{expected:?}"));
    }

    /// A fork refuses an event before its moment (it has already run past
    /// it).
    #[test]
    fn fork_refuses_an_event_in_its_past() {
        let module = DemoModule::visible();
        let cfg = config(&module);
        let fork = fork_at(
            &scenario(1, 20.0, 10.0),
            &module,
            cfg,
            DacLatency::ONE_TICK,
            5.0,
        )
        .unwrap();
        let early = Event {
            at_ms: 4.0,
            action: Action::Disable,
        };
        assert_eq!(
            fork.resume(&early).unwrap_err(),
            ForkError {
                at_ms: 4.0,
                fork_tick: 100
            }
        );
    }
}

#[cfg(test)]
mod fault_log_tests {
    use super::*;
    use crate::calibration;
    use crate::scenario::Event;

    /// Thirty interlock trips, each cleared and re-enabled: the run reports
    /// all thirty (counting the log's held records, as the run once did,
    /// reported 17: the first and a full ring of 16).
    #[test]
    fn thirty_trips_are_all_reported() {
        let module = DemoModule::visible();
        let cfg = calibration::calibrate(diodestat_core::example::config(), &module)
            .validate()
            .unwrap();
        let ev = |at_ms: f64, action: Action| Event { at_ms, action };
        let mut events = vec![ev(0.0, Action::SetPower { mw: 5.0 })];
        for k in 0..30 {
            let t0 = 1.0 + 20.0 * f64::from(k);
            events.push(ev(t0, Action::Enable));
            let open = HwFault::InterlockOpen;
            events.push(ev(t0 + 10.0, Action::Inject { fault: open }));
            events.push(ev(t0 + 12.0, Action::Repair { fault: open }));
            events.push(ev(t0 + 14.0, Action::Clear));
        }
        let sc = Scenario {
            name: "thirty-trips".into(),
            board: String::new(),
            duration_ms: 620.0,
            ambient_c: 25.0,
            seed: 1,
            diode_model: DiodeModel::QuasiStatic,
            trace_every: 1000,
            aging_speedup: 1.0,
            events,
            expects: Vec::new(),
        };
        let r = run(&sc, &module, cfg, DacLatency::default()).unwrap();
        let trips = r
            .happenings
            .iter()
            .filter(|h| {
                matches!(
                    h,
                    Happening::Fault {
                        fault: "interlock-open",
                        ..
                    }
                )
            })
            .count();
        let others: Vec<_> = r
            .happenings
            .iter()
            .filter(|h| matches!(h, Happening::Fault { fault, .. } if *fault != "interlock-open"))
            .collect();
        assert!(others.is_empty(), "{others:?}");
        assert_eq!(trips, 30);
        assert_eq!(r.faults_lost, 0);
    }
}
