//! The power loop of a simulated board at each plant corner: from a board
//! configuration and a module's plant parameters, the quasi-static
//! operating point at the setpoint (current, junction and case
//! temperature), the small-signal loop parameters there ([`LoopParams`]),
//! their margins, a pass/fail gate and a Markdown table; and PI design
//! over the corners.
//!
//! At each corner:
//!
//! * the diode is built from the module's parameters with the corner's
//!   threshold and slope spread and aging applied, the monitor with its
//!   responsivity factor, the thermal path with its cooling factor;
//! * the operating current is the one at which the monitor *reading* (what
//!   the core regulates) equals the setpoint, with the junction at its
//!   thermal steady state for that current (fixed-point iteration on the
//!   dissipation, bisection on the current); when that is above the
//!   ceiling (configured, derated at the case temperature) the loop sits on
//!   the ceiling, is flagged, and is evaluated at the ceiling current;
//! * `slope_mw_per_ma` is the central difference of the quasi-static front
//!   power at that current and junction temperature (isothermal: the
//!   junction's thermal time constant, about a millisecond in the demo
//!   modules, lowers the slope further only below a few hundred hertz, where
//!   the integrator dominates);
//! * `monitor_gain` is the derivative of the reading (photocurrent, trans-
//!   impedance, ideal ADC, the configuration's monitor calibration) with
//!   respect to the true front power at the corner's case temperature and
//!   wavelength; `dac_gain` is the configuration's DAC calibration times the
//!   module's DAC and transconductance (mA actually sourced per mA
//!   commanded, without quantisation);
//! * the driver pole is the module's driver bandwidth, the monitor pole the
//!   simulator's front-end filter ([`crate::sim::MONITOR_FILTER_HZ`]), the
//!   delay the board's drive latency ([`CornerOptions::for_latency`]; one
//!   tick by default).
//!
//! Spreads map onto the rate-equation model by
//! [`DemoModule::with_spread`]. The standard spreads here are demo values,
//! not device statistics.

use crate::units::Scale;
use diodestat_core::{Fx, ValidConfig};

use crate::plant::{
    c_to_k, k_to_c, DemoModule, Diode, DiodeParams, Monitor, PartTolerances, PlantError, Thermal,
};
use crate::sim::{DacLatency, MONITOR_FILTER_HZ};

use super::design::{design_pi, Design, DesignError, DesignSpec};
use super::loop_model::{loop_margins, LoopParams};
use super::margins::Margins;

/// One plant corner.
#[derive(Clone, Debug, PartialEq)]
pub struct PlantCorner {
    /// Name for reports.
    pub name: String,
    /// Ambient, degC.
    pub ambient_c: f64,
    /// APC setpoint (front mW as the monitor is calibrated).
    pub setpoint_mw: f64,
    /// Threshold-current multiplier (1 nominal).
    pub threshold_factor: f64,
    /// Slope-efficiency multiplier (1 nominal).
    pub slope_factor: f64,
    /// Monitor responsivity multiplier: tracking-ratio spread (1 nominal).
    pub tracking_factor: f64,
    /// Operating hours of the diode (aging), h.
    pub aged_hours: f64,
    /// Heatsink-to-ambient thermal resistance multiplier (1 nominal).
    pub cooling_factor: f64,
}

impl PlantCorner {
    /// The nominal corner: 25 degC, no spread, new diode.
    pub fn nominal(setpoint_mw: f64) -> Self {
        PlantCorner {
            name: "nominal".into(),
            ambient_c: 25.0,
            setpoint_mw,
            threshold_factor: 1.0,
            slope_factor: 1.0,
            tracking_factor: 1.0,
            aged_hours: 0.0,
            cooling_factor: 1.0,
        }
    }

    /// The same corner under another name.
    pub fn named(self, name: &str) -> Self {
        PlantCorner {
            name: name.into(),
            ..self
        }
    }
}

