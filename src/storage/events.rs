//! Process-change events: a tooling change, a new supplier lot, a program edit. They mark charts
//! and anchor drift investigations. An event may name one characteristic and any number of
//! factor levels ("machine = M4") it concerns.

use chrono::{DateTime, TimeZone, Utc};
use rusqlite::params;

use crate::{Error, Result};

use super::master::{load_characteristics, load_factors};
use super::query::{closest, unknown_characteristic};
use super::Store;

/// An event to record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NewEvent {
    /// When the change happened.
    pub at: DateTime<Utc>,
    /// What changed.
    pub note: String,
    /// The characteristic it concerns, if one.
    pub characteristic: Option<String>,
    /// `(factor, level)` pairs it concerns, e.g. `("machine", "M4")`.
    pub scope: Vec<(String, String)>,
}

/// A stored event.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Event {
    /// Row id.
    pub id: i64,
    /// When the change happened.
    pub at: DateTime<Utc>,
    /// What changed.
    pub note: String,
    /// The characteristic it concerns, if one.
    pub characteristic: Option<String>,
    /// `(factor, level)` pairs it concerns.
    pub scope: Vec<(String, String)>,
    /// When it was recorded.
    pub created: DateTime<Utc>,
}

fn from_ms(ms: i64) -> DateTime<Utc> {
    Utc.timestamp_millis_opt(ms).single().unwrap_or_default()
}

impl Store {
    /// Records an event; `now` is when it is recorded. The characteristic and factors must exist
    /// (an unknown name is an error suggesting the closest one).
    pub fn add_event(&mut self, event: &NewEvent, now: DateTime<Utc>) -> Result<i64> {
        if event.note.trim().is_empty() {
            return Err(Error::Usage("the event note is empty".to_string()));
        }
        // IMMEDIATE: the write lock is taken (waiting with the busy timeout while an import
        // writes) before anything is read; a deferred transaction could not wait for it.
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let characteristic_id = match &event.characteristic {
            None => None,
            Some(name) => {
                let known = load_characteristics(&tx)?;
                Some(
                    known
                        .iter()
                        .find(|c| &c.config.name == name)
                        .map(|c| c.id)
                        .ok_or_else(|| unknown_characteristic(name, &known))?,
                )
            }
        };
        let factors = load_factors(&tx)?;
        let mut scope_ids = Vec::new();
        for (factor, level) in &event.scope {
            let f = factors.iter().find(|f| &f.name == factor).ok_or_else(|| {
                let hint = closest(factor, factors.iter().map(|f| f.name.as_str()))
                    .map(|c| format!(" (did you mean \"{c}\"?)"))
                    .unwrap_or_default();
                Error::Usage(format!("unknown factor \"{factor}\"{hint}"))
            })?;
            if scope_ids.iter().any(|(id, _)| *id == f.id) {
                return Err(Error::Usage(format!("factor \"{factor}\" is given twice")));
            }
            scope_ids.push((f.id, level.clone()));
        }
        tx.execute(
            "INSERT INTO events (ts_ms, note, characteristic_id, created_ms) VALUES (?1, ?2, ?3, ?4)",
            params![
                event.at.timestamp_millis(),
                event.note,
                characteristic_id,
                now.timestamp_millis()
            ],
        )?;
        let id = tx.last_insert_rowid();
        for (factor_id, level) in scope_ids {
            tx.execute(
                "INSERT INTO event_scopes (event_id, factor_id, level) VALUES (?1, ?2, ?3)",
                params![id, factor_id, level],
            )?;
        }
        tx.commit()?;
        Ok(id)
    }

    /// Events with `start <= at < end` (either bound open when `None`), in time order.
    pub fn events(
        &self,
        start: Option<DateTime<Utc>>,
        end: Option<DateTime<Utc>>,
    ) -> Result<Vec<Event>> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT e.id, e.ts_ms, e.note, c.name, e.created_ms FROM events e \
             LEFT JOIN characteristics c ON c.id = e.characteristic_id \
             WHERE e.ts_ms >= ?1 AND e.ts_ms < ?2 ORDER BY e.ts_ms, e.id",
        )?;
        let rows = stmt.query_map(
            params![
                start.map_or(i64::MIN, |t| t.timestamp_millis()),
                end.map_or(i64::MAX, |t| t.timestamp_millis())
            ],
            |r| {
                Ok(Event {
                    id: r.get(0)?,
                    at: from_ms(r.get(1)?),
                    note: r.get(2)?,
                    characteristic: r.get(3)?,
                    scope: Vec::new(),
                    created: from_ms(r.get(4)?),
                })
            },
        )?;
        let mut events: Vec<Event> = rows.collect::<rusqlite::Result<_>>()?;
        let mut scope = self.conn.prepare_cached(
            "SELECT f.name, s.level FROM event_scopes s JOIN factors f ON f.id = s.factor_id \
             WHERE s.event_id = ?1 ORDER BY f.position, f.name",
        )?;
        for e in &mut events {
            e.scope = scope
                .query_map([e.id], |r| Ok((r.get(0)?, r.get(1)?)))?
                .collect::<rusqlite::Result<_>>()?;
        }
        Ok(events)
    }
}
