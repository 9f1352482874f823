//! The results of a check as domain types: what one test found ([`TestResult`], with its
//! [`GroupResult`]s and [`PairResult`]s), its state and methods as enums. The analysis builds
//! them from the statistics, `storage` maps them to and from its tables in one place
//! (`storage::runs`), and every output (the CLI's text, JSON and CSV, the charts and the report)
//! reads them. The JSON of a test is its `Serialize` form with a reason beside every `null`
//! ([`TestResult::to_json`], docs/json.md).

use std::fmt;

use schemars::JsonSchema;
use serde::Serialize;

/// The verdict of one test, strongest first.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum TestState {
    /// q <= level and the standing-out group's difference is material against the tolerance.
    DiffersMaterial,
    /// q <= level.
    Differs,
    /// q <= level, but the values were tested as independent and the serial-dependence check
    /// shows they are not (parts measured together share a deviation): the p-value is too small
    /// to trust. Not a flag: no finding, not ranked with sound flags.
    DiffersDependent,
    /// q > level (or no p-value although the groups were large enough).
    NoEvidence,
    /// Groups to compare, but too few values per group for any available test to hold its level
    /// (small groups whose spreads could differ, or very unequal sizes): no p-value.
    TooFewToCompare,
    /// Fewer than two groups with enough values.
    #[default]
    TooLittleData,
}

impl TestState {
    /// Every state, in rank order.
    pub const ALL: [TestState; 6] = [
        TestState::DiffersMaterial,
        TestState::Differs,
        TestState::DiffersDependent,
        TestState::NoEvidence,
        TestState::TooFewToCompare,
        TestState::TooLittleData,
    ];

    /// The stable name stored in the database and written in JSON and CSV.
    pub fn as_str(self) -> &'static str {
        match self {
            TestState::DiffersMaterial => "differs_material",
            TestState::Differs => "differs",
            TestState::DiffersDependent => "differs_dependent",
            TestState::NoEvidence => "no_evidence",
            TestState::TooFewToCompare => "too_few_to_compare",
            TestState::TooLittleData => "too_little_data",
        }
    }

    /// The state of a stable name, `None` for an unknown one.
    pub fn parse(name: &str) -> Option<TestState> {
        TestState::ALL.into_iter().find(|s| s.as_str() == name)
    }

    /// Human wording for terminal output.
    pub fn label(self) -> &'static str {
        match self {
            TestState::DiffersMaterial => "differs and material",
            TestState::Differs => "differs",
            TestState::DiffersDependent => "differs? not independent",
            TestState::NoEvidence => "no evidence",
            TestState::TooFewToCompare => "too few values to compare",
            TestState::TooLittleData => "too little data",
        }
    }

    /// Sort rank: differs and material first.
    pub fn rank(self) -> u8 {
        self as u8
    }

    /// Whether the state is a flag (a difference the engineer should act on).
    pub fn is_flag(self) -> bool {
        matches!(self, TestState::DiffersMaterial | TestState::Differs)
    }
}

impl fmt::Display for TestState {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The test that decides a flag.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum LeadingTest {
    /// The classic one-way F test.
    ClassicF,
    /// Welch's ANOVA.
    Welch,
    /// The exact permutation test of constant groups (a coarse gauge).
    ExactPermutation,
    /// Brown and Forsythe's F* test of means.
    FStar,
    /// Welch's statistic with its p-value from the bootstrap-t.
    #[serde(rename = "welch_bootstrap_t")]
    WelchBootstrap,
    /// The F test of the factor with the subgroups as blocks (additive two-way model).
    BlockedF,
}

impl LeadingTest {
    /// Every leading test.
    pub const ALL: [LeadingTest; 6] = [
        LeadingTest::ClassicF,
        LeadingTest::Welch,
        LeadingTest::ExactPermutation,
        LeadingTest::FStar,
        LeadingTest::WelchBootstrap,
        LeadingTest::BlockedF,
    ];

