//! Variance components of the one-way random-effects model `y_ij = mu + a_i + e_ij`
//! (`a_i ~ N(0, between)`, `e_ij ~ N(0, within)`), estimated by the ANOVA (method-of-moments)
//! estimator, valid for unbalanced groups.
//!
//! With `k` groups, `N` values, `MS_between`, `MS_within` of the one-way ANOVA and
//! `n0 = (N - sum n_i^2 / N) / (k - 1)` (Searle, Casella and McCulloch 1992, Variance Components,
//! section 3.6; `n0 = n` for balanced data):
//!
//! - `between_raw = (MS_between - MS_within) / n0` (may be negative), `between = max(0, raw)`;
//! - `within = MS_within`; `share_between = icc = between / (between + within)`.
//!
//! Intervals at level `confidence` (two-sided, equal tails):
//! - within: `SS_within / chi2_(1 - a/2; N - k) .. SS_within / chi2_(a/2; N - k)` (exact);
//! - ICC: the F-based interval of Searle (1971, Linear Models, section 9.7):
//!   `(F/F_U - 1) / (F/F_U - 1 + n0) .. (F/F_L - 1) / (F/F_L - 1 + n0)`, `F = MS_between / MS_within`,
//!   `F_U, F_L` the upper and lower `a/2` points of F(k - 1, N - k); exact for balanced data, an
//!   approximation (with n0) for unbalanced data;
//! - between: the modified large-sample (MLS) method of Graybill and Wang (1980, "Confidence
//!   intervals on nonnegative linear combinations of variances", JASA 75, 869-873) in the form
//!   given by Burdick and Graybill (1992, Confidence Intervals on Variance Components, section
//!   3.3 and 5.2 for unbalanced data with n0), approximate.
//!
//! Lower ends below zero are truncated at zero, with a note. The chi-square and F quantiles are
//! [`super::distributions::chi_square_quantile`] and [`super::distributions::f_quantile`],
//! accurate to 12 significant digits or better from 1 to 1e7 degrees of freedom (checked against
//! mpmath), so the intervals are defined for two groups (k = 2) and one within-group degree of
//! freedom too.

use super::describe::Summary;
use super::distributions::{chi_square_quantile, f_quantile};
use super::{Stat, Unavailable};

/// A two-sided interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    /// Lower end.
    pub low: f64,
    /// Upper end.
    pub high: f64,
}

/// One-way random-effects variance components (ANOVA estimator) with intervals.
#[derive(Debug, Clone, PartialEq)]
pub struct VarianceComponents {
    /// Between-group variance, truncated at zero.
    pub between: f64,
    /// Between-group variance before truncation (negative when MS_between < MS_within).
    pub between_raw: f64,
    /// Whether `between` was truncated at zero.
    pub is_truncated: bool,
    /// Within-group variance (MS_within).
    pub within: f64,
    /// `between / (between + within)`.
    pub share_between: f64,
    /// Intraclass correlation; with the ANOVA estimator it equals `share_between`.
    pub icc: f64,
    /// Effective group size `(N - sum n_i^2 / N) / (k - 1)`.
    pub n0: f64,
    /// Whether all groups have the same size.
    pub is_balanced: bool,
    /// Interval for `within` (chi-square, exact).
    pub within_ci: Interval,
    /// Interval for the ICC (Searle 1971, F-based).
    pub icc_ci: Stat<Interval>,
    /// Interval for `between` (modified large-sample method, Graybill and Wang 1980).
    pub between_ci: Stat<Interval>,
    /// Names of the methods used.
    pub method: &'static str,
    /// Notes: truncation, approximations.
    pub notes: Vec<String>,
}

/// Method names reported in [`VarianceComponents::method`].
pub const METHOD: &str = "ANOVA (method-of-moments) estimator; within interval: chi-square; \
ICC interval: F-based (Searle 1971); between interval: modified large-sample (Graybill and Wang 1980)";

