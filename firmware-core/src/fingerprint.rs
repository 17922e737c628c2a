//! The fingerprint of a validated configuration ([`Fingerprint`],
//! [`ValidConfig::fingerprint`]): FNV-1a 64 over a stable byte encoding of
//! every field of the [`Config`] the controller runs with. The same
//! function on the host and on the target, so a board reports at start the
//! value the simulator printed for its board file, and any edited constant
//! moves it.
//!
//! Encoding, version 1 (the first byte): the fields in declaration order,
//! each integer little-endian at its own width (`u16`, `u32`, `i32`), every
//! [`Fx`] and [`Gain`] as the `i32` of its raw bits, a [`Rail`] as one byte
//! (`0` high, `1` low), an `Option` as `0` or `1` followed by its content,
//! a table as its length (`u16`) followed by its points. Every struct is
//! destructured without `..`, so a new field does not compile until it is
//! encoded here.
//!
//! Why FNV-1a 64 and not the CRC-32 of [`crate::persist`]: the fingerprint
//! names a configuration among many (every board file, every edit), where
//! 64 bits keep accidental equality out of reach (about 2^-64 per pair,
//! against 2^-32); it needs no table (a few hundred bytes of flash spared on
//! the target) and runs once at start-up, so its speed does not matter. It
//! is not a protection against deliberate tampering.

use crate::config::{
    AdcCal, ApcGains, Calibration, Config, CurrentLimits, DacCal, Derating, DiodePoint,
    ForwardVoltage, Plausibility, PowerRange, Protection, Rail, Ramps, TempCal, ValidConfig,
};
use crate::temp_table::TempPoint;
use crate::units::{Fx, Gain};

/// Version of the byte encoding, hashed first: a change of the encoding
/// changes every fingerprint.
const ENCODING_VERSION: u8 = 1;

/// FNV-1a 64 offset basis.
const FNV_OFFSET: u64 = 0xcbf2_9ce4_8422_2325;
/// FNV-1a 64 prime, 2^40 + 0x1b3.
const FNV_PRIME: u64 = 0x0000_0100_0000_01b3;

/// The fingerprint of a configuration ([`ValidConfig::fingerprint`]): 64
/// bits, shown as 16 hex digits.
///
/// FNV-1a 64 over this encoding (version 1, its first byte): the fields of
/// [`Config`] in declaration order, each integer little-endian at its own
/// width (`u16`, `u32`, `i32`), every [`Fx`] and [`Gain`] as the `i32` of its
/// raw bits, a [`Rail`] as one byte (`0` high, `1` low), an `Option` as `0`
/// or `1` followed by its content, a table as its length (`u16`) followed by
/// its points. It names a configuration; it does not protect against
/// deliberate tampering.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Fingerprint(u64);

impl Fingerprint {
    /// A fingerprint from its value (as an exported constant carries it).
    pub const fn from_u64(value: u64) -> Self {
        Self(value)
    }

    /// The value.
    pub const fn as_u64(self) -> u64 {
        self.0
    }
}

impl core::fmt::Display for Fingerprint {
    /// 16 lower-case hex digits.
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        write!(f, "{:016x}", self.0)
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for Fingerprint {
    fn format(&self, f: defmt::Formatter) {
        defmt::write!(f, "{=u64:016x}", self.0)
    }
}

/// FNV-1a 64 over the bytes written to it.
#[derive(Clone, Copy, Debug)]
struct Fnv1a64(u64);

impl Fnv1a64 {
    const fn new() -> Self {
        Self(FNV_OFFSET)
    }

    /// The `len` low bytes of `v`, least significant first. The one place
    /// that hashes, out of line: every field is one call here, so the
    /// encoding stays small in flash (the 64-bit multiply is a library
    /// call on Cortex-M0).
    #[inline(never)]
    fn word(&mut self, v: u32, len: u32) {
        let mut v = v;
        for _ in 0..len {
            self.0 ^= u64::from(v & 0xff);
            self.0 = self.0.wrapping_mul(FNV_PRIME);
            v >>= 8;
        }
    }

    #[cfg(test)]
    fn bytes(&mut self, bytes: &[u8]) {
        for b in bytes {
            self.word(u32::from(*b), 1);
        }
    }

    fn u8(&mut self, v: u8) {
        self.word(u32::from(v), 1);
    }

    fn u16(&mut self, v: u16) {
        self.word(u32::from(v), 2);
    }

    fn u32(&mut self, v: u32) {
        self.word(v, 4);
    }

    fn i32(&mut self, v: i32) {
        self.word(v as u32, 4);
    }

    fn fx(&mut self, v: Fx) {
        self.i32(v.to_bits());
    }

    fn gain(&mut self, v: Gain) {
        self.i32(v.to_bits());
    }

    /// A table length (at most a few dozen: `u16` holds any).
    fn len(&mut self, n: usize) {
        self.u16(u16::try_from(n).unwrap_or(u16::MAX));
    }

