//! The document `samewise compare --json` prints ([`CompareDocument`]): the one-way analysis of
//! a file's groups (`stats::oneway`) with its sampling design, in the shared vocabulary.

use schemars::JsonSchema;
use serde::Serialize;

use super::{reason_if_none, split, ChiSquareTest, DfP, FTest, GroupSummary, StatTest};
use crate::results::{Interval, PairResult};
use crate::stats::decimal::Decimal;
use crate::stats::oneway::{LeadingMethod, OneWay, Tolerance};

/// The specification limits given on the command line, in units.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CompareLimits {
    /// `--lsl`.
    pub lsl: Option<f64>,
    /// Why `lsl` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lsl_reason: Option<String>,
    /// `--usl`.
    pub usl: Option<f64>,
    /// Why `usl` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub usl_reason: Option<String>,
    /// `--target`.
    pub target: Option<f64>,
    /// Why `target` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub target_reason: Option<String>,
}

/// One group: the shared group shape plus the exact-decimal detail.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CompareGroup {
    /// Name, n, mean, SD, min and max in units.
    #[serde(flatten)]
    pub group: GroupSummary,
    /// Mean minus `origin`, at full precision.
    pub mean_offset: f64,
}

/// The serial-dependence check of values in file order.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct SerialOut {
    /// Pooled lag-1 serial correlation within groups.
    pub r1: f64,
    /// Its standardized form.
    pub z: f64,
    /// One-sided p-value.
    pub p: f64,
    /// Whether neighbouring values are alike (p < 0.05).
    pub fails: bool,
}

/// The F test of the groups on the subgroup means of a nested design.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct NestedTestOut {
    /// F.
    pub f: f64,
    /// Numerator degrees of freedom.
    pub df1: f64,
    /// Denominator degrees of freedom.
    pub df2: f64,
    /// p-value.
    pub p: f64,
    /// How the test was made.
    pub method: String,
}

/// Three-level variance components of a nested design.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct NestedComponentsOut {
    /// Between groups.
    pub between: f64,
    /// Between subgroups within a group.
    pub subgroups: f64,
    /// Within subgroups.
    pub within: f64,
    /// Share between groups.
    pub share_between: f64,
    /// Share between subgroups.
    pub share_subgroups: f64,
    /// Share within subgroups.
    pub share_within: f64,
    /// The estimator.
    pub method: String,
}

/// The F test of the groups adjusted for the subgroups (blocked design).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct BlockedTestOut {
    /// F, its degrees of freedom and p-value.
    #[serde(flatten)]
    pub test: FTest,
    /// Sum of squares of the groups (adjusted).
    pub ss_groups: f64,
    /// Sum of squares of the subgroups.
    pub ss_subgroups: f64,
    /// Residual sum of squares.
    pub ss_residual: f64,
}

/// The sampling design of the comparison (`--subgroup`).
#[derive(Debug, Clone, PartialEq, Default, Serialize, JsonSchema)]
pub struct DesignOut {
    /// `independent`, `nested`, `blocked` or `cell_means`.
    pub kind: String,
    /// The subgroup column.
    pub subgroup_column: Option<String>,
    /// Why `subgroup_column` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub subgroup_column_reason: Option<String>,
    /// Subgroups found.
    pub n_subgroups: Option<u64>,
    /// Why `n_subgroups` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub n_subgroups_reason: Option<String>,
    /// Serial dependence in file order (every value a unit).
    pub serial_dependence: Option<SerialOut>,
    /// Why `serial_dependence` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub serial_dependence_reason: Option<String>,
    /// The nested F test.
    pub nested_test: Option<NestedTestOut>,
    /// Why `nested_test` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub nested_test_reason: Option<String>,
    /// The nested design's variance components.
    pub variance_components: Option<NestedComponentsOut>,
    /// Why `variance_components` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub variance_components_reason: Option<String>,
    /// The blocked F test.
    pub blocked_test: Option<BlockedTestOut>,
    /// Why `blocked_test` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub blocked_test_reason: Option<String>,
    /// Pairs on the least-squares means of a blocked design (empty otherwise).
    pub blocked_pairs: Vec<PairResult>,
}

impl DesignOut {
    /// A design of `kind`; the parts not set afterwards get their reasons from [`finish`].
    ///
    /// [`finish`]: DesignOut::finish
    pub fn new(kind: &str, subgroup_column: Option<String>) -> DesignOut {
        DesignOut {
            kind: kind.to_string(),
            subgroup_column,
            ..DesignOut::default()
        }
    }

