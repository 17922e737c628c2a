#!/usr/bin/env python3
"""Speed of the Rust rate-equation integrator against scipy.integrate.solve_ivp.

Both solve the same turn-on transient (0 -> MULT x I_th at t = 0 from
N = S = 0, 10 ns) at the same rtol/atol on the same scaled state, the SciPy
solvers with the analytic Jacobian. The Rust side is the release build of
`host-sim/examples/turn_on.rs`, which also writes the problem file.

    dynamic_speed.py [--set textbook|visible|pump] [--rtol 1e-6] [--atol 1e-9]
                     [--reps 2000] [--py-reps 5] [--mult 3] [--no-build]

Prints the time per transient of each solver, step counts, the final and
peak power of each, and the ratio SciPy / Rust.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from rate_eq_scipy import solve  # noqa: E402

ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", ".."))


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--set", default="textbook")
    ap.add_argument("--rtol", type=float, default=1e-6)
    ap.add_argument("--atol", type=float, default=1e-9)
    ap.add_argument("--mult", type=float, default=3.0)
    ap.add_argument("--t-end", type=float, default=10e-9)
    ap.add_argument("--reps", type=int, default=2000, help="Rust repetitions")
    ap.add_argument("--py-reps", type=int, default=5, help="SciPy repetitions per method")
    ap.add_argument("--methods", default="Radau,BDF,LSODA")
    ap.add_argument("--no-build", action="store_true", help="skip cargo build")
    args = ap.parse_args()

    if not args.no_build:
        subprocess.run(["cargo", "build", "--release", "-q", "-p", "diodestat-sim", "--example", "turn_on"],
                       cwd=ROOT, check=True)
    exe = os.path.join(os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target")),
                       "release", "examples", "turn_on")
    with tempfile.TemporaryDirectory() as tmp:
        problem_path = os.path.join(tmp, "problem.json")
        out = subprocess.run([exe, "--set", args.set, "--mult", str(args.mult), "--t-end", str(args.t_end),
                              "--rtol", str(args.rtol), "--atol", str(args.atol), "--reps", str(args.reps),
                              "--json", problem_path],
                             cwd=ROOT, check=True, capture_output=True, text=True)
        rust = json.loads(out.stdout.strip().splitlines()[-1])
        with open(problem_path, encoding="utf-8") as f:
            problem = json.load(f)

    print(f"turn-on transient: set {args.set}, I = {rust['i_a']:.4e} A ({args.mult} I_th), "
          f"{args.t_end * 1e9:g} ns, rtol {args.rtol:g}, atol {args.atol:g}")
    print(f"{'solver':<14}{'time/run':>14}{'steps':>8}{'f evals':>9}{'P final (W)':>14}{'P peak (W)':>13}{'ratio':>9}")
    t_rust = rust["rust_s_per_run"]
    print(f"{'Rust RODAS4':<14}{t_rust * 1e6:>11.1f} us{rust['steps']:>8}{rust['f_evals']:>9}"
          f"{rust['p_final_w']:>14.6e}{rust['p_peak_w']:>13.6e}{1.0:>9.1f}")
    ratios = {}
    for method in args.methods.split(","):
        times = []
        for _ in range(args.py_reps):
            sol, eq, elapsed = solve(problem, method=method)
            if not sol.success:
                sys.exit(f"{method} failed: {sol.message}")
            times.append(elapsed)
        t_py = float(np.median(times))
        p = eq.power_front_w(sol.y[1] * eq.ss)
        ratios[method] = t_py / t_rust
        print(f"{method:<14}{t_py * 1e3:>11.2f} ms{len(sol.t) - 1:>8}{sol.nfev:>9}"
              f"{p[-1]:>14.6e}{p.max():>13.6e}{ratios[method]:>9.0f}")
    print("(P peak: Rust sampled every 1 ps, SciPy at its own step points)")
    print(f"quasi-static solver: {rust['quasi_static_ns_per_call']:.1f} ns per call")
    best = min(ratios, key=ratios.get)
    print(f"Rust is {ratios[best]:.0f}x faster than the fastest SciPy solver ({best}); target >= 20x")
    return 0 if ratios[best] >= 20.0 else 1


if __name__ == "__main__":
    sys.exit(main())
