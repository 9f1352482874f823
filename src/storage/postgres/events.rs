//! Process-change events and their audit trail on PostgreSQL: [`EventStore`] for [`PgStore`].
//!
//! The checks, the scope resolution, the history entries and the messages are the SQLite
//! implementation's (`storage::events`); only the SQL is this backend's. An edit or removal
//! locks the event's row first, so two engineers correcting one event at once are serialised
//! and each history entry's "before" is what the other left.

use chrono::{DateTime, Utc};
use postgres::GenericClient;

use super::runs::bound_lock_waits;
use super::PgStore;
use crate::storage::columns::{
    event_change_from, event_from, ColumnRow, EVENT_CHANGE_COLUMNS, EVENT_SELECT,
};
use crate::storage::events::{
    apply_edit, changed_fields, check_edit, check_editable, check_new_event, check_removable,
    describe, nothing_changed, resolve_scope, unknown_event, Event, EventChange, EventEdit,
    EventStore, NewEvent, ScopeNames,
};
use crate::Result;

/// [`ScopeNames`] read through a PostgreSQL connection or transaction. Names sort by their
/// bytes, as SQLite's default collation does.
struct PgNames<'c, C: GenericClient>(&'c mut C);

impl<C: GenericClient> ScopeNames for PgNames<'_, C> {
    fn characteristics(&mut self) -> Result<Vec<(i64, String)>> {
        let rows = self
            .0
            .query("SELECT id, name FROM characteristics ORDER BY id", &[])?;
        rows.iter().map(|r| Ok((r.int(0)?, r.text(1)?))).collect()
    }
    fn factors(&mut self) -> Result<Vec<(i64, String)>> {
        Ok(super::master::load_factors(self.0)?
            .into_iter()
            .map(|f| (f.id, f.name))
            .collect())
    }
    fn levels(&mut self, factor_id: i64) -> Result<Vec<String>> {
        let rows = self.0.query(
            "SELECT name FROM levels WHERE factor_id = $1 ORDER BY name COLLATE \"C\"",
            &[&factor_id],
        )?;
        rows.iter().map(|r| r.text(0)).collect()
    }
}

/// Fills the scopes of `events` with one query: (factor, level) in factor order.
fn fill_scopes(client: &mut impl GenericClient, events: &mut [Event]) -> Result<()> {
    if events.is_empty() {
        return Ok(());
    }
    let ids: Vec<i64> = events.iter().map(|e| e.id).collect();
    let rows = client.query(
        "SELECT s.event_id, f.name, s.level FROM event_scopes s \
         JOIN factors f ON f.id = s.factor_id WHERE s.event_id = ANY($1) \
         ORDER BY s.event_id, f.position, f.name COLLATE \"C\"",
        &[&ids],
    )?;
    let position: std::collections::HashMap<i64, usize> =
        ids.iter().enumerate().map(|(i, id)| (*id, i)).collect();
    for r in &rows {
        if let Some(&i) = position.get(&r.int(0)?) {
            events[i].scope.push((r.text(1)?, r.text(2)?));
        }
    }
    Ok(())
}

/// Events a query selects (its columns those of [`EVENT_SELECT`]), with their scopes.
fn events_where(
    client: &mut impl GenericClient,
    sql: &str,
    params: &[&(dyn postgres::types::ToSql + Sync)],
) -> Result<Vec<Event>> {
    let mut events = client
        .query(sql, params)?
        .iter()
        .map(event_from)
        .collect::<Result<Vec<_>>>()?;
    fill_scopes(client, &mut events)?;
    Ok(events)
}

/// Event `id` with its scope; an unknown id is the error naming the range of ids.
fn event_by_id(client: &mut impl GenericClient, id: i64) -> Result<Event> {
    let mut events = events_where(client, &format!("{EVENT_SELECT} WHERE e.id = $1"), &[&id])?;
    if events.is_empty() {
        let last = client
            .query_one("SELECT max(id) FROM events", &[])?
            .opt_int(0)?;
        return Err(unknown_event(id, last));
    }
    Ok(events.remove(0))
}

/// Locks event `id`'s row for the rest of the transaction (nothing when there is no such event:
/// reading it then reports that).
fn lock_event(client: &mut impl GenericClient, id: i64) -> Result<()> {
    client.query("SELECT id FROM events WHERE id = $1 FOR UPDATE", &[&id])?;
    Ok(())
}

/// Writes an event's scope rows.
fn insert_scopes(
    client: &mut impl GenericClient,
    id: i64,
    scope_ids: &[(i64, String)],
) -> Result<()> {
    for (factor_id, level) in scope_ids {
        client.execute(
            "INSERT INTO event_scopes (event_id, factor_id, level) VALUES ($1, $2, $3)",
            &[&id, factor_id, level],
        )?;
    }
    Ok(())
}

