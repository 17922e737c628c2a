//! Closed-loop throughput: core + quasi-static plant + sensors at a 20 kHz
//! tick, 100 ms of simulated time (2000 ticks) per iteration.

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use diodestat_sim::plant::DemoModule;
use diodestat_sim::scenario::{Action, DiodeModel, Event, Scenario};
use diodestat_sim::{board, sim};

fn bench(c: &mut Criterion) {
    let module = DemoModule::visible();
    let cfg = board::calibrate(diodestat_core::example::config(), &module)
        .validate()
        .unwrap();
    let sc = Scenario {
        name: "bench".into(),
        module: "visible".into(),
        duration_ms: 100.0,
        ambient_c: 25.0,
        seed: 1,
        diode_model: DiodeModel::QuasiStatic,
        trace_every: 1000,
        events: vec![
            Event {
                at_ms: 0.0,
                action: Action::SetPower { mw: 20.0 },
            },
            Event {
                at_ms: 0.1,
                action: Action::Enable,
            },
        ],
    };
    let mut g = c.benchmark_group("closed_loop");
    g.throughput(Throughput::Elements(2000));
    g.bench_function("quasi_static_100ms", |b| {
        b.iter(|| {
            black_box(
                sim::run(black_box(&sc), &module, cfg.clone())
                    .unwrap()
                    .ticks,
            )
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
