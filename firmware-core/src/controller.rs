//! The controller: the state machine and the per-tick sequence.
//!
//! ```text
//! Off --Enable--> Arming --delay--> Ramping --hand-over--> Regulating
//!  ^                 |                 |                       |
//!  |              Disable           Disable                 Disable
//!  |                 v                 v                       v
//!  +-----------------+<----- 0 iu --- Stopping <---------------+
//! any state --fault--> Latched --ClearFaults (no condition present)--> Off
//! ```
//!
//! Each [`Controller::step`]:
//! 1. calibrates the sample and measures the tick gap;
//! 2. computes the ceiling: min(configured ceiling, derated ceiling, ramp envelope);
//!    with the temperature sensor at a rail the derated ceiling is the floor;
//! 3. evaluates every protection ([`crate::protect`]); a trip latches and the
//!    returned [`Drive`] of this same call has enable low and DAC zero;
//! 4. otherwise runs the state: soft start, APC ([`crate::apc`]) or ACC, soft stop.

use crate::apc::{Limits, PowerLoop};
use crate::config::ValidConfig;
use crate::fault::{Fault, FaultLog, FaultRecord, FaultSet};
use crate::io::{Drive, Mode, Sample, State, Status, Warnings};
use crate::persist::{LatchRecord, RestoreError, LATCH_RECORD_LEN};
use crate::protect::{Measurements, Protections, TempReading, SLOW_EVERY};
use crate::request::{Rejection, Request};
use crate::temp_table::Window;
use crate::units::{clamp_fx, Fx};

/// The laser-diode controller. Create it from a [`ValidConfig`], call
/// [`Controller::step`] once per tick and [`Controller::request`] whenever
/// the user asks for something.
#[derive(Clone, Debug)]
pub struct Controller {
    cfg: ValidConfig,
    /// State, mode, latched faults and warnings, as returned in every
    /// [`Drive`].
    status: Status,
    requested_mode: Mode,
    power_target_ou: Fx,
    power_sp_ou: Fx,
    current_target_iu: Fx,
    drive_iu: Fx,
    envelope_iu: Fx,
    ceiling_iu: Fx,
    arming_left: u32,
    pi: PowerLoop,
    prot: Protections,
    present: FaultSet,
    log: FaultLog,
    last_tick: Option<u32>,
    meas: Measurements,
    /// The latest temperature reading and what the tick derives from it.
    temp: TempCache,
}

/// The latest temperature reading and what the tick derives from it alone:
/// the temperature, the sensor rail conditions, the static ceiling and the
/// derating warning. The configuration is fixed, so these depend on the
/// reading only: a sample with the same reading (the temperature moves
/// slowly against the tick) takes them from here instead of converting
/// again.
#[derive(Clone, Copy, Debug)]
struct TempCache {
    /// The reading the values below are of; `u32::MAX` (no reading) before
    /// the first sample.
    counts: u32,
    reading: TempReading,
    /// min(configured ceiling, derated ceiling), iu; the derating floor
    /// with the sensor at a rail.
    static_ceiling_iu: Fx,
    /// The derating warning: above the knee, the sensor not at a rail.
    derating: bool,
    /// Temperature table window around the reading (see
    /// [`crate::temp_table::degc_cached`]).
    window: Window,
}

impl TempCache {
    /// No reading yet, for `cfg`'s table.
    fn new(cfg: &ValidConfig) -> Self {
        TempCache {
            counts: u32::MAX,
            reading: TempReading {
                degc: Fx::ZERO,
                rails: 0,
            },
            static_ceiling_iu: Fx::ZERO,
            derating: false,
            window: Window::empty(&cfg.config().calibration.temperature.table),
        }
    }

    /// The reading `counts`, its static ceiling and its derating warning:
    /// those kept when it is the reading kept, else converted and kept.
    #[inline]
    fn take(&mut self, cfg: &ValidConfig, counts: u16) -> (TempReading, Fx, bool) {
        if u32::from(counts) == self.counts {
            return (self.reading, self.static_ceiling_iu, self.derating);
        }
        let t = TempReading::of(cfg, counts, &mut self.window);
        let c = cfg.config();
        // min(configured ceiling, derated ceiling): the derated ceiling is
        // the configured one up to the knee and below it past the knee, and
        // validation keeps the floor at or below it.
        let (static_ceiling_iu, derating) = if t.rails != 0 {
            (c.derating.floor_iu, false)
        } else if t.degc <= c.derating.knee_degc {
            (c.current.ceiling_iu, false)
        } else {
            (cfg.derated_ceiling_iu(t.degc), true)
        };
        self.counts = u32::from(counts);
        self.reading = t;
        self.static_ceiling_iu = static_ceiling_iu;
        self.derating = derating;
        (t, static_ceiling_iu, derating)
    }
}

