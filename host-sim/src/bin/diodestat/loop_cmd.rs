//! The power-loop commands of the `diodestat` binary: `loop-report` (margins
//! and time-domain table plus Bode plots per board), `loop-tune` (PI gains
//! for a crossover or bandwidth target over the corners) and `loop-gate`
//! (every shipped board against the pass lines, non-zero exit on any
//! finding). Method: `docs/stability.md`.

use diodestat_sim::units::Scale;
use std::path::{Path, PathBuf};
use std::time::Instant;

use diodestat_core::Fx;

use diodestat_sim::board_file::{load_board, LoadedBoard};
use diodestat_sim::files::{self, FileError, Staging};
use diodestat_sim::progress;
use diodestat_sim::safety::SAFETY_CAUTION;
use diodestat_sim::stability::assessment::{
    assess, default_setpoint_mw, slug, Assessment, PassLines, DEFAULT_MAX_OVERSHOOT_PCT,
};
use diodestat_sim::stability::corners::markdown as margins_table;
use diodestat_sim::stability::margins::Margins;
use diodestat_sim::stability::time_domain::StepFigures;
use diodestat_sim::stability::{
    design_for_bandwidth, design_pi, standard_corner_loops, standard_corners, CornerOptions,
    Design, DesignError, DesignSpec, LoopParams, DESIGN_GM_DB, DESIGN_PM_DEG, PASS_GM_DB,
    PASS_PM_DEG,
};
use diodestat_sim::step_response::SETTLING_BAND;

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
    let u = b.config.units();
    let (lo, hi) = (u.mw(p.min_setpoint_ou), u.mw(p.max_setpoint_ou));
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
            .flat_map(|b| {
                std::iter::once(b.path.clone())
                    .chain(b.table_csv.clone())
                    .chain(b.module_file.clone())
            })
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
        &b.module_name,
        &b.module,
        &b.valid,
        sp,
        lines(max_overshoot_pct),
        &CornerOptions::for_latency(b.latency),
    )
    .map_err(|e| e.to_string())
}

/// A number for JSON: `null` where it is not finite (an infinite margin
/// of a loop without crossover, a frequency not found).
fn num(v: f64) -> serde_json::Value {
    serde_json::Number::from_f64(v).map_or(serde_json::Value::Null, serde_json::Value::Number)
}

fn margins_json(m: &Margins) -> serde_json::Value {
    serde_json::json!({
        "pm_deg": num(m.pm_deg),
        "gain_crossover_hz": num(m.fcp_hz),
        "gm_db": num(m.gm_db),
        "phase_crossover_hz": num(m.fcg_hz),
        "bandwidth_hz": num(m.bandwidth_hz),
        "stability_margin": num(m.sm),
        "closed_loop_stable": m.closed_loop_stable,
    })
}

fn step_json(s: &StepFigures) -> serde_json::Value {
    serde_json::json!({
        "from_setpoint_mw": num(s.from_setpoint_mw),
        "to_setpoint_mw": num(s.to_setpoint_mw),
        "initial_mw": num(s.initial_mw),
        "final_mw": num(s.final_mw),
        "overshoot_pct": num(s.overshoot_pct),
        "settling_ms": s.settling_ms.map_or(serde_json::Value::Null, num),
        "error_pct": num(s.error_pct),
        "regulating": s.regulating,
        "on_ceiling": s.on_ceiling,
    })
}

