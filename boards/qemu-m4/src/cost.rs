//! The cost of `Controller::step`, per path, in SysTick counts, and the
//! replays that resolve it below one count.
//!
//! - In situ: the rig reads SysTick around every `step` ([`PathStats`]).
//!   One reading is quantised to one count (40 instructions); a step of `T`
//!   instructions reads `floor(T/40)` or `ceil(T/40)` counts, so the largest
//!   reading `w` bounds every step of the path: `T < (w + 1) × 40`.
//! - Mean by replay ([`replay_block`]): a recorded run of samples is fed
//!   again to a clone of the controller taken where the recording started;
//!   the controller is deterministic, so it takes exactly the same paths.
//!   The block is timed as a whole, less the same loop without the call.
//! - Exact single step by replay ([`replay_one`]): the slowest step seen in
//!   situ is repeated many times from a clone of the controller as it was
//!   before that step, less the same loop without the call. On the paths
//!   of a few steps ([`Path::replay_every`]) every step is replayed as it
//!   happens and the slowest by replay is the one kept.

use core::hint::black_box;

use diodestat_core::{Controller, Sample};

use crate::stopwatch::Stopwatch;

/// Which path a step took, from the state before and after it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Path {
    /// Regulating before and after (APC or ACC closed loop).
    Regulating,
    /// The step that latched a fault.
    Trip,
    /// Latched before and after.
    Latched,
    /// Anything else: off, arming, soft start, hand-over, soft stop.
    Other,
    /// Regulating before and after, on a step whose temperature reading
    /// jumped out of the cached table window (the scenario marks it).
    RegulatingRelocating,
    /// The step that latched a fault, on a jump of the temperature reading.
    TripRelocating,
    /// Latched before and after, on a jump of the temperature reading.
    LatchedRelocating,
}

impl Path {
    /// Number of paths.
    pub const COUNT: usize = 7;

    /// Every path, in the order of the cost table.
    pub const ALL: [Path; Path::COUNT] = [
        Path::Regulating,
        Path::Trip,
        Path::Latched,
        Path::Other,
        Path::RegulatingRelocating,
        Path::TripRelocating,
        Path::LatchedRelocating,
    ];

    /// Whether every step of the path is replayed to find its slowest
    /// (the paths of a few steps: the trips and the marked jumps), rather
    /// than the slowest-read one.
    pub const fn replay_every(self) -> bool {
        matches!(self, Path::Trip) || self.relocating()
    }

    /// Whether the path is one of the marked temperature jumps.
    pub const fn relocating(self) -> bool {
        matches!(
            self,
            Path::RegulatingRelocating | Path::TripRelocating | Path::LatchedRelocating
        )
    }

    /// Index into per-path tables.
    pub const fn index(self) -> usize {
        match self {
            Path::Regulating => 0,
            Path::Trip => 1,
            Path::Latched => 2,
            Path::Other => 3,
            Path::RegulatingRelocating => 4,
            Path::TripRelocating => 5,
            Path::LatchedRelocating => 6,
        }
    }

    /// A short name for reports.
    pub const fn name(self) -> &'static str {
        match self {
            Path::Regulating => "regulating",
            Path::Trip => "fault trip",
            Path::Latched => "latched",
            Path::Other => "start/stop",
            Path::RegulatingRelocating => "regulating, relocating",
            Path::TripRelocating => "sensor trip, relocating",
            Path::LatchedRelocating => "latched, relocating",
        }
    }

    /// Classify a step; `relocating` when the scenario marked it as one
    /// whose temperature reading jumps out of the cached table window.
    pub fn of(
        before: diodestat_core::State,
        after: diodestat_core::State,
        relocating: bool,
    ) -> Path {
        use diodestat_core::State::{Latched, Regulating};
        match (before, after, relocating) {
            (Regulating, Regulating, false) => Path::Regulating,
            (Regulating, Regulating, true) => Path::RegulatingRelocating,
            (Latched, Latched, false) => Path::Latched,
            (Latched, Latched, true) => Path::LatchedRelocating,
            (_, Latched, false) => Path::Trip,
            (_, Latched, true) => Path::TripRelocating,
            _ => Path::Other,
        }
    }
}

