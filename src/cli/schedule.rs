//! `samewise schedule due [--now TIME]` (run every due and missed period once, then exit) and
//! `samewise schedule run` (stay in the foreground, sleep until the next due time, log).
//!
//! SIGINT/SIGTERM set a stop flag: the current run is finished and written (one transaction),
//! then the process exits; nothing is left half written. The wall clock is read only here.

use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use chrono::{DateTime, Utc};
use clap::{Args, Subcommand};

use crate::analysis::run::EngineRunner;
use crate::schedule::{self, Clock, PeriodOutcome, SchedulerOptions, SimulatedClock};
use crate::{Error, Result};

/// Flags of `samewise schedule`.
#[derive(Debug, Args)]
pub struct ScheduleArgs {
    /// Plant configuration (default: $SAMEWISE_CONFIG, then ./plant.toml).
    #[arg(long, global = true)]
    pub config: Option<PathBuf>,
    /// What to do.
    #[command(subcommand)]
    pub action: ScheduleAction,
}

/// `schedule` actions.
#[derive(Debug, Subcommand)]
pub enum ScheduleAction {
    /// Run every due and missed period once, oldest first, then exit (for cron or a timer).
    Due {
        /// Treat this instant as now (RFC 3339, e.g. 2026-12-01T08:00:00Z).
        #[arg(long)]
        now: Option<String>,
        /// Count periods from this instant instead of the first measurement (RFC 3339).
        #[arg(long)]
        since: Option<String>,
    },
    /// Stay in the foreground: run what is due, sleep until the next due time, repeat.
    Run {
        /// Count periods from this instant instead of the first measurement (RFC 3339).
        #[arg(long)]
        since: Option<String>,
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

fn parse_instant(flag: &str, text: &str) -> Result<DateTime<Utc>> {
    DateTime::parse_from_rfc3339(text)
        .map(|t| t.with_timezone(&Utc))
        .map_err(|e| {
            Error::Usage(format!(
                "{flag} {text}: {e} (write an RFC 3339 instant, e.g. 2026-12-01T08:00:00Z)"
            ))
        })
}

/// `host:pid:start-nanos`, naming this process in leases.
pub fn holder_name() -> String {
    crate::schedule::holder_name(Utc::now().timestamp_nanos_opt().unwrap_or_default())
}

/// Runs `samewise schedule`.
pub fn run(args: &ScheduleArgs) -> Result<ExitCode> {
    let config = super::common::load_config(args.config.as_deref())?;
    let mut store = super::common::open_store(&config)?;
    let stop = Arc::new(AtomicBool::new(false));
    for sig in [signal_hook::consts::SIGINT, signal_hook::consts::SIGTERM] {
        signal_hook::flag::register(sig, stop.clone())
            .map_err(|e| Error::io("<signal handler>", e))?;
    }
    let mut options = SchedulerOptions::new(holder_name());
    // Test hook (documented in tests/schedule_process.rs): pause after the run row is written.
    if let Some(ms) = std::env::var("SAMEWISE_PAUSE_AFTER_BEGIN_MS")
        .ok()
        .and_then(|v| v.parse::<u64>().ok())
    {
        options.pause_after_begin = Some(std::time::Duration::from_millis(ms));
    }
    let mut runner = EngineRunner::new(&config);
    // A catch-up on a terminal shows a progress line below the log lines (cleared before each).
    let bar = std::cell::RefCell::new(super::progress::Bar::for_stderr());
    let mut log = |line: &str| {
        bar.borrow_mut().clear();
        eprintln!("{} {line}", Utc::now().format("%Y-%m-%dT%H:%M:%SZ"))
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
                .as_deref()
                .map(|s| parse_instant("--since", s))
                .transpose()?;
            let wall = WallClock { stop: stop.clone() };
            let fixed;
            let clock: &dyn Clock = match now {
                Some(n) => {
                    fixed = SimulatedClock::new(parse_instant("--now", n)?);
                    &fixed
                }
                None => &wall,
            };
            schedule::run_pass_with_progress(
                &mut store,
                &config,
                clock,
                &mut runner,
                &options,
                &stop,
                &mut log,
                &mut progress,
            )?
        }
        ScheduleAction::Run { since } => {
            options.start = since
                .as_deref()
                .map(|s| parse_instant("--since", s))
                .transpose()?;
            let clock = WallClock { stop: stop.clone() };
            schedule::run_forever(
                &mut store,
                &config,
                &clock,
                &mut runner,
                &options,
                &stop,
                None,
                &mut log,
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
    // A failure outranks a flag: the timer must hear about the run that did not happen.
    Ok(ExitCode::from(if failed > 0 {
        super::EXIT_ERROR
    } else if flagged_runs > 0 {
        super::EXIT_FLAGGED
    } else {
        super::EXIT_OK
    }))
}
