//! Builds the report layer's plain inputs (src/report/input.rs) from the stored run history and
//! the store: trend, share, month grid, period detail, before/after an event, and the whole
//! monthly review report.
//!
//! Reads only: every figure drawn comes from the latest complete run of its period (the run
//! history is the record of what was checked) or, for the value-level charts (detail,
//! before/after), from the stored measurements. Nothing here recomputes a check. Stored means are
//! offsets from the characteristic's exact origin; they are shifted back to the characteristic's
//! own unit here, so the charts show 12.031 mm, not 0.031.
//!
//! Start reading at [`month_report`]. Time is an argument; nothing here reads the clock.

use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::path::{Path, PathBuf};

use chrono::{DateTime, Duration, NaiveDate, Utc};
use statrs::distribution::{ContinuousCDF, StudentsT};

use crate::calendar::PlantCalendar;
use crate::config::{CharacteristicConfig, Config};
use crate::model::{Period, PeriodKind};
use crate::report::{
    self, BeforeAfterGroup, BeforeAfterInput, CharacteristicSection, Coverage, DetailGroup,
    DetailInput, EventMarker, FactorCharts, FlagState, FlaggedItem, Format, GridInput, GridRow,
    GroupPoint, Limits, MonthReport, RequirementNote, ShareInput, SharePeriod, Size, StateCounts,
    TimedValue, TrendInput, TrendPeriod,
};
use crate::results::TestState;
use crate::results::{PairResult, TestResult};
use crate::storage::runs::{RunContent, StoredRun};
use crate::storage::PlantStore;
use crate::{Error, Result};

/// Confidence of the intervals of group means drawn in the charts.
pub const CONFIDENCE: f64 = 0.95;

/// One stored run with its content.
#[derive(Debug, Clone)]
pub struct LoadedRun {
    /// The run.
    pub run: StoredRun,
    /// Its tests, groups and pairs.
    pub content: RunContent,
    /// The period was checked more than once to the end (late or undone data): this is its
    /// newest check.
    pub revised: bool,
}

impl LoadedRun {
    fn test(&self, characteristic: &str, factor: &str) -> Option<&TestResult> {
        self.content
            .tests
            .iter()
            .find(|t| t.characteristic == characteristic && t.factor == factor)
    }

    fn start(&self) -> DateTime<Utc> {
        ms(self.run.header.period_start_ms)
    }

    fn end(&self) -> DateTime<Utc> {
        ms(self.run.header.period_end_ms)
    }
}

fn ms(v: i64) -> DateTime<Utc> {
    DateTime::<Utc>::from_timestamp_millis(v).unwrap_or_default()
}

