#!/usr/bin/env python3
"""Margins of discrete loops with python-control, for the Rust check
tests/tests/stability_python_control.rs.

Usage: margins_control.py IN.json OUT.json

IN:  {"cases": [{"name": str, "num": [...], "den": [...], "dt": float,
                 "method": "best" | "frd"}, ...]}
     num and den in descending powers of z, as control.tf(num, den, dt).
     "method" (default "best") is passed to stability_margins; with "best",
     "margin" is control.margin(sys), with "frd" it is taken from
     stability_margins(sys, method="frd") (margin() has no method argument).
OUT: {"python_control": version,
      "cases": [{"name": str,
                 "margin": [gm, pm, wcg, wcp],            # control.margin
                 "stability_margins": [gm, pm, sm, wpc, wgc, wms],
                 "all": {"gm": [...], "pm": [...], "sm": [...],
                         "w180": [...], "wc": [...], "wstab": [...]},
                 "bandwidth_rad_s": float,
                 "warnings": [str, ...]}, ...]}

Frequencies in rad/s, gain margins as ratios, phase margins in degrees.
Non-finite numbers are written as the strings "inf", "-inf" and "nan"
(JSON has no literal for them).

The closed-loop bandwidth (first frequency where |L/(1+L)| is 3 dB below
its DC value) is computed here from the response on the unit circle,
z = exp(j w dt), by a dense grid and scipy.optimize.brentq.
"""

import json
import math
import sys
import warnings

import numpy as np
import scipy.optimize

import control


def num_out(x):
    x = float(np.real(x))
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return x


def list_out(xs):
    return [num_out(x) for x in np.atleast_1d(xs)]


def bandwidth(loop, dt):
    t = control.feedback(loop, 1)
    num = np.asarray(t.num[0][0], dtype=float)
    den = np.asarray(t.den[0][0], dtype=float)

    def mag(w):
        z = np.exp(1j * w * dt)
        return np.abs(np.polyval(num, z) / np.polyval(den, z))

    dc = mag(0.0)
    level = dc * 10 ** (-3.0 / 20.0)
    wn = math.pi / dt
    w = np.geomspace(wn * 1e-7, wn, 200001)
    below = np.nonzero(mag(w) < level)[0]
    if below.size == 0:
        return math.inf
    i = below[0]
    if i == 0:
        return float(w[0])
    return scipy.optimize.brentq(lambda x: mag(x) - level, w[i - 1], w[i], xtol=1e-14, rtol=1e-15)


def main():
    with open(sys.argv[1]) as f:
        spec = json.load(f)
    out = {"python_control": control.__version__, "cases": []}
    for case in spec["cases"]:
        loop = control.tf(case["num"], case["den"], case["dt"])
        method = case.get("method", "best")
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            sm = control.stability_margins(loop, method=method)
            if method == "best":
                m = control.margin(loop)
            else:
                m = (sm[0], sm[1], sm[3], sm[4])
            gm_all, pm_all, sm_all, w180, wc, wstab = control.stability_margins(
                loop, returnall=True, method=method
            )
        out["cases"].append(
            {
                "name": case["name"],
                "method": method,
                "margin": [num_out(v) for v in m],
                "stability_margins": [num_out(v) for v in sm],
                "all": {
                    "gm": list_out(gm_all),
                    "pm": list_out(pm_all),
                    "sm": list_out(sm_all),
                    "w180": list_out(w180),
                    "wc": list_out(wc),
                    "wstab": list_out(wstab),
                },
                "bandwidth_rad_s": num_out(bandwidth(loop, case["dt"])),
                "warnings": [str(w.message) for w in caught],
            }
        )
    with open(sys.argv[2], "w") as f:
        json.dump(out, f, indent=1)


if __name__ == "__main__":
    main()