/// The assessment of one board as JSON (`report.json`): the same figures
/// as `loop-report.md`, per corner, with the findings and the verdict.
pub fn assessment_json(a: &Assessment) -> serde_json::Value {
    let corners: Vec<serde_json::Value> = a
        .analyses
        .iter()
        .zip(&a.responses)
        .map(|(c, r)| {
            let k = &c.corner.corner;
            serde_json::json!({
                "corner": k.name,
                "ambient_c": num(k.ambient_c),
                "setpoint_mw": num(k.setpoint_mw),
                "threshold_factor": num(k.threshold_factor),
                "slope_factor": num(k.slope_factor),
                "tracking_factor": num(k.tracking_factor),
                "margins": margins_json(&c.margins),
                "step_away": step_json(&r.away),
                "step_back": step_json(&r.back),
                "ambient_step": {
                    "from_c": num(r.ambient.from_c),
                    "to_c": num(r.ambient.to_c),
                    "peak_deviation_pct": num(r.ambient.peak_dev_pct),
                    "recovery_ms": r.ambient.recovery_ms.map_or(serde_json::Value::Null, num),
                    "error_pct": num(r.ambient.error_pct),
                    "on_ceiling": r.ambient.on_ceiling,
                },
                "limit_cycle": r.limit_cycle().map(|o| serde_json::json!({
                    "hold": o.hold,
                    "freq_hz": num(o.freq_hz),
                    "peak_to_peak_mw": num(o.pp_mw),
                    "peak_to_peak_dac_steps": num(o.pp_steps),
                })),
                "dac_step_mw": num(r.dac_step_mw),
                "faults": r.faults,
                "final_state": r.final_state.name(),
            })
        })
        .collect();
    let findings: Vec<String> = a.findings().iter().map(ToString::to_string).collect();
    serde_json::json!({
        "board": a.board,
        "module": a.module,
        "setpoint_mw": num(a.setpoint_mw),
        "tick_hz": a.tick_hz,
        "gains": {
            "kp_ma_per_mw": num(a.gains.0),
            "ki_ma_per_mw_ms": num(a.gains.1),
            "ki_per_tick": num(a.gains.2),
        },
        "pass_lines": {
            "min_pm_deg": num(a.lines.min_pm_deg),
            "min_gm_db": num(a.lines.min_gm_db),
            "max_overshoot_pct": num(a.lines.max_overshoot_pct),
        },
        "worst_corner": a.analyses[a.worst()].corner.corner.name,
        "corners": corners,
        "not_regulating": a.not_regulating().into_iter().map(|(c, why)| serde_json::json!({"corner": c, "why": why})).collect::<Vec<_>>(),
        "findings": findings,
        "verdict": if findings.is_empty() { "pass" } else { "fail" },
        "caution": SAFETY_CAUTION,
    })
}

/// Write a board's reports (`loop-report.md`, `report.json`) and Bode
/// plots into `out/BOARD`, all of them staged and moved into place
/// together.
fn write_report(a: &Assessment, out: &Path) -> Result<PathBuf, String> {
    let dir = out.join(slug(&a.board));
    let stage = Staging::new(&dir).map_err(|e| e.to_string())?;
    let json = serde_json::to_string_pretty(&assessment_json(a)).map_err(|e| e.to_string())?;
    std::fs::write(stage.path("report.json"), json)
        .map_err(|e| format!("{}: {e}", dir.join("report.json").display()))?;
    std::fs::write(stage.path("loop-report.md"), a.markdown())
        .map_err(|e| format!("{}: {e}", dir.join("loop-report.md").display()))?;
    a.write_bode(stage.dir()).map_err(|e| e.to_string())?;
    stage.commit().map_err(|e| e.to_string())?;
    Ok(dir)
}

/// Error at the end of a step window, fraction of the setpoint, above
/// which the step has not settled to the setpoint (half the ±1 % settling
/// band): its overshoot and settling time, measured against where the
/// window ends, are not reported.
const UNSETTLED_ERROR: f64 = 0.5 * SETTLING_BAND;

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
        // Overshoot and settling are measured against where the window
        // ends: they mean something only if that is the setpoint.
        if err > 100.0 * UNSETTLED_ERROR {
            s.push_str(&format!(
                "time domain (regulating corners): the steps did not settle within the {:.0} ms step window \
                 (error up to {err:.2} % of the setpoint at its end), so no overshoot or settling time is given; \
                 limit cycles {lc}\n",
                a.plan.window_ms
            ));
        } else {
            s.push_str(&format!(
                "time domain (regulating corners): largest overshoot {o:.2} % ({c}), longest settling {settle:.2} ms (±1 % band wider than the quantisation), \
                 largest steady-state error {err:.4} %, limit cycles {lc}\n"
            ));
        }
    }
    for (c, why) in a.not_regulating() {
        s.push_str(&format!("not regulating: {c}: {why}\n"));
    }
    s
}

