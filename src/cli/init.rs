//! `samewise init`: create the plant database from the configuration, or bring an existing one
//! up to date (new migrations; new and changed characteristics and factors). Measurements are
//! never touched.

use std::process::ExitCode;

use clap::Args;

use crate::storage::{self, migrate};
use crate::Result;

use super::common::load_config;

/// Arguments of `samewise init` (none of its own: the global `--config` names the plant).
#[derive(Debug, Args)]
pub struct InitArgs {}

/// Runs `samewise init`.
pub fn run(_args: &InitArgs) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    let db = crate::storage::describe(&config);
    if config.plant.server.is_none() {
        super::common::note_database(&config.plant.database);
    }
    // A 0-byte or table-less file holds nothing: the database is created in it. Another
    // program's database is refused (by `storage::open_or_create`).
    let existed = storage::exists(&config)?;
    let before = if existed {
        Some(storage::open(&config)?.schema_version()?)
    } else {
        None
    };
    let mut store = storage::open_or_create(&config)?;
    let report = store.sync_config(&config)?;
    let version = store.schema_version()?;
    match before {
        None => println!("created {db} (schema version {version})"),
        Some(v) if v < migrate::latest_version() => {
            println!("updated {db}: schema version {v} -> {version}")
        }
        Some(_) => println!("{db} is at schema version {version}"),
    }
    let list = |label: &str, names: &[String]| {
        if !names.is_empty() {
            println!("{label} ({}): {}", names.len(), names.join(", "));
        }
    };
    list("characteristics added", &report.characteristics_added);
    list("characteristics updated", &report.characteristics_updated);
    list(
        "characteristics kept but not in the configuration",
        &report.characteristics_not_configured,
    );
    list("factors added", &report.factors_added);
    list("factors updated", &report.factors_updated);
    list(
        "factors kept but not in the configuration",
        &report.factors_not_configured,
    );
    if existed && report.is_unchanged() {
        println!("characteristics and factors already match the configuration");
    }
    Ok(ExitCode::from(super::EXIT_OK))
}
