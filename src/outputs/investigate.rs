//! The document `samewise investigate --json` prints: before vs after a change
//! ([`BeforeAfterDocument`]) or the change-point scan ([`ScanDocument`]), built from the
//! results of `analysis::investigate`.

use chrono_tz::Tz;
use schemars::JsonSchema;
use serde::Serialize;

use super::{plant_time_ms, reason_if_none, split, FTest, StatTest};
use crate::analysis::investigate::{Comparison, GroupChange, GroupScan};
use crate::results::Interval;
use crate::stats::twoway::{Table, TermRow, TwoWay};
use crate::stats::variance_components::VarianceComponents;

/// An instant as RFC 3339 with the plant's offset (the raw ms when outside chrono's range).
fn instant(ms: i64, tz: Tz) -> String {
    plant_time_ms(ms, tz).unwrap_or_else(|| crate::analysis::investigate::format_ms(ms))
}

/// `before_after` or `scan`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum InvestigateMode {
    /// Before vs after a change time.
    BeforeAfter,
    /// A change-point scan per group.
    Scan,
}

/// The window of values read (end exclusive).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Window {
    /// First instant.
    pub start: String,
    /// First instant after it.
    pub end: String,
    /// `start` in ms since the epoch.
    pub start_ms: i64,
    /// `end` in ms since the epoch.
    pub end_ms: i64,
}

/// The logged event the change time came from.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct EventRef {
    /// Event id.
    pub id: i64,
    /// What changed.
    pub note: String,
}

/// What an investigation is about: the part both modes share.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct InvestigateHead {
    /// The characteristic.
    pub characteristic: String,
    /// Its unit.
    pub unit: String,
    /// The grouping factor.
    pub factor: String,
    /// The window of values read.
    pub window: Window,
    /// The logged event named with `--event`.
    pub event: Option<EventRef>,
    /// Why `event` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub event_reason: Option<String>,
    /// What one value of the comparison is (`values (no subgroups stored)` or subgroup means).
    pub units: String,
    /// Times in the plant's zone.
    #[serde(skip)]
    pub tz: Option<Tz>,
    /// The value the offsets are measured from.
    #[serde(skip)]
    pub origin: f64,
}

impl InvestigateHead {
    /// The head of an investigation.
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        characteristic: String,
        unit: String,
        factor: String,
        window_ms: (i64, i64),
        event: Option<(i64, String)>,
        units: Option<String>,
        origin: f64,
        tz: Tz,
    ) -> InvestigateHead {
        let event = event.map(|(id, note)| EventRef { id, note });
        InvestigateHead {
            characteristic,
            unit,
            factor,
            window: Window {
                start: instant(window_ms.0, tz),
                end: instant(window_ms.1, tz),
                start_ms: window_ms.0,
                end_ms: window_ms.1,
            },
            event_reason: reason_if_none(
                &event,
                "no event named: the change time was given with --at, or this is a scan",
            ),
            event,
            units: units.unwrap_or_else(|| "values (no subgroups stored)".into()),
            tz: Some(tz),
            origin,
        }
    }

    fn time(&self, ms: i64) -> String {
        instant(ms, self.tz.unwrap_or(chrono_tz::UTC))
    }
}

/// The change time.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ChangeAt {
    /// Values at or after it count as after.
    pub at: String,
    /// `at` in ms since the epoch.
    pub at_ms: i64,
}

/// Welch's two-sample t of the mean shift (after - before).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct MeanShiftOut {
    /// After - before, in units.
    pub shift: f64,
    /// Its standard error.
    pub se: f64,
    /// Welch-Satterthwaite degrees of freedom.
    pub df: f64,
    /// t statistic.
    pub t: f64,
    /// Two-sided p-value.
    pub p: f64,
    /// Confidence interval of `shift`.
    pub ci: Interval,
    /// Its confidence level.
    pub confidence: f64,
    /// `Welch two-sample t`.
    pub method: String,
    /// p adjusted across the compared groups.
    pub p_adjusted: Option<f64>,
    /// Why `p_adjusted` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub p_adjusted_reason: Option<String>,
    /// How `p_adjusted` was adjusted.
    pub p_adjusted_method: Option<String>,
    /// Why `p_adjusted_method` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub p_adjusted_method_reason: Option<String>,
    /// The shift in within-group SDs.
    pub shift_sd: Option<f64>,
    /// Why `shift_sd` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub shift_sd_reason: Option<String>,
    /// The shift in % of the tolerance (or of the distance from the target to a single limit).
    pub shift_pct_tolerance: Option<f64>,
    /// Why `shift_pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub shift_pct_tolerance_reason: Option<String>,
}

