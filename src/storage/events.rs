//! Process-change events: a tooling change, a new supplier lot, a program edit. They mark charts
//! and anchor drift investigations. An event may name one characteristic and any number of
//! factor levels ("machine = M4") it concerns.

use chrono::{DateTime, TimeZone, Utc};
use rusqlite::{params, Connection};

use crate::{Error, Result};

use super::master::{load_characteristics, load_factors};
use super::query::unknown_characteristic;
use super::Store;
use crate::names::{unknown_name, NameKind};

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
    /// When it was removed (`samewise event remove`); a removed event marks no chart and anchors
    /// nothing, but the log still lists it.
    pub removed: Option<DateTime<Utc>>,
}

/// A correction to a stored event: each field given is replaced.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct EventEdit {
    /// A new time.
    pub at: Option<DateTime<Utc>>,
    /// A new note.
    pub note: Option<String>,
    /// A new characteristic (`Some(None)`: the event concerns no single characteristic).
    pub characteristic: Option<Option<String>>,
    /// A new scope, replacing the whole old one (`Some(vec![])`: no factor level).
    pub scope: Option<Vec<(String, String)>>,
}

/// Refuses a note holding control characters (an escape sequence, a NUL): they would print as
/// something else and break the charts' SVG. Tabs are allowed.
fn check_note(note: &str) -> Result<()> {
    if let Some(c) = note.chars().find(|c| c.is_control() && *c != '\t') {
        return Err(Error::Usage(format!(
            "the event note holds a control character ({}): write it without",
            c.escape_default()
        )));
    }
    Ok(())
}

/// One recorded correction of an event: an edit of one field, or a removal.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct EventChange {
    /// The event changed.
    pub event_id: i64,
    /// When the change was made.
    pub changed: DateTime<Utc>,
    /// Who made it (user and host as the command saw them).
    pub who: String,
    /// `edit` or `remove`.
    pub action: String,
    /// The field edited (`at`, `note`, `characteristic`, `where`); `None` for a removal.
    pub field: Option<String>,
    /// The value before (for a removal: the whole event).
    pub before: Option<String>,
    /// The value after (`None` for a removal).
    pub after: Option<String>,
    /// The reason given, if any.
    pub reason: Option<String>,
}

fn from_ms(ms: i64) -> DateTime<Utc> {
    Utc.timestamp_millis_opt(ms).single().unwrap_or_default()
}

const EVENT_SELECT: &str = "SELECT e.id, e.ts_ms, e.note, c.name, e.created_ms, e.removed_ms \
     FROM events e LEFT JOIN characteristics c ON c.id = e.characteristic_id";

fn event_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<Event> {
    Ok(Event {
        id: r.get(0)?,
        at: from_ms(r.get(1)?),
        note: r.get(2)?,
        characteristic: r.get(3)?,
        scope: Vec::new(),
        created: from_ms(r.get(4)?),
        removed: r.get::<_, Option<i64>>(5)?.map(from_ms),
    })
}