/// Ambient of the cold corner, degC (demo value).
pub const COLD_C: f64 = 0.0;
/// Ambient of the hot corner, degC (demo value).
pub const HOT_C: f64 = 40.0;
/// Threshold spread of the standard corners, ± fraction (demo value).
pub const THRESHOLD_SPREAD: f64 = PartTolerances::DEMO.threshold;
/// Slope spread of the standard corners, ± fraction (demo value).
pub const SLOPE_SPREAD: f64 = PartTolerances::DEMO.slope;
/// Tracking-ratio (monitor responsivity) spread, ± fraction (demo value).
pub const TRACKING_SPREAD: f64 = PartTolerances::DEMO.tracking;
/// Age of the aged corner, h (demo value).
pub const AGED_HOURS: f64 = 20_000.0;

/// The standard corners at `setpoint_mw`: nominal, cold, hot, threshold
/// high and low, slope high and low, tracking high and low, aged, low
/// setpoint (the configuration's lowest, near threshold), and derated (the
/// ambient 5 degC above the derating knee).
pub fn standard_corners(cfg: &ValidConfig, setpoint_mw: f64) -> Vec<PlantCorner> {
    let n = PlantCorner::nominal(setpoint_mw);
    let c = cfg.config();
    vec![
        n.clone(),
        PlantCorner {
            ambient_c: COLD_C,
            ..n.clone()
        }
        .named("cold"),
        PlantCorner {
            ambient_c: HOT_C,
            ..n.clone()
        }
        .named("hot"),
        PlantCorner {
            threshold_factor: 1.0 + THRESHOLD_SPREAD,
            ..n.clone()
        }
        .named("threshold high"),
        PlantCorner {
            threshold_factor: 1.0 - THRESHOLD_SPREAD,
            ..n.clone()
        }
        .named("threshold low"),
        PlantCorner {
            slope_factor: 1.0 + SLOPE_SPREAD,
            ..n.clone()
        }
        .named("slope high"),
        PlantCorner {
            slope_factor: 1.0 - SLOPE_SPREAD,
            ..n.clone()
        }
        .named("slope low"),
        PlantCorner {
            tracking_factor: 1.0 + TRACKING_SPREAD,
            ..n.clone()
        }
        .named("tracking high"),
        PlantCorner {
            tracking_factor: 1.0 - TRACKING_SPREAD,
            ..n.clone()
        }
        .named("tracking low"),
        PlantCorner {
            aged_hours: AGED_HOURS,
            ..n.clone()
        }
        .named("aged"),
        PlantCorner {
            setpoint_mw: c.units().mw(c.power.min_setpoint_ou),
            ..n.clone()
        }
        .named("low setpoint"),
        PlantCorner {
            ambient_c: c.derating.knee_degc.to_num::<f64>() + 5.0,
            ..n
        }
        .named("derated"),
    ]
}

/// Timing of the loop around the plant.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CornerOptions {
    /// Whole ticks between sampling and the DAC update.
    pub delay_ticks: u32,
    /// Monitor front-end pole, Hz.
    pub monitor_filter_hz: f64,
}

impl CornerOptions {
    /// The simulator's timing for a board whose drive takes effect
    /// `latency` after its sample, with the simulator's monitor filter.
    pub fn for_latency(latency: DacLatency) -> Self {
        CornerOptions {
            delay_ticks: latency.get(),
            monitor_filter_hz: MONITOR_FILTER_HZ,
        }
    }
}

impl Default for CornerOptions {
    /// The default latency (one tick), the simulator's monitor filter.
    fn default() -> Self {
        Self::for_latency(DacLatency::default())
    }
}

/// Why a corner could not be evaluated.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum CornerError {
    /// A plant model refused the corner's parameters.
    #[error("corner {corner}: {source}")]
    Plant {
        /// Corner name.
        corner: String,
        /// The model's error.
        source: PlantError,
    },
    /// A corner factor is out of range.
    #[error("corner {corner}: {what} = {value} is out of range")]
    Factor {
        /// Corner name.
        corner: String,
        /// Which factor.
        what: &'static str,
        /// Its value.
        value: f64,
    },
    /// The diode has no optical gain at the operating point.
    #[error("corner {corner}: zero slope at {current_ma:.3} mA (below threshold?)")]
    NoSlope {
        /// Corner name.
        corner: String,
        /// Operating current, mA.
        current_ma: f64,
    },
}

