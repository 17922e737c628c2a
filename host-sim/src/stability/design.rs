//! PI gain design over a set of plant corners.
//!
//! One PI, `C(z) = kp + ki·z/(z-1)`, must serve every corner (cold and hot,
//! threshold and slope spread, tracking-ratio spread, aged diode, derated
//! operating point). Written with its zero `z₀ = kp/(kp+ki) = e^{-ω_z·T}`,
//!
//! ```text
//! C(z) = (kp + ki)·(z - z₀)/(z - 1),   ki/kp = e^{ω_z·T} - 1,
//! ```
//!
//! a crossover `ω_c` and a zero frequency `ω_z` fix the gains: `kp` puts the
//! gain crossover of the reference corner at `ω_c` (by default the corner
//! with the highest loop gain there, so that no corner crosses over above
//! `ω_c`). With the monitor pole and the delays above the crossover, these
//! loops are integral-dominated near crossover and the zero may sit above
//! it (a small `kp` adds lead there but raises the loop gain at the phase
//! crossover, costing gain margin), so the zero is searched over a wide
//! range: from `min_zero_ratio × ω_c` (weaker integral action makes slow
//! tails) up to `z₀ = 0.01` (`kp` at least 1 % of `kp + ki`; the core needs
//! `kp > 0`). The search:
//!
//! 1. at the target crossover, the zero is scanned on a log grid (48
//!    points) and refined by golden section; among the zero locations that
//!    meet PM, GM and closed-loop stability at every corner, the one with
//!    the largest worst-corner stability margin `min |1 + L|` (the smallest
//!    peak sensitivity) is taken;
//! 2. if no zero location meets the margins at the target, the highest
//!    crossover at which one does is found by bisection (log frequency, 25
//!    steps, down to `min_crossover_hz`), and step 1 is done there; if that
//!    is below `min_crossover_hz` the design fails with the best reachable
//!    crossover and the corner and margin that limit it.
//!
//! Bisection assumes feasibility is lost once, as the crossover rises,
//! which holds for these lag-and-delay loops; every returned design is
//! verified at every corner with the gains quantised exactly as the core
//! stores them (`kp` as `Fx`; `ki` entered in mA/(mW·ms) as `Fx` and
//! converted per tick as `Config::validate` does).

use diodestat_core::{Fx, Gain};

use super::loop_model::{open_loop, LoopParams, LoopParamsError};
use super::margins::{margins_with, Margins};

/// Design phase margin, degrees (the worst corner keeps at least this).
pub const DESIGN_PM_DEG: f64 = 60.0;
/// Design gain margin, dB (the worst corner keeps at least this).
pub const DESIGN_GM_DB: f64 = 10.0;

/// Which corner the target crossover refers to.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Reference {
    /// The corner with the highest loop gain at the crossover: no corner
    /// crosses over above the target.
    #[default]
    HighestGain,
    /// The corner with this index (for example the nominal one).
    Corner(usize),
}

/// What the design must achieve.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DesignSpec {
    /// Wanted gain-crossover frequency of the reference corner, Hz.
    pub target_crossover_hz: f64,
    /// Lowest acceptable crossover, Hz (equal to the target: the target
    /// must be met; lower: the highest reachable crossover is accepted).
    pub min_crossover_hz: f64,
    /// Phase margin every corner keeps, degrees.
    pub min_pm_deg: f64,
    /// Gain margin every corner keeps, dB.
    pub min_gm_db: f64,
    /// Lowest PI zero frequency as a fraction of the crossover (weakest
    /// integral action allowed).
    pub min_zero_ratio: f64,
    /// The corner the crossover refers to.
    pub reference: Reference,
}

impl DesignSpec {
    /// Target crossover that must be met, PM ≥ 60°, GM ≥ 10 dB, PI zero not
    /// below a twentieth of the crossover, highest-gain corner as reference.
    pub fn new(target_crossover_hz: f64) -> Self {
        DesignSpec {
            target_crossover_hz,
            min_crossover_hz: target_crossover_hz,
            min_pm_deg: DESIGN_PM_DEG,
            min_gm_db: DESIGN_GM_DB,
            min_zero_ratio: 0.05,
            reference: Reference::HighestGain,
        }
    }
}

