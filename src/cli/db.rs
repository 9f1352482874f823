//! `samewise db check` (integrity check, counts, orphan rows) and `samewise db backup PATH`
//! (SQLite online backup, safe while other processes use the database).

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Subcommand};

use crate::Result;

use super::common::{load_config, open_store};

/// Arguments of `samewise db`.
#[derive(Debug, Args)]
pub struct DbArgs {
    /// What to do.
    #[command(subcommand)]
    pub action: DbAction,
}

/// `samewise db` actions.
#[derive(Debug, Subcommand)]
pub enum DbAction {
    /// Check the database: SQLite integrity, foreign keys, import counts; print row counts.
    Check {
        /// Print one JSON object (counts, integrity, orphans, problems, sound).
        #[arg(long)]
        json: bool,
    },
    /// Copy the database to PATH with SQLite's online backup (safe while it is in use).
    Backup {
        /// The new file (must not exist; written under a temporary name and renamed once it has
        /// passed its integrity check).
        path: PathBuf,
    },
}

/// Runs `samewise db`.
pub fn run(args: &DbArgs) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    let store = open_store(&config)?;
    match &args.action {
        DbAction::Check { json } => {
            let report = store.integrity_check()?;
            if *json {
                let doc = crate::outputs::DbCheckDocument::new(
                    crate::storage::describe(&config),
                    &report,
                );
                println!("{}", super::format::document_json(&doc));
                return if report.is_ok() {
                    Ok(ExitCode::from(super::EXIT_OK))
                } else {
                    Ok(ExitCode::from(super::EXIT_ERROR))
                };
            }
            for (table, n) in &report.counts {
                println!("{table}: {n}");
            }
            println!("integrity: {}", report.integrity.join("; "));
            for v in &report.foreign_keys {
                println!("orphan row: {v}");
            }
            for p in &report.problems {
                println!("problem: {p}");
            }
            if report.is_ok() {
                println!("database is sound");
                Ok(ExitCode::from(super::EXIT_OK))
            } else {
                Err(crate::Error::Database(format!(
                    "{} failed the check (see above)",
                    crate::storage::describe(&config)
                )))
            }
        }
        DbAction::Backup { path } => {
            let protected = crate::output::Protected::plant(&config.plant.database, &config.path);
            crate::output::refuse_protected(path, "db backup", &protected)?;
            store.backup(path)?;
            println!(
                "backed up {} to {}",
                crate::storage::describe(&config),
                path.display()
            );
            Ok(ExitCode::from(super::EXIT_OK))
        }
    }
}
