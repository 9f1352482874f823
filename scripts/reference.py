#!/usr/bin/env python3
"""Write the reference fixtures in tests/data/reference/ from general-purpose libraries.

Regenerate with `python3 scripts/reference.py` (from the repository root, or anywhere:
paths are relative to this file). Options: `--only oneway,fdr` writes only the named files.

Every dataset is drawn from numpy's Generator (PCG64) with a fixed random state per dataset
(RNG_STATE + an offset), so the output is the same on every run with the same library versions.
Generated values are rounded to a gauge resolution and written as the shortest decimal that
round-trips (Python float repr), so the JSON text is exactly the decimal value the libraries saw.

Which library function gives each value is stated next to the code and in tests/data/README.md.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
import warnings
from decimal import Decimal
from fractions import Fraction
from itertools import combinations
from pathlib import Path

import mpmath
import numpy as np
import pandas as pd
import pingouin
import scipy
import statsmodels
from scipy import stats
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.multicomp import pairwise_tukeyhsd
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.oneway import anova_oneway

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "tests" / "data" / "reference"
GH_CI_ALL_PAIRS_MAX_K = 10  # Games-Howell intervals for every pair up to this many groups
P_ADJ_FLOOR = 1e-5  # pair p-values below this from scipy (1 - cdf, quadrature epsabs 1e-11) are omitted (null)
RNG_STATE = 20261201  # fixed random state; dataset i uses RNG_STATE + i

GENERATOR = (
    f"scripts/reference.py; python {sys.version.split()[0]}, numpy {np.__version__}, "
    f"scipy {scipy.__version__}, statsmodels {statsmodels.__version__}, "
    f"pingouin {pingouin.__version__}, pandas {pd.__version__}, mpmath {mpmath.__version__}"
)


def log(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


def lre(x: float, ref: float) -> float:
    """Log relative error (number of agreeing significant digits), capped at 16."""
    if x == ref:
        return 16.0
    if ref == 0:
        return -math.log10(abs(x)) if x != 0 else 16.0
    e = abs(x - ref) / abs(ref)
    return min(16.0, -math.log10(e)) if e > 0 else 16.0


def fnum(x) -> float | None:
    """A plain Python float, or None for values the reference cannot give (NaN, inf)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def write_json(name: str, obj) -> None:
    OUT.mkdir(parents=True, exist_ok=True)
    path = OUT / name
    text = json.dumps(obj, indent=1, allow_nan=False)
    # keep long value lists on few lines: the file stays readable and small
    path.write_text(text + "\n")
    log(f"wrote {path.relative_to(ROOT)} ({path.stat().st_size} bytes)")


def compact_json(name: str, obj) -> None:
    """Write JSON with one line per list of numbers (smaller than indent=1 for big datasets)."""
    OUT.mkdir(parents=True, exist_ok=True)
    path = OUT / name
    text = json.dumps(obj, separators=(",", ":"), allow_nan=False)
    path.write_text(text + "\n")
    # check that the text round-trips every number exactly
    back = json.loads(path.read_text())
    assert back == obj, f"{name}: JSON does not round-trip"
    log(f"wrote {path.relative_to(ROOT)} ({path.stat().st_size} bytes)")


# --------------------------------------------------------------------------------------------
# one-way datasets
# --------------------------------------------------------------------------------------------


def gauge(x, resolution: str):
    """Round to a gauge resolution given as decimal text ("0.001"); returns Python floats whose
    repr is the rounded decimal."""
    places = -Decimal(resolution).as_tuple().exponent
    step = float(resolution)
    out = []
    for v in np.asarray(x, dtype=float):
        r = round(round(v / step) * step, places)
        out.append(float(repr(r)) if r != 0 else 0.0)
    return out


def has_spread(groups) -> bool:
    return all(len(set(g)) > 1 for g in groups)


