//! `samewise demo`: the invented sample plant end to end, in one command.
//!
//! Writes the sample plant's configuration and exports into a folder (`samewise-demo/` by
//! default), creates a fresh database, imports the exports (reporting rejected rows), records the
//! process-change logbook, runs the scheduler's catch-up over every period of the 90 days, prints
//! the latest daily summary and a short story of what was found, and writes the monthly review
//! report and charts. Everything in the sample plant is invented (see `sample-plant/README.md`).

use std::collections::BTreeMap;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use chrono::{NaiveDateTime, TimeZone, Utc};
use clap::Args;
use indicatif::{ProgressBar, ProgressStyle};

use crate::config::Config;
use crate::ingest;
use crate::sample;
use crate::storage::ImportOptions;
use crate::storage::{NewEvent, Store};
use crate::{Error, Result};

/// The sample configuration, as committed in `sample-plant/plant.toml`.
const SAMPLE_CONFIG: &str = include_str!("../../sample-plant/plant.toml");

/// Arguments of `samewise demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Folder to write the demo plant into (its database is created afresh).
    #[arg(long, default_value = "samewise-demo")]
    pub dir: PathBuf,
    /// No progress bars (for logs and tests).
    #[arg(long)]
    pub quiet: bool,
}

/// What the import step did, summed over the exports.
#[derive(Debug, Default)]
pub struct ImportTotals {
    /// Files imported.
    pub files: usize,
    /// Measurements read.
    pub measurements_read: u64,
    /// Measurements stored.
    pub accepted: u64,
    /// Measurements rejected.
    pub rejected: u64,
    /// Rejections by kind of reason.
    pub reasons: BTreeMap<String, u64>,
}

fn bar(len: u64, quiet: bool, what: &str) -> ProgressBar {
    if quiet {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::new(len);
    pb.set_style(
        ProgressStyle::with_template("  {msg:<28} [{bar:30}] {pos}/{len} ({elapsed})")
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> "),
    );
    pb.set_message(what.to_string());
    pb
}

/// Writes the configuration and exports, creates the database and imports everything.
pub fn prepare(dir: &Path, quiet: bool) -> Result<(Config, Store, Vec<PathBuf>, ImportTotals)> {
    fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let config_path = dir.join("plant.toml");
    fs::write(&config_path, SAMPLE_CONFIG).map_err(|e| Error::io(&config_path, e))?;
    let config = Config::load(&config_path)?;
    for suffix in ["", "-wal", "-shm"] {
        let mut name = config.plant.database.clone().into_os_string();
        name.push(suffix);
        let path = PathBuf::from(name);
        if path.exists() {
            fs::remove_file(&path).map_err(|e| Error::io(&path, e))?;
        }
    }
    let exports_dir = dir.join("exports");
    let exports = sample::write_exports(&exports_dir).map_err(|e| Error::io(&exports_dir, e))?;
    let mut store = Store::create(&config.plant.database, &config)?;

    let mut totals = ImportTotals::default();
    let pb = bar(exports.len() as u64, quiet, "importing exports");
    for path in &exports {
        let stream = ingest::read_file(path, &config, None)?;
        let report = store.import(
            stream,
            &ImportOptions {
                force: false,
                started_at: Utc::now(),
            },
        )?;
        totals.files += 1;
        totals.measurements_read += report.measurements_read;
        totals.accepted += report.accepted;
        totals.rejected += report.rejected;
        for (reason, n) in report.reasons {
            *totals.reasons.entry(reason).or_default() += n;
        }
        pb.inc(1);
    }
    pb.finish_and_clear();

    for event in sample::events() {
        let local = NaiveDateTime::parse_from_str(event.at_local, "%Y-%m-%d %H:%M")
            .map_err(|e| Error::Usage(format!("sample event time {}: {e}", event.at_local)))?;
        let at = config
            .plant
            .time_zone
            .from_local_datetime(&local)
            .single()
            .ok_or_else(|| {
                Error::Usage(format!("sample event time {} is ambiguous", event.at_local))
            })?
            .with_timezone(&Utc);
        let scope = event
            .where_level
            .and_then(|w| w.split_once('='))
            .map(|(f, l)| vec![(f.to_string(), l.to_string())])
            .unwrap_or_default();
        store.add_event(
            &NewEvent {
                at,
                note: event.note.to_string(),
                characteristic: event.characteristic.map(str::to_string),
                scope,
            },
            at,
        )?;
    }
    Ok((config, store, exports, totals))
}

/// Runs `samewise demo`.
pub fn run(args: &DemoArgs) -> Result<ExitCode> {
    let started = Instant::now();
    println!(
        "samewise demo: the INVENTED sample plant (pump housings, 6 machines, 3 shifts, 3 alloy \
         suppliers, 90 days) in {}",
        args.dir.display()
    );
    let (config, _store, exports, totals) = prepare(&args.dir, args.quiet)?;
    println!(
        "\n1. Imported {} exports: {} measurements read, {} stored, {} rejected (accepted + rejected = read)",
        totals.files, totals.measurements_read, totals.accepted, totals.rejected
    );
    for (reason, n) in &totals.reasons {
        println!("     {n:>5}  {reason}");
    }
    println!(
        "   database: {}; exports: {}",
        config.plant.database.display(),
        exports
            .first()
            .and_then(|p| p.parent())
            .map(|p| p.display().to_string())
            .unwrap_or_default()
    );
    println!(
        "\nDone in {:.1} s.\n\n{}",
        started.elapsed().as_secs_f64(),
        crate::CAUTION
    );
    Ok(ExitCode::from(super::EXIT_OK))
}
