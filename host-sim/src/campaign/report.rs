//! A campaign's artefacts: the JSON record (header with the traceability
//! fields, the shard, the cases), the Markdown report with its
//! fault-reaction table and findings, the JUnit XML for CI systems, and
//! the merge of shard records into exactly the single run's record.

use std::collections::BTreeSet;
use std::fmt::Write as _;

use serde::{Deserialize, Serialize};

use super::outcome::CaseResult;
use super::selection::Selection;
use super::verdict::PassLines;
use crate::units::sig_text;

/// What makes two campaign runs the same campaign: every artefact carries
/// it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Header {
    /// Tool name and version.
    pub tool: String,
    /// The single-run command line that reproduces the campaign (the
    /// shard and the output folder left out).
    pub command: String,
    /// Board name.
    pub board: String,
    /// Board file as given.
    pub board_file: String,
    /// Hash of the exported core configuration (`diodestat export`'s
    /// CONFIG_HASH), hex.
    pub config_fingerprint: String,
    /// Simulated module.
    pub module: String,
    /// FNV-1a 64 of the module's parameters as JSON, hex.
    pub module_hash: String,
    /// Noise seed of every case.
    pub seed: u64,
    /// Diode model.
    pub diode_model: String,
    /// Drive latency, ticks.
    pub dac_latency_ticks: u32,
    /// The selection (its shard cleared).
    pub selection: Selection,
    /// The pass lines.
    pub pass_lines: PassLines,
    /// The module's part tolerances (what a Monte Carlo run draws from).
    pub tolerances: crate::plant::PartTolerances,
    /// Whether a Monte Carlo part draws its temperature sensor's place in
    /// an IEC 60751 class band.
    #[serde(default)]
    pub sensor_classed: bool,
}

/// A campaign's JSON record.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Record {
    /// Identity and settings.
    pub header: Header,
    /// The slice this record holds (`None`: the whole campaign).
    pub shard: Option<(u32, u32)>,
    /// Cases of the whole campaign.
    pub total_cases: usize,
    /// The cases, in campaign order.
    pub results: Vec<CaseResult>,
    /// The Monte Carlo figures of a whole Monte Carlo campaign (`None`:
    /// corners, or a shard; [`merge`] computes them for the merged
    /// record).
    #[serde(default)]
    pub monte_carlo: Option<MonteCarlo>,
    /// The safety caution.
    pub caution: String,
}

impl Record {
    /// The record with its Monte Carlo figures filled from its cases.
    pub fn with_figures(mut self) -> Record {
        self.monte_carlo = monte_carlo(&self);
        self
    }
}

/// Why shard records cannot be merged.
#[derive(Clone, Debug, PartialEq)]
pub enum MergeError {
    /// No record given.
    Empty,
    /// A record is of another campaign (header differs): which field.
    Mismatch {
        /// Position of the record among the inputs (1-based).
        record: usize,
        /// What differs.
        what: &'static str,
    },
    /// A record is not a shard of N, or a shard appears twice or is
    /// missing.
    Shards(String),
}

impl std::fmt::Display for MergeError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            MergeError::Empty => write!(f, "no shard record to merge"),
            MergeError::Mismatch { record, what } => write!(
                f,
                "record {record} is of another campaign: its {what} differs from the first record's"
            ),
            MergeError::Shards(why) => write!(f, "{why}"),
        }
    }
}

impl std::error::Error for MergeError {}

