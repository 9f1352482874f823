"""Reference fixtures for samewise::stats::blocked (additive levels + blocks model, intrablock
analysis of incomplete, unbalanced block designs).

Writes tests/data/reference/blocked.json. Invented data (no published numbers), drawn from
numpy.random.default_rng(RNG_STATE + i) and rounded to a 0.01 gauge: a level offset per level, a
block (shot) deviation per block shared by its values, and part-to-part noise. For each dataset:
- statsmodels `anova_lm(ols('y ~ C(L) + C(B)').fit(), typ=2)`: Type II sums of squares and df of
  the levels, the blocks and the residual, with F and p;
- the same Type II sums of squares as differences of least-squares residual sums of nested fits
  (numpy lstsq) and the degrees of freedom as matrix ranks (valid for unconnected designs too);
- least-squares means: the statsmodels fit's predictions for every level in every block with
  values, averaged over the blocks (null when the design is not connected: not estimable);
- residuals of the statsmodels fit, in row order;
- every pair of present levels: the difference of least-squares means, its standard error from
  numpy's pseudo-inverse of C = diag(r) - N D^-1 N' times the residual mean square, the
  adjusted p = scipy.stats.studentized_range.sf(sqrt(2) |diff| / se, k, df_resid) and the
  simultaneous interval diff +- studentized_range.ppf(0.95, k, df) / sqrt(2) * se (null for a
  pair in two unconnected sets).

Run: python3 scripts/blocked_reference.py   (numpy, scipy, statsmodels, pandas)
"""
import json
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import scipy
import scipy.stats as st
import statsmodels
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

ROOT = Path(__file__).resolve().parent.parent
RNG_STATE = 20261206
CONF = 0.95


def draw(rng, cells, k, sd_level, sd_block, sd_e):
    """cells: list per block of the list of levels of its values (repeats = replicates)."""
    offs = rng.normal(0, sd_level, k)
    rows = []
    for b, levels in enumerate(cells):
        shot = rng.normal(0, sd_block)
        for l in levels:
            rows.append((int(l), b, round(float(20.0 + offs[l] + shot + rng.normal(0, sd_e)), 2)))
    order = rng.permutation(len(rows))  # rows need not come grouped by block
    return [rows[i] for i in order]


def complete(rng, k, nb, rep=1):
    return [[l for l in range(k) for _ in range(rep)] for _ in range(nb)]


def incomplete(rng, k, nb):
    cells = []
    for b in range(nb):
        size = int(rng.integers(1, k + 1))
        levels = list(rng.choice(k, size=size, replace=False))
        extra = [l for l in levels if rng.random() < 0.3]
        cells.append(levels + extra)
    return cells


def unconnected(rng):
    cells = []
    for b in range(10):
        cells.append(list(rng.choice([0, 1, 2], size=int(rng.integers(1, 4)), replace=False)))
    for b in range(8):
        cells.append(list(rng.choice([3, 4], size=int(rng.integers(1, 3)), replace=False)) + [4])
    return cells


def many(rng, k, nb):
    cells = []
    for b in range(nb):
        keep = [l for l in range(k) if rng.random() > 0.15]
        cells.append(keep if keep else [0])
    return cells


def rss(X, y):
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    e = y - X @ beta
    return float(e @ e), int(np.linalg.matrix_rank(X))


