//! Normality check: the Shapiro-Wilk W test, by Royston's approximation.
//!
//! W and its p-value follow Royston (1992, "Approximating the Shapiro-Wilk W-test for
//! non-normality", Statistics and Computing 2, 117-119) as coded in Royston (1995, "Algorithm AS
//! R94: A remark on Algorithm AS 181: the W-test for normality", Applied Statistics 44, 547-551):
//! the coefficients `a` from normal scores with polynomial corrections for the two most extreme
//! pairs, the exact distribution for n = 3, and normalising transformations of `1 - W` for
//! 4 <= n <= 11 and n >= 12.
//!
//! Valid range: 3 <= n <= 5000 (the range over which Royston fitted and checked the
//! approximation). Outside it, or when all values are equal, the result is [`Unavailable`] with
//! the reason. Start reading at [`shapiro_wilk`].

use super::ptukey::erfc;
use super::{Stat, Unavailable};
use statrs::distribution::{ContinuousCDF, Normal};

/// The Shapiro-Wilk statistic with its p-value (small W, small p: evidence of non-normality).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ShapiroWilk {
    /// W statistic, in (0, 1].
    pub w: f64,
    /// p-value (Royston's approximation).
    pub p: f64,
    /// Number of values used.
    pub n: usize,
}

/// Smallest and largest sample sizes the approximation covers (Royston 1995).
pub const MIN_N: usize = 3;
/// See [`MIN_N`].
pub const MAX_N: usize = 5000;

fn poly(c: &[f64], x: f64) -> f64 {
    c.iter().rev().fold(0.0, |acc, &ci| acc * x + ci)
}

/// Shapiro-Wilk W and p for the values `x` (any order), Royston (1992, 1995; AS R94).
///
/// Unavailable when n < 3 or n > 5000 (outside the range of Royston's approximation; no p-value is
/// given rather than an extrapolated one), when a value is not finite, or when all values are
/// equal (zero range).
pub fn shapiro_wilk(x: &[f64]) -> Stat<ShapiroWilk> {
    let n = x.len();
    if n < MIN_N {
        return Err(Unavailable::new(format!(
            "Shapiro-Wilk needs at least {MIN_N} values (got {n})"
        )));
    }
    if n > MAX_N {
        return Err(Unavailable::new(format!(
            "Shapiro-Wilk (Royston's approximation) is valid for at most {MAX_N} values (got {n})"
        )));
    }
    if x.iter().any(|v| !v.is_finite()) {
        return Err(Unavailable::new("Shapiro-Wilk: a value is not finite"));
    }
    let mut sorted = x.to_vec();
    sorted.sort_by(|a, b| a.total_cmp(b));
    let range = sorted[n - 1] - sorted[0];
    if range <= 0.0 {
        return Err(Unavailable::new(
            "Shapiro-Wilk: all values are equal (zero range)",
        ));
    }
    let a = coefficients(n);
    // W = (sum a_i (x_(n+1-i) - x_(i)))^2 / sum (x - mean)^2, on values scaled by the range.
    let mean = sorted.iter().sum::<f64>() / n as f64;
    let ss: f64 = sorted
        .iter()
        .map(|v| ((v - mean) / range).powi(2))
        .sum::<f64>();
    let numerator: f64 = a
        .iter()
        .enumerate()
        .map(|(i, ai)| ai * (sorted[n - 1 - i] - sorted[i]) / range)
        .sum();
    let w = (numerator * numerator / ss).min(1.0);
    let p = p_value(w, n);
    Ok(ShapiroWilk { w, p, n })
}