/// Merge shard records into the record a single run gives.
pub fn merge(records: Vec<Record>) -> Result<Record, MergeError> {
    let first = records.first().ok_or(MergeError::Empty)?.clone();
    let n = match first.shard {
        Some((_, n)) => n,
        None => {
            return Err(MergeError::Shards(
                "record 1 is not a shard (no --shard)".into(),
            ))
        }
    };
    let mut seen = BTreeSet::new();
    let mut results = Vec::new();
    for (i, r) in records.into_iter().enumerate() {
        if r.header != first.header {
            let what = if r.header.config_fingerprint != first.header.config_fingerprint {
                "configuration fingerprint"
            } else if r.header.module_hash != first.header.module_hash {
                "module hash"
            } else if r.header.tool != first.header.tool {
                "tool version"
            } else if r.header.selection != first.header.selection {
                "selection"
            } else {
                "header"
            };
            return Err(MergeError::Mismatch {
                record: i + 1,
                what,
            });
        }
        match r.shard {
            Some((k, m)) if m == n => {
                if !seen.insert(k) {
                    return Err(MergeError::Shards(format!("shard {k}/{n} is given twice")));
                }
            }
            _ => {
                return Err(MergeError::Shards(format!(
                    "record {} is not a shard of {n}",
                    i + 1
                )))
            }
        }
        results.extend(r.results);
    }
    if seen.len() != n as usize {
        let missing: Vec<String> = (1..=n)
            .filter(|k| !seen.contains(k))
            .map(|k| format!("{k}/{n}"))
            .collect();
        return Err(MergeError::Shards(format!(
            "shards missing: {}",
            missing.join(", ")
        )));
    }
    results.sort_by_key(|r| r.index);
    let complete =
        results.len() == first.total_cases && results.iter().enumerate().all(|(i, r)| r.index == i);
    if !complete {
        return Err(MergeError::Shards(format!(
            "the shards hold {} cases, not the campaign's {} once each",
            results.len(),
            first.total_cases
        )));
    }
    Ok(Record {
        shard: None,
        results,
        ..first
    }
    .with_figures())
}

fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("-".into(), |v| format!("{v:.digits$}"))
}

/// One row of the fault-reaction table.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReactionRow {
    /// Fault label.
    pub fault: String,
    /// Expected protections.
    pub expected: Vec<String>,
    /// Protections that caught it in any case.
    pub detecting: Vec<String>,
    /// Worst reaction time, us.
    pub worst_reaction_us: Option<f64>,
    /// Its limit, us.
    pub limit_us: Option<f64>,
    /// Final states reached.
    pub safe_states: Vec<String>,
    /// Worst class ratio.
    pub worst_class_ratio: Option<f64>,
    /// Worst energy above the rated power, uJ.
    pub worst_over_power_uj: f64,
    /// Worst charge above the rated current, uC.
    pub worst_over_current_uc: f64,
    /// Cases, unsafe cases, findings.
    pub cases: usize,
    /// Unsafe cases.
    pub unsafe_cases: usize,
    /// Findings.
    pub findings: usize,
}

/// The fault-reaction table: per fault, over all its cases.
pub fn reaction_table(results: &[CaseResult]) -> Vec<ReactionRow> {
    let mut rows: Vec<ReactionRow> = Vec::new();
    for r in results {
        let row = match rows.iter_mut().position(|x| x.fault == r.fault) {
            Some(i) => &mut rows[i],
            None => {
                rows.push(ReactionRow {
                    fault: r.fault.clone(),
                    expected: r.expected.clone(),
                    detecting: Vec::new(),
                    worst_reaction_us: None,
                    limit_us: r.reaction_limit_us,
                    safe_states: Vec::new(),
                    worst_class_ratio: None,
                    worst_over_power_uj: 0.0,
                    worst_over_current_uc: 0.0,
                    cases: 0,
                    unsafe_cases: 0,
                    findings: 0,
                });
                rows.last_mut().expect("just pushed")
            }
        };
        for c in &r.caught_by {
            if !row.detecting.contains(c) {
                row.detecting.push(c.clone());
            }
        }
        if let Some(l) = r.latency_us {
            row.worst_reaction_us = Some(row.worst_reaction_us.map_or(l, |w| w.max(l)));
        }
        if !row.safe_states.contains(&r.final_state) {
            row.safe_states.push(r.final_state.clone());
        }
        if let Some(c) = r.judgement.class_ratio() {
            row.worst_class_ratio = Some(row.worst_class_ratio.map_or(c, |w| w.max(c)));
        }
        row.worst_over_power_uj = row.worst_over_power_uj.max(r.judgement.over_power_uj);
        row.worst_over_current_uc = row.worst_over_current_uc.max(r.judgement.over_current_uc);
        row.cases += 1;
        row.unsafe_cases += usize::from(!r.safe);
        row.findings += usize::from(r.finding.is_some());
    }
    rows
}

