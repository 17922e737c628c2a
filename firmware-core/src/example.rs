//! An invented demo board configuration ("demo-red-30": a 650 nm, 30 mW
//! single-mode module on a 20 kHz tick, 12-bit converters). Demo values
//! only, for examples, tests and benchmarks; they describe no real product.
//!
//! The temperature table is a 10 kΩ, B = 3380 K NTC (beta equation) to
//! ground with a 10 kΩ pull-up to the ADC reference, 12 bits, from 100 °C to
//! -20 °C; the simulator builds the same table from the sensor equation.

use crate::config::{
    AdcCal, ApcGains, Calibration, Config, CurrentLimits, DacCal, Derating, PowerRange, Protection,
    Rail, Ramps, TempCal,
};
use crate::temp_table::TempPoint;
use crate::units::{Fx, Gain};

/// NTC table of the demo board: (counts, degC), counts increasing.
pub const DEMO_TEMP_TABLE: [TempPoint; 25] = [
    TempPoint {
        counts: 380,
        degc: Fx::lit("100"),
    },
    TempPoint {
        counts: 425,
        degc: Fx::lit("95"),
    },
    TempPoint {
        counts: 476,
        degc: Fx::lit("90"),
    },
    TempPoint {
        counts: 533,
        degc: Fx::lit("85"),
    },
    TempPoint {
        counts: 598,
        degc: Fx::lit("80"),
    },
    TempPoint {
        counts: 672,
        degc: Fx::lit("75"),
    },
    TempPoint {
        counts: 755,
        degc: Fx::lit("70"),
    },
    TempPoint {
        counts: 849,
        degc: Fx::lit("65"),
    },
    TempPoint {
        counts: 954,
        degc: Fx::lit("60"),
    },
    TempPoint {
        counts: 1072,
        degc: Fx::lit("55"),
    },
    TempPoint {
        counts: 1203,
        degc: Fx::lit("50"),
    },
    TempPoint {
        counts: 1347,
        degc: Fx::lit("45"),
    },
    TempPoint {
        counts: 1505,
        degc: Fx::lit("40"),
    },
    TempPoint {
        counts: 1675,
        degc: Fx::lit("35"),
    },
    TempPoint {
        counts: 1857,
        degc: Fx::lit("30"),
    },
    TempPoint {
        counts: 2048,
        degc: Fx::lit("25"),
    },
    TempPoint {
        counts: 2245,
        degc: Fx::lit("20"),
    },
    TempPoint {
        counts: 2445,
        degc: Fx::lit("15"),
    },
    TempPoint {
        counts: 2644,
        degc: Fx::lit("10"),
    },
    TempPoint {
        counts: 2839,
        degc: Fx::lit("5"),
    },
    TempPoint {
        counts: 3024,
        degc: Fx::lit("0"),
    },
    TempPoint {
        counts: 3196,
        degc: Fx::lit("-5"),
    },
    TempPoint {
        counts: 3353,
        degc: Fx::lit("-10"),
    },
    TempPoint {
        counts: 3492,
        degc: Fx::lit("-15"),
    },
    TempPoint {
        counts: 3613,
        degc: Fx::lit("-20"),
    },
];

/// The demo configuration (not validated; call [`Config::validate`]).
pub fn config() -> Config {
    Config {
        tick_hz: 20_000,
        current: CurrentLimits {
            absolute_max_iu: Fx::lit("60"),
            ceiling_iu: Fx::lit("50"),
        },
        power: PowerRange {
            min_setpoint_ou: Fx::lit("1"),
            max_setpoint_ou: Fx::lit("30"),
        },
        ramp: Ramps {
            emission_delay_ms: 2,
            soft_start_iu_per_ms: Fx::lit("10"),
            soft_stop_iu_per_ms: Fx::lit("20"),
            handover_fraction: Fx::lit("0.9"),
            setpoint_ou_per_ms: Fx::lit("10"),
        },
        apc: ApcGains {
            kp_iu_per_ou: Fx::lit("0.3"),
            ki_iu_per_ou_ms: Fx::lit("3"),
            slew_iu_per_ms: Fx::lit("20"),
        },
        derating: Derating {
            knee_degc: Fx::lit("45"),
            cutoff_degc: Fx::lit("70"),
            floor_iu: Fx::lit("20"),
        },
        protection: Protection {
            overcurrent_iu: Fx::lit("55"),
            overcurrent_debounce: 1,
            runaway_ou: Fx::lit("36"),
            runaway_debounce: 1,
            monitor_loss_floor_ou: Fx::lit("0.3"),
            monitor_loss_drive_iu: Fx::lit("45"),
            monitor_loss_debounce: 20,
            sensor_debounce: 10,
            over_temp_debounce: 100,
            interlock_debounce: 1,
            supply_min_vu: Fx::lit("10800"),
            supply_max_vu: Fx::lit("13200"),
            supply_debounce: 20,
            mismatch_tolerance_iu: Fx::lit("5"),
            mismatch_debounce: 4,
            missed_tick_limit: 3,
            external_debounce: 1,
            intermittent_weight: 3,
        },
        calibration: Calibration {
            monitor: AdcCal {
                offset_counts: 0,
                units_per_count: Gain::lit("0.010989"),
                full_scale_counts: 4095,
                unit_exp: -3,
            },
            current_sense: AdcCal {
                offset_counts: 0,
                units_per_count: Gain::lit("0.017094"),
                full_scale_counts: 4095,
                unit_exp: -3,
            },
            supply: AdcCal {
                offset_counts: 0,
                units_per_count: Gain::lit("4.884"),
                full_scale_counts: 4095,
                unit_exp: -3,
            },
            dac: DacCal {
                codes_per_iu: Fx::lit("68.25"),
                offset_codes: 0,
                max_code: 4095,
                unit_exp: -3,
            },
            temperature: TempCal {
                table: heapless::Vec::from_slice(&DEMO_TEMP_TABLE).unwrap_or_default(),
                low_fault_counts: 40,
                high_fault_counts: 4055,
                open_rail: Rail::High,
            },
        },
        forward_voltage: None,
        plausibility: None,
    }
}
