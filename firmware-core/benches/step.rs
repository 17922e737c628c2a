//! Cost of one `Controller::step` on the host: steady regulation (APC and
//! ACC, closed around the linear plant of the tests) and the fault path (a
//! sample that trips overcurrent, and stepping while latched). The plant's
//! own cost is measured alone so it can be subtracted from the closed loop.

#[path = "../tests/common/mod.rs"]
mod common;

use common::{counts_for, demo, lowest_at_or_above, Rig};
use criterion::{criterion_group, criterion_main, BatchSize, Criterion};
use diodestat_core::{Fx, State};
use std::hint::black_box;

fn bench(c: &mut Criterion) {
    let apc = Rig::regulating_apc(demo(), Fx::from_num(15), 20_000);
    let acc = Rig::regulating_acc(demo(), Fx::from_num(30));
    let mut g = c.benchmark_group("step");

    for (name, rig) in [("regulating_apc", &apc), ("regulating_acc", &acc)] {
        g.bench_function(name, |b| {
            let mut r = rig.clone();
            b.iter(|| black_box(r.step()));
            assert_eq!(r.ctl.state(), State::Regulating, "{name}: still regulating");
            assert!(r.ctl.faults().is_empty());
        });
    }

    g.bench_function("plant_only", |b| {
        let mut r = apc.clone();
        let d = r.last;
        b.iter(|| {
            r.s.tick = r.s.tick.wrapping_add(1);
            r.plant.fill(r.ctl.config(), &mut r.s);
            r.plant.apply(r.ctl.config(), black_box(&d));
            black_box(r.s)
        })
    });

    let cfg = apc.cfg().clone();
    let oc = lowest_at_or_above(
        |k| cfg.current_iu(k),
        cfg.config().protection.overcurrent_iu,
        cfg.config().calibration.current_sense.full_scale_counts,
    );
    {
        let mut ctl = apc.ctl.clone();
        let mut s = apc.s;
        s.tick += 1;
        s.current_counts = oc;
        assert!(!ctl.step(&s).enable, "the sample trips");
    }
    g.bench_function("trips_overcurrent", |b| {
        // The controller is cloned outside the timing; only the tripping
        // step is measured.
        b.iter_batched_ref(
            || {
                let mut s = apc.s;
                s.tick += 1;
                s.current_counts = oc;
                (apc.ctl.clone(), s)
            },
            |(ctl, s)| black_box(ctl.step(black_box(s))).enable,
            BatchSize::SmallInput,
        )
    });

    g.bench_function("latched", |b| {
        let mut r = apc.clone();
        r.step_with(|s| s.current_counts = oc);
        assert_eq!(r.ctl.state(), State::Latched);
        let mut s = r.s;
        s.current_counts = counts_for(&cfg.config().calibration.current_sense, Fx::ZERO);
        s.monitor_counts = 0;
        b.iter(|| {
            s.tick = s.tick.wrapping_add(1);
            black_box(r.ctl.step(black_box(&s)))
        });
        assert_eq!(r.ctl.state(), State::Latched);
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
