#!/usr/bin/python3
"""Reference values for diagnostics/drift_test.go, computed with scipy.

Writes drift_scipy.json. Run from this directory with Debian's python3
(numpy and scipy from python3-numpy and python3-scipy):

    /usr/bin/python3 drift_scipy.py

- theil_sen: scipy.stats.theilslopes(y, x, method="joint"): slope is the
  median of pairwise slopes, intercept the median of y - slope*x.
- slope_low_90, slope_high_90: scipy.stats.theilslopes(y, x, alpha=0.90),
  Sen's (1968) 90 % confidence interval of the slope.
- mann_kendall_z: scipy.stats.kendalltau(x, y, method="asymptotic"); x has
  no ties, so the normal score of S with tie-corrected variance and no
  continuity correction is sign(tau) * isf(p/2).
- robust_z: 0.6745 * (x - median) / MAD with
  scipy.stats.median_abs_deviation(sample, scale=1.0).

Series are in the project's scenario: daily condition numbers of a
district feature table drifting upward (log-linear with noise), and daily
log changes for the jump rule. Seeded, so the output is reproducible.
"""
import json
import sys

import numpy as np
import scipy
from scipy import stats

rng = np.random.default_rng(20261202)
out = {"generator": "drift_scipy.py", "python": sys.version.split()[0],
       "numpy": np.__version__, "scipy": scipy.__version__,
       "theil_sen": [], "robust_z": []}

def series(name, n, level, rate, noise, outliers=()):
    x = np.arange(n, dtype=float) + rng.uniform(-0.2, 0.2, n)  # run times jitter around the day
    y = np.log(level) + np.log1p(rate) * x + rng.normal(0, noise, n)
    for i, d in outliers:
        y[i] += d
    return name, x, np.exp(y)

cases = [
    series("rising 8%/day, 14 runs", 14, 12.0, 0.08, 0.03),
    series("rising 2%/day, 30 runs, two outliers", 30, 18.0, 0.02, 0.02, [(7, 0.8), (21, -0.6)]),
    series("flat, 20 runs", 20, 9.0, 0.0, 0.05),
    series("falling 5%/day, 10 runs", 10, 40.0, -0.05, 0.02),
]
for name, x, v in cases:
    ly = np.log(v)
    res = stats.theilslopes(ly, x, alpha=0.90, method="joint")
    tau, p = stats.kendalltau(x, ly, method="asymptotic")
    z = float(np.sign(tau) * stats.norm.isf(p / 2))
    out["theil_sen"].append({"name": name, "x": x.tolist(), "value": v.tolist(),
                             "slope": float(res[0]), "intercept": float(res[1]),
                             "slope_low_90": float(res[2]), "slope_high_90": float(res[3]),
                             "mann_kendall_z": z})

for name, sample, x in [
    ("daily log changes, one jump", rng.normal(0.01, 0.02, 14), 0.35),
    ("daily log changes, ordinary day", rng.normal(0.0, 0.05, 21), -0.04),
    ("heavy tailed", rng.standard_t(2, 30) * 0.03, 0.2),
]:
    med = np.median(sample)
    mad = stats.median_abs_deviation(sample, scale=1.0)
    out["robust_z"].append({"name": name, "sample": sample.tolist(), "x": x,
                            "z": float(0.6745 * (x - med) / mad)})

with open("drift_scipy.json", "w") as f:
    json.dump(out, f, indent=1)
    f.write("\n")
