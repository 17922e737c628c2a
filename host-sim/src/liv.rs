//! L-I-V sweeps of a module's diode: isothermal (the junction held at a
//! temperature, as a short-pulse measurement sees it) or CW with
//! self-heating (the case held at a temperature, the junction at the case
//! temperature plus the junction-to-case resistance times the dissipated
//! power, solved at every current), and the threshold and slope read from a
//! curve the way a bench measurement reads them.
//!
//! Threshold and slope: a straight line fitted by least squares to the
//! points between 10 % and 40 % of the curve's peak power, up to the peak
//! (before any thermal roll-over); the threshold is where that line meets
//! the current axis. This is the linear-extrapolation (two-segment) method
//! of diode characterisation (common practice); the peak of d²P/dI² gives
//! a slightly different threshold.
//!
//! A sweep none of whose points is above the diode's threshold at its own
//! junction temperature reads no threshold or slope (the spontaneous
//! emission below threshold is a straight line too); it says instead that
//! it stays below threshold, and why ([`BelowThreshold`]): its highest
//! current is below the threshold, or the junction is above the maximum
//! operating temperature, where the threshold rises steeply.

use crate::plant::{c_to_k, k_to_c, DemoModule, Diode, PlantError};

/// How the junction temperature of a sweep is set.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Heating {
    /// The junction held at this temperature, degC (no self-heating).
    Isothermal {
        /// Junction temperature, degC.
        junction_c: f64,
    },
    /// CW: the case held at this temperature, degC; the junction heats by
    /// R_jc × (I·V_f − P_optical).
    SelfHeated {
        /// Case temperature, degC.
        case_c: f64,
    },
}

impl Heating {
    /// The curve's label.
    pub fn label(&self) -> String {
        match self {
            Heating::Isothermal { junction_c } => format!("junction {junction_c} degC"),
            Heating::SelfHeated { case_c } => format!("CW, case {case_c} degC"),
        }
    }
}

/// One point of a sweep.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LivPoint {
    /// Drive current, mA.
    pub i_ma: f64,
    /// Front-facet optical power, mW.
    pub p_mw: f64,
    /// Forward voltage, V.
    pub v_f_v: f64,
    /// Emission wavelength, nm.
    pub wavelength_nm: f64,
    /// Junction temperature, degC.
    pub tj_c: f64,
    /// The diode's threshold current at this junction temperature, mA.
    pub i_th_ma: f64,
}

/// Why a sweep stays below threshold.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum BelowCause {
    /// The highest current is below the threshold at the junction
    /// temperature.
    Current,
    /// The junction is above the diode's maximum operating temperature,
    /// where the threshold rises steeply.
    AboveMaxOperating {
        /// The maximum operating temperature, degC.
        max_operating_c: f64,
    },
}

/// A sweep none of whose points lases: its point closest to threshold
/// (highest ratio of current to threshold) and why.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BelowThreshold {
    /// Current of that point, mA.
    pub i_ma: f64,
    /// Threshold at its junction temperature, mA.
    pub threshold_ma: f64,
    /// Its junction temperature, degC.
    pub tj_c: f64,
    /// Why the sweep stays below threshold.
    pub cause: BelowCause,
}

impl std::fmt::Display for BelowThreshold {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.cause {
            BelowCause::Current => write!(
                f,
                "stays below threshold: {:.1} mA is below the threshold {:.3} mA at junction {:.1} degC",
                self.i_ma, self.threshold_ma, self.tj_c
            ),
            BelowCause::AboveMaxOperating { max_operating_c } => write!(
                f,
                "stays below threshold: junction {:.1} degC is above the maximum operating temperature {:.1} degC (threshold there {:.1} mA, current {:.1} mA)",
                self.tj_c, max_operating_c, self.threshold_ma, self.i_ma
            ),
        }
    }
}

/// Threshold and slope read from a curve.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LivFit {
    /// Threshold current, mA.
    pub threshold_ma: f64,
    /// Slope efficiency, mW/mA (= W/A).
    pub slope_w_per_a: f64,
    /// Current range of the points fitted, mA.
    pub fit_from_ma: f64,
    /// End of the fitted range, mA.
    pub fit_to_ma: f64,
}

