//! Shared helpers for the core's integration tests: count searches on the
//! calibration, healthy samples, per-tick conversions derived from the
//! configuration, and a linear L-I plant (fixed point) closed around the
//! controller in [`Rig`].
//!
//! Each test binary uses a different subset of these helpers.
#![allow(dead_code)]

use diodestat_core::{
    example, AdcCal, Config, Controller, Drive, Fx, Mode, Request, Sample, State, ValidConfig,
};

/// The demo configuration, validated.
pub fn demo() -> ValidConfig {
    example::config()
        .validate()
        .expect("the demo configuration is valid")
}

/// The demo configuration with `f` applied, validated.
pub fn demo_with(f: impl FnOnce(&mut Config)) -> ValidConfig {
    let mut c = example::config();
    f(&mut c);
    c.validate()
        .expect("the modified demo configuration is valid")
}

/// `rate × 1000 / tick_hz` (a per-ms rate per tick), truncated to the Fx
/// resolution: the conversion documented in the configuration.
pub fn per_tick(rate_per_ms: Fx, tick_hz: u32) -> Fx {
    Fx::from_bits(((i64::from(rate_per_ms.to_bits()) * 1000) / i64::from(tick_hz)) as i32)
}

/// Whole ticks covering `ms` milliseconds (rounded up).
pub fn ticks_for_ms(ms: u32, tick_hz: u32) -> u32 {
    (u64::from(ms) * u64::from(tick_hz)).div_ceil(1000) as u32
}

/// The lowest count in `0..=full_scale` whose reading is at or above `v`.
pub fn lowest_at_or_above(read: impl Fn(u16) -> Fx, v: Fx, full_scale: u16) -> u16 {
    (0..=full_scale)
        .find(|c| read(*c) >= v)
        .expect("some count reads at or above the value")
}

/// The highest count in `0..=full_scale` whose reading is at or below `v`.
pub fn highest_at_or_below(read: impl Fn(u16) -> Fx, v: Fx, full_scale: u16) -> u16 {
    (0..=full_scale)
        .rev()
        .find(|c| read(*c) <= v)
        .expect("some count reads at or below the value")
}

/// The count whose reading is nearest to `v`.
pub fn nearest(read: impl Fn(u16) -> Fx, v: Fx, full_scale: u16) -> u16 {
    (0..=full_scale)
        .min_by_key(|c| (read(*c) - v).abs())
        .expect("non-empty range")
}

/// Counts of an ADC channel for an engineering value, rounded to nearest
/// and clamped to the converter range (integer arithmetic only).
pub fn counts_for(cal: &AdcCal, v: Fx) -> u16 {
    let g = i64::from(cal.units_per_count.to_bits()); // 24 fractional bits
    let vb = i64::from(v.to_bits()) << 8; // 16 -> 24 fractional bits
    let n = if vb <= 0 { 0 } else { (2 * vb + g) / (2 * g) };
    (n + i64::from(cal.offset_counts)).clamp(0, i64::from(cal.full_scale_counts)) as u16
}

/// The current a DAC code makes, per the DAC calibration.
pub fn dac_iu(cfg: &ValidConfig, code: u16) -> Fx {
    let dac = &cfg.config().calibration.dac;
    let above = (i32::from(code) - dac.offset_codes).max(0);
    Fx::from_num(above) / dac.codes_per_iu
}

/// Temperature-sensor counts reading closest to `degc` (between the rails).
pub fn temp_counts_for(cfg: &ValidConfig, degc: Fx) -> u16 {
    let tc = &cfg.config().calibration.temperature;
    (tc.low_fault_counts + 1..tc.high_fault_counts)
        .min_by_key(|c| (cfg.counts_to_degc(*c) - degc).abs())
        .expect("rails leave room for readings")
}

/// A sample with everything healthy and no light, no current: 25 degC,
/// the supply in the middle of its window, interlock closed.
pub fn healthy_sample(cfg: &ValidConfig, tick: u32) -> Sample {
    let c = cfg.config();
    let p = &c.protection;
    let mid_vu = (p.supply_min_vu + p.supply_max_vu) / 2;
    Sample {
        tick,
        monitor_counts: counts_for(&c.calibration.monitor, Fx::ZERO),
        current_counts: counts_for(&c.calibration.current_sense, Fx::ZERO),
        temp_counts: temp_counts_for(cfg, Fx::from_num(25)),
        supply_counts: counts_for(&c.calibration.supply, mid_vu),
        interlock_closed: true,
        forward_counts: None,
        external_fault: false,
    }
}

/// A laser diode with a linear L-I curve above threshold, driven through
/// the board's DAC: `P = slope × (I - I_th)` for `I > I_th`, zero below.
/// Its readings reach the controller one tick after the drive that caused
/// them, as on a board.
#[derive(Clone, Copy, Debug)]
pub struct LinearPlant {
    /// Threshold current, mA.
    pub threshold_iu: Fx,
    /// Slope efficiency, mW/mA.
    pub slope_ou_per_iu: Fx,
    /// Current flowing now, mA.
    pub current_iu: Fx,
}

