//! A factor tested with the subgroups as blocks: the additive two-way model
//! `y = mu + tau_level + beta_block + e` (factor + subgroup, no interaction), the intrablock
//! analysis of a general (incomplete, unbalanced) block design, Type II sums of squares.
//!
//! samewise uses it for a factor that varies within the subgroups (cavity within a shot,
//! spindle within a sample): every shot's own deviation is taken out, so the test of the
//! cavities is made against the part-to-part noise alone and small cavity offsets show.
//! Start reading at [`intrablock`].
//!
//! # Method
//! The reduced normal equations of the level effects after eliminating the blocks (the
//! intrablock analysis; e.g. Montgomery, *Design and Analysis of Experiments*, the chapter on
//! balanced incomplete block designs, and Searle, *Linear Models*, on the general additive
//! two-way model): with `N` the level x block count matrix, `r_l` the level counts and `n_b`
//! the block sizes,
//!
//! `C tau = Q`,  `C = diag(r) - N diag(1 / n_b) N^T`,  `Q_l = sum over level l of (y - block mean)`.
//!
//! - `SS(levels | blocks) = tau^T Q` (Type II: the level effects adjusted for the blocks), on
//!   `rank(C)` df (`k - 1` when the design is connected, i.e. every pair of levels is linked
//!   through blocks that share levels);
//! - residual `SS = sum (y - block mean)^2 - tau^T Q` on `N - b - rank(C)` df;
//! - `SS(blocks | levels) = SS(blocks) + SS(levels | blocks) - SS(levels)`, the unadjusted
//!   sums of squares taken about their means.
//!
//! `C` is at most a few dozen levels square and is accumulated block by block from the cells,
//! so the cost is one pass over the values plus `sum_b (levels in b)^2`. `C tau = Q` is solved
//! by symmetric Gaussian elimination with diagonal pivoting that stops at the numerical rank
//! (pivot below `1e-10` of the largest diagonal), which gives the rank and a solution; `tau^T Q`
//! and every contrast `tau_a - tau_b` do not depend on which solution.
//!
//! Pairs: for a connected design the variance of `tau_a - tau_b` is
//! `sigma^2 (G_aa + G_bb - 2 G_ab)` with `G` any generalised inverse of `C` (here the inverse of
//! `C + 11^T / k`), `sigma^2` the residual mean square; p-values and simultaneous intervals from
//! the studentized range on the residual df, as Tukey-Kramer does with unequal variances of
//! differences.

use super::distributions::f_sf;
use super::posthoc::{finish_pair, Pair, PairMethod};
use super::ptukey::qtukey;
use super::{Stat, TestResult, Unavailable};

/// The additive factor + blocks analysis.
#[derive(Debug, Clone, PartialEq)]
pub struct Intrablock {
    /// Values.
    pub n: u64,
    /// Levels with values.
    pub n_levels: u64,
    /// Blocks with values.
    pub n_blocks: u64,
    /// Whether every level is linked to every other through shared blocks.
    pub is_connected: bool,
    /// Type II sum of squares of the levels (adjusted for the blocks) and its df (`rank(C)`).
    pub ss_levels: f64,
    /// df of `ss_levels`.
    pub df_levels: f64,
    /// Type II sum of squares of the blocks (adjusted for the levels).
    pub ss_blocks: f64,
    /// df of `ss_blocks`.
    pub df_blocks: f64,
    /// Residual sum of squares of the additive model.
    pub ss_resid: f64,
    /// Residual df, `N - b - rank(C)`.
    pub df_resid: f64,
    /// Residual mean square.
    pub ms_resid: f64,
    /// F test of the levels adjusted for the blocks.
    pub levels_test: Stat<TestResult>,
    /// F test of the blocks adjusted for the levels.
    pub blocks_test: Stat<TestResult>,
    /// Level means adjusted for the blocks: the grand mean plus the level's effect
    /// (count-weighted effects summing to zero). `NaN` for a level without values.
    pub adjusted_means: Vec<f64>,
    /// Residuals of the additive fit, one per value in input order.
    pub residuals: Vec<f64>,
    /// For a connected design, a generalised inverse of `C` (`(C + 11^T / k)^-1`, over the
    /// present levels in order): `ms_resid (G_aa + G_bb - 2 G_ab)` is the variance of the
    /// difference of two adjusted means.
    pub pair_covariance: Option<Vec<f64>>,
    /// The levels with values, in order (the rows of `pair_covariance`).
    pub present: Vec<usize>,
}

