//! The classic one-way ANOVA table from group summaries (no raw values needed).
//!
//! Sums of squares are built from each group's n, mean and M2 (sum of squared deviations), never
//! from raw sums of squares, so no cancellation occurs: `SS_within = Σ M2_i`,
//! `SS_between = Σ n_i (mean_i - grand_mean)^2`, `SS_total = SS_between + SS_within` (the identity
//! is exact algebra; it is also what the merged summary of all values gives). The p-value is the
//! upper tail of F computed directly ([`super::distributions::f_sf`]).
//!
//! Reference: any text on the fixed-effects one-way model, e.g. Montgomery, *Design and Analysis of
//! Experiments*, chapter 3; checked against the NIST StRD ANOVA datasets (tests/compare.rs).

use super::describe::Summary;
use super::distributions::f_sf;
use super::{Stat, Unavailable};

/// The one-way ANOVA table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AnovaTable {
    /// Number of groups k.
    pub n_groups: usize,
    /// Number of observations N.
    pub n_obs: u64,
    /// Grand mean of all observations.
    pub grand_mean: f64,
    /// Between-group sum of squares.
    pub ss_between: f64,
    /// Within-group (residual) sum of squares.
    pub ss_within: f64,
    /// Total sum of squares about the grand mean.
    pub ss_total: f64,
    /// k - 1.
    pub df_between: f64,
    /// N - k.
    pub df_within: f64,
    /// N - 1.
    pub df_total: f64,
    /// SS_between / df_between.
    pub ms_between: f64,
    /// SS_within / df_within (the pooled within-group variance).
    pub ms_within: f64,
    /// MS_between / MS_within.
    pub f: f64,
    /// Upper tail of F(df_between, df_within) at `f`.
    pub p: f64,
    /// SS_between / SS_total.
    pub r_squared: f64,
    /// sqrt(MS_within): the residual (pooled within-group) standard deviation.
    pub resid_sd: f64,
}

/// Checks that every group has at least one value and there are at least two groups.
pub(crate) fn check_groups(groups: &[Summary]) -> Stat<()> {
    if groups.len() < 2 {
        return Err(Unavailable::new(format!(
            "needs at least two groups (got {})",
            groups.len()
        )));
    }
    if let Some(idx) = groups.iter().position(|g| g.n == 0) {
        return Err(Unavailable::new(format!("group {} has no values", idx + 1)));
    }
    Ok(())
}

/// [`check_groups`], and every group has a variance: at least two values, not all equal.
/// `zero_variance` says what a zero variance would make undefined (for the message).
pub(crate) fn check_variances(groups: &[Summary], zero_variance: &str) -> Stat<()> {
    check_groups(groups)?;
    if let Some(idx) = groups.iter().position(|g| g.n < 2) {
        return Err(Unavailable::new(format!(
            "group {} has fewer than two values, so its variance is unknown",
            idx + 1
        )));
    }
    if let Some(idx) = groups.iter().position(|g| g.m2 <= 0.0) {
        return Err(Unavailable::new(format!(
            "group {} has zero variance (all values equal), so {zero_variance}",
            idx + 1
        )));
    }
    Ok(())
}

/// Weighted grand mean `Σ n_i mean_i / N`.
pub(crate) fn grand_mean(groups: &[Summary]) -> f64 {
    let n: f64 = groups.iter().map(|g| g.n as f64).sum();
    groups.iter().map(|g| g.n as f64 * g.mean).sum::<f64>() / n
}