/// Which requirement a corner misses.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Limit {
    /// Phase margin below the requirement.
    PhaseMargin {
        /// Achieved, degrees.
        pm_deg: f64,
    },
    /// Gain margin below the requirement.
    GainMargin {
        /// Achieved, dB.
        gm_db: f64,
    },
    /// The closed loop is unstable.
    Unstable,
}

impl std::fmt::Display for Limit {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Limit::PhaseMargin { pm_deg } => write!(f, "phase margin {pm_deg:.2} deg"),
            Limit::GainMargin { gm_db } => write!(f, "gain margin {gm_db:.2} dB"),
            Limit::Unstable => write!(f, "unstable closed loop"),
        }
    }
}

/// Why no gains were returned.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum DesignError {
    /// The corner list is empty.
    #[error("no plant corners given")]
    NoCorners,
    /// A corner's parameters are out of range.
    #[error("corner {index}: {source}")]
    InvalidCorner {
        /// Corner index.
        index: usize,
        /// The problem.
        source: LoopParamsError,
    },
    /// Corners at different tick rates cannot share one PI.
    #[error("corner {index} runs at {tick_hz} Hz, corner 0 at {first_hz} Hz: one PI needs one tick rate")]
    MixedTickRates {
        /// Corner index.
        index: usize,
        /// Its tick rate.
        tick_hz: f64,
        /// Tick rate of corner 0.
        first_hz: f64,
    },
    /// The tick rate is not a whole number of hertz in the core's range.
    #[error("tick rate {tick_hz} Hz is not a whole number in 1..=1000000 Hz as the core needs")]
    TickRate {
        /// Tick rate.
        tick_hz: f64,
    },
    /// The specification is inconsistent.
    #[error("invalid design specification: {0}")]
    InvalidSpec(&'static str),
    /// The reference corner index is out of range.
    #[error("reference corner {index} out of range ({len} corners)")]
    ReferenceOutOfRange {
        /// Requested index.
        index: usize,
        /// Number of corners.
        len: usize,
    },
    /// A crossover at or above the Nyquist frequency is meaningless.
    #[error(
        "target crossover {target_hz:.1} Hz is not below the Nyquist frequency {nyquist_hz:.1} Hz"
    )]
    TargetAboveNyquist {
        /// Target, Hz.
        target_hz: f64,
        /// Nyquist frequency, Hz.
        nyquist_hz: f64,
    },
    /// The target crossover is beyond what delay and poles allow.
    #[error(
        "target crossover {target_hz:.1} Hz not reachable: the highest crossover keeping PM >= \
         {min_pm_deg} deg and GM >= {min_gm_db} dB at every corner is {best_hz:.1} Hz \
         (accepted minimum {min_hz:.1} Hz); above it corner {limiting_corner} fails on {limit}"
    )]
    TargetUnreachable {
        /// Target, Hz.
        target_hz: f64,
        /// Highest reachable crossover, Hz.
        best_hz: f64,
        /// Accepted minimum, Hz.
        min_hz: f64,
        /// Required phase margin, degrees.
        min_pm_deg: f64,
        /// Required gain margin, dB.
        min_gm_db: f64,
        /// The corner that limits.
        limiting_corner: usize,
        /// What it misses just above `best_hz`.
        limit: Limit,
    },
    /// Not even a very low crossover meets the margins.
    #[error(
        "no PI gains meet the margins even at a {lowest_hz:.3} Hz crossover: corner \
         {limiting_corner} fails on {limit}"
    )]
    NoFeasibleGains {
        /// Lowest crossover tried, Hz.
        lowest_hz: f64,
        /// The corner that fails there.
        limiting_corner: usize,
        /// What it misses.
        limit: Limit,
    },
    /// No gains that keep the margins reach the closed-loop bandwidth.
    #[error(
        "target bandwidth {target_hz:.1} Hz not reachable: the highest closed-loop bandwidth of \
         the slowest corner keeping PM >= {min_pm_deg} deg and GM >= {min_gm_db} dB at every \
         corner is {best_hz:.1} Hz"
    )]
    BandwidthUnreachable {
        /// Target, Hz.
        target_hz: f64,
        /// Highest reachable bandwidth of the slowest corner, Hz.
        best_hz: f64,
        /// Required phase margin, degrees.
        min_pm_deg: f64,
        /// Required gain margin, dB.
        min_gm_db: f64,
    },
    /// The gains do not fit the core's fixed-point formats.
    #[error("gains kp {kp} mA/mW, ki {ki_per_tick} mA/mW per tick do not fit the core's fixed-point formats")]
    NotRepresentable {
        /// Proportional gain.
        kp: f64,
        /// Integral gain per tick.
        ki_per_tick: f64,
    },
}

