//! The latch across a reset: the first-fault record and the latched faults
//! as [`LATCH_RECORD_LEN`] bytes with a CRC-32, handed out by
//! [`crate::Controller::latch_record`] and taken back at boot by
//! [`crate::Controller::restored`]. Storage stays at the board's edge (flash,
//! EEPROM, backup RAM); the core only packs, checks and unpacks.
//!
//! Fail-safe: a record that does not check out (erased, wrong check,
//! wrong format) is refused and the controller starts latched with
//! [`Fault::RecordCorrupt`]; only a `ClearFaults` request leaves that latch,
//! never a step. A latch restored from a good record stays latched the
//! same way.
//!
//! Layout, little-endian (36 bytes; [`crate::store`] pads a slot to the
//! flash's write size):
//!
//! | bytes | field |
//! |---|---|
//! | 0..4 | magic `b"dsL1"` (format version 1) |
//! | 4..8 | latched faults, the [`FaultSet`] mask (32 bits: room for more faults) |
//! | 8 | 1 when a first-fault record follows, else 0 |
//! | 9 | its fault (discriminant), 0 when none |
//! | 10..12 | zero |
//! | 12..16 | its sequence number |
//! | 16..20 | its tick |
//! | 20..24 | its measured value (raw [`Fx`] bits) |
//! | 24..28 | its limit (raw [`Fx`] bits) |
//! | 28..32 | the log's next sequence number |
//! | 32..36 | CRC-32 of bytes 0..32 |

use crate::fault::{Entry, Fault, FaultRecord, FaultSet};
use crate::units::Fx;

/// Length of a packed latch record, bytes.
pub const LATCH_RECORD_LEN: usize = 36;

/// Bytes covered by the check.
const CHECKED: usize = 32;

const MAGIC: [u8; 4] = *b"dsL1";

/// CRC-32/ISO-HDLC: polynomial 0x04C11DB7 (bit-reflected 0xEDB88320),
/// initial value and final XOR 0xFFFFFFFF, input and output reflected.
/// Source: ITU-T Recommendation V.42 (03/2002), the 32-bit frame check
/// sequence (clause 8.1.1.6.2, `from memory`); parameters and check value
/// 0xCBF43926 for "123456789" as in the CRC-32/ISO-HDLC entry of Greg
/// Cook's "Catalogue of parametrised CRC algorithms". Bit at a time: it
/// runs on a latch and at boot, never per tick.
pub fn crc32(bytes: &[u8]) -> u32 {
    let mut crc = 0xFFFF_FFFFu32;
    for &b in bytes {
        crc ^= u32::from(b);
        for _ in 0..8 {
            let mask = (crc & 1).wrapping_neg();
            crc = (crc >> 1) ^ (0xEDB8_8320 & mask);
        }
    }
    !crc
}

/// What survives a reset: the latched faults and the first-fault record.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LatchRecord {
    /// Latched faults (empty: the controller was not latched).
    pub faults: FaultSet,
    /// The first fault logged since power-up, with its sequence number.
    pub first: Option<Entry>,
    /// The sequence number the log's next record gets.
    pub next_seq: u32,
}

/// Why a stored latch record was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RestoreError {
    /// Every byte reads 0xFF: nothing was stored, or an erase was not
    /// followed by its write (a reset in between).
    Erased,
    /// The CRC-32 does not match the bytes.
    Check {
        /// CRC-32 stored in the record.
        stored: u32,
        /// CRC-32 of the record's bytes.
        computed: u32,
    },
    /// The check matches but the bytes are not a version-1 record.
    Format {
        /// Offset of the first byte that is wrong.
        offset: u8,
    },
}

impl RestoreError {
    /// The cause as the measured value of the [`Fault::RecordCorrupt`]
    /// record: 1 erased, 2 check mismatch, 3 format.
    pub const fn code(self) -> u8 {
        match self {
            RestoreError::Erased => 1,
            RestoreError::Check { .. } => 2,
            RestoreError::Format { .. } => 3,
        }
    }
}

impl core::fmt::Display for RestoreError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            RestoreError::Erased => f.write_str("latch record erased (nothing stored)"),
            RestoreError::Check { stored, computed } => write!(
                f,
                "latch record check {stored:#010x} does not match its bytes ({computed:#010x})"
            ),
            RestoreError::Format { offset } => {
                write!(f, "latch record byte {offset} is not a version-1 value")
            }
        }
    }
}

impl core::error::Error for RestoreError {}

fn put(buf: &mut [u8; LATCH_RECORD_LEN], at: usize, bytes: &[u8]) {
    if let Some(dst) = buf.get_mut(at..at + bytes.len()) {
        dst.copy_from_slice(bytes);
    }
}

fn word(buf: &[u8; LATCH_RECORD_LEN], at: usize) -> u32 {
    let mut w = [0u8; 4];
    if let Some(src) = buf.get(at..at + 4) {
        w.copy_from_slice(src);
    }
    u32::from_le_bytes(w)
}

impl LatchRecord {
    /// The record as bytes, check included.
    pub fn to_bytes(&self) -> [u8; LATCH_RECORD_LEN] {
        let mut b = [0u8; LATCH_RECORD_LEN];
        put(&mut b, 0, &MAGIC);
        put(&mut b, 4, &self.faults.bits().to_le_bytes());
        if let Some(e) = self.first {
            put(&mut b, 8, &[1, e.record.fault as u8]);
            put(&mut b, 12, &e.seq.to_le_bytes());
            put(&mut b, 16, &e.record.tick.to_le_bytes());
            put(&mut b, 20, &e.record.measured.to_bits().to_le_bytes());
            put(&mut b, 24, &e.record.limit.to_bits().to_le_bytes());
        }
        put(&mut b, 28, &self.next_seq.to_le_bytes());
        let crc = crc32(b.get(..CHECKED).unwrap_or(&[]));
        put(&mut b, CHECKED, &crc.to_le_bytes());
        b
    }

