//! The scheduler: which periods are due at a given `now` (time is always an argument, through a
//! [`Clock`]), catch-up of missed periods in order, and leases so that no period runs twice at
//! once.
//!
//! Rules:
//! - A schedule's periods start with the period containing the first measurement (or a start
//!   given by the caller) and count up to the last period whose `end + delay <= now`.
//! - A period is *due* when the schedule has no complete run of it. Due periods of all schedules
//!   run in order of `end + delay` (then schedule order), so a catch-up after downtime replays
//!   the missed periods oldest first.
//! - Before running a period the scheduler takes its lease (`RunStore::take_lease`, one
//!   atomic statement; `lifecycle` holds and releases it). A period whose lease is held by someone else is skipped for this pass.
//!   With the lease held it recovers abandoned runs, re-checks that the period is still due
//!   (another scheduler may have just finished it) and runs it.
//! - A run is written in one transaction at its end (see `storage::runs`); a failure is stored
//!   with its error and the period stays due, so the next pass retries it.
//! - A stop request (SIGINT/SIGTERM in `cli`) is honoured between periods: the current run is
//!   finished and written, nothing is left half written.
//!
//! Start reading at [`run_pass`].

pub mod clock;
pub mod lifecycle;

use std::sync::atomic::{AtomicBool, Ordering};

use chrono::{DateTime, Duration, Utc};

pub use clock::{Clock, SimulatedClock};

use crate::calendar::PlantCalendar;
use crate::config::{Config, ScheduleConfig};
use crate::model::{Period, PeriodKind};
use crate::storage::runs::{LeaseKey, RunContent, RunHeader};
use crate::storage::PlantStore;
use crate::{Error, Result};

/// How long a lease lives without a heartbeat (the scheduler renews it before and after the
/// computation of a run; a run of the largest period takes seconds).
pub const DEFAULT_LEASE_TTL: Duration = Duration::minutes(10);

/// After a failed run, `schedule run` wakes up again after this long to retry.
pub const RETRY_AFTER: Duration = Duration::minutes(15);

/// What a scheduler needs to run one period: the engine, or a stand-in in tests.
pub trait PeriodRunner {
    /// The first measurement's instant (where a schedule's periods start), `None` if no data.
    fn first_measurement(&mut self, store: &dyn PlantStore) -> Result<Option<DateTime<Utc>>>;
    /// The run row to write for `period` under `schedule`.
    fn header(&self, schedule: &ScheduleConfig, period: &Period) -> RunHeader;
    /// Computes the run's content (nothing is written by the runner).
    fn compute(
        &mut self,
        store: &dyn PlantStore,
        schedule: &ScheduleConfig,
        period: &Period,
    ) -> Result<RunContent>;
}

/// Settings of a scheduler process.
#[derive(Debug, Clone)]
pub struct SchedulerOptions {
    /// Identifies this process in leases (`host:pid:random`).
    pub holder: String,
    /// Lease lifetime without a heartbeat.
    pub lease_ttl: Duration,
    /// Count periods from here instead of from the first measurement.
    pub start: Option<DateTime<Utc>>,
}

impl SchedulerOptions {
    /// Options with the default lease lifetime.
    pub fn new(holder: impl Into<String>) -> Self {
        SchedulerOptions {
            holder: holder.into(),
            lease_ttl: DEFAULT_LEASE_TTL,
            start: None,
        }
    }
}

/// The periods of `kind` from the one containing `first` up to the last whose
/// `end + delay <= now`, in order.
pub fn periods_until(
    calendar: &PlantCalendar,
    kind: PeriodKind,
    delay: Duration,
    first: DateTime<Utc>,
    now: DateTime<Utc>,
) -> Result<Vec<Period>> {
    if kind == PeriodKind::Range {
        return Err(Error::Usage(
            "a schedule cannot use period \"range\" (use shift, day, week or month)".into(),
        ));
    }
    let mut out = Vec::new();
    let mut p = calendar.period_containing(kind, first)?;
    while p.end + delay <= now {
        let next = calendar.next_period(&p);
        out.push(p);
        p = next;
    }
    Ok(out)
}

