//! `diodestat`: run scenarios of the firmware core against the simulated diode.

use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

use clap::{Parser, Subcommand};
use diodestat_sim::plant::DemoModule;
use diodestat_sim::{board, report, scenario, sim};

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
    /// L-I-V sweep of a demo module's diode at chosen temperatures (CSV and SVG).
    Liv {
        /// Module: visible or pump.
        module: String,
        /// Junction temperatures, degC.
        #[arg(long, value_delimiter = ',', default_value = "25")]
        temps_c: Vec<f64>,
        /// Highest current, mA (default: the driver's full scale).
        #[arg(long)]
        max_ma: Option<f64>,
        /// Output folder.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Fault campaign: every injectable fault x moments x plant corners; exits non-zero on any unsafe case.
    Campaign {
        /// Module: visible or pump.
        module: String,
        /// Allowed excess over the optical ceiling, fraction.
        #[arg(long, default_value_t = 0.10)]
        margin: f64,
        /// Output folder for campaign.md and campaign.json.
        #[arg(long, default_value = "out")]
        out: PathBuf,
    },
    /// Export the board configuration of a module as Rust source, with its hash.
    Export {
        /// Module: visible or pump.
        module: String,
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

fn run(path: &PathBuf, out: &PathBuf) -> Result<(), String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let sc = scenario::parse(&text).map_err(|e| format!("{}: {e}", path.display()))?;
    let module = module_by_name(&sc.module)?;
    let cfg = board::calibrate(diodestat_core::example::config(), &module)
        .validate()
        .map_err(|e| format!("board configuration refused: {e}"))?;
    let t0 = Instant::now();
    let res = sim::run(&sc, &module, cfg).map_err(|e| e.to_string())?;
    let secs = t0.elapsed().as_secs_f64();
    std::fs::create_dir_all(out).map_err(|e| format!("{}: {e}", out.display()))?;
    report::write_csv(&out.join("trace.csv"), &res).map_err(|e| e.to_string())?;
    report::write_svg(&out.join("plot.svg"), &sc.name, &res)?;
    print!("{}", report::summary(&sc.name, &res));
    println!(
        "timing: {} ticks in {:.3} s = {:.2} Mticks/s ({:.0}x real time)",
        res.ticks,
        secs,
        res.ticks as f64 / secs / 1e6,
        res.ticks as f64 / f64::from(res.tick_hz) / secs
    );
    println!(
        "wrote {} and {}",
        out.join("trace.csv").display(),
        out.join("plot.svg").display()
    );
    Ok(())
}

fn liv(module: &str, temps_c: &[f64], max_ma: Option<f64>, out: &PathBuf) -> Result<(), String> {
    let m = module_by_name(module)?;
    let diode = diodestat_sim::plant::Diode::new(m.diode.clone()).map_err(|e| e.to_string())?;
    let i_max =
        max_ma.unwrap_or(m.driver.dac_vref_v * m.driver.transconductance_a_per_v * 1e3) * 1e-3;
    std::fs::create_dir_all(out).map_err(|e| e.to_string())?;
    let mut csv = String::from("t_c,i_ma,p_mw,v_f_v,wavelength_nm\n");
    let mut curves = Vec::new();
    for &t in temps_c {
        let mut pts = Vec::new();
        for k in 0..=400 {
            let i = i_max * f64::from(k) / 400.0;
            let o = diode.quasi_static(i, diodestat_sim::plant::c_to_k(t));
            csv.push_str(&format!(
                "{t},{:.4},{:.5},{:.5},{:.4}\n",
                i * 1e3,
                o.p_front_w * 1e3,
                o.v_f_v,
                o.wavelength_m * 1e9
            ));
            pts.push((i * 1e3, o.p_front_w * 1e3, o.v_f_v));
        }
        curves.push((t, pts));
    }
    std::fs::write(out.join("liv.csv"), csv).map_err(|e| e.to_string())?;
    report::write_liv_svg(&out.join("liv.svg"), module, &curves)?;
    for (t, pts) in &curves {
        let ith = diode.threshold_current_a(diodestat_sim::plant::c_to_k(*t)) * 1e3;
        let pmax = pts.iter().map(|p| p.1).fold(0.0, f64::max);
        println!(
            "{t:>6.1} degC: threshold {ith:.3} mA, power at {:.1} mA {:.3} mW",
            i_max * 1e3,
            pts.last().map_or(0.0, |p| p.1).max(0.0).min(pmax)
        );
    }
    println!(
        "wrote {} and {}",
        out.join("liv.csv").display(),
        out.join("liv.svg").display()
    );
    Ok(())
}

fn campaign(module: &str, margin: f64, out: &PathBuf) -> Result<(), String> {
    let m = module_by_name(module)?;
    let cfg = board::calibrate(diodestat_core::example::config(), &m)
        .validate()
        .map_err(|e| format!("board configuration refused: {e}"))?;
    let t0 = Instant::now();
    let results = diodestat_sim::campaign::run(module, &m, &cfg, margin)?;
    let ceiling = cfg.config().protection.runaway_mw.to_num::<f64>();
    std::fs::create_dir_all(out).map_err(|e| e.to_string())?;
    let md = diodestat_sim::campaign::markdown(module, &results, margin, ceiling);
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

fn export(module: &str, out: &PathBuf) -> Result<(), String> {
    let m = module_by_name(module)?;
    let cfg = board::calibrate(diodestat_core::example::config(), &m);
    cfg.clone()
        .validate()
        .map_err(|e| format!("board configuration refused: {e}"))?;
    let src = diodestat_sim::export::rust_module(module, &cfg);
    std::fs::write(out, &src).map_err(|e| format!("{}: {e}", out.display()))?;
    let hash = src
        .lines()
        .find(|l| l.contains("CONFIG_HASH: &str"))
        .unwrap_or_default();
    println!("wrote {} ({hash})", out.display());
    Ok(())
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let r = match &cli.cmd {
        Cmd::Run { scenario, out } => run(scenario, out),
        Cmd::Liv {
            module,
            temps_c,
            max_ma,
            out,
        } => liv(module, temps_c, *max_ma, out),
        Cmd::Export { module, out } => export(module, out),
        Cmd::Campaign {
            module,
            margin,
            out,
        } => campaign(module, *margin, out),
    };
    match r {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::FAILURE
        }
    }
}
