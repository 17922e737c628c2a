//! Demo parameter sets for two invented modules (not models of any real
//! product): a visible ~650 nm single-mode diode of about 30 mW, and a
//! ~976 nm multi-mode pump diode of about 5 W. Every number here is a demo
//! value chosen so the rate-equation model lands on the intended figures
//! (threshold, slope, T0); none is a measured device property.

use serde::{Deserialize, Serialize};

use super::diode::{DiodeParams, GainModel, AGING_ACTIVATION_EV, AGING_CURRENT_EXPONENT};
use super::driver::DriverParams;
use super::monitor::MonitorParams;
use super::sensors::{
    AdcParams, FrontEndParams, Ntc, Rtd, RtdClass, SensorChainParams, TempSensor, Topology,
};
use super::thermal::ThermalParams;

/// Supply divider of the built-in demo modules and of module files that
/// give none (supply volts per ADC volt).
pub const DEFAULT_SUPPLY_DIVIDER: f64 = 8.0;

fn default_supply_divider() -> f64 {
    DEFAULT_SUPPLY_DIVIDER
}

/// Everything the simulator needs for one laser module.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DemoModule {
    /// Rated front-facet output power, W (the module's maximum rating).
    pub rated_power_w: f64,
    /// Rated maximum forward current, A (the module's maximum rating; the
    /// board's `current.absolute_max_ma` is the controller's own limit).
    pub rated_current_a: f64,
    /// Nominal driver supply, V.
    pub supply_v: f64,
    /// Divider in front of the supply ADC channel, supply volts per ADC
    /// volt.
    #[serde(default = "default_supply_divider")]
    pub supply_divider: f64,
    /// Laser diode.
    pub diode: DiodeParams,
    /// Back-facet monitor photodiode.
    pub monitor: MonitorParams,
    /// Current driver.
    pub driver: DriverParams,
    /// Thermal path.
    pub thermal: ThermalParams,
    /// Case temperature sensor channel.
    pub sensor: SensorChainParams,
    /// ADC used for the monitor, current-sense and supply channels.
    pub adc: AdcParams,
    /// Part-to-part tolerances a Monte Carlo campaign draws from.
    pub tolerances: PartTolerances,
}

/// Part-to-part tolerances of a module: a part's factor is drawn
/// uniformly from `1 - t ..= 1 + t` for a relative half-width `t`, an
/// offset uniformly from `-h ..= h` for a half-width `h`. The fields after
/// `tracking` (T0, the converter chain and an NTC sensor's R25 and B) may
/// be left out of a module file: they then default to 0 (not drawn), as in
/// the built-in demo modules. The NTC tolerances apply to an NTC sensor
/// only (an RTD's tolerance is its IEC 60751 class).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PartTolerances {
    /// Threshold current.
    pub threshold: f64,
    /// Slope efficiency.
    pub slope: f64,
    /// Monitor responsivity (tracking ratio).
    pub tracking: f64,
    /// Characteristic temperature T0 of the threshold.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub t0: f64,
    /// Current-sense amplifier gain.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub sense_gain: f64,
    /// Current-sense amplifier output offset, mV (half-width).
    #[serde(default, skip_serializing_if = "is_zero")]
    pub sense_offset_mv: f64,
    /// DAC gain (reference and source transconductance together).
    #[serde(default, skip_serializing_if = "is_zero")]
    pub dac_gain: f64,
    /// DAC output offset, mV (half-width).
    #[serde(default, skip_serializing_if = "is_zero")]
    pub dac_offset_mv: f64,
    /// R25 of an NTC temperature sensor (the resistance tolerance an NTC
    /// datasheet states at 25 degC).
    #[serde(default, skip_serializing_if = "is_zero")]
    pub ntc_r25: f64,
    /// B value of an NTC temperature sensor (the B25/85 tolerance an NTC
    /// datasheet states).
    #[serde(default, skip_serializing_if = "is_zero")]
    pub ntc_beta: f64,
}