def make_datasets():
    """The one-way datasets: list of dicts {name, description, lsl, usl, groups, origin?}."""
    ds = []

    def add(name, description, groups, lsl=None, usl=None, origin=None, names=None):
        assert has_spread(groups), f"{name}: a group has zero spread"
        k = len(groups)
        width = max(2, len(str(k)))
        if names is None:
            names = [f"g{str(i + 1).zfill(width)}" for i in range(k)]
        ds.append(
            dict(
                name=name,
                description=description,
                lsl=lsl,
                usl=usl,
                origin=origin,
                groups=[{"name": n, "values": list(v)} for n, v in zip(names, groups)],
            )
        )

    def rng(i):
        return np.random.default_rng(RNG_STATE + i)

    # 1 balanced, small: 3 groups x 5, gauge 0.001 mm
    r = rng(1)
    add(
        "balanced_k3_n5",
        "balanced, 3 groups x 5, normal, means 10.000/10.004/10.010 mm, sd 0.005, gauge 0.001",
        [gauge(r.normal(m, 0.005, 5), "0.001") for m in (10.0, 10.004, 10.010)],
        lsl=9.98,
        usl=10.02,
    )
    # 2 balanced 5 x 10
    r = rng(2)
    add(
        "balanced_k5_n10",
        "balanced, 5 groups x 10, normal, one group shifted by 1 sd, gauge 0.001",
        [gauge(r.normal(25.0 + (0.02 if i == 3 else 0.0), 0.02, 10), "0.001") for i in range(5)],
        lsl=24.9,
        usl=25.1,
    )
    # 3 unbalanced 4 groups
    r = rng(3)
    add(
        "unbalanced_k4",
        "unbalanced, n = 3/7/12/25, normal, small mean differences, gauge 0.001",
        [gauge(r.normal(m, 0.01, n), "0.001") for m, n in zip((5.0, 5.004, 4.998, 5.006), (3, 7, 12, 25))],
    )
    # 4 k = 2
    r = rng(4)
    add(
        "two_groups",
        "k = 2, n = 8 and 11, normal, gauge 0.001 (Tukey-Kramer equals the t-test for one pair)",
        [gauge(r.normal(m, 0.004, n), "0.001") for m, n in ((2.5, 8), (2.506, 11))],
    )
    # 5 n = 2 per group
    r = rng(5)
    groups = []
    while len(groups) < 6:
        g = gauge(r.normal(1.0 + 0.003 * len(groups), 0.004, 2), "0.001")
        if len(set(g)) > 1:
            groups.append(g)
    add("pairs_k6_n2", "6 groups of n = 2 (smallest group size), normal, gauge 0.001", groups)
    # 6 k = 40 balanced
    r = rng(6)
    add(
        "balanced_k40_n6",
        "balanced, 40 groups x 6, normal with random group effects (sd 0.5 of the within sd), gauge 0.01",
        [gauge(r.normal(50.0 + r.normal(0, 0.05), 0.1, 6), "0.01") for _ in range(40)],
    )
    # 7 k = 40 unbalanced
    r = rng(7)
    ns = r.integers(2, 21, 40)
    groups = []
    for n in ns:
        while True:
            g = gauge(r.normal(7.5, 0.02, int(n)), "0.001")
            if len(set(g)) > 1:
                break
        groups.append(g)
    add("unbalanced_k40", f"unbalanced, 40 groups with n from {min(ns)} to {max(ns)}, no true difference, gauge 0.001", groups)
    # 8 big: 3 x 5000
    r = rng(8)
    add(
        "big_k3_n5000",
        "balanced, 3 groups x 5000 (N = 15000, Shapiro-Wilk not applicable), means differ by 0.02 sd, gauge 0.001",
        [gauge(r.normal(12.0 + d, 0.05, 5000), "0.001") for d in (0.0, 0.001, 0.0)],
        lsl=11.8,
        usl=12.2,
    )
    # 9 heavy ties: coarse gauge
    r = rng(9)
    add(
        "coarse_gauge_ties",
        "unbalanced n = 15/20/25/18, sd 0.02 read on a 0.01 gauge (few distinct values, many ties)",
        [gauge(r.normal(m, 0.02, n), "0.01") for m, n in zip((3.0, 3.01, 3.0, 3.02), (15, 20, 25, 18))],
    )
    # 10 unequal variances, unbalanced, small n with the big variance
    r = rng(10)
    add(
        "unequal_variances",
        "unbalanced n = 30/20/10/6, sd 0.5/1/4/8 (largest spread in the smallest group), gauge 0.01",
        [gauge(r.normal(m, s, n), "0.01") for m, s, n in zip((100, 100.5, 101, 104), (0.5, 1, 4, 8), (30, 20, 10, 6))],
    )
    # 11 outlier
    r = rng(11)
    groups = [gauge(r.normal(20.0, 0.01, 12), "0.001") for _ in range(4)]
    groups[2][5] = round(groups[2][5] + 0.15, 3)  # one reading 15 sd high
    add("one_outlier", "balanced 4 x 12, normal sd 0.01, one value in group 3 is 15 sd high, gauge 0.001", groups)
    # 12 skewed
    r = rng(12)
    add(
        "lognormal_skewed",
        "unbalanced n = 25/40/30, lognormal (sigma 0.8) roughness-like data, gauge 0.01",
        [gauge(r.lognormal(mu, 0.8, n), "0.01") for mu, n in zip((0.0, 0.2, 0.1), (25, 40, 30))],
        usl=10.0,
    )
    # 13 negative variance-component estimate: group means pulled together
    r = rng(13)
    groups = []
    for n in (8, 10, 9, 12, 7):
        g = r.normal(0, 0.01, n)
        g = g - g.mean() + 4.0 + r.normal(0, 0.0004)
        groups.append(gauge(g, "0.001"))
    add(
        "negative_variance_component",
        "unbalanced n = 8/10/9/12/7, group means pulled together so MS_between < MS_within (F < 1)",
        groups,
    )
    # 14 huge F
    r = rng(14)
    add(
        "huge_f",
        "balanced 4 x 40, means 30 sd apart: F so large that p < 1e-200 (tail accuracy of p)",
        [gauge(r.normal(1.0 + 0.3 * i, 0.01, 40), "0.001") for i in range(4)],
    )
    # 15 large offset
    r = rng(15)
    groups = [gauge(r.normal(1e6 + m, 0.01, n), "0.0001") for m, n in zip((0.0, 0.005, -0.003, 0.0), (10, 14, 9, 12))]
    add(
        "large_offset",
        "values about 1e6 with spread 0.01, gauge 0.0001 (libraries were given value - 1000000, computed exactly)",
        groups,
        origin="1000000",
    )
    # 16 moderate effect, unbalanced, k = 8
    r = rng(16)
    add(
        "moderate_k8",
        "unbalanced k = 8, n from 4 to 15, two groups shifted by 0.8 sd: p near the usual 0.05 line",
        [gauge(r.normal(0.5 + (0.004 if i in (2, 6) else 0), 0.005, n), "0.001") for i, n in enumerate((4, 9, 15, 6, 11, 8, 5, 13))],
    )
    # 17 extreme imbalance including a big group
    r = rng(17)
    add(
        "extreme_imbalance",
        "k = 3 with n = 2/50/2000, unequal sd 0.01/0.02/0.015, gauge 0.001 (N = 2052, Shapiro-Wilk applies)",
        [gauge(r.normal(m, s, n), "0.001") for m, s, n in zip((8.0, 8.01, 8.005), (0.01, 0.02, 0.015), (2, 50, 2000))],
    )
    # 18 negative values around zero (offsets from a nominal), with labels needing care
    r = rng(18)
    add(
        "deviations_around_zero",
        "deviations from nominal (negative and positive), n = 10/10/10, named groups with non-ASCII labels",
        [gauge(r.normal(m, 0.003, 10), "0.001") for m in (-0.002, 0.0, 0.003)],
        lsl=-0.01,
        usl=0.01,
        names=["Linie Süd", "line 2, east", "ライン3"],
    )
    return ds


