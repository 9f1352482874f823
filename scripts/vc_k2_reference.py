"""Fixture for the between-group interval of two groups (k = 2) and the within interval at one
within-group degree of freedom (samewise::stats::variance_components).

The modified large-sample (MLS) interval of Graybill and Wang (1980, JASA 75, 869-873) for
(MS_between - MS_within) / n0, in the form of Burdick and Graybill (1992, Confidence Intervals on
Variance Components, section 3.3), evaluated term by term with mpmath quantiles at 40 digits;
the within interval SS_within / chi2 quantiles. Data: invented (two suppliers of five values).
Prints the values the Rust test holds. Run: pip install mpmath && python3 scripts/vc_k2_reference.py
"""
import mpmath as mp

mp.mp.dps = 40


def chi2_q(p, df):
    a = mp.mpf(df) / 2
    f = lambda x: mp.gammainc(a, 0, x / 2, regularized=True) - p
    lo, hi = mp.mpf("1e-30"), mp.mpf(200)
    for _ in range(300):
        mid = (lo + hi) / 2
        if f(mid) > 0:
            hi = mid
        else:
            lo = mid
    return (lo + hi) / 2


def f_q(p, d1, d2):
    a, b = mp.mpf(d1) / 2, mp.mpf(d2) / 2
    lo, hi = mp.mpf(0), mp.mpf(1)
    for _ in range(300):
        mid = (lo + hi) / 2
        if mp.betainc(a, b, 0, mid, regularized=True) > p:
            hi = mid
        else:
            lo = mid
    t = (lo + hi) / 2
    return (mp.mpf(d2) / d1) * t / (1 - t)


def mls(groups):
    k = len(groups)
    n = sum(len(g) for g in groups)
    means = [mp.fsum(g) / len(g) for g in groups]
    grand = mp.fsum(mp.fsum(g) for g in groups) / n
    ssb = mp.fsum(len(g) * (m - grand) ** 2 for g, m in zip(groups, means))
    ssw = mp.fsum(mp.fsum((x - m) ** 2 for x in g) for g, m in zip(groups, means))
    n1, n2 = k - 1, n - k
    s1, s2 = ssb / n1, ssw / n2
    n0 = (n - mp.fsum(len(g) ** 2 for g in groups) / n) / (k - 1)
    lo_t, hi_t = mp.mpf("0.025"), mp.mpf("0.975")
    g1 = 1 - n1 / chi2_q(hi_t, n1)
    h1 = n1 / chi2_q(lo_t, n1) - 1
    g2 = 1 - n2 / chi2_q(hi_t, n2)
    h2 = n2 / chi2_q(lo_t, n2) - 1
    fh, fl = f_q(hi_t, n1, n2), f_q(lo_t, n1, n2)
    g12 = ((fh - 1) ** 2 - g1 ** 2 * fh ** 2 - h2 ** 2) / fh
    h12 = ((1 - fl) ** 2 - h1 ** 2 * fl ** 2 - g2 ** 2) / fl
    vl = g1 ** 2 * s1 ** 2 + h2 ** 2 * s2 ** 2 + g12 * s1 * s2
    vu = h1 ** 2 * s1 ** 2 + g2 ** 2 * s2 ** 2 + h12 * s1 * s2
    low = (s1 - s2 - mp.sqrt(vl)) / n0
    high = (s1 - s2 + mp.sqrt(vu)) / n0
    w_low, w_high = ssw / chi2_q(hi_t, n2), ssw / chi2_q(lo_t, n2)
    return low, high, w_low, w_high


for name, groups in [
    ("two suppliers", [[mp.mpf(x) for x in ["10.1", "10.4", "9.9", "10.2", "10.0"]],
                       [mp.mpf(x) for x in ["10.9", "11.2", "10.8", "11.0", "11.3"]]]),
    ("one within df", [[mp.mpf("1.0"), mp.mpf("2.0")], [mp.mpf("4.0")]]),
]:
    low, high, wl, wh = mls(groups)
    print(name, "between", mp.nstr(low, 17), mp.nstr(high, 17), "within", mp.nstr(wl, 17), mp.nstr(wh, 17))
