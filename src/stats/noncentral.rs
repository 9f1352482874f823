//! The noncentral F distribution, used for the power of the one-way F test ([`super::power`]).
//!
//! `F' = (X1 / df1) / (X2 / df2)` with `X1` noncentral chi-square (`df1`, noncentrality `nc`) and
//! `X2` central chi-square (`df2`). Its distribution function is the Poisson mixture of central
//! (incomplete beta) terms
//!
//! ```text
//! P(F' <= x) = sum_j exp(-nc/2) (nc/2)^j / j! * I_y(df1/2 + j, df2/2),   y = df1 x / (df1 x + df2)
//! ```
//!
//! (Johnson, Kotz and Balakrishnan 1995, Continuous Univariate Distributions vol. 2, ch. 30;
//! the noncentral beta series of Lenth 1987, "Algorithm AS 226: Computing noncentral beta
//! probabilities", Applied Statistics 36, 241-244, with the start at the Poisson mode recommended by
//! Frick 1990, "Algorithm AS R84", Applied Statistics 39, 311-312). Unlike AS 226, which sums
//! upward from j = 0 and so underflows for large `nc`, the sum here starts at the largest Poisson
//! weight and runs outward in both directions until the terms are negligible. The incomplete beta
//! is evaluated directly (statrs `beta_reg`) at the mode and carried to its neighbours by the
//! recurrence `I_y(a + 1, b) = I_y(a, b) - T(a)` (evaluated directly again wherever the
//! difference would cancel), and the upper tail ([`ncf_sf`]) sums the complementary terms
//! `I_(1-y)(df2/2, df1/2 + j)` so that it keeps relative accuracy when small.
//!
//! Start reading at [`ncf_cdf`].

use super::{Stat, Unavailable};
use statrs::function::beta::beta_reg;
use statrs::function::gamma::ln_gamma;

/// Lower tail `P(F' <= x)` of the noncentral F distribution.
///
/// `df1 > 0`, `df2 > 0` (fractional allowed), `nc >= 0` (0 gives the central F). `x <= 0` gives 0,
/// `x = +inf` gives 1. Unavailable for NaN or out-of-range parameters. Reference: the Poisson
/// mixture series (Lenth 1987, AS 226; Frick 1990, AS R84), summed outward from the Poisson mode.
pub fn ncf_cdf(x: f64, df1: f64, df2: f64, nc: f64) -> Stat<f64> {
    check(x, df1, df2, nc)?;
    if x <= 0.0 {
        return Ok(0.0);
    }
    if x == f64::INFINITY {
        return Ok(1.0);
    }
    Ok(series(x, df1, df2, nc, false))
}

/// Upper tail `P(F' > x)` of the noncentral F distribution (the power of an F test whose critical
/// value is `x`), summed directly so that small tails keep their relative accuracy.
///
/// Same arguments and degenerate cases as [`ncf_cdf`].
pub fn ncf_sf(x: f64, df1: f64, df2: f64, nc: f64) -> Stat<f64> {
    check(x, df1, df2, nc)?;
    if x <= 0.0 {
        return Ok(1.0);
    }
    if x == f64::INFINITY {
        return Ok(0.0);
    }
    Ok(series(x, df1, df2, nc, true))
}

fn check(x: f64, df1: f64, df2: f64, nc: f64) -> Stat<()> {
    if x.is_nan() {
        return Err(Unavailable::new("noncentral F argument is NaN"));
    }
    if !(df1 > 0.0 && df1.is_finite() && df2 > 0.0 && df2.is_finite()) {
        return Err(Unavailable::new(format!(
            "noncentral F needs positive finite degrees of freedom (got df1 = {df1}, df2 = {df2})"
        )));
    }
    if !(nc >= 0.0 && nc.is_finite()) {
        return Err(Unavailable::new(format!(
            "noncentral F needs a finite noncentrality >= 0 (got {nc})"
        )));
    }
    if nc > 1.0e8 {
        return Err(Unavailable::new(format!(
            "noncentral F supports noncentrality up to 1e8 (got {nc})"
        )));
    }
    Ok(())
}

