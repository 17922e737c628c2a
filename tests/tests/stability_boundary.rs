//! The linearised loop and the nonlinear simulator agree on where the
//! power loop loses stability, now that both are timed as a board is (the
//! drive takes effect the board's latency after its sample): the integral
//! gain swept across the linear stability boundary, the simulator's onset
//! of a sustained oscillation (limit cycle) found on every tick of the run,
//! a marginal gain ringing, and the red board at a 1 kHz tick.

use std::path::{Path, PathBuf};

use diodestat_core::{Fx, State, ValidConfig};
use diodestat_sim::board_file::{load_board, parse_board, LoadedBoard};
use diodestat_sim::oscillation::{periodicity, Finding, Oscillation};
use diodestat_sim::report;
use diodestat_sim::scenario::{self, Action, DiodeModel, Event, Scenario};
use diodestat_sim::sim::{self, Happening, RunResult};
use diodestat_sim::stability::time_domain::{corner_module, small_step_agreement};
use diodestat_sim::stability::{
    corner_loop, loop_margins, CornerLoop, CornerOptions, LoopParams, PlantCorner,
};

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn board(name: &str) -> LoadedBoard {
    load_board(&root().join("examples").join(name).join("board.toml")).unwrap()
}

/// The nominal corner of `b` at `setpoint_mw`, timed by the board's latency.
fn nominal(b: &LoadedBoard, cfg: &ValidConfig, setpoint_mw: f64) -> CornerLoop {
    corner_loop(
        &b.module,
        cfg,
        &PlantCorner::nominal(setpoint_mw),
        &CornerOptions::for_latency(b.latency),
    )
    .unwrap()
}

/// `b`'s configuration with another integral gain, mA/(mW·ms).
fn with_ki(b: &LoadedBoard, ki_ma_per_mw_ms: f64) -> ValidConfig {
    let mut c = b.config.clone();
    c.apc.ki_iu_per_ou_ms = Fx::from_num(ki_ma_per_mw_ms);
    c.validate().unwrap()
}

fn ki_per_tick(p: &LoopParams, ki_ma_per_mw_ms: f64) -> f64 {
    ki_ma_per_mw_ms * 1e3 / p.tick_hz
}

