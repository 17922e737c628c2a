//! The closed loop: plant sample → `Controller::step` → plant advance, once
//! per tick, with the cost of every `step` read from SysTick and the state
//! transitions recorded for the checks.

use diodestat_core::{Controller, Drive, Fx, Sample, State};

use crate::cost::{replay_one, Path, PathStats, Snapshots, WorstSnapshots};
use crate::plant::Plant;
use crate::stopwatch::Stopwatch;

/// Longest state sequence kept.
pub const TRACE_LEN: usize = 32;

/// A recording of consecutive samples and the controller as it was before
/// the first one, for [`crate::cost::replay_block`].
#[derive(Debug)]
pub struct Recording<const N: usize> {
    /// The controller before the first sample.
    pub start: Option<Controller>,
    /// The samples, in order.
    pub samples: heapless::Vec<Sample, N>,
}

impl<const N: usize> Recording<N> {
    /// An empty recording.
    pub const fn new() -> Self {
        Recording {
            start: None,
            samples: heapless::Vec::new(),
        }
    }
}

impl<const N: usize> Default for Recording<N> {
    fn default() -> Self {
        Self::new()
    }
}

/// Controller, plant and bookkeeping; `S` keeps the slowest steps for
/// exact replay (or not, on small RAM).
#[derive(Debug)]
pub struct Rig<S: Snapshots = WorstSnapshots> {
    /// The controller under test.
    pub ctl: Controller,
    /// The plant model.
    pub plant: Plant,
    tick: u32,
    /// The last sample and the drive returned for it.
    pub last: (Sample, Drive),
    /// States entered, in order, since [`Rig::clear_trace`] (the state at
    /// that moment first).
    pub trace: heapless::Vec<State, TRACE_LEN>,
    /// Highest drive commanded since [`Rig::clear_peaks`], mA.
    pub peak_drive_ma: Fx,
    /// Highest DAC code written since [`Rig::clear_peaks`].
    pub peak_dac: u16,
    /// In-situ cost per [`Path`].
    pub stats: [PathStats; Path::COUNT],
    /// The slowest step of each path.
    pub snapshots: S,
    /// Replay counts of the slowest step of each path whose every step is
    /// replayed ([`Path::replay_every`]).
    replayed_worst: [u32; Path::COUNT],
}

/// Repetitions of the replay that picks the slowest step of a path whose
/// every step is replayed (resolution 0.4 instructions).
const PICK_REPEAT: u32 = 100;

impl<S: Snapshots> Rig<S> {
    /// A rig at tick 0.
    pub fn new(ctl: Controller, plant: Plant) -> Self {
        let mut rig = Rig {
            ctl,
            plant,
            tick: 0,
            last: (Sample::default(), Drive::default()),
            trace: heapless::Vec::new(),
            peak_drive_ma: Fx::ZERO,
            peak_dac: 0,
            stats: Default::default(),
            snapshots: S::default(),
            replayed_worst: [0; Path::COUNT],
        };
        rig.clear_trace();
        rig
    }

    /// Tick index of the next sample.
    pub fn tick_index(&self) -> u32 {
        self.tick
    }

    /// Start a new state trace from the present state.
    pub fn clear_trace(&mut self) {
        self.trace.clear();
        let _ = self.trace.push(self.ctl.state());
    }

    /// Forget the drive peaks.
    pub fn clear_peaks(&mut self) {
        self.peak_drive_ma = Fx::ZERO;
        self.peak_dac = 0;
    }

    /// One tick; returns the drive.
    pub fn tick(&mut self) -> Drive {
        self.tick_marked(false)
    }

    /// One tick whose temperature reading the scenario has made jump out
    /// of the cached table window: the step is filed under the relocating
    /// paths. With snapshots kept, every step of these paths and of the
    /// trip path ([`Path::replay_every`], a few steps each) is replayed on
    /// the spot and the slowest by replay (not by its quantised reading)
    /// is kept, so their exact worst is that of every step.
    pub fn tick_relocating(&mut self) -> Drive {
        self.tick_marked(true)
    }

    fn tick_marked(&mut self, relocating: bool) -> Drive {
        let sample = self.plant.sample(self.tick);
        let before = self.ctl.state();
        let pre = if S::KEEP {
            Some(self.ctl.clone())
        } else {
            None
        };
        let t0 = Stopwatch::now();
        let drive = self.ctl.step(&sample);
        let t1 = Stopwatch::now();
        let path = Path::of(before, drive.status.state, relocating);
        let slowest = self
            .stats
            .get_mut(path.index())
            .is_some_and(|st| st.add(Stopwatch::counts(t0, t1)));
        if let Some(pre) = pre.as_ref() {
            if path.replay_every() {
                let (with, without) = replay_one(pre, &sample, PICK_REPEAT);
                let counts = with.saturating_sub(without);
                if let Some(w) = self.replayed_worst.get_mut(path.index()) {
                    if counts >= *w {
                        *w = counts;
                        self.snapshots.put(path, pre, &sample);
                    }
                }
            } else if slowest {
                self.snapshots.put(path, pre, &sample);
            }
        }
        if self.trace.last() != Some(&drive.status.state) {
            // A full trace keeps its first entries; the checks see the overflow
            // as a mismatch.
            let _ = self.trace.push(drive.status.state);
        }
        self.peak_drive_ma = self.peak_drive_ma.max(self.ctl.drive_iu());
        self.peak_dac = self.peak_dac.max(drive.dac_code);
        self.plant.advance(&drive);
        self.tick = self.tick.wrapping_add(1);
        self.last = (sample, drive);
        drive
    }

    /// Run `n` ticks.
    pub fn run(&mut self, n: u32) {
        for _ in 0..n {
            self.tick();
        }
    }

    /// Run until `done` holds for the drive (returns the ticks taken,
    /// counting the one where it held) or `max` ticks have passed (`None`).
    pub fn run_until(
        &mut self,
        max: u32,
        mut done: impl FnMut(&Self, &Drive) -> bool,
    ) -> Option<u32> {
        for n in 1..=max {
            let d = self.tick();
            if done(self, &d) {
                return Some(n);
            }
        }
        None
    }

    /// Run and record every sample until the recording is full.
    pub fn record<const N: usize>(&mut self, rec: &mut Recording<N>) {
        rec.start = Some(self.ctl.clone());
        rec.samples.clear();
        while !rec.samples.is_full() {
            self.tick();
            let _ = rec.samples.push(self.last.0);
        }
    }
}
