//! From daily flags to findings: which group is off, by how much, since when, after which
//! logged change, and whether it still flags.
//!
//! [`update_findings`] rebuilds the findings of one period kind from the stored history (the
//! latest complete run of every period) and saves what changed. The rule:
//! - a flag (state "differs" or "differs and material") of one characteristic x factor whose
//!   standing-out group is L belongs to the finding (kind, characteristic, factor, L);
//! - every later checked period of that test with a verdict in which L is not the standing-out
//!   group is quiet; `[findings] close_after` quiet periods in a row close the finding, a
//!   shorter quiet stretch keeps it open and joins the flags around it; a period in which L
//!   still stands out but is not flagged (an effect near the detection limit) neither counts as
//!   a flag nor as quiet, and neither do periods without a verdict (too little data, too few
//!   values to compare);
//! - a finding flagged in fewer periods than `[findings] confirm_after` (default 2) is on watch:
//!   one flag may be one of the false discoveries the FDR level allows, so it is kept but neither
//!   listed by default nor alerted; with the next flag it is confirmed (open);
//! - a closed finding whose group flags again is reopened (its current episode starts there);
//! - the onset: a change-point scan (binary segmentation, `stats::changepoint`) of the standing-
//!   out group's mean minus the other groups' mean, period by period, over up to
//!   [`ONSET_WINDOW`] periods before the episode and through its last flag; when it finds a
//!   change, the onset is the change point nearest the first flag of the episode, or, when a
//!   two-phase regression (level, then a linear drift; `stats::changepoint::trend_onset`) fits
//!   the series better than the best step, the start of that drift; each with its bootstrap
//!   interval; without a change, the start of the first flagged period;
//! - the nearest logged process change in scope (an event for this characteristic or for every
//!   one, scoped to this factor's level or to nothing) before the end of the period in which the
//!   onset's interval ends;
//! - effects as stored by the runs: the standing-out group's mean minus the grand mean, in units,
//!   in within-group SDs and in % of the tolerance, now (the last flag) and at the episode's peak.

use std::collections::HashMap;

use chrono::{DateTime, Utc};

use crate::config::Config;
use crate::model::{Finding, FindingStatus, PeriodKind};
use crate::stats::changepoint::{scan, step_rss, trend_onset, ScanOptions};
use crate::storage::FlagHistoryRow;
use crate::storage::PlantStore;
use crate::Result;

use crate::results::TestState;

/// Periods before an episode's first flag that the onset scan looks at.
pub const ONSET_WINDOW: usize = 60;

/// What [`update_findings`] changed.
#[derive(Debug, Clone, Default)]
pub struct FindingsUpdate {
    /// Findings confirmed (open) for the first time; a finding on watch is not new yet.
    pub new: Vec<Finding>,
    /// Open findings that closed, and closed ones confirmed again (reopened).
    pub changed: Vec<Finding>,
    /// Findings on watch: flagged in fewer periods than confirm them.
    pub watch: Vec<Finding>,
    /// Every open finding of the kind after the update.
    pub open: Vec<Finding>,
}

/// One episode of a (test, level) in the history being walked.
#[derive(Debug, Clone)]
struct Walk {
    first: usize,
    episode: usize,
    last: usize,
    n_flagged: u32,
    n_weak: u32,
    quiet: u32,
    reopened: u32,
    closed: bool,
}

fn is_verdict(state: TestState) -> bool {
    matches!(
        state,
        TestState::DiffersMaterial | TestState::Differs | TestState::NoEvidence
    )
}

