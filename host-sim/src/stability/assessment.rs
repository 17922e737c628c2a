//! One board's power loop, assessed at every plant corner: margins of the
//! linearised loop ([`super::corners`]), step and ambient responses and
//! limit cycles on the nonlinear simulator ([`super::time_domain`]), the
//! worst corner, the findings against the pass lines, a Markdown report and
//! Bode plots.
//!
//! The worst corner is the one with the smallest stability margin
//! `s_m = min |1 + L(e^{jωT})|` (the distance of the Nyquist curve from
//! -1, the inverse of the peak sensitivity); an unstable corner is worse
//! than any stable one. One figure bounds both classical margins:
//! `GM ≥ 1/(1 - s_m)` and `PM ≥ 2·arcsin(s_m/2)` (S. Skogestad and
//! I. Postlethwaite, *Multivariable Feedback Control*, 2nd ed., Wiley
//! 2005, sec. 2.4.3; equation numbers from memory).
//!
//! Pass lines: phase margin ≥ 45° and gain margin ≥ 6 dB (common
//! practice), overshoot of the optical power no more than the configured
//! limit (10 % unless set; our choice), no limit cycle and no fault latched
//! during the step tests. Corners whose setpoint needs more current than the
//! ceiling are listed as not regulating; they do not fail (a capability
//! limit, not a stability one), and their steps are not judged.

use crate::units::Scale;
use std::fmt;
use std::path::Path;

use diodestat_core::ValidConfig;

use crate::plant::DemoModule;
use crate::safety::SAFETY_CAUTION;

use super::bode::{write_bode_svg, BodeError, BodeLoop};
use super::corners::{
    analyse_corners, gate, markdown as margins_table, standard_corners, CornerAnalysis,
    CornerError, CornerOptions,
};
use super::loop_model::open_loop;
use super::margins::{PASS_GM_DB, PASS_PM_DEG};
use super::time_domain::{corner_responses, CornerResponse, StepPlan, TimeDomainError};

/// Default overshoot limit of the optical power, % of the step (our
/// choice).
pub const DEFAULT_MAX_OVERSHOOT_PCT: f64 = 10.0;

/// What a corner must meet.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PassLines {
    /// Smallest phase margin, degrees.
    pub min_pm_deg: f64,
    /// Smallest gain margin, dB.
    pub min_gm_db: f64,
    /// Largest overshoot of the optical power, % of the step.
    pub max_overshoot_pct: f64,
}

impl Default for PassLines {
    /// 45°, 6 dB (common practice), 10 % overshoot (our choice).
    fn default() -> Self {
        PassLines {
            min_pm_deg: PASS_PM_DEG,
            min_gm_db: PASS_GM_DB,
            max_overshoot_pct: DEFAULT_MAX_OVERSHOOT_PCT,
        }
    }
}

/// The setpoint the corners are analysed at unless one is given: two
/// thirds of the configuration's highest setpoint (our choice: a working
/// point with headroom below the rated power).
pub fn default_setpoint_mw(cfg: &ValidConfig) -> f64 {
    let c = cfg.config();
    c.units().mw(c.power.max_setpoint_ou) * 2.0 / 3.0
}

/// What a failing corner misses.
#[derive(Clone, Debug, PartialEq)]
pub enum Figure {
    /// The linearised closed loop is unstable.
    Unstable,
    /// Phase margin below the line.
    PhaseMargin {
        /// Achieved, degrees.
        pm_deg: f64,
        /// Line, degrees.
        min_deg: f64,
    },
    /// Gain margin below the line.
    GainMargin {
        /// Achieved, dB.
        gm_db: f64,
        /// Line, dB.
        min_db: f64,
    },
    /// Overshoot above the limit.
    Overshoot {
        /// Which step, for example "step 20.000 -> 16.000 mW".
        step: String,
        /// Achieved, %.
        pct: f64,
        /// Limit, %.
        max_pct: f64,
    },
    /// A limit cycle in a steady hold.
    LimitCycle {
        /// Which hold.
        hold: &'static str,
        /// Frequency, Hz.
        freq_hz: f64,
        /// Peak to peak, mW.
        pp_mw: f64,
        /// Peak to peak, DAC steps.
        pp_steps: f64,
    },
    /// The core latched a fault during the step tests.
    Fault {
        /// The fault name.
        fault: &'static str,
    },
}

