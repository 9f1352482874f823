//! Every one-way result for one characteristic x factor, bundled: the place to start reading the
//! statistics core.
//!
//! [`analyze`] takes the raw values of each group (as offsets from one exact origin, see
//! [`super::decimal`]) and returns a [`OneWay`]: group summaries, the ANOVA table, the requirement
//! checks, the robust alternatives (Welch, Kruskal-Wallis), effect sizes, and the choice of the
//! leading result with its reason. Names of groups stay with the caller; results refer to groups by
//! index in input order.
//!
//! The leading result. The numbers come from the null-rate study (docs/null-rates.md,
//! `cargo run --release --example null_rates`): Monte Carlo over 2-40 groups of 2-200 values,
//! balanced and very unbalanced, variance ratios 1-16, normal, skewed, heavy-tailed and
//! coarse-gauge values, judged by Bradley's liberal criterion (a rate of "differs" under no real
//! difference within 0.5 to 1.5 times the level; Bradley 1978, British Journal of Mathematical and
//! Statistical Psychology 31, 144-152). In that order:
//! - every group constant (a coarse gauge): the exact permutation test of
//!   [`super::constant_groups`] leads (F is infinite, Welch undefined);
//! - groups about equally sized (largest at most [`BALANCE_LIMIT`] times the smallest) but
//!   smaller than Welch's test needs ([`welch_min_n`]: 5 values per group up to 5 groups, 10 up to
//!   10, 15 up to 20, 30 up to 40), without a check of the spreads (the check has little power
//!   there, and a verdict conditioned on it passing is less trustworthy than an unconditional
//!   one): from [`F_STAR_MIN_N`] (5) values per group Brown and Forsythe's F*
//!   ([`super::fstar`]) leads, which holds its level where the spreads differ (the classic F
//!   rejects up to 0.11 of true nulls there); below that the classic F leads (F* rests its
//!   degrees of freedom on variances of 1-3 df and turns conservative, down to 0.01);
//! - very unequal sizes with a group below Welch's size: *declined* ("too few values per group to
//!   compare"): unequal spreads cannot be ruled out with groups that small, the classic F then
//!   rejects up to half of true nulls, and Welch's test is far from its level;
//! - very unequal sizes with every group at Welch's size: Welch's test leads without a check of
//!   the spreads (the classic F's level then depends on spread differences a check can miss);
//! - about equal sizes at Welch's size: the spreads are judged from Brown-Forsythe
//!   (p < [`VARIANCE_CHECK_ALPHA`]) and, with at most [`SD_RATIO_MAX_GROUPS`] groups, the ratio
//!   of the largest to the smallest group SD (> [`SD_RATIO_LIMIT`], common practice); alike: the
//!   classic F leads; different: Welch's test leads;
//! - where Welch's test leads with at most [`BOOTSTRAP_MAX_GROUPS`] groups whose smallest has
//!   [`BOOTSTRAP_MIN_N`] to [`BOOTSTRAP_MAX_N`] - 1 values, its p-value comes from the bootstrap-t
//!   ([`super::bootstrap::welch_bootstrap_t`], [`calibrate_welch`]): skewed values put Welch's F
//!   distribution off its level there (up to 0.10), the bootstrap-t keeps the skewness of each
//!   group in its reference distribution; with more groups or smaller ones the bootstrap-t turns
//!   conservative (0.01-0.02), with larger ones Welch's F holds;
//! - Kruskal-Wallis is recommended in addition when the residuals are clearly non-normal
//!   (Shapiro-Wilk p < [`NORMALITY_ALPHA`], 0.01) and the groups are small (the smallest has fewer
//!   than [`SMALL_GROUP_N`], 15, values), where the F test cannot lean on the central limit
//!   theorem (common practice).

use super::anova::{one_way, AnovaTable};
use super::bootstrap::{data_state, welch_bootstrap_t, BOOTSTRAP_RESAMPLES};
use super::constant_groups::{constant_groups, ConstantGroups};
use super::describe::Summary;
use super::effect::{effect_sizes, Effect};
use super::fstar::brown_forsythe_means;
use super::kruskal::kruskal_wallis;
use super::normality::{dagostino_pearson, shapiro_wilk, DagostinoPearson, ShapiroWilk};
use super::posthoc::{games_howell, group_effects, tukey_kramer, GroupEffect, Pair};
use super::power::{sensitivity, Sensitivity};
use super::spread::{
    bartlett, brown_forsythe, count_beyond, levene_mean, outlier_excess, sd_ratio, OutlierCount,
};
use super::variance_components::{one_way_random, VarianceComponents};
use super::welch::welch;
use super::{Stat, TestResult, Unavailable};

/// Brown-Forsythe p below this makes Welch lead (common practice).
pub const VARIANCE_CHECK_ALPHA: f64 = 0.05;
/// Largest / smallest group SD above this makes Welch lead (rule of thumb, common practice).
pub const SD_RATIO_LIMIT: f64 = 2.0;
/// Shapiro-Wilk p below this counts as clearly non-normal residuals (common practice).
pub const NORMALITY_ALPHA: f64 = 0.01;
/// Groups smaller than this count as small for the Kruskal-Wallis recommendation (common practice).
pub const SMALL_GROUP_N: u64 = 15;
/// Residuals beyond this many residual SDs are counted as outlying (common practice).
pub const OUTLIER_SD: f64 = 3.0;

