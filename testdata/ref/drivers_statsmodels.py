#!/usr/bin/python3
"""Golden driver shares (Pratt's product measure) from statsmodels, written
to golden_drivers.json.

For each dataset (datasets.json names the CSV and the regressors; the
response is not used) and each regressor j: the OLS regression of column j
on a constant and the other regressors, by statsmodels OLS (QR method), on
the columns standardized to mean 0 and SD 1 (the shares do not depend on
the columns' units, and standardizing keeps the least-squares problem well
scaled). The fitted slopes are then the standardized coefficients beta_k,
and for each other regressor k

    share_k = beta_k * r_jk / R2_j

with r_jk from numpy.corrcoef and R2_j the fit's R^2. The shares sum to 1
(Pratt 1987's decomposition of R^2); a negative share marks a suppressor.

As a check on the reference itself, beta_k is also computed from the
inverse correlation matrix, beta_k = -inv(R)[j, k] / inv(R)[j, j], and the
largest relative difference between the two is recorded.

    /usr/bin/python3 drivers_statsmodels.py
"""

import csv
import json
import os
import platform

import numpy as np
import pandas
import statsmodels
import statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))


def read_csv(name):
    with open(os.path.join(HERE, name), newline="") as f:
        rows = list(csv.reader(f))
    header = rows[0]
    data = np.array([[float(v) for v in r] for r in rows[1:]], dtype=np.float64)
    return header, data


def dataset(spec):
    header, data = read_csv(spec["csv"])
    col = {h: i for i, h in enumerate(header)}
    regs = spec["regressors"]
    x = data[:, [col[r] for r in regs]]
    n, p = x.shape
    z = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    corr = np.corrcoef(x, rowvar=False)
    rinv = np.linalg.inv(corr)

    columns = {}
    check = 0.0
    for j, name in enumerate(regs):
        others = [k for k in range(p) if k != j]
        fit = sm.OLS(z[:, j], sm.add_constant(z[:, others])).fit(method="qr")
        beta = fit.params[1:]
        r2 = float(fit.rsquared)
        shares = {}
        for b, k in enumerate(others):
            shares[regs[k]] = float(beta[b] * corr[j, k] / r2)
            alt = -rinv[j, k] / rinv[j, j]
            check = max(check, abs(alt - beta[b]) / max(abs(beta[b]), 1e-300))
        columns[name] = {"r2": r2, "shares": shares}

    return {
        "csv": spec["csv"],
        "regressors": regs,
        "rows": n,
        "max_rel_diff_beta_inverse_correlation": check,
        "columns": columns,
    }


def main():
    with open(os.path.join(HERE, "datasets.json")) as f:
        specs = json.load(f)
    out = {
        "source": "drivers_statsmodels.py in this directory (statsmodels OLS, QR method, on standardized columns)",
        "versions": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "statsmodels": statsmodels.__version__,
            "pandas": pandas.__version__,
        },
        "datasets": {name: dataset(spec) for name, spec in specs.items()},
    }
    # json.dump writes floats with repr(): shortest round-trip text (up to 17 digits).
    with open(os.path.join(HERE, "golden_drivers.json"), "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")


if __name__ == "__main__":
    main()
