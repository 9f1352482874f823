"""Fixtures for the additive factor + subgroup (block) analysis (samewise::stats::intrablock).

Writes tests/data/reference/intrablock.json: invented data (numpy Generator, fixed random state)
in several block designs, with statsmodels' OLS fit of `y ~ C(L) + C(B)`:
- `anova_lm(typ=2)`: the Type II sums of squares of L and B, the residual sum of squares and df,
  F and p of L and of B;
- the contrasts of the level effects against level 0 (`params["C(L)[T.l]"]`) and, for every pair
  of levels, the standard error of the difference of their effects from `cov_params()`.
Designs: complete balanced blocks; incomplete unbalanced blocks with missing cells and blocks of
one value; shots of a moulding machine (300 shots x 8 cavities, some parts missing).
Run: pip install statsmodels pandas && python3 scripts/intrablock_reference.py
"""
import json

import numpy as np
import pandas as pd
import statsmodels
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

RNG_STATE = 20261205


def design(name, rng, levels, blocks, keep, shot_sd, effects):
    rows = []
    for b in range(blocks):
        shot = shot_sd * rng.normal()
        for l in range(levels):
            if keep(b, l, rng):
                rows.append((l, b, effects[l] + shot + rng.normal()))
    df = pd.DataFrame(rows, columns=["L", "B", "y"])
    # The values as the Rust test reads them: 12 significant digits of text.
    df["y"] = [float(f"{v:.12g}") for v in df["y"]]
    fit = smf.ols("y ~ C(L) + C(B)", data=df).fit()
    table = anova_lm(fit, typ=2)
    present = sorted(df["L"].unique())
    names = {l: f"C(L)[T.{l}]" for l in present[1:]}
    cov = fit.cov_params()
    contrasts = {str(l): float(fit.params[names[l]]) for l in present[1:]}
    se = {}
    for i, a in enumerate(present):
        for b in present[i + 1:]:
            if a == present[0]:
                v = cov.loc[names[b], names[b]]
            else:
                v = cov.loc[names[a], names[a]] + cov.loc[names[b], names[b]] - 2 * cov.loc[names[a], names[b]]
            se[f"{a},{b}"] = float(np.sqrt(v))
    return {
        "name": name,
        "levels": int(levels),
        "blocks": int(blocks),
        "level": [int(x) for x in df["L"]],
        "block": [int(x) for x in df["B"]],
        "values": [repr(float(v)) for v in df["y"]],
        "ss_levels": float(table.loc["C(L)", "sum_sq"]),
        "df_levels": float(table.loc["C(L)", "df"]),
        "f_levels": float(table.loc["C(L)", "F"]),
        "p_levels": float(table.loc["C(L)", "PR(>F)"]),
        "ss_blocks": float(table.loc["C(B)", "sum_sq"]),
        "df_blocks": float(table.loc["C(B)", "df"]),
        "f_blocks": float(table.loc["C(B)", "F"]),
        "p_blocks": float(table.loc["C(B)", "PR(>F)"]),
        "ss_resid": float(table.loc["Residual", "sum_sq"]),
        "df_resid": float(table.loc["Residual", "df"]),
        "contrasts": contrasts,
        "pair_se": se,
    }


rng = np.random.default_rng(RNG_STATE)
cases = [
    design("complete balanced, 5 levels x 6 blocks", rng, 5, 6, lambda b, l, r: True, 1.5,
           [0.0, 0.4, -0.3, 1.0, 0.2]),
    design("incomplete unbalanced, missing cells, blocks of one value", rng, 4, 15,
           lambda b, l, r: (b % 5 != 0 or l == 1) and r.uniform() > 0.25, 2.0,
           [0.0, 0.0, 0.8, -0.5]),
    design("300 shots x 8 cavities, 3 % of parts missing", rng, 8, 300,
           lambda b, l, r: r.uniform() > 0.03, 1.0, [0.0] * 7 + [0.3]),
]
out = {
    "generator": f"scripts/intrablock_reference.py, statsmodels {statsmodels.__version__}, numpy {np.__version__}",
    "cases": cases,
}
with open("tests/data/reference/intrablock.json", "w") as f:
    json.dump(out, f, indent=1)
print("wrote", len(cases), "cases")