impl fmt::Display for Figure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Figure::Unstable => write!(f, "linearised closed loop unstable"),
            Figure::PhaseMargin { pm_deg, min_deg } => {
                write!(f, "phase margin {pm_deg:.1} deg is below {min_deg} deg")
            }
            Figure::GainMargin { gm_db, min_db } => {
                write!(f, "gain margin {gm_db:.1} dB is below {min_db} dB")
            }
            Figure::Overshoot { step, pct, max_pct } => {
                write!(f, "overshoot {pct:.1} % is above {max_pct} % ({step})")
            }
            Figure::LimitCycle {
                hold,
                freq_hz,
                pp_mw,
                pp_steps,
            } => write!(
                f,
                "limit cycle at {freq_hz:.0} Hz, {pp_mw:.4} mW peak to peak ({pp_steps:.1} DAC steps) {hold}"
            ),
            Figure::Fault { fault } => write!(f, "fault {fault} latched during the step tests"),
        }
    }
}

/// One failed check.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    /// Board configuration name.
    pub board: String,
    /// Corner name.
    pub corner: String,
    /// What it misses.
    pub figure: Figure,
}

impl fmt::Display for Finding {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "board {}, corner {}: {}",
            self.board, self.corner, self.figure
        )
    }
}

/// Why a board could not be assessed.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum AssessError {
    /// A corner's loop could not be built.
    #[error("board {board}: {source}")]
    Corner {
        /// Board name.
        board: String,
        /// The problem.
        source: CornerError,
    },
    /// A time-domain run could not be made.
    #[error("board {board}: {source}")]
    TimeDomain {
        /// Board name.
        board: String,
        /// The problem.
        source: TimeDomainError,
    },
}

/// A board's loop at every corner.
#[derive(Clone, Debug, PartialEq)]
pub struct Assessment {
    /// Board configuration name.
    pub board: String,
    /// Module name.
    pub module: String,
    /// Setpoint of the corners, mW.
    pub setpoint_mw: f64,
    /// Tick rate, Hz.
    pub tick_hz: u32,
    /// Gains as configured: kp (mA/mW), ki (mA/(mW·ms)), ki per tick.
    pub gains: (f64, f64, f64),
    /// The frequency-domain analysis, one per corner.
    pub analyses: Vec<CornerAnalysis>,
    /// The time-domain results, in the same order.
    pub responses: Vec<CornerResponse>,
    /// The time-domain plan.
    pub plan: StepPlan,
    /// The pass lines.
    pub lines: PassLines,
}

/// Assesses `board` (`module` driven by `cfg`) at the standard corners at
/// `setpoint_mw`, with the loop timed by `opts` (the board's latency) in
/// both the linear analysis and the simulator.
pub fn assess(
    board: &str,
    module_name: &str,
    module: &DemoModule,
    cfg: &ValidConfig,
    setpoint_mw: f64,
    lines: PassLines,
    opts: &CornerOptions,
) -> Result<Assessment, AssessError> {
    let corners = standard_corners(cfg, setpoint_mw);
    let analyses =
        analyse_corners(module, cfg, &corners, opts).map_err(|source| AssessError::Corner {
            board: board.into(),
            source,
        })?;
    let plan = StepPlan::for_config(cfg);
    let loops: Vec<_> = analyses.iter().map(|a| a.corner.clone()).collect();
    let responses =
        corner_responses(module, cfg, &loops, &plan).map_err(|source| AssessError::TimeDomain {
            board: board.into(),
            source,
        })?;
    let c = cfg.config();
    Ok(Assessment {
        board: board.into(),
        module: module_name.into(),
        setpoint_mw,
        tick_hz: c.tick_hz,
        gains: (
            c.units().ma_per_mw(c.apc.kp_iu_per_ou),
            c.units().ma_per_mw(c.apc.ki_iu_per_ou_ms),
            cfg.ki_per_tick().to_num::<f64>() * c.units().ma_per_iu() / c.units().mw_per_ou(),
        ),
        analyses,
        responses,
        plan,
        lines,
    })
}

