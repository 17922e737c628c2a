"""One-sided Clopper-Pearson upper bounds from scipy.stats.beta.ppf.

Usage: clopper_pearson.py INPUT OUTPUT. Input (JSON):
{"confidence": c, "cases": [[k, n], ...]}. Output (JSON):
{"upper": [...], "scipy": version}: the upper bound
beta.ppf(c, k + 1, n - k) for k < n, 1 for k = n.
"""
import json
import sys

import scipy
from scipy.stats import beta

with open(sys.argv[1]) as f:
    q = json.load(f)
c = q["confidence"]
out = [1.0 if k == n else float(beta.ppf(c, k + 1, n - k)) for k, n in q["cases"]]
with open(sys.argv[2], "w") as f:
    json.dump({"upper": out, "scipy": scipy.__version__}, f)
