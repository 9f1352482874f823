//! Before/after comparison of one group: the mean shift with a Welch interval, and the change in
//! standard deviation as a ratio with an F interval.
//!
//! Used by `samewise investigate` for every group and for the pooled values. Start at
//! [`welch_shift`] and [`sd_ratio`].
//!
//! - Mean shift `after - before`, standard error `sqrt(s_b^2/n_b + s_a^2/n_a)`, Welch-Satterthwaite
//!   degrees of freedom `se^4 / ((s_b^2/n_b)^2/(n_b - 1) + (s_a^2/n_a)^2/(n_a - 1))`, two-sided p
//!   from Student's t and the interval `shift -+ t_{1-a/2, df} se` (Welch 1947, "The generalization
//!   of 'Student's' problem when several different population variances are involved",
//!   Biometrika 34, 28-35).
//! - SD ratio `s_a / s_b`: `F = s_a^2 / s_b^2` has the F(n_a - 1, n_b - 1) distribution for normal
//!   data with equal variances, so the interval for the variance ratio is
//!   `[F / F_{1-a/2}(n_a-1, n_b-1), F / F_{a/2}(n_a-1, n_b-1)]` and the SD ratio interval is its
//!   square root (the classical F interval; sensitive to non-normality, which is why the
//!   Brown-Forsythe test is reported beside it). The two-sided p doubles the smaller tail.

use super::describe::Summary;
use super::distributions::{f_sf, t_two_sided};
use super::{Stat, Unavailable};
use statrs::distribution::{ContinuousCDF, FisherSnedecor, StudentsT};

/// Mean shift after minus before, with Welch's test and interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MeanShift {
    /// `after.mean - before.mean`.
    pub shift: f64,
    /// Welch standard error of the shift.
    pub se: f64,
    /// Welch-Satterthwaite degrees of freedom.
    pub df: f64,
    /// `shift / se`.
    pub t: f64,
    /// Two-sided p-value.
    pub p: f64,
    /// Lower end of the interval.
    pub ci_low: f64,
    /// Upper end of the interval.
    pub ci_high: f64,
    /// Coverage of the interval.
    pub confidence: f64,
}

/// Change in within-group standard deviation: ratio after / before with its F interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SdRatio {
    /// `sd_after / sd_before`.
    pub ratio: f64,
    /// Lower end of the interval for the ratio.
    pub ci_low: f64,
    /// Upper end of the interval for the ratio.
    pub ci_high: f64,
    /// `var_after / var_before`.
    pub f: f64,
    /// Numerator degrees of freedom `n_after - 1`.
    pub df1: f64,
    /// Denominator degrees of freedom `n_before - 1`.
    pub df2: f64,
    /// Two-sided p-value of the F test of equal variances.
    pub p: f64,
    /// Coverage of the interval.
    pub confidence: f64,
}

fn check_confidence(confidence: f64) -> Stat<()> {
    if confidence > 0.0 && confidence < 1.0 {
        Ok(())
    } else {
        Err(Unavailable::new(format!(
            "confidence must lie strictly between 0 and 1 (got {confidence})"
        )))
    }
}

fn check_two(before: &Summary, after: &Summary) -> Stat<()> {
    if before.n < 2 {
        return Err(Unavailable::new(format!(
            "{} value(s) before the change: at least 2 are needed",
            before.n
        )));
    }
    if after.n < 2 {
        return Err(Unavailable::new(format!(
            "{} value(s) after the change: at least 2 are needed",
            after.n
        )));
    }
    Ok(())
}

/// Welch's two-sample comparison of the means. Unavailable with fewer than two values on a side or
/// when both sides have no variation (the standard error is zero).
pub fn welch_shift(before: &Summary, after: &Summary, confidence: f64) -> Stat<MeanShift> {
    check_confidence(confidence)?;
    check_two(before, after)?;
    let vb = before.variance().unwrap_or(0.0) / before.n as f64;
    let va = after.variance().unwrap_or(0.0) / after.n as f64;
    let se2 = vb + va;
    if se2 <= 0.0 {
        return Err(Unavailable::new(
            "no variation on either side: the standard error of the shift is zero",
        ));
    }
    let se = se2.sqrt();
    let df = se2 * se2 / (vb * vb / (before.n as f64 - 1.0) + va * va / (after.n as f64 - 1.0));
    let shift = after.mean - before.mean;
    let t = shift / se;
    let p = t_two_sided(t, df)?;
    let dist = StudentsT::new(0.0, 1.0, df)
        .map_err(|e| Unavailable::new(format!("t distribution with df {df}: {e}")))?;
    let q = dist.inverse_cdf(1.0 - (1.0 - confidence) / 2.0);
    Ok(MeanShift {
        shift,
        se,
        df,
        t,
        p,
        ci_low: shift - q * se,
        ci_high: shift + q * se,
        confidence,
    })
}

