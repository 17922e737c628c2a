use diodestat_sim::plant::*;
fn main() {
    let vf = |i: f64| 0.05 * (1.0 + i / 1e-18).ln() + 5.0 * i;
    let mut iter = Driver::new(DriverParams::demo_visible()).unwrap();
    for k in 0..4000 {
        let v = vf(iter.current_a());
        let i = iter.step(4095, true, v, 2.9, 1e-5);
        if k % 400 == 0 {
            println!("{k} v={v} i={i}");
        }
    }
}
