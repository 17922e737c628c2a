//! Which protections each fault needs (`diodestat campaign-needs`): the
//! board's own campaign record against records of the same campaign with
//! one protection switched off ([`super::without`]). A protection is
//! **needed** by a fault when switching it off makes a case of that fault
//! unsafe that was safe with every protection on; needed **for the class**
//! when that case's accessible emission leaves the intended class.
//!
//! A campaign is evidence for a design review, not a classification.

use std::fmt::Write as _;

use serde::{Deserialize, Serialize};

use super::outcome::CaseResult;
use super::report::Record;
use super::selection::Selection;
use super::without;

/// One case that is unsafe with a protection switched off.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct OutCase {
    /// Number in the campaign.
    pub index: usize,
    /// Fault label.
    pub fault: String,
    /// Moment.
    pub moment: String,
    /// Corner or part.
    pub corner: String,
    /// Setpoint, mW.
    pub setpoint_mw: f64,
    /// Peak accessible power, mW (peak front-facet power times the
    /// accessible fraction).
    pub peak_accessible_mw: f64,
    /// Accessible power the case ends on while still emitting, mW.
    pub sustained_accessible_mw: Option<f64>,
    /// Worst exposure: accessible energy, J, its duration, s, and the
    /// limit for that duration, J.
    pub exposure: Option<(f64, f64, f64)>,
    /// Worst ratio against the class (transient or continuous).
    pub class_ratio: Option<f64>,
    /// Out of the intended class.
    pub out_of_class: bool,
    /// Why the case is unsafe.
    pub reasons: Vec<String>,
}

/// The campaign with one protection switched off.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct OffRun {
    /// The protection.
    pub protection: String,
    /// Unsafe cases.
    pub unsafe_cases: usize,
    /// Unsafe cases that were safe with every protection on.
    pub new_unsafe: Vec<OutCase>,
}

impl OffRun {
    /// The new unsafe cases out of the intended class.
    pub fn out_of_class(&self) -> impl Iterator<Item = &OutCase> {
        self.new_unsafe.iter().filter(|c| c.out_of_class)
    }
}

/// What one fault needs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FaultNeeds {
    /// Fault label.
    pub fault: String,
    /// Cases of the fault.
    pub cases: usize,
    /// Protections without which a case of it leaves the class.
    pub for_class: Vec<String>,
    /// Protections without which a case of it is unsafe for any reason
    /// (class, ratings, facet, or a fault that must latch going
    /// undetected or late).
    pub for_safety: Vec<String>,
}

/// The needs report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Needs {
    /// The board's record header fields that identify the campaign.
    pub board: String,
    /// Board file.
    pub board_file: String,
    /// Module hash.
    pub module_hash: String,
    /// The board's configuration fingerprint (every protection on).
    pub config_fingerprint: String,
    /// Tool.
    pub tool: String,
    /// The command of the campaign with every protection on.
    pub command: String,
    /// Intended class, e.g. "1".
    pub class: String,
    /// Wavelength, nm.
    pub nm: f64,
    /// Accessible fraction.
    pub accessible_fraction: f64,
    /// Continuous accessible limit, mW (`None`: Class 4).
    pub cw_limit_mw: Option<f64>,
    /// Cases per campaign.
    pub cases: usize,
    /// Unsafe cases with every protection on.
    pub base_unsafe: usize,
    /// One entry per protection switched off, in the order given.
    pub runs: Vec<OffRun>,
    /// Per fault, in campaign order.
    pub faults: Vec<FaultNeeds>,
    /// The safety caution.
    pub caution: String,
}

/// Why records cannot be compared.
#[derive(Clone, Debug, PartialEq)]
pub enum NeedsError {
    /// The first record has a protection switched off.
    BaseSwitched(String),
    /// A later record switches nothing off (position, 1-based).
    NotSwitched(usize),
    /// Two records switch off the same protection.
    Twice(String),
    /// A record is a shard: merge the shards first (position).
    Shard(usize),
    /// A record is of another campaign: which field (position).
    Mismatch(usize, &'static str),
    /// No record with a protection switched off.
    NoneSwitched,
}

impl std::fmt::Display for NeedsError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            NeedsError::BaseSwitched(p) => write!(
                f,
                "record 1 has {p} switched off: give the campaign with every protection on first"
            ),
            NeedsError::NotSwitched(i) => write!(
                f,
                "record {i} switches no protection off (run it with --without)"
            ),
            NeedsError::Twice(p) => write!(f, "two records switch off {p}"),
            NeedsError::Shard(i) => write!(
                f,
                "record {i} is a shard: merge the shards with campaign-merge first"
            ),
            NeedsError::Mismatch(i, what) => write!(
                f,
                "record {i} is of another campaign: its {what} differs from record 1's"
            ),
            NeedsError::NoneSwitched => write!(
                f,
                "give the campaign with every protection on and at least one with --without"
            ),
        }
    }
}

impl std::error::Error for NeedsError {}

