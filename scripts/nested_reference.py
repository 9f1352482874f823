"""Reference fixtures for samewise::stats::nested (two-stage nested ANOVA).

Writes tests/data/reference/nested.json:
- "datasets": invented data drawn from numpy.random.default_rng(RNG_STATE + i) (levels, subgroups
  within levels, values within subgroups; the model y = level + subgroup + noise, rounded to a
  0.01 gauge). For each dataset:
  * statsmodels `anova_lm(ols('y ~ C(A) + C(A):C(B)'))` (sequential = nested sums of squares,
    unique subgroup ids within a level) -> ss/df of A, A:B and the residual;
  * the same sums of squares as differences of least-squares residual sums (numpy lstsq) and
    degrees of freedom as matrix ranks, a cross-check independent of the anova table;
  * exact expected-mean-square coefficients k1, k2, k3 from linear algebra: with A_q the matrix
    of the quadratic form SS_q = y' A_q y (differences of projection matrices), Z_s, Z_l the
    subgroup and level incidence matrices, k1 = tr(A_sub Z_s Z_s') / df_sub,
    k2 = tr(A_lev Z_s Z_s') / df_lev, k3 = tr(A_lev Z_l Z_l') / df_lev (Searle, Casella and
    McCulloch 1992, E[y'Ay] = tr(AV) + mu'A mu);
  * F for A over the nested mean square (balanced: MS_A / MS_A:B from the anova table;
    unbalanced: over (k2/k1) MS_AB + (1 - k2/k1) MS_E with Satterthwaite df, the k from the traces)
    and its p from scipy.stats.f.sf;
  * balanced only: statsmodels MixedLM (REML) variance components: level (cov_re), subgroup
    within level (vcomp), residual (scale);
  * the modified large-sample intervals (Burdick and Graybill 1992, section 3.5) evaluated
    term by term with scipy quantiles: an independent evaluation of the published formula.
- "exact": rational-arithmetic (fractions.Fraction) sums of squares and components of the two
  published datasets (Montgomery's purity example, NIST furnace case study 3.5.1) from their CSVs.

Run: python3 scripts/nested_reference.py   (numpy, scipy, statsmodels, pandas)
"""
import json
import sys
import warnings
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import scipy
import scipy.stats as st
import statsmodels
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

ROOT = Path(__file__).resolve().parent.parent
RNG_STATE = 20261205
CONF = 0.95


def generate(i, sizes, sd_lev, sd_sub, sd_e):
    """sizes[i] = list of subgroup sizes of level i."""
    rng = np.random.default_rng(RNG_STATE + i)
    rows = []
    for a, subs in enumerate(sizes):
        la = rng.normal(0, sd_lev)
        for b, n in enumerate(subs):
            lb = rng.normal(0, sd_sub)
            for _ in range(n):
                y = round(10.0 + la + lb + rng.normal(0, sd_e), 2)
                rows.append((a, b, y))
    return rows


def rss(X, y):
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    r = y - X @ beta
    return float(r @ r), int(np.linalg.matrix_rank(X))


def proj(Z):
    return Z @ np.linalg.pinv(Z)


