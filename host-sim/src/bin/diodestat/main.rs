//! `diodestat`: run scenarios of the firmware core against the simulated diode.

use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use clap::{Parser, Subcommand};
use diodestat_sim::board_file::{load_board, LoadedBoard};
use diodestat_sim::files::{self, Staging};
use diodestat_sim::{check, report};

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
    /// Run a scenario file: CSV trace, SVG plot, summary (printed, summary.txt, summary.json); exits non-zero when an expectation fails.
    Run {
        /// Scenario file (TOML).
        scenario: PathBuf,
        /// Output folder for trace.csv, plot.svg, summary.txt and summary.json.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Run scenarios as a test suite: a table of their expectations, optional JUnit XML; exits non-zero on any failure.
    Check {
        /// Scenario files, or folders searched for scenarios (TOML files with a `board` key).
        #[arg(required = true)]
        paths: Vec<PathBuf>,
        /// Write the results as JUnit XML to this file.
        #[arg(long)]
        junit: Option<PathBuf>,
    },
    /// L-I-V sweep of a module's diode: isothermal at junction temperatures, or CW with
    /// self-heating at case temperatures; threshold and slope marked (CSV and SVG).
    Liv {
        /// Module file (TOML, e.g. examples/modules/demo-red-650.toml), or a built-in demo
        /// module: visible or pump.
        module: String,
        /// Junction temperatures of isothermal sweeps, degC (-55 to 150; default 25 unless
        /// --case-c is given).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_delimiter = ',', value_parser = finite_in(-55.0, 150.0, " degC"))]
        temps_c: Option<Vec<f64>>,
        /// Case temperatures of CW sweeps with self-heating through the module's
        /// junction-to-case resistance, degC (-55 to 125).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_delimiter = ',', value_parser = finite_in(-55.0, 125.0, " degC"))]
        case_c: Vec<f64>,
        /// Highest current, mA, above 0 and at most the driver's full scale (the default).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " mA"))]
        max_ma: Option<f64>,
        /// Output folder.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Fit a module's diode to measured L-I-V sweeps (CSV) and write a module file, the fit
    /// report and a plot of measured against fitted curves.
    Fit {
        /// Sweep file (CSV): a header with current_a|current_ma, power_w|power_mw,
        /// voltage_v|voltage_mv and case_c|case_k; one row per point.
        sweeps: PathBuf,
        /// Module file giving every value the sweeps cannot (wavelength, reflectivities,
        /// monitor, source, thermal path, sensor, converters).
        #[arg(long)]
        template: PathBuf,
        /// Name of the fitted module (default: the sweep file's name with -fitted).
        #[arg(long)]
        name: Option<String>,
        /// Slope step above threshold reported as a kink, fraction of the slope (0 to 1).
        #[arg(long, allow_hyphen_values = true, num_args = 1, default_value_t = diodestat_sim::fit::KINK_TOL, value_parser = finite_in(f64::MIN_POSITIVE, 1.0, ""))]
        kink_tol: f64,
        /// Output folder for module.toml, fit.md, fit.json and fit.svg.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Fault campaign: every injectable fault x moments x plant corners x setpoints, judged against the
    /// board's intended laser class and the module's ratings; exits non-zero on any unsafe case.
    Campaign {
        /// Board configuration file (TOML) with a [laser_safety] section, e.g. examples/demo-pump-5w/board.toml.
        board: PathBuf,
        /// Faults to run, by kind (e.g. dac-stuck) or label (e.g. "dac-stuck code=0"), comma-separated (default: all).
        #[arg(long, value_delimiter = ',')]
        faults: Option<Vec<String>>,
        /// Moments: soft-start, steady, setpoint-change, derating, latent, soft-stop, clear-retry (default: all).
        #[arg(long, value_delimiter = ',', value_parser = moment)]
        moments: Option<Vec<diodestat_sim::campaign::Moment>>,
        /// Corners: nominal, cold, hot, tracking-low, aged, threshold-high, slope-low (default: all).
        #[arg(long, value_delimiter = ',')]
        corners: Option<Vec<String>>,
        /// Ambient of the cold and hot corners, degC, as COLD,HOT, e.g. -10,50.
        #[arg(long, value_delimiter = ',', num_args = 1, allow_hyphen_values = true, default_value = "0,40", value_parser = finite_in(-55.0, 125.0, " degC"))]
        ambient_c: Vec<f64>,
        /// Setpoints, mW, within the board's range (default: two thirds of the highest).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_delimiter = ',', value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " mW"))]
        setpoints_mw: Option<Vec<f64>>,
        /// Longest watch window of a slow fault (heatsink loss, aging, degrading monitor), s.
        #[arg(long, allow_hyphen_values = true, num_args = 1, default_value_t = 20.0, value_parser = finite_in(0.001, 600.0, " s"))]
        slow_bound_s: f64,
        /// Monte Carlo: replace the corners with N parts drawn from the module's tolerances (at 25 degC).
        #[arg(long, allow_hyphen_values = true, num_args = 1, conflicts_with = "corners", value_parser = clap::value_parser!(u32).range(1..=100_000))]
        parts: Option<u32>,
        /// Seed of the Monte Carlo parts.
        #[arg(
            long,
            allow_hyphen_values = true,
            num_args = 1,
            default_value_t = 1,
            requires = "parts"
        )]
        parts_seed: u64,
        /// Monte Carlo: run the slow faults (heatsink loss, aging, degrading monitor) on the first N parts only.
        #[arg(long, allow_hyphen_values = true, num_args = 1, default_value_t = diodestat_sim::campaign::SLOW_PARTS, requires = "parts")]
        slow_parts: u32,
        /// Run only slice K of N (cases numbered K-1 modulo N); merge the slices with campaign-merge.
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = shard)]
        shard: Option<(u32, u32)>,
        /// Switch one protection off for this campaign, to see which faults it must catch: overcurrent,
        /// monitor-runaway, drive-mismatch, monitor-loss, over-temperature or power-implausible
        /// (docs/campaign.md). An analysis of the design, not a configuration to ship.
        #[arg(long)]
        without: Option<String>,
        /// Output folder for campaign.md, campaign.json and campaign.xml (JUnit).
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Merge the campaign.json of every shard of a campaign into the single run's campaign.md, campaign.json and campaign.xml.
    CampaignMerge {
        /// The shards' campaign.json files.
        #[arg(required = true)]
        shards: Vec<PathBuf>,
        /// Output folder.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Which protections each fault needs: the campaign with every protection on, then the same
    /// campaign with one protection switched off (--without) per record; writes needs.md and needs.json.
    CampaignNeeds {
        /// campaign.json of the campaign with every protection on, then one per protection switched off.
        #[arg(required = true, num_args = 2..)]
        records: Vec<PathBuf>,
        /// Output folder.
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
        /// Setpoint of the corners, mW, within the board's setpoint range (default: two thirds of the board's highest setpoint).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " mW"))]
        setpoint_mw: Option<f64>,
        /// Largest overshoot of the optical power, % of the step (default: the board file's
        /// `[loop_check] max_overshoot_pct`, else 10); 0 to 100.
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(0.0, 100.0, " %"))]
        max_overshoot_pct: Option<f64>,
    },
    /// Propose PI gains for a crossover or bandwidth target keeping the margins at every plant corner.
    LoopTune {
        /// Board configuration file (TOML).
        board: PathBuf,
        /// Target gain crossover of the highest-gain corner, Hz.
        #[arg(
            long,
            allow_hyphen_values = true,
            num_args = 1,
            conflicts_with = "bandwidth_hz",
            required_unless_present = "bandwidth_hz",
            value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " Hz")
        )]
        crossover_hz: Option<f64>,
        /// Target closed-loop bandwidth of the slowest corner, Hz (below half the tick rate).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " Hz"))]
        bandwidth_hz: Option<f64>,
        /// Setpoint of the corners, mW, within the board's setpoint range (default: two thirds of the board's highest setpoint).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " mW"))]
        setpoint_mw: Option<f64>,
        /// Phase margin every corner keeps, degrees (0 to 90).
        #[arg(long, allow_hyphen_values = true, num_args = 1, default_value_t = loop_cmd::TUNE_PM_DEG, value_parser = finite_in(0.0, 90.0, " deg"))]
        min_pm_deg: f64,
        /// Gain margin every corner keeps, dB (0 to 60).
        #[arg(long, allow_hyphen_values = true, num_args = 1, default_value_t = loop_cmd::TUNE_GM_DB, value_parser = finite_in(0.0, 60.0, " dB"))]
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
        /// Setpoint of the corners, mW, within each board's setpoint range (default: two thirds of each board's highest setpoint).
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(f64::MIN_POSITIVE, f64::MAX, " mW"))]
        setpoint_mw: Option<f64>,
        /// Largest overshoot of the optical power, % of the step (default: the board file's
        /// `[loop_check] max_overshoot_pct`, else 10); 0 to 100.
        #[arg(long, allow_hyphen_values = true, num_args = 1, value_parser = finite_in(0.0, 100.0, " %"))]
        max_overshoot_pct: Option<f64>,
    },
    /// Export a board configuration file as Rust source, with its fingerprint.
    Export {
        /// Board configuration file (TOML), e.g. examples/demo-red-30/board.toml.
        board: PathBuf,
        /// Output file.
        #[arg(long)]
        out: PathBuf,
    },
}