/// A tolerance left at 0 is not written (module files stay as they were).
fn is_zero(v: &f64) -> bool {
    *v == 0.0
}

impl PartTolerances {
    /// The demo modules' tolerances (demo values, our choice): threshold
    /// +-15 %, slope +-8 % (the loop analysis's corner spreads), monitor
    /// tracking +-10 %; T0 and the converter chain not drawn (0: the demo
    /// boards' current ceilings leave no margin for a converter gain error,
    /// see docs/campaign.md). [`PartTolerances::CHAIN_EXAMPLE`] is a set
    /// with them.
    pub const DEMO: PartTolerances = PartTolerances {
        threshold: 0.15,
        slope: 0.08,
        tracking: 0.10,
        t0: 0.0,
        sense_gain: 0.0,
        sense_offset_mv: 0.0,
        dac_gain: 0.0,
        dac_offset_mv: 0.0,
        ntc_r25: 0.0,
        ntc_beta: 0.0,
    };

    /// The demo tolerances with T0 +-10 %, current-sense gain +-1 % and
    /// offset +-2 mV, DAC gain +-1 % and offset +-2 mV (demo values, our
    /// choice, of the order of a general-purpose amplifier's and
    /// converter's initial accuracy, from memory).
    pub const CHAIN_EXAMPLE: PartTolerances = PartTolerances {
        t0: 0.10,
        sense_gain: 0.01,
        sense_offset_mv: 2.0,
        dac_gain: 0.01,
        dac_offset_mv: 2.0,
        ..PartTolerances::DEMO
    };
}

impl DemoModule {
    /// The same module with its diode moved by part spread: the threshold
    /// current scaled by `threshold_factor` and the slope efficiency by
    /// `slope_factor`. The spreads map onto the rate-equation model the way
    /// its aging factors do: the recombination coefficients A, B and C scale
    /// by `threshold_factor · slope_factor` and the injection efficiency by
    /// `slope_factor`, so `I_th = qV·R(N_th)/η_i` scales by `threshold_factor`
    /// and the slope (∝ η_i) by `slope_factor`.
    pub fn with_spread(&self, threshold_factor: f64, slope_factor: f64) -> DemoModule {
        let mut m = self.clone();
        let k = threshold_factor * slope_factor;
        m.diode.a_per_s *= k;
        m.diode.b_cm3_per_s *= k;
        m.diode.c_cm6_per_s *= k;
        m.diode.eta_i *= slope_factor;
        m
    }

    /// Visible ~650 nm, ~30 mW single-mode demo module.
    pub fn visible() -> Self {
        Self {
            rated_power_w: 0.030,
            rated_current_a: 0.060,
            supply_v: 5.0,
            supply_divider: DEFAULT_SUPPLY_DIVIDER,
            diode: DiodeParams::demo_visible(),
            monitor: MonitorParams::demo_visible(),
            driver: DriverParams::demo_visible(),
            thermal: ThermalParams::demo_visible(),
            sensor: SensorChainParams::demo_visible(),
            adc: AdcParams::demo(),
            tolerances: PartTolerances::DEMO,
        }
    }

    /// Near-infrared ~976 nm, ~5 W multi-mode pump demo module.
    pub fn pump() -> Self {
        Self {
            rated_power_w: 5.0,
            rated_current_a: 6.5,
            supply_v: 3.3,
            supply_divider: DEFAULT_SUPPLY_DIVIDER,
            diode: DiodeParams::demo_pump(),
            monitor: MonitorParams::demo_pump(),
            driver: DriverParams::demo_pump(),
            thermal: ThermalParams::demo_pump(),
            sensor: SensorChainParams::demo_pump(),
            adc: AdcParams::demo(),
            tolerances: PartTolerances::DEMO,
        }
    }
}

