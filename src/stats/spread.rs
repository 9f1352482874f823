//! Requirement checks on the spread of the groups: do the groups share one variance, and are
//! there outlying residuals?
//!
//! - Levene's test, mean-centred (Levene 1960): the one-way ANOVA F on `|x_ij - mean_i|`.
//! - Brown-Forsythe test, median-centred (Brown and Forsythe 1974, JASA 69, 364-367): the same on
//!   `|x_ij - median_i|`; robust to non-normal data, and the check that decides whether Welch leads.
//! - Bartlett's test (Bartlett 1937; NIST/SEMATECH e-Handbook section 1.3.5.7):
//!   `T = ((N - k) ln s_p^2 - Σ (n_i - 1) ln s_i^2) / (1 + (Σ 1/(n_i - 1) - 1/(N - k)) / (3 (k - 1)))`,
//!   chi-square with k - 1 df. The numerator is summed as `Σ (n_i - 1) ln(s_p^2 / s_i^2)`, which
//!   avoids the cancellation of two large terms.
//! - The ratio of the largest to the smallest group SD (rule of thumb: at most 2 is acceptable for
//!   the classic F; common practice, no published source).
//! - The count of residuals `x_ij - mean_i` beyond 3 residual SDs.

use super::anova::{check_groups, check_variances, one_way};
use super::describe::Summary;
use super::distributions::chi_square_sf;
use super::{Stat, TestResult, Unavailable};

/// Median of a slice (reorders it). NaN-free input is assumed; empty input gives NaN.
pub fn median_in_place(values: &mut [f64]) -> f64 {
    let n = values.len();
    if n == 0 {
        return f64::NAN;
    }
    let mid = n / 2;
    let (lower, upper_mid, _) = values.select_nth_unstable_by(mid, f64::total_cmp);
    let upper = *upper_mid;
    if n % 2 == 1 {
        upper
    } else {
        let lower_max = lower.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        lower_max + (upper - lower_max) / 2.0
    }
}

fn check_raw(groups: &[&[f64]]) -> Stat<()> {
    if groups.len() < 2 {
        return Err(Unavailable::new(format!(
            "needs at least two groups (got {})",
            groups.len()
        )));
    }
    if let Some(idx) = groups.iter().position(|g| g.is_empty()) {
        return Err(Unavailable::new(format!("group {} has no values", idx + 1)));
    }
    Ok(())
}

/// ANOVA F on absolute deviations from the given centres.
fn absolute_deviation_f(groups: &[&[f64]], centres: &[f64]) -> Stat<TestResult> {
    let z: Vec<Summary> = groups
        .iter()
        .zip(centres)
        .map(|(g, &c)| {
            if g.len() == 2 {
                // Both deviations equal |x1 - x2| / 2 exactly (mean and median coincide); computing
                // them from a rounded centre could make them differ by one unit in the last place.
                let half = (g[0] - g[1]).abs() / 2.0;
                return Summary::from_slice(&[half, half]);
            }
            let z: Vec<f64> = g.iter().map(|&v| (v - c).abs()).collect();
            Summary::from_slice(&z)
        })
        .collect();
    let table = one_way(&z).map_err(|e| {
        Unavailable::new(format!(
            "the absolute deviations give no usable ANOVA ({})",
            e.reason
        ))
    })?;
    Ok(TestResult {
        statistic: table.f,
        p: table.p,
        df1: Some(table.df_between),
        df2: Some(table.df_within),
    })
}

/// Levene's test with deviations from the group means. Unavailable in the same cases as the
/// ANOVA on the absolute deviations (for example every group of two values: each group's two
/// deviations are equal, so their within variance is zero).
pub fn levene_mean(groups: &[&[f64]]) -> Stat<TestResult> {
    check_raw(groups)?;
    let centres: Vec<f64> = groups.iter().map(|g| Summary::from_slice(g).mean).collect();
    absolute_deviation_f(groups, &centres)
}

/// Brown-Forsythe test: Levene's test with deviations from the group medians.
pub fn brown_forsythe(groups: &[&[f64]]) -> Stat<TestResult> {
    check_raw(groups)?;
    let mut scratch = Vec::new();
    let centres: Vec<f64> = groups
        .iter()
        .map(|g| {
            scratch.clear();
            scratch.extend_from_slice(g);
            median_in_place(&mut scratch)
        })
        .collect();
    absolute_deviation_f(groups, &centres)
}

