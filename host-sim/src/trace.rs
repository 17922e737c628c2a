//! What a closed-loop run records, in bounded memory whatever its length:
//! the trace row of a tick ([`TraceRow`]), the min/max envelope the plots
//! draw ([`Envelope`], at most [`ENVELOPE_BINS`] bins, fed every tick), the
//! retained rows the summary analyses ([`Retained`], at most
//! [`RETAINED_ROWS`] rows, halving its resolution when full) and the
//! streamed `trace.csv` ([`CsvTrace`], written row by row while the run
//! goes). A [`TraceSink`] sees every recorded row as it is made.

use std::io::Write;

use diodestat_core::{FaultSet, Mode, State, Warnings};

/// One tick of the trace.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TraceRow {
    /// Tick index.
    pub tick: u64,
    /// Time, s.
    pub t_s: f64,
    /// Controller state after the tick.
    pub state: State,
    /// Control mode in force.
    pub mode: Mode,
    /// Enable line on the board during this tick (the core's request of
    /// `dac_latency_ticks` earlier).
    pub enable: bool,
    /// DAC code on the board during this tick (as the enable line).
    pub dac_code: u16,
    /// Latched faults.
    pub faults: FaultSet,
    /// Warnings.
    pub warnings: Warnings,
    /// Front-facet optical power, mW.
    pub p_mw: f64,
    /// Actual drive current, mA.
    pub i_ma: f64,
    /// Commanded drive (core), mA.
    pub cmd_ma: f64,
    /// Ceiling in force (core), mA.
    pub ceiling_ma: f64,
    /// Monitor reading as the core sees it, mW.
    pub monitor_mw: f64,
    /// Junction temperature, degC.
    pub tj_c: f64,
    /// Temperature as the core reads it, degC.
    pub sensed_c: f64,
    /// Ambient, degC.
    pub ambient_c: f64,
    /// Supply at the driver, V.
    pub supply_v: f64,
    /// Supply as the core reads it, V.
    pub supply_sensed_v: f64,
    /// Diode forward voltage, V.
    pub v_f_v: f64,
    /// Emission wavelength, nm.
    pub wavelength_nm: f64,
    /// The diode's age: equivalent operating hours at its aging reference
    /// conditions, h.
    pub age_h: f64,
    /// Aging multiplier of the threshold current (1: unaged).
    pub threshold_factor: f64,
    /// Aging multiplier of the slope efficiency (1: unaged).
    pub slope_factor: f64,
}

/// Sees every row a run records (every `trace_every`-th tick) while the
/// run goes, and how far the run has got.
pub trait TraceSink {
    /// A recorded row.
    fn row(&mut self, row: &TraceRow);
    /// `done` of `total` ticks have run (called every few thousand ticks).
    fn progress(&mut self, _done: u64, _total: u64) {}
}

/// The sink that keeps nothing.
#[derive(Debug, Default)]
pub struct NoSink;

impl TraceSink for NoSink {
    fn row(&mut self, _row: &TraceRow) {}
}

/// Names of a fault set, joined by `+` (empty when none).
pub fn fault_names(f: FaultSet) -> String {
    let mut s = String::new();
    for x in f.iter() {
        if !s.is_empty() {
            s.push('+');
        }
        s.push_str(x.name());
    }
    s
}

/// Names of the warnings raised, joined by `+` (empty when none).
pub fn warning_names(w: Warnings) -> String {
    [
        (w.derating, "derating"),
        (w.at_ceiling, "at-ceiling"),
        (w.sensor_suspect, "sensor-suspect"),
    ]
    .iter()
    .filter(|(on, _)| *on)
    .map(|(_, n)| *n)
    .collect::<Vec<_>>()
    .join("+")
}

/// The header line of `trace.csv`.
pub const CSV_HEADER: &str = "tick,t_s,state,mode,enable,dac_code,faults,warnings,p_mw,monitor_mw,\
i_ma,cmd_ma,ceiling_ma,tj_c,sensed_c,ambient_c,supply_v,supply_sensed_v,v_f_v,wavelength_nm,\
age_h,threshold_factor,slope_factor";