def exact_values(group_values, origin: str | None):
    """Exact rationals of the decimal values (their repr is the decimal text), minus the origin."""
    o = Fraction(Decimal(origin)) if origin else Fraction(0)
    return [[Fraction(Decimal(repr(v))) - o for v in g] for g in group_values]


def exact_anova(xs):
    """Sums of squares in exact rational arithmetic (no library needed for a sum)."""
    n = [len(g) for g in xs]
    N = sum(n)
    k = len(xs)
    sums = [sum(g, Fraction(0)) for g in xs]
    total = sum(sums, Fraction(0))
    ss_total = sum((x * x for g in xs for x in g), Fraction(0)) - total * total / N
    ss_within = sum(
        (sum((x * x for x in g), Fraction(0)) - s * s / len(g) for g, s in zip(xs, sums)),
        Fraction(0),
    )
    ss_between = ss_total - ss_within
    dfb, dfw = k - 1, N - k
    msb, msw = ss_between / dfb, ss_within / dfw
    f = msb / msw
    return dict(
        ss_between=ss_between,
        ss_within=ss_within,
        ss_total=ss_total,
        df_between=dfb,
        df_within=dfw,
        ms_between=msb,
        ms_within=msw,
        f=f,
    )


def lib_input(dataset):
    """The float arrays given to the libraries: values, or value - origin (exact, then rounded once)."""
    if dataset["origin"] is None:
        return [np.array(g["values"], dtype=float) for g in dataset["groups"]]
    xs = exact_values([g["values"] for g in dataset["groups"]], dataset["origin"])
    return [np.array([float(x) for x in g]) for g in xs]