impl EventStore for PgStore {
    fn add_event(&mut self, event: &NewEvent, now: DateTime<Utc>) -> Result<i64> {
        check_new_event(event)?;
        let mut client = self.conn();
        let mut tx = client.transaction()?;
        bound_lock_waits(&mut tx)?;
        let (characteristic_id, scope_ids) = resolve_scope(
            &mut PgNames(&mut tx),
            event.characteristic.as_deref(),
            &event.scope,
        )?;
        let id = tx
            .query_one(
                "INSERT INTO events (ts_ms, note, characteristic_id, created_ms) \
                 VALUES ($1, $2, $3, $4) RETURNING id",
                &[
                    &event.at.timestamp_millis(),
                    &event.note,
                    &characteristic_id,
                    &now.timestamp_millis(),
                ],
            )?
            .int(0)?;
        insert_scopes(&mut tx, id, &scope_ids)?;
        tx.commit()?;
        Ok(id)
    }

    fn events(
        &self,
        start: Option<DateTime<Utc>>,
        end: Option<DateTime<Utc>>,
    ) -> Result<Vec<Event>> {
        let start = start.map_or(i64::MIN, |t| t.timestamp_millis());
        let end = end.map_or(i64::MAX, |t| t.timestamp_millis());
        events_where(
            &mut *self.conn(),
            &format!(
                "{EVENT_SELECT} WHERE e.removed_ms IS NULL AND e.ts_ms >= $1 AND e.ts_ms < $2 \
                 ORDER BY e.ts_ms, e.id"
            ),
            &[&start, &end],
        )
    }

    fn events_including_removed(&self) -> Result<Vec<Event>> {
        events_where(
            &mut *self.conn(),
            &format!("{EVENT_SELECT} ORDER BY e.ts_ms, e.id"),
            &[],
        )
    }

    fn event(&self, id: i64) -> Result<Event> {
        event_by_id(&mut *self.conn(), id)
    }

    fn edit_event(
        &mut self,
        id: i64,
        edit: &EventEdit,
        who: &str,
        reason: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<Event> {
        check_edit(edit)?;
        let mut client = self.conn();
        let mut tx = client.transaction()?;
        bound_lock_waits(&mut tx)?;
        lock_event(&mut tx, id)?;
        let old = event_by_id(&mut tx, id)?;
        check_editable(&old)?;
        let edited = apply_edit(&old, edit);
        let (characteristic_id, scope_ids) = resolve_scope(
            &mut PgNames(&mut tx),
            edited.characteristic.as_deref(),
            &edited.scope,
        )?;
        tx.execute(
            "UPDATE events SET ts_ms = $2, note = $3, characteristic_id = $4 WHERE id = $1",
            &[
                &id,
                &edited.at.timestamp_millis(),
                &edited.note,
                &characteristic_id,
            ],
        )?;
        tx.execute("DELETE FROM event_scopes WHERE event_id = $1", &[&id])?;
        insert_scopes(&mut tx, id, &scope_ids)?;
        let new = event_by_id(&mut tx, id)?;
        let changes = changed_fields(&old, &new);
        if changes.is_empty() {
            // Dropping the transaction rolls the update back.
            return Err(nothing_changed(id));
        }
        let changed_ms = now.timestamp_millis();
        for (field, before, after) in changes {
            tx.execute(
                "INSERT INTO event_history \
                 (event_id, changed_ms, who, action, field, before, after, reason) \
                 VALUES ($1, $2, $3, 'edit', $4, $5, $6, $7)",
                &[&id, &changed_ms, &who, &field, &before, &after, &reason],
            )?;
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
        let mut client = self.conn();
        let mut tx = client.transaction()?;
        bound_lock_waits(&mut tx)?;
        lock_event(&mut tx, id)?;
        let old = event_by_id(&mut tx, id)?;
        check_removable(&old)?;
        let removed_ms = now.timestamp_millis();
        tx.execute(
            "UPDATE events SET removed_ms = $2 WHERE id = $1",
            &[&id, &removed_ms],
        )?;
        tx.execute(
            "INSERT INTO event_history (event_id, changed_ms, who, action, before, reason) \
             VALUES ($1, $2, $3, 'remove', $4, $5)",
            &[&id, &removed_ms, &who, &describe(&old), &reason],
        )?;
        let new = event_by_id(&mut tx, id)?;
        tx.commit()?;
        Ok(new)
    }

    fn event_history(&self, id: Option<i64>) -> Result<Vec<EventChange>> {
        let mut client = self.conn();
        if let Some(id) = id {
            event_by_id(&mut *client, id)?;
        }
        let rows = client.query(
            &format!(
                "SELECT {EVENT_CHANGE_COLUMNS} FROM event_history \
                 WHERE $1::bigint IS NULL OR event_id = $1 ORDER BY id"
            ),
            &[&id],
        )?;
        rows.iter().map(event_change_from).collect()
    }
}
