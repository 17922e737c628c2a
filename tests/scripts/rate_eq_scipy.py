#!/usr/bin/env python3
"""Reference solution of the diodestat laser rate equations with SciPy.

Reads a problem file written by the Rust side (rate-equation coefficients in
SI after the temperature/aging map, drive current, time span, tolerances,
optional sample times), integrates with scipy.integrate.solve_ivp (Radau or
BDF, analytic Jacobian) in the same scaled state n = N / n_scale,
s = S / s_scale, and writes the trajectory as JSON.

    rate_eq_scipy.py PROBLEM.json RESULT.json

The right-hand side mirrors host-sim/src/plant/diode/rate_equations.rs:
    dN/dt = eta_i I / (q V) - (A N + B N^2 + C N^3) - v_g g S
    dS/dt = Gamma v_g g S - S / tau_p + Gamma beta_sp B N^2
    g = g_N(N) / (1 + eps S), g_N logarithmic (tangent below n_knee) or linear
    P_front = h nu v_g alpha_m,front S V / Gamma
"""

import json
import sys
import time

import numpy as np
import scipy
from scipy.integrate import solve_ivp

Q = 1.602176634e-19  # elementary charge, C (CODATA 2018, exact)


class RateEquations:
    """Scaled rate equations with an analytic Jacobian."""

    def __init__(self, coef, i_a):
        self.c = coef
        self.j = coef["eta_i"] * i_a / (Q * coef["volume_m3"])
        self.ns = coef["n_scale_m3"]
        self.ss = coef["s_scale_m3"]
        self.g = coef["gain"]
        self.lasing = coef.get("lasing", True)

    def gain(self, n):
        g = self.g
        if g["model"] == "log":
            if n >= g["n_knee_m3"]:
                x = n + g["n_s_m3"]
                return g["g0_per_m"] * np.log(x / (g["n_tr_m3"] + g["n_s_m3"])), g["g0_per_m"] / x
            slope = g["g0_per_m"] / (g["n_knee_m3"] + g["n_s_m3"])
            return -g["g0_per_m"] + slope * (n - g["n_knee_m3"]), slope
        return g["a_m2"] * (n - g["n_tr_m3"]), g["a_m2"]

    def rhs(self, _t, y):
        c = self.c
        n = y[0] * self.ns
        s = y[1] * self.ss
        r = c["a_per_s"] * n + c["b_m3_per_s"] * n * n + c["c_m6_per_s"] * n ** 3
        gn, _ = self.gain(n)
        inv = 1.0 / (1.0 + c["eps_m3"] * s)
        stim = c["v_g_m_per_s"] * gn * inv * s
        dn = self.j - r - stim
        if self.lasing:
            ds = (c["confinement"] * stim - s / c["tau_p_s"]
                  + c["confinement"] * c["beta_sp"] * c["b_m3_per_s"] * n * n)
        else:
            ds = -s / c["tau_p_s"]
        return np.array([dn / self.ns, ds / self.ss])

    def jac(self, _t, y):
        c = self.c
        n = y[0] * self.ns
        s = y[1] * self.ss
        gn, gnp = self.gain(n)
        inv = 1.0 / (1.0 + c["eps_m3"] * s)
        vg, gam = c["v_g_m_per_s"], c["confinement"]
        rp = c["a_per_s"] + 2.0 * c["b_m3_per_s"] * n + 3.0 * c["c_m6_per_s"] * n * n
        dn_dn = -rp - vg * s * gnp * inv
        dn_ds = -vg * gn * inv * inv
        if self.lasing:
            ds_dn = gam * vg * s * gnp * inv + 2.0 * gam * c["beta_sp"] * c["b_m3_per_s"] * n
            ds_ds = gam * vg * gn * inv * inv - 1.0 / c["tau_p_s"]
        else:
            ds_dn, ds_ds = 0.0, -1.0 / c["tau_p_s"]
        ratio = self.ss / self.ns
        return np.array([[dn_dn, dn_ds * ratio], [ds_dn / ratio, ds_ds]])

    def power_front_w(self, s_m3):
        c = self.c
        return (c["photon_energy_j"] * c["v_g_m_per_s"] * c["alpha_m_front_per_m"]
                * np.asarray(s_m3) * c["volume_m3"] / c["confinement"])


def solve(problem, method=None):
    """Integrates the problem; returns (solution, equations, elapsed seconds)."""
    eq = RateEquations(problem["coefficients"], problem["i_a"])
    y0 = [problem.get("n0_m3", 0.0) / eq.ns, problem.get("s0_m3", 0.0) / eq.ss]
    samples = problem.get("sample_times_s")
    start = time.perf_counter()
    sol = solve_ivp(eq.rhs, (0.0, problem["t_end_s"]), y0,
                    method=method or problem.get("method", "Radau"),
                    rtol=problem["rtol"], atol=problem["atol"], jac=eq.jac,
                    t_eval=samples, dense_output=False)
    elapsed = time.perf_counter() - start
    return sol, eq, elapsed


def main():
    if len(sys.argv) != 3:
        sys.exit(__doc__)
    with open(sys.argv[1], encoding="utf-8") as f:
        problem = json.load(f)
    sol, eq, elapsed = solve(problem)
    if not sol.success:
        sys.exit(f"solve_ivp failed: {sol.message}")
    n = sol.y[0] * eq.ns
    s = sol.y[1] * eq.ss
    result = {
        "method": problem.get("method", "Radau"),
        "t_s": sol.t.tolist(),
        "n_m3": n.tolist(),
        "s_m3": s.tolist(),
        "p_front_w": eq.power_front_w(s).tolist(),
        "nfev": int(sol.nfev),
        "njev": int(sol.njev),
        "elapsed_s": elapsed,
        "scipy_version": scipy.__version__,
        "numpy_version": np.__version__,
    }
    with open(sys.argv[2], "w", encoding="utf-8") as f:
        json.dump(result, f)


if __name__ == "__main__":
    main()