/// Builds the one-way ANOVA table from group summaries.
///
/// Assumes independent observations, normal errors and a common within-group variance (the
/// requirement checks in [`super::spread`] and [`super::normality`] look at the last two).
///
/// Unavailable when there are fewer than two groups, a group is empty, there are no within-group
/// degrees of freedom (every group has one value), or the within-group variance is zero (every
/// group's values are all equal: F is undefined).
pub fn one_way(groups: &[Summary]) -> Stat<AnovaTable> {
    check_groups(groups)?;
    let k = groups.len();
    let n_obs: u64 = groups.iter().map(|g| g.n).sum();
    let df_between = (k - 1) as f64;
    let df_within = n_obs as f64 - k as f64;
    if df_within <= 0.0 {
        return Err(Unavailable::new(
            "no within-group degrees of freedom (every group has a single value)",
        ));
    }
    let grand = grand_mean(groups);
    let ss_between: f64 = groups
        .iter()
        .map(|g| {
            let d = g.mean - grand;
            g.n as f64 * d * d
        })
        .sum();
    let ss_within: f64 = groups.iter().map(|g| g.m2).sum();
    let ss_total = ss_between + ss_within;
    let ms_between = ss_between / df_between;
    let ms_within = ss_within / df_within;
    // Zero to working precision: every group constant, or a within-group spread below 1e-13 of
    // the values' magnitude, which is below the rounding noise of the arithmetic.
    let magnitude: f64 = groups
        .iter()
        .map(|g| {
            let m = g.min.abs().max(g.max.abs());
            g.n as f64 * m * m
        })
        .sum();
    if ms_within <= 0.0 || !ms_within.is_finite() || ss_within <= 1e-26 * magnitude {
        return Err(Unavailable::new(
            "within-group variance is zero (all values in each group are equal): F is undefined",
        ));
    }
    let f = ms_between / ms_within;
    let p = f_sf(f, df_between, df_within)?;
    Ok(AnovaTable {
        n_groups: k,
        n_obs,
        grand_mean: grand,
        ss_between,
        ss_within,
        ss_total,
        df_between,
        df_within,
        df_total: n_obs as f64 - 1.0,
        ms_between,
        ms_within,
        f,
        p,
        r_squared: ss_between / ss_total,
        resid_sd: ms_within.sqrt(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    fn summaries(groups: &[&[f64]]) -> Vec<Summary> {
        groups.iter().map(|g| Summary::from_slice(g)).collect()
    }

    // Hand check: groups [1,2,3] and [4,5,6]. Grand mean 3.5; SS_between = 3*(1.5^2)*2 = 13.5
    // (df 1), SS_within = 2 + 2 = 4 (df 4), F = 13.5, p = P(F(1,4) > 13.5) = 2 P(T_4 > sqrt 13.5).
    #[test]
    fn hand_example() {
        let t = one_way(&summaries(&[&[1.0, 2.0, 3.0], &[4.0, 5.0, 6.0]])).unwrap();
        assert!(lre(t.ss_between, 13.5) > 14.0);
        assert!(lre(t.ss_within, 4.0) > 14.0);
        assert!(lre(t.ss_total, 17.5) > 14.0);
        assert_eq!((t.df_between, t.df_within, t.df_total), (1.0, 4.0, 5.0));
        assert!(lre(t.f, 13.5) > 14.0);
        let p_t = crate::stats::distributions::t_two_sided(13.5f64.sqrt(), 4.0).unwrap();
        assert!(lre(t.p, p_t) > 12.0);
        assert!(lre(t.r_squared, 13.5 / 17.5) > 14.0);
        assert!(lre(t.resid_sd, 1.0) > 14.0);
    }

    // NIST/SEMATECH e-Handbook of Statistical Methods, section 7.4.3.3 (resistor_7433.csv, 3 groups
    // of 5): treatments SS 27.897, df 2, MS 13.949, F 9.59; error SS 17.452, df 12, MS 1.454;
    // total SS 45.349; p = 0.00325 (printed precision). Values are tests/data/nist_handbook/.
    #[test]
    fn nist_handbook_7433() {
        let g1 = [6.9, 5.4, 5.8, 4.6, 4.0];
        let g2 = [8.3, 6.8, 7.8, 9.2, 6.5];
        let g3 = [8.0, 10.5, 8.1, 6.9, 9.3];
        let t = one_way(&summaries(&[&g1, &g2, &g3])).unwrap();
        assert!((t.ss_between - 27.897).abs() < 5e-4);
        assert!((t.ss_within - 17.452).abs() < 5e-4);
        assert!((t.ss_total - 45.349).abs() < 5e-4);
        assert!((t.ms_between - 13.949).abs() < 5e-4);
        assert!((t.ms_within - 1.454).abs() < 5e-4);
        assert!((t.f - 9.59).abs() < 5e-3);
        assert!((t.p - 0.00325).abs() < 5e-6);
    }

    #[test]
    fn fewer_than_two_groups() {
        let e = one_way(&summaries(&[&[1.0, 2.0]])).unwrap_err();
        assert!(e.reason.contains("at least two groups"), "{e}");
        assert!(one_way(&[]).is_err());
    }

    #[test]
    fn empty_group() {
        let e = one_way(&[Summary::from_slice(&[1.0, 2.0]), Summary::new()]).unwrap_err();
        assert!(e.reason.contains("group 2 has no values"), "{e}");
    }

    #[test]
    fn one_value_per_group() {
        let e = one_way(&summaries(&[&[1.0], &[2.0], &[3.0]])).unwrap_err();
        assert!(e.reason.contains("degrees of freedom"), "{e}");
    }

    #[test]
    fn zero_within_variance() {
        let e = one_way(&summaries(&[&[1.0, 1.0], &[2.0, 2.0]])).unwrap_err();
        assert!(e.reason.contains("F is undefined"), "{e}");
    }

    // Identical groups: F = 0, p = 1.
    #[test]
    fn identical_groups() {
        let t = one_way(&summaries(&[&[1.0, 2.0, 3.0], &[1.0, 2.0, 3.0]])).unwrap();
        assert_eq!(t.ss_between, 0.0);
        assert_eq!(t.f, 0.0);
        assert_eq!(t.p, 1.0);
    }

    // Unequal sizes, and a group of one value still contributes to SS_between.
    #[test]
    fn unequal_sizes() {
        // Groups [1,3] (mean 2), [5] (mean 5), [6,8,10] (mean 8); N = 6, grand mean 33/6 = 5.5.
        // SS_between = 2*12.25 + 0.25 + 3*6.25 = 43.5; SS_within = 2 + 0 + 8 = 10; df 2 and 3.
        let t = one_way(&summaries(&[&[1.0, 3.0], &[5.0], &[6.0, 8.0, 10.0]])).unwrap();
        assert!(lre(t.ss_between, 43.5) > 14.0);
        assert!(lre(t.ss_within, 10.0) > 14.0);
        assert!(lre(t.f, (43.5 / 2.0) / (10.0 / 3.0)) > 14.0);
    }
}