fn header_lines(s: &mut String, rec: &Record) {
    let h = &rec.header;
    let l = &h.pass_lines;
    let _ = writeln!(
        s,
        "- Board `{}` (file `{}`), module `{}`; configuration fingerprint `{}`, module hash `{}`.",
        h.board, h.board_file, h.module, h.config_fingerprint, h.module_hash
    );
    let _ = writeln!(s, "- Tool {}; command `{}`.", h.tool, h.command);
    let _ = writeln!(
        s,
        "- Seed {} on every case, {} diode model, drive latency {} tick(s); cold corner {} degC, hot corner {} degC; slow faults watched until settled or {} s.",
        h.seed, h.diode_model, h.dac_latency_ticks, h.selection.cold_c, h.selection.hot_c, h.selection.slow_bound_s
    );
    let cw = l.cw_limit_mw();
    let _ = writeln!(
        s,
        "- Intended class: {} (small source, {:.0} nm); accessible fraction {}; continuous limit {} (time base {} s; IEC 60825-1:2014 limits recalled without the text, see docs/campaign.md).",
        l.class,
        l.ael.nm,
        l.accessible_fraction,
        cw.map_or("none (Class 4: only the ratings are judged)".into(), |c| format!("{c:.4} mW accessible")),
        l.ael.time_base_s()
    );
    let _ = writeln!(
        s,
        "- Module ratings: {:.3} mW optical, {:.3} mA current, facet damage at {:.3} mW; allowances {} uJ above the rated power, {} uC above the rated current.",
        l.rated_power_mw, l.rated_current_ma, l.damage_mw, l.over_power_allowance_uj, l.over_current_allowance_uc
    );
    if let Some(w) = &h.selection.without {
        let how = diodestat_core::Fault::ALL
            .into_iter()
            .find(|f| f.name() == w)
            .map_or("", super::without::how);
        let _ = writeln!(
            s,
            "- **Protection switched off: `{w}`** ({how}). An analysis of the design, not the board as configured: the configuration fingerprint above is that of the altered configuration."
        );
    }
    if let Some((k, n)) = rec.shard {
        let _ = writeln!(
            s,
            "- Shard {k}/{n}: {} of the campaign's {} cases.",
            rec.results.len(),
            rec.total_cases
        );
    }
}

