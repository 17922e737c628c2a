//! The shipped board configuration files: the red board reproduces the
//! configuration the simulator used before board files (so earlier results
//! hold), both boards pass the core's validation and the loop-stability
//! gate at their plant corners, and every shipped scenario names a board
//! file that loads.
//!
//! CAUTION: firmware protection complements, never replaces, hardware
//! current limits, interlocks and eye protection; defer to IEC 60825-1,
//! local regulations and the site's laser safety officer.

use std::path::{Path, PathBuf};

use diodestat_core::{example, Fx};
use diodestat_sim::board_file::{load_board, LoadedBoard};
use diodestat_sim::plant::DemoModule;
use diodestat_sim::scenario::{self, Action, HwFault};
use diodestat_sim::stability::corners::markdown;
use diodestat_sim::stability::{
    analyse_corners, gate, standard_corners, CornerOptions, PASS_GM_DB, PASS_PM_DEG,
};
use diodestat_sim::{calibration, sim};

fn examples() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../examples")
}

fn shipped(name: &str) -> LoadedBoard {
    load_board(&examples().join(name).join("board.toml")).unwrap_or_else(|e| panic!("{e}"))
}

#[test]
fn red_board_file_is_the_configuration_the_simulator_used_before() {
    let b = shipped("demo-red-30");
    let mut before = calibration::calibrate(example::config(), &DemoModule::visible());
    // The board lowers the demo configuration's current ceiling (50 mA
    // gave about 33 mW, above the module's 30 mW rating, at 0 degC) and
    // its largest setpoint to what that ceiling holds at 25 degC once warm
    // (`red_board_holds_its_largest_setpoint_warm`); everything else is the
    // demo configuration.
    before.current.ceiling_iu = Fx::from_num(46);
    before.power.max_setpoint_ou = Fx::from_num(18);
    assert_eq!(b.config, before);
    assert_eq!(b.module, DemoModule::visible());
    assert_eq!(b.module_name, "demo-visible-650");
    assert_eq!(b.name, "demo-red-30");
    assert_eq!(
        b.valid.fingerprint(),
        before.validate().unwrap().fingerprint()
    );
}

#[test]
fn both_board_files_pass_the_core_validation() {
    for (dir, module, name) in [
        ("demo-red-30", DemoModule::visible(), "demo-visible-650"),
        ("demo-pump-5w", DemoModule::pump(), "demo-pump-976"),
    ] {
        let b = shipped(dir);
        assert_eq!(b.module, module);
        assert_eq!(b.module_name, name);
        assert_eq!(b.valid.config(), &b.config);
        // Validation again from the converted configuration gives the same.
        assert_eq!(b.config.clone().validate().unwrap(), b.valid);
        // The table was built from the sensor equation: at 25 degC the core
        // reads the sensor's own code back within the table's resolution.
        let chain = diodestat_sim::plant::SensorChain::new(module.sensor.clone()).unwrap();
        let code = chain.ideal_counts(25.0 + diodestat_sim::plant::ZERO_CELSIUS_K);
        let read = b.valid.counts_to_degc(code.round() as u16).to_num::<f64>();
        assert!((read - 25.0).abs() < 0.5, "{dir}: {read}");
    }
}

