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

/// Check a table: at least two points, counts strictly increasing,
/// temperatures strictly monotonic (rising or falling).
pub(crate) fn check(points: &[TempPoint]) -> Result<(), ConfigError> {
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
    Ok(())
}

/// Interpolate a checked table (see [`check`]) at `counts`, or extend its
/// end segment, to degC.
pub(crate) fn degc(points: &[TempPoint], counts: u16) -> Fx {
    interpolate(points, segment(points, counts, usize::MAX), counts)
}

/// The segment of a checked table that holds `counts`: the index of the
/// last point with counts at or below the reading, limited to
/// `[0, len - 2]` (the end segments extend past the table). `hint` is the
/// segment of the previous reading: it is taken when it holds `counts`
/// (two comparisons; temperature moves slowly), then its neighbour on the
/// side of the reading (a reading that dithers across a table point);
/// otherwise a binary search finds the segment. The answer does not depend
/// on `hint`.
pub(crate) fn segment(points: &[TempPoint], counts: u16, hint: usize) -> usize {
    let last = points.len().saturating_sub(2);
    let holds = |i: usize| {
        let above_start = i == 0 || points.get(i).is_some_and(|p| p.counts <= counts);
        let below_end = i == last
            || points
                .get(i.saturating_add(1))
                .is_some_and(|p| counts < p.counts);
        (above_start, below_end)
    };
    if hint <= last {
        let neighbour = match holds(hint) {
            (true, true) => return hint,
            (false, _) => hint.checked_sub(1),
            (true, false) => Some(hint.saturating_add(1)),
        };
        if let Some(n) = neighbour.filter(|n| *n <= last) {
            if holds(n) == (true, true) {
                return n;
            }
        }
    }
    points
        .partition_point(|p| p.counts <= counts)
        .saturating_sub(1)
        .min(last)
}

/// One table segment, as its interpolation needs it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Span {
    /// Counts of the segment's first point.
    a_counts: i32,
    /// Temperature of the segment's first point, `Fx` bits.
    a_bits: i32,
    /// Temperature of the segment's second point, `Fx` bits.
    b_bits: i32,
    /// Width of the segment, counts (positive in a checked table).
    dc: i32,
}

impl Span {
    /// Segment `i` of `points`, if the table has it.
    fn of(points: &[TempPoint], i: usize) -> Option<Span> {
        let (a, b) = (points.get(i)?, points.get(i.saturating_add(1))?);
        Some(Span {
            a_counts: i32::from(a.counts),
            a_bits: a.degc.to_bits(),
            b_bits: b.degc.to_bits(),
            dc: i32::from(b.counts) - i32::from(a.counts),
        })
    }

    /// [`interpolate`] on this segment.
    #[inline]
    fn interpolate(&self, counts: u16) -> Fx {
        let x = i32::from(counts) - self.a_counts;
        if self.dc <= 0 {
            return Fx::from_bits(self.a_bits);
        }
        match self
            .b_bits
            .checked_sub(self.a_bits)
            .and_then(|dt| dt.checked_mul(x))
        {
            Some(p) => Fx::from_bits(self.a_bits.saturating_add(p / self.dc)),
            None => wide_interpolation(self.a_bits, self.b_bits, x, self.dc),
        }
    }
}

/// Two adjacent table segments around the latest reading, with what their
/// interpolation needs, so that the next reading, if it falls in either,
/// is converted without reading the table (see [`degc_cached`]). A reading
/// that dithers across the table point between the two stays inside.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Window {
    /// Lowest reading the window holds (0 when it starts with the first
    /// segment).
    lo_counts: u16,
    /// The table point between the two segments: readings below it are in
    /// `first`, readings at or above it in `second`.
    mid_counts: u16,
    /// Highest reading the window holds (`u16::MAX` when it ends with the
    /// last segment).
    hi_counts: u16,
    /// Index of the first segment in the table.
    index: u8,
    first: Span,
    second: Span,
}

/// A span that converts every reading to zero.
const ZERO_SPAN: Span = Span {
    a_counts: 0,
    a_bits: 0,
    b_bits: 0,
    dc: 0,
};

impl Window {
    /// No window: every reading misses it.
    pub(crate) const NONE: Window = Window {
        lo_counts: 1,
        mid_counts: 1,
        hi_counts: 0,
        index: 0,
        first: ZERO_SPAN,
        second: ZERO_SPAN,
    };

