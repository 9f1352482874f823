//! Running a check against the store: load the period a few characteristics at a time while
//! worker threads analyse it ([`super::check_frames`]), and record it as a run (one transaction
//! at the end, see `storage::runs`). Also the [`EngineRunner`] through which the scheduler runs
//! periods.

use std::collections::HashSet;
use std::sync::Arc;

use chrono::{DateTime, Utc};

use super::{check_frames, worker_count, CheckOptions, Frame, FrameCharacteristic, FrameFactor};
use crate::calendar::PlantCalendar;
use crate::config::{Config, ScheduleConfig};
use crate::model::{Period, PeriodKind};
use crate::schedule::lifecycle::{self, Acquired, Finished, Lease};
use crate::schedule::PeriodRunner;
use crate::storage::runs::{self, RunContent, RunHeader, StoredRun};
use crate::storage::PeriodFrame;
use crate::storage::{MeasurementStore, PlantStore};
use crate::Result;

/// A frame from the store's period frame (moves the columns, no copy).
pub fn frame_from(pf: PeriodFrame) -> Frame {
    Frame {
        factors: pf
            .factors
            .into_iter()
            .map(|f| FrameFactor {
                name: f.name,
                levels: f.levels,
            })
            .collect(),
        characteristics: pf
            .characteristics
            .into_iter()
            .map(|c| FrameCharacteristic {
                characteristic: c.characteristic,
                origin: c.origin,
                values: c.values,
                level_idx: c.level_idx,
                subgroup: c.subgroup_idx,
            })
            .collect(),
    }
}

/// Flagged (characteristic, factor) pairs of the latest complete run of the period before
/// `period` (`None` when it has no complete run). Ranges have no previous period of the same kind.
pub fn previous_flags(
    store: &dyn PlantStore,
    calendar: &PlantCalendar,
    period: &Period,
) -> Result<Option<HashSet<(String, String)>>> {
    if period.kind == PeriodKind::Range {
        return Ok(None);
    }
    let prev = calendar.previous_period(period);
    Ok(store
        .flagged_tests(prev.kind.as_str(), &prev.label)?
        .map(|v| v.into_iter().collect()))
}

/// Characteristics per `load_period` call of [`run_check`]: each call rebuilds the level-set
/// look-up of its frame, so parts of one characteristic cost about a quarter more CPU time in
/// loading than parts of five (measured by `cargo bench --bench check`, month of the 10M-row
/// plant: 10.4 s against 7.8 s for one call of all fifty, 9.8 s for the whole check in parts of
/// five), while a part of five of that month holds about 35 MB of values.
pub const CHARACTERISTICS_PER_PART: usize = 5;

/// Runs the check of one period (nothing is written).
///
/// The period is loaded in parts of [`CHARACTERISTICS_PER_PART`] characteristics
/// ([`MeasurementStore::load_period`] of their names) on the calling thread while worker threads analyse
/// the parts already loaded ([`check_frames`]): loading and statistics overlap, and memory holds
/// only the parts in flight instead of the whole period. The result is the same as checking one
/// frame of every characteristic (each test uses only the levels present in its values).
pub fn run_check(
    store: &dyn PlantStore,
    config: &Config,
    period: &Period,
    options: &CheckOptions,
) -> Result<RunContent> {
    let calendar = PlantCalendar::new(config);
    let names: Vec<String> = match &options.characteristics {
        Some(names) => names.clone(),
        None => store
            .characteristics()?
            .into_iter()
            .filter(|c| c.config.is_active)
            .map(|c| c.config.name)
            .collect(),
    };
    let prev = previous_flags(store, &calendar, period)?;
    let chunks: Vec<&[String]> = names.chunks(CHARACTERISTICS_PER_PART).collect();
    // A second reader only where it can help (two workers, two parts) and the backend has one.
    let opener = if worker_count(options) >= 2 && chunks.len() >= 2 {
        store.reader_opener()
    } else {
        None
    };
    let Some(opener) = opener else {
        let parts = chunks.iter().map(|chunk| load_part(store, period, chunk));
        return check_frames(parts, options, prev.as_ref());
    };
    // Loading is the longest stage (one core's worth of database reads and level look-ups), so
    // a second reader (opened on that thread) loads the odd-numbered parts on its own thread while this one loads the
    // even ones; the parts reach the workers in their order either way, so the run is the same.
    // Each part is one read of the database, as with a single loader.
    std::thread::scope(|scope| {
        let (tx, rx) = std::sync::mpsc::sync_channel(1);
        let odd: Vec<&[String]> = chunks.iter().skip(1).step_by(2).copied().collect();
        scope.spawn(move || {
            let second = match opener() {
                Ok(s) => s,
                Err(e) => {
                    let _ = tx.send(Err(e));
                    return;
                }
            };
            for chunk in odd {
                // A closed channel means the check stopped early (an error elsewhere).
                if tx.send(load_part(&*second, period, chunk)).is_err() {
                    return;
                }
            }
        });
        let parts = chunks.iter().enumerate().map(|(i, chunk)| {
            if i % 2 == 0 {
                load_part(store, period, chunk)
            } else {
                rx.recv().unwrap_or_else(|_| {
                    Err(crate::Error::Database(
                        "the second loading thread stopped without a result".to_string(),
                    ))
                })
            }
        });
        let result = check_frames(parts, options, prev.as_ref());
        drop(rx);
        result
    })
}