/// Bartlett's test of equal variances (sensitive to non-normality). `statistic` is T, `df1 = k - 1`.
///
/// Unavailable when a group has fewer than two values or zero variance (ln 0).
pub fn bartlett(groups: &[Summary]) -> Stat<TestResult> {
    check_variances(groups, "its log-variance is undefined")?;
    let k = groups.len() as f64;
    let n: f64 = groups.iter().map(|g| g.n as f64).sum();
    let df_within = n - k;
    let pooled = groups.iter().map(|g| g.m2).sum::<f64>() / df_within;
    // The numerator (N - k) ln s_p^2 - sum (n_i - 1) ln s_i^2 is a small difference of large
    // terms when the variances are alike, and the order of the groups changed its last digits.
    // With r_i = s_i^2 / s_p^2 and sum (n_i - 1) r_i = N - k it equals
    // sum (n_i - 1) (r_i - 1 - ln r_i): every term is non-negative (so is the sum, never a
    // rounding residue below zero), and `x_minus_ln1p` keeps each to full relative precision.
    let numerator: f64 = groups
        .iter()
        .map(|g| {
            let dfi = g.n as f64 - 1.0;
            dfi * x_minus_ln1p((g.m2 / dfi - pooled) / pooled)
        })
        .sum();
    let inv_sum: f64 = groups.iter().map(|g| 1.0 / (g.n as f64 - 1.0)).sum();
    let c = 1.0 + (inv_sum - 1.0 / df_within) / (3.0 * (k - 1.0));
    let t = numerator / c;
    let df = k - 1.0;
    let p = chi_square_sf(t, df)?;
    Ok(TestResult {
        statistic: t,
        p,
        df1: Some(df),
        df2: None,
    })
}

/// `x - ln(1 + x)` for `x > -1`, to full relative precision: the alternating series
/// `x^2/2 - x^3/3 + ...` near zero, where the direct difference would lose digits.
fn x_minus_ln1p(x: f64) -> f64 {
    if x.abs() >= 0.1 {
        return x - x.ln_1p();
    }
    // |x| < 0.1: 15 terms past x^2/2 bring the remainder below 1e-17 of the sum.
    let mut sum = 0.0;
    let mut power = x * x;
    for j in 2..=17 {
        let term = power / j as f64;
        sum += if j % 2 == 0 { term } else { -term };
        power *= x;
    }
    sum
}

/// Ratio of the largest to the smallest group standard deviation.
///
/// Unavailable when a group has fewer than two values or the smallest SD is zero.
pub fn sd_ratio(groups: &[Summary]) -> Stat<f64> {
    check_groups(groups)?;
    let mut sds = Vec::with_capacity(groups.len());
    for (idx, g) in groups.iter().enumerate() {
        match g.sd() {
            Some(sd) => sds.push(sd),
            None => {
                return Err(Unavailable::new(format!(
                    "group {} has fewer than two values, so its SD is unknown",
                    idx + 1
                )))
            }
        }
    }
    let max = sds.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let min = sds.iter().copied().fold(f64::INFINITY, f64::min);
    if min <= 0.0 {
        return Err(Unavailable::new(
            "the smallest group SD is zero, so the ratio is undefined",
        ));
    }
    Ok(max / min)
}

/// Number of residuals `x_ij - mean_i` whose size exceeds `limit_sd` residual SDs.
///
/// `groups` and `summaries` are in the same order. Unavailable when `resid_sd` is not positive
/// and finite.
pub fn count_beyond(
    groups: &[&[f64]],
    summaries: &[Summary],
    resid_sd: f64,
    limit_sd: f64,
) -> Stat<usize> {
    if !(resid_sd.is_finite() && resid_sd > 0.0) {
        return Err(Unavailable::new(
            "the residual SD is not available, so outlying residuals cannot be counted",
        ));
    }
    let limit = limit_sd * resid_sd;
    Ok(groups
        .iter()
        .zip(summaries)
        .map(|(g, s)| g.iter().filter(|&&v| (v - s.mean).abs() > limit).count())
        .sum())
}

/// Share of a normal population beyond 3 SDs on either side, `2 Phi(-3)` (0.0026997960632601866,
/// the value of scipy.stats.norm.sf(3) * 2).
pub const NORMAL_BEYOND_3SD: f64 = 0.002_699_796_063_260_186_6;

/// The count of residuals beyond 3 SD against what normal residuals would give.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OutlierCount {
    /// Residuals beyond 3 residual SDs.
    pub n: usize,
    /// Expected under normality: `N * 2 Phi(-3)`.
    pub expected: f64,
    /// `P(X >= n)` for `X ~ Binomial(N, 2 Phi(-3))`: small when there are more far values than
    /// normal residuals give (1 when `n` is 0).
    pub p: f64,
}

