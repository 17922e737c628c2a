#!/usr/bin/env python3
"""Reference fit of L-I-V sweeps with SciPy, for the `diodestat fit` check.

Reads the sweeps and the Rust fit's results, fits the same models with
scipy.optimize.curve_fit (Levenberg-Marquardt), and writes the estimates
and their standard errors as JSON:

    fit_scipy.py PROBLEM.json RESULT.json

Models (docs/fit.md):
    L-I, two-segment: P = a + b I + c max(0, I - I_th)  over the fit range
    V-I above 1.2 I_th: V = a ln I + b + R_s I
The L-I fit starts from the Rust estimates moved by 2 % (I_th) so that
SciPy finds the optimum itself; curve_fit's pcov (absolute_sigma=False) is
the same s^2 (J^T J)^-1 the Rust side reports.
"""

import json
import sys

import numpy as np
from scipy.optimize import curve_fit


def hinge(i, a, b, c, t):
    return a + b * i + c * np.maximum(0.0, i - t)


def vmodel(i, a, b, r):
    return a * np.log(i) + b + r * i


def main():
    with open(sys.argv[1]) as f:
        prob = json.load(f)
    out = []
    for sw in prob["sweeps"]:
        i = np.array(sw["i_a"])
        p = np.array(sw["p_w"])
        v = np.array(sw["v_v"])
        n = sw["fit_points"]
        g = sw["start"]
        p0 = [g["a_w"], g["b_w_per_a"], g["c_w_per_a"], g["i_th_a"] * 1.02]
        popt, pcov = curve_fit(hinge, i[:n], p[:n], p0=p0, method="lm", maxfev=20000)
        th = popt[3]
        sel = i >= 1.2 * th
        vopt, vcov = curve_fit(vmodel, i[sel], v[sel], p0=[0.05, 1.5, 1.0], method="lm")
        out.append({
            "i_th_a": th,
            "i_th_se": float(np.sqrt(pcov[3, 3])),
            "slope_w_per_a": popt[1] + popt[2],
            "slope_se": float(np.sqrt(pcov[1, 1] + pcov[2, 2] + 2 * pcov[1, 2])),
            "r_s_ohm": vopt[2],
            "r_s_se": float(np.sqrt(vcov[2, 2])),
            "turn_on_v": vopt[0] * np.log(th) + vopt[1],
        })
    with open(sys.argv[2], "w") as f:
        json.dump({"sweeps": out}, f)


if __name__ == "__main__":
    main()
