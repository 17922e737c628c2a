//! Every reason `Config::validate` refuses a configuration: each case starts
//! from the demo configuration, breaks one thing, and expects the exact
//! variant with the values it carries. Where a limit has a boundary, the
//! value just inside it is accepted.

use diodestat_core::{
    example, AdcCal, Channel, Config, ConfigError, DiodePoint, Fault, ForwardVoltage, Fx, Gain,
    Plausibility, RampKind, Units,
};
use fixed::types::I40F24;
use std::collections::BTreeSet;

type E = ConfigError;

fn refused(f: impl FnOnce(&mut Config)) -> ConfigError {
    let mut c = example::config();
    f(&mut c);
    match c.validate() {
        Err(e) => e,
        Ok(_) => panic!("accepted"),
    }
}

fn accepted(f: impl FnOnce(&mut Config)) {
    let mut c = example::config();
    f(&mut c);
    if let Err(e) = c.validate() {
        panic!("refused: {e:?}");
    }
}

/// The reading at full scale, `(full_scale - offset) × units_per_count`,
/// in wide fixed point and truncated to Fx.
fn full_scale(cal: &AdcCal) -> Fx {
    let n = I40F24::from_num(i32::from(cal.full_scale_counts) - cal.offset_counts);
    (n * I40F24::from_num(cal.units_per_count)).to_num::<Fx>()
}

/// The name of a variant; the match is exhaustive, so a new variant does not
/// compile until it is listed here (and then must be covered below).
fn variant(e: &ConfigError) -> &'static str {
    match e {
        E::UnitOutOfRange { .. } => "UnitOutOfRange",
        E::TickRateZero => "TickRateZero",
        E::TickRateTooHigh { .. } => "TickRateTooHigh",
        E::AbsoluteLimitNotPositive { .. } => "AbsoluteLimitNotPositive",
        E::CeilingNotPositive { .. } => "CeilingNotPositive",
        E::CeilingAboveAbsolute { .. } => "CeilingAboveAbsolute",
        E::OvercurrentNotAboveCeiling { .. } => "OvercurrentNotAboveCeiling",
        E::OvercurrentAboveAbsolute { .. } => "OvercurrentAboveAbsolute",
        E::RampRateNotPositive { .. } => "RampRateNotPositive",
        E::RampRateBelowResolution { .. } => "RampRateBelowResolution",
        E::EmissionDelayTooLong { .. } => "EmissionDelayTooLong",
        E::HandoverFractionOutOfRange { .. } => "HandoverFractionOutOfRange",
        E::PowerRangeInvalid { .. } => "PowerRangeInvalid",
        E::RunawayNotAboveSetpointRange { .. } => "RunawayNotAboveSetpointRange",
        E::MonitorLossFloorNotBelowSetpoints { .. } => "MonitorLossFloorNotBelowSetpoints",
        E::MonitorLossFloorNegative { .. } => "MonitorLossFloorNegative",
        E::MonitorLossDriveOutOfRange { .. } => "MonitorLossDriveOutOfRange",
        E::DeratingKneeNotBelowCutoff { .. } => "DeratingKneeNotBelowCutoff",
        E::DeratingFloorOutOfRange { .. } => "DeratingFloorOutOfRange",
        E::TempTableTooShort { .. } => "TempTableTooShort",
        E::TempTableNotMonotonic { .. } => "TempTableNotMonotonic",
        E::SensorRailsInconsistent { .. } => "SensorRailsInconsistent",
        E::DebounceZero { .. } => "DebounceZero",
        E::MissedTickLimitZero => "MissedTickLimitZero",
        E::GainNotPositive { .. } => "GainNotPositive",
        E::ProportionalGainOverflow { .. } => "ProportionalGainOverflow",
        E::IntegralGainOutOfRange { .. } => "IntegralGainOutOfRange",
        E::CalibrationGainNotPositive { .. } => "CalibrationGainNotPositive",
        E::CalibrationOffsetOutOfRange { .. } => "CalibrationOffsetOutOfRange",
        E::CeilingNotRepresentable { .. } => "CeilingNotRepresentable",
        E::RunawayBeyondMonitorRange { .. } => "RunawayBeyondMonitorRange",
        E::OvercurrentBeyondSenseRange { .. } => "OvercurrentBeyondSenseRange",
        E::SupplyWindowInvalid { .. } => "SupplyWindowInvalid",
        E::MismatchToleranceNotPositive { .. } => "MismatchToleranceNotPositive",
        E::FastDebounceTooLong { .. } => "FastDebounceTooLong",
        E::IntermittentWeightOutOfRange { .. } => "IntermittentWeightOutOfRange",
        E::TempTableShortOfCutoff { .. } => "TempTableShortOfCutoff",
        E::ForwardVoltageLimitsInvalid { .. } => "ForwardVoltageLimitsInvalid",
        E::ForwardDriveOutOfRange { .. } => "ForwardDriveOutOfRange",
        E::PlausibilityPointInvalid { .. } => "PlausibilityPointInvalid",
        E::PlausibilityMarginsInvalid { .. } => "PlausibilityMarginsInvalid",
    }
}