/// The ratio of the SDs, after / before.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct SdRatioOut {
    /// SD after / SD before.
    pub ratio: f64,
    /// Its interval from the F distribution.
    pub ci: Interval,
    /// The variance ratio.
    pub f: f64,
    /// n_after - 1.
    pub df1: f64,
    /// n_before - 1.
    pub df2: f64,
    /// Two-sided p of the F test.
    pub p: f64,
    /// Confidence level of `ci`.
    pub confidence: f64,
    /// How the interval was made.
    pub method: String,
}

/// One level (or all levels pooled) before and after the change.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct GroupChangeOut {
    /// The level (`all` for the pooled line).
    pub name: String,
    /// Values before.
    pub n_before: u64,
    /// Values after.
    pub n_after: u64,
    /// Mean before, in units.
    pub mean_before: f64,
    /// Mean after, in units.
    pub mean_after: f64,
    /// SD before.
    pub sd_before: Option<f64>,
    /// Why `sd_before` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_before_reason: Option<String>,
    /// SD after.
    pub sd_after: Option<f64>,
    /// Why `sd_after` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_after_reason: Option<String>,
    /// The mean shift.
    pub mean_shift: Option<MeanShiftOut>,
    /// Why `mean_shift` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean_shift_reason: Option<String>,
    /// The SD ratio.
    pub sd_ratio: Option<SdRatioOut>,
    /// Why `sd_ratio` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_ratio_reason: Option<String>,
    /// Brown-Forsythe test of equal spread before and after.
    pub brown_forsythe: Option<StatTest>,
    /// Why `brown_forsythe` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub brown_forsythe_reason: Option<String>,
}

impl GroupChangeOut {
    fn new(g: &GroupChange, origin: f64) -> GroupChangeOut {
        let one_value = "fewer than two values on this side";
        let sd_before = g.before.sd();
        let sd_after = g.after.sd();
        let (mean_shift, mean_shift_reason) = split(&g.mean_shift, |s| MeanShiftOut {
            shift: s.shift,
            se: s.se,
            df: s.df,
            t: s.t,
            p: s.p,
            ci: Interval {
                low: s.ci_low,
                high: s.ci_high,
            },
            confidence: s.confidence,
            method: "Welch two-sample t".into(),
            p_adjusted: g.p_adjusted,
            p_adjusted_reason: reason_if_none(
                &g.p_adjusted,
                "the pooled line is one question of its own (no adjustment across groups)",
            ),
            p_adjusted_method: g
                .p_adjusted
                .map(|_| "Benjamini-Hochberg across the compared groups".into()),
            p_adjusted_method_reason: reason_if_none(
                &g.p_adjusted,
                "the pooled line is one question of its own (no adjustment across groups)",
            ),
            shift_sd: g.shift_sd,
            shift_sd_reason: reason_if_none(
                &g.shift_sd,
                "the group's values do not vary (no within-group SD)",
            ),
            shift_pct_tolerance: g.shift_pct_tolerance,
            shift_pct_tolerance_reason: reason_if_none(
                &g.shift_pct_tolerance,
                "no tolerance: configure both limits, or a target and a single limit",
            ),
        });
        let (sd_ratio, sd_ratio_reason) = split(&g.sd_ratio, |r| SdRatioOut {
            ratio: r.ratio,
            ci: Interval {
                low: r.ci_low,
                high: r.ci_high,
            },
            f: r.f,
            df1: r.df1,
            df2: r.df2,
            p: r.p,
            confidence: r.confidence,
            method: "F interval for the variance ratio (after / before)".into(),
        });
        let (brown_forsythe, brown_forsythe_reason) = split(&g.brown_forsythe, StatTest::from);
        GroupChangeOut {
            name: g.group.clone(),
            n_before: g.before.n,
            n_after: g.after.n,
            mean_before: origin + g.before.mean,
            mean_after: origin + g.after.mean,
            sd_before_reason: reason_if_none(&sd_before, one_value),
            sd_before,
            sd_after_reason: reason_if_none(&sd_after, one_value),
            sd_after,
            mean_shift,
            mean_shift_reason,
            sd_ratio,
            sd_ratio_reason,
            brown_forsythe,
            brown_forsythe_reason,
        }
    }
}