/// Rebuilds the findings of `kind` from the stored run history and saves the new and changed
/// ones; `now` stamps them.
pub fn update_findings(
    store: &mut dyn PlantStore,
    config: &Config,
    kind: PeriodKind,
    now: DateTime<Utc>,
) -> Result<FindingsUpdate> {
    let close_after = config.findings.close_after;
    let history = store.flag_history(kind)?;
    let existing: HashMap<(String, String, String), Finding> = store
        .findings(Some(kind))?
        .into_iter()
        .map(|f| {
            (
                (f.characteristic.clone(), f.factor.clone(), f.level.clone()),
                f,
            )
        })
        .collect();
    let events = store.events(None, None)?;
    let mut update = FindingsUpdate::default();
    let mut to_save = Vec::new();
    for test in
        history.chunk_by(|a, b| a.characteristic == b.characteristic && a.factor == b.factor)
    {
        let mut walks: Vec<(String, Walk)> = Vec::new();
        for (i, row) in test.iter().enumerate() {
            if !is_verdict(row.state) {
                continue;
            }
            let flagged_level = row
                .stands_out
                .level
                .as_deref()
                .filter(|_| row.state.is_flag());
            for (level, w) in walks.iter_mut() {
                // Quiet: the group is not flagged, and not even the standing-out one (a period
                // where it still stands out, unconfirmed, neither counts nor breaks the finding).
                let still_stands_out = row.stands_out.level.as_deref() == Some(level.as_str());
                if Some(level.as_str()) != flagged_level && !still_stands_out && !w.closed {
                    w.quiet += 1;
                    if w.quiet >= close_after {
                        w.closed = true;
                    }
                }
            }
            let Some(level) = flagged_level else {
                continue;
            };
            let weak = u32::from(row.recommend_kruskal);
            match walks.iter_mut().find(|(l, _)| l == level) {
                Some((_, w)) if !w.closed => {
                    w.last = i;
                    w.n_flagged += 1;
                    w.n_weak += weak;
                    w.quiet = 0;
                }
                Some((_, w)) => {
                    w.reopened += 1;
                    w.episode = i;
                    w.last = i;
                    w.n_flagged = 1;
                    w.n_weak = weak;
                    w.quiet = 0;
                    w.closed = false;
                }
                None => walks.push((
                    level.to_string(),
                    Walk {
                        first: i,
                        episode: i,
                        last: i,
                        n_flagged: 1,
                        n_weak: weak,
                        quiet: 0,
                        reopened: 0,
                        closed: false,
                    },
                )),
            }
        }
        for (level, w) in walks {
            let key = (
                test[0].characteristic.clone(),
                test[0].factor.clone(),
                level.clone(),
            );
            let old = existing.get(&key);
            let mut f = finding_of(config, kind, test, &level, &w, old, now);
            let unchanged = old.is_some_and(|o| {
                o.status == f.status
                    && o.episode_label == f.episode_label
                    && o.last_label == f.last_label
                    && o.times_reopened == f.times_reopened
                    && o.quiet_periods == f.quiet_periods
            });
            if unchanged {
                let o = old.cloned().expect("an unchanged finding exists");
                match o.status {
                    FindingStatus::Open => update.open.push(o),
                    FindingStatus::Watch => update.watch.push(o),
                    FindingStatus::Closed => {}
                }
                continue;
            }
            let episode_moved = old.is_none_or(|o| {
                o.episode_label != f.episode_label
                    || o.last_label != f.last_label
                    || o.onset_method.is_empty()
            });
            if episode_moved {
                onset_of(store, test, &level, &w, &mut f)?;
                nearest_event(&events, &mut f);
            }
            // News: a finding confirmed (open) for the first time, one confirmed again after
            // closing, and an open one that closed. A finding on watch is not news yet.
            let became_open = f.status == FindingStatus::Open
                && old.is_none_or(|o| o.status != FindingStatus::Open);
            let is_new = became_open && f.times_reopened == 0;
            let status_changed = (became_open && f.times_reopened > 0)
                || (f.status == FindingStatus::Closed
                    && old.is_some_and(|o| o.status == FindingStatus::Open));
            to_save.push((is_new, status_changed, f));
        }
    }
    let mut findings: Vec<Finding> = to_save.iter().map(|(_, _, f)| f.clone()).collect();
    store.save_findings(&mut findings)?;
    for ((is_new, status_changed, _), f) in to_save.into_iter().zip(findings) {
        match f.status {
            FindingStatus::Open => update.open.push(f.clone()),
            FindingStatus::Watch => update.watch.push(f.clone()),
            FindingStatus::Closed => {}
        }
        if is_new {
            update.new.push(f);
        } else if status_changed {
            update.changed.push(f);
        }
    }
    update
        .open
        .sort_by(|a, b| b.last_start.cmp(&a.last_start).then(a.id.cmp(&b.id)));
    Ok(update)
}

/// The finding of one walked (test, level), over the stored one's number and notes.
fn finding_of(
    config: &Config,
    kind: PeriodKind,
    test: &[FlagHistoryRow],
    level: &str,
    w: &Walk,
    old: Option<&Finding>,
    now: DateTime<Utc>,
) -> Finding {
    let first = &test[w.first];
    let episode = &test[w.episode];
    let last = &test[w.last];
    // The peak: the largest effect of the episode's flags of this level.
    let peak = test[w.episode..=w.last]
        .iter()
        .filter(|r| r.state.is_flag() && r.stands_out.level.as_deref() == Some(level))
        .filter_map(|r| r.stands_out.diff.map(|d| (d, r)))
        .max_by(|a, b| a.0.abs().total_cmp(&b.0.abs()));
    let unit = config
        .characteristic(&first.characteristic)
        .map(|c| c.unit.clone())
        .unwrap_or_default();
    let mut f = Finding {
        id: old.map_or(0, |o| o.id),
        period_kind: kind,
        characteristic: first.characteristic.clone(),
        factor: first.factor.clone(),
        level: level.to_string(),
        status: if w.closed {
            FindingStatus::Closed
        } else if w.n_flagged < config.findings.confirm_after {
            FindingStatus::Watch
        } else {
            FindingStatus::Open
        },
        times_reopened: w.reopened,
        first_label: first.label.clone(),
        first_start: first.start,
        episode_label: episode.label.clone(),
        episode_start: episode.start,
        last_label: last.label.clone(),
        last_start: last.start,
        last_end: last.end,
        n_flagged: w.n_flagged,
        n_weak: w.n_weak,
        quiet_periods: w.quiet,
        unit,
        effect_now: last.stands_out.diff,
        effect_now_sd: last.stands_out.sd_units,
        effect_now_pct: last.stands_out.pct_tolerance,
        within_sd: last.resid_sd,
        peak_effect: peak.map(|p| p.0),
        peak_pct: peak.and_then(|p| p.1.stands_out.pct_tolerance),
        peak_label: peak.map(|p| p.1.label.clone()),
        onset: None,
        onset_low: None,
        onset_high: None,
        onset_method: String::new(),
        event_id: None,
        event_at: None,
        event_note: None,
        created: old.map_or(now, |o| o.created),
        updated: now,
    };
    if let Some(o) = old {
        f.onset = o.onset;
        f.onset_low = o.onset_low;
        f.onset_high = o.onset_high;
        f.onset_method = o.onset_method.clone();
        f.event_id = o.event_id;
        f.event_at = o.event_at;
        f.event_note = o.event_note.clone();
    }
    f
}