def oneway_expected(dataset, report):
    arrays = lib_input(dataset)
    names = [g["name"] for g in dataset["groups"]]
    k = len(arrays)
    N = sum(len(a) for a in arrays)
    exp = {}
    cross = {}

    # ---- ANOVA table: SS exact (rational), F and p from scipy.stats.f_oneway
    ex = exact_anova(exact_values([g["values"] for g in dataset["groups"]], dataset["origin"]))
    fo = stats.f_oneway(*arrays)
    f_exact = float(ex["f"])
    report.append(("anova.f: f_oneway vs exact", lre(float(fo.statistic), f_exact)))
    ms_within = float(ex["ms_within"])
    exp["anova"] = dict(
        ss_between=float(ex["ss_between"]),
        ss_within=float(ex["ss_within"]),
        ss_total=float(ex["ss_total"]),
        df_between=float(ex["df_between"]),
        df_within=float(ex["df_within"]),
        ms_between=float(ex["ms_between"]),
        ms_within=ms_within,
        f=float(fo.statistic),
        p=float(fo.pvalue),
        r_squared=float(ex["ss_between"] / ex["ss_total"]),
        resid_sd=math.sqrt(ms_within),
    )
    # cross-checks: statsmodels anova_lm on ols("y ~ C(g)"), p from the exact F
    df = pd.DataFrame({"y": np.concatenate(arrays), "g": np.repeat(names, [len(a) for a in arrays])})
    table = anova_lm(ols("y ~ C(g)", data=df).fit())
    cross["anova_lm"] = dict(
        ss_between=float(table["sum_sq"].iloc[0]),
        ss_within=float(table["sum_sq"].iloc[1]),
        f=float(table["F"].iloc[0]),
        p=float(table["PR(>F)"].iloc[0]),
    )
    cross["p_from_exact_f"] = float(stats.f.sf(f_exact, ex["df_between"], ex["df_within"]))
    report.append(("anova.ss_between: anova_lm vs exact", lre(cross["anova_lm"]["ss_between"], exp["anova"]["ss_between"])))
    report.append(("anova.ss_within: anova_lm vs exact", lre(cross["anova_lm"]["ss_within"], exp["anova"]["ss_within"])))
    report.append(("anova.p: f_oneway vs f.sf(exact F)", lre(exp["anova"]["p"], cross["p_from_exact_f"])))

    # ---- Welch: statsmodels anova_oneway(use_var="unequal", welch_correction=True)
    w = anova_oneway(arrays, use_var="unequal", welch_correction=True)
    exp["welch"] = dict(f=float(w.statistic), df1=float(w.df[0]), df2=float(w.df[1]), p=float(w.pvalue))
    pw = pingouin.welch_anova(data=df, dv="y", between="g")
    cross["welch_pingouin"] = dict(
        f=float(pw["F"].iloc[0]), df1=float(pw["ddof1"].iloc[0]), df2=float(pw["ddof2"].iloc[0]), p=float(pw["p_unc"].iloc[0])
        if "p_unc" in pw.columns else float(pw["p-unc"].iloc[0])
    )
    sw = stats.f_oneway(*arrays, equal_var=False)
    cross["welch_scipy"] = dict(f=float(sw.statistic), p=float(sw.pvalue))
    for key in ("f", "df2", "p"):
        report.append((f"welch.{key}: pingouin vs statsmodels", lre(cross["welch_pingouin"][key], exp["welch"][key])))
    report.append(("welch.f: scipy f_oneway(equal_var=False) vs statsmodels", lre(sw.statistic, exp["welch"]["f"])))

    # ---- Kruskal-Wallis (tie-corrected): scipy.stats.kruskal
    kw = stats.kruskal(*arrays)
    exp["kruskal_wallis"] = dict(h=float(kw.statistic), p=float(kw.pvalue))
    # ---- Levene (mean), Brown-Forsythe (median), Bartlett
    lv = stats.levene(*arrays, center="mean")
    bf = stats.levene(*arrays, center="median")
    bt = stats.bartlett(*arrays)
    exp["levene"] = dict(statistic=float(lv.statistic), p=float(lv.pvalue))
    exp["brown_forsythe"] = dict(statistic=float(bf.statistic), p=float(bf.pvalue))
    exp["bartlett"] = dict(statistic=float(bt.statistic), p=float(bt.pvalue))
    # ---- Shapiro-Wilk on the residuals (value - group mean), 3 <= N <= 5000
    if 3 <= N <= 5000:
        resid = np.concatenate([a - a.mean() for a in arrays])
        sh = stats.shapiro(resid)
        exp["shapiro_wilk"] = dict(w=float(sh.statistic), p=float(sh.pvalue))
    else:
        exp["shapiro_wilk"] = None

    # ---- Tukey-Kramer: scipy.stats.tukey_hsd; statsmodels pairwise_tukeyhsd as a cross-check
    th = stats.tukey_hsd(*arrays)
    ci = th.confidence_interval(0.95)
    sm = pairwise_tukeyhsd(df["y"], df["g"], alpha=0.05)
    sm_table = pd.DataFrame(sm._results_table.data[1:], columns=sm._results_table.data[0])
    sm_p = {}
    sm_diff = {}
    for g1, g2, md, padj in zip(sm.groupsunique[sm._multicomp.pairindices[0]], sm.groupsunique[sm._multicomp.pairindices[1]], sm.meandiffs, sm.pvalues):
        # statsmodels: meandiff = mean(group2) - mean(group1), groups sorted by label
        a, b = names.index(g1), names.index(g2)
        if a < b:
            sm_p[(a, b)], sm_diff[(a, b)] = float(padj), -float(md)
        else:
            sm_p[(b, a)], sm_diff[(b, a)] = float(padj), float(md)
    del sm_table
    tukey = []
    for a, b in combinations(range(k), 2):
        diff = float(th.statistic[a, b])
        row = dict(
            a=a,
            b=b,
            diff=diff,
            ci_low=float(ci.low[a, b]),
            ci_high=float(ci.high[a, b]),
            p_adj=float(th.pvalue[a, b]),
            p_adj_statsmodels=sm_p[(a, b)],
        )
        exact_diff = float(
            sum(exact_values([dataset["groups"][a]["values"]], dataset["origin"])[0], Fraction(0)) / len(arrays[a])
            - sum(exact_values([dataset["groups"][b]["values"]], dataset["origin"])[0], Fraction(0)) / len(arrays[b])
        )
        report.append(("tukey.diff: scipy vs exact", lre(diff, exact_diff)))
        report.append(("tukey.diff: statsmodels (sign mapped) vs scipy", lre(sm_diff[(a, b)], diff)))
        if row["p_adj"] > 1e-6:
            report.append(("tukey.p_adj: statsmodels vs scipy (p > 1e-6)", lre(row["p_adj_statsmodels"], row["p_adj"])))
        # Tukey-Kramer statistic q = |diff| / sqrt(MS_within / 2 (1/n_a + 1/n_b)), df = N - k
        q_tk = abs(diff) / math.sqrt(ms_within / 2 * (1 / len(arrays[a]) + 1 / len(arrays[b])))
        if row["p_adj"] < P_ADJ_FLOOR:
            # scipy's studentized_range.sf (1 - cdf, epsabs 1e-11) is not accurate here: the value
            # comes from the mpmath tail quadrature instead (ptukey_sf_mp)
            row["p_adj_scipy"] = row["p_adj"]
            row["p_adj"] = mp_tail(q_tk, k, N - k)
            row["p_adj_source"] = "mpmath"
            row["p_adj_statsmodels"] = None
        elif (a, b) == (0, 1) and dataset["name"] == "moderate_k8":
            # check of the route: the mpmath tail reproduces scipy's p for an ordinary pair
            report.append(("tukey.p_adj: mpmath tail vs scipy (one pair)", lre(mp_tail(q_tk, k, N - k), row["p_adj"])))
        tukey.append(row)
    exp["tukey"] = tukey

    # ---- Games-Howell: pingouin.pairwise_gameshowell; interval from scipy studentized_range.ppf
    gh = pingouin.pairwise_gameshowell(data=df, dv="y", between="g")
    gh_rows = {}
    for _, r in gh.iterrows():
        a, b = names.index(r["A"]), names.index(r["B"])
        sign = 1.0
        if a > b:
            a, b, sign = b, a, -1.0
        gh_rows[(a, b)] = dict(
            a=a, b=b, diff=sign * float(r["diff"]), se=float(r["se"]), t=sign * float(r["T"]), df=float(r["df"]), p_adj=float(r["pval"])
        )
    games = []
    for a, b in combinations(range(k), 2):
        row = gh_rows[(a, b)]
        report.append(("games_howell.diff: pingouin (sign mapped) vs scipy tukey diff", lre(row["diff"], float(th.statistic[a, b]))))
        # scipy's studentized_range.ppf takes about 1 s per call: with 40 groups (780 pairs) the
        # interval is computed only for the pairs of group 0 (the others' ci_low/ci_high are null)
        if k <= GH_CI_ALL_PAIRS_MAX_K or a == 0:
            half = float(stats.studentized_range.ppf(0.95, k, row["df"])) / math.sqrt(2) * row["se"]
            row["ci_low"] = row["diff"] - half
            row["ci_high"] = row["diff"] + half
        else:
            row["ci_low"] = None
            row["ci_high"] = None
        if row["p_adj"] < P_ADJ_FLOOR:
            row["p_adj_scipy"] = row["p_adj"]
            row["p_adj"] = mp_tail(abs(row["t"]) * math.sqrt(2), k, row["df"])
            row["p_adj_source"] = "mpmath"
        games.append(row)
    exp["games_howell"] = games

    # ---- effect sizes from the exact SS
    # eta^2 = SS_between / SS_total; omega^2 = (SS_between - df_between MS_within) / (SS_total + MS_within)
    exp["eta_squared"] = float(ex["ss_between"] / ex["ss_total"])
    exp["omega_squared"] = float((ex["ss_between"] - ex["df_between"] * ex["ms_within"]) / (ex["ss_total"] + ex["ms_within"]))
    return exp, cross


