//! The cost summary: instructions per `Controller::step`, per path, from
//! the in-situ readings and the replays of [`crate::cost`].

use core::fmt::Write as _;

use cortex_m_semihosting::hprintln;
use diodestat_core::Sample;

use crate::checks::Checks;
use crate::cost::{replay_block, replay_one, Path, PathStats, Snapshots};
use crate::rig::Recording;
use crate::stopwatch::Stopwatch;

/// Repetitions for the exact replay of one step.
pub const REPEAT_ONE: u32 = 1000;

/// Instructions per tick of one path, all figures times 10.
#[derive(Clone, Copy, Debug, Default)]
pub struct PathCost {
    /// Steps seen in situ.
    pub steps: u32,
    /// In-situ mean (quantised readings averaged), ×10.
    pub insitu_mean_x10: u64,
    /// Mean from a replayed block, ×10.
    pub replay_mean_x10: Option<u64>,
    /// Largest in-situ reading, counts.
    pub worst_counts: u32,
    /// Bound on every step of the path: (worst reading + 1) counts, ×10.
    pub worst_bound_x10: u64,
    /// The slowest-read step replayed exactly (on the paths of
    /// [`Path::replay_every`], the slowest by replay), ×10.
    pub worst_exact_x10: Option<u64>,
}

/// Exact instructions (×10) of one step, replayed from its snapshot.
pub fn exact_x10(sw: &Stopwatch, pre: &diodestat_core::Controller, s: &Sample) -> u64 {
    let (with, without) = replay_one(pre, s, REPEAT_ONE);
    sw.instructions_x(with.saturating_sub(without), 10) / u64::from(REPEAT_ONE)
}

/// Mean instructions (×10) per step over a recording.
pub fn block_mean_x10<const N: usize>(sw: &Stopwatch, rec: &Recording<N>) -> Option<u64> {
    let start = rec.start.as_ref()?;
    let n = u64::try_from(rec.samples.len()).ok().filter(|n| *n > 0)?;
    let (with, without) = replay_block(start, &rec.samples);
    Some(sw.instructions_x(with.saturating_sub(without), 10) / n)
}

/// Repetitions per step in [`block_spread_x10`] (resolution about 2
/// instructions).
pub const REPEAT_EACH: u32 = 50;

/// Every step of a recording replayed exactly ([`REPEAT_EACH`] times
/// each): the fewest and most instructions (×10) of any one step.
pub fn block_spread_x10<const N: usize>(sw: &Stopwatch, rec: &Recording<N>) -> Option<(u64, u64)> {
    let mut ctl = rec.start.as_ref()?.clone();
    let (mut lo, mut hi) = (u64::MAX, 0);
    for s in &rec.samples {
        let (with, without) = replay_one(&ctl, s, REPEAT_EACH);
        let x10 = sw.instructions_x(with.saturating_sub(without), 10) / u64::from(REPEAT_EACH);
        lo = lo.min(x10);
        hi = hi.max(x10);
        ctl.step(s);
    }
    (hi > 0).then_some((lo, hi))
}

/// Summarise the in-situ statistics of one path, replaying its slowest step.
pub fn path_cost(
    sw: &Stopwatch,
    st: &PathStats,
    slowest: Option<&(diodestat_core::Controller, Sample)>,
) -> PathCost {
    let steps = st.steps;
    let mean = if steps == 0 {
        0
    } else {
        let total = u32::try_from(st.total_counts).unwrap_or(u32::MAX);
        sw.instructions_x(total, 10) / u64::from(steps)
    };
    PathCost {
        steps,
        insitu_mean_x10: mean,
        replay_mean_x10: None,
        worst_counts: st.worst_counts,
        worst_bound_x10: sw.instructions_x(st.worst_counts.saturating_add(1), 10),
        worst_exact_x10: slowest.map(|(pre, s)| exact_x10(sw, pre, s)),
    }
}

/// `v / 10` with one decimal.
pub struct Tenths(pub u64);

impl core::fmt::Display for Tenths {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        // Formatted first so that width and alignment apply to the whole.
        let mut s: heapless::String<24> = heapless::String::new();
        let _ = write!(s, "{}.{}", self.0 / 10, self.0 % 10);
        f.pad(&s)
    }
}

struct Opt(Option<u64>);

impl core::fmt::Display for Opt {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self.0 {
            Some(v) => Tenths(v).fmt(f),
            None => f.pad("-"),
        }
    }
}

/// Print one row of the cost table.
pub fn print_row(path: Path, p: &PathCost) {
    hprintln!(
        "  {:<23} {:>6} {:>10} {:>10} {:>6} {:>10} {:>10}",
        path.name(),
        p.steps,
        Opt(p.replay_mean_x10),
        Tenths(p.insitu_mean_x10),
        p.worst_counts,
        Opt(p.worst_exact_x10),
        Tenths(p.worst_bound_x10),
    );
}