#[test]
fn pump_board_limits_fit_the_pump_module() {
    let b = shipped("demo-pump-5w");
    let c = &b.config;
    let m = &b.module;
    // The ceiling is below the DAC full scale and the hardware clamp above
    // the absolute rating, and the clamp keeps one tick below facet damage.
    let fs_ma = m.driver.dac_vref_v * m.driver.transconductance_a_per_v * 1e3;
    let abs_ma = c.current.absolute_max_iu.to_num::<f64>();
    assert!(c.current.ceiling_iu.to_num::<f64>() < fs_ma);
    assert!(m.driver.fail_high_current_a * 1e3 > abs_ma);
    let diode = diodestat_sim::plant::Diode::new(m.diode.clone()).unwrap();
    let cold = diodestat_sim::plant::c_to_k(0.0);
    let p_clamp_w = diode
        .quasi_static(m.driver.fail_high_current_a, cold)
        .p_front_w;
    assert!(p_clamp_w < m.diode.damage_power_w, "{p_clamp_w} W");
    // The rated power is reachable below the ceiling at 25 degC.
    let t25 = diodestat_sim::plant::c_to_k(25.0);
    let at_ceiling_w = diode
        .quasi_static(c.current.ceiling_iu.to_num::<f64>() * 1e-3, t25)
        .p_front_w;
    assert!(at_ceiling_w * 1e3 > c.power.max_setpoint_ou.to_num::<f64>());
    // Monitor loss is checked only above the hottest threshold in range.
    let hot = diodestat_sim::plant::c_to_k(c.derating.cutoff_degc.to_num::<f64>() + 20.0);
    assert!(
        c.protection.monitor_loss_drive_iu.to_num::<f64>() > diode.threshold_current_a(hot) * 1e3
    );
    // Every milliampere value is far inside the core's I16F16 range.
    assert!(c.current.absolute_max_iu < Fx::from_num(16_000));
}

/// The red board's largest setpoint is held at the nominal corner (25 degC
/// ambient) once the module is warm (the steady-state junction temperature
/// of the thermal path at that drive), with at least 2 % of the ceiling to
/// spare; and at the cold corner the ceiling stays within the module's
/// rated power, which is why the ceiling cannot simply rise. With the
/// largest setpoint at 25 mW the warm module needed about 55 mA against
/// the 46 mA ceiling (and 20 mW, the old start-up level, about 47 mA).
#[test]
fn red_board_holds_its_largest_setpoint_warm() {
    let b = shipped("demo-red-30");
    let c = &b.config;
    let max = c.power.max_setpoint_ou.to_num::<f64>();
    let ceiling = c.current.ceiling_iu.to_num::<f64>();
    let corners = standard_corners(&b.valid, max);
    let a = analyse_corners(&b.module, &b.valid, &corners, &CornerOptions::default()).unwrap();
    let nominal = a
        .iter()
        .find(|x| x.corner.corner.name == "nominal")
        .unwrap();
    let p = &nominal.corner.point;
    let need = p.required_ma.expect("within the absolute limit");
    println!(
        "{max} mW at 25 degC warm: {need:.2} mA (junction {:.2} degC), ceiling {ceiling} mA",
        p.tj_c
    );
    assert!(!p.at_ceiling, "{need} mA against the {ceiling} mA ceiling");
    assert!(need < 0.98 * ceiling, "{need} mA against {ceiling} mA");
    assert!(p.tj_c > 30.0, "warm: junction {} degC", p.tj_c);
    let diode = diodestat_sim::plant::Diode::new(b.module.diode.clone()).unwrap();
    let cold_w = diode
        .quasi_static(ceiling * 1e-3, diodestat_sim::plant::c_to_k(0.0))
        .p_front_w;
    assert!(
        cold_w <= 1.02 * b.module.rated_power_w,
        "{cold_w} W at the ceiling, 0 degC"
    );
}

#[test]
fn both_boards_pass_the_stability_gate_at_their_plant_corners() {
    for dir in ["demo-red-30", "demo-pump-5w"] {
        let b = shipped(dir);
        let sp = b.config.power.max_setpoint_ou.to_num::<f64>() * 2.0 / 3.0;
        let corners = standard_corners(&b.valid, sp);
        let a = analyse_corners(&b.module, &b.valid, &corners, &CornerOptions::default()).unwrap();
        println!("{dir}\n{}", markdown(&a, PASS_PM_DEG, PASS_GM_DB));
        let report = gate(&a, PASS_PM_DEG, PASS_GM_DB);
        assert!(report.passed(), "{dir}: {report:?}");
    }
}