    /// The window of a checked table around `counts`: the segment that
    /// holds it (see [`segment`]; `hint` is a segment near the previous
    /// reading) and its neighbour on the side of the nearer end point.
    fn around(points: &[TempPoint], counts: u16, hint: usize) -> Window {
        let last = points.len().saturating_sub(2);
        let j = segment(points, counts, hint);
        let near_start = match (points.get(j), points.get(j.saturating_add(1))) {
            (Some(a), Some(b)) => counts.saturating_sub(a.counts) < b.counts.saturating_sub(counts),
            _ => false,
        };
        // The window's first segment: the one below `j` when the reading is
        // nearer `j`'s start (or `j` is the last), `j` otherwise.
        let w = if j > 0 && (near_start || j == last) {
            j - 1
        } else {
            j
        };
        let (Some(first), Some(mid)) = (Span::of(points, w), points.get(w.saturating_add(1)))
        else {
            // Fewer than two points (not a checked table): every reading
            // converts to zero, as [`interpolate`] does.
            return Window {
                lo_counts: 0,
                mid_counts: 0,
                hi_counts: u16::MAX,
                ..Window::NONE
            };
        };
        let lo_counts = if w == 0 {
            0
        } else {
            points.get(w).map_or(0, |p| p.counts)
        };
        // A one-segment table: the window is that segment (as `second`).
        let Some(second) = Span::of(points, w.saturating_add(1)) else {
            return Window {
                lo_counts,
                mid_counts: lo_counts,
                hi_counts: u16::MAX,
                index: 0,
                first,
                second: first,
            };
        };
        let hi_counts = if w.saturating_add(1) >= last {
            u16::MAX
        } else {
            points
                .get(w.saturating_add(2))
                .map_or(u16::MAX, |p| p.counts.saturating_sub(1))
        };
        Window {
            lo_counts,
            mid_counts: mid.counts,
            hi_counts,
            // A table has at most TEMP_TABLE_LEN (33) points.
            index: u8::try_from(w).unwrap_or(u8::MAX),
            first,
            second,
        }
    }
}

/// [`degc`] through the window of the previous reading (`window`,
/// updated): the same result. A reading inside the window costs three
/// comparisons and the interpolation; otherwise the window is found again
/// around the reading (see [`segment`]).
#[inline]
pub(crate) fn degc_cached(points: &[TempPoint], counts: u16, window: &mut Window) -> Fx {
    if counts < window.lo_counts || counts > window.hi_counts {
        relocate(points, counts, window);
    }
    if counts < window.mid_counts {
        window.first.interpolate(counts)
    } else {
        window.second.interpolate(counts)
    }
}

#[inline(never)]
fn relocate(points: &[TempPoint], counts: u16, window: &mut Window) {
    // Search from the window's segment on the reading's side.
    let hint = usize::from(window.index) + usize::from(counts > window.hi_counts);
    *window = Window::around(points, counts, hint);
}

/// `a + trunc(dt·x/dc)` in 64 bits, saturated (a product beyond 32 bits).
#[cold]
#[inline(never)]
fn wide_interpolation(a_bits: i32, b_bits: i32, x: i32, dc: i32) -> Fx {
    let dt = i64::from(b_bits) - i64::from(a_bits);
    let q = if dc > 0 {
        dt * i64::from(x) / i64::from(dc)
    } else {
        0
    };
    Fx::from_bits(sat_i32(i64::from(a_bits) + q))
}

/// Interpolate segment `i` of a checked table at `counts`.
///
/// `a + dt·x/dc` (segment temperature step `dt`, counts past the segment
/// start `x`, segment width `dc`), the quotient truncated toward zero. When
/// `dt·x` fits 32 bits (|dt × x| below 32 768 degC × counts, as inside any
/// practical table) the division is one 32-bit divide; otherwise the same
/// quotient is taken in 64 bits. The result is the same bit for bit either
/// way.
pub(crate) fn interpolate(points: &[TempPoint], i: usize, counts: u16) -> Fx {
    let (a, b) = match (points.get(i), points.get(i.saturating_add(1))) {
        (Some(a), Some(b)) => (a, b),
        _ => return Fx::ZERO,
    };
    let a_bits = a.degc.to_bits();
    // Counts strictly increase in a checked table, so dc > 0; dc and x fit
    // i32 (both come from u16).
    let dc = i32::from(b.counts) - i32::from(a.counts);
    let x = i32::from(counts) - i32::from(a.counts);
    if dc <= 0 {
        return a.degc;
    }
    let narrow = b
        .degc
        .to_bits()
        .checked_sub(a_bits)
        .and_then(|dt| dt.checked_mul(x));
    match narrow {
        // Truncating i32 division gives the quotient of the i64 one below,
        // and the saturating i32 sum equals the saturated i64 sum.
        Some(p) => Fx::from_bits(a_bits.saturating_add(p / dc)),
        None => wide_interpolation(a_bits, b.degc.to_bits(), x, dc),
    }
}