/// One part of a period, loaded and turned into a frame. Generic rather than over
/// `&dyn MeasurementStore`, so that a `&dyn PlantStore` needs no trait upcasting (Rust 1.86;
/// `rust-version` is 1.85).
fn load_part<S: MeasurementStore + ?Sized>(
    store: &S,
    period: &Period,
    chunk: &[String],
) -> Result<Arc<Frame>> {
    store
        .load_period(period.start, period.end, Some(chunk))
        .map(|pf| Arc::new(frame_from(pf)))
}

/// The run row for a period.
pub fn header(
    config: &Config,
    period: &Period,
    schedule: Option<&str>,
    options: &CheckOptions,
) -> RunHeader {
    RunHeader {
        period_kind: period.kind,
        period_label: period.label.clone(),
        period_start_ms: period.start.timestamp_millis(),
        period_end_ms: period.end.timestamp_millis(),
        schedule: schedule.map(str::to_string),
        config_hash: config.source_hash.clone(),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        fdr_method: options.fdr_method,
        fdr_level: options.fdr_level,
    }
}

/// Runs and records a check by hand (`samewise check`): a `running` row, the analysis, then all
/// results in one transaction; on failure the run is marked failed with the error, and the error
/// is returned. `now` gives the start and end instants.
pub fn check_and_record(
    store: &mut dyn PlantStore,
    config: &Config,
    period: &Period,
    options: &CheckOptions,
    now: &dyn Fn() -> DateTime<Utc>,
) -> Result<(StoredRun, RunContent)> {
    let head = header(config, period, None, options);
    // A run by hand holds the lease of schedule "" for its period, so a scheduler's recovery
    // never mistakes it for an abandoned run, and two checks of one period never overlap.
    let key = runs::LeaseKey {
        schedule: String::new(),
        period_kind: head.period_kind.as_str().to_string(),
        period_label: head.period_label.clone(),
    };
    let holder = crate::schedule::holder_name(now().timestamp_millis());
    let lease = Lease {
        key,
        holder: &holder,
        ttl_ms: crate::schedule::DEFAULT_LEASE_TTL.num_milliseconds(),
    };
    if let Acquired::Held(who) = lifecycle::acquire(&*store, &lease, now().timestamp_millis())? {
        return Err(crate::Error::Usage(format!(
            "another check of {} is running (lease holder {who}; its lease expires within {} \
             minutes unless renewed)",
            period.label,
            crate::schedule::DEFAULT_LEASE_TTL.num_minutes()
        )));
    }
    let clock = || now().timestamp_millis();
    let finished = lifecycle::holding(store, &lease, |store| {
        store.abandon_running(&lease.key, clock())?;
        lifecycle::run_period(store, &lease, &head, &clock, &mut |_| {}, |store| {
            run_check(store, config, period, options)
        })
    })?;
    match finished {
        Finished::Completed(run, content) => Ok((run, content)),
        Finished::Failed(_, e) => Err(e),
    }
}

/// The engine as the scheduler's [`PeriodRunner`]: per schedule, its characteristics, factors and
/// FDR level over the configuration's `[check]` settings.
pub struct EngineRunner<'a> {
    config: &'a Config,
}

impl<'a> EngineRunner<'a> {
    /// A runner for `config`.
    pub fn new(config: &'a Config) -> Self {
        EngineRunner { config }
    }

    /// The check options of a schedule.
    pub fn options_for(&self, schedule: &ScheduleConfig) -> CheckOptions {
        let mut o = CheckOptions::from_config(self.config);
        if let Some(level) = schedule.fdr_level {
            o.fdr_level = level;
        }
        if !schedule.characteristics.is_empty() {
            o.characteristics = Some(schedule.characteristics.clone());
        }
        if !schedule.factors.is_empty() {
            o.factors = Some(schedule.factors.clone());
        }
        o
    }
}

impl PeriodRunner for EngineRunner<'_> {
    fn first_measurement(&mut self, store: &dyn PlantStore) -> Result<Option<DateTime<Utc>>> {
        Ok(store
            .first_measurement_ms()?
            .and_then(DateTime::from_timestamp_millis))
    }

    fn header(&self, schedule: &ScheduleConfig, period: &Period) -> RunHeader {
        header(
            self.config,
            period,
            Some(&schedule.name),
            &self.options_for(schedule),
        )
    }

    fn compute(
        &mut self,
        store: &dyn PlantStore,
        schedule: &ScheduleConfig,
        period: &Period,
    ) -> Result<RunContent> {
        run_check(store, self.config, period, &self.options_for(schedule))
    }
}