    /// The stable name stored and written in JSON and CSV.
    pub fn as_str(self) -> &'static str {
        match self {
            LeadingTest::ClassicF => "classic_f",
            LeadingTest::Welch => "welch",
            LeadingTest::ExactPermutation => "exact_permutation",
            LeadingTest::FStar => "f_star",
            LeadingTest::WelchBootstrap => "welch_bootstrap_t",
            LeadingTest::BlockedF => "blocked_f",
        }
    }

    /// The test of a stable name, `None` for an unknown one.
    pub fn parse(name: &str) -> Option<LeadingTest> {
        LeadingTest::ALL.into_iter().find(|m| m.as_str() == name)
    }

    /// A short name for a table column.
    pub fn short(self) -> &'static str {
        match self {
            LeadingTest::ClassicF => "F",
            LeadingTest::Welch => "Welch F",
            LeadingTest::ExactPermutation => "exact",
            LeadingTest::FStar => "F*",
            LeadingTest::WelchBootstrap => "Welch boot",
            LeadingTest::BlockedF => "F blocked",
        }
    }

    /// The method's name in words (the report's tables).
    pub fn label(self) -> &'static str {
        match self {
            LeadingTest::ClassicF => "classic F",
            LeadingTest::Welch => "Welch",
            LeadingTest::ExactPermutation => "exact permutation",
            LeadingTest::FStar => "Brown-Forsythe F*",
            LeadingTest::WelchBootstrap => "Welch, bootstrap-t p",
            LeadingTest::BlockedF => "F with subgroups as blocks",
        }
    }
}

impl From<crate::stats::oneway::LeadingMethod> for LeadingTest {
    fn from(m: crate::stats::oneway::LeadingMethod) -> Self {
        use crate::stats::oneway::LeadingMethod as M;
        match m {
            M::ClassicF => LeadingTest::ClassicF,
            M::Welch => LeadingTest::Welch,
            M::ExactPermutation => LeadingTest::ExactPermutation,
            M::FStar => LeadingTest::FStar,
            M::WelchBootstrap => LeadingTest::WelchBootstrap,
        }
    }
}

/// The sampling design a test used (see `analysis::design`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum DesignKind {
    /// Every value counted as independent (no subgroups; the serial-dependence check applies).
    Independent,
    /// The factor is constant within every subgroup: tested on subgroup means.
    Nested,
    /// The factor varies within subgroups: the subgroups are blocks.
    Blocked,
    /// Mixed subgroups: tested on the means of the subgroup x level cells.
    CellMeans,
}

impl DesignKind {
    /// Every design.
    pub const ALL: [DesignKind; 4] = [
        DesignKind::Independent,
        DesignKind::Nested,
        DesignKind::Blocked,
        DesignKind::CellMeans,
    ];

    /// The stable name stored and written in JSON.
    pub fn as_str(self) -> &'static str {
        match self {
            DesignKind::Independent => "independent",
            DesignKind::Nested => "nested",
            DesignKind::Blocked => "blocked",
            DesignKind::CellMeans => "cell_means",
        }
    }

    /// The design of a stable name, `None` for an unknown one.
    pub fn parse(name: &str) -> Option<DesignKind> {
        DesignKind::ALL.into_iter().find(|d| d.as_str() == name)
    }

    /// A short name for a table column.
    pub fn short(self) -> &'static str {
        match self {
            DesignKind::Independent => "values",
            DesignKind::Nested => "nested",
            DesignKind::Blocked => "blocked",
            DesignKind::CellMeans => "cells",
        }
    }
}

/// An interval `{low, high}`.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct Interval {
    /// Lower end.
    pub low: f64,
    /// Upper end.
    pub high: f64,
}

/// An interval whose ends may be unavailable (each `null` then has its reason in JSON).
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct OptInterval {
    /// Lower end.
    pub low: Option<f64>,
    /// Upper end.
    pub high: Option<f64>,
}

/// A test with a statistic and its p-value (the requirement checks).
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct StatP {
    /// The test statistic.
    pub statistic: Option<f64>,
    /// Its p-value.
    pub p: Option<f64>,
}

