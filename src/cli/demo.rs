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
use std::sync::atomic::AtomicBool;
use std::time::Instant;

use chrono::{NaiveDateTime, TimeZone, Utc};
use clap::Args;
use indicatif::{ProgressBar, ProgressStyle};

use crate::analysis::report as report_analysis;
use crate::analysis::run::EngineRunner;
use crate::calendar::PlantCalendar;
use crate::cli::check as check_cli;
use crate::cli::schedule as schedule_cli;
use crate::config::Config;
use crate::ingest;
use crate::sample;
use crate::schedule::{self, PeriodOutcome, SchedulerOptions, SimulatedClock};
use crate::storage::ImportOptions;
use crate::storage::NewEvent;
use crate::storage::{BoxedStore, PlantStore};
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
    /// Keep the demo plant on this PostgreSQL server instead of an SQLite file
    /// (postgresql://user@host:port/dbname): in the schemas `demo` and `demo_no_subgroups`,
    /// which are made afresh.
    #[arg(long, value_name = "URL")]
    pub database: Option<String>,
}

/// The sample configuration with its database: the SQLite file `file`, or the server `url` in
/// the schema (site) `site`.
fn sample_config(url: Option<&str>, file: &str, site: &str, keep_subgroups: bool) -> String {
    SAMPLE_CONFIG
        .lines()
        .filter(|l| keep_subgroups || !l.starts_with("subgroup ="))
        .map(|l| {
            if l.starts_with("database =") {
                match url {
                    Some(url) => format!("database = \"{url}\"\nsite = \"{site}\""),
                    None => format!("database = \"{file}\""),
                }
            } else {
                l.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join("\n")
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
    /// Measurements already stored (identical rows of an overlapping export).
    pub duplicates: u64,
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
pub fn prepare(
    dir: &Path,
    quiet: bool,
    server: Option<&str>,
) -> Result<(Config, BoxedStore, Vec<PathBuf>, ImportTotals)> {
    fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let config_path = dir.join("plant.toml");
    let text = match server {
        None => SAMPLE_CONFIG.to_string(),
        Some(url) => sample_config(Some(url), "plant.db", "demo", true),
    };
    fs::write(&config_path, text).map_err(|e| Error::io(&config_path, e))?;
    let config = Config::load(&config_path)?;
    crate::storage::discard(&config)?;
    let exports_dir = dir.join("exports");
    let exports = sample::write_exports(&exports_dir).map_err(|e| Error::io(&exports_dir, e))?;
    let mut store = crate::storage::create(&config)?;

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
        totals.duplicates += report.duplicates;
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

/// The instant the demo's catch-up runs at: noon UTC after the last production day, when every
/// daily, weekly and monthly period of the sample plant is due.
pub fn demo_now() -> chrono::DateTime<Utc> {
    Utc.with_ymd_and_hms(2026, 11, 30, 12, 0, 0)
        .single()
        .expect("valid instant")
}

/// Runs the scheduler's catch-up over every due period; returns (completed, failed).
pub fn catch_up(
    store: &mut dyn PlantStore,
    config: &Config,
    quiet: bool,
) -> Result<(usize, usize)> {
    let clock = SimulatedClock::new(demo_now());
    let mut runner = EngineRunner::new(config);
    let options = SchedulerOptions::new(schedule_cli::holder_name());
    let stop = AtomicBool::new(false);
    let pb = if quiet {
        ProgressBar::hidden()
    } else {
        let pb = ProgressBar::new_spinner();
        pb.set_style(
            ProgressStyle::with_template("  {spinner} {msg} ({elapsed})")
                .unwrap_or_else(|_| ProgressStyle::default_spinner()),
        );
        pb
    };
    let mut done = 0usize;
    let mut log = |line: &str| {
        if line.contains(" complete") {
            done += 1;
            pb.set_message(format!("catch-up: {done} periods checked, last {line}"));
            pb.tick();
        }
    };
    let entries = schedule::run_pass(
        store,
        config,
        &clock,
        &mut runner,
        &options,
        &stop,
        &mut log,
    )?;
    pb.finish_and_clear();
    let completed = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Completed(..)))
        .count();
    let failed = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Failed(..)))
        .count();
    Ok((completed, failed))
}

/// One finding of the demo's story, computed from the stored daily runs.
#[derive(Debug, Clone)]
pub struct Finding {
    /// Characteristic.
    pub characteristic: String,
    /// Factor.
    pub factor: String,
    /// Daily runs looked at.
    pub days: usize,
    /// Days flagged (differs or differs and material).
    pub days_flagged: usize,
    /// The level that stood out most often on flagged days, with its count.
    pub top_level: Option<(String, usize)>,
    /// First flagged production day.
    pub first_flagged: Option<String>,
    /// Days with Brown-Forsythe p < 0.05 (a difference in spread).
    pub days_spread_differs: usize,
}

/// Summarises the daily history of one characteristic x factor.
pub fn finding(store: &dyn PlantStore, characteristic: &str, factor: &str) -> Result<Finding> {
    let points = store.history(characteristic, factor, "day", 10_000)?;
    let mut levels: BTreeMap<String, usize> = BTreeMap::new();
    let mut f = Finding {
        characteristic: characteristic.into(),
        factor: factor.into(),
        days: points.len(),
        days_flagged: 0,
        top_level: None,
        first_flagged: None,
        days_spread_differs: 0,
    };
    for p in &points {
        if p.test.brown_forsythe.p.is_some_and(|p| p < 0.05) {
            f.days_spread_differs += 1;
        }
        if p.test.state.is_flag() {
            f.days_flagged += 1;
            if f.first_flagged.is_none() {
                f.first_flagged = Some(p.run.header.period_label.clone());
            }
            if let Some(level) = &p.test.stands_out.level {
                *levels.entry(level.clone()).or_default() += 1;
            }
        }
    }
    f.top_level = levels.into_iter().max_by_key(|(_, n)| *n);
    Ok(f)
}

/// Runs `samewise demo`.
pub fn run(args: &DemoArgs) -> Result<ExitCode> {
    let started = Instant::now();
    println!(
        "samewise demo: the INVENTED sample plant (pump housings, 6 machines, 3 shifts, 3 alloy \
         suppliers, 90 days) in {}",
        args.dir.display()
    );
    let (config, mut store, exports, totals) =
        prepare(&args.dir, args.quiet, args.database.as_deref())?;
    println!(
        "\n1. Imported {} exports: {} measurements read, {} stored, {} duplicate, {} rejected (stored + duplicate + rejected = read)",
        totals.files, totals.measurements_read, totals.accepted, totals.duplicates, totals.rejected
    );
    for (reason, n) in &totals.reasons {
        println!("     {n:>5}  {reason}");
    }
    println!(
        "   database: {}; exports: {}",
        crate::storage::describe(&config),
        exports
            .first()
            .and_then(|p| p.parent())
            .map(|p| p.display().to_string())
            .unwrap_or_default()
    );

    println!(
        "\n2. Recorded {} process-change events (samewise event list).",
        sample::events().len()
    );

    let (completed, failed) = catch_up(&mut *store, &config, args.quiet)?;
    println!(
        "\n3. Scheduler catch-up at {}: {completed} periods checked ({} schedules: {}), {failed} failed.",
        demo_now().format("%Y-%m-%d %H:%M UTC"),
        config.schedules.len(),
        config
            .schedules
            .iter()
            .map(|s| s.name.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    );

    // The scheduler's findings of every period kind it checked.
    let mut kinds: Vec<crate::model::PeriodKind> = Vec::new();
    for s in &config.schedules {
        if !kinds.contains(&s.period) {
            kinds.push(s.period);
        }
    }
    for kind in kinds {
        crate::analysis::findings::update_findings(&mut *store, &config, kind, demo_now())?;
    }

    let calendar = PlantCalendar::new(&config);
    let last_day = sample::first_day() + chrono::Duration::days(sample::N_DAYS - 1);
    let period = calendar.day(last_day);
    if let Some(run) = store.latest_complete_run("day", &period.label)? {
        let content = store.run_content(run.run_id)?;
        println!("\n4. The latest daily check ({}):\n", period.label);
        let mut out = std::io::stdout().lock();
        if let Err(e) =
            check_cli::print_summary(&mut out, &config, &period, &run, &content, Some(5))
        {
            super::note_stdout_error(e);
        }
    }

    println!("\n5. What the 90 days show (the sample plant's injected effects are listed in sample-plant/README.md):");
    let mass = finding(&*store, "housing_mass", "supplier")?;
    println!(
        "   - housing_mass by supplier: flagged on {} of {} days; {} stands out most often ({} days).",
        mass.days_flagged,
        mass.days,
        mass.top_level.as_ref().map_or("no supplier", |l| l.0.as_str()),
        mass.top_level.as_ref().map_or(0, |l| l.1)
    );
    let bore = finding(&*store, "bore_diameter", "machine")?;
    let change = sample::tooling_change_day().format("%Y-%m-%d").to_string();
    let points = store.history("bore_diameter", "machine", "day", 10_000)?;
    let before = points
        .iter()
        .filter(|p| p.run.header.period_label < change && p.test.state.is_flag())
        .count();
    let first_after = points.iter().find(|p| {
        p.run.header.period_label >= change
            && p.test.state.is_flag()
            && p.test.stands_out.level.as_deref() == Some("M4")
    });
    println!(
        "   - bore_diameter by machine: flagged on {} of {} days ({} before the tooling change of {change}); \
         M4 first stands out on {} and on {} days in all.",
        bore.days_flagged,
        bore.days,
        before,
        first_after.map_or("no day", |p| p.run.header.period_label.as_str()),
        bore.top_level
            .as_ref()
            .filter(|l| l.0 == "M4")
            .map_or(0, |l| l.1)
    );
    let wall = finding(&*store, "wall_thickness", "shift")?;
    println!(
        "   - wall_thickness by shift: the spread differs (Brown-Forsythe p < 0.05) on {} of {} days; \
         the means differ on {} (a spread difference, not an offset: see the group SDs with samewise check).",
        wall.days_spread_differs, wall.days, wall.days_flagged
    );
    let injected = [
        ("housing_mass", "supplier"),
        ("bore_diameter", "machine"),
        ("bore_diameter", "operator"),
        ("wall_thickness", "shift"),
    ];
    let (mut null_tests, mut null_flags) = (0usize, 0usize);
    for c in &config.characteristics {
        for f in &config.factors {
            if injected.contains(&(c.name.as_str(), f.name.as_str())) {
                continue;
            }
            let n = finding(&*store, &c.name, &f.name)?;
            null_tests += n.days;
            null_flags += n.days_flagged;
        }
    }
    println!(
        "   - every other characteristic x factor: {null_flags} flags in {null_tests} daily tests \
         ({:.2}%); bore_diameter by operator follows M4, because each operator looks after two machines.",
        if null_tests > 0 {
            100.0 * null_flags as f64 / null_tests as f64
        } else {
            0.0
        }
    );

    let daily: Vec<crate::model::Finding> = store
        .findings(Some(crate::model::PeriodKind::Day))?
        .into_iter()
        .collect();
    println!(
        "\n   Findings of the daily checks (samewise findings --all --kind day): {} ({} open)",
        daily.len(),
        daily
            .iter()
            .filter(|f| f.status == crate::model::FindingStatus::Open)
            .count()
    );
    for f in &daily {
        for line in super::findings::finding_lines(f, config.plant.time_zone, &[]) {
            println!("   {line}");
        }
    }

    // 6. The monthly review report and charts of the last full month.
    let month = calendar.month(2026, 11)?;
    let report_path = args.dir.join(format!("review-{}.html", month.label));
    let generated = format!("samewise {} demo", env!("CARGO_PKG_VERSION"));
    report_analysis::write_month_report(&*store, &config, &month, &generated, &report_path)?;
    let charts_dir = args.dir.join("charts");
    fs::create_dir_all(&charts_dir).map_err(|e| Error::io(&charts_dir, e))?;
    // The sample plant's story: the machine 4 bore drift, the supplier mass offset.
    let story = report_analysis::ChartStory {
        trend: ("bore_diameter", "machine"),
        detail: ("housing_mass", "supplier"),
        before_after: ("bore_diameter", "machine"),
    };
    let (charts, skipped) =
        report_analysis::write_story_charts(&*store, &config, &month, &story, &charts_dir)?;
    println!(
        "\n6. The monthly review report: {}\n   charts ({}): {}",
        report_path.display(),
        charts.len(),
        charts_dir.display()
    );
    for s in &skipped {
        println!("   chart not drawn: {s}");
    }
    let without = without_subgroups(&args.dir, args.database.as_deref(), &exports, &*store)?;
    println!(
        "\n7. The same exports read as if they had no shot columns (plant-no-subgroups.toml, the last {} days): \
         the values look independent to the check, but the dependence check finds neighbouring parts alike in {} of {} tests; \
         {} tests would have flagged and do not hold once that is allowed for (\"differs? not independent\": name the subgroup column), \
         {} still flag. With the shots as subgroups the same days have {} flags.",
        without.days,
        without.serial_fired,
        without.tests,
        without.dependent,
        without.flags,
        without.flags_with_subgroups
    );
    println!(
        "\nTry next (in {}):\n  samewise check --day 2026-11-29 --config plant.toml\n  \
         samewise findings --all --config plant.toml\n  \
         samewise history --characteristic bore_diameter --by machine --last 30 --config plant.toml\n  \
         samewise investigate --characteristic bore_diameter --by machine --event 3 --config plant.toml\n  \
         samewise report --month 2026-11 --out review.html --config plant.toml",
        args.dir.display()
    );

    println!(
        "\nDone in {:.1} s.\n\n{}",
        started.elapsed().as_secs_f64(),
        crate::CAUTION
    );
    Ok(ExitCode::from(super::EXIT_OK))
}

/// What the last days of the sample plant give when its exports are read without the subgroup
/// columns (step 7 of the demo).
struct WithoutSubgroups {
    days: usize,
    tests: usize,
    serial_fired: usize,
    dependent: usize,
    flags: usize,
    flags_with_subgroups: usize,
}

/// Imports the exports again under a configuration without the `subgroup` lines (a database of
/// its own) and checks the last 14 days there, without storing runs; counts beside the stored
/// daily runs of the same days.
fn without_subgroups(
    dir: &Path,
    server: Option<&str>,
    exports: &[PathBuf],
    store: &dyn PlantStore,
) -> Result<WithoutSubgroups> {
    let url = server;
    let text = sample_config(url, "plant-no-subgroups.db", "demo_no_subgroups", false);
    let path = dir.join("plant-no-subgroups.toml");
    fs::write(&path, text).map_err(|e| Error::io(&path, e))?;
    let bare = Config::load(&path)?;
    crate::storage::discard(&bare)?;
    let mut bare_store = crate::storage::create(&bare)?;
    for export in exports {
        let stream = ingest::read_file(export, &bare, None)?;
        bare_store.import(
            stream,
            &ImportOptions {
                force: false,
                started_at: Utc::now(),
            },
        )?;
    }
    let calendar = PlantCalendar::new(&bare);
    let options = crate::analysis::CheckOptions::from_config(&bare);
    let days = 14;
    let last = sample::first_day() + chrono::Duration::days(sample::N_DAYS - 1);
    let mut out = WithoutSubgroups {
        days,
        tests: 0,
        serial_fired: 0,
        dependent: 0,
        flags: 0,
        flags_with_subgroups: 0,
    };
    for d in 0..days as i64 {
        let period = calendar.day(last - chrono::Duration::days(d));
        let frame = bare_store.load_period(period.start, period.end, None)?;
        let content =
            crate::analysis::check_frame(&crate::analysis::run::frame_from(frame), &options, None)?;
        for t in &content.tests {
            out.tests += 1;
            out.serial_fired +=
                usize::from(t.serial_dependence.p.is_some_and(|p| p < options.alpha));
            out.dependent += usize::from(t.state == crate::results::TestState::DiffersDependent);
            out.flags += usize::from(t.state.is_flag());
        }
        if let Some(run) = store.latest_complete_run("day", &period.label)? {
            out.flags_with_subgroups += store
                .run_content(run.run_id)?
                .tests
                .iter()
                .filter(|t| t.state.is_flag())
                .count();
        }
    }
    Ok(out)
}
