#!/usr/bin/env python3
"""Reference values for the power of the one-way F test and the noncentral F distribution
(tests/data/reference/power.json).

Uses statsmodels.stats.power.FTestAnovaPower, an implementation independent of samewise's
noncentral F (it calls scipy.stats.ncf). Configuration (see src/stats/power.rs): k balanced groups of
n, two means `effect` within-group SDs apart and the others at their mean, so that the
noncentrality is lambda = n * effect^2 / 2 and Cohen's f^2 = lambda / (k n) = effect^2 / (2 k).

Regenerate: python3 scripts/power_reference.py
"""
import json
import math
import pathlib
import sys

import scipy
import statsmodels
from statsmodels.stats.power import FTestAnovaPower

OUT = pathlib.Path(__file__).resolve().parent.parent / "tests" / "data" / "reference" / "power.json"


def main() -> None:
    solver = FTestAnovaPower()
    cases = []
    for k in (2, 3, 5, 10, 40):
        for n in (2, 5, 10, 30, 200):
            for effect in (0.25, 0.5, 1.0, 2.0):
                for alpha in (0.05, 0.01):
                    f = effect / math.sqrt(2 * k)
                    power = solver.power(effect_size=f, nobs=k * n, alpha=alpha, k_groups=k)
                    cases.append({"k": k, "n": n, "effect": effect, "alpha": alpha, "power": float(power)})
    needed = []
    for k in (2, 3, 5, 10):
        for effect in (0.5, 1.0, 2.0):
            f = effect / math.sqrt(2 * k)
            nobs = solver.solve_power(effect_size=f, nobs=None, alpha=0.05, power=0.8, k_groups=k)
            # Smallest balanced n per group with power >= 0.8 (statsmodels gives total nobs, real).
            n = max(2, math.ceil(float(nobs) / k - 1e-9))
            while solver.power(effect_size=f, nobs=k * n, alpha=0.05, k_groups=k) < 0.8:
                n += 1
            while n > 2 and solver.power(effect_size=f, nobs=k * (n - 1), alpha=0.05, k_groups=k) >= 0.8:
                n -= 1
            needed.append({"k": k, "effect": effect, "alpha": 0.05, "power_target": 0.8,
                           "nobs_total_real": float(nobs), "n_per_group": n})
    # Noncentral F distribution function (scipy.stats.ncf), for src/stats/noncentral.rs until the
    # shared tests/data/reference/ncf.json exists.
    from scipy.stats import ncf
    ncf_grid = []
    for df1 in (1, 2, 4, 9, 39):
        for df2 in (2, 5.5, 20, 100, 1000):
            for nc in (0.5, 3, 10, 50, 200):
                for x in (0.3, 1.0, 2.5, 6.0):
                    ncf_grid.append({"x": x, "df1": df1, "df2": df2, "nc": nc,
                                     "cdf": float(ncf.cdf(x, df1, df2, nc)),
                                     "sf": float(ncf.sf(x, df1, df2, nc))})
    doc = {
        "ncf": ncf_grid,
        "generator": f"scripts/power_reference.py; python {sys.version.split()[0]}, "
                     f"scipy {scipy.__version__}, statsmodels {statsmodels.__version__}",
        "balanced_power": cases,
        "n_needed": needed,
    }
    OUT.write_text(json.dumps(doc, indent=1) + "\n")


if __name__ == "__main__":
    main()