/// The quasi-static operating point of one corner.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct OperatingPoint {
    /// Drive current, mA: the current that gives the setpoint, or the
    /// ceiling when that is lower.
    pub current_ma: f64,
    /// Current the setpoint needs, mA (`None`: more than the absolute
    /// limit).
    pub required_ma: Option<f64>,
    /// True front-facet power, mW.
    pub front_mw: f64,
    /// Monitor reading as the core sees it, mW (the setpoint, unless on
    /// the ceiling).
    pub reading_mw: f64,
    /// Junction temperature, degC.
    pub tj_c: f64,
    /// Case temperature, degC.
    pub case_c: f64,
    /// Threshold current at that junction temperature, mA.
    pub threshold_ma: f64,
    /// Forward voltage, V.
    pub v_f_v: f64,
    /// The core's current ceiling there (configured and derated at the case
    /// temperature), mA.
    pub ceiling_ma: f64,
    /// The setpoint needs more than the ceiling: the loop sits on the
    /// ceiling and does not regulate; the loop is evaluated at the ceiling,
    /// where it takes over again.
    pub at_ceiling: bool,
    /// The driver has the voltage headroom for this current.
    pub compliance_ok: bool,
}

/// One corner's operating point and loop.
#[derive(Clone, Debug, PartialEq)]
pub struct CornerLoop {
    /// The corner.
    pub corner: PlantCorner,
    /// Its operating point.
    pub point: OperatingPoint,
    /// The small-signal loop there, with the configuration's gains.
    pub params: LoopParams,
}

struct CornerPlant {
    diode: Diode,
    monitor: Monitor,
    thermal: Thermal,
    counts_per_v: f64,
    mw_per_count: f64,
    mon_offset: f64,
}

impl PlantCorner {
    /// Checks the corner's factors: positive finite multipliers and
    /// setpoint, non-negative finite age, finite ambient.
    pub fn check(&self) -> Result<(), CornerError> {
        let bad = |what, value| CornerError::Factor {
            corner: self.name.clone(),
            what,
            value,
        };
        let pos = |v: f64| v > 0.0 && v.is_finite();
        for (what, v) in [
            ("threshold_factor", self.threshold_factor),
            ("slope_factor", self.slope_factor),
            ("tracking_factor", self.tracking_factor),
            ("cooling_factor", self.cooling_factor),
            ("setpoint_mw", self.setpoint_mw),
        ] {
            if !pos(v) {
                return Err(bad(what, v));
            }
        }
        if !(self.aged_hours >= 0.0 && self.aged_hours.is_finite()) {
            return Err(bad("aged_hours", self.aged_hours));
        }
        if !self.ambient_c.is_finite() {
            return Err(bad("ambient_c", self.ambient_c));
        }
        Ok(())
    }

    /// The module's diode parameters with this corner's threshold and
    /// slope spread applied (see the module documentation); aging,
    /// tracking and cooling act on the built models instead.
    pub fn diode_params(&self, module: &DemoModule) -> DiodeParams {
        module
            .with_spread(self.threshold_factor, self.slope_factor)
            .diode
    }
}

impl CornerPlant {
    fn new(module: &DemoModule, cfg: &ValidConfig, c: &PlantCorner) -> Result<Self, CornerError> {
        c.check()?;
        let plant = |source| CornerError::Plant {
            corner: c.name.clone(),
            source,
        };
        let mut diode = Diode::new(c.diode_params(module)).map_err(plant)?;
        diode.age(c.aged_hours);
        let mut monitor = Monitor::new(module.monitor.clone()).map_err(plant)?;
        monitor.degrade_factor = c.tracking_factor;
        let mut thermal =
            Thermal::new(module.thermal.clone(), c_to_k(c.ambient_c)).map_err(plant)?;
        thermal.heatsink_loss_factor = c.cooling_factor;
        let full = f64::from((1u32 << module.adc.bits) - 1);
        let cal = cfg.config().calibration.monitor;
        Ok(CornerPlant {
            diode,
            monitor,
            thermal,
            counts_per_v: full / module.adc.vref_v,
            mw_per_count: cal.units_per_count.to_num::<f64>() * cfg.config().units().mw_per_ou(),
            mon_offset: f64::from(cal.offset_counts),
        })
    }

