//! Serial dependence of the values within groups, in time order: the requirement check that
//! tells an engineer the values are not independent (parts of one shot or sample sharing its
//! deviation, a slow drift within the period), so a test that treats them as independent gives
//! p-values that are too small. Start reading at [`serial_dependence`].
//!
//! # Method
//! Within each group the values are taken in time order and centred on the group mean (the
//! residuals of the one-way model). The statistic of a group is the lag-1 serial product sum
//! `T = sum_t e_t e_(t+1)` of its residuals scaled to unit variance (`e_t / sqrt(S2 / n)`).
//! Under the null hypothesis the values of a group are independent and identically distributed,
//! so their residuals are *exchangeable*: every order is equally likely, whatever the
//! distribution. The permutation (randomization) mean and variance of `T` are then exact
//! functions of the residuals' power sums `S1..S4`, as in Wald and Wolfowitz (1943), "An exact
//! test for randomness in the non-parametric case based on serial correlation", Annals of
//! Mathematical Statistics 14, 378-388 (who use the circular sum), and in the randomization
//! moments of Moran's I with a path of neighbours (Cliff and Ord 1981, *Spatial Processes*,
//! ch. 1); here the non-circular path, expanded directly:
//!
//! - `E[T] = m mu_2`, with `m = n - 1` neighbouring pairs;
//! - `E[T^2] = m mu_22 + 2 (n - 2) mu_211 + (m^2 - m - 2 (n - 2)) mu_1111`: pairs of neighbour
//!   pairs that are the same, share one value, or are disjoint;
//! - `mu_2 = (S1^2 - S2) / n_(2)`, `mu_22 = (S2^2 - S4) / n_(2)`,
//!   `mu_211 = (S2 S1^2 - 2 S1 S3 + 2 S4 - S2^2) / n_(3)`,
//!   `mu_1111 = (S1^4 - 6 S1^2 S2 + 3 S2^2 + 8 S1 S3 - 6 S4) / n_(4)`: the means of products over
//!   distinct positions of a random order (`n_(j)` the falling factorial).
//!
//! Groups are independent of each other, so the sum of their `T` has the sum of their means
//! and variances, and `z = (sum T - sum E[T]) / sqrt(sum Var T)` is referred to the normal
//! distribution, one-sided: values that share a deviation (a shot, a drift) give *positive*
//! serial correlation. Groups of one or two values, or constant groups, carry no information
//! (their `T` cannot vary) and drop out. The unit test checks the moments against an exhaustive
//! enumeration of every order of small groups.
//!
//! The pooled `r1 = sum T / sum n` is printed beside it as the size of the dependence (near 0
//! for independent values; about the share of the variance that parts measured together share,
//! when they are neighbours in time).

use super::distributions::normal_sf;
use super::{Stat, Unavailable};

/// The serial-dependence check of one test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SerialCheck {
    /// Pooled lag-1 serial correlation of the standardised residuals.
    pub r1: f64,
    /// Standardised statistic (permutation mean and variance within groups).
    pub z: f64,
    /// One-sided p-value (positive serial correlation).
    pub p: f64,
    /// Neighbouring pairs that entered the statistic.
    pub n_pairs: u64,
}

/// Exact permutation mean and variance of the lag-1 product sum of `e` (any values) over
/// every order of them.
#[cfg(test)]
fn permutation_moments(e: &[f64]) -> (f64, f64) {
    let (mut s1, mut s2, mut s3, mut s4) = (0.0, 0.0, 0.0, 0.0);
    for &x in e {
        let x2 = x * x;
        s1 += x;
        s2 += x2;
        s3 += x2 * x;
        s4 += x2 * x2;
    }
    moments_from_power_sums(e.len() as f64, [s1, s2, s3, s4])
}