const VARIANTS: usize = 41;

/// A forward-voltage channel: 1 mV per count, open at 3 000 mV, short at
/// 500 mV, from 1 mA.
fn forward() -> ForwardVoltage {
    ForwardVoltage {
        cal: AdcCal {
            offset_counts: 0,
            units_per_count: Gain::ONE,
            full_scale_counts: 4095,
            unit_exp: -3,
        },
        open_vu: Fx::from_num(3000),
        short_vu: Fx::from_num(500),
        min_drive_iu: Fx::ONE,
        debounce: 3,
    }
}

/// A plausibility check over two temperatures.
fn plausibility() -> Plausibility {
    let pt = |t: i32, th: i32| DiodePoint {
        degc: Fx::from_num(t),
        threshold_iu: Fx::from_num(th),
        slope_ou_per_iu: Fx::from_num(0.9),
    };
    Plausibility {
        points: heapless::Vec::from_slice(&[pt(0, 20), pt(70, 35)]).unwrap(),
        warning_margin: Fx::from_num(0.1),
        fault_margin: Fx::from_num(0.2),
        allowance_iu: Fx::ONE,
        debounce: 100,
    }
}

/// Every refusal below, as (what was broken, the error it must give).
fn cases() -> Vec<(&'static str, ConfigError, ConfigError)> {
    let d = example::config();
    let cur = d.current;
    let p = d.protection;
    let pw = d.power;
    let r = d.ramp;
    let cal = d.calibration.clone();
    let hz = d.tick_hz;
    let mut v: Vec<(&'static str, ConfigError, ConfigError)> = Vec::new();
    let mut case = |what: &'static str, got: ConfigError, want: ConfigError| {
        v.push((what, got, want));
    };

    for e in [Units::MIN_EXP - 1, Units::MAX_EXP + 1] {
        case(
            "monitor unit beyond the decades",
            refused(|c| c.calibration.monitor.unit_exp = e),
            E::UnitOutOfRange {
                channel: Channel::Monitor,
                unit_exp: e,
            },
        );
        case(
            "supply unit beyond the decades",
            refused(|c| c.calibration.supply.unit_exp = e),
            E::UnitOutOfRange {
                channel: Channel::Supply,
                unit_exp: e,
            },
        );
    }
    case(
        "current sense unit beyond the decades",
        refused(|c| {
            c.calibration.current_sense.unit_exp = -10;
            c.calibration.dac.unit_exp = -10;
        }),
        E::UnitOutOfRange {
            channel: Channel::CurrentSense,
            unit_exp: -10,
        },
    );
    case(
        "DAC unit not the current sense's",
        refused(|c| c.calibration.dac.unit_exp = -4),
        E::UnitOutOfRange {
            channel: Channel::Dac,
            unit_exp: -4,
        },
    );
    case(
        "forward-voltage unit not the supply's",
        refused(|c| {
            let mut f = forward();
            f.cal.unit_exp = -2;
            c.forward_voltage = Some(f);
        }),
        E::UnitOutOfRange {
            channel: Channel::ForwardVoltage,
            unit_exp: -2,
        },
    );
    // The ends of the decades are accepted, and name the units.
    for e in [Units::MIN_EXP, Units::MAX_EXP] {
        accepted(|c| {
            c.calibration.current_sense.unit_exp = e;
            c.calibration.dac.unit_exp = e;
        });
    }
    assert_eq!(example::config().units(), Units::MILLI);
    case("tick 0", refused(|c| c.tick_hz = 0), E::TickRateZero);
    case(
        "tick above 1 MHz",
        refused(|c| c.tick_hz = 1_000_001),
        E::TickRateTooHigh { tick_hz: 1_000_001 },
    );
    for a in [Fx::ZERO, -Fx::ONE] {
        case(
            "absolute limit",
            refused(|c| c.current.absolute_max_iu = a),
            E::AbsoluteLimitNotPositive { absolute_max_iu: a },
        );
    }
    for x in [Fx::ZERO, -Fx::DELTA] {
        case(
            "ceiling",
            refused(|c| c.current.ceiling_iu = x),
            E::CeilingNotPositive { ceiling_iu: x },
        );
    }
    let above = cur.absolute_max_iu + Fx::DELTA;
    case(
        "ceiling above absolute",
        refused(|c| c.current.ceiling_iu = above),
        E::CeilingAboveAbsolute {
            ceiling_iu: above,
            absolute_max_iu: cur.absolute_max_iu,
        },
    );
    case(
        "overcurrent at the ceiling",
        refused(|c| c.protection.overcurrent_iu = cur.ceiling_iu),
        E::OvercurrentNotAboveCeiling {
            overcurrent_iu: cur.ceiling_iu,
            ceiling_iu: cur.ceiling_iu,
        },
    );
    case(
        "overcurrent above absolute",
        refused(|c| c.protection.overcurrent_iu = above),
        E::OvercurrentAboveAbsolute {
            overcurrent_iu: above,
            absolute_max_iu: cur.absolute_max_iu,
        },
    );

    // Ramps: each kind, zero, negative, and one LSB under the resolution.
    type Setter = fn(&mut Config, Fx);
    let kinds: [(RampKind, Setter); 4] = [
        (RampKind::SoftStart, |c, x| c.ramp.soft_start_iu_per_ms = x),
        (RampKind::SoftStop, |c, x| c.ramp.soft_stop_iu_per_ms = x),
        (RampKind::Setpoint, |c, x| c.ramp.setpoint_ou_per_ms = x),
        (RampKind::Slew, |c, x| c.apc.slew_iu_per_ms = x),
    ];
    // The smallest rate that is at least one LSB per tick.
    let smallest = Fx::from_bits(hz.div_ceil(1000) as i32);
    for (which, set) in kinds {
        for x in [Fx::ZERO, -Fx::ONE] {
            case(
                "ramp not positive",
                refused(|c| set(c, x)),
                E::RampRateNotPositive { which, per_ms: x },
            );
        }
        let x = smallest - Fx::DELTA;
        case(
            "ramp below resolution",
            refused(|c| set(c, x)),
            E::RampRateBelowResolution {
                which,
                per_ms: x,
                tick_hz: hz,
            },
        );
    }
    let max_ms = (u64::from(u32::MAX) * 1000 / u64::from(hz)) as u32;
    case(
        "emission delay",
        refused(|c| c.ramp.emission_delay_ms = max_ms + 1),
        E::EmissionDelayTooLong {
            emission_delay_ms: max_ms + 1,
        },
    );
    for x in [Fx::ZERO, -Fx::DELTA, Fx::ONE + Fx::DELTA] {
        case(
            "hand-over fraction",
            refused(|c| c.ramp.handover_fraction = x),
            E::HandoverFractionOutOfRange { fraction: x },
        );
    }
    for (min, max) in [
        (Fx::ZERO, pw.max_setpoint_ou),
        (-Fx::ONE, pw.max_setpoint_ou),
        (pw.max_setpoint_ou + Fx::DELTA, pw.max_setpoint_ou),
    ] {
        case(
            "power range",
            refused(|c| c.power.min_setpoint_ou = min),
            E::PowerRangeInvalid {
                min_setpoint_ou: min,
                max_setpoint_ou: max,
            },
        );
    }
    case(
        "runaway at the top setpoint",
        refused(|c| c.protection.runaway_ou = pw.max_setpoint_ou),
        E::RunawayNotAboveSetpointRange {
            runaway_ou: pw.max_setpoint_ou,
            max_setpoint_ou: pw.max_setpoint_ou,
        },
    );
    case(
        "monitor-loss floor negative",
        refused(|c| c.protection.monitor_loss_floor_ou = -Fx::DELTA),
        E::MonitorLossFloorNegative {
            floor_ou: -Fx::DELTA,
        },
    );
    let lowest = pw.min_setpoint_ou * r.handover_fraction;
    case(
        "monitor-loss floor at the lowest hand-over",
        refused(|c| c.protection.monitor_loss_floor_ou = lowest),
        E::MonitorLossFloorNotBelowSetpoints {
            floor_ou: lowest,
            lowest_handover_ou: lowest,
        },
    );
    for x in [Fx::ZERO, cur.ceiling_iu + Fx::DELTA] {
        case(
            "monitor-loss drive",
            refused(|c| c.protection.monitor_loss_drive_iu = x),
            E::MonitorLossDriveOutOfRange {
                drive_iu: x,
                ceiling_iu: cur.ceiling_iu,
            },
        );
    }
    case(
        "knee at the cut-off",
        refused(|c| c.derating.knee_degc = d.derating.cutoff_degc),
        E::DeratingKneeNotBelowCutoff {
            knee_degc: d.derating.cutoff_degc,
            cutoff_degc: d.derating.cutoff_degc,
        },
    );
    for x in [-Fx::DELTA, cur.ceiling_iu + Fx::DELTA] {
        case(
            "derating floor",
            refused(|c| c.derating.floor_iu = x),
            E::DeratingFloorOutOfRange {
                floor_iu: x,
                ceiling_iu: cur.ceiling_iu,
            },
        );
    }

    // Debounces.
    type Deb = fn(&mut Config);
    let debs: [(Fault, Deb); 8] = [
        (Fault::Overcurrent, |c| {
            c.protection.overcurrent_debounce = 0
        }),
        (Fault::MonitorRunaway, |c| c.protection.runaway_debounce = 0),
        (Fault::MonitorLoss, |c| {
            c.protection.monitor_loss_debounce = 0
        }),
        (Fault::SensorOpen, |c| c.protection.sensor_debounce = 0),
        (Fault::OverTemperature, |c| {
            c.protection.over_temp_debounce = 0
        }),
        (Fault::InterlockOpen, |c| {
            c.protection.interlock_debounce = 0
        }),
        (Fault::SupplyUnder, |c| c.protection.supply_debounce = 0),
        (Fault::DriveMismatch, |c| c.protection.mismatch_debounce = 0),
    ];
    for (fault, brk) in debs {
        case("debounce", refused(brk), E::DebounceZero { fault });
    }
    case(
        "external debounce",
        refused(|c| c.protection.external_debounce = 0),
        E::DebounceZero {
            fault: Fault::ExternalFault,
        },
    );
    // Fast protections: at most 500 us of ticks (10 at 20 kHz).
    type FastSet = fn(&mut Config, u16);
    let fast: [(Fault, FastSet); 5] = [
        (Fault::Overcurrent, |c, n| {
            c.protection.overcurrent_debounce = n
        }),
        (Fault::MonitorRunaway, |c, n| {
            c.protection.runaway_debounce = n
        }),
        (Fault::InterlockOpen, |c, n| {
            c.protection.interlock_debounce = n
        }),
        (Fault::DriveMismatch, |c, n| {
            c.protection.mismatch_debounce = n
        }),
        (Fault::ExternalFault, |c, n| {
            c.protection.external_debounce = n
        }),
    ];
    for (fault, set) in fast {
        for n in [11, u16::MAX] {
            case(
                "fast debounce",
                refused(|c| set(c, n)),
                E::FastDebounceTooLong {
                    fault,
                    debounce: n,
                    max: 10,
                },
            );
        }
    }
    case(
        "fast debounce at 1 kHz",
        refused(|c| {
            c.tick_hz = 1_000;
            c.protection.overcurrent_debounce = 2;
        }),
        E::FastDebounceTooLong {
            fault: Fault::Overcurrent,
            debounce: 2,
            max: 1,
        },
    );
    for weight in [0, 256] {
        case(
            "intermittent weight",
            refused(|c| c.protection.intermittent_weight = weight),
            E::IntermittentWeightOutOfRange { weight },
        );
    }
    case(
        "missed-tick limit",
        refused(|c| c.protection.missed_tick_limit = 0),
        E::MissedTickLimitZero,
    );
    for x in [Fx::ZERO, -Fx::ONE] {
        case(
            "mismatch tolerance",
            refused(|c| c.protection.mismatch_tolerance_iu = x),
            E::MismatchToleranceNotPositive { tolerance_iu: x },
        );
    }

    // Gains.
    for x in [Fx::ZERO, -Fx::ONE] {
        case(
            "kp",
            refused(|c| c.apc.kp_iu_per_ou = x),
            E::GainNotPositive {
                proportional: true,
                gain: x,
            },
        );
    }
    case(
        "ki negative",
        refused(|c| c.apc.ki_iu_per_ou_ms = -Fx::DELTA),
        E::GainNotPositive {
            proportional: false,
            gain: -Fx::DELTA,
        },
    );
    let kp_fits = Fx::MAX / p.runaway_ou;
    let kp_over = kp_fits + Fx::DELTA;
    assert!(kp_over.checked_mul(p.runaway_ou).is_none());
    case(
        "kp × runaway overflows",
        refused(|c| c.apc.kp_iu_per_ou = kp_over),
        E::ProportionalGainOverflow {
            kp_iu_per_ou: kp_over,
            runaway_ou: p.runaway_ou,
        },
    );
    // ki per tick must stay below 128 (the range of the 8.24 Gain).
    let ki_over = Fx::from_num(128 * hz / 1000);
    case(
        "ki per tick too large",
        refused(|c| c.apc.ki_iu_per_ou_ms = ki_over),
        E::IntegralGainOutOfRange {
            ki_iu_per_ou_ms: ki_over,
            tick_hz: hz,
        },
    );
    // One Fx LSB per ms at 1 MHz is below one Gain LSB per tick.
    case(
        "ki per tick rounds to zero",
        refused(|c| {
            c.tick_hz = 1_000_000;
            c.apc.ki_iu_per_ou_ms = Fx::DELTA;
        }),
        E::IntegralGainOutOfRange {
            ki_iu_per_ou_ms: Fx::DELTA,
            tick_hz: 1_000_000,
        },
    );

    // Calibration.
    type AdcSel = fn(&mut Config) -> &mut AdcCal;
    let adcs: [(Channel, AdcSel); 3] = [
        (Channel::Monitor, |c| &mut c.calibration.monitor),
        (Channel::CurrentSense, |c| &mut c.calibration.current_sense),
        (Channel::Supply, |c| &mut c.calibration.supply),
    ];
    for (channel, sel) in adcs {
        for g in [Gain::ZERO, -Gain::DELTA] {
            case(
                "adc gain",
                refused(|c| sel(c).units_per_count = g),
                E::CalibrationGainNotPositive { channel },
            );
        }
        for off in [-1, 4095] {
            case(
                "adc offset",
                refused(|c| sel(c).offset_counts = off),
                E::CalibrationOffsetOutOfRange {
                    channel,
                    offset: off,
                    full_scale: 4095,
                },
            );
        }
    }
    for g in [Fx::ZERO, -Fx::ONE] {
        case(
            "dac gain",
            refused(|c| c.calibration.dac.codes_per_iu = g),
            E::CalibrationGainNotPositive {
                channel: Channel::Dac,
            },
        );
    }
    for off in [-1, i32::from(cal.dac.max_code)] {
        case(
            "dac offset",
            refused(|c| c.calibration.dac.offset_codes = off),
            E::CalibrationOffsetOutOfRange {
                channel: Channel::Dac,
                offset: off,
                full_scale: cal.dac.max_code,
            },
        );
    }
    let code = ceiling_code(&d);
    case(
        "ceiling beyond the DAC",
        refused(|c| c.calibration.dac.max_code = code as u16 - 1),
        E::CeilingNotRepresentable {
            ceiling_iu: cur.ceiling_iu,
            code,
            max_code: code as u16 - 1,
        },
    );
    let mon_fs = full_scale(&cal.monitor);
    case(
        "runaway beyond the monitor",
        refused(|c| c.protection.runaway_ou = mon_fs + Fx::DELTA),
        E::RunawayBeyondMonitorRange {
            runaway_ou: mon_fs + Fx::DELTA,
            full_scale_ou: mon_fs,
        },
    );
    // The shortest current-sense range that still reads the trip, minus one count.
    let n_ok = (0..=4095u16)
        .find(|n| {
            let mut a = cal.current_sense;
            a.full_scale_counts = *n;
            *n > 0 && full_scale(&a) >= p.overcurrent_iu
        })
        .unwrap();
    let mut short = cal.current_sense;
    short.full_scale_counts = n_ok - 1;
    case(
        "overcurrent beyond the sense",
        refused(|c| c.calibration.current_sense.full_scale_counts = n_ok - 1),
        E::OvercurrentBeyondSenseRange {
            overcurrent_iu: p.overcurrent_iu,
            full_scale_iu: full_scale(&short),
        },
    );
    let sup_fs = full_scale(&cal.supply);
    for (min, max) in [
        (p.supply_max_vu, p.supply_max_vu),
        (-Fx::DELTA, p.supply_max_vu),
        (p.supply_min_vu, sup_fs + Fx::DELTA),
    ] {
        case(
            "supply window",
            refused(|c| {
                c.protection.supply_min_vu = min;
                c.protection.supply_max_vu = max;
            }),
            E::SupplyWindowInvalid {
                supply_min_vu: min,
                supply_max_vu: max,
                full_scale_vu: sup_fs,
            },
        );
    }

    // Temperature table and rails.
    for len in [1usize, 0] {
        case(
            "short table",
            refused(|c| c.calibration.temperature.table.truncate(len)),
            E::TempTableTooShort { len },
        );
    }
    case(
        "repeated counts",
        refused(|c| {
            let t = &mut c.calibration.temperature.table;
            t[5].counts = t[4].counts;
        }),
        E::TempTableNotMonotonic { index: 5 },
    );
    case(
        "falling counts",
        refused(|c| c.calibration.temperature.table.swap(0, 1)),
        E::TempTableNotMonotonic { index: 1 },
    );
    case(
        "repeated temperature",
        refused(|c| {
            let t = &mut c.calibration.temperature.table;
            t[3].degc = t[2].degc;
        }),
        E::TempTableNotMonotonic { index: 3 },
    );
    let last = d.calibration.temperature.table.len() - 1;
    case(
        "temperature turns back",
        refused(|c| {
            let t = &mut c.calibration.temperature.table;
            t[last].degc = t[last - 1].degc + Fx::ONE;
        }),
        E::TempTableNotMonotonic { index: last },
    );
    // The demo table runs from 100 degC down; the cut-off is 70 degC.
    case(
        "table short of the cut-off",
        refused(|c| {
            let t = &mut c.calibration.temperature.table;
            let rest: heapless::Vec<_, 33> = t.iter().copied().skip(6).collect();
            *t = rest;
        }),
        E::TempTableShortOfCutoff {
            hottest_degc: Fx::from_num(70),
            needed_degc: Fx::from_num(80),
        },
    );
    // The forward-voltage channel.
    let fv = forward();
    for (short, open) in [
        (-Fx::ONE, fv.open_vu),
        (fv.open_vu, fv.open_vu),
        (fv.short_vu, Fx::from_num(4096)),
    ] {
        case(
            "forward-voltage limits",
            refused(|c| {
                c.forward_voltage = Some(ForwardVoltage {
                    short_vu: short,
                    open_vu: open,
                    ..forward()
                })
            }),
            E::ForwardVoltageLimitsInvalid {
                short_vu: short,
                open_vu: open,
                full_scale_vu: Fx::from_num(4095),
            },
        );
    }
    for x in [Fx::ZERO, cur.ceiling_iu + Fx::DELTA] {
        case(
            "forward-voltage drive",
            refused(|c| {
                c.forward_voltage = Some(ForwardVoltage {
                    min_drive_iu: x,
                    ..forward()
                })
            }),
            E::ForwardDriveOutOfRange {
                min_drive_iu: x,
                ceiling_iu: cur.ceiling_iu,
            },
        );
    }
    case(
        "forward-voltage calibration",
        refused(|c| {
            let mut f = forward();
            f.cal.units_per_count = Gain::ZERO;
            c.forward_voltage = Some(f);
        }),
        E::CalibrationGainNotPositive {
            channel: Channel::ForwardVoltage,
        },
    );
    case(
        "forward-voltage debounce",
        refused(|c| {
            c.forward_voltage = Some(ForwardVoltage {
                debounce: 0,
                ..forward()
            })
        }),
        E::DebounceZero {
            fault: Fault::DiodeOpen,
        },
    );
    // Plausibility.
    case(
        "plausibility without points",
        refused(|c| {
            let mut pl = plausibility();
            pl.points.clear();
            c.plausibility = Some(pl);
        }),
        E::PlausibilityPointInvalid { index: 0 },
    );
    case(
        "plausibility temperatures not rising",
        refused(|c| {
            let mut pl = plausibility();
            pl.points[1].degc = pl.points[0].degc;
            c.plausibility = Some(pl);
        }),
        E::PlausibilityPointInvalid { index: 1 },
    );
    case(
        "plausibility slope zero",
        refused(|c| {
            let mut pl = plausibility();
            pl.points[1].slope_ou_per_iu = Fx::ZERO;
            c.plausibility = Some(pl);
        }),
        E::PlausibilityPointInvalid { index: 1 },
    );
    case(
        "plausibility threshold negative",
        refused(|c| {
            let mut pl = plausibility();
            pl.points[0].threshold_iu = -Fx::DELTA;
            c.plausibility = Some(pl);
        }),
        E::PlausibilityPointInvalid { index: 0 },
    );
    let pl = plausibility();
    for (w, f, a) in [
        (-Fx::DELTA, pl.fault_margin, pl.allowance_iu),
        (
            pl.fault_margin + Fx::DELTA,
            pl.fault_margin,
            pl.allowance_iu,
        ),
        (
            pl.warning_margin,
            Fx::from_num(4) + Fx::DELTA,
            pl.allowance_iu,
        ),
        (pl.warning_margin, pl.fault_margin, -Fx::DELTA),
    ] {
        case(
            "plausibility margins",
            refused(|c| {
                c.plausibility = Some(Plausibility {
                    warning_margin: w,
                    fault_margin: f,
                    allowance_iu: a,
                    ..plausibility()
                })
            }),
            E::PlausibilityMarginsInvalid {
                warning_margin: w,
                fault_margin: f,
                allowance_iu: a,
            },
        );
    }
    case(
        "plausibility debounce",
        refused(|c| {
            c.plausibility = Some(Plausibility {
                debounce: 0,
                ..plausibility()
            })
        }),
        E::DebounceZero {
            fault: Fault::PowerImplausible,
        },
    );
    let tc = &d.calibration.temperature;
    let (first, lastc) = (tc.table[0].counts, tc.table[last].counts);
    for (lo, hi) in [
        (tc.high_fault_counts, tc.high_fault_counts),
        (first, tc.high_fault_counts),
        (tc.low_fault_counts, lastc),
    ] {
        case(
            "sensor rails",
            refused(|c| {
                c.calibration.temperature.low_fault_counts = lo;
                c.calibration.temperature.high_fault_counts = hi;
            }),
            E::SensorRailsInconsistent {
                low_fault_counts: lo,
                high_fault_counts: hi,
            },
        );
    }
    v
}