    /// Monitor reading, mW, for front power `p_w` (ideal ADC).
    fn reading_mw(&self, p_w: f64, wavelength_m: f64, t_case_k: f64) -> f64 {
        let v = self
            .monitor
            .voltage_v(self.monitor.current_a(p_w, wavelength_m, t_case_k));
        (v * self.counts_per_v - self.mon_offset) * self.mw_per_count
    }

    /// Junction and case temperature (K) at steady state for `i_a`.
    fn temperatures(&self, i_a: f64, ambient_k: f64) -> (f64, f64) {
        let mut tj = ambient_k;
        let mut tc = ambient_k;
        for _ in 0..200 {
            let o = self.diode.quasi_static(i_a, tj);
            let p_diss = (i_a * o.v_f_v - o.p_front_w - o.p_back_w).max(0.0);
            let [j, c, _] = self.thermal.steady_state_k(p_diss, ambient_k);
            let done = (j - tj).abs() < 1e-10;
            tj = j;
            tc = c;
            if done {
                break;
            }
        }
        (tj, tc)
    }

    /// Reading at `i_a` with the junction at its steady state.
    fn reading_at(&self, i_a: f64, ambient_k: f64) -> f64 {
        let (tj, tc) = self.temperatures(i_a, ambient_k);
        let o = self.diode.quasi_static(i_a, tj);
        self.reading_mw(o.p_front_w, o.wavelength_m, tc)
    }
}

/// The loops of the [`standard_corners`] of `cfg` at `setpoint_mw`, in
/// their order, with the simulator's timing for a drive that takes effect
/// `latency` after its sample.
pub fn standard_corner_loops(
    module: &DemoModule,
    cfg: &ValidConfig,
    setpoint_mw: f64,
    latency: DacLatency,
) -> Result<Vec<CornerLoop>, CornerError> {
    let opts = CornerOptions::for_latency(latency);
    standard_corners(cfg, setpoint_mw)
        .iter()
        .map(|c| corner_loop(module, cfg, c, &opts))
        .collect()
}

