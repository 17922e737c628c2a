//! Closed-loop throughput: core + quasi-static plant + sensors at a 20 kHz
//! tick, 100 ms of simulated time (2000 ticks) per iteration, recording
//! everything a run records and as a campaign case does (no plot envelope,
//! no loop findings: `sim::Record::VERDICT`); and the split
//! of one tick between the core's `step` and the plant (`Plant::sample` +
//! `Plant::advance`), each replayed from a recorded run of the same loop.

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use diodestat_core::{Controller, Drive, Fx, Request, Sample, ValidConfig};
use diodestat_sim::plant::{c_to_k, DemoModule};
use diodestat_sim::scenario::{Action, DiodeModel, Event, Scenario};
use diodestat_sim::sim::Plant;
use diodestat_sim::{calibration, sim};

const TICKS: u32 = 2000;
const SETPOINT_MW: f64 = 20.0;
const AMBIENT_C: f64 = 25.0;

/// The requests of the benchmark scenario at their ticks.
fn requests(ctl: &mut Controller, tick: u32) {
    let r = match tick {
        0 => Request::SetPower(Fx::saturating_from_num(SETPOINT_MW)),
        2 => Request::Enable,
        _ => return,
    };
    ctl.request(r).unwrap();
}

/// Plant quantities of one tick, as inputs to the per-part benchmarks.
#[derive(Clone, Copy)]
struct PlantTick {
    i_a: f64,
    tj_k: f64,
    tc_k: f64,
    p_front_w: f64,
    p_diss_w: f64,
}

/// Runs the loop once and records what the core saw, what it drove and the
/// plant quantities of every tick.
fn record(
    module: &DemoModule,
    cfg: &ValidConfig,
    dt: f64,
) -> (Vec<Sample>, Vec<Drive>, Vec<PlantTick>) {
    let mut plant = Plant::new(module, AMBIENT_C, 1).unwrap();
    let mut ctl = Controller::new(cfg.clone());
    let (mut samples, mut drives, mut ticks) = (Vec::new(), Vec::new(), Vec::new());
    for tick in 0..TICKS {
        requests(&mut ctl, tick);
        let s = plant.sample(tick, dt);
        let d = ctl.step(&s);
        let tj_k = plant.thermal.t_junction_k();
        plant.advance(
            d.dac_code,
            d.enable,
            c_to_k(AMBIENT_C),
            DiodeModel::QuasiStatic,
            dt,
        );
        let i_a = plant.driver.current_a();
        let out = plant.diode.quasi_static(i_a, tj_k);
        samples.push(s);
        drives.push(d);
        ticks.push(PlantTick {
            i_a,
            tj_k,
            tc_k: plant.thermal.t_case_k(),
            p_front_w: plant.p_front_w(),
            p_diss_w: (i_a * out.v_f_v - out.p_front_w - out.p_back_w).max(0.0),
        });
    }
    (samples, drives, ticks)
}

fn replay_plant(mut plant: Plant, drives: &[Drive], dt: f64) -> u16 {
    let mut acc = 0u16;
    for (tick, d) in drives.iter().enumerate() {
        let s = plant.sample(tick as u32, dt);
        acc = acc.wrapping_add(s.monitor_counts);
        plant.advance(
            d.dac_code,
            d.enable,
            c_to_k(AMBIENT_C),
            DiodeModel::QuasiStatic,
            dt,
        );
    }
    acc
}

