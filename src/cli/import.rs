//! `samewise import FILE... [--layout NAME] [--force] [--add-new] [--rejects FILE.csv]`, and the
//! hidden `samewise generate-bench-data` that writes the deterministic benchmark plant.
//!
//! Each file is one transaction: it goes in completely or not at all. The summary gives rows
//! read, accepted, rejected, the first rejections and the counts by reason; `--rejects` writes
//! every rejection of the run to a CSV file. An input is a path or `-` (standard input, named
//! `<stdin>`), read once; a file that stores nothing makes the exit status 1.

use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use clap::{Args, Subcommand};

use crate::ingest::{self, ReadOptions};
use crate::output::{refuse_protected, AtomicFile, Protected};
use crate::storage::ImportOptions;
use crate::storage::PlantStore;
use crate::{Error, Result};

use super::common::load_config;

/// Arguments of `samewise import`.
#[derive(Debug, Args)]
#[command(args_conflicts_with_subcommands = true, subcommand_negates_reqs = true)]
pub struct ImportArgs {
    /// `list` or `undo N` instead of importing files (a file named `list` or `undo` is given
    /// as `./list`).
    #[command(subcommand)]
    pub action: Option<ImportAction>,
    /// CSV files to import (each one is one transaction); `-` reads standard input, and pipes,
    /// FIFOs and `<(zcat export.csv.gz)` work too (each input is read once).
    #[arg(required = true, value_name = "FILE")]
    pub files: Vec<PathBuf>,
    /// Layout name from the configuration (default: detected from the header).
    #[arg(long, value_name = "NAME")]
    pub layout: Option<String>,
    /// Import a file even if the same content was imported before.
    #[arg(long)]
    pub force: bool,
    /// Accept characteristics that are not in the configuration (they are added).
    #[arg(long)]
    pub add_new: bool,
    /// Write every rejected row to this CSV file (file, line, column, reason, raw, measurements:
    /// how many measurements the row held); every one, also past the 10,000 records the
    /// database keeps per import; never the database, its configuration or an input; written
    /// whole or not at all.
    #[arg(long, value_name = "FILE.csv")]
    pub rejects: Option<PathBuf>,
    /// Print the CPU time of each import thread (for measuring the import, see docs/performance.md).
    #[arg(long, hide = true)]
    pub cpu_times: bool,
}

/// `samewise import list` and `samewise import undo N`.
#[derive(Debug, Subcommand)]
pub enum ImportAction {
    /// List every import: when, which file, what it stored, rejected and found stored already,
    /// the time range of its measurements, and undos.
    List {
        /// Print JSON (an array of imports; times RFC 3339 in the plant's zone).
        #[arg(long)]
        json: bool,
    },
    /// Remove import N's measurements and rejected rows (one transaction); the import stays in
    /// the list marked undone, the undo is recorded, every checked period it touched becomes
    /// stale (`samewise schedule due` checks it again), and the file can be imported again
    /// without --force.
    Undo {
        /// The import id (`samewise import list`).
        #[arg(value_name = "N")]
        id: i64,
    },
}

fn csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

