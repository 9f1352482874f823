//! Resampling calibrations of the heteroscedastic one-way test of means, for groups where
//! Welch's F distribution does not hold (skewed values, small groups).
//!
//! - [`welch_bootstrap_t`]: the bootstrap-t calibration of Welch's statistic (Wilcox 2017,
//!   "Introduction to Robust Estimation and Hypothesis Testing", 4th ed., section 7.6, for means
//!   with trimming 0; Lix and Keselman 1998, "To trim or not to trim", Educational and
//!   Psychological Measurement 58, 409-429): each group's values are centred at the group mean,
//!   resampled with replacement within the group, Welch's F is computed on every resample, and p
//!   is the share of resampled F at or above the observed one. Centring makes the null true in
//!   the resampled world while each group keeps its own spread and shape, so the reference
//!   distribution carries the skewness that Welch's F distribution ignores.
//! - [`parametric_bootstrap`]: the parametric bootstrap test of Krishnamoorthy, Lu and Mathew
//!   (2007, "A parametric bootstrap approach for ANOVA with unequal variances: fixed and random
//!   models", Computational Statistics & Data Analysis 51, 5731-5742): the statistic
//!   `T = Σ n_i x̄_i² / s_i² - (Σ n_i x̄_i / s_i²)² / Σ n_i / s_i²` against its distribution when
//!   the means are normal with the observed variances and the variances scaled chi-squares.
//!
//! The p-value of a bootstrap carries Monte Carlo error; it is `(1 + r) / (1 + B)` with `r` the
//! resamples at or above the observed statistic (Davison and Hinkley 1997, "Bootstrap Methods and
//! their Application", eq. 4.11), which never is 0. The random stream starts from a state derived
//! from the data themselves ([`data_state`]), so the same data always give the same p.

use super::changepoint::SplitMix64;
use super::describe::Summary;
use super::{Stat, TestResult, Unavailable};

/// Resamples of the bootstrap tests (B + 1 = 600 puts 0.05 on the grid of attainable p-values:
/// 30 / 600; Wilcox's choice for the bootstrap-t, 2017 section 7.6).
pub const BOOTSTRAP_RESAMPLES: usize = 599;

/// A random state that depends on every value and on the group structure (SplitMix64's mixing
/// folded over the bits of each value and each group size), so a bootstrap p is a function of the
/// data alone.
pub fn data_state(groups: &[&[f64]]) -> u64 {
    let mut h: u64 = 0x6261_6f6f_7473_7472;
    let mut fold = |x: u64| {
        h = SplitMix64::new(h ^ x).next_u64();
    };
    for g in groups {
        fold(g.len() as u64);
        for v in g.iter() {
            // +0.0 and -0.0 are the same value.
            fold(if *v == 0.0 { 0 } else { v.to_bits() });
        }
    }
    h
}

/// Welch's F from group sizes, means and variances (Welch 1951; the same formula as
/// [`super::welch::welch`]). `None` when a variance is zero or the statistic is not finite.
fn welch_f(n: &[f64], mean: &[f64], var: &[f64]) -> Option<f64> {
    let k = n.len() as f64;
    let mut w_sum = 0.0;
    let mut wm = 0.0;
    for i in 0..n.len() {
        if var[i] <= 0.0 {
            return None;
        }
        let w = n[i] / var[i];
        w_sum += w;
        wm += w * mean[i];
    }
    let m = wm / w_sum;
    let mut a = 0.0;
    let mut lambda = 0.0;
    for i in 0..n.len() {
        let w = n[i] / var[i];
        let d = mean[i] - m;
        a += w * d * d;
        let h = 1.0 - w / w_sum;
        lambda += h * h / (n[i] - 1.0);
    }
    let f = a / (k - 1.0) / (1.0 + 2.0 * (k - 2.0) * lambda / (k * k - 1.0));
    f.is_finite().then_some(f)
}

