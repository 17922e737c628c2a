//! Cost of one `Controller::step` on the host: steady regulation (APC,
//! closed loop against a linear plant) and the fault path (a sample that
//! trips overcurrent, and stepping while latched).

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use diodestat_core::*;

fn sample(tick: u32, monitor: u16, current: u16) -> Sample {
    Sample {
        tick,
        monitor_counts: monitor,
        current_counts: current,
        temp_counts: 2048,
        supply_counts: 2457,
        interlock_closed: true,
    }
}

/// Linear plant in integer arithmetic: monitor counts for a DAC code.
fn plant(ctl: &Controller, code: u16) -> (u16, u16) {
    let cfg = ctl.config();
    let ma = i64::from(code) * 1000 / 68; // µA
    let p_uw = (ma - 25_000).max(0) * 9 / 10;
    let mon = (0u16..4096)
        .find(|c| cfg.monitor_mw(*c).to_num::<i64>() * 1000 >= p_uw)
        .unwrap_or(4095);
    let cur = (0u16..4096)
        .find(|c| cfg.current_ma(*c).to_num::<i64>() * 1000 >= ma)
        .unwrap_or(4095);
    (mon, cur)
}

fn regulating() -> (Controller, u32, u16, u16) {
    let mut ctl = Controller::new(example::config().validate().unwrap());
    ctl.step(&sample(0, 0, 0));
    ctl.request(Request::SetPowerMw(Fx::from_num(20))).unwrap();
    ctl.request(Request::Enable).unwrap();
    let (mut mon, mut cur) = (0, 0);
    let mut tick = 1;
    for _ in 0..4000 {
        let d = ctl.step(&sample(tick, mon, cur));
        (mon, cur) = plant(&ctl, d.dac_code);
        tick += 1;
    }
    assert_eq!(ctl.state(), State::Regulating);
    (ctl, tick, mon, cur)
}

fn bench(c: &mut Criterion) {
    let (ctl, tick0, mon, cur) = regulating();
    c.bench_function("step_regulating", |b| {
        let mut ctl = ctl.clone();
        let mut tick = tick0;
        b.iter(|| {
            tick = tick.wrapping_add(1);
            black_box(ctl.step(black_box(&sample(tick, mon, cur))))
        })
    });
    c.bench_function("step_trips_overcurrent", |b| {
        b.iter_batched(
            || ctl.clone(),
            |mut ctl| black_box(ctl.step(black_box(&sample(tick0, mon, 4095)))),
            criterion::BatchSize::SmallInput,
        )
    });
    c.bench_function("step_latched", |b| {
        let mut ctl = ctl.clone();
        ctl.step(&sample(tick0, mon, 4095));
        let mut tick = tick0;
        b.iter(|| {
            tick = tick.wrapping_add(1);
            black_box(ctl.step(black_box(&sample(tick, 0, 0))))
        })
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