    /// Puts a reason beside every part that stayed `null` (unless one was given already).
    pub fn finish(mut self) -> DesignOut {
        fn fill<T>(v: &Option<T>, reason: &mut Option<String>, why: &str) {
            if v.is_none() && reason.is_none() {
                *reason = Some(why.to_string());
            } else if v.is_some() {
                *reason = None;
            }
        }
        let nested = self.kind == "nested";
        fill(
            &self.subgroup_column,
            &mut self.subgroup_column_reason,
            "no --subgroup given",
        );
        fill(
            &self.n_subgroups,
            &mut self.n_subgroups_reason,
            "no subgroups: every value is a unit",
        );
        fill(
            &self.serial_dependence,
            &mut self.serial_dependence_reason,
            "checked only when every value is a unit (no --subgroup)",
        );
        fill(
            &self.nested_test,
            &mut self.nested_test_reason,
            if nested {
                "the nested test could not be computed"
            } else {
                "only a nested design has a test on subgroup means"
            },
        );
        fill(
            &self.variance_components,
            &mut self.variance_components_reason,
            if nested {
                "the three-level components could not be computed"
            } else {
                "only a nested design has three-level components (see the top-level variance_components)"
            },
        );
        fill(
            &self.blocked_test,
            &mut self.blocked_test_reason,
            if self.kind == "blocked" {
                "the blocked test could not be computed"
            } else {
                "only a blocked design has a test adjusted for the subgroups"
            },
        );
        self
    }
}

/// The classic one-way ANOVA table.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct AnovaOut {
    /// Between-group sum of squares.
    pub ss_between: f64,
    /// Within-group sum of squares.
    pub ss_within: f64,
    /// Total sum of squares.
    pub ss_total: f64,
    /// Between-group df.
    pub df_between: f64,
    /// Within-group df.
    pub df_within: f64,
    /// Total df.
    pub df_total: f64,
    /// Between-group mean square.
    pub ms_between: f64,
    /// Within-group mean square.
    pub ms_within: f64,
    /// F.
    pub f: f64,
    /// Upper tail of F.
    pub p: f64,
    /// Share of the total sum of squares between groups.
    pub r_squared: f64,
    /// sqrt(ms_within).
    pub resid_sd: f64,
    /// The grand mean, in units.
    pub grand_mean: f64,
}

/// Kruskal-Wallis H with the tie correction.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct KruskalOut {
    /// H.
    pub h: f64,
    /// Degrees of freedom and chi-square p.
    #[serde(flatten)]
    pub rest: DfP,
}

/// Residuals beyond 3 SD against what normal residuals give.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct OutliersOut {
    /// Residuals beyond 3 residual SDs.
    pub n: usize,
    /// The count normal residuals give (N x 0.0027).
    pub expected: f64,
    /// Binomial upper-tail p of the observed count.
    pub p: f64,
}

/// D'Agostino-Pearson K² on the residuals.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct DagostinoOut {
    /// K².
    pub k2: f64,
    /// p-value.
    pub p: f64,
    /// Residuals tested.
    pub n: usize,
    /// Skewness g1.
    pub skewness: f64,
    /// Its standard error under normality.
    pub skewness_se: f64,
    /// Excess kurtosis g2.
    pub excess_kurtosis: f64,
    /// Its standard error under normality.
    pub excess_kurtosis_se: f64,
}

/// The defined parts of the ANOVA table when every group is constant (a coarse gauge).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ConstantGroupsOut {
    /// Between-group sum of squares.
    pub ss_between: f64,
    /// Within-group sum of squares (0).
    pub ss_within: f64,
    /// Between-group df.
    pub df_between: f64,
    /// Within-group df.
    pub df_within: f64,
    /// The grand mean, in units.
    pub grand_mean: f64,
    /// eta² (1).
    pub eta_squared: f64,
    /// Distinct values.
    pub n_distinct: usize,
    /// The exact permutation p.
    pub p_exact: f64,
    /// False when the count was too large to enumerate and `p_exact` is a conservative bound.
    pub p_is_exact_count: bool,
}

/// Shapiro-Wilk on the residuals.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ShapiroOut {
    /// W.
    pub w: f64,
    /// p-value.
    pub p: f64,
    /// Residuals tested.
    pub n: usize,
}