/// The `n / 2` coefficients for the upper half (AS R94; the lower half is their negative).
fn coefficients(n: usize) -> Vec<f64> {
    const C1: [f64; 6] = [0.0, 0.221157, -0.147981, -2.071190, 4.434685, -2.706056];
    const C2: [f64; 6] = [0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633];
    let half = n / 2;
    if n == 3 {
        return vec![std::f64::consts::FRAC_1_SQRT_2];
    }
    let normal = Normal::standard();
    let an = n as f64;
    let m: Vec<f64> = (1..=half)
        .map(|i| normal.inverse_cdf((i as f64 - 0.375) / (an + 0.25)))
        .collect();
    let summ2 = 2.0 * m.iter().map(|v| v * v).sum::<f64>();
    let ssumm2 = summ2.sqrt();
    let rsn = 1.0 / an.sqrt();
    let a1 = poly(&C1, rsn) - m[0] / ssumm2;
    let mut a = vec![0.0; half];
    let (first, fac) = if n > 5 {
        let a2 = -m[1] / ssumm2 + poly(&C2, rsn);
        let fac = ((summ2 - 2.0 * m[0] * m[0] - 2.0 * m[1] * m[1])
            / (1.0 - 2.0 * a1 * a1 - 2.0 * a2 * a2))
            .sqrt();
        a[1] = a2;
        (2, fac)
    } else {
        let fac = ((summ2 - 2.0 * m[0] * m[0]) / (1.0 - 2.0 * a1 * a1)).sqrt();
        (1, fac)
    };
    a[0] = a1;
    for i in first..half {
        a[i] = -m[i] / fac;
    }
    a
}

/// Royston's p-value for W at sample size n.
fn p_value(w: f64, n: usize) -> f64 {
    const C3: [f64; 4] = [0.5440, -0.39978, 0.025054, -6.714e-4];
    const C4: [f64; 4] = [1.3822, -0.77857, 0.062767, -0.0020322];
    const C5: [f64; 4] = [-1.5861, -0.31082, -0.083751, 0.0038915];
    const C6: [f64; 3] = [-0.4803, -0.082676, 0.0030302];
    const G: [f64; 2] = [-2.273, 0.459];
    let an = n as f64;
    if n == 3 {
        // Exact distribution for n = 3.
        const PI6: f64 = 6.0 / std::f64::consts::PI;
        const STQR: f64 = std::f64::consts::FRAC_PI_3; // asin(sqrt(3/4))
        return (PI6 * (w.sqrt().asin() - STQR)).clamp(0.0, 1.0);
    }
    if w >= 1.0 {
        return 1.0;
    }
    let mut y = (1.0 - w).ln();
    let (m, s) = if n <= 11 {
        let gamma = poly(&G, an);
        if y >= gamma {
            // Beyond the range of the transformation: W is extremely small.
            return 0.0;
        }
        y = -(gamma - y).ln();
        (poly(&C3, an), poly(&C4, an).exp())
    } else {
        let xx = an.ln();
        (poly(&C5, xx), poly(&C6, xx).exp())
    };
    // Upper tail of N(m, s) at y, with relative accuracy.
    0.5 * erfc((y - m) / s * std::f64::consts::FRAC_1_SQRT_2)
}

/// The D'Agostino-Pearson omnibus test of normality, for samples beyond Shapiro-Wilk's range.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DagostinoPearson {
    /// Number of values.
    pub n: usize,
    /// Sample skewness `g1 = m3 / m2^1.5` (biased moments).
    pub skewness: f64,
    /// Its standard error under normality, `sqrt(6 n (n - 1) / ((n - 2) (n + 1) (n + 3)))`.
    pub skewness_se: f64,
    /// Sample excess kurtosis `g2 = m4 / m2^2 - 3`.
    pub excess_kurtosis: f64,
    /// Its standard error under normality, `2 se_skew sqrt((n^2 - 1) / ((n - 3) (n + 5)))`.
    pub excess_kurtosis_se: f64,
    /// The skewness test's normal deviate (D'Agostino 1970).
    pub z_skewness: f64,
    /// The kurtosis test's normal deviate (Anscombe and Glynn 1983).
    pub z_kurtosis: f64,
    /// `K^2 = z_skewness^2 + z_kurtosis^2`.
    pub k2: f64,
    /// Upper tail of chi-square with 2 degrees of freedom at `K^2`.
    pub p: f64,
}

