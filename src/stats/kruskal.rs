//! Kruskal-Wallis rank test with the tie correction (Kruskal and Wallis 1952, "Use of ranks in
//! one-criterion variance analysis", JASA 47, 583-621).
//!
//! All values are ranked together (ties get their average rank). With `R_i` the rank sum of group
//! i, `H = 12 / (N (N + 1)) Σ (R_i - n_i (N + 1) / 2)^2 / n_i`, divided by the tie correction
//! `C = 1 - Σ (t^3 - t) / (N^3 - N)` over the sizes t of tied runs; p is the chi-square upper tail
//! with k - 1 df. The centred form is algebraically equal to the textbook
//! `12/(N(N+1)) Σ R_i^2/n_i - 3(N+1)` and avoids its cancellation; ranks are half-integers, so rank
//! sums and their centring are exact in f64 up to N of about 1e7.

use super::distributions::chi_square_sf;
use super::{Stat, TestResult, Unavailable};

/// Kruskal-Wallis H (tie-corrected) on raw group values. `statistic` is H, `df1 = k - 1`.
///
/// Unavailable with fewer than two groups, an empty group, a NaN value, or when every value is
/// the same (the tie correction is zero, so H is undefined).
pub fn kruskal_wallis(groups: &[&[f64]]) -> Stat<TestResult> {
    if groups.len() < 2 {
        return Err(Unavailable::new(format!(
            "needs at least two groups (got {})",
            groups.len()
        )));
    }
    if let Some(idx) = groups.iter().position(|g| g.is_empty()) {
        return Err(Unavailable::new(format!("group {} has no values", idx + 1)));
    }
    let n_total: usize = groups.iter().map(|g| g.len()).sum();
    let mut all: Vec<(f64, u32)> = Vec::with_capacity(n_total);
    for (idx, g) in groups.iter().enumerate() {
        for &v in *g {
            if v.is_nan() {
                return Err(Unavailable::new(format!(
                    "group {} contains a value that is not a number",
                    idx + 1
                )));
            }
            all.push((v, idx as u32));
        }
    }
    all.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
    let mut rank_sums = vec![0.0f64; groups.len()];
    let mut tie_sum = 0.0f64;
    let mut i = 0usize;
    while i < all.len() {
        let mut j = i + 1;
        while j < all.len() && all[j].0 == all[i].0 {
            j += 1;
        }
        // Positions i..j (0-based) share the average of ranks i+1..=j.
        let avg_rank = (i + 1 + j) as f64 / 2.0;
        for item in &all[i..j] {
            rank_sums[item.1 as usize] += avg_rank;
        }
        let t = (j - i) as f64;
        if j - i > 1 {
            tie_sum += t * t * t - t;
        }
        i = j;
    }
    let n = n_total as f64;
    let correction = 1.0 - tie_sum / (n * n * n - n);
    if correction <= 0.0 {
        return Err(Unavailable::new(
            "all values are equal, so the ranks carry no information (H is undefined)",
        ));
    }
    let half = (n + 1.0) / 2.0;
    let s: f64 = groups
        .iter()
        .zip(&rank_sums)
        .map(|(g, &r)| {
            let ni = g.len() as f64;
            let d = r - ni * half;
            d * d / ni
        })
        .sum();
    let h = 12.0 / (n * (n + 1.0)) * s / correction;
    let df = groups.len() as f64 - 1.0;
    let p = chi_square_sf(h, df)?;
    Ok(TestResult {
        statistic: h,
        p,
        df1: Some(df),
        df2: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // Hand check without ties: groups [1,2,3] and [4,5,6]; ranks 1..6, R = 6 and 15, N = 6.
    // H = 12/42 * ((6 - 10.5)^2/3 + (15 - 10.5)^2/3) = 12/42 * 13.5 = 27/7; df 1.
    #[test]
    fn hand_example_no_ties() {
        let r = kruskal_wallis(&[&[1.0, 2.0, 3.0], &[4.0, 5.0, 6.0]]).unwrap();
        assert!(lre(r.statistic, 27.0 / 7.0) > 14.0);
        assert_eq!(r.df1, Some(1.0));
        let p = crate::stats::distributions::chi_square_sf(27.0 / 7.0, 1.0).unwrap();
        assert!(lre(r.p, p) > 14.0);
    }

    // Hand check with ties: [1,2,2] and [2,3,3]. Sorted 1,2,2,2,3,3: ranks 1, 3,3,3, 5.5,5.5.
    // R1 = 1 + 3 + 3 = 7, R2 = 3 + 5.5 + 5.5 = 14; N = 6, n_i (N+1)/2 = 10.5.
    // Uncorrected H = 12/42 * (3.5^2/3 * 2) = 12/42 * 49/6 = 7/3.
    // Ties: t = 3 and t = 2: Σ(t^3 - t) = 24 + 6 = 30; C = 1 - 30/210 = 6/7; H = 7/3 / (6/7) = 49/18.
    #[test]
    fn hand_example_with_ties() {
        let r = kruskal_wallis(&[&[1.0, 2.0, 2.0], &[2.0, 3.0, 3.0]]).unwrap();
        assert!(lre(r.statistic, 49.0 / 18.0) > 14.0);
    }

    #[test]
    fn group_order_does_not_matter() {
        let a: &[f64] = &[1.5, 2.5, 2.5, 9.0];
        let b: &[f64] = &[0.5, 3.0];
        let c: &[f64] = &[7.0, 7.0, 8.0];
        let r1 = kruskal_wallis(&[a, b, c]).unwrap();
        let r2 = kruskal_wallis(&[c, a, b]).unwrap();
        assert!(lre(r1.statistic, r2.statistic) > 14.0);
    }

    #[test]
    fn degenerate_inputs() {
        assert!(kruskal_wallis(&[&[1.0, 2.0]]).is_err());
        assert!(kruskal_wallis(&[&[1.0], &[]])
            .unwrap_err()
            .reason
            .contains("group 2"));
        let e = kruskal_wallis(&[&[4.0, 4.0], &[4.0]]).unwrap_err();
        assert!(e.reason.contains("all values are equal"), "{e}");
        assert!(kruskal_wallis(&[&[1.0, f64::NAN], &[2.0]]).is_err());
    }
}
