//! A closed loop against a crude linear plant: soft start, hand-over, regulation.
use diodestat_core::*;

#[test]
fn closes_the_loop() {
    let cfg = example::config().validate().unwrap();
    let mut ctl = Controller::new(cfg);
    let mut s = Sample {
        tick: 0,
        monitor_counts: 0,
        current_counts: 0,
        temp_counts: 2048,
        supply_counts: 2457,
        interlock_closed: true,
    };
    ctl.step(&s);
    ctl.request(Request::SetPowerMw(Fx::from_num(20))).unwrap();
    ctl.request(Request::Enable).unwrap();
    let mut i_ma: i64 = 0; // plant current in µA
    let mut states = vec![];
    for t in 1..40_000u32 {
        s.tick = t;
        // plant: P = 0.9 mW/mA (I - 25 mA)
        let p_uw = (i_ma - 25_000).max(0) * 9 / 10;
        s.monitor_counts = (p_uw as f64 / 1000.0 / 0.010989).round().min(4095.0) as u16;
        s.current_counts = (i_ma as f64 / 1000.0 / 0.017094).round() as u16;
        let d = ctl.step(&s);
        i_ma = if d.enable {
            (d.dac_code as f64 / 68.25 * 1000.0) as i64
        } else {
            0
        };
        if states.last() != Some(&d.status.state) {
            states.push(d.status.state);
            eprintln!(
                "{t}: {:?} drive {} mon {}",
                d.status.state,
                ctl.drive_ma(),
                ctl.measurements().monitor_mw
            );
        }
    }
    eprintln!(
        "final drive {} mon {} faults {:?} log {:?}",
        ctl.drive_ma(),
        ctl.measurements().monitor_mw,
        ctl.faults(),
        ctl.fault_log().first()
    );
    assert_eq!(ctl.state(), State::Regulating);
    let mon = ctl.measurements().monitor_mw;
    assert!((mon - Fx::from_num(20)).abs() < Fx::from_num(0.1));
}