impl DiodeParams {
    /// The in-plane example rate-equation set of Coldren, Corzine and
    /// Mashanovitch, *Diode Lasers and Photonic Integrated Circuits*, 2nd ed.
    /// (Wiley 2012), as reproduced in secondary public sources (not checked
    /// against the book's table). Only the rate-equation fields come from
    /// there; wavelength (980 nm), temperature, electrical, damage and aging
    /// fields are demo values.
    pub fn textbook_in_plane() -> Self {
        Self {
            width_um: 2.0,
            length_um: 250.0,
            thickness_nm: 8.0,
            confinement: 0.032,
            group_index: 4.2,
            alpha_i_per_cm: 5.0,
            r_front: 0.32,
            r_back: 0.32,
            eta_i: 0.8,
            a_per_s: 0.0,
            b_cm3_per_s: 0.8e-10,
            c_cm6_per_s: 3.5e-30,
            gain: GainModel::Log {
                g0_per_cm: 1800.0,
                n_tr_per_cm3: 1.8e18,
                n_s_per_cm3: -0.4e18,
            },
            eps_cm3: 1.5e-17,
            beta_sp: 8.7e-5,
            wavelength_nm: 980.0,
            wavelength_drift_nm_per_k: 0.3,
            t_ref_c: 25.0,
            t0_k: 120.0,
            t1_k: 400.0,
            ideality: 1.5,
            i_s_a: 1.0e-18,
            i_s_activation_ev: 1.6,
            r_s_ohm: 10.0,
            damage_power_w: 0.05,
            damage_filter_ns: 100.0,
            threshold_rise_per_khour: 0.01,
            slope_loss_per_khour: 0.005,
            aging_activation_ev: AGING_ACTIVATION_EV,
            aging_current_exponent: AGING_CURRENT_EXPONENT,
            aging_ref_current_a: None,
            aging_ref_c: None,
            max_operating_c: None,
            damage_tc_per_k: 0.0,
        }
    }

    /// Demo visible diode: 650 nm ridge, I_th about 23 mA and front slope
    /// about 0.93 W/A at 25 degC, T0 = 80 K, damage at 60 mW (2x rated).
    pub fn demo_visible() -> Self {
        Self {
            width_um: 3.0,
            length_um: 700.0,
            thickness_nm: 14.0,
            confinement: 0.05,
            group_index: 3.8,
            alpha_i_per_cm: 8.0,
            r_front: 0.08,
            r_back: 0.92,
            eta_i: 0.72,
            a_per_s: 3.0e8,
            b_cm3_per_s: 1.2e-10,
            c_cm6_per_s: 1.5e-30,
            gain: GainModel::Log {
                g0_per_cm: 1400.0,
                n_tr_per_cm3: 3.0e18,
                n_s_per_cm3: -0.4e18,
            },
            eps_cm3: 1.5e-17,
            beta_sp: 1.0e-4,
            wavelength_nm: 650.0,
            wavelength_drift_nm_per_k: 0.2,
            t_ref_c: 25.0,
            t0_k: 80.0,
            t1_k: 250.0,
            ideality: 2.0,
            i_s_a: 2.0e-18,
            i_s_activation_ev: 2.25,
            r_s_ohm: 5.0,
            damage_power_w: 0.060,
            damage_filter_ns: 100.0,
            threshold_rise_per_khour: 0.02,
            slope_loss_per_khour: 0.01,
            aging_activation_ev: AGING_ACTIVATION_EV,
            aging_current_exponent: AGING_CURRENT_EXPONENT,
            // The aging rates hold at the visible module's rated current.
            aging_ref_current_a: Some(0.060),
            aging_ref_c: None,
            max_operating_c: None,
            damage_tc_per_k: 0.0,
        }
    }