/// Print the cost table for the rig's statistics, with the replayed block
/// means of the regulating and latched paths; returns the rows by
/// [`Path::index`].
pub fn print_table<S: Snapshots>(
    sw: &Stopwatch,
    stats: &[PathStats; Path::COUNT],
    snapshots: &S,
    regulating_block_x10: Option<u64>,
    latched_block_x10: Option<u64>,
) -> [PathCost; Path::COUNT] {
    print_heading(sw);
    let mut costs = [PathCost::default(); Path::COUNT];
    for path in Path::ALL {
        let i = path.index();
        if let (Some(cost), Some(st)) = (costs.get_mut(i), stats.get(i)) {
            if path.relocating() && st.steps == 0 {
                continue;
            }
            *cost = path_cost(sw, st, snapshots.get(path));
            cost.replay_mean_x10 = match path {
                Path::Regulating => regulating_block_x10,
                Path::Latched => latched_block_x10,
                _ => None,
            };
            print_row(path, cost);
        }
    }
    hprintln!(
        "  mean (replay): a recorded block re-run on a clone of the controller, less the loop"
    );
    hprintln!("  mean (in situ): the quantised readings around each step, averaged");
    if S::KEEP {
        hprintln!(
            "  worst (exact): the slowest-read step re-run {} times from its snapshot",
            REPEAT_ONE
        );
        hprintln!("  (fault trip and relocating: every step replayed, the slowest of them)");
    }
    hprintln!("  worst (bound): every step of the path is below (largest reading + 1) counts");
    if stats
        .iter()
        .zip(Path::ALL)
        .any(|(st, p)| p.relocating() && st.steps > 0)
    {
        hprintln!(
            "  relocating: the steps on which the temperature reading jumps out of its window"
        );
    }
    costs
}

/// Print the table heading.
pub fn print_heading(sw: &Stopwatch) {
    let (instr, counts) = sw.calibration();
    hprintln!(
        "  1 SysTick count = {} instructions (calibrated: {} instructions in {} counts)",
        Tenths(u64::from(sw.instructions_per_count_x100() / 10)),
        instr,
        counts
    );
    hprintln!(
        "  {:<23} {:>6} {:>10} {:>10} {:>6} {:>10} {:>10}",
        "path",
        "steps",
        "mean",
        "mean",
        "worst",
        "worst",
        "worst"
    );
    hprintln!(
        "  {:<23} {:>6} {:>10} {:>10} {:>6} {:>10} {:>10}",
        "",
        "",
        "(replay)",
        "(in situ)",
        "counts",
        "(exact)",
        "(bound)"
    );
}

fn within(value_x10: u64, limit: u64, strict: bool) -> bool {
    if strict {
        value_x10 < limit * 10
    } else {
        value_x10 <= limit * 10
    }
}

fn relation(strict: bool) -> &'static str {
    if strict {
        "<"
    } else {
        "<="
    }
}

/// Report a figure against a design target (met or missed; not a check).
pub fn target(name: &str, value_x10: u64, limit: u64, strict: bool) -> bool {
    let ok = within(value_x10, limit, strict);
    hprintln!(
        "  target {:<6} {}: {} instructions (target {} {})",
        if ok { "met" } else { "MISSED" },
        name,
        Tenths(value_x10),
        relation(strict),
        limit
    );
    ok
}

/// Check a figure against a regression budget (a failing check above it).
pub fn check_budget(c: &mut Checks, name: &str, value_x10: u64, limit: u64) {
    c.check(
        name,
        within(value_x10, limit, false),
        format_args!("{} instructions (budget <= {})", Tenths(value_x10), limit),
    );
}

/// Repetitions of the mailbox and latch-record measurements.
const REPEAT_SIDE: u32 = 200;

/// Instructions (×10) of `f`, run [`REPEAT_SIDE`] times, less the empty
/// loop, per run.
fn side_cost_x10(sw: &Stopwatch, mut f: impl FnMut(u32)) -> u64 {
    let t0 = Stopwatch::now();
    for i in 0..REPEAT_SIDE {
        f(core::hint::black_box(i));
    }
    let t1 = Stopwatch::now();
    for i in 0..REPEAT_SIDE {
        core::hint::black_box(i);
    }
    let t2 = Stopwatch::now();
    let with = Stopwatch::counts(t0, t1);
    let without = Stopwatch::counts(t1, t2);
    sw.instructions_x(with.saturating_sub(without), 10) / u64::from(REPEAT_SIDE)
}

/// The cost of what runs beside `step`: a request through the mailbox
/// (push in thread mode, pop in the tick) and the latch record (packed on
/// a latch, checked and unpacked at boot). Printed, not budgeted.
pub fn print_side_costs(sw: &Stopwatch) {
    use diodestat_core::{Fx, LatchRecord, Mailbox, Request};
    let mailbox: Mailbox<Request, 4> = Mailbox::new();
    let pair = side_cost_x10(sw, |i| {
        let _ = mailbox.push(Request::SetPower(Fx::from_bits(i as i32)));
        core::hint::black_box(mailbox.pop());
    });
    let rec = LatchRecord::default();
    let pack = side_cost_x10(sw, |_| {
        core::hint::black_box(core::hint::black_box(&rec).to_bytes());
    });
    let bytes = rec.to_bytes();
    let unpack = side_cost_x10(sw, |_| {
        let _ = core::hint::black_box(LatchRecord::from_bytes(core::hint::black_box(&bytes)));
    });
    hprintln!(
        "  mailbox push + pop: {} instructions; latch record pack: {}, check and unpack: {}",
        Tenths(pair),
        Tenths(pack),
        Tenths(unpack)
    );
}
