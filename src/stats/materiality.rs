//! Is a difference big enough to matter? The standing-out group's difference from the mean of the
//! other groups, with a confidence interval that allows for the group having been picked as the
//! one furthest out, compared with a share of the tolerance.
//!
//! The range of the group means is not used: with many small groups, noise alone makes it wide
//! (32 groups of two values drawn from one process spread their means over about four standard
//! errors), so it called differences "material" that were not there. The bound nearest zero of the
//! interval below is a difference the data support at the least; noise widens the interval
//! instead of inflating the estimate.
//!
//! Interval: `d = mean_g - mean_rest` (the rest: every other value pooled), standard error
//! `sqrt(s_g^2 / n_g + s_rest^2 / n_rest)` with Welch-Satterthwaite degrees of freedom when the
//! spreads may differ (a standing-out group of two values then has about one degree of freedom,
//! and supports almost no difference: the honest answer), or `s_p sqrt(1/n_g + 1/n_rest)` with
//! the pooled within-group SD and `N - k` degrees of freedom where the spreads were checked; Student's t quantile at `1 - (1 - confidence) / (2 k)`
//! (Bonferroni over the `k` groups the standing-out one was chosen from). References: Welch 1947,
//! Biometrika 34, 28-35 (separate variances); the Bonferroni inequality as used for simultaneous intervals, e.g.
//! Miller 1981, *Simultaneous Statistical Inference*, chapter 1.

use super::describe::Summary;
use super::distributions::t_two_sided;
use super::{Stat, Unavailable};

/// A difference with its interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StandoutInterval {
    /// Standing-out group mean minus the mean of the other groups' values.
    pub diff: f64,
    /// Lower end of the interval.
    pub low: f64,
    /// Upper end of the interval.
    pub high: f64,
    /// The end nearest zero when the interval excludes zero, else 0: the difference the data
    /// support at the least, in absolute value.
    pub supported: f64,
}

/// The interval of `groups[standout]` against the other groups pooled (see the module docs).
/// `pooled` is the pooled within-group SD with its degrees of freedom (`N - k`).
pub fn standout_interval(
    groups: &[Summary],
    standout: usize,
    pooled: (f64, f64),
    confidence: f64,
) -> Stat<StandoutInterval> {
    if groups.len() < 2 || standout >= groups.len() {
        return Err(Unavailable::new("needs at least two groups"));
    }
    let (sp, df) = pooled;
    if !(sp.is_finite() && sp > 0.0 && df.is_finite() && df > 0.0) {
        return Err(Unavailable::new(
            "the pooled within-group SD is zero or undefined",
        ));
    }
    let g = &groups[standout];
    let (mut n_rest, mut sum_rest, mut m2_rest, mut df_rest) = (0u64, 0.0, 0.0, 0.0);
    for (i, s) in groups.iter().enumerate() {
        if i != standout {
            n_rest += s.n;
            sum_rest += s.n as f64 * s.mean;
            m2_rest += s.m2;
            df_rest += s.n.saturating_sub(1) as f64;
        }
    }
    if g.n == 0 || n_rest == 0 {
        return Err(Unavailable::new("a side of the comparison has no values"));
    }
    let diff = g.mean - sum_rest / n_rest as f64;
    let var_p = sp * sp;
    let var_g = g.variance().map_or(var_p, |v| v.max(var_p));
    let var_rest = if df_rest > 0.0 {
        (m2_rest / df_rest).max(var_p)
    } else {
        var_p
    };
    let se = (var_g / g.n as f64 + var_rest / n_rest as f64).sqrt();
    let tail = (1.0 - confidence) / groups.len() as f64;
    let t = t_quantile_two_sided(tail, df)?;
    let (low, high) = (diff - t * se, diff + t * se);
    let supported = if low > 0.0 {
        low
    } else if high < 0.0 {
        -high
    } else {
        0.0
    };
    Ok(StandoutInterval {
        diff,
        low,
        high,
        supported,
    })
}

/// The `t` with two-sided tail probability `tail` at `df` degrees of freedom, by bisection on
/// [`t_two_sided`] in `ln t` (60 halvings: relative accuracy far beyond what an interval shows).
pub fn t_quantile_two_sided(tail: f64, df: f64) -> Stat<f64> {
    if !(tail > 0.0 && tail < 1.0) {
        return Err(Unavailable::new(format!(
            "tail probability {tail} is not in (0, 1)"
        )));
    }
    let (mut lo, mut hi) = (1e-12f64, 1.0f64);
    while t_two_sided(hi, df)? > tail {
        hi *= 2.0;
        if hi > 1e300 {
            return Err(Unavailable::new("t quantile out of range"));
        }
    }
    for _ in 0..200 {
        let mid = (lo * hi).sqrt();
        if t_two_sided(mid, df)? > tail {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi / lo - 1.0 < 1e-13 {
            break;
        }
    }
    Ok((lo * hi).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // Student's t quantiles from mpmath 1.3 (findroot on betainc(df/2, 1/2, 0, df/(df+t^2)) at
    // 30 digits): two-sided tail 0.05 at df 10 and 1, 0.01 at df 30; and the round trip.
    #[test]
    fn t_quantiles() {
        assert!(
            lre(
                t_quantile_two_sided(0.05, 10.0).unwrap(),
                2.228_138_851_986_27
            ) > 11.0
        );
        assert!(
            lre(
                t_quantile_two_sided(0.05, 1.0).unwrap(),
                12.706_204_736_174_704
            ) > 11.0
        );
        assert!(
            lre(
                t_quantile_two_sided(0.01, 30.0).unwrap(),
                2.749_995_653_567_225
            ) > 11.0
        );
        for &(p, df) in &[(1e-6, 3.0), (0.3, 7.5), (0.0025, 200.0)] {
            let t = t_quantile_two_sided(p, df).unwrap();
            assert!(lre(t_two_sided(t, df).unwrap(), p) > 11.0, "{p} {df}");
        }
    }

    // Hand check: groups {1,2,3} (mean 2), {4,5,6} (mean 5), pooled SD 1 with 4 df; standout
    // group 2 against the rest: d = 3, se = sqrt(1/3 + 1/3); with k = 2 the two-sided tail is
    // 0.05 / 2, whose t at 4 df is 3.4954059325164376 (mpmath, as above).
    #[test]
    fn pooled_interval() {
        let g = [
            Summary::from_slice(&[1.0, 2.0, 3.0]),
            Summary::from_slice(&[4.0, 5.0, 6.0]),
        ];
        let r = standout_interval(&g, 1, (1.0, 4.0), 0.95).unwrap();
        let t = t_quantile_two_sided(0.025, 4.0).unwrap();
        assert!(lre(t, 3.495_405_932_516_437_6) > 11.0, "{t}");
        let se = (2.0f64 / 3.0).sqrt();
        assert!(lre(r.low, 3.0 - t * se) > 12.0);
        assert!(lre(r.supported, r.low) > 14.0);
        let r = standout_interval(&g, 0, (1.0, 4.0), 0.95).unwrap();
        assert!(lre(r.supported, -r.high) > 14.0);
        assert!(r.diff < 0.0);
    }

    // Noise only: an interval that straddles zero supports no difference at all.
    #[test]
    fn straddling_interval_supports_nothing() {
        let g = [
            Summary::from_slice(&[1.0, 2.0, 3.0]),
            Summary::from_slice(&[1.5, 2.5, 3.5]),
        ];
        let r = standout_interval(&g, 1, (1.0, 4.0), 0.95).unwrap();
        assert!(r.low < 0.0 && r.high > 0.0);
        assert_eq!(r.supported, 0.0);
    }
}