/// One row of `trace.csv` (no line end).
pub fn csv_line(r: &TraceRow) -> String {
    format!(
        "{},{:.7},{},{},{},{},{},{},{:.6},{:.6},{:.6},{:.6},{:.6},{:.4},{:.4},{:.4},{:.4},{:.4},{:.5},{:.4},{:.6e},{:.9},{:.9}",
        r.tick,
        r.t_s,
        r.state.name(),
        match r.mode {
            Mode::Apc => "apc",
            Mode::Acc => "acc",
        },
        u8::from(r.enable),
        r.dac_code,
        fault_names(r.faults),
        warning_names(r.warnings),
        r.p_mw,
        r.monitor_mw,
        r.i_ma,
        r.cmd_ma,
        r.ceiling_ma,
        r.tj_c,
        r.sensed_c,
        r.ambient_c,
        r.supply_v,
        r.supply_sensed_v,
        r.v_f_v,
        r.wavelength_nm,
        r.age_h,
        r.threshold_factor,
        r.slope_factor
    )
}

/// `trace.csv` written row by row through a buffer while the run goes.
/// The first write error stops the writing and is returned by
/// [`CsvTrace::finish`].
#[derive(Debug)]
pub struct CsvTrace<W: Write> {
    out: Option<std::io::BufWriter<W>>,
    error: Option<std::io::Error>,
}

impl<W: Write> CsvTrace<W> {
    /// Start the trace on `out` (writes the header).
    pub fn new(out: W) -> Self {
        let mut w = std::io::BufWriter::with_capacity(1 << 16, out);
        let error = writeln!(w, "{CSV_HEADER}").err();
        CsvTrace {
            out: Some(w),
            error,
        }
    }

    /// Flush and hand back the writer, or the first error.
    pub fn finish(mut self) -> std::io::Result<W> {
        if let Some(e) = self.error.take() {
            return Err(e);
        }
        match self.out.take() {
            Some(w) => w.into_inner().map_err(|e| e.into_error()),
            None => Err(std::io::Error::other("trace already finished")),
        }
    }
}

impl<W: Write> TraceSink for CsvTrace<W> {
    fn row(&mut self, row: &TraceRow) {
        if self.error.is_some() {
            return;
        }
        if let Some(w) = self.out.as_mut() {
            if let Err(e) = writeln!(w, "{}", csv_line(row)) {
                self.error = Some(e);
            }
        }
    }
}

/// Most rows [`Retained`] keeps: 2^19 rows (26 s of every tick at
/// 20 kHz), about 70 MB.
pub const RETAINED_ROWS: usize = 1 << 19;

/// The rows a run keeps for its summary: every offered row while they fit
/// in `cap`; when full, every other row is dropped and from then on only
/// every `stride`-th offered row is kept (the stride doubles each time),
/// so the kept rows stay evenly spaced and never exceed `cap`. A caller
/// that keeps only part of each row (a campaign case) keeps its own `T`
/// by the same rule.
#[derive(Debug, PartialEq)]
pub struct Retained<T = TraceRow> {
    rows: Vec<T>,
    cap: usize,
    stride: u64,
    offered: u64,
}

/// A clone keeps the room made for the rows to come (a forked run goes on
/// recording into it without growing it).
impl<T: Clone> Clone for Retained<T> {
    fn clone(&self) -> Self {
        let mut rows = Vec::with_capacity(self.rows.capacity());
        rows.extend_from_slice(&self.rows);
        Retained {
            rows,
            cap: self.cap,
            stride: self.stride,
            offered: self.offered,
        }
    }
}

impl<T> Retained<T> {
    /// Empty, keeping at most `cap` rows (at least 2).
    pub fn new(cap: usize) -> Self {
        Retained {
            rows: Vec::new(),
            cap: cap.max(2),
            stride: 1,
            offered: 0,
        }
    }

    /// [`Retained::new`] for `expected` rows to come, their room (at most
    /// `cap` rows) allocated at once.
    pub fn for_rows(cap: usize, expected: u64) -> Self {
        let mut r = Retained::new(cap);
        let room = usize::try_from(expected).map_or(r.cap, |n| n.min(r.cap));
        r.rows.reserve_exact(room);
        r
    }

    /// Empty again, as [`Retained::new`] made it, keeping its memory for
    /// the next run.
    pub fn clear(&mut self) {
        self.rows.clear();
        self.stride = 1;
        self.offered = 0;
    }

    /// Offer the next row.
    pub fn push(&mut self, row: T) {
        if self.offered.is_multiple_of(self.stride) {
            if self.rows.len() == self.cap {
                let mut k = 0;
                self.rows.retain(|_| {
                    k += 1;
                    k % 2 == 1
                });
                self.stride *= 2;
            }
            if self.offered.is_multiple_of(self.stride) {
                self.rows.push(row);
            }
        }
        self.offered += 1;
    }