/// A level left out of the comparison (too few values on a side).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct LeftOutLevel {
    /// The level.
    pub name: String,
    /// Values before.
    pub n_before: u64,
    /// Values after.
    pub n_after: u64,
}

/// Between-group variance components of the compared levels on one side of the change.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ShareOut {
    /// Between-group share of the total (0-1).
    pub share_between: f64,
    /// Between-group component.
    pub between: f64,
    /// Within-group component.
    pub within: f64,
    /// Whether `between` was truncated at zero.
    pub is_truncated: bool,
    /// Interval of the intraclass correlation.
    pub icc_ci: Option<Interval>,
    /// Why `icc_ci` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub icc_ci_reason: Option<String>,
    /// How the components and interval were made.
    pub method: String,
}

impl From<&VarianceComponents> for ShareOut {
    fn from(v: &VarianceComponents) -> Self {
        let (icc_ci, icc_ci_reason) = split(&v.icc_ci, |i| Interval {
            low: i.low,
            high: i.high,
        });
        ShareOut {
            share_between: v.share_between,
            between: v.between,
            within: v.within,
            is_truncated: v.is_truncated,
            icc_ci,
            icc_ci_reason,
            method: v.method.to_string(),
        }
    }
}

/// One term of a two-way table.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct TermOut {
    /// Sum of squares.
    pub ss: f64,
    /// Degrees of freedom.
    pub df: u64,
    /// Mean square.
    pub ms: f64,
    /// Its F test.
    pub test: Option<FTest>,
    /// Why `test` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub test_reason: Option<String>,
}

impl From<&TermRow> for TermOut {
    fn from(r: &TermRow) -> Self {
        let (test, test_reason) = split(&r.test, FTest::from);
        TermOut {
            ss: r.ss,
            df: r.df,
            ms: r.ms,
            test,
            test_reason,
        }
    }
}

/// A two-way table of one type of sums of squares.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct TableOut {
    /// `type II` or `type III`.
    pub ss_type: String,
    /// The grouping factor.
    pub group: Option<TermOut>,
    /// Why `group` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub group_reason: Option<String>,
    /// Before vs after.
    pub before_after: Option<TermOut>,
    /// Why `before_after` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub before_after_reason: Option<String>,
    /// Group x before/after.
    pub interaction: Option<TermOut>,
    /// Why `interaction` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interaction_reason: Option<String>,
}

impl From<&Table> for TableOut {
    fn from(t: &Table) -> Self {
        let (group, group_reason) = split(&t.a, TermOut::from);
        let (before_after, before_after_reason) = split(&t.b, TermOut::from);
        let (interaction, interaction_reason) = split(&t.interaction, TermOut::from);
        TableOut {
            ss_type: t.ss_type.label().to_string(),
            group,
            group_reason,
            before_after,
            before_after_reason,
            interaction,
            interaction_reason,
        }
    }
}

/// The residual line of the two-way table.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ResidualOut {
    /// Sum of squares.
    pub ss: f64,
    /// Degrees of freedom.
    pub df: u64,
    /// Mean square.
    pub ms: Option<f64>,
    /// Why `ms` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub ms_reason: Option<String>,
}