/// The sampling design of a test and its subgroup counts.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct DesignResult {
    /// The design (`None` for runs stored before designs were recorded).
    pub kind: Option<DesignKind>,
    /// Subgroups in the test's values (`None`: none known).
    pub n_subgroups: Option<u64>,
    /// Variance between subgroups within a level.
    pub var_subgroups: Option<f64>,
    /// Its share of the total variance.
    pub share_subgroups: Option<f64>,
    /// Interval of `var_subgroups` (nested designs: modified large-sample, Graybill and Wang
    /// 1980).
    pub var_subgroups_ci: OptInterval,
}

/// The serial-dependence check of values tested as independent.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct SerialResult {
    /// Pooled lag-1 serial correlation of the residuals within groups, in time order.
    pub r1: Option<f64>,
    /// Its standardized form.
    pub z: Option<f64>,
    /// One-sided p-value.
    pub p: Option<f64>,
}

/// The leading test: which, why, and what it gave.
#[derive(Debug, Clone, PartialEq, Default, Serialize, JsonSchema)]
pub struct LeadingResult {
    /// The test (`None` when none could run).
    pub method: Option<LeadingTest>,
    /// Why it leads (or why the rule declined to judge).
    pub reason: Option<String>,
    /// Its statistic.
    pub statistic: Option<f64>,
    /// Its p-value.
    pub p: Option<f64>,
    /// Whether Kruskal-Wallis is recommended in addition (clearly non-normal small groups).
    pub recommend_kruskal_wallis: Option<bool>,
}

/// The classic ANOVA table.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct AnovaResult {
    /// F statistic.
    pub f: Option<f64>,
    /// Between-group degrees of freedom.
    pub df_between: Option<f64>,
    /// Within-group degrees of freedom.
    pub df_within: Option<f64>,
    /// p-value of F.
    pub p: Option<f64>,
    /// Between-group sum of squares.
    pub ss_between: Option<f64>,
    /// Within-group sum of squares.
    pub ss_within: Option<f64>,
    /// Within-group mean square.
    pub ms_within: Option<f64>,
    /// Share of the total sum of squares between groups.
    pub r_squared: Option<f64>,
    /// Residual (within-group) SD.
    pub resid_sd: Option<f64>,
}

/// Welch's ANOVA.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct WelchResult {
    /// Welch's F.
    pub f: Option<f64>,
    /// Numerator df.
    pub df1: Option<f64>,
    /// Denominator df.
    pub df2: Option<f64>,
    /// p-value.
    pub p: Option<f64>,
}

/// Kruskal-Wallis H with tie correction.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct KruskalResult {
    /// H.
    pub h: Option<f64>,
    /// p-value.
    pub p: Option<f64>,
}

/// Shapiro-Wilk on the residuals.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct ShapiroResult {
    /// W.
    pub w: Option<f64>,
    /// p-value.
    pub p: Option<f64>,
}

/// Effect sizes.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct EffectResult {
    /// eta².
    pub eta_squared: Option<f64>,
    /// omega².
    pub omega_squared: Option<f64>,
}

/// Variance components of the random-effects model.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct ComponentsResult {
    /// Between-group component.
    pub between: Option<f64>,
    /// Within-group (within-subgroup) component.
    pub within: Option<f64>,
    /// The between-group share of the total.
    pub share_between: Option<f64>,
    /// Intraclass correlation.
    pub icc: Option<f64>,
    /// Its confidence interval.
    pub icc_ci: OptInterval,
    /// Interval of `between` (modified large-sample; for a nested design over its levels).
    pub between_ci: OptInterval,
    /// Interval of `within` (chi-square).
    pub within_ci: OptInterval,
}

/// The group that stands out most from the grand mean.
#[derive(Debug, Clone, PartialEq, Default, Serialize, JsonSchema)]
pub struct StandsOut {
    /// Its name.
    pub level: Option<String>,
    /// Its mean minus the grand mean, in units.
    pub diff: Option<f64>,
    /// The same in within-group SDs.
    pub sd_units: Option<f64>,
    /// The same in % of the tolerance width.
    pub pct_tolerance: Option<f64>,
}

