//! Catastrophic optical damage of the front facet: the damage power at a
//! junction temperature and the latch.

use super::state::Diode;

impl Diode {
    /// Latches facet damage if `p_front_w` exceeds the damage limit at the
    /// reference temperature; returns whether the facet is (now) destroyed.
    #[inline]
    pub fn check_damage(&mut self, p_front_w: f64) -> bool {
        self.check_damage_at(p_front_w, self.m.t_ref_k)
    }

    /// Facet-damage power at junction temperature `t_k`, W.
    #[inline]
    pub fn damage_power_w(&self, t_k: f64) -> f64 {
        let m = &self.m;
        m.damage_w * (1.0 - m.damage_tc * (t_k - m.t_ref_k)).clamp(0.05, 2.0)
    }

    /// Latches facet damage if `p_front_w` exceeds the damage limit at
    /// junction temperature `t_k`; returns whether the facet is (now)
    /// destroyed.
    #[inline]
    pub fn check_damage_at(&mut self, p_front_w: f64, t_k: f64) -> bool {
        if !self.damaged && p_front_w > self.damage_power_w(t_k) {
            self.damaged = true;
            self.s = 0.0;
        }
        self.damaged
    }

    /// Whether the front facet has been destroyed.
    #[inline]
    pub fn damaged(&self) -> bool {
        self.damaged
    }
}

#[cfg(test)]
mod tests {
    use super::super::params::DiodeParams;
    use super::*;
    use crate::plant::ZERO_CELSIUS_K;

    #[test]
    fn damage_latches_and_stops_lasing() {
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        let t = 298.15;
        let ok = d.step_quasi_static(0.05, t);
        assert!(!d.damaged() && ok.p_front_w > 0.01);
        let hit = d.step_quasi_static(0.2, t);
        assert!(hit.p_front_w > 0.06 && d.damaged());
        let after = d.step_quasi_static(0.05, t);
        assert_eq!(after.p_front_w, 0.0);
        assert!(after.v_f_v > 1.5);
        let dyn_out = d.step_dynamic(0.05, t, 1e-9);
        assert_eq!(dyn_out.p_front_w, 0.0);
    }

    #[test]
    fn dynamic_damage_uses_filtered_power() {
        // A 2 ns overdrive spike well above the limit does not destroy the
        // facet with a 100 ns facet time constant; a sustained one does.
        let p = DiodeParams::demo_visible();
        let t = 298.15;
        let mut d = Diode::new(p).unwrap();
        d.step_quasi_static(0.04, t);
        d.step_dynamic(0.2, t, 2e-9);
        assert!(!d.damaged());
        d.step_dynamic(0.04, t, 1e-6);
        assert!(!d.damaged());
        d.step_dynamic(0.2, t, 1e-6);
        assert!(d.damaged());
        assert_eq!(d.photon_density_m3(), 0.0);
    }

    /// With a damage temperature coefficient the facet fails at a lower
    /// power when hot: 55 mW is safe at 25 degC (limit 60 mW) and destroys
    /// the facet at 65 degC (limit 60 mW x 0.8 = 48 mW), in both solvers.
    #[test]
    fn facet_damage_level_falls_with_temperature() {
        let mut p = DiodeParams::demo_visible();
        p.damage_tc_per_k = 0.005;
        let probe = Diode::new(p.clone()).unwrap();
        let (cold, hot) = (25.0 + ZERO_CELSIUS_K, 65.0 + ZERO_CELSIUS_K);
        assert!((probe.damage_power_w(hot) - 0.048).abs() < 1e-12);
        // The current giving 55 mW at each temperature.
        let current_for = |t_k: f64| {
            let (mut lo, mut hi) = (0.0, 0.2);
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if probe.quasi_static(mid, t_k).p_front_w < 0.055 {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            hi
        };
        for fast in [true, false] {
            let mut d = Diode::new(p.clone()).unwrap();
            let step = |d: &mut Diode, i: f64, t: f64| {
                if fast {
                    d.step_quasi_static(i, t)
                } else {
                    d.step_quasi_static_reference(i, t)
                }
            };
            step(&mut d, current_for(cold), cold);
            assert!(!d.damaged());
            step(&mut d, current_for(hot), hot);
            assert!(d.damaged());
        }
        // Without the coefficient 55 mW is safe when hot too.
        let mut d = Diode::new(DiodeParams::demo_visible()).unwrap();
        d.step_quasi_static(current_for(hot), hot);
        assert!(!d.damaged());
    }
}