impl Controller {
    /// A controller in Off, APC mode, with the lowest power setpoint and a
    /// zero current setpoint.
    pub fn new(cfg: ValidConfig) -> Self {
        let min_ou = cfg.config().power.min_setpoint_ou;
        let temp = TempCache::new(&cfg);
        Controller {
            cfg,
            status: Status {
                state: State::Off,
                mode: Mode::Apc,
                faults: FaultSet::EMPTY,
                warnings: Warnings {
                    derating: false,
                    at_ceiling: false,
                    sensor_suspect: false,
                    end_of_life: false,
                },
            },
            requested_mode: Mode::Apc,
            power_target_ou: min_ou,
            power_sp_ou: Fx::ZERO,
            current_target_iu: Fx::ZERO,
            drive_iu: Fx::ZERO,
            envelope_iu: Fx::ZERO,
            ceiling_iu: Fx::ZERO,
            arming_left: 0,
            pi: PowerLoop::default(),
            prot: Protections::default(),
            present: FaultSet::EMPTY,
            log: FaultLog::new(),
            last_tick: None,
            meas: Measurements::default(),
            temp,
        }
    }

    /// A controller for `cfg` that takes back the latch stored before a
    /// reset ([`crate::LatchRecord`]): latched again if it was latched, with
    /// the first-fault record in its log. A refused record starts it
    /// latched with [`Fault::RecordCorrupt`] (logged at tick 0, measured:
    /// [`RestoreError::code`]); only `ClearFaults` leaves either latch.
    pub fn restored(
        cfg: ValidConfig,
        stored: &[u8; LATCH_RECORD_LEN],
    ) -> (Self, Result<LatchRecord, RestoreError>) {
        let mut ctl = Controller::new(cfg);
        let result = LatchRecord::from_bytes(stored);
        match result {
            Ok(rec) => {
                ctl.log = FaultLog::restored(rec.first, rec.next_seq);
                if !rec.faults.is_empty() {
                    ctl.status.faults = rec.faults;
                    ctl.status.state = State::Latched;
                }
            }
            Err(e) => ctl.latch_edge_fault(FaultRecord {
                fault: Fault::RecordCorrupt,
                tick: 0,
                measured: Fx::from_num(e.code()),
                limit: Fx::ZERO,
            }),
        }
        (ctl, result)
    }

    /// The latch as it must survive a reset: store
    /// [`LatchRecord::to_bytes`] whenever the latched faults change.
    pub fn latch_record(&self) -> LatchRecord {
        LatchRecord {
            faults: self.status.faults,
            first: self.log.first_entry(),
            next_seq: self.log.end().0,
        }
    }

    /// Handle a user request; accepted requests take effect at the next tick.
    pub fn request(&mut self, req: Request) -> Result<(), Rejection> {
        let c = self.cfg.config();
        match req {
            Request::Enable => {
                if self.status.state != State::Off {
                    return Err(Rejection::NotAllowed {
                        state: self.status.state,
                    });
                }
                if self.last_tick.is_none() {
                    return Err(Rejection::NoSampleYet);
                }
                if let Some(fault) = self.present.first() {
                    return Err(Rejection::ConditionPresent { fault });
                }
                self.status.state = State::Arming;
                self.arming_left = self.cfg.emission_delay_ticks();
                Ok(())
            }
            Request::Disable => {
                match self.status.state {
                    State::Arming => self.status.state = State::Off,
                    State::Ramping | State::Regulating => self.status.state = State::Stopping,
                    State::Off | State::Stopping | State::Latched => {}
                }
                Ok(())
            }
            Request::SetPower(mw) => {
                let (min, max) = (c.power.min_setpoint_ou, c.power.max_setpoint_ou);
                if mw < min || mw > max {
                    return Err(Rejection::OutOfRange {
                        requested: mw,
                        min,
                        max,
                    });
                }
                self.power_target_ou = mw;
                Ok(())
            }
            Request::SetCurrent(ma) => {
                let max = c.current.ceiling_iu;
                if ma < Fx::ZERO || ma > max {
                    return Err(Rejection::OutOfRange {
                        requested: ma,
                        min: Fx::ZERO,
                        max,
                    });
                }
                self.current_target_iu = ma;
                Ok(())
            }
            Request::SetMode(mode) => {
                self.requested_mode = mode;
                Ok(())
            }
            Request::ClearFaults => {
                if self.status.state != State::Latched {
                    return Err(Rejection::NotAllowed {
                        state: self.status.state,
                    });
                }
                if let Some(fault) = self.present.first() {
                    return Err(Rejection::ConditionPresent { fault });
                }
                self.status.state = State::Off;
                self.status.faults = FaultSet::EMPTY;
                self.prot.reset();
                self.drive_iu = Fx::ZERO;
                self.envelope_iu = Fx::ZERO;
                Ok(())
            }
        }
    }