/// The operating point and loop of `corner` for `module` driven by `cfg`.
pub fn corner_loop(
    module: &DemoModule,
    cfg: &ValidConfig,
    corner: &PlantCorner,
    opts: &CornerOptions,
) -> Result<CornerLoop, CornerError> {
    let plant = CornerPlant::new(module, cfg, corner)?;
    let amb = c_to_k(corner.ambient_c);
    let c = cfg.config();
    let limit_a = c.units().ma(c.current.absolute_max_iu) * 1e-3;
    let sp = corner.setpoint_mw;
    // The ceiling in force at current `i` (derated at its case temperature).
    let ceiling_a = |i: f64| {
        let (_, tc) = plant.temperatures(i, amb);
        c.units().ma(cfg
            .derated_ceiling_iu(Fx::saturating_from_num(k_to_c(tc)))
            .min(c.current.ceiling_iu))
            * 1e-3
    };
    // Bisection on the current for reading = setpoint, if the absolute
    // limit reaches it.
    let required = (plant.reading_at(limit_a, amb) >= sp).then(|| {
        let (mut lo, mut hi) = (0.0, limit_a);
        for _ in 0..100 {
            let mid = 0.5 * (lo + hi);
            if plant.reading_at(mid, amb) < sp {
                lo = mid;
            } else {
                hi = mid;
            }
            if hi - lo <= 1e-13 * limit_a {
                break;
            }
        }
        0.5 * (lo + hi)
    });
    let (i, at_ceiling) = match required {
        Some(i) if i <= ceiling_a(i) => (i, false),
        _ => {
            // On the ceiling: the current where the ceiling at its own case
            // temperature holds (the loop comes off the ceiling there).
            let mut i = ceiling_a(0.0);
            for _ in 0..100 {
                let next = ceiling_a(i);
                let done = (next - i).abs() <= 1e-12 * limit_a;
                i = next;
                if done {
                    break;
                }
            }
            (i, true)
        }
    };
    let (tj, tc) = plant.temperatures(i, amb);
    let out = plant.diode.quasi_static(i, tj);
    // Isothermal slope by central difference, mW per mA.
    let h = (1e-4 * i).max(1e-7);
    let pp = plant.diode.quasi_static(i + h, tj).p_front_w;
    let pm = plant.diode.quasi_static(i - h, tj).p_front_w;
    let slope = (pp - pm) / (2.0 * h);
    if slope.is_nan() || slope <= 0.0 {
        return Err(CornerError::NoSlope {
            corner: corner.name.clone(),
            current_ma: i * 1e3,
        });
    }
    // Monitor gain: reading mW per true front mW (linear in the power).
    let dp = (1e-3 * out.p_front_w).max(1e-9);
    let monitor_gain = (plant.reading_mw(out.p_front_w + dp, out.wavelength_m, tc)
        - plant.reading_mw(out.p_front_w - dp, out.wavelength_m, tc))
        / (2.0 * dp * 1e3);
    // DAC: commanded mA -> code -> sourced mA.
    let dac = &module.driver;
    let fs_ma = dac.dac_vref_v * dac.transconductance_a_per_v * 1e3;
    let max_code = f64::from((1u32 << dac.dac_bits) - 1);
    let dac_gain = c.units().codes_per_ma(c.calibration.dac.codes_per_iu) * fs_ma / max_code;
    let point = OperatingPoint {
        current_ma: i * 1e3,
        required_ma: required.map(|r| r * 1e3),
        front_mw: out.p_front_w * 1e3,
        reading_mw: plant.reading_mw(out.p_front_w, out.wavelength_m, tc),
        tj_c: k_to_c(tj),
        case_c: k_to_c(tc),
        threshold_ma: plant.diode.threshold_current_a(tj) * 1e3,
        v_f_v: out.v_f_v,
        ceiling_ma: ceiling_a(i) * 1e3,
        at_ceiling,
        compliance_ok: out.v_f_v <= module.supply_v - dac.compliance_v,
    };
    let params = LoopParams {
        tick_hz: f64::from(c.tick_hz),
        kp_ma_per_mw: 0.0,
        ki_per_tick: 0.0,
        dac_gain,
        driver_bandwidth_hz: dac.bandwidth_hz,
        slope_mw_per_ma: slope,
        monitor_gain,
        monitor_filter_hz: opts.monitor_filter_hz,
        delay_ticks: opts.delay_ticks,
    }
    .with_config_gains(cfg);
    Ok(CornerLoop {
        corner: corner.clone(),
        point,
        params,
    })
}

/// One corner's loop and its margins.
#[derive(Clone, Debug, PartialEq)]
pub struct CornerAnalysis {
    /// Operating point and loop.
    pub corner: CornerLoop,
    /// Margins with the configuration's gains.
    pub margins: Margins,
}

/// The loops and margins of all `corners`.
pub fn analyse_corners(
    module: &DemoModule,
    cfg: &ValidConfig,
    corners: &[PlantCorner],
    opts: &CornerOptions,
) -> Result<Vec<CornerAnalysis>, CornerError> {
    corners
        .iter()
        .map(|c| {
            let corner = corner_loop(module, cfg, c, opts)?;
            let margins = loop_margins(&corner.params);
            Ok(CornerAnalysis { corner, margins })
        })
        .collect()
}

/// A corner that misses the gate.
#[derive(Clone, Debug, PartialEq)]
pub struct GateFailure {
    /// Corner name.
    pub corner: String,
    /// What it misses.
    pub reason: String,
}

