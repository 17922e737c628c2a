//! Lumped thermal RC ladder: junction -> case (submount) -> heatsink -> ambient.
//!
//! Each node is a heat capacity, each link a thermal resistance. The heat
//! dissipated in the diode enters the junction node; the ambient is an ideal
//! temperature source behind the heatsink-to-ambient resistance. The linear
//! system dx/dt = A (x - x_ss(u)) (x = node temperatures, x_ss the steady
//! state for the inputs u = [P, T_ambient]) is advanced with its exact
//! solution for inputs held over the step, x' = x_ss + Phi (x - x_ss) with
//! Phi = exp(A dt) computed by scaling and squaring of a Taylor series. The
//! update is exact and unconditionally stable for any dt; Phi is recomputed
//! only when dt or the heatsink fault factor change.
//!
//! Since x_ss = T_amb 1 + P r (r: the steady rise per watt at each node),
//! the same update is evaluated as x' = T_amb 1 + Phi (x - T_amb 1) + P b
//! with b = (I - Phi) r computed with Phi, so the dissipation, the input
//! that changes fastest, enters with one multiply-add per node
//! ([`Thermal::step`]; [`Thermal::step_reference`] is the first form).

use serde::{Deserialize, Serialize};

use super::error::{ensure, PlantError};

/// Thermal ladder parameters.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ThermalParams {
    /// Junction-to-case (or submount) thermal resistance, K/W.
    pub r_jc_k_per_w: f64,
    /// Case-to-heatsink thermal resistance, K/W.
    pub r_ch_k_per_w: f64,
    /// Heatsink-to-ambient thermal resistance, K/W.
    pub r_ha_k_per_w: f64,
    /// Heat capacity of the junction node (chip), J/K.
    pub c_j_j_per_k: f64,
    /// Heat capacity of the case/submount node, J/K.
    pub c_c_j_per_k: f64,
    /// Heat capacity of the heatsink node, J/K.
    pub c_h_j_per_k: f64,
}

impl ThermalParams {
    /// Checks that every resistance and capacity is positive and finite.
    pub fn validate(&self) -> Result<(), PlantError> {
        let pos = |v: f64| v.is_finite() && v > 0.0;
        ensure(pos(self.r_jc_k_per_w), "r_jc_k_per_w", "must be > 0")?;
        ensure(pos(self.r_ch_k_per_w), "r_ch_k_per_w", "must be > 0")?;
        ensure(pos(self.r_ha_k_per_w), "r_ha_k_per_w", "must be > 0")?;
        ensure(pos(self.c_j_j_per_k), "c_j_j_per_k", "must be > 0")?;
        ensure(pos(self.c_c_j_per_k), "c_c_j_per_k", "must be > 0")?;
        ensure(pos(self.c_h_j_per_k), "c_h_j_per_k", "must be > 0")?;
        Ok(())
    }

    /// Total junction-to-ambient resistance, K/W.
    pub fn r_total_k_per_w(&self) -> f64 {
        self.r_jc_k_per_w + self.r_ch_k_per_w + self.r_ha_k_per_w
    }
}

type M3 = [[f64; 3]; 3];

fn mat_mul(a: &M3, b: &M3) -> M3 {
    let mut c = [[0.0; 3]; 3];
    for i in 0..3 {
        for k in 0..3 {
            let aik = a[i][k];
            if aik == 0.0 {
                continue;
            }
            for j in 0..3 {
                c[i][j] += aik * b[k][j];
            }
        }
    }
    c
}