    /// Run one control tick on one sample. Bounded work, never panics.
    pub fn step(&mut self, s: &Sample) -> Drive {
        // 1. Measurements and the tick gap: the index step less one, so a
        // repeated index (step 0) or a backward one wraps to a huge gap,
        // which `protect` tells apart from missed ticks.
        let missed = match self.last_tick {
            Some(last) => s.tick.wrapping_sub(last).wrapping_sub(1),
            None => 0,
        };
        self.last_tick = Some(s.tick);
        // The command that produced this sample: the drive of the previous
        // tick (see 3.).
        let last_cmd = self.drive_iu;
        // The temperature first: a new reading may have to find its table
        // window again (a call), before any other value is live.
        let (temp, static_ceiling, derating) = self.temp.take(&self.cfg, s.temp_counts);
        let direct;
        (self.meas, direct) = Measurements::from_sample(&self.cfg, s, missed, last_cmd, temp);
        if s.tick & (SLOW_EVERY - 1) == 0 {
            self.status.warnings.end_of_life = self.prot.evaluate_slow(&self.cfg, &self.meas);
        }
        let m = &self.meas;
        let monitor_ou = m.monitor_ou;

        // 2. Static ceiling (configured and derated), of the temperature
        // reading.
        let c = self.cfg.config();
        self.status.warnings.derating = derating;
        self.status.warnings.sensor_suspect = m.sensor_at_rail;

        // 3. Protections, on the command that produced this sample: the
        // drive of the previous tick, which is zero whenever the state is
        // not emitting (every tick ends with the drive clamped to a zero
        // ceiling there, and every request that leaves an emitting state
        // for one that is not zeroes it or finds it zero).
        // Monitor loss: light is expected at or above the configured drive
        // level, and also, while the power loop regulates, on a lower
        // ceiling in force (a derated ceiling): a power loop pinned on its
        // ceiling with a dark monitor has lost its feedback, whatever the
        // ceiling. (In ACC a derated ceiling below threshold is dark by
        // design and only the configured level applies.)
        // (Evaluated only when the monitor reads dark.)
        let loss_drive = c.protection.monitor_loss_drive_iu;
        let (state, mode, ceiling) = (self.status.state, self.status.mode, self.ceiling_iu);
        let light_expected = || {
            if state == State::Regulating && mode == Mode::Apc {
                loss_drive.min(ceiling)
            } else {
                loss_drive
            }
        };
        let verdict = self.prot.check(
            &self.cfg,
            m,
            direct,
            s.tick,
            last_cmd,
            light_expected,
            self.status.state,
            self.status.faults,
            &mut self.log,
        );
        self.present = verdict.present;
        if !verdict.tripped.is_empty() {
            self.status.faults =
                FaultSet::of_faults(self.status.faults.bits() | verdict.tripped.bits());
            self.status.state = State::Latched;
        }

        // 4. The state. Each arm leaves the drive clamped to the ceiling in
        // force (zero when the state after it does not emit) and says
        // whether that state emits.
        self.apply_mode_change(monitor_ou);
        let (drive, enable, at_ceiling) = match self.status.state {
            State::Off | State::Latched => {
                self.envelope_iu = Fx::ZERO;
                self.ceiling_iu = Fx::ZERO;
                (Fx::ZERO, false, false)
            }
            State::Arming => {
                // Nothing starts emitting while a condition is present,
                // debounced or not: the start waits ([`Self::start_held`]).
                if self.arming_left == 0 && !self.present.is_empty() {
                    self.ceiling_iu = Fx::ZERO;
                    (Fx::ZERO, false, false)
                } else if self.arming_left == 0 {
                    self.status.state = State::Ramping;
                    self.envelope_iu = Fx::ZERO;
                    let d = self.ramp(monitor_ou, static_ceiling);
                    (clamp_fx(d, Fx::ZERO, self.ceiling_iu), true, false)
                } else {
                    self.arming_left -= 1;
                    self.ceiling_iu = Fx::ZERO;
                    (Fx::ZERO, false, false)
                }
            }
            State::Ramping => {
                let d = self.ramp(monitor_ou, static_ceiling);
                (clamp_fx(d, Fx::ZERO, self.ceiling_iu), true, false)
            }
            State::Regulating => {
                let (d, at_ceiling) = self.regulate(monitor_ou, static_ceiling);
                (d, true, at_ceiling)
            }
            State::Stopping => {
                let d = self
                    .drive_iu
                    .saturating_sub(self.cfg.soft_stop_iu_per_tick())
                    .max(Fx::ZERO)
                    .min(static_ceiling);
                self.envelope_iu = d;
                // Zero when the ramp ends in Off.
                self.ceiling_iu = d;
                if d == Fx::ZERO {
                    self.status.state = State::Off;
                }
                (clamp_fx(d, Fx::ZERO, d), d != Fx::ZERO, false)
            }
        };
        self.status.warnings.at_ceiling = at_ceiling;
        self.drive_iu = drive;
        Drive {
            dac_code: if enable {
                self.cfg.drive_code(drive)
            } else {
                0
            },
            enable,
            status: self.status,
        }
    }