/// Runs `samewise import`.
///
/// Exit status 0 when every file stored something; 1 when a file failed, was a duplicate, or
/// stored nothing (every row rejected, or no data rows: such an import keeps its rejections but
/// does not count as done, so the corrected file imports without `--force`).
pub fn run(args: &ImportArgs) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    match &args.action {
        Some(ImportAction::List { json }) => return list(&config, *json),
        Some(ImportAction::Undo { id }) => return undo(&config, *id),
        None => {}
    }
    let mut rejects = match &args.rejects {
        Some(path) => {
            let mut protected = Protected::plant(&config.plant.database, &config.path);
            for file in args.files.iter().filter(|f| f.as_os_str() != "-") {
                protected.push(Protected::new(file, "an input of this import"));
            }
            refuse_protected(path, "--rejects", &protected)?;
            Some(AtomicFile::create(path)?)
        }
        None => None,
    };
    let mut store = super::common::open_store(&config)?;
    // The configuration is the truth for characteristics and factors: bring the database in step.
    store.sync_config(&config)?;
    if let Some(w) = rejects.as_mut() {
        writeln!(w, "file,line,column,reason,raw,measurements")
            .map_err(|e| Error::io(w.path(), e))?;
    }
    let mut failures = 0;
    let mut stored = Vec::new();
    for file in &args.files {
        match import_one(&mut *store, &config, args, file, rejects.as_mut()) {
            Ok(import_id) => {
                let name = if file.as_os_str() == "-" {
                    STDIN_NAME.to_string()
                } else {
                    file.display().to_string()
                };
                stored.push(format!("{name} (import #{import_id})"));
            }
            Err(e) => {
                failures += 1;
                super::report_error(&e);
            }
        }
    }
    if let Some(w) = rejects {
        let path = w.path().to_path_buf();
        w.commit()?;
        println!("rejected rows written to {}", path.display());
    }
    // Levels that differ only in case or blanks are different groups to every check: say so.
    for (factor, levels) in store.level_case_collisions()? {
        eprintln!(
            "warning: factor {factor} has levels that differ only in case or blanks ({}): every check counts them as different groups; set case = \"upper\" under [[factor]] name = \"{factor}\" to make them one (new imports; stored ones stay as they are)",
            levels.iter().map(|l| format!("\"{l}\"")).collect::<Vec<_>>().join(", ")
        );
    }
    if super::stdout_closed() && args.files.len() > 1 {
        // The summary went nowhere: say on stderr what is in the database now.
        eprintln!(
            "samewise import: stdout was closed; stored {} of {} files: {}",
            stored.len(),
            args.files.len(),
            if stored.is_empty() {
                "none".to_string()
            } else {
                stored.join(", ")
            }
        );
    }
    if failures > 0 {
        return Err(Error::Usage(format!(
            "{failures} of {} files were not imported (see above)",
            args.files.len()
        )));
    }
    Ok(ExitCode::from(super::EXIT_OK))
}

/// `samewise import list`.
fn list(config: &crate::config::Config, json: bool) -> Result<ExitCode> {
    let store = super::common::open_store(config)?;
    let records = store.import_records()?;
    let tz = config.plant.time_zone;
    let local = |t: chrono::DateTime<chrono::Utc>| t.with_timezone(&tz);
    if json {
        let rows: Vec<crate::outputs::ImportLine> = records
            .iter()
            .map(|r| crate::outputs::ImportLine::new(r, tz))
            .collect();
        println!("{}", super::format::document_json(&rows));
        return Ok(ExitCode::from(super::EXIT_OK));
    }
    if records.is_empty() {
        println!("no imports yet (`samewise import FILE`)");
        return Ok(ExitCode::from(super::EXIT_OK));
    }
    println!(
        "{:>5}  {:<16}  {:>9}  {:>9}  {:>9}  {:>9}  {:<33}  file",
        "#", "started", "read", "stored", "duplicate", "rejected", "measurements from - to"
    );
    for r in &records {
        let range = match (r.first_measurement, r.last_measurement) {
            (Some(a), Some(b)) => format!(
                "{} - {}",
                local(a).format("%Y-%m-%d %H:%M"),
                local(b).format("%Y-%m-%d %H:%M")
            ),
            _ => "-".to_string(),
        };
        let mut note = Vec::new();
        if let Some(u) = r.undoes {
            note.push(format!("undo of #{u}"));
        }
        if let Some(by) = r.undone_by {
            note.push(format!("undone by #{by}"));
        }
        if r.forced {
            note.push("forced".to_string());
        }
        if r.rejected_not_kept > 0 {
            note.push(format!("{} rejections not kept", r.rejected_not_kept));
        }
        let note = if note.is_empty() {
            String::new()
        } else {
            format!("  ({})", note.join(", "))
        };
        if r.undoes.is_some() {
            println!(
                "{:>5}  {:<16}  {:>9}  {:>9}  {:>9}  {:>9}  {:<33}  {}{note}",
                r.id,
                local(r.started_at).format("%Y-%m-%d %H:%M"),
                "-",
                "-",
                "-",
                "-",
                range,
                r.file_name
            );
        } else {
            println!(
                "{:>5}  {:<16}  {:>9}  {:>9}  {:>9}  {:>9}  {:<33}  {}{note}",
                r.id,
                local(r.started_at).format("%Y-%m-%d %H:%M"),
                r.measurements_read,
                r.stored,
                r.duplicates,
                r.rejected,
                range,
                r.file_name
            );
        }
    }
    println!("times in the plant's zone ({tz})");
    Ok(ExitCode::from(super::EXIT_OK))
}