/// exp(M) by scaling and squaring with a Taylor series (||M / 2^s|| <= 1/2,
/// terms summed until they fall below 1e-17 relative).
fn mat_exp(m: &M3) -> M3 {
    let norm = m
        .iter()
        .map(|r| r.iter().map(|v| v.abs()).sum::<f64>())
        .fold(0.0, f64::max);
    // A non-finite matrix (a zero or non-finite resistance or capacitance)
    // has no exponential: NaN, instead of squaring about 2^31 times.
    if !norm.is_finite() {
        return [[f64::NAN; 3]; 3];
    }
    let mut s = 0i32;
    if norm > 0.5 {
        // Finite norms stay below 2^1024, so s <= 1025.
        s = (norm / 0.5).log2().ceil() as i32;
    }
    let scale = 0.5f64.powi(s);
    let mut a = *m;
    for row in a.iter_mut() {
        for v in row.iter_mut() {
            *v *= scale;
        }
    }
    let mut result = [[0.0; 3]; 3];
    let mut term = [[0.0; 3]; 3];
    for i in 0..3 {
        result[i][i] = 1.0;
        term[i][i] = 1.0;
    }
    for k in 1..40 {
        term = mat_mul(&term, &a);
        let inv_k = 1.0 / k as f64;
        let mut tmax = 0.0f64;
        for row in term.iter_mut() {
            for v in row.iter_mut() {
                *v *= inv_k;
                tmax = tmax.max(v.abs());
            }
        }
        for i in 0..3 {
            for j in 0..3 {
                result[i][j] += term[i][j];
            }
        }
        if tmax < 1e-17 {
            break;
        }
    }
    for _ in 0..s {
        result = mat_mul(&result, &result);
    }
    result
}

/// State of the thermal ladder.
#[derive(Clone, Debug)]
pub struct Thermal {
    params: ThermalParams,
    /// Node temperatures [junction, case, heatsink], K.
    t: [f64; 3],
    /// Fault hook: multiplies `r_ha_k_per_w` (fan loss, heatsink detached).
    /// 1.0 is healthy; larger values mean worse cooling.
    pub heatsink_loss_factor: f64,
    cache_dt: f64,
    cache_factor: f64,
    phi: M3,
    /// (I - Phi) r: node rise over one step per watt of dissipation, K/W.
    b: [f64; 3],
}

impl Thermal {
    /// Creates the ladder with every node at `t_initial_k`.
    pub fn new(params: ThermalParams, t_initial_k: f64) -> Result<Self, PlantError> {
        params.validate()?;
        ensure(
            t_initial_k.is_finite() && t_initial_k > 0.0,
            "t_initial_k",
            "must be a finite temperature above 0 K",
        )?;
        Ok(Self {
            params,
            t: [t_initial_k; 3],
            heatsink_loss_factor: 1.0,
            cache_dt: f64::NAN,
            cache_factor: f64::NAN,
            phi: [[0.0; 3]; 3],
            b: [0.0; 3],
        })
    }

    /// Parameters in use.
    pub fn params(&self) -> &ThermalParams {
        &self.params
    }

    fn rebuild(&mut self, dt_s: f64) {
        let p = &self.params;
        let r_ha = p.r_ha_k_per_w * self.heatsink_loss_factor;
        let (g_jc, g_ch, g_ha) = (1.0 / p.r_jc_k_per_w, 1.0 / p.r_ch_k_per_w, 1.0 / r_ha);
        let (cj, cc, ch) = (p.c_j_j_per_k, p.c_c_j_per_k, p.c_h_j_per_k);
        let mut m: M3 = [[0.0; 3]; 3];
        m[0][0] = -g_jc / cj;
        m[0][1] = g_jc / cj;
        m[1][0] = g_jc / cc;
        m[1][1] = -(g_jc + g_ch) / cc;
        m[1][2] = g_ch / cc;
        m[2][1] = g_ch / ch;
        m[2][2] = -(g_ch + g_ha) / ch;
        for row in m.iter_mut() {
            for v in row.iter_mut() {
                *v *= dt_s;
            }
        }
        self.phi = mat_exp(&m);
        let r = self.steady_state_k(1.0, 0.0);
        for (bi, row) in self.b.iter_mut().zip(self.phi.iter()) {
            *bi = -(row[0] * r[0] + row[1] * r[1] + row[2] * r[2]);
        }
        for (bi, ri) in self.b.iter_mut().zip(r.iter()) {
            *bi += ri;
        }
        self.cache_dt = dt_s;
        self.cache_factor = self.heatsink_loss_factor;
    }

    /// Advances the ladder by `dt_s` with `p_diss_w` entering the junction
    /// and the ambient at `t_ambient_k`, both held over the step. Returns the
    /// new junction temperature, K.
    #[inline]
    pub fn step(&mut self, p_diss_w: f64, t_ambient_k: f64, dt_s: f64) -> f64 {
        if dt_s <= 0.0 {
            return self.t[0];
        }
        if dt_s != self.cache_dt || self.heatsink_loss_factor != self.cache_factor {
            self.rebuild(dt_s);
        }
        let d = [
            self.t[0] - t_ambient_k,
            self.t[1] - t_ambient_k,
            self.t[2] - t_ambient_k,
        ];
        let mut y = [0.0; 3];
        for (i, yi) in y.iter_mut().enumerate() {
            let free = self.phi[i][0] * d[0] + self.phi[i][1] * d[1] + self.phi[i][2] * d[2];
            *yi = (t_ambient_k + free) + self.b[i] * p_diss_w;
        }
        self.t = y;
        y[0]
    }

