-- The event log can be corrected: an event may be edited or removed, and every correction is
-- kept. A removed event keeps its row (removed_ms set) so the log still shows it, marked removed;
-- charts, reports and investigations read only events whose removed_ms is NULL.
-- event_history holds one row per changed field of an edit, and one row per removal: who made
-- it, when, the field, the value before and after (a removal has field and after NULL).
ALTER TABLE events ADD COLUMN removed_ms INTEGER;

CREATE TABLE event_history (
    id         INTEGER PRIMARY KEY,
    event_id   INTEGER NOT NULL REFERENCES events (id),
    changed_ms INTEGER NOT NULL,
    who        TEXT    NOT NULL,
    action     TEXT    NOT NULL CHECK (action IN ('edit', 'remove')),
    field      TEXT,
    before     TEXT,
    after      TEXT,
    reason     TEXT
);

CREATE INDEX event_history_event ON event_history (event_id, id);
