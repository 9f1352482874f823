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
}
