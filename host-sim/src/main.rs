//! `diodestat`: run scenarios of the firmware core against the simulated diode.

use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use clap::{Parser, Subcommand};
use diodestat_sim::boardfile::{load_board, LoadedBoard};
use diodestat_sim::plant::DemoModule;
use diodestat_sim::{report, scenario, sim};

mod loop_cmd;

#[derive(Parser)]
#[command(
    name = "diodestat",
    version,
    about = "Run the diodestat firmware core against a simulated laser diode"
)]
struct Cli {
    #[command(subcommand)]
    cmd: Cmd,
}

#[derive(Subcommand)]
enum Cmd {
    /// Run a scenario file: CSV trace, SVG plot and a printed summary.
    Run {
        /// Scenario file (TOML).
        scenario: PathBuf,
        /// Output folder for trace.csv and plot.svg.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// L-I-V sweep of a demo module's diode: isothermal at junction temperatures, or CW with
    /// self-heating at case temperatures; threshold and slope marked (CSV and SVG).
    Liv {
        /// Module: visible or pump.
        module: String,
        /// Junction temperatures of isothermal sweeps, degC (default 25 unless --case-c
        /// is given).
        #[arg(long, value_delimiter = ',')]
        temps_c: Option<Vec<f64>>,
        /// Case temperatures of CW sweeps with self-heating through the module's
        /// junction-to-case resistance, degC.
        #[arg(long, value_delimiter = ',')]
        case_c: Vec<f64>,
        /// Highest current, mA (default: the driver's full scale).
        #[arg(long)]
        max_ma: Option<f64>,
        /// Output folder.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Fault campaign: every injectable fault x moments x plant corners; exits non-zero on any unsafe case.
    Campaign {
        /// Board configuration file (TOML), e.g. examples/demo-pump-5w/board.toml.
        board: PathBuf,
        /// Allowed excess over the optical ceiling, fraction.
        #[arg(long, default_value_t = 0.10)]
        margin: f64,
        /// Output folder for campaign.md and campaign.json.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Power-loop report per board: margins and time-domain table at every plant corner, worst corner, Bode plots.
    LoopReport {
        /// Board configuration files (default: examples/*/board.toml).
        boards: Vec<PathBuf>,
        /// Output folder; each board gets OUT/BOARD/loop-report.md, report.json, bode.svg and bode/*.svg.
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Setpoint of the corners, mW (default: two thirds of the board's highest setpoint).
        #[arg(long)]
        setpoint_mw: Option<f64>,
        /// Largest overshoot of the optical power, % of the step (default: the board file's
        /// `[loop_check] max_overshoot_pct`, else 10).
        #[arg(long)]
        max_overshoot_pct: Option<f64>,
    },
    /// Propose PI gains for a crossover or bandwidth target keeping the margins at every plant corner.
    LoopTune {
        /// Board configuration file (TOML).
        board: PathBuf,
        /// Target gain crossover of the highest-gain corner, Hz.
        #[arg(
            long,
            conflicts_with = "bandwidth_hz",
            required_unless_present = "bandwidth_hz"
        )]
        crossover_hz: Option<f64>,
        /// Target closed-loop bandwidth of the slowest corner, Hz.
        #[arg(long)]
        bandwidth_hz: Option<f64>,
        /// Setpoint of the corners, mW (default: two thirds of the board's highest setpoint).
        #[arg(long)]
        setpoint_mw: Option<f64>,
        /// Phase margin every corner keeps, degrees.
        #[arg(long, default_value_t = loop_cmd::TUNE_PM_DEG)]
        min_pm_deg: f64,
        /// Gain margin every corner keeps, dB.
        #[arg(long, default_value_t = loop_cmd::TUNE_GM_DB)]
        min_gm_db: f64,
        /// Write the proposed gains into the apc table of the board file, in place
        /// (comments and layout kept).
        #[arg(long)]
        write: bool,
        /// Also write the design and the margins and time-domain figures with the
        /// proposed gains as JSON to this file.
        #[arg(long)]
        json: Option<PathBuf>,
    },
    /// Loop gate: exits non-zero, naming board, corner and figure, if any corner misses PM 45 deg, GM 6 dB, the overshoot limit, or shows a limit cycle.
    LoopGate {
        /// Board configuration files (default: examples/*/board.toml).
        boards: Vec<PathBuf>,
        /// Also write the reports and Bode plots here.
        #[arg(long)]
        out: Option<PathBuf>,
        /// Setpoint of the corners, mW (default: two thirds of each board's highest setpoint).
        #[arg(long)]
        setpoint_mw: Option<f64>,
        /// Largest overshoot of the optical power, % of the step (default: the board file's
        /// `[loop_check] max_overshoot_pct`, else 10).
        #[arg(long)]
        max_overshoot_pct: Option<f64>,
    },
    /// Export a board configuration file as Rust source, with its hash.
    Export {
        /// Board configuration file (TOML), e.g. examples/demo-red-30/board.toml.
        board: PathBuf,
        /// Output file.
        #[arg(long)]
        out: PathBuf,
    },
}

fn module_by_name(name: &str) -> Result<DemoModule, String> {
    match name {
        "visible" => Ok(DemoModule::visible()),
        "pump" => Ok(DemoModule::pump()),
        other => Err(format!(
            "unknown module '{other}' (expected 'visible' or 'pump')"
        )),
    }
}

/// What a run streams to while it goes: `trace.csv` (to a temporary file
/// renamed into place at the end) and the progress bar.
struct RunSink {
    csv: diodestat_sim::trace::CsvTrace<std::fs::File>,
    bar: indicatif::ProgressBar,
}

impl diodestat_sim::trace::TraceSink for RunSink {
    fn row(&mut self, row: &diodestat_sim::trace::TraceRow) {
        self.csv.row(row);
    }
    fn progress(&mut self, done: u64, _total: u64) {
        self.bar.set_position(done);
    }
}

/// The temporary name an output is written under before it is renamed
/// into place, in the same folder.
fn temp_beside(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map_or_else(|| "out".into(), |n| n.to_string_lossy().into_owned());
    path.with_file_name(format!(".{name}.{}.tmp", std::process::id()))
}

fn run(path: &PathBuf, out: &PathBuf) -> Result<(), String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let sc = scenario::parse(&text).map_err(|e| format!("{}: {e}", path.display()))?;
    let board = load_board(&sc.board_path(path)).map_err(|e| e.to_string())?;
    println!("{}", board_line(&board));
    std::fs::create_dir_all(out).map_err(|e| format!("{}: {e}", out.display()))?;
    let csv_path = out.join("trace.csv");
    let svg_path = out.join("plot.svg");
    let csv_tmp = temp_beside(&csv_path);
    let file =
        std::fs::File::create(&csv_tmp).map_err(|e| format!("{}: {e}", csv_tmp.display()))?;
    let n_ticks = (sc.duration_ms * 1e-3 * f64::from(board.config.tick_hz)).round() as u64;
    let mut sink = RunSink {
        csv: diodestat_sim::trace::CsvTrace::new(file),
        bar: diodestat_sim::progress::bar(n_ticks, "ticks"),
    };
    let t0 = Instant::now();
    let res = sim::run_streamed(&sc, &board.module, board.valid, &mut sink);
    let secs = t0.elapsed().as_secs_f64();
    sink.bar.finish_and_clear();
    let written = sink.csv.finish();
    let res = res.map_err(|e| e.to_string()).and_then(|r| {
        written
            .map(|_| r)
            .map_err(|e| format!("{}: {e}", csv_tmp.display()))
    });
    if res.is_err() {
        let _ = std::fs::remove_file(&csv_tmp);
    }
    let res = res?;
    let svg_tmp = temp_beside(&svg_path);
    let svg = report::write_svg(&svg_tmp, &sc.name, &res);
    if let Err(e) = svg {
        let _ = std::fs::remove_file(&csv_tmp);
        let _ = std::fs::remove_file(&svg_tmp);
        return Err(e);
    }
    for (tmp, dst) in [(&csv_tmp, &csv_path), (&svg_tmp, &svg_path)] {
        std::fs::rename(tmp, dst).map_err(|e| format!("{}: {e}", dst.display()))?;
    }
    print!("{}", report::summary(&sc, &res));
    println!(
        "timing: {} ticks in {:.3} s = {:.2} Mticks/s ({:.0}x real time)",
        res.ticks,
        secs,
        res.ticks as f64 / secs / 1e6,
        res.ticks as f64 / f64::from(res.tick_hz) / secs
    );
    println!("wrote {} and {}", csv_path.display(), svg_path.display());
    Ok(())
}

fn liv(
    module: &str,
    temps_c: Option<&[f64]>,
    case_c: &[f64],
    max_ma: Option<f64>,
    out: &Path,
) -> Result<(), String> {
    use diodestat_sim::liv::{sweep, Heating};
    let m = module_by_name(module)?;
    let max_ma = max_ma.unwrap_or(m.driver.dac_vref_v * m.driver.transconductance_a_per_v * 1e3);
    // Junction temperatures: as given, else 25 degC unless only case
    // temperatures were asked for.
    let junction: &[f64] = match temps_c {
        Some(t) => t,
        None if case_c.is_empty() => &[25.0],
        None => &[],
    };
    let heatings = junction
        .iter()
        .map(|&t| Heating::Isothermal { junction_c: t })
        .chain(case_c.iter().map(|&t| Heating::SelfHeated { case_c: t }));
    let curves = heatings
        .map(|h| sweep(&m, h, max_ma, 400).map_err(|e| format!("{}: {e}", h.label())))
        .collect::<Result<Vec<_>, _>>()?;
    let mut csv = String::from("sweep,set_c,i_ma,p_mw,v_f_v,wavelength_nm,tj_c\n");
    for c in &curves {
        let (kind, set_c) = match c.heating {
            Heating::Isothermal { junction_c } => ("isothermal", junction_c),
            Heating::SelfHeated { case_c } => ("cw-self-heated", case_c),
        };
        for p in &c.points {
            csv.push_str(&format!(
                "{kind},{set_c},{:.4},{:.5},{:.5},{:.4},{:.4}\n",
                p.i_ma, p.p_mw, p.v_f_v, p.wavelength_nm, p.tj_c
            ));
        }
    }
    let svg = report::liv_svg(module, &curves)?;
    std::fs::create_dir_all(out).map_err(|e| format!("{}: {e}", out.display()))?;
    for (name, bytes) in [("liv.csv", csv.as_bytes()), ("liv.svg", svg.as_bytes())] {
        let dst = out.join(name);
        let tmp = temp_beside(&dst);
        std::fs::write(&tmp, bytes)
            .and_then(|()| std::fs::rename(&tmp, &dst))
            .map_err(|e| {
                let _ = std::fs::remove_file(&tmp);
                format!("{}: {e}", dst.display())
            })?;
    }
    for c in &curves {
        let last = c.points.last();
        let fit = c.fit.map_or("does not lase".to_string(), |f| {
            format!(
                "threshold {:.3} mA, slope {:.4} W/A (line through 10-40 % of the peak)",
                f.threshold_ma, f.slope_w_per_a
            )
        });
        println!(
            "{}: {fit}; at {:.1} mA {:.3} mW, junction {:.1} degC{}",
            c.heating.label(),
            last.map_or(0.0, |p| p.i_ma),
            last.map_or(0.0, |p| p.p_mw),
            last.map_or(f64::NAN, |p| p.tj_c),
            if last.is_some_and(|p| p.i_ma < max_ma * 0.999) {
                " (thermal runaway: no steady state at higher current)"
            } else {
                ""
            }
        );
    }
    println!(
        "wrote {} and {}",
        out.join("liv.csv").display(),
        out.join("liv.svg").display()
    );
    Ok(())
}

/// The board a command runs: name, file, module and the export hash.
fn board_line(b: &LoadedBoard) -> String {
    format!(
        "board {} ({}, module {}, {} Hz tick, configuration hash {:016x})",
        b.name,
        b.path.display(),
        b.module_name,
        b.config.tick_hz,
        diodestat_sim::export::config_hash(&b.config)
    )
}

fn campaign(board: &Path, margin: f64, out: &Path) -> Result<(), String> {
    let b = load_board(board).map_err(|e| e.to_string())?;
    println!("{}", board_line(&b));
    let (m, cfg) = (&b.module, &b.valid);
    let t0 = Instant::now();
    let results = diodestat_sim::campaign::run(&b.name, m, cfg, margin)?;
    let ceiling = cfg.config().protection.runaway_mw.to_num::<f64>();
    std::fs::create_dir_all(out).map_err(|e| e.to_string())?;
    let md = diodestat_sim::campaign::markdown(&b.name, &results, margin, ceiling);
    std::fs::write(out.join("campaign.md"), &md).map_err(|e| e.to_string())?;
    let json = serde_json::to_string_pretty(&results).map_err(|e| e.to_string())?;
    std::fs::write(out.join("campaign.json"), json).map_err(|e| e.to_string())?;
    let bad: Vec<_> = results.iter().filter(|r| !r.safe).collect();
    println!(
        "{} cases in {:.1} s, {} unsafe; wrote {}",
        results.len(),
        t0.elapsed().as_secs_f64(),
        bad.len(),
        out.join("campaign.md").display()
    );
    for r in &bad {
        println!(
            "UNSAFE: {} {:?} {}: detected {}, peak {:.3} mW, ticks over {}, damage {}",
            r.fault, r.moment, r.corner, r.detected, r.peak_mw, r.ticks_over, r.damaged
        );
    }
    println!("CAUTION: {}", report::SAFETY_CAUTION);
    if bad.is_empty() {
        Ok(())
    } else {
        Err(format!("{} unsafe cases", bad.len()))
    }
}

fn export(board: &Path, out: &Path) -> Result<(), String> {
    let b = load_board(board).map_err(|e| e.to_string())?;
    let src = diodestat_sim::export::rust_module(&b.name, &b.config);
    std::fs::write(out, &src).map_err(|e| format!("{}: {e}", out.display()))?;
    println!(
        "wrote {} from {} (CONFIG_HASH {:016x})",
        out.display(),
        b.path.display(),
        diodestat_sim::export::config_hash(&b.config)
    );
    Ok(())
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let r = match &cli.cmd {
        Cmd::Run { scenario, out } => run(scenario, out),
        Cmd::Liv {
            module,
            temps_c,
            case_c,
            max_ma,
            out,
        } => liv(module, temps_c.as_deref(), case_c, *max_ma, out),
        Cmd::Export { board, out } => export(board, out),
        Cmd::Campaign { board, margin, out } => campaign(board, *margin, out),
        Cmd::LoopReport {
            boards,
            out,
            setpoint_mw,
            max_overshoot_pct,
        } => loop_cmd::report(boards, out, *setpoint_mw, *max_overshoot_pct),
        Cmd::LoopTune {
            board,
            crossover_hz,
            bandwidth_hz,
            setpoint_mw,
            min_pm_deg,
            min_gm_db,
            write,
            json,
        } => match (crossover_hz, bandwidth_hz) {
            (Some(f), _) => Ok(loop_cmd::TuneTarget::CrossoverHz(*f)),
            (None, Some(f)) => Ok(loop_cmd::TuneTarget::BandwidthHz(*f)),
            (None, None) => Err("give --crossover-hz or --bandwidth-hz".to_string()),
        }
        .and_then(|t| {
            loop_cmd::tune(
                board,
                t,
                *setpoint_mw,
                *min_pm_deg,
                *min_gm_db,
                loop_cmd::TuneOutputs {
                    write: *write,
                    json: json.as_deref(),
                },
            )
        }),
        Cmd::LoopGate {
            boards,
            out,
            setpoint_mw,
            max_overshoot_pct,
        } => loop_cmd::gate(boards, out.as_deref(), *setpoint_mw, *max_overshoot_pct),
    };
    match r {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::FAILURE
        }
    }
}