/// The smallest difference the test would find.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, JsonSchema)]
pub struct Sensitivity {
    /// The smallest shift of one group detectable with 80 % power, in units.
    pub min_detectable_diff: Option<f64>,
    /// The same in % of the tolerance width.
    pub min_detectable_pct_tolerance: Option<f64>,
}

/// One group of a test, in measurement units; the exact-decimal detail as extra fields.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct GroupResult {
    /// The level's name.
    pub name: String,
    /// Values in the group.
    pub n: u64,
    /// Mean, in units.
    pub mean: f64,
    /// SD (`None` for a group of one value).
    pub sd: Option<f64>,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
    /// Mean minus the grand mean (`None` when the group was left out of the test).
    pub diff_from_grand: Option<f64>,
    /// Exact decimal text of the origin the offsets below are measured from.
    pub origin: String,
    /// Mean minus origin (exact to the last digit).
    pub mean_offset: f64,
    /// Smallest value minus origin.
    pub min_offset: f64,
    /// Largest value minus origin.
    pub max_offset: f64,
}

impl GroupResult {
    /// A group from its offsets and the exact origin they are measured from.
    #[allow(clippy::too_many_arguments)]
    pub fn from_offsets(
        name: String,
        n: u64,
        origin: String,
        mean_offset: f64,
        sd: Option<f64>,
        min_offset: f64,
        max_offset: f64,
        diff_from_grand: Option<f64>,
    ) -> GroupResult {
        let base = crate::stats::decimal::Decimal::parse(&origin).map_or(0.0, |d| d.to_f64());
        GroupResult {
            name,
            n,
            mean: base + mean_offset,
            sd,
            min: base + min_offset,
            max: base + max_offset,
            diff_from_grand,
            origin,
            mean_offset,
            min_offset,
            max_offset,
        }
    }
}

/// One pairwise comparison of a flagged test, `a` minus `b`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct PairResult {
    /// First group's name.
    pub a: String,
    /// Second group's name.
    pub b: String,
    /// Mean of `a` minus mean of `b`, in units.
    pub diff: f64,
    /// Standard error of `diff`.
    pub se: f64,
    /// Studentized range statistic.
    pub statistic: f64,
    /// Degrees of freedom.
    pub df: f64,
    /// p-value adjusted for all pairs of the test.
    pub p_adj: f64,
    /// Simultaneous confidence interval of `diff`.
    pub ci: Interval,
    /// `tukey_kramer`, `games_howell` or `tukey_kramer_adjusted`.
    pub method: String,
}

impl PairResult {
    /// A pair of the statistics core, its groups named from `names` (indexed as the pair's).
    pub fn named(names: &[String], p: &crate::stats::posthoc::Pair) -> PairResult {
        PairResult {
            a: names[p.a].clone(),
            b: names[p.b].clone(),
            diff: p.diff,
            se: p.se,
            statistic: p.statistic,
            df: p.df,
            p_adj: p.p_adj,
            ci: Interval {
                low: p.ci_low,
                high: p.ci_high,
            },
            method: p.method.name().to_string(),
        }
    }
}