    fn adc(&mut self, c: &AdcCal) {
        let AdcCal {
            offset_counts,
            units_per_count,
            full_scale_counts,
            unit_exp,
        } = *c;
        self.i32(offset_counts);
        self.gain(units_per_count);
        self.u16(full_scale_counts);
        self.u8(unit_exp as u8);
    }

    fn config(&mut self, c: &Config) {
        let Config {
            tick_hz,
            current,
            power,
            ramp,
            apc,
            derating,
            protection,
            calibration,
            forward_voltage,
            plausibility,
        } = c;
        self.u32(*tick_hz);

        let CurrentLimits {
            absolute_max_iu,
            ceiling_iu,
        } = *current;
        self.fx(absolute_max_iu);
        self.fx(ceiling_iu);

        let PowerRange {
            min_setpoint_ou,
            max_setpoint_ou,
        } = *power;
        self.fx(min_setpoint_ou);
        self.fx(max_setpoint_ou);

        let Ramps {
            emission_delay_ms,
            soft_start_iu_per_ms,
            soft_stop_iu_per_ms,
            handover_fraction,
            setpoint_ou_per_ms,
        } = *ramp;
        self.u32(emission_delay_ms);
        self.fx(soft_start_iu_per_ms);
        self.fx(soft_stop_iu_per_ms);
        self.fx(handover_fraction);
        self.fx(setpoint_ou_per_ms);

        let ApcGains {
            kp_iu_per_ou,
            ki_iu_per_ou_ms,
            slew_iu_per_ms,
        } = *apc;
        self.fx(kp_iu_per_ou);
        self.fx(ki_iu_per_ou_ms);
        self.fx(slew_iu_per_ms);

        let Derating {
            knee_degc,
            cutoff_degc,
            floor_iu,
        } = *derating;
        self.fx(knee_degc);
        self.fx(cutoff_degc);
        self.fx(floor_iu);

        self.protection(protection);
        self.calibration(calibration);

        match forward_voltage {
            None => self.u8(0),
            Some(f) => {
                self.u8(1);
                let ForwardVoltage {
                    cal,
                    open_vu,
                    short_vu,
                    min_drive_iu,
                    debounce,
                } = *f;
                self.adc(&cal);
                self.fx(open_vu);
                self.fx(short_vu);
                self.fx(min_drive_iu);
                self.u16(debounce);
            }
        }

        match plausibility {
            None => self.u8(0),
            Some(p) => {
                self.u8(1);
                let Plausibility {
                    points,
                    warning_margin,
                    fault_margin,
                    allowance_iu,
                    debounce,
                } = p;
                self.len(points.len());
                for pt in points {
                    let DiodePoint {
                        degc,
                        threshold_iu,
                        slope_ou_per_iu,
                    } = *pt;
                    self.fx(degc);
                    self.fx(threshold_iu);
                    self.fx(slope_ou_per_iu);
                }
                self.fx(*warning_margin);
                self.fx(*fault_margin);
                self.fx(*allowance_iu);
                self.u16(*debounce);
            }
        }
    }

    fn protection(&mut self, p: &Protection) {
        let Protection {
            overcurrent_iu,
            overcurrent_debounce,
            runaway_ou,
            runaway_debounce,
            monitor_loss_floor_ou,
            monitor_loss_drive_iu,
            monitor_loss_debounce,
            sensor_debounce,
            over_temp_debounce,
            interlock_debounce,
            supply_min_vu,
            supply_max_vu,
            supply_debounce,
            mismatch_tolerance_iu,
            mismatch_debounce,
            missed_tick_limit,
            external_debounce,
            intermittent_weight,
        } = *p;
        self.fx(overcurrent_iu);
        self.u16(overcurrent_debounce);
        self.fx(runaway_ou);
        self.u16(runaway_debounce);
        self.fx(monitor_loss_floor_ou);
        self.fx(monitor_loss_drive_iu);
        self.u16(monitor_loss_debounce);
        self.u16(sensor_debounce);
        self.u16(over_temp_debounce);
        self.u16(interlock_debounce);
        self.fx(supply_min_vu);
        self.fx(supply_max_vu);
        self.u16(supply_debounce);
        self.fx(mismatch_tolerance_iu);
        self.u16(mismatch_debounce);
        self.u16(missed_tick_limit);
        self.u16(external_debounce);
        self.u16(intermittent_weight);
    }

