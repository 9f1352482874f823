//! Groups that are each constant (a coarse gauge reads every part of group A as 2.5, of B as
//! 2.6): the within-group variance is zero, so the F ratio is infinite and Welch's weights are
//! undefined, yet the data may well show a difference. This module answers with an exact test
//! that needs no variance.
//!
//! The test is the permutation test of the group labels with the F ratio as its statistic
//! (Fisher 1935, *The Design of Experiments*, section 21; Pitman 1937, "Significance tests which
//! may be applied to samples from any populations. III. The analysis of variance test",
//! Biometrika 29, 322-335). Under the null hypothesis every arrangement of the N observed values
//! over the groups (with their sizes fixed) is equally likely. The observed F is infinite, and an
//! arrangement reaches it exactly when every group is again constant, so
//!
//! `p = #{arrangements with every group constant} / #{arrangements}`,
//!
//! with `#{arrangements} = N! / prod_v c_v!` (c_v the count of each distinct value) and the
//! numerator the number of ways to give each group one value such that, for each value, the sizes
//! of the groups that get it add up to its count (each such assignment is one arrangement). The
//! p-value is exact at any sample size; with few values it cannot be small (two groups of two:
//! 1/3), which is the honest answer a coarse gauge allows.
//!
//! The count is found by a search over the groups with memoised remaining counts. Should the
//! search grow past [`MAX_STATES`] states, the numerator is bounded from above by the product over
//! groups of the number of values whose count admits the group, which gives a conservative p
//! (said in [`ConstantGroups::is_exact`]).

use std::collections::HashMap;

use super::describe::Summary;
use super::{Stat, Unavailable};

/// Memoised states of the exact count before the conservative bound is used instead.
pub const MAX_STATES: usize = 200_000;

/// The exact test of constant groups.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ConstantGroups {
    /// Between-group sum of squares (the whole sum of squares: the within part is zero).
    pub ss_between: f64,
    /// k - 1.
    pub df_between: f64,
    /// N - k.
    pub df_within: f64,
    /// Grand mean.
    pub grand_mean: f64,
    /// Number of distinct group values.
    pub n_distinct: usize,
    /// Permutation p-value (exact, or an upper bound when `is_exact` is false).
    pub p: f64,
    /// Whether `p` is the exact count (false: a conservative upper bound).
    pub is_exact: bool,
}

/// The exact permutation test when every group is constant and the groups do not all share one
/// value. Unavailable otherwise (some group varies, fewer than two groups, an empty group, or
/// every value equal).
pub fn constant_groups(groups: &[Summary]) -> Stat<ConstantGroups> {
    super::anova::check_groups(groups)?;
    if let Some(idx) = groups.iter().position(|g| g.n >= 2 && g.max > g.min) {
        return Err(Unavailable::new(format!(
            "group {} varies, so the groups are not all constant",
            idx + 1
        )));
    }
    // Distinct values with their counts (group means are exact here: each group is constant).
    let mut counts: Vec<(f64, u64)> = Vec::new();
    for g in groups {
        match counts.iter_mut().find(|(v, _)| *v == g.mean) {
            Some((_, c)) => *c += g.n,
            None => counts.push((g.mean, g.n)),
        }
    }
    if counts.len() < 2 {
        return Err(Unavailable::new(
            "every value is the same, so the groups do not differ",
        ));
    }
    let n_obs: u64 = groups.iter().map(|g| g.n).sum();
    let grand = super::anova::grand_mean(groups);
    let ss_between: f64 = groups
        .iter()
        .map(|g| g.n as f64 * (g.mean - grand).powi(2))
        .sum();
    let mut sizes: Vec<u64> = groups.iter().map(|g| g.n).collect();
    sizes.sort_unstable_by(|a, b| b.cmp(a));
    let value_counts: Vec<u64> = counts.iter().map(|&(_, c)| c).collect();
    let (ln_numerator, is_exact) = match count_assignments(&sizes, &value_counts) {
        Some(count) => (count.ln(), true),
        None => (ln_upper_bound(&sizes, &value_counts), false),
    };
    // ln(N! / prod c_v!)
    let ln_total = ln_factorial(n_obs) - value_counts.iter().map(|&c| ln_factorial(c)).sum::<f64>();
    let p = (ln_numerator - ln_total).exp().min(1.0);
    Ok(ConstantGroups {
        ss_between,
        df_between: (groups.len() - 1) as f64,
        df_within: n_obs as f64 - groups.len() as f64,
        grand_mean: grand,
        n_distinct: counts.len(),
        p,
        is_exact,
    })
}

