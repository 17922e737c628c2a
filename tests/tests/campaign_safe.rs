//! The shipped fault campaign on the shipped demo boards, judged against
//! pass lines independent of the controller: the intended laser class
//! (IEC 60825-1:2014 limits, recalled without the text: `from memory`),
//! the module's ratings with the board's allowances, and facet damage.
//! Every case of the pump board is safe; the red board (no current-for-
//! power plausibility check) lets a degrading or intermittent monitor run
//! its module above its 30 mW rating at the cold corner, and the campaign
//! says so; with a plausibility check those cases are safe.
//!
//! CAUTION: firmware protection complements, never replaces, hardware
//! current limits, interlocks and eye protection; a campaign is evidence
//! for a design review, not a classification.

use std::path::{Path, PathBuf};

use diodestat_sim::board_file::{load_board, parse_board, LoadedBoard};
use diodestat_sim::campaign::{
    self, report, verdict::PassLines, Bench, CaseResult, Detection, Moment, Selection,
};
use diodestat_sim::{calibration, plant::DemoModule};

fn examples() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../examples")
}

fn shipped(name: &str) -> LoadedBoard {
    load_board(&examples().join(name).join("board.toml")).unwrap_or_else(|e| panic!("{e}"))
}

/// The shipped board file with `extra` text appended (a section it lacks)
/// or a `[laser_safety]` line replaced.
fn variant(name: &str, edit: impl Fn(String) -> String) -> LoadedBoard {
    let dir = examples().join(name);
    let text = std::fs::read_to_string(dir.join("board.toml")).unwrap();
    parse_board(&edit(text), &dir).unwrap_or_else(|e| panic!("{e}"))
}

/// The red board as first configured: a 50 mA current ceiling and a
/// 30 mW largest setpoint (today 46 mA and 18 mW).
fn red_as_first_configured(t: String) -> String {
    let edited = t
        .replace("ceiling_ma = 46 ", "ceiling_ma = 50 ")
        .replace("max_setpoint_mw = 18", "max_setpoint_mw = 30");
    assert_ne!(edited, t, "the red board's ceiling line moved");
    edited
}

fn bench(b: &LoadedBoard) -> (Bench<'_>, &PassLines) {
    let lines = b
        .pass_lines
        .as_ref()
        .expect("the board declares [laser_safety]");
    (
        Bench {
            name: &b.name,
            module: &b.module,
            cfg: &b.valid,
            latency: b.latency,
            lines,
        },
        lines,
    )
}

/// The slow faults' watch bound in these tests (the CI line runs the
/// default 20 s in release).
const TEST_SLOW_BOUND_S: f64 = 0.3;

fn run(b: &LoadedBoard, sel: &Selection) -> Vec<CaseResult> {
    let (bench, _) = bench(b);
    campaign::run(&bench, sel).unwrap()
}

fn quick() -> Selection {
    Selection {
        slow_bound_s: TEST_SLOW_BOUND_S,
        ..Selection::default()
    }
}

fn common_checks(results: &[CaseResult]) {
    for r in results {
        // The derating moment really is derating: the mount is above the
        // derating knee when the fault arrives; at a normal ambient it is
        // not.
        match r.moment {
            Moment::Derating => assert!(r.derating_at_injection, "{r:?}"),
            _ if r.corner != "hot" => assert!(!r.derating_at_injection, "{r:?}"),
            _ => {}
        }
        // A case can latch before its injection only where the corner
        // cannot make light at that moment: the aged diode under a derated
        // ceiling ("no light").
        if r.latched_before_injection {
            assert_eq!(
                (r.moment, r.corner.as_str()),
                (Moment::Derating, "aged"),
                "{r:?}"
            );
        }
        // Fast electrical faults are caught within a tick of reaching the
        // core (a latent one refuses the enable instead).
        if r.kind == "interlock-open"
            && !r.latched_before_injection
            && !matches!(r.moment, Moment::Latent | Moment::ClearRetry)
        {
            assert_eq!(r.latency_ticks, Some(0), "{r:?}");
        }
        // A retry with the fault still present never ends emitting.
        if r.moment == Moment::ClearRetry {
            assert!(r.judgement.sustained_mw.is_none(), "{r:?}");
        }
    }
}

