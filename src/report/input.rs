//! Plain input structs for every chart and for the monthly report.
//!
//! The report layer never opens the database: the analysis engine fills these structs from the
//! stored runs and hands them over. All values are in the characteristic's own unit *as displayed*
//! (the exact decimal origin already added back to the stored offsets), so a bore of 12.031 mm is
//! `12.031`, not `0.031`. Missing quantities are `None`; the charts then leave them out and say so
//! where it matters (a period with no share estimate is marked on the axis, not drawn as zero).
//!
//! Times are UTC instants (`chrono::DateTime<Utc>`); the charts label them as dates. A period is
//! the half-open interval `[start, end)` that the calendar gives for it.

use chrono::{DateTime, NaiveDate, Utc};

/// The outcome of one check of one characteristic x factor in one period, as the report shows it.
///
/// Order matters: it runs from the strongest flag to the absence of a run, and the month grid,
/// the counts and the legends all use this order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum FlagState {
    /// The groups differ (after the false-discovery control) and the between-group share of
    /// variance reaches the plant's material share.
    DiffersMaterial,
    /// The groups differ (after the false-discovery control), but the difference is below the
    /// material share.
    Differs,
    /// The check ran and found no evidence that the groups differ.
    NoEvidence,
    /// The values were tested as independent, and the difference does not hold once their
    /// serial dependence is allowed for (name the subgroup column): not a flag.
    NotIndependent,
    /// The check could not run properly: too few values or too few groups in the period.
    TooLittleData,
    /// No check was run for this cell (no data, not scheduled, or not yet due).
    NotRun,
}

impl FlagState {
    /// Every state, strongest first.
    pub const ALL: [FlagState; 6] = [
        FlagState::DiffersMaterial,
        FlagState::Differs,
        FlagState::NotIndependent,
        FlagState::NoEvidence,
        FlagState::TooLittleData,
        FlagState::NotRun,
    ];

    /// Words for legends and tables.
    pub fn label(self) -> &'static str {
        match self {
            FlagState::DiffersMaterial => "differs, material",
            FlagState::Differs => "differs",
            FlagState::NoEvidence => "no evidence of a difference",
            FlagState::NotIndependent => "differs? values not independent",
            FlagState::TooLittleData => "too little data",
            FlagState::NotRun => "not run",
        }
    }

    /// A short machine-friendly name (used as a CSS class in the HTML report).
    pub fn key(self) -> &'static str {
        match self {
            FlagState::DiffersMaterial => "differs-material",
            FlagState::Differs => "differs",
            FlagState::NoEvidence => "no-evidence",
            FlagState::NotIndependent => "not-independent",
            FlagState::TooLittleData => "too-little-data",
            FlagState::NotRun => "not-run",
        }
    }

    /// True for the two states that count as a flag.
    pub fn is_flag(self) -> bool {
        matches!(self, FlagState::DiffersMaterial | FlagState::Differs)
    }
}

/// A logged process change (new tool, new supplier lot, maintenance...), drawn as a labelled
/// vertical line at `at`.
#[derive(Debug, Clone, PartialEq)]
pub struct EventMarker {
    /// When the change happened.
    pub at: DateTime<Utc>,
    /// Short label shown beside the line (user text; escaped on output).
    pub label: String,
}

/// Specification limits and target of a characteristic, in its unit. Any may be missing.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Limits {
    /// Lower specification limit.
    pub lsl: Option<f64>,
    /// Upper specification limit.
    pub usl: Option<f64>,
    /// Target (nominal) value.
    pub target: Option<f64>,
}