/// Analyses `values` with `level[i] < n_levels` and `block[i] < n_blocks`.
pub fn intrablock(
    values: &[f64],
    level: &[u32],
    block: &[u32],
    n_levels: usize,
    n_blocks: usize,
) -> Stat<Intrablock> {
    if values.len() != level.len() || values.len() != block.len() {
        return Err(Unavailable::new(
            "values, levels and blocks differ in length",
        ));
    }
    if values.iter().any(|v| !v.is_finite()) {
        return Err(Unavailable::new("a value is not finite"));
    }
    let n = values.len();
    // Block sums and sizes; per block, its cells (level, count) for C.
    let mut block_n = vec![0usize; n_blocks];
    let mut block_sum = vec![0.0f64; n_blocks];
    let mut level_n = vec![0usize; n_levels];
    let mut level_sum = vec![0.0f64; n_levels];
    for i in 0..n {
        let (l, b) = (level[i] as usize, block[i] as usize);
        if l >= n_levels || b >= n_blocks {
            return Err(Unavailable::new("a level or block index is out of range"));
        }
        block_n[b] += 1;
        block_sum[b] += values[i];
        level_n[l] += 1;
        level_sum[l] += values[i];
    }
    let present: Vec<usize> = (0..n_levels).filter(|&l| level_n[l] > 0).collect();
    let k = present.len();
    let b_used = block_n.iter().filter(|&&c| c > 0).count();
    if k < 2 {
        return Err(Unavailable::new("fewer than two levels with values"));
    }
    let pos = {
        let mut pos = vec![usize::MAX; n_levels];
        for (j, &l) in present.iter().enumerate() {
            pos[l] = j;
        }
        pos
    };
    let block_mean: Vec<f64> = block_sum
        .iter()
        .zip(&block_n)
        .map(|(s, &c)| if c > 0 { s / c as f64 } else { 0.0 })
        .collect();
    // Centred on the block means: Q and the within-block sum of squares.
    let mut q = vec![0.0f64; k];
    let mut ss_within_blocks = 0.0;
    // Cell counts per block, gathered by sorting (block, level) pairs.
    let mut cells: Vec<(u32, u32)> = Vec::with_capacity(n);
    for i in 0..n {
        let d = values[i] - block_mean[block[i] as usize];
        q[pos[level[i] as usize]] += d;
        ss_within_blocks += d * d;
        cells.push((block[i], level[i]));
    }
    cells.sort_unstable();
    // C = diag(r) - sum_b N_b N_b^T / n_b.
    let mut c = vec![0.0f64; k * k];
    for (j, &l) in present.iter().enumerate() {
        c[j * k + j] = level_n[l] as f64;
    }
    let mut counts: Vec<(usize, f64)> = Vec::new();
    let mut i = 0;
    while i < cells.len() {
        let b = cells[i].0;
        counts.clear();
        while i < cells.len() && cells[i].0 == b {
            let l = cells[i].1;
            let mut m = 0usize;
            while i < cells.len() && cells[i] == (b, l) {
                m += 1;
                i += 1;
            }
            counts.push((pos[l as usize], m as f64));
        }
        let nb = block_n[b as usize] as f64;
        for &(x, mx) in &counts {
            for &(y, my) in &counts {
                c[x * k + y] -= mx * my / nb;
            }
        }
    }
    let (tau, rank) = solve_psd(&c, &q, k);
    let ss_levels: f64 = tau.iter().zip(&q).map(|(t, q)| t * q).sum::<f64>().max(0.0);
    let ss_resid = (ss_within_blocks - ss_levels).max(0.0);
    let df_levels = rank as f64;
    let df_resid = n as f64 - b_used as f64 - df_levels;
    let is_connected = rank == k - 1;
    // Unadjusted sums of squares about the grand mean.
    let grand = values.iter().sum::<f64>() / n as f64;
    let ss_blocks_raw: f64 = (0..n_blocks)
        .filter(|&b| block_n[b] > 0)
        .map(|b| block_n[b] as f64 * (block_mean[b] - grand).powi(2))
        .sum();
    let ss_levels_raw: f64 = present
        .iter()
        .map(|&l| level_n[l] as f64 * (level_sum[l] / level_n[l] as f64 - grand).powi(2))
        .sum();
    let ss_blocks = (ss_blocks_raw + ss_levels - ss_levels_raw).max(0.0);
    let df_blocks = (b_used as f64 - 1.0) + df_levels - (k as f64 - 1.0);
    let ms_resid = if df_resid > 0.0 {
        ss_resid / df_resid
    } else {
        f64::NAN
    };
    let f_test = |ss: f64, df: f64, what: &str| -> Stat<TestResult> {
        if df_resid < 1.0 {
            return Err(Unavailable::new(format!(
                "no residual degrees of freedom left (N - blocks - levels + 1 = {df_resid})"
            )));
        }
        if df < 1.0 {
            return Err(Unavailable::new(format!("no {what} degrees of freedom")));
        }
        if ms_resid <= 0.0 {
            return Err(Unavailable::new(
                "the residual variance is zero: the additive model fits every value",
            ));
        }
        let f = (ss / df) / ms_resid;
        Ok(TestResult {
            statistic: f,
            p: f_sf(f, df, df_resid)?,
            df1: Some(df),
            df2: Some(df_resid),
        })
    };
    let levels_test = f_test(ss_levels, df_levels, "level");
    let blocks_test = f_test(ss_blocks, df_blocks, "block");
    // Effects: count-weighted to zero.
    let weighted: f64 = present
        .iter()
        .enumerate()
        .map(|(j, &l)| level_n[l] as f64 * tau[j])
        .sum::<f64>()
        / n as f64;
    let mut adjusted_means = vec![f64::NAN; n_levels];
    for (j, &l) in present.iter().enumerate() {
        adjusted_means[l] = grand + tau[j] - weighted;
    }
    // Residuals: the value's deviation from its block mean less its level's effect measured
    // against the block's own mix of levels.
    let mut block_tau = vec![0.0f64; n_blocks];
    for i in 0..n {
        block_tau[block[i] as usize] += tau[pos[level[i] as usize]];
    }
    let residuals = (0..n)
        .map(|i| {
            let b = block[i] as usize;
            values[i]
                - block_mean[b]
                - (tau[pos[level[i] as usize]] - block_tau[b] / block_n[b] as f64)
        })
        .collect();
    Ok(Intrablock {
        n: n as u64,
        n_levels: k as u64,
        n_blocks: b_used as u64,
        is_connected,
        ss_levels,
        df_levels,
        ss_blocks,
        df_blocks,
        ss_resid,
        df_resid,
        ms_resid,
        levels_test,
        blocks_test,
        adjusted_means,
        residuals,
        pair_covariance: is_connected.then(|| inverse_with_ones(&c, k)).flatten(),
        present,
    })
}