/// Number of ways to give each group (sizes sorted descending) one value so that the sizes given
/// each value add up to its count; `None` when the search would exceed [`MAX_STATES`].
fn count_assignments(sizes: &[u64], value_counts: &[u64]) -> Option<f64> {
    fn go(
        g: usize,
        sizes: &[u64],
        remaining: &mut Vec<u64>,
        memo: &mut HashMap<(usize, Vec<u64>), f64>,
    ) -> Option<f64> {
        if g == sizes.len() {
            return Some(if remaining.iter().all(|&r| r == 0) {
                1.0
            } else {
                0.0
            });
        }
        let key = (g, remaining.clone());
        if let Some(&v) = memo.get(&key) {
            return Some(v);
        }
        if memo.len() >= MAX_STATES {
            return None;
        }
        let mut total = 0.0;
        for v in 0..remaining.len() {
            if remaining[v] >= sizes[g] {
                remaining[v] -= sizes[g];
                total += go(g + 1, sizes, remaining, memo)?;
                remaining[v] += sizes[g];
            }
        }
        memo.insert(key, total);
        Some(total)
    }
    let mut remaining = value_counts.to_vec();
    go(0, sizes, &mut remaining, &mut HashMap::new())
}

/// ln of the product over groups of the number of values whose count is at least the group's
/// size: every valid assignment is among those choices.
fn ln_upper_bound(sizes: &[u64], value_counts: &[u64]) -> f64 {
    sizes
        .iter()
        .map(|&s| (value_counts.iter().filter(|&&c| c >= s).count().max(1) as f64).ln())
        .sum()
}

/// ln(n!) by summing logarithms (n is a count of measurements in one test).
fn ln_factorial(n: u64) -> f64 {
    (2..=n).map(|i| (i as f64).ln()).sum()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    fn groups(values: &[&[f64]]) -> Vec<Summary> {
        values.iter().map(|g| Summary::from_slice(g)).collect()
    }

    // Hand count: A = {2.5, 2.5}, B = {2.6, 2.6}. 4!/(2! 2!) = 6 arrangements, 2 of them with both
    // groups constant (A gets 2.5 or 2.6): p = 1/3.
    #[test]
    fn two_groups_of_two() {
        let r = constant_groups(&groups(&[&[2.5, 2.5], &[2.6, 2.6]])).unwrap();
        assert!(r.is_exact);
        assert!(lre(r.p, 1.0 / 3.0) > 14.0, "{}", r.p);
        assert!(lre(r.ss_between, 0.01) > 12.0, "{}", r.ss_between);
        assert_eq!((r.df_between, r.df_within), (1.0, 2.0));
    }

    // Hand count: three groups of five, each its own value: 3! of the 15!/(5! 5! 5!) = 756,756
    // arrangements keep every group constant: p = 6 / 756756.
    #[test]
    fn three_groups_of_five() {
        let r = constant_groups(&groups(&[&[2.5; 5], &[2.6; 5], &[2.7; 5]])).unwrap();
        assert!(lre(r.p, 6.0 / 756_756.0) > 13.0, "{}", r.p);
    }

    // Hand count: sizes 2, 2 and 4 with values x (2), y (2), z (4): the group of 4 must take z
    // (no other value has 4), the two groups of 2 share x and y in 2 ways; and the group of 4 can
    // never be split. Arrangements: 8!/(2! 2! 4!) = 420, p = 2/420. A second case where a value of
    // count 4 can go to two groups of 2: values x (4) in groups of 2 and 2, y (4) in a group of 4:
    // assignments: the 4-group takes x or y, and the two 2-groups take the other: 2 ways;
    // 8!/(4! 4!) = 70, p = 2/70.
    #[test]
    fn unequal_sizes_and_split_counts() {
        let r = constant_groups(&groups(&[&[1.0, 1.0], &[2.0, 2.0], &[3.0; 4]])).unwrap();
        assert!(lre(r.p, 2.0 / 420.0) > 13.0, "{}", r.p);
        let r = constant_groups(&groups(&[&[1.0, 1.0], &[1.0, 1.0], &[3.0; 4]])).unwrap();
        assert!(lre(r.p, 2.0 / 70.0) > 13.0, "{}", r.p);
    }

    #[test]
    fn not_constant_or_all_equal() {
        assert!(constant_groups(&groups(&[&[1.0, 1.1], &[2.0, 2.0]])).is_err());
        assert!(constant_groups(&groups(&[&[1.0, 1.0], &[1.0, 1.0]])).is_err());
        assert!(constant_groups(&groups(&[&[1.0, 1.0]])).is_err());
    }

    // Many groups: the bound is used only past MAX_STATES and is never below the exact p.
    #[test]
    fn bound_is_conservative() {
        let sizes = [2u64; 8];
        let counts = [4u64, 4, 4, 4];
        let exact = count_assignments(&sizes, &counts).unwrap();
        // 8 groups of 2 into 4 values of count 4: choose which 2 groups get each value:
        // 8! / (2!^4) = 2520.
        assert_eq!(exact, 2520.0);
        assert!(ln_upper_bound(&sizes, &counts) >= exact.ln());
    }
}
