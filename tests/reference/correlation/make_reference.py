"""Write polychoric_reference.json: two-step polychoric rho by brute force with scipy.

Thresholds from the margins (scipy.stats.norm.ppf), cell probabilities from
scipy.stats.multivariate_normal.cdf, rho from scipy.optimize.minimize_scalar (bounded).
Independent of server/stats/correlation.py.  Run: .venv/bin/python tests/reference/correlation/make_reference.py
"""
import json
from pathlib import Path

import numpy as np
import scipy
from scipy import optimize
from scipy.stats import multivariate_normal, norm

TABLES = [
    [[20, 5], [10, 15]],                                  # 2 x 2, unequal margins
    [[30, 12, 3, 1], [10, 25, 14, 4], [2, 9, 20, 16]],    # 3 x 4
    [[5, 3, 1, 0, 0], [4, 12, 8, 2, 1], [2, 9, 25, 10, 3], [0, 3, 11, 18, 6], [0, 1, 2, 7, 9]],  # 5 x 5
    [[3, 10, 22], [15, 12, 6], [20, 5, 2]],               # negative association
]


def two_step(t):
    t = np.asarray(t, float)
    n = t.sum()
    a = np.r_[-12, norm.ppf(np.cumsum(t.sum(1))[:-1] / n), 12]
    b = np.r_[-12, norm.ppf(np.cumsum(t.sum(0))[:-1] / n), 12]

    def negll(r):
        mvn = multivariate_normal(mean=[0, 0], cov=[[1, r], [r, 1]], seed=0, abseps=1e-9, releps=1e-9)
        F = np.array([[mvn.cdf([h, k]) for k in b] for h in a])
        P = F[1:, 1:] - F[:-1, 1:] - F[1:, :-1] + F[:-1, :-1]
        return -np.sum(t * np.log(np.maximum(P, 1e-300)))

    return optimize.minimize_scalar(negll, bounds=(-0.995, 0.995), method="bounded",
                                    options={"xatol": 1e-7}).x


out = {"source": "scipy brute force (multivariate_normal.cdf + minimize_scalar)",
       "scipy": scipy.__version__, "numpy": np.__version__,
       "cases": [{"table": t, "rho": round(float(two_step(t)), 5)} for t in TABLES]}
Path(__file__).with_name("polychoric_reference.json").write_text(json.dumps(out, indent=1) + "\n")
print(json.dumps(out, indent=1))