/// `samewise import undo N`.
fn undo(config: &crate::config::Config, id: i64) -> Result<ExitCode> {
    let mut store = super::common::open_store(config)?;
    let report = store.undo_import(id, chrono::Utc::now())?;
    println!(
        "undid import #{} ({}): removed {} measurements and {} rejection records; recorded as #{}",
        report.import_id,
        report.file_name,
        report.measurements_removed,
        report.rejections_removed,
        report.undo_id
    );
    let stale = store.stale_periods()?;
    if !stale.is_empty() {
        println!(
            "checked periods now stale (`samewise schedule due` checks them again): {}",
            super::status::stale_summary(&stale)
        );
    }
    Ok(ExitCode::from(super::EXIT_OK))
}

/// The name `-` (standard input) goes by in messages and in the import record.
pub const STDIN_NAME: &str = "<stdin>";

/// Opens one input: `-` is standard input, anything else a path (a regular file, a pipe, a FIFO,
/// `/dev/stdin`, a process substitution). Returns the reader, the name for messages, and whether
/// it is a regular file (only a regular file can be read a second time, so only it is hashed
/// ahead for the early duplicate check; every other input is hashed by the one pass that parses
/// it, and a duplicate is refused at its end).
fn open_input(file: &Path) -> Result<(Box<dyn std::io::Read + Send>, PathBuf, bool)> {
    if file.as_os_str() == "-" {
        return Ok((Box::new(std::io::stdin()), PathBuf::from(STDIN_NAME), false));
    }
    let opened = std::fs::File::open(file).map_err(|e| Error::io(file, e))?;
    let is_regular = opened.metadata().map_err(|e| Error::io(file, e))?.is_file();
    Ok((Box::new(opened), file.to_path_buf(), is_regular))
}