def mp_tail(q, k, df):
    with mpmath.workdps(TAIL_DPS):
        return float(ptukey_sf_mp(q, k, df))


def build_oneway():
    datasets = []
    overall = {}
    summary = []
    for d in make_datasets():
        t0 = time.time()
        report = []
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            exp, cross = oneway_expected(d, report)
        worst = {}
        for key, v in report:
            worst[key] = min(worst.get(key, 99), v)
        n = [len(g["values"]) for g in d["groups"]]
        summary.append((d["name"], len(n), min(n), max(n), exp["anova"]["p"], worst))
        log(f"  {d['name']}: k={len(n)} N={sum(n)} F={exp['anova']['f']:.6g} p={exp['anova']['p']:.3g} ({time.time() - t0:.1f}s)")
        for key, v in worst.items():
            if v < 9 or "mpmath" in key:
                log(f"    agreement {key}: {v:.1f} digits")
            if v < overall.get(key, (99.0, ""))[0]:
                overall[key] = (v, d["name"])
        out = dict(name=d["name"], description=d["description"], lsl=d["lsl"], usl=d["usl"])
        if d["origin"] is not None:
            out["origin"] = d["origin"]
        out["groups"] = d["groups"]
        out["expected"] = exp
        out["crosscheck"] = cross
        datasets.append(out)
    compact_json("oneway.json", {"generator": GENERATOR, "rng_state": RNG_STATE, "datasets": datasets})
    log("  agreement between routes, minimum over the datasets (digits, dataset):")
    for key, (v, name) in sorted(overall.items()):
        log(f"    {key}: {v:.1f} ({name})")
    return summary


# --------------------------------------------------------------------------------------------
# FDR
# --------------------------------------------------------------------------------------------


def build_fdr():
    r = np.random.default_rng(RNG_STATE + 100)
    cases = []

    def add(name, description, p):
        p = [float(x) for x in p]
        bh = multipletests(p, method="fdr_bh")[1]
        by = multipletests(p, method="fdr_by")[1]
        cases.append(dict(name=name, description=description, p=p, fdr_bh=[float(x) for x in bh], fdr_by=[float(x) for x in by]))

    bh1995 = pd.read_csv("/work/shared/refs/bh1995/bh1995_pvalues.csv")["p_value"].tolist() if Path(
        "/work/shared/refs/bh1995/bh1995_pvalues.csv"
    ).exists() else None
    if bh1995 is None:
        # the same 15 values, as printed in Benjamini and Hochberg (1995), section 4
        bh1995 = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000]
    add("bh1995", "the 15 p-values of Benjamini and Hochberg (1995), section 4, in the published order", bh1995)
    add("bh1995_shuffled", "the same 15 p-values in a random order (adjusted values are returned in input order)", list(r.permutation(bh1995)))
    add("single", "one p-value", [0.03])
    add("ties", "ties among the p-values, including a tie at the step-up boundary", [0.01, 0.01, 0.02, 0.02, 0.02, 0.04, 0.04, 0.5, 0.5, 0.9])
    add("zero_and_one", "p = 0 and p = 1 present", [0.0, 1.0, 0.0, 0.2, 1.0, 0.003, 0.5])
    add("all_ones", "every p = 1", [1.0] * 6)
    add("all_zero", "every p = 0", [0.0] * 4)
    add("tiny", "p-values down to 1e-300", [1e-300, 1e-200, 3e-150, 1e-20, 0.04, 0.2])
    add("random_uniform_250", "250 p-values uniform on (0, 1): all nulls true", r.uniform(0, 1, 250))
    mix = np.concatenate([r.uniform(0, 1, 200), r.beta(0.1, 8, 50)])
    add("random_mixed_250", "250 p-values: 200 uniform, 50 from Beta(0.1, 8) (true differences), shuffled", r.permutation(mix))
    rounded = np.round(r.beta(0.5, 1.5, 250), 3)
    add("random_rounded_250", "250 p-values rounded to 3 decimals (many ties), from Beta(0.5, 1.5)", rounded)
    write_json("fdr.json", {"generator": GENERATOR, "rng_state": RNG_STATE + 100, "cases": cases})


