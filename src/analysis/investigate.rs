//! Investigating a drift after a process change: before vs after a time, for each group and
//! pooled, and the change-point scan when no change time is known.
//!
//! [`compare`] and [`scan_groups`] work on a [`GroupedSeries`] (one characteristic's values in a
//! window, with each value's time and group) and call only `stats`; the store-facing entry point
//! that loads the window and the logged events sits beside them. Nothing here prints.
//!
//! Before/after, for each group with enough values on both sides and for all values pooled:
//! mean shift with a Welch interval ([`crate::stats::shift::welch_shift`]), SD ratio with an F
//! interval ([`crate::stats::shift::sd_ratio`]) and the Brown-Forsythe test of equal spread
//! ([`crate::stats::spread::brown_forsythe`]); the between-group share of variance before and after
//! ([`crate::stats::variance_components::one_way_random`]); and the two-way ANOVA group x
//! before/after with its interaction ([`crate::stats::twoway::two_way_values`]), whose interaction
//! line answers "did the change affect the groups differently?".

use chrono::{DateTime, TimeZone, Utc};

use crate::names::{unknown_name, NameKind};
use crate::stats::changepoint::{self, Scan, ScanOptions};
use crate::stats::describe::Summary;
use crate::stats::shift::{sd_ratio, welch_shift, MeanShift, SdRatio};
use crate::stats::spread::brown_forsythe;
use crate::stats::twoway::{two_way_values, TwoWay};
use crate::stats::variance_components::{one_way_random, VarianceComponents};
use crate::stats::{Stat, TestResult, Unavailable};
use crate::storage::Event;
use crate::storage::PlantStore;
use crate::{Error, Result};

/// One characteristic's values in a window: time order is not required.
#[derive(Debug, Clone, Copy)]
pub struct GroupedSeries<'a> {
    /// Characteristic name (for messages).
    pub characteristic: &'a str,
    /// Grouping factor name (for messages).
    pub factor: &'a str,
    /// Values (offsets from the characteristic's origin).
    pub values: &'a [f64],
    /// Measurement instants, ms since the epoch (UTC).
    pub ts_ms: &'a [i64],
    /// Group of each value: index into `groups`.
    pub group_idx: &'a [u32],
    /// Group (level) names.
    pub groups: &'a [String],
}

/// Settings of the before/after comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct CompareOptions {
    /// Coverage of the intervals (default 0.95).
    pub confidence: f64,
    /// Level at which the interaction counts as present when choosing the leading sums of
    /// squares (default 0.05).
    pub alpha: f64,
    /// Fewest values a group needs on each side to be compared (default 2, at least 2).
    pub min_per_side: u64,
    /// The tolerance width (USL - LSL), or the distance from the target to a single limit, for
    /// shifts in % of it.
    pub tolerance: Option<f64>,
}

impl Default for CompareOptions {
    fn default() -> Self {
        CompareOptions {
            confidence: 0.95,
            alpha: 0.05,
            min_per_side: 2,
            tolerance: None,
        }
    }
}

/// Before/after results for one group (or for all values pooled).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupChange {
    /// Group name ("all groups" for the pooled line).
    pub group: String,
    /// Values before the change.
    pub before: Summary,
    /// Values after the change.
    pub after: Summary,
    /// Mean shift after - before with the Welch interval.
    pub mean_shift: Stat<MeanShift>,
    /// SD after / before with the F interval.
    pub sd_ratio: Stat<SdRatio>,
    /// Brown-Forsythe test of equal spread before and after.
    pub brown_forsythe: Stat<TestResult>,
    /// The shift's p-value adjusted across the compared groups (Benjamini-Hochberg): one
    /// question per group, so some would pass 0.05 by chance alone among many groups. `None` for
    /// the pooled line and where the shift has no p-value.
    pub p_adjusted: Option<f64>,
    /// The shift in within-group SDs (the group's SD before and after pooled).
    pub shift_sd: Option<f64>,
    /// The shift in % of the tolerance (or of the distance to a single limit).
    pub shift_pct_tolerance: Option<f64>,
}

/// A group left out of the comparison because one side has too few values.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LeftOut {
    /// Group name.
    pub group: String,
    /// Values before the change.
    pub n_before: u64,
    /// Values after the change.
    pub n_after: u64,
}

