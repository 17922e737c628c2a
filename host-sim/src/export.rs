//! Export a board configuration as Rust source for a board crate, with a
//! hash the firmware reports at start, so what was simulated is what is
//! flashed.

use std::fmt::Write as _;

use diodestat_core::Config;

/// FNV-1a, 64 bit, over bytes.
pub fn fnv1a64(bytes: &[u8]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in bytes {
        h ^= u64::from(*b);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    h
}

fn fx(v: diodestat_core::Fx) -> String {
    format!("Fx::from_bits({})", v.to_bits())
}

fn gain(v: diodestat_core::Gain) -> String {
    format!("Gain::from_bits({})", v.to_bits())
}

fn adc(name: &str, c: &diodestat_core::config::AdcCal) -> String {
    format!(
        "            {name}: AdcCal {{ offset_counts: {}, units_per_count: {}, full_scale_counts: {} }},\n",
        c.offset_counts,
        gain(c.units_per_count),
        c.full_scale_counts
    )
}

/// The body of `config()` (hashed) for a configuration.
pub fn config_body(c: &Config) -> String {
    let p = &c.protection;
    let r = &c.ramp;
    let t = &c.calibration.temperature;
    let mut s = String::new();
    let _ = writeln!(s, "    Config {{");
    let _ = writeln!(s, "        tick_hz: {},", c.tick_hz);
    let _ = writeln!(
        s,
        "        current: CurrentLimits {{ absolute_max_ma: {}, ceiling_ma: {} }},",
        fx(c.current.absolute_max_ma),
        fx(c.current.ceiling_ma)
    );
    let _ = writeln!(
        s,
        "        power: PowerRange {{ min_setpoint_mw: {}, max_setpoint_mw: {} }},",
        fx(c.power.min_setpoint_mw),
        fx(c.power.max_setpoint_mw)
    );
    let _ = writeln!(
        s,
        "        ramp: Ramps {{ emission_delay_ms: {}, soft_start_ma_per_ms: {}, soft_stop_ma_per_ms: {}, handover_fraction: {}, setpoint_mw_per_ms: {} }},",
        r.emission_delay_ms,
        fx(r.soft_start_ma_per_ms),
        fx(r.soft_stop_ma_per_ms),
        fx(r.handover_fraction),
        fx(r.setpoint_mw_per_ms)
    );
    let _ = writeln!(
        s,
        "        apc: ApcGains {{ kp_ma_per_mw: {}, ki_ma_per_mw_ms: {}, slew_ma_per_ms: {} }},",
        fx(c.apc.kp_ma_per_mw),
        fx(c.apc.ki_ma_per_mw_ms),
        fx(c.apc.slew_ma_per_ms)
    );
    let _ = writeln!(
        s,
        "        derating: Derating {{ knee_degc: {}, cutoff_degc: {}, floor_ma: {} }},",
        fx(c.derating.knee_degc),
        fx(c.derating.cutoff_degc),
        fx(c.derating.floor_ma)
    );
    let _ = writeln!(s, "        protection: Protection {{");
    for (k, v) in [
        ("overcurrent_ma", fx(p.overcurrent_ma)),
        ("overcurrent_debounce", p.overcurrent_debounce.to_string()),
        ("runaway_mw", fx(p.runaway_mw)),
        ("runaway_debounce", p.runaway_debounce.to_string()),
        ("monitor_loss_floor_mw", fx(p.monitor_loss_floor_mw)),
        ("monitor_loss_drive_ma", fx(p.monitor_loss_drive_ma)),
        ("monitor_loss_debounce", p.monitor_loss_debounce.to_string()),
        ("sensor_debounce", p.sensor_debounce.to_string()),
        ("over_temp_debounce", p.over_temp_debounce.to_string()),
        ("interlock_debounce", p.interlock_debounce.to_string()),
        ("supply_min_mv", fx(p.supply_min_mv)),
        ("supply_max_mv", fx(p.supply_max_mv)),
        ("supply_debounce", p.supply_debounce.to_string()),
        ("mismatch_tolerance_ma", fx(p.mismatch_tolerance_ma)),
        ("mismatch_debounce", p.mismatch_debounce.to_string()),
        ("missed_tick_limit", p.missed_tick_limit.to_string()),
        ("external_debounce", p.external_debounce.to_string()),
        ("intermittent_weight", p.intermittent_weight.to_string()),
    ] {
        let _ = writeln!(s, "            {k}: {v},");
    }
    let _ = writeln!(s, "        }},");
    let _ = writeln!(s, "        calibration: Calibration {{");
    s.push_str(&adc("monitor", &c.calibration.monitor));
    s.push_str(&adc("current_sense", &c.calibration.current_sense));
    s.push_str(&adc("supply", &c.calibration.supply));
    let d = &c.calibration.dac;
    let _ = writeln!(
        s,
        "            dac: DacCal {{ codes_per_ma: {}, offset_codes: {}, max_code: {} }},",
        fx(d.codes_per_ma),
        d.offset_codes,
        d.max_code
    );
    let _ = writeln!(s, "            temperature: TempCal {{");
    let _ = writeln!(
        s,
        "                table: heapless::Vec::from_slice(&TEMP_TABLE).unwrap_or_default(),"
    );
    let _ = writeln!(
        s,
        "                low_fault_counts: {},",
        t.low_fault_counts
    );
    let _ = writeln!(
        s,
        "                high_fault_counts: {},",
        t.high_fault_counts
    );
    let _ = writeln!(s, "                open_rail: Rail::{:?},", t.open_rail);
    let _ = writeln!(s, "            }},");
    let _ = writeln!(s, "        }},");
    // Board files describe no forward-voltage channel yet (see
    // `boardfile::to_config`).
    let _ = writeln!(s, "        forward_voltage: None,");
    match &c.plausibility {
        None => {
            let _ = writeln!(s, "        plausibility: None,");
        }
        Some(pl) => {
            let _ = writeln!(
                s,
                "        plausibility: Some(diodestat_core::config::Plausibility {{"
            );
            let _ = writeln!(s, "            points: heapless::Vec::from_slice(&[");
            for p in &pl.points {
                let _ = writeln!(
                    s,
                    "                diodestat_core::config::DiodePoint {{ degc: {}, threshold_ma: {}, slope_mw_per_ma: {} }},",
                    fx(p.degc),
                    fx(p.threshold_ma),
                    fx(p.slope_mw_per_ma)
                );
            }
            let _ = writeln!(s, "            ]).unwrap_or_default(),");
            let _ = writeln!(s, "            warning_margin: {},", fx(pl.warning_margin));
            let _ = writeln!(s, "            fault_margin: {},", fx(pl.fault_margin));
            let _ = writeln!(s, "            allowance_ma: {},", fx(pl.allowance_ma));
            let _ = writeln!(s, "            debounce: {},", pl.debounce);
            let _ = writeln!(s, "        }}),");
        }
    }
    let _ = writeln!(s, "    }}");
    s
}

/// The rows of `TEMP_TABLE` (hashed).
pub fn table_rows(c: &Config) -> String {
    let mut table = String::new();
    for p in &c.calibration.temperature.table {
        let _ = writeln!(
            table,
            "    TempPoint {{ counts: {}, degc: Fx::from_bits({}) }},",
            p.counts,
            p.degc.to_bits()
        );
    }
    table
}

/// The hash the exported file carries: FNV-1a 64 over the exported table
/// rows and `config()` body, so it changes with any exported value.
pub fn config_hash(c: &Config) -> u64 {
    fnv1a64(format!("{}{}", table_rows(c), config_body(c)).as_bytes())
}

/// A board name as it may stand in a comment of generated source: letters,
/// digits, space and `- _ . + ( ) /` kept, anything else (a line break, a
/// backtick, a comment end) written as its `\u{..}` code, so no name can
/// put text into the exported source. Board files refuse such names; this
/// holds for any caller.
pub fn comment_text(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric()
                || matches!(c, ' ' | '-' | '_' | '.' | '+' | '(' | ')' | '/')
            {
                c.to_string()
            } else {
                format!("\\u{{{:x}}}", u32::from(c))
            }
        })
        .collect()
}