def analyse(rows):
    A = np.array([r[0] for r in rows])
    B = np.array([r[1] for r in rows])
    y = np.array([r[2] for r in rows], dtype=float)
    n = len(y)
    df = pd.DataFrame({"A": A, "B": B, "y": y})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = smf.ols("y ~ C(A) + C(A):C(B)", data=df).fit()
        tab = anova_lm(fit)
        # Model comparisons (df from the ranks of the fits), valid for any nesting pattern.
        cmp_sub = anova_lm(smf.ols("y ~ C(A)", data=df).fit(), fit)
        cmp_lev = anova_lm(smf.ols("y ~ 1", data=df).fit(), smf.ols("y ~ C(A)", data=df).fit())
    ones = np.ones((n, 1))
    levels = sorted(set(A))
    subs = sorted(set(zip(A, B)))
    Zl = np.array([[1.0 if a == l else 0.0 for l in levels] for a in A])
    Zs = np.array([[1.0 if (a, b) == s else 0.0 for s in subs] for a, b in zip(A, B)])
    rss0, r0 = rss(ones, y)
    rssl, rl = rss(Zl, y)
    rsss, rs = rss(Zs, y)
    J = proj(ones)
    Pl = proj(Zl)
    Ps = proj(Zs)
    A_lev = Pl - J
    A_sub = Ps - Pl
    df_lev, df_sub, df_e = rl - r0, rs - rl, n - rs
    k1 = float(np.trace(A_sub @ Zs @ Zs.T)) / df_sub if df_sub > 0 else None
    k2 = float(np.trace(A_lev @ Zs @ Zs.T)) / df_lev
    k3 = float(np.trace(A_lev @ Zl @ Zl.T)) / df_lev
    # sanity: A_sub has no level term, A_lev no within coefficient beyond df
    assert abs(np.trace(A_sub @ Zl @ Zl.T)) < 1e-9
    ss = {
        "levels": float(tab.loc["C(A)", "sum_sq"]),
        "subgroups": float(tab.loc["C(A):C(B)", "sum_sq"]),
        "within": float(tab.loc["Residual", "sum_sq"]),
    }
    dfs = {
        "levels": float(tab.loc["C(A)", "df"]),
        "subgroups": float(tab.loc["C(A):C(B)", "df"]),
        "within": float(tab.loc["Residual", "df"]),
    }
    lstsq_ss = {"levels": rss0 - rssl, "subgroups": rssl - rsss, "within": rsss}
    compare = {
        "ss": {
            "levels": float(cmp_lev["ss_diff"].iloc[1]),
            "subgroups": float(cmp_sub["ss_diff"].iloc[1]),
            "within": float(cmp_sub["ssr"].iloc[1]),
        },
        "df": {
            "levels": float(cmp_lev["df_diff"].iloc[1]),
            "subgroups": float(cmp_sub["df_diff"].iloc[1]),
            "within": float(cmp_sub["df_resid"].iloc[1]),
        },
    }
    # The single sequential table is right only when every level has the same number of
    # subgroups (no empty A x B column in the rank-deficient design); otherwise null.
    same_b = len({sum(1 for s in subs_ if s[0] == l) for l in set(A) for subs_ in [sorted(set(zip(A, B)))]}) == 1
    out = {
        "anova_lm": {"ss": ss, "df": dfs} if same_b else None,
        "anova_lm_compare": compare,
        "lstsq": {"ss": lstsq_ss, "df": {"levels": df_lev, "subgroups": df_sub, "within": df_e}},
        "k": {"k1": k1, "k2": k2, "k3": k3},
    }
    ms_l = lstsq_ss["levels"] / df_lev
    ms_s = lstsq_ss["subgroups"] / df_sub
    ms_e = lstsq_ss["within"] / df_e
    sizes = [sum(1 for x in zip(A, B) if x == s) for s in subs]
    equal = len(set(sizes)) == 1
    if equal:
        f = float(tab.loc["C(A)", "mean_sq"] / tab.loc["C(A):C(B)", "mean_sq"])
        df2 = dfs["subgroups"]
        den = float(tab.loc["C(A):C(B)", "mean_sq"])
        c1, c2 = 1.0, 0.0
    else:
        c1 = k2 / k1
        c2 = 1.0 - c1
        den = c1 * ms_s + c2 * ms_e
        df2 = den**2 / ((c1 * ms_s) ** 2 / df_sub + (c2 * ms_e) ** 2 / df_e)
        f = ms_l / den
    out["levels_test"] = {
        "f": f,
        "df1": float(df_lev),
        "df2": float(df2),
        "p": float(st.f.sf(f, df_lev, df2)),
        "method": "exact" if equal else "satterthwaite",
    }
    out["subgroups_test"] = {"f": ms_s / ms_e, "p": float(st.f.sf(ms_s / ms_e, df_sub, df_e))}
    sub_raw = (ms_s - ms_e) / k1
    lev_raw = (ms_l - c1 * ms_s - c2 * ms_e) / k3
    out["components"] = {"levels_raw": lev_raw, "subgroups_raw": sub_raw, "within": ms_e}
    a = (1 - CONF) / 2
    out["intervals"] = {
        "within": [
            lstsq_ss["within"] / st.chi2.ppf(1 - a, df_e),
            lstsq_ss["within"] / st.chi2.ppf(a, df_e),
        ],
        "subgroups": mls([(1 / k1, ms_s, df_sub), (-1 / k1, ms_e, df_e)], a),
        "levels": mls(
            [(1 / k3, ms_l, df_lev), (-c1 / k3, ms_s, df_sub)]
            + ([(-c2 / k3, ms_e, df_e)] if c2 != 0 else []),
            a,
        ),
    }
    return out, df