    /// [`Thermal::step`] in the first form, x' = x_ss + Phi (x - x_ss): the
    /// reference for it (they agree to rounding; see the tests).
    pub fn step_reference(&mut self, p_diss_w: f64, t_ambient_k: f64, dt_s: f64) -> f64 {
        if dt_s <= 0.0 {
            return self.t[0];
        }
        if dt_s != self.cache_dt || self.heatsink_loss_factor != self.cache_factor {
            self.rebuild(dt_s);
        }
        let ss = self.steady_state_k(p_diss_w, t_ambient_k);
        let d = [self.t[0] - ss[0], self.t[1] - ss[1], self.t[2] - ss[2]];
        let mut y = [0.0; 3];
        for (i, yi) in y.iter_mut().enumerate() {
            *yi = ss[i] + self.phi[i][0] * d[0] + self.phi[i][1] * d[1] + self.phi[i][2] * d[2];
        }
        self.t = y;
        y[0]
    }

    /// Junction temperature, K.
    #[inline]
    pub fn t_junction_k(&self) -> f64 {
        self.t[0]
    }

    /// Case (submount) temperature, K; the temperature sensor sits here.
    #[inline]
    pub fn t_case_k(&self) -> f64 {
        self.t[1]
    }

    /// Heatsink temperature, K.
    #[inline]
    pub fn t_heatsink_k(&self) -> f64 {
        self.t[2]
    }

    /// All node temperatures [junction, case, heatsink], K.
    #[inline]
    pub fn temperatures_k(&self) -> [f64; 3] {
        self.t
    }

    /// Overwrites the node temperatures [junction, case, heatsink], K.
    pub fn set_temperatures_k(&mut self, t: [f64; 3]) {
        self.t = t;
    }

    /// Analytic steady state [junction, case, heatsink], K, for constant
    /// dissipation and ambient (including the heatsink fault factor).
    pub fn steady_state_k(&self, p_diss_w: f64, t_ambient_k: f64) -> [f64; 3] {
        let p = &self.params;
        let th = t_ambient_k + p_diss_w * p.r_ha_k_per_w * self.heatsink_loss_factor;
        let tc = th + p_diss_w * p.r_ch_k_per_w;
        let tj = tc + p_diss_w * p.r_jc_k_per_w;
        [tj, tc, th]
    }
}

#[cfg(test)]
#[allow(clippy::needless_range_loop)]
mod tests {
    use super::*;

    fn params() -> ThermalParams {
        ThermalParams {
            r_jc_k_per_w: 2.0,
            r_ch_k_per_w: 1.0,
            r_ha_k_per_w: 1.5,
            c_j_j_per_k: 5e-4,
            c_c_j_per_k: 0.5,
            c_h_j_per_k: 50.0,
        }
    }

    /// The exact discretisation composes: 1000 steps of 1 ms equal one step of 1 s.
    #[test]
    fn step_size_independence() {
        let mut a = Thermal::new(params(), 300.0).unwrap();
        let mut b = Thermal::new(params(), 300.0).unwrap();
        for _ in 0..1000 {
            a.step(3.0, 300.0, 1e-3);
        }
        b.step(3.0, 300.0, 1.0);
        for (x, y) in a.temperatures_k().iter().zip(b.temperatures_k().iter()) {
            assert!((x - y).abs() < 1e-9, "{x} vs {y}");
        }
    }