fn import_one(
    store: &mut dyn PlantStore,
    config: &crate::config::Config,
    args: &ImportArgs,
    file: &Path,
    mut rejects: Option<&mut AtomicFile>,
) -> Result<i64> {
    let (reader, name, is_regular) = open_input(file)?;
    // A progress line on a terminal only (the plain reader otherwise: nothing added to the path).
    let bar = super::progress::Bar::for_stderr();
    let reader: Box<dyn std::io::Read + Send> = if bar.enabled() {
        let total = if is_regular {
            std::fs::metadata(file).ok().map(|m| m.len())
        } else {
            None
        };
        Box::new(super::progress::ProgressReader::new(
            reader,
            name.display().to_string(),
            total,
            bar,
        ))
    } else {
        reader
    };
    // Every rejection record goes to the --rejects file as it is read (the database keeps the
    // first MAX_KEPT_REJECTIONS); a failed import takes its lines back out.
    let rejects_start = match rejects.as_mut() {
        Some(w) => Some(w.position()?),
        None => None,
    };
    let shown_name = name.display().to_string();
    let mut write_rejection = |r: &ingest::Rejection| -> Result<()> {
        if let Some(w) = rejects.as_mut() {
            writeln!(
                w,
                "{},{},{},{},{},{}",
                csv_field(&shown_name),
                r.line,
                csv_field(r.column.as_deref().unwrap_or("")),
                csv_field(&r.reason),
                csv_field(&r.raw),
                r.measurements
            )
            .map_err(|e| Error::io(w.path(), e))?;
        }
        Ok(())
    };
    let stream = ingest::read_from(
        reader,
        &name,
        config,
        &ReadOptions {
            layout: args.layout.clone(),
            add_new: args.add_new,
        },
    )?;
    // A duplicate regular file is refused as soon as a thread of its own has hashed it (the
    // import checks again at its end, on the bytes it read: the only check for a pipe).
    let imported = store.import_checking_early(
        stream,
        &ImportOptions {
            force: args.force,
            started_at: chrono::Utc::now(),
        },
        is_regular.then_some(file),
        Some(&mut write_rejection),
    );
    let report = match imported {
        Ok(report) => report,
        Err(e) => {
            if let (Some(w), Some(start)) = (rejects.as_mut(), rejects_start) {
                w.truncate_to(start)?;
            }
            return Err(e);
        }
    };
    let file = name.as_path();
    println!(
        "{}: import #{} (layout {}): {} rows read, {} measurements: {} stored, {} already stored (duplicate), {} rejected ({:.1} s)",
        file.display(),
        report.import_id,
        report.layout,
        report.rows_read,
        report.measurements_read,
        report.accepted,
        report.duplicates,
        report.rejected,
        report.elapsed.as_secs_f64()
    );
    if args.cpu_times {
        let secs = |d: Option<std::time::Duration>| {
            d.map_or("unknown".to_string(), |d| {
                format!("{:.2} s", d.as_secs_f64())
            })
        };
        println!(
            "  cpu: writing thread {} (commit {}), reading thread {}, early hash {}",
            secs(report.cpu.writer),
            secs(report.cpu.commit),
            secs(report.cpu.reader),
            secs(report.cpu.early_hash)
        );
    }
    if let Some(prior) = &report.forced_over {
        println!("  imported again with --force; the same content is also {prior}");
    }
    if !report.new_characteristics.is_empty() {
        println!(
            "  new characteristics: {}",
            report.new_characteristics.join(", ")
        );
    }
    if report.rejected > 0 {
        println!("  first rejections:");
        for r in &report.first_rejections {
            let column = r
                .column
                .as_deref()
                .map(|c| format!(" column \"{c}\""))
                .unwrap_or_default();
            let whole_row = if r.measurements > 1 {
                format!(" (the whole row: {} measurements)", r.measurements)
            } else {
                String::new()
            };
            println!("    line {}{column}{whole_row}: {}", r.line, r.reason);
        }
        println!("  rejections by reason:");
        for (reason, n) in &report.reasons {
            println!("    {n:>8}  {reason}");
        }
    }
    if report.rejected_not_kept > 0 {
        println!(
            "  {} rejection records in all; the database keeps the first {} (the other {} \
             rejected measurements are counted; --rejects FILE writes every record)",
            report.rejection_records,
            crate::storage::MAX_KEPT_REJECTIONS,
            report.rejected_not_kept
        );
    }
    if report.accepted == 0 && report.duplicates > 0 {
        println!(
            "  every accepted measurement was already stored ({} duplicates of an earlier export): nothing new",
            report.duplicates
        );
    }
    if report.accepted == 0 && report.duplicates == 0 {
        return Err(Error::Ingest {
            path: file.to_path_buf(),
            line: None,
            column: None,
            reason: format!(
                "nothing was stored ({} of {} measurements rejected); import #{} keeps the \
                 rejections but does not count as imported: correct the file or the \
                 configuration and import it again (no --force needed)",
                report.rejected, report.measurements_read, report.import_id
            ),
        });
    }
    Ok(report.import_id)
}

/// Arguments of the hidden `samewise generate-bench-data`.
#[derive(Debug, Args)]
pub struct GenerateArgs {
    /// Data rows (one measurement each).
    #[arg(long, default_value_t = 10_000_000)]
    pub rows: u64,
    /// Characteristics (taken in turn).
    #[arg(long, default_value_t = 50)]
    pub characteristics: u32,
    /// Grouping factors (columns machine, line, supplier, operator, lot, factor6, ...).
    #[arg(long, default_value_t = 5)]
    pub factors: u32,
    /// Days the rows are spread over, starting 2026-11-02 06:00 UTC.
    #[arg(long, default_value_t = 30)]
    pub days: u32,
    /// The CSV file to write; a matching `<FILE>.plant.toml` is written beside it.
    #[arg(long)]
    pub out: PathBuf,
}

