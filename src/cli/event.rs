//! `samewise event add --at TIME --note TEXT [--characteristic C] [--where factor=level]...` and
//! `samewise event list`: process changes that mark charts and anchor investigations.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Subcommand};

use crate::ingest::timestamp::TimestampParser;
use crate::storage::NewEvent;
use crate::{Error, Result};

use super::common::{load_config, open_store};

/// Arguments of `samewise event`.
#[derive(Debug, Args)]
pub struct EventArgs {
    /// The plant configuration (default: $SAMEWISE_CONFIG, then ./plant.toml).
    #[arg(long, value_name = "FILE", global = true)]
    pub config: Option<PathBuf>,
    /// What to do.
    #[command(subcommand)]
    pub action: EventAction,
}

/// `samewise event` actions.
#[derive(Debug, Subcommand)]
pub enum EventAction {
    /// Record a process change.
    Add {
        /// When it happened: ISO 8601, with a zone or in the plant's zone ("2026-11-30 14:05").
        #[arg(long, value_name = "TIME")]
        at: String,
        /// What changed.
        #[arg(long, value_name = "TEXT")]
        note: String,
        /// The characteristic it concerns.
        #[arg(long, value_name = "NAME")]
        characteristic: Option<String>,
        /// A factor level it concerns, `factor=level` (repeatable).
        #[arg(long = "where", value_name = "FACTOR=LEVEL")]
        scope: Vec<String>,
    },
    /// List the recorded events in time order.
    List,
}

/// Runs `samewise event`.
pub fn run(args: &EventArgs) -> Result<ExitCode> {
    let config = load_config(args.config.as_deref())?;
    let mut store = open_store(&config)?;
    let tz = config.plant.time_zone;
    match &args.action {
        EventAction::Add {
            at,
            note,
            characteristic,
            scope,
        } => {
            let parser = TimestampParser::new(None, tz).map_err(Error::Usage)?;
            let at = parser
                .parse(at)
                .map_err(|r| Error::Usage(format!("--at {at}: {r}")))?;
            let scope = scope
                .iter()
                .map(|s| match s.split_once('=') {
                    Some((f, l)) if !f.trim().is_empty() && !l.trim().is_empty() => {
                        Ok((f.trim().to_string(), l.trim().to_string()))
                    }
                    _ => Err(Error::Usage(format!(
                        "--where {s}: expected factor=level, e.g. machine=M4"
                    ))),
                })
                .collect::<Result<Vec<_>>>()?;
            let event = NewEvent {
                at,
                note: note.clone(),
                characteristic: characteristic.clone(),
                scope,
            };
            let id = store.add_event(&event, chrono::Utc::now())?;
            println!(
                "recorded event #{id} at {}",
                at.with_timezone(&tz).format("%Y-%m-%d %H:%M:%S %Z")
            );
        }
        EventAction::List => {
            let events = store.events(None, None)?;
            if events.is_empty() {
                println!("no events (record one with `samewise event add`)");
            }
            for e in events {
                let mut scope: Vec<String> = Vec::new();
                if let Some(c) = &e.characteristic {
                    scope.push(format!("characteristic={c}"));
                }
                scope.extend(e.scope.iter().map(|(f, l)| format!("{f}={l}")));
                println!(
                    "#{}  {}  {}{}",
                    e.id,
                    e.at.with_timezone(&tz).format("%Y-%m-%d %H:%M:%S %Z"),
                    e.note,
                    if scope.is_empty() {
                        String::new()
                    } else {
                        format!("  [{}]", scope.join(", "))
                    }
                );
            }
        }
    }
    Ok(ExitCode::from(super::EXIT_OK))
}
