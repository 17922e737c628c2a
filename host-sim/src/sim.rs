//! The closed loop: the very same `diodestat-core` controller against the
//! plant (diode, driver, thermal path, sensors), one core `step` per tick,
//! with timed requests, ambient changes and injected hardware faults.
//!
//! [`Plant`] evaluates its models on the fast path: the diode steady state
//! from an anchored Halley step, slowly varying exponentials continued from
//! the previous tick, the thermal ladder with the dissipation as its last
//! multiply-add. [`Plant::new_reference`] and [`run_reference`] evaluate the
//! same equations the straightforward way; the tests hold the two to 1e-9
//! in optical power and 1e-8 K in junction temperature, with identical ADC
//! codes, core states and events.

use diodestat_core::{Controller, Fx, Mode, Request, Sample, State, ValidConfig};

use crate::plant::{
    c_to_k, k_to_c, Adc, DemoModule, Diode, Driver, Monitor, PlantError, SensorChain, Thermal,
};
use crate::scenario::{Action, AdcChannel, DiodeModel, HwFault, ModeName, Scenario};

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

/// The plant around the controller.
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
    /// Monitor front-end filter state, V.
    mon_filt_v: f64,
    /// Monitor filter coefficient 1 - exp(-2 pi f dt) and its dt, s.
    mon_filt_a: f64,
    mon_filt_dt: f64,
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
            mon_filt_v: 0.0,
            mon_filt_a: 0.0,
            mon_filt_dt: f64::NAN,
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

    /// Sample every channel for the tick `tick`.
    pub fn sample(&mut self, tick: u32, dt: f64) -> Sample {
        let t_case = self.thermal.t_case_k();
        let i_mon = if self.reference {
            self.monitor
                .current_a(self.p_front_w, self.wavelength_m, t_case)
        } else {
            self.monitor
                .current_a_near(self.p_front_w, self.wavelength_m, t_case)
        };
        let temp_counts = if self.reference {
            self.sensor.counts_reference(t_case, dt)
        } else {
            self.sensor.counts(t_case, dt)
        };
        let v_mon = self.monitor.voltage_v(i_mon);
        if dt != self.mon_filt_dt {
            self.mon_filt_a = 1.0 - (-dt * 2.0 * std::f64::consts::PI * MONITOR_FILTER_HZ).exp();
            self.mon_filt_dt = dt;
        }
        self.mon_filt_v += self.mon_filt_a * (v_mon - self.mon_filt_v);
        let i = self.driver.current_a();
        Sample {
            tick,
            monitor_counts: self.adc_monitor.sample(self.mon_filt_v),
            current_counts: self.adc_current.sample(self.driver.sense_voltage(i)),
            temp_counts,
            supply_counts: self
                .adc_supply
                .sample(self.supply_v / crate::board::SUPPLY_DIVIDER),
            interlock_closed: self.interlock_closed,
        }
    }

    /// Advance the plant by `dt` under a DAC code and enable line.
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
            DiodeModel::Dynamic => self.diode.step_dynamic(i, tj, dt),
        };
        self.p_front_w = out.p_front_w;
        self.wavelength_m = out.wavelength_m;
        self.v_f = out.v_f_v;
        let p_diss = (i * out.v_f_v - out.p_front_w - out.p_back_w).max(0.0);
        if self.reference {
            self.thermal.step_reference(p_diss, ambient_k, dt);
        } else {
            self.thermal.step(p_diss, ambient_k, dt);
        }
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
        }
    }
}

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
}

fn fx(v: f64) -> Fx {
    Fx::saturating_from_num(v)
}

/// `v` as f64, exactly (an I16F16 is an i32 over 2^16: both steps are
/// exact in f64), without the generic conversion's rounding logic.
#[inline]
fn to_f(v: Fx) -> f64 {
    f64::from(v.to_bits()) * (1.0 / f64::from(1u32 << Fx::FRAC_NBITS))
}

/// Run a scenario on a validated board configuration.
pub fn run(sc: &Scenario, module: &DemoModule, cfg: ValidConfig) -> Result<RunResult, PlantError> {
    run_plant(
        sc,
        cfg,
        Plant::new(module, sc.ambient_c, sc.seed)?,
        &mut NoSink,
    )
}

/// [`run`], handing every recorded row (every `trace_every`-th tick) to
/// `sink` as it is made, for example to stream `trace.csv` to disk.
pub fn run_streamed(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
    sink: &mut dyn TraceSink,
) -> Result<RunResult, PlantError> {
    run_plant(sc, cfg, Plant::new(module, sc.ambient_c, sc.seed)?, sink)
}