/// Sums the Poisson mixture from its mode outward. `upper` selects the upper-tail terms.
fn series(x: f64, df1: f64, df2: f64, nc: f64, upper: bool) -> f64 {
    let a0 = 0.5 * df1;
    let b = 0.5 * df2;
    // y and 1 - y without cancellation.
    let y = df1 * x / (df1 * x + df2);
    let one_minus_y = df2 / (df1 * x + df2);
    let term_beta = |j: f64| -> f64 {
        if upper {
            beta_reg(b, a0 + j, one_minus_y)
        } else {
            beta_reg(a0 + j, b, y)
        }
    };
    let half = 0.5 * nc;
    if half == 0.0 {
        return term_beta(0.0);
    }
    let log_weight = |j: f64| -> f64 { -half + j * half.ln() - ln_gamma(j + 1.0) };
    let mode = half.floor();
    let mut total = 0.0;
    let limit = 40.0 * half.sqrt() + 200.0;
    // The incomplete betas of neighbouring terms differ by one term of the binomial-like series,
    // I_y(a + 1, b) = I_y(a, b) - T(a) with T(a) = y^a (1 - y)^b / (a B(a, b)) and
    // T(a + 1) = T(a) y (a + b) / (a + 1) (Abramowitz and Stegun 26.5.16; the recurrences of
    // Lenth 1987, AS 226), and the Poisson weights by w(j + 1) = w(j) half / (j + 1): one direct
    // incomplete beta at the mode instead of one per term. A difference that would cancel (the
    // running value below 1e-4 of the last direct one) is replaced by a direct evaluation.
    let ln_y = y.ln();
    let ln_1my = one_minus_y.ln();
    let log_t = |a: f64| -> f64 {
        ln_gamma(a + b) - ln_gamma(a + 1.0) - ln_gamma(b) + a * ln_y + b * ln_1my
    };
    // Upward from the mode (including it).
    let mut j = mode;
    let mut w = log_weight(j).exp();
    let mut beta = term_beta(j);
    let mut last_direct = beta;
    let mut t = log_t(a0 + j).exp();
    let (beta_mode, t_mode, w_mode) = (beta, t, w);
    loop {
        total += w * beta;
        // The remaining Poisson mass beyond j (weights decrease geometrically there) bounds the rest.
        let remaining = w * half / (j + 1.0 - half).max(1.0);
        if j > mode && (remaining <= 1e-17 * total || remaining <= 1e-300) || j - mode > limit {
            break;
        }
        // Step a = a0 + j to a + 1.
        let a = a0 + j;
        beta = if upper { beta + t } else { beta - t };
        j += 1.0;
        if !upper && beta < 1e-4 * last_direct {
            beta = term_beta(j);
            last_direct = beta;
        }
        t = if t < 1e-280 {
            log_t(a + 1.0).exp()
        } else {
            t * y * (a + b) / (a + 1.0)
        };
        w *= half / j;
    }
    // Downward from the mode.
    let (mut beta, mut t, mut w) = (beta_mode, t_mode, w_mode);
    let mut last_direct = beta;
    let mut j = mode - 1.0;
    while j >= 0.0 {
        // Step a = a0 + j + 1 down to a - 1 = a0 + j.
        let a = a0 + j + 1.0;
        let t_below = if t < 1e-280 {
            log_t(a - 1.0).exp()
        } else {
            t * a / (y * (a - 1.0 + b))
        };
        beta = if upper {
            beta - t_below
        } else {
            beta + t_below
        };
        if upper && beta < 1e-4 * last_direct {
            beta = term_beta(j);
            last_direct = beta;
        }
        t = t_below;
        w *= (j + 1.0) / half;
        total += w * beta;
        // Below the mode the weights shrink at least geometrically by j / half.
        let remaining = w * j / (half - j).max(1.0);
        if remaining <= 1e-17 * total || remaining <= 1e-300 || mode - j > limit {
            break;
        }
        j -= 1.0;
    }
    total.clamp(0.0, 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // Central case: nc = 0 is the central F; F(1, 1) at x = 1 has cdf exactly 1/2 (the ratio of two
    // independent chi-square(1) variables is symmetric about 1 on the log scale; common textbook fact).
    #[test]
    fn central_case_is_f() {
        let c = ncf_cdf(1.0, 1.0, 1.0, 0.0).unwrap();
        assert!(lre(c, 0.5) > 13.0, "{c}");
    }
}

#[cfg(test)]
mod fixture_tests {
    use super::*;
    use crate::stats::lre;
    use serde_json::Value;

    // Reference: scipy.stats.ncf cdf and sf over the grid df1 in {1, 2, 4, 9, 39}, df2 in
    // {2, 5.5, 20, 100, 1000}, nc in {0.5, 3, 10, 50, 200}, x in {0.3, 1, 2.5, 6}
    // (tests/data/reference/power.json, scripts/power_reference.py): >= 8 significant digits for
    // values above 1e-12 (below that scipy's own series is not reliable to 8 digits; those are
    // checked to 1e-20 absolute).
    #[test]
    fn ncf_matches_scipy_grid() {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/data/reference/power.json"
        );
        let doc: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
        let grid = doc["ncf"].as_array().unwrap();
        for c in grid {
            let g = |key: &str| c[key].as_f64().unwrap();
            let (x, df1, df2, nc) = (g("x"), g("df1"), g("df2"), g("nc"));
            for (ours, expected, what) in [
                (ncf_cdf(x, df1, df2, nc).unwrap(), g("cdf"), "cdf"),
                (ncf_sf(x, df1, df2, nc).unwrap(), g("sf"), "sf"),
            ] {
                if expected > 1e-12 {
                    assert!(
                        lre(ours, expected) >= 8.0,
                        "{what} x {x} df1 {df1} df2 {df2} nc {nc}: {ours:e} vs {expected:e}"
                    );
                } else {
                    assert!(
                        (ours - expected).abs() < 1e-20,
                        "{what} x {x} df1 {df1} df2 {df2} nc {nc}: {ours:e} vs {expected:e}"
                    );
                }
            }
        }
        assert_eq!(grid.len(), 500);
    }
}

#[cfg(test)]
mod shared_fixture_tests {
    use super::*;
    use crate::stats::lre;
    use serde_json::Value;

    // Reference: scipy.stats.ncf.cdf (tests/data/reference/ncf.json, the shared fixture; spot-checked
    // there with an mpmath series): >= 8 significant digits where the cdf is above 1e-12.
    #[test]
    fn ncf_matches_shared_fixture() {
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/reference/ncf.json");
        let doc: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
        let grid = doc["grid"].as_array().unwrap();
        for c in grid {
            let g = |key: &str| c[key].as_f64().unwrap();
            let (x, df1, df2, nc, expected) = (g("x"), g("df1"), g("df2"), g("nc"), g("cdf"));
            let ours = ncf_cdf(x, df1, df2, nc).unwrap();
            if expected > 1e-12 {
                assert!(
                    lre(ours, expected) >= 8.0,
                    "x {x} df1 {df1} df2 {df2} nc {nc}: {ours:e} vs {expected:e}"
                );
            } else {
                assert!(
                    (ours - expected).abs() < 1e-20,
                    "x {x} df1 {df1} df2 {df2} nc {nc}: {ours:e} vs {expected:e}"
                );
            }
        }
        assert!(grid.len() > 1000);
    }
}
