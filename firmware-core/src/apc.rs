//! The automatic-power-control loop: a discrete PI controller on the
//! monitor power with conditional-integration anti-windup, an output slew
//! limit and a hard ceiling.
//!
//! Per tick, with error `e = setpoint - monitor`:
//!
//! ```text
//! I[n] = I[n-1] + ki·e[n]          (skipped while the output is limited in the direction of e)
//! u[n] = clamp(kp·e[n] + I[n], prev ± slew, 0..=ceiling)
//! ```
//!
//! so `C(z) = kp + ki·z/(z-1)`. The integrator holds 40 fractional bits so
//! that small per-tick integral gains do not lose resolution.

use crate::units::{clamp_fx, sat_i32, Fx, Gain};

const FRAC: u32 = 40;
const FX_FRAC: u32 = 16;

/// PI state.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PowerLoop {
    /// Integrator in mA with 40 fractional bits.
    integ: i64,
}

/// Limits for one PI step.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Limits {
    /// Output of the previous tick, mA.
    pub prev_ma: Fx,
    /// Slew per tick, mA.
    pub slew_ma: Fx,
    /// Ceiling for this tick, mA.
    pub ceiling_ma: Fx,
}

fn to_wide(v: Fx) -> i64 {
    (v.to_bits() as i64) << (FRAC - FX_FRAC)
}

fn from_wide(w: i64) -> Fx {
    Fx::from_bits(sat_i32(w >> (FRAC - FX_FRAC)))
}

impl PowerLoop {
    /// Set the integrator so that, at zero error, the output is `out_ma`
    /// (bumpless hand-over and transfer).
    pub(crate) fn preset(&mut self, out_ma: Fx) {
        self.integ = to_wide(out_ma);
    }

    /// The integrator value, mA.
    pub fn integrator_ma(&self) -> Fx {
        from_wide(self.integ)
    }

    /// One PI step. Returns the new output in mA.
    pub(crate) fn step(
        &mut self,
        kp: Fx,
        ki: Gain,
        setpoint_mw: Fx,
        monitor_mw: Fx,
        lim: Limits,
    ) -> Fx {
        let e = setpoint_mw.saturating_sub(monitor_mw);
        let p = kp.saturating_mul(e);
        // e (16 fractional bits) × ki (24) = 40 fractional bits.
        let inc = (e.to_bits() as i64).saturating_mul(ki.to_bits() as i64);
        let candidate = self.integ.saturating_add(inc);
        let u = from_wide(candidate.saturating_add(to_wide(p)));
        let lo = lim.prev_ma.saturating_sub(lim.slew_ma);
        let hi = lim.prev_ma.saturating_add(lim.slew_ma);
        let slewed = clamp_fx(u, lo, hi);
        let out = clamp_fx(slewed, Fx::ZERO, lim.ceiling_ma);
        let pushing_up = out < u && e > Fx::ZERO;
        let pushing_down = out > u && e < Fx::ZERO;
        if !(pushing_up || pushing_down) {
            self.integ = candidate;
        }
        // The integrator never holds more than the ceiling nor less than zero.
        self.integ = self.integ.clamp(0, to_wide(lim.ceiling_ma.max(Fx::ZERO)));
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lim(prev: i32, slew: i32, ceil: i32) -> Limits {
        Limits {
            prev_ma: Fx::from_num(prev),
            slew_ma: Fx::from_num(slew),
            ceiling_ma: Fx::from_num(ceil),
        }
    }

    #[test]
    fn proportional_and_integral_terms() {
        let mut pi = PowerLoop::default();
        let kp = Fx::from_num(2);
        let ki = Gain::from_num(1) / 4;
        // e = 4: p = 8, I = 1 => u = 9.
        let u = pi.step(kp, ki, Fx::from_num(4), Fx::ZERO, lim(0, 100, 100));
        assert_eq!(u, Fx::from_num(9));
        assert_eq!(pi.integrator_ma(), Fx::from_num(1));
        // Same error: I = 2 => u = 10.
        let u = pi.step(kp, ki, Fx::from_num(4), Fx::ZERO, lim(9, 100, 100));
        assert_eq!(u, Fx::from_num(10));
    }

    #[test]
    fn no_windup_while_clamped() {
        let mut pi = PowerLoop::default();
        let kp = Fx::from_num(1);
        let ki = Gain::from_num(1);
        for _ in 0..100 {
            let u = pi.step(kp, ki, Fx::from_num(50), Fx::ZERO, lim(10, 100, 10));
            assert_eq!(u, Fx::from_num(10));
        }
        // The integrator stopped at the ceiling, it did not wind up to 5000.
        assert!(pi.integrator_ma() <= Fx::from_num(10));
    }

    #[test]
    fn slew_limits_and_ceiling_wins() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(20));
        let u = pi.step(
            Fx::from_num(10),
            Gain::ZERO,
            Fx::from_num(10),
            Fx::ZERO,
            lim(20, 1, 100),
        );
        assert_eq!(u, Fx::from_num(21));
        // Ceiling below prev - slew: the ceiling wins over the slew limit.
        let u = pi.step(
            Fx::from_num(10),
            Gain::ZERO,
            Fx::from_num(10),
            Fx::ZERO,
            lim(20, 1, 5),
        );
        assert_eq!(u, Fx::from_num(5));
    }

    #[test]
    fn no_integration_while_slew_limited_toward_the_error() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(20));
        // A large negative error: u far below prev - slew; the output moves
        // by the slew and the integrator holds.
        let u = pi.step(
            Fx::from_num(1),
            Gain::from_num(1),
            Fx::ZERO,
            Fx::from_num(30),
            lim(20, 1, 100),
        );
        assert_eq!(u, Fx::from_num(19));
        assert_eq!(pi.integrator_ma(), Fx::from_num(20));
    }

    #[test]
    fn integrator_stays_within_zero_and_the_ceiling() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(80));
        let _ = pi.step(Fx::ONE, Gain::ZERO, Fx::ZERO, Fx::ZERO, lim(40, 100, 40));
        assert_eq!(pi.integrator_ma(), Fx::from_num(40));
        let mut pi = PowerLoop::default();
        for _ in 0..10 {
            let u = pi.step(
                Fx::ONE,
                Gain::from_num(1),
                Fx::ZERO,
                Fx::from_num(5),
                lim(0, 100, 40),
            );
            assert_eq!(u, Fx::ZERO);
            assert_eq!(pi.integrator_ma(), Fx::ZERO);
        }
    }

    #[test]
    fn preset_is_bumpless() {
        let mut pi = PowerLoop::default();
        pi.preset(Fx::from_num(33));
        let u = pi.step(
            Fx::from_num(3),
            Gain::from_num(1),
            Fx::from_num(7),
            Fx::from_num(7),
            lim(33, 1, 100),
        );
        assert_eq!(u, Fx::from_num(33));
    }
}