/// The permutation mean and variance of the lag-1 product sum of `n` values with power sums
/// `s = [S1, S2, S3, S4]` (see the module docs).
fn moments_from_power_sums(n: f64, s: [f64; 4]) -> (f64, f64) {
    let [s1, s2, s3, s4] = s;
    let m = n - 1.0;
    let n2 = n * (n - 1.0);
    let n3 = n2 * (n - 2.0);
    let n4 = n3 * (n - 3.0);
    let mu2 = (s1 * s1 - s2) / n2;
    let mu22 = (s2 * s2 - s4) / n2;
    let shared = 2.0 * (n - 2.0);
    let disjoint = m * m - m - shared;
    let mu211 = if n3 > 0.0 {
        (s2 * s1 * s1 - 2.0 * s1 * s3 + 2.0 * s4 - s2 * s2) / n3
    } else {
        0.0
    };
    let mu1111 = if n4 > 0.0 {
        (s1.powi(4) - 6.0 * s1 * s1 * s2 + 3.0 * s2 * s2 + 8.0 * s1 * s3 - 6.0 * s4) / n4
    } else {
        0.0
    };
    let mean = m * mu2;
    let second = m * mu22 + shared * mu211 + disjoint * mu1111;
    (mean, (second - mean * mean).max(0.0))
}

/// The check over groups of values, each in time order.
pub fn serial_dependence(groups: &[&[f64]]) -> Stat<SerialCheck> {
    let (mut t_sum, mut mean_sum, mut var_sum) = (0.0, 0.0, 0.0);
    let (mut n_sum, mut n_pairs) = (0u64, 0u64);
    for g in groups {
        if g.len() < 3 {
            continue;
        }
        if g.iter().any(|x| !x.is_finite()) {
            return Err(Unavailable::new("a value is not finite"));
        }
        let n = g.len() as f64;
        let mean = g.iter().sum::<f64>() / n;
        // One pass over the residuals: power sums and the lag-1 product sum. Scaling the
        // residuals to S2 = n (c = sqrt(n / S2)) multiplies S_k by c^k and T by c^2.
        let (mut s1, mut s2, mut s3, mut s4, mut t) = (0.0, 0.0, 0.0, 0.0, 0.0);
        let mut previous = g[0] - mean;
        for (i, &x) in g.iter().enumerate() {
            let e = x - mean;
            let e2 = e * e;
            s1 += e;
            s2 += e2;
            s3 += e2 * e;
            s4 += e2 * e2;
            if i > 0 {
                t += previous * e;
            }
            previous = e;
        }
        if s2 <= 0.0 || s2.is_nan() {
            continue;
        }
        let c2 = n / s2;
        let c = c2.sqrt();
        let (mean_t, var_t) =
            moments_from_power_sums(n, [s1 * c, s2 * c2, s3 * c2 * c, s4 * c2 * c2]);
        t_sum += t * c2;
        mean_sum += mean_t;
        var_sum += var_t;
        n_sum += g.len() as u64;
        n_pairs += g.len() as u64 - 1;
    }
    if var_sum <= 0.0 || var_sum.is_nan() {
        return Err(Unavailable::new(
            "no group has three or more values that vary: serial dependence not checked",
        ));
    }
    let z = (t_sum - mean_sum) / var_sum.sqrt();
    Ok(SerialCheck {
        r1: t_sum / n_sum as f64,
        z,
        p: normal_sf(z),
        n_pairs,
    })
}

/// Lags at most in [`design_effect`].
pub const MAX_LAG: usize = 50;