/// A command-line number parser: finite and within `lo ..= hi`; clap's
/// message names the option and the value.
fn finite_in(
    lo: f64,
    hi: f64,
    unit: &'static str,
) -> impl Fn(&str) -> Result<f64, String> + Clone + Send + Sync + 'static {
    move |s: &str| {
        let v: f64 = s
            .trim()
            .parse()
            .map_err(|_| format!("expected a number{}", range_text(lo, hi, unit)))?;
        if v.is_finite() && v >= lo && v <= hi {
            Ok(v)
        } else {
            Err(format!(
                "must be a finite number{}",
                range_text(lo, hi, unit)
            ))
        }
    }
}

/// "1 finding", "2 findings": a count with its noun in the right number.
fn count_of(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
    }
}

fn range_text(lo: f64, hi: f64, unit: &str) -> String {
    match (lo == f64::MIN_POSITIVE, hi == f64::MAX) {
        (true, true) => format!(" above 0{unit}"),
        (false, true) => format!(" >= {lo}{unit}"),
        (true, false) => format!(" in (0, {hi}]{unit}"),
        (false, false) => format!(" in {lo} ..= {hi}{unit}"),
    }
}

/// Most temperatures one `liv` sweep takes.
const MAX_LIV_TEMPS: usize = 16;