/// The gate's verdict.
#[derive(Clone, Debug, PartialEq)]
pub struct GateReport {
    /// Corners below the margins or with an unstable closed loop.
    pub failures: Vec<GateFailure>,
    /// Corners whose operating current is above the ceiling (the loop sits
    /// on the ceiling and does not regulate there), or without driver
    /// headroom; reported, not failed on (a capability limit, not a
    /// stability one).
    pub not_regulating: Vec<GateFailure>,
}

impl GateReport {
    /// No corner failed the margins.
    pub fn passed(&self) -> bool {
        self.failures.is_empty()
    }
}

/// Checks every corner against `min_pm_deg` and `min_gm_db` (for example
/// [`super::PASS_PM_DEG`] and [`super::PASS_GM_DB`]).
pub fn gate(analyses: &[CornerAnalysis], min_pm_deg: f64, min_gm_db: f64) -> GateReport {
    let mut r = GateReport {
        failures: Vec::new(),
        not_regulating: Vec::new(),
    };
    for a in analyses {
        let m = &a.margins;
        let name = a.corner.corner.name.clone();
        if !m.closed_loop_stable {
            r.failures.push(GateFailure {
                corner: name.clone(),
                reason: "closed loop unstable".into(),
            });
        } else if !m.meets(min_pm_deg, min_gm_db) {
            r.failures.push(GateFailure {
                corner: name.clone(),
                reason: format!(
                    "PM {:.1} deg (min {min_pm_deg}), GM {:.1} dB (min {min_gm_db})",
                    m.pm_deg, m.gm_db
                ),
            });
        }
        let p = &a.corner.point;
        if p.at_ceiling {
            r.not_regulating.push(GateFailure {
                corner: name.clone(),
                reason: match p.required_ma {
                    Some(r) => format!(
                        "needs {r:.2} mA, ceiling {:.2} mA at case {:.1} degC",
                        p.ceiling_ma, p.case_c
                    ),
                    None => format!(
                        "needs more than the absolute limit, ceiling {:.2} mA at case {:.1} degC",
                        p.ceiling_ma, p.case_c
                    ),
                },
            });
        }
        if !p.compliance_ok {
            r.not_regulating.push(GateFailure {
                corner: name,
                reason: format!(
                    "forward voltage {:.3} V exceeds the driver headroom",
                    p.v_f_v
                ),
            });
        }
    }
    r
}

/// A Markdown table of the corners: operating point, loop gains and margins.
pub fn markdown(analyses: &[CornerAnalysis], min_pm_deg: f64, min_gm_db: f64) -> String {
    let mut s = String::from(
        "| corner | ambient (degC) | setpoint (mW) | current (mA) | Tj (degC) | slope (mW/mA) | monitor gain | \
         PM (deg) | gain crossover (Hz) | GM (dB) | phase crossover (Hz) | BW (Hz) | verdict |\n\
         |---|---|---|---|---|---|---|---|---|---|---|---|---|\n",
    );
    for a in analyses {
        let (c, p, m) = (&a.corner.corner, &a.corner.point, &a.margins);
        let verdict = if !m.meets(min_pm_deg, min_gm_db) {
            "FAIL"
        } else if p.at_ceiling || !p.compliance_ok {
            "pass (not regulating)"
        } else {
            "pass"
        };
        s.push_str(&format!(
            "| {} | {:.1} | {:.3} | {:.3} | {:.1} | {:.4} | {:.4} | {:.1} | {:.1} | {:.1} | {:.1} | {:.1} | {} |\n",
            c.name,
            c.ambient_c,
            c.setpoint_mw,
            p.current_ma,
            p.tj_c,
            a.corner.params.slope_mw_per_ma,
            a.corner.params.monitor_gain,
            m.pm_deg,
            m.fcp_hz,
            m.gm_db,
            m.fcg_hz,
            m.bandwidth_hz,
            verdict
        ));
    }
    s
}