/// The design effect of serial dependence: how much the variance of a group mean exceeds
/// `sigma^2 / n` because neighbouring values are alike, estimated as `1 + 2 sum_h rho_h` over
/// the lags `h = 1, 2, ...` of the pooled within-group autocorrelation of the standardised
/// residuals. The sum runs while the sums of neighbouring pairs of autocorrelations stay
/// positive (Geyer's initial positive sequence: C. J. Geyer 1992, "Practical Markov chain
/// Monte Carlo", Statistical Science 7, 473-483), at most [`MAX_LAG`] lags. Each `rho_h` is
/// corrected for the bias that centring on the group mean gives (its permutation mean,
/// `-(n - h) / (n - 1)` per group for residuals scaled to `S2 = n`). At least 1.
///
/// Dividing an F statistic by it is the effective-sample-size correction (Bayley and
/// Hammersley 1946, "The effective number of independent observations in an autocorrelated
/// time series", JRSS Supplement 8, 184-197): the test asks whether the difference survives
/// the dependence.
pub fn design_effect(groups: &[&[f64]]) -> f64 {
    // Standardised residuals of the groups that can vary (lag by lag below, stopping at the
    // first non-positive pair: usually a few passes).
    let mut series: Vec<Vec<f64>> = Vec::new();
    for g in groups {
        if g.len() < 3 {
            continue;
        }
        let n = g.len() as f64;
        let mean = g.iter().sum::<f64>() / n;
        let mut e: Vec<f64> = g.iter().map(|x| x - mean).collect();
        let s2: f64 = e.iter().map(|x| x * x).sum();
        if s2 <= 0.0 || s2.is_nan() {
            continue;
        }
        let scale = (n / s2).sqrt();
        for x in e.iter_mut() {
            *x *= scale;
        }
        series.push(e);
    }
    let n_sum: f64 = series.iter().map(|e| e.len() as f64).sum();
    let longest = series.iter().map(Vec::len).max().unwrap_or(0);
    let lags = MAX_LAG.min(longest.saturating_sub(2));
    let rho = |h: usize| -> f64 {
        let mut num = 0.0;
        for e in &series {
            if h >= e.len() {
                continue;
            }
            let n = e.len() as f64;
            let t: f64 = e.iter().zip(&e[h..]).map(|(a, b)| a * b).sum();
            // Remove the permutation mean of the product sum at this lag.
            num += t + (n - h as f64) / (n - 1.0);
        }
        num / n_sum
    };
    let mut sum = 0.0;
    let mut h = 1;
    while h < lags {
        let pair = rho(h) + rho(h + 1);
        if pair <= 0.0 {
            break;
        }
        sum += pair;
        h += 2;
    }
    (1.0 + 2.0 * sum).max(1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every order of `e` (Heap's algorithm), the lag-1 product sum of each.
    fn all_orders(e: &[f64]) -> Vec<f64> {
        let mut a = e.to_vec();
        let n = a.len();
        let mut c = vec![0usize; n];
        let t = |a: &[f64]| a.windows(2).map(|w| w[0] * w[1]).sum::<f64>();
        let mut out = vec![t(&a)];
        let mut i = 0;
        while i < n {
            if c[i] < i {
                if i % 2 == 0 {
                    a.swap(0, i);
                } else {
                    a.swap(c[i], i);
                }
                out.push(t(&a));
                c[i] += 1;
                i = 0;
            } else {
                c[i] = 0;
                i += 1;
            }
        }
        out
    }

    #[test]
    fn moments_match_exhaustive_enumeration() {
        // Exact check: the mean and variance over all n! orders (enumerated) equal the
        // closed form, for values with and without a zero sum, with ties, n = 3..7.
        let cases: [&[f64]; 5] = [
            &[0.3, -1.2, 2.5],
            &[1.0, 2.0, 2.0, 7.5],
            &[-0.4, 0.1, 0.9, -2.2, 1.6],
            &[3.0, 1.0, 4.0, 1.0, 5.0, 9.0],
            &[0.5, -0.25, 1.75, -1.0, 0.0, 2.5, -3.5],
        ];
        for e in cases {
            let ts = all_orders(e);
            let k = ts.len() as f64;
            let mean = ts.iter().sum::<f64>() / k;
            let var = ts.iter().map(|t| (t - mean).powi(2)).sum::<f64>() / k;
            let (m, v) = permutation_moments(e);
            assert!(
                (m - mean).abs() < 1e-12 * (1.0 + mean.abs()),
                "{e:?}: {m} vs {mean}"
            );
            assert!((v - var).abs() < 1e-11 * (1.0 + var), "{e:?}: {v} vs {var}");
        }
    }

    /// A small deterministic generator (xorshift) for the simulation checks.
    fn normals(state: &mut u64, n: usize) -> Vec<f64> {
        let mut u = || {
            *state ^= *state << 13;
            *state ^= *state >> 7;
            *state ^= *state << 17;
            (*state >> 11) as f64 / (1u64 << 53) as f64
        };
        (0..n)
            .map(|_| {
                let (a, b) = (u().max(1e-300), u());
                (-2.0 * a.ln()).sqrt() * (std::f64::consts::TAU * b).cos()
            })
            .collect()
    }

    #[test]
    fn holds_its_level_on_independent_values_and_finds_shared_shot_deviations() {
        // Simulation (invented data): 4 groups of 40 values. Independent values: the rate of
        // p < 0.05 over 2,000 replicates lies within a binomial 99.9 % band around 0.05
        // (0.035-0.067). Shots of 8 parts sharing a deviation with the part-to-part SD: found
        // in nearly every replicate.
        let mut state = 0x9e37_79b9_7f4a_7c15u64;
        let reps = 2000;
        let mut null_hits = 0;
        let mut shot_hits = 0;
        for _ in 0..reps {
            let groups: Vec<Vec<f64>> = (0..4).map(|_| normals(&mut state, 40)).collect();
            let refs: Vec<&[f64]> = groups.iter().map(Vec::as_slice).collect();
            if serial_dependence(&refs).unwrap().p < 0.05 {
                null_hits += 1;
            }
            let shots: Vec<Vec<f64>> = (0..4)
                .map(|_| {
                    let shot = normals(&mut state, 5);
                    let parts = normals(&mut state, 40);
                    parts
                        .iter()
                        .enumerate()
                        .map(|(i, p)| p + shot[i / 8])
                        .collect()
                })
                .collect();
            let refs: Vec<&[f64]> = shots.iter().map(Vec::as_slice).collect();
            if serial_dependence(&refs).unwrap().p < 0.05 {
                shot_hits += 1;
            }
        }
        let rate = null_hits as f64 / reps as f64;
        assert!((0.035..=0.067).contains(&rate), "null rate {rate}");
        assert!(shot_hits as f64 / reps as f64 > 0.95, "power {shot_hits}");
    }

    #[test]
    fn design_effect_of_shots_is_about_one_plus_shot_size_minus_one_times_icc() {
        // Invented shots of 8 parts, shot SD = part SD (intraclass correlation 0.5): the
        // variance of a mean of whole shots is (1 + 7 x 0.5) = 4.5 times sigma^2 / n
        // (the design effect of cluster sampling, Kish 1965, Survey Sampling, ch. 5).
        // Independent values: about 1.
        let mut state = 0x2545_f491_4f6c_dd1du64;
        let mut shots = Vec::new();
        let mut independent = Vec::new();
        for _ in 0..3 {
            let shot = normals(&mut state, 100);
            let parts = normals(&mut state, 800);
            shots.push(
                parts
                    .iter()
                    .enumerate()
                    .map(|(i, p)| p + shot[i / 8])
                    .collect::<Vec<_>>(),
            );
            independent.push(normals(&mut state, 800));
        }
        let refs: Vec<&[f64]> = shots.iter().map(Vec::as_slice).collect();
        let d = design_effect(&refs);
        assert!((3.5..5.5).contains(&d), "shots: {d}");
        let refs: Vec<&[f64]> = independent.iter().map(Vec::as_slice).collect();
        let d = design_effect(&refs);
        assert!((1.0..1.3).contains(&d), "independent: {d}");
    }

    #[test]
    fn groups_that_cannot_vary_drop_out() {
        assert!(serial_dependence(&[&[1.0, 2.0], &[3.0, 3.0, 3.0]]).is_err());
        let r = serial_dependence(&[&[1.0, 2.0], &[1.0, 2.0, 3.0, 4.0, 5.0]]).unwrap();
        assert_eq!(r.n_pairs, 4);
        assert!(
            r.z > 0.0 && r.p < 0.5,
            "a trend is positive serial correlation"
        );
    }
}
