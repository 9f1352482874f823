//! Brown and Forsythe's F* test of equal means for groups with unequal variances (Brown and
//! Forsythe 1974, "The small sample behavior of some statistics which test the equality of
//! several means", Technometrics 16, 129-132).
//!
//! With `N = Σ n_i`, the grand mean `m` and `c_i = (1 - n_i / N) s_i^2`:
//! `F* = Σ n_i (mean_i - m)^2 / Σ c_i`, `df1 = k - 1`, and Satterthwaite's denominator
//! `df2 = (Σ c_i)^2 / Σ (c_i^2 / (n_i - 1))`; p is the upper tail of F(df1, df2). For equal
//! group sizes F* is the classic F statistic; only its denominator df change with the group
//! variances, which is what keeps its level where the spreads differ and the groups are small
//! (docs/null-rates.md).

use super::anova::check_groups;
use super::describe::Summary;
use super::distributions::f_sf;
use super::{Stat, TestResult, Unavailable};

/// Brown and Forsythe's F* from group summaries. `statistic` is F*, `df1 = k - 1`, `df2` is the
/// Satterthwaite denominator df (fractional).
///
/// Unavailable with fewer than two groups, a group with fewer than two values, or groups whose
/// values are all equal (a zero denominator). A single constant group is allowed (it adds
/// nothing to the denominator), unlike in Welch's test, whose weights it would make infinite.
pub fn brown_forsythe_means(groups: &[Summary]) -> Stat<TestResult> {
    check_groups(groups)?;
    if let Some(idx) = groups.iter().position(|g| g.n < 2) {
        return Err(Unavailable::new(format!(
            "group {} has fewer than two values, so its variance is unknown",
            idx + 1
        )));
    }
    let n: f64 = groups.iter().map(|g| g.n as f64).sum();
    let grand = groups.iter().map(|g| g.n as f64 * g.mean).sum::<f64>() / n;
    let c: Vec<f64> = groups
        .iter()
        .map(|g| (1.0 - g.n as f64 / n) * g.variance().unwrap_or(0.0).max(0.0))
        .collect();
    let between: f64 = groups
        .iter()
        .map(|g| {
            let d = g.mean - grand;
            g.n as f64 * d * d
        })
        .sum();
    let denominator: f64 = c.iter().sum();
    if denominator <= 0.0 {
        return Err(Unavailable::new(
            "every group is constant, so the F* denominator is zero",
        ));
    }
    let df2 = denominator * denominator
        / groups
            .iter()
            .zip(&c)
            .map(|(g, ci)| ci * ci / (g.n as f64 - 1.0))
            .sum::<f64>();
    let statistic = between / denominator;
    if !statistic.is_finite() || !df2.is_finite() || df2 <= 0.0 {
        return Err(Unavailable::new(
            "Brown and Forsythe's F* is not finite for these groups",
        ));
    }
    let df1 = groups.len() as f64 - 1.0;
    let p = f_sf(statistic, df1, df2)?;
    Ok(TestResult {
        statistic,
        p,
        df1: Some(df1),
        df2: Some(df2),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;
    use serde_json::Value;

    fn fixture(name: &str) -> Value {
        let path = format!("{}/tests/data/reference/{name}", env!("CARGO_MANIFEST_DIR"));
        serde_json::from_str(&std::fs::read_to_string(&path).expect("read fixture"))
            .expect("parse fixture")
    }

    /// The groups of a dataset of oneway.json (the `large_offset` one as exact offsets from its
    /// origin, as the fixture script gave them to statsmodels).
    fn summaries(dataset: &Value) -> Vec<Summary> {
        let origin: Option<f64> = dataset["origin"].as_str().and_then(|o| o.parse().ok());
        let offset = |x: f64| match origin {
            Some(o) => ((x - o) * 1e4).round() / 1e4,
            None => x,
        };
        dataset["groups"]
            .as_array()
            .unwrap()
            .iter()
            .map(|g| {
                let v: Vec<f64> = g["values"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|x| offset(x.as_f64().unwrap()))
                    .collect();
                Summary::from_slice(&v)
            })
            .collect()
    }

    // Reference: statsmodels anova_oneway(use_var="bf") (statistic, df_denom, pvalue2 on k - 1
    // numerator df), tests/data/reference/fstar.json from scripts/fstar_reference.py, on the 18
    // datasets of tests/data/reference/oneway.json.
    #[test]
    fn matches_statsmodels_on_every_dataset() {
        let datasets = fixture("oneway.json");
        let cases = fixture("fstar.json");
        let cases = cases["cases"].as_array().unwrap();
        assert_eq!(cases.len(), 18);
        for case in cases {
            let name = case["name"].as_str().unwrap();
            let dataset = datasets["datasets"]
                .as_array()
                .unwrap()
                .iter()
                .find(|d| d["name"] == name)
                .unwrap();
            let r = brown_forsythe_means(&summaries(dataset)).unwrap();
            let f = |k: &str| case[k].as_f64().unwrap();
            assert!(
                lre(r.statistic, f("statistic")) >= 10.0,
                "{name}: F* {}",
                r.statistic
            );
            assert_eq!(r.df1, Some(f("df1")), "{name}");
            assert!(lre(r.df2.unwrap(), f("df2")) >= 10.0, "{name}: df2");
            // The p-value: 10 digits, or agreement to 1e-300 absolute in the far tail.
            let p = f("p");
            assert!(
                lre(r.p, p) >= 10.0 || (r.p - p).abs() < 1e-300,
                "{name}: p {} vs {p}",
                r.p
            );
        }
    }

    // Equal group sizes: F* is the classic F statistic (Brown and Forsythe 1974, section 2).
    #[test]
    fn equal_sizes_give_the_classic_f_statistic() {
        let groups = [
            Summary::from_slice(&[1.0, 2.0, 4.0]),
            Summary::from_slice(&[2.0, 2.5, 3.5]),
            Summary::from_slice(&[5.0, 9.0, 6.0]),
        ];
        let f = crate::stats::anova::one_way(&groups).unwrap().f;
        let r = brown_forsythe_means(&groups).unwrap();
        assert!(lre(r.statistic, f) >= 13.0, "{} vs {f}", r.statistic);
        assert_eq!(r.df1, Some(2.0));
    }

    // One constant group among varying ones: F* stays defined. Hand check, groups [1, 1] and
    // [2, 4]: N = 4, grand mean 2, c = (0, (1 - 2/4) * 2) = (0, 1); F* = (2 * 1 + 2 * 1) / 1 = 4,
    // df2 = 1 / (0 + 1 / 1) = 1.
    #[test]
    fn one_constant_group_is_allowed() {
        let groups = [
            Summary::from_slice(&[1.0, 1.0]),
            Summary::from_slice(&[2.0, 4.0]),
        ];
        let r = brown_forsythe_means(&groups).unwrap();
        assert!(lre(r.statistic, 4.0) >= 14.0, "{}", r.statistic);
        assert!(lre(r.df2.unwrap(), 1.0) >= 14.0);
    }

    #[test]
    fn constant_groups_are_unavailable() {
        let groups = [
            Summary::from_slice(&[1.0, 1.0]),
            Summary::from_slice(&[2.0, 2.0]),
        ];
        assert!(brown_forsythe_means(&groups).is_err());
    }
}
