//! Board configuration for a simulated module: the core's limits and loop
//! gains, with the calibration derived from the module's nominal hardware
//! (as a production line calibrates a board at 25 degC) and the
//! temperature table built from the sensor's own equation, so firmware and
//! simulator share one conversion.

use diodestat_core::{AdcCal, Config, DacCal, Fx, Gain, Rail, TempCal, TempPoint, Units};

use crate::units::Scale;

use crate::plant::{DemoModule, Monitor, SensorChain, Topology, ZERO_CELSIUS_K};

/// Reference temperature of the factory calibration, K.
pub const CAL_T_K: f64 = 25.0 + ZERO_CELSIUS_K;

fn gain(v: f64) -> Gain {
    Gain::saturating_from_num(v)
}

fn fx(v: f64) -> Fx {
    Fx::saturating_from_num(v)
}

/// Full scales of the module's channels in engineering units: the current
/// source's (DAC) full-scale current and the current sense's, mA; the
/// monitor channel's full-scale power, front-facet mW; the supply
/// channel's full-scale voltage, mV.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FullScales {
    /// Current source full scale, mA.
    pub source_ma: f64,
    /// Current-sense full scale, mA.
    pub sense_ma: f64,
    /// Monitor full scale, mW.
    pub monitor_mw: f64,
    /// Supply channel full scale, mV.
    pub supply_mv: f64,
}

/// The nominal full scales of `module`'s channels (as [`calibrate`] sets
/// them up).
pub fn full_scales(module: &DemoModule) -> FullScales {
    let full = f64::from((1u32 << module.adc.bits) - 1);
    let counts_per_v = full / module.adc.vref_v;
    let mon = Monitor::new(module.monitor.clone()).expect("demo monitor valid");
    let wl = module.diode.wavelength_nm * 1e-9;
    let i_per_w = mon.current_a(1.0, wl, CAL_T_K) - mon.current_a(0.0, wl, CAL_T_K);
    let counts_per_mw = mon.voltage_v(i_per_w) * 1e-3 * counts_per_v;
    let counts_per_ma = module.driver.sense_ohm * module.driver.sense_gain * 1e-3 * counts_per_v;
    FullScales {
        source_ma: module.driver.dac_vref_v * module.driver.transconductance_a_per_v * 1e3,
        sense_ma: full / counts_per_ma,
        monitor_mw: full / counts_per_mw,
        supply_mv: full * 1e3 / counts_per_v * module.supply_divider,
    }
}

/// Replace the calibration of `cfg` by the nominal calibration of `module`
/// (in the units `cfg` names, [`Config::units`]) and set the supply window
/// to ±10 % of its nominal supply.
pub fn calibrate(cfg: Config, module: &DemoModule) -> Config {
    let u = cfg.units();
    calibrate_in(cfg, module, u)
}

/// [`calibrate`] into the units `u`.
pub fn calibrate_in(mut cfg: Config, module: &DemoModule, u: Units) -> Config {
    let full = ((1u32 << module.adc.bits) - 1) as u16;
    let counts_per_v = f64::from(full) / module.adc.vref_v;
    // Monitor: front mW -> photodiode current -> transimpedance -> counts.
    let mon = Monitor::new(module.monitor.clone()).expect("demo monitor valid");
    let wl = module.diode.wavelength_nm * 1e-9;
    let i_per_w = mon.current_a(1.0, wl, CAL_T_K) - mon.current_a(0.0, wl, CAL_T_K);
    let counts_per_mw = mon.voltage_v(i_per_w) * 1e-3 * counts_per_v;
    cfg.calibration.monitor = AdcCal {
        offset_counts: 0,
        units_per_count: gain(1.0 / (counts_per_mw * u.mw_per_ou())),
        full_scale_counts: full,
        unit_exp: u.power_exp,
    };
    // Current sense.
    let counts_per_ma = module.driver.sense_ohm * module.driver.sense_gain * 1e-3 * counts_per_v;
    cfg.calibration.current_sense = AdcCal {
        offset_counts: 0,
        units_per_count: gain(1.0 / (counts_per_ma * u.ma_per_iu())),
        full_scale_counts: full,
        unit_exp: u.current_exp,
    };
    // Supply through the divider.
    let counts_per_mv = 1e-3 * counts_per_v / module.supply_divider;
    cfg.calibration.supply = AdcCal {
        offset_counts: 0,
        units_per_count: gain(1.0 / (counts_per_mv * u.mv_per_vu())),
        full_scale_counts: full,
        unit_exp: u.voltage_exp,
    };
    cfg.protection.supply_min_vu = u.vu(module.supply_v * 900.0);
    cfg.protection.supply_max_vu = u.vu(module.supply_v * 1100.0);
    // DAC.
    let dac_max = ((1u32 << module.driver.dac_bits) - 1) as u16;
    let fs_ma = module.driver.dac_vref_v * module.driver.transconductance_a_per_v * 1e3;
    cfg.calibration.dac = DacCal {
        codes_per_iu: fx(f64::from(dac_max) / fs_ma * u.ma_per_iu()),
        offset_codes: 0,
        max_code: dac_max,
        unit_exp: u.current_exp,
    };
    cfg.calibration.temperature = temp_cal(module);
    cfg
}

/// The core's temperature table and rails for the module's sensor chain,
/// -20 degC to 100 degC in 25 points.
pub fn temp_cal(module: &DemoModule) -> TempCal {
    temp_cal_range(module, -20.0, 100.0, 25)
}

/// The core's temperature table for the module's sensor chain: `points`
/// temperatures spread over `min_c ..= max_c` (points that land on a rail or
/// repeat a code are left out, points beyond the core's table length
/// dropped), with fault rails 1 % of full scale from each end and the open
/// rail given by the sensor topology.
pub fn temp_cal_range(module: &DemoModule, min_c: f64, max_c: f64, points: usize) -> TempCal {
    // The firmware knows the sensor's nominal curve, not this part's error.
    let mut nominal = module.sensor.clone();
    nominal.sensor = nominal.sensor.nominal();
    let chain = SensorChain::new(nominal).expect("demo sensor valid");
    let max = chain.max_code();
    let mut table = heapless::Vec::new();
    for (counts, degc) in chain.temp_table(min_c, max_c, points) {
        let _ = table.push(TempPoint {
            counts,
            degc: fx(degc),
        });
    }
    let rail = (f64::from(max) * 0.01).round() as u16;
    TempCal {
        table,
        low_fault_counts: rail,
        high_fault_counts: max - rail,
        open_rail: match module.sensor.front_end.topology {
            Topology::SensorToGround => Rail::High,
            Topology::SensorToSupply => Rail::Low,
        },
    }
}
