//! Aging of the diode: operating hours raise the threshold and lower the
//! slope efficiency.

use super::state::Diode;

impl Diode {
    /// Adds `hours` of operation (aging): k_th = 1 + rise h/1000,
    /// k_sl = 1 - loss h/1000 (kept above 1e-6).
    pub fn age(&mut self, hours: f64) {
        if hours > 0.0 && hours.is_finite() {
            self.age_hours += hours;
        }
        let kh = self.age_hours / 1000.0;
        self.k_th = 1.0 + self.m.rise * kh;
        self.k_sl = (1.0 - self.m.loss * kh).max(1e-6);
    }

    /// Operating hours accumulated by [`Diode::age`].
    pub fn age_hours(&self) -> f64 {
        self.age_hours
    }

    /// Aging factors (threshold multiplier k_th, slope multiplier k_sl).
    pub fn aging_factors(&self) -> (f64, f64) {
        (self.k_th, self.k_sl)
    }
}

#[cfg(test)]
mod tests {
    use super::super::params::DiodeParams;
    use super::*;

    #[test]
    fn aging_raises_threshold_and_lowers_slope() {
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        let t = 298.15;
        let (i0, s0) = (d.threshold_current_a(t), d.slope_w_per_a(t));
        d.age(5000.0);
        assert!((d.threshold_current_a(t) / i0 - 1.10).abs() < 1e-12);
        assert!((d.slope_w_per_a(t) / s0 - 0.95).abs() < 1e-12);
        // The quasi-static L-I follows the analytic figures.
        let p1 = d.quasi_static(0.045, t).p_front_w;
        let p2 = d.quasi_static(0.055, t).p_front_w;
        let slope = (p2 - p1) / 0.01;
        assert!((slope / d.slope_w_per_a(t) - 1.0).abs() < 0.01, "{slope}");
    }
}
