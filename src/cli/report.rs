//! `samewise report --month 2026-11 --out review.html`: the monthly review report, one
//! self-contained HTML file built from the month's stored daily runs (see
//! [`crate::analysis::report::month_report`]).

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::Args;

use crate::analysis::report;
use crate::calendar::PlantCalendar;
use crate::model::PeriodKind;
use crate::{Error, Result};

/// Flags of `samewise report`.
#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The month, as YYYY-MM.
    #[arg(long)]
    pub month: String,
    /// The HTML file to write (.html or .htm; never the database, its configuration or an
    /// existing file's half: written to a temporary name and renamed).
    #[arg(long)]
    pub out: PathBuf,
}

/// Parses a `YYYY-MM` month label in the plant calendar.
pub fn parse_month(calendar: &PlantCalendar, label: &str) -> Result<crate::model::Period> {
    let period = calendar.parse_period(label).map_err(|_| {
        Error::Usage(format!(
            "--month {label}: not a month (write it as YYYY-MM, e.g. 2026-11)"
        ))
    })?;
    if period.kind != PeriodKind::Month {
        return Err(Error::Usage(format!(
            "--month {label}: not a month (write it as YYYY-MM, e.g. 2026-11)"
        )));
    }
    Ok(period)
}

/// Runs `samewise report` (`now` is the time shown as the report's date).
pub fn run(args: &ReportArgs, now: chrono::DateTime<chrono::Utc>) -> Result<ExitCode> {
    let config = super::common::load_config(super::common::config_flag())?;
    let protected = crate::output::Protected::plant(&config.plant.database, &config.path);
    crate::output::refuse_protected(&args.out, "--out", &protected)?;
    crate::output::require_extension(&args.out, "--out", &["html", "htm"])?;
    let calendar = PlantCalendar::new(&config);
    let month = parse_month(&calendar, &args.month)?;
    let store = super::common::open_store(&config)?;
    let generated = now.format("%Y-%m-%d %H:%M UTC").to_string();
    let r = report::write_month_report(&*store, &config, &month, &generated, &args.out)?;
    let mut out = std::io::stdout().lock();
    let body = writeln!(
        out,
        "wrote {}: {} check(s) run in {}, {} flagged, {} day(s) without data",
        args.out.display(),
        r.counts.tests_run(),
        r.month,
        r.flagged.len(),
        r.coverage.days_without_data.len()
    )
    .and_then(|_| writeln!(out, "{}", crate::CAUTION));
    if let Err(e) = body {
        if e.kind() != std::io::ErrorKind::BrokenPipe {
            return Err(Error::io("<stdout>", e));
        }
    }
    Ok(ExitCode::from(super::EXIT_OK))
}
