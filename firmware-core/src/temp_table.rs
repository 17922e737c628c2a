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
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(deny_unknown_fields))]
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
    interpolate(points, segment(points, counts), counts)
}

/// The segment of a checked table that holds `counts`: the index of the
/// last point with counts at or below the reading, limited to
/// `[0, len - 2]` (the end segments extend past the table). A binary
/// search of fixed shape: the same number of halvings for every reading
/// (six for 33 points), each a load, a comparison and a conditional move.
pub(crate) fn segment(points: &[TempPoint], counts: u16) -> usize {
    search(points, counts, points.len()).min(points.len().saturating_sub(2))
}

/// The last of the first `size` points (at most `points.len()`) with
/// counts at or below the reading, or 0 when there is none.
#[inline]
fn search(points: &[TempPoint], counts: u16, size: usize) -> usize {
    // The answer lies in `[base, base + size)`: `base` is 0 or a point at
    // or below the reading.
    let mut base = 0usize;
    let mut size = size;
    while size > 1 {
        let half = size / 2;
        // `base + size <= len` throughout: no overflow.
        let mid = base + half;
        if points.get(mid).is_some_and(|p| p.counts <= counts) {
            base = mid;
        }
        size -= half;
    }
    base
}

/// One table segment, as the window's interpolation needs it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Span {
    /// Counts of the segment's first point.
    a_counts: i32,
    /// Temperature of the segment's first point, `Fx` bits.
    a_bits: i32,
    /// Temperature step across the segment, `Fx` bits (the window holds
    /// a segment only when the step fits i32; see [`reach`]).
    dt_bits: i32,
    /// Width of the segment, counts (positive in a checked table).
    dc: i32,
}

impl Span {
    /// The segment from `a` to `b`.
    fn new(a: &TempPoint, b: &TempPoint) -> Span {
        Span {
            a_counts: i32::from(a.counts),
            a_bits: a.degc.to_bits(),
            dt_bits: b.degc.to_bits().wrapping_sub(a.degc.to_bits()),
            dc: i32::from(b.counts) - i32::from(a.counts),
        }
    }

    /// [`interpolate`] on this segment, for a reading within its
    /// [`reach`]: there `dt·x` fits i32, so the wrapping product is the
    /// exact one and the 32-bit quotient is that of [`interpolate`]. A
    /// window holds a reading only below the segment's end (`0 <= x < dc`),
    /// so the quotient lies strictly between 0 and `dt` (or is 0): the sum
    /// lies between the segment's two temperatures and needs no
    /// saturation.
    #[inline]
    fn interpolate(&self, counts: u16) -> Fx {
        let x = i32::from(counts) - self.a_counts;
        if self.dc > 0 {
            Fx::from_bits(
                self.a_bits
                    .wrapping_add(self.dt_bits.wrapping_mul(x) / self.dc),
            )
        } else {
            Fx::from_bits(self.a_bits)
        }
    }
}

/// How far from `a`, in counts, the segment from `a` to `b` interpolates
/// in 32 bits: the largest `k` (at most 65 535) with `|dt|·k <= i32::MAX`,
/// one 32-bit division. A step `dt` beyond i32 gives 0 (only `a` itself,
/// where the product is zero whatever the wrapped step); a flat segment
/// (not in a checked table) reaches every reading.
#[inline]
fn reach(a: &TempPoint, b: &TempPoint) -> u16 {
    let k = (i32::MAX as u32)
        .checked_div(b.degc.to_bits().abs_diff(a.degc.to_bits()))
        .unwrap_or(u32::MAX);
    u16::try_from(k).unwrap_or(u16::MAX)
}

/// Two adjacent table segments around the latest reading, with what their
/// interpolation needs, so that the next reading, if it falls in either,
/// is converted without reading the table (see [`degc_cached`]). A reading
/// that dithers across the table point between the two stays inside. The
/// window holds only readings its segments interpolate in 32 bits (see
/// [`reach`]): any other reading is converted by [`relocate`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Window {
    /// Lowest reading the window holds.
    lo_counts: u16,
    /// The table point between the two segments: readings below it are in
    /// `first`, readings at or above it in `second`.
    mid_counts: u16,
    /// Highest reading the window holds (below the table's last point).
    hi_counts: u16,
    /// Every segment of the table interpolates its whole width in 32 bits
    /// (see [`spans_fit`]; worked out once, with the controller): windows
    /// found again need no narrowing. Kept from window to window.
    fit: bool,
    first: Span,
    second: Span,
}