def analyse(rows, k, nb):
    L = np.array([r[0] for r in rows])
    B = np.array([r[1] for r in rows])
    y = np.array([r[2] for r in rows], dtype=float)
    n = len(y)
    df = pd.DataFrame({"L": L, "B": B, "y": y})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = smf.ols("y ~ C(L) + C(B)", data=df).fit()
        tab = anova_lm(fit, typ=2)
    levels = sorted(set(L))
    blocks = sorted(set(B))
    XL = np.array([[1.0 if l == v else 0.0 for v in levels] for l in L])
    XB = np.array([[1.0 if b == v else 0.0 for v in blocks] for b in B])
    full, rank_full = rss(np.hstack([XL, XB]), y)
    only_l, rank_l = rss(XL, y)
    only_b, rank_b = rss(XB, y)
    out = {
        "anova_lm_typ2": {
            "ss_levels": float(tab.loc["C(L)", "sum_sq"]),
            "df_levels": float(tab.loc["C(L)", "df"]),
            "ss_blocks": float(tab.loc["C(B)", "sum_sq"]),
            "df_blocks": float(tab.loc["C(B)", "df"]),
            "ss_resid": float(tab.loc["Residual", "sum_sq"]),
            "df_resid": float(tab.loc["Residual", "df"]),
            "f_levels": float(tab.loc["C(L)", "F"]),
            "p_levels": float(tab.loc["C(L)", "PR(>F)"]),
            "f_blocks": float(tab.loc["C(B)", "F"]),
            "p_blocks": float(tab.loc["C(B)", "PR(>F)"]),
        },
        "lstsq": {
            "ss_levels": only_b - full,
            "df_levels": rank_full - rank_b,
            "ss_blocks": only_l - full,
            "df_blocks": rank_full - rank_l,
            "ss_resid": full,
            "df_resid": n - rank_full,
        },
        "residuals": [float(v) for v in fit.resid],
    }
    # Connectedness: union-find over levels through blocks.
    parent = list(range(k))

    def find(x):
        while parent[x] != x:
            x = parent[x]
        return x

    for b in blocks:
        ls = sorted(set(L[B == b]))
        for l in ls[1:]:
            parent[find(l)] = find(ls[0])
    comp = {l: find(l) for l in levels}
    connected = len(set(comp.values())) == 1
    out["connected"] = connected
    if connected:
        lsm = []
        for l in range(k):
            if l not in levels:
                lsm.append(None)
                continue
            grid = pd.DataFrame({"L": [l] * len(blocks), "B": blocks})
            lsm.append(float(np.mean(fit.predict(grid))))
        out["ls_means"] = lsm
    else:
        out["ls_means"] = None
    # C = diag(r) - N D^-1 N'
    N = np.zeros((k, len(blocks)))
    for l, b in zip(L, B):
        N[l, blocks.index(b)] += 1
    C = np.diag(N.sum(axis=1)) - N @ np.diag(1 / N.sum(axis=0)) @ N.T
    G = np.linalg.pinv(C)
    df_res = n - rank_full
    ms = full / df_res
    kp = len(levels)
    qcrit = float(st.studentized_range.ppf(CONF, kp, df_res))
    params = fit.params
    tau = {l: (params.get(f"C(L)[T.{l}]", 0.0)) for l in levels}
    pairs = []
    for i, a in enumerate(levels):
        for b in levels[i + 1 :]:
            if comp[a] != comp[b]:
                pairs.append({"a": int(a), "b": int(b), "diff": None})
                continue
            diff = float(tau[a] - tau[b])
            se = float(np.sqrt(ms * (G[a, a] + G[b, b] - 2 * G[a, b])))
            pairs.append(
                {
                    "a": int(a),
                    "b": int(b),
                    "diff": diff,
                    "se": se,
                    "p_adj": float(st.studentized_range.sf(np.sqrt(2) * abs(diff) / se, kp, df_res)),
                    "ci_low": diff - qcrit / np.sqrt(2) * se,
                    "ci_high": diff + qcrit / np.sqrt(2) * se,
                }
            )
    out["pairs"] = pairs
    out["q_crit"] = qcrit
    return out


def main():
    specs = [
        ("complete_balanced_k4_b6", 4, lambda r: complete(r, 4, 6), 0.3, 1.0, 0.4),
        ("complete_replicated_k3_b5_n2", 3, lambda r: complete(r, 3, 5, 2), 0.3, 1.0, 0.4),
        ("incomplete_unbalanced_k5_b30", 5, lambda r: incomplete(r, 5, 30), 0.4, 1.5, 0.5),
        ("unconnected_k5", 5, unconnected, 0.4, 1.0, 0.5),
        ("many_blocks_k8_b300", 8, lambda r: many(r, 8, 300), 0.2, 1.5, 1.0),
    ]
    datasets = []
    for i, (name, k, make, sl, sb, se) in enumerate(specs):
        rng = np.random.default_rng(RNG_STATE + i)
        cells = make(rng)
        rows = draw(rng, cells, k, sl, sb, se)
        nb = len(cells)
        expected = analyse(rows, k, nb)
        datasets.append(
            {
                "name": name,
                "n_levels": k,
                "n_blocks": nb,
                "level": [r[0] for r in rows],
                "block": [r[1] for r in rows],
                "values": [r[2] for r in rows],
                "expected": expected,
            }
        )
        e = expected
        print(name, len(rows), e["anova_lm_typ2"], e["lstsq"], e["connected"], file=sys.stderr)
    out = {
        "generator": f"scripts/blocked_reference.py; Python {sys.version.split()[0]}, numpy {np.__version__}, "
        f"scipy {scipy.__version__}, statsmodels {statsmodels.__version__}, pandas {pd.__version__}",
        "rng_state": RNG_STATE,
        "confidence": CONF,
        "datasets": datasets,
    }
    (ROOT / "tests/data/reference/blocked.json").write_text(json.dumps(out) + "\n")


if __name__ == "__main__":
    main()