/// `(C + 11^T / k)^-1` by Cholesky (positive definite when the design is connected), `None`
/// when it is not.
fn inverse_with_ones(c: &[f64], k: usize) -> Option<Vec<f64>> {
    let mut a: Vec<f64> = c.iter().map(|x| x + 1.0 / k as f64).collect();
    // Cholesky: a = L L^T, L stored in the lower triangle.
    for j in 0..k {
        let mut d = a[j * k + j];
        for m in 0..j {
            d -= a[j * k + m] * a[j * k + m];
        }
        if d <= 0.0 || !d.is_finite() {
            return None;
        }
        let d = d.sqrt();
        a[j * k + j] = d;
        for i in j + 1..k {
            let mut s = a[i * k + j];
            for m in 0..j {
                s -= a[i * k + m] * a[j * k + m];
            }
            a[i * k + j] = s / d;
        }
    }
    let mut inv = vec![0.0; k * k];
    let mut col = vec![0.0; k];
    for e in 0..k {
        // Solve L y = e_e, then L^T x = y.
        for i in 0..k {
            let mut s = if i == e { 1.0 } else { 0.0 };
            for m in 0..i {
                s -= a[i * k + m] * col[m];
            }
            col[i] = s / a[i * k + i];
        }
        for i in (0..k).rev() {
            let mut s = col[i];
            for m in i + 1..k {
                s -= a[m * k + i] * col[m];
            }
            col[i] = s / a[i * k + i];
        }
        for i in 0..k {
            inv[i * k + e] = col[i];
        }
    }
    Some(inv)
}