/// What one test (one characteristic x one factor in one period) found. `None` = not available;
/// the reason is in `notes` and, in JSON, beside the `null` ([`TestResult::to_json`]).
#[derive(Debug, Clone, PartialEq, Default, Serialize, JsonSchema)]
pub struct TestResult {
    /// Position in the run (the order tests were made in).
    #[serde(skip)]
    pub index: u32,
    /// The characteristic.
    pub characteristic: String,
    /// The grouping factor.
    pub factor: String,
    /// The verdict.
    pub state: TestState,
    /// Flagged now but not in the previous period's latest run.
    pub is_new: bool,
    /// Values in the test.
    pub n_obs: u64,
    /// Groups with values.
    pub n_groups: u64,
    /// Groups large enough to take part.
    pub n_groups_used: u64,
    /// The sampling design.
    pub design: DesignResult,
    /// The serial-dependence check (independent designs).
    pub serial_dependence: SerialResult,
    /// The leading test.
    pub leading: LeadingResult,
    /// Benjamini-Hochberg (or -Yekutieli) q-value of the leading p across the run.
    pub q_value: Option<f64>,
    /// The classic ANOVA table.
    pub anova: AnovaResult,
    /// Welch's ANOVA.
    pub welch: WelchResult,
    /// Kruskal-Wallis.
    pub kruskal_wallis: KruskalResult,
    /// Levene's test (mean-centred).
    pub levene: StatP,
    /// Brown-Forsythe (median-centred Levene).
    pub brown_forsythe: StatP,
    /// Bartlett's test.
    pub bartlett: StatP,
    /// Shapiro-Wilk on the residuals.
    pub shapiro_wilk: ShapiroResult,
    /// Largest / smallest group SD.
    pub sd_ratio: Option<f64>,
    /// Residuals beyond 3 SD.
    pub n_beyond_3sd: Option<u64>,
    /// Effect sizes.
    pub effect: EffectResult,
    /// Variance components.
    pub variance_components: ComponentsResult,
    /// Tolerance width (USL - LSL).
    pub tolerance: Option<f64>,
    /// Largest minus smallest group mean.
    pub spread_of_means: Option<f64>,
    /// The same in % of the tolerance.
    pub spread_pct_tolerance: Option<f64>,
    /// The standing-out group.
    pub stands_out: StandsOut,
    /// The smallest difference the test would find.
    pub sensitivity: Sensitivity,
    /// Notes of the analysis, `; `-separated.
    pub notes: String,
    /// The groups, in level order.
    pub groups: Vec<GroupResult>,
    /// Pairs of a flagged test.
    pub pairs: Vec<PairResult>,
}

impl TestResult {
    /// Whether the test is flagged.
    pub fn is_flag(&self) -> bool {
        self.state.is_flag()
    }

    /// The note the analysis left under `label` (`Welch: ...`), without the label.
    pub fn note(&self, label: &str) -> Option<String> {
        self.notes
            .split("; ")
            .find_map(|n| n.strip_prefix(&format!("{label}: ")).map(str::to_string))
    }

    /// The test as JSON: its `Serialize` form, every `null` with a sibling `<key>_reason`
    /// (docs/json.md): the reason the analysis noted for that statistic when there is one,
    /// "no specification limits" for the tolerance-based fields, and otherwise what the state
    /// says (too little data, declined, no p-value).
    pub fn to_json(&self) -> serde_json::Value {
        let mut v = serde_json::to_value(self).unwrap_or(serde_json::Value::Null);
        self.add_null_reasons(&mut v);
        v
    }