/// The full before/after comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct Comparison {
    /// The change instant (values at or after it count as after), ms since the epoch.
    pub change_ms: i64,
    /// Groups with enough values on both sides, in level order.
    pub groups: Vec<GroupChange>,
    /// All values pooled (every group, including those left out).
    pub pooled: GroupChange,
    /// Groups left out, with their counts.
    pub left_out: Vec<LeftOut>,
    /// Between-group variance components before the change (compared groups only).
    pub share_before: Stat<VarianceComponents>,
    /// Between-group variance components after the change.
    pub share_after: Stat<VarianceComponents>,
    /// Two-way ANOVA, factor A = group, factor B = before/after (compared groups only).
    pub two_way: Stat<TwoWay>,
    /// Plain-language notes (groups left out and why).
    pub notes: Vec<String>,
}

/// Formats an instant as RFC 3339 UTC to the second, for messages.
pub fn format_ms(ms: i64) -> String {
    match Utc.timestamp_millis_opt(ms).single() {
        Some(t) => t.format("%Y-%m-%d %H:%M:%S UTC").to_string(),
        None => format!("{ms} ms"),
    }
}

fn group_change(
    group: String,
    before: &[f64],
    after: &[f64],
    confidence: f64,
    tolerance: Option<f64>,
) -> GroupChange {
    let b = Summary::from_slice(before);
    let a = Summary::from_slice(after);
    let mean_shift = welch_shift(&b, &a, confidence);
    let dof = (b.n + a.n) as f64 - 2.0;
    let pooled_sd = (dof > 0.0)
        .then(|| ((b.m2 + a.m2) / dof).sqrt())
        .filter(|s| *s > 0.0 && s.is_finite());
    let shift = mean_shift.as_ref().ok().map(|s| s.shift);
    GroupChange {
        group,
        before: b,
        after: a,
        sd_ratio: sd_ratio(&b, &a, confidence),
        brown_forsythe: brown_forsythe(&[before, after]),
        p_adjusted: None,
        shift_sd: shift.zip(pooled_sd).map(|(d, s)| d / s),
        shift_pct_tolerance: shift
            .zip(tolerance.filter(|t| *t > 0.0))
            .map(|(d, t)| 100.0 * d / t),
        mean_shift,
    }
}

fn check_series(series: &GroupedSeries) -> Result<()> {
    let n = series.values.len();
    if series.ts_ms.len() != n || series.group_idx.len() != n {
        return Err(Error::Usage(format!(
            "internal: {} values, {} times and {} group indices for {}",
            n,
            series.ts_ms.len(),
            series.group_idx.len(),
            series.characteristic
        )));
    }
    if let Some(&g) = series
        .group_idx
        .iter()
        .find(|&&g| g as usize >= series.groups.len())
    {
        return Err(Error::Usage(format!(
            "internal: group index {g} beyond the {} levels of {}",
            series.groups.len(),
            series.factor
        )));
    }
    Ok(())
}