def mls(terms, a):
    """Burdick and Graybill (1992) section 3.5, MLS for sum c_q S_q, unrestricted in sign;
    returned before truncation at zero."""
    Fu = lambda p, n1, n2=None: st.chi2.ppf(p, n1) / n1 if n2 is None else st.f.ppf(p, n1, n2)
    G = [1 - 1 / Fu(1 - a, d) for _, _, d in terms]
    H = [1 / Fu(a, d) - 1 for _, _, d in terms]
    P = [i for i, t in enumerate(terms) if t[0] > 0]
    N = [i for i, t in enumerate(terms) if t[0] < 0]
    cs = [abs(c) * s for c, s, _ in terms]
    d = [t[2] for t in terms]
    theta = sum(c * s for c, s, _ in terms)
    vl = sum(G[q] ** 2 * cs[q] ** 2 for q in P) + sum(H[r] ** 2 * cs[r] ** 2 for r in N)
    vu = sum(H[q] ** 2 * cs[q] ** 2 for q in P) + sum(G[r] ** 2 * cs[r] ** 2 for r in N)
    for q in P:
        for r in N:
            fh = Fu(1 - a, d[q], d[r])
            fl = Fu(a, d[q], d[r])
            vl += ((fh - 1) ** 2 - G[q] ** 2 * fh**2 - H[r] ** 2) / fh * cs[q] * cs[r]
            vu += ((1 - fl) ** 2 - H[q] ** 2 * fl**2 - G[r] ** 2) / fl * cs[q] * cs[r]

    def star(S):
        v = 0.0
        for x, q in enumerate(S):
            for t in S[x + 1 :]:
                g = 1 - 1 / Fu(1 - a, d[q] + d[t])
                v += (
                    (g**2 * (d[q] + d[t]) ** 2 / (d[q] * d[t]) - G[q] ** 2 * d[q] / d[t] - G[t] ** 2 * d[t] / d[q])
                    / (len(S) - 1)
                    * cs[q]
                    * cs[t]
                )
        return v

    vl += star(P)
    vu += star(N)
    return [theta - vl**0.5, theta + vu**0.5]


def mixedlm(df):
    # The REML optimum, best log-likelihood over several optimizers (they agree to 5-6 digits).
    best = None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for meth in ["bfgs", "nm", "cg", "lbfgs"]:
            m = smf.mixedlm("y ~ 1", df, groups="A", re_formula="1", vc_formula={"sub": "0 + C(B)"})
            r = m.fit(reml=True, method=[meth], maxiter=5000)
            if r.converged and (best is None or r.llf > best.llf):
                best = r
    r = best
    return {
        "method": r.method if hasattr(r, "method") else None,
        "levels": float(r.cov_re.iloc[0, 0]),
        "subgroups": float(r.vcomp[0]),
        "within": float(r.scale),
        "converged": bool(r.converged),
    }


