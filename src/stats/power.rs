//! Sensitivity of the one-way F test: its power for a stated difference, the minimum detectable
//! difference, and the group size needed.
//!
//! Power of the F test at level `alpha` is `P(F' > F_(1 - alpha; k - 1, N - k))` with `F'`
//! noncentral F (`k - 1`, `N - k`, `lambda = sum n_i (mu_i - mu_bar)^2 / sigma^2`, `mu_bar` the
//! size-weighted mean), see [`super::noncentral`] (Cohen 1988, Statistical Power Analysis, ch. 8).
//!
//! Configuration for "a difference `d` between two group means, the others in between": the two
//! smallest groups `a`, `b` sit `d` apart and every other group at the weighted mean of those two.
//! Then `lambda = d^2 / sigma^2 * n_a n_b / (n_a + n_b)`. For a given largest difference `d` this
//! is the smallest `lambda` any placement of the groups can have (moving another group off the
//! weighted mean adds to `sum n_i (mu_i - mu_bar)^2`, and `n_a n_b / (n_a + n_b)` grows with either
//! size), so the power reported is a guaranteed lower bound and the minimum detectable difference a
//! conservative one: the least favourable configuration (for balanced groups `lambda = n d^2 /
//! (2 sigma^2)`, the classic one for sample-size tables). `sigma` is the within-group SD
//! (normally `sqrt(MS_within)`).

use super::describe::Summary;
use super::noncentral::ncf_sf;
use super::{Stat, Unavailable};
use statrs::distribution::{ContinuousCDF, FisherSnedecor};

/// Sensitivity of the one-way F test actually run.
#[derive(Debug, Clone, PartialEq)]
pub struct Sensitivity {
    /// Significance level used.
    pub alpha: f64,
    /// Power aimed at (normally 0.8).
    pub power_target: f64,
    /// Power at the observed sizes for a difference of `detect`, when `detect` is given.
    pub power_at_detect: Option<f64>,
    /// Smallest difference between two group means detected with `power_target` (units of the
    /// measurement), least favourable configuration.
    pub min_detectable_diff: Stat<f64>,
    /// `min_detectable_diff` in percent of the tolerance width, when known.
    pub min_detectable_pct_tolerance: Option<f64>,
    /// The difference the user asked about.
    pub detect: Option<f64>,
    /// Measurements per group (balanced, same number of groups) needed to detect `detect` with
    /// `power_target`, when `detect` is given.
    pub n_needed: Option<Stat<u64>>,
}

/// Largest group size searched for [`Sensitivity::n_needed`].
const MAX_N_PER_GROUP: u64 = 10_000_000;

/// Power of the one-way F test for noncentrality `lambda` with `df1`, `df2` at level `alpha`.
pub fn f_test_power(lambda: f64, df1: f64, df2: f64, alpha: f64) -> Stat<f64> {
    let f = FisherSnedecor::new(df1, df2)
        .map_err(|e| Unavailable::new(format!("F distribution for power: {e}")))?;
    let critical = f.inverse_cdf(1.0 - alpha);
    ncf_sf(critical, df1, df2, lambda)
}

/// The noncentrality at which the power reaches `target` (bisection on the monotone power).
fn lambda_for_power(df1: f64, df2: f64, alpha: f64, target: f64) -> Stat<f64> {
    let mut high = 1.0;
    while f_test_power(high, df1, df2, alpha)? < target {
        high *= 2.0;
        if high > 1.0e7 {
            return Err(Unavailable::new("power target not reachable"));
        }
    }
    let mut low = 0.0;
    for _ in 0..200 {
        let mid = 0.5 * (low + high);
        if f_test_power(mid, df1, df2, alpha)? < target {
            low = mid;
        } else {
            high = mid;
        }
        if high - low <= 1e-13 * high {
            break;
        }
    }
    Ok(0.5 * (low + high))
}

