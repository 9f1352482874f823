//! Process-change events: a tooling change, a new supplier lot, a program edit. They mark charts
//! and anchor drift investigations. An event may name one characteristic and any number of
//! factor levels ("machine = M4") it concerns.

use chrono::{DateTime, Utc};
use rusqlite::{params, Connection};

use crate::{Error, Result};

use super::columns::{
    event_change_from, event_from, sqlite_row, sqlite_rows, ColumnRow, EVENT_CHANGE_COLUMNS,
    EVENT_SELECT,
};
use super::master::{load_characteristics, load_factors};
use super::query::unknown_characteristic_among;
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
pub(super) fn check_note(note: &str) -> Result<()> {
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

impl Store {
    /// Records an event; `now` is when it is recorded. The characteristic and factors must exist
    /// (an unknown name is an error suggesting the closest one).
    pub fn add_event(&mut self, event: &NewEvent, now: DateTime<Utc>) -> Result<i64> {
        check_new_event(event)?;
        // IMMEDIATE: the write lock is taken (waiting with the busy timeout while an import
        // writes) before anything is read; a deferred transaction could not wait for it.
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let (characteristic_id, scope_ids) = resolve_scope(
            &mut SqliteNames(&tx),
            event.characteristic.as_deref(),
            &event.scope,
        )?;
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

    /// Events not removed with `start <= at < end` (either bound open when `None`), in time order.
    pub fn events(
        &self,
        start: Option<DateTime<Utc>>,
        end: Option<DateTime<Utc>>,
    ) -> Result<Vec<Event>> {
        let mut events = sqlite_rows(
            &self.conn,
            &format!(
                "{EVENT_SELECT} WHERE e.removed_ms IS NULL AND e.ts_ms >= ?1 AND e.ts_ms < ?2 \
                 ORDER BY e.ts_ms, e.id"
            ),
            params![
                start.map_or(i64::MIN, |t| t.timestamp_millis()),
                end.map_or(i64::MAX, |t| t.timestamp_millis())
            ],
            |r| event_from(r),
        )?;
        fill_scopes(&self.conn, &mut events)?;
        Ok(events)
    }

    /// Every event, removed ones included (marked by `removed`), in time order.
    pub fn events_including_removed(&self) -> Result<Vec<Event>> {
        let mut events = sqlite_rows(
            &self.conn,
            &format!("{EVENT_SELECT} ORDER BY e.ts_ms, e.id"),
            [],
            |r| event_from(r),
        )?;
        fill_scopes(&self.conn, &mut events)?;
        Ok(events)
    }

    /// Event `id`, removed or not.
    pub fn event(&self, id: i64) -> Result<Event> {
        event_by_id(&self.conn, id)
    }

    /// Corrects event `id`: every field `edit` gives is replaced and recorded in the event's
    /// history (one entry per field whose value changes). A removed event cannot be edited.
    /// Returns the event as it is now.
    pub fn edit_event(
        &mut self,
        id: i64,
        edit: &EventEdit,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event> {
        check_edit(edit)?;
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let old = event_by_id(&tx, id)?;
        check_editable(&old)?;
        let edited = apply_edit(&old, edit);
        let (characteristic_id, scope_ids) = resolve_scope(
            &mut SqliteNames(&tx),
            edited.characteristic.as_deref(),
            &edited.scope,
        )?;
        let (at, note) = (edited.at, &edited.note);
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
        let changes = changed_fields(&old, &new);
        if changes.is_empty() {
            return Err(nothing_changed(id));
        }
        for (field, before, after) in changes {
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
        tx.commit()?;
        Ok(new)
    }

    /// Removes event `id`: it no longer marks charts or anchors investigations, the log keeps it
    /// marked removed, and the removal (with the whole event as it was) enters its history.
    pub fn remove_event(
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
        check_removable(&old)?;
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

    /// The recorded corrections, of event `id` or of every event, oldest first.
    pub fn event_history(&self, id: Option<i64>) -> Result<Vec<EventChange>> {
        if let Some(id) = id {
            event_by_id(&self.conn, id)?;
        }
        sqlite_rows(
            &self.conn,
            &format!(
                "SELECT {EVENT_CHANGE_COLUMNS} FROM event_history \
                 WHERE ?1 IS NULL OR event_id = ?1 ORDER BY id"
            ),
            [id],
            |r| event_change_from(r),
        )
    }
}

fn fill_scopes(conn: &Connection, events: &mut [Event]) -> Result<()> {
    let mut scope = conn.prepare_cached(
        "SELECT f.name, s.level FROM event_scopes s JOIN factors f ON f.id = s.factor_id \
         WHERE s.event_id = ?1 ORDER BY f.position, f.name",
    )?;
    for e in events {
        let mut rows = scope.query([e.id])?;
        while let Some(r) = rows.next()? {
            e.scope.push((r.text(0)?, r.text(1)?));
        }
    }
    Ok(())
}

fn event_by_id(conn: &Connection, id: i64) -> Result<Event> {
    let event = sqlite_row(
        conn,
        &format!("{EVENT_SELECT} WHERE e.id = ?1"),
        [id],
        |r| event_from(r),
    )?;
    let Some(mut event) = event else {
        let last: Option<i64> = conn.query_row("SELECT max(id) FROM events", [], |r| r.get(0))?;
        return Err(unknown_event(id, last));
    };
    fill_scopes(conn, std::slice::from_mut(&mut event))?;
    Ok(event)
}

/// The error for event `id`, which does not exist; `last` is the highest id stored.
pub(super) fn unknown_event(id: i64, last: Option<i64>) -> Error {
    Error::Usage(match last {
        Some(last) => format!(
            "no event #{id} (events are numbered 1 to {last}; see `samewise event list --all`)"
        ),
        None => format!("no event #{id}: no event is recorded"),
    })
}

/// An event's characteristic id and `(factor id, level)` pairs.
pub(super) type ResolvedScope = (Option<i64>, Vec<(i64, String)>);

/// What the names of an event's scope are checked against; each backend reads them in its own
/// SQL.
pub(super) trait ScopeNames {
    /// Every stored characteristic: (id, name), in id order.
    fn characteristics(&mut self) -> Result<Vec<(i64, String)>>;
    /// Every stored factor: (id, name), configured ones in configuration order, then the others
    /// by name.
    fn factors(&mut self) -> Result<Vec<(i64, String)>>;
    /// The levels stored for a factor, by name.
    fn levels(&mut self, factor_id: i64) -> Result<Vec<String>>;
}

/// [`ScopeNames`] read through an SQLite connection.
struct SqliteNames<'c>(&'c Connection);

impl ScopeNames for SqliteNames<'_> {
    fn characteristics(&mut self) -> Result<Vec<(i64, String)>> {
        Ok(load_characteristics(self.0)?
            .into_iter()
            .map(|c| (c.id, c.config.name))
            .collect())
    }
    fn factors(&mut self) -> Result<Vec<(i64, String)>> {
        Ok(load_factors(self.0)?
            .into_iter()
            .map(|f| (f.id, f.name))
            .collect())
    }
    fn levels(&mut self, factor_id: i64) -> Result<Vec<String>> {
        sqlite_rows(
            self.0,
            "SELECT name FROM levels WHERE factor_id = ?1 ORDER BY name",
            [factor_id],
            |r| r.text(0),
        )
    }
}

/// The characteristic id and `(factor id, level)` pairs of an event's scope. An unknown
/// characteristic, factor or level (one never stored for that factor) is refused with the
/// closest known names.
pub(super) fn resolve_scope(
    names: &mut dyn ScopeNames,
    characteristic: Option<&str>,
    scope: &[(String, String)],
) -> Result<ResolvedScope> {
    let characteristic_id = match characteristic {
        None => None,
        Some(name) => {
            let known = names.characteristics()?;
            Some(
                known
                    .iter()
                    .find(|(_, n)| n == name)
                    .map(|(id, _)| *id)
                    .ok_or_else(|| {
                        unknown_characteristic_among(name, known.iter().map(|(_, n)| n.as_str()))
                    })?,
            )
        }
    };
    let factors = names.factors()?;
    let mut scope_ids: Vec<(i64, String)> = Vec::new();
    for (factor, level) in scope {
        let (factor_id, _) = factors.iter().find(|(_, n)| n == factor).ok_or_else(|| {
            unknown_name(
                NameKind::Factor,
                factor,
                factors.iter().map(|(_, n)| n.as_str()),
                "the database",
            )
        })?;
        if scope_ids.iter().any(|(id, _)| id == factor_id) {
            return Err(Error::Usage(format!("factor \"{factor}\" is given twice")));
        }
        let known = names.levels(*factor_id)?;
        if !known.iter().any(|l| l == level) {
            return Err(unknown_name(
                NameKind::Level { factor },
                level,
                known.iter().map(String::as_str),
                "the database",
            ));
        }
        scope_ids.push((*factor_id, level.clone()));
    }
    Ok((characteristic_id, scope_ids))
}

/// Refuses an event with an empty note or one holding control characters.
pub(super) fn check_new_event(event: &NewEvent) -> Result<()> {
    if event.note.trim().is_empty() {
        return Err(Error::Usage("the event note is empty".to_string()));
    }
    check_note(&event.note)
}

/// Refuses an edit that changes nothing or gives an empty or unprintable note.
pub(super) fn check_edit(edit: &EventEdit) -> Result<()> {
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
    Ok(())
}

/// Refuses to edit a removed event.
pub(super) fn check_editable(old: &Event) -> Result<()> {
    match old.removed {
        Some(removed) => Err(Error::Usage(format!(
            "event #{} was removed ({}); record a new event instead",
            old.id,
            removed.format("%Y-%m-%d %H:%M UTC")
        ))),
        None => Ok(()),
    }
}

/// Refuses to remove an event twice.
pub(super) fn check_removable(old: &Event) -> Result<()> {
    match old.removed {
        Some(removed) => Err(Error::Usage(format!(
            "event #{} was already removed ({})",
            old.id,
            removed.format("%Y-%m-%d %H:%M UTC")
        ))),
        None => Ok(()),
    }
}

/// The event as `edit` would leave it (names not yet checked).
pub(super) fn apply_edit(old: &Event, edit: &EventEdit) -> Event {
    Event {
        at: edit.at.unwrap_or(old.at),
        note: edit.note.clone().unwrap_or_else(|| old.note.clone()),
        characteristic: match &edit.characteristic {
            Some(c) => c.clone(),
            None => old.characteristic.clone(),
        },
        scope: edit.scope.clone().unwrap_or_else(|| old.scope.clone()),
        ..old.clone()
    }
}

/// The fields whose text differs between `old` and `new`: (field, before, after), one history
/// entry each.
pub(super) fn changed_fields(old: &Event, new: &Event) -> Vec<(&'static str, String, String)> {
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
    fields
        .into_iter()
        .filter(|(_, before, after)| before != after)
        .collect()
}

/// The error for an edit that leaves the event as it was.
pub(super) fn nothing_changed(id: i64) -> Error {
    Error::Usage(format!("event #{id} already reads so: nothing changed"))
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
pub(super) fn describe(e: &Event) -> String {
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
        Store::add_event(self, event, now)
    }
    fn events(
        &self,
        start: Option<DateTime<Utc>>,
        end: Option<DateTime<Utc>>,
    ) -> Result<Vec<Event>> {
        Store::events(self, start, end)
    }
    fn events_including_removed(&self) -> Result<Vec<Event>> {
        Store::events_including_removed(self)
    }
    fn event(&self, id: i64) -> Result<Event> {
        Store::event(self, id)
    }
    fn edit_event(
        &mut self,
        id: i64,
        edit: &EventEdit,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event> {
        Store::edit_event(self, id, edit, who, reason, now)
    }
    fn remove_event(
        &mut self,
        id: i64,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event> {
        Store::remove_event(self, id, who, reason, now)
    }
    fn event_history(&self, id: Option<i64>) -> Result<Vec<EventChange>> {
        Store::event_history(self, id)
    }
}
