//! `samewise event add --at TIME --note TEXT [--characteristic C] [--where factor=level]...` and
//! `samewise event list [--all]`, `samewise event edit N ...`, `samewise event remove N` and
//! `samewise event history [N]`: process changes that mark charts and anchor investigations, and
//! the record of every correction made to them.

use std::process::ExitCode;

use clap::{Args, Subcommand};

use super::when::{self, When};
use crate::storage::{Event, EventEdit, NewEvent};
use crate::{Error, Result};

use super::common::{load_config, open_store};

/// Arguments of `samewise event`.
#[derive(Debug, Args)]
pub struct EventArgs {
    /// What to do.
    #[command(subcommand)]
    pub action: EventAction,
}

/// `samewise event` actions.
#[derive(Debug, Subcommand)]
pub enum EventAction {
    /// Record a process change.
    Add {
        /// When it happened: plant-local 2026-11-30 14:05 or 2026-11-30T14:05[:SS], or RFC 3339
        /// with an offset or Z (2026-11-30T13:05:00Z).
        #[arg(long, value_name = "TIME", value_parser = when::instant)]
        at: When,
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
    List {
        /// Also list removed events (marked "removed").
        #[arg(long)]
        all: bool,
        /// Print one JSON object (docs/json.md) instead of the list.
        #[arg(long)]
        json: bool,
    },
    /// Correct a recorded event: each option given replaces that field (the change is recorded).
    Edit {
        /// The event number (`samewise event list`).
        id: i64,
        /// A new time, written as for `event add --at`.
        #[arg(long, value_name = "TIME", value_parser = when::instant)]
        at: Option<When>,
        /// A new note.
        #[arg(long, value_name = "TEXT")]
        note: Option<String>,
        /// A new characteristic it concerns.
        #[arg(long, value_name = "NAME", conflicts_with = "any_characteristic")]
        characteristic: Option<String>,
        /// It concerns no single characteristic any more.
        #[arg(long)]
        any_characteristic: bool,
        /// A factor level it concerns, `factor=level` (repeatable; replaces the whole scope).
        #[arg(
            long = "where",
            value_name = "FACTOR=LEVEL",
            conflicts_with = "no_where"
        )]
        scope: Vec<String>,
        /// It concerns no factor level any more.
        #[arg(long)]
        no_where: bool,
        /// Why it is corrected (kept in the history).
        #[arg(long, value_name = "TEXT")]
        reason: Option<String>,
    },
    /// Remove a recorded event: it no longer marks charts, reports or investigations; the log
    /// keeps it, marked removed (the removal is recorded).
    Remove {
        /// The event number (`samewise event list`).
        id: i64,
        /// Why it is removed (kept in the history).
        #[arg(long, value_name = "TEXT")]
        reason: Option<String>,
    },
    /// The corrections made to one event or to all: who, when, what changed.
    History {
        /// The event number (default: every event).
        id: Option<i64>,
    },
}

fn parse_scope(scope: &[String]) -> Result<Vec<(String, String)>> {
    scope
        .iter()
        .map(|s| match s.split_once('=') {
            Some((f, l)) if !f.trim().is_empty() && !l.trim().is_empty() => {
                Ok((f.trim().to_string(), l.trim().to_string()))
            }
            _ => Err(Error::Usage(format!(
                "--where {s}: expected factor=level, e.g. machine=M4"
            ))),
        })
        .collect()
}

/// Who makes a correction, as the history records it: the login name and the host.
fn who() -> String {
    let user = ["USER", "LOGNAME", "USERNAME"]
        .iter()
        .find_map(|v| std::env::var(v).ok().filter(|u| !u.trim().is_empty()))
        .unwrap_or_else(|| "unknown user".to_string());
    format!("{user}@{}", crate::process::host_name())
}

fn print_event(e: &Event, tz: chrono_tz::Tz) {
    let mut scope: Vec<String> = Vec::new();
    if let Some(c) = &e.characteristic {
        scope.push(format!("characteristic={c}"));
    }
    scope.extend(e.scope.iter().map(|(f, l)| format!("{f}={l}")));
    println!(
        "#{}  {}  {}{}{}",
        e.id,
        e.at.with_timezone(&tz).format("%Y-%m-%d %H:%M:%S %Z"),
        e.note,
        if scope.is_empty() {
            String::new()
        } else {
            format!("  [{}]", scope.join(", "))
        },
        match e.removed {
            Some(r) => format!(
                "  (removed {})",
                r.with_timezone(&tz).format("%Y-%m-%d %H:%M %Z")
            ),
            None => String::new(),
        }
    );
}

/// Runs `samewise event`.
pub fn run(args: &EventArgs) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    let mut store = open_store(&config)?;
    let tz = config.plant.time_zone;
    match &args.action {
        EventAction::Add {
            at,
            note,
            characteristic,
            scope,
        } => {
            let at = at.resolve("--at", tz)?;
            let scope = parse_scope(scope)?;
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
        EventAction::List { all, json } => {
            let events = if *all {
                store.events_including_removed()?
            } else {
                store.events(None, None)?
            };
            if *json {
                let doc = crate::outputs::EventListDocument {
                    events: events
                        .iter()
                        .map(|e| crate::outputs::EventLine::new(e, tz))
                        .collect(),
                    include_removed: *all,
                };
                println!("{}", super::format::document_json(&doc));
                return Ok(ExitCode::from(super::EXIT_OK));
            }
            if events.is_empty() {
                println!("no events (record one with `samewise event add`)");
            }
            for e in &events {
                print_event(e, tz);
            }
        }
        EventAction::Edit {
            id,
            at,
            note,
            characteristic,
            any_characteristic,
            scope,
            no_where,
            reason,
        } => {
            let at = at.as_ref().map(|w| w.resolve("--at", tz)).transpose()?;
            let edit = EventEdit {
                at,
                note: note.clone(),
                characteristic: if *any_characteristic {
                    Some(None)
                } else {
                    characteristic.clone().map(Some)
                },
                scope: if *no_where {
                    Some(Vec::new())
                } else if scope.is_empty() {
                    None
                } else {
                    Some(parse_scope(scope)?)
                },
            };
            let e = store.edit_event(*id, &edit, &who(), reason.as_deref(), chrono::Utc::now())?;
            print!("corrected event ");
            print_event(&e, tz);
        }
        EventAction::Remove { id, reason } => {
            let e = store.remove_event(*id, &who(), reason.as_deref(), chrono::Utc::now())?;
            print!("removed event ");
            print_event(&e, tz);
        }
        EventAction::History { id } => {
            let changes = store.event_history(*id)?;
            if changes.is_empty() {
                println!("no corrections recorded");
            }
            for c in changes {
                let when = c.changed.with_timezone(&tz).format("%Y-%m-%d %H:%M:%S %Z");
                let what = match (c.action.as_str(), &c.field) {
                    ("edit", Some(field)) => format!(
                        "{field}: \"{}\" -> \"{}\"",
                        c.before.unwrap_or_default(),
                        c.after.unwrap_or_default()
                    ),
                    _ => format!("removed ({})", c.before.unwrap_or_default()),
                };
                println!(
                    "#{}  {when}  {}  {what}{}",
                    c.event_id,
                    c.who,
                    c.reason
                        .map(|r| format!("  reason: {r}"))
                        .unwrap_or_default()
                );
            }
        }
    }
    Ok(ExitCode::from(super::EXIT_OK))
}