/// Specification limits and target, as offsets from the same origin as the values.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Tolerance {
    /// Lower specification limit.
    pub lsl: Option<f64>,
    /// Upper specification limit.
    pub usl: Option<f64>,
    /// Target (nominal) value.
    pub target: Option<f64>,
}

impl Tolerance {
    /// USL - LSL when both are known and USL > LSL.
    pub fn width(&self) -> Option<f64> {
        match (self.lsl, self.usl) {
            (Some(l), Some(u)) if u > l => Some(u - l),
            _ => None,
        }
    }
}

/// Options of the one-way analysis.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OneWayOptions {
    /// Significance level of the tests (0.05).
    pub alpha: f64,
    /// Confidence level of intervals (0.95).
    pub confidence: f64,
    /// Power the sensitivity analysis aims for (0.8).
    pub power_target: f64,
    /// A difference between two group means the user wants to be able to detect.
    pub detect: Option<f64>,
    /// Specification limits, when known.
    pub tolerance: Option<Tolerance>,
    /// Compute the all-pairs comparisons (`OneWay::pairs`). A periodic check turns this off and
    /// computes pairs only for the tests it flags after the false-discovery adjustment.
    pub with_pairs: bool,
}

impl Default for OneWayOptions {
    fn default() -> Self {
        OneWayOptions {
            alpha: 0.05,
            confidence: 0.95,
            power_target: 0.8,
            detect: None,
            tolerance: None,
            with_pairs: true,
        }
    }
}

/// Which test the report leads with.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LeadingMethod {
    /// The classic one-way ANOVA F test.
    ClassicF,
    /// Welch's ANOVA (unequal variances).
    Welch,
    /// The exact permutation test of the group labels, when every group is constant
    /// ([`super::constant_groups`]).
    ExactPermutation,
    /// Brown and Forsythe's F* test of means ([`super::fstar`]), for small about-equal groups.
    FStar,
    /// Welch's statistic with its p-value from the bootstrap-t
    /// ([`super::bootstrap::welch_bootstrap_t`]), for a few groups of 20-49 values.
    WelchBootstrap,
}

impl LeadingMethod {
    /// The published name.
    pub fn name(self) -> &'static str {
        match self {
            LeadingMethod::ClassicF => "classic one-way ANOVA F",
            LeadingMethod::Welch => "Welch ANOVA",
            LeadingMethod::ExactPermutation => "exact permutation test (constant groups)",
            LeadingMethod::FStar => "Brown-Forsythe F* test of means",
            LeadingMethod::WelchBootstrap => "Welch ANOVA, bootstrap-t p-value",
        }
    }

    /// The stable name stored and printed in JSON.
    pub fn key(self) -> &'static str {
        match self {
            LeadingMethod::ClassicF => "classic_f",
            LeadingMethod::Welch => "welch",
            LeadingMethod::ExactPermutation => "exact_permutation",
            LeadingMethod::FStar => "f_star",
            LeadingMethod::WelchBootstrap => "welch_bootstrap_t",
        }
    }
}

/// The leading result and why it was chosen.
#[derive(Debug, Clone, PartialEq)]
pub struct Leading {
    /// The test the report leads with.
    pub method: LeadingMethod,
    /// Why, in plain words, naming the check values.
    pub reason: String,
    /// Whether Kruskal-Wallis is recommended in addition (non-normal residuals, small groups).
    pub recommend_kruskal_wallis: bool,
    /// p-value of the leading test, when it could be computed.
    pub p: Option<f64>,
    /// Statistic (F) of the leading test, when it could be computed.
    pub statistic: Option<f64>,
    /// Why no test leads although there are groups to compare: no available test holds its level
    /// on data of this shape (too few values per group with possibly unequal spreads). `p` and
    /// `statistic` are then `None`; the check reports the state "too few values to compare".
    pub declined: Option<String>,
}

