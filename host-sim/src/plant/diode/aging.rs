//! Aging of the diode over time: the threshold rises and the slope
//! efficiency falls with the equivalent operating hours at the aging
//! reference conditions, which accumulate at every step at a rate set by
//! the drive current and the junction temperature.
//!
//! # The law
//!
//! ```text
//! dh/dt = AF(I, T_j) / (3600 s/h)      (no aging while I <= 0)
//! AF    = (I / I_ref)^n exp((Ea / k_B) (1/T_ref - 1/T_j))
//! k_th  = 1 + rise h / 1000,  k_sl = max(1 - loss h / 1000, 1e-6)
//! ```
//!
//! `h` is in hours at the reference current `I_ref` and junction
//! temperature `T_ref`, where the module's per-1000-hour rates `rise`
//! (`threshold_rise_per_khour`) and `loss` (`slope_loss_per_khour`) hold;
//! `Ea` is the activation energy and `n` the current exponent. This is the
//! usual acceleration law of laser-diode lifetime, lifetime proportional to
//! I^-n exp(Ea / (k_B T_j)), with the degradation rate its inverse (from
//! memory: M. Fukuda, *Reliability and Degradation of Semiconductor Lasers
//! and LEDs*, Artech House 1991; the same form is used for accelerated
//! aging of optoelectronic devices in Telcordia GR-468-CORE). The threshold
//! and slope drift linearly in `h` (the gradual-degradation regime; common
//! practice for lifetime extrapolation). k_B / e is the CODATA 2018 value,
//! exact in the SI since 2019 (`crate::plant::constants`). At constant
//! current and temperature `h = AF t / 3600`.
//!
//! [`Diode::age_over`] integrates the law over one step with the drive and
//! junction temperature of that step (ln and exp continued from the
//! previous step, as the quasi-static step does; at the current of the
//! last forward voltage, ln(I/I_ref) is that step's ln(I/I_s) plus
//! ln(I_s/I_ref)); [`Diode::age_over_reference`]
//! is the same with the library functions. [`Diode::age`] adds hours at
//! the reference conditions at once: a part that was aged before the run.

use super::state::Diode;

impl Diode {
    /// Adds `hours` of operation at the aging reference conditions:
    /// k_th = 1 + rise h/1000, k_sl = 1 - loss h/1000 (kept above 1e-6).
    #[inline]
    pub fn age(&mut self, hours: f64) {
        if hours > 0.0 && hours.is_finite() {
            self.age_hours += hours;
        }
        let kh = self.age_hours * 1e-3;
        self.k_th = 1.0 + self.m.rise * kh;
        self.k_sl = (1.0 - self.m.loss * kh).max(1e-6);
    }

    /// Acceleration factor of aging at drive `i_a` and junction temperature
    /// `t_k` against the reference conditions, AF = (I/I_ref)^n
    /// exp((Ea/k_B)(1/T_ref - 1/T_j)); 0 when the drive is not above zero.
    pub fn aging_acceleration(&self, i_a: f64, t_k: f64) -> f64 {
        let m = &self.m;
        if i_a.is_nan() || i_a <= 0.0 {
            return 0.0;
        }
        let current = if m.aging_inv_i_ref > 0.0 {
            (i_a * m.aging_inv_i_ref).powf(m.aging_n)
        } else {
            1.0
        };
        current * (m.aging_ea_over_k * (m.aging_inv_t_ref - 1.0 / t_k)).exp()
    }

    /// Ages the diode over `dt_s` seconds of operation at drive `i_a` and
    /// junction temperature `t_k`: adds AF dt / 3600 equivalent hours. The
    /// logarithm of the current ratio and the exponential are continued
    /// from the previous call; equal to [`Diode::age_over_reference`]
    /// within a few ulp.
    #[inline]
    pub fn age_over(&mut self, i_a: f64, t_k: f64, dt_s: f64) {
        if i_a.is_nan() || i_a <= 0.0 {
            return;
        }
        let m = &self.m;
        let mut x = m.aging_ea_over_k * (m.aging_inv_t_ref - 1.0 / t_k);
        if m.aging_inv_i_ref > 0.0 {
            let ln_i = if i_a == self.near.last_i_a {
                self.near.last_ln_i + m.aging_ln_i_s_per_i_ref
            } else {
                self.near.aging_ln.ln(i_a * m.aging_inv_i_ref)
            };
            x += m.aging_n * ln_i;
        }
        let af = self.near.aging_exp.exp(x);
        self.age(af * dt_s * (1.0 / 3600.0));
    }

    /// [`Diode::age_over`] with every ln and exp by the library.
    pub fn age_over_reference(&mut self, i_a: f64, t_k: f64, dt_s: f64) {
        let af = self.aging_acceleration(i_a, t_k);
        self.age(af * dt_s / 3600.0);
    }