    /// Of the offered rows, every `stride()`-th is kept.
    pub fn stride(&self) -> u64 {
        self.stride
    }

    /// The kept rows.
    pub fn rows(&self) -> &[T] {
        &self.rows
    }

    /// The kept rows.
    pub fn into_rows(self) -> Vec<T> {
        self.rows
    }
}

/// Most bins of an [`Envelope`].
pub const ENVELOPE_BINS: usize = 2000;

/// A quantity the plots draw.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Channel {
    /// Front-facet optical power, mW.
    FrontMw,
    /// Monitor reading, mW.
    MonitorMw,
    /// Actual drive current, mA.
    CurrentMa,
    /// Ceiling in force, mA.
    CeilingMa,
    /// Junction temperature, degC.
    JunctionC,
    /// Sensed (case) temperature, degC.
    SensedC,
    /// Ambient, degC.
    AmbientC,
}

impl Channel {
    /// Every channel, in bin order.
    pub const ALL: [Channel; 7] = [
        Channel::FrontMw,
        Channel::MonitorMw,
        Channel::CurrentMa,
        Channel::CeilingMa,
        Channel::JunctionC,
        Channel::SensedC,
        Channel::AmbientC,
    ];
    /// How many channels there are.
    pub const N: usize = Self::ALL.len();

    /// This channel's value in a row.
    pub fn of(self, r: &TraceRow) -> f64 {
        match self {
            Channel::FrontMw => r.p_mw,
            Channel::MonitorMw => r.monitor_mw,
            Channel::CurrentMa => r.i_ma,
            Channel::CeilingMa => r.ceiling_ma,
            Channel::JunctionC => r.tj_c,
            Channel::SensedC => r.sensed_c,
            Channel::AmbientC => r.ambient_c,
        }
    }
}

/// The least and greatest value of every [`Channel`] over a run of
/// consecutive ticks.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Bin {
    /// First tick of the bin.
    pub first_tick: u64,
    /// Last tick of the bin.
    pub last_tick: u64,
    min: [f64; Channel::N],
    max: [f64; Channel::N],
}

impl Bin {
    /// Least value of `c` in the bin (NaN values are skipped; NaN when all
    /// were NaN).
    pub fn min(&self, c: Channel) -> f64 {
        self.min[c as usize]
    }
    /// Greatest value of `c` in the bin.
    pub fn max(&self, c: Channel) -> f64 {
        self.max[c as usize]
    }
}

/// Min/max envelope of every tick of a run in at most [`ENVELOPE_BINS`]
/// bins of equal width (in ticks), so that a tick-to-tick oscillation
/// shows as a band of its full swing however long the run.
#[derive(Clone, Debug, PartialEq)]
pub struct Envelope {
    ticks_per_bin: u64,
    next_bin_tick: u64,
    bins: Vec<Bin>,
}

impl Default for Envelope {
    fn default() -> Self {
        Envelope::new(0)
    }
}

impl Envelope {
    /// For a run of `n_ticks` ticks.
    pub fn new(n_ticks: u64) -> Self {
        let ticks_per_bin = n_ticks.div_ceil(ENVELOPE_BINS as u64).max(1);
        Envelope {
            ticks_per_bin,
            next_bin_tick: 0,
            // Every bin the run will fill, allocated once.
            bins: Vec::with_capacity(n_ticks.div_ceil(ticks_per_bin) as usize),
        }
    }

    /// Add a tick's row (ticks in increasing order).
    pub fn add(&mut self, r: &TraceRow) {
        self.add_values(r.tick, Channel::ALL.map(|c| c.of(r)));
    }

