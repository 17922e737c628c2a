//! The gain model of the active region in SI units (logarithmic with its
//! tangent continuation, or linear).

use serde::{Deserialize, Serialize};

/// Gain model converted to SI.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "snake_case")]
pub enum GainSi {
    /// Logarithmic gain with tangent continuation below `n_knee_m3`.
    Log {
        /// g0, 1/m.
        g0_per_m: f64,
        /// Ntr, 1/m^3.
        n_tr_m3: f64,
        /// Ns, 1/m^3.
        n_s_m3: f64,
        /// Density below which the tangent line is used, 1/m^3.
        n_knee_m3: f64,
    },
    /// Linear gain.
    Linear {
        /// a, m^2.
        a_m2: f64,
        /// Ntr, 1/m^3.
        n_tr_m3: f64,
    },
}

impl GainSi {
    /// Unsaturated material gain g_N (1/m) and dg_N/dN (m^2) at density `n` (1/m^3).
    #[inline]
    pub fn gain(&self, n: f64) -> (f64, f64) {
        match *self {
            GainSi::Log {
                g0_per_m,
                n_tr_m3,
                n_s_m3,
                n_knee_m3,
            } => {
                if n >= n_knee_m3 {
                    let x = n + n_s_m3;
                    (g0_per_m * (x / (n_tr_m3 + n_s_m3)).ln(), g0_per_m / x)
                } else {
                    let slope = g0_per_m / (n_knee_m3 + n_s_m3);
                    (-g0_per_m + slope * (n - n_knee_m3), slope)
                }
            }
            GainSi::Linear { a_m2, n_tr_m3 } => (a_m2 * (n - n_tr_m3), a_m2),
        }
    }

    /// Density at which g_N = `g` (1/m), on the logarithmic branch.
    pub(super) fn density_for_gain(&self, g: f64) -> f64 {
        match *self {
            GainSi::Log {
                g0_per_m,
                n_tr_m3,
                n_s_m3,
                ..
            } => (n_tr_m3 + n_s_m3) * (g / g0_per_m).exp() - n_s_m3,
            GainSi::Linear { a_m2, n_tr_m3 } => n_tr_m3 + g / a_m2,
        }
    }
}