impl Limits {
    /// `usl - lsl` when both limits exist and are ordered.
    pub fn tolerance(&self) -> Option<f64> {
        match (self.lsl, self.usl) {
            (Some(l), Some(u)) if u > l => Some(u - l),
            _ => None,
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Group trend

/// One group's result in one period: mean and its 95% interval.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupPoint {
    /// The level of the factor (machine "M4", supplier "Acme"...).
    pub level: String,
    /// Number of values in the period.
    pub n: u64,
    /// Group mean.
    pub mean: f64,
    /// Lower end of the 95% interval of the mean (`None` when it cannot be given, e.g. n = 1).
    pub ci_low: Option<f64>,
    /// Upper end of the 95% interval of the mean.
    pub ci_high: Option<f64>,
}

/// One period of a trend chart.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendPeriod {
    /// Period label as the calendar writes it ("2026-11-30", "2026-W48", "2026-11-30/night").
    pub label: String,
    /// Start of the period (inclusive).
    pub start: DateTime<Utc>,
    /// End of the period (exclusive).
    pub end: DateTime<Utc>,
    /// The check's outcome for this period.
    pub state: FlagState,
    /// One entry per group that had data in the period. Groups are matched across periods by
    /// `level`; a group missing from a period simply has no point there.
    pub groups: Vec<GroupPoint>,
}

impl TrendPeriod {
    /// True when the check of this period was flagged (differs, material or not).
    pub fn is_flagged(&self) -> bool {
        self.state.is_flag()
    }
}

/// Input of the group trend chart: one characteristic, one factor, a run of periods.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendInput {
    /// Characteristic name (user text).
    pub characteristic: String,
    /// Unit of the characteristic ("mm", "N", "%").
    pub unit: String,
    /// Factor name ("machine", "supplier").
    pub factor: String,
    /// Specification limits and target.
    pub limits: Limits,
    /// Periods in time order.
    pub periods: Vec<TrendPeriod>,
    /// Logged process changes inside (or near) the range.
    pub events: Vec<EventMarker>,
    /// The group to highlight (a finding's standing-out group): drawn in colour on top, the
    /// others muted in grey without intervals.
    pub highlight: Option<String>,
}

// ---------------------------------------------------------------------------------------------
// Between-group share

/// One period of the between-group share chart.
#[derive(Debug, Clone, PartialEq)]
pub struct SharePeriod {
    /// Period label.
    pub label: String,
    /// Start of the period (inclusive).
    pub start: DateTime<Utc>,
    /// End of the period (exclusive).
    pub end: DateTime<Utc>,
    /// The check's outcome for this period.
    pub state: FlagState,
    /// Between-group share of the total variance (0..=1, variance-components estimate), `None`
    /// when it could not be estimated.
    pub share: Option<f64>,
    /// Lower end of its interval (0..=1).
    pub ci_low: Option<f64>,
    /// Upper end of its interval (0..=1).
    pub ci_high: Option<f64>,
}

/// Input of the between-group share chart.
#[derive(Debug, Clone, PartialEq)]
pub struct ShareInput {
    /// Characteristic name.
    pub characteristic: String,
    /// Factor name.
    pub factor: String,
    /// The plant's material share (0..=1, e.g. 0.10), drawn as a reference line.
    pub material_share: Option<f64>,
    /// Confidence level of the intervals (e.g. 0.95), for the axis title.
    pub confidence: f64,
    /// Periods in time order.
    pub periods: Vec<SharePeriod>,
    /// Logged process changes.
    pub events: Vec<EventMarker>,
}

// ---------------------------------------------------------------------------------------------
// Period detail

/// One group in the period detail chart.
#[derive(Debug, Clone, PartialEq)]
pub struct DetailGroup {
    /// Level name.
    pub level: String,
    /// Every value of the group in the period.
    pub values: Vec<f64>,
    /// Group mean.
    pub mean: f64,
    /// 95% interval of the mean, lower end.
    pub ci_low: Option<f64>,
    /// 95% interval of the mean, upper end.
    pub ci_high: Option<f64>,
}

/// Input of the period detail chart: values per group beside a normal Q-Q plot of residuals.
#[derive(Debug, Clone, PartialEq)]
pub struct DetailInput {
    /// Characteristic name.
    pub characteristic: String,
    /// Unit.
    pub unit: String,
    /// Factor name.
    pub factor: String,
    /// Period label.
    pub period_label: String,
    /// Specification limits and target.
    pub limits: Limits,
    /// Mean over all values of the period.
    pub grand_mean: f64,
    /// The groups, in display order.
    pub groups: Vec<DetailGroup>,
    /// ANOVA residuals (value minus its group mean), in the unit, any order.
    pub residuals: Vec<f64>,
}

// ---------------------------------------------------------------------------------------------
// Month overview grid

/// One row of the month grid: one characteristic x factor.
#[derive(Debug, Clone, PartialEq)]
pub struct GridRow {
    /// Characteristic name.
    pub characteristic: String,
    /// Factor name.
    pub factor: String,
    /// One state per day of [`GridInput::days`], same order and length.
    pub cells: Vec<FlagState>,
}

/// Input of the month overview grid.
#[derive(Debug, Clone, PartialEq)]
pub struct GridInput {
    /// Title line, e.g. "2026-11".
    pub title: String,
    /// The columns: production days in order.
    pub days: Vec<NaiveDate>,
    /// The rows.
    pub rows: Vec<GridRow>,
}

// ---------------------------------------------------------------------------------------------
// Before / after an event

/// One plotted point: a single value or a period mean, at a time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimedValue {
    /// When (for a period mean: the middle of the period).
    pub at: DateTime<Utc>,
    /// The value.
    pub value: f64,
}