/// Every one-way result for one set of groups.
#[derive(Debug, Clone)]
pub struct OneWay {
    /// Summary of each group, in input order.
    pub summaries: Vec<Summary>,
    /// The classic ANOVA table.
    pub anova: Stat<AnovaTable>,
    /// Welch's ANOVA.
    pub welch: Stat<TestResult>,
    /// Brown and Forsythe's F* test of means (unequal variances).
    pub f_star: Stat<TestResult>,
    /// Welch's statistic with the bootstrap-t p-value: computed only where it leads
    /// ([`calibrate_welch`]), otherwise unavailable with the reason.
    pub welch_bootstrap: Stat<TestResult>,
    /// Kruskal-Wallis H with tie correction.
    pub kruskal_wallis: Stat<TestResult>,
    /// Levene's test (mean-centred).
    pub levene: Stat<TestResult>,
    /// Brown-Forsythe test (median-centred Levene).
    pub brown_forsythe: Stat<TestResult>,
    /// Bartlett's test.
    pub bartlett: Stat<TestResult>,
    /// Largest / smallest group SD.
    pub sd_ratio: Stat<f64>,
    /// Number of residuals beyond [`OUTLIER_SD`] residual SDs.
    pub n_beyond_3sd: Stat<usize>,
    /// That count against what normal residuals give (binomial upper tail).
    pub outliers: Stat<OutlierCount>,
    /// Shapiro-Wilk on the residuals (value minus its group mean, in group order).
    pub shapiro_wilk: Stat<ShapiroWilk>,
    /// D'Agostino-Pearson K^2 on the same residuals, with skewness and excess kurtosis and their
    /// standard errors: the normality check beyond Shapiro-Wilk's 5,000 values.
    pub dagostino_pearson: Stat<DagostinoPearson>,
    /// Effect sizes.
    pub effect: Stat<Effect>,
    /// Variance components of the random-effects one-way model.
    pub variance_components: Stat<VarianceComponents>,
    /// The exact permutation test of constant groups (available only when every group is
    /// constant and they do not all share one value).
    pub constant_groups: Stat<ConstantGroups>,
    /// The leading result.
    pub leading: Leading,
    /// All pairs (a < b): Games-Howell when Welch leads, Tukey-Kramer otherwise (empty when
    /// `OneWayOptions::with_pairs` is off).
    pub pairs: Vec<Stat<Pair>>,
    /// Each group's mean against the grand mean.
    pub group_effects: Vec<GroupEffect>,
    /// Sensitivity of the F test actually run (power, minimum detectable difference).
    pub sensitivity: Stat<Sensitivity>,
}

fn check_input(groups: &[&[f64]]) -> Stat<()> {
    if groups.len() < 2 {
        return Err(Unavailable::new(format!(
            "needs at least two groups (got {})",
            groups.len()
        )));
    }
    for (idx, g) in groups.iter().enumerate() {
        if g.is_empty() {
            return Err(Unavailable::new(format!("group {} has no values", idx + 1)));
        }
        if let Some(pos) = g.iter().position(|v| !v.is_finite()) {
            return Err(Unavailable::new(format!(
                "group {} value {} is not a finite number",
                idx + 1,
                pos + 1
            )));
        }
    }
    Ok(())
}

/// What the leading-method rule looks at, besides the tests themselves.
#[derive(Debug, Clone, Copy)]
pub struct Evidence<'a> {
    /// Group summaries (sizes).
    pub summaries: &'a [Summary],
    /// The classic ANOVA table.
    pub anova: &'a Stat<AnovaTable>,
    /// Welch's ANOVA.
    pub welch: &'a Stat<TestResult>,
    /// Brown and Forsythe's F* test of means.
    pub f_star: &'a Stat<TestResult>,
    /// Brown-Forsythe (median-centred Levene).
    pub brown_forsythe: &'a Stat<TestResult>,
    /// Largest / smallest group SD.
    pub sd_ratio: &'a Stat<f64>,
    /// The exact test of constant groups (available only when every group is constant).
    pub constant: &'a Stat<ConstantGroups>,
}

/// The SD-ratio rule of thumb is used with at most this many groups: the largest to smallest of
/// many sample SDs exceeds 2 by chance alone (null-rate study), so with more groups only
/// Brown-Forsythe judges the spreads.
pub const SD_RATIO_MAX_GROUPS: u64 = 5;

/// Smallest group size for Brown and Forsythe's F* to lead among about-equal groups below
/// Welch's size (null-rate study, `--methods`: with 5 values per group F* kept 70 of 72 cells in
/// Bradley's band against 52 for the classic F; with 2-3 it turned conservative, 0.00-0.04).
pub const F_STAR_MIN_N: u64 = 5;

/// Smallest group size for Welch's test to lead with `k` groups (null-rate study: with fewer
/// values it rejects far more than its level of true nulls, up to 90 % with 40 groups of two):
/// 5 up to 5 groups, 10 up to 10, 15 up to 20, 30 up to 40, and three quarters of `k` beyond.
pub fn welch_min_n(k: u64) -> u64 {
    match k {
        0..=5 => 5,
        6..=10 => 10,
        11..=20 => 15,
        21..=40 => 30,
        _ => (3 * k).div_ceil(4),
    }
}
/// Largest / smallest group size up to which groups count as about equally sized, where the
/// classic F keeps close to its level even when spreads differ (Box 1954, Annals of Mathematical
/// Statistics 25, 290-302; checked in the null-rate study).
pub const BALANCE_LIMIT: f64 = 1.5;

/// The bootstrap-t calibration of Welch's test is used with at most this many groups (null-rate
/// study, `--methods`: with 10-40 groups of 10 it rejected 0.000-0.030 of true nulls in a first
/// pass of 200 replicates per cell, with 5 groups of 10 0.011-0.054, 7 of 12 cells below 0.025).
pub const BOOTSTRAP_MAX_GROUPS: u64 = 5;
/// ... and when the smallest group has at least this many values (with 10 values and 2-5 groups
/// it turned conservative on heavy-tailed values, 8 of 9 cells at 0.012-0.024; null-rate study,
/// `--methods`).
pub const BOOTSTRAP_MIN_N: u64 = 20;
/// ... and fewer than this many (from 50 values per group Welch's F holds its level on skewed
/// values in the study, and the resampling would only cost time).
pub const BOOTSTRAP_MAX_N: u64 = 50;

