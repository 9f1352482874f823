"""Fixtures for Brown and Forsythe's F* test of means (samewise::stats::fstar).

Reads the groups of tests/data/reference/oneway.json and writes tests/data/reference/fstar.json
with statsmodels' anova_oneway(use_var="bf"): the statistic, the Satterthwaite denominator df,
Brown and Forsythe's p-value on k - 1 numerator df (statsmodels' `pvalue2`), and Mehrotra's
(1997) modified numerator df with its p-value (statsmodels' `df_num`, `pvalue`).
Run: pip install statsmodels && python3 scripts/fstar_reference.py
"""
import json

import numpy as np
import statsmodels
from statsmodels.stats.oneway import anova_oneway

with open("tests/data/reference/oneway.json") as f:
    datasets = json.load(f)["datasets"]

cases = []
for d in datasets:
    origin = float(d["origin"]) if d.get("origin") else None

    def offset(x):
        # `large_offset`: the exact offsets from the origin on its 0.0001 gauge, as the Rust
        # test rebuilds them (src/stats/posthoc.rs, `summaries`).
        return round((x - origin) * 1e4) / 1e4 if origin is not None else x

    groups = [np.asarray([offset(x) for x in g["values"]], dtype=float) for g in d["groups"]]
    if any(len(g) < 2 for g in groups) or any(np.var(g) == 0 for g in groups):
        continue
    r = anova_oneway(groups, use_var="bf", welch_correction=False)
    cases.append({
        "name": d["name"],
        "statistic": float(r.statistic),
        "df1": float(r.df_num2),
        "df2": float(r.df_denom),
        "p": float(r.pvalue2),
        "df1_mehrotra": float(r.df_num),
        "p_mehrotra": float(r.pvalue),
    })

out = {"source": f"statsmodels {statsmodels.__version__}: stats.oneway.anova_oneway(use_var='bf')",
       "cases": cases}
with open("tests/data/reference/fstar.json", "w") as f:
    json.dump(out, f, indent=1)
print(len(cases), "cases")
