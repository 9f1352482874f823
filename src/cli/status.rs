//! `samewise status`: what the database holds (rows per characteristic, date range, last import,
//! rejected rows, schema version).

use std::path::PathBuf;
use std::process::ExitCode;

use clap::Args;

use crate::Result;

use super::common::{load_config, open_store};

/// Arguments of `samewise status`.
#[derive(Debug, Args)]
pub struct StatusArgs {
    /// The plant configuration (default: $SAMEWISE_CONFIG, then ./plant.toml).
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
}

/// Runs `samewise status`.
pub fn run(args: &StatusArgs) -> Result<ExitCode> {
    let config = load_config(args.config.as_deref())?;
    let store = open_store(&config)?;
    let status = store.status()?;
    println!("database: {}", config.plant.database.display());
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
    if status.stale_periods.is_empty() {
        println!("stale periods: none");
    } else {
        let list: Vec<String> = status
            .stale_periods
            .iter()
            .map(|(schedule, kind, label)| format!("{kind} {label} ({schedule})"))
            .collect();
        println!(
            "stale periods (data arrived after their check; `samewise schedule due` checks them again): {}",
            list.join(", ")
        );
    }
    Ok(ExitCode::from(super::EXIT_OK))
}