/// Whether a Welch lead over groups of these sizes takes its p-value from the bootstrap-t.
pub fn bootstrap_applies(summaries: &[Summary]) -> bool {
    let n_min = summaries.iter().map(|s| s.n).min().unwrap_or(0);
    summaries.len() as u64 <= BOOTSTRAP_MAX_GROUPS
        && (BOOTSTRAP_MIN_N..BOOTSTRAP_MAX_N).contains(&n_min)
}

/// The last step of the rule: where Welch's test leads over a few groups of 20-49 values
/// ([`bootstrap_applies`]), its p-value is replaced by the bootstrap-t's (599 resamples, the
/// random stream starting from a state computed from the data, so the same data give the same p), and the reason says
/// so. Returns the leading result and the bootstrap result (unavailable with the reason where it
/// was not run).
pub fn calibrate_welch(
    leading: Leading,
    groups: &[&[f64]],
    summaries: &[Summary],
) -> (Leading, Stat<TestResult>) {
    if leading.method != LeadingMethod::Welch || !bootstrap_applies(summaries) {
        return (
            leading,
            Err(Unavailable::new(format!(
                "not run: used only where Welch's test leads with at most {BOOTSTRAP_MAX_GROUPS} groups whose smallest has {BOOTSTRAP_MIN_N} to {} values",
                BOOTSTRAP_MAX_N - 1
            ))),
        );
    }
    let boot = welch_bootstrap_t(groups, BOOTSTRAP_RESAMPLES, data_state(groups));
    match &boot {
        Ok(t) => {
            let n_min = summaries.iter().map(|s| s.n).min().unwrap_or(0);
            let k = summaries.len();
            (
                Leading {
                    method: LeadingMethod::WelchBootstrap,
                    reason: format!(
                        "{}; with {k} groups and {n_min} values in the smallest, the p-value comes from the bootstrap-t ({BOOTSTRAP_RESAMPLES} resamples of each group's values around its own mean) rather than Welch's F distribution, whose level skewed values can upset with groups this small",
                        leading.reason
                    ),
                    p: Some(t.p),
                    statistic: Some(t.statistic),
                    ..leading
                },
                boot,
            )
        }
        Err(_) => (leading, boot),
    }
}