/// Solves `C x = q` for a symmetric positive semi-definite `C` (`k x k`, row-major) by
/// elimination with diagonal pivoting, stopping at the numerical rank. Returns a solution
/// (zero on the dropped pivots) and the rank.
fn solve_psd(c: &[f64], q: &[f64], k: usize) -> (Vec<f64>, usize) {
    let mut a = c.to_vec();
    let mut rhs = q.to_vec();
    let scale = (0..k).map(|i| a[i * k + i].abs()).fold(0.0, f64::max);
    let tol = 1e-10 * scale.max(f64::MIN_POSITIVE);
    let mut order: Vec<usize> = Vec::with_capacity(k);
    let mut done = vec![false; k];
    for _ in 0..k {
        // The largest remaining diagonal.
        let Some(p) = (0..k)
            .filter(|&i| !done[i])
            .max_by(|&x, &y| a[x * k + x].total_cmp(&a[y * k + y]))
        else {
            break;
        };
        let pivot = a[p * k + p];
        if pivot <= tol {
            break;
        }
        done[p] = true;
        order.push(p);
        for i in 0..k {
            if done[i] {
                continue;
            }
            let f = a[i * k + p] / pivot;
            if f == 0.0 {
                continue;
            }
            for j in 0..k {
                a[i * k + j] -= f * a[p * k + j];
            }
            rhs[i] -= f * rhs[p];
        }
    }
    // Back substitution over the pivots in reverse order (later pivots are free of earlier
    // ones' rows below them); non-pivot unknowns are zero.
    let mut x = vec![0.0f64; k];
    for (idx, &p) in order.iter().enumerate().rev() {
        let mut s = rhs[p];
        for &j in &order[idx + 1..] {
            s -= a[p * k + j] * x[j];
        }
        x[p] = s / a[p * k + p];
    }
    (x, order.len())
}