/// `round(ceiling × codes_per_iu) + offset`, halves rounding up, in i128.
fn ceiling_code(c: &Config) -> i32 {
    let prod = i128::from(c.current.ceiling_iu.to_bits())
        * i128::from(c.calibration.dac.codes_per_iu.to_bits());
    (((prod + (1 << 31)) >> 32) + i128::from(c.calibration.dac.offset_codes)) as i32
}

#[test]
fn the_demo_configuration_is_valid() {
    accepted(|_| {});
}

#[test]
fn each_broken_field_gives_its_exact_error() {
    for (what, got, want) in cases() {
        assert_eq!(got, want, "{what}");
    }
}

#[test]
fn every_variant_is_covered() {
    let seen: BTreeSet<&str> = cases().iter().map(|(_, e, _)| variant(e)).collect();
    assert_eq!(seen.len(), VARIANTS, "covered: {seen:?}");
}

#[test]
fn every_error_displays_a_distinct_message() {
    let mut seen = BTreeSet::new();
    for (what, e, _) in cases() {
        let s = e.to_string();
        assert!(!s.is_empty(), "{what}");
        seen.insert(s);
    }
    // Messages carry the values, so same-variant cases differ too; at
    // least one distinct message per variant.
    assert!(seen.len() >= VARIANTS);
}