/// One group in the before/after chart.
#[derive(Debug, Clone, PartialEq)]
pub struct BeforeAfterGroup {
    /// Level name.
    pub level: String,
    /// Points before and after the event, in any order; the chart splits them at the event.
    pub points: Vec<TimedValue>,
    /// Mean of the group before the event.
    pub mean_before: Option<f64>,
    /// Mean of the group after the event.
    pub mean_after: Option<f64>,
}

/// Input of the before/after chart: one panel per group, shared axes, the event line in each.
#[derive(Debug, Clone, PartialEq)]
pub struct BeforeAfterInput {
    /// Characteristic name.
    pub characteristic: String,
    /// Unit.
    pub unit: String,
    /// Factor name.
    pub factor: String,
    /// What each point is ("value" or "shift mean"), for the axis title.
    pub point_kind: String,
    /// Start of the "before" window.
    pub window_start: DateTime<Utc>,
    /// End of the "after" window.
    pub window_end: DateTime<Utc>,
    /// The change being investigated.
    pub event: EventMarker,
    /// Specification limits and target.
    pub limits: Limits,
    /// The groups, in display order.
    pub groups: Vec<BeforeAfterGroup>,
    /// The plant's time zone: the time axis and the window are labelled in it.
    pub time_zone: chrono_tz::Tz,
}

// ---------------------------------------------------------------------------------------------
// Monthly report

/// Counts of the month's checks by outcome.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct StateCounts {
    /// Checks flagged as differing by a material amount.
    pub differs_material: u64,
    /// Checks flagged as differing, below the material share.
    pub differs: u64,
    /// Checks with no evidence of a difference.
    pub no_evidence: u64,
    /// Checks whose difference rests on values that are not independent.
    pub not_independent: u64,
    /// Checks with too little data.
    pub too_little_data: u64,
    /// Cells with no check run.
    pub not_run: u64,
}

impl StateCounts {
    /// The count for one state.
    pub fn get(&self, state: FlagState) -> u64 {
        match state {
            FlagState::DiffersMaterial => self.differs_material,
            FlagState::Differs => self.differs,
            FlagState::NoEvidence => self.no_evidence,
            FlagState::NotIndependent => self.not_independent,
            FlagState::TooLittleData => self.too_little_data,
            FlagState::NotRun => self.not_run,
        }
    }

    /// Adds one to the count of `state`.
    pub fn add(&mut self, state: FlagState) {
        match state {
            FlagState::DiffersMaterial => self.differs_material += 1,
            FlagState::Differs => self.differs += 1,
            FlagState::NoEvidence => self.no_evidence += 1,
            FlagState::NotIndependent => self.not_independent += 1,
            FlagState::TooLittleData => self.too_little_data += 1,
            FlagState::NotRun => self.not_run += 1,
        }
    }

    /// Checks that ran (every state except "not run").
    pub fn tests_run(&self) -> u64 {
        self.differs_material
            + self.differs
            + self.not_independent
            + self.no_evidence
            + self.too_little_data
    }
}

/// One pairwise comparison row of a flagged item.
#[derive(Debug, Clone, PartialEq)]
pub struct PairRow {
    /// First level.
    pub a: String,
    /// Second level.
    pub b: String,
    /// `mean_a - mean_b` in the unit.
    pub diff: f64,
    /// Simultaneous interval of the difference, lower end.
    pub ci_low: f64,
    /// Simultaneous interval of the difference, upper end.
    pub ci_high: f64,
    /// Adjusted p-value.
    pub p_adj: f64,
    /// Method name ("Tukey-Kramer", "Games-Howell").
    pub method: String,
}

/// One finding of the month, as the report opens with them.
#[derive(Debug, Clone, PartialEq)]
pub struct FindingItem {
    /// Its number (`samewise findings`).
    pub id: i64,
    /// "open" or "closed".
    pub status: String,
    /// Characteristic name.
    pub characteristic: String,
    /// Factor name.
    pub factor: String,
    /// The standing-out group.
    pub level: String,
    /// Unit of the characteristic.
    pub unit: String,
    /// Since when, and the onset with its interval and method (one sentence, plant time).
    pub since: String,
    /// The effect now and at its peak (one sentence).
    pub effect: String,
    /// Size against the tolerance for ranking (|% of tolerance| of the effect now), if known.
    pub size_pct: Option<f64>,
    /// The nearest logged change in scope (one sentence), if any.
    pub event: Option<String>,
    /// The engineer's notes (one sentence each, dated).
    pub notes: Vec<String>,
    /// The month's trend with the group highlighted.
    pub trend: TrendInput,
    /// The pairs of the last flagged period of the month whose interval excludes zero.
    pub pairs: Vec<PairRow>,
    /// Pairs of that period whose interval includes zero (counted, not listed).
    pub pairs_not_shown: usize,
    /// The period the pairs come from.
    pub pairs_period: String,
}