/// All pairs of the present levels on the block-adjusted means (indices `a`, `b` are level
/// indices), studentized range on the residual df.
pub fn pairs(fit: &Intrablock, confidence: f64) -> Vec<Stat<Pair>> {
    let k = fit.present.len();
    let common: Stat<(&[f64], f64)> = (|| {
        let Some(g) = fit.pair_covariance.as_deref() else {
            return Err(Unavailable::new(
                "the levels are not all linked through shared subgroups, so not every pair can be compared",
            ));
        };
        if fit.df_resid < 1.0 || fit.ms_resid.is_nan() || fit.ms_resid <= 0.0 {
            return Err(Unavailable::new(
                "no residual variance to compare pairs against",
            ));
        }
        Ok((g, qtukey(confidence, k as f64, fit.df_resid)?))
    })();
    let mut out = Vec::with_capacity(k * k.saturating_sub(1) / 2);
    for x in 0..k {
        for y in x + 1..k {
            out.push(common.clone().and_then(|(g, q_crit)| {
                let v = fit.ms_resid * (g[x * k + x] + g[y * k + y] - 2.0 * g[x * k + y]);
                let (a, b) = (fit.present[x], fit.present[y]);
                finish_pair(
                    a,
                    b,
                    fit.adjusted_means[a] - fit.adjusted_means[b],
                    v.max(0.0).sqrt(),
                    fit.df_resid,
                    k as f64,
                    q_crit,
                    PairMethod::TukeyKramerAdjusted,
                )
            }));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    /// statsmodels `anova_lm(ols("y ~ C(L) + C(B)"), typ=2)`, the fit's level contrasts and
    /// `cov_params()` on invented designs (scripts/intrablock_reference.py, committed as
    /// tests/data/reference/intrablock.json).
    #[test]
    fn matches_statsmodels_type_ii_on_block_designs() {
        let doc: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/data/reference/intrablock.json"))
                .unwrap();
        for case in doc["cases"].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let num = |k: &str| case[k].as_f64().unwrap();
            let values: Vec<f64> = case["values"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_str().unwrap().parse().unwrap())
                .collect();
            let level: Vec<u32> = case["level"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_u64().unwrap() as u32)
                .collect();
            let block: Vec<u32> = case["block"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_u64().unwrap() as u32)
                .collect();
            let k = num("levels") as usize;
            let fit = intrablock(&values, &level, &block, k, num("blocks") as usize).unwrap();
            let digits = [
                ("ss_levels", fit.ss_levels, num("ss_levels")),
                ("ss_blocks", fit.ss_blocks, num("ss_blocks")),
                ("ss_resid", fit.ss_resid, num("ss_resid")),
                (
                    "f_levels",
                    fit.levels_test.as_ref().unwrap().statistic,
                    num("f_levels"),
                ),
                (
                    "p_levels",
                    fit.levels_test.as_ref().unwrap().p,
                    num("p_levels"),
                ),
                (
                    "f_blocks",
                    fit.blocks_test.as_ref().unwrap().statistic,
                    num("f_blocks"),
                ),
                (
                    "p_blocks",
                    fit.blocks_test.as_ref().unwrap().p,
                    num("p_blocks"),
                ),
            ];
            for (what, ours, theirs) in digits {
                assert!(
                    lre(ours, theirs) >= 10.0,
                    "{name} {what}: {ours} vs {theirs}"
                );
            }
            assert_eq!(fit.df_levels, num("df_levels"), "{name}");
            assert_eq!(fit.df_blocks, num("df_blocks"), "{name}");
            assert_eq!(fit.df_resid, num("df_resid"), "{name}");
            assert!(fit.is_connected);
            for (l, c) in case["contrasts"].as_object().unwrap() {
                let l: usize = l.parse().unwrap();
                let ours = fit.adjusted_means[l] - fit.adjusted_means[0];
                let theirs = c.as_f64().unwrap();
                assert!(
                    lre(ours, theirs) >= 10.0,
                    "{name} contrast {l}: {ours} vs {theirs}"
                );
            }
            let pairs = pairs(&fit, 0.95);
            for p in pairs {
                let p = p.unwrap();
                let theirs = case["pair_se"][format!("{},{}", p.a, p.b)]
                    .as_f64()
                    .unwrap();
                assert!(
                    lre(p.se, theirs) >= 10.0,
                    "{name} se {}-{}: {} vs {theirs}",
                    p.a,
                    p.b,
                    p.se
                );
            }
            // The residuals of the fit add up to the residual sum of squares.
            let ss: f64 = fit.residuals.iter().map(|e| e * e).sum();
            assert!(
                lre(ss, fit.ss_resid) >= 10.0,
                "{name}: residuals {ss} vs {}",
                fit.ss_resid
            );
        }
    }

    #[test]
    fn an_unlinked_design_says_so() {
        // Levels 0 and 1 only ever meet in block 0; levels 2 and 3 only in block 1.
        let values = [1.0, 2.0, 1.5, 2.5, 3.0, 4.0, 3.5, 4.5];
        let level = [0, 1, 0, 1, 2, 3, 2, 3];
        let block = [0, 0, 0, 0, 1, 1, 1, 1];
        let fit = intrablock(&values, &level, &block, 4, 2).unwrap();
        assert!(!fit.is_connected);
        assert_eq!(fit.df_levels, 2.0);
        let err = pairs(&fit, 0.95)[0].clone().unwrap_err();
        assert!(err.reason.contains("not all linked"), "{err}");
    }
}