    fn apply_mode_change(&mut self, monitor_ou: Fx) {
        if self.requested_mode == self.status.mode {
            return;
        }
        if self.status.state == State::Regulating && self.requested_mode == Mode::Apc {
            // Bumpless ACC -> APC: start the power setpoint at the measured
            // power and the integrator at the present drive.
            self.power_sp_ou = self.measured_setpoint(monitor_ou);
            self.pi.preset(self.drive_iu);
        }
        // APC -> ACC needs nothing: the drive slews from where it is.
        self.status.mode = self.requested_mode;
    }

    /// Soft start in current mode.
    fn ramp(&mut self, monitor_ou: Fx, static_ceiling: Fx) -> Fx {
        let c = self.cfg.config();
        let handover_ou = self
            .power_target_ou
            .saturating_mul(c.ramp.handover_fraction);
        match self.status.mode {
            Mode::Apc if monitor_ou >= handover_ou => {
                // Hand over at the present drive: the power setpoint ramps
                // on from the measured power.
                self.status.state = State::Regulating;
                self.power_sp_ou = self.measured_setpoint(monitor_ou);
                self.pi.preset(self.drive_iu);
                self.ceiling_iu = self.envelope_iu.min(static_ceiling);
                return self.drive_iu;
            }
            _ => {}
        }
        let env = self
            .envelope_iu
            .saturating_add(self.cfg.soft_start_iu_per_tick());
        let target = match self.status.mode {
            Mode::Apc => static_ceiling,
            Mode::Acc => self.current_target_iu.min(static_ceiling),
        };
        // A target below the present drive (ACC setpoint lowered, or a
        // transfer from APC) is approached at the slew rate, not in one step;
        // a lower ceiling still applies at once.
        let slew_floor = self
            .drive_iu
            .saturating_sub(self.cfg.slew_iu_per_tick())
            .min(static_ceiling);
        let d = env.min(target).max(slew_floor);
        self.envelope_iu = env.min(c.current.ceiling_iu);
        self.ceiling_iu = self.envelope_iu.min(static_ceiling);
        if d >= target {
            // Reached the ceiling (APC without enough light) or the ACC
            // setpoint, or is above the ACC setpoint: regulate from here (ACC
            // slews the rest of the way); monitor loss covers "no light".
            self.status.state = State::Regulating;
            self.pi.preset(d);
            self.power_sp_ou = self.measured_setpoint(monitor_ou);
        }
        d
    }