    /// Equivalent operating hours at the reference conditions, from
    /// [`Diode::age`] and [`Diode::age_over`].
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

    fn with_law(ea_ev: f64, n: f64, i_ref_a: f64, ref_c: f64) -> Diode {
        let mut p = DiodeParams::demo_visible();
        p.aging_activation_ev = ea_ev;
        p.aging_current_exponent = n;
        p.aging_ref_current_a = Some(i_ref_a);
        p.aging_ref_c = Some(ref_c);
        Diode::new(p).unwrap()
    }

    /// The acceleration factor between two operating points against a hand
    /// calculation from the formula, with k_B / e = 8.617333262e-5 eV/K
    /// (CODATA 2018):
    /// - Ea = 0.5 eV, n = 2, 200 mA at 75 degC against 100 mA at 25 degC:
    ///   Ea/k_B = 5802.25906 K, 1/298.15 - 1/348.15 = 4.8169129e-4 /K,
    ///   exponent 2.79489764, AF = 2^2 e^2.79489764 = 65.4438157;
    /// - Ea = 0.7 eV, n = 1.5, 150 mA at 85 degC against 50 mA at 40 degC:
    ///   exponent 3.25926966, AF = 3^1.5 e^3.25926966 = 135.258544.
    #[test]
    fn acceleration_factor_matches_the_hand_calculation() {
        let d = with_law(0.5, 2.0, 0.1, 25.0);
        let k = |c: f64| c + 273.15;
        assert!((d.aging_acceleration(0.1, k(25.0)) - 1.0).abs() < 1e-12);
        let af = d.aging_acceleration(0.2, k(75.0)) / d.aging_acceleration(0.1, k(25.0));
        assert!((af / 65.443_815_7 - 1.0).abs() < 2e-9, "{af}");
        let d = with_law(0.7, 1.5, 0.05, 40.0);
        let af = d.aging_acceleration(0.15, k(85.0)) / d.aging_acceleration(0.05, k(40.0));
        assert!((af / 135.258_544 - 1.0).abs() < 2e-9, "{af}");
        // Off: no aging. Without a reference current: temperature only.
        assert_eq!(d.aging_acceleration(0.0, k(85.0)), 0.0);
        let mut p = DiodeParams::demo_visible();
        p.aging_ref_current_a = None;
        let d = Diode::new(p).unwrap();
        let hot = d.aging_acceleration(0.01, k(75.0));
        assert_eq!(hot, d.aging_acceleration(0.05, k(75.0)));
        assert!(hot > 1.0);
    }

    /// Stepped tick by tick at constant current and temperature, the hours
    /// and the threshold and slope drift equal the closed form
    /// h = AF t / 3600, k_th = 1 + rise h/1000, k_sl = 1 - loss h/1000.
    #[test]
    fn stepped_aging_equals_the_closed_form_at_constant_conditions() {
        let (i, t_k, dt, ticks) = (0.05, 333.15, 36.0, 100_000);
        let mut fast = with_law(0.5, 2.0, 0.03, 25.0);
        let mut refd = with_law(0.5, 2.0, 0.03, 25.0);
        let af = fast.aging_acceleration(i, t_k);
        let (i_th0, s0) = (fast.threshold_current_a(t_k), fast.slope_w_per_a(t_k));
        for _ in 0..ticks {
            fast.age_over(i, t_k, dt);
            refd.age_over_reference(i, t_k, dt);
        }
        let h = af * dt * ticks as f64 / 3600.0;
        assert!(af > 10.0, "{af}");
        assert!(
            (fast.age_hours() / h - 1.0).abs() < 1e-9,
            "{} vs {h}",
            fast.age_hours()
        );
        assert!((refd.age_hours() / h - 1.0).abs() < 1e-9);
        let p = DiodeParams::demo_visible();
        let (k_th, k_sl) = fast.aging_factors();
        assert!((k_th - (1.0 + p.threshold_rise_per_khour * h / 1000.0)).abs() < 1e-9);
        assert!((k_sl - (1.0 - p.slope_loss_per_khour * h / 1000.0)).abs() < 1e-9);
        assert!((fast.threshold_current_a(t_k) / i_th0 - k_th).abs() < 1e-9);
        assert!((fast.slope_w_per_a(t_k) / s0 - k_sl).abs() < 1e-9);
        // Twice the current ages 2^n = 4 times as fast.
        let mut d = with_law(0.5, 2.0, 0.03, 25.0);
        d.age_over(2.0 * i, t_k, dt);
        assert!((d.age_hours() / (4.0 * af * dt / 3600.0) - 1.0).abs() < 1e-12);
    }
}