    /// Demo pump diode: 976 nm, 95 um x 4 mm broad area, I_th about 0.36 A
    /// and front slope about 1.05 W/A at 25 degC, T0 = 130 K, damage at 10 W.
    pub fn demo_pump() -> Self {
        Self {
            width_um: 95.0,
            length_um: 4000.0,
            thickness_nm: 8.0,
            confinement: 0.012,
            group_index: 3.6,
            alpha_i_per_cm: 0.6,
            r_front: 0.01,
            r_back: 0.95,
            eta_i: 0.92,
            a_per_s: 1.0e8,
            b_cm3_per_s: 0.8e-10,
            c_cm6_per_s: 3.5e-30,
            gain: GainModel::Log {
                g0_per_cm: 1800.0,
                n_tr_per_cm3: 1.8e18,
                n_s_per_cm3: -0.4e18,
            },
            eps_cm3: 1.0e-17,
            beta_sp: 1.0e-5,
            wavelength_nm: 976.0,
            wavelength_drift_nm_per_k: 0.33,
            t_ref_c: 25.0,
            t0_k: 130.0,
            t1_k: 400.0,
            ideality: 1.5,
            i_s_a: 3.0e-15,
            i_s_activation_ev: 1.65,
            r_s_ohm: 0.06,
            damage_power_w: 10.0,
            damage_filter_ns: 100.0,
            threshold_rise_per_khour: 0.005,
            slope_loss_per_khour: 0.003,
            aging_activation_ev: AGING_ACTIVATION_EV,
            aging_current_exponent: AGING_CURRENT_EXPONENT,
            // The aging rates hold at the pump module's rated current.
            aging_ref_current_a: Some(6.5),
            aging_ref_c: None,
            max_operating_c: None,
            damage_tc_per_k: 0.0,
        }
    }
}

impl MonitorParams {
    /// Demo monitor for the visible diode: about 0.28 mA at 30 mW.
    pub fn demo_visible() -> Self {
        Self {
            tracking_ratio: 0.023,
            tracking_tc_per_k: 2.0e-4,
            responsivity_a_per_w: 0.40,
            responsivity_wavelength_nm: 650.0,
            dark_current_25c_a: 1.0e-9,
            dark_doubling_k: 10.0,
            transimpedance_ohm: 7500.0,
        }
    }

    /// Demo monitor for the pump: about 0.6 mA at 5 W.
    pub fn demo_pump() -> Self {
        Self {
            tracking_ratio: 2.0e-4,
            tracking_tc_per_k: -3.0e-4,
            responsivity_a_per_w: 0.60,
            responsivity_wavelength_nm: 976.0,
            dark_current_25c_a: 5.0e-9,
            dark_doubling_k: 10.0,
            transimpedance_ohm: 3300.0,
        }
    }
}

impl DriverParams {
    /// Demo driver for the visible diode: 12-bit DAC, 60 mA full scale.
    pub fn demo_visible() -> Self {
        Self {
            dac_bits: 12,
            dac_vref_v: 2.5,
            transconductance_a_per_v: 0.024,
            bandwidth_hz: 100e3,
            compliance_v: 0.8,
            sense_ohm: 10.0,
            sense_gain: 4.0,
            // The demo board clamps the source in hardware at 65 mA (its
            // absolute rating is 60 mA): firmware cannot stop a failure
            // faster than one tick, only a hardware limit can.
            fail_high_current_a: 0.065,
            dac_offset_v: 0.0,
            sense_offset_v: 0.0,
            shutdown_tau_s: 1e-6,
        }
    }

    /// Demo driver for the pump: 12-bit DAC, 8 A full scale.
    pub fn demo_pump() -> Self {
        Self {
            dac_bits: 12,
            dac_vref_v: 2.5,
            transconductance_a_per_v: 3.2,
            bandwidth_hz: 20e3,
            compliance_v: 0.5,
            sense_ohm: 0.05,
            sense_gain: 6.0,
            // The demo board clamps the source in hardware at 7 A (the
            // demo-pump-5w board's absolute rating is 6.5 A): a source that
            // fails high reaches the facet within one tick, before firmware
            // can act, so only this clamp keeps it below the 10 W damage
            // level. (Unclamped at the 12 A the output stage could reach,
            // one tick gives 11 to 13 W and facet damage.)
            fail_high_current_a: 7.0,
            dac_offset_v: 0.0,
            sense_offset_v: 0.0,
            shutdown_tau_s: 5e-6,
        }
    }
}