/// Compares `n` residuals beyond 3 SD among `total` with the binomial count normal residuals
/// give (the upper tail `I_q(n, N - n + 1)`, Abramowitz and Stegun 26.5.24 and 6.6.4): 2,717
/// beyond 3 SD among 1,000,000 values is what normal data give (expected 2,700), not a sign of
/// outliers.
pub fn outlier_excess(n: usize, total: usize) -> OutlierCount {
    let q = NORMAL_BEYOND_3SD;
    let expected = total as f64 * q;
    let p = if n == 0 {
        1.0
    } else if n > total {
        0.0
    } else {
        super::distributions::beta_reg(n as f64, (total - n + 1) as f64, q, 1.0 - q)
    };
    OutlierCount { n, expected, p }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // x - ln(1 + x) from mpmath 1.3.0 at 40 digits (mpf(x) - log1p(mpf(x))), run 2026-12-05.
    #[test]
    #[allow(clippy::excessive_precision)] // the reference digits as mpmath printed them
    fn x_minus_ln1p_against_mpmath() {
        for (x, want) in [
            (1e-8, 4.999_999_966_666_666_9e-17),
            (-3e-5, 4.500_090_002_025_048_6e-10),
            (1e-4, 4.999_666_691_664_666_8e-9),
            (-0.05, 0.001_293_294_387_550_533_4),
            (0.0999, 0.004_680_733_419_066_091_2),
            (0.1, 0.004_689_820_195_675_14),
            (0.5, 0.094_534_891_891_835_618),
            (-0.9, 1.402_585_092_994_045_7),
            (3.0, 1.613_705_638_880_109_4),
        ] {
            let got = x_minus_ln1p(x);
            assert!(lre(got, want) >= 14.0, "x = {x}: {got} vs {want}");
        }
    }

    // Found by the group-order property test: variances alike, so the classic form
    // (N - k) ln s_p^2 - sum (n_i - 1) ln s_i^2 lost its last digits to cancellation and the
    // group order changed the statistic in the 11th digit. Reversed order must agree to 13.
    #[test]
    fn bartlett_does_not_depend_on_group_order_with_alike_variances() {
        let raw: [&[i32]; 3] = [
            &[-9, 435, -251, 428, 49, -244, 290],
            &[68, 106, 302, -182, -283, 311, -309, -466],
            &[-67, 424, 185, -72, -235, -366],
        ];
        let groups: Vec<Summary> = raw
            .iter()
            .map(|g| {
                let v: Vec<f64> = g.iter().map(|&x| f64::from(x) * 0.01).collect();
                Summary::from_slice(&v)
            })
            .collect();
        let mut reversed = groups.clone();
        reversed.reverse();
        let (a, b) = (bartlett(&groups).unwrap(), bartlett(&reversed).unwrap());
        assert!(lre(a.statistic, b.statistic) >= 13.0, "{a:?} vs {b:?}");
        assert!(a.statistic > 0.0);
    }

    // Binomial upper tails from scipy.stats.binom.sf(n - 1, N, 2 * norm.sf(3)) (scipy 1.x, run
    // 2026-12-05): n = 2717 of 1,000,000: 0.3726754375575873; n = 3 of 100:
    // 0.0026174562733868923 (also the exact sum below).
    #[test]
    fn outlier_excess_against_the_binomial() {
        let big = outlier_excess(2717, 1_000_000);
        assert!(lre(big.expected, 2_699.796_063_260_186_6) > 12.0);
        assert!(lre(big.p, 0.372_675_437_557_587_3) > 9.0, "{}", big.p);
        // Exact for N = 100, n = 3: 1 - sum_{x<3} C(100, x) q^x (1-q)^(100-x).
        let q = NORMAL_BEYOND_3SD;
        let pmf = |x: i32| -> f64 {
            let c = match x {
                0 => 1.0,
                1 => 100.0,
                _ => 4950.0,
            };
            c * q.powi(x) * (1.0 - q).powi(100 - x)
        };
        let exact = 1.0 - (pmf(0) + pmf(1) + pmf(2));
        let r = outlier_excess(3, 100);
        assert!(lre(r.p, exact) > 9.0, "{} {exact}", r.p);
        assert!(lre(r.p, 0.002_617_456_273_386_892_3) > 9.0, "{}", r.p);
        assert_eq!(outlier_excess(0, 100).p, 1.0);
    }

    // Equal variances up to rounding (0.1-steps are not exact in binary): T is 0, never a tiny
    // negative number, and p is 1.
    #[test]
    fn bartlett_is_zero_for_equal_variances() {
        let g = [
            Summary::from_slice(&[0.1, 0.2, 0.3]),
            Summary::from_slice(&[0.4, 0.5, 0.6]),
            Summary::from_slice(&[0.7, 0.8, 0.9]),
        ];
        let r = bartlett(&g).unwrap();
        assert!(r.statistic >= 0.0, "{}", r.statistic);
        assert!(r.statistic < 1e-12);
    }

    /// NIST/SEMATECH e-Handbook of Statistical Methods, gear diameters (sections 1.3.5.10,
    /// 1.3.5.7): 10 batches x 10, in tests/data/nist_handbook/gear.csv.
    pub(crate) fn gear() -> Vec<Vec<f64>> {
        let text = include_str!("../../tests/data/nist_handbook/gear.csv");
        let mut groups: Vec<Vec<f64>> = Vec::new();
        for line in text.lines().skip(1) {
            let (g, v) = line.split_once(',').unwrap();
            let idx: usize = g.trim().parse::<usize>().unwrap() - 1;
            if groups.len() <= idx {
                groups.resize(idx + 1, Vec::new());
            }
            groups[idx].push(v.trim().parse().unwrap());
        }
        groups
    }

    // e-Handbook 1.3.5.10: Levene (median-centred) W = 1.705910 with df 9 and 90 (printed to 7
    // digits); the exact value from the data is 1.70591769300090 (shared/refs/SOURCES.md,
    // recomputed with rational arithmetic).
    #[test]
    fn gear_brown_forsythe() {
        let g = gear();
        let refs: Vec<&[f64]> = g.iter().map(|v| v.as_slice()).collect();
        let r = brown_forsythe(&refs).unwrap();
        assert!((r.statistic - 1.705910).abs() < 1e-5, "{}", r.statistic);
        assert!(
            lre(r.statistic, 1.705_917_693_000_90) >= 12.0,
            "{}",
            r.statistic
        );
        assert_eq!((r.df1, r.df2), (Some(9.0), Some(90.0)));
    }

    // Mean-centred Levene on the gear data: 2.15945985647287 (shared/refs/SOURCES.md, recomputed).
    #[test]
    fn gear_levene_mean() {
        let g = gear();
        let refs: Vec<&[f64]> = g.iter().map(|v| v.as_slice()).collect();
        let r = levene_mean(&refs).unwrap();
        assert!(
            lre(r.statistic, 2.159_459_856_472_87) >= 12.0,
            "{}",
            r.statistic
        );
    }

    // e-Handbook 1.3.5.7: Bartlett T = 20.78580 (printed), df 9; exact 20.7858734280650
    // (shared/refs/SOURCES.md, rational arithmetic).
    #[test]
    fn gear_bartlett() {
        let s: Vec<Summary> = gear().iter().map(|g| Summary::from_slice(g)).collect();
        let r = bartlett(&s).unwrap();
        assert!((r.statistic - 20.78580).abs() < 1e-4, "{}", r.statistic);
        assert!(
            lre(r.statistic, 20.785_873_428_065_0) >= 12.0,
            "{}",
            r.statistic
        );
        assert_eq!(r.df1, Some(9.0));
    }

    #[test]
    fn median_odd_even() {
        assert_eq!(median_in_place(&mut [3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median_in_place(&mut [4.0, 1.0, 3.0, 2.0]), 2.5);
        assert_eq!(median_in_place(&mut [5.0]), 5.0);
    }

    #[test]
    fn sd_ratio_and_degenerate() {
        let a = Summary::from_slice(&[1.0, 3.0]); // sd sqrt 2
        let b = Summary::from_slice(&[0.0, 4.0]); // sd sqrt 8
        assert!(lre(sd_ratio(&[a, b]).unwrap(), 2.0) > 14.0);
        let flat = Summary::from_slice(&[1.0, 1.0]);
        assert!(sd_ratio(&[a, flat]).unwrap_err().reason.contains("zero"));
        let single = Summary::from_slice(&[1.0]);
        assert!(sd_ratio(&[a, single])
            .unwrap_err()
            .reason
            .contains("group 2"));
        assert!(bartlett(&[a, flat]).is_err());
        assert!(bartlett(&[a, single]).is_err());
    }

    // Groups of two values: each group's two absolute deviations from its mean are equal, so the
    // Levene ANOVA has zero within variance and is unavailable with a reason.
    #[test]
    fn levene_pairs_unavailable() {
        let e = levene_mean(&[&[1.0, 3.0], &[2.0, 7.0]]).unwrap_err();
        assert!(e.reason.contains("absolute deviations"), "{e}");
    }

    #[test]
    fn beyond_three_sd() {
        let g1 = [0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 10.0];
        let g2 = [1.0, -1.0];
        let s = [Summary::from_slice(&g1), Summary::from_slice(&g2)];
        // Residuals of g1: -1 (x9), 9; of g2: +-1. SS_within = 9 + 81 + 2 = 92, df 10,
        // resid_sd = sqrt(9.2) = 3.033. The residual 9 lies inside 3 SDs (9.10) and beyond 2 SDs
        // (6.07); every other residual has size 1.
        let sd = (92.0f64 / 10.0).sqrt();
        assert_eq!(count_beyond(&[&g1, &g2], &s, sd, 3.0).unwrap(), 0);
        assert_eq!(count_beyond(&[&g1, &g2], &s, sd, 2.0).unwrap(), 1);
        assert!(count_beyond(&[&g1, &g2], &s, 0.0, 3.0).is_err());
    }
}