#[test]
fn values_just_inside_each_boundary_are_accepted() {
    let d = example::config();
    let hz = d.tick_hz;
    accepted(|c| c.tick_hz = 1_000_000);
    accepted(|c| c.protection.overcurrent_iu = d.current.ceiling_iu + Fx::DELTA);
    accepted(|c| c.protection.overcurrent_iu = d.current.absolute_max_iu);
    let smallest = Fx::from_bits(hz.div_ceil(1000) as i32);
    accepted(|c| {
        c.ramp.soft_start_iu_per_ms = smallest;
        c.ramp.soft_stop_iu_per_ms = smallest;
        c.ramp.setpoint_ou_per_ms = smallest;
        c.apc.slew_iu_per_ms = smallest;
    });
    accepted(|c| c.ramp.emission_delay_ms = 0);
    accepted(|c| c.ramp.emission_delay_ms = (u64::from(u32::MAX) * 1000 / u64::from(hz)) as u32);
    accepted(|c| c.ramp.handover_fraction = Fx::ONE);
    accepted(|c| c.power.min_setpoint_ou = d.power.max_setpoint_ou);
    accepted(|c| c.protection.runaway_ou = d.power.max_setpoint_ou + Fx::DELTA);
    accepted(|c| c.protection.monitor_loss_floor_ou = Fx::ZERO);
    let lowest = d.power.min_setpoint_ou * d.ramp.handover_fraction;
    accepted(|c| c.protection.monitor_loss_floor_ou = lowest - Fx::DELTA);
    accepted(|c| c.protection.monitor_loss_drive_iu = d.current.ceiling_iu);
    accepted(|c| c.protection.monitor_loss_drive_iu = Fx::DELTA);
    accepted(|c| c.derating.knee_degc = d.derating.cutoff_degc - Fx::DELTA);
    accepted(|c| c.derating.floor_iu = Fx::ZERO);
    accepted(|c| c.derating.floor_iu = d.current.ceiling_iu);
    accepted(|c| c.protection.missed_tick_limit = u16::MAX);
    accepted(|c| c.protection.mismatch_tolerance_iu = Fx::DELTA);
    accepted(|c| c.apc.ki_iu_per_ou_ms = Fx::ZERO);
    accepted(|c| c.apc.kp_iu_per_ou = Fx::MAX / d.protection.runaway_ou);
    accepted(|c| c.apc.ki_iu_per_ou_ms = Fx::from_num(128 * hz / 1000) - Fx::DELTA);
    accepted(|c| c.calibration.monitor.offset_counts = 0);
    accepted(|c| c.calibration.dac.max_code = ceiling_code(&d) as u16);
    let mon_fs = full_scale(&d.calibration.monitor);
    accepted(|c| c.protection.runaway_ou = mon_fs);
    let sup_fs = full_scale(&d.calibration.supply);
    accepted(|c| c.protection.supply_max_vu = sup_fs);
    accepted(|c| c.protection.supply_min_vu = Fx::ZERO);
    let tc = &d.calibration.temperature;
    let last = tc.table.len() - 1;
    accepted(|c| c.calibration.temperature.low_fault_counts = tc.table[0].counts - 1);
    accepted(|c| c.calibration.temperature.high_fault_counts = tc.table[last].counts + 1);
    // The table reaching exactly the cut-off plus the margin (80 degC).
    accepted(|c| {
        let t = &mut c.calibration.temperature.table;
        let rest: heapless::Vec<_, 33> = t.iter().copied().skip(4).collect();
        *t = rest;
    });
    // Fast debounces at their bound, weights at theirs, the optional
    // protections with their limits at the edges.
    accepted(|c| {
        c.protection.overcurrent_debounce = 10;
        c.protection.external_debounce = 10;
        c.protection.intermittent_weight = 255;
    });
    accepted(|c| c.protection.intermittent_weight = 1);
    accepted(|c| {
        c.forward_voltage = Some(ForwardVoltage {
            short_vu: Fx::ZERO,
            open_vu: Fx::from_num(4095),
            min_drive_iu: c.current.ceiling_iu,
            ..forward()
        });
        c.plausibility = Some(Plausibility {
            warning_margin: Fx::from_num(4),
            fault_margin: Fx::from_num(4),
            allowance_iu: Fx::ZERO,
            ..plausibility()
        });
    });
    // A two-point rising table (an RTD or PTC) is as good as a falling one.
    accepted(|c| {
        let t = &mut c.calibration.temperature.table;
        let (a, b) = (t[0], t[last]);
        t.clear();
        t.push(diodestat_core::TempPoint {
            counts: a.counts,
            degc: b.degc,
        })
        .unwrap();
        t.push(diodestat_core::TempPoint {
            counts: b.counts,
            degc: a.degc,
        })
        .unwrap();
    });
}