/// The latest complete run (with content) of every `kind` period starting in `[from, to)`.
pub fn load_runs(
    store: &dyn PlantStore,
    kind: PeriodKind,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Result<Vec<LoadedRun>> {
    store
        .latest_complete_runs_between(
            kind.as_str(),
            from.timestamp_millis(),
            to.timestamp_millis(),
        )?
        .into_iter()
        .map(|run| {
            let content = store.run_content(run.run_id)?;
            let revised = store
                .complete_versions(run.header.period_kind.as_str(), &run.header.period_label)?
                > 1;
            Ok(LoadedRun {
                run,
                content,
                revised,
            })
        })
        .collect()
}

/// A test's state as the report's [`FlagState`].
pub fn flag_state(state: TestState) -> FlagState {
    match state {
        TestState::DiffersMaterial => FlagState::DiffersMaterial,
        TestState::Differs => FlagState::Differs,
        TestState::NoEvidence => FlagState::NoEvidence,
        TestState::DiffersDependent => FlagState::NotIndependent,
        _ => FlagState::TooLittleData,
    }
}

fn limits(c: &CharacteristicConfig) -> Limits {
    Limits {
        lsl: c.lsl,
        usl: c.usl,
        target: c.target,
    }
}

/// Half-width factor of the two-sided interval of a mean: t(1 - (1 - confidence)/2, n - 1).
fn t_factor(n: u64) -> Option<f64> {
    if n < 2 {
        return None;
    }
    let t = StudentsT::new(0.0, 1.0, (n - 1) as f64).ok()?;
    Some(t.inverse_cdf(1.0 - (1.0 - CONFIDENCE) / 2.0))
}

/// Mean and its interval, from the values' count, mean and standard deviation.
fn interval(n: u64, mean: f64, sd: Option<f64>) -> (Option<f64>, Option<f64>) {
    match (t_factor(n), sd) {
        (Some(t), Some(sd)) if sd.is_finite() => {
            let h = t * sd / (n as f64).sqrt();
            (Some(mean - h), Some(mean + h))
        }
        _ => (None, None),
    }
}

fn group_points(t: &TestResult) -> Vec<GroupPoint> {
    t.groups
        .iter()
        .map(|g| {
            let (ci_low, ci_high) = interval(g.n, g.mean, g.sd);
            GroupPoint {
                level: g.name.clone(),
                n: g.n,
                mean: g.mean,
                ci_low,
                ci_high,
            }
        })
        .collect()
}

/// Events in `[from, to)` that concern `characteristic` (or no characteristic in particular).
pub fn event_markers(
    store: &dyn PlantStore,
    characteristic: Option<&str>,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Result<Vec<EventMarker>> {
    Ok(store
        .events(Some(from), Some(to))?
        .into_iter()
        .filter(|e| match (characteristic, &e.characteristic) {
            (Some(c), Some(ec)) => c == ec,
            _ => true,
        })
        .map(|e| EventMarker {
            at: e.at,
            label: format!("#{} {}", e.id, e.note),
        })
        .collect())
}

/// The daily findings active in `month` (flagged in it), open ones first, each kind largest
/// against the tolerance first, each with its month trend (the group highlighted) and the pairs
/// of its last flagged day in the month whose interval excludes 0.
fn finding_items(
    store: &dyn PlantStore,
    config: &Config,
    month: &Period,
    loaded: &[LoadedRun],
) -> Result<Vec<crate::report::FindingItem>> {
    let tz = config.plant.time_zone;
    let day = |t: DateTime<Utc>| t.with_timezone(&tz).format("%Y-%m-%d").to_string();
    let signed = |x: f64, digits: usize| {
        let s = crate::report::format_sig(x, digits);
        if x > 0.0 {
            format!("+{s}")
        } else {
            s
        }
    };
    let mut items = Vec::new();
    for f in store.findings(Some(PeriodKind::Day))? {
        // Flagged inside the month: its episode overlaps the month.
        if f.last_end <= month.start || f.episode_start >= month.end {
            continue;
        }
        let Some(c) = config.characteristic(&f.characteristic) else {
            continue;
        };
        let events = event_markers(store, Some(&c.name), month.start, month.end)?;
        let mut trend = trend_from_runs(c, &f.factor, loaded, events);
        trend.highlight = Some(f.level.clone());
        let onset = match (f.onset, f.onset_low, f.onset_high) {
            (Some(o), Some(lo), Some(hi)) => format!(
                "onset about {} (between {} and {}; {})",
                day(o),
                day(lo),
                day(hi),
                f.onset_method
            ),
            (Some(o), _, _) => format!("onset {} ({})", day(o), f.onset_method),
            _ => "onset not computed".to_string(),
        };
        let since = format!(
            "Flagged since {} ({} days flagged, the last {}){}; {onset}.",
            f.episode_label,
            f.n_flagged,
            f.last_label,
            if f.times_reopened > 0 {
                format!(
                    ", reopened {} time(s) after closing, first flagged {}",
                    f.times_reopened, f.first_label
                )
            } else {
                String::new()
            }
        );
        let effect = match f.effect_now {
            Some(e) => format!(
                "Effect now {} {} from the grand mean{}{}; peak {}.",
                signed(e, 3),
                c.unit,
                f.effect_now_sd.map_or(String::new(), |s| format!(
                    ", {} within-group SD",
                    signed(s, 3)
                )),
                f.effect_now_pct.map_or(String::new(), |p| format!(
                    ", {}% of the tolerance",
                    signed(p, 3)
                )),
                match (f.peak_effect, &f.peak_label) {
                    (Some(p), Some(l)) => format!("{} {} on {l}", signed(p, 3), c.unit),
                    _ => "not stored".to_string(),
                }
            ),
            None => "The effect was not stored.".to_string(),
        };
        let event = match (f.event_id, f.event_at, &f.event_note) {
            (Some(id), Some(at), Some(note)) => Some(format!(
                "Nearest logged change in scope: event #{id}, {} \"{note}\".",
                at.with_timezone(&tz).format("%Y-%m-%d %H:%M")
            )),
            _ => None,
        };
        let notes = store
            .finding_notes(f.id)?
            .into_iter()
            .map(|(at, text)| format!("{}: {text}", day(at)))
            .collect();
        // The pairs of the last day of the month that flagged it with this group standing out.
        let last_flag = loaded.iter().rev().find_map(|r| {
            r.test(&f.characteristic, &f.factor)
                .filter(|t| t.state.is_flag() && t.stands_out.level.as_deref() == Some(&f.level))
                .map(|t| (r, t))
        });
        let (mut pairs, mut pairs_not_shown, mut pairs_period) = (Vec::new(), 0, String::new());
        if let Some((r, t)) = last_flag {
            pairs_period = r.run.header.period_label.clone();
            for p in &t.pairs {
                if p.ci.low > 0.0 || p.ci.high < 0.0 {
                    pairs.push(pair_row(p));
                } else {
                    pairs_not_shown += 1;
                }
            }
        }
        items.push(crate::report::FindingItem {
            id: f.id,
            status: f.status.as_str().to_string(),
            characteristic: f.characteristic.clone(),
            factor: f.factor.clone(),
            level: f.level.clone(),
            unit: c.unit.clone(),
            since,
            effect,
            size_pct: f.effect_now_pct,
            event,
            notes,
            trend,
            pairs,
            pairs_not_shown,
            pairs_period,
        });
    }
    // Open findings first, each group largest against the tolerance first (those without a
    // tolerance after them).
    items.sort_by(|a, b| {
        let key = |i: &crate::report::FindingItem| i.size_pct.map(f64::abs);
        (b.status == "open")
            .cmp(&(a.status == "open"))
            .then(
                key(b)
                    .partial_cmp(&key(a))
                    .unwrap_or(std::cmp::Ordering::Equal),
            )
            .then(a.id.cmp(&b.id))
    });
    Ok(items)
}

fn trend_from_runs(
    c: &CharacteristicConfig,
    factor: &str,
    loaded: &[LoadedRun],
    events: Vec<EventMarker>,
) -> TrendInput {
    let periods = loaded
        .iter()
        .map(|r| {
            let test = r.test(&c.name, factor);
            TrendPeriod {
                label: r.run.header.period_label.clone(),
                start: r.start(),
                end: r.end(),
                state: test.map_or(FlagState::NotRun, |t| flag_state(t.state)),
                groups: test.map_or(Vec::new(), group_points),
            }
        })
        .collect();
    TrendInput {
        characteristic: c.name.clone(),
        unit: c.unit.clone(),
        factor: factor.to_string(),
        limits: limits(c),
        periods,
        events,
        highlight: None,
    }
}

fn share_from_runs(
    c: &CharacteristicConfig,
    factor: &str,
    loaded: &[LoadedRun],
    events: Vec<EventMarker>,
) -> ShareInput {
    let periods = loaded
        .iter()
        .map(|r| {
            let test = r.test(&c.name, factor);
            SharePeriod {
                label: r.run.header.period_label.clone(),
                start: r.start(),
                end: r.end(),
                state: test.map_or(FlagState::NotRun, |t| flag_state(t.state)),
                share: test.and_then(|t| t.variance_components.share_between),
                // The stored interval is that of the ICC, which in the one-way random model is
                // the between-group share of the total variance.
                ci_low: test
                    .and_then(|t| t.variance_components.icc_ci.low)
                    .map(|v| v.clamp(0.0, 1.0)),
                ci_high: test
                    .and_then(|t| t.variance_components.icc_ci.high)
                    .map(|v| v.clamp(0.0, 1.0)),
            }
        })
        .collect();
    ShareInput {
        characteristic: c.name.clone(),
        factor: factor.to_string(),
        // The plant's material share is a share of the tolerance (spread of group means), not a
        // share of variance, so it is not drawn on this axis.
        material_share: None,
        confidence: CONFIDENCE,
        periods,
        events,
    }
}

/// What the trend and share charts read: the characteristic (after checking both names), the
/// latest complete run of each `kind` period starting in `[from, to)`, and the events of that
/// range that concern the characteristic.
fn chart_runs<'c>(
    store: &dyn PlantStore,
    config: &'c Config,
    characteristic: &str,
    factor: &str,
    kind: PeriodKind,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Result<(&'c CharacteristicConfig, Vec<LoadedRun>, Vec<EventMarker>)> {
    let c = chart_names(config, characteristic, factor)?;
    let loaded = load_runs(store, kind, from, to)?;
    let events = event_markers(store, Some(characteristic), from, to)?;
    Ok((c, loaded, events))
}

/// The configured characteristic of a chart, once both its names are known.
fn chart_names<'c>(
    config: &'c Config,
    characteristic: &str,
    factor: &str,
) -> Result<&'c CharacteristicConfig> {
    let c = config.known_characteristic(characteristic)?;
    config.known_factor(factor)?;
    Ok(c)
}