/// In-situ statistics of one path.
#[derive(Clone, Copy, Debug, Default)]
pub struct PathStats {
    /// Steps seen.
    pub steps: u32,
    /// Sum of their SysTick counts.
    pub total_counts: u64,
    /// Largest single reading, counts.
    pub worst_counts: u32,
}

impl PathStats {
    /// Add one step measured at `counts`; `true` if it is the slowest so far.
    pub fn add(&mut self, counts: u32) -> bool {
        let first = self.steps == 0;
        self.steps = self.steps.saturating_add(1);
        self.total_counts = self.total_counts.saturating_add(u64::from(counts));
        if first || counts > self.worst_counts {
            self.worst_counts = counts;
            true
        } else {
            false
        }
    }
}

/// Where the rig keeps, per path, the controller as it was before the
/// slowest step and that step's sample, for [`replay_one`].
pub trait Snapshots: Default + core::fmt::Debug {
    /// Whether the rig must clone the controller before every step.
    const KEEP: bool;
    /// Keep `pre` and `sample` as the slowest step of `path`.
    fn put(&mut self, path: Path, pre: &Controller, sample: &Sample);
    /// The slowest step of `path`, if kept.
    fn get(&self, path: Path) -> Option<&(Controller, Sample)>;
}

/// Keep nothing (small RAM: no clone per step, no exact worst case).
#[derive(Debug, Default)]
pub struct NoSnapshots;

impl Snapshots for NoSnapshots {
    const KEEP: bool = false;
    fn put(&mut self, _: Path, _: &Controller, _: &Sample) {}
    fn get(&self, _: Path) -> Option<&(Controller, Sample)> {
        None
    }
}

/// Keep the slowest step of every path.
#[derive(Debug, Default)]
pub struct WorstSnapshots([Option<(Controller, Sample)>; Path::COUNT]);

impl Snapshots for WorstSnapshots {
    const KEEP: bool = true;
    fn put(&mut self, path: Path, pre: &Controller, sample: &Sample) {
        if let Some(slot) = self.0.get_mut(path.index()) {
            *slot = Some((pre.clone(), *sample));
        }
    }
    fn get(&self, path: Path) -> Option<&(Controller, Sample)> {
        self.0.get(path.index()).and_then(Option::as_ref)
    }
}

/// Counts to run `samples` through a clone of `start`, and counts for the
/// same loop without the `step` call.
pub fn replay_block(start: &Controller, samples: &[Sample]) -> (u32, u32) {
    let mut ctl = start.clone();
    let ctl = black_box(&mut ctl);
    let t0 = Stopwatch::now();
    for s in samples {
        black_box(ctl.step(black_box(s)));
    }
    let t1 = Stopwatch::now();
    let mut idle = start.clone();
    let idle = black_box(&mut idle);
    let t2 = Stopwatch::now();
    for s in samples {
        black_box(black_box(s));
        black_box(&mut *idle);
    }
    let t3 = Stopwatch::now();
    (Stopwatch::counts(t0, t1), Stopwatch::counts(t2, t3))
}

/// Counts to run `n` times "clone `pre`, step it on `sample`", and for the
/// same loop without the `step` call.
pub fn replay_one(pre: &Controller, sample: &Sample, n: u32) -> (u32, u32) {
    let t0 = Stopwatch::now();
    for _ in 0..n {
        let mut ctl = pre.clone();
        black_box(black_box(&mut ctl).step(black_box(sample)));
    }
    let t1 = Stopwatch::now();
    let t2 = Stopwatch::now();
    for _ in 0..n {
        let mut ctl = pre.clone();
        black_box(&mut ctl);
        black_box(black_box(sample));
    }
    let t3 = Stopwatch::now();
    (Stopwatch::counts(t0, t1), Stopwatch::counts(t2, t3))
}