    /// The power setpoint a bumpless start of the power loop begins from:
    /// the measured power, within the accepted setpoint range; the setpoint
    /// ramp then carries it to the target from either side.
    fn measured_setpoint(&self, monitor_ou: Fx) -> Fx {
        clamp_fx(
            monitor_ou,
            Fx::ZERO,
            self.cfg.config().power.max_setpoint_ou,
        )
    }

    /// Closed-loop regulation, APC or ACC: the drive, clamped to
    /// `[0, ceiling]`, and whether it sits at the ceiling (before that
    /// clamp).
    fn regulate(&mut self, monitor_ou: Fx, static_ceiling: Fx) -> (Fx, bool) {
        let c = self.cfg.config();
        // The envelope never exceeds the configured ceiling, and once there
        // it stays (the soft-start step is positive): the usual tick skips
        // the step.
        if self.envelope_iu < c.current.ceiling_iu {
            self.envelope_iu = self
                .envelope_iu
                .saturating_add(self.cfg.soft_start_iu_per_tick())
                .min(c.current.ceiling_iu);
        }
        let ceiling = self.envelope_iu.min(static_ceiling);
        self.ceiling_iu = ceiling;
        let slew = self.cfg.slew_iu_per_tick();
        match self.status.mode {
            Mode::Apc => {
                // (A setpoint at its target stays there: `toward` of equal
                // ends is the target.)
                if self.power_sp_ou != self.power_target_ou {
                    self.power_sp_ou = toward(
                        self.power_sp_ou,
                        self.power_target_ou,
                        self.cfg.setpoint_ou_per_tick(),
                    );
                }
                let out = self.pi.step(
                    self.cfg.kp(),
                    self.cfg.ki_per_tick(),
                    self.power_sp_ou,
                    monitor_ou,
                    Limits {
                        prev_iu: self.drive_iu,
                        slew_iu: slew,
                        ceiling_iu: ceiling,
                    },
                );
                // The PI output is clamped to `[0, ceiling]` already.
                (out, out >= ceiling)
            }
            Mode::Acc => {
                let d = toward(self.drive_iu, self.current_target_iu, slew).min(ceiling);
                (clamp_fx(d, Fx::ZERO, ceiling), d >= ceiling)
            }
        }
    }

    /// Latch a fault found outside [`Controller::step`] (the hardware edge:
    /// a failed DAC write, enable pin or interlock read) and log `rec`.
    /// The drive is zero from this call on, as after a trip in `step`; a
    /// fault already latched is not logged again.
    pub fn latch_edge_fault(&mut self, rec: FaultRecord) {
        if self.status.faults.contains(rec.fault) {
            return;
        }
        self.status.faults.insert(rec.fault);
        self.status.state = State::Latched;
        self.drive_iu = Fx::ZERO;
        self.envelope_iu = Fx::ZERO;
        self.ceiling_iu = Fx::ZERO;
        self.log.record(rec);
    }

    /// The configuration in force.
    pub fn config(&self) -> &ValidConfig {
        &self.cfg
    }

    /// Present state.
    pub fn state(&self) -> State {
        self.status.state
    }

    /// Mode in force.
    pub fn mode(&self) -> Mode {
        self.status.mode
    }

    /// Compact status, as returned in the last [`Drive`].
    pub fn status(&self) -> Status {
        self.status
    }

    /// Latched faults.
    pub fn faults(&self) -> FaultSet {
        self.status.faults
    }

    /// Fault conditions present in the latest sample (before debounce).
    pub fn conditions(&self) -> FaultSet {
        self.present
    }

    /// Whether the start is held in Arming: the emission delay has run out
    /// but a protection condition is present ([`Self::conditions`] says
    /// which); emission starts on the first tick without one. (Kept out of
    /// [`Status`]: its eight bytes are copied whole on every tick.)
    pub fn start_held(&self) -> bool {
        self.status.state == State::Arming && self.arming_left == 0 && !self.present.is_empty()
    }

    /// The fault log.
    pub fn fault_log(&self) -> &FaultLog {
        &self.log
    }

    /// Calibrated measurements of the latest sample.
    pub fn measurements(&self) -> &Measurements {
        &self.meas
    }