# --------------------------------------------------------------------------------------------
# studentized range
# --------------------------------------------------------------------------------------------
#
# Upper tail by double quadrature in mpmath at 30 digits:
#   P(Q > q; k, df) = int_0^inf g_df(s) W_k(q s) ds,  s = sqrt(chi2_df / df) with density
#   g_df(s) = df^(df/2) / (Gamma(df/2) 2^(df/2 - 1)) s^(df - 1) exp(-df s^2 / 2), and
#   W_k(w) = P(range of k standard normals > w)
#          = k int phi(z) [Q(z)^(k-1) - (Q(z) - Q(z + w))^(k-1)] dz   (z = the smallest value),
#   Q(z) = erfc(z / sqrt 2) / 2. The bracket is evaluated as -Q(z)^(k-1) expm1((k-1) log1p(-Q(z+w)/Q(z))),
#   so it keeps its relative accuracy when it is 1e-40: nothing in the sum cancels and the
#   result keeps relative accuracy in the far tail. Gauss-Legendre rules (mpmath nodes at 30
#   digits): inner 12 points on unit segments over the z range where the integrand is above 1e-24
#   of its peak; outer 2 x 24 points on [s* - 9 sigma, s* + 11 sigma] around the peak of the outer
#   integrand (s*^2 = (df - 1) / (df + q^2/2), from log W_k(w) ~ -w^2/4). For k = 2 the closed
#   form P(Q > q; 2, df) = 2 P(T_df > q / sqrt 2) = I_{df/(df + q^2/2)}(df/2, 1/2) (mpmath betainc)
#   is used, and serves as a check of the outer rule.

TAIL_DPS = 30
_GL_NODES = {}


def _gl_nodes(degree):
    from mpmath.calculus.quadrature import GaussLegendre

    if degree not in _GL_NODES:
        _GL_NODES[degree] = GaussLegendre(mpmath.mp).calc_nodes(degree, mpmath.mp.prec)
    return _GL_NODES[degree]


def _glquad(f, lo, hi, nseg, degree):
    mp = mpmath.mp
    nodes = _gl_nodes(degree)
    total = mp.mpf(0)
    step = (hi - lo) / nseg
    for i in range(nseg):
        h = step / 2
        c = lo + step * i + h
        acc = mp.mpf(0)
        for x, w in nodes:
            acc += w * f(c + h * x)
        total += h * acc
    return total


def _normal_q(z):
    return mpmath.erfc(z / mpmath.sqrt(2)) / 2


def range_sf(w, k, seg=1):
    """P(range of k standard normals > w), mpmath."""
    mp = mpmath.mp
    w = mp.mpf(w)
    if k == 2:
        return 2 * _normal_q(w / mp.sqrt(2))
    m = k - 1

    def f(z):
        a = _normal_q(z)
        return -mp.exp(-z * z / 2) * a**m * mp.expm1(m * mp.log1p(-_normal_q(z + w) / a))

    lo = min(int(mp.floor(-w / 2)) - 11, -12)
    hi = max(int(mp.ceil(-w / 2)) + 11, 12)
    grid = list(range(lo, hi + 1))
    fv = [f(mp.mpf(z)) for z in grid]
    fmax = max(fv)
    keep = [i for i in range(len(grid) - 1) if max(fv[i], fv[i + 1]) > fmax * mp.mpf(10) ** -24]
    assert keep[0] > 0 and keep[-1] + 2 < len(grid), (w, k)
    a, b = grid[keep[0]], grid[keep[-1] + 1]
    return k / mp.sqrt(2 * mp.pi) * _glquad(f, mp.mpf(a), mp.mpf(b), int((b - a) / seg), 3)


def ptukey_sf_mp(q, k, df, outer_seg=2, seg=1, closed_form_k2=True):
    """P(Q > q) of the studentized range, mpmath (see the comment above)."""
    mp = mpmath.mp
    q, df = mp.mpf(q), mp.mpf(df)
    if k == 2 and closed_form_k2:
        return mp.betainc(df / 2, mp.mpf(1) / 2, 0, df / (df + q * q / 2), regularized=True)
    logc = (df / 2) * mp.log(df) - mp.loggamma(df / 2) - (df / 2 - 1) * mp.log(2)

    def h(s):
        return mp.exp(logc + (df - 1) * mp.log(s) - df * s * s / 2) * range_sf(q * s, k, seg)

    s_star = mp.sqrt((df - 1) / (df + q * q / 2))
    sigma = 1 / mp.sqrt((df - 1) / s_star**2 + df + q * q / 2)
    lo = max(mp.mpf(0), s_star - 9 * sigma)
    hi = s_star + 11 * sigma
    return _glquad(h, lo, hi, outer_seg, 4)


PTUKEY_NOTES = {}


