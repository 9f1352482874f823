//! `samewise status`: what the database holds (rows per characteristic, date range, last import,
//! rejected rows, schema version).

use std::process::ExitCode;

use clap::Args;

use crate::Result;

use super::common::{load_config, open_store};

/// Arguments of `samewise status`.
#[derive(Debug, Args)]
pub struct StatusArgs {
    /// Print one JSON object (times RFC 3339 in the plant's zone).
    #[arg(long)]
    pub json: bool,
}

/// Runs `samewise status`.
pub fn run(args: &StatusArgs) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    let store = open_store(&config)?;
    let status = store.status()?;
    if args.json {
        return print_json(&*store, &config, &status);
    }
    println!("database: {}", crate::storage::describe(&config));
    println!("schema version: {}", status.schema_version);
    let fmt = |t: Option<chrono::DateTime<chrono::Utc>>| {
        t.map(|t| {
            t.with_timezone(&config.plant.time_zone)
                .format("%Y-%m-%d %H:%M:%S %Z")
                .to_string()
        })
        .unwrap_or_else(|| "-".to_string())
    };
    let width = status
        .characteristics
        .iter()
        .map(|c| c.name.chars().count())
        .max()
        .unwrap_or(0)
        .max("characteristic".len());
    println!(
        "{:<width$}  {:>12}  {:<25}  {:<25}  note",
        "characteristic", "measurements", "first", "last"
    );
    let mut total = 0;
    for c in &status.characteristics {
        total += c.n_obs;
        let note = match (c.is_configured, c.is_active) {
            (false, _) => "not in the configuration",
            (true, false) => "inactive",
            (true, true) => "",
        };
        println!(
            "{:<width$}  {:>12}  {:<25}  {:<25}  {note}",
            c.name,
            c.n_obs,
            fmt(c.first),
            fmt(c.last)
        );
    }
    println!("measurements: {total}");
    println!("imports: {}", status.n_imports);
    match &status.last_import {
        Some(last) => println!("last import: {last}"),
        None => println!("last import: none (run `samewise import FILE`)"),
    }
    println!("rejected rows: {}", status.n_rejected);
    println!("events: {}", status.n_events);
    match store.last_alert()? {
        None if config.alert.is_some() => println!("last alert: none yet"),
        None => {}
        Some(a) => println!(
            "last alert: {} to `{}` for {} finding(s): {}",
            fmt(Some(a.started)),
            a.command,
            a.n_findings,
            a.error.as_deref().unwrap_or("delivered (exit status 0)")
        ),
    }
    let open = store
        .findings(None)?
        .into_iter()
        .filter(|f| f.status == crate::model::FindingStatus::Open)
        .count();
    println!("open findings: {open} (`samewise findings`)");
    if status.stale_periods.is_empty() {
        println!("stale periods: none");
    } else {
        println!(
            "stale periods (data arrived or was undone after their check; `samewise schedule due` checks them again): {}",
            stale_summary(&status.stale_periods)
        );
    }
    Ok(ExitCode::from(super::EXIT_OK))
}

/// Stale periods (schedule, kind, label; in time order) in a line: the periods one by one when
/// there are few, else per schedule and kind the count with the first and last label.
pub fn stale_summary(stale: &[(String, String, String)]) -> String {
    const LIST_UP_TO: usize = 8;
    if stale.len() <= LIST_UP_TO {
        let list: Vec<String> = stale
            .iter()
            .map(|(schedule, kind, label)| format!("{kind} {label} ({schedule})"))
            .collect();
        return list.join(", ");
    }
    /// Per (schedule, kind): how many, the first and the last label.
    type Group<'a> = ((&'a str, &'a str), (usize, &'a str, &'a str));
    // In order of first appearance.
    let mut groups: Vec<Group<'_>> = Vec::new();
    for (schedule, kind, label) in stale {
        let key = (schedule.as_str(), kind.as_str());
        match groups.iter_mut().find(|(k, _)| *k == key) {
            Some((_, (n, first, last))) => {
                *n += 1;
                if label.as_str() < *first {
                    *first = label;
                }
                if label.as_str() > *last {
                    *last = label;
                }
            }
            None => groups.push((key, (1, label, label))),
        }
    }
    let parts: Vec<String> = groups
        .iter()
        .map(|((schedule, kind), (n, first, last))| {
            if n == &1 {
                format!("{kind} {first} ({schedule})")
            } else {
                format!("{n} {kind}s {first} to {last} ({schedule})")
            }
        })
        .collect();
    format!("{} in all: {}", stale.len(), parts.join(", "))
}

/// `samewise status --json`: [`crate::outputs::StatusDocument`].
fn print_json(
    store: &dyn crate::storage::PlantStore,
    config: &crate::config::Config,
    status: &crate::storage::Status,
) -> Result<ExitCode> {
    let open = store
        .findings(None)?
        .into_iter()
        .filter(|f| f.status == crate::model::FindingStatus::Open)
        .count();
    let doc = crate::outputs::StatusDocument::new(config, status, store.last_alert()?, open);
    println!("{}", super::format::document_json(&doc));
    Ok(ExitCode::from(super::EXIT_OK))
}