#[test]
fn every_case_on_the_pump_board_is_safe() {
    let b = shipped("demo-pump-5w");
    let results = run(&b, &quick());
    let bad: Vec<_> = results.iter().filter(|r| !r.safe).collect();
    assert!(bad.is_empty(), "unsafe cases: {bad:#?}");
    common_checks(&results);
    // Class 4: no class ratio, only ratings.
    assert!(results.iter().all(|r| r.judgement.class_ratio().is_none()));
    // A temperature-sensor short on the pump board is caught by the
    // plausibility check, not by the sensor check: a finding.
    let short: Vec<_> = results
        .iter()
        .filter(|r| r.kind == "sensor-short" && r.detection == Detection::Unexpected)
        .collect();
    assert!(!short.is_empty());
    for r in short {
        assert_eq!(
            r.finding.as_deref(),
            Some("caught by power-implausible, expected sensor-short")
        );
        assert!(r.safe);
    }
}

/// The red board as first configured has no current-for-power
/// plausibility check and a 50 mA ceiling: a monitor reading low (degraded
/// to half, or open on 50 to 80 % of the ticks, or drifting) makes the
/// loop drive the diode to that ceiling, which at 0 degC gives about
/// 33 mW, above the module's 30 mW rating for longer than the 6 uJ
/// allowance. The shipped board's 46 mA ceiling gives about the rating
/// there, and none of its cases is unsafe.
#[test]
fn red_board_monitor_faults_overdrive_the_module_at_the_cold_corner() {
    let shipped_results = run(&shipped("demo-red-30"), &quick());
    assert!(
        shipped_results.iter().all(|r| r.safe),
        "{:?}",
        shipped_results
            .iter()
            .filter(|r| !r.safe)
            .collect::<Vec<_>>()
    );
    let b = variant("demo-red-30", red_as_first_configured);
    let results = run(&b, &quick());
    common_checks(&results);
    let bad: Vec<_> = results.iter().filter(|r| !r.safe).collect();
    assert!(!bad.is_empty());
    for r in &bad {
        assert_eq!(r.corner, "cold", "{r:?}");
        assert!(
            ["monitor-degrade", "monitor-intermittent", "monitor-drift"].contains(&r.kind.as_str()),
            "{r:?}"
        );
        assert_eq!(
            r.unsafe_reasons,
            ["energy above the rated power exceeds the allowance"],
            "{r:?}"
        );
        assert!(
            r.judgement.peak_mw > 30.0 && r.judgement.peak_mw < 60.0,
            "{r:?}"
        );
        assert!(!r.damaged);
    }
    // The degraded monitor holds the module above its rating for as long
    // as the case runs (it never latches).
    let degrade = bad
        .iter()
        .find(|r| r.kind == "monitor-degrade" && r.moment == Moment::Steady)
        .expect("the degraded monitor is among them");
    assert!(
        degrade.judgement.sustained_mw.is_some_and(|p| p > 30.0),
        "{degrade:?}"
    );
    // Class 3B (0.5 W) is far away.
    for r in &results {
        assert!(r.judgement.class_ratio().is_some_and(|c| c < 0.2), "{r:?}");
    }
}

/// With a current-for-power plausibility check (values of the kind the
/// pump board uses; a demo value, not a tuned design) the red board's
/// degraded monitor latches at the cold corner before the module leaves
/// its rating, and fewer monitor faults overdrive it. (Intermittent and
/// drifting monitors still pass the 6 uJ allowance on some cold cases
/// before the check's debounce ends: the board needs more than this.)
#[test]
fn a_plausibility_check_catches_the_red_boards_degraded_monitor() {
    let sel = Selection {
        faults: Some(
            ["monitor-degrade", "monitor-intermittent", "monitor-drift"]
                .map(String::from)
                .to_vec(),
        ),
        corners: Some(vec!["cold".into()]),
        ..quick()
    };
    let without = run(&variant("demo-red-30", red_as_first_configured), &sel);
    let b = variant("demo-red-30", |t| {
        red_as_first_configured(t) + "\n[plausibility]\njunction_rise_k = 3\nwarning_margin = 0.12\nfault_margin = 0.25\nallowance_ma = 2\ndebounce_ticks = 40\n"
    });
    let with = run(&b, &sel);
    for r in with.iter().filter(|r| r.kind == "monitor-degrade") {
        assert!(r.safe, "{r:?}");
        // Under the derated ceiling or a soft stop the loop cannot reach
        // the rating anyway; everywhere else the check latches it.
        if !matches!(r.moment, Moment::Derating | Moment::SoftStop) {
            assert_eq!(r.caught_by, ["power-implausible"], "{r:?}");
        }
    }
    let unsafe_n = |v: &[CaseResult]| v.iter().filter(|r| !r.safe).count();
    assert!(
        unsafe_n(&with) < unsafe_n(&without),
        "{} vs {}",
        unsafe_n(&with),
        unsafe_n(&without)
    );
}