impl LinearPlant {
    /// Invented demo numbers: 25 mA threshold, 0.9 mW/mA (22.5 mW at 50 mA).
    pub fn demo() -> Self {
        LinearPlant {
            threshold_iu: Fx::from_num(25),
            slope_ou_per_iu: Fx::from_num(0.9),
            current_iu: Fx::ZERO,
        }
    }

    /// Optical power now, mW.
    pub fn power_ou(&self) -> Fx {
        (self.current_iu - self.threshold_iu).max(Fx::ZERO) * self.slope_ou_per_iu
    }

    /// Apply a drive: the current source follows the DAC code while enabled.
    pub fn apply(&mut self, cfg: &ValidConfig, d: &Drive) {
        self.current_iu = if d.enable {
            dac_iu(cfg, d.dac_code)
        } else {
            Fx::ZERO
        };
    }

    /// Write the monitor and current-sense counts of the present state.
    pub fn fill(&self, cfg: &ValidConfig, s: &mut Sample) {
        let cal = &cfg.config().calibration;
        s.monitor_counts = counts_for(&cal.monitor, self.power_ou());
        s.current_counts = counts_for(&cal.current_sense, self.current_iu);
    }
}

/// The controller closed around a [`LinearPlant`].
///
/// Each [`Rig::step`] advances the tick index by one, fills the monitor and
/// current-sense counts from the plant, lets the caller override any field
/// for this tick, steps the controller and applies the drive to the plant.
/// Temperature, supply and interlock keep whatever they were last set to.
#[derive(Clone, Debug)]
pub struct Rig {
    pub ctl: Controller,
    pub plant: LinearPlant,
    pub s: Sample,
    pub last: Drive,
    /// When set, the monitor reads these counts instead of the plant.
    pub monitor_override: Option<u16>,
}

impl Rig {
    /// A rig in Off that has seen one healthy sample (tick 0).
    pub fn new(cfg: ValidConfig) -> Rig {
        let s = healthy_sample(&cfg, 0);
        let mut ctl = Controller::new(cfg);
        let last = ctl.step(&s);
        Rig {
            ctl,
            plant: LinearPlant::demo(),
            s,
            last,
            monitor_override: None,
        }
    }

    pub fn cfg(&self) -> &ValidConfig {
        self.ctl.config()
    }

    /// A rig regulating in ACC at `ma` (current sense following the drive).
    pub fn regulating_acc(cfg: ValidConfig, ma: Fx) -> Rig {
        let mut r = Rig::new(cfg);
        r.req(Request::SetMode(Mode::Acc));
        r.req(Request::SetCurrent(ma));
        r.req(Request::Enable);
        r.run_until(1_000_000, |ctl, _| {
            ctl.state() == State::Regulating && ctl.drive_iu() == ma
        })
        .expect("reaches the current setpoint");
        r
    }

    /// A rig regulating in APC at `mw`, settled for `settle` ticks after it
    /// first reads the setpoint.
    pub fn regulating_apc(cfg: ValidConfig, mw: Fx, settle: u32) -> Rig {
        let mut r = Rig::new(cfg);
        r.req(Request::SetPower(mw));
        r.req(Request::Enable);
        r.run_until(1_000_000, |ctl, _| {
            ctl.state() == State::Regulating && ctl.power_setpoint_ou() == mw
        })
        .expect("reaches the power setpoint");
        r.run(settle);
        assert_eq!(r.ctl.state(), State::Regulating, "still regulating");
        r
    }

    pub fn req(&mut self, r: Request) {
        self.ctl
            .request(r)
            .unwrap_or_else(|e| panic!("{r:?} refused: {e}"));
    }

    /// One tick with the plant's readings.
    pub fn step(&mut self) -> Drive {
        self.step_with(|_| {})
    }

    /// One tick; `f` may override any field of the sample first.
    pub fn step_with(&mut self, f: impl FnOnce(&mut Sample)) -> Drive {
        self.s.tick = self.s.tick.wrapping_add(1);
        self.plant.fill(self.ctl.config(), &mut self.s);
        if let Some(m) = self.monitor_override {
            self.s.monitor_counts = m;
        }
        f(&mut self.s);
        let d = self.ctl.step(&self.s);
        self.plant.apply(self.ctl.config(), &d);
        self.last = d;
        d
    }

    pub fn run(&mut self, n: u32) -> Drive {
        for _ in 0..n {
            self.step();
        }
        self.last
    }

    /// Step until `pred` holds after a step; the number of steps taken.
    pub fn run_until(
        &mut self,
        max: u32,
        pred: impl Fn(&Controller, &Drive) -> bool,
    ) -> Option<u32> {
        for n in 1..=max {
            let d = self.step();
            if pred(&self.ctl, &d) {
                return Some(n);
            }
        }
        None
    }
}
