//! Band gap against temperature by Varshni's equation, with the
//! parameters of the common III-V materials.

use serde::{Deserialize, Serialize};

/// Band gap by Varshni's equation Eg(T) = Eg(0) - alpha T^2 / (T + beta), eV.
#[inline]
pub fn varshni_ev(eg0_ev: f64, alpha_ev_per_k: f64, beta_k: f64, t_k: f64) -> f64 {
    eg0_ev - alpha_ev_per_k * t_k * t_k / (t_k + beta_k)
}

/// Varshni parameters of a semiconductor.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Varshni {
    /// Band gap at 0 K, eV.
    pub eg0_ev: f64,
    /// alpha, eV/K.
    pub alpha_ev_per_k: f64,
    /// beta, K.
    pub beta_k: f64,
}

impl Varshni {
    /// Band gap at `t_k`, eV.
    #[inline]
    pub fn eg_ev(&self, t_k: f64) -> f64 {
        varshni_ev(self.eg0_ev, self.alpha_ev_per_k, self.beta_k, t_k)
    }
}

/// GaAs (Vurgaftman, Meyer, Ram-Mohan, J. Appl. Phys. 89, 5815 (2001)).
pub const VARSHNI_GAAS: Varshni = Varshni {
    eg0_ev: 1.519,
    alpha_ev_per_k: 0.5405e-3,
    beta_k: 204.0,
};
/// InP (same source).
pub const VARSHNI_INP: Varshni = Varshni {
    eg0_ev: 1.4236,
    alpha_ev_per_k: 0.363e-3,
    beta_k: 162.0,
};
/// InAs (same source).
pub const VARSHNI_INAS: Varshni = Varshni {
    eg0_ev: 0.417,
    alpha_ev_per_k: 0.276e-3,
    beta_k: 93.0,
};
/// AlAs, Gamma valley (same source).
pub const VARSHNI_ALAS_GAMMA: Varshni = Varshni {
    eg0_ev: 3.099,
    alpha_ev_per_k: 0.885e-3,
    beta_k: 530.0,
};
