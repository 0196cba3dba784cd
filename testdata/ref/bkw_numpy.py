#!/usr/bin/python3
"""Golden VIFs, correlation eigenvalues, condition indices and
variance-decomposition proportions (Belsley, Kuh & Welsch 1980) from numpy
and statsmodels, written to golden_numpy.json.

For each dataset (datasets.json names the CSV, the response and the
regressors; the response is never part of the diagnostics):

vif_statsmodels  statsmodels.stats.outliers_influence.variance_inflation_factor
                 on exog = [1 X] (explicit constant column), for each regressor.
vif_inverse_correlation  diag(inv(corr(X))), numpy.
correlation_eigenvalues  numpy.linalg.eigvalsh(corr(X)), descending.
uncentered       convention (a): Z = [1 X], each column scaled to unit
                 Euclidean length; names start with "intercept".
centered         convention (b): X centered on its means, each column scaled
                 to unit length, no intercept column.

Both conventions: Z = U diag(mu) V' by numpy.linalg.svd; dimensions ordered by
mu descending (condition index ascending); condition index eta_k =
mu_max / mu_k; proportion pi[k][j] = (v_jk^2 / mu_k^2) / sum_k (v_jk^2 / mu_k^2),
rows = dimensions, columns = names.

    /usr/bin/python3 bkw_numpy.py
"""

import csv
import json
import os
import platform

import numpy as np
import pandas
import statsmodels
from statsmodels.stats.outliers_influence import variance_inflation_factor

HERE = os.path.dirname(os.path.abspath(__file__))


def read_csv(name):
    with open(os.path.join(HERE, name), newline="") as f:
        rows = list(csv.reader(f))
    header = rows[0]
    data = np.array([[float(v) for v in r] for r in rows[1:]], dtype=np.float64)
    return header, data


def bkw(z):
    # z: n x m design, already scaled. Returns (mu desc, eta asc, pi [k][j]).
    _, mu, vt = np.linalg.svd(z, full_matrices=False)
    order = np.argsort(-mu, kind="stable")  # numpy returns descending; be explicit
    mu = mu[order]
    v = vt[order].T  # v[j, k]
    phi = v ** 2 / mu ** 2  # phi[j, k]
    pi = (phi / phi.sum(axis=1, keepdims=True)).T  # pi[k, j]
    eta = mu[0] / mu
    return mu, eta, pi


def floats(a):
    return [float(x) for x in np.asarray(a).ravel()]


def dataset(spec):
    header, data = read_csv(spec["csv"])
    col = {h: i for i, h in enumerate(header)}
    regs = spec["regressors"]
    x = data[:, [col[r] for r in regs]]
    n, p = x.shape

    exog = np.column_stack([np.ones(n), x])
    vif_sm = {r: float(variance_inflation_factor(exog, j + 1)) for j, r in enumerate(regs)}

    corr = np.corrcoef(x, rowvar=False)
    vif_inv = dict(zip(regs, floats(np.diag(np.linalg.inv(corr)))))
    eig = np.sort(np.linalg.eigvalsh(corr))[::-1]

    za = exog / np.linalg.norm(exog, axis=0)
    mu_a, eta_a, pi_a = bkw(za)

    xc = x - x.mean(axis=0)
    zb = xc / np.linalg.norm(xc, axis=0)
    mu_b, eta_b, pi_b = bkw(zb)

    return {
        "csv": spec["csv"],
        "response": spec["response"],
        "regressors": regs,
        "rows": n,
        "vif_statsmodels": vif_sm,
        "vif_inverse_correlation": vif_inv,
        "correlation_eigenvalues": floats(eig),
        "uncentered": {
            "names": ["intercept"] + regs,
            "singular_values": floats(mu_a),
            "condition_indices": floats(eta_a),
            "condition_number": float(eta_a[-1]),
            "proportions": [floats(row) for row in pi_a],
        },
        "centered": {
            "names": list(regs),
            "singular_values": floats(mu_b),
            "condition_indices": floats(eta_b),
            "condition_number": float(eta_b[-1]),
            "proportions": [floats(row) for row in pi_b],
        },
    }


def main():
    with open(os.path.join(HERE, "datasets.json")) as f:
        specs = json.load(f)
    out = {
        "source": "bkw_numpy.py in this directory (numpy.linalg.svd, statsmodels variance_inflation_factor)",
        "versions": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "statsmodels": statsmodels.__version__,
            "pandas": pandas.__version__,
        },
        "datasets": {name: dataset(spec) for name, spec in specs.items()},
    }
    # json.dump writes floats with repr(): shortest round-trip text (up to 17 digits).
    with open(os.path.join(HERE, "golden_numpy.json"), "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")


if __name__ == "__main__":
    main()