/// Compares the values before `change_ms` with those at or after it, per group and pooled.
///
/// Errors (clear messages, no panic): no values at all; the change outside the data (every value on
/// one side); fewer than two values on one side. A group with fewer than `min_per_side` values on
/// a side is left out of the per-group lines, the shares and the two-way ANOVA, and named in
/// `left_out` and `notes`.
pub fn compare(
    series: &GroupedSeries,
    change_ms: i64,
    options: &CompareOptions,
) -> Result<Comparison> {
    check_series(series)?;
    let name = series.characteristic;
    let not_enough = |reason: String| Error::NotEnoughData {
        characteristic: name.to_string(),
        reason,
    };
    if series.values.is_empty() {
        return Err(not_enough("no values in the chosen window".to_string()));
    }
    let first = *series.ts_ms.iter().min().expect("not empty");
    let last = *series.ts_ms.iter().max().expect("not empty");
    let when = format_ms(change_ms);
    if change_ms <= first || change_ms > last {
        return Err(not_enough(format!(
            "the change at {when} lies outside the data in the window (values from {} to {}): \
             nothing to compare on one side; check the event time or widen --before/--after",
            format_ms(first),
            format_ms(last)
        )));
    }
    let n_groups = series.groups.len();
    let mut before: Vec<Vec<f64>> = vec![Vec::new(); n_groups];
    let mut after: Vec<Vec<f64>> = vec![Vec::new(); n_groups];
    for ((&v, &t), &g) in series.values.iter().zip(series.ts_ms).zip(series.group_idx) {
        if t < change_ms {
            before[g as usize].push(v);
        } else {
            after[g as usize].push(v);
        }
    }
    let all_before: Vec<f64> = before.iter().flatten().copied().collect();
    let all_after: Vec<f64> = after.iter().flatten().copied().collect();
    for (side, n, flag) in [
        ("before", all_before.len(), "--before"),
        ("after", all_after.len(), "--after"),
    ] {
        if n < 2 {
            return Err(not_enough(format!(
                "only {n} value(s) {side} the change at {when}: at least 2 are needed on each side \
                 (widen {flag})"
            )));
        }
    }
    let min = options.min_per_side.max(2) as usize;
    let mut groups = Vec::new();
    let mut left_out = Vec::new();
    let mut notes = Vec::new();
    let mut kept = Vec::new();
    for g in 0..n_groups {
        let (nb, na) = (before[g].len(), after[g].len());
        if nb == 0 && na == 0 {
            continue;
        }
        if nb < min || na < min {
            let reason = if nb == 0 {
                "no values before the change".to_string()
            } else if na == 0 {
                "no values after the change".to_string()
            } else {
                format!("fewer than {min} values on one side")
            };
            notes.push(format!(
                "{} {}: {reason} ({nb} before, {na} after); left out of the per-group comparison, \
                 the shares and the two-way ANOVA",
                series.factor, series.groups[g]
            ));
            left_out.push(LeftOut {
                group: series.groups[g].clone(),
                n_before: nb as u64,
                n_after: na as u64,
            });
            continue;
        }
        kept.push(g);
        groups.push(group_change(
            series.groups[g].clone(),
            &before[g],
            &after[g],
            options.confidence,
            options.tolerance,
        ));
    }
    // One question per group: adjust the shifts' p-values across the groups (Benjamini-Hochberg).
    let raw: Vec<(usize, f64)> = groups
        .iter()
        .enumerate()
        .filter_map(|(i, g)| g.mean_shift.as_ref().ok().map(|s| (i, s.p)))
        .collect();
    if let Ok(adjusted) = crate::stats::fdr::adjust(
        &raw.iter().map(|r| r.1).collect::<Vec<_>>(),
        crate::stats::fdr::FdrMethod::BenjaminiHochberg,
    ) {
        for ((i, _), q) in raw.iter().zip(adjusted) {
            groups[*i].p_adjusted = Some(q);
        }
    }
    if kept.is_empty() {
        return Err(not_enough(format!(
            "too little data on one side: no {} level has at least {min} values on each side of \
             the change at {when} (widen --before/--after)",
            series.factor
        )));
    }
    let pooled = group_change(
        "all groups".to_string(),
        &all_before,
        &all_after,
        options.confidence,
        options.tolerance,
    );
    let summaries = |side: &[Vec<f64>]| -> Vec<Summary> {
        kept.iter()
            .map(|&g| Summary::from_slice(&side[g]))
            .collect()
    };
    let too_few_groups = || {
        Unavailable::new(format!(
            "needs at least two {} levels with values on both sides ({} compared)",
            series.factor,
            kept.len()
        ))
    };
    let (share_before, share_after, two_way) = if kept.len() < 2 {
        (
            Err(too_few_groups()),
            Err(too_few_groups()),
            Err(too_few_groups()),
        )
    } else {
        let cells: Vec<Vec<&[f64]>> = kept
            .iter()
            .map(|&g| vec![before[g].as_slice(), after[g].as_slice()])
            .collect();
        (
            one_way_random(&summaries(&before), options.confidence),
            one_way_random(&summaries(&after), options.confidence),
            two_way_values(&cells, options.alpha),
        )
    };
    Ok(Comparison {
        change_ms,
        groups,
        pooled,
        left_out,
        share_before,
        share_after,
        two_way,
        notes,
    })
}