/// A span that converts every reading to zero.
const ZERO_SPAN: Span = Span {
    a_counts: 0,
    a_bits: 0,
    dt_bits: 0,
    dc: 0,
};

impl Window {
    /// No window yet, for `points`: every reading misses it.
    pub(crate) fn empty(points: &[TempPoint]) -> Window {
        Window {
            fit: spans_fit(points),
            ..Window::NONE
        }
    }

    /// No window: every reading misses it (and windows found from it are
    /// narrowed, which is always exact).
    pub(crate) const NONE: Window = Window {
        lo_counts: 1,
        mid_counts: 1,
        hi_counts: 0,
        fit: false,
        first: ZERO_SPAN,
        second: ZERO_SPAN,
    };

    /// The window of a checked table around `counts`, given `j`, the
    /// segment that holds it (see [`segment`]): `j` and its neighbour on
    /// the side of the nearer end point, from the start of the first to
    /// just below the end of the second (readings beyond the table's ends
    /// are converted without it, see [`relocate`]). When `fit` (see
    /// [`spans_fit`]) every segment interpolates its whole width in 32
    /// bits; otherwise the window is narrowed to the readings both
    /// segments interpolate in 32 bits, and may not hold `counts`.
    fn around(points: &[TempPoint], counts: u16, j: usize, fit: bool) -> Window {
        let last = points.len().saturating_sub(2);
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
        let (Some(a), Some(mid)) = (points.get(w), points.get(w.saturating_add(1))) else {
            // Fewer than two points (not a checked table): [`relocate`]
            // converts every reading (to zero, as [`interpolate`] does).
            return Window::NONE;
        };
        let first = Span::new(a, mid);
        // The segment above the middle point; a one-segment table has
        // none: its window is that segment (as `second`) from its start.
        let (lo_counts, mid_counts, end, second) = match points.get(w.saturating_add(2)) {
            Some(c) => (a.counts, mid.counts, c, Span::new(mid, c)),
            None => (a.counts, a.counts, mid, first),
        };
        let mut window = Window {
            lo_counts,
            mid_counts,
            hi_counts: end.counts.saturating_sub(1),
            fit,
            first,
            second,
        };
        if !fit {
            window.narrow(points, w);
        }
        window
    }

    /// Narrow a window built from segment `w` to the readings its
    /// segments interpolate in 32 bits (see [`reach`]): `second` up from
    /// the middle as far as it reaches (at least the middle itself),
    /// `first` only if it reaches from its start to just below the middle.
    #[cold]
    fn narrow(&mut self, points: &[TempPoint], w: usize) {
        let (Some(a), Some(b)) = (points.get(w), points.get(w.saturating_add(1))) else {
            return;
        };
        let (m, k_second) = match points.get(w.saturating_add(2)) {
            Some(c) => (b.counts, reach(b, c)),
            // One segment: `second` is the segment itself.
            None => (a.counts, reach(a, b)),
        };
        self.hi_counts = self.hi_counts.min(m.saturating_add(k_second));
        if self.lo_counts < m && reach(a, b) < m.saturating_sub(a.counts).saturating_sub(1) {
            self.lo_counts = m;
        }
    }
}

/// Whether every segment of a checked table interpolates its whole width
/// in 32 bits (its [`reach`] is at least its width less one): then no
/// window needs narrowing. Worked out at validation.
pub(crate) fn spans_fit(points: &[TempPoint]) -> bool {
    points.windows(2).all(|s| match s {
        [a, b] => reach(a, b) >= b.counts.saturating_sub(a.counts).saturating_sub(1),
        _ => true,
    })
}

/// [`degc`] through the window of the previous reading (`window`,
/// updated): the same result. A reading inside the window costs three
/// comparisons and a 32-bit interpolation; otherwise [`relocate`] finds
/// the window again around the reading and converts it.
#[inline]
pub(crate) fn degc_cached(points: &[TempPoint], counts: u16, window: &mut Window) -> Fx {
    if window.misses(counts) {
        return relocate(points, counts, window);
    }
    window.interpolate(counts)
}

impl Window {
    /// Whether the window does not hold `counts`.
    #[inline]
    fn misses(&self, counts: u16) -> bool {
        counts < self.lo_counts || counts > self.hi_counts
    }

