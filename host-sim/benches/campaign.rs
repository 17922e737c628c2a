//! Campaign throughput in cases per second: the fast faults of the shipped
//! campaign at every moment on the nominal corner of the pump demo board
//! (every case a 30 ms watch window after its lead-in, 20 kHz tick), run
//! one after the other on one core so the figure is per core.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use diodestat_sim::board_file::load_board;
use diodestat_sim::campaign::{self, Bench, Selection, WatchKind};

fn cases_per_second(c: &mut Criterion) {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/demo-pump-5w/board.toml");
    let b = load_board(&path).unwrap();
    let lines = b.pass_lines.unwrap();
    let bench = Bench {
        name: &b.name,
        module: &b.module,
        cfg: &b.valid,
        latency: b.latency,
        lines: &lines,
    };
    let fast: Vec<String> = campaign::faults(&b.module)
        .into_iter()
        .filter(|f| f.watch == WatchKind::Fast)
        .map(|f| f.label)
        .collect();
    let sel = Selection {
        faults: Some(fast),
        corners: Some(vec!["nominal".into()]),
        ..Selection::default()
    };
    let plan = campaign::cases(&bench, &sel).unwrap();
    let mut g = c.benchmark_group("campaign");
    g.sample_size(10);
    g.throughput(Throughput::Elements(plan.cases.len() as u64));
    g.bench_function("pump fast faults, nominal corner (cases)", |bch| {
        bch.iter(|| {
            for case in &plan.cases {
                let r = campaign::run_case(
                    &bench,
                    &plan.faults[case.fault],
                    case,
                    &plan.corners[case.corner],
                    sel.slow_bound_s,
                )
                .unwrap();
                std::hint::black_box(r);
            }
        })
    });
    g.finish();
}

criterion_group!(benches, cases_per_second);
criterion_main!(benches);