/// The two-way ANOVA group x before/after.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct TwoWayOut {
    /// The table the report leads with (`type II` or `type III`).
    pub leading: String,
    /// Why it leads.
    pub leading_reason: String,
    /// Whether every cell has the same number of values.
    pub is_balanced: bool,
    /// Values in the table.
    pub n_obs: u64,
    /// Type II sums of squares.
    pub type2: TableOut,
    /// Type III sums of squares.
    pub type3: Option<TableOut>,
    /// Why `type3` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub type3_reason: Option<String>,
    /// The residual line.
    pub residual: ResidualOut,
    /// Notes.
    pub notes: Vec<String>,
}

impl From<&TwoWay> for TwoWayOut {
    fn from(t: &TwoWay) -> Self {
        let (type3, type3_reason) = split(&t.type3, TableOut::from);
        TwoWayOut {
            leading: t.leading.label().to_string(),
            leading_reason: t.leading_reason.clone(),
            is_balanced: t.is_balanced,
            n_obs: t.n_obs,
            type2: TableOut::from(&t.type2),
            type3,
            type3_reason,
            residual: ResidualOut {
                ss: t.residual.ss,
                df: t.residual.df,
                ms: t.residual.ms,
                ms_reason: reason_if_none(
                    &t.residual.ms,
                    "no residual degrees of freedom (every cell holds one value)",
                ),
            },
            notes: t.notes.clone(),
        }
    }
}

/// `investigate --json` with a change time.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct BeforeAfterDocument {
    /// `before_after`.
    pub mode: InvestigateMode,
    /// What the investigation is about.
    #[serde(flatten)]
    pub head: InvestigateHead,
    /// The change time.
    pub change: ChangeAt,
    /// Levels with at least 2 values on each side.
    pub groups: Vec<GroupChangeOut>,
    /// All values of all levels.
    pub pooled: GroupChangeOut,
    /// Levels with too few values on a side.
    pub left_out: Vec<LeftOutLevel>,
    /// Between-group components before the change.
    pub share_before: Option<ShareOut>,
    /// Why `share_before` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub share_before_reason: Option<String>,
    /// The same after.
    pub share_after: Option<ShareOut>,
    /// Why `share_after` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub share_after_reason: Option<String>,
    /// The two-way ANOVA.
    pub two_way: Option<TwoWayOut>,
    /// Why `two_way` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub two_way_reason: Option<String>,
    /// Plain-language notes.
    pub notes: Vec<String>,
    /// The caution every output carries.
    pub caution: String,
}

impl BeforeAfterDocument {
    /// The document of a comparison.
    pub fn new(head: InvestigateHead, c: &Comparison) -> BeforeAfterDocument {
        let origin = head.origin;
        let (share_before, share_before_reason) = split(&c.share_before, ShareOut::from);
        let (share_after, share_after_reason) = split(&c.share_after, ShareOut::from);
        let (two_way, two_way_reason) = split(&c.two_way, TwoWayOut::from);
        BeforeAfterDocument {
            mode: InvestigateMode::BeforeAfter,
            change: ChangeAt {
                at: head.time(c.change_ms),
                at_ms: c.change_ms,
            },
            head,
            groups: c
                .groups
                .iter()
                .map(|g| GroupChangeOut::new(g, origin))
                .collect(),
            pooled: GroupChangeOut::new(&c.pooled, origin),
            left_out: c
                .left_out
                .iter()
                .map(|l| LeftOutLevel {
                    name: l.group.clone(),
                    n_before: l.n_before,
                    n_after: l.n_after,
                })
                .collect(),
            share_before,
            share_before_reason,
            share_after,
            share_after_reason,
            two_way,
            two_way_reason,
            notes: c.notes.clone(),
            caution: crate::CAUTION.to_string(),
        }
    }
}

/// A logged event near a change point.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct NearEventOut {
    /// Event id.
    pub id: i64,
    /// When it happened.
    pub at: String,
    /// What changed.
    pub note: String,
}

/// A range of instants `{low, high}`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct TimeInterval {
    /// Earliest.
    pub low: String,
    /// Latest.
    pub high: String,
}