/// Margins of one corner under the designed gains.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CornerMargins {
    /// Corner index.
    pub index: usize,
    /// Its margins.
    pub margins: Margins,
    /// Meets the specification.
    pub meets: bool,
}

/// The designed gains and what they achieve.
#[derive(Clone, Debug, PartialEq)]
pub struct Design {
    /// Proportional gain as the core stores it (`Fx`).
    pub kp: Fx,
    /// Integral gain for `ApcGains::ki_ma_per_mw_ms` (`Fx`).
    pub ki_ma_per_mw_ms: Fx,
    /// Integral gain per tick as `Config::validate` derives it (`Gain`).
    pub ki_per_tick: Gain,
    /// `kp` as `f64`, mA/mW.
    pub kp_ma_per_mw: f64,
    /// `ki_per_tick` as `f64`.
    pub ki_per_tick_f64: f64,
    /// PI zero frequency, Hz.
    pub zero_hz: f64,
    /// Achieved gain crossover of the reference corner, Hz.
    pub crossover_hz: f64,
    /// The crossover reached the target (within 0.5 %).
    pub target_met: bool,
    /// Per-corner margins, in input order.
    pub corners: Vec<CornerMargins>,
    /// Smallest phase margin over the corners, degrees.
    pub worst_pm_deg: f64,
    /// Smallest gain margin over the corners, dB.
    pub worst_gm_db: f64,
}

impl Design {
    /// A corner with these gains.
    pub fn apply(&self, p: &LoopParams) -> LoopParams {
        p.with_gains(self.kp_ma_per_mw, self.ki_per_tick_f64)
    }
}

/// `ki` per tick from `ki` in mA/(mW·ms), as `Config::validate` computes it
/// (`ki_ms × 1000 / tick_hz` with 24 fractional bits, truncating).
pub fn core_ki_per_tick(ki_ma_per_mw_ms: Fx, tick_hz: u32) -> Option<Gain> {
    if tick_hz == 0 {
        return None;
    }
    let bits = i64::from(ki_ma_per_mw_ms.to_bits()).checked_mul(1000 << 8)? / i64::from(tick_hz);
    let g = Gain::from_bits(i32::try_from(bits).ok()?);
    if ki_ma_per_mw_ms > Fx::ZERO && g == Gain::ZERO {
        return None;
    }
    Some(g)
}

/// Smallest PI zero `z₀ = kp/(kp+ki)` searched (`kp` ≥ 1 % of `kp + ki`).
const Z0_MIN: f64 = 0.01;
/// Points of the zero-location grid.
const N_GRID: usize = 48;

#[derive(Clone)]
struct Trial {
    kp: f64,
    ki: f64,
    margins: Vec<Margins>,
    fail: Option<(usize, Limit)>,
}

impl Trial {
    /// Worst-corner stability margin (the selection score).
    fn score(&self) -> f64 {
        self.margins
            .iter()
            .map(|m| m.sm)
            .fold(f64::INFINITY, f64::min)
    }
}

struct Ctx<'a> {
    corners: &'a [LoopParams],
    spec: &'a DesignSpec,
    dt: f64,
}