/// Ratio of standard deviations after / before with the F interval and the F test.
/// Unavailable with fewer than two values on a side or no variation before the change.
pub fn sd_ratio(before: &Summary, after: &Summary, confidence: f64) -> Stat<SdRatio> {
    check_confidence(confidence)?;
    check_two(before, after)?;
    let var_b = before.variance().unwrap_or(0.0);
    let var_a = after.variance().unwrap_or(0.0);
    if var_b <= 0.0 {
        return Err(Unavailable::new(
            "no variation before the change: the SD ratio is undefined",
        ));
    }
    let df1 = after.n as f64 - 1.0;
    let df2 = before.n as f64 - 1.0;
    let f = var_a / var_b;
    let dist = FisherSnedecor::new(df1, df2)
        .map_err(|e| Unavailable::new(format!("F distribution ({df1}, {df2}): {e}")))?;
    let tail = (1.0 - confidence) / 2.0;
    let upper_q = dist.inverse_cdf(1.0 - tail);
    let lower_q = dist.inverse_cdf(tail);
    let upper_tail = f_sf(f, df1, df2)?;
    let lower_tail = f_sf(1.0 / f, df2, df1).unwrap_or(0.0);
    let p = if f > 0.0 {
        (2.0 * upper_tail.min(lower_tail)).min(1.0)
    } else {
        0.0
    };
    Ok(SdRatio {
        ratio: f.sqrt(),
        ci_low: (f / upper_q).sqrt(),
        ci_high: (f / lower_q).sqrt(),
        f,
        df1,
        df2,
        p,
        confidence,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::distributions::f_sf;
    use crate::stats::lre;

    #[test]
    fn welch_hand_check() {
        // Hand check: before [1, 2, 3, 4] (mean 2.5, var 5/3), after [2, 4, 6, 8, 10] (mean 6,
        // var 10). se^2 = 5/12 + 2 = 29/12; t = 3.5 / sqrt(29/12);
        // df = (29/12)^2 / ((5/12)^2 / 3 + 2^2 / 4) = 2523/457.
        let before = Summary::from_slice(&[1.0, 2.0, 3.0, 4.0]);
        let after = Summary::from_slice(&[2.0, 4.0, 6.0, 8.0, 10.0]);
        let s = welch_shift(&before, &after, 0.95).unwrap();
        assert!(lre(s.shift, 3.5) > 14.0);
        assert!(lre(s.se, (29.0f64 / 12.0).sqrt()) > 14.0);
        assert!(lre(s.df, 2523.0 / 457.0) > 13.0);
        assert!(lre(s.t, 3.5 / (29.0f64 / 12.0).sqrt()) > 13.0);
        // The interval's half-width q satisfies P(|T| > q) = 0.05 (consistency of statrs'
        // quantile with the shared tail function).
        let q = (s.ci_high - s.shift) / s.se;
        assert!(lre(t_two_sided(q, s.df).unwrap(), 0.05) > 8.0);
        assert!(lre(s.p, t_two_sided(s.t, s.df).unwrap()) > 15.0);
    }

    #[test]
    fn sd_ratio_hand_check() {
        // Same data: F = 10 / (5/3) = 6 with (4, 3) df, SD ratio sqrt(6).
        let before = Summary::from_slice(&[1.0, 2.0, 3.0, 4.0]);
        let after = Summary::from_slice(&[2.0, 4.0, 6.0, 8.0, 10.0]);
        let r = sd_ratio(&before, &after, 0.95).unwrap();
        assert!(lre(r.f, 6.0) > 14.0);
        assert!(lre(r.ratio, 6.0f64.sqrt()) > 14.0);
        assert_eq!((r.df1, r.df2), (4.0, 3.0));
        // Interval ends: (F / ci_low^2) is the upper 2.5% point of F(4, 3), so its upper tail is 0.025.
        assert!(lre(f_sf(r.f / (r.ci_low * r.ci_low), 4.0, 3.0).unwrap(), 0.025) > 8.0);
        assert!(
            lre(
                f_sf(r.f / (r.ci_high * r.ci_high), 4.0, 3.0).unwrap(),
                0.975
            ) > 8.0
        );
        assert!(lre(r.p, 2.0 * f_sf(6.0, 4.0, 3.0).unwrap()) > 14.0);
    }

    #[test]
    fn degenerate() {
        let one = Summary::from_slice(&[1.0]);
        let two = Summary::from_slice(&[1.0, 2.0]);
        assert!(welch_shift(&one, &two, 0.95)
            .unwrap_err()
            .reason
            .contains("before"));
        assert!(welch_shift(&two, &one, 0.95)
            .unwrap_err()
            .reason
            .contains("after"));
        let flat = Summary::from_slice(&[3.0, 3.0]);
        assert!(welch_shift(&flat, &flat, 0.95).is_err());
        assert!(sd_ratio(&flat, &two, 0.95).is_err());
        assert!(welch_shift(&two, &two, 1.0).is_err());
    }
}