/// Writes the deterministic benchmark plant: a long-format CSV and its configuration.
///
/// Fixed random state (a 64-bit LCG, Knuth's MMIX constants, state 0x5A3E_2026): the same
/// arguments give the same bytes. Values are 3-decimal readings around `10 + characteristic`;
/// levels are drawn uniformly per row.
pub fn generate(args: &GenerateArgs) -> Result<ExitCode> {
    const FACTOR_NAMES: [(&str, &str, u32); 5] = [
        ("machine", "M", 8),
        ("line", "L", 4),
        ("supplier", "S", 5),
        ("operator", "OP", 12),
        ("lot", "LOT", 40),
    ];
    let factor = |i: u32| -> (String, String, u32) {
        match FACTOR_NAMES.get(i as usize) {
            Some((n, p, k)) => (n.to_string(), p.to_string(), *k),
            None => (format!("factor{}", i + 1), format!("F{}_", i + 1), 6),
        }
    };
    let out = &args.out;
    let file = std::fs::File::create(out).map_err(|e| Error::io(out, e))?;
    let mut w = BufWriter::with_capacity(1 << 20, file);
    let io = |e| Error::io(out, e);
    write!(w, "timestamp,characteristic,value").map_err(io)?;
    for f in 0..args.factors {
        write!(w, ",{}", factor(f).0).map_err(io)?;
    }
    writeln!(w).map_err(io)?;
    let start_ms: i64 = 1_793_599_200_000; // 2026-11-02T06:00:00Z
    let span_ms = args.days.max(1) as i64 * 86_400_000;
    let mut state: u64 = 0x5A3E_2026;
    let mut next = || {
        state = state
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        state >> 16
    };
    for row in 0..args.rows {
        let ts = start_ms + (row as i128 * span_ms as i128 / args.rows.max(1) as i128) as i64;
        let t = chrono::DateTime::from_timestamp_millis(ts).unwrap_or_default();
        let c = (row % args.characteristics.max(1) as u64) as u32;
        let noise = (next() % 2001) as i64 - 1000; // -1.000 ..= 1.000
        let milli = (10 + c as i64) * 1000 + noise / 10;
        write!(
            w,
            "{},char{:02},{}.{:03}",
            t.format("%Y-%m-%dT%H:%M:%S%.3fZ"),
            c + 1,
            milli / 1000,
            milli % 1000
        )
        .map_err(io)?;
        for f in 0..args.factors {
            let (_, prefix, k) = factor(f);
            write!(w, ",{prefix}{}", next() % k as u64 + 1).map_err(io)?;
        }
        writeln!(w).map_err(io)?;
    }
    w.flush().map_err(io)?;
    let config_path = PathBuf::from(format!("{}.plant.toml", out.display()));
    let db_name = format!(
        "{}.db",
        out.file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default()
    );
    let mut toml = format!(
        "# Benchmark plant written by `samewise generate-bench-data` (invented data).\n\
         [plant]\nname = \"Benchmark plant\"\ntime_zone = \"Europe/Berlin\"\n\
         production_day_start = \"06:00\"\ndatabase = \"{db_name}\"\n\n"
    );
    for c in 0..args.characteristics {
        toml.push_str(&format!(
            "[[characteristic]]\nname = \"char{:02}\"\nunit = \"mm\"\nlsl = {}\nusl = {}\n\n",
            c + 1,
            9 + c,
            11 + c
        ));
    }
    for f in 0..args.factors {
        toml.push_str(&format!("[[factor]]\nname = \"{}\"\n\n", factor(f).0));
    }
    std::fs::write(&config_path, toml).map_err(|e| Error::io(&config_path, e))?;
    println!(
        "wrote {} ({} rows) and {}",
        out.display(),
        args.rows,
        config_path.display()
    );
    Ok(ExitCode::from(super::EXIT_OK))
}