fn out_case(r: &CaseResult, fraction: f64) -> OutCase {
    let j = &r.judgement;
    OutCase {
        index: r.index,
        fault: r.fault.clone(),
        moment: r.moment.name().into(),
        corner: r.corner.clone(),
        setpoint_mw: r.setpoint_mw,
        peak_accessible_mw: j.peak_mw * fraction,
        sustained_accessible_mw: j.sustained_mw.map(|p| p * fraction),
        exposure: j.exposure.map(|e| (e.energy_j, e.duration_s, e.limit_j)),
        class_ratio: j.class_ratio(),
        out_of_class: j.class_ratio().is_some_and(|x| x > 1.0),
        reasons: r.unsafe_reasons.clone(),
    }
}

fn same_campaign(base: &Record, rec: &Record, i: usize) -> Result<(), NeedsError> {
    let (a, b) = (&base.header, &rec.header);
    let plain = |s: &Selection| Selection {
        without: None,
        ..s.clone()
    };
    let checks: [(&'static str, bool); 6] = [
        ("board file", a.board_file == b.board_file),
        ("module hash", a.module_hash == b.module_hash),
        ("tool version", a.tool == b.tool),
        ("selection", plain(&a.selection) == plain(&b.selection)),
        ("pass lines", a.pass_lines == b.pass_lines),
        (
            "case list",
            base.results.len() == rec.results.len()
                && base
                    .results
                    .iter()
                    .zip(&rec.results)
                    .all(|(x, y)| x.index == y.index && x.fault == y.fault),
        ),
    ];
    match checks.into_iter().find(|c| !c.1) {
        Some((what, _)) => Err(NeedsError::Mismatch(i, what)),
        None => Ok(()),
    }
}

/// Compare the campaign with every protection on (`records[0]`) with the
/// same campaign with one protection switched off (the others).
pub fn needs(records: &[Record]) -> Result<Needs, NeedsError> {
    let base = records.first().ok_or(NeedsError::NoneSwitched)?;
    if records.len() < 2 {
        return Err(NeedsError::NoneSwitched);
    }
    if let Some(p) = &base.header.selection.without {
        return Err(NeedsError::BaseSwitched(p.clone()));
    }
    let fraction = base.header.pass_lines.accessible_fraction;
    let mut runs: Vec<OffRun> = Vec::new();
    for (k, rec) in records.iter().enumerate() {
        let i = k + 1;
        if rec.shard.is_some() {
            return Err(NeedsError::Shard(i));
        }
        if k == 0 {
            continue;
        }
        same_campaign(base, rec, i)?;
        let p = rec
            .header
            .selection
            .without
            .clone()
            .ok_or(NeedsError::NotSwitched(i))?;
        if runs.iter().any(|r| r.protection == p) {
            return Err(NeedsError::Twice(p));
        }
        runs.push(OffRun {
            unsafe_cases: rec.results.iter().filter(|r| !r.safe).count(),
            new_unsafe: rec
                .results
                .iter()
                .zip(&base.results)
                .filter(|(r, b)| !r.safe && b.safe)
                .map(|(r, _)| out_case(r, fraction))
                .collect(),
            protection: p,
        });
    }
    let mut faults: Vec<FaultNeeds> = Vec::new();
    for r in &base.results {
        if let Some(f) = faults.iter_mut().find(|f| f.fault == r.fault) {
            f.cases += 1;
        } else {
            faults.push(FaultNeeds {
                fault: r.fault.clone(),
                cases: 1,
                for_class: Vec::new(),
                for_safety: Vec::new(),
            });
        }
    }
    for f in &mut faults {
        for run in &runs {
            let mine = || run.new_unsafe.iter().filter(|c| c.fault == f.fault);
            if mine().next().is_some() {
                f.for_safety.push(run.protection.clone());
            }
            if mine().any(|c| c.out_of_class) {
                f.for_class.push(run.protection.clone());
            }
        }
    }
    let h = &base.header;
    Ok(Needs {
        board: h.board.clone(),
        board_file: h.board_file.clone(),
        module_hash: h.module_hash.clone(),
        config_fingerprint: h.config_fingerprint.clone(),
        tool: h.tool.clone(),
        command: h.command.clone(),
        class: h.pass_lines.class.name().into(),
        nm: h.pass_lines.ael.nm,
        accessible_fraction: fraction,
        cw_limit_mw: h.pass_lines.cw_limit_mw(),
        cases: base.results.len(),
        base_unsafe: base.results.iter().filter(|r| !r.safe).count(),
        runs,
        faults,
        caution: base.caution.clone(),
    })
}

fn opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("-".into(), |x| format!("{x:.digits$}"))
}

/// Longest list of cases shown per protection in the Markdown report (the
/// JSON has them all).
pub const SHOWN_CASES: usize = 40;