/// One sweep.
#[derive(Clone, Debug, PartialEq)]
pub struct LivCurve {
    /// How the junction temperature was set.
    pub heating: Heating,
    /// The points, in increasing current. A self-heated sweep stops where
    /// the junction has no steady state below [`MAX_RISE_K`] (thermal
    /// runaway).
    pub points: Vec<LivPoint>,
    /// Threshold and slope read from the points (`None` when the curve
    /// stays below threshold, or too few points lie between 10 and 40 % of
    /// its peak).
    pub fit: Option<LivFit>,
    /// Set when no point is above threshold: the sweep stays below it.
    pub below: Option<BelowThreshold>,
}

/// Largest junction rise above the case a self-heated sweep solves for, K.
pub const MAX_RISE_K: f64 = 500.0;

/// Errors of a sweep request.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum LivError {
    /// The highest current is not a positive finite number.
    #[error("highest current {0} mA must be a finite number above 0")]
    MaxCurrent(f64),
    /// A temperature is not finite or below absolute zero.
    #[error("temperature {0} degC must be finite and above -273.15 degC")]
    Temperature(f64),
    /// Too few or too many points.
    #[error("{0} points per sweep: give 2 to 100000")]
    Points(usize),
    /// The module's diode is refused.
    #[error(transparent)]
    Plant(#[from] PlantError),
}