/// The Markdown report.
pub fn markdown(rec: &Record) -> String {
    let results = &rec.results;
    let unsafe_n = results.iter().filter(|r| !r.safe).count();
    let findings: Vec<&CaseResult> = results.iter().filter(|r| r.finding.is_some()).collect();
    let mut s = format!(
        "# Fault campaign: {}\n\n> **Caution.** {}\n> A campaign is evidence for a design review, not a classification: classification is done under IEC 60825-1 by the people responsible for the product.\n\n{} cases, {} unsafe, {} findings.\n\n",
        rec.header.board,
        rec.caution,
        results.len(),
        unsafe_n,
        findings.len()
    );
    header_lines(&mut s, rec);
    if let Some(w) = results
        .iter()
        .filter(|r| r.judgement.class_ratio().is_some())
        .max_by(|a, b| {
            a.judgement
                .class_ratio()
                .partial_cmp(&b.judgement.class_ratio())
                .expect("finite")
        })
    {
        let _ = writeln!(
            s,
            "\nWorst case against the class limit: {} at {} on {} ({:.3} of the limit{}).",
            w.fault,
            w.moment.name(),
            w.corner,
            w.judgement.class_ratio().unwrap_or(0.0),
            w.judgement.exposure.map_or(String::new(), |e| format!(
                "; worst exposure {:.3e} J in {:.3e} s against {:.3e} J",
                e.energy_j, e.duration_s, e.limit_j
            ))
        );
    }
    if let Some(w) = results.iter().max_by(|a, b| {
        a.judgement
            .peak_mw
            .partial_cmp(&b.judgement.peak_mw)
            .expect("finite")
    }) {
        let _ = writeln!(
            s,
            "\nWorst case against the ratings: {} at {} on {} (peak {:.3} mW against {:.3} mW rated; {:.3} uJ above it; peak {:.3} mA against {:.3} mA rated).",
            w.fault,
            w.moment.name(),
            w.corner,
            w.judgement.peak_mw,
            rec.header.pass_lines.rated_power_mw,
            w.judgement.over_power_uj,
            w.judgement.peak_ma,
            rec.header.pass_lines.rated_current_ma
        );
    }
    if let Some(mc) = &rec.monte_carlo {
        let t = &mc.tolerances;
        let _ = writeln!(
            s,
            "\n## Monte Carlo\n\n{} parts drawn from the module's tolerances (uniform: threshold +-{:.0} %, slope +-{:.0} %, monitor tracking +-{:.0} %, T0 +-{:.0} %, current-sense gain +-{:.1} % and offset +-{} mV, DAC gain +-{:.1} % and offset +-{} mV{}; seed {}) at 25 degC, every selected fault and moment on each. {} of {} parts had an unsafe case: one-sided 95 % Clopper-Pearson upper bound on the probability that a part has one {:.4}. {} of {} cases unsafe: bound on the probability of an unsafe case {:.5} (cases on one part are not independent; the per-part figure is the one to quote).",
            mc.parts,
            t.threshold * 100.0,
            t.slope * 100.0,
            t.tracking * 100.0,
            t.t0 * 100.0,
            t.sense_gain * 100.0,
            t.sense_offset_mv,
            t.dac_gain * 100.0,
            t.dac_offset_mv,
            sensor_tolerances(t, rec.header.sensor_classed),
            mc.seed,
            mc.unsafe_parts,
            mc.parts,
            mc.part_upper_95,
            mc.unsafe_cases,
            mc.cases,
            mc.case_upper_95
        );
        if let Some(k) = rec.header.selection.slow_parts.filter(|&k| k < mc.parts) {
            let _ = writeln!(
                s,
                "\nThe slow faults (watched until the plant settles, at most {} s) ran on the first {k} parts only (`--slow-parts`); each fault's parts are in the table below.",
                rec.header.selection.slow_bound_s
            );
        }
        let w = &mc.worst_part;
        let p = &w.part;
        let _ = writeln!(
            s,
            "\nWorst part: {} ({} unsafe cases; highest class ratio {}{}; {:.3} uJ above the rated power), drawn as threshold x{:.4}, slope x{:.4}, tracking x{:.4}, T0 x{:.4}, sense gain x{:.4}, sense offset {:+.3} mV, DAC gain x{:.4}, DAC offset {:+.3} mV{}.\n\n| fault | parts | cases | unsafe cases | parts with an unsafe case | 95 % upper bound per part |\n|---|---|---|---|---|---|",
            p.name,
            w.unsafe_cases,
            fmt_opt(w.worst_class_ratio, 3),
            w.worst_case
                .as_ref()
                .map_or(String::new(), |c| format!(", {c}")),
            w.worst_over_power_uj,
            p.threshold,
            p.slope,
            p.tracking,
            p.t0,
            p.sense_gain,
            p.sense_offset_mv,
            p.dac_gain,
            p.dac_offset_mv,
            sensor_draw(p, t, rec.header.sensor_classed)
        );
        for f in &mc.per_fault {
            let _ = writeln!(
                s,
                "| {} | {} | {} | {} | {} | {:.4} |",
                f.fault, f.parts, f.cases, f.unsafe_cases, f.unsafe_parts, f.part_upper_95
            );
        }
    }
    s.push_str("\n## Fault reactions\n\n| fault | expected | detected by | worst reaction (us) | limit (us) | states reached | worst class ratio | worst above rated power (uJ) | worst above rated current (uC) | cases | unsafe | findings |\n|---|---|---|---|---|---|---|---|---|---|---|---|\n");
    for r in reaction_table(results) {
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {} | {} | {} | {:.3} | {:.3} | {} | {} | {} |",
            r.fault,
            r.expected.join(" "),
            if r.detecting.is_empty() {
                "-".into()
            } else {
                r.detecting.join(" ")
            },
            fmt_opt(r.worst_reaction_us, 0),
            fmt_opt(r.limit_us, 0),
            r.safe_states.join(" "),
            fmt_opt(r.worst_class_ratio, 3),
            r.worst_over_power_uj,
            r.worst_over_current_uc,
            r.cases,
            r.unsafe_cases,
            r.findings
        );
    }
    s.push_str("\n## Findings (caught by an unexpected protection; safe)\n\n");
    if findings.is_empty() {
        s.push_str("None.\n");
    }
    for r in &findings {
        let _ = writeln!(
            s,
            "- {} at {} on {}, {} mW: {}.",
            r.fault,
            r.moment.name(),
            r.corner,
            sig_text(r.setpoint_mw, 6),
            r.finding.as_deref().unwrap_or("")
        );
    }
    s.push_str("\n## Cases\n\n| # | fault | moment | corner | setpoint (mW) | caught by | expected | detection | latency (us) | peak (mW) | peak (mA) | above rated (uJ) | class ratio | sustained (mW) | watch (ms) | settled | damage | final | verdict |\n|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|\n");
    for r in results {
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {:.3} | {} | {} | {:?} | {} | {:.3} | {:.3} | {:.3} | {} | {} | {:.0} | {} | {} | {} | {} |",
            r.index,
            r.fault,
            r.moment.name(),
            r.corner,
            r.setpoint_mw,
            if r.caught_by.is_empty() {
                "-".into()
            } else {
                r.caught_by.join(" ")
            },
            r.expected.join(" "),
            r.detection,
            fmt_opt(r.latency_us, 0),
            r.judgement.peak_mw,
            r.judgement.peak_ma,
            r.judgement.over_power_uj,
            fmt_opt(r.judgement.class_ratio(), 3),
            fmt_opt(r.judgement.sustained_mw, 3),
            r.watch_ms,
            if r.settled { "yes" } else { "no" },
            if r.damaged { "YES" } else { "no" },
            if r.latched_before_injection {
                "latched before injection"
            } else {
                &r.final_state
            },
            if r.safe {
                "safe".to_string()
            } else {
                format!("UNSAFE: {}", r.unsafe_reasons.join("; "))
            }
        );
    }
    let _ = write!(s, "\nCAUTION: {}\n", rec.caution);
    s
}

