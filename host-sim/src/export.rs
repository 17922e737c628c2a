//! Export a board configuration as Rust source for a board crate, with the
//! core's fingerprint of it ([`diodestat_core::ValidConfig::fingerprint`]),
//! which the firmware computes again at start, so what was simulated is
//! what is flashed.

use std::fmt::Write as _;

use diodestat_core::{AdcCal, Config, Fx, ValidConfig};

use crate::units::Scale;

/// The generated source as lines of code, each with the engineering value
/// and unit of what it sets (empty where the line sets nothing).
#[derive(Default)]
struct Lines(Vec<(String, String, bool)>);

impl Lines {
    fn code(&mut self, code: impl Into<String>) {
        self.0.push((code.into(), String::new(), false));
    }
    /// A line with its note after it.
    fn note(&mut self, code: impl Into<String>, note: impl Into<String>) {
        self.0.push((code.into(), note.into(), false));
    }
    /// A line with its note on a comment line above it (for lines that
    /// rustfmt spreads over several).
    fn note_above(&mut self, code: impl Into<String>, note: impl Into<String>) {
        self.0.push((code.into(), note.into(), true));
    }
    /// The lines with their comments, as written.
    fn annotated(&self) -> String {
        let mut s = String::new();
        for (c, n, above) in &self.0 {
            if *above {
                let indent = &c[..c.len() - c.trim_start().len()];
                let _ = writeln!(s, "{indent}// {n}");
                s.push_str(c);
            } else {
                s.push_str(c);
                if !n.is_empty() {
                    let _ = write!(s, " // {n}");
                }
            }
            s.push('\n');
        }
        s
    }
}