/// The onset of the episode: a change-point scan of the group's offset from the other groups.
fn onset_of(
    store: &dyn PlantStore,
    test: &[FlagHistoryRow],
    level: &str,
    w: &Walk,
    f: &mut Finding,
) -> Result<()> {
    let from = w.episode.saturating_sub(ONSET_WINDOW);
    // (period index, offset of the level's mean from the n-weighted mean of the other groups)
    let mut series: Vec<(usize, f64)> = Vec::new();
    for (i, row) in test.iter().enumerate().take(w.last + 1).skip(from) {
        if !is_verdict(row.state) {
            continue;
        }
        let groups = store.group_means(row.run_id, row.test_idx)?;
        let Some(own) = groups.iter().find(|g| g.0 == level) else {
            continue;
        };
        let (n_rest, sum_rest) = groups
            .iter()
            .filter(|g| g.0 != level)
            .fold((0u64, 0.0), |(n, s), g| (n + g.1, s + g.1 as f64 * g.2));
        if n_rest > 0 {
            series.push((i, own.2 - sum_rest / n_rest as f64));
        }
    }
    let episode_pos = series.iter().position(|&(i, _)| i >= w.episode);
    let values: Vec<f64> = series.iter().map(|s| s.1).collect();
    let options = ScanOptions {
        min_segment: 3,
        max_change_points: 3,
        ..ScanOptions::default()
    };
    let found = match (episode_pos, scan(&values, &options)) {
        (Some(pos), Ok(s)) => s
            .change_points
            .into_iter()
            .min_by_key(|c| c.index.abs_diff(pos)),
        _ => None,
    };
    let at = |k: usize| test[series[k.min(series.len() - 1)].0].start;
    // A change was found: is it a step or the start of a trend (a drift growing after a
    // change)? The model with the smaller residual sum of squares places the onset.
    let trend = found.as_ref().and_then(|_| {
        let t = trend_onset(&values, 0, &options).ok()?;
        let step = step_rss(&values, options.min_segment)?;
        (t.rss < step && t.slope.signum() == f.effect_now.unwrap_or(0.0).signum()).then_some(t)
    });
    match (found, trend) {
        (Some(c), Some(t)) => {
            f.onset = Some(at(t.index + 1));
            f.onset_low = Some(at(t.index_low + 1));
            f.onset_high = Some(at(t.index_high + 1));
            f.onset_method = format!(
                "start of a trend in the group's offset from the others over {} periods (two-phase regression: level, then a linear drift; it fits better than a step; the change-point scan's p = {:.3})",
                values.len(),
                c.p
            );
        }
        (Some(c), None) => {
            f.onset = Some(at(c.index));
            f.onset_low = Some(at(c.index_low));
            f.onset_high = Some(at(c.index_high));
            f.onset_method = format!(
                "change-point scan of the group's offset from the others over {} periods ({}; p = {:.3})",
                values.len(),
                crate::stats::changepoint::METHOD,
                c.p
            );
        }
        (None, _) => {
            f.onset = Some(f.episode_start);
            f.onset_low = None;
            f.onset_high = None;
            f.onset_method = format!(
                "start of the first flagged period (the change-point scan of {} periods found no change)",
                values.len()
            );
        }
    }
    Ok(())
}

/// The latest logged event in scope before the end of the period in which the onset's interval
/// (or the onset) ends.
fn nearest_event(events: &[crate::storage::Event], f: &mut Finding) {
    // Up to the end of the period the onset (or its interval) ends in: with weekly periods a
    // change logged on the Monday falls inside the week the onset is placed at.
    let Some(until) = f
        .onset_high
        .or(f.onset)
        .map(|t| t + (f.last_end - f.last_start))
    else {
        return;
    };
    let in_scope = |e: &crate::storage::Event| {
        e.characteristic
            .as_deref()
            .is_none_or(|c| c == f.characteristic)
            && (e.scope.is_empty()
                || e.scope
                    .iter()
                    .any(|(factor, level)| factor == &f.factor && level == &f.level))
    };
    let nearest = events
        .iter()
        .filter(|e| e.at <= until && in_scope(e))
        .max_by_key(|e| e.at);
    f.event_id = nearest.map(|e| e.id);
    f.event_at = nearest.map(|e| e.at);
    f.event_note = nearest.map(|e| e.note.clone());
}