/// The junction temperature, K, at current `i_a` with the case at
/// `case_k`: the root of T = T_case + R_jc · P_diss(I, T), found by
/// bisection (P_diss grows with T, so the root is unique when it exists);
/// `None` when there is none within [`MAX_RISE_K`].
fn junction_k(diode: &Diode, r_jc: f64, i_a: f64, case_k: f64) -> Option<f64> {
    let excess = |t: f64| {
        let o = diode.quasi_static(i_a, t);
        case_k + r_jc * (i_a * o.v_f_v - o.p_front_w - o.p_back_w).max(0.0) - t
    };
    let (mut lo, mut hi) = (case_k, case_k + MAX_RISE_K);
    if excess(hi) > 0.0 {
        return None;
    }
    for _ in 0..80 {
        let mid = 0.5 * (lo + hi);
        if excess(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo < 1e-9 {
            break;
        }
    }
    Some(0.5 * (lo + hi))
}

/// Sweep `module`'s diode from 0 to `max_ma` in `n` equal steps.
pub fn sweep(
    module: &DemoModule,
    heating: Heating,
    max_ma: f64,
    n: usize,
) -> Result<LivCurve, LivError> {
    if !(max_ma.is_finite() && max_ma > 0.0) {
        return Err(LivError::MaxCurrent(max_ma));
    }
    if !(2..=100_000).contains(&n) {
        return Err(LivError::Points(n));
    }
    let t_c = match heating {
        Heating::Isothermal { junction_c } => junction_c,
        Heating::SelfHeated { case_c } => case_c,
    };
    if !(t_c.is_finite() && t_c > -273.15) {
        return Err(LivError::Temperature(t_c));
    }
    let diode = Diode::new(module.diode.clone())?;
    let r_jc = module.thermal.r_jc_k_per_w;
    let mut points = Vec::with_capacity(n + 1);
    for k in 0..=n {
        let i_a = max_ma * 1e-3 * k as f64 / n as f64;
        let t_k = match heating {
            Heating::Isothermal { .. } => c_to_k(t_c),
            Heating::SelfHeated { .. } => match junction_k(&diode, r_jc, i_a, c_to_k(t_c)) {
                Some(t) => t,
                None => break,
            },
        };
        let o = diode.quasi_static(i_a, t_k);
        points.push(LivPoint {
            i_ma: i_a * 1e3,
            p_mw: o.p_front_w * 1e3,
            v_f_v: o.v_f_v,
            wavelength_nm: o.wavelength_m * 1e9,
            tj_c: k_to_c(t_k),
            i_th_ma: o.i_th_a * 1e3,
        });
    }
    let below = below_threshold(&points, module.diode.max_operating_c);
    let fit = if below.is_none() { fit(&points) } else { None };
    Ok(LivCurve {
        heating,
        points,
        fit,
        below,
    })
}

/// `None` when some point is above its threshold; else the point closest
/// to it and why the sweep stays below (see the module docs).
pub fn below_threshold(
    points: &[LivPoint],
    max_operating_c: Option<f64>,
) -> Option<BelowThreshold> {
    if points.iter().any(|p| p.i_ma > p.i_th_ma) {
        return None;
    }
    let p = points
        .iter()
        .max_by(|a, b| (a.i_ma / a.i_th_ma).total_cmp(&(b.i_ma / b.i_th_ma)))?;
    let cause = match max_operating_c {
        Some(t) if p.tj_c > t => BelowCause::AboveMaxOperating { max_operating_c: t },
        _ => BelowCause::Current,
    };
    Some(BelowThreshold {
        i_ma: p.i_ma,
        threshold_ma: p.i_th_ma,
        tj_c: p.tj_c,
        cause,
    })
}

/// Threshold and slope of a curve (see the module docs).
pub fn fit(points: &[LivPoint]) -> Option<LivFit> {
    let (peak_at, peak) = points
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.p_mw.total_cmp(&b.1.p_mw))?;
    if peak.p_mw.is_nan() || peak.p_mw <= 0.0 {
        return None;
    }
    let sel: Vec<&LivPoint> = points[..=peak_at]
        .iter()
        .filter(|p| p.p_mw >= 0.1 * peak.p_mw && p.p_mw <= 0.4 * peak.p_mw)
        .collect();
    if sel.len() < 2 {
        return None;
    }
    let n = sel.len() as f64;
    let (sx, sy) = sel
        .iter()
        .fold((0.0, 0.0), |(a, b), p| (a + p.i_ma, b + p.p_mw));
    let (mx, my) = (sx / n, sy / n);
    let (sxy, sxx) = sel.iter().fold((0.0, 0.0), |(a, b), p| {
        (a + (p.i_ma - mx) * (p.p_mw - my), b + (p.i_ma - mx).powi(2))
    });
    if sxx.is_nan() || sxx <= 0.0 {
        return None;
    }
    let slope = sxy / sxx;
    if slope.is_nan() || slope <= 0.0 {
        return None;
    }
    Some(LivFit {
        threshold_ma: mx - my / slope,
        slope_w_per_a: slope,
        fit_from_ma: sel[0].i_ma,
        fit_to_ma: sel[sel.len() - 1].i_ma,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Isothermal: the fitted threshold and slope are the model's own
    /// analytic ones (the linear-extrapolation method on an ideal curve;
    /// 1 % for the slight curvature spontaneous emission adds near
    /// threshold).
    #[test]
    fn isothermal_fit_recovers_the_model_threshold_and_slope() {
        for m in [DemoModule::visible(), DemoModule::pump()] {
            let d = Diode::new(m.diode.clone()).unwrap();
            let ith = d.threshold_current_a(c_to_k(25.0)) * 1e3;
            let slope = d.slope_w_per_a(c_to_k(25.0));
            let c = sweep(&m, Heating::Isothermal { junction_c: 25.0 }, 4.0 * ith, 400).unwrap();
            let f = c.fit.unwrap();
            assert!((f.threshold_ma / ith - 1.0).abs() < 0.01, "{f:?} vs {ith}");
            assert!(
                (f.slope_w_per_a / slope - 1.0).abs() < 0.01,
                "{f:?} vs {slope}"
            );
        }
    }

    /// CW with self-heating: the junction is above the case by R_jc times
    /// the dissipation at every point, and the curve lies below the
    /// isothermal one at the case temperature, increasingly so at high
    /// current (thermal roll-over).
    #[test]
    fn self_heating_puts_the_junction_above_the_case_and_the_power_below() {
        let m = DemoModule::pump();
        let d = Diode::new(m.diode.clone()).unwrap();
        let max_ma = m.driver.dac_vref_v * m.driver.transconductance_a_per_v * 1e3;
        let hot = sweep(&m, Heating::SelfHeated { case_c: 25.0 }, max_ma, 200).unwrap();
        let iso = sweep(&m, Heating::Isothermal { junction_c: 25.0 }, max_ma, 200).unwrap();
        assert!(hot.points.len() > 100);
        for (h, i) in hot.points.iter().zip(&iso.points).skip(1) {
            let o = d.quasi_static(h.i_ma * 1e-3, c_to_k(h.tj_c));
            let p_diss = h.i_ma * 1e-3 * o.v_f_v - o.p_front_w - o.p_back_w;
            let rise = m.thermal.r_jc_k_per_w * p_diss;
            assert!((h.tj_c - 25.0 - rise).abs() < 1e-6, "{h:?}");
            assert!(h.p_mw <= i.p_mw + 1e-9, "{h:?} above {i:?}");
        }
        let (h, i) = (hot.points.last().unwrap(), iso.points.last().unwrap());
        assert!(h.tj_c > 30.0 && h.p_mw < 0.97 * i.p_mw, "{h:?} {i:?}");
        let (fh, fi) = (hot.fit.unwrap(), iso.fit.unwrap());
        assert!(fh.slope_w_per_a < fi.slope_w_per_a);
    }

    #[test]
    fn bad_requests_are_refused() {
        let m = DemoModule::visible();
        let iso = Heating::Isothermal { junction_c: 25.0 };
        for bad in [f64::INFINITY, f64::NAN, 0.0, -5.0] {
            assert!(matches!(
                sweep(&m, iso, bad, 10),
                Err(LivError::MaxCurrent(_))
            ));
        }
        assert!(matches!(
            sweep(&m, Heating::SelfHeated { case_c: f64::NAN }, 50.0, 10),
            Err(LivError::Temperature(_))
        ));
        assert_eq!(sweep(&m, iso, 50.0, 1), Err(LivError::Points(1)));
    }

    /// A sweep whose highest current stays below the threshold gives no
    /// threshold or slope: the spontaneous emission below threshold is a
    /// line too, and the 10-40 % fit read one from it.
    #[test]
    fn a_sweep_below_threshold_reads_no_threshold_or_slope() {
        let m = DemoModule::visible();
        let d = Diode::new(m.diode.clone()).unwrap();
        let ith_ma = d.threshold_current_a(c_to_k(25.0)) * 1e3;
        let c = sweep(
            &m,
            Heating::Isothermal { junction_c: 25.0 },
            0.8 * ith_ma,
            400,
        )
        .unwrap();
        assert!(c.points.last().unwrap().p_mw > 0.0);
        assert_eq!(c.fit, None);
        let b = c.below.unwrap();
        assert_eq!(b.cause, BelowCause::Current);
        assert!((b.i_ma / (0.8 * ith_ma) - 1.0).abs() < 1e-12, "{b:?}");
        assert!((b.threshold_ma / ith_ma - 1.0).abs() < 1e-12, "{b:?}");
        assert!(b.to_string().contains("is below the threshold"), "{b}");
        // At 1.2 times the threshold it lases and reads its threshold.
        let c = sweep(
            &m,
            Heating::Isothermal { junction_c: 25.0 },
            1.2 * ith_ma,
            400,
        )
        .unwrap();
        assert_eq!(c.below, None);
        assert!(c.fit.is_some());
    }

    /// Above the maximum operating temperature the diode does not lase at
    /// a current that is three times its 25 degC threshold.
    #[test]
    fn a_sweep_above_the_maximum_operating_temperature_reads_no_threshold() {
        let mut m = DemoModule::visible();
        m.diode.max_operating_c = Some(60.0);
        let d = Diode::new(m.diode.clone()).unwrap();
        let ith_ma = d.threshold_current_a(c_to_k(25.0)) * 1e3;
        let c = sweep(
            &m,
            Heating::Isothermal { junction_c: 75.0 },
            3.0 * ith_ma,
            400,
        )
        .unwrap();
        assert_eq!(c.fit, None);
        let b = c.below.unwrap();
        assert_eq!(
            b.cause,
            BelowCause::AboveMaxOperating {
                max_operating_c: 60.0
            }
        );
        assert!((b.tj_c - 75.0).abs() < 1e-9);
        assert!(
            b.to_string()
                .contains("above the maximum operating temperature 60.0 degC"),
            "{b}"
        );
        // At 55 degC the same sweep lases.
        let c = sweep(
            &m,
            Heating::Isothermal { junction_c: 55.0 },
            3.0 * ith_ma,
            400,
        )
        .unwrap();
        assert_eq!(c.below, None);
        assert!(c.fit.is_some());
    }
}