/// The group trend of `characteristic` by `factor` over the `kind` periods starting in
/// `[from, to)`, from the latest complete run of each, with the events of that range.
pub fn trend_input(
    store: &dyn PlantStore,
    config: &Config,
    characteristic: &str,
    factor: &str,
    kind: PeriodKind,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Result<TrendInput> {
    let (c, loaded, events) = chart_runs(store, config, characteristic, factor, kind, from, to)?;
    Ok(trend_from_runs(c, factor, &loaded, events))
}

/// The between-group share of `characteristic` by `factor` over the `kind` periods starting in
/// `[from, to)`.
pub fn share_input(
    store: &dyn PlantStore,
    config: &Config,
    characteristic: &str,
    factor: &str,
    kind: PeriodKind,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Result<ShareInput> {
    let (c, loaded, events) = chart_runs(store, config, characteristic, factor, kind, from, to)?;
    Ok(share_from_runs(c, factor, &loaded, events))
}

/// The production days whose start lies in the period.
pub fn days_of(calendar: &PlantCalendar, period: &Period) -> Vec<NaiveDate> {
    let mut day = calendar.production_day(period.start);
    let mut days = Vec::new();
    while calendar.day_start_utc(day) < period.end {
        if calendar.day_start_utc(day) >= period.start {
            days.push(day);
        }
        match day.succ_opt() {
            Some(d) => day = d,
            None => break,
        }
    }
    days
}

fn grid_from_runs(
    config: &Config,
    month: &Period,
    days: &[NaiveDate],
    loaded: &[LoadedRun],
) -> GridInput {
    let by_label: HashMap<&str, &LoadedRun> = loaded
        .iter()
        .map(|r| (r.run.header.period_label.as_str(), r))
        .collect();
    let labels: Vec<String> = days
        .iter()
        .map(|d| d.format("%Y-%m-%d").to_string())
        .collect();
    let mut rows = Vec::new();
    for c in config.characteristics.iter().filter(|c| c.is_active) {
        for f in &config.factors {
            let cells = labels
                .iter()
                .map(|l| {
                    by_label
                        .get(l.as_str())
                        .and_then(|r| r.test(&c.name, &f.name))
                        .map_or(FlagState::NotRun, |t| flag_state(t.state))
                })
                .collect();
            rows.push(GridRow {
                characteristic: c.name.clone(),
                factor: f.name.clone(),
                cells,
            });
        }
    }
    GridInput {
        title: format!("{} daily checks", month.label),
        days: days.to_vec(),
        rows,
    }
}

/// The month grid: one row per active characteristic x factor, one column per production day of
/// the month, each cell the state of the latest complete daily run ("not run" where none).
pub fn grid_input(store: &dyn PlantStore, config: &Config, month: &Period) -> Result<GridInput> {
    let loaded = load_runs(store, PeriodKind::Day, month.start, month.end)?;
    Ok(month_grid(config, month, &loaded))
}

/// [`grid_input`] from the month's daily runs, already loaded.
fn month_grid(config: &Config, month: &Period, loaded: &[LoadedRun]) -> GridInput {
    let days = days_of(&PlantCalendar::new(config), month);
    grid_from_runs(config, month, &days, loaded)
}

/// Values of one characteristic in `[start, end)` split by the levels of one factor:
/// `(level, Vec<(ts_ms, value in the unit)>)`, levels in the store's order.
type LevelValues = Vec<(String, Vec<(i64, f64)>)>;

/// One characteristic's values in `[start, end)`, with the position of `factor` among the
/// frame's factors.
fn load_one(
    store: &dyn PlantStore,
    characteristic: &str,
    factor: &str,
    start: DateTime<Utc>,
    end: DateTime<Utc>,
) -> Result<(crate::storage::PeriodFrame, usize)> {
    let frame = store.load_period(start, end, Some(&[characteristic.to_string()]))?;
    let Some(f_idx) = frame.factors.iter().position(|f| f.name == factor) else {
        return Err(Error::Usage(format!(
            "factor \"{factor}\" is not in the database (run `samewise init` after changing the configuration)"
        )));
    };
    Ok((frame, f_idx))
}

fn values_by_level(frame: &crate::storage::PeriodFrame, f_idx: usize) -> LevelValues {
    let levels = &frame.factors[f_idx].levels;
    let mut out: LevelValues = levels.iter().map(|l| (l.clone(), Vec::new())).collect();
    if let Some(c) = frame.characteristics.first() {
        let origin = c.origin.to_f64();
        for (row, &v) in c.values.iter().enumerate() {
            let level = c.level_idx[f_idx][row] as usize;
            if let Some(slot) = out.get_mut(level) {
                slot.1.push((c.ts_ms[row], origin + v));
            }
        }
    }
    out.retain(|(_, v)| !v.is_empty());
    out
}

/// The subgroup (cell) means of each level, keyed by level name, when the period's values of
/// `characteristic` have subgroups and `factor` is nested in them or mixed with them (the design
/// the check tests them with, `analysis::design`): the unit of replication is then the subgroup,
/// and a group mean's interval must come from its subgroup means. `None` for independent values
/// and for blocked designs (the factor varies within the subgroups; the values' own interval
/// then includes the subgroups' deviations and errs on the wide side).
fn subgroup_means_by_level(
    frame: &crate::storage::PeriodFrame,
    f_idx: usize,
) -> Option<BTreeMap<String, Vec<f64>>> {
    use crate::analysis::design::{arrange, DesignKind};
    let c = frame.characteristics.first()?;
    let levels = &frame.factors[f_idx].levels;
    let idx = &c.level_idx[f_idx];
    let a = arrange(&c.values, &c.subgroup_idx, |row| Some(idx[row])).ok()?;
    if !matches!(a.kind, DesignKind::Nested | DesignKind::CellMeans) {
        return None;
    }
    let origin = c.origin.to_f64();
    Some(
        a.cell_means(levels.len())
            .into_iter()
            .enumerate()
            .filter(|(_, m)| !m.is_empty())
            .map(|(l, m)| (levels[l].clone(), m.iter().map(|v| origin + v).collect()))
            .collect(),
    )
}

fn mean_sd(values: &[f64]) -> (f64, Option<f64>) {
    let s = crate::stats::describe::Summary::from_slice(values);
    (s.mean, s.sd())
}

/// The period detail of `characteristic` by `factor`: every value of the period per group with
/// the group mean and its 95% interval, the grand mean, and the residuals (value minus group mean).
pub fn detail_input(
    store: &dyn PlantStore,
    config: &Config,
    characteristic: &str,
    factor: &str,
    period: &Period,
) -> Result<DetailInput> {
    let c = config.known_characteristic(characteristic)?;
    config.known_factor(factor)?;
    let (frame, f_idx) = load_one(store, characteristic, factor, period.start, period.end)?;
    let by_level = values_by_level(&frame, f_idx);
    if by_level.is_empty() {
        return Err(Error::Usage(format!(
            "no values of \"{characteristic}\" in {}",
            period.label
        )));
    }
    let units = subgroup_means_by_level(&frame, f_idx);
    let mut all = Vec::new();
    let mut residuals = Vec::new();
    let groups = by_level
        .into_iter()
        .map(|(level, tv)| {
            let values: Vec<f64> = tv.into_iter().map(|(_, v)| v).collect();
            let (mean, sd) = mean_sd(&values);
            // Parts measured together share their subgroup's deviation: the interval of a
            // nested group's mean rests on its subgroup means, not on every value.
            let (ci_low, ci_high) = match units.as_ref().and_then(|u| u.get(&level)) {
                Some(means) => {
                    // Centred on the plotted mean of the values, as wide as the subgroup
                    // means' interval.
                    let (m, sd) = mean_sd(means);
                    match interval(means.len() as u64, m, sd) {
                        (Some(_), Some(hi)) => (Some(mean - (hi - m)), Some(mean + (hi - m))),
                        _ => (None, None),
                    }
                }
                None => interval(values.len() as u64, mean, sd),
            };
            all.extend_from_slice(&values);
            residuals.extend(values.iter().map(|v| v - mean));
            DetailGroup {
                level,
                values,
                mean,
                ci_low,
                ci_high,
            }
        })
        .collect();
    Ok(DetailInput {
        characteristic: c.name.clone(),
        unit: c.unit.clone(),
        factor: factor.to_string(),
        period_label: period.label.clone(),
        limits: limits(c),
        grand_mean: mean_sd(&all).0,
        groups,
        residuals,
    })
}

/// Above this many values in a group the before/after chart shows production-day means.
const MAX_POINTS_PER_GROUP: usize = 400;

/// Values of `characteristic` by `factor` in `[at - window, at + window)` around event
/// `event_id`, per group, with the group's mean before and after the event. Groups with many
/// values are shown as production-day means (the means before/after are always of the values).
pub fn before_after_input(
    store: &dyn PlantStore,
    config: &Config,
    characteristic: &str,
    factor: &str,
    event_id: i64,
    window: Duration,
) -> Result<BeforeAfterInput> {
    let c = config.known_characteristic(characteristic)?;
    config.known_factor(factor)?;
    let events = store.events(None, None)?;
    let Some(event) = events.iter().find(|e| e.id == event_id) else {
        let known: Vec<String> = events.iter().map(|e| e.id.to_string()).collect();
        return Err(Error::Usage(format!(
            "no event #{event_id} (known: {}; list them with `samewise event list`)",
            if known.is_empty() {
                "none".to_string()
            } else {
                known.join(", ")
            }
        )));
    };
    let start = event.at - window;
    let end = event.at + window;
    let (frame, f_idx) = load_one(store, characteristic, factor, start, end)?;
    let by_level = values_by_level(&frame, f_idx);
    let calendar = PlantCalendar::new(config);
    let at_ms = event.at.timestamp_millis();
    let is_aggregated = by_level.iter().any(|(_, v)| v.len() > MAX_POINTS_PER_GROUP);
    let groups = by_level
        .into_iter()
        .map(|(level, tv)| {
            let before: Vec<f64> = tv.iter().filter(|p| p.0 < at_ms).map(|p| p.1).collect();
            let after: Vec<f64> = tv.iter().filter(|p| p.0 >= at_ms).map(|p| p.1).collect();
            let points = if is_aggregated {
                day_means(&calendar, &tv, at_ms)
            } else {
                tv.iter()
                    .map(|&(t, value)| TimedValue { at: ms(t), value })
                    .collect()
            };
            BeforeAfterGroup {
                level,
                points,
                mean_before: (!before.is_empty()).then(|| mean_sd(&before).0),
                mean_after: (!after.is_empty()).then(|| mean_sd(&after).0),
            }
        })
        .collect();
    Ok(BeforeAfterInput {
        time_zone: config.plant.time_zone,
        characteristic: c.name.clone(),
        unit: c.unit.clone(),
        factor: factor.to_string(),
        point_kind: if is_aggregated {
            "production-day mean".to_string()
        } else {
            "value".to_string()
        },
        window_start: start,
        window_end: end,
        event: EventMarker {
            at: event.at,
            label: format!("#{} {}", event.id, event.note),
        },
        limits: limits(c),
        groups,
    })
}

/// Means per production day, the day containing the event split at the event so no mean mixes
/// before and after; each point sits at the middle of its values' time span.
fn day_means(calendar: &PlantCalendar, tv: &[(i64, f64)], at_ms: i64) -> Vec<TimedValue> {
    let mut buckets: BTreeMap<(NaiveDate, bool), (f64, u64, i64, i64)> = BTreeMap::new();
    for &(t, v) in tv {
        let key = (calendar.production_day(ms(t)), t >= at_ms);
        let e = buckets.entry(key).or_insert((0.0, 0, i64::MAX, i64::MIN));
        e.0 += v;
        e.1 += 1;
        e.2 = e.2.min(t);
        e.3 = e.3.max(t);
    }
    buckets
        .values()
        .map(|&(sum, n, lo, hi)| TimedValue {
            at: ms(lo + (hi - lo) / 2),
            value: sum / n as f64,
        })
        .collect()
}

/// A stored pair as a row of the report's pair tables.
fn pair_row(p: &PairResult) -> report::PairRow {
    report::PairRow {
        a: p.a.clone(),
        b: p.b.clone(),
        diff: p.diff,
        ci_low: p.ci.low,
        ci_high: p.ci.high,
        p_adj: p.p_adj,
        method: pair_method_name(&p.method),
    }
}

fn flagged_item(c: &CharacteristicConfig, r: &LoadedRun, t: &TestResult) -> FlaggedItem {
    FlaggedItem {
        characteristic: t.characteristic.clone(),
        factor: t.factor.clone(),
        unit: c.unit.clone(),
        period_label: if r.revised {
            format!("{} (revised)", r.run.header.period_label)
        } else {
            r.run.header.period_label.clone()
        },
        state: flag_state(t.state),
        test: t.leading.method.map_or("none", |m| m.label()).to_string(),
        p_value: t.leading.p.unwrap_or(f64::NAN),
        q_value: t.q_value.unwrap_or(f64::NAN),
        share_between: t.variance_components.share_between,
        standing_out: t
            .stands_out
            .level
            .clone()
            .unwrap_or_else(|| "-".to_string()),
        diff_units: t.stands_out.diff.unwrap_or(f64::NAN),
        diff_pct_tolerance: t.stands_out.pct_tolerance,
        pairs: t.pairs.iter().map(pair_row).collect(),
    }
}

/// The published name of a stored pair method.
fn pair_method_name(key: &str) -> String {
    match key {
        "games_howell" => "Games-Howell".to_string(),
        "tukey_kramer" => "Tukey-Kramer".to_string(),
        "tukey_kramer_adjusted" => "Tukey-Kramer on means adjusted for the subgroups".to_string(),
        other => other.to_string(),
    }
}

/// Flagged (characteristic, factor) pairs of some runs, with the number of flagged periods.
fn flag_counts(loaded: &[LoadedRun]) -> BTreeMap<(String, String), usize> {
    let mut out = BTreeMap::new();
    for r in loaded {
        for t in r.content.tests.iter().filter(|t| t.state.is_flag()) {
            *out.entry((t.characteristic.clone(), t.factor.clone()))
                .or_insert(0) += 1;
        }
    }
    out
}

/// How far before/after an event the report's before/after charts reach.
pub const EVENT_WINDOW_DAYS: i64 = 7;

/// Everything the monthly review report needs, for the month `month` (a month period of the
/// plant calendar). The checks counted are the month's daily runs (latest complete version of
/// each day); `generated` is the text shown as the report's date (the caller reads the clock).
pub fn month_report(
    store: &dyn PlantStore,
    config: &Config,
    month: &Period,
    generated: &str,
) -> Result<MonthReport> {
    let calendar = PlantCalendar::new(config);
    let days = days_of(&calendar, month);
    let loaded = load_runs(store, PeriodKind::Day, month.start, month.end)?;
    let grid = grid_from_runs(config, month, &days, &loaded);

    // Counts over the grid: one check per cell.
    let mut counts = StateCounts::default();
    for row in &grid.rows {
        for &cell in &row.cells {
            counts.add(cell);
        }
    }

    // What is new compared with the previous month.
    let previous = calendar.previous_period(month);
    let previous_runs = load_runs(store, PeriodKind::Day, previous.start, previous.end)?;
    let now_flags = flag_counts(&loaded);
    let before_flags = flag_counts(&previous_runs);
    let mut new_this_month = Vec::new();
    if loaded.is_empty() {
        new_this_month.push(format!(
            "No complete daily run is stored for {}: run `samewise schedule due` or `samewise check --day DAY` first.",
            month.label
        ));
    }
    for ((c, f), n) in &now_flags {
        if !before_flags.contains_key(&(c.clone(), f.clone())) {
            let since = if previous_runs.is_empty() {
                format!("no daily run is stored for {}", previous.label)
            } else {
                format!("not flagged in {}", previous.label)
            };
            new_this_month.push(format!("{c} by {f}: flagged on {n} day(s); {since}."));
        }
    }
    for ((c, f), n) in &before_flags {
        if !now_flags.contains_key(&(c.clone(), f.clone())) && !loaded.is_empty() {
            new_this_month.push(format!(
                "{c} by {f}: no longer flagged (flagged on {n} day(s) in {}).",
                previous.label
            ));
        }
    }
    let n_new_flags: usize = loaded
        .iter()
        .flat_map(|r| r.content.tests.iter())
        .filter(|t| t.is_new && t.state.is_flag())
        .count();
    if n_new_flags > 0 {
        new_this_month.push(format!(
            "{n_new_flags} flag(s) were new against the previous period of the same comparison."
        ));
    }

    // Flagged items and requirement notes.
    let mut flagged = Vec::new();
    let mut requirement_notes = Vec::new();
    for r in &loaded {
        for t in r.content.tests.iter().filter(|t| t.state.is_flag()) {
            let Some(c) = config.characteristic(&t.characteristic) else {
                continue;
            };
            flagged.push(flagged_item(c, r, t));
            for note in requirement_texts(t) {
                requirement_notes.push(RequirementNote {
                    characteristic: t.characteristic.clone(),
                    factor: t.factor.clone(),
                    period_label: r.run.header.period_label.clone(),
                    note,
                });
            }
        }
    }

    // Per characteristic: the factors flagged in the month, or the first factor.
    let mut characteristics = Vec::new();
    for c in config.characteristics.iter().filter(|c| c.is_active) {
        let events = event_markers(store, Some(&c.name), month.start, month.end)?;
        let mut factors: Vec<&str> = config
            .factors
            .iter()
            .map(|f| f.name.as_str())
            .filter(|f| now_flags.contains_key(&(c.name.clone(), f.to_string())))
            .collect();
        if factors.is_empty() {
            if let Some(f) = config.factors.first() {
                factors.push(&f.name);
            }
        }
        characteristics.push(CharacteristicSection {
            characteristic: c.name.clone(),
            unit: c.unit.clone(),
            limits: limits(c),
            factors: factors
                .into_iter()
                .map(|f| FactorCharts {
                    trend: trend_from_runs(c, f, &loaded, events.clone()),
                    share: share_from_runs(c, f, &loaded, events.clone()),
                })
                .collect(),
        });
    }

    let findings = finding_items(store, config, month, &loaded)?;

    // Investigations: each event of the month that names a characteristic, by the factor its
    // scope names (else the first factor).
    let mut investigations = Vec::new();
    for e in store.events(Some(month.start), Some(month.end))? {
        let Some(ch) = e.characteristic.as_deref() else {
            continue;
        };
        if config.characteristic(ch).is_none() {
            continue;
        }
        let factor = e
            .scope
            .first()
            .map(|(f, _)| f.clone())
            .or_else(|| config.factors.first().map(|f| f.name.clone()));
        let Some(factor) = factor else { continue };
        if config.factor_index(&factor).is_none() {
            continue;
        }
        let input = before_after_input(
            store,
            config,
            ch,
            &factor,
            e.id,
            Duration::days(EVENT_WINDOW_DAYS),
        )?;
        if !input.groups.is_empty() {
            investigations.push(input);
        }
    }

    Ok(MonthReport {
        plant: config.plant.name.clone(),
        month: month.label.clone(),
        generated: generated.to_string(),
        counts,
        new_this_month,
        findings,
        flagged,
        grid: Some(grid),
        characteristics,
        investigations,
        requirement_notes,
        coverage: coverage(store, &calendar, month, &days)?,
        methods: report::standard_methods(),
    })
}

/// Requirement-check notes of one test: the engine's notes plus what the stored checks say.
fn requirement_texts(t: &TestResult) -> Vec<String> {
    let mut out = Vec::new();
    use crate::results::{DesignKind, LeadingTest};
    match (t.design.kind, t.design.n_subgroups) {
        (Some(DesignKind::Nested), Some(n)) => out.push(format!(
            "nested design: tested on the means of its {n} subgroups (parts measured together share their subgroup's deviation)"
        )),
        (Some(DesignKind::Blocked), Some(n)) => out.push(format!(
            "blocked design: the groups vary within the {n} subgroups, which are taken out as blocks"
        )),
        (Some(DesignKind::CellMeans), Some(n)) => out.push(format!(
            "mixed design: tested on the mean of each group within each of the {n} subgroups"
        )),
        _ => {}
    }
    if t.state == TestState::DiffersDependent {
        out.push(
            "values not independent: the difference does not hold once the serial dependence is allowed for; name the subgroup column"
                .to_string(),
        );
    }
    if let Some(reason) = &t.leading.reason {
        match t.leading.method {
            Some(LeadingTest::Welch) => out.push(format!("Welch used: {reason}")),
            Some(LeadingTest::WelchBootstrap) => {
                out.push(format!("Welch with a bootstrap-t p used: {reason}"))
            }
            Some(LeadingTest::FStar) => out.push(format!("Brown-Forsythe F* used: {reason}")),
            _ => {}
        }
    }
    if t.leading.recommend_kruskal_wallis == Some(true) {
        out.push(format!(
            "residuals far from normal (Shapiro-Wilk p = {}): read the Kruskal-Wallis result (p = {}) beside it",
            fmt(t.shapiro_wilk.p),
            fmt(t.kruskal_wallis.p)
        ));
    }
    if let Some(n) = t.n_beyond_3sd.filter(|&n| n > 0) {
        let c = crate::stats::spread::outlier_excess(n as usize, t.n_obs as usize);
        // Normal residuals put 0.27 % beyond 3 SD: only a count well above that is a sign.
        if c.p < 0.05 {
            out.push(format!(
                "{n} value(s) beyond 3 SD of their group mean, where normal data give {:.1} (binomial p = {:.2e})",
                c.expected, c.p
            ));
        }
    }
    if !t.notes.is_empty() {
        out.push(t.notes.clone());
    }
    out
}

fn fmt(v: Option<f64>) -> String {
    v.map_or("n/a".to_string(), |v| format!("{v:.3}"))
}

fn coverage(
    store: &dyn PlantStore,
    calendar: &PlantCalendar,
    month: &Period,
    days: &[NaiveDate],
) -> Result<Coverage> {
    // Counted with queries along the primary key: no value of the month is loaded.
    let rows_by_characteristic = store.count_between(month.start, month.end)?;
    let rows_stored = rows_by_characteristic.iter().map(|c| c.1).sum();
    let mut with_data = BTreeSet::new();
    for &d in days {
        let day = calendar.day(d);
        if store.has_data_between(day.start, day.end)? {
            with_data.insert(d);
        }
    }
    Ok(Coverage {
        rows_stored,
        // Rejected rows carry no trusted timestamp, so this is every import's count.
        rows_rejected: store.status()?.n_rejected,
        days_without_data: days
            .iter()
            .filter(|d| !with_data.contains(d))
            .copied()
            .collect(),
        rows_by_characteristic,
    })
}

/// Builds the month report and writes it as one self-contained HTML file.
pub fn write_month_report(
    store: &dyn PlantStore,
    config: &Config,
    month: &Period,
    generated: &str,
    out_path: &Path,
) -> Result<MonthReport> {
    let r = month_report(store, config, month, generated)?;
    let html = report::render_month_report(&r);
    crate::output::write_atomic(out_path, html.as_bytes())?;
    Ok(r)
}

/// Which characteristic x factor pairs [`write_story_charts`] draws: a plant's own choice (the demo
/// names the sample plant's).
#[derive(Debug, Clone, Copy)]
pub struct ChartStory<'a> {
    /// Trend and share over the whole stored history, with its events.
    pub trend: (&'a str, &'a str),
    /// Detail (groups and Q-Q) on the month's first day that flagged it (else its first day with
    /// data).
    pub detail: (&'a str, &'a str),
    /// Before/after around the first event naming the characteristic.
    pub before_after: (&'a str, &'a str),
}

/// Charts (PNG and SVG of each) in `dir`: the trend and the share of `story.trend` over the whole
/// stored history, the grid of `month`, the detail of `story.detail` on the month's first flagged
/// day and the before/after of `story.before_after` around the first event naming its
/// characteristic. A chart whose data is missing is skipped and named in the second list.
pub fn write_story_charts(
    store: &dyn PlantStore,
    config: &Config,
    month: &Period,
    story: &ChartStory<'_>,
    dir: &Path,
) -> Result<(Vec<PathBuf>, Vec<String>)> {
    let mut sink = Sink {
        dir,
        written: Vec::new(),
        skipped: Vec::new(),
    };
    // The whole stored history: from the earliest instant chrono represents.
    let all_from = DateTime::<Utc>::MIN_UTC;
    let all_to = month.end;
    let size = Size::DEFAULT;
    // Every stored daily run up to the month's end, read once: the trend and share charts draw
    // all of them, the grid and the detail chart the month's (the runs come in start order).
    let history = load_runs(store, PeriodKind::Day, all_from, all_to)?;
    let month_runs = &history[history.partition_point(|r| r.start() < month.start)..];
    let (trend_c, trend_f) = story.trend;
    let trend_chart = chart_names(config, trend_c, trend_f)
        .and_then(|c| Ok((c, event_markers(store, Some(trend_c), all_from, all_to)?)));
    match trend_chart {
        Ok((c, events)) => {
            let trend = trend_from_runs(c, trend_f, &history, events.clone());
            let share = share_from_runs(c, trend_f, &history, events);
            let name = format!("{trend_c}_by_{trend_f}");
            let trend_size = report::trend_size(&trend);
            sink.render(
                &format!("trend_{name}"),
                &trend,
                trend_size,
                report::render_trend,
            )?;
            sink.render(&format!("share_{name}"), &share, size, report::render_share)?;
        }
        Err(e) => {
            sink.skipped.push(format!("trend: {e}"));
            sink.skipped.push(format!("share: {e}"));
        }
    }
    let grid = month_grid(config, month, month_runs);
    sink.render(
        &format!("grid_{}", month.label),
        &grid,
        report::grid_natural_size(&grid),
        report::render_grid,
    )?;
    let calendar = PlantCalendar::new(config);
    let (detail_c, detail_f) = story.detail;
    let flagged_day = month_runs
        .iter()
        .find(|r| {
            r.test(detail_c, detail_f)
                .is_some_and(|t| t.state.is_flag())
        })
        .or_else(|| month_runs.first())
        .map(|r| r.run.header.period_label.clone());
    match flagged_day {
        Some(label) => {
            let period = calendar.parse_period(&label)?;
            sink.render_or_skip(
                "detail",
                &format!("detail_{detail_c}_by_{detail_f}_{label}"),
                detail_input(store, config, detail_c, detail_f, &period),
                |_| size,
                report::render_detail,
            )?;
        }
        None => sink
            .skipped
            .push(format!("detail: no daily run in {}", month.label)),
    }
    let (event_c, event_f) = story.before_after;
    let event = store
        .events(None, None)?
        .into_iter()
        .find(|e| e.characteristic.as_deref() == Some(event_c));
    match event {
        Some(e) => sink.render_or_skip(
            "before/after",
            &format!("before_after_{event_c}_event_{}", e.id),
            before_after_input(
                store,
                config,
                event_c,
                event_f,
                e.id,
                Duration::days(EVENT_WINDOW_DAYS),
            ),
            report::before_after_natural_size,
            report::render_before_after,
        )?,
        None => sink
            .skipped
            .push(format!("before/after: no event names {event_c}")),
    }
    Ok((sink.written, sink.skipped))
}

struct Sink<'a> {
    dir: &'a Path,
    written: Vec<PathBuf>,
    skipped: Vec<String>,
}