/// Why the design over corners failed.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum CornerDesignError {
    /// A corner could not be evaluated.
    #[error(transparent)]
    Corner(#[from] CornerError),
    /// The design failed.
    #[error(transparent)]
    Design(#[from] DesignError),
}

/// PI gains for `module` and `cfg` (its gains replaced) that meet `spec`
/// at every corner.
pub fn design_for_corners(
    module: &DemoModule,
    cfg: &ValidConfig,
    corners: &[PlantCorner],
    opts: &CornerOptions,
    spec: &DesignSpec,
) -> Result<Design, CornerDesignError> {
    let params: Vec<LoopParams> = corners
        .iter()
        .map(|c| corner_loop(module, cfg, c, opts).map(|l| l.params))
        .collect::<Result<_, _>>()?;
    Ok(design_pi(&params, spec)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibration;
    use diodestat_core::example;

    fn setup() -> (DemoModule, ValidConfig) {
        let m = DemoModule::visible();
        let cfg = calibration::calibrate(example::config(), &m)
            .validate()
            .unwrap();
        (m, cfg)
    }

    #[test]
    fn spreads_scale_threshold_and_slope() {
        let (m, cfg) = setup();
        let t = c_to_k(25.0);
        let base = CornerPlant::new(&m, &cfg, &PlantCorner::nominal(10.0)).unwrap();
        let c = PlantCorner {
            threshold_factor: 1.2,
            slope_factor: 0.9,
            ..PlantCorner::nominal(10.0)
        };
        let spread = CornerPlant::new(&m, &cfg, &c).unwrap();
        let r_th = spread.diode.threshold_current_a(t) / base.diode.threshold_current_a(t);
        let r_sl = spread.diode.slope_w_per_a(t) / base.diode.slope_w_per_a(t);
        assert!((r_th - 1.2).abs() < 1e-9, "{r_th}");
        assert!((r_sl - 0.9).abs() < 1e-9, "{r_sl}");
    }

    #[test]
    fn operating_point_is_consistent() {
        let (m, cfg) = setup();
        let c = PlantCorner::nominal(20.0);
        let l = corner_loop(&m, &cfg, &c, &CornerOptions::default()).unwrap();
        let p = l.point;
        assert!((p.reading_mw - 20.0).abs() < 1e-6, "{}", p.reading_mw);
        assert!(p.current_ma > p.threshold_ma);
        assert!(p.tj_c > 25.0 && p.case_c > 25.0 && p.tj_c > p.case_c);
        // Well above threshold the quasi-static slope is the analytic one.
        let plant = CornerPlant::new(&m, &cfg, &c).unwrap();
        let analytic = plant.diode.slope_w_per_a(c_to_k(p.tj_c));
        let rel = l.params.slope_mw_per_ma / analytic - 1.0;
        assert!(
            rel.abs() < 0.02,
            "slope {} vs {analytic}",
            l.params.slope_mw_per_ma
        );
        // Calibrated at 25 degC: the monitor gain is near 1, the DAC gain too.
        assert!(
            (l.params.monitor_gain - 1.0).abs() < 0.02,
            "{}",
            l.params.monitor_gain
        );
        assert!(
            (l.params.dac_gain - 1.0).abs() < 1e-3,
            "{}",
            l.params.dac_gain
        );
        assert_eq!(l.params.kp_ma_per_mw, cfg.kp().to_num::<f64>());
    }

    #[test]
    fn unreachable_setpoint_sits_on_the_ceiling() {
        let (m, cfg) = setup();
        let l = corner_loop(
            &m,
            &cfg,
            &PlantCorner::nominal(500.0),
            &CornerOptions::default(),
        )
        .unwrap();
        assert!(l.point.at_ceiling && l.point.required_ma.is_none());
        assert!((l.point.current_ma - l.point.ceiling_ma).abs() < 1e-6);
        assert!(l.point.reading_mw < 500.0);
        let bad = PlantCorner {
            slope_factor: -1.0,
            ..PlantCorner::nominal(1.0)
        };
        assert!(matches!(
            corner_loop(&m, &cfg, &bad, &CornerOptions::default()),
            Err(CornerError::Factor { .. })
        ));
    }
}
