"""Fixtures for the D'Agostino-Pearson omnibus test (samewise::stats::normality::dagostino_pearson).

Writes tests/data/reference/normaltest.json with scipy.stats.skewtest, kurtosistest and
normaltest on deterministic data that the Rust test rebuilds with the same integer arithmetic:
x_i = ((i * 7919) % 10007) / 10007 - 0.5 for i = 1..n (uniform-like), its cube (heavy-tailed)
and exp(3 x_i) (right-skewed). Run: pip install scipy && python3 scripts/normaltest_reference.py
"""
import json
import math

import scipy
from scipy import stats


def data(kind, n):
    xs = [((i * 7919) % 10007) / 10007 - 0.5 for i in range(1, n + 1)]
    if kind == "cube":
        return [x * x * x for x in xs]
    if kind == "exp":
        return [math.exp(3.0 * x) for x in xs]
    return xs


cases = []
for kind in ["uniform", "cube", "exp"]:
    for n in [20, 200, 6000, 50000]:
        x = data(kind, n)
        s = stats.skewtest(x)
        k = stats.kurtosistest(x)
        o = stats.normaltest(x)
        cases.append({
            "kind": kind, "n": n,
            "skew_z": float(s.statistic), "skew_p": float(s.pvalue),
            "kurt_z": float(k.statistic), "kurt_p": float(k.pvalue),
            "k2": float(o.statistic), "p": float(o.pvalue),
        })

out = {"source": f"scipy {scipy.__version__}: stats.skewtest, stats.kurtosistest, stats.normaltest",
       "cases": cases}
with open("tests/data/reference/normaltest.json", "w") as f:
    json.dump(out, f, indent=1)
print(len(cases), "cases")