/// A checked table held by value (the unit tests use it; the controller
/// reads the table in its [`crate::Config`] through [`degc`]).
#[cfg(test)]
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct TempTable {
    points: heapless::Vec<TempPoint, TEMP_TABLE_LEN>,
}

#[cfg(test)]
impl TempTable {
    pub(crate) fn new(points: &[TempPoint]) -> Result<Self, ConfigError> {
        check(points)?;
        let mut v = heapless::Vec::new();
        for p in points {
            v.push(*p)
                .map_err(|_| ConfigError::TempTableTooShort { len: points.len() })?;
        }
        Ok(TempTable { points: v })
    }

    pub(crate) fn degc(&self, counts: u16) -> Fx {
        degc(&self.points, counts)
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

    /// The division as the table's definition states it, in i128:
    /// `a + trunc(dt·x/dc)`, saturated to the Fx range.
    fn reference_bits(points: &[TempPoint], counts: u16) -> i32 {
        let n = points.len();
        let k = points.iter().filter(|p| p.counts <= counts).count();
        let i = k.saturating_sub(1).min(n - 2);
        let (a, b) = (points[i], points[i + 1]);
        let dt = i128::from(b.degc.to_bits()) - i128::from(a.degc.to_bits());
        let x = i128::from(counts) - i128::from(a.counts);
        let dc = i128::from(b.counts) - i128::from(a.counts);
        let y = i128::from(a.degc.to_bits()) + dt * x / dc;
        y.clamp(i128::from(i32::MIN), i128::from(i32::MAX)) as i32
    }

    #[test]
    fn every_count_and_every_hint_match_the_wide_reference() {
        // The demo NTC table (small segments: the 32-bit path inside, the
        // 64-bit path far past the ends) and a table with steep segments
        // (products beyond 32 bits, results beyond the Fx range).
        let steep = [
            p(10, -30_000),
            p(20, 30_000),
            p(40_000, 32_000),
            p(40_001, 32_767),
        ];
        for table in [&crate::example::DEMO_TEMP_TABLE[..], &steep[..]] {
            check(table).unwrap();
            let last = table.len() - 2;
            for counts in (0..=u16::MAX).step_by(7).chain([0, 9, 10, 11, u16::MAX]) {
                let want = reference_bits(table, counts);
                assert_eq!(degc(table, counts).to_bits(), want, "counts {counts}");
                for hint in [0, 1, last / 2, last, last + 1, usize::MAX] {
                    let i = segment(table, counts, hint);
                    assert_eq!(i, segment(table, counts, usize::MAX), "counts {counts}");
                    assert_eq!(interpolate(table, i, counts).to_bits(), want);
                }
                for hint in 0..=last {
                    assert_eq!(
                        segment(table, counts, hint),
                        segment(table, counts, usize::MAX)
                    );
                }
            }
        }
    }

    #[test]
    fn cached_segment_conversion_equals_the_wide_reference() {
        // Readings in every order the controller can meet: rising and
        // falling sweeps, dithering across each table point, and jumps,
        // each converted through the segment the previous reading left.
        let steep = [
            p(10, -30_000),
            p(20, 30_000),
            p(40_000, 32_000),
            p(40_001, 32_767),
        ];
        let two = [p(100, 5), p(200, -5)];
        let three = [p(100, 5), p(200, -5), p(201, -7)];
        for table in [
            &crate::example::DEMO_TEMP_TABLE[..],
            &steep[..],
            &two[..],
            &three[..],
        ] {
            check(table).unwrap();
            let mut seg = Window::NONE;
            let mut convert = |counts: u16| {
                assert_eq!(
                    degc_cached(table, counts, &mut seg).to_bits(),
                    reference_bits(table, counts),
                    "counts {counts}"
                );
            };
            for counts in (0..=u16::MAX).step_by(3) {
                convert(counts);
            }
            for counts in (0..=u16::MAX).rev().step_by(5) {
                convert(counts);
            }
            for pt in table {
                for d in [-2i32, -1, 0, 1, 0, -1, 2, 1, -1] {
                    convert((i32::from(pt.counts) + d).clamp(0, 65_535) as u16);
                }
            }
            let mut x: u32 = 12_345;
            for _ in 0..20_000 {
                // A 32-bit LCG (Numerical Recipes constants, `common practice`).
                x = x.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
                convert((x >> 16) as u16);
            }
            convert(0);
            convert(u16::MAX);
        }
    }

    #[test]
    fn no_segment_misses_every_reading() {
        for counts in [0, 1, 2_048, u16::MAX] {
            let w = Window::NONE;
            assert!(counts < w.lo_counts || counts > w.hi_counts);
        }
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