fn xml(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// JUnit XML: one test case per campaign case, a failure per unsafe case,
/// the header as properties.
pub fn junit(rec: &Record) -> String {
    let h = &rec.header;
    let failures = rec.results.iter().filter(|r| !r.safe).count();
    let mut s = format!(
        "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<testsuites>\n<testsuite name=\"campaign {}\" tests=\"{}\" failures=\"{failures}\">\n<properties>\n",
        xml(&h.board),
        rec.results.len()
    );
    for (k, v) in [
        ("tool", h.tool.clone()),
        ("command", h.command.clone()),
        ("board_file", h.board_file.clone()),
        ("config_fingerprint", h.config_fingerprint.clone()),
        ("module", h.module.clone()),
        ("module_hash", h.module_hash.clone()),
        ("seed", h.seed.to_string()),
        ("intended_class", h.pass_lines.class.name().to_string()),
        (
            "shard",
            rec.shard.map_or("none".into(), |(k, n)| format!("{k}/{n}")),
        ),
        ("caution", rec.caution.clone()),
    ] {
        let _ = writeln!(s, "<property name=\"{k}\" value=\"{}\"/>", xml(&v));
    }
    s.push_str("</properties>\n");
    for r in &rec.results {
        let name = format!(
            "{} {} {} {} mW",
            r.fault,
            r.moment.name(),
            r.corner,
            sig_text(r.setpoint_mw, 6)
        );
        let _ = write!(
            s,
            "<testcase classname=\"campaign.{}\" name=\"{}\">",
            xml(&h.board),
            xml(&name)
        );
        if !r.safe {
            let _ = write!(
                s,
                "<failure message=\"{}\"/>",
                xml(&r.unsafe_reasons.join("; "))
            );
        }
        if let Some(f) = &r.finding {
            let _ = write!(s, "<system-out>finding: {}</system-out>", xml(f));
        }
        s.push_str("</testcase>\n");
    }
    s.push_str("</testsuite>\n</testsuites>\n");
    s
}

/// The single-run command line of a selection (the shard and the output
/// folder left out).
pub fn command_line(board_file: &str, sel: &Selection) -> String {
    let mut s = format!(
        "diodestat campaign {board_file} --ambient-c {},{} --slow-bound-s {}",
        sel.cold_c, sel.hot_c, sel.slow_bound_s
    );
    if let Some(f) = &sel.faults {
        let _ = write!(s, " --faults '{}'", f.join(","));
    }
    if let Some(m) = &sel.moments {
        let names: Vec<&str> = m.iter().map(|m| m.name()).collect();
        let _ = write!(s, " --moments {}", names.join(","));
    }
    if let Some(c) = &sel.corners {
        let _ = write!(s, " --corners {}", c.join(","));
    }
    if let Some((n, seed)) = sel.parts {
        let _ = write!(s, " --parts {n} --parts-seed {seed}");
        if let Some(k) = sel.slow_parts {
            let _ = write!(s, " --slow-parts {k}");
        }
    }
    if let Some(p) = &sel.setpoints_mw {
        let p: Vec<String> = p.iter().map(|v| v.to_string()).collect();
        let _ = write!(s, " --setpoints-mw {}", p.join(","));
    }
    if let Some(w) = &sel.without {
        let _ = write!(s, " --without {w}");
    }
    s
}

/// The temperature sensor's drawn tolerances in the Monte Carlo
/// paragraph: an NTC's R25 and B, an RTD's class band; empty when none is
/// drawn.
fn sensor_tolerances(t: &crate::plant::PartTolerances, classed: bool) -> String {
    let mut s = String::new();
    if t.ntc_r25 != 0.0 || t.ntc_beta != 0.0 {
        let _ = write!(
            s,
            ", NTC R25 +-{:.1} % and B +-{:.1} %",
            t.ntc_r25 * 100.0,
            t.ntc_beta * 100.0
        );
    }
    if classed {
        s.push_str(", the temperature sensor's error within its IEC 60751 class band");
    }
    s
}

/// The worst part's drawn sensor values, for the sensor tolerances drawn.
fn sensor_draw(p: &super::Corner, t: &crate::plant::PartTolerances, classed: bool) -> String {
    let mut s = String::new();
    if t.ntc_r25 != 0.0 || t.ntc_beta != 0.0 {
        let _ = write!(s, ", NTC R25 x{:.4}, NTC B x{:.4}", p.ntc_r25, p.ntc_beta);
    }
    if classed {
        let _ = write!(s, ", sensor at {:+.3} of its class band", p.sensor_band);
    }
    s
}

/// The figures of a Monte Carlo campaign.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MonteCarlo {
    /// Parts drawn.
    pub parts: u32,
    /// Their seed.
    pub seed: u64,
    /// The tolerances drawn from.
    pub tolerances: crate::plant::PartTolerances,
    /// Parts with at least one unsafe case.
    pub unsafe_parts: u64,
    /// One-sided 95 % Clopper-Pearson upper bound on the probability that
    /// a part has an unsafe case.
    pub part_upper_95: f64,
    /// Cases.
    pub cases: u64,
    /// Unsafe cases.
    pub unsafe_cases: u64,
    /// One-sided 95 % Clopper-Pearson upper bound per case.
    pub case_upper_95: f64,
    /// Per fault (label), in campaign order: its cases, unsafe cases and
    /// parts with one.
    pub per_fault: Vec<FaultCount>,
    /// The worst part: the most unsafe cases, then the highest class
    /// ratio, then the most energy above the rated power, then the lowest
    /// number; with its drawn values.
    pub worst_part: WorstPart,
}

