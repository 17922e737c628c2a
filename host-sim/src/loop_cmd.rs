//! The power-loop commands of the `diodestat` binary: `loop-report` (margins
//! and time-domain table plus Bode plots per board), `loop-tune` (PI gains
//! for a crossover or bandwidth target over the corners) and `loop-gate`
//! (every shipped board against the pass lines, non-zero exit on any
//! finding). Method: `docs/stability.md`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use diodestat_sim::boardfile::{load_board, LoadedBoard};
use diodestat_sim::files::{self, FileError, Staging};
use diodestat_sim::report::SAFETY_CAUTION;
use diodestat_sim::stability::assessment::{
    assess, default_setpoint_mw, slug, Assessment, PassLines, DEFAULT_MAX_OVERSHOOT_PCT,
};
use diodestat_sim::stability::corners::markdown as margins_table;
use diodestat_sim::stability::time_domain::SETTLING_BAND;
use diodestat_sim::stability::{
    corner_loop, design_for_bandwidth, design_pi, standard_corners, CornerOptions, Design,
    DesignError, DesignSpec, LoopParams, DESIGN_GM_DB, DESIGN_PM_DEG, PASS_GM_DB, PASS_PM_DEG,
};

/// Where the shipped board configurations live.
pub const SHIPPED_BOARDS_DIR: &str = "examples";