/// Welch's F calibrated by the bootstrap-t (module docs), with `resamples` resamples and the
/// random stream started from `state`. `statistic` is Welch's F of the data, `p` the bootstrap
/// p-value; no degrees of freedom.
///
/// Unavailable where Welch's F is (fewer than two groups, a group with fewer than two values or
/// zero variance). A resample in which a group's values are all equal has no Welch F; it counts
/// as at or above the observed statistic (an undefined weight is an infinite one), which keeps
/// the p-value on the safe side.
pub fn welch_bootstrap_t(groups: &[&[f64]], resamples: usize, state: u64) -> Stat<TestResult> {
    if groups.len() < 2 {
        return Err(Unavailable::new("needs at least two groups"));
    }
    let summaries: Vec<Summary> = groups.iter().map(|g| Summary::from_slice(g)).collect();
    if let Some(idx) = summaries.iter().position(|s| s.n < 2) {
        return Err(Unavailable::new(format!(
            "group {} has fewer than two values, so its variance is unknown",
            idx + 1
        )));
    }
    let n: Vec<f64> = summaries.iter().map(|s| s.n as f64).collect();
    let mean: Vec<f64> = summaries.iter().map(|s| s.mean).collect();
    let var: Vec<f64> = summaries
        .iter()
        .map(|s| s.variance().unwrap_or(0.0))
        .collect();
    let observed = welch_f(&n, &mean, &var).ok_or_else(|| {
        Unavailable::new("a group has zero variance, so its Welch weight is undefined")
    })?;
    let centred: Vec<Vec<f64>> = groups
        .iter()
        .zip(&mean)
        .map(|(g, m)| g.iter().map(|v| v - m).collect())
        .collect();
    let mut rng = SplitMix64::new(state);
    let (mut b_mean, mut b_var) = (vec![0.0; n.len()], vec![0.0; n.len()]);
    let mut at_or_above = 0usize;
    for _ in 0..resamples {
        for (i, c) in centred.iter().enumerate() {
            // Welford's update: one pass, stable.
            let (mut m, mut m2) = (0.0, 0.0);
            for j in 0..c.len() {
                let x = c[rng.below(c.len() as u64) as usize];
                let d = x - m;
                m += d / (j + 1) as f64;
                m2 += d * (x - m);
            }
            b_mean[i] = m;
            b_var[i] = m2 / (c.len() - 1) as f64;
        }
        // A resample whose spread vanished relative to the data's counts as extreme.
        let degenerate = b_var.iter().zip(&var).any(|(b, v)| *b <= 1e-12 * v);
        match welch_f(&n, &b_mean, &b_var) {
            Some(f) if !degenerate && f < observed => {}
            _ => at_or_above += 1,
        }
    }
    Ok(TestResult {
        statistic: observed,
        p: (1 + at_or_above) as f64 / (1 + resamples) as f64,
        df1: None,
        df2: None,
    })
}

/// Krishnamoorthy, Lu and Mathew's statistic `Σ n_i x̄_i² / s_i² - (Σ n_i x̄_i / s_i²)² / Σ n_i /
/// s_i²` (their eq. 2.4; `(k - 1)` times the numerator of Welch's F).
/// Computed as `Σ w_i (x̄_i - m)²` with `w_i = n_i / s_i²` and the weighted mean `m`, the same
/// quantity without the cancellation of the two sums when the means are large against their
/// differences.
fn klm_statistic(n: &[f64], mean: &[f64], var: &[f64]) -> f64 {
    let (mut wm, mut w_sum) = (0.0, 0.0);
    for i in 0..n.len() {
        let w = n[i] / var[i];
        wm += w * mean[i];
        w_sum += w;
    }
    let m = wm / w_sum;
    (0..n.len())
        .map(|i| {
            let d = mean[i] - m;
            n[i] / var[i] * d * d
        })
        .sum()
}

/// A standard normal deviate (Marsaglia's polar method).
fn normal(rng: &mut SplitMix64) -> f64 {
    loop {
        let u = 2.0 * rng.next_f64() - 1.0;
        let v = 2.0 * rng.next_f64() - 1.0;
        let s = u * u + v * v;
        if s > 0.0 && s < 1.0 {
            return u * (-2.0 * s.ln() / s).sqrt();
        }
    }
}

/// A gamma deviate of shape `a` and scale 1 (Marsaglia and Tsang 2000, "A simple method for
/// generating gamma variables", ACM TOMS 26, 363-372; shape below 1 by their boost
/// `G(a) = G(a + 1) U^(1/a)`).
fn gamma(rng: &mut SplitMix64, a: f64) -> f64 {
    if a < 1.0 {
        let u = rng.next_f64().max(f64::MIN_POSITIVE);
        return gamma(rng, a + 1.0) * u.powf(1.0 / a);
    }
    let d = a - 1.0 / 3.0;
    let c = 1.0 / (9.0 * d).sqrt();
    loop {
        let x = normal(rng);
        let v = 1.0 + c * x;
        if v <= 0.0 {
            continue;
        }
        let v = v * v * v;
        let u = rng.next_f64();
        if u < 1.0 - 0.0331 * x * x * x * x || u.ln() < 0.5 * x * x + d * (1.0 - v + v.ln()) {
            return d * v;
        }
    }
}

