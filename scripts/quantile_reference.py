"""Fixtures for samewise::stats::distributions::{chi_square_quantile, f_quantile}.

mpmath at 40 digits: the chi-square quantile solves gammainc(df/2, 0, x/2, regularized) = p
(or the upper tail = q), the F quantile solves betainc(df1/2, df2/2, 0, x) = p for the beta
variable x and returns (df2/df1) x / (1 - x); scipy's chi2.ppf only brackets the chi-square
root. Writes tests/data/reference/quantiles.json.
Run: pip install mpmath && python3 scripts/quantile_reference.py
"""
import json

import mpmath as mp
from scipy import stats

mp.mp.dps = 40

PS = ["1e-12", "1e-6", "0.001", "0.025", "0.5", "0.975", "0.999"]
QS = ["1e-6", "1e-12"]  # upper tails: p = 1 - q


def chi_q(df, p=None, q=None):
    a = mp.mpf(df) / 2
    # mpmath's lower series does not converge for huge a above the mean, so each tail is taken
    # from whichever function converges there (the complement is exact at 40 digits).
    def lower_series(t):
        # P(a, t) = t^a e^-t / Gamma(a + 1) * 1F1(1; a + 1; t) (DLMF 8.5.1, 13.2.2).
        return mp.exp(a * mp.log(t) - t - mp.loggamma(a + 1)) * mp.hyp1f1(1, a + 1, t, maxterms=10**8)

    def lower(t):
        return lower_series(t) if t < a else 1 - mp.gammainc(a, t, mp.inf, regularized=True)

    def upper(t):
        return mp.gammainc(a, t, mp.inf, regularized=True) if t >= a else 1 - lower_series(t)

    if p is not None:
        f = lambda x: lower(x / 2) - p
    else:
        f = lambda x: upper(x / 2) - q
    # scipy's quantile (about 12 digits) brackets the root; mpmath bisects inside the bracket.
    x0 = stats.chi2.ppf(float(p), float(df)) if p is not None else stats.chi2.isf(float(q), float(df))
    lo, hi = mp.mpf(x0) * (1 - mp.mpf("1e-4")), mp.mpf(x0) * (1 + mp.mpf("1e-4"))
    increasing = p is not None
    assert (f(lo) > 0) != increasing and (f(hi) > 0) == increasing, (df, p, q)
    return bisect(f, lo, hi, increasing)


def bisect(f, lo, hi, increasing):
    # Bisection in log space: robust at every df and tail.
    lo, hi = mp.log(lo), mp.log(hi)
    for _ in range(160):
        mid = (lo + hi) / 2
        v = f(mp.e ** mid)
        if (v > 0) == increasing:
            hi = mid
        else:
            lo = mid
    return mp.e ** ((lo + hi) / 2)


cases = []
for df in ["1", "1.5", "2", "3", "5", "10", "30", "100", "200", "252", "300", "320", "400", "1000",
           "10000", "100000", "1000000", "10000000"]:
    for p in PS:
        x = chi_q(mp.mpf(df), p=mp.mpf(p))
        cases.append({"df": float(df), "p": float(mp.mpf(p)), "q": float(1 - mp.mpf(p)), "x": float(x)})
    for q in QS:
        x = chi_q(mp.mpf(df), q=mp.mpf(q))
        cases.append({"df": float(df), "p": float(1 - mp.mpf(q)), "q": float(mp.mpf(q)), "x": float(x)})

f_cases = []
for df1 in ["1", "2", "5"]:
    for df2 in ["1", "2", "10", "58", "1000"]:
        for p in ["0.025", "0.975", "0.001"]:
            a, b = mp.mpf(df1) / 2, mp.mpf(df2) / 2
            pp = mp.mpf(p)
            g = lambda t: mp.betainc(a, b, 0, t, regularized=True) - pp
            lo, hi = mp.mpf(0), mp.mpf(1)
            for _ in range(300):
                mid = (lo + hi) / 2
                if g(mid) > 0:
                    hi = mid
                else:
                    lo = mid
            t = (lo + hi) / 2
            fq = (mp.mpf(df2) / mp.mpf(df1)) * t / (1 - t)
            f_cases.append({"df1": float(df1), "df2": float(df2), "p": float(pp), "q": float(1 - pp), "f": float(fq)})

out = {"source": f"mpmath {mp.__version__} at 40 digits (scripts/quantile_reference.py)",
       "chi_square": cases, "f": f_cases}
with open("tests/data/reference/quantiles.json", "w") as fh:
    json.dump(out, fh, indent=1)
print(len(cases), len(f_cases))
