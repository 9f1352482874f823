//! `samewise schedule due [--now TIME]` (run every due and missed period once, then exit) and
//! `samewise schedule run` (stay in the foreground, sleep until the next due time, log).
//!
//! SIGINT/SIGTERM set a stop flag: the current run is finished and written (one transaction),
//! then the process exits; nothing is left half written. The wall clock is read only here.

use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use chrono::{DateTime, Utc};
use clap::{Args, Subcommand};

use super::when::{self, When};
use crate::analysis::findings::{update_findings, FindingsUpdate};
use crate::analysis::run::EngineRunner;
use crate::config::Config;
use crate::model::PeriodKind;
use crate::schedule::{self, Clock, PassEntry, PeriodOutcome, SchedulerOptions, SimulatedClock};
use crate::storage::PlantStore;
use crate::{Error, Result};

/// Flags of `samewise schedule`.
#[derive(Debug, Args)]
pub struct ScheduleArgs {
    /// Write the log as JSON lines on stdout (`{"time", "message"}` per line, then one
    /// `{"summary": ...}` line with every period's outcome) instead of text on stderr.
    #[arg(long, global = true)]
    pub json: bool,
    /// What to do.
    #[command(subcommand)]
    pub action: ScheduleAction,
}

/// `schedule` actions.
#[derive(Debug, Subcommand)]
pub enum ScheduleAction {
    /// Run every due and missed period once, oldest first, then exit (for cron or a timer).
    Due {
        /// Treat this instant as now: plant-local 2026-12-01 08:00 or 2026-12-01T08:00[:SS], or
        /// RFC 3339 with an offset or Z (2026-12-01T08:00:00Z).
        #[arg(long, value_name = "TIME", value_parser = when::instant)]
        now: Option<When>,
        /// Count periods from this instant instead of the first measurement (written as --now
        /// is).
        #[arg(long, value_name = "TIME", value_parser = when::instant)]
        since: Option<When>,
    },
    /// Stay in the foreground: run what is due, sleep until the next due time, repeat.
    Run {
        /// Count periods from this instant instead of the first measurement: plant-local
        /// 2026-12-01 08:00 or 2026-12-01T08:00[:SS], or RFC 3339 with an offset or Z.
        #[arg(long, value_name = "TIME", value_parser = when::instant)]
        since: Option<When>,
    },
}

/// The wall clock; `sleep_until` wakes every second to honour a stop request.
struct WallClock {
    stop: Arc<AtomicBool>,
}

impl Clock for WallClock {
    fn now(&self) -> DateTime<Utc> {
        Utc::now()
    }
    fn sleep_until(&self, t: DateTime<Utc>) {
        while !self.stop.load(Ordering::SeqCst) {
            let left = t - Utc::now();
            if left <= chrono::Duration::zero() {
                return;
            }
            let step = left.min(chrono::Duration::seconds(1));
            std::thread::sleep(step.to_std().unwrap_or_default());
        }
    }
}

/// `host:pid:start-nanos`, naming this process in leases.
pub fn holder_name() -> String {
    crate::schedule::holder_name(Utc::now().timestamp_nanos_opt().unwrap_or_default())
}