/// How a chart input is drawn in one format at one size.
type Render<T> = fn(&T, Format, Size) -> Result<Vec<u8>>;

impl Sink<'_> {
    /// Draws `input` as SVG and as PNG at `size` and saves both under `name`.
    fn render<T>(&mut self, name: &str, input: &T, size: Size, render: Render<T>) -> Result<()> {
        self.save(
            name,
            render(input, Format::Svg, size),
            render(input, Format::Png, size),
        )
    }

    /// [`Sink::render`] for an input that may be unavailable: its reason is kept among the
    /// skipped charts, after `what`.
    fn render_or_skip<T>(
        &mut self,
        what: &str,
        name: &str,
        input: Result<T>,
        size: impl Fn(&T) -> Size,
        render: Render<T>,
    ) -> Result<()> {
        match input {
            Ok(input) => self.render(name, &input, size(&input), render),
            Err(e) => {
                self.skipped.push(format!("{what}: {e}"));
                Ok(())
            }
        }
    }

    fn save(&mut self, name: &str, svg: Result<Vec<u8>>, png: Result<Vec<u8>>) -> Result<()> {
        match (svg, png) {
            (Ok(svg), Ok(png)) => {
                for (ext, bytes) in [("svg", svg), ("png", png)] {
                    let path = self.dir.join(format!("{name}.{ext}"));
                    report::write_chart(&path, &bytes)?;
                    self.written.push(path);
                }
            }
            (Err(e), _) | (_, Err(e)) => self.skipped.push(format!("{name}: {e}")),
        }
        Ok(())
    }
}