    /// Current commanded in the latest tick, iu.
    pub fn drive_iu(&self) -> Fx {
        self.drive_iu
    }

    /// The ceiling in force in the latest tick, iu (zero when not emitting).
    pub fn ceiling_iu(&self) -> Fx {
        self.ceiling_iu
    }

    /// The requested power setpoint, ou.
    pub fn power_target_ou(&self) -> Fx {
        self.power_target_ou
    }

    /// The ramped power setpoint the loop follows now, ou.
    pub fn power_setpoint_ou(&self) -> Fx {
        self.power_sp_ou
    }

    /// The requested current setpoint, iu.
    pub fn current_target_iu(&self) -> Fx {
        self.current_target_iu
    }

    /// The power-loop integrator, iu.
    pub fn integrator_iu(&self) -> Fx {
        self.pi.integrator_iu()
    }
}

/// Move `from` toward `to` by at most `step`.
fn toward(from: Fx, to: Fx, step: Fx) -> Fx {
    if from < to {
        from.saturating_add(step).min(to)
    } else {
        from.saturating_sub(step).max(to)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The kept reading gives what converting it again gives: every
    /// reading, taken fresh, repeated, and after each of a few others
    /// (rails, the table's ends, far away).
    #[test]
    fn a_kept_temperature_reading_equals_a_fresh_one() {
        let cfg = crate::example::config().validate().unwrap();
        let fresh = |counts: u16| TempCache::new(&cfg).take(&cfg, counts);
        let mut kept = TempCache::new(&cfg);
        for counts in 0..=u16::MAX {
            let want = fresh(counts);
            for before in [0, 40, 2_048, 4_055, 4_095, u16::MAX, counts ^ 1] {
                kept.take(&cfg, before);
                assert_eq!(kept.take(&cfg, counts), want, "{counts} after {before}");
                assert_eq!(kept.take(&cfg, counts), want, "{counts} repeated");
            }
        }
    }

    /// `step` takes the previous drive as the command that produced the
    /// sample without looking at the state: that relies on the drive being
    /// zero whenever the state is not emitting, after every tick and every
    /// request. Random samples and requests, the invariant checked after
    /// each.
    #[test]
    fn drive_is_zero_whenever_not_emitting() {
        let cfg = crate::example::config().validate().unwrap();
        let mut x: u64 = 5;
        let mut next = move || {
            // A 64-bit LCG (Knuth's MMIX constants, `common practice`).
            x = x
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (x >> 33) as u32
        };
        let holds = |c: &Controller| c.state().is_emitting() || c.drive_iu() == Fx::ZERO;
        let mut emitting_ticks = 0u32;
        for _ in 0..20 {
            let mut ctl = Controller::new(cfg.clone());
            let mut s = Sample {
                tick: 0,
                monitor_counts: 0,
                current_counts: 0,
                temp_counts: 2_048,
                supply_counts: 2_457,
                interlock_closed: true,
                forward_counts: None,
                external_fault: false,
            };
            for _ in 0..5_000 {
                if next().is_multiple_of(50) {
                    let req = match next() % 6 {
                        0 | 1 => Request::Enable,
                        2 => Request::Disable,
                        3 => Request::ClearFaults,
                        4 => Request::SetMode(if next().is_multiple_of(2) {
                            Mode::Apc
                        } else {
                            Mode::Acc
                        }),
                        _ => Request::SetCurrent(Fx::from_num(next() % 50)),
                    };
                    let _ = ctl.request(req);
                    assert!(holds(&ctl), "after {req:?}");
                }
                s.tick = s.tick.wrapping_add(1);
                // Sensed current and light follow the drive, with the odd
                // outlier.
                let d = ctl.drive_iu().to_num::<i32>().max(0) as u32;
                s.current_counts = (d * 58 + next() % 3) as u16;
                s.monitor_counts = (d.saturating_sub(10) * 45 + next() % 3) as u16;
                if next().is_multiple_of(400) {
                    s.current_counts = (next() % 4_096) as u16;
                }
                let drive = ctl.step(&s);
                assert!(holds(&ctl));
                assert_eq!(drive.enable, ctl.state().is_emitting());
                emitting_ticks += u32::from(drive.enable);
            }
        }
        assert!(
            emitting_ticks > 10_000,
            "the loop emitted: {emitting_ticks}"
        );
    }
}