/// What a run streams to while it goes: `trace.csv` (into the staging
/// folder, moved into place with the other outputs) and the progress bar.
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

fn run(path: &Path, out: &Path) -> Result<(), String> {
    let loaded = check::load(path)?;
    files::check_out_dir(
        out,
        "--out",
        &["trace.csv", "plot.svg", "summary.txt", "summary.json"],
        &loaded.inputs,
    )
    .map_err(|e| e.to_string())?;
    println!("{}", board_line(&loaded.board));
    let stage = Staging::new(out).map_err(|e| e.to_string())?;
    // trace.csv streams into the staging folder while the run goes.
    let file = std::fs::File::create(stage.path("trace.csv"))
        .map_err(|e| format!("{}: {e}", out.join("trace.csv").display()))?;
    let n_ticks = (loaded.scenario.duration_ms * 1e-3 * f64::from(loaded.board.config.tick_hz))
        .round() as u64;
    let mut sink = RunSink {
        csv: diodestat_sim::trace::CsvTrace::new(file),
        bar: diodestat_sim::progress::bar(n_ticks, "ticks"),
    };
    // The class limit the plot draws, where the board declares [laser_safety].
    let class_limit = loaded
        .board
        .pass_lines
        .as_ref()
        .map(|l| (l.class.name(), l.ael.cw_w(), l.accessible_fraction));
    let ran = loaded.run_streamed(&mut sink);
    sink.bar.finish_and_clear();
    let written = sink.csv.finish();
    let ran = ran?;
    written.map_err(|e| format!("{}: {e}", out.join("trace.csv").display()))?;
    let (sc, res, secs) = (&ran.scenario, &ran.result, ran.seconds);
    let summary = report::summary(sc, res, ran.outcomes.clone());
    let text = summary.text();
    let mut guides = report::PlotGuides::for_run(sc, res);
    guides = match class_limit {
        Some((class, Some(ael_w), fraction)) => {
            guides.with_class_limit(class, ael_w * 1e3, fraction)
        }
        Some((class, None, _)) => guides.with_unlimited_class(class),
        None => guides,
    };
    report::write_svg(&stage.path("plot.svg"), &sc.name, res, &guides)?;
    std::fs::write(stage.path("summary.txt"), &text)
        .map_err(|e| format!("{}: {e}", out.join("summary.txt").display()))?;
    std::fs::write(stage.path("summary.json"), summary.json())
        .map_err(|e| format!("{}: {e}", out.join("summary.json").display()))?;
    stage.commit().map_err(|e| e.to_string())?;
    print!("{text}");
    println!(
        "timing: {} ticks in {:.3} s = {:.2} Mticks/s ({:.0}x real time)",
        res.ticks,
        secs,
        res.ticks as f64 / secs / 1e6,
        res.ticks as f64 / f64::from(res.tick_hz) / secs
    );
    println!(
        "wrote {}, {}, {} and {}",
        out.join("trace.csv").display(),
        out.join("plot.svg").display(),
        out.join("summary.txt").display(),
        out.join("summary.json").display()
    );
    let failed = ran.outcomes.iter().filter(|o| !o.passed).count();
    if failed > 0 {
        return Err(format!(
            "{failed} of {} expectations failed (see FAIL above)",
            ran.outcomes.len()
        ));
    }
    Ok(())
}