/// The integral gain (mA/(mW·ms)) at which the linearised loop at `p`
/// becomes unstable, by bisection to 0.1 %.
fn linear_boundary(p: &LoopParams) -> f64 {
    let stable = |ki: f64| {
        loop_margins(&p.with_gains(p.kp_ma_per_mw, ki_per_tick(p, ki))).closed_loop_stable
    };
    let (mut lo, mut hi) = (0.01, 1.0);
    while stable(hi) {
        hi *= 2.0;
    }
    while hi / lo > 1.001 {
        let mid = (lo * hi).sqrt();
        if stable(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    (lo * hi).sqrt()
}

/// A noise-free run at the nominal corner: enable at `setpoint_mw`, a
/// small setpoint step at `step_at_ms`, `ms` long, every tick traced.
fn run(
    b: &LoadedBoard,
    cfg: &ValidConfig,
    setpoint_mw: f64,
    step_at_ms: f64,
    ms: f64,
) -> RunResult {
    let ev = |at_ms: f64, action: Action| Event { at_ms, action };
    let sc = Scenario {
        name: "stability boundary".into(),
        board: String::new(),
        duration_ms: ms,
        ambient_c: 25.0,
        seed: 0,
        diode_model: DiodeModel::QuasiStatic,
        trace_every: 1,
        aging_speedup: 1.0,
        events: vec![
            ev(0.0, Action::SetPower { mw: setpoint_mw }),
            ev(0.5, Action::Enable),
            ev(
                step_at_ms,
                Action::SetPower {
                    mw: 1.02 * setpoint_mw,
                },
            ),
        ],
        expects: Vec::new(),
    };
    let corner = PlantCorner::nominal(setpoint_mw);
    sim::run(
        &sc,
        &corner_module(&b.module, &corner, true),
        cfg.clone(),
        b.latency,
    )
    .unwrap()
}

/// The limit cycle the run summary reports after the setpoint step, if
/// any.
fn limit_cycle(r: &RunResult, step_tick: u64) -> Option<Oscillation> {
    r.loop_findings
        .iter()
        .filter(|f| f.from_tick > step_tick && f.is_limit_cycle())
        .find_map(|f| match f.finding {
            Finding::Oscillation(o) => Some(o),
            _ => None,
        })
}

/// Tolerance between the simulator's onset of sustained oscillation and
/// the linear stability boundary, fraction of the boundary (our tolerance:
/// the simulator quantises the drive to DAC codes and the reading to ADC
/// counts, limits the slew and carries the diode's curvature and
/// self-heating, none of which the linear model has).
const ONSET_TOLERANCE: f64 = 0.05;
/// Step of the integral-gain sweep, fraction of the linear boundary.
const SWEEP_STEP: f64 = 0.025;

/// The integral gain is swept from 70 % to 130 % of the linear boundary of
/// each demo board's nominal corner. Below the boundary the simulator
/// settles (hunting by a code at most); from the onset on it holds a
/// sustained oscillation; the onset lies within [`ONSET_TOLERANCE`] of the
/// linear boundary, and the oscillation's period within a tick of the
/// linear loop's phase-crossover period (where a loop at its stability
/// limit oscillates).
#[test]
fn simulator_onset_of_oscillation_matches_the_linear_boundary() {
    for name in ["demo-red-30", "demo-pump-5w"] {
        let b = board(name);
        let sp = 2.0 / 3.0 * b.config.power.max_setpoint_ou.to_num::<f64>();
        let l = nominal(&b, &b.valid, sp);
        assert!(!l.point.at_ceiling, "{name}: nominal corner regulates");
        let k_lin = linear_boundary(&l.params);
        let fcp = loop_margins(
            &l.params
                .with_gains(l.params.kp_ma_per_mw, ki_per_tick(&l.params, k_lin)),
        )
        .fcp_hz;
        let tick_hz = l.params.tick_hz;
        let step_ms = 60.0;
        let step_tick = (step_ms * 1e-3 * tick_hz) as u64;
        let mut onset = None;
        let mut rows = Vec::new();
        let n = (0.3 / SWEEP_STEP).round() as i32;
        for i in -n..=n {
            let ki = k_lin * (1.0 + f64::from(i) * SWEEP_STEP);
            let r = run(&b, &with_ki(&b, ki), sp, step_ms, step_ms + 200.0);
            let lc = limit_cycle(&r, step_tick);
            // The loop's own instability grows until the slew limit
            // bounds it; below the boundary a lightly damped loop holds a
            // few-code quantisation cycle in a noise-free run instead.
            let large = lc.filter(|o| o.slew_bound);
            let lin_stable = loop_margins(
                &l.params
                    .with_gains(l.params.kp_ma_per_mw, ki_per_tick(&l.params, ki)),
            )
            .closed_loop_stable;
            rows.push(format!(
                "  ki {ki:8.3} ({:+5.1} %): linear {}, simulator {}",
                100.0 * (ki / k_lin - 1.0),
                if lin_stable { "stable  " } else { "UNSTABLE" },
                lc.map_or("settles".into(), |o| format!(
                    "{}, period {} ticks ({:.0} Hz), {:.1} DAC steps = {:.2} % of the power pp",
                    if large.is_some() {
                        "SUSTAINED OSCILLATION"
                    } else {
                        "quantisation cycle"
                    },
                    o.period_ticks,
                    o.freq_hz,
                    o.pp_steps,
                    o.power_pp_pct
                ))
            ));
            if let Some(o) = large {
                if onset.is_none() {
                    onset = Some((ki, o.period_ticks));
                }
            } else {
                assert!(
                    onset.is_none(),
                    "{name}: no limit cycle at ki {ki} above the onset {onset:?}"
                );
            }
        }
        let (k_sim, period) =
            onset.unwrap_or_else(|| panic!("{name}: no onset\n{}", rows.join("\n")));
        println!(
            "{name} ({tick_hz} Hz, latency {} tick, kp {}, nominal corner at {sp:.3} mW):\n{}\n  \
             boundary: linear ki {k_lin:.3} mA/(mW·ms), simulator onset {k_sim:.3} ({:+.1} %); \
             phase crossover {fcp:.0} Hz, simulated limit cycle {:.0} Hz",
            b.latency.get(),
            l.params.kp_ma_per_mw,
            rows.join("\n"),
            100.0 * (k_sim / k_lin - 1.0),
            tick_hz / period as f64
        );
        assert!(
            (k_sim / k_lin - 1.0).abs() <= ONSET_TOLERANCE,
            "{name}: onset {k_sim} vs linear {k_lin}"
        );
        let p_lin = tick_hz / fcp;
        assert!(
            (period as f64 - p_lin).abs() <= 1.0,
            "{name}: period {period} ticks vs phase crossover {p_lin:.2} ticks"
        );
    }
}

/// A marginal gain rings: at 90 % of the linear boundary the linearised
/// loop's step response overshoots by more than half the step and rings
/// for many periods, and a small setpoint step of the simulator follows it
/// (quantised to DAC codes, so within a few codes of the step).
#[test]
fn a_marginal_gain_rings_in_the_simulator_as_predicted() {
    let b = board("demo-red-30");
    // 15 mW: the ringing must not reach the 46 mA current ceiling (20 mW
    // needs about 45.5 mA at 25 degC).
    let sp = 15.0;
    let k_lin = linear_boundary(&nominal(&b, &b.valid, sp).params);
    let cfg = with_ki(&b, 0.9 * k_lin);
    let l = nominal(&b, &cfg, sp);
    let a = small_step_agreement(&b.module, &cfg, &l, 0.02, 80.0, 200).unwrap();
    println!(
        "demo-red-30 at ki {:.3} (90 % of the boundary): overshoot simulated {:.1} % / linear {:.1} %, \
         settling to ±5 % {:?} / {:?} ms, largest difference {:.1} % of the step, rms {:.1} %",
        0.9 * k_lin,
        a.overshoot_pct.0,
        a.overshoot_pct.1,
        a.settling_ms.0,
        a.settling_ms.1,
        100.0 * a.max_dev,
        100.0 * a.rms_dev
    );
    assert!(a.overshoot_pct.1 > 50.0, "linear: {:?}", a.overshoot_pct);
    assert!(a.overshoot_pct.0 > 50.0, "simulated: {:?}", a.overshoot_pct);
    // The ringing period: the simulated deviation from the final value is
    // periodic at the linear loop's phase-crossover period.
    let dev: Vec<f64> = a.simulated.iter().map(|x| x - 1.0).collect();
    let (period, _) = periodicity(&dev[..120]).expect("rings");
    let fcp = loop_margins(&l.params).fcp_hz;
    assert!(
        (period as f64 - l.params.tick_hz / fcp).abs() <= 1.0,
        "period {period} ticks vs {:.2}",
        l.params.tick_hz / fcp
    );
}

/// The red board at a 1 kHz tick, the case that used to run smoothly. The
/// linearised loop is unstable there. As configured, its 10 mA soft-start
/// step per tick reaches the current sense a latency late, beyond the core's
/// 5 mA drive-mismatch tolerance against the previous command, and the core
/// latches drive mismatch during soft start. With a tolerance wide enough
/// to let it regulate, the drive swings between a low level and the
/// ceiling, and the run summary says so with period and amplitude.
#[test]
fn red_board_at_1_khz_oscillates_and_the_summary_says_so() {
    let dir = root().join("examples").join("demo-red-30");
    let text = std::fs::read_to_string(dir.join("board.toml"))
        .unwrap()
        .replace("tick_hz = 20000", "tick_hz = 1000")
        // A fast protection's debounce is at most 500 us: one tick at 1 kHz.
        .replace("mismatch_debounce_ticks = 4", "mismatch_debounce_ticks = 1");
    let sc_text = std::fs::read_to_string(dir.join("startup.toml")).unwrap();
    let sc = scenario::parse(&sc_text).unwrap();
    let b = parse_board(&text, &dir).unwrap();
    let l = nominal(&b, &b.valid, 15.0);
    assert!(!loop_margins(&l.params).closed_loop_stable);
    let r = sim::run(&sc, &b.module, b.valid.clone(), b.latency).unwrap();
    assert_eq!(r.final_state, State::Latched);
    assert!(r.happenings.iter().any(|h| matches!(
        h,
        Happening::Fault {
            fault: "drive-mismatch",
            ..
        }
    )));

    let wide = parse_board(
        &text.replace("mismatch_tolerance_ma = 5", "mismatch_tolerance_ma = 25"),
        &dir,
    )
    .unwrap();
    let r = sim::run(&sc, &wide.module, wide.valid.clone(), wide.latency).unwrap();
    let cycles: Vec<_> = r
        .loop_findings
        .iter()
        .filter(|f| f.is_limit_cycle())
        .collect();
    assert!(!cycles.is_empty(), "{:?}", r.loop_findings);
    for f in &cycles {
        let Finding::Oscillation(o) = f.finding else {
            unreachable!()
        };
        // Bounded by the current ceiling (46 mA) and the slew limit
        // (20 mA per tick at 1 kHz): it swings more than 15 mA, to the
        // ceiling, every few ticks.
        let ceiling = wide.config.current.ceiling_iu.to_num::<f64>();
        assert!(
            (o.drive_ma.1 - ceiling).abs() < 0.5,
            "reaches the {ceiling} mA ceiling: {f}"
        );
        assert!(o.drive_ma.1 - o.drive_ma.0 > 15.0, "{f}");
        assert!((2..=10).contains(&o.period_ticks), "{f}");
    }
    let text = report::summary(&sc, &r, Vec::new()).text();
    println!("{text}");
    assert!(text.contains("LIMIT CYCLE"), "{text}");
}