/// One-way random-effects variance components from group summaries (see the module docs for the
/// formulas). Needs at least two non-empty groups, `N - k >= 1` and values that are not all the
/// same; `confidence` in (0, 1). Otherwise Unavailable with the reason. Every group constant
/// (zero within-group variance, groups differing) gives within 0, share and ICC 1, the within
/// interval [0, 0] and no ICC interval.
pub fn one_way_random(groups: &[Summary], confidence: f64) -> Stat<VarianceComponents> {
    if !(confidence > 0.0 && confidence < 1.0) {
        return Err(Unavailable::new(format!(
            "confidence must lie strictly between 0 and 1 (got {confidence})"
        )));
    }
    let groups: Vec<&Summary> = groups.iter().filter(|g| g.n > 0).collect();
    let k = groups.len();
    if k < 2 {
        return Err(Unavailable::new(format!(
            "variance components need at least 2 groups with values (got {k})"
        )));
    }
    let n_total: f64 = groups.iter().map(|g| g.n as f64).sum();
    let df_between = (k - 1) as f64;
    let df_within = n_total - k as f64;
    if df_within < 1.0 {
        return Err(Unavailable::new(
            "variance components need at least one group with 2 or more values (N - k = 0)",
        ));
    }
    let grand = groups.iter().fold(Summary::new(), |acc, g| {
        acc.merge(&Summary {
            n: g.n,
            mean: g.mean,
            m2: 0.0,
            min: g.mean,
            max: g.mean,
        })
    });
    let ss_between = grand.m2;
    let ss_within: f64 = groups.iter().map(|g| g.m2).sum();
    let ms_between = ss_between / df_between;
    let ms_within = ss_within / df_within;
    if !(ms_within.is_finite() && ms_within >= 0.0) || (ms_within == 0.0 && ms_between <= 0.0) {
        return Err(Unavailable::new(
            "every value is the same: variance components are undefined",
        ));
    }
    let sum_sq: f64 = groups.iter().map(|g| (g.n as f64).powi(2)).sum();
    let n0 = (n_total - sum_sq / n_total) / df_between;
    let is_balanced = groups.iter().all(|g| g.n == groups[0].n);
    let between_raw = (ms_between - ms_within) / n0;
    let is_truncated = between_raw < 0.0;
    let between = between_raw.max(0.0);
    let within = ms_within;
    let share_between = between / (between + within);
    let mut notes = Vec::new();
    if is_truncated {
        notes.push(format!(
            "between-group estimate {between_raw} is negative (MS_between < MS_within) and was truncated at 0"
        ));
    }
    if !is_balanced {
        notes.push(format!(
            "unbalanced groups: effective group size n0 = {n0}; the ICC and between-group intervals are approximations"
        ));
    }
    let alpha = 1.0 - confidence;
    let tail_lo = 0.5 * alpha;
    let tail_hi = 1.0 - 0.5 * alpha;

    let chi_within = |p: f64, q: f64| {
        chi_square_quantile(p, q, df_within).map_err(|e| {
            Unavailable::new(format!("chi-square for the within interval: {}", e.reason))
        })
    };
    let within_ci = Interval {
        low: ss_within / chi_within(tail_hi, tail_lo)?,
        high: ss_within / chi_within(tail_lo, tail_hi)?,
    };

    // Every group constant (a coarse gauge): all variance is between groups; the ICC's F-based
    // interval needs a finite F.
    let icc_ci = if ms_within == 0.0 {
        Err(Unavailable::new(
            "every group is constant, so F is infinite and the ICC is 1 without an interval",
        ))
    } else {
        icc_interval(
            ms_between / ms_within,
            df_between,
            df_within,
            n0,
            tail_lo,
            tail_hi,
            &mut notes,
        )
    };
    let between_ci = between_interval(
        ms_between, ms_within, df_between, df_within, n0, tail_lo, tail_hi, &mut notes,
    );
    Ok(VarianceComponents {
        between,
        between_raw,
        is_truncated,
        within,
        share_between,
        icc: share_between,
        n0,
        is_balanced,
        within_ci,
        icc_ci,
        between_ci,
        method: METHOD,
        notes,
    })
}