/// Sensitivity of the one-way F test for these groups (see the module docs for the configuration).
///
/// `within_sd > 0`, `0 < alpha < 1`, `alpha < power_target < 1`; `detect` (a positive difference
/// in units) adds the power at the observed sizes and the balanced group size needed; `tolerance`
/// (USL - LSL, positive) adds percentages. Unavailable for fewer than two non-empty groups, `N - k < 1`,
/// or parameters out of range.
pub fn sensitivity(
    groups: &[Summary],
    within_sd: f64,
    alpha: f64,
    power_target: f64,
    detect: Option<f64>,
    tolerance: Option<f64>,
) -> Stat<Sensitivity> {
    if !(alpha > 0.0 && alpha < 1.0) {
        return Err(Unavailable::new(format!(
            "alpha must lie in (0, 1) (got {alpha})"
        )));
    }
    if !(power_target > alpha && power_target < 1.0) {
        return Err(Unavailable::new(format!(
            "power target must lie between alpha and 1 (got {power_target})"
        )));
    }
    if !(within_sd.is_finite() && within_sd > 0.0) {
        return Err(Unavailable::new(format!(
            "within-group SD is {within_sd}: sensitivity needs a positive within-group spread"
        )));
    }
    if let Some(d) = detect {
        if !(d.is_finite() && d > 0.0) {
            return Err(Unavailable::new(format!(
                "difference to detect must be positive (got {d})"
            )));
        }
    }
    let mut sizes: Vec<f64> = groups
        .iter()
        .filter(|g| g.n > 0)
        .map(|g| g.n as f64)
        .collect();
    let k = sizes.len();
    if k < 2 {
        return Err(Unavailable::new(
            "sensitivity needs at least 2 groups with values",
        ));
    }
    let n_total: f64 = sizes.iter().sum();
    let df1 = (k - 1) as f64;
    let df2 = n_total - k as f64;
    if df2 < 1.0 {
        return Err(Unavailable::new(
            "sensitivity needs at least one within-group degree of freedom",
        ));
    }
    sizes.sort_by(|a, b| a.total_cmp(b));
    let harmonic = sizes[0] * sizes[1] / (sizes[0] + sizes[1]);
    let variance = within_sd * within_sd;
    let tolerance = tolerance.filter(|t| t.is_finite() && *t > 0.0);

    let min_detectable_diff = lambda_for_power(df1, df2, alpha, power_target)
        .map(|lambda| (lambda * variance / harmonic).sqrt());
    let min_detectable_pct_tolerance = match (&min_detectable_diff, tolerance) {
        (Ok(d), Some(t)) => Some(100.0 * d / t),
        _ => None,
    };
    let power_at_detect = match detect {
        Some(d) => f_test_power(d * d / variance * harmonic, df1, df2, alpha).ok(),
        None => None,
    };
    let n_needed = detect.map(|d| n_needed_balanced(k, d / within_sd, alpha, power_target));
    Ok(Sensitivity {
        alpha,
        power_target,
        power_at_detect,
        min_detectable_diff,
        min_detectable_pct_tolerance,
        detect,
        n_needed,
    })
}

/// Power of the balanced one-way F test with `k` groups of `n`, two means `effect` within-group
/// SDs apart and the others at their mean (`lambda = n effect^2 / 2`).
pub fn balanced_power(k: usize, n: u64, effect: f64, alpha: f64) -> Stat<f64> {
    let nf = n as f64;
    let kf = k as f64;
    f_test_power(nf * effect * effect / 2.0, kf - 1.0, kf * (nf - 1.0), alpha)
}

