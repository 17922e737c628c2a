//! The temperature-sensor conversion: a table of (counts, degC) points built
//! on the host from the sensor's published equation (NTC beta or
//! Steinhart-Hart, platinum RTD by Callendar-Van Dusen) and interpolated
//! linearly here. Outside the table the end segments are extended, so a
//! reading past the hot end still reads hotter, never clamped cooler.

use crate::config::ConfigError;
use crate::units::{sat_i32, Fx};

/// Largest number of points in a temperature table.
pub const TEMP_TABLE_LEN: usize = 33;

/// One calibration point of the temperature sensor channel.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TempPoint {
    /// Raw ADC counts.
    pub counts: u16,
    /// Temperature at those counts, degC.
    pub degc: Fx,
}

/// A validated table: at least two points, counts strictly increasing,
/// temperatures strictly monotonic.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct TempTable {
    points: heapless::Vec<TempPoint, TEMP_TABLE_LEN>,
}

impl TempTable {
    pub(crate) fn new(points: &[TempPoint]) -> Result<Self, ConfigError> {
        if points.len() < 2 {
            return Err(ConfigError::TempTableTooShort { len: points.len() });
        }
        let rising = match (points.first(), points.get(1)) {
            (Some(a), Some(b)) => b.degc > a.degc,
            _ => return Err(ConfigError::TempTableTooShort { len: points.len() }),
        };
        for (i, w) in points.windows(2).enumerate() {
            if let [a, b] = w {
                let temp_ok = if rising {
                    b.degc > a.degc
                } else {
                    b.degc < a.degc
                };
                if b.counts <= a.counts || !temp_ok {
                    return Err(ConfigError::TempTableNotMonotonic { index: i + 1 });
                }
            }
        }
        let mut v = heapless::Vec::new();
        for p in points {
            v.push(*p)
                .map_err(|_| ConfigError::TempTableTooShort { len: points.len() })?;
        }
        Ok(TempTable { points: v })
    }

    pub(crate) fn first_counts(&self) -> u16 {
        self.points.first().map_or(0, |p| p.counts)
    }

    pub(crate) fn last_counts(&self) -> u16 {
        self.points.last().map_or(u16::MAX, |p| p.counts)
    }

    /// Interpolate (or extend the end segment) to degC.
    pub(crate) fn degc(&self, counts: u16) -> Fx {
        let pts = self.points.as_slice();
        // Segment i: the last point with counts <= the reading, limited to
        // [0, len-2] (binary search, bounded work per tick).
        let n = pts.len();
        let k = pts.partition_point(|p| p.counts <= counts);
        let i = k.saturating_sub(1).min(n.saturating_sub(2));
        let (a, b) = match (pts.get(i), pts.get(i + 1)) {
            (Some(a), Some(b)) => (a, b),
            _ => return Fx::ZERO,
        };
        let dc = i64::from(b.counts) - i64::from(a.counts);
        let dt = (b.degc.to_bits() as i64) - (a.degc.to_bits() as i64);
        let x = i64::from(counts) - i64::from(a.counts);
        let y = if dc > 0 {
            (a.degc.to_bits() as i64) + dt * x / dc
        } else {
            a.degc.to_bits() as i64
        };
        Fx::from_bits(sat_i32(y))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(counts: u16, degc: i32) -> TempPoint {
        TempPoint {
            counts,
            degc: Fx::from_num(degc),
        }
    }

    #[test]
    fn interpolates_and_extends() {
        // Falling temperature with counts, as an NTC to ground with a pull-up.
        let t = TempTable::new(&[p(1000, 80), p(2000, 40), p(3000, 0)]).unwrap();
        assert_eq!(t.degc(1000), Fx::from_num(80));
        assert_eq!(t.degc(1500), Fx::from_num(60));
        assert_eq!(t.degc(2500), Fx::from_num(20));
        assert_eq!(t.degc(3000), Fx::from_num(0));
        // Beyond the ends the end segments extend.
        assert_eq!(t.degc(500), Fx::from_num(100));
        assert_eq!(t.degc(3500), Fx::from_num(-20));
    }

    #[test]
    fn rejects_short_and_non_monotonic() {
        assert_eq!(
            TempTable::new(&[p(1, 1)]),
            Err(ConfigError::TempTableTooShort { len: 1 })
        );
        assert_eq!(
            TempTable::new(&[p(1, 1), p(1, 2)]),
            Err(ConfigError::TempTableNotMonotonic { index: 1 })
        );
        assert_eq!(
            TempTable::new(&[p(1, 1), p(2, 2), p(3, 2)]),
            Err(ConfigError::TempTableNotMonotonic { index: 2 })
        );
        assert_eq!(
            TempTable::new(&[p(1, 1), p(2, 2), p(3, 1)]),
            Err(ConfigError::TempTableNotMonotonic { index: 2 })
        );
    }
}
