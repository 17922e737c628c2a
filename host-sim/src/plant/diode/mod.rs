//! Laser diode: rate equations (dynamic) and their exact steady state
//! (quasi-static) from one parameter set, with temperature, forward voltage,
//! catastrophic facet damage and aging.
//!
//! # Rate equations (SI units internally)
//!
//! ```text
//! dN/dt = eta_i I / (q V) - R(N) - v_g g S
//! dS/dt = Gamma v_g g S - S / tau_p + Gamma beta_sp B N^2
//! R(N)  = A N + B N^2 + C N^3
//! g     = g_N(N) / (1 + eps S),  g_N = g0 ln((N + Ns)/(Ntr + Ns))  or  a (N - Ntr)
//! 1/tau_p = v_g (alpha_i + alpha_m),  alpha_m = ln(1/(R1 R2)) / (2 L)
//! P_front = h nu v_g alpha_m,front S V / Gamma,  alpha_m,front = ln(1/R1) / (2 L)
//! ```
//!
//! The logarithmic gain is continued below `N_knee = (Ntr + Ns)/e - Ns`
//! (where g_N = -g0) by its tangent line, so the gain stays defined (as
//! absorption) down to N = 0 even when Ns < 0.
//!
//! # Temperature and aging map
//!
//! With dT = T - T_ref, the recombination rate R(N) (all of A, B, C, and so
//! the spontaneous term) is multiplied by `f = exp(dT/T0) exp(-dT/T1) k_th k_sl`
//! and eta_i by `exp(-dT/T1) k_sl`, where `k_th = 1 + rise * h/1000` and
//! `k_sl = 1 - loss * h/1000` are the aging factors after h operating hours.
//! Gain, confinement and losses (so N_th and tau_p) stay fixed. This is a
//! lumped description of carrier leakage, Auger and injection losses that
//! makes the analytic figures follow exactly
//! `I_th(T) = I_th(T_ref) exp(dT/T0) k_th` and
//! `eta_d(T) = eta_d(T_ref) exp(-dT/T1) k_sl`, in both modes.
//!
//! # Quasi-static mode
//!
//! The steady state of the same equations is solved exactly: eliminating the
//! stimulated term gives `S = Gamma tau_p (J - R(N) + beta B N^2)`, leaving one
//! equation `F(N) = S (1/tau_p - Gamma v_g g) - Gamma beta B N^2 = 0`, solved by
//! bracketed Halley iteration (analytic F' and F'') from the root of its
//! quadratic expansion about N_th, stopped when the predicted error is below
//! 1e-12 N (one or two iterations in practice; about 70 ns per call). Below
//! threshold this is the spontaneous emission coupled into the lasing mode;
//! above threshold it reduces to P = eta_d (h nu / q)(I - I_th) apart from the
//! small gain-compression and spontaneous-emission corrections.
//!
//! [`Diode::quasi_static`] (and [`Diode::step_quasi_static_reference`]) run
//! this solver from the cold start at every call. The closed loop uses
//! [`Diode::step_quasi_static`], which solves the same equation faster:
//! above threshold one Halley step from an *anchor* (a nearby root where
//! everything that depends on N alone was evaluated once), accepted under
//! the same stopping rule, else a second step whose start becomes the new
//! anchor, else the solver above; the temperature exponentials and
//! ln(I/I_s) are continued from the previous call ([`super::near`]). It
//! agrees with the cold-start form to 1e-11 in N and 1e-9 in power (tested
//! on all parameter sets over ramps, DAC-sized steps, jumps and aging).
//!
//! # Dynamic mode
//!
//! The equations, in the scaled state n = N / N_th, s = S / S_u with
//! S_u = Gamma tau_p R(N_th), are integrated with the L-stable, stiffly
//! accurate 4th-order Rosenbrock method RODAS4 (Hairer and Wanner, *Solving
//! Ordinary Differential Equations II*, 2nd ed., Springer 1996, sect. IV.7;
//! coefficient set of their code RODAS) with its embedded 3rd-order error
//! estimate, the analytic 2x2 Jacobian and step-size control on the RMS norm
//! `|err_i| / (atol + rtol max(|y_i|, |y_i,new|))`. Default tolerance:
//! rtol = 1e-6, atol = 1e-9 (on the scaled state).
//!
//! # Files
//!
//! In dependency order (each file imports only from files above it; this
//! file only declares them and re-exports the public items):
//!
//! - `params.rs`: the parameters as written ([`DiodeParams`], [`GainModel`]) and their checks;
//! - `gain.rs`: the gain model in SI ([`GainSi`]);
//! - `varshni.rs`: band gap against temperature ([`Varshni`]);
//! - `voltage.rs`: the temperature law of the forward voltage's saturation current;
//! - `model.rs`: SI constants, the temperature and aging map, analytic figures ([`DiodeDerived`]);
//! - `rodas4.rs`: the general stiff solver ([`integrate_rodas4`]);
//! - `steady_state.rs`: the exact steady state and the anchored Halley step;
//! - `state.rs`: the [`Diode`] with state, its analytic figures and outputs;
//! - `damage.rs`: facet damage; `aging.rs`: aging;
//! - `rate_equations.rs`: right-hand side and [`RateCoefficients`];
//! - `quasi_static.rs`, `dynamic.rs`: the two ways of stepping the diode.

mod aging;
mod damage;
mod dynamic;
mod gain;
mod model;
mod params;
mod quasi_static;
mod rate_equations;
mod rodas4;
mod state;
mod steady_state;
mod varshni;
mod voltage;

pub use gain::GainSi;
pub use model::DiodeDerived;
pub use params::{
    DiodeParams, GainModel, AGING_ACTIVATION_EV, AGING_CURRENT_EXPONENT, CUTOFF_EFOLD_K,
};
pub use rate_equations::RateCoefficients;
pub use rodas4::{integrate_rodas4, DynamicStats, Tolerance};
pub use state::{Diode, DiodeOutput};
pub use varshni::{
    varshni_ev, Varshni, VARSHNI_ALAS_GAMMA, VARSHNI_GAAS, VARSHNI_INAS, VARSHNI_INP,
};