/// Effect sizes.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct EffectOut {
    /// eta².
    pub eta_squared: f64,
    /// omega².
    pub omega_squared: f64,
    /// Largest - smallest group mean.
    pub mean_spread: f64,
    /// The same in % of the tolerance.
    pub mean_spread_pct_tolerance: Option<f64>,
    /// Why `mean_spread_pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean_spread_pct_tolerance_reason: Option<String>,
}

/// Random-effects one-way variance components.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ComponentsOut {
    /// Between-group component, truncated at zero.
    pub between: f64,
    /// The same before truncation (may be negative).
    pub between_raw: f64,
    /// Whether `between` was truncated.
    pub is_truncated: bool,
    /// Within-group component.
    pub within: f64,
    /// Between-group share of the total.
    pub share_between: f64,
    /// Intraclass correlation.
    pub icc: f64,
    /// The effective group size.
    pub n0: f64,
    /// Whether every group has the same size.
    pub is_balanced: bool,
    /// Chi-square interval of `within`.
    pub within_ci: Interval,
    /// F-based interval of `icc`.
    pub icc_ci: Option<Interval>,
    /// Why `icc_ci` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub icc_ci_reason: Option<String>,
    /// Modified large-sample interval of `between`.
    pub between_ci: Option<Interval>,
    /// Why `between_ci` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub between_ci_reason: Option<String>,
    /// Confidence level of the intervals.
    pub confidence: f64,
    /// The estimator and intervals.
    pub method: String,
    /// Truncation and approximations.
    pub notes: Vec<String>,
}

/// One pair of groups: the shared pair shape plus the groups' positions.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ComparePair {
    /// a, b (names), diff, se, statistic, df, p_adj, ci, method.
    #[serde(flatten)]
    pub pair: PairResult,
    /// Position of `a` in `groups[]`.
    pub a_index: usize,
    /// Position of `b` in `groups[]` (a < b).
    pub b_index: usize,
}

/// A pair that could not be computed.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct MissingPair {
    /// Always null.
    pub pair: Option<ComparePair>,
    /// Why the pair could not be computed.
    pub pair_reason: String,
}

/// One entry of `pairs[]`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum PairEntry {
    /// A computed pair.
    Pair(ComparePair),
    /// A pair that could not be computed.
    Missing(MissingPair),
}

/// A group's mean against the grand mean.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct GroupEffectOut {
    /// The group's name.
    pub name: String,
    /// Its position in `groups[]`.
    pub group_idx: usize,
    /// Mean minus the grand mean, in units.
    pub diff_from_grand: f64,
    /// The same in within-group SDs.
    pub diff_sd_units: Option<f64>,
    /// Why `diff_sd_units` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub diff_sd_units_reason: Option<String>,
    /// The same in % of the tolerance.
    pub diff_pct_tolerance: Option<f64>,
    /// Why `diff_pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub diff_pct_tolerance_reason: Option<String>,
}

/// Sensitivity of the F test actually run.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct SensitivityOut {
    /// Significance level.
    pub alpha: f64,
    /// Power aimed at.
    pub power_target: f64,
    /// The smallest difference between two group means detected with `power_target`.
    pub min_detectable_diff: Option<f64>,
    /// Why `min_detectable_diff` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub min_detectable_diff_reason: Option<String>,
    /// The same in % of the tolerance.
    pub min_detectable_pct_tolerance: Option<f64>,
    /// Why `min_detectable_pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub min_detectable_pct_tolerance_reason: Option<String>,
    /// `--detect`.
    pub detect: Option<f64>,
    /// Why `detect` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub detect_reason: Option<String>,
    /// The power for `detect` at the observed sizes.
    pub power_at_detect: Option<f64>,
    /// Why `power_at_detect` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub power_at_detect_reason: Option<String>,
    /// Values per group needed for `detect`.
    pub n_needed: Option<u64>,
    /// Why `n_needed` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub n_needed_reason: Option<String>,
}

/// The result the report leads with.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct LeadingOut {
    /// `classic_f`, `welch`, `welch_bootstrap_t`, `exact_permutation` or `f_star`.
    pub method: String,
    /// Why it leads (or why no test could judge).
    pub reason: String,
    /// True when no available test holds its level on data of this shape.
    pub declined: bool,
    /// Whether Kruskal-Wallis is recommended in addition.
    pub recommend_kruskal_wallis: bool,
    /// The leading test's statistic.
    pub statistic: Option<f64>,
    /// Why `statistic` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub statistic_reason: Option<String>,
    /// Its p-value.
    pub p: Option<f64>,
    /// Why `p` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub p_reason: Option<String>,
}

