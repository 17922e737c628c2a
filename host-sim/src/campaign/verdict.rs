//! The campaign's pass lines, independent of the controller's settings:
//! the product's intended laser class (IEC 60825-1:2014 accessible
//! emission limits, `crate::laser_class`), the module's ratings (rated
//! maximum optical power and current, facet-damage limit) with the
//! board's declared allowances, and the judgement of one case's record
//! against them.

use serde::{Deserialize, Serialize};

use crate::laser_class::{worst_exposure, Ael, AelError, Exposure, LaserClass};
use crate::plant::DemoModule;

/// Source types a board file may declare. Only small sources (C6 = 1)
/// are covered; the board file refuses others.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SourceType {
    /// Apparent source no larger than alpha_min (1.5 mrad): C6 = 1.
    Small,
}

/// What a case is judged against.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct PassLines {
    /// The product's intended laser class.
    pub class: LaserClass,
    /// Its limits at the module's wavelength.
    pub ael: Ael,
    /// Fraction of the front-facet power accessible outside the product.
    pub accessible_fraction: f64,
    /// Source type.
    pub source: SourceType,
    /// The module's rated maximum optical power, mW.
    pub rated_power_mw: f64,
    /// The module's rated maximum current, mA.
    pub rated_current_ma: f64,
    /// The module's facet-damage power, mW.
    pub damage_mw: f64,
    /// Energy above the rated power a case may deliver, uJ (board file).
    pub over_power_allowance_uj: f64,
    /// Charge above the rated current a case may drive, uC (board file).
    pub over_current_allowance_uc: f64,
}

impl PassLines {
    /// The pass lines of a board declaring `class`, `accessible_fraction`
    /// and `source` on `module`, with its allowances.
    pub fn new(
        class: LaserClass,
        accessible_fraction: f64,
        source: SourceType,
        module: &DemoModule,
        over_power_allowance_uj: f64,
        over_current_allowance_uc: f64,
    ) -> Result<PassLines, AelError> {
        Ok(PassLines {
            class,
            ael: Ael::new(class, module.diode.wavelength_nm)?,
            accessible_fraction,
            source,
            rated_power_mw: module.rated_power_w * 1e3,
            rated_current_ma: module.rated_current_a * 1e3,
            damage_mw: module.diode.damage_power_w * 1e3,
            over_power_allowance_uj,
            over_current_allowance_uc,
        })
    }

    /// The continuous accessible emission limit, mW (`None`: Class 4).
    pub fn cw_limit_mw(&self) -> Option<f64> {
        self.ael.cw_w().map(|w| w * 1e3)
    }
}

/// One case's record against the pass lines.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Judgement {
    /// Peak front-facet power, mW.
    pub peak_mw: f64,
    /// Peak drive current, mA.
    pub peak_ma: f64,
    /// Energy above the rated power, uJ.
    pub over_power_uj: f64,
    /// Charge above the rated current, uC.
    pub over_current_uc: f64,
    /// The worst transient exposure against the class (`None`: Class 4).
    pub exposure: Option<Exposure>,
    /// Front-facet power the case ends on while still emitting, mW (the
    /// mean over the last tenth of the watch window); `None` when the
    /// laser ended off.
    pub sustained_mw: Option<f64>,
    /// Accessible sustained power over the continuous limit.
    pub cw_ratio: Option<f64>,
}

impl Judgement {
    /// The worst ratio against the class limits (transient or
    /// continuous); `None` for Class 4.
    pub fn class_ratio(&self) -> Option<f64> {
        match (self.exposure.map(|e| e.ratio), self.cw_ratio) {
            (Some(a), Some(b)) => Some(a.max(b)),
            (a, b) => a.or(b),
        }
    }
}

/// A sample a case is judged on: front-facet power and drive current.
pub trait Sample {
    /// Front-facet power, mW.
    fn p_mw(&self) -> f64;
    /// Drive current, mA.
    fn i_ma(&self) -> f64;
}

impl Sample for (f64, f64) {
    fn p_mw(&self) -> f64 {
        self.0
    }
    fn i_ma(&self) -> f64 {
        self.1
    }
}

impl Sample for crate::trace::TraceRow {
    fn p_mw(&self) -> f64 {
        self.p_mw
    }
    fn i_ma(&self) -> f64 {
        self.i_ma
    }
}