/// Change-point scan results for one group.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupScan {
    /// Group name.
    pub group: String,
    /// Values scanned (in time order).
    pub n: usize,
    /// The scan, or why it could not run.
    pub scan: Stat<Scan>,
    /// For each change point (same order): the time of the first value after the change.
    pub change_ms: Vec<i64>,
    /// For each change point: time range covered by the bootstrap interval of the index
    /// (first and last possible first-after values).
    pub change_range_ms: Vec<(i64, i64)>,
}

/// Runs the change-point scan on each group's values in time order.
pub fn scan_groups(series: &GroupedSeries, options: &ScanOptions) -> Result<Vec<GroupScan>> {
    check_series(series)?;
    let mut rows: Vec<Vec<(i64, f64)>> = vec![Vec::new(); series.groups.len()];
    for ((&v, &t), &g) in series.values.iter().zip(series.ts_ms).zip(series.group_idx) {
        rows[g as usize].push((t, v));
    }
    let mut out = Vec::new();
    for (g, mut points) in rows.into_iter().enumerate() {
        if points.is_empty() {
            continue;
        }
        points.sort_by_key(|p| p.0);
        let values: Vec<f64> = points.iter().map(|p| p.1).collect();
        let scan = changepoint::scan(&values, options);
        let (change_ms, change_range_ms) = match &scan {
            Ok(s) => (
                s.change_points.iter().map(|c| points[c.index].0).collect(),
                s.change_points
                    .iter()
                    .map(|c| {
                        let hi = c.index_high.min(points.len() - 1);
                        (points[c.index_low.min(hi)].0, points[hi].0)
                    })
                    .collect(),
            ),
            Err(_) => (Vec::new(), Vec::new()),
        };
        out.push(GroupScan {
            group: series.groups[g].clone(),
            n: values.len(),
            scan,
            change_ms,
            change_range_ms,
        });
    }
    Ok(out)
}

/// Converts ms since the epoch to a UTC instant (None when out of range).
pub fn instant(ms: i64) -> Option<DateTime<Utc>> {
    Utc.timestamp_millis_opt(ms).single()
}

// ---------------------------------------------------------------------------------------------
// Store-facing entry point

/// What to compare against.
#[derive(Debug, Clone, PartialEq)]
pub enum Target {
    /// A logged event, by id: its time is the change.
    Event(i64),
    /// A change time given directly.
    At(DateTime<Utc>),
    /// No change time: scan `[start, end)` for change points.
    Scan {
        /// Window start.
        start: DateTime<Utc>,
        /// Window end (exclusive).
        end: DateTime<Utc>,
    },
}

/// One investigation request.
#[derive(Debug, Clone)]
pub struct Request {
    /// Characteristic name.
    pub characteristic: String,
    /// Grouping factor name.
    pub factor: String,
    /// The change (or the scan window).
    pub target: Target,
    /// Window before the change.
    pub before: chrono::Duration,
    /// Window after the change.
    pub after: chrono::Duration,
    /// Before/after settings.
    pub compare: CompareOptions,
    /// Scan settings.
    pub scan: ScanOptions,
}

/// What was found.
#[derive(Debug, Clone)]
pub enum Outcome {
    /// Before/after comparison at a change time.
    BeforeAfter(Box<Comparison>),
    /// Change-point scan per group, with the logged events nearest each change point
    /// (`nearest[group][change point]`, closest first, at most 3).
    Scan {
        /// Per-group scans.
        scans: Vec<GroupScan>,
        /// Nearest events.
        nearest: Vec<Vec<Vec<Event>>>,
    },
}

/// The result of [`investigate`].
#[derive(Debug, Clone)]
pub struct Investigation {
    /// The characteristic as stored (name, unit, limits).
    pub characteristic: crate::config::CharacteristicConfig,
    /// The exact origin of the offsets.
    pub origin: crate::stats::decimal::Decimal,
    /// Grouping factor.
    pub factor: String,
    /// Window start.
    pub start: DateTime<Utc>,
    /// Window end (exclusive).
    pub end: DateTime<Utc>,
    /// The event named, if any.
    pub event: Option<Event>,
    /// The results.
    pub outcome: Outcome,
    /// What the unit of the comparison is when it is not the single value (subgroup means).
    pub units: Option<String>,
}