    /// Add a tick's values, in the order of [`Channel::ALL`] (ticks in
    /// increasing order). The every-tick path of a run: a division only
    /// when a new bin starts.
    #[inline(always)]
    pub fn add_values(&mut self, tick: u64, v: [f64; Channel::N]) {
        if tick >= self.next_bin_tick && self.bins.len() < ENVELOPE_BINS {
            // `next_bin_tick` is a multiple of the bin width: the tick
            // right on it (a run's ticks come one by one) needs no division.
            self.next_bin_tick = if tick == self.next_bin_tick {
                tick + self.ticks_per_bin
            } else {
                (tick / self.ticks_per_bin + 1) * self.ticks_per_bin
            };
            self.bins.push(Bin {
                first_tick: tick,
                last_tick: tick,
                min: v,
                max: v,
            });
            return;
        }
        if let Some(b) = self.bins.last_mut() {
            b.last_tick = tick;
            // f64::min and max skip a NaN operand.
            for ((lo, hi), x) in b.min.iter_mut().zip(b.max.iter_mut()).zip(v) {
                *lo = lo.min(x);
                *hi = hi.max(x);
            }
        }
    }

    /// Ticks per bin.
    pub fn ticks_per_bin(&self) -> u64 {
        self.ticks_per_bin
    }

