//! The quasi-static steps of the diode: the steady state at one current
//! and temperature ([`Diode::quasi_static`]), the fast anchored step of the
//! closed loop and its straightforward reference.

use super::state::{Diode, DiodeOutput};
use super::steady_state::{dark_state, halley_from, steady_state, Anchor};

impl Diode {
    /// Steady state of the rate equations at current `i_a` and junction
    /// temperature `t_k` (no state change). After facet damage there is no
    /// optical output.
    #[inline]
    pub fn quasi_static(&self, i_a: f64, t_k: f64) -> DiodeOutput {
        let op = self.op(t_k);
        let j = op.eta_i * i_a.max(0.0) / self.m.qv;
        let (n, s) = if self.damaged {
            (dark_state(&self.m, op.f, j), 0.0)
        } else {
            steady_state(&self.m, op.f, j)
        };
        self.output(&op, i_a, t_k, n, s)
    }

    /// [`Diode::quasi_static`] that also stores the steady state as the
    /// diode state and latches facet damage when the front power exceeds
    /// `damage_power_w`. The returned output is the one that caused the
    /// damage; later calls give no optical output.
    ///
    /// Above threshold the steady state comes from an anchored Halley step
    /// and the temperature and current terms are continued from the
    /// previous call; the result equals
    /// [`Diode::step_quasi_static_reference`] to 1e-11 in N and 1e-9 in
    /// power (see the module docs).
    #[inline]
    pub fn step_quasi_static(&mut self, i_a: f64, t_k: f64) -> DiodeOutput {
        let op = self.op_near(t_k);
        let j = op.eta_i * i_a.max(0.0) * self.m.inv_qv;
        let (n, s) = if self.damaged {
            (dark_state(&self.m, op.f, j), 0.0)
        } else {
            self.steady_state_anchored(op.f, j)
        };
        let v_f_v = self.forward_voltage_near(i_a, t_k);
        let out = self.output_with(&op, n, s, v_f_v);
        self.n = n;
        self.s = s;
        self.p_filt = out.p_front_w;
        self.check_damage_at(out.p_front_w, t_k);
        out
    }

    /// The steady state above threshold by one Halley step from the anchor
    /// when that step meets the stopping rule; otherwise a second step from
    /// where the first one landed (which becomes the anchor), and below or
    /// near threshold, or failing both, the general [`steady_state`] (whose
    /// root above threshold becomes the anchor).
    #[inline]
    fn steady_state_anchored(&mut self, f: f64, j: f64) -> (f64, f64) {
        let m = &self.m;
        let above = j > f * m.rt_th;
        if let (true, Some(a)) = (above, self.anchor) {
            match halley_from(m, f, j, &a) {
                Some(h) if h.converged => return (h.n, h.s),
                Some(h) => {
                    let a2 = Anchor::at(m, h.n);
                    if let Some(h2) = halley_from(m, f, j, &a2).filter(|h2| h2.converged) {
                        self.anchor = Some(a2);
                        return (h2.n, h2.s);
                    }
                }
                None => {}
            }
        }
        let (n, s) = steady_state(m, f, j);
        if above && n > 0.0 && s > 0.0 {
            self.anchor = Some(Anchor::at(m, n));
        }
        (n, s)
    }

    /// The straightforward form of [`Diode::step_quasi_static`]: the steady
    /// state from the cold initial guess and every exp and ln by the
    /// library, every call. Reference for the fast path.
    pub fn step_quasi_static_reference(&mut self, i_a: f64, t_k: f64) -> DiodeOutput {
        let out = self.quasi_static(i_a, t_k);
        self.n = out.n_m3;
        self.s = out.s_m3;
        self.p_filt = out.p_front_w;
        self.check_damage_at(out.p_front_w, t_k);
        out
    }
}

#[cfg(test)]
mod tests {
    use super::super::params::DiodeParams;
    use super::*;