impl Assessment {
    /// Index of the worst corner (see the module documentation).
    pub fn worst(&self) -> usize {
        let key = |a: &CornerAnalysis| {
            if a.margins.closed_loop_stable {
                a.margins.sm
            } else {
                -1.0
            }
        };
        self.analyses
            .iter()
            .enumerate()
            .min_by(|a, b| key(a.1).total_cmp(&key(b.1)))
            .map_or(0, |(i, _)| i)
    }

    /// Every failed check, corner by corner.
    pub fn findings(&self) -> Vec<Finding> {
        let mut out = Vec::new();
        let l = &self.lines;
        for (a, r) in self.analyses.iter().zip(&self.responses) {
            let mut push = |figure| {
                out.push(Finding {
                    board: self.board.clone(),
                    corner: a.corner.corner.name.clone(),
                    figure,
                })
            };
            let m = &a.margins;
            if !m.closed_loop_stable {
                push(Figure::Unstable);
            }
            if m.pm_deg.is_nan() || m.pm_deg < l.min_pm_deg {
                push(Figure::PhaseMargin {
                    pm_deg: m.pm_deg,
                    min_deg: l.min_pm_deg,
                });
            }
            if m.gm_db.is_nan() || m.gm_db < l.min_gm_db {
                push(Figure::GainMargin {
                    gm_db: m.gm_db,
                    min_db: l.min_gm_db,
                });
            }
            for s in [&r.away, &r.back] {
                if !s.on_ceiling && s.overshoot_pct > l.max_overshoot_pct {
                    push(Figure::Overshoot {
                        step: format!(
                            "step {:.3} -> {:.3} mW",
                            s.from_setpoint_mw, s.to_setpoint_mw
                        ),
                        pct: s.overshoot_pct,
                        max_pct: l.max_overshoot_pct,
                    });
                }
            }
            if let Some(o) = r.limit_cycle() {
                push(Figure::LimitCycle {
                    hold: o.hold,
                    freq_hz: o.freq_hz,
                    pp_mw: o.pp_mw,
                    pp_steps: o.pp_steps,
                });
            }
            for f in &r.faults {
                push(Figure::Fault { fault: f });
            }
        }
        out
    }

    /// Corners where the loop does not regulate (on the ceiling or without
    /// driver headroom), with the reason.
    pub fn not_regulating(&self) -> Vec<(String, String)> {
        let mut v: Vec<(String, String)> =
            gate(&self.analyses, self.lines.min_pm_deg, self.lines.min_gm_db)
                .not_regulating
                .into_iter()
                .map(|g| (g.corner, g.reason))
                .collect();
        for r in &self.responses {
            if r.on_ceiling() && !v.iter().any(|(c, _)| *c == r.corner) {
                v.push((
                    r.corner.clone(),
                    "the drive reached the ceiling in the step tests".into(),
                ));
            }
        }
        v
    }

    /// No finding.
    pub fn passed(&self) -> bool {
        self.findings().is_empty()
    }