/// Krishnamoorthy, Lu and Mathew's parametric bootstrap test (module docs) from group summaries,
/// with `resamples` resamples from `state`. `statistic` is their T; `p` the share of bootstrap
/// T at or above it.
///
/// Unavailable with fewer than two groups, a group with fewer than two values or zero variance.
pub fn parametric_bootstrap(groups: &[Summary], resamples: usize, state: u64) -> Stat<TestResult> {
    if groups.len() < 2 {
        return Err(Unavailable::new("needs at least two groups"));
    }
    if let Some(idx) = groups.iter().position(|s| s.n < 2) {
        return Err(Unavailable::new(format!(
            "group {} has fewer than two values, so its variance is unknown",
            idx + 1
        )));
    }
    let n: Vec<f64> = groups.iter().map(|s| s.n as f64).collect();
    let mean: Vec<f64> = groups.iter().map(|s| s.mean).collect();
    let var: Vec<f64> = groups.iter().map(|s| s.variance().unwrap_or(0.0)).collect();
    if let Some(idx) = var.iter().position(|v| *v <= 0.0) {
        return Err(Unavailable::new(format!(
            "group {} has zero variance, so its weight is undefined",
            idx + 1
        )));
    }
    let observed = klm_statistic(&n, &mean, &var);
    if !observed.is_finite() {
        return Err(Unavailable::new(
            "the statistic is not finite for these groups",
        ));
    }
    let mut rng = SplitMix64::new(state);
    let (mut b_mean, mut b_var) = (vec![0.0; n.len()], vec![0.0; n.len()]);
    let mut at_or_above = 0usize;
    for _ in 0..resamples {
        for i in 0..n.len() {
            b_mean[i] = normal(&mut rng) * (var[i] / n[i]).sqrt();
            let df = n[i] - 1.0;
            b_var[i] = var[i] * 2.0 * gamma(&mut rng, df / 2.0) / df;
        }
        if klm_statistic(&n, &b_mean, &b_var) >= observed {
            at_or_above += 1;
        }
    }
    Ok(TestResult {
        statistic: observed,
        p: (1 + at_or_above) as f64 / (1 + resamples) as f64,
        df1: None,
        df2: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;
    use serde_json::Value;

    fn datasets() -> Vec<Value> {
        let path = format!(
            "{}/tests/data/reference/oneway.json",
            env!("CARGO_MANIFEST_DIR")
        );
        let v: Value = serde_json::from_str(&std::fs::read_to_string(&path).expect("read fixture"))
            .expect("parse fixture");
        v["datasets"].as_array().unwrap().clone()
    }

    /// The groups of a dataset (the `large_offset` one as exact offsets from its origin, as the
    /// fixture script gave them to scipy).
    fn groups(dataset: &Value) -> Vec<Vec<f64>> {
        let origin: Option<f64> = dataset["origin"].as_str().and_then(|o| o.parse().ok());
        dataset["groups"]
            .as_array()
            .unwrap()
            .iter()
            .map(|g| {
                g["values"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|x| {
                        let x = x.as_f64().unwrap();
                        match origin {
                            Some(o) => ((x - o) * 1e4).round() / 1e4,
                            None => x,
                        }
                    })
                    .collect()
            })
            .collect()
    }

    // Reference: scipy's Welch F (`expected.welch.f` and `df2` of tests/data/reference/
    // oneway.json, scripts/reference.py; pingouin's welch_anova agrees in its crosscheck). The
    // bootstrap-t reports Welch's F of the data as its statistic, and Krishnamoorthy, Lu and
    // Mathew's T is (k - 1) times Welch's numerator: with lambda = (k^2 - 1) / (3 df2),
    // T = (k - 1) F (1 + 2 (k - 2) / (3 df2)).
    #[test]
    fn statistics_match_scipy_welch_on_every_dataset() {
        let mut checked = 0;
        for d in datasets() {
            let name = d["name"].as_str().unwrap();
            let expected = &d["expected"]["welch"];
            let (Some(f), Some(df2)) = (expected["f"].as_f64(), expected["df2"].as_f64()) else {
                continue;
            };
            let g = groups(&d);
            let refs: Vec<&[f64]> = g.iter().map(Vec::as_slice).collect();
            let boot = welch_bootstrap_t(&refs, 19, data_state(&refs)).unwrap();
            assert!(
                lre(boot.statistic, f) >= 9.0,
                "{name}: {} vs {f}",
                boot.statistic
            );
            let k = refs.len() as f64;
            let t = (k - 1.0) * f * (1.0 + 2.0 * (k - 2.0) / (3.0 * df2));
            let s: Vec<Summary> = refs.iter().map(|g| Summary::from_slice(g)).collect();
            let pb = parametric_bootstrap(&s, 19, 1).unwrap();
            assert!(
                lre(pb.statistic, t) >= 9.0,
                "{name}: T {} vs {t}",
                pb.statistic
            );
            checked += 1;
        }
        assert!(checked >= 15, "only {checked} datasets with Welch's F");
    }

    // The same data give the same p (the random state comes from the data); a p is never 0 and
    // lies on the grid (1 + r) / (1 + B).
    #[test]
    fn p_is_a_function_of_the_data() {
        let a: Vec<f64> = (0..20).map(|i| (i as f64 * 0.37).sin()).collect();
        let b: Vec<f64> = (0..25).map(|i| 0.3 + (i as f64 * 0.91).cos()).collect();
        let refs: [&[f64]; 2] = [&a, &b];
        let one = welch_bootstrap_t(&refs, 599, data_state(&refs)).unwrap();
        let two = welch_bootstrap_t(&refs, 599, data_state(&refs)).unwrap();
        assert_eq!(one, two);
        let r = one.p * 600.0 - 1.0;
        assert!(
            (r - r.round()).abs() < 1e-9 && one.p > 0.0 && one.p <= 1.0,
            "{}",
            one.p
        );
        // A change of one value changes the random state.
        let mut c = b.clone();
        c[3] += 1e-9;
        assert_ne!(data_state(&refs), data_state(&[&a, &c]));
    }

    // Groups far apart: no resample reaches the observed F, so p is the smallest attainable,
    // 1 / (B + 1).
    #[test]
    fn a_large_difference_gets_the_smallest_p() {
        let a: Vec<f64> = (0..20).map(|i| (i % 7) as f64).collect();
        let b: Vec<f64> = (0..20).map(|i| 100.0 + (i % 5) as f64).collect();
        let refs: [&[f64]; 2] = [&a, &b];
        let r = welch_bootstrap_t(&refs, 599, data_state(&refs)).unwrap();
        assert_eq!(r.p, 1.0 / 600.0);
    }

    #[test]
    fn degenerate_inputs() {
        let two = [1.0, 2.0];
        let flat = [3.0, 3.0, 3.0];
        assert!(welch_bootstrap_t(&[&two], 9, 1).is_err());
        assert!(welch_bootstrap_t(&[&two, &[1.0]], 9, 1).is_err());
        assert!(welch_bootstrap_t(&[&two, &flat], 9, 1).is_err());
        let s = [Summary::from_slice(&two), Summary::from_slice(&flat)];
        assert!(parametric_bootstrap(&s, 9, 1).is_err());
    }

    // Marsaglia and Tsang's generator: mean and variance of Gamma(a, 1) are both a (common
    // practice), checked for a shape below 1 (the boost) and above, 200,000 draws: the standard
    // error of the mean is sqrt(a / 200000), so 5 of them is a bound that cannot fail by chance.
    #[test]
    fn gamma_deviates_have_the_right_moments() {
        let mut rng = SplitMix64::new(99);
        for a in [0.5, 1.5, 9.5] {
            let n = 200_000;
            let x: Vec<f64> = (0..n).map(|_| gamma(&mut rng, a)).collect();
            let mean = x.iter().sum::<f64>() / n as f64;
            let var = x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
            assert!(
                (mean - a).abs() < 5.0 * (a / n as f64).sqrt(),
                "a {a}: mean {mean}"
            );
            assert!((var - a).abs() < 0.05 * a, "a {a}: variance {var}");
        }
    }

    // The level of the bootstrap-t on skewed groups, a small simulation with exact binomial
    // bounds: 3 groups of 20, 40 and 20 standardized lognormal values (log-SD 0.5), the small
    // groups with 16 times the variance, no difference in means; 400 replicates at 0.05. Welch's F
    // distribution rejected about 0.09-0.10 of such nulls in the null-rate study. The count must lie
    // within the 0.1 % binomial quantiles of Bradley's band (0.025-0.075): 2 to 47 of 400
    // (exact binomial sums, as tests/null_rates.rs computes them: P(X < 2) = 0.00045 for
    // Binomial(400, 0.025), P(X <= 47) = 0.99905 for Binomial(400, 0.075)).
    #[test]
    fn holds_its_level_on_skewed_unequal_groups() {
        let mut rng = SplitMix64::new(0x0b00_7577_1e7e);
        let lognormal = |rng: &mut SplitMix64, sd: f64| {
            let m = (0.125f64).exp();
            let v = ((0.25f64).exp() - 1.0) * (0.25f64).exp();
            sd * ((0.5 * normal(rng)).exp() - m) / v.sqrt()
        };
        let mut rejected = 0;
        for _ in 0..400 {
            let g: Vec<Vec<f64>> = [(20, 4.0), (40, 1.0), (20, 4.0)]
                .iter()
                .map(|&(n, sd)| (0..n).map(|_| lognormal(&mut rng, sd)).collect())
                .collect();
            let refs: Vec<&[f64]> = g.iter().map(Vec::as_slice).collect();
            if welch_bootstrap_t(&refs, 599, data_state(&refs)).unwrap().p <= 0.05 {
                rejected += 1;
            }
        }
        assert!((2..=47).contains(&rejected), "{rejected} of 400 rejected");
    }
}
