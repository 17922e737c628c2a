//! The rate equations: their right-hand side and Jacobian in the scaled
//! state, and the coefficients after the temperature and aging map
//! ([`RateCoefficients`], also the hand-over format of the reference
//! solver script).

use serde::{Deserialize, Serialize};

use super::gain::GainSi;
use super::model::Model;
use super::state::Diode;

/// Rate-equation coefficients after the temperature and aging map (SI), as
/// integrated by [`Diode::step_dynamic`]; also the hand-over format for the
/// reference solver script.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RateCoefficients {
    /// Active volume, m^3.
    pub volume_m3: f64,
    /// Group velocity, m/s.
    pub v_g_m_per_s: f64,
    /// Confinement factor.
    pub confinement: f64,
    /// Photon lifetime, s.
    pub tau_p_s: f64,
    /// Effective injection efficiency.
    pub eta_i: f64,
    /// Effective A, 1/s.
    pub a_per_s: f64,
    /// Effective B, m^3/s.
    pub b_m3_per_s: f64,
    /// Effective C, m^6/s.
    pub c_m6_per_s: f64,
    /// Spontaneous-emission coupling.
    pub beta_sp: f64,
    /// Gain compression, m^3.
    pub eps_m3: f64,
    /// Gain model.
    pub gain: GainSi,
    /// Photon energy, J.
    pub photon_energy_j: f64,
    /// Front mirror loss, 1/m.
    pub alpha_m_front_per_m: f64,
    /// Back mirror loss, 1/m.
    pub alpha_m_back_per_m: f64,
    /// Carrier-density unit of the scaled state, 1/m^3.
    pub n_scale_m3: f64,
    /// Photon-density unit of the scaled state, 1/m^3.
    pub s_scale_m3: f64,
    /// Whether the cavity still has feedback (false after facet damage).
    pub lasing: bool,
}

/// Right-hand side (and optionally Jacobian) of the scaled rate equations.
#[inline]
pub(super) fn rate_rhs(
    m: &Model,
    f: f64,
    j: f64,
    lasing: bool,
    y: [f64; 2],
    want_jac: bool,
) -> ([f64; 2], [[f64; 2]; 2]) {
    let n = y[0] * m.n_scale;
    let s = y[1] * m.s_scale;
    let r = f * ((m.c * n + m.b) * n + m.a) * n;
    let (gn, gnp) = m.gain(n);
    let inv_den = 1.0 / (1.0 + m.eps * s);
    let stim = m.v_g * gn * inv_den * s;
    let dn = j - r - stim;
    let spont = m.gamma * m.beta * f * m.b * n * n;
    let ds = if lasing {
        m.gamma * stim - s * m.inv_tau_p + spont
    } else {
        -s * m.inv_tau_p
    };
    let fy = [dn * m.inv_n_scale, ds * m.inv_s_scale];
    if !want_jac {
        return (fy, [[0.0; 2]; 2]);
    }
    let rp = f * ((3.0 * m.c * n + 2.0 * m.b) * n + m.a);
    let dn_dn = -rp - m.v_g * s * gnp * inv_den;
    let dn_ds = -m.v_g * gn * inv_den * inv_den;
    let (ds_dn, ds_ds) = if lasing {
        (
            m.gamma * m.v_g * s * gnp * inv_den + 2.0 * m.gamma * m.beta * f * m.b * n,
            m.gamma * m.v_g * gn * inv_den * inv_den - m.inv_tau_p,
        )
    } else {
        (0.0, -m.inv_tau_p)
    };
    let ratio = m.s_scale / m.n_scale;
    (fy, [[dn_dn, dn_ds * ratio], [ds_dn / ratio, ds_ds]])
}

impl Diode {
    /// Rate-equation coefficients at junction temperature `t_k` and the
    /// present age and damage state.
    pub fn rate_coefficients(&self, t_k: f64) -> RateCoefficients {
        let op = self.op(t_k);
        let m = &self.m;
        RateCoefficients {
            volume_m3: m.volume,
            v_g_m_per_s: m.v_g,
            confinement: m.gamma,
            tau_p_s: m.tau_p,
            eta_i: op.eta_i,
            a_per_s: op.f * m.a,
            b_m3_per_s: op.f * m.b,
            c_m6_per_s: op.f * m.c,
            beta_sp: m.beta,
            eps_m3: m.eps,
            gain: m.gain,
            photon_energy_j: op.hnu,
            alpha_m_front_per_m: m.alpha_m1,
            alpha_m_back_per_m: m.alpha_m2,
            n_scale_m3: m.n_scale,
            s_scale_m3: m.s_scale,
            lasing: !self.damaged,
        }
    }
}