fn fill_scopes(conn: &Connection, events: &mut [Event]) -> Result<()> {
    let mut scope = conn.prepare_cached(
        "SELECT f.name, s.level FROM event_scopes s JOIN factors f ON f.id = s.factor_id \
         WHERE s.event_id = ?1 ORDER BY f.position, f.name",
    )?;
    for e in events {
        e.scope = scope
            .query_map([e.id], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<_>>()?;
    }
    Ok(())
}

fn event_by_id(conn: &Connection, id: i64) -> Result<Event> {
    let mut stmt = conn.prepare_cached(&format!("{EVENT_SELECT} WHERE e.id = ?1"))?;
    let mut events: Vec<Event> = stmt
        .query_map([id], event_row)?
        .collect::<rusqlite::Result<_>>()?;
    if events.is_empty() {
        let last: Option<i64> = conn.query_row("SELECT max(id) FROM events", [], |r| r.get(0))?;
        return Err(Error::Usage(match last {
            Some(last) => format!(
                "no event #{id} (events are numbered 1 to {last}; see `samewise event list --all`)"
            ),
            None => format!("no event #{id}: no event is recorded"),
        }));
    }
    fill_scopes(conn, &mut events)?;
    Ok(events.remove(0))
}

/// An event's characteristic id and `(factor id, level)` pairs.
type ResolvedScope = (Option<i64>, Vec<(i64, String)>);

/// The characteristic id and `(factor id, level)` pairs of an event's scope. An unknown
/// characteristic, factor or level (one never stored for that factor) is refused with the
/// closest known names.
fn resolve_scope(
    conn: &Connection,
    characteristic: Option<&str>,
    scope: &[(String, String)],
) -> Result<ResolvedScope> {
    let characteristic_id = match characteristic {
        None => None,
        Some(name) => {
            let known = load_characteristics(conn)?;
            Some(
                known
                    .iter()
                    .find(|c| c.config.name == name)
                    .map(|c| c.id)
                    .ok_or_else(|| unknown_characteristic(name, &known))?,
            )
        }
    };
    let factors = load_factors(conn)?;
    let mut scope_ids: Vec<(i64, String)> = Vec::new();
    let mut levels =
        conn.prepare_cached("SELECT name FROM levels WHERE factor_id = ?1 ORDER BY name")?;
    for (factor, level) in scope {
        let f = factors.iter().find(|f| &f.name == factor).ok_or_else(|| {
            unknown_name(
                NameKind::Factor,
                factor,
                factors.iter().map(|f| f.name.as_str()),
                "the database",
            )
        })?;
        if scope_ids.iter().any(|(id, _)| *id == f.id) {
            return Err(Error::Usage(format!("factor \"{factor}\" is given twice")));
        }
        let known: Vec<String> = levels
            .query_map([f.id], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?;
        if !known.iter().any(|l| l == level) {
            return Err(unknown_name(
                NameKind::Level { factor },
                level,
                known.iter().map(String::as_str),
                "the database",
            ));
        }
        scope_ids.push((f.id, level.clone()));
    }
    Ok((characteristic_id, scope_ids))
}

fn time_text(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string()
}

fn scope_text(scope: &[(String, String)]) -> String {
    scope
        .iter()
        .map(|(f, l)| format!("{f}={l}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The whole event in one line, as the history keeps a removed one.
fn describe(e: &Event) -> String {
    let mut s = format!("at={}; note={}", time_text(e.at), e.note);
    if let Some(c) = &e.characteristic {
        s.push_str(&format!("; characteristic={c}"));
    }
    if !e.scope.is_empty() {
        s.push_str(&format!("; where={}", scope_text(&e.scope)));
    }
    s
}

/// Process changes (events) and their audit trail: what a second backend implements. Each
/// writing method is one transaction: the event and its history entries are written together or
/// not at all. Removed events are kept (marked removed), never deleted.
pub trait EventStore {
    /// Records a new event; returns its id (ids increase). An unknown characteristic, factor or
    /// level is a usage error naming the closest known one, and nothing is written.
    fn add_event(&mut self, event: &NewEvent, now: DateTime<Utc>) -> Result<i64>;
    /// Events not removed with `start <= at < end` (either bound open when `None`), in time
    /// order then id; empty when there are none.
    fn events(
        &self,
        start: Option<DateTime<Utc>>,
        end: Option<DateTime<Utc>>,
    ) -> Result<Vec<Event>>;
    /// Every event, removed ones included (marked by `removed`), in time order then id.
    fn events_including_removed(&self) -> Result<Vec<Event>>;
    /// Event `id`, removed or not; an unknown id is an error naming it.
    fn event(&self, id: i64) -> Result<Event>;
    /// Corrects event `id`: every field `edit` gives is replaced and recorded in the event's
    /// history (one entry per field whose value changes), all in one transaction. A removed
    /// event cannot be edited. Returns the event as it is now.
    fn edit_event(
        &mut self,
        id: i64,
        edit: &EventEdit,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event>;
    /// Marks event `id` removed at `now` and records who removed it and why in its history,
    /// in one transaction; the event is kept for the audit trail (listed by
    /// [`EventStore::events_including_removed`], no longer by [`EventStore::events`]). An
    /// unknown id, or an event removed already, is an error and nothing changes. Returns the
    /// event as it is now.
    fn remove_event(
        &mut self,
        id: i64,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event>;
    /// The recorded changes of event `id` (of every event when `None`), oldest first.
    fn event_history(&self, id: Option<i64>) -> Result<Vec<EventChange>>;
}

impl EventStore for Store {
    fn add_event(&mut self, event: &NewEvent, now: DateTime<Utc>) -> Result<i64> {
        if event.note.trim().is_empty() {
            return Err(Error::Usage("the event note is empty".to_string()));
        }
        check_note(&event.note)?;
        // IMMEDIATE: the write lock is taken (waiting with the busy timeout while an import
        // writes) before anything is read; a deferred transaction could not wait for it.
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let (characteristic_id, scope_ids) =
            resolve_scope(&tx, event.characteristic.as_deref(), &event.scope)?;
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
    fn events(
        &self,
        start: Option<DateTime<Utc>>,
        end: Option<DateTime<Utc>>,
    ) -> Result<Vec<Event>> {
        let mut stmt = self.conn.prepare_cached(&format!(
            "{EVENT_SELECT} WHERE e.removed_ms IS NULL AND e.ts_ms >= ?1 AND e.ts_ms < ?2 \
             ORDER BY e.ts_ms, e.id"
        ))?;
        let rows = stmt.query_map(
            params![
                start.map_or(i64::MIN, |t| t.timestamp_millis()),
                end.map_or(i64::MAX, |t| t.timestamp_millis())
            ],
            event_row,
        )?;
        let mut events: Vec<Event> = rows.collect::<rusqlite::Result<_>>()?;
        fill_scopes(&self.conn, &mut events)?;
        Ok(events)
    }
    fn events_including_removed(&self) -> Result<Vec<Event>> {
        let mut stmt = self
            .conn
            .prepare_cached(&format!("{EVENT_SELECT} ORDER BY e.ts_ms, e.id"))?;
        let rows = stmt.query_map([], event_row)?;
        let mut events: Vec<Event> = rows.collect::<rusqlite::Result<_>>()?;
        fill_scopes(&self.conn, &mut events)?;
        Ok(events)
    }
    fn event(&self, id: i64) -> Result<Event> {
        event_by_id(&self.conn, id)
    }
    fn edit_event(
        &mut self,
        id: i64,
        edit: &EventEdit,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event> {
        if let Some(note) = &edit.note {
            check_note(note)?;
        }
        if edit == &EventEdit::default() {
            return Err(Error::Usage(
                "nothing to change: give --at, --note, --characteristic/--any-characteristic or \
                 --where/--no-where"
                    .to_string(),
            ));
        }
        if let Some(note) = &edit.note {
            if note.trim().is_empty() {
                return Err(Error::Usage("the event note is empty".to_string()));
            }
        }
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let old = event_by_id(&tx, id)?;
        if let Some(removed) = old.removed {
            return Err(Error::Usage(format!(
                "event #{id} was removed ({}); record a new event instead",
                removed.format("%Y-%m-%d %H:%M UTC")
            )));
        }
        let characteristic = match &edit.characteristic {
            Some(c) => c.clone(),
            None => old.characteristic.clone(),
        };
        let scope = edit.scope.clone().unwrap_or_else(|| old.scope.clone());
        let (characteristic_id, scope_ids) = resolve_scope(&tx, characteristic.as_deref(), &scope)?;
        let at = edit.at.unwrap_or(old.at);
        let note = edit.note.clone().unwrap_or_else(|| old.note.clone());
        tx.execute(
            "UPDATE events SET ts_ms = ?2, note = ?3, characteristic_id = ?4 WHERE id = ?1",
            params![id, at.timestamp_millis(), note, characteristic_id],
        )?;
        tx.execute("DELETE FROM event_scopes WHERE event_id = ?1", [id])?;
        for (factor_id, level) in scope_ids {
            tx.execute(
                "INSERT INTO event_scopes (event_id, factor_id, level) VALUES (?1, ?2, ?3)",
                params![id, factor_id, level],
            )?;
        }
        let new = event_by_id(&tx, id)?;
        let fields = [
            ("at", time_text(old.at), time_text(new.at)),
            ("note", old.note.clone(), new.note.clone()),
            (
                "characteristic",
                old.characteristic.clone().unwrap_or_default(),
                new.characteristic.clone().unwrap_or_default(),
            ),
            ("where", scope_text(&old.scope), scope_text(&new.scope)),
        ];
        let mut changed = 0;
        for (field, before, after) in fields {
            if before != after {
                changed += 1;
                tx.execute(
                    "INSERT INTO event_history \
                     (event_id, changed_ms, who, action, field, before, after, reason) \
                     VALUES (?1, ?2, ?3, 'edit', ?4, ?5, ?6, ?7)",
                    params![
                        id,
                        now.timestamp_millis(),
                        who,
                        field,
                        before,
                        after,
                        reason
                    ],
                )?;
            }
        }
        if changed == 0 {
            return Err(Error::Usage(format!(
                "event #{id} already reads so: nothing changed"
            )));
        }
        tx.commit()?;
        Ok(new)
    }
    fn remove_event(
        &mut self,
        id: i64,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event> {
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let old = event_by_id(&tx, id)?;
        if let Some(removed) = old.removed {
            return Err(Error::Usage(format!(
                "event #{id} was already removed ({})",
                removed.format("%Y-%m-%d %H:%M UTC")
            )));
        }
        tx.execute(
            "UPDATE events SET removed_ms = ?2 WHERE id = ?1",
            params![id, now.timestamp_millis()],
        )?;
        tx.execute(
            "INSERT INTO event_history (event_id, changed_ms, who, action, before, reason) \
             VALUES (?1, ?2, ?3, 'remove', ?4, ?5)",
            params![id, now.timestamp_millis(), who, describe(&old), reason],
        )?;
        let new = event_by_id(&tx, id)?;
        tx.commit()?;
        Ok(new)
    }
    fn event_history(&self, id: Option<i64>) -> Result<Vec<EventChange>> {
        if let Some(id) = id {
            event_by_id(&self.conn, id)?;
        }
        let mut stmt = self.conn.prepare_cached(
            "SELECT event_id, changed_ms, who, action, field, before, after, reason \
             FROM event_history WHERE ?1 IS NULL OR event_id = ?1 ORDER BY id",
        )?;
        let rows = stmt.query_map([id], |r| {
            Ok(EventChange {
                event_id: r.get(0)?,
                changed: from_ms(r.get(1)?),
                who: r.get(2)?,
                action: r.get(3)?,
                field: r.get(4)?,
                before: r.get(5)?,
                after: r.get(6)?,
                reason: r.get(7)?,
            })
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
}
