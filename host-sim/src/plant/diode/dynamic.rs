//! The dynamic step of the diode: the rate equations integrated over a
//! tick by RODAS4, with facet damage on the filtered front power; the
//! integrator's tolerance and counters.

use super::rate_equations::rate_rhs;
use super::rodas4::{
    add_stats, integrate_rodas4, integrate_rodas4_observed, DynamicStats, Tolerance,
};
use super::state::{Diode, DiodeOutput};

impl Diode {
    /// Integrates the rate equations over `dt_s` with the current held at
    /// `i_a` and the junction at `t_k`, and returns the output at the end of
    /// the interval. Damage is checked after every internal step on the
    /// front power filtered with `damage_filter_ns`; once destroyed the
    /// cavity has no feedback and the photon density decays with tau_p.
    pub fn step_dynamic(&mut self, i_a: f64, t_k: f64, dt_s: f64) -> DiodeOutput {
        let op = self.op(t_k);
        let j = op.eta_i * i_a.max(0.0) / self.m.qv;
        let mut y = [self.n / self.m.n_scale, self.s / self.m.s_scale];
        let mut remaining = dt_s;
        if remaining > 0.0 && !self.damaged {
            let m = &self.m;
            let p_per_s = op.hnu * m.power_coef * m.alpha_m1 * m.s_scale;
            let tau = m.damage_tau;
            let damage_w = m.damage_w * (1.0 - m.damage_tc * (t_k - m.t_ref_k)).clamp(0.05, 2.0);
            let mut p_filt = self.p_filt;
            let mut rhs = |y: [f64; 2], want: bool| rate_rhs(m, op.f, j, true, y, want);
            let (st, t_done) = integrate_rodas4_observed(
                &mut y,
                remaining,
                &mut self.h_next,
                self.tol.rtol,
                self.tol.atol,
                &mut rhs,
                |h, y| {
                    let p = p_per_s * y[1];
                    p_filt = if tau > 0.0 {
                        let x = h / tau;
                        // exp(-x); the cubic is exact to 4e-14 for x < 1e-3.
                        let decay = if x < 1e-3 {
                            1.0 - x * (1.0 - x * (0.5 - x * (1.0 / 6.0)))
                        } else {
                            (-x).exp()
                        };
                        p + (p_filt - p) * decay
                    } else {
                        p
                    };
                    p_filt > damage_w
                },
            );
            self.p_filt = p_filt;
            add_stats(&mut self.stats, st);
            if p_filt > damage_w {
                self.damaged = true;
                y[1] = 0.0;
                self.p_filt = 0.0;
            }
            remaining -= t_done;
        }
        if remaining > 0.0 && self.damaged {
            let m = &self.m;
            let mut rhs = |y: [f64; 2], want: bool| rate_rhs(m, op.f, j, false, y, want);
            let st = integrate_rodas4(
                &mut y,
                remaining,
                &mut self.h_next,
                self.tol.rtol,
                self.tol.atol,
                &mut rhs,
            );
            add_stats(&mut self.stats, st);
        }
        self.n = y[0] * self.m.n_scale;
        self.s = y[1] * self.m.s_scale;
        self.output(&op, i_a, t_k, self.n, self.s)
    }

    /// Sets the dynamic integrator tolerance.
    pub fn set_tolerance(&mut self, rtol: f64, atol: f64) {
        self.tol = Tolerance { rtol, atol };
    }

    /// Dynamic integrator tolerance in use.
    pub fn tolerance(&self) -> Tolerance {
        self.tol
    }

    /// Integrator counters accumulated since construction or the last reset.
    pub fn stats(&self) -> DynamicStats {
        self.stats
    }

    /// Clears the integrator counters.
    pub fn reset_stats(&mut self) {
        self.stats = DynamicStats::default();
    }
}

#[cfg(test)]
mod tests {
    use super::super::params::DiodeParams;
    use super::*;

    #[test]
    fn non_finite_temperature_or_current_ends_the_dynamic_step() {
        // A NaN junction temperature (from a non-finite ambient) made every
        // step fail its error test at the smallest step size, so one tick
        // took about 1e14 steps.
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        for (i, t) in [(0.03, f64::NAN), (f64::NAN, 300.0), (0.03, f64::INFINITY)] {
            d.reset_stats();
            let _ = d.step_dynamic(i, t, 5e-5);
            assert!(d.stats().steps < 1000, "{:?}", d.stats());
        }
    }
}