/// The first instant after `now` at which a period of `kind` becomes due (`end + delay`).
pub fn next_due_time(
    calendar: &PlantCalendar,
    kind: PeriodKind,
    delay: Duration,
    first: DateTime<Utc>,
    now: DateTime<Utc>,
) -> Result<DateTime<Utc>> {
    let start = if first > now { first } else { now - delay };
    let mut p = calendar.period_containing(kind, start)?;
    while p.end + delay <= now {
        p = calendar.next_period(&p);
    }
    Ok(p.end + delay)
}

/// One schedule's due periods at `now` (ended + delay, without a complete run of the schedule).
pub fn due_periods(
    store: &dyn PlantStore,
    calendar: &PlantCalendar,
    schedule: &ScheduleConfig,
    first: DateTime<Utc>,
    now: DateTime<Utc>,
) -> Result<Vec<Period>> {
    let done = store.completed_labels(Some(&schedule.name), schedule.period.as_str())?;
    let done: std::collections::HashSet<String> = done.into_iter().collect();
    Ok(
        periods_until(calendar, schedule.period, schedule.delay, first, now)?
            .into_iter()
            .filter(|p| !done.contains(&p.label))
            .collect(),
    )
}

/// What happened to one (schedule, period) in a pass.
#[derive(Debug, Clone, PartialEq)]
pub enum PeriodOutcome {
    /// Run and stored as complete (run id, number of flagged tests).
    Completed(i64, usize),
    /// Run and failed; the error is stored with the run (run id, error).
    Failed(i64, String),
    /// Another scheduler holds the lease.
    Leased,
    /// Finished by someone else between listing and taking the lease.
    AlreadyDone,
}

/// One line of a pass: which schedule, which period, what happened.
#[derive(Debug, Clone, PartialEq)]
pub struct PassEntry {
    /// Schedule name.
    pub schedule: String,
    /// Period label.
    pub period: String,
    /// Outcome.
    pub outcome: PeriodOutcome,
}

/// Runs every due period of every schedule once, oldest first; returns what it did.
///
/// Stops early (after finishing the current period) when `stop` becomes true.
pub fn run_pass(
    store: &mut dyn PlantStore,
    config: &Config,
    clock: &dyn Clock,
    runner: &mut dyn PeriodRunner,
    options: &SchedulerOptions,
    stop: &AtomicBool,
    log: &mut dyn FnMut(&str),
) -> Result<Vec<PassEntry>> {
    run_pass_with_progress(
        store,
        config,
        clock,
        runner,
        options,
        stop,
        log,
        &mut |_| {},
    )
}

/// Where a pass stands, for a progress display: periods done of the total due, and the next one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PassProgress<'a> {
    /// Periods finished (run, skipped or failed).
    pub done: usize,
    /// Periods due in this pass.
    pub total: usize,
    /// The period about to run (`""` when all are done).
    pub current: &'a str,
}