/// One change point of a group.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ChangePointOut {
    /// Time of the first value after the change.
    pub at: String,
    /// `at` in ms since the epoch.
    pub at_ms: i64,
    /// Bootstrap percentile range of that time.
    pub at_range: TimeInterval,
    /// Position in the group's time-ordered values.
    pub index: usize,
    /// After - before mean between neighbouring segments, in units.
    pub shift: f64,
    /// Welch standard error of the shift, given the time.
    pub se: f64,
    /// Bootstrap percentile interval of the shift (including the choice of the time).
    pub shift_ci: Interval,
    /// Mean before, in units.
    pub mean_before: f64,
    /// Mean after, in units.
    pub mean_after: f64,
    /// Values before.
    pub n_before: u64,
    /// Values after.
    pub n_after: u64,
    /// Permutation p of the test that accepted it.
    pub p: f64,
    /// Share of the variance the split explains.
    pub share_explained: f64,
    /// Up to 3 logged events in the window that concern this characteristic and level,
    /// closest first.
    pub nearest_events: Vec<NearEventOut>,
}

/// One group of the scan.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ScanGroupOut {
    /// The level.
    pub name: String,
    /// Values scanned.
    pub n: usize,
    /// Change points, in time order.
    pub change_points: Option<Vec<ChangePointOut>>,
    /// Why `change_points` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub change_points_reason: Option<String>,
    /// Notes of the scan.
    pub notes: Vec<String>,
}

/// `investigate --json` without a change time: the change-point scan.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ScanDocument {
    /// `scan`.
    pub mode: InvestigateMode,
    /// What the investigation is about.
    #[serde(flatten)]
    pub head: InvestigateHead,
    /// The scan's method.
    pub method: String,
    /// Per level.
    pub groups: Vec<ScanGroupOut>,
    /// The caution every output carries.
    pub caution: String,
}

/// An event near a change point: id, ms since the epoch, note.
pub type Near = (i64, i64, String);

impl ScanDocument {
    /// The document of a scan; `nearest[g][c]` are the events near change point `c` of group
    /// `g`.
    pub fn new(head: InvestigateHead, scans: &[GroupScan], nearest: &[Vec<Vec<Near>>]) -> Self {
        let origin = head.origin;
        let groups = scans
            .iter()
            .enumerate()
            .map(|(gi, g)| {
                let (change_points, change_points_reason) = split(&g.scan, |s| {
                    s.change_points
                        .iter()
                        .enumerate()
                        .map(|(ci, c)| ChangePointOut {
                            at: head.time(g.change_ms[ci]),
                            at_ms: g.change_ms[ci],
                            at_range: TimeInterval {
                                low: head.time(g.change_range_ms[ci].0),
                                high: head.time(g.change_range_ms[ci].1),
                            },
                            index: c.index,
                            shift: c.shift,
                            se: c.se,
                            shift_ci: Interval {
                                low: c.shift_low,
                                high: c.shift_high,
                            },
                            mean_before: origin + c.before.mean,
                            mean_after: origin + c.after.mean,
                            n_before: c.before.n,
                            n_after: c.after.n,
                            p: c.p,
                            share_explained: c.share_explained,
                            nearest_events: nearest
                                .get(gi)
                                .and_then(|v| v.get(ci))
                                .map(|v| {
                                    v.iter()
                                        .map(|(id, at_ms, note)| NearEventOut {
                                            id: *id,
                                            at: head.time(*at_ms),
                                            note: note.clone(),
                                        })
                                        .collect()
                                })
                                .unwrap_or_default(),
                        })
                        .collect()
                });
                ScanGroupOut {
                    name: g.group.clone(),
                    n: g.n,
                    change_points,
                    change_points_reason,
                    notes: g.scan.as_ref().map(|s| s.notes.clone()).unwrap_or_default(),
                }
            })
            .collect();
        ScanDocument {
            mode: InvestigateMode::Scan,
            head,
            method: crate::stats::changepoint::METHOD.to_string(),
            groups,
            caution: crate::CAUTION.to_string(),
        }
    }
}

/// Either document of `investigate --json` (its schema: docs/schema/investigate.json).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum InvestigateDocument {
    /// Before vs after a change.
    BeforeAfter(Box<BeforeAfterDocument>),
    /// The change-point scan.
    Scan(Box<ScanDocument>),
}