/// Whether an event concerns a group: no characteristic or this one, and no scope on the factor
/// or this level.
fn concerns(event: &Event, characteristic: &str, factor: &str, level: &str) -> bool {
    let characteristic_ok = event
        .characteristic
        .as_deref()
        .is_none_or(|c| c == characteristic);
    let on_factor: Vec<&(String, String)> =
        event.scope.iter().filter(|(f, _)| f == factor).collect();
    characteristic_ok && (on_factor.is_empty() || on_factor.iter().any(|(_, l)| l == level))
}

/// Loads the window from the store and runs the comparison or the scan.
///
/// Errors: unknown characteristic or factor (with the known names), unknown event id, an empty
/// window, and every case [`compare`] rejects (the change outside the data, too little data on one
/// side).
pub fn investigate(store: &dyn PlantStore, request: &Request) -> Result<Investigation> {
    let (event, start, end, change) = match &request.target {
        Target::Event(id) => {
            let events = store.events_including_removed()?;
            let event = events.into_iter().find(|e| e.id == *id).ok_or_else(|| {
                Error::Usage(format!(
                    "no logged event has id {id} (see `samewise event list`)"
                ))
            })?;
            if event.removed.is_some() {
                return Err(Error::Usage(format!(
                    "event {id} was removed (see `samewise event history {id}`); investigate \
                     with --at TIME instead"
                )));
            }
            let at = event.at;
            (
                Some(event),
                at - request.before,
                at + request.after,
                Some(at),
            )
        }
        Target::At(at) => (None, *at - request.before, *at + request.after, Some(*at)),
        Target::Scan { start, end } => (None, *start, *end, None),
    };
    if start >= end {
        return Err(Error::Usage(format!(
            "the window {} to {} is empty",
            format_ms(start.timestamp_millis()),
            format_ms(end.timestamp_millis())
        )));
    }
    let frame = store.load_period(
        start,
        end,
        Some(std::slice::from_ref(&request.characteristic)),
    )?;
    let f = frame
        .factors
        .iter()
        .position(|f| f.name == request.factor)
        .ok_or_else(|| {
            unknown_name(
                NameKind::Factor,
                &request.factor,
                frame.factors.iter().map(|f| f.name.as_str()),
                "the database",
            )
        })?;
    // The store refused an unknown characteristic already; a frame holds the one asked for.
    let cf = frame.characteristics.into_iter().next().ok_or_else(|| {
        Error::Database(format!(
            "the store returned no data frame for the characteristic \"{}\"",
            request.characteristic
        ))
    })?;
    let levels = &frame.factors[f].levels;
    // With subgroups (every value in one), the unit is the mean of each level within each
    // subgroup, at the subgroup's first instant: parts of one shot share its deviation.
    let (values, ts_ms, group_idx, units) = match subgroup_means(&cf, f) {
        Some((v, t, g, n)) => {
            let note = format!(
                "on {n} subgroup means (the subgroup is the unit: parts measured together share its deviation)"
            );
            (v, t, g, Some(note))
        }
        None => (
            cf.values.clone(),
            cf.ts_ms.clone(),
            cf.level_idx[f].clone(),
            None,
        ),
    };
    let series = GroupedSeries {
        characteristic: &request.characteristic,
        factor: &request.factor,
        values: &values,
        ts_ms: &ts_ms,
        group_idx: &group_idx,
        groups: levels,
    };
    if cf.values.is_empty() {
        return Err(Error::NotEnoughData {
            characteristic: request.characteristic.clone(),
            reason: format!(
                "no values between {} and {}",
                format_ms(start.timestamp_millis()),
                format_ms(end.timestamp_millis())
            ),
        });
    }
    let outcome = match change {
        Some(at) => Outcome::BeforeAfter(Box::new(compare(
            &series,
            at.timestamp_millis(),
            &request.compare,
        )?)),
        None => {
            let scans = scan_groups(&series, &request.scan)?;
            let events = store.events(Some(start), Some(end))?;
            let nearest = scans
                .iter()
                .map(|g| {
                    g.change_ms
                        .iter()
                        .map(|&ms| {
                            let mut near: Vec<Event> = events
                                .iter()
                                .filter(|e| {
                                    concerns(e, &request.characteristic, &request.factor, &g.group)
                                })
                                .cloned()
                                .collect();
                            near.sort_by_key(|e| (e.at.timestamp_millis() - ms).abs());
                            near.truncate(3);
                            near
                        })
                        .collect()
                })
                .collect();
            Outcome::Scan { scans, nearest }
        }
    };
    Ok(Investigation {
        characteristic: cf.characteristic,
        origin: cf.origin,
        factor: request.factor.clone(),
        start,
        end,
        event,
        outcome,
        units,
    })
}