def exact(rows):
    """Rational sums of squares and ANOVA components; rows (level, subgroup, 'decimal text')."""
    data = {}
    for a, b, v in rows:
        data.setdefault(a, {}).setdefault(b, []).append(Fraction(v))
    allv = [x for s in data.values() for g in s.values() for x in g]
    N = len(allv)
    grand = sum(allv) / N
    ss_l = ss_s = ss_e = Fraction(0)
    B = 0
    s_nij2_ni = Fraction(0)
    s_nij2 = 0
    s_ni2 = 0
    for subs in data.values():
        vals = [x for g in subs.values() for x in g]
        ni = len(vals)
        mi = sum(vals) / ni
        ss_l += ni * (mi - grand) ** 2
        s_ni2 += ni * ni
        for g in subs.values():
            B += 1
            mij = sum(g) / len(g)
            ss_s += len(g) * (mij - mi) ** 2
            ss_e += sum((x - mij) ** 2 for x in g)
            s_nij2_ni += Fraction(len(g) ** 2, ni)
            s_nij2 += len(g) ** 2
    a = len(data)
    dl, ds, de = a - 1, B - a, N - B
    k1 = (N - s_nij2_ni) / ds
    k2 = (s_nij2_ni - Fraction(s_nij2, N)) / dl
    k3 = (N - Fraction(s_ni2, N)) / dl
    msl, mss, mse = ss_l / dl, ss_s / ds, ss_e / de
    sub = (mss - mse) / k1
    lev = (msl - k2 / k1 * mss - (1 - k2 / k1) * mse) / k3
    f = float
    return {
        "ss": {"levels": f(ss_l), "subgroups": f(ss_s), "within": f(ss_e)},
        "df": {"levels": dl, "subgroups": ds, "within": de},
        "ms": {"levels": f(msl), "subgroups": f(mss), "within": f(mse)},
        "k": {"k1": f(k1), "k2": f(k2), "k3": f(k3)},
        "f_levels": f(msl / mss),
        "f_subgroups": f(mss / mse),
        "components": {"levels_raw": f(lev), "subgroups_raw": f(sub), "within": f(mse)},
    }


def read_csv(path, cols):
    lines = path.read_text().strip().splitlines()[1:]
    out = []
    for line in lines:
        parts = line.split(",")
        out.append(cols(parts))
    return out


def main():
    specs = [
        ("balanced_a4_b3_n4", [[4] * 3] * 4, 1.0, 0.7, 0.5),
        ("unbalanced_sizes_a4_b3", [[3, 1, 5], [2, 2, 4], [1, 3, 3], [5, 2, 1]], 0.8, 0.6, 0.5),
        (
            "unbalanced_general_a5",
            [[3, 2], [1, 4, 2, 5], [6], [2, 2, 3], [1, 1, 4, 2, 3]],
            0.8,
            0.6,
            0.5,
        ),
        ("balanced_negative_components", [[3] * 4] * 5, 0.0, 0.0, 1.0),
    ]
    datasets = []
    for i, (name, sizes, sl, ss, se) in enumerate(specs):
        rows = generate(i, sizes, sl, ss, se)
        expected, df = analyse(rows)
        if name == "balanced_a4_b3_n4":
            expected["mixedlm_reml"] = mixedlm(df)
        levels = []
        for a, subs in enumerate(sizes):
            levels.append([[r[2] for r in rows if r[0] == a and r[1] == b] for b in range(len(subs))])
        datasets.append({"name": name, "levels": levels, "expected": expected})
    purity = read_csv(
        ROOT / "tests/data/reference/purity_suppliers_batches.csv", lambda p: (p[0], p[1], p[2])
    )
    furnace = read_csv(ROOT / "tests/data/reference/furnace.csv", lambda p: (p[0], p[1], p[3]))
    out = {
        "generator": f"scripts/nested_reference.py; Python {sys.version.split()[0]}, numpy {np.__version__}, "
        f"scipy {scipy.__version__}, statsmodels {statsmodels.__version__}, pandas {pd.__version__}",
        "rng_state": RNG_STATE,
        "confidence": CONF,
        "datasets": datasets,
        "exact": {"purity": exact(purity), "furnace": exact(furnace)},
    }
    path = ROOT / "tests/data/reference/nested.json"
    path.write_text(json.dumps(out, indent=1) + "\n")
    for d in datasets:
        e = d["expected"]
        print(d["name"], e["anova_lm"], e["lstsq"], e["k"], e.get("mixedlm_reml"), e["components"], file=sys.stderr)


if __name__ == "__main__":
    main()