/// The Markdown report.
pub fn markdown(n: &Needs) -> String {
    let mut s = format!(
        "# Protections each fault needs: {}\n\n> **Caution.** {}\n> A campaign is evidence for a design review, not a classification: classification is done under IEC 60825-1 by the people responsible for the product. A campaign with a protection switched off is an analysis of the design, never a configuration to ship.\n\n",
        n.board, n.caution
    );
    let _ = writeln!(
        s,
        "- Board `{}` (file `{}`), configuration fingerprint `{}` with every protection on, module hash `{}`; {}.",
        n.board, n.board_file, n.config_fingerprint, n.module_hash, n.tool
    );
    let _ = writeln!(s, "- Campaign: `{}`, {} cases.", n.command, n.cases);
    let _ = writeln!(
        s,
        "- Intended class: Class {} at {:.0} nm, accessible fraction {}; continuous limit {} (IEC 60825-1:2014 limits recalled without the text, see docs/campaign.md).",
        n.class,
        n.nm,
        n.accessible_fraction,
        n.cw_limit_mw.map_or("none (Class 4)".into(), |c| format!(
            "{c:.4} mW accessible, {:.4} mW at the front facet",
            c / n.accessible_fraction
        ))
    );
    let _ = writeln!(
        s,
        "- With every protection on: {} unsafe cases.\n",
        n.base_unsafe
    );
    s.push_str("## Per protection switched off\n\n");
    s.push_str("| switched off | how | unsafe cases | newly unsafe | of them out of class | worst peak accessible (mW) | worst sustained accessible (mW) | worst exposure: energy / limit (J) over duration (s) | worst class ratio |\n|---|---|---|---|---|---|---|---|---|\n");
    for r in &n.runs {
        let how = diodestat_core::Fault::ALL
            .into_iter()
            .find(|f| f.name() == r.protection)
            .map_or("", without::how);
        let out: Vec<&OutCase> = r.out_of_class().collect();
        let peak = out.iter().map(|c| c.peak_accessible_mw).reduce(f64::max);
        let sus = out
            .iter()
            .filter_map(|c| c.sustained_accessible_mw)
            .reduce(f64::max);
        let worst = out.iter().max_by(|a, b| {
            a.class_ratio
                .unwrap_or(0.0)
                .total_cmp(&b.class_ratio.unwrap_or(0.0))
        });
        let exposure = worst.and_then(|c| c.exposure).map_or("-".into(), |e| {
            format!("{:.3e} / {:.3e} over {:.3e}", e.0, e.2, e.1)
        });
        let _ = writeln!(
            s,
            "| `{}` | {} | {} | {} | {} | {} | {} | {} | {} |",
            r.protection,
            how,
            r.unsafe_cases,
            r.new_unsafe.len(),
            out.len(),
            opt(peak, 4),
            opt(sus, 4),
            exposure,
            opt(worst.and_then(|c| c.class_ratio), 3)
        );
    }
    s.push_str("\n## Per fault: the protections it needs\n\n");
    s.push_str("A protection is listed when switching it off makes a case of the fault unsafe that was safe with every protection on. \"For the class\": the accessible emission of such a case leaves the intended class. \"For safety\": such a case is unsafe for any reason (class, ratings, facet, or a fault that must latch going undetected or late). \"-\": no single protection switched off makes it unsafe (it is caught by more than one, or needs none).\n\n");
    s.push_str("| fault | cases | needs, for the class | needs, for safety |\n|---|---|---|---|\n");
    let list = |v: &[String]| {
        if v.is_empty() {
            "-".to_string()
        } else {
            v.iter()
                .map(|p| format!("`{p}`"))
                .collect::<Vec<_>>()
                .join(", ")
        }
    };
    for f in &n.faults {
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} |",
            f.fault,
            f.cases,
            list(&f.for_class),
            list(&f.for_safety)
        );
    }
    for r in &n.runs {
        let _ = writeln!(
            s,
            "\n## Newly unsafe with `{}` switched off\n",
            r.protection
        );
        if r.new_unsafe.is_empty() {
            s.push_str("None.\n");
            continue;
        }
        s.push_str("| # | fault | moment | corner | setpoint (mW) | peak accessible (mW) | sustained accessible (mW) | worst exposure: energy / limit (J) over duration (s) | class ratio | why unsafe |\n|---|---|---|---|---|---|---|---|---|---|\n");
        for c in r.new_unsafe.iter().take(SHOWN_CASES) {
            let _ = writeln!(
                s,
                "| {} | {} | {} | {} | {:.4} | {:.4} | {} | {} | {} | {} |",
                c.index,
                c.fault,
                c.moment,
                c.corner,
                c.setpoint_mw,
                c.peak_accessible_mw,
                opt(c.sustained_accessible_mw, 4),
                c.exposure.map_or("-".into(), |e| format!(
                    "{:.3e} / {:.3e} over {:.3e}",
                    e.0, e.2, e.1
                )),
                opt(c.class_ratio, 3),
                c.reasons.join("; ")
            );
        }
        if r.new_unsafe.len() > SHOWN_CASES {
            let _ = writeln!(
                s,
                "\n... and {} more (needs.json has every case).",
                r.new_unsafe.len() - SHOWN_CASES
            );
        }
    }
    s
}