#[test]
fn per_tick_quantities_are_derived_from_the_rates() {
    let d = example::config();
    let v = d.clone().validate().unwrap();
    let per_tick =
        |x: Fx| Fx::from_bits((i64::from(x.to_bits()) * 1000 / i64::from(d.tick_hz)) as i32);
    assert_eq!(
        v.soft_start_iu_per_tick(),
        per_tick(d.ramp.soft_start_iu_per_ms)
    );
    assert_eq!(
        v.soft_stop_iu_per_tick(),
        per_tick(d.ramp.soft_stop_iu_per_ms)
    );
    assert_eq!(
        v.setpoint_ou_per_tick(),
        per_tick(d.ramp.setpoint_ou_per_ms)
    );
    assert_eq!(v.slew_iu_per_tick(), per_tick(d.apc.slew_iu_per_ms));
    assert_eq!(
        v.emission_delay_ticks(),
        (u64::from(d.ramp.emission_delay_ms) * u64::from(d.tick_hz)).div_ceil(1000) as u32
    );
    assert_eq!(v.kp(), d.apc.kp_iu_per_ou);
    // ki per tick = ki × 1000 / tick_hz, within one Gain LSB.
    let want = I40F24::from_num(d.apc.ki_iu_per_ou_ms) * 1000 / i64::from(d.tick_hz);
    let got = I40F24::from_num(v.ki_per_tick());
    assert!((got - want).abs() <= I40F24::DELTA, "{got} vs {want}");
    assert_eq!(v.dac_code(d.current.ceiling_iu), ceiling_code(&d) as u16);
    assert_eq!(v.dac_code(Fx::MAX), d.calibration.dac.max_code, "clamped");
    assert_eq!(v.dac_code(-Fx::ONE), 0, "clamped");
}