    /// The record these bytes hold, or why they are refused.
    pub fn from_bytes(b: &[u8; LATCH_RECORD_LEN]) -> Result<Self, RestoreError> {
        if b.iter().all(|&x| x == 0xFF) {
            return Err(RestoreError::Erased);
        }
        let stored = word(b, CHECKED);
        let computed = crc32(b.get(..CHECKED).unwrap_or(&[]));
        if stored != computed {
            return Err(RestoreError::Check { stored, computed });
        }
        let format = |offset: u8| RestoreError::Format { offset };
        if b.get(..4) != Some(&MAGIC[..]) {
            return Err(format(0));
        }
        let bits = word(b, 4);
        let faults = FaultSet::from_bits(bits);
        if faults.bits() != bits {
            return Err(format(4));
        }
        if b.get(10..12) != Some(&[0, 0][..]) {
            return Err(format(10));
        }
        let first = match (b.get(8), b.get(9)) {
            (Some(0), Some(0)) => {
                if let Some(at) = b.get(12..28).and_then(|r| r.iter().position(|&x| x != 0)) {
                    return Err(format(12 + at as u8));
                }
                None
            }
            (Some(0), _) => return Err(format(9)),
            (Some(1), Some(&f)) => Some(Entry {
                seq: word(b, 12),
                record: FaultRecord {
                    fault: Fault::from_index(f).ok_or(format(9))?,
                    tick: word(b, 16),
                    measured: Fx::from_bits(word(b, 20) as i32),
                    limit: Fx::from_bits(word(b, 24) as i32),
                },
            }),
            _ => return Err(format(8)),
        };
        let next_seq = word(b, 28);
        if first.is_some_and(|e| e.seq >= next_seq) {
            return Err(format(28));
        }
        Ok(LatchRecord {
            faults,
            first,
            next_seq,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec() -> LatchRecord {
        let mut faults = FaultSet::EMPTY;
        faults.insert(Fault::Overcurrent);
        faults.insert(Fault::InterlockOpen);
        LatchRecord {
            faults,
            first: Some(Entry {
                seq: 3,
                record: FaultRecord {
                    fault: Fault::Overcurrent,
                    tick: 0xDEAD_BEEF,
                    measured: Fx::from_num(-61.25),
                    limit: Fx::from_num(60),
                },
            }),
            next_seq: 5,
        }
    }

    /// The standard check value of CRC-32/ISO-HDLC (Greg Cook's CRC
    /// catalogue; ITU-T V.42 for the polynomial).
    #[test]
    fn crc32_check_value() {
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        assert_eq!(crc32(b""), 0);
    }

    #[test]
    fn a_record_round_trips() {
        for r in [rec(), LatchRecord::default()] {
            assert_eq!(LatchRecord::from_bytes(&r.to_bytes()), Ok(r));
        }
    }

    #[test]
    fn every_single_bit_flip_is_refused() {
        let good = rec().to_bytes();
        for i in 0..LATCH_RECORD_LEN * 8 {
            let mut b = good;
            b[i / 8] ^= 1 << (i % 8);
            assert!(
                matches!(LatchRecord::from_bytes(&b), Err(RestoreError::Check { .. })),
                "bit {i}"
            );
        }
    }

    /// Bytes with a good check but not a version-1 record.
    fn with_check(mut b: [u8; LATCH_RECORD_LEN]) -> [u8; LATCH_RECORD_LEN] {
        let crc = crc32(&b[..CHECKED]);
        b[CHECKED..].copy_from_slice(&crc.to_le_bytes());
        b
    }

    #[test]
    fn erased_and_malformed_records_are_refused_naming_the_byte() {
        assert_eq!(
            LatchRecord::from_bytes(&[0xFF; LATCH_RECORD_LEN]),
            Err(RestoreError::Erased)
        );
        let good = rec().to_bytes();
        let cases: [(usize, u8, u8); 8] = [
            (0, b'X', 0), // magic
            (6, 0x10, 4), // bit 20: a fault bit no fault has
            (7, 1, 4),    // a bit far above the set
            (8, 2, 8),    // presence flag
            (9, 200, 9),  // no such fault
            (11, 1, 10),  // the zero bytes
            (28, 3, 28),  // next sequence number at the first's
            (29, 0, 28),  // ... or below it
        ];
        for (at, v, offset) in cases {
            let mut b = good;
            b[at] = v;
            if at == 29 {
                b[28] = 0;
            }
            assert_eq!(
                LatchRecord::from_bytes(&with_check(b)),
                Err(RestoreError::Format { offset }),
                "byte {at} = {v}"
            );
        }
        // No first record, but a stray byte in its fields.
        let mut b = LatchRecord::default().to_bytes();
        b[17] = 1;
        assert_eq!(
            LatchRecord::from_bytes(&with_check(b)),
            Err(RestoreError::Format { offset: 17 })
        );
        let mut b = LatchRecord::default().to_bytes();
        b[9] = 1;
        assert_eq!(
            LatchRecord::from_bytes(&with_check(b)),
            Err(RestoreError::Format { offset: 9 })
        );
    }

    #[test]
    fn causes_have_distinct_codes() {
        let codes = [
            RestoreError::Erased.code(),
            RestoreError::Check {
                stored: 0,
                computed: 1,
            }
            .code(),
            RestoreError::Format { offset: 0 }.code(),
        ];
        assert_eq!(codes, [1, 2, 3]);
    }
}