fn scenarios() -> Vec<PathBuf> {
    let mut out = Vec::new();
    for dir in ["demo-red-30", "demo-pump-5w"] {
        for e in std::fs::read_dir(examples().join(dir)).unwrap() {
            let p = e.unwrap().path();
            if p.extension().is_some_and(|x| x == "toml") && p.file_name().unwrap() != "board.toml"
            {
                out.push(p);
            }
        }
    }
    out
}

fn load(path: &Path) -> (scenario::Scenario, LoadedBoard) {
    let sc = scenario::parse(&std::fs::read_to_string(path).unwrap())
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let b = load_board(&sc.board_path(path)).unwrap_or_else(|e| panic!("{e}"));
    (sc, b)
}

#[test]
fn every_shipped_scenario_names_a_board_file_that_loads() {
    let all = scenarios();
    assert!(all.len() >= 3, "{all:?}");
    for p in &all {
        let (sc, b) = load(p);
        assert_eq!(b.path, sc.board_path(p));
        // Setpoints are within the board's range.
        for e in &sc.events {
            if let Action::SetPower { mw } = e.action {
                assert!(
                    mw <= b.config.power.max_setpoint_ou.to_num::<f64>(),
                    "{p:?}"
                );
            }
        }
    }
    let pump: Vec<_> = all
        .iter()
        .filter(|p| load(p).1.module_name == "demo-pump-976")
        .collect();
    assert!(pump.len() >= 2, "{pump:?}");
    // One pump scenario injects a latching fault, one a heatsink loss.
    let injected: Vec<HwFault> = pump
        .iter()
        .flat_map(|p| load(p).0.events)
        .filter_map(|e| match e.action {
            Action::Inject { fault } => Some(fault),
            _ => None,
        })
        .collect();
    assert!(injected.iter().any(|f| f.name() == "heatsink-loss"));
    assert!(injected.iter().any(|f| f.name() == "source-fail-high"));
}

#[test]
fn pump_start_up_regulates_and_the_failed_source_latches_in_one_tick() {
    let p = examples().join("demo-pump-5w/startup.toml");
    let (sc, b) = load(&p);
    let res = sim::run(&sc, &b.module, b.valid.clone(), b.latency).unwrap();
    let at = |ms: f64| {
        res.trace
            .iter()
            .find(|r| r.t_s * 1e3 >= ms)
            .map(|r| r.p_mw)
            .unwrap()
    };
    // Regulated within 1 % of each setpoint before the next event (the
    // monitor is calibrated at 25 degC, the run is at 25 degC ambient).
    assert!((at(39.0) / 3000.0 - 1.0).abs() < 0.01, "{}", at(39.0));
    assert!((at(79.0) / 4500.0 - 1.0).abs() < 0.01, "{}", at(79.0));
    // No overshoot beyond 2 % on start-up or on the setpoint step.
    let peak = |from: f64, to: f64| {
        res.trace
            .iter()
            .filter(|r| r.t_s * 1e3 >= from && r.t_s * 1e3 < to)
            .map(|r| r.p_mw)
            .fold(0.0, f64::max)
    };
    assert!(peak(0.0, 40.0) < 3000.0 * 1.02);
    assert!(peak(40.0, 80.0) < 4500.0 * 1.02);
    // The source fails high at 80 ms: overcurrent latches on the next tick,
    // the facet survives.
    assert_eq!(res.final_state, diodestat_core::State::Latched);
    assert!(!res.damaged);
    let inject = res
        .happenings
        .iter()
        .find_map(|h| match h {
            sim::Happening::Injected { tick, .. } => Some(*tick),
            _ => None,
        })
        .unwrap();
    let latch = res
        .happenings
        .iter()
        .find_map(|h| match h {
            sim::Happening::Fault { tick, fault, .. } if *fault == "overcurrent" => Some(*tick),
            _ => None,
        })
        .unwrap();
    assert_eq!(latch - inject, 1);
}