impl Ctx<'_> {
    fn judge(&self, ms: &[Margins]) -> Option<(usize, Limit)> {
        let s = self.spec;
        if let Some(i) = ms.iter().position(|m| !m.closed_loop_stable) {
            return Some((i, Limit::Unstable));
        }
        let worst_pm = ms
            .iter()
            .enumerate()
            .filter(|(_, m)| m.pm_deg.is_nan() || m.pm_deg < s.min_pm_deg)
            .min_by(|a, b| a.1.pm_deg.total_cmp(&b.1.pm_deg));
        if let Some((i, m)) = worst_pm {
            return Some((i, Limit::PhaseMargin { pm_deg: m.pm_deg }));
        }
        ms.iter()
            .enumerate()
            .filter(|(_, m)| m.gm_db.is_nan() || m.gm_db < s.min_gm_db)
            .min_by(|a, b| a.1.gm_db.total_cmp(&b.1.gm_db))
            .map(|(i, m)| (i, Limit::GainMargin { gm_db: m.gm_db }))
    }

    fn evaluate(&self, kp: f64, ki: f64, bandwidth: bool) -> Trial {
        let ms: Vec<Margins> = self
            .corners
            .iter()
            .map(|c| margins_with(&open_loop(&c.with_gains(kp, ki)), bandwidth))
            .collect();
        Trial {
            kp,
            ki,
            fail: self.judge(&ms),
            margins: ms,
        }
    }

    /// Gains for crossover `wc` (rad/s) and zero `u = ω_z·T = -ln z₀`.
    fn gains(&self, wc: f64, u: f64) -> (f64, f64) {
        let r = u.exp_m1();
        let mut mags = self
            .corners
            .iter()
            .map(|c| open_loop(&c.with_gains(1.0, r)).freq_response(wc).abs());
        let m = match self.spec.reference {
            Reference::HighestGain => mags.fold(0.0, f64::max),
            Reference::Corner(k) => mags.nth(k).unwrap_or(f64::NAN),
        };
        let kp = 1.0 / m;
        (kp, kp * r)
    }

    fn trial(&self, wc: f64, u: f64) -> Trial {
        let (kp, ki) = self.gains(wc, u);
        self.evaluate(kp, ki, false)
    }

    /// The zero grid at crossover `wc`, in `u = ω_z·T`.
    fn grid(&self, wc: f64) -> Vec<f64> {
        let hi = -Z0_MIN.ln();
        let lo = (self.spec.min_zero_ratio * wc * self.dt).min(hi);
        let (a, b) = (lo.ln(), hi.ln());
        (0..N_GRID)
            .map(|i| (a + (b - a) * i as f64 / (N_GRID - 1) as f64).exp())
            .collect()
    }

    /// Some zero location meets the margins at `wc`: `Ok(u)`; otherwise
    /// the failure of the grid point with the best score.
    fn feasible(&self, wc: f64) -> Result<f64, (usize, Limit)> {
        let mut best: Option<Trial> = None;
        for u in self.grid(wc) {
            let t = self.trial(wc, u);
            if t.fail.is_none() {
                return Ok(u);
            }
            if best.as_ref().is_none_or(|b| t.score() > b.score()) {
                best = Some(t);
            }
        }
        Err(best.and_then(|t| t.fail).unwrap_or((0, Limit::Unstable)))
    }

    /// The feasible zero location with the largest score at `wc`.
    fn best_zero(&self, wc: f64) -> Option<f64> {
        let grid = self.grid(wc);
        let score = |u: f64| {
            let t = self.trial(wc, u);
            if t.fail.is_none() {
                t.score()
            } else {
                f64::NEG_INFINITY
            }
        };
        let scores: Vec<f64> = grid.iter().map(|u| score(*u)).collect();
        let (i, s) = scores
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))?;
        if !s.is_finite() {
            return None;
        }
        // Golden-section refinement between the neighbours (log u).
        let lo = grid[i.saturating_sub(1)].ln();
        let hi = grid[(i + 1).min(grid.len() - 1)].ln();
        let g = (5f64.sqrt() - 1.0) / 2.0;
        let (mut a, mut b) = (lo, hi);
        let (mut c, mut d) = (b - g * (b - a), a + g * (b - a));
        let (mut fc, mut fd) = (score(c.exp()), score(d.exp()));
        for _ in 0..20 {
            if fc > fd {
                b = d;
                d = c;
                fd = fc;
                c = b - g * (b - a);
                fc = score(c.exp());
            } else {
                a = c;
                c = d;
                fc = fd;
                d = a + g * (b - a);
                fd = score(d.exp());
            }
        }
        let (u, su) = if fc > fd {
            (c.exp(), fc)
        } else {
            (d.exp(), fd)
        };
        Some(if su > *s { u } else { grid[i] })
    }

    fn crossover_of(&self, t: &Trial) -> f64 {
        match self.spec.reference {
            Reference::HighestGain => t
                .margins
                .iter()
                .map(|m| m.wcp_rad_s)
                .filter(|w| w.is_finite())
                .fold(0.0, f64::max),
            Reference::Corner(k) => t.margins[k].wcp_rad_s,
        }
    }
}

