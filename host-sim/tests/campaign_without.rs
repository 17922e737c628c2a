//! The Class 1 VCSEL demo board (examples/demo-vcsel-850) near its class
//! boundary: with every protection on no campaign case is unsafe; with the
//! monitor-loss protection switched off (`campaign --without`) an open or
//! drifting monitor leaves the power loop on its current ceiling and the
//! accessible emission leaves Class 1; `campaign-needs` says so per fault.
//! The Class 1 limit is IEC 60825-1:2014, Table 3, recalled without the
//! text (`from memory`, host-sim/src/laser_class.rs).
//!
//! CAUTION: firmware protection complements, never replaces, hardware
//! current limits, interlocks and eye protection; a campaign is evidence
//! for a design review, not a classification.

mod common;

use common::{diodestat, root};
use diodestat_sim::units::Scale;

use diodestat_core::ValidConfig;
use diodestat_sim::board_file::{load_board, LoadedBoard};
use diodestat_sim::campaign::{self, needs, report, without, Bench, CaseResult, Selection};

const BOARD: &str = "examples/demo-vcsel-850/board.toml";

fn vcsel() -> LoadedBoard {
    load_board(&root().join(BOARD)).unwrap_or_else(|e| panic!("{e}"))
}

fn bench<'a>(b: &'a LoadedBoard, cfg: &'a ValidConfig) -> Bench<'a> {
    Bench {
        name: &b.name,
        module: &b.module,
        cfg,
        latency: b.latency,
        lines: b.pass_lines.as_ref().expect("[laser_safety]"),
    }
}

/// Slow faults bounded at 0.3 s in these tests (CI runs 2 s and 20 s in
/// release).
fn quick() -> Selection {
    Selection {
        slow_bound_s: 0.3,
        ..Selection::default()
    }
}

fn out_of_class(results: &[CaseResult]) -> Vec<&CaseResult> {
    results
        .iter()
        .filter(|r| r.judgement.class_ratio().is_some_and(|x| x > 1.0))
        .collect()
}

#[test]
fn the_board_is_class_1_near_its_boundary() {
    let b = vcsel();
    let lines = b.pass_lines.unwrap();
    assert_eq!(lines.class.name(), "1");
    // 0.785 mW accessible at 850 nm (7e-4 C4 T2^-0.25 W, C4 = 10^0.3;
    // IEC 60825-1:2014, Table 3 and Table 9, from memory).
    let cw = lines.cw_limit_mw().unwrap();
    assert!((cw - 0.785).abs() < 1e-3, "{cw}");
    // The highest setpoint is within the limit with margin (the current
    // ceiling beyond it: the monitor-loss test below).
    let c = b.valid.config();
    let max_accessible = c.units().mw(c.power.max_setpoint_ou) * lines.accessible_fraction;
    assert!(max_accessible < 0.5 * cw, "{max_accessible}");
}

#[test]
fn every_case_is_within_class_1_with_every_protection_on() {
    let b = vcsel();
    let results = campaign::run(&bench(&b, &b.valid), &quick()).unwrap();
    assert!(results.len() > 900, "{}", results.len());
    let bad: Vec<_> = results.iter().filter(|r| !r.safe).collect();
    assert!(bad.is_empty(), "{:#?}", &bad[..bad.len().min(3)]);
    assert!(out_of_class(&results).is_empty());
}

#[test]
fn without_monitor_loss_an_open_monitor_leaves_class_1() {
    let b = vcsel();
    let off = without::switch_off(&b.valid, "monitor-loss").unwrap();
    let sel = Selection {
        faults: Some(vec!["monitor-open".into(), "monitor-drift".into()]),
        without: Some("monitor-loss".into()),
        ..quick()
    };
    let plan = campaign::cases(&bench(&b, &off.cfg), &sel).unwrap();
    off.check_run(campaign::longest_run_ms(&b.module, &plan.faults, 0.3))
        .unwrap();
    let results = campaign::run(&bench(&b, &off.cfg), &sel).unwrap();
    let out = out_of_class(&results);
    assert!(!out.is_empty());
    for r in &out {
        assert!(!r.safe);
        assert!(r.caught_by.iter().all(|c| c != "monitor-loss"), "{r:?}");
        // Held on the ceiling: the sustained accessible power is above
        // the continuous Class 1 limit.
        assert!(r.judgement.cw_ratio.unwrap() > 1.0, "{r:?}");
    }
    assert!(out.iter().any(|r| r.fault == "monitor-open"));
    // The same cases with every protection on stay in class.
    let on = campaign::run(
        &bench(&b, &b.valid),
        &Selection {
            without: None,
            ..sel.clone()
        },
    )
    .unwrap();
    assert!(on.iter().all(|r| r.safe));
}

fn record(b: &LoadedBoard, cfg: &ValidConfig, sel: &Selection) -> report::Record {
    campaign::run_record(&bench(b, cfg), &b.module_name, BOARD, sel).unwrap()
}