    /// The Markdown report.
    pub fn markdown(&self) -> String {
        let mut s = String::new();
        let w = &self.analyses[self.worst()];
        let wm = &w.margins;
        s.push_str(&format!("# Power-loop report: board {}\n\n", self.board));
        s.push_str(&format!("> **Caution.** {SAFETY_CAUTION}\n\n"));
        let (kp, ki_ms, ki_tick) = self.gains;
        s.push_str(&format!(
            "Module `{}`, tick {} Hz, kp {kp:.5} mA/mW, ki {ki_ms:.5} mA/(mW·ms) ({ki_tick:.7} per tick), \
             corners at a setpoint of {:.3} mW. Method and how to read this report: \
             `docs/stability.md`.\n\n",
            self.module, self.tick_hz, self.setpoint_mw
        ));
        s.push_str(&format!(
            "Pass lines: phase margin >= {} deg and gain margin >= {} dB (common practice); \
             overshoot of the optical power <= {} % of the step (configured); no limit cycle; \
             no fault latched during the step tests.\n\n",
            self.lines.min_pm_deg, self.lines.min_gm_db, self.lines.max_overshoot_pct
        ));
        s.push_str(&format!(
            "**Worst corner: {}** (smallest stability margin s_m = {:.3}): phase margin {:.1} deg \
             at the {:.1} Hz gain crossover, gain margin {:.1} dB at the {:.1} Hz phase \
             crossover, closed-loop bandwidth {:.1} Hz.\n\n",
            w.corner.corner.name, wm.sm, wm.pm_deg, wm.fcp_hz, wm.gm_db, wm.fcg_hz, wm.bandwidth_hz
        ));
        let findings = self.findings();
        if findings.is_empty() {
            s.push_str("**Verdict: PASS** at every corner.\n\n");
        } else {
            s.push_str(&format!(
                "**Verdict: FAIL** ({} findings)\n\n",
                findings.len()
            ));
            for f in &findings {
                s.push_str(&format!("- corner {}: {}\n", f.corner, f.figure));
            }
            s.push('\n');
        }
        let nr = self.not_regulating();
        if !nr.is_empty() {
            s.push_str("Not regulating at the setpoint (reported, not failed):\n\n");
            for (c, why) in &nr {
                s.push_str(&format!("- {c}: {why}\n"));
            }
            s.push('\n');
        }
        s.push_str(
            "## Frequency domain\n\nLinearised loop at each corner's operating point, one tick \
             of computation delay, exact zero-order-hold discretisation.\n\n",
        );
        s.push_str(&margins_table(
            &self.analyses,
            self.lines.min_pm_deg,
            self.lines.min_gm_db,
        ));
        s.push_str("\nBode plots: `bode.svg` (nominal, worst, fastest and slowest corners) and `bode/<corner>.svg`.\n\n");
        s.push_str(&self.time_domain_markdown());
        s
    }

    fn time_domain_markdown(&self) -> String {
        let p = &self.plan;
        let mut s = format!(
            "## Time domain\n\nNonlinear simulator with the firmware core. Setpoint step by {:.0} % \
             away from the setpoint and back ({} ms windows), ambient step of {:+} degC ({} ms \
             window); overshoot in % of the step, settling to ±1 % of the final value, \
             steady-state error of the monitor reading in % of the setpoint, ambient step as the \
             largest deviation of the optical power and the time to return within ±1 %; \
             oscillation searched in {} ms noise-free holds.\n\n",
            100.0 * p.step_fraction, p.window_ms, p.ambient_step_c, p.ambient_window_ms, p.hold_ms
        );
        s.push_str(
            "| corner | step away (mW) | overshoot (%) | settling (ms) | error (%) | step back (mW) | \
             overshoot (%) | settling (ms) | error (%) | ambient: peak dev (%) | recovery (ms) | \
             oscillation | verdict |\n|---|---|---|---|---|---|---|---|---|---|---|---|---|\n",
        );
        let findings = self.findings();
        let ms = |v: Option<f64>| v.map_or("not settled".into(), |x| format!("{x:.2}"));
        let os = |st: &super::time_domain::StepFigures| {
            if st.on_ceiling {
                format!("{:.2} (ceiling)", st.overshoot_pct)
            } else {
                format!("{:.2}", st.overshoot_pct)
            }
        };
        let mut narrow = false;
        for r in &self.responses {
            // The ±1 % band narrower than the two-step quantisation hunting:
            // settling there measures the hunting, not the loop.
            let fine = |st: &super::time_domain::StepFigures| {
                crate::step_response::SETTLING_BAND * st.final_mw.abs() < 2.0 * r.dac_step_mw
            };
            narrow |= fine(&r.away) || fine(&r.back);
            let ms = |st: &super::time_domain::StepFigures| {
                let v = ms(st.settling_ms);
                if fine(st) {
                    format!("{v} (q)")
                } else {
                    v
                }
            };
            let osc = match &r.oscillation {
                None => "none".to_string(),
                Some(o) => format!(
                    "{} {:.0} Hz, {:.4} mW p-p ({:.1} steps) {}",
                    if o.is_limit_cycle() {
                        "LIMIT CYCLE"
                    } else {
                        "hunting"
                    },
                    o.freq_hz,
                    o.pp_mw,
                    o.pp_steps,
                    o.hold
                ),
            };
            let fails = findings.iter().any(|f| {
                f.corner == r.corner
                    && !matches!(
                        f.figure,
                        Figure::Unstable | Figure::PhaseMargin { .. } | Figure::GainMargin { .. }
                    )
            });
            let verdict = if fails {
                "FAIL"
            } else if r.on_ceiling() {
                "pass (not regulating)"
            } else {
                "pass"
            };
            s.push_str(&format!(
                "| {} | {:.3} -> {:.3} | {} | {} | {:.3} | {:.3} -> {:.3} | {} | {} | {:.3} | {:.3} | {} | {} | {} |\n",
                r.corner,
                r.away.from_setpoint_mw,
                r.away.to_setpoint_mw,
                os(&r.away),
                ms(&r.away),
                r.away.error_pct,
                r.back.from_setpoint_mw,
                r.back.to_setpoint_mw,
                os(&r.back),
                ms(&r.back),
                r.back.error_pct,
                r.ambient.peak_dev_pct,
                match r.ambient.recovery_ms {
                    Some(x) => format!("{x:.2}"),
                    None => "not settled".into(),
                },
                osc,
                verdict
            ));
        }
        if narrow {
            s.push_str(
                "\n(q): the ±1 % band is narrower than two DAC steps of optical power at this \
                 level, so the settling time measures the quantisation hunting, not the loop.\n",
            );
        }
        s.push('\n');
        s
    }