thread_local! {
    /// The accessible power of a case's samples, kept per worker thread
    /// and reused from case to case (a slow case has some hundred
    /// thousand samples: a fresh vector each time is memory the system
    /// maps and zeroes anew).
    static ACCESSIBLE_W: std::cell::RefCell<Vec<f64>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Judge the samples after a fault's injection (front-facet power and
/// drive current, [`Sample`]) `dt_row_s` apart (the tick times the trace
/// stride); `emitting_at_end` says whether the laser was still on when
/// the watch window closed.
pub fn judge<S: Sample>(
    lines: &PassLines,
    rows: &[S],
    dt_row_s: f64,
    emitting_at_end: bool,
) -> Result<Judgement, AelError> {
    let mut j = Judgement::default();
    for r in rows {
        let (p_mw, i_ma) = (r.p_mw(), r.i_ma());
        j.peak_mw = j.peak_mw.max(p_mw);
        j.peak_ma = j.peak_ma.max(i_ma);
        j.over_power_uj += (p_mw - lines.rated_power_mw).max(0.0) * dt_row_s * 1e3;
        j.over_current_uc += (i_ma - lines.rated_current_ma).max(0.0) * dt_row_s * 1e3;
    }
    // Class 4 has no accessible emission limit: nothing to weigh.
    j.exposure = if lines.ael.class == LaserClass::C4 {
        None
    } else {
        ACCESSIBLE_W.with_borrow_mut(|accessible| {
            accessible.clear();
            accessible.extend(
                rows.iter()
                    .map(|r| r.p_mw().max(0.0) * 1e-3 * lines.accessible_fraction),
            );
            worst_exposure(&lines.ael, accessible, dt_row_s)
        })?
    };
    if emitting_at_end && !rows.is_empty() {
        let tail = &rows[rows.len() - rows.len().div_ceil(10)..];
        let mean = tail.iter().map(Sample::p_mw).sum::<f64>() / tail.len() as f64;
        j.sustained_mw = Some(mean);
        j.cw_ratio = lines
            .cw_limit_mw()
            .map(|cw| mean * lines.accessible_fraction / cw);
    }
    Ok(j)
}

/// Why a case is unsafe (empty: safe).
pub fn unsafe_reasons(lines: &PassLines, j: &Judgement, damaged: bool) -> Vec<&'static str> {
    let mut why = Vec::new();
    if damaged {
        why.push("facet damaged");
    }
    if j.over_power_uj > lines.over_power_allowance_uj {
        why.push("energy above the rated power exceeds the allowance");
    }
    if j.over_current_uc > lines.over_current_allowance_uc {
        why.push("charge above the rated current exceeds the allowance");
    }
    if j.exposure.is_some_and(|e| e.ratio > 1.0) {
        why.push("accessible energy above the class limit");
    }
    if j.cw_ratio.is_some_and(|r| r > 1.0) {
        why.push("sustained accessible power above the class limit");
    }
    why
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(_tick: u64, p_mw: f64, i_ma: f64) -> (f64, f64) {
        (p_mw, i_ma)
    }

    fn lines(class: LaserClass, fraction: f64) -> PassLines {
        PassLines::new(
            class,
            fraction,
            SourceType::Small,
            &DemoModule::visible(),
            1.0,
            1.0,
        )
        .unwrap()
    }

    #[test]
    fn rating_energy_and_charge_are_integrated_above_the_rating() {
        let l = lines(LaserClass::C3B, 1.0);
        // 30 mW rated, 60 mA rated: 40 mW and 70 mA for 100 ticks of 50 us.
        let rows: Vec<_> = (0..100).map(|t| row(t, 40.0, 70.0)).collect();
        let refs = &rows;
        let j = judge(&l, refs, 50e-6, true).unwrap();
        assert!((j.over_power_uj - 10.0 * 5e-3 * 1e3).abs() < 1e-9);
        assert!((j.over_current_uc - 10.0 * 5e-3 * 1e3).abs() < 1e-9);
        assert_eq!(j.sustained_mw, Some(40.0));
        let why = unsafe_reasons(&l, &j, false);
        assert_eq!(why.len(), 2, "{why:?}");
        // Within the ratings and Class 3B: safe.
        let ok: Vec<_> = (0..100).map(|t| row(t, 20.0, 50.0)).collect();
        let refs = &ok;
        let j = judge(&l, refs, 50e-6, true).unwrap();
        assert!(unsafe_reasons(&l, &j, false).is_empty());
        assert_eq!(unsafe_reasons(&l, &j, true), ["facet damaged"]);
    }

    #[test]
    fn the_class_limit_applies_to_the_accessible_fraction() {
        // 20 mW behind a 4 % window: 0.8 mW accessible, within Class 2.
        let l = lines(LaserClass::C2, 0.04);
        let rows: Vec<_> = (0..10_000).map(|t| row(t, 20.0, 40.0)).collect();
        let refs = &rows;
        let j = judge(&l, refs, 50e-6, true).unwrap();
        assert!((j.cw_ratio.unwrap() - 0.8).abs() < 1e-9);
        assert!(unsafe_reasons(&l, &j, false).is_empty());
        // 30 mW sustained: 1.2 mW accessible, out of Class 2.
        let rows: Vec<_> = (0..10_000).map(|t| row(t, 30.0, 50.0)).collect();
        let refs = &rows;
        let j = judge(&l, refs, 50e-6, true).unwrap();
        assert!(j.class_ratio().unwrap() > 1.0);
        assert!(unsafe_reasons(&l, &j, false)
            .contains(&"sustained accessible power above the class limit"));
        // The same ending dark is judged on its transient only.
        let j = judge(&l, refs, 50e-6, false).unwrap();
        assert_eq!(j.cw_ratio, None);
    }
}