/// A derived value to 6 significant digits, without trailing zeros.
fn eng(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (5 - v.abs().log10().floor() as i32).clamp(0, 12) as usize;
    let s = format!("{v:.digits$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

fn plural(n: impl Into<u64>, one: &str) -> String {
    let n = n.into();
    format!("{n} {one}{}", if n == 1 { "" } else { "s" })
}

/// A `Fx` field: raw bits, annotated with the value in `unit`.
fn fx_field(l: &mut Lines, indent: &str, name: &str, v: Fx, unit: &str) {
    l.note(
        format!("{indent}{name}: Fx::from_bits({}),", v.to_bits()),
        format!("{v} {unit}"),
    );
}

/// A `Fx` field in the board's units: raw bits, annotated with the
/// engineering value (`v × per`) in `unit`.
fn eng_field(l: &mut Lines, indent: &str, name: &str, v: Fx, per: f64, unit: &str) {
    l.note(
        format!("{indent}{name}: Fx::from_bits({}),", v.to_bits()),
        format!("{} {unit}", eng(v.to_num::<f64>() * per)),
    );
}

/// A debounce count, annotated with its duration at the tick rate.
fn ticks_field(l: &mut Lines, indent: &str, name: &str, n: u16, tick_hz: u32) {
    let ms = f64::from(n) * 1e3 / f64::from(tick_hz.max(1));
    l.note(
        format!("{indent}{name}: {n},"),
        format!("{} = {} ms at {tick_hz} Hz", plural(n, "tick"), eng(ms)),
    );
}

fn adc(l: &mut Lines, name: &str, c: &AdcCal, per: f64, unit: &str, si: &str) {
    let i = "                ";
    l.code(format!("            {name}: AdcCal {{"));
    l.note(
        format!("{i}offset_counts: {},", c.offset_counts),
        format!("{} counts at zero input", c.offset_counts),
    );
    l.note(
        format!(
            "{i}units_per_count: Gain::from_bits({}),",
            c.units_per_count.to_bits()
        ),
        format!(
            "{} {unit} per count",
            eng(c.units_per_count.to_num::<f64>() * per)
        ),
    );
    l.note(
        format!("{i}full_scale_counts: {},", c.full_scale_counts),
        format!(
            "{} counts full scale = {} {unit}",
            c.full_scale_counts,
            eng(
                (f64::from(c.full_scale_counts) - f64::from(c.offset_counts))
                    * c.units_per_count.to_num::<f64>()
                    * per
            )
        ),
    );
    l.note(
        format!("{i}unit_exp: {},", c.unit_exp),
        format!("reads in units of {} {si}", decade(c.unit_exp)),
    );
    l.code("            },");
}

/// `10^e` as text.
fn decade(e: i8) -> String {
    eng(10f64.powi(i32::from(e)))
}

/// The `config()` body.
fn body(c: &Config) -> Lines {
    let (p, r, hz) = (&c.protection, &c.ramp, c.tick_hz);
    let t = &c.calibration.temperature;
    let mut l = Lines::default();
    let (i2, i3) = ("        ", "            ");
    let u = c.units();
    let (ma, mw, mv) = (u.ma_per_iu(), u.mw_per_ou(), u.mv_per_vu());
    let decade = |e: i8| eng(10f64.powi(i32::from(e)));
    l.code("    Config {");

    l.note(
        format!("{i2}tick_hz: {hz},"),
        format!("{hz} Hz = {} us per tick", eng(1e6 / f64::from(hz.max(1)))),
    );
    l.code(format!("{i2}current: CurrentLimits {{"));
    eng_field(
        &mut l,
        i3,
        "absolute_max_iu",
        c.current.absolute_max_iu,
        ma,
        "mA",
    );
    eng_field(&mut l, i3, "ceiling_iu", c.current.ceiling_iu, ma, "mA");
    l.code(format!("{i2}}},"));
    l.code(format!("{i2}power: PowerRange {{"));
    eng_field(
        &mut l,
        i3,
        "min_setpoint_ou",
        c.power.min_setpoint_ou,
        mw,
        "mW",
    );
    eng_field(
        &mut l,
        i3,
        "max_setpoint_ou",
        c.power.max_setpoint_ou,
        mw,
        "mW",
    );
    l.code(format!("{i2}}},"));
    l.code(format!("{i2}ramp: Ramps {{"));
    l.note(
        format!("{i3}emission_delay_ms: {},", r.emission_delay_ms),
        format!("{} ms", r.emission_delay_ms),
    );
    eng_field(
        &mut l,
        i3,
        "soft_start_iu_per_ms",
        r.soft_start_iu_per_ms,
        ma,
        "mA/ms",
    );
    eng_field(
        &mut l,
        i3,
        "soft_stop_iu_per_ms",
        r.soft_stop_iu_per_ms,
        ma,
        "mA/ms",
    );
    fx_field(
        &mut l,
        i3,
        "handover_fraction",
        r.handover_fraction,
        "of the setpoint",
    );
    eng_field(
        &mut l,
        i3,
        "setpoint_ou_per_ms",
        r.setpoint_ou_per_ms,
        mw,
        "mW/ms",
    );
    l.code(format!("{i2}}},"));
    l.code(format!("{i2}apc: ApcGains {{"));
    eng_field(
        &mut l,
        i3,
        "kp_iu_per_ou",
        c.apc.kp_iu_per_ou,
        ma / mw,
        "mA/mW",
    );
    eng_field(
        &mut l,
        i3,
        "ki_iu_per_ou_ms",
        c.apc.ki_iu_per_ou_ms,
        ma / mw,
        "mA/(mW*ms)",
    );
    eng_field(
        &mut l,
        i3,
        "slew_iu_per_ms",
        c.apc.slew_iu_per_ms,
        ma,
        "mA/ms",
    );
    l.code(format!("{i2}}},"));
    l.code(format!("{i2}derating: Derating {{"));
    fx_field(&mut l, i3, "knee_degc", c.derating.knee_degc, "degC");
    fx_field(&mut l, i3, "cutoff_degc", c.derating.cutoff_degc, "degC");
    eng_field(&mut l, i3, "floor_iu", c.derating.floor_iu, ma, "mA");
    l.code(format!("{i2}}},"));
    l.code(format!("{i2}protection: Protection {{"));
    eng_field(&mut l, i3, "overcurrent_iu", p.overcurrent_iu, ma, "mA");
    ticks_field(
        &mut l,
        i3,
        "overcurrent_debounce",
        p.overcurrent_debounce,
        hz,
    );
    eng_field(&mut l, i3, "runaway_ou", p.runaway_ou, mw, "mW");
    ticks_field(&mut l, i3, "runaway_debounce", p.runaway_debounce, hz);
    eng_field(
        &mut l,
        i3,
        "monitor_loss_floor_ou",
        p.monitor_loss_floor_ou,
        mw,
        "mW",
    );
    eng_field(
        &mut l,
        i3,
        "monitor_loss_drive_iu",
        p.monitor_loss_drive_iu,
        ma,
        "mA",
    );
    ticks_field(
        &mut l,
        i3,
        "monitor_loss_debounce",
        p.monitor_loss_debounce,
        hz,
    );
    ticks_field(&mut l, i3, "sensor_debounce", p.sensor_debounce, hz);
    ticks_field(&mut l, i3, "over_temp_debounce", p.over_temp_debounce, hz);
    ticks_field(&mut l, i3, "interlock_debounce", p.interlock_debounce, hz);
    eng_field(&mut l, i3, "supply_min_vu", p.supply_min_vu, mv, "mV");
    eng_field(&mut l, i3, "supply_max_vu", p.supply_max_vu, mv, "mV");
    ticks_field(&mut l, i3, "supply_debounce", p.supply_debounce, hz);
    eng_field(
        &mut l,
        i3,
        "mismatch_tolerance_iu",
        p.mismatch_tolerance_iu,
        ma,
        "mA",
    );
    ticks_field(&mut l, i3, "mismatch_debounce", p.mismatch_debounce, hz);
    l.note(
        format!("{i3}missed_tick_limit: {},", p.missed_tick_limit),
        format!("{} missed in a row", plural(p.missed_tick_limit, "tick")),
    );
    ticks_field(&mut l, i3, "external_debounce", p.external_debounce, hz);
    l.note(
        format!("{i3}intermittent_weight: {},", p.intermittent_weight),
        format!(
            "a present tick adds {}, a clean tick removes 1 (leaky debounce)",
            p.intermittent_weight
        ),
    );
    l.code(format!("{i2}}},"));
    l.code(format!("{i2}calibration: Calibration {{"));
    adc(
        &mut l,
        "monitor",
        &c.calibration.monitor,
        mw,
        "mW (front facet)",
        "W",
    );
    adc(
        &mut l,
        "current_sense",
        &c.calibration.current_sense,
        ma,
        "mA",
        "A",
    );
    adc(&mut l, "supply", &c.calibration.supply, mv, "mV", "V");
    let d = &c.calibration.dac;
    let i4 = "                ";
    l.code(format!("{i3}dac: DacCal {{"));
    eng_field(
        &mut l,
        i4,
        "codes_per_iu",
        d.codes_per_iu,
        1.0 / ma,
        "codes per mA",
    );
    l.note(
        format!("{i4}offset_codes: {},", d.offset_codes),
        format!("{} codes at 0 mA", d.offset_codes),
    );
    let max_ma =
        (f64::from(d.max_code) - f64::from(d.offset_codes)) / u.codes_per_ma(d.codes_per_iu);
    l.note(
        format!("{i4}max_code: {},", d.max_code),
        format!("{} codes = {} mA", d.max_code, eng(max_ma)),
    );
    l.note(
        format!("{i4}unit_exp: {},", d.unit_exp),
        format!("codes per {} A", decade(d.unit_exp)),
    );
    l.code(format!("{i3}}},"));
    l.code(format!("{i3}temperature: TempCal {{"));
    l.note(
        format!("{i4}table: heapless::Vec::from_slice(&TEMP_TABLE).unwrap_or_default(),"),
        "see TEMP_TABLE",
    );
    l.note(
        format!("{i4}low_fault_counts: {},", t.low_fault_counts),
        format!(
            "{} counts and below: sensor at its low rail",
            t.low_fault_counts
        ),
    );
    l.note(
        format!("{i4}high_fault_counts: {},", t.high_fault_counts),
        format!(
            "{} counts and above: sensor at its high rail",
            t.high_fault_counts
        ),
    );
    l.note(
        format!("{i4}open_rail: Rail::{:?},", t.open_rail),
        format!("an open sensor reads at the {:?} rail", t.open_rail).to_lowercase(),
    );
    l.code(format!("{i3}}},"));
    l.code(format!("{i2}}},"));
    // Board files describe no forward-voltage channel yet (see
    // `board_file::to_config`).
    l.note(
        format!("{i2}forward_voltage: None,"),
        "no forward-voltage channel",
    );
    match &c.plausibility {
        None => l.note(
            format!("{i2}plausibility: None,"),
            "no current-for-power plausibility check",
        ),
        Some(pl) => {
            l.code(format!(
                "{i2}plausibility: Some(diodestat_core::Plausibility {{"
            ));
            l.code(format!("{i3}points: heapless::Vec::from_slice(&["));
            for p in &pl.points {
                l.note_above(
                    format!(
                        "{i4}diodestat_core::DiodePoint {{ degc: Fx::from_bits({}), threshold_iu: Fx::from_bits({}), slope_ou_per_iu: Fx::from_bits({}) }},",
                        p.degc.to_bits(),
                        p.threshold_iu.to_bits(),
                        p.slope_ou_per_iu.to_bits()
                    ),
                    format!(
                        "at {} degC case: threshold {} mA, slope {} mW/mA",
                        p.degc,
                        eng(u.ma(p.threshold_iu)),
                        eng(p.slope_ou_per_iu.to_num::<f64>() * mw / ma)
                    ),
                );
            }
            l.code(format!("{i3}])"));
            l.code(format!("{i3}.unwrap_or_default(),"));
            fx_field(
                &mut l,
                i3,
                "warning_margin",
                pl.warning_margin,
                "of the healthy current (end-of-life warning)",
            );
            fx_field(
                &mut l,
                i3,
                "fault_margin",
                pl.fault_margin,
                "of the healthy current (fault)",
            );
            eng_field(&mut l, i3, "allowance_iu", pl.allowance_iu, ma, "mA");
            ticks_field(&mut l, i3, "debounce", pl.debounce, hz);
            l.code(format!("{i2}}}),"));
        }
    }
    l.code("    }");
    l
}

/// The rows of `TEMP_TABLE`.
fn table(c: &Config) -> Lines {
    let mut l = Lines::default();
    for p in &c.calibration.temperature.table {
        l.note_above(
            format!(
                "    TempPoint {{ counts: {}, degc: Fx::from_bits({}) }},",
                p.counts,
                p.degc.to_bits()
            ),
            format!("{} counts = {} degC", p.counts, p.degc),
        );
    }
    l
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

/// The whole generated file: every constant annotated with its engineering
/// value and unit, and `CONFIG_FINGERPRINT`, the core's fingerprint of the
/// configuration (which the board compares with its own at start).
pub fn rust_module(name: &str, v: &ValidConfig) -> String {
    let c = v.config();
    let name = comment_text(name);
    let body = body(c).annotated();
    let t = &c.calibration.temperature.table;
    let table = table(c).annotated();
    let fingerprint = v.fingerprint();
    format!(
        "//! Board configuration `{name}`, generated by `diodestat export`; regenerate instead of editing.\n\
         //! Values are raw fixed-point bits (`Fx` I16F16, `Gain` I8F24) in the board's units (each\n\
         //! channel's `unit_exp`: `_iu` current, `_ou` optical power, `_vu` voltage); the comment on each line gives the\n\
         //! engineering value and unit they stand for.\n\n\
         use diodestat_core::{{AdcCal, ApcGains, Calibration, Config, CurrentLimits, DacCal, Derating, Fingerprint, Fx, Gain, PowerRange, Protection, Rail, Ramps, TempCal, TempPoint}};\n\n\
         /// `config().validate()?.fingerprint()` as the simulator computed it: the board computes it\n\
         /// again at start and reports both (a hand-edited constant below makes them differ).\n\
         pub const CONFIG_FINGERPRINT: Fingerprint = Fingerprint::from_u64(0x{fingerprint});\n\n\
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

    fn demo() -> ValidConfig {
        crate::calibration::calibrate(
            diodestat_core::example::config(),
            &crate::plant::DemoModule::visible(),
        )
        .validate()
        .unwrap()
    }

    #[test]
    fn the_file_carries_the_cores_fingerprint() {
        let v = demo();
        let line = format!(
            "pub const CONFIG_FINGERPRINT: Fingerprint = Fingerprint::from_u64(0x{});",
            v.fingerprint()
        );
        assert!(rust_module("t", &v).contains(&line));
        // The name is not part of the configuration.
        assert!(rust_module("other", &v).contains(&line));
        // Another configuration, another fingerprint in the file.
        let mut c = v.config().clone();
        c.apc.ki_iu_per_ou_ms += Fx::from_bits(1);
        assert!(!rust_module("t", &c.validate().unwrap()).contains(&line));
    }

    #[test]
    fn a_name_cannot_put_text_into_the_source() {
        let src = rust_module("x`\npub fn evil() {}\n/* */ \\", &demo());
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

    /// Every line that sets a value carries its engineering value and
    /// unit as a comment.
    #[test]
    fn every_constant_is_annotated_with_value_and_unit() {
        let v = demo();
        let c = v.config();
        let src = rust_module("t", &v);
        let setting = |l: &&str| {
            l.contains("from_bits(")
                || l.trim_start().split(':').nth(1).is_some_and(|v| {
                    let v = v
                        .split("//")
                        .next()
                        .unwrap_or("")
                        .trim()
                        .trim_end_matches(',');
                    v.parse::<f64>().is_ok() || v.starts_with("Rail::")
                })
        };
        let lines: Vec<&str> = src.lines().filter(setting).collect();
        assert!(lines.len() > 60, "{} value lines", lines.len());
        for l in &lines {
            let above = src
                .lines()
                .zip(src.lines().skip(1))
                .any(|(a, b)| b == *l && a.trim_start().starts_with("// "));
            assert!(l.contains(" // ") || above, "not annotated: {l}");
        }
        let kp = c.apc.kp_iu_per_ou;
        assert!(src.contains(&format!(
            "kp_iu_per_ou: Fx::from_bits({}), // {} mA/mW",
            kp.to_bits(),
            eng(kp.to_num::<f64>())
        )));
        let d = c.protection.overcurrent_debounce;
        let ms = f64::from(d) * 1e3 / f64::from(c.tick_hz);
        assert!(src.contains(&format!(
            "{d} tick{} = {} ms at {} Hz",
            if d == 1 { "" } else { "s" },
            eng(ms),
            c.tick_hz
        )));
        assert_eq!(
            (eng(47.825967371463776), eng(26399.9998909235), eng(0.05)),
            ("47.826".into(), "26400".into(), "0.05".into())
        );
    }
}
