//! What a campaign case keeps of each recorded row of its run ([`Kept`]):
//! the few values its assessment reads, retained by the run's own rule
//! ([`Retained`]: every row up to [`RETAINED_ROWS`], then evenly thinned)
//! in a buffer that each worker thread reuses from case to case. A slow
//! case records some hundred thousand rows; kept whole in a fresh vector
//! per case, they were most of a Monte Carlo run's memory traffic (pages
//! the system maps, zeroes and takes back for every case).

use std::cell::RefCell;

use super::verdict::Sample;
use crate::trace::{Retained, TraceRow, TraceSink, RETAINED_ROWS};

/// The values of a recorded row that a case's assessment reads.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Kept {
    /// Tick index.
    pub tick: u64,
    /// Whether the controller's state after the tick is an emitting one.
    pub emitting: bool,
    /// Front-facet optical power, mW.
    pub p_mw: f64,
    /// Actual drive current, mA.
    pub i_ma: f64,
    /// Junction temperature, degC.
    pub tj_c: f64,
    /// Temperature as the core reads it, degC.
    pub sensed_c: f64,
}

impl Kept {
    /// What a case keeps of `r`.
    pub fn of(r: &TraceRow) -> Self {
        Kept {
            tick: r.tick,
            emitting: r.state.is_emitting(),
            p_mw: r.p_mw,
            i_ma: r.i_ma,
            tj_c: r.tj_c,
            sensed_c: r.sensed_c,
        }
    }
}

impl Sample for Kept {
    fn p_mw(&self) -> f64 {
        self.p_mw
    }
    fn i_ma(&self) -> f64 {
        self.i_ma
    }
}

/// A retention of kept rows is the sink of a streamed run.
impl TraceSink for Retained<Kept> {
    fn row(&mut self, row: &TraceRow) {
        self.push(Kept::of(row));
    }
}

thread_local! {
    static ROWS: RefCell<Retained<Kept>> = RefCell::new(Retained::new(RETAINED_ROWS));
}

/// Run `f` on this worker thread's retention of kept rows, cleared first
/// (its memory stays with the thread for the next case).
pub fn with_rows<R>(f: impl FnOnce(&mut Retained<Kept>) -> R) -> R {
    ROWS.with_borrow_mut(|rows| {
        rows.clear();
        f(rows)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Each call starts from an empty retention, whatever the one before
    /// left in it.
    #[test]
    fn every_case_starts_empty() {
        let row = |tick| Kept {
            tick,
            emitting: true,
            p_mw: 1.0,
            i_ma: 2.0,
            tj_c: 25.0,
            sensed_c: 25.0,
        };
        with_rows(|r| (0..10).for_each(|t| r.push(row(t))));
        let ticks = with_rows(|r| {
            assert!(r.rows().is_empty());
            r.push(row(7));
            r.rows().iter().map(|k| k.tick).collect::<Vec<_>>()
        });
        assert_eq!(ticks, [7]);
    }
}