impl ThermalParams {
    /// Demo thermal path of the visible diode (TO can on a small heatsink).
    pub fn demo_visible() -> Self {
        Self {
            r_jc_k_per_w: 40.0,
            r_ch_k_per_w: 15.0,
            r_ha_k_per_w: 25.0,
            c_j_j_per_k: 2.0e-5,
            c_c_j_per_k: 0.05,
            c_h_j_per_k: 5.0,
        }
    }

    /// Demo thermal path of the pump (submount on a finned heatsink).
    pub fn demo_pump() -> Self {
        Self {
            r_jc_k_per_w: 1.5,
            r_ch_k_per_w: 1.0,
            r_ha_k_per_w: 1.5,
            c_j_j_per_k: 5.0e-4,
            c_c_j_per_k: 0.5,
            c_h_j_per_k: 50.0,
        }
    }
}

impl SensorChainParams {
    /// Demo case sensor of the visible module: NTC 10 kohm / B 3380 K to
    /// ground with a 10 kohm pull-up, 12-bit ADC.
    pub fn demo_visible() -> Self {
        Self {
            sensor: TempSensor::Ntc(Ntc::beta(10_000.0, 3380.0)),
            front_end: FrontEndParams {
                topology: Topology::SensorToGround,
                ref_resistor_ohm: 10_000.0,
                vref_v: 3.3,
                adc_bits: 12,
                rc_tau_s: 1e-3,
                noise_lsb_rms: 0.5,
                seed: 1,
            },
        }
    }

    /// Demo case sensor of the pump module: Pt1000 to ground with a
    /// 2.2 kohm pull-up, 12-bit ADC.
    pub fn demo_pump() -> Self {
        Self {
            sensor: TempSensor::Rtd(Rtd {
                r0_ohm: 1000.0,
                class: Some(RtdClass::B),
                band_position: 0.0,
            }),
            front_end: FrontEndParams {
                topology: Topology::SensorToGround,
                ref_resistor_ohm: 2200.0,
                vref_v: 3.3,
                adc_bits: 12,
                rc_tau_s: 1e-3,
                noise_lsb_rms: 0.5,
                seed: 2,
            },
        }
    }
}

impl AdcParams {
    /// Demo 12-bit, 3.3 V ADC channel with 0.5 LSB rms noise.
    pub fn demo() -> Self {
        Self {
            bits: 12,
            vref_v: 3.3,
            noise_lsb_rms: 0.5,
            seed: 3,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A `[tolerances]` table with only the first three keys takes the
    /// documented defaults for the rest; every key can be given; an
    /// unknown key is refused.
    #[test]
    fn tolerances_default_the_converter_chain_and_t0_to_zero() {
        let t: PartTolerances =
            toml::from_str("threshold = 0.1\nslope = 0.05\ntracking = 0.02").unwrap();
        assert_eq!(
            t,
            PartTolerances {
                threshold: 0.1,
                slope: 0.05,
                tracking: 0.02,
                ..PartTolerances::DEMO
            }
        );
        assert_eq!((t.t0, t.sense_gain, t.dac_offset_mv), (0.0, 0.0, 0.0));
        let t: PartTolerances = toml::from_str(
            "threshold = 0.1\nslope = 0.05\ntracking = 0.02\nt0 = 0.2\nsense_gain = 0.03\nsense_offset_mv = 1.5\ndac_gain = 0.04\ndac_offset_mv = 0.5",
        )
        .unwrap();
        assert_eq!((t.t0, t.sense_gain, t.dac_gain), (0.2, 0.03, 0.04));
        assert_eq!((t.sense_offset_mv, t.dac_offset_mv), (1.5, 0.5));
        assert!(toml::from_str::<PartTolerances>(
            "threshold = 0.1\nslope = 0.05\ntracking = 0.02\ndac_ofset_mv = 1"
        )
        .is_err());
    }
}