    /// "Reference" here is the straightforward solution of the same rate
    /// equations (no published value: `common practice` of checking a fast
    /// path against the plain one). Worst differences between the fast
    /// quasi-static step and the straightforward one: relative N, front power relative to
    /// max(P, 1e-6 of the damage power), forward voltage in volts; and how
    /// many steps above threshold started from an anchor.
    fn fast_vs_reference(p: DiodeParams, seed: u64, age_at: usize) -> (f64, f64, f64, usize) {
        let mut fast = Diode::new(p.clone()).unwrap();
        let mut refd = Diode::new(p.clone()).unwrap();
        let i_th = fast.threshold_current_a(298.15);
        let floor_w = 1e-6 * p.damage_power_w;
        let mut rng = crate::plant::Rng::new(seed);
        let mut t = 298.15f64;
        let (mut dn, mut dp, mut dv) = (0.0f64, 0.0f64, 0.0f64);
        let mut anchored = 0usize;
        let mut i_prev = 0.0;
        for k in 0..60_000 {
            // Drive: a ramp through threshold, then DAC-sized steps and
            // dither around a few operating points, sometimes a jump;
            // junction: a slow drift with small steps and rare jumps.
            let target = match k / 10_000 {
                0 => 3.0 * i_th * k as f64 / 10_000.0,
                1 => 1.5 * i_th,
                2 => 2.5 * i_th,
                3 => 0.5 * i_th,
                4 => 3.0 * i_th,
                _ => 1.05 * i_th,
            };
            // A quarter of the time the current holds for 50 steps (a
            // settled source on an unchanged DAC code) while T moves.
            let i = if (k / 50) % 4 == 3 {
                i_prev
            } else if k % 997 == 0 {
                target * (0.5 + rng.uniform())
            } else {
                target + 2e-3 * i_th * (rng.uniform() - 0.5)
            };
            i_prev = i;
            t += 2e-4 * (rng.uniform() - 0.45) + if k % 1499 == 0 { 3.0 } else { 0.0 };
            if k == age_at {
                fast.age(4000.0);
                refd.age(4000.0);
            }
            let had_anchor = fast.anchor.is_some();
            let a = fast.step_quasi_static(i, t);
            let b = refd.step_quasi_static_reference(i, t);
            if had_anchor && i > 1.01 * fast.threshold_current_a(t) {
                anchored += 1;
            }
            if b.n_m3 > 0.0 {
                dn = dn.max((a.n_m3 / b.n_m3 - 1.0).abs());
            }
            dp = dp.max((a.p_front_w - b.p_front_w).abs() / b.p_front_w.max(floor_w));
            dv = dv.max((a.v_f_v - b.v_f_v).abs());
            assert_eq!(fast.damaged(), refd.damaged());
        }
        (dn, dp, dv, anchored)
    }

    #[test]
    fn fast_quasi_static_equals_reference() {
        // The anchored Halley step, the continued exponentials and the
        // continued logarithm reproduce the straightforward evaluation:
        // carrier density to 1e-11, front power to 1e-9 (relative, or of
        // 1e-6 of the damage power near zero), forward voltage to 1e-12 V.
        for (k, p) in [
            DiodeParams::textbook_in_plane(),
            DiodeParams::demo_visible(),
            DiodeParams::demo_pump(),
        ]
        .into_iter()
        .enumerate()
        {
            let (dn, dp, dv, anchored) = fast_vs_reference(p, 40 + k as u64, 25_000);
            assert!(dn < 1e-11, "N differs by {dn:e} (set {k})");
            assert!(dp < 1e-9, "P differs by {dp:e} (set {k})");
            assert!(dv < 1e-12, "V_f differs by {dv:e} V (set {k})");
            assert!(
                anchored > 15_000,
                "anchored path used {anchored} times (set {k})"
            );
        }
    }

    #[test]
    fn fast_quasi_static_latches_damage_like_reference() {
        let mut fast = Diode::new(DiodeParams::demo_visible()).unwrap();
        let mut refd = Diode::new(DiodeParams::demo_visible()).unwrap();
        let t = 300.0;
        for k in 0..400 {
            let i = 0.03 + 0.0005 * k as f64;
            let a = fast.step_quasi_static(i, t);
            let b = refd.step_quasi_static_reference(i, t);
            assert_eq!(fast.damaged(), refd.damaged(), "at {i} A");
            assert!((a.p_front_w - b.p_front_w).abs() <= 1e-9 * b.p_front_w.max(1e-9));
        }
        assert!(fast.damaged());
    }
}