/// Chooses the leading result (see the module docs for the rule and docs/null-rates.md for the
/// study behind its numbers).
pub fn choose_leading(e: &Evidence<'_>) -> Leading {
    let sizes = || e.summaries.iter().map(|s| s.n);
    let n_min = sizes().min().unwrap_or(0);
    let n_max = sizes().max().unwrap_or(0);
    let k = e.summaries.len() as u64;
    let classic = |reason: String| Leading {
        method: LeadingMethod::ClassicF,
        reason,
        recommend_kruskal_wallis: false,
        p: e.anova.as_ref().ok().map(|t| t.p),
        statistic: e.anova.as_ref().ok().map(|t| t.f),
        declined: None,
    };
    let declined = |reason: String| Leading {
        method: LeadingMethod::ClassicF,
        reason: reason.clone(),
        recommend_kruskal_wallis: false,
        p: None,
        statistic: None,
        declined: Some(reason),
    };
    if let Ok(c) = e.constant {
        return Leading {
            method: LeadingMethod::ExactPermutation,
            reason: format!(
                "every group is constant ({} distinct values), so the within-group variance is zero and F is infinite; the exact permutation test of the group labels, which needs no variance, leads{}",
                c.n_distinct,
                if c.is_exact { "" } else { " (p is a conservative upper bound)" }
            ),
            recommend_kruskal_wallis: false,
            p: Some(c.p),
            statistic: None,
            declined: None,
        };
    }
    let welch_min = welch_min_n(k);
    let balanced = n_max as f64 <= BALANCE_LIMIT * n_min as f64;
    if n_min < welch_min && balanced && n_min >= F_STAR_MIN_N {
        if let Ok(t) = e.f_star {
            return Leading {
                method: LeadingMethod::FStar,
                reason: format!(
                    "the groups are about equally sized ({n_min} to {n_max} values) and smaller than the {welch_min} values per group that Welch's test needs to hold its level with {k} groups, so Brown and Forsythe's F* leads without a check of the spreads (with groups this small a check mostly passes by chance): its degrees of freedom follow the group variances, which keeps its level where the spreads differ and the classic F's would not hold"
                ),
                recommend_kruskal_wallis: false,
                p: Some(t.p),
                statistic: Some(t.statistic),
                declined: None,
            };
        }
    }
    if n_min < welch_min && balanced {
        return classic(format!(
            "the groups are about equally sized ({n_min} to {n_max} values) and smaller than the {welch_min} values per group that Welch's test needs to hold its level with {k} groups, so the classic F leads without a check of the spreads (with groups this small a check mostly passes by chance, and a verdict conditioned on it would be less trustworthy); about equal sizes keep the classic F near its level even when spreads differ moderately"
        ));
    }
    if n_min < welch_min {
        return declined(format!(
            "too few values per group to compare: the groups have {n_min} to {n_max} values; with sizes this unequal (more than {BALANCE_LIMIT} times) the classic F does not hold its level if the spreads differ, which groups this small cannot rule out, and Welch's test needs at least {welch_min} values in every group with {k} groups"
        ));
    }
    if !balanced {
        if let Ok(w) = e.welch {
            return Leading {
                method: LeadingMethod::Welch,
                reason: format!(
                    "the group sizes differ ({n_min} to {n_max} values), where the classic F's level depends on spread differences no check can rule out, and every group has the {welch_min} values Welch's test needs with {k} groups, so Welch's test leads"
                ),
                recommend_kruskal_wallis: false,
                p: Some(w.p),
                statistic: Some(w.statistic),
                declined: None,
            };
        }
    }
    let mut signals = Vec::new();
    if let Ok(bf) = e.brown_forsythe {
        if bf.p < VARIANCE_CHECK_ALPHA {
            signals.push(format!(
                "Brown-Forsythe p = {} < {VARIANCE_CHECK_ALPHA}",
                short(bf.p)
            ));
        }
    }
    if k <= SD_RATIO_MAX_GROUPS {
        if let Ok(r) = e.sd_ratio {
            if *r > SD_RATIO_LIMIT {
                signals.push(format!(
                    "largest/smallest group SD = {} > {SD_RATIO_LIMIT}",
                    short(*r)
                ));
            }
        }
    }
    if !signals.is_empty() {
        return match e.welch {
            Ok(w) => Leading {
                method: LeadingMethod::Welch,
                reason: format!(
                    "group variances look different ({}), so Welch's test, which does not assume equal variances, leads",
                    signals.join("; ")
                ),
                recommend_kruskal_wallis: false,
                p: Some(w.p),
                statistic: Some(w.statistic),
                declined: None,
            },
            Err(err) => declined(format!(
                "too few values per group to compare: group variances look different ({}) and Welch's test is unavailable ({})",
                signals.join("; "),
                err.reason
            )),
        };
    }
    let mut unknown = Vec::new();
    if let Err(err) = e.brown_forsythe {
        unknown.push(format!("Brown-Forsythe unavailable: {}", err.reason));
    }
    if let (Err(err), true) = (e.sd_ratio, k <= SD_RATIO_MAX_GROUPS) {
        unknown.push(format!("SD ratio unavailable: {}", err.reason));
    }
    if unknown.is_empty() {
        classic(if k <= SD_RATIO_MAX_GROUPS {
            format!(
                "the variance checks pass (Brown-Forsythe p >= {VARIANCE_CHECK_ALPHA}, largest/smallest group SD <= {SD_RATIO_LIMIT}), so the classic F leads"
            )
        } else {
            format!(
                "the variance check passes (Brown-Forsythe p >= {VARIANCE_CHECK_ALPHA}; with {k} groups the SD ratio is not used, many sample SDs differ twofold by chance), so the classic F leads"
            )
        })
    } else {
        classic(format!(
            "the variance checks could not all be made ({}), so the classic F leads by default",
            unknown.join("; ")
        ))
    }
}

/// A number in a short form for reasons (4 significant digits).
pub(crate) fn short(x: f64) -> String {
    if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e5) {
        format!("{x:.3e}")
    } else {
        let digits = (3 - x.abs().log10().floor() as i32).max(0) as usize;
        format!("{x:.digits$}")
    }
}