/// A red-pointer product declared Class 2 behind a window passing 4.5 % of
/// the facet power (0.9 mW accessible at the 20 mW setpoint): a degraded
/// monitor that is not latched takes it out of class for good, and the
/// class verdict is what says so at the nominal corner, where the module
/// stays within its ratings.
#[test]
fn a_class_2_product_leaves_its_class_on_a_degraded_monitor() {
    let b = variant("demo-red-30", |t| {
        red_as_first_configured(t)
            .replace("intended_class = \"3B\"", "intended_class = \"2\"")
            .replace("accessible_fraction = 1.0", "accessible_fraction = 0.045")
    });
    let (_, lines) = bench(&b);
    assert!((lines.cw_limit_mw().unwrap() - 1.0).abs() < 1e-9);
    let sel = Selection {
        faults: Some(vec!["monitor-degrade".into(), "interlock-open".into()]),
        moments: Some(vec![Moment::Steady]),
        corners: Some(vec!["nominal".into()]),
        ..quick()
    };
    let results = run(&b, &sel);
    let degrade = results
        .iter()
        .find(|r| r.kind == "monitor-degrade")
        .unwrap();
    assert!(!degrade.safe, "{degrade:?}");
    assert!(degrade
        .unsafe_reasons
        .contains(&"sustained accessible power above the class limit".to_string()));
    assert!(
        degrade.judgement.peak_mw < 30.0,
        "within the rating: {degrade:?}"
    );
    let interlock = results.iter().find(|r| r.kind == "interlock-open").unwrap();
    assert!(interlock.safe, "{interlock:?}");
    assert!(interlock.judgement.class_ratio().unwrap() < 1.0);
}

/// A degrading monitor compounds with the low-tracking corner: the two
/// responsivity factors multiply, so the real power is higher there than
/// at the nominal corner.
#[test]
fn a_degrading_monitor_compounds_with_low_tracking() {
    let b = shipped("demo-pump-5w");
    let sel = Selection {
        faults: Some(vec!["monitor-degrade".into()]),
        moments: Some(vec![Moment::Steady]),
        corners: Some(vec!["nominal".into(), "tracking-low".into()]),
        ..quick()
    };
    let results = run(&b, &sel);
    let (n, t) = (&results[0], &results[1]);
    assert_eq!(
        (n.corner.as_str(), t.corner.as_str()),
        ("nominal", "tracking-low")
    );
    assert!(
        t.judgement.peak_mw > n.judgement.peak_mw * 1.02,
        "{n:?}\n{t:?}"
    );
}

#[test]
fn source_failing_high_without_a_hardware_clamp_is_reported_unsafe() {
    // Without the board's hardware current clamp, a source that fails high
    // within one tick overdrives the module before any firmware can act.
    let mut b = shipped("demo-red-30");
    b.module.driver.fail_high_current_a = 0.150;
    b.valid = calibration::calibrate(diodestat_core::example::config(), &b.module)
        .validate()
        .unwrap();
    let sel = Selection {
        faults: Some(vec!["source-fail-high".into()]),
        moments: Some(vec![Moment::Steady]),
        corners: Some(vec!["nominal".into()]),
        ..quick()
    };
    let r = &run(&b, &sel)[0];
    assert_eq!(r.detection, Detection::Expected, "{r:?}");
    assert!(!r.safe, "{r:?}");
}

#[test]
fn pump_source_failing_high_to_the_output_stage_limit_damages_the_facet() {
    // The pump board's 7 A hardware clamp keeps a source failing high below
    // the 10 W damage level; at the 12 A the output stage could reach, the
    // one tick before the overcurrent trip damages the facet.
    let mut b = shipped("demo-pump-5w");
    b.module.driver.fail_high_current_a = 12.0;
    let sel = Selection {
        faults: Some(vec!["source-fail-high".into()]),
        moments: Some(vec![Moment::Steady]),
        corners: Some(vec!["nominal".into()]),
        ..quick()
    };
    let r = &run(&b, &sel)[0];
    assert!(r.latency_ticks == Some(1), "{r:?}");
    assert!(r.damaged && !r.safe, "{r:?}");
    assert!(r.unsafe_reasons.contains(&"facet damaged".to_string()));
}

/// A slowly degrading monitor on the pump board: the plausibility check
/// latches it at every moment and corner before the real power passes the
/// module's rated output (5 W).
#[test]
fn plausibility_catches_a_degrading_monitor_before_the_rated_power() {
    let b = shipped("demo-pump-5w");
    let sel = Selection {
        faults: Some(vec!["monitor-drift".into()]),
        moments: Some(vec![
            Moment::SoftStart,
            Moment::Steady,
            Moment::Derating,
            Moment::Latent,
        ]),
        ..quick()
    };
    for r in run(&b, &sel) {
        assert_eq!(r.caught_by, ["power-implausible"], "{r:?}");
        assert_eq!(r.detection, Detection::Expected, "{r:?}");
        assert!(r.judgement.peak_mw < 5000.0, "{r:?}");
    }
}