/// [`run_pass`], telling `progress` before each period and after the last.
#[allow(clippy::too_many_arguments)]
pub fn run_pass_with_progress(
    store: &mut dyn PlantStore,
    config: &Config,
    clock: &dyn Clock,
    runner: &mut dyn PeriodRunner,
    options: &SchedulerOptions,
    stop: &AtomicBool,
    log: &mut dyn FnMut(&str),
    progress: &mut dyn FnMut(PassProgress<'_>),
) -> Result<Vec<PassEntry>> {
    let calendar = PlantCalendar::new(config);
    let now = clock.now();
    let Some(first) = options.start.or(runner.first_measurement(store)?) else {
        log("no measurements yet: nothing is due");
        return Ok(Vec::new());
    };
    let mut due: Vec<(DateTime<Utc>, usize, Period)> = Vec::new();
    for (idx, schedule) in config.schedules.iter().enumerate() {
        for p in due_periods(store, &calendar, schedule, first, now)? {
            due.push((p.end + schedule.delay, idx, p));
        }
    }
    due.sort_by_key(|d| (d.0, d.1));
    let mut entries = Vec::new();
    let total = due.len();
    for (done, (_, idx, period)) in due.into_iter().enumerate() {
        if stop.load(Ordering::SeqCst) {
            log("stop requested: leaving the remaining periods for the next pass");
            break;
        }
        progress(PassProgress {
            done,
            total,
            current: &period.label,
        });
        let schedule = &config.schedules[idx];
        let outcome = run_one(store, clock, runner, options, schedule, &period, log)?;
        entries.push(PassEntry {
            schedule: schedule.name.clone(),
            period: period.label.clone(),
            outcome,
        });
    }
    progress(PassProgress {
        done: entries.len(),
        total,
        current: "",
    });
    Ok(entries)
}

fn ms(t: DateTime<Utc>) -> i64 {
    t.timestamp_millis()
}

fn run_one(
    store: &mut dyn PlantStore,
    clock: &dyn Clock,
    runner: &mut dyn PeriodRunner,
    options: &SchedulerOptions,
    schedule: &ScheduleConfig,
    period: &Period,
    log: &mut dyn FnMut(&str),
) -> Result<PeriodOutcome> {
    let key = LeaseKey {
        schedule: schedule.name.clone(),
        period_kind: period.kind.as_str().to_string(),
        period_label: period.label.clone(),
    };
    let lease = lifecycle::Lease {
        key,
        holder: &options.holder,
        ttl_ms: options.lease_ttl.num_milliseconds(),
    };
    match lifecycle::acquire(&*store, &lease, ms(clock.now()))? {
        lifecycle::Acquired::Taken => {}
        lifecycle::Acquired::TookOver(old) => log(&format!(
            "{} {}: took over the lease of {old} (its process is gone)",
            schedule.name, period.label
        )),
        lifecycle::Acquired::Held(_) => {
            log(&format!(
                "{} {}: another scheduler holds the lease, skipped",
                schedule.name, period.label
            ));
            return Ok(PeriodOutcome::Leased);
        }
    }
    lifecycle::holding(store, &lease, |store| {
        run_held(store, clock, runner, schedule, period, &lease, log)
    })
}

/// [`run_one`] once the lease is held: recovery, the due check, the run.
fn run_held(
    store: &mut dyn PlantStore,
    clock: &dyn Clock,
    runner: &mut dyn PeriodRunner,
    schedule: &ScheduleConfig,
    period: &Period,
    lease: &lifecycle::Lease<'_>,
    log: &mut dyn FnMut(&str),
) -> Result<PeriodOutcome> {
    let recovered = store.recover_abandoned(ms(clock.now()))?
        + store.abandon_running(&lease.key, ms(clock.now()))?;
    if recovered > 0 {
        log(&format!(
            "marked {recovered} abandoned run(s) as failed (their process stopped mid-run)"
        ));
    }
    let done = store.completed_labels(Some(&schedule.name), period.kind.as_str())?;
    if done.contains(&period.label) {
        return Ok(PeriodOutcome::AlreadyDone);
    }
    let header = runner.header(schedule, period);
    let now = || ms(clock.now());
    let finished = lifecycle::run_period(
        store,
        lease,
        &header,
        &now,
        &mut |run| {
            log(&format!(
                "{} {}: run {} (version {}) started",
                schedule.name, period.label, run.run_id, run.version
            ));
        },
        |store| runner.compute(store, schedule, period),
    )?;
    let outcome = match finished {
        lifecycle::Finished::Completed(run, content) => {
            let flagged = content.n_flagged();
            log(&format!(
                "{} {}: run {} complete, {} tests, {} flagged",
                schedule.name,
                period.label,
                run.run_id,
                content.tests.len(),
                flagged
            ));
            PeriodOutcome::Completed(run.run_id, flagged)
        }
        lifecycle::Finished::Failed(run, e) => {
            let error = e.to_string();
            log(&format!(
                "{} {}: run {} failed: {error} (retried on the next pass)",
                schedule.name, period.label, run.run_id
            ));
            PeriodOutcome::Failed(run.run_id, error)
        }
    };
    Ok(outcome)
}

/// Whether lease holder `old` (`host:pid:...`) ran on the same host as `me` and its process no
/// longer exists (Linux: no `/proc/PID`). Any doubt counts as alive (the lease then expires).
pub fn holder_is_dead_local(old: &str, me: &str) -> bool {
    let mut o = old.split(':');
    let mut m = me.split(':');
    let (Some(old_host), Some(old_pid), Some(my_host)) = (o.next(), o.next(), m.next()) else {
        return false;
    };
    if old_host != my_host {
        return false;
    }
    match old_pid.parse::<u32>() {
        Ok(pid) => crate::process::pid_is_gone(pid),
        Err(_) => false,
    }
}

/// `host:pid:tag`, naming this process in leases (`tag` tells apart two holders of one process,
/// e.g. the start instant in nanoseconds).
pub fn holder_name(tag: i64) -> String {
    format!(
        "{}:{}:{tag}",
        crate::process::host_name(),
        std::process::id()
    )
}

/// The instant the scheduler should wake up next: the earliest next due time over all
/// schedules, or sooner when a run failed (to retry it).
pub fn next_wake(
    store: &mut dyn PlantStore,
    config: &Config,
    now: DateTime<Utc>,
    runner: &mut dyn PeriodRunner,
    options: &SchedulerOptions,
    had_failure: bool,
) -> Result<Option<DateTime<Utc>>> {
    let calendar = PlantCalendar::new(config);
    let first = match options.start.or(runner.first_measurement(store)?) {
        Some(first) => first,
        // No data yet: look again in a while.
        None => return Ok(Some(now + RETRY_AFTER)),
    };
    let mut next: Option<DateTime<Utc>> = None;
    for s in &config.schedules {
        let t = next_due_time(&calendar, s.period, s.delay, first, now)?;
        next = Some(next.map_or(t, |n| n.min(t)));
    }
    if had_failure {
        let retry = now + RETRY_AFTER;
        next = Some(next.map_or(retry, |n| n.min(retry)));
    }
    Ok(next)
}

/// Stays in the foreground: runs a pass, sleeps until the next due time, repeats, until `stop`
/// is set or the clock reaches `until` (simulations). Returns every pass entry.
#[allow(clippy::too_many_arguments)]
pub fn run_forever(
    store: &mut dyn PlantStore,
    config: &Config,
    clock: &dyn Clock,
    runner: &mut dyn PeriodRunner,
    options: &SchedulerOptions,
    stop: &AtomicBool,
    until: Option<DateTime<Utc>>,
    log: &mut dyn FnMut(&str),
) -> Result<Vec<PassEntry>> {
    let mut nothing = |_: &mut dyn PlantStore, _: &[PassEntry], _: &mut dyn FnMut(&str)| {};
    run_forever_with(
        store,
        config,
        clock,
        runner,
        options,
        stop,
        until,
        log,
        &mut nothing,
    )
}

/// What runs after each pass of [`run_forever_with`] (findings and alerts, in the CLI).
pub type AfterPass<'a> = &'a mut dyn FnMut(&mut dyn PlantStore, &[PassEntry], &mut dyn FnMut(&str));

/// [`run_forever`], calling `after_pass` with each pass's entries.
#[allow(clippy::too_many_arguments)]
pub fn run_forever_with(
    store: &mut dyn PlantStore,
    config: &Config,
    clock: &dyn Clock,
    runner: &mut dyn PeriodRunner,
    options: &SchedulerOptions,
    stop: &AtomicBool,
    until: Option<DateTime<Utc>>,
    log: &mut dyn FnMut(&str),
    after_pass: AfterPass<'_>,
) -> Result<Vec<PassEntry>> {
    if config.schedules.is_empty() {
        return Err(Error::Config {
            path: config.path.clone(),
            reason: "no [[schedule]] is configured: nothing to run".into(),
        });
    }
    let mut all = Vec::new();
    loop {
        if stop.load(Ordering::SeqCst) || until.is_some_and(|u| clock.now() >= u) {
            break;
        }
        let entries = run_pass(store, config, clock, runner, options, stop, log)?;
        after_pass(store, &entries, log);
        let had_failure = entries
            .iter()
            .any(|e| matches!(e.outcome, PeriodOutcome::Failed(..) | PeriodOutcome::Leased));
        all.extend(entries);
        if stop.load(Ordering::SeqCst) {
            break;
        }
        let now = clock.now();
        let Some(mut wake) = next_wake(store, config, now, runner, options, had_failure)? else {
            break;
        };
        if let Some(u) = until {
            if wake > u {
                clock.sleep_until(u);
                break;
            }
        }
        if wake <= now {
            wake = now + Duration::seconds(1);
        }
        log(&format!(
            "sleeping until {}",
            wake.with_timezone(&config.plant.time_zone).to_rfc3339()
        ));
        clock.sleep_until(wake);
    }
    Ok(all)
}