/// Searle (1971) F-based interval for the ICC.
fn icc_interval(
    f: f64,
    df1: f64,
    df2: f64,
    n0: f64,
    tail_lo: f64,
    tail_hi: f64,
    notes: &mut Vec<String>,
) -> Stat<Interval> {
    let f_upper = f_quantile(tail_hi, tail_lo, df1, df2)?;
    let f_lower = f_quantile(tail_lo, tail_hi, df1, df2)?;
    let end = |ratio: f64| (ratio - 1.0) / (ratio - 1.0 + n0);
    let mut low = end(f / f_upper);
    let high = end(f / f_lower).max(0.0);
    if low < 0.0 {
        notes.push(format!("ICC interval lower end {low} truncated at 0"));
        low = 0.0;
    }
    Ok(Interval { low, high })
}

/// Modified large-sample interval for `(MS_between - MS_within) / n0` (Graybill and Wang 1980;
/// Burdick and Graybill 1992).
#[allow(clippy::too_many_arguments)]
fn between_interval(
    s1: f64,
    s2: f64,
    n1: f64,
    n2: f64,
    n0: f64,
    tail_lo: f64,
    tail_hi: f64,
    notes: &mut Vec<String>,
) -> Stat<Interval> {
    // F_(p; n, inf) = chi2_(p; n) / n.
    let chi = |df: f64, p: f64, q: f64| -> Stat<f64> { Ok(chi_square_quantile(p, q, df)? / df) };
    let g1 = 1.0 - 1.0 / chi(n1, tail_hi, tail_lo)?;
    let h1 = 1.0 / chi(n1, tail_lo, tail_hi)? - 1.0;
    let g2 = 1.0 - 1.0 / chi(n2, tail_hi, tail_lo)?;
    let h2 = 1.0 / chi(n2, tail_lo, tail_hi)? - 1.0;
    let f_hi = f_quantile(tail_hi, tail_lo, n1, n2)?;
    let f_lo = f_quantile(tail_lo, tail_hi, n1, n2)?;
    let g12 = ((f_hi - 1.0).powi(2) - g1 * g1 * f_hi * f_hi - h2 * h2) / f_hi;
    let h12 = ((1.0 - f_lo).powi(2) - h1 * h1 * f_lo * f_lo - g2 * g2) / f_lo;
    let diff = s1 - s2;
    let v_low = g1 * g1 * s1 * s1 + h2 * h2 * s2 * s2 + g12 * s1 * s2;
    let v_high = h1 * h1 * s1 * s1 + g2 * g2 * s2 * s2 + h12 * s1 * s2;
    if !(v_low >= 0.0 && v_high >= 0.0) {
        return Err(Unavailable::new(format!(
            "between-group interval: the modified large-sample variance term is negative (lower {v_low}, upper {v_high})"
        )));
    }
    let mut low = (diff - v_low.sqrt()) / n0;
    let high = ((diff + v_high.sqrt()) / n0).max(0.0);
    if low < 0.0 {
        notes.push(format!(
            "between-group interval lower end {low} truncated at 0"
        ));
        low = 0.0;
    }
    Ok(Interval { low, high })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;
    use statrs::distribution::{ChiSquared, ContinuousCDF, FisherSnedecor};

    fn load(name: &str) -> Vec<Summary> {
        let path = format!(
            "{}/tests/data/variance_components/{name}",
            env!("CARGO_MANIFEST_DIR")
        );
        let text = std::fs::read_to_string(&path).expect("read data");
        let mut groups: Vec<(String, Vec<f64>)> = Vec::new();
        for line in text.lines().skip(1).filter(|l| !l.trim().is_empty()) {
            let (g, v) = line.split_once(',').expect("two columns");
            let v: f64 = v.trim().parse().expect("number");
            match groups.iter_mut().find(|(name, _)| name == g) {
                Some((_, values)) => values.push(v),
                None => groups.push((g.to_string(), vec![v])),
            }
        }
        groups.iter().map(|(_, v)| Summary::from_slice(v)).collect()
    }

    // Davies and Goldsmith (1972) section 6.4, dyestuff: MSB 11271.5, MSW 2451.25, between 1764.05
    // (tests/data/variance_components/README.md).
    #[test]
    fn dyestuff_published_components() {
        let vc = one_way_random(&load("dyestuff.csv"), 0.95).unwrap();
        assert!(lre(vc.within, 2451.25) >= 12.0, "{}", vc.within);
        assert!(lre(vc.between, 1764.05) >= 12.0, "{}", vc.between);
        assert!(lre(vc.between * vc.n0 + vc.within, 11271.5) >= 12.0);
        assert!(vc.is_balanced && !vc.is_truncated && vc.n0 == 5.0);
        assert!(lre(vc.icc, 1764.05 / (1764.05 + 2451.25)) >= 12.0);
        assert_eq!(vc.icc, vc.share_between);
    }

    // The intervals against the textbook formulas evaluated separately here, with the quantiles
    // taken from statrs directly (within: chi-square; ICC: Searle 1971; between: Burdick and
    // Graybill 1992, MLS). No published interval for these data was found to compare with.
    #[test]
    fn dyestuff_intervals_follow_the_formulas() {
        let vc = one_way_random(&load("dyestuff.csv"), 0.95).unwrap();
        let (msb, msw, n1, n2, n0) = (11271.5, 2451.25, 5.0, 24.0, 5.0);
        let chi24 = ChiSquared::new(n2).unwrap();
        assert!(lre(vc.within_ci.low, msw * n2 / chi24.inverse_cdf(0.975)) >= 10.0);
        assert!(lre(vc.within_ci.high, msw * n2 / chi24.inverse_cdf(0.025)) >= 10.0);
        let f = FisherSnedecor::new(n1, n2).unwrap();
        let ratio = msb / msw;
        let lo = ratio / f.inverse_cdf(0.975);
        let hi = ratio / f.inverse_cdf(0.025);
        let icc = vc.icc_ci.as_ref().unwrap();
        assert!(lre(icc.low, ((lo - 1.0) / (lo - 1.0 + n0)).max(0.0)) >= 10.0 || icc.low == 0.0);
        assert!(lre(icc.high, (hi - 1.0) / (hi - 1.0 + n0)) >= 10.0);
        // MLS, written out term by term.
        let chi5 = ChiSquared::new(n1).unwrap();
        let g1 = 1.0 - n1 / chi5.inverse_cdf(0.975);
        let h1 = n1 / chi5.inverse_cdf(0.025) - 1.0;
        let g2 = 1.0 - n2 / chi24.inverse_cdf(0.975);
        let h2 = n2 / chi24.inverse_cdf(0.025) - 1.0;
        let (fu, fl) = (f.inverse_cdf(0.975), f.inverse_cdf(0.025));
        let g12 = ((fu - 1.0).powi(2) - g1 * g1 * fu * fu - h2 * h2) / fu;
        let h12 = ((1.0 - fl).powi(2) - h1 * h1 * fl * fl - g2 * g2) / fl;
        let low =
            (msb - msw - (g1 * g1 * msb * msb + h2 * h2 * msw * msw + g12 * msb * msw).sqrt()) / n0;
        let high =
            (msb - msw + (h1 * h1 * msb * msb + g2 * g2 * msw * msw + h12 * msb * msw).sqrt()) / n0;
        let between = vc.between_ci.as_ref().unwrap();
        assert!(
            lre(between.high, high) >= 10.0,
            "{} vs {high}",
            between.high
        );
        if low > 0.0 {
            assert!(lre(between.low, low) >= 10.0);
        } else {
            assert_eq!(between.low, 0.0);
        }
        assert!(between.low <= vc.between && vc.between <= between.high);
    }

    // Box and Tiao (1973) section 5.1.2, dyestuff2: negative ANOVA estimate -1.3219 (printed to 4
    // decimals), truncated at 0 with a note.
    #[test]
    fn dyestuff2_negative_estimate_is_truncated() {
        let vc = one_way_random(&load("dyestuff2.csv"), 0.95).unwrap();
        assert!(
            (vc.between_raw - -1.3219).abs() < 5e-5,
            "{}",
            vc.between_raw
        );
        assert!(vc.is_truncated && vc.between == 0.0 && vc.icc == 0.0);
        assert!(vc.notes.iter().any(|n| n.contains("truncated")));
    }

    // Pinheiro and Bates (2000) ch. 1, rails: rail variance 615.31111, residual 16.16667 (printed).
    #[test]
    fn rail_published_components() {
        let vc = one_way_random(&load("rail.csv"), 0.95).unwrap();
        assert!((vc.between - 615.31111).abs() < 1e-5, "{}", vc.between);
        assert!((vc.within - 16.16667).abs() < 1e-5, "{}", vc.within);
    }

    // Hand check, unbalanced: sizes 2, 3, 5 (N = 10): n0 = (10 - 38/10) / 2 = 3.1.
    #[test]
    fn unbalanced_n0_and_note() {
        let groups = [
            Summary::from_slice(&[1.0, 2.0]),
            Summary::from_slice(&[2.0, 4.0, 6.0]),
            Summary::from_slice(&[5.0, 6.0, 7.0, 8.0, 9.0]),
        ];
        let vc = one_way_random(&groups, 0.95).unwrap();
        assert!(lre(vc.n0, 3.1) >= 14.0);
        assert!(!vc.is_balanced && vc.notes.iter().any(|n| n.contains("approximation")));
    }

    #[test]
    fn degenerate_input_is_unavailable() {
        let one = [Summary::from_slice(&[1.0, 2.0])];
        assert!(one_way_random(&one, 0.95).is_err());
        let flat = [
            Summary::from_slice(&[1.0, 1.0]),
            Summary::from_slice(&[2.0, 2.0]),
        ];
        // Every group constant, the groups differing: defined (hand check: grand mean 1.5,
        // SS_between = 4 x 0.25 = 1 on 1 df, n0 = 2, so between_raw = 0.5), all of it between.
        let vc = one_way_random(&flat, 0.95).unwrap();
        assert_eq!(
            (vc.between_raw, vc.within, vc.share_between),
            (0.5, 0.0, 1.0)
        );
        assert_eq!((vc.within_ci.low, vc.within_ci.high), (0.0, 0.0));
        assert!(vc.icc_ci.unwrap_err().reason.contains("constant"));
        let same = [
            Summary::from_slice(&[1.0, 1.0]),
            Summary::from_slice(&[1.0, 1.0]),
        ];
        assert!(one_way_random(&same, 0.95)
            .unwrap_err()
            .reason
            .contains("same"));
        let singles = [Summary::from_slice(&[1.0]), Summary::from_slice(&[2.0])];
        assert!(one_way_random(&singles, 0.95).is_err());
        let ok = [
            Summary::from_slice(&[1.0, 2.0]),
            Summary::from_slice(&[2.0, 4.0]),
        ];
        assert!(one_way_random(&ok, 1.5).is_err());
    }

    // Two groups (two suppliers, two shifts): the MLS between-group interval is defined for
    // k = 2. Reference: the Burdick and Graybill (1992, section 3.3) formula of Graybill and
    // Wang's (1980) interval evaluated term by term with mpmath quantiles at 40 digits
    // (scripts/vc_k2_reference.py; invented data). And one within-group degree of freedom: the
    // within interval is defined, the between lower end (negative) is truncated at 0 with a note.
    #[test]
    fn two_groups_and_one_within_df() {
        let g = [
            Summary::from_slice(&[10.1, 10.4, 9.9, 10.2, 10.0]),
            Summary::from_slice(&[10.9, 11.2, 10.8, 11.0, 11.3]),
        ];
        let vc = one_way_random(&g, 0.95).unwrap();
        let b = vc.between_ci.unwrap();
        assert!(lre(b.low, 0.076_042_313_465_619_71) >= 10.0, "{}", b.low);
        assert!(lre(b.high, 430.917_287_984_723_17) >= 10.0, "{}", b.high);
        assert!(lre(vc.within_ci.low, 0.018_249_688_212_882_65) >= 10.0);
        assert!(lre(vc.within_ci.high, 0.146_807_123_037_251_54) >= 10.0);
        let g = [
            Summary::from_slice(&[1.0, 2.0]),
            Summary::from_slice(&[4.0]),
        ];
        let vc = one_way_random(&g, 0.95).unwrap();
        assert!(lre(vc.within_ci.low, 0.099_524_547_602_706_43) >= 10.0);
        assert!(lre(vc.within_ci.high, 509.129_134_859_835) >= 10.0);
        let b = vc.between_ci.unwrap();
        assert_eq!(b.low, 0.0);
        assert!(lre(b.high, 3_181.430_089_448_732_4) >= 10.0, "{}", b.high);
        assert!(
            vc.notes.iter().any(|n| n.contains("truncated at 0")),
            "{:?}",
            vc.notes
        );
    }
}