    fn calibration(&mut self, c: &Calibration) {
        let Calibration {
            monitor,
            current_sense,
            supply,
            dac,
            temperature,
        } = c;
        self.adc(monitor);
        self.adc(current_sense);
        self.adc(supply);
        let DacCal {
            codes_per_iu,
            offset_codes,
            max_code,
            unit_exp,
        } = *dac;
        self.fx(codes_per_iu);
        self.i32(offset_codes);
        self.u16(max_code);
        self.u8(unit_exp as u8);
        let TempCal {
            table,
            low_fault_counts,
            high_fault_counts,
            open_rail,
        } = temperature;
        self.len(table.len());
        for pt in table {
            let TempPoint { counts, degc } = *pt;
            self.u16(counts);
            self.fx(degc);
        }
        self.u16(*low_fault_counts);
        self.u16(*high_fault_counts);
        self.u8(match open_rail {
            Rail::High => 0,
            Rail::Low => 1,
        });
    }
}

impl ValidConfig {
    /// The fingerprint of the configuration the controller runs with (the
    /// encoding is described on [`Fingerprint`]). The same on every target; the
    /// simulator prints it and `diodestat export` writes it beside the
    /// constants, so a board can report and compare it at start.
    pub fn fingerprint(&self) -> Fingerprint {
        let mut h = Fnv1a64::new();
        h.u8(ENCODING_VERSION);
        h.config(self.config());
        Fingerprint(h.0)
    }
}

#[cfg(test)]
mod tests {
    extern crate std;
    use super::*;
    use std::format;

    fn fnv(bytes: &[u8]) -> u64 {
        let mut h = Fnv1a64::new();
        h.bytes(bytes);
        h.0
    }

    #[test]
    fn fnv1a64_reference_vectors() {
        // IETF draft-eastlake-fnv, Appendix C "A Few Test Vectors" (FNV-1a,
        // 64 bit, strings without a terminating zero); from memory.
        assert_eq!(fnv(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn integers_are_hashed_little_endian_at_their_width() {
        let mut h = Fnv1a64::new();
        h.u16(0x0201);
        h.u32(0x0605_0403);
        h.i32(-1);
        h.fx(Fx::from_bits(0x0a09_0807));
        assert_eq!(
            h.0,
            fnv(&[1, 2, 3, 4, 5, 6, 0xff, 0xff, 0xff, 0xff, 7, 8, 9, 10])
        );
    }

    fn fp(c: &Config) -> Fingerprint {
        c.clone().validate().unwrap().fingerprint()
    }

    /// One LSB of any exported constant, a table point, an optional section
    /// added: each moves the fingerprint; an equal configuration keeps it.
    #[test]
    fn a_hand_edited_constant_changes_it() {
        let base = crate::example::config();
        let f0 = fp(&base);
        assert_eq!(fp(&base.clone()), f0);
        let lsb = Fx::from_bits(1);
        type Edit = (&'static str, fn(&mut Config));
        let edits: [Edit; 13] = [
            ("current unit", |c| {
                c.calibration.current_sense.unit_exp -= 1;
                c.calibration.dac.unit_exp -= 1;
            }),
            ("tick_hz", |c| c.tick_hz += 1),
            ("kp", |c| c.apc.kp_iu_per_ou += Fx::from_bits(1)),
            ("ki", |c| c.apc.ki_iu_per_ou_ms += Fx::from_bits(1)),
            ("ceiling", |c| c.current.ceiling_iu -= Fx::from_bits(1)),
            ("overcurrent debounce", |c| {
                c.protection.overcurrent_debounce += 1
            }),
            ("intermittent weight", |c| {
                c.protection.intermittent_weight += 1
            }),
            ("supply gain", |c| {
                c.calibration.supply.units_per_count += Gain::from_bits(1)
            }),
            ("dac offset", |c| c.calibration.dac.offset_codes += 1),
            ("table point", |c| {
                if let Some(p) = c.calibration.temperature.table.get_mut(1) {
                    p.degc -= Fx::from_bits(1);
                }
            }),
            ("table length", |c| {
                c.calibration.temperature.table.pop();
            }),
            ("open rail", |c| {
                let t = &mut c.calibration.temperature;
                t.open_rail = match t.open_rail {
                    Rail::High => Rail::Low,
                    Rail::Low => Rail::High,
                };
            }),
            ("emission delay", |c| c.ramp.emission_delay_ms += 1),
        ];
        for (what, edit) in edits {
            let mut c = base.clone();
            edit(&mut c);
            assert_ne!(fp(&c), f0, "{what}");
        }
        // An optional section present moves it, and so does each of its
        // values.
        let mut with = base.clone();
        with.forward_voltage = Some(ForwardVoltage {
            cal: base.calibration.supply,
            open_vu: Fx::from_num(3000),
            short_vu: Fx::from_num(500),
            min_drive_iu: Fx::from_num(5),
            debounce: 2,
        });
        let f1 = fp(&with);
        assert_ne!(f1, f0);
        if let Some(fv) = with.forward_voltage.as_mut() {
            fv.short_vu += lsb;
        }
        assert_ne!(fp(&with), f1);
    }

    #[test]
    fn shown_as_sixteen_hex_digits() {
        assert_eq!(
            format!("{}", Fingerprint::from_u64(0xab)),
            "00000000000000ab"
        );
        assert_eq!(Fingerprint::from_u64(7).as_u64(), 7);
    }
}
