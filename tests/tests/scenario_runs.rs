//! The shipped scenarios end to end, as `diodestat run` runs them: each
//! loads its board file, runs against the real core and ends the way its
//! comment says; a run is deterministic bit for bit for a given seed.

use std::path::{Path, PathBuf};

use diodestat_core::State;
use diodestat_sim::board_file::load_board;
use diodestat_sim::scenario::{self, Scenario};
use diodestat_sim::sim::{self, Happening, RunResult};

fn example(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../examples")
        .join(rel)
}

fn load(path: &Path) -> Scenario {
    let text = std::fs::read_to_string(path).unwrap();
    scenario::parse(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

fn run(path: &Path, sc: &Scenario) -> RunResult {
    let b = load_board(&sc.board_path(path)).unwrap_or_else(|e| panic!("{e}"));
    sim::run(sc, &b.module, b.valid, b.latency).unwrap()
}

fn faults(r: &RunResult) -> Vec<&'static str> {
    r.happenings
        .iter()
        .filter_map(|h| match h {
            Happening::Fault { fault, .. } => Some(*fault),
            _ => None,
        })
        .collect()
}

/// Every number of every traced tick, as bits.
fn bits(r: &RunResult) -> Vec<u64> {
    r.trace
        .iter()
        .flat_map(|t| {
            [
                t.tick,
                t.p_mw.to_bits(),
                t.i_ma.to_bits(),
                t.cmd_ma.to_bits(),
                t.ceiling_ma.to_bits(),
                t.monitor_mw.to_bits(),
                t.tj_c.to_bits(),
                t.sensed_c.to_bits(),
            ]
        })
        .collect()
}

#[test]
fn same_scenario_and_seed_give_the_same_trace_bit_for_bit() {
    let path = example("demo-red-30/startup.toml");
    let sc = load(&path);
    let a = run(&path, &sc);
    let b = run(&path, &sc);
    assert_eq!(bits(&a), bits(&b));
    assert_eq!(a.happenings, b.happenings);
    // Another seed changes the sensor noise, so the trace differs.
    let mut other = sc.clone();
    other.seed = sc.seed + 1;
    let c = run(&path, &other);
    assert_ne!(bits(&a), bits(&c));
}

#[test]
fn red_start_up_regulates_then_latches_monitor_loss() {
    let path = example("demo-red-30/startup.toml");
    let r = run(&path, &load(&path));
    assert_eq!(r.final_state, State::Latched);
    assert_eq!(faults(&r).first(), Some(&"monitor-loss"));
    assert!(!r.damaged);
    // It regulated at 15 mW (within 1 %) before the fault.
    let before: Vec<f64> = r
        .trace
        .iter()
        .filter(|t| (30.0..39.0).contains(&(t.t_s * 1e3)))
        .map(|t| t.p_mw)
        .collect();
    let mean = before.iter().sum::<f64>() / before.len() as f64;
    assert!((mean - 15.0).abs() < 0.15, "{mean} mW");
}

#[test]
fn pump_start_up_latches_a_source_failing_high_within_a_tick() {
    let path = example("demo-pump-5w/startup.toml");
    let r = run(&path, &load(&path));
    assert_eq!(r.final_state, State::Latched);
    assert!(!r.damaged);
    let injected = r.happenings.iter().find_map(|h| match h {
        Happening::Injected { tick, .. } => Some(*tick),
        _ => None,
    });
    let latched = r.happenings.iter().find_map(|h| match h {
        Happening::Fault { tick, .. } => Some(*tick),
        _ => None,
    });
    let (i, l) = (injected.unwrap(), latched.unwrap());
    assert!(l - i <= 1, "latched {} ticks after injection", l - i);
}

#[test]
fn red_interlock_latches_in_the_same_tick_and_clear_returns_to_off() {
    let path = example("demo-red-30/modes-and-interlock.toml");
    let r = run(&path, &load(&path));
    let injected = r.happenings.iter().find_map(|h| match h {
        Happening::Injected { tick, .. } => Some(*tick),
        _ => None,
    });
    let latched = r.happenings.iter().find_map(|h| match h {
        Happening::Fault { tick, fault, .. } => Some((*tick, *fault)),
        _ => None,
    });
    assert_eq!(latched, Some((injected.unwrap(), "interlock-open")));
    // Cleared after the interlock closed: Off, and it stays off.
    assert_eq!(r.final_state, State::Off);
    assert!(r.trace.last().unwrap().p_mw < 1e-3);
    // It regulated in ACC between the mode changes: the drive sat at the
    // 35 mA setpoint.
    let acc: Vec<f64> = r
        .trace
        .iter()
        .filter(|t| (25.0..34.0).contains(&(t.t_s * 1e3)))
        .map(|t| t.cmd_ma)
        .collect();
    assert!(acc.iter().all(|&c| (c - 35.0).abs() < 1e-3), "{acc:?}");
}

#[test]
fn every_shipped_scenario_parses_and_finds_its_board() {
    let mut n = 0;
    for dir in std::fs::read_dir(example("")).unwrap() {
        let dir = dir.unwrap().path();
        // examples/modules holds module files, not scenarios.
        if dir.ends_with("modules") {
            continue;
        }
        for f in std::fs::read_dir(&dir).unwrap() {
            let f = f.unwrap().path();
            let name = f.file_name().unwrap().to_string_lossy().into_owned();
            if name.ends_with(".toml") && name != "board.toml" {
                let sc = load(&f);
                load_board(&sc.board_path(&f)).unwrap_or_else(|e| panic!("{e}"));
                n += 1;
            }
        }
    }
    assert!(n >= 3, "{n} scenarios");
}