/// Runs `samewise schedule`.
pub fn run(args: &ScheduleArgs) -> Result<ExitCode> {
    let config = super::common::load_config(super::common::config_flag())?;
    let mut store = super::common::open_store(&config)?;
    let stop = Arc::new(AtomicBool::new(false));
    for sig in [signal_hook::consts::SIGINT, signal_hook::consts::SIGTERM] {
        signal_hook::flag::register(sig, stop.clone())
            .map_err(|e| Error::io("<signal handler>", e))?;
    }
    let mut options = SchedulerOptions::new(holder_name());
    let mut runner = EngineRunner::new(&config);
    // Log lines carry the plant's local time with its offset, like every time samewise prints;
    // a catch-up on a terminal shows a progress line below them (cleared before each).
    let tz = config.plant.time_zone;
    let json = args.json;
    let bar = std::cell::RefCell::new(super::progress::Bar::for_stderr());
    let mut log = |line: &str| {
        bar.borrow_mut().clear();
        let time = Utc::now()
            .with_timezone(&tz)
            .to_rfc3339_opts(chrono::SecondsFormat::Secs, false);
        if json {
            let line = crate::outputs::ScheduleLine::Log(crate::outputs::LogLine {
                time,
                message: line.to_string(),
            });
            println!("{}", serde_json::to_string(&line).unwrap_or_default());
        } else {
            eprintln!("{time} {line}")
        }
    };
    let mut progress = |p: schedule::PassProgress<'_>| {
        let mut bar = bar.borrow_mut();
        if p.done == p.total {
            bar.clear();
        } else {
            bar.tick(|elapsed| super::progress::periods_line(p.done, p.total, p.current, elapsed));
        }
    };
    let entries = match &args.action {
        ScheduleAction::Due { now, since } => {
            options.start = since
                .as_ref()
                .map(|s| s.resolve("--since", tz))
                .transpose()?;
            let wall = WallClock { stop: stop.clone() };
            let fixed;
            let clock: &dyn Clock = match now {
                Some(n) => {
                    fixed = SimulatedClock::new(n.resolve("--now", tz)?);
                    &fixed
                }
                None => &wall,
            };
            let entries = schedule::run_pass_with_progress(
                &mut *store,
                &config,
                clock,
                &mut runner,
                &options,
                &stop,
                &mut log,
                &mut progress,
            )?;
            after_pass(&mut *store, &config, &entries, &mut log);
            entries
        }
        ScheduleAction::Run { since } => {
            options.start = since
                .as_ref()
                .map(|s| s.resolve("--since", tz))
                .transpose()?;
            let clock = WallClock { stop: stop.clone() };
            let mut after =
                |store: &mut dyn PlantStore, entries: &[PassEntry], log: &mut dyn FnMut(&str)| {
                    after_pass(store, &config, entries, log)
                };
            schedule::run_forever_with(
                &mut *store,
                &config,
                &clock,
                &mut runner,
                &options,
                &stop,
                None,
                &mut log,
                &mut after,
            )?
        }
    };
    let failed = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Failed(..)))
        .count();
    let done = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Completed(..)))
        .count();
    let flagged_runs = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Completed(_, n) if n > 0))
        .count();
    log(&format!(
        "{done} period(s) run, {flagged_runs} with a flag, {failed} failed"
    ));
    if args.json {
        let line = crate::outputs::ScheduleLine::Summary(crate::outputs::SummaryLine {
            summary: crate::outputs::PassSummary {
                periods_run: done,
                with_flag: flagged_runs,
                failed,
                periods: entries
                    .iter()
                    .map(crate::outputs::PassPeriod::new)
                    .collect(),
            },
        });
        println!("{}", serde_json::to_string(&line).unwrap_or_default());
    }
    // A failure outranks a flag: the timer must hear about the run that did not happen.
    Ok(ExitCode::from(if failed > 0 {
        super::EXIT_ERROR
    } else if flagged_runs > 0 {
        super::EXIT_FLAGGED
    } else {
        super::EXIT_OK
    }))
}

/// After a scheduler pass: the findings of every period kind that got a complete run are brought
/// up to date and logged, and the `[alert]` command gets the new, closed and reopened ones.
/// Nothing here fails the pass: a problem is logged.
fn after_pass(
    store: &mut dyn PlantStore,
    config: &Config,
    entries: &[PassEntry],
    log: &mut dyn FnMut(&str),
) {
    let mut kinds: Vec<PeriodKind> = Vec::new();
    for e in entries {
        if !matches!(e.outcome, PeriodOutcome::Completed(..)) {
            continue;
        }
        if let Some(s) = config.schedules.iter().find(|s| s.name == e.schedule) {
            if !kinds.contains(&s.period) {
                kinds.push(s.period);
            }
        }
    }
    let mut all = FindingsUpdate::default();
    for kind in kinds {
        match update_findings(store, config, kind, Utc::now()) {
            Ok(update) => {
                let tz = config.plant.time_zone;
                match super::findings::summary_lines(store, tz, &update) {
                    Ok(lines) => {
                        log(&format!("{} findings:", kind.as_str()));
                        for line in lines {
                            log(&line);
                        }
                    }
                    Err(e) => log(&format!("findings could not be listed: {e}")),
                }
                all.new.extend(update.new);
                all.changed.extend(update.changed);
                all.open.extend(update.open);
            }
            Err(e) => log(&format!(
                "{} findings could not be brought up to date: {e}",
                kind.as_str()
            )),
        }
    }
    if let Some(alert) = &config.alert {
        let n = (all.new.len() + all.changed.len()) as u32;
        if n > 0 {
            match super::findings::alert_document(store, config, &all, Utc::now()) {
                Ok(doc) => log(&super::alert::run_alert(store, alert, &doc, n, &Utc::now)),
                Err(e) => log(&format!("alert: the findings could not be read: {e}")),
            }
        }
    }
}
