//! The fixed-point core against an f64 reference model of the same discrete
//! PI loop (conditional-integration anti-windup, slew limit, ceiling) and
//! setpoint ramp, on the same linear plant, over a long run with setpoint
//! changes.
//!
//! Tolerance: the core quantises the monitor to 12-bit counts (about
//! 0.011 mW) and carries 16 fractional bits in its outputs; the model sees
//! the same quantised monitor reading. Over 200 000 ticks the commanded
//! currents must agree within 0.05 mA and the optical power within 0.05 mW
//! at every tick (the loop is stable, so rounding differences do not grow).

use diodestat_core::*;

/// Linear plant above threshold: P = 0.9 mW/mA (I - 25 mA); common-practice demo numbers.
fn plant_mw(i_ma: f64) -> f64 {
    0.9 * (i_ma - 25.0).max(0.0)
}

struct Model {
    kp: f64,
    ki: f64,
    slew: f64,
    sp_step: f64,
    ceiling: f64,
    integ: f64,
    out: f64,
    sp: f64,
}

impl Model {
    fn step(&mut self, target: f64, meas: f64) -> f64 {
        self.sp = if self.sp < target {
            (self.sp + self.sp_step).min(target)
        } else {
            (self.sp - self.sp_step).max(target)
        };
        let e = self.sp - meas;
        let cand = self.integ + self.ki * e;
        let u = self.kp * e + cand;
        let v = u
            .clamp(self.out - self.slew, self.out + self.slew)
            .clamp(0.0, self.ceiling);
        let limited = (v < u && e > 0.0) || (v > u && e < 0.0);
        if !limited {
            self.integ = cand;
        }
        self.integ = self.integ.clamp(0.0, self.ceiling);
        self.out = v;
        v
    }
}

#[test]
fn fixed_point_core_tracks_the_f64_reference_model() {
    let cfg = example::config().validate().unwrap();
    let counts_of = |mw: f64| -> u16 {
        let g = cfg
            .config()
            .calibration
            .monitor
            .units_per_count
            .to_num::<f64>();
        (mw / g).round().clamp(0.0, 4095.0) as u16
    };
    let sense_of = |ma: f64| -> u16 {
        let g = cfg
            .config()
            .calibration
            .current_sense
            .units_per_count
            .to_num::<f64>();
        (ma / g).round().clamp(0.0, 4095.0) as u16
    };
    let mut ctl = Controller::new(cfg.clone());
    let mut s = Sample {
        tick: 0,
        monitor_counts: 0,
        current_counts: 0,
        temp_counts: 2048,
        supply_counts: 2457,
        interlock_closed: true,
    };
    ctl.step(&s);
    ctl.request(Request::SetPowerMw(Fx::from_num(15))).unwrap();
    ctl.request(Request::Enable).unwrap();
    let mut i_core = 0.0f64;
    // Bring the core into regulation.
    for t in 1..20_000u32 {
        s.tick = t;
        s.monitor_counts = counts_of(plant_mw(i_core));
        s.current_counts = sense_of(i_core);
        ctl.step(&s);
        i_core = ctl.drive_ma().to_num();
    }
    assert_eq!(ctl.state(), State::Regulating);
    let mut m = Model {
        kp: cfg.kp().to_num(),
        ki: cfg.ki_per_tick().to_num(),
        slew: cfg.slew_ma_per_tick().to_num(),
        sp_step: cfg.setpoint_mw_per_tick().to_num(),
        ceiling: cfg.config().current.ceiling_ma.to_num(),
        integ: ctl.integrator_ma().to_num(),
        out: i_core,
        sp: ctl.power_setpoint_mw().to_num(),
    };
    let mut i_model = i_core;
    let targets = [15.0, 25.0, 5.0, 28.0, 12.0];
    let (mut worst_i, mut worst_p) = (0.0f64, 0.0f64);
    for k in 0..200_000u32 {
        let target = targets[(k / 40_000) as usize];
        if k % 40_000 == 0 {
            ctl.request(Request::SetPowerMw(Fx::from_num(target)))
                .unwrap();
        }
        s.tick += 1;
        s.monitor_counts = counts_of(plant_mw(i_core));
        s.current_counts = sense_of(i_core);
        ctl.step(&s);
        i_core = ctl.drive_ma().to_num();
        // The model sees the same quantised reading of its own plant.
        let g = cfg
            .config()
            .calibration
            .monitor
            .units_per_count
            .to_num::<f64>();
        let meas = f64::from(counts_of(plant_mw(i_model))) * g;
        i_model = m.step(target, meas);
        worst_i = worst_i.max((i_core - i_model).abs());
        worst_p = worst_p.max((plant_mw(i_core) - plant_mw(i_model)).abs());
    }
    assert_eq!(ctl.state(), State::Regulating);
    eprintln!("worst differences: {worst_i:.5} mA, {worst_p:.5} mW");
    assert!(worst_i < 0.05, "worst current difference {worst_i} mA");
    assert!(worst_p < 0.05, "worst power difference {worst_p} mW");
}