fn check_cmd(paths: &[PathBuf], junit: Option<&Path>) -> Result<(), String> {
    let files = check::collect(paths)?;
    if files.is_empty() {
        return Err("no scenario files found".into());
    }
    let cases: Vec<check::Case> = files.iter().map(|f| check::Case::run(f)).collect();
    print!("{}", check::table(&cases));
    if let Some(j) = junit {
        files::write_atomic(j, check::junit(&cases).as_bytes())
            .map_err(|e| format!("--junit {}: {e}", j.display()))?;
        println!("wrote {}", j.display());
    }
    let failed = cases.iter().filter(|c| !c.passed()).count();
    if failed > 0 {
        return Err(format!("{failed} of {} scenarios failed", cases.len()));
    }
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
    let loaded = diodestat_sim::module_file::resolve(module, Path::new(""), "MODULE")?;
    let inputs: Vec<PathBuf> = loaded.path.iter().cloned().collect();
    let m = loaded.module;
    let module = loaded.name.as_str();
    let full_ma = m.driver.dac_vref_v * m.driver.transconductance_a_per_v * 1e3;
    if let Some(v) = max_ma.filter(|v| *v > full_ma) {
        return Err(format!(
            "--max-ma {v}: above the {module} driver's full scale {full_ma} mA"
        ));
    }
    let max_ma = max_ma.unwrap_or(full_ma);
    for (opt, n) in [
        ("--temps-c", temps_c.map_or(0, <[f64]>::len)),
        ("--case-c", case_c.len()),
    ] {
        if n > MAX_LIV_TEMPS {
            return Err(format!("{opt}: {n} temperatures; at most {MAX_LIV_TEMPS}"));
        }
    }
    files::check_out_dir(out, "--out", &["liv.csv", "liv.svg"], &inputs)
        .map_err(|e| e.to_string())?;
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
    let stage = Staging::new(out).map_err(|e| e.to_string())?;
    std::fs::write(stage.path("liv.csv"), csv)
        .map_err(|e| format!("{}: {e}", out.join("liv.csv").display()))?;
    std::fs::write(stage.path("liv.svg"), svg)
        .map_err(|e| format!("{}: {e}", out.join("liv.svg").display()))?;
    stage.commit().map_err(|e| e.to_string())?;
    for c in &curves {
        let last = c.points.last();
        let fit = match (c.below, c.fit) {
            (Some(b), _) => b.to_string(),
            (None, Some(f)) => format!(
                "threshold {:.3} mA, slope {:.4} W/A (line through 10-40 % of the peak)",
                f.threshold_ma, f.slope_w_per_a
            ),
            (None, None) => {
                "lases, but too few points lie between 10 and 40 % of the peak to read a threshold"
                    .to_string()
            }
        };
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
    println!("CAUTION: {}", diodestat_sim::safety::SAFETY_CAUTION);
    Ok(())
}

/// The board a command runs: name, file, module, tick rate and the core's
/// fingerprint of its configuration (the one the firmware reports at start).
fn board_line(b: &LoadedBoard) -> String {
    format!(
        "board {} ({}, module {}, {} Hz tick, configuration fingerprint {})",
        b.name,
        b.path.display(),
        b.module_name,
        b.config.tick_hz,
        b.valid.fingerprint()
    )
}

fn moment(s: &str) -> Result<diodestat_sim::campaign::Moment, String> {
    diodestat_sim::campaign::Moment::parse(s).ok_or_else(|| {
        let names: Vec<&str> = diodestat_sim::campaign::Moment::ALL
            .iter()
            .map(|m| m.name())
            .collect();
        format!("{s:?} is no moment ({})", names.join(", "))
    })
}

fn shard(s: &str) -> Result<(u32, u32), String> {
    let bad = || format!("{s:?}: give K/N with 1 <= K <= N, e.g. 2/4");
    let (k, n) = s.split_once('/').ok_or_else(bad)?;
    let (k, n): (u32, u32) = (
        k.trim().parse().map_err(|_| bad())?,
        n.trim().parse().map_err(|_| bad())?,
    );
    if k == 0 || n == 0 || k > n {
        return Err(bad());
    }
    Ok((k, n))
}

const CAMPAIGN_FILES: [&str; 3] = ["campaign.md", "campaign.json", "campaign.xml"];

fn write_campaign(out: &Path, rec: &diodestat_sim::campaign::report::Record) -> Result<(), String> {
    use diodestat_sim::campaign::report;
    let json = serde_json::to_string_pretty(rec).map_err(|e| e.to_string())?;
    let stage = Staging::new(out).map_err(|e| e.to_string())?;
    for (name, body) in CAMPAIGN_FILES
        .iter()
        .zip([report::markdown(rec), json, report::junit(rec)])
    {
        std::fs::write(stage.path(name), body)
            .map_err(|e| format!("{}: {e}", out.join(name).display()))?;
    }
    stage.commit().map_err(|e| e.to_string())
}

fn campaign_verdict(
    rec: &diodestat_sim::campaign::report::Record,
    out: &Path,
) -> Result<(), String> {
    let bad: Vec<_> = rec.results.iter().filter(|r| !r.safe).collect();
    let findings = rec.results.iter().filter(|r| r.finding.is_some()).count();
    if let Some(mc) = diodestat_sim::campaign::report::monte_carlo(rec) {
        println!(
            "Monte Carlo: {} of {} parts with an unsafe case (95 % upper bound {:.4}); {} of {} cases unsafe (95 % upper bound {:.5})",
            mc.unsafe_parts, mc.parts, mc.part_upper_95, mc.unsafe_cases, mc.cases, mc.case_upper_95
        );
    }
    println!(
        "{} cases, {} unsafe, {} findings; wrote {}",
        rec.results.len(),
        bad.len(),
        findings,
        out.join("campaign.md").display()
    );
    for r in &bad {
        println!(
            "UNSAFE: {} {} {} {:.4} mW: {}",
            r.fault,
            r.moment.name(),
            r.corner,
            r.setpoint_mw,
            r.unsafe_reasons.join("; ")
        );
    }
    println!(
        "CAUTION: {} A campaign is evidence for a design review, not a classification.",
        diodestat_sim::safety::SAFETY_CAUTION
    );
    if bad.is_empty() {
        Ok(())
    } else {
        Err(format!("{} unsafe cases", bad.len()))
    }
}

fn fit_cmd(
    sweeps: &Path,
    template: &Path,
    name: Option<&str>,
    kink_tol: f64,
    out: &Path,
) -> Result<(), String> {
    let done = diodestat_sim::fit::write_fit(sweeps, template, name, kink_tol, out)?;
    print!("{}", done.markdown);
    println!(
        "wrote {}, {}, {} and {}",
        out.join("module.toml").display(),
        out.join("fit.md").display(),
        out.join("fit.json").display(),
        out.join("fit.svg").display()
    );
    Ok(())
}

fn campaign(
    board: &Path,
    sel: &diodestat_sim::campaign::Selection,
    out: &Path,
) -> Result<(), String> {
    let b = load_board(board).map_err(|e| e.to_string())?;
    let lines = b.pass_lines.ok_or_else(|| {
        format!(
            "{}: no [laser_safety] section: a campaign judges the board against its intended laser class \
             and the module's ratings (docs/board-config.md, [laser_safety])",
            board.display()
        )
    })?;
    use diodestat_sim::campaign::without;
    let switched = match &sel.without {
        Some(name) => Some(without::switch_off(&b.valid, name).map_err(|e| e.to_string())?),
        None => None,
    };
    let bench = diodestat_sim::campaign::Bench {
        name: &b.name,
        module: &b.module,
        cfg: switched.as_ref().map_or(&b.valid, |s| &s.cfg),
        latency: b.latency,
        lines: &lines,
    };
    // Refuse a bad selection before touching the output.
    let plan = diodestat_sim::campaign::cases(&bench, sel).map_err(|e| e.to_string())?;
    if let Some(s) = &switched {
        s.check_run(diodestat_sim::campaign::longest_run_ms(
            &b.module,
            &plan.faults,
            sel.slow_bound_s,
        ))
        .map_err(|e| e.to_string())?;
    }
    let mut inputs = vec![board.to_path_buf()];
    inputs.extend(b.table_csv.clone());
    inputs.extend(b.module_file.clone());
    files::check_out_dir(out, "--out", &CAMPAIGN_FILES, &inputs).map_err(|e| e.to_string())?;
    println!("{}", board_line(&b));
    if let Some(s) = &switched {
        println!(
            "protection switched off: {} ({}); the campaign runs the altered configuration, fingerprint {}",
            s.fault.name(),
            without::how(s.fault),
            s.cfg.fingerprint()
        );
    }
    let t0 = Instant::now();
    let rec = diodestat_sim::campaign::run_record(
        &bench,
        &b.module_name,
        &board.display().to_string(),
        sel,
    )?;
    let secs = t0.elapsed().as_secs_f64();
    write_campaign(out, &rec)?;
    println!(
        "{} cases in {secs:.1} s ({:.0} cases/s)",
        rec.results.len(),
        rec.results.len() as f64 / secs.max(1e-9)
    );
    campaign_verdict(&rec, out)
}

fn campaign_needs(records: &[PathBuf], out: &Path) -> Result<(), String> {
    use diodestat_sim::campaign::needs;
    let mut recs = Vec::new();
    for p in records {
        let text = files::read_text(p, "RECORD").map_err(|e| e.to_string())?;
        let rec: diodestat_sim::campaign::report::Record = serde_json::from_str(&text)
            .map_err(|e| format!("{}: not a campaign record: {e}", p.display()))?;
        recs.push(rec);
    }
    let n = needs::needs(&recs).map_err(|e| e.to_string())?;
    const NEEDS_FILES: [&str; 2] = ["needs.md", "needs.json"];
    files::check_out_dir(out, "--out", &NEEDS_FILES, records).map_err(|e| e.to_string())?;
    let json = serde_json::to_string_pretty(&n).map_err(|e| e.to_string())?;
    let stage = Staging::new(out).map_err(|e| e.to_string())?;
    for (name, body) in NEEDS_FILES.iter().zip([needs::markdown(&n), json]) {
        std::fs::write(stage.path(name), body)
            .map_err(|e| format!("{}: {e}", out.join(name).display()))?;
    }
    stage.commit().map_err(|e| e.to_string())?;
    for f in &n.faults {
        if !f.for_class.is_empty() {
            println!(
                "{}: leaves Class {} without {}",
                f.fault,
                n.class,
                f.for_class.join(" or without ")
            );
        }
    }
    println!(
        "{} protections switched off one at a time; wrote {}",
        n.runs.len(),
        out.join("needs.md").display()
    );
    println!(
        "CAUTION: {} A campaign is evidence for a design review, not a classification.",
        n.caution
    );
    Ok(())
}

fn campaign_merge(shards: &[PathBuf], out: &Path) -> Result<(), String> {
    let mut recs = Vec::new();
    for p in shards {
        let text = files::read_text(p, "SHARDS").map_err(|e| e.to_string())?;
        let rec: diodestat_sim::campaign::report::Record = serde_json::from_str(&text)
            .map_err(|e| format!("{}: not a campaign record: {e}", p.display()))?;
        recs.push(rec);
    }
    let rec = diodestat_sim::campaign::report::merge(recs).map_err(|e| e.to_string())?;
    files::check_out_dir(out, "--out", &CAMPAIGN_FILES, shards).map_err(|e| e.to_string())?;
    write_campaign(out, &rec)?;
    campaign_verdict(&rec, out)
}

fn export(board: &Path, out: &Path) -> Result<(), String> {
    let b = load_board(board).map_err(|e| e.to_string())?;
    let mut inputs = vec![board.to_path_buf()];
    inputs.extend(b.table_csv.clone());
    inputs.extend(b.module_file.clone());
    files::check_out_file(out, "--out", &inputs).map_err(|e| e.to_string())?;
    let src = diodestat_sim::export::rust_module(&b.name, &b.valid);
    files::write_atomic(out, src.as_bytes()).map_err(|e| e.to_string())?;
    println!(
        "wrote {} from {} (CONFIG_FINGERPRINT {})",
        out.display(),
        b.path.display(),
        b.valid.fingerprint()
    );
    Ok(())
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let r = match &cli.cmd {
        Cmd::Run { scenario, out } => run(scenario, out),
        Cmd::Check { paths, junit } => check_cmd(paths, junit.as_deref()),
        Cmd::Liv {
            module,
            temps_c,
            case_c,
            max_ma,
            out,
        } => liv(module, temps_c.as_deref(), case_c, *max_ma, out),
        Cmd::Export { board, out } => export(board, out),
        Cmd::Fit {
            sweeps,
            template,
            name,
            kink_tol,
            out,
        } => fit_cmd(sweeps, template, name.as_deref(), *kink_tol, out),
        Cmd::Campaign {
            board,
            faults,
            moments,
            corners,
            ambient_c,
            setpoints_mw,
            slow_bound_s,
            parts,
            parts_seed,
            slow_parts,
            shard,
            without,
            out,
        } => match ambient_c.as_slice() {
            [cold_c, hot_c] => campaign(
                board,
                &diodestat_sim::campaign::Selection {
                    faults: faults.clone(),
                    moments: moments.clone(),
                    corners: corners.clone(),
                    cold_c: *cold_c,
                    hot_c: *hot_c,
                    setpoints_mw: setpoints_mw.clone(),
                    slow_bound_s: *slow_bound_s,
                    parts: parts.map(|n| (n, *parts_seed)),
                    slow_parts: parts.map(|_| *slow_parts),
                    shard: *shard,
                    without: without.clone(),
                },
                out,
            ),
            _ => Err("--ambient-c: give COLD,HOT (two temperatures, degC)".to_string()),
        },
        Cmd::CampaignMerge { shards, out } => campaign_merge(shards, out),
        Cmd::CampaignNeeds { records, out } => campaign_needs(records, out),
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

#[cfg(test)]
mod tests {
    use super::{count_of, Cli, Cmd};
    use clap::{CommandFactory, Parser};

    /// `campaign --help` shows the ambient default as it is written on the
    /// command line, COLD,HOT (it showed "0 40"), and that default is the
    /// campaign's cold and hot ambient.
    #[test]
    fn the_ambient_default_reads_as_it_is_written() {
        let mut cmd = Cli::command();
        let help = cmd
            .find_subcommand_mut("campaign")
            .unwrap()
            .render_help()
            .to_string();
        assert!(help.contains("[default: 0,40]"), "{help}");
        let cli = Cli::try_parse_from(["diodestat", "campaign", "board.toml"]).unwrap();
        let Cmd::Campaign { ambient_c, .. } = cli.cmd else {
            panic!("not the campaign command");
        };
        assert_eq!(
            ambient_c,
            [
                diodestat_sim::campaign::COLD_C,
                diodestat_sim::campaign::HOT_C
            ]
        );
        let cli = Cli::try_parse_from(["diodestat", "campaign", "b.toml", "--ambient-c", "-10,50"])
            .unwrap();
        let Cmd::Campaign { ambient_c, .. } = cli.cmd else {
            panic!("not the campaign command");
        };
        assert_eq!(ambient_c, [-10.0, 50.0]);
    }

    /// Every option that takes a number or a list of numbers reads a
    /// leading minus as part of its value: a negative temperature is
    /// parsed, an out-of-range negative is refused by the option's range
    /// check, never as an unknown argument (`--temps-c -40,25` and
    /// `--case-c -20` were refused as unexpected arguments).
    #[test]
    fn numeric_options_read_negative_values() {
        use std::any::TypeId;
        let numeric = [
            TypeId::of::<f64>(),
            TypeId::of::<u32>(),
            TypeId::of::<u64>(),
            TypeId::of::<(u32, u32)>(),
        ];
        let cli = Cli::command();
        let mut checked = 0;
        for sub in cli.get_subcommands() {
            for arg in sub.get_arguments().filter(|a| a.get_long().is_some()) {
                let ty = arg.get_value_parser().type_id();
                if !numeric.iter().any(|t| ty == *t) {
                    continue;
                }
                checked += 1;
                let long = format!("--{}", arg.get_long().unwrap());
                for v in ["-1", "-10,50", "-0.5"] {
                    let e = Cli::try_parse_from(["diodestat", sub.get_name(), "x", &long, v])
                        .err()
                        .map(|e| (e.kind(), e.to_string()));
                    assert!(
                        !matches!(e, Some((clap::error::ErrorKind::UnknownArgument, _))),
                        "{} {long} {v}: {e:?}",
                        sub.get_name()
                    );
                }
            }
        }
        assert!(checked >= 19, "{checked}");
        let cli = Cli::try_parse_from([
            "diodestat",
            "liv",
            "visible",
            "--temps-c",
            "-40,25",
            "--case-c",
            "-20",
        ])
        .unwrap();
        let Cmd::Liv {
            temps_c, case_c, ..
        } = cli.cmd
        else {
            panic!("not the liv command");
        };
        assert_eq!(temps_c, Some(vec![-40.0, 25.0]));
        assert_eq!(case_c, [-20.0]);
        let e = Cli::try_parse_from(["diodestat", "loop-tune", "b.toml", "--setpoint-mw", "-5"])
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("must be a finite number above 0 mW"), "{e}");
    }

    #[test]
    fn a_count_takes_the_noun_in_its_number() {
        assert_eq!(count_of(0, "finding"), "0 findings");
        assert_eq!(count_of(1, "finding"), "1 finding");
        assert_eq!(count_of(2, "finding"), "2 findings");
    }
}