def build_ptukey():
    ks = (2, 3, 4, 5, 8, 10, 20, 50, 100)
    dfs = (1, 2, 2.5, 3, 5, 7.3, 10, 20, 60, 120, 1000)
    qs = (0.5, 1, 2, 3, 4, 5, 6, 8, 10)
    grid = []
    skipped_small = 0
    k2_worst = 99.0
    t0 = time.time()
    for k in ks:
        for df in dfs:
            for q in qs:
                cdf = float(stats.studentized_range.cdf(q, k, df))
                if k == 2:
                    # closed form: P(Q <= q; 2, df) = 1 - I_{df/(df+q^2/2)}(df/2, 1/2)
                    with mpmath.workdps(TAIL_DPS):
                        exact = 1 - mpmath.betainc(mpmath.mpf(df) / 2, 0.5, 0, mpmath.mpf(df) / (df + mpmath.mpf(q) ** 2 / 2), regularized=True)
                    k2_worst = min(k2_worst, lre(cdf, float(exact)))
                if cdf < 1e-3:
                    # scipy integrates with epsabs = 1e-11: a cdf below 1e-3 is not given to 8 digits
                    skipped_small += 1
                    continue
                grid.append(dict(q=float(q), k=float(k), df=float(df), cdf=cdf))
        log(f"  grid k={k}: {len(grid)} points so far ({time.time() - t0:.0f}s)")
    PTUKEY_NOTES["grid_points"] = len(grid)
    PTUKEY_NOTES["grid_skipped_small"] = skipped_small
    PTUKEY_NOTES["grid_k2_vs_closed_form"] = k2_worst
    log(f"  grid: {len(grid)} points, {skipped_small} skipped (cdf < 1e-3); k = 2 vs closed form >= {k2_worst:.1f} digits")

    quantiles = []
    t0 = time.time()
    for k in (2, 3, 5, 10, 20, 50, 100):
        for df in (2, 5, 7.3, 10, 20, 60, 1000):
            for p in ((0.9, 0.95, 0.99) if df in (5, 20, 1000) else (0.95,)):
                quantiles.append(dict(p=p, k=float(k), df=float(df), q=float(stats.studentized_range.ppf(p, k, df))))
    log(f"  quantiles: {len(quantiles)} ({time.time() - t0:.0f}s)")

    # tail (mpmath)
    tail_q = {10: (12, 30, 80, 150), 60: (8, 12, 18), 1000: (7, 10, 14, 20), 1e6: (7, 10, 14, 20)}
    body = [(5, 10, 3.0), (10, 60, 4.0), (50, 1000, 5.0), (5, 1e6, 3.0), (10, 1e6, 4.0), (50, 1e6, 5.5)]
    points = [(k, df, q) for df, qq in tail_q.items() for k in (2, 5, 10, 50) for q in qq] + body
    tail = []
    vs_scipy = []
    t0 = time.time()
    with mpmath.workdps(TAIL_DPS):
        for k, df, q in points:
            t1 = time.time()
            sf = ptukey_sf_mp(q, k, df)
            row = dict(q=float(q), k=float(k), df=float(df), sf=float(sf))
            tail.append(row)
            sc = float(stats.studentized_range.sf(q, k, df))
            if sf > 1e-6:
                vs_scipy.append((k, df, q, float(sf), sc, lre(sc, float(sf))))
            log(f"    k={k} df={df:g} q={q:g}: sf={float(sf):.16e} scipy={sc:.6e} ({time.time() - t1:.1f}s)")
        log(f"  tail: {len(tail)} points ({time.time() - t0:.0f}s)")
        # checks of the quadrature: the double integral for k = 2 against the closed form, and
        # a few points again with twice the outer and inner nodes
        checks = []
        for k, df, q in ((2, 10, 30), (2, 60, 12), (2, 1e6, 14)):
            a = ptukey_sf_mp(q, k, df)
            b = ptukey_sf_mp(q, k, df, closed_form_k2=False)
            checks.append(("k=2 double quadrature vs closed form", k, df, q, lre(float(b), float(a))))
        for k, df, q in ((10, 60, 12), (50, 1e6, 14)):
            a = ptukey_sf_mp(q, k, df)
            b = ptukey_sf_mp(q, k, df, outer_seg=4, seg=0.5)
            checks.append(("twice the nodes", k, df, q, lre(float(a), float(b))))
        for c in checks:
            log(f"  check {c[0]} k={c[1]} df={c[2]:g} q={c[3]:g}: {c[4]:.1f} digits")
    PTUKEY_NOTES["tail_checks"] = checks
    PTUKEY_NOTES["vs_scipy"] = vs_scipy
    for v in vs_scipy:
        log(f"  scipy vs mpmath k={v[0]} df={v[1]:g} q={v[2]:g}: sf {v[3]:.6e}: {v[5]:.1f} digits")
    write_json(
        "ptukey.json",
        {
            "generator": GENERATOR,
            "grid_function": "scipy.stats.studentized_range.cdf(q, k, df)",
            "quantiles_function": "scipy.stats.studentized_range.ppf(p, k, df)",
            "tail_function": f"mpmath double Gauss-Legendre quadrature at {TAIL_DPS} digits (k = 2: closed form with mpmath.betainc)",
            "grid": grid,
            "quantiles": quantiles,
            "tail": tail,
        },
    )


# --------------------------------------------------------------------------------------------
# noncentral F
# --------------------------------------------------------------------------------------------


def sig(x: float, digits: int = 6) -> float:
    """x rounded to a few significant digits (grid points are short decimals)."""
    return float(f"{x:.{digits - 1}e}")


NCF_CHECK = {}


def build_ncf():
    """scipy.stats.ncf.cdf(x, df1, df2, nc) at x = a few quantiles of that distribution (rounded to
    6 significant digits) and at the central F critical values f.ppf(0.95) and f.ppf(0.99), the
    points a power calculation uses. nc = 0 uses scipy.stats.f.cdf (scipy's ncf needs nc > 0)."""
    grid = []
    for df1 in (1, 2, 4, 9, 39):
        for df2 in (3, 10, 30, 100, 1000, 10000):
            for nc in (0, 0.5, 2, 10, 50, 200):
                dist = stats.f(df1, df2) if nc == 0 else stats.ncf(df1, df2, nc)
                xs = {sig(float(dist.ppf(p))) for p in (0.001, 0.05, 0.5, 0.95, 0.999)}
                xs |= {sig(float(stats.f.ppf(a, df1, df2))) for a in (0.95, 0.99)}
                for x in sorted(xs):
                    cdf = float(dist.cdf(x))
                    row = dict(x=x, df1=float(df1), df2=float(df2), nc=float(nc), cdf=cdf)
                    if nc == 0:
                        # scipy's ncf at nc = 0 must equal the central F
                        row_nc = float(stats.ncf.cdf(x, df1, df2, 0.0))
                        assert lre(row_nc, cdf) > 10 or abs(row_nc - cdf) < 1e-14, (x, df1, df2, row_nc, cdf)
                    grid.append(row)
    # spot check every 7th point against the Poisson mixture of regularized incomplete beta
    # functions in mpmath (50 digits): cdf = sum_j e^(-nc/2) (nc/2)^j / j! I_y(df1/2 + j, df2/2)
    worst = 99.0
    with mpmath.workdps(50):
        for row in grid[::7]:
            x, d1, d2, lam = (mpmath.mpf(row[key]) for key in ("x", "df1", "df2", "nc"))
            y = d1 * x / (d1 * x + d2)
            total, j = mpmath.mpf(0), 0
            while True:
                term = mpmath.exp(-lam / 2 + j * mpmath.log(lam / 2) - mpmath.loggamma(j + 1)) if lam > 0 else mpmath.mpf(j == 0)
                total += term * mpmath.betainc(d1 / 2 + j, d2 / 2, 0, y, regularized=True)
                j += 1
                if j > lam / 2 + 10 and term < mpmath.mpf(10) ** -40 or (lam == 0 and j > 0):
                    break
            worst = min(worst, lre(row["cdf"], float(total)))
    log(f"  ncf: scipy vs mpmath series on {len(grid[::7])} points: >= {worst:.1f} digits")
    NCF_CHECK["digits"] = worst
    NCF_CHECK["points"] = len(grid[::7])
    write_json("ncf.json", {"generator": GENERATOR, "function": "scipy.stats.ncf.cdf (nc = 0: scipy.stats.f.cdf)", "grid": grid})