/// Smallest balanced group size `n >= 2` with power >= `target`.
fn n_needed_balanced(k: usize, effect: f64, alpha: f64, target: f64) -> Stat<u64> {
    let mut high = 2u64;
    while balanced_power(k, high, effect, alpha)? < target {
        high *= 2;
        if high > MAX_N_PER_GROUP {
            return Err(Unavailable::new(format!(
                "more than {MAX_N_PER_GROUP} measurements per group would be needed"
            )));
        }
    }
    let mut low = high / 2;
    if low < 2 || balanced_power(k, low, effect, alpha)? >= target {
        return Ok(if low >= 2 { low } else { high });
    }
    // Power is monotone in n: balanced_power(low) < target <= balanced_power(high).
    while high - low > 1 {
        let mid = low + (high - low) / 2;
        if balanced_power(k, mid, effect, alpha)? >= target {
            high = mid;
        } else {
            low = mid;
        }
    }
    Ok(high)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;
    use serde_json::Value;

    fn fixture() -> Value {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/data/reference/power.json"
        );
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
    }

    // Reference: statsmodels FTestAnovaPower.power (scripts/power_reference.py), balanced groups,
    // two means `effect` SDs apart, the others at their mean (Cohen's f^2 = effect^2 / (2k)).
    #[test]
    fn balanced_power_matches_statsmodels() {
        let doc = fixture();
        let cases = doc["balanced_power"].as_array().unwrap();
        for c in cases {
            let k = c["k"].as_u64().unwrap() as usize;
            let n = c["n"].as_u64().unwrap();
            let effect = c["effect"].as_f64().unwrap();
            let alpha = c["alpha"].as_f64().unwrap();
            let expected = c["power"].as_f64().unwrap();
            let ours = balanced_power(k, n, effect, alpha).unwrap();
            assert!(
                lre(ours, expected) >= 8.0,
                "k {k} n {n} effect {effect} alpha {alpha}: {ours} vs {expected}"
            );
        }
        assert_eq!(cases.len(), 200);
    }

    // Reference: the smallest balanced n per group with power >= 0.8 by statsmodels
    // FTestAnovaPower (scripts/power_reference.py). Also Cohen (1988), Statistical Power Analysis,
    // Table 2.4.1: 64 per group for a two-sample difference of 0.5 SD at alpha 0.05 (from memory).
    #[test]
    fn n_needed_matches_statsmodels() {
        let doc = fixture();
        for c in doc["n_needed"].as_array().unwrap() {
            let k = c["k"].as_u64().unwrap() as usize;
            let effect = c["effect"].as_f64().unwrap();
            let expected = c["n_per_group"].as_u64().unwrap();
            let groups: Vec<Summary> = (0..k)
                .map(|i| Summary::from_slice(&[i as f64, i as f64 + 1.0, i as f64 + 2.0]))
                .collect();
            let s = sensitivity(&groups, 1.0, 0.05, 0.8, Some(effect), None).unwrap();
            let n = s.n_needed.unwrap().unwrap();
            assert_eq!(n, expected, "k {k} effect {effect}");
        }
        assert_eq!(n_needed_balanced(2, 0.5, 0.05, 0.8).unwrap(), 64);
    }

    // The minimum detectable difference has power exactly 0.8 in the least favourable
    // configuration, and for balanced data it is the difference statsmodels needs for 0.8.
    #[test]
    fn minimum_detectable_difference_has_target_power() {
        let groups: Vec<Summary> = [5usize, 8, 12, 20]
            .iter()
            .map(|&n| Summary::from_slice(&(0..n).map(|i| i as f64).collect::<Vec<_>>()))
            .collect();
        let s = sensitivity(&groups, 2.0, 0.05, 0.8, Some(1.0), Some(10.0)).unwrap();
        let d = *s.min_detectable_diff.as_ref().unwrap();
        // Two smallest groups (5 and 8): lambda = d^2 / sigma^2 * 5 * 8 / 13.
        let lambda = d * d / 4.0 * (40.0 / 13.0);
        let power = f_test_power(lambda, 3.0, 41.0, 0.05).unwrap();
        assert!(lre(power, 0.8) >= 9.0, "{power}");
        assert!(lre(s.min_detectable_pct_tolerance.unwrap(), 10.0 * d) >= 12.0);
        assert!(s.power_at_detect.unwrap() < 0.8);
    }

    #[test]
    fn bad_input_is_unavailable() {
        let groups = [
            Summary::from_slice(&[1.0, 2.0]),
            Summary::from_slice(&[2.0, 4.0]),
        ];
        assert!(sensitivity(&groups, 0.0, 0.05, 0.8, None, None).is_err());
        assert!(sensitivity(&groups, 1.0, 0.05, 0.01, None, None).is_err());
        assert!(sensitivity(&groups, 1.0, 0.05, 0.8, Some(-1.0), None).is_err());
        assert!(sensitivity(&groups[..1], 1.0, 0.05, 0.8, None, None).is_err());
        let singles = [Summary::from_slice(&[1.0]), Summary::from_slice(&[2.0])];
        assert!(sensitivity(&singles, 1.0, 0.05, 0.8, None, None).is_err());
    }
}