/// One fault's Monte Carlo counts.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FaultCount {
    /// Fault label.
    pub fault: String,
    /// Fault kind.
    pub kind: String,
    /// Cases run.
    pub cases: u64,
    /// Unsafe cases.
    pub unsafe_cases: u64,
    /// Parts it ran on (fewer than drawn for a slow fault held to the
    /// first parts, `--slow-parts`).
    pub parts: u64,
    /// Parts with an unsafe case of this fault.
    pub unsafe_parts: u64,
    /// One-sided 95 % Clopper-Pearson upper bound on the probability that
    /// a part has an unsafe case of this fault.
    pub part_upper_95: f64,
}

/// The worst part of a Monte Carlo campaign.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WorstPart {
    /// The part as drawn (name, factors, offsets).
    pub part: super::Corner,
    /// Its unsafe cases.
    pub unsafe_cases: u64,
    /// Its highest class ratio (accessible emission over the class
    /// limit), if any case emitted.
    pub worst_class_ratio: Option<f64>,
    /// Its largest energy above the rated power, uJ.
    pub worst_over_power_uj: f64,
    /// Its case with the highest class ratio: fault and moment.
    pub worst_case: Option<String>,
}

/// The Monte Carlo figures of a whole record (`None`: not a Monte Carlo
/// run, or a shard).
pub fn monte_carlo(rec: &Record) -> Option<MonteCarlo> {
    let (parts, seed) = rec.header.selection.parts?;
    if rec.shard.is_some() || parts == 0 {
        return None;
    }
    let n = parts as usize;
    // Cases by part number (names are part-1 ..= part-n).
    let part_of = |r: &CaseResult| -> Option<usize> {
        let k: usize = r.corner.strip_prefix("part-")?.parse().ok()?;
        (1..=n).contains(&k).then_some(k - 1)
    };
    let mut unsafe_by_part = vec![0u64; n];
    let mut ratio_by_part = vec![None::<f64>; n];
    let mut worst_case_by_part = vec![None::<String>; n];
    let mut over_by_part = vec![0.0f64; n];
    let mut per_fault: Vec<FaultCount> = Vec::new();
    let mut fault_parts: Vec<BTreeSet<usize>> = Vec::new();
    let mut ran_parts: Vec<BTreeSet<usize>> = Vec::new();
    for r in &rec.results {
        let k = part_of(r);
        let f = match per_fault.iter().position(|c| c.fault == r.fault) {
            Some(f) => f,
            None => {
                per_fault.push(FaultCount {
                    fault: r.fault.clone(),
                    kind: r.kind.clone(),
                    cases: 0,
                    unsafe_cases: 0,
                    parts: 0,
                    unsafe_parts: 0,
                    part_upper_95: 1.0,
                });
                fault_parts.push(BTreeSet::new());
                ran_parts.push(BTreeSet::new());
                per_fault.len() - 1
            }
        };
        per_fault[f].cases += 1;
        if let Some(k) = k {
            ran_parts[f].insert(k);
        }
        if !r.safe {
            per_fault[f].unsafe_cases += 1;
            if let Some(k) = k {
                fault_parts[f].insert(k);
            }
        }
        if let Some(k) = k {
            unsafe_by_part[k] += u64::from(!r.safe);
            over_by_part[k] = over_by_part[k].max(r.judgement.over_power_uj);
            if let Some(c) = r.judgement.class_ratio() {
                if ratio_by_part[k].is_none_or(|w| c > w) {
                    ratio_by_part[k] = Some(c);
                    worst_case_by_part[k] = Some(format!("{} at {}", r.fault, r.moment.name()));
                }
            }
        }
    }
    for ((c, p), ran) in per_fault.iter_mut().zip(&fault_parts).zip(&ran_parts) {
        c.parts = ran.len() as u64;
        c.unsafe_parts = p.len() as u64;
        c.part_upper_95 = super::stats::clopper_pearson_upper(c.unsafe_parts, c.parts, 0.95)?;
    }
    let worse = |a: usize, b: usize| -> bool {
        // Whether part a is worse than part b (b the lower number).
        let ra = ratio_by_part[a].unwrap_or(f64::NEG_INFINITY);
        let rb = ratio_by_part[b].unwrap_or(f64::NEG_INFINITY);
        (unsafe_by_part[a], ra, over_by_part[a]) > (unsafe_by_part[b], rb, over_by_part[b])
    };
    let w = (1..n).fold(0, |w, k| if worse(k, w) { k } else { w });
    let part = super::draw_parts(
        &rec.header.tolerances,
        rec.header.sensor_classed,
        parts,
        seed,
    )
    .swap_remove(w);
    let unsafe_parts = unsafe_by_part.iter().filter(|&&u| u > 0).count() as u64;
    let cases = rec.results.len() as u64;
    let unsafe_cases = rec.results.iter().filter(|r| !r.safe).count() as u64;
    Some(MonteCarlo {
        parts,
        seed,
        tolerances: rec.header.tolerances,
        unsafe_parts,
        part_upper_95: super::stats::clopper_pearson_upper(unsafe_parts, u64::from(parts), 0.95)?,
        cases,
        unsafe_cases,
        case_upper_95: super::stats::clopper_pearson_upper(unsafe_cases, cases, 0.95)?,
        per_fault,
        worst_part: WorstPart {
            part,
            unsafe_cases: unsafe_by_part[w],
            worst_class_ratio: ratio_by_part[w],
            worst_over_power_uj: over_by_part[w],
            worst_case: worst_case_by_part[w].clone(),
        },
    })
}