/// The whole generated file.
pub fn rust_module(name: &str, c: &Config) -> String {
    let name = comment_text(name);
    let body = config_body(c);
    let t = &c.calibration.temperature.table;
    let table = table_rows(c);
    let hash = config_hash(c);
    format!(
        "//! Board configuration `{name}`, generated by `diodestat export`; regenerate instead of editing.\n\
         //! Values are raw fixed-point bits of the engineering units named in each field.\n\n\
         use diodestat_core::config::{{AdcCal, ApcGains, Calibration, CurrentLimits, DacCal, Derating, PowerRange, Protection, Rail, Ramps, TempCal}};\n\
         use diodestat_core::{{Config, Fx, Gain, TempPoint}};\n\n\
         /// FNV-1a 64 hash of the table and configuration below, as hex.\n\
         pub const CONFIG_HASH: &str = \"{hash:016x}\";\n\n\
         /// Temperature table (counts, degC).\n\
         pub const TEMP_TABLE: [TempPoint; {n}] = [\n{table}];\n\n\
         /// The board configuration (validate it at start-up).\n\
         pub fn config() -> Config {{\n{body}}}\n",
        n = t.len()
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fnv1a64_reference_vectors() {
        // FNV-1a 64-bit test vectors of the FNV reference code by Fowler,
        // Noll and Vo (offset basis 0xcbf29ce484222325, prime 0x100000001b3);
        // from memory.
        assert_eq!(fnv1a64(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv1a64(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv1a64(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn hash_in_the_file_is_over_the_exported_values() {
        let c = crate::board::calibrate(
            diodestat_core::example::config(),
            &crate::plant::DemoModule::visible(),
        );
        let src = rust_module("t", &c);
        let hash = format!("\"{:016x}\"", config_hash(&c));
        assert!(src.contains(&format!("CONFIG_HASH: &str = {hash}")));
        // Any exported value moves the hash: a loop gain, a table point.
        let mut g = c.clone();
        g.apc.ki_ma_per_mw_ms += diodestat_core::Fx::from_bits(1);
        assert_ne!(config_hash(&g), config_hash(&c));
        let mut t = c.clone();
        if let Some(p) = t.calibration.temperature.table.first_mut() {
            p.counts += 1;
        }
        assert_ne!(config_hash(&t), config_hash(&c));
        // The name is not part of the configuration.
        assert!(rust_module("other", &c).contains(&hash));
    }

    #[test]
    fn a_name_cannot_put_text_into_the_source() {
        let c = crate::board::calibrate(
            diodestat_core::example::config(),
            &crate::plant::DemoModule::visible(),
        );
        let src = rust_module("x`\npub fn evil() {}\n/* */ \\", &c);
        assert!(!src.lines().any(|l| l.starts_with("pub fn evil")), "{src}");
        let first = src.lines().next().unwrap();
        assert_eq!(
            first,
            "//! Board configuration `x\\u{60}\\u{a}pub fn evil() \\u{7b}\\u{7d}\\u{a}/\\u{2a} \\u{2a}/ \\u{5c}`, generated by `diodestat export`; regenerate instead of editing."
        );
        assert_eq!(
            comment_text("Demo red (rev. B) 650-nm"),
            "Demo red (rev. B) 650-nm"
        );
    }
}