/// D'Agostino-Pearson K^2 (D'Agostino, Belanger and D'Agostino 1990, "A suggestion for using
/// powerful and informative tests of normality", The American Statistician 44, 316-321): the
/// skewness transformed to a normal deviate by D'Agostino's (1970) Johnson SU approximation and the
/// kurtosis by Anscombe and Glynn's (1983) Wilson-Hilferty form, squared and summed, against
/// chi-square with 2 df. Valid from 20 values on (the kurtosis approximation's range), with no
/// upper limit, so it covers what Shapiro-Wilk cannot (above 5,000). At large n any departure is
/// significant; the skewness and excess kurtosis with their standard errors say how large it is,
/// and the F test is robust to moderate non-normality there (common practice).
///
/// Unavailable below 20 values or when every value is the same.
pub fn dagostino_pearson(x: &[f64]) -> Stat<DagostinoPearson> {
    let n = x.len();
    if n < 20 {
        return Err(Unavailable::new(format!(
            "needs at least 20 values for the kurtosis test (got {n})"
        )));
    }
    let nf = n as f64;
    let mean = x.iter().sum::<f64>() / nf;
    let (mut m2, mut m3, mut m4) = (0.0, 0.0, 0.0);
    for &v in x {
        let d = v - mean;
        let d2 = d * d;
        m2 += d2;
        m3 += d2 * d;
        m4 += d2 * d2;
    }
    let (m2, m3, m4) = (m2 / nf, m3 / nf, m4 / nf);
    if !(m2 > 0.0 && m2.is_finite()) {
        return Err(Unavailable::new(
            "every value is the same, so skewness and kurtosis are undefined",
        ));
    }
    let b1 = m3 / m2.powf(1.5);
    let b2 = m4 / (m2 * m2);
    // Skewness test (D'Agostino 1970).
    let y = b1 * ((nf + 1.0) * (nf + 3.0) / (6.0 * (nf - 2.0))).sqrt();
    let beta2 = 3.0 * (nf * nf + 27.0 * nf - 70.0) * (nf + 1.0) * (nf + 3.0)
        / ((nf - 2.0) * (nf + 5.0) * (nf + 7.0) * (nf + 9.0));
    let w2 = -1.0 + (2.0 * (beta2 - 1.0)).sqrt();
    let delta = 1.0 / (0.5 * w2.ln()).sqrt();
    let alpha = (2.0 / (w2 - 1.0)).sqrt();
    let y = if y == 0.0 { 1.0 } else { y };
    let z_skewness = delta * (y / alpha + ((y / alpha).powi(2) + 1.0).sqrt()).ln();
    // Kurtosis test (Anscombe and Glynn 1983).
    let e = 3.0 * (nf - 1.0) / (nf + 1.0);
    let var_b2 =
        24.0 * nf * (nf - 2.0) * (nf - 3.0) / ((nf + 1.0) * (nf + 1.0) * (nf + 3.0) * (nf + 5.0));
    let xk = (b2 - e) / var_b2.sqrt();
    let sqrt_beta1 = 6.0 * (nf * nf - 5.0 * nf + 2.0) / ((nf + 7.0) * (nf + 9.0))
        * (6.0 * (nf + 3.0) * (nf + 5.0) / (nf * (nf - 2.0) * (nf - 3.0))).sqrt();
    let a = 6.0
        + 8.0 / sqrt_beta1 * (2.0 / sqrt_beta1 + (1.0 + 4.0 / (sqrt_beta1 * sqrt_beta1)).sqrt());
    let term1 = 1.0 - 2.0 / (9.0 * a);
    let denom = 1.0 + xk * (2.0 / (a - 4.0)).sqrt();
    if denom == 0.0 {
        return Err(Unavailable::new(
            "the kurtosis transformation is undefined here",
        ));
    }
    let term2 = denom.signum() * ((1.0 - 2.0 / a) / denom.abs()).cbrt();
    let z_kurtosis = (term1 - term2) / (2.0 / (9.0 * a)).sqrt();
    let k2 = z_skewness * z_skewness + z_kurtosis * z_kurtosis;
    // Chi-square with 2 df: the upper tail is exp(-K^2 / 2) exactly.
    let p = (-0.5 * k2).exp();
    let skewness_se = (6.0 * nf * (nf - 1.0) / ((nf - 2.0) * (nf + 1.0) * (nf + 3.0))).sqrt();
    let excess_kurtosis_se =
        2.0 * skewness_se * ((nf * nf - 1.0) / ((nf - 3.0) * (nf + 5.0))).sqrt();
    Ok(DagostinoPearson {
        n,
        skewness: b1,
        skewness_se,
        excess_kurtosis: b2 - 3.0,
        excess_kurtosis_se,
        z_skewness,
        z_kurtosis,
        k2,
        p,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    #[test]
    fn out_of_range_sizes_are_unavailable() {
        assert!(shapiro_wilk(&[1.0, 2.0]).is_err());
        let big: Vec<f64> = (0..5001).map(|i| (i as f64).sin()).collect();
        let err = shapiro_wilk(&big).unwrap_err();
        assert!(err.reason.contains("5000"), "{err}");
        assert!(shapiro_wilk(&[2.0, 2.0, 2.0, 2.0]).is_err());
        assert!(shapiro_wilk(&[1.0, f64::NAN, 2.0]).is_err());
    }

    // n = 3: W for equally spaced values is 1 and the exact p (Shapiro and Wilk 1965) is 1.
    #[test]
    fn three_equally_spaced_values() {
        let r = shapiro_wilk(&[1.0, 2.0, 3.0]).unwrap();
        assert!(lre(r.w, 1.0) > 14.0, "{}", r.w);
        assert!(lre(r.p, 1.0) > 12.0, "{}", r.p);
    }
}

#[cfg(test)]
mod fixture_tests {
    use super::*;
    use crate::stats::lre;
    use serde_json::Value;

    // Reference: scipy.stats.shapiro (the same AS R94 algorithm) on the residuals (value minus
    // group mean) of every dataset in tests/data/reference/oneway.json with 3 <= N <= 5000;
    // >= 6 significant digits for W and p (issue 2).
    #[test]
    fn shapiro_wilk_matches_scipy_on_residuals() {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/data/reference/oneway.json"
        );
        let fixture: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
        let mut checked = 0;
        for dataset in fixture["datasets"].as_array().unwrap() {
            let name = dataset["name"].as_str().unwrap();
            let mut residuals = Vec::new();
            for g in dataset["groups"].as_array().unwrap() {
                let v: Vec<f64> = g["values"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|x| x.as_f64().unwrap())
                    .collect();
                let mean = crate::stats::describe::Summary::from_slice(&v).mean;
                residuals.extend(v.iter().map(|x| x - mean));
            }
            let expected = &dataset["expected"]["shapiro_wilk"];
            let ours = shapiro_wilk(&residuals);
            if expected.is_null() || expected["w"].is_null() {
                assert!(residuals.len() > MAX_N && ours.is_err(), "{name}");
                continue;
            }
            let r = ours.unwrap();
            let (w, p) = (
                expected["w"].as_f64().unwrap(),
                expected["p"].as_f64().unwrap(),
            );
            assert!(lre(r.w, w) >= 6.0, "{name}: W {} vs {w}", r.w);
            assert!(lre(r.p, p) >= 6.0, "{name}: p {} vs {p}", r.p);
            checked += 1;
        }
        assert!(checked >= 12, "{checked}");
    }

    // scipy.stats.skewtest, kurtosistest and normaltest on deterministic data
    // (scripts/normaltest_reference.py, tests/data/reference/normaltest.json): 12 cases, n from
    // 20 to 50,000, uniform-like, heavy-tailed and skewed values.
    #[test]
    fn dagostino_pearson_against_scipy() {
        let doc: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/data/reference/normaltest.json"))
                .unwrap();
        for case in doc["cases"].as_array().unwrap() {
            let n = case["n"].as_u64().unwrap() as usize;
            let xs: Vec<f64> = (1..=n as u64)
                .map(|i| ((i * 7919) % 10007) as f64 / 10007.0 - 0.5)
                .map(|x| match case["kind"].as_str().unwrap() {
                    "cube" => x * x * x,
                    "exp" => (3.0 * x).exp(),
                    _ => x,
                })
                .collect();
            let r = dagostino_pearson(&xs).unwrap();
            let want = |k: &str| case[k].as_f64().unwrap();
            assert!(
                lre(r.z_skewness, want("skew_z")) > 9.0,
                "{case}: {}",
                r.z_skewness
            );
            assert!(
                lre(r.z_kurtosis, want("kurt_z")) > 9.0,
                "{case}: {}",
                r.z_kurtosis
            );
            assert!(lre(r.k2, want("k2")) > 9.0, "{case}: {}", r.k2);
            assert!(lre(r.p, want("p")) > 8.0, "{case}: {}", r.p);
        }
        assert!(dagostino_pearson(&[1.0; 19]).is_err());
        assert!(dagostino_pearson(&[1.0; 30]).is_err());
    }
}