/// Runs every one-way analysis on raw group values (offsets from one origin).
///
/// Unavailable as a whole only when the input cannot be analysed at all: fewer than two groups, an
/// empty group, or a value that is not finite. Otherwise each statistic carries its own
/// `Unavailable` reason (for example zero within-group variance leaves F undefined while the
/// group table is still reported).
pub fn analyze(groups: &[&[f64]], options: &OneWayOptions) -> Stat<OneWay> {
    check_input(groups)?;
    let summaries: Vec<Summary> = groups.iter().map(|g| Summary::from_slice(g)).collect();
    let anova = one_way(&summaries);
    let welch_result = welch(&summaries);
    let f_star = brown_forsythe_means(&summaries);
    let kw = kruskal_wallis(groups);
    let levene = levene_mean(groups);
    let bf = brown_forsythe(groups);
    let bart = bartlett(&summaries);
    let ratio = sd_ratio(&summaries);
    let n_beyond = match &anova {
        Ok(t) => count_beyond(groups, &summaries, t.resid_sd, OUTLIER_SD),
        Err(e) => Err(e.clone()),
    };
    let tolerance = options.tolerance.and_then(|t| t.width());
    let effect = anova
        .as_ref()
        .map(|t| effect_sizes(t, &summaries, tolerance))
        .map_err(Clone::clone);
    let residuals: Vec<f64> = groups
        .iter()
        .zip(&summaries)
        .flat_map(|(g, s)| g.iter().map(move |v| v - s.mean))
        .collect();
    let sw = shapiro_wilk(&residuals);
    let dp = dagostino_pearson(&residuals);
    let constant = constant_groups(&summaries);
    let leading = choose_leading(&Evidence {
        summaries: &summaries,
        anova: &anova,
        welch: &welch_result,
        f_star: &f_star,
        brown_forsythe: &bf,
        sd_ratio: &ratio,
        constant: &constant,
    });
    let (mut leading, welch_bootstrap) = calibrate_welch(leading, groups, &summaries);
    let smallest = summaries.iter().map(|s| s.n).min().unwrap_or(0);
    if let Ok(test) = &sw {
        if test.p < NORMALITY_ALPHA && smallest < SMALL_GROUP_N {
            leading.recommend_kruskal_wallis = true;
            leading.reason.push_str(&format!(
                "; the residuals look clearly non-normal (Shapiro-Wilk p = {} < {NORMALITY_ALPHA}) and the smallest group has {smallest} values (< {SMALL_GROUP_N}), so read Kruskal-Wallis too",
                short(test.p)
            ));
        }
    }
    let variance_components = one_way_random(&summaries, options.confidence);
    let pairs = match leading.method {
        _ if !options.with_pairs => Vec::new(),
        LeadingMethod::Welch | LeadingMethod::WelchBootstrap => {
            games_howell(&summaries, options.confidence)
        }
        LeadingMethod::ClassicF | LeadingMethod::ExactPermutation | LeadingMethod::FStar => {
            tukey_kramer(&summaries, options.confidence)
        }
    };
    let within_sd = anova.as_ref().ok().map(|t| t.resid_sd);
    let effects = group_effects(&summaries, within_sd, tolerance);
    let sens = match &anova {
        Ok(t) => sensitivity(
            &summaries,
            t.resid_sd,
            options.alpha,
            options.power_target,
            options.detect,
            tolerance,
        ),
        Err(e) => Err(Unavailable::new(format!(
            "needs the within-group SD, which is unavailable ({})",
            e.reason
        ))),
    };
    Ok(OneWay {
        summaries,
        anova,
        welch: welch_result,
        f_star,
        welch_bootstrap,
        kruskal_wallis: kw,
        levene,
        brown_forsythe: bf,
        bartlett: bart,
        sd_ratio: ratio,
        outliers: n_beyond
            .as_ref()
            .map(|&n| outlier_excess(n, residuals.len()))
            .map_err(Clone::clone),
        n_beyond_3sd: n_beyond,
        shapiro_wilk: sw,
        dagostino_pearson: dp,
        effect,
        variance_components,
        constant_groups: constant,
        leading,
        pairs,
        group_effects: effects,
        sensitivity: sens,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn classic_leads_when_checks_pass() {
        // Similar spreads, shifted means.
        let a = [1.0, 2.0, 3.0, 2.5, 1.5];
        let b = [2.0, 3.1, 4.0, 3.4, 2.6];
        let c = [3.0, 4.0, 5.2, 4.4, 3.5];
        let r = analyze(&[&a, &b, &c], &OneWayOptions::default()).unwrap();
        assert_eq!(r.leading.method, LeadingMethod::ClassicF);
        assert!(
            r.leading.reason.contains("checks pass"),
            "{}",
            r.leading.reason
        );
        assert_eq!(r.leading.p, Some(r.anova.as_ref().unwrap().p));
    }

    #[test]
    fn welch_leads_when_sd_ratio_large() {
        let a = [1.0, 1.1, 0.9, 1.05, 0.95];
        let b = [2.0, 5.0, -1.0, 3.0, 1.0];
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(*r.sd_ratio.as_ref().unwrap() > 2.0);
        assert_eq!(r.leading.method, LeadingMethod::Welch);
        assert!(r.leading.reason.contains("SD"), "{}", r.leading.reason);
        assert_eq!(r.leading.p, Some(r.welch.as_ref().unwrap().p));
    }

    // Constant groups: F is undefined, but the exact permutation test leads with its p (two
    // groups of two: 1/3, see stats::constant_groups), so the data are not "no evidence" by default.
    #[test]
    fn zero_variance_keeps_groups_and_reasons() {
        let r = analyze(&[&[1.0, 1.0], &[2.0, 2.0]], &OneWayOptions::default()).unwrap();
        assert_eq!(r.summaries.len(), 2);
        assert!(r.anova.unwrap_err().reason.contains("F is undefined"));
        assert!(r.welch.is_err());
        assert!(r.effect.is_err());
        assert_eq!(r.leading.method, LeadingMethod::ExactPermutation);
        assert!((r.leading.p.unwrap() - 1.0 / 3.0).abs() < 1e-14);
        let c = r.constant_groups.unwrap();
        assert_eq!((c.ss_between, c.df_between, c.df_within), (1.0, 1.0, 2.0));
    }

    // Three groups of five constant readings (a coarse gauge), each its own value: the exact
    // p is 3! / (15! / (5! 5! 5!)) = 6 / 756756, a difference, never "no evidence".
    #[test]
    fn constant_groups_that_differ_lead_with_the_exact_test() {
        let r = analyze(
            &[&[2.5; 5], &[2.6; 5], &[2.7; 5]],
            &OneWayOptions::default(),
        )
        .unwrap();
        assert_eq!(r.leading.method, LeadingMethod::ExactPermutation);
        assert!(r.leading.p.unwrap() < 1e-5);
    }

    // Forty groups of two (balanced, below Welch's size): the classic F leads whatever the SDs
    // look like (an SD ratio of 197 between groups of two says nothing).
    #[test]
    fn small_balanced_groups_lead_with_classic_f() {
        let groups: Vec<Vec<f64>> = (0..40)
            .map(|g| {
                vec![
                    g as f64 * 0.01,
                    g as f64 * 0.01 + if g == 0 { 1.97 } else { 0.01 },
                ]
            })
            .collect();
        let refs: Vec<&[f64]> = groups.iter().map(Vec::as_slice).collect();
        let r = analyze(&refs, &OneWayOptions::default()).unwrap();
        assert!(*r.sd_ratio.as_ref().unwrap() > 100.0);
        assert_eq!(r.leading.method, LeadingMethod::ClassicF);
        assert!(r.leading.declined.is_none());
        assert_eq!(r.leading.p, Some(r.anova.as_ref().unwrap().p));
    }

    // Very unequal sizes with a group of two: no test holds its level if spreads differ, so the
    // rule declines and says why.
    #[test]
    fn unequal_sizes_with_tiny_groups_are_declined() {
        let a = [1.0, 1.2];
        let b: Vec<f64> = (0..20).map(|i| 1.0 + 0.01 * i as f64).collect();
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(r.leading.p.is_none());
        let reason = r.leading.declined.unwrap();
        assert!(
            reason.contains("too few values per group to compare"),
            "{reason}"
        );
        assert!(reason.contains("2 to 20"), "{reason}");
    }

    // Unequal sizes at Welch's size with 3 groups of 20-40 values: Welch's statistic leads with
    // the bootstrap-t p-value, and the reason says so; the same data in 6 groups keep Welch's F
    // distribution (the bootstrap-t is used with at most 5 groups).
    #[test]
    fn welch_takes_the_bootstrap_p_for_a_few_groups_of_twenty_to_forty_nine() {
        let group = |n: usize, shift: f64| -> Vec<f64> {
            (0..n)
                .map(|i| shift + ((i * 7) % 11) as f64 * 0.1)
                .collect()
        };
        let g = [group(20, 0.0), group(40, 0.05), group(20, 0.1)];
        let refs: Vec<&[f64]> = g.iter().map(Vec::as_slice).collect();
        let r = analyze(&refs, &OneWayOptions::default()).unwrap();
        assert_eq!(r.leading.method, LeadingMethod::WelchBootstrap);
        let boot = r.welch_bootstrap.as_ref().unwrap();
        assert_eq!(r.leading.p, Some(boot.p));
        let welch_f = r.welch.as_ref().unwrap().statistic;
        assert!(lre(r.leading.statistic.unwrap(), welch_f) >= 13.0);
        assert!(
            r.leading.reason.contains("bootstrap-t"),
            "{}",
            r.leading.reason
        );
        let g6: Vec<Vec<f64>> = (0..6).map(|i| group(20 + 20 * (i % 2), 0.0)).collect();
        let refs: Vec<&[f64]> = g6.iter().map(Vec::as_slice).collect();
        let r = analyze(&refs, &OneWayOptions::default()).unwrap();
        assert_eq!(r.leading.method, LeadingMethod::Welch);
        assert!(r.welch_bootstrap.is_err());
    }

    #[test]
    fn welch_minimum_grows_with_the_number_of_groups() {
        assert_eq!(welch_min_n(2), 5);
        assert_eq!(welch_min_n(10), 10);
        assert_eq!(welch_min_n(20), 15);
        assert_eq!(welch_min_n(40), 30);
        assert_eq!(welch_min_n(60), 45);
    }

    // Clearly non-normal residuals (one far value per group) in groups of 10 (< 15): the report
    // recommends Kruskal-Wallis and says why; with 20 values per group it does not.
    #[test]
    fn kruskal_wallis_recommended_for_small_skewed_groups() {
        let skewed = |n: usize, shift: f64| -> Vec<f64> {
            let mut v: Vec<f64> = (0..n).map(|i| shift + (i % 3) as f64 * 0.1).collect();
            v[0] = shift + 25.0;
            v
        };
        let (a, b) = (skewed(10, 0.0), skewed(10, 0.5));
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(r.shapiro_wilk.as_ref().unwrap().p < NORMALITY_ALPHA);
        assert!(r.leading.recommend_kruskal_wallis);
        assert!(
            r.leading.reason.contains("Kruskal-Wallis"),
            "{}",
            r.leading.reason
        );
        let (a, b) = (skewed(20, 0.0), skewed(20, 0.5));
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(!r.leading.recommend_kruskal_wallis);
    }

    // Games-Howell pairs when Welch leads, Tukey-Kramer otherwise.
    #[test]
    fn pair_method_follows_leading() {
        use crate::stats::posthoc::PairMethod;
        let a = [1.0, 1.1, 0.9, 1.05, 0.95];
        let b = [2.0, 5.0, -1.0, 3.0, 1.0];
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert_eq!(r.pairs.len(), 1);
        assert_eq!(r.pairs[0].as_ref().unwrap().method, PairMethod::GamesHowell);
        let c = [1.2, 1.0, 0.8, 1.1, 0.9];
        let r = analyze(&[&a, &c], &OneWayOptions::default()).unwrap();
        assert_eq!(r.pairs[0].as_ref().unwrap().method, PairMethod::TukeyKramer);
    }

    #[test]
    fn bad_input() {
        let o = OneWayOptions::default();
        assert!(analyze(&[&[1.0, 2.0]], &o).is_err());
        assert!(analyze(&[&[1.0, 2.0], &[]], &o).is_err());
        let e = analyze(&[&[1.0, 2.0], &[1.0, f64::INFINITY]], &o).unwrap_err();
        assert!(e.reason.contains("group 2 value 2"), "{e}");
    }

    use crate::stats::lre;
    use proptest::prelude::*;

    fn to_groups(ints: &[Vec<i32>]) -> Vec<Vec<f64>> {
        ints.iter()
            .map(|g| g.iter().map(|&v| f64::from(v) * 0.01).collect())
            .collect()
    }

    fn run(groups: &[Vec<f64>]) -> OneWay {
        let refs: Vec<&[f64]> = groups.iter().map(Vec::as_slice).collect();
        analyze(&refs, &OneWayOptions::default()).unwrap()
    }

    /// Both available and agreeing to `digits`, or both unavailable.
    fn same(a: &Stat<TestResult>, b: &Stat<TestResult>, digits: f64) -> bool {
        match (a, b) {
            (Ok(x), Ok(y)) => {
                lre(x.statistic, y.statistic) >= digits && (lre(x.p, y.p) >= digits - 1.0)
            }
            (Err(_), Err(_)) => true,
            _ => false,
        }
    }

    fn anova_as_test(r: &OneWay) -> Stat<TestResult> {
        r.anova.as_ref().map_err(Clone::clone).map(|t| TestResult {
            statistic: t.f,
            p: t.p,
            df1: None,
            df2: None,
        })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        // Location-scale invariance: F, Welch, Kruskal-Wallis, Levene, Brown-Forsythe and Bartlett
        // (statistic and p) do not change when every value is shifted by a constant or multiplied
        // by a positive constant.
        #[test]
        fn invariant_to_shift_and_scale(
            ints in prop::collection::vec(prop::collection::vec(-500i32..500, 2..10), 2..6),
            shift in -1000.0f64..1000.0,
            scale in 0.001f64..1000.0,
        ) {
            let base = to_groups(&ints);
            let moved: Vec<Vec<f64>> = base
                .iter()
                .map(|g| g.iter().map(|v| v * scale + shift).collect())
                .collect();
            let a = run(&base);
            let b = run(&moved);
            prop_assert!(same(&anova_as_test(&a), &anova_as_test(&b), 9.0));
            prop_assert!(same(&a.welch, &b.welch, 9.0));
            prop_assert!(same(&a.kruskal_wallis, &b.kruskal_wallis, 12.0));
            prop_assert!(same(&a.levene, &b.levene, 8.0));
            prop_assert!(same(&a.brown_forsythe, &b.brown_forsythe, 8.0));
            prop_assert!(same(&a.bartlett, &b.bartlett, 9.0));
        }

        // Group order does not matter (reversed order gives the same statistics).
        #[test]
        fn group_order_irrelevant(
            ints in prop::collection::vec(prop::collection::vec(-500i32..500, 1..10), 2..6),
        ) {
            let base = to_groups(&ints);
            let mut reversed = base.clone();
            reversed.reverse();
            let a = run(&base);
            let b = run(&reversed);
            prop_assert!(same(&anova_as_test(&a), &anova_as_test(&b), 12.0));
            prop_assert!(same(&a.welch, &b.welch, 12.0));
            prop_assert!(same(&a.kruskal_wallis, &b.kruskal_wallis, 12.0));
            prop_assert!(same(&a.levene, &b.levene, 12.0));
            prop_assert!(same(&a.brown_forsythe, &b.brown_forsythe, 12.0));
            prop_assert!(same(&a.bartlett, &b.bartlett, 12.0));
        }

        // Merging the summaries of two disjoint parts equals summarising the union.
        #[test]
        fn merge_equals_union(
            a in prop::collection::vec(-1e6f64..1e6, 0..50),
            b in prop::collection::vec(-1e6f64..1e6, 0..50),
        ) {
            let union: Vec<f64> = a.iter().chain(&b).copied().collect();
            let merged = Summary::from_slice(&a).merge(&Summary::from_slice(&b));
            let whole = Summary::from_slice(&union);
            prop_assert_eq!(merged.n, whole.n);
            if whole.n > 0 {
                prop_assert!((merged.mean - whole.mean).abs() <= 1e-9 * (1.0 + whole.mean.abs()));
                prop_assert!((merged.m2 - whole.m2).abs() <= 1e-10 * whole.m2 + 1e-6);
                prop_assert_eq!((merged.min, merged.max), (whole.min, whole.max));
            }
        }
    }
}