/// Latent faults (present before the enable request) either refuse the
/// enable or latch: the laser never emits with a standing sensor,
/// interlock, supply or external fault.
#[test]
fn latent_faults_refuse_the_start_or_latch() {
    let b = shipped("demo-red-30");
    let sel = Selection {
        faults: Some(
            [
                "sensor-open",
                "interlock-open",
                "external-fault",
                "supply-sag",
            ]
            .map(String::from)
            .to_vec(),
        ),
        moments: Some(vec![Moment::Latent]),
        corners: Some(vec!["nominal".into()]),
        ..quick()
    };
    let results = run(&b, &sel);
    assert_eq!(results.len(), 4);
    for r in results {
        assert!(r.safe && r.detection == Detection::Expected, "{r:?}");
        assert!(r.judgement.peak_mw < 1.0, "emitted {r:?}");
    }
}

/// Two shards merged give exactly the single run's record, Markdown and
/// JUnit XML; a shard given twice or missing is refused.
#[test]
fn shards_merge_into_the_single_run() {
    let b = shipped("demo-red-30");
    let (bench, _) = bench(&b);
    let sel = Selection {
        faults: Some(
            ["interlock-open", "dac-stuck", "monitor-degrade"]
                .map(String::from)
                .to_vec(),
        ),
        corners: Some(vec!["nominal".into(), "cold".into()]),
        ..quick()
    };
    let file = "examples/demo-red-30/board.toml";
    let single = campaign::run_record(&bench, &b.module_name, file, &sel).unwrap();
    assert_eq!(single.results.len(), single.total_cases);
    let shard = |k| {
        campaign::run_record(
            &bench,
            &b.module_name,
            file,
            &Selection {
                shard: Some((k, 2)),
                ..sel.clone()
            },
        )
        .unwrap()
    };
    let (one, two) = (shard(1), shard(2));
    assert_eq!(one.results.len() + two.results.len(), single.total_cases);
    // Through JSON, as the command line does.
    let back = |r: &report::Record| -> report::Record {
        serde_json::from_str(&serde_json::to_string_pretty(r).unwrap()).unwrap()
    };
    let merged = report::merge(vec![back(&two), back(&one)]).unwrap();
    let (m, s) = (
        serde_json::to_string_pretty(&merged).unwrap(),
        serde_json::to_string_pretty(&single).unwrap(),
    );
    if m != s {
        let first = m
            .lines()
            .zip(s.lines())
            .position(|(a, b)| a != b)
            .unwrap_or(0);
        let ctx = |t: &str| {
            t.lines()
                .skip(first.saturating_sub(30))
                .take(32)
                .collect::<Vec<_>>()
                .join("\n")
        };
        panic!(
            "merged differs from the single run at line {first}:\n{}\n----\n{}",
            ctx(&m),
            ctx(&s)
        );
    }
    assert_eq!(report::markdown(&merged), report::markdown(&single));
    assert_eq!(report::junit(&merged), report::junit(&single));
    assert!(report::merge(vec![one.clone(), one.clone()]).is_err());
    assert!(report::merge(vec![one.clone()]).is_err());
    assert!(report::merge(vec![single.clone()]).is_err());
    // Every artefact carries the fingerprints, the version, the command
    // and the caution.
    let md = report::markdown(&single);
    for needle in [
        single.header.config_fingerprint.as_str(),
        single.header.module_hash.as_str(),
        single.header.tool.as_str(),
        single.header.command.as_str(),
        "not a classification",
    ] {
        assert!(md.contains(needle), "{needle}");
    }
    let xml = report::junit(&single);
    assert!(xml.contains(&single.header.config_fingerprint) && xml.contains("caution"));
}

/// A setpoint is written as a number, not as its float's every digit: the
/// VCSEL board's default setpoint (two thirds of 0.6 mW, computed as
/// 0.4000000000000001) was written so in its findings and JUnit names.
#[test]
fn setpoints_are_written_without_float_noise() {
    let b = shipped("demo-vcsel-850");
    let (bench, _) = bench(&b);
    let sel = Selection {
        faults: Some(vec!["dac-stuck code=2048".into()]),
        moments: Some(vec![campaign::Moment::SoftStart]),
        corners: Some(vec!["nominal".into()]),
        ..quick()
    };
    let file = "examples/demo-vcsel-850/board.toml";
    let rec = campaign::run_record(&bench, &b.module_name, file, &sel).unwrap();
    let setpoint = rec.results[0].setpoint_mw;
    assert_ne!(
        setpoint, 0.4,
        "the default setpoint is no longer a noisy float"
    );
    let (md, xml) = (report::markdown(&rec), report::junit(&rec));
    assert!(md.contains("0.4 mW: caught by"), "{md}");
    assert!(xml.contains("nominal 0.4 mW"), "{xml}");
    for text in [&md, &xml] {
        assert!(!text.contains("00000000"), "float noise in {text}");
    }
}