/// The document `samewise compare --json` prints (docs/json.md; schema in
/// docs/schema/compare.json).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CompareDocument {
    /// The input file, as given.
    pub file: String,
    /// The grouping column.
    pub by: String,
    /// The measured column.
    pub measure: String,
    /// Exact decimal text of the origin the values were centred on.
    pub origin: String,
    /// Data rows.
    pub n_obs: u64,
    /// Groups.
    pub n_groups: usize,
    /// The limits given on the command line.
    pub limits: CompareLimits,
    /// The groups, in first-seen order.
    pub groups: Vec<CompareGroup>,
    /// The sampling design.
    pub design: DesignOut,
    /// The classic ANOVA table.
    pub anova: Option<AnovaOut>,
    /// Why `anova` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub anova_reason: Option<String>,
    /// Welch's ANOVA.
    pub welch: Option<FTest>,
    /// Why `welch` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub welch_reason: Option<String>,
    /// Brown and Forsythe's F* test of means.
    pub f_star: Option<FTest>,
    /// Why `f_star` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub f_star_reason: Option<String>,
    /// Kruskal-Wallis.
    pub kruskal_wallis: Option<KruskalOut>,
    /// Why `kruskal_wallis` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub kruskal_wallis_reason: Option<String>,
    /// Levene's test (mean-centred).
    pub levene: Option<StatTest>,
    /// Why `levene` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub levene_reason: Option<String>,
    /// Brown-Forsythe (median-centred Levene).
    pub brown_forsythe: Option<StatTest>,
    /// Why `brown_forsythe` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub brown_forsythe_reason: Option<String>,
    /// Bartlett's test.
    pub bartlett: Option<ChiSquareTest>,
    /// Why `bartlett` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bartlett_reason: Option<String>,
    /// Largest / smallest group SD.
    pub sd_ratio: Option<f64>,
    /// Why `sd_ratio` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_ratio_reason: Option<String>,
    /// Residuals beyond 3 residual SDs.
    pub n_beyond_3sd: Option<usize>,
    /// Why `n_beyond_3sd` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub n_beyond_3sd_reason: Option<String>,
    /// The outlier count against normal residuals.
    pub outliers: Option<OutliersOut>,
    /// Why `outliers` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub outliers_reason: Option<String>,
    /// D'Agostino-Pearson.
    pub dagostino_pearson: Option<DagostinoOut>,
    /// Why `dagostino_pearson` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dagostino_pearson_reason: Option<String>,
    /// Every group constant.
    pub constant_groups: Option<ConstantGroupsOut>,
    /// Why `constant_groups` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub constant_groups_reason: Option<String>,
    /// Shapiro-Wilk.
    pub shapiro_wilk: Option<ShapiroOut>,
    /// Why `shapiro_wilk` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub shapiro_wilk_reason: Option<String>,
    /// Effect sizes.
    pub effect: Option<EffectOut>,
    /// Why `effect` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub effect_reason: Option<String>,
    /// Variance components.
    pub variance_components: Option<ComponentsOut>,
    /// Why `variance_components` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub variance_components_reason: Option<String>,
    /// Every pair of groups.
    pub pairs: Vec<PairEntry>,
    /// Each group against the grand mean.
    pub group_effects: Vec<GroupEffectOut>,
    /// Sensitivity of the F test.
    pub sensitivity: Option<SensitivityOut>,
    /// Why `sensitivity` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sensitivity_reason: Option<String>,
    /// The leading result.
    pub leading: LeadingOut,
    /// The caution every output carries.
    pub caution: String,
}

/// What a comparison was asked and read: the file and columns, the groups' names and the
/// exact origin, the rows read, the limits (offsets from the origin) and the confidence level.
pub struct CompareInput<'a> {
    /// The input file, as given.
    pub file: String,
    /// The grouping column.
    pub by: String,
    /// The measured column.
    pub measure: String,
    /// Group names, in first-seen order.
    pub names: &'a [String],
    /// The exact origin.
    pub origin: &'a Decimal,
    /// Data rows.
    pub n_rows: u64,
    /// The limits, as offsets from the origin.
    pub tolerance: Option<Tolerance>,
    /// Confidence level of the intervals.
    pub confidence: f64,
}