    /// Interpolate a reading the window holds.
    #[inline]
    fn interpolate(&self, counts: u16) -> Fx {
        if counts < self.mid_counts {
            self.first.interpolate(counts)
        } else {
            self.second.interpolate(counts)
        }
    }
}

/// A reading outside the window. Beyond either end of the table (a
/// sensor at its rail, a glitch) the end segment converts it, extended,
/// and the window is kept for the reading's return. Inside, the window is
/// found again around the reading (see [`segment`] and
/// [`Window::around`]); the reading is converted by [`interpolate`]
/// (the same result as through the window, and it does not need the
/// window to hold it).
#[inline(never)]
fn relocate(points: &[TempPoint], counts: u16, window: &mut Window) -> Fx {
    let (Some(first), Some(last)) = (points.first(), points.last()) else {
        return Fx::ZERO;
    };
    if counts >= last.counts {
        return interpolate(points, points.len().saturating_sub(2), counts);
    }
    if counts < first.counts {
        return interpolate(points, 0, counts);
    }
    let j = segment(points, counts);
    *window = Window::around(points, counts, j, window.fit);
    interpolate(points, j, counts)
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

    /// The tables the conversion tests run over: steep steps beyond 32
    /// bits, products with far readings beyond 32 bits, a single steep
    /// segment, flat and extended end segments, a table starting at 0 and
    /// ending at 65 535, one and two segments, 33 points.
    struct Tables {
        steep: [TempPoint; 4],
        far: [TempPoint; 4],
        single: [TempPoint; 2],
        flat_ends: [TempPoint; 4],
        two: [TempPoint; 2],
        three: [TempPoint; 3],
        full: [TempPoint; TEMP_TABLE_LEN],
    }

    impl Tables {
        fn new() -> Self {
            Tables {
                steep: [
                    p(10, -30_000),
                    p(20, 30_000),
                    p(40_000, 32_000),
                    p(40_001, 32_767),
                ],
                far: [p(0, -32_768), p(1, 0), p(30_000, 1), p(65_535, 32_767)],
                single: [p(30_000, -20_000), p(30_010, 20_000)],
                flat_ends: [p(100, 0), p(200, 100), p(300, 101), p(60_000, 102)],
                two: [p(100, 5), p(200, -5)],
                three: [p(100, 5), p(200, -5), p(201, -7)],
                full: core::array::from_fn(|i| p(500 + 100 * i as u16, 150 - 7 * i as i32)),
            }
        }

        /// The demo table first, then the ones above in field order.
        fn all(&self) -> [&[TempPoint]; 8] {
            [
                &crate::example::DEMO_TEMP_TABLE[..],
                &self.steep,
                &self.far,
                &self.single,
                &self.flat_ends,
                &self.two,
                &self.three,
                &self.full,
            ]
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

    /// The window search and rebuild as they were before the end-of-table
    /// fast path and the fixed-shape search, kept to compare with.
    mod old {
        use super::super::*;

        /// The segment search with a hint: the hint, its neighbour on the
        /// reading's side, then a binary search.
        pub(super) fn segment(points: &[TempPoint], counts: u16, hint: usize) -> usize {
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

        /// The readings (inclusive) the segment `a`..`b` interpolates in
        /// 32 bits.
        fn reach(a: &TempPoint, b: &TempPoint) -> Option<(i32, i32)> {
            let dt = b.degc.to_bits().checked_sub(a.degc.to_bits())?;
            let k = (i32::MAX as u32)
                .checked_div(dt.unsigned_abs())
                .unwrap_or(u32::from(u16::MAX))
                .min(u32::from(u16::MAX));
            let k = i32::from(u16::try_from(k).unwrap_or(u16::MAX));
            let a = i32::from(a.counts);
            Some(((a - k).max(0), (a + k).min(i32::from(u16::MAX))))
        }

        /// The window around `counts` in segment `j`.
        fn around(points: &[TempPoint], counts: u16, j: usize) -> Window {
            let last = points.len().saturating_sub(2);
            let near_start = match (points.get(j), points.get(j.saturating_add(1))) {
                (Some(a), Some(b)) => {
                    counts.saturating_sub(a.counts) < b.counts.saturating_sub(counts)
                }
                _ => false,
            };
            let w = if j > 0 && (near_start || j == last) {
                j - 1
            } else {
                j
            };
            let (Some(a), Some(mid)) = (points.get(w), points.get(w.saturating_add(1))) else {
                return Window::NONE;
            };
            let first = Span::new(a, mid);
            let reach_first = reach(a, mid);
            let (lo, mid_counts, hi, second, reach_second) = match points.get(w + 2) {
                None => (0, 0, i32::from(u16::MAX), first, reach_first),
                Some(c) => {
                    let lo = if w == 0 { 0 } else { i32::from(a.counts) };
                    let hi = if w + 1 >= last {
                        i32::from(u16::MAX)
                    } else {
                        i32::from(c.counts) - 1
                    };
                    (lo, mid.counts, hi, Span::new(mid, c), reach(mid, c))
                }
            };
            let m = i32::from(mid_counts);
            let hi = match reach_second {
                Some((r_lo, r_hi)) if r_lo <= m => hi.min(r_hi),
                _ => m - 1,
            };
            let lo = match reach_first {
                Some((r_lo, r_hi)) if lo < m && r_hi >= m - 1 => lo.max(r_lo),
                _ => m,
            };
            match (u16::try_from(lo), u16::try_from(hi)) {
                (Ok(lo_counts), Ok(hi_counts)) if lo <= hi => Window {
                    lo_counts,
                    mid_counts,
                    hi_counts,
                    fit: false,
                    first,
                    second,
                },
                _ => Window::NONE,
            }
        }

        /// The cached conversion: the window, or the search and a new
        /// window around the reading.
        pub(super) fn degc_cached(points: &[TempPoint], counts: u16, window: &mut Window) -> Fx {
            if !window.misses(counts) {
                return window_interpolate(window, counts);
            }
            // (The hint it took from the window's segment index only
            // shortened the search: the segment found is the same from
            // every hint, see the test below.)
            let j = segment(points, counts, usize::MAX);
            *window = around(points, counts, j);
            if window.misses(counts) {
                interpolate(points, j, counts)
            } else {
                window_interpolate(window, counts)
            }
        }

        /// The window's interpolation as it was: its windows reached past
        /// the table's ends, so the sum saturated.
        fn window_interpolate(w: &Window, counts: u16) -> Fx {
            let s = if counts < w.mid_counts {
                &w.first
            } else {
                &w.second
            };
            let x = i32::from(counts) - s.a_counts;
            if s.dc > 0 {
                Fx::from_bits(s.a_bits.saturating_add(s.dt_bits.wrapping_mul(x) / s.dc))
            } else {
                Fx::from_bits(s.a_bits)
            }
        }
    }

    #[test]
    fn every_count_from_every_window_equals_the_old_conversion() {
        // Tables: the demo NTC table, steep steps beyond 32 bits, products
        // with far readings beyond 32 bits, a single steep segment, flat and
        // extended end segments, a table starting at 0 and ending at
        // 65 535, one and two segments, 33 points.
        let t = Tables::new();
        for table in t.all() {
            check(table).unwrap();
            // With the table's own flag, and with narrowing forced (the
            // general path, always exact).
            for fit in [spans_fit(table), false] {
                compare_from_every_window(table, fit);
            }
        }
        assert!(spans_fit(&crate::example::DEMO_TEMP_TABLE));
        assert!(spans_fit(&t.full));
        assert!(!spans_fit(&t.steep));
        assert!(!spans_fit(&t.single));
    }

    /// Every window state the conversion leaves, from no window at all
    /// (with the table's flag `fit` or without) and around every table
    /// point and segment middle; from each, every reading 0..=65 535
    /// converted by both. (The old conversion's own windows reached past
    /// the table's ends, where the present interpolation, relying on its
    /// windows holding readings within their segments only, does not
    /// saturate: they are not states of the present conversion.)
    fn compare_from_every_window(table: &[TempPoint], fit: bool) {
        let mut states: heapless::Vec<Window, 512> = heapless::Vec::new();
        fn keep(states: &mut heapless::Vec<Window, 512>, w: Window) {
            if !states.contains(&w) {
                states.push(w).unwrap();
            }
        }
        keep(&mut states, Window::NONE);
        keep(
            &mut states,
            Window {
                fit,
                ..Window::NONE
            },
        );
        let readings = table
            .iter()
            .flat_map(|q| {
                [
                    q.counts.saturating_sub(1),
                    q.counts,
                    q.counts.saturating_add(1),
                ]
            })
            .chain(table.windows(2).map(|s| s[0].counts / 2 + s[1].counts / 2))
            .chain([0, 1, u16::MAX - 1, u16::MAX]);
        for r in readings {
            // From no window and from the window of a distant reading.
            for from in [
                Window {
                    fit,
                    ..Window::NONE
                },
                states[states.len() / 2],
            ] {
                let (mut a, mut b) = (from, from);
                assert_eq!(
                    degc_cached(table, r, &mut a),
                    old::degc_cached(table, r, &mut b)
                );
                keep(&mut states, a);
            }
        }
        assert!(states.len() >= 2, "{} window states", states.len());
        for from in &states {
            for counts in 0..=u16::MAX {
                // A window holds only readings within their segment (what
                // its unsaturated sum relies on).
                if !from.misses(counts) {
                    let s = if counts < from.mid_counts {
                        &from.first
                    } else {
                        &from.second
                    };
                    let x = i32::from(counts) - s.a_counts;
                    assert!(0 <= x && x < s.dc, "counts {counts} in {from:?}");
                }
                let (mut a, mut b) = (*from, *from);
                assert_eq!(
                    degc_cached(table, counts, &mut a).to_bits(),
                    old::degc_cached(table, counts, &mut b).to_bits(),
                    "counts {counts} from {from:?} fit {fit}"
                );
            }
        }
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
                let i = segment(table, counts);
                assert_eq!(interpolate(table, i, counts).to_bits(), want);
                // The search it replaces, from every hint.
                for hint in [0, 1, last / 2, last, last + 1, usize::MAX] {
                    assert_eq!(i, old::segment(table, counts, hint), "counts {counts}");
                }
                for hint in 0..=last {
                    assert_eq!(i, old::segment(table, counts, hint));
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
            let mut seg = Window::empty(table);
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

    /// A window segment's conversion as first written: the checked 32-bit
    /// product and quotient, the 64-bit quotient when the product (or the
    /// step) does not fit.
    fn checked_span_interpolation(a: &TempPoint, b: &TempPoint, counts: u16) -> Fx {
        let (a_bits, b_bits) = (a.degc.to_bits(), b.degc.to_bits());
        let dc = i32::from(b.counts) - i32::from(a.counts);
        let x = i32::from(counts) - i32::from(a.counts);
        if dc <= 0 {
            return Fx::from_bits(a_bits);
        }
        match b_bits.checked_sub(a_bits).and_then(|dt| dt.checked_mul(x)) {
            Some(p) => Fx::from_bits(a_bits.saturating_add(p / dc)),
            None => wide_interpolation(a_bits, b_bits, x, dc),
        }
    }

    #[test]
    fn window_interpolation_equals_the_checked_span_interpolation() {
        // Tables whose windows are narrowed: steps that do not fit i32,
        // steps whose product with a far reading does not, end segments
        // extended over the whole u16 range, a single steep segment.
        let t = Tables::new();
        let mut held = 0u32;
        for table in t.all().into_iter().take(6) {
            check(table).unwrap();
            let starts = (0..=u16::MAX)
                .step_by(97)
                .chain(table.iter().flat_map(|q| {
                    [
                        q.counts.saturating_sub(1),
                        q.counts,
                        q.counts.saturating_add(1),
                    ]
                }))
                .chain([0, u16::MAX]);
            for start in starts {
                // The window the controller would keep after this reading.
                let mut w = Window::empty(table);
                degc_cached(table, start, &mut w);
                let probes = (-600i32..=600)
                    .step_by(7)
                    .map(|d| i32::from(start) + d)
                    .chain([
                        0,
                        65_535,
                        i32::from(w.lo_counts),
                        i32::from(w.hi_counts),
                        i32::from(w.mid_counts) - 1,
                        i32::from(w.mid_counts),
                    ]);
                for c in probes.filter_map(|c| u16::try_from(c).ok()) {
                    if w.misses(c) {
                        continue;
                    }
                    held += 1;
                    let i = segment(table, c);
                    let want = checked_span_interpolation(&table[i], &table[i + 1], c);
                    assert_eq!(w.interpolate(c), want, "counts {c} window {w:?}");
                }
            }
        }
        // (The single segment's step does not fit i32: its windows are
        // empty and every reading is converted by `relocate`.)
        assert!(held > 100_000, "windows held {held} readings");
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
