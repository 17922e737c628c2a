//! A small fixed-point plant built into the QEMU images: the current source,
//! the laser diode's L-I curve, the monitor photodiode, an NTC and the
//! supply, with injectable faults. Integer arithmetic only (µA, µW, m°C).
//!
//! Every number here is a demo value chosen to match the converter
//! calibration of `diodestat_core::example::config()`; none describes a
//! real part.
//!
//! Per tick the rig calls [`Plant::sample`] (what the ADCs read now), hands
//! the sample to the controller, then [`Plant::advance`] with the returned
//! drive (what the current source does until the next sample).

use diodestat_core::{Drive, Sample};

/// Demo plant parameters.
#[derive(Clone, Copy, Debug)]
pub struct PlantParams {
    /// DAC transfer, µA per code as a ratio (the demo DAC: 68.25 codes/mA,
    /// i.e. 4000/273 µA per code).
    pub ua_per_code: (i32, i32),
    /// First-order current source: each tick the current moves by
    /// `(target - current) >> lag_shift`.
    pub lag_shift: u32,
    /// Lasing threshold, µA.
    pub threshold_ua: i32,
    /// Slope efficiency above threshold, µW per mA.
    pub slope_uw_per_ma: i32,
    /// Monitor tracking ratio in per mille: the monitor reading relative to
    /// the front-facet power it was calibrated against.
    pub tracking_permille: i32,
    /// Monitor ADC counts per mW (the demo calibration: 0.010989 mW/count).
    pub monitor_counts_per_mw: i32,
    /// Current-sense ADC counts per mA as a ratio (0.017094 mA/count).
    pub sense_counts_per_ma: (i32, i32),
    /// Ambient temperature, m°C.
    pub ambient_mdegc: i32,
    /// Steady-state self-heating, m°C per mA of drive.
    pub heating_mdegc_per_ma: i32,
    /// First-order thermal lag: `(target - t) >> thermal_shift` per tick.
    pub thermal_shift: u32,
    /// NTC counts at 25 °C and the local slope, counts per °C (falling).
    pub ntc_counts_25c: i32,
    /// NTC slope near 25 °C, counts per °C (the counts fall as it warms).
    pub ntc_counts_per_degc: i32,
    /// Supply voltage, mV.
    pub supply_mv: i32,
    /// Supply ADC: µV per count (the demo calibration: 4.884 mV/count).
    pub supply_uv_per_count: i32,
}

impl PlantParams {
    /// The demo module (demo values only).
    pub const DEMO: PlantParams = PlantParams {
        ua_per_code: (4000, 273),
        lag_shift: 1,
        threshold_ua: 12_000,
        slope_uw_per_ma: 800,
        tracking_permille: 1000,
        monitor_counts_per_mw: 91,
        sense_counts_per_ma: (117, 2),
        ambient_mdegc: 25_000,
        heating_mdegc_per_ma: 150,
        thermal_shift: 12,
        ntc_counts_25c: 2048,
        ntc_counts_per_degc: 39,
        supply_mv: 12_000,
        supply_uv_per_count: 4884,
    };
}

/// Faults the scenario can inject into the plant.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Injected {
    /// The monitor photodiode is open: its channel reads (almost) nothing.
    pub monitor_open: bool,
    /// The current source has failed high: it carries this current (µA)
    /// whatever it is commanded, enabled or not.
    pub source_stuck_ua: Option<i32>,
    /// The safety interlock is open.
    pub interlock_open: bool,
    /// The temperature ADC reads this instead of the NTC: a sensor open
    /// or shorted to a rail, a connector glitch, a jump across the table.
    pub temp_counts: Option<u16>,
}

/// The plant state.
#[derive(Clone, Debug)]
pub struct Plant {
    p: PlantParams,
    current_ua: i32,
    temp_mdegc: i32,
    noise: u32,
    /// Faults in force.
    pub faults: Injected,
}

fn adc12(v: i32) -> u16 {
    // Clamped into 0..=4095, so the cast cannot truncate.
    v.clamp(0, 4095) as u16
}

impl Plant {
    /// A plant at ambient temperature with no current.
    pub fn new(p: PlantParams) -> Self {
        Plant {
            p,
            current_ua: 0,
            temp_mdegc: p.ambient_mdegc,
            noise: 0x1234_5678,
            faults: Injected::default(),
        }
    }

    /// Current through the diode now, µA.
    pub fn current_ua(&self) -> i32 {
        self.faults.source_stuck_ua.unwrap_or(self.current_ua)
    }

    /// Front-facet optical power now, µW.
    pub fn optical_uw(&self) -> i32 {
        let above = self.current_ua() - self.p.threshold_ua;
        if above <= 0 {
            0
        } else {
            above / 1000 * self.p.slope_uw_per_ma + (above % 1000) * self.p.slope_uw_per_ma / 1000
        }
    }

    /// Diode temperature, m°C.
    pub fn temp_mdegc(&self) -> i32 {
        self.temp_mdegc
    }

    /// One ADC count of deterministic noise: -1, 0 or +1.
    fn noise(&mut self) -> i32 {
        self.noise = self
            .noise
            .wrapping_mul(1_664_525)
            .wrapping_add(1_013_904_223);
        ((self.noise >> 16) % 3) as i32 - 1
    }

    /// What the ADCs read now.
    pub fn sample(&mut self, tick: u32) -> Sample {
        let p = self.p;
        let monitor = if self.faults.monitor_open {
            0
        } else {
            let seen_uw = self.optical_uw() * p.tracking_permille / 1000;
            seen_uw * p.monitor_counts_per_mw / 1000 + self.noise()
        };
        let (sn, sd) = p.sense_counts_per_ma;
        let sense = self.current_ua() * sn / sd / 1000 + self.noise();
        let temp = p.ntc_counts_25c - (self.temp_mdegc - 25_000) * p.ntc_counts_per_degc / 1000
            + self.noise();
        let supply = p.supply_mv * 1000 / p.supply_uv_per_count;
        Sample {
            tick,
            monitor_counts: adc12(monitor),
            current_counts: adc12(sense),
            temp_counts: self.faults.temp_counts.unwrap_or(adc12(temp)),
            supply_counts: adc12(supply),
            interlock_closed: !self.faults.interlock_open,
            forward_counts: None,
            external_fault: false,
        }
    }

    /// Apply a drive for one tick: the current source follows the DAC with
    /// its first-order lag (towards zero when disabled), the diode warms.
    pub fn advance(&mut self, drive: &Drive) {
        let p = self.p;
        let target = if drive.enable {
            i32::from(drive.dac_code) * p.ua_per_code.0 / p.ua_per_code.1
        } else {
            0
        };
        self.current_ua += (target - self.current_ua) >> p.lag_shift;
        let heat = p.ambient_mdegc + self.current_ua() / 1000 * p.heating_mdegc_per_ma;
        self.temp_mdegc += (heat - self.temp_mdegc) >> p.thermal_shift;
    }
}