    /// The bins, in time order.
    pub fn bins(&self) -> &[Bin] {
        &self.bins
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn row(tick: u64, p_mw: f64) -> TraceRow {
        TraceRow {
            tick,
            t_s: tick as f64 * 5e-5,
            state: State::Regulating,
            mode: Mode::Apc,
            enable: true,
            dac_code: 100,
            faults: FaultSet::EMPTY,
            warnings: Warnings::default(),
            p_mw,
            i_ma: 1.0,
            cmd_ma: 1.0,
            ceiling_ma: 2.0,
            monitor_mw: p_mw,
            tj_c: 25.0,
            sensed_c: 25.0,
            ambient_c: 25.0,
            supply_v: 5.0,
            supply_sensed_v: 5.0,
            v_f_v: 2.0,
            wavelength_nm: 650.0,
            age_h: 0.0,
            threshold_factor: 1.0,
            slope_factor: 1.0,
        }
    }

    /// A signal that alternates every tick between 10 and 14 mW: every bin
    /// of two or more ticks spans the full 4 mW swing, over any run length
    /// (sampling every fourth tick would show a flat 10 mW).
    #[test]
    fn tick_to_tick_oscillation_is_a_band_of_the_full_swing() {
        for n in [4_001u64, 100_000, 3_000_000] {
            let mut e = Envelope::new(n);
            for t in 0..n {
                e.add(&row(t, if t % 2 == 0 { 10.0 } else { 14.0 }));
            }
            assert!(e.bins().len() <= ENVELOPE_BINS);
            assert!(e.ticks_per_bin() >= 2);
            for b in e.bins().iter().filter(|b| b.last_tick > b.first_tick) {
                assert_eq!(b.min(Channel::FrontMw), 10.0);
                assert_eq!(b.max(Channel::FrontMw), 14.0);
                assert_eq!(b.max(Channel::MonitorMw) - b.min(Channel::MonitorMw), 4.0);
            }
        }
    }

    /// A short run keeps every tick as its own bin.
    #[test]
    fn short_runs_keep_every_tick() {
        let mut e = Envelope::new(500);
        for t in 0..500 {
            e.add(&row(t, t as f64));
        }
        assert_eq!(e.bins().len(), 500);
        assert!(e
            .bins()
            .iter()
            .all(|b| b.min(Channel::FrontMw) == b.max(Channel::FrontMw)));
    }

    /// Rows for a run of known length get their room at once, and a clone
    /// (a forked run) keeps it: the fork records on without growing.
    #[test]
    fn retained_rows_get_their_room_once() {
        let mut r = Retained::for_rows(1000, 300);
        assert!(r.rows.capacity() >= 300);
        for t in 0..100 {
            r.push(row(t, 0.0));
        }
        let mut c = r.clone();
        assert_eq!(c, r);
        let room = c.rows.capacity();
        assert!(room >= 300);
        for t in 100..300 {
            c.push(row(t, 0.0));
        }
        assert_eq!(c.rows.capacity(), room);
        // Never more room than the cap.
        assert!(Retained::<TraceRow>::for_rows(10, 300).rows.capacity() < 300);
    }

    proptest! {
        /// Memory stays bounded: however many rows are offered, at most
        /// `cap` are kept, evenly spaced, starting at the first.
        #[test]
        fn retained_rows_are_bounded_and_even(cap in 2usize..64, n in 0u64..5_000) {
            let mut r = Retained::new(cap);
            for t in 0..n {
                r.push(row(t, 0.0));
            }
            let s = r.stride();
            let rows = r.into_rows();
            prop_assert!(rows.len() <= cap);
            for (i, x) in rows.iter().enumerate() {
                prop_assert_eq!(x.tick, i as u64 * s);
            }
            // Nothing dropped beyond what the stride asks.
            prop_assert_eq!(rows.len() as u64, n.div_ceil(s));
        }

        /// Cleared after any run, a retention keeps exactly what a new one
        /// keeps.
        #[test]
        fn a_cleared_retention_keeps_as_a_new_one(cap in 2usize..64, m in 0u64..3_000, n in 0u64..3_000) {
            let mut reused = Retained::new(cap);
            for t in 0..m {
                reused.push(t);
            }
            reused.clear();
            let mut new = Retained::new(cap);
            for t in 0..n {
                reused.push(t);
                new.push(t);
            }
            prop_assert_eq!(reused, new);
        }

        /// The envelope holds every tick's extremes in at most
        /// ENVELOPE_BINS bins, whatever the run length.
        #[test]
        fn envelope_is_bounded_and_exact(n in 1u64..20_000, seed in any::<u64>()) {
            let mut e = Envelope::new(n);
            let v = |t: u64| ((t ^ seed).wrapping_mul(0x9e37_79b9_7f4a_7c15) >> 40) as f64;
            for t in 0..n {
                e.add(&row(t, v(t)));
            }
            prop_assert!(e.bins().len() <= ENVELOPE_BINS);
            for b in e.bins() {
                let (lo, hi) = (b.first_tick..=b.last_tick)
                    .map(v)
                    .fold((f64::MAX, f64::MIN), |(a, c), x| (a.min(x), c.max(x)));
                prop_assert_eq!(b.min(Channel::FrontMw), lo);
                prop_assert_eq!(b.max(Channel::FrontMw), hi);
            }
            prop_assert_eq!(e.bins().last().map(|b| b.last_tick), Some(n - 1));
        }

        /// Ticks offered with gaps (every `stride`-th) land in the bin of
        /// their tick, as when they come one by one.
        #[test]
        fn envelope_bins_by_tick_with_gaps(n in 1u64..20_000, stride in 1u64..7) {
            let mut e = Envelope::new(n);
            for t in (0..n).step_by(stride as usize) {
                e.add(&row(t, t as f64));
            }
            let w = e.ticks_per_bin();
            for b in e.bins() {
                prop_assert_eq!(b.first_tick / w, b.last_tick / w);
                prop_assert_eq!(b.min(Channel::FrontMw), b.first_tick as f64);
                prop_assert_eq!(b.max(Channel::FrontMw), b.last_tick as f64);
            }
            let firsts: Vec<u64> = e.bins().iter().map(|b| b.first_tick).collect();
            let mut expect: Vec<u64> = (0..n).step_by(stride as usize).collect();
            expect.dedup_by_key(|t| *t / w);
            prop_assert_eq!(firsts, expect);
        }
    }

    #[test]
    fn csv_rows_carry_every_column_of_the_header() {
        let mut r = row(3, 1.5);
        r.faults.insert(diodestat_core::Fault::Overcurrent);
        r.warnings.derating = true;
        r.warnings.at_ceiling = true;
        let mut w = CsvTrace::new(Vec::new());
        w.row(&r);
        let text = String::from_utf8(w.finish().unwrap()).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        let head: Vec<&str> = lines[0].split(',').collect();
        let cells: Vec<&str> = lines[1].split(',').collect();
        assert_eq!(head.len(), cells.len());
        let cell = |k: &str| cells[head.iter().position(|h| *h == k).unwrap()];
        assert_eq!(cell("faults"), "overcurrent");
        assert_eq!(cell("warnings"), "derating+at-ceiling");
        assert_eq!(cell("enable"), "1");
        assert_eq!(cell("mode"), "apc");
        assert_eq!(cell("wavelength_nm"), "650.0000");
        assert_eq!(cell("v_f_v"), "2.00000");
    }

    /// A failed write is reported at the end, not lost.
    #[test]
    fn write_errors_reach_finish() {
        struct Full;
        impl Write for Full {
            fn write(&mut self, _: &[u8]) -> std::io::Result<usize> {
                Err(std::io::Error::other("disk full"))
            }
            fn flush(&mut self) -> std::io::Result<()> {
                Ok(())
            }
        }
        let mut w = CsvTrace::new(Full);
        for t in 0..10_000 {
            w.row(&row(t, 1.0));
        }
        assert!(w.finish().is_err());
    }
}
