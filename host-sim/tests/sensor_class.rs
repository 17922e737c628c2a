//! A temperature sensor given by its IEC 60751 class: the Monte Carlo
//! parts of a campaign draw its error within the class band, and the
//! board's temperature table stays on the nominal curve.

use diodestat_sim::calibration::temp_cal;
use diodestat_sim::campaign::parts;
use diodestat_sim::plant::{DemoModule, RtdClass, TempSensor};

/// The pump module's Pt1000 is class B: each drawn part has its own band
/// position in -1 ..= 1, spread over the band; the diode and monitor
/// factors are drawn as before. The visible module's NTC has no class: its
/// parts keep the nominal curve.
#[test]
fn monte_carlo_parts_draw_the_sensor_error_within_the_class_band() {
    let pump = DemoModule::pump();
    assert_eq!(pump.sensor.sensor.rtd_class(), Some(RtdClass::B));
    let drawn = parts(&pump, 400, 11);
    let bands: Vec<f64> = drawn.iter().map(|c| c.sensor_band).collect();
    assert!(bands.iter().all(|b| (-1.0..=1.0).contains(b)));
    let (lo, hi) = bands
        .iter()
        .fold((1.0f64, -1.0f64), |(l, h), b| (l.min(*b), h.max(*b)));
    assert!(lo < -0.95 && hi > 0.95, "{lo} {hi}");
    let mean = bands.iter().sum::<f64>() / bands.len() as f64;
    assert!(mean.abs() < 0.1, "{mean}");
    let t = pump.tolerances;
    for c in &drawn {
        assert!((c.threshold - 1.0).abs() <= t.threshold);
        assert!((c.slope - 1.0).abs() <= t.slope);
        assert!((c.tracking - 1.0).abs() <= t.tracking);
    }
    let visible = parts(&DemoModule::visible(), 50, 11);
    assert!(visible.iter().all(|c| c.sensor_band == 0.0));
}

/// The firmware's table comes from the nominal curve: a module whose
/// sensor sits at the edge of its band gets the same table.
#[test]
fn the_temperature_table_ignores_the_part_error() {
    let pump = DemoModule::pump();
    let mut edge = pump.clone();
    edge.sensor.sensor = edge.sensor.sensor.with_band_position(1.0);
    assert_ne!(edge.sensor.sensor, pump.sensor.sensor);
    assert!(matches!(edge.sensor.sensor, TempSensor::Rtd(_)));
    assert_eq!(temp_cal(&edge), temp_cal(&pump));
}