    #[test]
    fn matches_fine_explicit_integration() {
        // Reference: classical RK4 at a step far below the fastest time
        // constant (R_jc C_j = 1 ms).
        let p = params();
        let mut th = Thermal::new(p.clone(), 300.0).unwrap();
        th.step(3.0, 305.0, 0.01);
        let mut x = [300.0f64; 3];
        let f = |x: &[f64; 3]| -> [f64; 3] {
            let q_jc = (x[0] - x[1]) / p.r_jc_k_per_w;
            let q_ch = (x[1] - x[2]) / p.r_ch_k_per_w;
            let q_ha = (x[2] - 305.0) / p.r_ha_k_per_w;
            [
                (3.0 - q_jc) / p.c_j_j_per_k,
                (q_jc - q_ch) / p.c_c_j_per_k,
                (q_ch - q_ha) / p.c_h_j_per_k,
            ]
        };
        let h = 1e-6;
        for _ in 0..10_000 {
            let k1 = f(&x);
            let x2 = [0, 1, 2].map(|i| x[i] + 0.5 * h * k1[i]);
            let k2 = f(&x2);
            let x3 = [0, 1, 2].map(|i| x[i] + 0.5 * h * k2[i]);
            let k3 = f(&x3);
            let x4 = [0, 1, 2].map(|i| x[i] + h * k3[i]);
            let k4 = f(&x4);
            x = [0, 1, 2].map(|i| x[i] + h / 6.0 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]));
        }
        for i in 0..3 {
            assert!((x[i] - th.temperatures_k()[i]).abs() < 1e-9, "node {i}");
        }
    }

    #[test]
    fn huge_step_reaches_steady_state() {
        let mut th = Thermal::new(params(), 290.0).unwrap();
        th.heatsink_loss_factor = 4.0;
        th.step(2.0, 300.0, 1e7);
        let ss = th.steady_state_k(2.0, 300.0);
        for i in 0..3 {
            assert!(
                (th.temperatures_k()[i] - ss[i]).abs() < 1e-9,
                "{} vs {}",
                th.temperatures_k()[i],
                ss[i]
            );
        }
        assert!((ss[0] - (300.0 + 2.0 * (2.0 + 1.0 + 6.0))).abs() < 1e-12);
    }

    /// The fast form follows the reference form over a long run with
    /// changing dissipation, ambient and heatsink fault. Each form rounds
    /// at about 6e-14 K (an ulp at 300 K) per step, and the heatsink mode
    /// (75 s here) hardly decays over 10 s, so the two drift apart as a
    /// random walk of those roundings: about 1e-10 K after 200 000 steps.
    #[test]
    fn fast_form_equals_reference_form() {
        let mut a = Thermal::new(params(), 300.0).unwrap();
        let mut b = Thermal::new(params(), 300.0).unwrap();
        let dt = 5e-5;
        let mut worst = 0.0f64;
        for k in 0..200_000 {
            let p = 3.0 + (k as f64 * 1e-3).sin() + if k % 7 == 0 { 0.5 } else { 0.0 };
            let amb = 300.0 + 5.0 * (k as f64 * 1e-5).sin();
            if k == 120_000 {
                a.heatsink_loss_factor = 3.0;
                b.heatsink_loss_factor = 3.0;
            }
            a.step(p, amb, dt);
            b.step_reference(p, amb, dt);
            for (x, y) in a.temperatures_k().iter().zip(b.temperatures_k().iter()) {
                worst = worst.max((x - y).abs());
            }
        }
        assert!(worst < 1e-9, "worst {worst} K");
    }

    #[test]
    fn rejects_bad_params() {
        let mut p = params();
        p.c_j_j_per_k = 0.0;
        assert!(Thermal::new(p, 300.0).is_err());
    }

    #[test]
    fn non_finite_starting_temperature_is_refused() {
        let p = crate::plant::DemoModule::visible().thermal;
        for t in [f64::NAN, f64::INFINITY, -1.0] {
            assert!(Thermal::new(p.clone(), t).is_err(), "{t}");
        }
        assert!(Thermal::new(p, 298.15).is_ok());
    }

    #[test]
    fn zero_heatsink_loss_factor_ends_at_once_with_nan() {
        // A zero factor made the resistance zero and the scaling-and-squaring
        // count about 2^31; it returns NaN at once instead.
        let mut t = Thermal::new(crate::plant::DemoModule::visible().thermal, 298.15).unwrap();
        t.heatsink_loss_factor = 0.0;
        assert!(t.step(0.1, 298.15, 5e-5).is_nan());
        t.heatsink_loss_factor = f64::INFINITY;
        assert!(t.step(0.1, 298.15, 5e-5).is_nan());
    }
}