    /// Puts a `<key>_reason` beside every `null` of `v`, a serialized form of this test (or of
    /// a type that flattens it, such as [`CheckedTest`]).
    pub fn add_null_reasons(&self, v: &mut serde_json::Value) {
        let general = match self.state {
            TestState::TooLittleData => format!(
                "too little data: {}",
                if self.notes.is_empty() {
                    "fewer than two groups with values"
                } else {
                    &self.notes
                }
            ),
            TestState::TooFewToCompare => self
                .leading
                .reason
                .clone()
                .unwrap_or_else(|| "too few values per group to compare".into()),
            _ => "not computed for this test (see notes)".into(),
        };
        let no_limits = "no specification limits (LSL and USL) configured for this characteristic";
        let sections = [
            ("anova", "ANOVA"),
            ("effect", "ANOVA"),
            ("welch", "Welch"),
            ("kruskal_wallis", "Kruskal-Wallis"),
            ("levene", "Levene"),
            ("brown_forsythe", "Brown-Forsythe"),
            ("bartlett", "Bartlett"),
            ("shapiro_wilk", "Shapiro-Wilk"),
            ("variance_components", "variance components"),
            ("serial_dependence", "serial dependence"),
            ("sensitivity", "sensitivity"),
        ];
        let independent = self
            .design
            .kind
            .is_none_or(|d| d == DesignKind::Independent);
        let reason_for = |section: &str, key: &str| -> String {
            if key.contains("tolerance") && self.tolerance.is_none() {
                return no_limits.into();
            }
            if let Some((_, label)) = sections.iter().find(|(s, _)| *s == section) {
                if let Some(r) = self.note(label) {
                    return r;
                }
            }
            match (section, key) {
                ("", "q_value") => {
                    "no p-value, so the test is outside the false-discovery family".into()
                }
                ("leading", _) => self.leading.reason.clone().unwrap_or_else(|| general.clone()),
                ("stands_out", "sd_units") => "the within-group SD is unavailable".into(),
                ("design", "kind") => {
                    "stored before designs were recorded (independent values)".into()
                }
                ("design", "low" | "high")
                    if self.design.kind == Some(DesignKind::Blocked) =>
                {
                    "no interval for a blocked design's between-subgroup variance (it is estimated from the blocks' mean square)".into()
                }
                ("design", "low" | "high") if self.design.kind == Some(DesignKind::Nested) => self
                    .note("three-level components")
                    .unwrap_or_else(|| general.clone()),
                ("design", _) if self.design.n_subgroups.is_none() => {
                    "no subgroups: the values were tested as independent".into()
                }
                ("design", _) => "only a nested design has a between-subgroup component".into(),
                ("serial_dependence", _) if !independent => {
                    "checked only when values are tested as independent (this test used its subgroups)"
                        .into()
                }
                ("", "sd_ratio") => self.note("SD ratio").unwrap_or_else(|| general.clone()),
                ("", "lsl" | "usl" | "target") => {
                    "no such limit configured for this characteristic".into()
                }
                ("groups", "sd") => "a group of one value has no SD".into(),
                ("groups", "diff_from_grand") => "the group was left out of the test".into(),
                _ => general.clone(),
            }
        };
        fn walk(
            v: &mut serde_json::Value,
            section: &str,
            reason_for: &dyn Fn(&str, &str) -> String,
        ) {
            match v {
                serde_json::Value::Object(map) => {
                    let nulls: Vec<String> = map
                        .iter()
                        .filter(|(k, v)| v.is_null() && !map.contains_key(&format!("{k}_reason")))
                        .map(|(k, _)| k.clone())
                        .collect();
                    for key in nulls {
                        let reason = reason_for(section, &key);
                        map.insert(format!("{key}_reason"), serde_json::Value::String(reason));
                    }
                    for (key, child) in map.iter_mut() {
                        if child.is_object() || child.is_array() {
                            let next = if section.is_empty() {
                                key.as_str()
                            } else {
                                section
                            };
                            walk(child, next, reason_for);
                        }
                    }
                }
                serde_json::Value::Array(items) => {
                    for item in items {
                        walk(item, section, reason_for);
                    }
                }
                _ => {}
            }
        }
        walk(v, "", &reason_for);
    }
}

/// One test as `check --json` prints it: the result with its characteristic's unit and limits
/// (from the configuration the output was made with).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CheckedTest {
    /// The result.
    #[serde(flatten)]
    pub result: TestResult,
    /// The characteristic's unit (empty when none is configured).
    pub unit: String,
    /// Lower specification limit.
    pub lsl: Option<f64>,
    /// Upper specification limit.
    pub usl: Option<f64>,
    /// Target.
    pub target: Option<f64>,
}

impl CheckedTest {
    /// As JSON, every `null` with its reason.
    pub fn to_json(&self) -> serde_json::Value {
        let mut v = serde_json::to_value(self).unwrap_or(serde_json::Value::Null);
        self.result.add_null_reasons(&mut v);
        v
    }
}

/// The checked period of a `check --json` document.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CheckedPeriod {
    /// `shift`, `day`, `week`, `month` or `range`.
    pub kind: String,
    /// Its label (`2026-11-30`, `2026-W48`, ...).
    pub label: String,
    /// First instant, RFC 3339 with the plant's offset.
    pub start: String,
    /// First instant after it (exclusive), RFC 3339 with the plant's offset.
    pub end: String,
}

