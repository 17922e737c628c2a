//! The `fit` command: measured L-I-V sweeps in, a module file, the fit
//! report (Markdown and JSON) and the plot of measured against fitted out.

use std::path::Path;

use crate::files::{self, Staging};
use crate::fit::{self, FitError};
use crate::modulefile::{self, ModuleFile};

/// What `fit` wrote and found.
pub struct FitOutcome {
    /// The report.
    pub report: fit::FitReport,
    /// The Markdown report (also printed).
    pub markdown: String,
}

/// Fit the sweeps in `sweeps_path`, take every figure the sweeps cannot
/// give from the module file `template`, and write `module.toml`,
/// `fit.md`, `fit.json` and `fit.svg` into `out`.
pub fn fit_command(
    sweeps_path: &Path,
    template: &Path,
    name: Option<&str>,
    kink_tol: f64,
    out: &Path,
) -> Result<FitOutcome, String> {
    let outputs = ["module.toml", "fit.md", "fit.json", "fit.svg"];
    files::check_out_dir(
        out,
        "--out",
        &outputs,
        &[sweeps_path.to_path_buf(), template.to_path_buf()],
    )
    .map_err(|e| e.to_string())?;
    let tpl_text = files::read_text(template, "--template").map_err(|e| e.to_string())?;
    modulefile::parse_module(&tpl_text, template).map_err(|e| FitError::Template(e).to_string())?;
    let tpl: ModuleFile = toml::from_str(&tpl_text).map_err(|e| e.to_string())?;
    let sweeps = fit::load_sweeps(sweeps_path).map_err(|e| e.to_string())?;
    let report = fit::fit_all(
        &sweeps,
        sweeps_path,
        kink_tol,
        tpl.diode.wavelength_nm,
        tpl.diode.wavelength_drift_nm_per_k,
    )
    .map_err(|e| e.to_string())?;
    let stem = sweeps_path
        .file_stem()
        .map_or("sweeps".into(), |s| s.to_string_lossy().into_owned());
    let default_name = format!("{stem}-fitted");
    let name = name.unwrap_or(&default_name);
    let module = fit::fitted_module(&tpl, &report, name).map_err(|e| e.to_string())?;
    let file_name = |p: &Path| {
        p.file_name()
            .map_or(String::new(), |s| s.to_string_lossy().into_owned())
    };
    let text = format!(
        "# Module file written by `diodestat fit` from {} (diode figures fitted at the\n\
         # reference temperature; T0 and T1 across the sweeps' case temperatures) with\n\
         # every other value taken from the template {}. Schema: docs/module-files.md.\n\
         # The rate-equation parameters are derived from the figures.\n\n{}",
        file_name(sweeps_path),
        file_name(template),
        modulefile::to_toml(&module)
    );
    let md = fit::markdown(&report, &file_name(sweeps_path), name);
    let json = serde_json::to_string_pretty(&report).map_err(|e| e.to_string())?;
    let svg = fit::svg(&report, &sweeps, name)?;
    let stage = Staging::new(out).map_err(|e| e.to_string())?;
    for (f, body) in [
        ("module.toml", text.as_str()),
        ("fit.md", md.as_str()),
        ("fit.json", json.as_str()),
        ("fit.svg", svg.as_str()),
    ] {
        std::fs::write(stage.path(f), body)
            .map_err(|e| format!("{}: {e}", out.join(f).display()))?;
    }
    stage.commit().map_err(|e| e.to_string())?;
    Ok(FitOutcome {
        report,
        markdown: md,
    })
}