/// The shipped board configurations: `examples/*/board.toml`, sorted.
pub fn shipped_boards(root: &Path) -> Result<Vec<PathBuf>, String> {
    let dir = root.join(SHIPPED_BOARDS_DIR);
    let rd = std::fs::read_dir(&dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    let mut v: Vec<PathBuf> = rd
        .filter_map(Result::ok)
        .map(|e| e.path().join("board.toml"))
        .filter(|p| p.is_file())
        .collect();
    v.sort();
    if v.is_empty() {
        return Err(format!("no */board.toml under {}", dir.display()));
    }
    Ok(v)
}

fn lines(max_overshoot_pct: f64) -> PassLines {
    PassLines {
        max_overshoot_pct,
        ..PassLines::default()
    }
}

/// The overshoot limit for a board: the command line's, else the board
/// file's `[loop_check] max_overshoot_pct`, else the default.
fn overshoot_limit(b: &LoadedBoard, cli: Option<f64>) -> f64 {
    cli.or(b.max_overshoot_pct)
        .unwrap_or(DEFAULT_MAX_OVERSHOOT_PCT)
}

/// The setpoint of the corners: `--setpoint-mw` when given (it must lie in
/// the board's setpoint range), else the default.
fn corner_setpoint(b: &LoadedBoard, setpoint_mw: Option<f64>) -> Result<f64, String> {
    let p = &b.config.power;
    let (lo, hi) = (
        p.min_setpoint_mw.to_num::<f64>(),
        p.max_setpoint_mw.to_num::<f64>(),
    );
    match setpoint_mw {
        Some(v) if !(v >= lo && v <= hi) => Err(format!(
            "--setpoint-mw {v}: outside board {}'s setpoint range {lo} ..= {hi} mW (power.min_setpoint_mw ..= power.max_setpoint_mw in {})",
            b.name,
            b.path.display()
        )),
        Some(v) => Ok(v),
        None => Ok(default_setpoint_mw(&b.valid)),
    }
}

/// Load every board, then refuse before anything runs: two boards that map
/// to one output folder, an output folder that would replace an input.
fn load_all(boards: &[PathBuf], out: Option<&Path>) -> Result<Vec<LoadedBoard>, String> {
    let loaded = boards
        .iter()
        .map(|p| load_board(p).map_err(|e| e.to_string()))
        .collect::<Result<Vec<_>, _>>()?;
    if let Some(out) = out {
        let inputs: Vec<PathBuf> = loaded
            .iter()
            .flat_map(|b| std::iter::once(b.path.clone()).chain(b.table_csv.clone()))
            .collect();
        files::check_out_dir(out, "--out", &[], &inputs).map_err(|e| e.to_string())?;
        for (i, b) in loaded.iter().enumerate() {
            let dir = slug(&b.name);
            if let Some(o) = loaded[..i].iter().find(|o| slug(&o.name) == dir) {
                return Err(FileError::Conflict {
                    origin: "--out".into(),
                    path: out.join(&dir),
                    why: format!(
                        "boards {} ({}) and {} ({}) both map to this folder; give them different names",
                        o.name,
                        o.path.display(),
                        b.name,
                        b.path.display()
                    ),
                }
                .to_string());
            }
            files::check_out_dir(
                &out.join(&dir),
                "--out",
                &["loop-report.md", "bode.svg"],
                &inputs,
            )
            .map_err(|e| e.to_string())?;
        }
    }
    Ok(loaded)
}

fn assess_board(
    b: &LoadedBoard,
    setpoint_mw: Option<f64>,
    max_overshoot_pct: Option<f64>,
) -> Result<Assessment, String> {
    let max_overshoot_pct = overshoot_limit(b, max_overshoot_pct);
    let sp = corner_setpoint(b, setpoint_mw)?;
    assess(
        &b.name,
        b.module_name,
        &b.module,
        &b.valid,
        sp,
        lines(max_overshoot_pct),
        &CornerOptions::for_latency(b.latency),
    )
    .map_err(|e| e.to_string())
}

/// Write a board's report and Bode plots into `out/BOARD`, all of them
/// staged and moved into place together.
fn write_report(a: &Assessment, out: &Path) -> Result<PathBuf, String> {
    let dir = out.join(slug(&a.board));
    let stage = Staging::new(&dir).map_err(|e| e.to_string())?;
    let md = stage.path("loop-report.md");
    std::fs::write(&md, a.markdown())
        .map_err(|e| format!("{}: {e}", dir.join("loop-report.md").display()))?;
    a.write_bode(stage.dir()).map_err(|e| e.to_string())?;
    stage.commit().map_err(|e| e.to_string())?;
    Ok(dir)
}

fn summary(a: &Assessment) -> String {
    let w = &a.analyses[a.worst()];
    let m = &w.margins;
    let os = a
        .responses
        .iter()
        .filter_map(|r| r.overshoot_pct().map(|o| (o, r.corner.as_str())))
        .max_by(|x, y| x.0.total_cmp(&y.0));
    // Settling where the ±1 % band is wider than the two-step quantisation
    // hunting (elsewhere it measures the hunting; see the report's (q)).
    let settle = a
        .responses
        .iter()
        .filter(|r| !r.on_ceiling())
        .flat_map(|r| {
            [&r.away, &r.back]
                .into_iter()
                .filter(|st| SETTLING_BAND * st.final_mw.abs() >= 2.0 * r.dac_step_mw)
                .map(|st| st.settling_ms.unwrap_or(f64::INFINITY))
                .collect::<Vec<_>>()
        })
        .fold(0.0, f64::max);
    let err = a
        .responses
        .iter()
        .filter(|r| !r.on_ceiling())
        .flat_map(|r| [r.away.error_pct, r.back.error_pct])
        .fold(0.0, |m: f64, e| m.max(e.abs()));
    let lc = a
        .responses
        .iter()
        .filter(|r| r.limit_cycle().is_some())
        .count();
    let mut s = format!(
        "worst corner {}: PM {:.1} deg at {:.1} Hz, GM {:.1} dB at {:.1} Hz, bandwidth {:.1} Hz, s_m {:.3}\n",
        w.corner.corner.name, m.pm_deg, m.fcp_hz, m.gm_db, m.fcg_hz, m.bandwidth_hz, m.sm
    );
    if let Some((o, c)) = os {
        s.push_str(&format!(
            "time domain (regulating corners): largest overshoot {o:.2} % ({c}), longest settling {settle:.2} ms (±1 % band wider than the quantisation), \
             largest steady-state error {err:.4} %, limit cycles {lc}\n"
        ));
    }
    for (c, why) in a.not_regulating() {
        s.push_str(&format!("not regulating: {c}: {why}\n"));
    }
    s
}

/// `loop-report`: the report and Bode plots of each board under `out`.
pub fn report(
    boards: &[PathBuf],
    out: &Path,
    setpoint_mw: Option<f64>,
    max_overshoot_pct: Option<f64>,
) -> Result<(), String> {
    let boards = if boards.is_empty() {
        shipped_boards(Path::new("."))?
    } else {
        boards.to_vec()
    };
    for b in load_all(&boards, Some(out))? {
        let path = &b.path;
        let t0 = Instant::now();
        let a = assess_board(&b, setpoint_mw, max_overshoot_pct)?;
        let dir = write_report(&a, out)?;
        println!(
            "board {} ({}), setpoint {:.3} mW, {} corners in {:.2} s",
            b.name,
            path.display(),
            a.setpoint_mw,
            a.analyses.len(),
            t0.elapsed().as_secs_f64()
        );
        print!("{}", summary(&a));
        let n = a.findings().len();
        println!(
            "verdict: {}; wrote {}/loop-report.md, bode.svg, bode/*.svg",
            if n == 0 {
                "pass".to_string()
            } else {
                format!("FAIL ({n} findings)")
            },
            dir.display()
        );
    }
    println!("CAUTION: {SAFETY_CAUTION}");
    Ok(())
}

/// `loop-gate`: every board against the pass lines; `Err` lists every
/// finding as `board ..., corner ...: figure`.
pub fn gate(
    boards: &[PathBuf],
    out: Option<&Path>,
    setpoint_mw: Option<f64>,
    max_overshoot_pct: Option<f64>,
) -> Result<(), String> {
    let boards = if boards.is_empty() {
        shipped_boards(Path::new("."))?
    } else {
        boards.to_vec()
    };
    let mut failures = Vec::new();
    for b in load_all(&boards, out)? {
        let path = &b.path;
        let a = assess_board(&b, setpoint_mw, max_overshoot_pct)?;
        if let Some(out) = out {
            write_report(&a, out)?;
        }
        let f = a.findings();
        println!(
            "{} {} ({}): {}; overshoot limit {} %",
            if f.is_empty() { "pass" } else { "FAIL" },
            b.name,
            path.display(),
            summary(&a).lines().next().unwrap_or_default(),
            overshoot_limit(&b, max_overshoot_pct)
        );
        failures.extend(f);
    }
    println!(
        "pass lines: PM >= {PASS_PM_DEG} deg, GM >= {PASS_GM_DB} dB (common practice), overshoot \
         within each board's limit, no limit cycle, no fault latched"
    );
    if failures.is_empty() {
        println!("loop gate passed: {} board configurations", boards.len());
        Ok(())
    } else {
        for f in &failures {
            println!("FAIL {f}");
        }
        Err(format!(
            "loop gate failed: {} findings; first: {}",
            failures.len(),
            failures[0]
        ))
    }
}

/// What `loop-tune` aims at.
#[derive(Clone, Copy, Debug)]
pub enum TuneTarget {
    /// Gain crossover of the highest-gain corner, Hz.
    CrossoverHz(f64),
    /// Closed-loop bandwidth of the slowest corner, Hz.
    BandwidthHz(f64),
}

fn design_error(e: DesignError, names: &[String]) -> String {
    let name = |i: usize| names.get(i).map_or("?", String::as_str).to_string();
    let detail = match &e {
        DesignError::TargetUnreachable {
            limiting_corner, ..
        }
        | DesignError::NoFeasibleGains {
            limiting_corner, ..
        } => format!(
            " (corner {limiting_corner} is '{}')",
            name(*limiting_corner)
        ),
        _ => String::new(),
    };
    format!("no PI gains meet the target: {e}{detail}")
}

/// `loop-tune`: PI gains for `target` with PM ≥ `min_pm_deg` and GM ≥
/// `min_gm_db` at every corner; prints the gains, the margins per corner
/// and the time-domain figures with the proposed gains.
pub fn tune(
    board: &Path,
    target: TuneTarget,
    setpoint_mw: Option<f64>,
    min_pm_deg: f64,
    min_gm_db: f64,
) -> Result<(), String> {
    let b = load_board(board).map_err(|e| e.to_string())?;
    let sp = corner_setpoint(&b, setpoint_mw)?;
    let nyquist = f64::from(b.config.tick_hz) / 2.0;
    match target {
        TuneTarget::CrossoverHz(f) if f >= nyquist => {
            return Err(format!(
                "--crossover-hz {f}: must be below half the board's tick rate, {nyquist} Hz"
            ))
        }
        TuneTarget::BandwidthHz(f) if f >= nyquist => {
            return Err(format!(
                "--bandwidth-hz {f}: must be below half the board's tick rate, {nyquist} Hz"
            ))
        }
        _ => {}
    }
    let corners = standard_corners(&b.valid, sp);
    let loops = corners
        .iter()
        .map(|c| {
            corner_loop(
                &b.module,
                &b.valid,
                c,
                &CornerOptions::for_latency(b.latency),
            )
        })
        .collect::<Result<Vec<_>, _>>()
        .map_err(|e| e.to_string())?;
    let params: Vec<LoopParams> = loops.iter().map(|l| l.params).collect();
    let names: Vec<String> = corners.iter().map(|c| c.name.clone()).collect();
    let t_hz = match target {
        TuneTarget::CrossoverHz(f) | TuneTarget::BandwidthHz(f) => f,
    };
    let spec = DesignSpec {
        min_pm_deg,
        min_gm_db,
        ..DesignSpec::new(t_hz)
    };
    println!(
        "board {} ({}), {} corners at {sp:.3} mW; target {}; required at every corner: PM >= \
         {min_pm_deg} deg, GM >= {min_gm_db} dB",
        b.name,
        board.display(),
        corners.len(),
        match target {
            TuneTarget::CrossoverHz(f) => format!("gain crossover {f} Hz"),
            TuneTarget::BandwidthHz(f) => format!("closed-loop bandwidth {f} Hz (slowest corner)"),
        }
    );
    let d: Design = match target {
        TuneTarget::CrossoverHz(_) => design_pi(&params, &spec),
        TuneTarget::BandwidthHz(f) => design_for_bandwidth(&params, f, &spec),
    }
    .map_err(|e| design_error(e, &names))?;
    println!(
        "proposed gains: kp_ma_per_mw = {}, ki_ma_per_mw_ms = {} ({:.7} per tick); PI zero {:.1} Hz; \
         crossover {:.1} Hz, slowest-corner bandwidth {:.1} Hz",
        d.kp,
        d.ki_ma_per_mw_ms,
        d.ki_per_tick_f64,
        d.zero_hz,
        d.crossover_hz,
        d.min_bandwidth_hz()
    );
    println!(
        "achieved: worst PM {:.1} deg, worst GM {:.1} dB",
        d.worst_pm_deg, d.worst_gm_db
    );
    // The margins table and the time domain with the proposed gains.
    let mut cfg = b.config.clone();
    cfg.apc.kp_ma_per_mw = d.kp;
    cfg.apc.ki_ma_per_mw_ms = d.ki_ma_per_mw_ms;
    let valid = cfg
        .validate()
        .map_err(|e| format!("the proposed gains are refused by the configuration check: {e}"))?;
    let a = assess(
        &b.name,
        b.module_name,
        &b.module,
        &valid,
        sp,
        PassLines {
            min_pm_deg,
            min_gm_db,
            max_overshoot_pct: overshoot_limit(&b, None),
        },
        &CornerOptions::for_latency(b.latency),
    )
    .map_err(|e| e.to_string())?;
    print!("{}", margins_table(&a.analyses, min_pm_deg, min_gm_db));
    print!("with the proposed gains: {}", summary(&a));
    let f = a.findings();
    for x in &f {
        println!("note: {x}");
    }
    println!(
        "put these in the [apc] section of {}:\n  kp_ma_per_mw = {}\n  ki_ma_per_mw_ms = {}",
        board.display(),
        d.kp,
        d.ki_ma_per_mw_ms
    );
    println!("CAUTION: {SAFETY_CAUTION}");
    Ok(())
}

/// Default design phase margin for `loop-tune`, degrees.
pub const TUNE_PM_DEG: f64 = DESIGN_PM_DEG;
/// Default design gain margin for `loop-tune`.
pub const TUNE_GM_DB: f64 = DESIGN_GM_DB;