/// The stored run of a `check --json` document.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CheckedRun {
    /// Run id.
    pub run_id: i64,
    /// Version within its period.
    pub version: i64,
    /// Hash of the configuration that produced it.
    pub config_hash: String,
    /// samewise version.
    pub tool_version: String,
    /// `bh` or `by`.
    pub fdr_method: String,
    /// The false-discovery level.
    pub fdr_level: f64,
}

/// The document `samewise check --json` prints (docs/json.md; schema in docs/schema/check.json).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CheckDocument {
    /// The plant's name.
    pub plant: String,
    /// The checked period.
    pub period: CheckedPeriod,
    /// Findings made new, changed or still open by this check (`null` for `--stored` and
    /// ranges; see `findings_reason`).
    pub findings: Option<crate::outputs::CheckFindings>,
    /// The stored run.
    pub run: CheckedRun,
    /// Tests in the run.
    pub n_tests: usize,
    /// Flagged tests.
    pub n_flagged: usize,
    /// The tests, flagged first.
    pub tests: Vec<CheckedTest>,
    /// The caution every output carries.
    pub caution: String,
}

/// The full content of a finished run: one result per test, in test order, each with its
/// groups and (flagged tests) pairs.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct RunContent {
    /// One result per test.
    pub tests: Vec<TestResult>,
}

impl RunContent {
    /// Group rows over all tests.
    pub fn n_groups(&self) -> usize {
        self.tests.iter().map(|t| t.groups.len()).sum()
    }

    /// Pairs over all tests.
    pub fn n_pairs(&self) -> usize {
        self.tests.iter().map(|t| t.pairs.len()).sum()
    }

    /// Flagged tests.
    pub fn n_flagged(&self) -> usize {
        self.tests.iter().filter(|t| t.is_flag()).count()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip() {
        for s in TestState::ALL {
            assert_eq!(TestState::parse(s.as_str()), Some(s));
            assert_eq!(
                serde_json::to_value(s).unwrap(),
                serde_json::Value::from(s.as_str())
            );
        }
        for m in LeadingTest::ALL {
            assert_eq!(LeadingTest::parse(m.as_str()), Some(m));
            assert_eq!(
                serde_json::to_value(m).unwrap(),
                serde_json::Value::from(m.as_str())
            );
        }
        for d in DesignKind::ALL {
            assert_eq!(DesignKind::parse(d.as_str()), Some(d));
            assert_eq!(
                serde_json::to_value(d).unwrap(),
                serde_json::Value::from(d.as_str())
            );
        }
        assert_eq!(TestState::parse("flagged"), None);
    }

    #[test]
    fn ranks_follow_strength() {
        let ranks: Vec<u8> = TestState::ALL.iter().map(|s| s.rank()).collect();
        assert_eq!(ranks, [0, 1, 2, 3, 4, 5]);
        assert!(TestState::Differs.is_flag() && TestState::DiffersMaterial.is_flag());
        assert!(!TestState::DiffersDependent.is_flag());
    }

    #[test]
    fn every_null_has_a_reason_also_in_groups() {
        let t = TestResult {
            characteristic: "bore".into(),
            factor: "machine".into(),
            groups: vec![GroupResult::from_offsets(
                "M1".into(),
                1,
                "10.5".into(),
                0.25,
                None,
                0.25,
                0.25,
                None,
            )],
            ..TestResult::default()
        };
        let v = t.to_json();
        fn check(v: &serde_json::Value, path: &str) {
            match v {
                serde_json::Value::Object(map) => {
                    for (k, child) in map {
                        if child.is_null() {
                            assert!(
                                map.get(&format!("{k}_reason"))
                                    .is_some_and(|r| r.is_string()),
                                "{path}.{k} is null without a reason"
                            );
                        }
                        check(child, &format!("{path}.{k}"));
                    }
                }
                serde_json::Value::Array(items) => {
                    items.iter().for_each(|i| check(i, &format!("{path}[]")))
                }
                _ => {}
            }
        }
        check(&v, "");
        assert_eq!(v["groups"][0]["mean"], 10.75);
        assert_eq!(
            v["groups"][0]["sd_reason"],
            "a group of one value has no SD"
        );
        assert_eq!(v["state"], "too_little_data");
    }
}