fn check_inputs(corners: &[LoopParams], spec: &DesignSpec) -> Result<u32, DesignError> {
    let first = corners.first().ok_or(DesignError::NoCorners)?;
    for (index, c) in corners.iter().enumerate() {
        c.validate()
            .map_err(|source| DesignError::InvalidCorner { index, source })?;
        if c.tick_hz != first.tick_hz {
            return Err(DesignError::MixedTickRates {
                index,
                tick_hz: c.tick_hz,
                first_hz: first.tick_hz,
            });
        }
    }
    let t = first.tick_hz;
    if !(t.fract() == 0.0 && (1.0..=1_000_000.0).contains(&t)) {
        return Err(DesignError::TickRate { tick_hz: t });
    }
    let pos = |v: f64| v > 0.0 && v.is_finite();
    if !pos(spec.target_crossover_hz) {
        return Err(DesignError::InvalidSpec(
            "target crossover must be positive",
        ));
    }
    if !(pos(spec.min_crossover_hz) && spec.min_crossover_hz <= spec.target_crossover_hz) {
        return Err(DesignError::InvalidSpec(
            "minimum crossover must be positive and not above the target",
        ));
    }
    if !pos(spec.min_zero_ratio) {
        return Err(DesignError::InvalidSpec(
            "minimum zero ratio must be positive",
        ));
    }
    if !(spec.min_pm_deg.is_finite() && spec.min_gm_db.is_finite()) {
        return Err(DesignError::InvalidSpec(
            "margin requirements must be finite",
        ));
    }
    if let Reference::Corner(index) = spec.reference {
        if index >= corners.len() {
            return Err(DesignError::ReferenceOutOfRange {
                index,
                len: corners.len(),
            });
        }
    }
    let nyq = t / 2.0;
    if spec.target_crossover_hz >= nyq {
        return Err(DesignError::TargetAboveNyquist {
            target_hz: spec.target_crossover_hz,
            nyquist_hz: nyq,
        });
    }
    Ok(t as u32)
}

/// Quantises `(kp, ki)` as the core stores them.
fn quantise(kp: f64, ki: f64, tick_hz: u32) -> Option<(Fx, Fx, Gain)> {
    let kp_fx = Fx::checked_from_num(kp)?;
    let ki_ms = Fx::checked_from_num(ki * f64::from(tick_hz) / 1000.0)?;
    let ki_tick = core_ki_per_tick(ki_ms, tick_hz)?;
    (kp_fx > Fx::ZERO).then_some((kp_fx, ki_ms, ki_tick))
}