    /// Writes `bode.svg` (nominal, worst, fastest and slowest corners) and
    /// one `bode/<corner>.svg` per corner into `dir`.
    pub fn write_bode(&self, dir: &Path) -> Result<(), BodeError> {
        let io = |e: std::io::Error| BodeError(format!("{}: {e}", dir.display()));
        std::fs::create_dir_all(dir.join("bode")).map_err(io)?;
        let tfs: Vec<_> = self
            .analyses
            .iter()
            .map(|a| open_loop(&a.corner.params))
            .collect();
        let by_fc = |a: &&CornerAnalysis| a.margins.fcp_hz;
        let finite: Vec<&CornerAnalysis> = self
            .analyses
            .iter()
            .filter(|a| a.margins.fcp_hz.is_finite())
            .collect();
        let fastest = finite
            .iter()
            .max_by(|a, b| by_fc(a).total_cmp(&by_fc(b)))
            .map(|a| a.corner.corner.name.clone());
        let slowest = finite
            .iter()
            .min_by(|a, b| by_fc(a).total_cmp(&by_fc(b)))
            .map(|a| a.corner.corner.name.clone());
        let mut picks: Vec<(usize, String)> = Vec::new();
        let worst = self.worst();
        let named = |n: &str| self.analyses.iter().position(|a| a.corner.corner.name == n);
        for (idx, role) in [
            (Some(worst), "worst"),
            (named("nominal"), "nominal"),
            (fastest.as_deref().and_then(named), "fastest"),
            (slowest.as_deref().and_then(named), "slowest"),
        ] {
            let Some(i) = idx else { continue };
            match picks.iter_mut().find(|(j, _)| *j == i) {
                Some((_, label)) => label.push_str(&format!(", {role}")),
                None => picks.push((
                    i,
                    format!("{} ({role}", self.analyses[i].corner.corner.name),
                )),
            }
        }
        let labels: Vec<String> = picks
            .iter()
            .map(|(_, l)| {
                format!("{l})")
                    .replace("nominal (nominal)", "nominal")
                    .replace("nominal (nominal, ", "nominal (")
            })
            .collect();
        let loops: Vec<BodeLoop<'_>> = picks
            .iter()
            .zip(&labels)
            .map(|((i, _), label)| BodeLoop {
                label,
                tf: &tfs[*i],
            })
            .collect();
        write_bode_svg(
            &dir.join("bode.svg"),
            &format!("Power loop, board {}", self.board),
            &loops,
        )?;
        for (a, tf) in self.analyses.iter().zip(&tfs) {
            let name = &a.corner.corner.name;
            write_bode_svg(
                &dir.join("bode").join(format!("{}.svg", slug(name))),
                &format!("Power loop, board {}, corner {name}", self.board),
                &[BodeLoop { label: name, tf }],
            )?;
        }
        Ok(())
    }
}

/// A file-name form of a corner name.
pub fn slug(name: &str) -> String {
    name.chars()
        .map(|c| if c.is_ascii_alphanumeric() { c } else { '-' })
        .collect()
}