fn bench(c: &mut Criterion) {
    let module = DemoModule::visible();
    let cfg = calibration::calibrate(diodestat_core::example::config(), &module)
        .validate()
        .unwrap();
    let sc = Scenario {
        name: "bench".into(),
        board: "examples/demo-red-30/board.toml".into(),
        duration_ms: 100.0,
        ambient_c: AMBIENT_C,
        seed: 1,
        diode_model: DiodeModel::QuasiStatic,
        trace_every: 1000,
        aging_speedup: 1.0,
        events: vec![
            Event {
                at_ms: 0.0,
                action: Action::SetPower { mw: SETPOINT_MW },
            },
            Event {
                at_ms: 0.1,
                action: Action::Enable,
            },
        ],
        expects: Vec::new(),
    };
    let mut g = c.benchmark_group("closed_loop");
    g.throughput(Throughput::Elements(u64::from(TICKS)));
    g.bench_function("quasi_static_100ms", |b| {
        b.iter(|| {
            black_box(
                sim::run(
                    black_box(&sc),
                    &module,
                    cfg.clone(),
                    sim::DacLatency::ONE_TICK,
                )
                .unwrap()
                .ticks,
            )
        })
    });
    // The same run as a campaign case records it: no plot envelope, no
    // loop findings.
    g.bench_function("quasi_static_100ms_verdict", |b| {
        b.iter(|| {
            black_box(
                sim::run_recording(
                    black_box(&sc),
                    &module,
                    cfg.clone(),
                    sim::DacLatency::ONE_TICK,
                    sim::Record::VERDICT,
                )
                .unwrap()
                .ticks,
            )
        })
    });
    g.finish();

    let dt = 1.0 / f64::from(cfg.config().tick_hz);
    let (samples, drives, ticks) = record(&module, &cfg, dt);
    let mut g = c.benchmark_group("tick_split");
    g.throughput(Throughput::Elements(u64::from(TICKS)));
    g.bench_function("core_step", |b| {
        b.iter(|| {
            let mut ctl = Controller::new(cfg.clone());
            let mut acc = 0u16;
            for (tick, s) in samples.iter().enumerate() {
                requests(&mut ctl, tick as u32);
                acc = acc.wrapping_add(ctl.step(black_box(s)).dac_code);
            }
            acc
        })
    });
    g.bench_function("plant", |b| {
        b.iter(|| replay_plant(Plant::new(&module, AMBIENT_C, 1).unwrap(), &drives, dt))
    });
    g.bench_function("plant_reference", |b| {
        b.iter(|| {
            replay_plant(
                Plant::new_reference(&module, AMBIENT_C, 1).unwrap(),
                &drives,
                dt,
            )
        })
    });
    g.finish();

    // The plant's parts, each replaying the recorded inputs of the run.
    let mut g = c.benchmark_group("plant_parts");
    g.throughput(Throughput::Elements(u64::from(TICKS)));
    let base = Plant::new(&module, AMBIENT_C, 1).unwrap();
    g.bench_function("diode_quasi_static", |b| {
        b.iter(|| {
            let mut d = base.diode.clone();
            let mut acc = 0.0;
            for t in &ticks {
                acc += d.step_quasi_static(t.i_a, t.tj_k).p_front_w;
            }
            acc
        })
    });
    g.bench_function("diode_quasi_static_reference", |b| {
        b.iter(|| {
            let mut d = base.diode.clone();
            let mut acc = 0.0;
            for t in &ticks {
                acc += d.step_quasi_static_reference(t.i_a, t.tj_k).p_front_w;
            }
            acc
        })
    });
    g.bench_function("diode_aging", |b| {
        let dt = 1.0 / 20_000.0;
        b.iter(|| {
            let mut d = base.diode.clone();
            for t in &ticks {
                d.age_over(t.i_a, t.tj_k, dt);
            }
            d.age_hours()
        })
    });
    g.bench_function("diode_aging_reference", |b| {
        let dt = 1.0 / 20_000.0;
        b.iter(|| {
            let mut d = base.diode.clone();
            for t in &ticks {
                d.age_over_reference(t.i_a, t.tj_k, dt);
            }
            d.age_hours()
        })
    });
    g.bench_function("thermal", |b| {
        b.iter(|| {
            let mut th = base.thermal.clone();
            let mut acc = 0.0;
            for t in &ticks {
                acc += th.step(t.p_diss_w, c_to_k(AMBIENT_C), dt);
            }
            acc
        })
    });
    g.bench_function("temperature_sensor", |b| {
        b.iter(|| {
            let mut se = base.sensor.clone();
            let mut acc = 0u16;
            for t in &ticks {
                acc = acc.wrapping_add(se.counts(t.tc_k, dt));
            }
            acc
        })
    });
    g.bench_function("monitor_and_3_adcs", |b| {
        b.iter(|| {
            let (mon, mut a1, mut a2, mut a3) = (
                base.monitor.clone(),
                base.adc_monitor.clone(),
                base.adc_current.clone(),
                base.adc_supply.clone(),
            );
            let mut acc = 0u16;
            for t in &ticks {
                let v = mon.voltage_v(mon.current_a(t.p_front_w, 650e-9, t.tc_k));
                acc = acc
                    .wrapping_add(a1.sample(v))
                    .wrapping_add(a2.sample(t.i_a * 40.0))
                    .wrapping_add(a3.sample(1.2));
            }
            acc
        })
    });
    g.bench_function("driver", |b| {
        b.iter(|| {
            let mut dr = base.driver.clone();
            let mut acc = 0.0;
            for d in &drives {
                acc += dr.step(d.dac_code, d.enable, 2.2, 5.0, dt);
            }
            acc
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