/// Designs `(kp, ki_per_tick)` for all `corners` (their own gains are
/// ignored) to `spec`; see the module documentation for the method.
pub fn design_pi(corners: &[LoopParams], spec: &DesignSpec) -> Result<Design, DesignError> {
    let tick_hz = check_inputs(corners, spec)?;
    let ctx = Ctx {
        corners,
        spec,
        dt: corners[0].dt_s(),
    };
    let two_pi = 2.0 * std::f64::consts::PI;
    let wt = two_pi * spec.target_crossover_hz;
    let wmin = two_pi * spec.min_crossover_hz;

    let unreachable =
        |best_hz: f64, (limiting_corner, limit): (usize, Limit)| DesignError::TargetUnreachable {
            target_hz: spec.target_crossover_hz,
            best_hz,
            min_hz: spec.min_crossover_hz,
            min_pm_deg: spec.min_pm_deg,
            min_gm_db: spec.min_gm_db,
            limiting_corner,
            limit,
        };

    let wc = match ctx.feasible(wt) {
        Ok(_) => wt,
        Err(fail_at_target) => {
            // Highest feasible crossover below the target.
            let wlo = (wt * 1e-4).min(wmin);
            if let Err((i, limit)) = ctx.feasible(wlo) {
                return Err(DesignError::NoFeasibleGains {
                    lowest_hz: wlo / two_pi,
                    limiting_corner: i,
                    limit,
                });
            }
            let (mut lo, mut hi) = (wlo.ln(), wt.ln());
            let mut fail_above = fail_at_target;
            for _ in 0..25 {
                let mid = 0.5 * (lo + hi);
                match ctx.feasible(mid.exp()) {
                    Ok(_) => lo = mid,
                    Err(f) => {
                        hi = mid;
                        fail_above = f;
                    }
                }
            }
            let best = lo.exp();
            if best < wmin * (1.0 - 1e-9) {
                return Err(unreachable(best / two_pi, fail_above));
            }
            best
        }
    };

    // Best zero, quantise and verify; back off slightly if rounding lost a
    // margin.
    let mut wc_try = wc;
    let mut last_fail = (0, Limit::Unstable);
    for _ in 0..50 {
        let Some(u) = ctx.best_zero(wc_try) else {
            wc_try *= 0.999;
            continue;
        };
        let (kp, ki) = ctx.gains(wc_try, u);
        let (kp_fx, ki_ms, ki_tick) =
            quantise(kp, ki, tick_hz).ok_or(DesignError::NotRepresentable {
                kp,
                ki_per_tick: ki,
            })?;
        let t = ctx.evaluate(kp_fx.to_num(), ki_tick.to_num(), true);
        match t.fail {
            None => {
                let crossover = ctx.crossover_of(&t) / two_pi;
                let corners_out: Vec<CornerMargins> = t
                    .margins
                    .iter()
                    .enumerate()
                    .map(|(index, m)| CornerMargins {
                        index,
                        margins: *m,
                        meets: m.meets(spec.min_pm_deg, spec.min_gm_db),
                    })
                    .collect();
                let worst_pm = t
                    .margins
                    .iter()
                    .map(|m| m.pm_deg)
                    .fold(f64::INFINITY, f64::min);
                let worst_gm = t
                    .margins
                    .iter()
                    .map(|m| m.gm_db)
                    .fold(f64::INFINITY, f64::min);
                let r = t.ki / t.kp;
                return Ok(Design {
                    kp: kp_fx,
                    ki_ma_per_mw_ms: ki_ms,
                    ki_per_tick: ki_tick,
                    kp_ma_per_mw: t.kp,
                    ki_per_tick_f64: t.ki,
                    zero_hz: r.ln_1p() / ctx.dt / two_pi,
                    crossover_hz: crossover,
                    target_met: crossover >= spec.target_crossover_hz * 0.995,
                    corners: corners_out,
                    worst_pm_deg: worst_pm,
                    worst_gm_db: worst_gm,
                });
            }
            Some(f) => last_fail = f,
        }
        wc_try *= 0.999;
    }
    Err(unreachable(wc_try / two_pi, last_fail))
}