# --------------------------------------------------------------------------------------------
# two-way
# --------------------------------------------------------------------------------------------


def twoway_table(table, names):
    rows = []
    for term, r in table.iterrows():
        rows.append(
            dict(
                term=names.get(term, term),
                term_statsmodels=term,
                sum_sq=float(r["sum_sq"]),
                df=float(r["df"]),
                F=fnum(r["F"]),
                p=fnum(r["PR(>F)"]),
            )
        )
    return {"rows": rows}


def build_twoway():
    r = np.random.default_rng(RNG_STATE + 200)
    datasets = []

    def add(name, description, a_levels, cells, effect):
        rows = []
        for i, a in enumerate(a_levels):
            for j, b in enumerate(("before", "after")):
                n = cells[i][j]
                mean = 50.0 + effect(i, j)
                for v in gauge(r.normal(mean, 0.02, n), "0.001"):
                    rows.append(dict(a=a, b=b, y=v))
        df = pd.DataFrame(rows)
        # statsmodels is given y - 50 (exact decimal difference, rounded once): the term sums of
        # squares are invariant to the shift and keep more digits; only the typ 3 Intercept row
        # depends on the origin, so that row comes from the fit on y itself.
        dc = df.assign(y=[float(Fraction(Decimal(repr(v))) - 50) for v in df["y"]])
        t2 = anova_lm(ols("y ~ C(a)*C(b)", data=dc).fit(), typ=2)
        t3 = anova_lm(ols("y ~ C(a, Sum)*C(b, Sum)", data=dc).fit(), typ=3)
        t3_raw = anova_lm(ols("y ~ C(a, Sum)*C(b, Sum)", data=df).fit(), typ=3)
        t3.loc["Intercept"] = t3_raw.loc["Intercept"]
        t2_raw = anova_lm(ols("y ~ C(a)*C(b)", data=df).fit(), typ=2)
        for term in t2.index:
            log(f"    typ 2 {term}: sum_sq on y vs on y - 50 agree to {lre(t2_raw.loc[term, 'sum_sq'], t2.loc[term, 'sum_sq']):.1f} digits")
        names2 = {"C(a)": "a", "C(b)": "b", "C(a):C(b)": "a:b", "Residual": "Residual"}
        names3 = {"Intercept": "Intercept", "C(a, Sum)": "a", "C(b, Sum)": "b", "C(a, Sum):C(b, Sum)": "a:b", "Residual": "Residual"}
        datasets.append(
            dict(
                name=name,
                description=description,
                rows=rows,
                typ2=twoway_table(t2, names2),
                typ3=twoway_table(t3, names3),
            )
        )
        log(f"  {name}: N={len(rows)}")

    add(
        "balanced_a4_b2",
        "factor a = machine M1..M4, b = before/after a change, 5 per cell, sd 0.02, after shifts M3 by 0.03",
        ["M1", "M2", "M3", "M4"],
        [[5, 5]] * 4,
        lambda i, j: 0.01 * i + (0.03 if (i == 2 and j == 1) else 0.0),
    )
    add(
        "unbalanced_a3_b2",
        "factor a = line L1..L3, b = before/after, unequal cells 4/9, 7/3, 12/6 (typ 2 and typ 3 differ), sd 0.02",
        ["L1", "L2", "L3"],
        [[4, 9], [7, 3], [12, 6]],
        lambda i, j: 0.015 * i + 0.01 * j + (0.02 if (i == 1 and j == 1) else 0.0),
    )
    add(
        "unbalanced_a5_b2",
        "factor a = cavity C1..C5, b = before/after, cells from 2 to 11, no interaction, sd 0.02",
        ["C1", "C2", "C3", "C4", "C5"],
        [[2, 5], [6, 3], [11, 4], [3, 3], [7, 9]],
        lambda i, j: 0.008 * i - 0.012 * j,
    )
    write_json("twoway.json", {"generator": GENERATOR, "rng_state": RNG_STATE + 200, "datasets": datasets})


# --------------------------------------------------------------------------------------------


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--only", default="oneway,fdr,ptukey,ncf,twoway")
    args = ap.parse_args()
    todo = args.only.split(",")
    builders = {"oneway": build_oneway, "fdr": build_fdr, "ncf": build_ncf, "ptukey": build_ptukey, "twoway": build_twoway}
    for name in todo:
        if name not in builders:
            log(f"no builder for {name} yet")
            continue
        t0 = time.time()
        log(f"{name}:")
        builders[name]()
        log(f"{name} done in {time.time() - t0:.1f}s")


if __name__ == "__main__":
    main()
