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

fn main() -> ExitCode {
    let cli = Cli::parse();
    let r = match &cli.cmd {
        Cmd::Run { scenario, out } => run(scenario, out),
    };
    match r {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::FAILURE
        }
    }
}