/// `loop-report`: the report and Bode plots of each board under `out`;
/// `Err` (a non-zero exit) naming the boards whose verdict is FAIL, after
/// every board's report is written.
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
    let bar = progress::bar(boards.len() as u64, "boards");
    let mut failed = Vec::new();
    for b in load_all(&boards, Some(out))? {
        let path = &b.path;
        let t0 = Instant::now();
        bar.set_message(b.name.clone());
        let a = assess_board(&b, setpoint_mw, max_overshoot_pct)?;
        bar.inc(1);
        let dir = write_report(&a, out)?;
        let n = a.findings().len();
        let text = format!(
            "board {} ({}), setpoint {:.3} mW, {} corners in {:.2} s\n{}verdict: {}; wrote {}/loop-report.md, report.json, bode.svg, bode/*.svg",
            b.name,
            path.display(),
            a.setpoint_mw,
            a.analyses.len(),
            t0.elapsed().as_secs_f64(),
            summary(&a),
            if n == 0 {
                "pass".to_string()
            } else {
                format!("FAIL ({})", crate::count_of(n, "finding"))
            },
            dir.display()
        );
        // Printed with the bar out of the way.
        bar.suspend(|| println!("{text}"));
        if n > 0 {
            failed.push(b.name.clone());
        }
    }
    bar.finish_and_clear();
    println!("CAUTION: {SAFETY_CAUTION}");
    if failed.is_empty() {
        Ok(())
    } else {
        Err(format!(
            "loop report: {} of {} board configurations FAIL: {} (findings in each report)",
            failed.len(),
            boards.len(),
            failed.join(", ")
        ))
    }
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
    let bar = progress::bar(boards.len() as u64, "boards");
    for b in load_all(&boards, out)? {
        let path = &b.path;
        let a = assess_board(&b, setpoint_mw, max_overshoot_pct)?;
        bar.inc(1);
        if let Some(out) = out {
            write_report(&a, out)?;
        }
        let f = a.findings();
        let text = format!(
            "{} {} ({}): {}; overshoot limit {} %",
            if f.is_empty() { "pass" } else { "FAIL" },
            b.name,
            path.display(),
            summary(&a).lines().next().unwrap_or_default(),
            overshoot_limit(&b, max_overshoot_pct)
        );
        bar.suspend(|| println!("{text}"));
        failures.extend(f);
    }
    bar.finish_and_clear();
    println!(
        "pass lines: PM >= {PASS_PM_DEG} deg, GM >= {PASS_GM_DB} dB (common practice), overshoot \
         within each board's limit, no limit cycle, no fault latched"
    );
    println!("CAUTION: {SAFETY_CAUTION}");
    if failures.is_empty() {
        println!("loop gate passed: {} board configurations", boards.len());
        Ok(())
    } else {
        for f in &failures {
            println!("FAIL {f}");
        }
        Err(format!(
            "loop gate failed: {}; first: {}",
            crate::count_of(failures.len(), "finding"),
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

/// Where `loop-tune` puts its results besides the printout.
#[derive(Clone, Copy, Debug, Default)]
pub struct TuneOutputs<'a> {
    /// Write the proposed gains into the board file's `[apc]` section.
    pub write: bool,
    /// Write the design and the assessment with the proposed gains here.
    pub json: Option<&'a Path>,
}

/// The text of board file `text` with `[apc] kp_ma_per_mw` and
/// `ki_ma_per_mw_ms` set to `kp` and `ki`, everything else (comments,
/// order, spacing, a comment after either value) as it was.
pub fn with_gains(text: &str, kp: Fx, ki: Fx) -> Result<String, String> {
    let mut doc: toml_edit::DocumentMut = text
        .parse()
        .map_err(|e: toml_edit::TomlError| e.to_string())?;
    let apc = doc
        .get_mut("apc")
        .and_then(toml_edit::Item::as_table_like_mut)
        .ok_or("the board file has no [apc] table")?;
    for (key, v) in [("kp_ma_per_mw", kp), ("ki_ma_per_mw_ms", ki)] {
        // The shortest decimal that reads back as the same fixed-point value.
        let x: f64 = v
            .to_string()
            .parse()
            .map_err(|e| format!("[apc] {key} = {v}: {e}"))?;
        let mut new = toml_edit::Value::from(x);
        match apc.get_mut(key) {
            // Replace the value only: the key keeps the comment lines
            // above it, the value the comment after it.
            Some(item) => {
                if let Some(old) = item.as_value() {
                    *new.decor_mut() = old.decor().clone();
                }
                *item = toml_edit::Item::Value(new);
            }
            None => {
                apc.insert(key, toml_edit::Item::Value(new));
            }
        }
    }
    Ok(doc.to_string())
}

/// A gain in mA/mW (or mA/(mW ms)) in the board's current units per power
/// unit, as the board-file loader converts it.
fn gain_in_units(b: &LoadedBoard, g: Fx) -> Fx {
    let u = b.config.units();
    Fx::from_num(g.to_num::<f64>() / (u.ma_per_iu() / u.mw_per_ou()))
}

/// Write the gains into the board file at `path` in place (atomically),
/// and check that the file reads back with exactly these gains.
fn write_gains(path: &Path, kp: Fx, ki: Fx) -> Result<(), String> {
    let text = files::read_text(path, "BOARD").map_err(|e| e.to_string())?;
    let new = with_gains(&text, kp, ki).map_err(|e| format!("{}: {e}", path.display()))?;
    files::write_atomic(path, new.as_bytes()).map_err(|e| e.to_string())?;
    let b = load_board(path).map_err(|e| e.to_string())?;
    let u = b.config.units();
    let want = (gain_in_units(&b, kp), gain_in_units(&b, ki));
    if (b.config.apc.kp_iu_per_ou, b.config.apc.ki_iu_per_ou_ms) != want {
        return Err(format!(
            "{}: the gains read back as {} and {} mA/mW, not {kp} and {ki}",
            path.display(),
            u.ma_per_mw(b.config.apc.kp_iu_per_ou),
            u.ma_per_mw(b.config.apc.ki_iu_per_ou_ms)
        ));
    }
    Ok(())
}

/// `loop-tune`: PI gains for `target` with PM ≥ `min_pm_deg` and GM ≥
/// `min_gm_db` at every corner; prints the gains, the margins per corner
/// and the time-domain figures with the proposed gains; with
/// `outputs.write` puts the gains into the board file, with
/// `outputs.json` writes the design as JSON.
pub fn tune(
    board: &Path,
    target: TuneTarget,
    setpoint_mw: Option<f64>,
    min_pm_deg: f64,
    min_gm_db: f64,
    outputs: TuneOutputs<'_>,
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
    let loops =
        standard_corner_loops(&b.module, &b.valid, sp, b.latency).map_err(|e| e.to_string())?;
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
    let spin = progress::spinner("searching PI gains over the corners");
    let d: Result<Design, String> = match target {
        TuneTarget::CrossoverHz(_) => design_pi(&params, &spec),
        TuneTarget::BandwidthHz(f) => design_for_bandwidth(&params, f, &spec),
    }
    .map_err(|e| design_error(e, &names));
    spin.finish_and_clear();
    let d = d?;
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
    cfg.apc.kp_iu_per_ou = gain_in_units(&b, d.kp);
    cfg.apc.ki_iu_per_ou_ms = gain_in_units(&b, d.ki_ma_per_mw_ms);
    let valid = cfg
        .validate()
        .map_err(|e| format!("the proposed gains are refused by the configuration check: {e}"))?;
    let spin = progress::spinner("step responses with the proposed gains at every corner");
    let a = assess(
        &b.name,
        &b.module_name,
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
    .map_err(|e| e.to_string());
    spin.finish_and_clear();
    let a = a?;
    print!("{}", margins_table(&a.analyses, min_pm_deg, min_gm_db));
    print!("with the proposed gains: {}", summary(&a));
    let f = a.findings();
    for x in &f {
        println!("note: {x}");
    }
    if let Some(path) = outputs.json {
        let corners: Vec<serde_json::Value> = d
            .corners
            .iter()
            .map(|c| {
                serde_json::json!({
                    "corner": names.get(c.index),
                    "margins": margins_json(&c.margins),
                    "meets": c.meets,
                })
            })
            .collect();
        let json = serde_json::json!({
            "board": b.name,
            "board_file": board.display().to_string(),
            "target": match target {
                TuneTarget::CrossoverHz(f) => serde_json::json!({"crossover_hz": num(f)}),
                TuneTarget::BandwidthHz(f) => serde_json::json!({"bandwidth_hz": num(f)}),
            },
            "required": {"min_pm_deg": num(min_pm_deg), "min_gm_db": num(min_gm_db)},
            "proposed": {
                // As written into a board file: the shortest decimal
                // that reads back as the core's fixed-point value.
                "kp_ma_per_mw": num(d.kp.to_string().parse().unwrap_or(f64::NAN)),
                "ki_ma_per_mw_ms": num(d.ki_ma_per_mw_ms.to_string().parse().unwrap_or(f64::NAN)),
                "ki_per_tick": num(d.ki_per_tick_f64),
                "pi_zero_hz": num(d.zero_hz),
                "crossover_hz": num(d.crossover_hz),
                "slowest_corner_bandwidth_hz": num(d.min_bandwidth_hz()),
                "worst_pm_deg": num(d.worst_pm_deg),
                "worst_gm_db": num(d.worst_gm_db),
            },
            "design_corners": corners,
            "with_proposed_gains": assessment_json(&a),
            "written_to_board_file": outputs.write,
        });
        let text = serde_json::to_string_pretty(&json).map_err(|e| e.to_string())?;
        files::write_atomic(path, text.as_bytes()).map_err(|e| e.to_string())?;
        println!("wrote {}", path.display());
    }
    if outputs.write {
        write_gains(board, d.kp, d.ki_ma_per_mw_ms)?;
        println!(
            "wrote kp_ma_per_mw = {} and ki_ma_per_mw_ms = {} into [apc] of {} (comments and layout kept)",
            d.kp,
            d.ki_ma_per_mw_ms,
            board.display()
        );
    } else {
        println!(
            "put these in the [apc] section of {} (or run again with --write):\n  kp_ma_per_mw = {}\n  ki_ma_per_mw_ms = {}",
            board.display(),
            d.kp,
            d.ki_ma_per_mw_ms
        );
    }
    println!("CAUTION: {SAFETY_CAUTION}");
    Ok(())
}

/// Default design phase margin for `loop-tune`, degrees.
pub const TUNE_PM_DEG: f64 = DESIGN_PM_DEG;
/// Default design gain margin for `loop-tune`.
pub const TUNE_GM_DB: f64 = DESIGN_GM_DB;

#[cfg(test)]
mod tests {
    use super::*;

    const BOARD: &str = "# demo board (invented values)\nname = \"x\"\n\n[apc]\n# loop gains, tuned by hand\nkp_ma_per_mw = 0.3   # proportional\nki_ma_per_mw_ms = 3\nslew_ma_per_ms = 20\n\n[derating]\nknee_degc = 45\n";

    /// The gains change, everything else stays byte for byte, including
    /// the comment after the proportional gain.
    #[test]
    fn gains_are_written_in_place_keeping_comments_and_layout() {
        let kp = Fx::from_num(0.4567);
        let ki = Fx::from_num(12.25);
        let new = with_gains(BOARD, kp, ki).unwrap();
        let (old_lines, new_lines): (Vec<&str>, Vec<&str>) =
            (BOARD.lines().collect(), new.lines().collect());
        assert_eq!(old_lines.len(), new_lines.len());
        for (o, n) in old_lines.iter().zip(&new_lines) {
            if o.starts_with("kp_ma_per_mw") {
                assert_eq!(*n, format!("kp_ma_per_mw = {kp}   # proportional"));
            } else if o.starts_with("ki_ma_per_mw_ms") {
                assert_eq!(*n, "ki_ma_per_mw_ms = 12.25");
            } else {
                assert_eq!(o, n);
            }
        }
        // The written decimal reads back as the same fixed-point value.
        let doc: toml::Table = toml::from_str(&new).unwrap();
        let back = doc["apc"]["kp_ma_per_mw"].as_float().unwrap();
        assert_eq!(Fx::from_num(back), kp);
    }

    #[test]
    fn a_board_file_without_apc_is_refused() {
        let e = with_gains("name = \"x\"\n", Fx::ONE, Fx::ONE).unwrap_err();
        assert!(e.contains("[apc]"), "{e}");
    }

    /// `--write` on a shipped board: the file reads back with the new
    /// gains and keeps every comment.
    #[test]
    fn write_gains_round_trips_through_the_board_loader() {
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
        let src = root.join("examples/demo-red-30/board.toml");
        let dir = std::env::temp_dir().join(format!("diodestat-tune-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let dst = dir.join("board.toml");
        // The board file with its module file beside it.
        let text = std::fs::read_to_string(&src).unwrap();
        std::fs::write(
            &dst,
            text.replace("\"../modules/demo-red-650.toml\"", "\"module.toml\""),
        )
        .unwrap();
        std::fs::copy(
            root.join("examples/modules/demo-red-650.toml"),
            dir.join("module.toml"),
        )
        .unwrap();
        let kp = Fx::from_num(0.2);
        let ki = Fx::from_num(2.5);
        write_gains(&dst, kp, ki).unwrap();
        let b = load_board(&dst).unwrap();
        assert_eq!(
            (b.config.apc.kp_iu_per_ou, b.config.apc.ki_iu_per_ou_ms),
            (kp, ki)
        );
        let comments = |t: &str| -> Vec<String> {
            t.lines()
                .filter(|l| l.trim_start().starts_with('#'))
                .map(String::from)
                .collect()
        };
        let before = std::fs::read_to_string(&src).unwrap();
        let after = std::fs::read_to_string(&dst).unwrap();
        assert_eq!(comments(&before), comments(&after));
        assert_eq!(before.lines().count(), after.lines().count());
        let _ = std::fs::remove_dir_all(&dir);
    }
}