impl CompareDocument {
    /// The document of a one-way analysis and its design.
    pub fn new(input: &CompareInput<'_>, r: &OneWay, design: DesignOut) -> CompareDocument {
        let origin = input.origin.to_f64();
        let names = input.names;
        let no_tolerance = "no tolerance: give --lsl and --usl";
        let limits = input.tolerance.unwrap_or_default();
        let lim = |x: Option<f64>, flag: &str| {
            let v = x.map(|o| origin + o);
            (v, reason_if_none(&v, format!("not given ({flag})")))
        };
        let (lsl, lsl_reason) = lim(limits.lsl, "--lsl");
        let (usl, usl_reason) = lim(limits.usl, "--usl");
        let (target, target_reason) = lim(limits.target, "--target");
        let groups = names
            .iter()
            .zip(&r.summaries)
            .map(|(name, s)| {
                let sd = s.sd();
                CompareGroup {
                    group: GroupSummary {
                        name: name.clone(),
                        n: s.n,
                        mean: origin + s.mean,
                        sd_reason: reason_if_none(&sd, "a group of one value has no SD"),
                        sd,
                        min: origin + s.min,
                        max: origin + s.max,
                    },
                    mean_offset: s.mean,
                }
            })
            .collect();
        let (anova, anova_reason) = split(&r.anova, |t| AnovaOut {
            ss_between: t.ss_between,
            ss_within: t.ss_within,
            ss_total: t.ss_total,
            df_between: t.df_between,
            df_within: t.df_within,
            df_total: t.df_total,
            ms_between: t.ms_between,
            ms_within: t.ms_within,
            f: t.f,
            p: t.p,
            r_squared: t.r_squared,
            resid_sd: t.resid_sd,
            grand_mean: origin + t.grand_mean,
        });
        let (welch, welch_reason) = split(&r.welch, FTest::from);
        let (f_star, f_star_reason) = split(&r.f_star, FTest::from);
        let (kruskal_wallis, kruskal_wallis_reason) = split(&r.kruskal_wallis, |t| KruskalOut {
            h: t.statistic,
            rest: DfP::from(t),
        });
        let (levene, levene_reason) = split(&r.levene, StatTest::from);
        let (brown_forsythe, brown_forsythe_reason) = split(&r.brown_forsythe, StatTest::from);
        let (bartlett, bartlett_reason) = split(&r.bartlett, ChiSquareTest::from);
        let (sd_ratio, sd_ratio_reason) = split(&r.sd_ratio, |v| *v);
        let (n_beyond_3sd, n_beyond_3sd_reason) = split(&r.n_beyond_3sd, |v| *v);
        let (outliers, outliers_reason) = split(&r.outliers, |c| OutliersOut {
            n: c.n,
            expected: c.expected,
            p: c.p,
        });
        let (dagostino_pearson, dagostino_pearson_reason) =
            split(&r.dagostino_pearson, |d| DagostinoOut {
                k2: d.k2,
                p: d.p,
                n: d.n,
                skewness: d.skewness,
                skewness_se: d.skewness_se,
                excess_kurtosis: d.excess_kurtosis,
                excess_kurtosis_se: d.excess_kurtosis_se,
            });
        let (constant_groups, constant_groups_reason) =
            split(&r.constant_groups, |c| ConstantGroupsOut {
                ss_between: c.ss_between,
                ss_within: 0.0,
                df_between: c.df_between,
                df_within: c.df_within,
                grand_mean: input.origin.plus_offset(c.grand_mean),
                eta_squared: 1.0,
                n_distinct: c.n_distinct,
                p_exact: c.p,
                p_is_exact_count: c.is_exact,
            });
        let (shapiro_wilk, shapiro_wilk_reason) = split(&r.shapiro_wilk, |t| ShapiroOut {
            w: t.w,
            p: t.p,
            n: t.n,
        });
        let (effect, effect_reason) = split(&r.effect, |e| EffectOut {
            eta_squared: e.eta_squared,
            omega_squared: e.omega_squared,
            mean_spread: e.mean_spread,
            mean_spread_pct_tolerance: e.mean_spread_pct_tolerance,
            mean_spread_pct_tolerance_reason: reason_if_none(
                &e.mean_spread_pct_tolerance,
                no_tolerance,
            ),
        });
        let interval = |i: &crate::stats::variance_components::Interval| Interval {
            low: i.low,
            high: i.high,
        };
        let (variance_components, variance_components_reason) =
            split(&r.variance_components, |v| {
                let (icc_ci, icc_ci_reason) = split(&v.icc_ci, interval);
                let (between_ci, between_ci_reason) = split(&v.between_ci, interval);
                ComponentsOut {
                    between: v.between,
                    between_raw: v.between_raw,
                    is_truncated: v.is_truncated,
                    within: v.within,
                    share_between: v.share_between,
                    icc: v.icc,
                    n0: v.n0,
                    is_balanced: v.is_balanced,
                    within_ci: interval(&v.within_ci),
                    icc_ci,
                    icc_ci_reason,
                    between_ci,
                    between_ci_reason,
                    confidence: input.confidence,
                    method: v.method.to_string(),
                    notes: v.notes.clone(),
                }
            });
        let pairs = r
            .pairs
            .iter()
            .map(|p| match p {
                Ok(p) => PairEntry::Pair(ComparePair {
                    pair: PairResult::named(names, p),
                    a_index: p.a,
                    b_index: p.b,
                }),
                Err(e) => PairEntry::Missing(MissingPair {
                    pair: None,
                    pair_reason: e.reason.clone(),
                }),
            })
            .collect();
        let group_effects = r
            .group_effects
            .iter()
            .map(|g| {
                let (diff_sd_units, diff_sd_units_reason) = split(&g.diff_sd_units, |v| *v);
                GroupEffectOut {
                    name: names[g.group_idx].clone(),
                    group_idx: g.group_idx,
                    diff_from_grand: g.diff_from_grand,
                    diff_sd_units,
                    diff_sd_units_reason,
                    diff_pct_tolerance: g.diff_pct_tolerance,
                    diff_pct_tolerance_reason: reason_if_none(&g.diff_pct_tolerance, no_tolerance),
                }
            })
            .collect();
        let (sensitivity, sensitivity_reason) = split(&r.sensitivity, |s| {
            let (min_detectable_diff, min_detectable_diff_reason) =
                split(&s.min_detectable_diff, |v| *v);
            let no_detect = "no --detect given";
            let (n_needed, n_needed_reason) = match &s.n_needed {
                None => (None, Some(no_detect.to_string())),
                Some(n) => split(n, |v| *v),
            };
            SensitivityOut {
                alpha: s.alpha,
                power_target: s.power_target,
                min_detectable_diff,
                min_detectable_diff_reason,
                min_detectable_pct_tolerance: s.min_detectable_pct_tolerance,
                min_detectable_pct_tolerance_reason: reason_if_none(
                    &s.min_detectable_pct_tolerance,
                    no_tolerance,
                ),
                detect: s.detect,
                detect_reason: reason_if_none(&s.detect, no_detect),
                power_at_detect: s.power_at_detect,
                power_at_detect_reason: reason_if_none(&s.power_at_detect, no_detect),
                n_needed,
                n_needed_reason,
            }
        });
        let l = &r.leading;
        let why = l.declined.clone().unwrap_or_else(|| match l.method {
            LeadingMethod::ExactPermutation => {
                "the exact permutation test of constant groups has a p-value but no F (F is infinite)"
                    .to_string()
            }
            _ => "the leading test could not be computed (its section gives the reason)".to_string(),
        });
        let leading = LeadingOut {
            method: l.method.key().to_string(),
            reason: l.reason.clone(),
            declined: l.declined.is_some(),
            recommend_kruskal_wallis: l.recommend_kruskal_wallis,
            statistic: l.statistic,
            statistic_reason: reason_if_none(&l.statistic, why.clone()),
            p: l.p,
            p_reason: reason_if_none(&l.p, why),
        };
        CompareDocument {
            file: input.file.clone(),
            by: input.by.clone(),
            measure: input.measure.clone(),
            origin: input.origin.to_string(),
            n_obs: input.n_rows,
            n_groups: names.len(),
            limits: CompareLimits {
                lsl,
                lsl_reason,
                usl,
                usl_reason,
                target,
                target_reason,
            },
            groups,
            design: design.finish(),
            anova,
            anova_reason,
            welch,
            welch_reason,
            f_star,
            f_star_reason,
            kruskal_wallis,
            kruskal_wallis_reason,
            levene,
            levene_reason,
            brown_forsythe,
            brown_forsythe_reason,
            bartlett,
            bartlett_reason,
            sd_ratio,
            sd_ratio_reason,
            n_beyond_3sd,
            n_beyond_3sd_reason,
            outliers,
            outliers_reason,
            dagostino_pearson,
            dagostino_pearson_reason,
            constant_groups,
            constant_groups_reason,
            shapiro_wilk,
            shapiro_wilk_reason,
            effect,
            effect_reason,
            variance_components,
            variance_components_reason,
            pairs,
            group_effects,
            sensitivity,
            sensitivity_reason,
            leading,
            caution: crate::CAUTION.to_string(),
        }
    }
}