/// The means of each level of factor `f` within each subgroup, at the subgroup's first instant,
/// with their count; `None` when the frame has no subgroups or a value lacks one.
#[allow(clippy::type_complexity)]
fn subgroup_means(
    cf: &crate::storage::CharacteristicFrame,
    f: usize,
) -> Option<(Vec<f64>, Vec<i64>, Vec<u32>, usize)> {
    use crate::storage::NO_SUBGROUP;
    if cf.subgroup_idx.is_empty() || cf.subgroup_idx.contains(&NO_SUBGROUP) {
        return None;
    }
    let mut cell_of: std::collections::HashMap<(u32, u32), usize> = Default::default();
    let mut sums: Vec<(f64, u32, i64, u32)> = Vec::new();
    for (row, (&sg, &level)) in cf.subgroup_idx.iter().zip(&cf.level_idx[f]).enumerate() {
        let cell = *cell_of.entry((sg, level)).or_insert_with(|| {
            sums.push((0.0, 0, cf.ts_ms[row], level));
            sums.len() - 1
        });
        let c = &mut sums[cell];
        c.0 += cf.values[row];
        c.1 += 1;
        c.2 = c.2.min(cf.ts_ms[row]);
    }
    let n = sums.len();
    Some((
        sums.iter().map(|c| c.0 / c.1 as f64).collect(),
        sums.iter().map(|c| c.2).collect(),
        sums.iter().map(|c| c.3).collect(),
        n,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::changepoint::SplitMix64;

    const HOUR: i64 = 3_600_000;

    /// Invented data: 3 machines, one value per machine per hour for 40 hours; machine M2 shifts by
    /// +0.05 from hour 20 on. Noise from SplitMix64 (uniform, spread 0.02).
    fn invented() -> (Vec<f64>, Vec<i64>, Vec<u32>, Vec<String>) {
        let mut rng = SplitMix64::new(11);
        let mut values = Vec::new();
        let mut ts = Vec::new();
        let mut idx = Vec::new();
        for hour in 0..40i64 {
            for m in 0..3u32 {
                let noise = (rng.next_f64() - 0.5) * 0.04;
                let shift = if m == 1 && hour >= 20 { 0.05 } else { 0.0 };
                values.push(noise + shift + 0.01 * m as f64);
                ts.push(hour * HOUR + m as i64);
                idx.push(m);
            }
        }
        let names = vec!["M1".to_string(), "M2".to_string(), "M3".to_string()];
        (values, ts, idx, names)
    }

    fn series<'a>(
        v: &'a [f64],
        t: &'a [i64],
        g: &'a [u32],
        names: &'a [String],
    ) -> GroupedSeries<'a> {
        GroupedSeries {
            characteristic: "bore_d",
            factor: "machine",
            values: v,
            ts_ms: t,
            group_idx: g,
            groups: names,
        }
    }

    #[test]
    fn shift_in_one_group_shows_in_that_group_and_the_interaction() {
        let (v, t, g, names) = invented();
        let s = series(&v, &t, &g, &names);
        let c = compare(&s, 20 * HOUR, &CompareOptions::default()).unwrap();
        assert_eq!(c.groups.len(), 3);
        let m2 = c.groups[1].mean_shift.as_ref().unwrap();
        assert!(m2.ci_low < 0.05 && 0.05 < m2.ci_high, "{m2:?}");
        assert!(m2.p < 1e-6);
        for other in [&c.groups[0], &c.groups[2]] {
            let s = other.mean_shift.as_ref().unwrap();
            assert!(s.p > 0.001, "{s:?}");
        }
        let tw = c.two_way.as_ref().unwrap();
        let inter = tw.type2.interaction.as_ref().unwrap();
        assert!(inter.test.as_ref().unwrap().p < 1e-6);
        assert!(tw.is_balanced);
        assert!(c.share_before.is_ok() && c.share_after.is_ok());
        // Share between groups grows after M2 moves away from the others.
        assert!(
            c.share_after.as_ref().unwrap().share_between
                > c.share_before.as_ref().unwrap().share_between
        );
        assert_eq!(c.pooled.before.n + c.pooled.after.n, 120);
    }

    #[test]
    fn change_outside_the_data_is_a_clear_error() {
        let (v, t, g, names) = invented();
        let s = series(&v, &t, &g, &names);
        let err = compare(&s, 100 * HOUR, &CompareOptions::default()).unwrap_err();
        let msg = err.to_string();
        assert!(msg.contains("outside the data"), "{msg}");
        assert!(msg.contains("bore_d"), "{msg}");
        let err = compare(&s, -HOUR, &CompareOptions::default()).unwrap_err();
        assert!(err.to_string().contains("outside the data"));
    }

    #[test]
    fn too_little_data_on_one_side() {
        let (v, t, g, names) = invented();
        // Only the very first value (hour 0, M1) lies before hour 0 + 1 ms.
        let s = series(&v, &t, &g, &names);
        let err = compare(&s, 1, &CompareOptions::default()).unwrap_err();
        let msg = err.to_string();
        assert!(msg.contains("only 1 value(s) before"), "{msg}");
        assert!(msg.contains("--before"), "{msg}");
    }

    #[test]
    fn group_on_one_side_only_is_left_out_with_a_note() {
        let (mut v, mut t, mut g, mut names) = invented();
        // M4 starts producing at hour 25: values only after a change at hour 20.
        names.push("M4".to_string());
        for hour in 25..40i64 {
            v.push(0.0);
            t.push(hour * HOUR + 3);
            g.push(3);
        }
        let s = series(&v, &t, &g, &names);
        let c = compare(&s, 20 * HOUR, &CompareOptions::default()).unwrap();
        assert_eq!(c.groups.len(), 3);
        assert_eq!(
            c.left_out,
            vec![LeftOut {
                group: "M4".to_string(),
                n_before: 0,
                n_after: 15
            }]
        );
        assert!(c.notes[0].contains("machine M4: no values before the change"));
        assert_eq!(c.two_way.as_ref().unwrap().n_a, 3);
    }

    #[test]
    fn only_one_group_compared_gives_unavailable_two_way() {
        let v = vec![1.0, 2.0, 3.0, 5.0, 6.0, 7.0];
        let t = vec![0, 1, 2, 10, 11, 12];
        let g = vec![0, 0, 0, 0, 0, 0];
        let names = vec!["L1".to_string()];
        let s = series(&v, &t, &g, &names);
        let c = compare(&s, 10, &CompareOptions::default()).unwrap();
        assert!(c.two_way.unwrap_err().reason.contains("at least two"));
        assert!(lre_ok(c.groups[0].mean_shift.as_ref().unwrap().shift, 4.0));
    }

    fn lre_ok(x: f64, c: f64) -> bool {
        crate::stats::lre(x, c) > 12.0
    }

    #[test]
    fn scan_finds_the_shift_time_in_the_moving_group() {
        let (v, t, g, names) = invented();
        let s = series(&v, &t, &g, &names);
        let scans = scan_groups(&s, &ScanOptions::default()).unwrap();
        assert_eq!(scans.len(), 3);
        let m2 = &scans[1];
        assert_eq!(m2.change_ms.len(), 1, "{:?}", m2.scan);
        // Stated tolerance: within 3 hours of the invented change at hour 20.
        assert!((m2.change_ms[0] - (20 * HOUR + 1)).abs() <= 3 * HOUR);
        assert!(m2.change_range_ms[0].0 <= m2.change_ms[0]);
    }

    #[test]
    fn mismatched_columns_are_an_error_not_a_panic() {
        let names = vec!["A".to_string()];
        let s = GroupedSeries {
            characteristic: "x",
            factor: "f",
            values: &[1.0, 2.0],
            ts_ms: &[1],
            group_idx: &[0, 0],
            groups: &names,
        };
        assert!(compare(&s, 1, &CompareOptions::default()).is_err());
        let s = GroupedSeries {
            group_idx: &[0, 5],
            ts_ms: &[1, 2],
            ..s
        };
        assert!(scan_groups(&s, &ScanOptions::default()).is_err());
    }
}