/// One flagged check of the month.
#[derive(Debug, Clone, PartialEq)]
pub struct FlaggedItem {
    /// Characteristic name.
    pub characteristic: String,
    /// Factor name.
    pub factor: String,
    /// Unit of the characteristic.
    pub unit: String,
    /// Period label of the check.
    pub period_label: String,
    /// Outcome (one of the two flag states).
    pub state: FlagState,
    /// The test that led (e.g. "Welch", "classic F").
    pub test: String,
    /// p-value of the leading test.
    pub p_value: f64,
    /// q-value after the false-discovery control.
    pub q_value: f64,
    /// Between-group share of variance (0..=1), when estimated.
    pub share_between: Option<f64>,
    /// The group that stands out most (largest distance from the grand mean).
    pub standing_out: String,
    /// Its distance from the grand mean, in the unit (signed).
    pub diff_units: f64,
    /// The same distance in % of the tolerance (usl - lsl), when both limits exist.
    pub diff_pct_tolerance: Option<f64>,
    /// Pairwise comparisons.
    pub pairs: Vec<PairRow>,
}

/// A note from the requirement checks (normality, equal spread, outliers, balance).
#[derive(Debug, Clone, PartialEq)]
pub struct RequirementNote {
    /// Characteristic name.
    pub characteristic: String,
    /// Factor name.
    pub factor: String,
    /// Period label.
    pub period_label: String,
    /// The note itself, for example "spread differs between groups (Brown-Forsythe p = 0.003);
    /// Welch used".
    pub note: String,
}

/// How complete the month's data was.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Coverage {
    /// Measurement rows stored for the month.
    pub rows_stored: u64,
    /// Rows rejected at import for the month.
    pub rows_rejected: u64,
    /// Production days of the month with no data at all.
    pub days_without_data: Vec<NaiveDate>,
    /// Per characteristic: (name, rows stored). Optional detail.
    pub rows_by_characteristic: Vec<(String, u64)>,
}

/// One method used, with its published reference.
#[derive(Debug, Clone, PartialEq)]
pub struct MethodNote {
    /// Method name ("Welch's test").
    pub name: String,
    /// What it is used for here.
    pub used_for: String,
    /// Published reference.
    pub reference: String,
}

/// Charts of one characteristic x factor in the report.
#[derive(Debug, Clone, PartialEq)]
pub struct FactorCharts {
    /// The group trend over the month.
    pub trend: TrendInput,
    /// The between-group share over the month.
    pub share: ShareInput,
}

/// Everything about one characteristic in the report.
#[derive(Debug, Clone, PartialEq)]
pub struct CharacteristicSection {
    /// Characteristic name.
    pub characteristic: String,
    /// Unit.
    pub unit: String,
    /// Specification limits and target.
    pub limits: Limits,
    /// One entry per factor checked.
    pub factors: Vec<FactorCharts>,
}

/// Everything the monthly review report needs. Build it in the engine, render it with
/// [`crate::report::render_month_report`].
#[derive(Debug, Clone, PartialEq)]
pub struct MonthReport {
    /// Plant name (user text).
    pub plant: String,
    /// Month label, e.g. "2026-11".
    pub month: String,
    /// When the report was made, as text (the caller formats it; the report never reads a clock).
    pub generated: String,
    /// Counts by outcome over every check of the month.
    pub counts: StateCounts,
    /// What is new compared with the previous month (one sentence each).
    pub new_this_month: Vec<String>,
    /// The month's findings, largest against the tolerance first.
    pub findings: Vec<FindingItem>,
    /// The flagged checks.
    pub flagged: Vec<FlaggedItem>,
    /// The month overview grid.
    pub grid: Option<GridInput>,
    /// Per characteristic, the trend and share charts.
    pub characteristics: Vec<CharacteristicSection>,
    /// Investigations of process changes to show (before/after charts).
    pub investigations: Vec<BeforeAfterInput>,
    /// Notes from the requirement checks.
    pub requirement_notes: Vec<RequirementNote>,
    /// Data coverage.
    pub coverage: Coverage,
    /// Methods used, with references. [`crate::report::standard_methods`] gives the usual list.
    pub methods: Vec<MethodNote>,
}