/// The board file's `[laser_safety]` section is refused with the key, its
/// line and what is wrong.
#[test]
fn laser_safety_sections_are_refused_with_their_key() {
    let dir = examples().join("demo-pump-5w");
    let text = std::fs::read_to_string(dir.join("board.toml")).unwrap();
    let refused = |from: &str, to: &str| {
        assert!(text.contains(from), "{from}");
        parse_board(&text.replace(from, to), Path::new(&dir))
            .map(|_| ())
            .unwrap_err()
            .to_string()
    };
    let e = refused("intended_class = \"4\"", "intended_class = \"5\"");
    assert!(
        e.contains("laser_safety.intended_class") && e.contains("line"),
        "{e}"
    );
    let e = refused("intended_class = \"4\"", "intended_class = \"2\"");
    assert!(e.contains("only for 400 to 700 nm"), "{e}");
    let e = refused("source = \"small\"", "source = \"extended\"");
    assert!(e.contains("laser_safety.source") && e.contains("C6"), "{e}");
    let e = refused("accessible_fraction = 1.0", "accessible_fraction = 1.5");
    assert!(e.contains("laser_safety.accessible_fraction"), "{e}");
    let e = refused(
        "over_power_allowance_uj = 1000",
        "over_power_allowance_uj = -1",
    );
    assert!(e.contains("laser_safety.over_power_allowance_uj"), "{e}");
    // The pass lines take the ratings from the module.
    let b = shipped("demo-pump-5w");
    let l = b.pass_lines.unwrap();
    let m = DemoModule::pump();
    assert_eq!(l.rated_power_mw, m.rated_power_w * 1e3);
    assert_eq!(l.rated_current_ma, m.rated_current_a * 1e3);
    assert_eq!(l.damage_mw, m.diode.damage_power_w * 1e3);
}

/// A Monte Carlo smoke run: 20 parts drawn from the pump module's
/// tolerances, sharded in two and merged, gives the single run's report
/// with its unsafe count and Clopper-Pearson bound (0 of 20 parts: the
/// bound is 1 - 0.05^(1/20) = 0.139).
#[test]
fn a_monte_carlo_smoke_run_shards_and_bounds() {
    let b = shipped("demo-pump-5w");
    let (bench, _) = bench(&b);
    let sel = Selection {
        faults: Some(vec!["interlock-open".into(), "monitor-degrade".into()]),
        moments: Some(vec![Moment::Steady]),
        parts: Some((20, 7)),
        ..quick()
    };
    let file = "examples/demo-pump-5w/board.toml";
    let single = campaign::run_record(&bench, &b.module_name, file, &sel).unwrap();
    assert_eq!(single.results.len(), 40);
    let shards: Vec<_> = (1..=2)
        .map(|k| {
            campaign::run_record(
                &bench,
                &b.module_name,
                file,
                &Selection {
                    shard: Some((k, 2)),
                    ..sel.clone()
                },
            )
            .unwrap()
        })
        .collect();
    let merged = report::merge(shards).unwrap();
    assert_eq!(report::markdown(&merged), report::markdown(&single));
    let mc = report::monte_carlo(&single).unwrap();
    assert_eq!((mc.parts, mc.unsafe_parts, mc.unsafe_cases), (20, 0, 0));
    assert!((mc.part_upper_95 - (1.0 - 0.05f64.powf(1.0 / 20.0))).abs() < 1e-12);
    assert!(report::markdown(&single).contains("## Monte Carlo"));
    // The parts differ, within the module's tolerances, and the seed
    // reproduces them.
    let p = campaign::parts(&b.module, 20, 7);
    assert_eq!(p, campaign::parts(&b.module, 20, 7));
    assert_ne!(p, campaign::parts(&b.module, 20, 8));
    for c in &p {
        assert!((c.threshold - 1.0).abs() <= b.module.tolerances.threshold);
        assert!((c.slope - 1.0).abs() <= b.module.tolerances.slope);
        assert!((c.tracking - 1.0).abs() <= b.module.tolerances.tracking);
    }
}