/// Ticks between two progress reports to a [`TraceSink`].
const PROGRESS_TICKS: u64 = 1 << 14;

/// [`run`] on the reference plant ([`Plant::new_reference`]): same
/// scenario, same noise, every model evaluated the straightforward way.
pub fn run_reference(
    sc: &Scenario,
    module: &DemoModule,
    cfg: ValidConfig,
) -> Result<RunResult, PlantError> {
    run_plant(
        sc,
        cfg,
        Plant::new_reference(module, sc.ambient_c, sc.seed)?,
        &mut NoSink,
    )
}

fn run_plant(
    sc: &Scenario,
    cfg: ValidConfig,
    mut plant: Plant,
    sink: &mut dyn TraceSink,
) -> Result<RunResult, PlantError> {
    let tick_hz = cfg.config().tick_hz;
    let dt = 1.0 / f64::from(tick_hz);
    let n_ticks = (sc.duration_ms * 1e-3 * f64::from(tick_hz)).round() as u64;
    let mut ctl = Controller::new(cfg);
    let mut events: Vec<(u64, &Action)> = sc
        .events
        .iter()
        .map(|e| {
            (
                (e.at_ms * 1e-3 * f64::from(tick_hz)).round() as u64,
                &e.action,
            )
        })
        .collect();
    events.sort_by_key(|e| e.0);
    let mut next_event = 0usize;
    let mut ambient_c = sc.ambient_c;
    let mut ramp: Option<(f64, f64, u64, u64)> = None; // from, to, start, end
    let mut res = RunResult {
        tick_hz,
        envelope: Envelope::new(n_ticks),
        ..RunResult::default()
    };
    let mut kept = Retained::new(RETAINED_ROWS);
    let mut last_state = State::Off;
    let mut logged = 0usize;
    let mut drive = diodestat_core::Drive::default();
    let trace_every = u64::from(sc.trace_every.max(1));
    for tick in 0..n_ticks {
        // Timed events for this tick.
        while let Some(&(at, action)) = events.get(next_event) {
            if at > tick {
                break;
            }
            next_event += 1;
            let req = match action {
                Action::Enable => Some(Request::Enable),
                Action::Disable => Some(Request::Disable),
                Action::SetPower { mw } => Some(Request::SetPowerMw(fx(*mw))),
                Action::SetCurrent { ma } => Some(Request::SetCurrentMa(fx(*ma))),
                Action::Mode { mode } => Some(Request::SetMode(match mode {
                    ModeName::Apc => Mode::Apc,
                    ModeName::Acc => Mode::Acc,
                })),
                Action::Clear => Some(Request::ClearFaults),
                Action::AmbientStep { to_c } => {
                    ambient_c = *to_c;
                    ramp = None;
                    None
                }
                Action::AmbientRamp { to_c, over_ms } => {
                    let len = (over_ms * 1e-3 * f64::from(tick_hz)).round().max(1.0) as u64;
                    ramp = Some((ambient_c, *to_c, tick, tick + len));
                    None
                }
                Action::Inject { fault } => {
                    plant.inject(fault, true);
                    res.happenings.push(Happening::Injected {
                        tick,
                        fault: fault.name(),
                    });
                    None
                }
                Action::Repair { fault } => {
                    plant.inject(fault, false);
                    None
                }
            };
            if let Some(r) = req {
                if let Err(why) = ctl.request(r) {
                    res.happenings.push(Happening::Rejected {
                        tick,
                        why: why.to_string(),
                    });
                }
            }
        }
        if let Some((from, to, start, end)) = ramp {
            let x = ((tick - start) as f64 / (end - start) as f64).min(1.0);
            ambient_c = from + (to - from) * x;
            if tick >= end {
                ramp = None;
            }
        }
        // The board samples and steps the core, unless it misses this tick.
        let sample = plant.sample(tick as u32, dt);
        if plant.missed_left > 0 {
            plant.missed_left -= 1;
        } else {
            drive = ctl.step(&sample);
        }
        plant.advance(
            drive.dac_code,
            drive.enable,
            c_to_k(ambient_c),
            sc.diode_model,
            dt,
        );
        let p_mw = plant.p_front_w * 1e3;
        res.peak_mw = res.peak_mw.max(p_mw);
        if !res.damaged && plant.diode.damaged() {
            res.damaged = true;
            res.happenings.push(Happening::FacetDamage { tick });
        }
        let st = ctl.state();
        if st != last_state {
            res.happenings.push(Happening::State { tick, state: st });
            last_state = st;
        }
        let log = ctl.fault_log();
        if log.len() > logged {
            for r in log.first().into_iter().chain(log.later()).skip(logged) {
                res.happenings.push(Happening::Fault {
                    tick,
                    fault: r.fault.name(),
                    measured: to_f(r.measured),
                    limit: to_f(r.limit),
                });
            }
            logged = log.len();
        }
        // Every tick feeds the plot envelope (only what the plots draw);
        // every `trace_every`-th is recorded whole.
        let m = ctl.measurements();
        let i_ma = plant.driver.current_a() * 1e3;
        let monitor_mw = to_f(m.monitor_mw);
        let ceiling_ma = to_f(ctl.ceiling_ma());
        let tj_c = k_to_c(plant.thermal.t_junction_k());
        let sensed_c = to_f(m.temp_degc);
        res.envelope.add_values(
            tick,
            [
                p_mw, monitor_mw, i_ma, ceiling_ma, tj_c, sensed_c, ambient_c,
            ],
        );
        if tick.is_multiple_of(trace_every) {
            let status = ctl.status();
            let row = TraceRow {
                tick,
                t_s: tick as f64 * dt,
                state: st,
                mode: status.mode,
                enable: drive.enable,
                dac_code: drive.dac_code,
                faults: status.faults,
                warnings: status.warnings,
                p_mw,
                i_ma,
                cmd_ma: to_f(ctl.drive_ma()),
                ceiling_ma,
                monitor_mw,
                tj_c,
                sensed_c,
                ambient_c,
                supply_v: plant.supply_v,
                supply_sensed_v: to_f(m.supply_mv) * 1e-3,
                v_f_v: plant.v_f,
                wavelength_nm: plant.wavelength_m * 1e9,
            };
            kept.push(row);
            sink.row(&row);
        }
        if tick.is_multiple_of(PROGRESS_TICKS) {
            sink.progress(tick, n_ticks);
        }
        res.ticks = tick + 1;
    }
    res.final_state = ctl.state();
    res.trace_stride = kept.stride() * trace_every;
    res.trace = kept.into_rows();
    sink.progress(n_ticks, n_ticks);
    Ok(res)
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
    use crate::board;
    use crate::scenario::Event;

    fn config(module: &DemoModule) -> ValidConfig {
        board::calibrate(diodestat_core::example::config(), module)
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
        for (name, mw) in [("demo-red-30", 20.0), ("demo-pump-5w", 3000.0)] {
            let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
                .join("../examples")
                .join(name)
                .join("board.toml");
            let board = crate::boardfile::load_board(&path).unwrap();
            let (module, cfg) = (board.module, board.valid);
            let dt = 1.0 / f64::from(cfg.config().tick_hz);
            let mut ctl = Controller::new(cfg);
            ctl.request(Request::SetPowerMw(fx(mw))).unwrap();
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
        let a = run(&sc, &module, config(&module)).unwrap();
        let b = run_reference(&sc, &module, config(&module)).unwrap();
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
        let res = run_streamed(&sc, &module, config(&module), &mut sink).unwrap();
        assert_eq!(res.ticks, ticks);
        assert_eq!((sink.0, sink.1), (ticks, ticks));
        assert!(res.trace.len() <= RETAINED_ROWS);
        assert_eq!(res.trace_stride, 2);
        assert!(res.trace.windows(2).all(|w| w[1].tick - w[0].tick == 2));
        assert!(res.envelope.bins().len() <= crate::trace::ENVELOPE_BINS);
        assert_eq!(res.envelope.bins().last().unwrap().last_tick, ticks - 1);
        // The summary says its figures come from a thinned trace.
        assert!(crate::report::summary(&sc, &res).contains("step figures use one tick in 2:"));
    }

    /// The envelope the run builds every tick is the one its full trace
    /// gives: the channels go in where the plots look for them.
    #[test]
    fn envelope_of_a_run_is_the_envelope_of_its_trace() {
        let module = DemoModule::visible();
        let res = run(&scenario(2, 20.0, 500.0), &module, config(&module)).unwrap();
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
        let a = run(&scenario(9, 20.0, 200.0), &module, config(&module)).unwrap();
        let b = run(&scenario(9, 20.0, 200.0), &module, config(&module)).unwrap();
        let c = run(&scenario(10, 20.0, 200.0), &module, config(&module)).unwrap();
        assert_eq!(a.trace, b.trace);
        assert_eq!(a.happenings, b.happenings);
        assert_ne!(a.trace, c.trace);
    }
}