#[test]
fn needs_names_monitor_loss_for_the_open_monitor_and_refuses_other_campaigns() {
    let b = vcsel();
    let sel = Selection {
        faults: Some(vec!["monitor-open".into(), "source-fail-high".into()]),
        moments: Some(vec![campaign::Moment::Steady]),
        ..quick()
    };
    let base = record(&b, &b.valid, &sel);
    let mut recs = vec![base.clone()];
    for p in ["monitor-loss", "monitor-runaway"] {
        let off = without::switch_off(&b.valid, p).unwrap();
        recs.push(record(
            &b,
            &off.cfg,
            &Selection {
                without: Some(p.into()),
                ..sel.clone()
            },
        ));
    }
    let n = needs::needs(&recs).unwrap();
    assert_eq!(n.base_unsafe, 0);
    let open = n.faults.iter().find(|f| f.fault == "monitor-open").unwrap();
    assert_eq!(open.for_class, vec!["monitor-loss".to_string()]);
    // A source failing high is caught by overcurrent as well: switching
    // off the runaway check alone does not take it out of class.
    let high = n
        .faults
        .iter()
        .find(|f| f.fault == "source-fail-high")
        .unwrap();
    assert!(high.for_class.is_empty(), "{high:?}");
    let md = needs::markdown(&n);
    assert!(md.contains("not a classification"), "{md}");
    assert!(md.contains("| monitor-open | 7 | `monitor-loss` |"), "{md}");
    // The board's campaign must come first, each protection once, and all
    // records of the same selection.
    assert!(matches!(
        needs::needs(&[recs[1].clone(), recs[0].clone()]),
        Err(needs::NeedsError::BaseSwitched(_))
    ));
    assert!(matches!(
        needs::needs(&[recs[0].clone(), recs[1].clone(), recs[1].clone()]),
        Err(needs::NeedsError::Twice(_))
    ));
    let mut other = recs[1].clone();
    other.header.selection.slow_bound_s = 5.0;
    assert!(matches!(
        needs::needs(&[recs[0].clone(), other]),
        Err(needs::NeedsError::Mismatch(2, "selection"))
    ));
}

#[test]
fn the_cli_refuses_unknown_protections_with_the_list_and_writes_nothing() {
    let dir = std::env::temp_dir().join(format!("diodestat-without-{}", std::process::id()));
    let out = dir.to_str().unwrap();
    let (ok, text) = diodestat(&["campaign", BOARD, "--without", "runaway", "--out", out]);
    assert!(!ok, "{text}");
    assert!(
        text.contains("--without \"runaway\": not a protection the campaign can switch off (one of: overcurrent, monitor-runaway, drive-mismatch, monitor-loss, over-temperature, power-implausible)"),
        "{text}"
    );
    // A hold shorter than the default 20 s slow-fault bound.
    let (ok, text) = diodestat(&["campaign", BOARD, "--without", "monitor-loss", "--out", out]);
    assert!(!ok, "{text}");
    assert!(text.contains("give a shorter --slow-bound-s"), "{text}");
    // Nothing on this board to switch off.
    let (ok, text) = diodestat(&[
        "campaign",
        BOARD,
        "--without",
        "power-implausible",
        "--out",
        out,
    ]);
    assert!(!ok, "{text}");
    assert!(
        text.contains("does not configure this protection"),
        "{text}"
    );
    assert!(!dir.exists());
}

#[test]
fn campaign_needs_from_the_cli_and_bad_records_refused_before_any_output() {
    let dir = std::env::temp_dir().join(format!("diodestat-needs-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let sub = |name: &str| dir.join(name).to_str().unwrap().to_string();
    let common = [
        "campaign",
        BOARD,
        "--faults",
        "monitor-open",
        "--moments",
        "steady",
        "--corners",
        "nominal,cold",
        "--slow-bound-s",
        "1",
    ];
    let (ok, text) = diodestat(&[&common[..], &["--out", &sub("all-on")]].concat());
    assert!(ok, "{text}");
    let (ok, text) = diodestat(
        &[
            &common[..],
            &["--without", "monitor-loss", "--out", &sub("off-loss")],
        ]
        .concat(),
    );
    // Unsafe cases: the campaign exits non-zero, and says which protection
    // was off and the altered configuration's fingerprint.
    assert!(!ok, "{text}");
    assert!(
        text.contains("protection switched off: monitor-loss"),
        "{text}"
    );
    let all_on = sub("all-on/campaign.json");
    let off = sub("off-loss/campaign.json");
    // The campaign with every protection on must come first.
    let (ok, text) = diodestat(&["campaign-needs", &off, &all_on, "--out", &sub("bad")]);
    assert!(!ok, "{text}");
    assert!(
        text.contains("record 1 has monitor-loss switched off"),
        "{text}"
    );
    assert!(!dir.join("bad").exists());
    let (ok, text) = diodestat(&["campaign-needs", &all_on, &off, "--out", &sub("needs")]);
    assert!(ok, "{text}");
    assert!(
        text.contains("monitor-open: leaves Class 1 without monitor-loss"),
        "{text}"
    );
    let md = std::fs::read_to_string(dir.join("needs/needs.md")).unwrap();
    assert!(
        md.contains("| monitor-open | 2 | `monitor-loss` | `monitor-loss` |"),
        "{md}"
    );
    assert!(md.contains("not a classification"), "{md}");
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("needs/needs.json")).unwrap())
            .unwrap();
    assert_eq!(json["runs"][0]["protection"], "monitor-loss");
    std::fs::remove_dir_all(&dir).unwrap();
}