impl Design {
    /// Closed-loop bandwidth of the slowest corner, Hz.
    pub fn min_bandwidth_hz(&self) -> f64 {
        self.corners
            .iter()
            .map(|c| c.margins.bandwidth_hz)
            .fold(f64::INFINITY, f64::min)
    }
}

/// Relative tolerance of a bandwidth target: the slowest corner's
/// closed-loop bandwidth lands in `[target, target × (1 + BANDWIDTH_TOL)]`.
pub const BANDWIDTH_TOL: f64 = 0.01;

/// Designs `(kp, ki_per_tick)` so that the slowest corner's closed-loop
/// bandwidth reaches `target_bandwidth_hz` (and exceeds it by at most
/// [`BANDWIDTH_TOL`]) with the margins of `spec` at every corner (the
/// crossover fields of `spec` are ignored).
///
/// The design family is [`design_pi`] over the crossover. Near the highest
/// crossover that keeps the margins the PI zero moves fast and the
/// bandwidth rises several times faster than the crossover, so a plain
/// ratio correction overshoots: the crossover is bracketed (one design
/// below the target bandwidth, one at or above it) and the bracket is
/// narrowed by interpolation, safeguarded by bisection in log frequency,
/// until the upper design lies within the tolerance. The highest reachable
/// crossover is that of [`design_pi`]; since the design there (its zero,
/// the quantisation back-off) changes quickly, the last 1 % of crossover
/// below it is scanned (7 designs), and the highest bandwidth of every
/// design tried is reported when the target is out of reach.
pub fn design_for_bandwidth(
    corners: &[LoopParams],
    target_bandwidth_hz: f64,
    spec: &DesignSpec,
) -> Result<Design, DesignError> {
    if !(target_bandwidth_hz > 0.0 && target_bandwidth_hz.is_finite()) {
        return Err(DesignError::InvalidSpec(
            "target bandwidth must be positive",
        ));
    }
    let tick_hz = corners.first().ok_or(DesignError::NoCorners)?.tick_hz;
    let at = |f_hz: f64| {
        design_pi(
            corners,
            &DesignSpec {
                target_crossover_hz: f_hz,
                min_crossover_hz: f_hz,
                ..*spec
            },
        )
    };
    let target = target_bandwidth_hz;
    let unreachable = |best_hz| DesignError::BandwidthUnreachable {
        target_hz: target,
        best_hz,
        min_pm_deg: spec.min_pm_deg,
        min_gm_db: spec.min_gm_db,
    };
    // Highest crossover the margins allow (and below the Nyquist limit).
    let mut ceiling_hz = 0.45 * tick_hz;
    let mut ceiling_scanned = false;
    // Highest bandwidth of any design tried.
    let mut best_bw = f64::NAN;
    // Crossovers asked with the bandwidth of their design, and the lowest
    // crossover whose design reaches the target.
    let mut tried: Vec<(f64, f64)> = Vec::new();
    let mut above: Option<(f64, Design)> = None;
    let mut pending: Vec<f64> = vec![target.min(ceiling_hz)];
    for _ in 0..80 {
        let Some(f) = pending.pop() else { break };
        let d = match at(f) {
            Ok(d) => d,
            Err(DesignError::TargetUnreachable { best_hz, .. }) if !ceiling_scanned => {
                // Near the highest crossover the design (its zero, the
                // quantisation back-off) changes quickly: scan just below
                // it so that the highest bandwidth is not missed.
                ceiling_hz = best_hz;
                ceiling_scanned = true;
                pending
                    .extend([0.99, 0.993, 0.996, 0.998, 0.999, 0.9995, 1.0].map(|k| k * best_hz));
                continue;
            }
            Err(e @ DesignError::TargetUnreachable { .. }) if best_bw.is_nan() => return Err(e),
            Err(DesignError::TargetUnreachable { .. }) => continue,
            Err(e) => return Err(e),
        };
        let bw = d.min_bandwidth_hz();
        best_bw = best_bw.max(bw);
        tried.push((f, bw));
        if bw >= target {
            if bw <= (1.0 + BANDWIDTH_TOL) * target {
                return Ok(d);
            }
            if above.as_ref().is_none_or(|(fa, _)| f < *fa) {
                above = Some((f, d));
            }
        }
        if !pending.is_empty() {
            continue;
        }
        // The highest crossover below the lowest one that reaches the
        // target, among those that do not.
        let fa = above.as_ref().map(|(fa, _)| *fa);
        let below = tried
            .iter()
            .filter(|(fb, bb)| *bb < target && fa.is_none_or(|fa| *fb < fa))
            .max_by(|a, b| a.0.total_cmp(&b.0))
            .copied();
        let next = match (below, &above) {
            (Some((fb, bb)), Some((fa, da))) => {
                let ba = da.min_bandwidth_hz();
                let (lb, la) = (fb.ln(), fa.ln());
                if la - lb < 1e-7 {
                    break;
                }
                // Interpolate in log-log toward the middle of the
                // tolerance, kept inside the middle 80 % of the bracket.
                let goal = (target * (1.0 + 0.5 * BANDWIDTH_TOL)).ln();
                let x = lb + (la - lb) * (goal - bb.ln()) / (ba.ln() - bb.ln());
                let x = if x.is_finite() { x } else { 0.5 * (lb + la) };
                x.clamp(lb + 0.1 * (la - lb), la - 0.1 * (la - lb)).exp()
            }
            (None, Some((fa, da))) => fa * (target / da.min_bandwidth_hz()).min(0.98),
            (Some((fb, bb)), None) => {
                if ceiling_scanned || fb >= ceiling_hz * (1.0 - 1e-9) {
                    return Err(unreachable(best_bw));
                }
                (fb * (target / bb) * 1.002).min(ceiling_hz)
            }
            (None, None) => break,
        };
        pending.push(next);
    }
    // The bracket closed on a jump of the bandwidth: the lowest design at
    // or above the target.
    above.map(|(_, d)| d).ok_or_else(|| unreachable(best_bw))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn corner(slope: f64, monitor_gain: f64) -> LoopParams {
        LoopParams {
            tick_hz: 20_000.0,
            kp_ma_per_mw: 0.0,
            ki_per_tick: 0.0,
            dac_gain: 1.0,
            driver_bandwidth_hz: 200_000.0,
            slope_mw_per_ma: slope,
            monitor_gain,
            monitor_filter_hz: 5_000.0,
            delay_ticks: 1,
        }
    }

    #[test]
    fn core_ki_conversion_matches_the_formula() {
        // 3 mA/(mW ms) at 20 kHz is 0.15 per tick.
        let g = core_ki_per_tick(Fx::from_num(3), 20_000).unwrap();
        assert!((g.to_num::<f64>() - 0.15).abs() < 1e-7);
        assert_eq!(core_ki_per_tick(Fx::from_num(3), 0), None);
        // Too small to represent per tick.
        assert_eq!(core_ki_per_tick(Fx::from_bits(1), 1_000_000), None);
    }

    #[test]
    fn rejects_bad_input() {
        assert_eq!(
            design_pi(&[], &DesignSpec::new(500.0)),
            Err(DesignError::NoCorners)
        );
        let e = design_pi(&[corner(0.9, 1.0)], &DesignSpec::new(10_000.0)).unwrap_err();
        assert!(matches!(e, DesignError::TargetAboveNyquist { .. }), "{e}");
        let mut c2 = corner(0.9, 1.0);
        c2.tick_hz = 10_000.0;
        let e = design_pi(&[corner(0.9, 1.0), c2], &DesignSpec::new(500.0)).unwrap_err();
        assert!(
            matches!(e, DesignError::MixedTickRates { index: 1, .. }),
            "{e}"
        );
        let spec = DesignSpec {
            reference: Reference::Corner(3),
            ..DesignSpec::new(500.0)
        };
        assert!(matches!(
            design_pi(&[corner(0.9, 1.0)], &spec),
            Err(DesignError::ReferenceOutOfRange { index: 3, len: 1 })
        ));
    }
}
