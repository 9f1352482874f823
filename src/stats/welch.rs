//! Welch's one-way ANOVA for groups with unequal variances (Welch 1951, "On the comparison of
//! several mean values: an alternative approach", Biometrika 38, 330-336).
//!
//! With weights `w_i = n_i / s_i^2`, `W = Σ w_i` and the weighted mean `m = Σ w_i mean_i / W`:
//! `A = Σ w_i (mean_i - m)^2 / (k - 1)`, `λ = Σ (1 - w_i / W)^2 / (n_i - 1)`,
//! `F = A / (1 + 2 (k - 2) λ / (k^2 - 1))`, `df1 = k - 1`, `df2 = (k^2 - 1) / (3 λ)`, and p is the
//! upper tail of F(df1, df2).

use super::anova::check_variances;
use super::describe::Summary;
use super::distributions::f_sf;
use super::{Stat, TestResult, Unavailable};

/// Welch's F test from group summaries. `statistic` is F, `df1 = k - 1`, `df2` is Welch's
/// (fractional) denominator df.
///
/// Unavailable with fewer than two groups, a group with fewer than two values (its variance is
/// unknown), or a group whose values are all equal (its weight n/s^2 is infinite).
pub fn welch(groups: &[Summary]) -> Stat<TestResult> {
    check_variances(groups, "its Welch weight is undefined")?;
    let k = groups.len() as f64;
    let weights: Vec<f64> = groups
        .iter()
        .map(|g| g.n as f64 / g.variance().unwrap_or(f64::NAN))
        .collect();
    let w_sum: f64 = weights.iter().sum();
    let m: f64 = groups
        .iter()
        .zip(&weights)
        .map(|(g, w)| w * g.mean)
        .sum::<f64>()
        / w_sum;
    let a: f64 = groups
        .iter()
        .zip(&weights)
        .map(|(g, w)| {
            let d = g.mean - m;
            w * d * d
        })
        .sum::<f64>()
        / (k - 1.0);
    let lambda: f64 = groups
        .iter()
        .zip(&weights)
        .map(|(g, w)| {
            let h = 1.0 - w / w_sum;
            h * h / (g.n as f64 - 1.0)
        })
        .sum();
    let f = a / (1.0 + 2.0 * (k - 2.0) * lambda / (k * k - 1.0));
    let df1 = k - 1.0;
    let df2 = (k * k - 1.0) / (3.0 * lambda);
    if !f.is_finite() || !df2.is_finite() || df2 <= 0.0 {
        return Err(Unavailable::new(
            "Welch's statistic is not finite for these groups",
        ));
    }
    let p = f_sf(f, df1, df2)?;
    Ok(TestResult {
        statistic: f,
        p,
        df1: Some(df1),
        df2: Some(df2),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // Hand check, two groups: Welch's F equals the square of Welch's t, df2 the Welch-Satterthwaite
    // df. Groups [1,2,3,4] (mean 2.5, s^2 = 5/3) and [2,4,6,8,10] (mean 6, s^2 = 10):
    // t^2 = 3.5^2 / (5/12 + 2) = 12.25 / (29/12) = 147/29;
    // df = (29/12)^2 / ((5/12)^2 / 3 + 2^2 / 4) = (841/144) / (25/432 + 1) = 2523/457.
    #[test]
    fn two_groups_equals_welch_t() {
        let r = welch(&[
            Summary::from_slice(&[1.0, 2.0, 3.0, 4.0]),
            Summary::from_slice(&[2.0, 4.0, 6.0, 8.0, 10.0]),
        ])
        .unwrap();
        assert!(lre(r.statistic, 147.0 / 29.0) > 14.0);
        assert_eq!(r.df1, Some(1.0));
        assert!(lre(r.df2.unwrap(), 2523.0 / 457.0) > 14.0);
        let p_t =
            crate::stats::distributions::t_two_sided((147.0f64 / 29.0).sqrt(), 2523.0 / 457.0)
                .unwrap();
        assert!(lre(r.p, p_t) > 12.0);
    }

    #[test]
    fn degenerate_inputs() {
        let one = Summary::from_slice(&[1.0]);
        let two = Summary::from_slice(&[1.0, 2.0]);
        let flat = Summary::from_slice(&[3.0, 3.0]);
        assert!(welch(&[two]).is_err());
        assert!(welch(&[two, one]).unwrap_err().reason.contains("group 2"));
        assert!(welch(&[flat, two])
            .unwrap_err()
            .reason
            .contains("zero variance"));
    }
}
