-- 0001_initial: the plant's master data, measurements, imports, rejected rows and events.
--
-- Shipped migrations are never edited; add 0002_..., 0003_... instead (see src/storage/migrate.rs).
-- Times are INTEGER milliseconds since 1970-01-01 UTC (`*_ms`). Booleans are INTEGER 0/1 (`is_*`).
-- Per-connection settings (WAL, foreign keys, busy timeout) are set when a connection opens, not here.

-- One row per characteristic (configured, or added by `import --add-new`).
-- Values are stored as offsets from `origin`, an exact decimal text fixed by the first value ever
-- stored for the characteristic and never changed afterwards, so a gauge reading of
-- 1000000000000.4 keeps its last digit. `decimals` is the most decimal places seen in any stored
-- value: origin + offset rounded to that many places gives back the exact text of every value.
CREATE TABLE characteristics (
    id            INTEGER PRIMARY KEY,
    name          TEXT    NOT NULL UNIQUE,
    unit          TEXT    NOT NULL DEFAULT '',
    lsl           REAL,
    usl           REAL,
    target        REAL,
    resolution    REAL,
    is_active     INTEGER NOT NULL DEFAULT 1 CHECK (is_active IN (0, 1)),
    is_configured INTEGER NOT NULL DEFAULT 1 CHECK (is_configured IN (0, 1)),
    origin        TEXT,
    decimals      INTEGER NOT NULL DEFAULT 0 CHECK (decimals >= 0)
);

-- Grouping factors in configuration order (`position`). `source` is "column" or "shift".
CREATE TABLE factors (
    id            INTEGER PRIMARY KEY,
    name          TEXT    NOT NULL UNIQUE,
    position      INTEGER NOT NULL,
    source        TEXT    NOT NULL,
    source_column TEXT,
    is_configured INTEGER NOT NULL DEFAULT 1 CHECK (is_configured IN (0, 1))
);

-- The levels seen for each factor ("M1", "M2", ... for machine).
CREATE TABLE levels (
    id        INTEGER PRIMARY KEY,
    factor_id INTEGER NOT NULL REFERENCES factors (id),
    name      TEXT    NOT NULL,
    UNIQUE (factor_id, name)
);

-- One row per distinct combination of factor levels; a measurement points at one level set
-- instead of repeating five level names. `key` is the member level ids in factor-id order,
-- "12,40,3,7,9", so a combination is found again with one lookup.
CREATE TABLE level_sets (
    id  INTEGER PRIMARY KEY,
    key TEXT NOT NULL UNIQUE
);

CREATE TABLE level_set_members (
    level_set_id INTEGER NOT NULL REFERENCES level_sets (id),
    factor_id    INTEGER NOT NULL REFERENCES factors (id),
    level_id     INTEGER NOT NULL REFERENCES levels (id),
    PRIMARY KEY (level_set_id, factor_id)
) WITHOUT ROWID;

-- One row per imported file. An import is one transaction: a row here means the whole file went in.
CREATE TABLE imports (
    id          INTEGER PRIMARY KEY,
    file_name   TEXT    NOT NULL,
    path        TEXT    NOT NULL,
    sha256      TEXT    NOT NULL,
    layout      TEXT    NOT NULL,
    started_ms  INTEGER NOT NULL,
    finished_ms INTEGER NOT NULL,
    rows_read   INTEGER NOT NULL,
    accepted    INTEGER NOT NULL,
    rejected    INTEGER NOT NULL,
    is_forced   INTEGER NOT NULL DEFAULT 0 CHECK (is_forced IN (0, 1)),
    CHECK (accepted + rejected = rows_read)
);

CREATE INDEX imports_sha256 ON imports (sha256);

-- Every input row (or wide-format cell) that was not stored, with where it was and why.
CREATE TABLE rejected_rows (
    id          INTEGER PRIMARY KEY,
    import_id   INTEGER NOT NULL REFERENCES imports (id),
    line        INTEGER NOT NULL,
    column_name TEXT,
    reason      TEXT    NOT NULL,
    raw         TEXT    NOT NULL
);

CREATE INDEX rejected_rows_import ON rejected_rows (import_id, line);

-- The measurements, compactly: one row per value. `value` is the offset from the characteristic's
-- exact origin; `ts_ms` the measurement instant in UTC; (`import_id`, `line`) the file line it came
-- from. The primary key (characteristic, time) is the analysis query's access path, so the table
-- is clustered on it (WITHOUT ROWID): a characteristic-day is one contiguous range.
CREATE TABLE measurements (
    characteristic_id INTEGER NOT NULL REFERENCES characteristics (id),
    ts_ms             INTEGER NOT NULL,
    import_id         INTEGER NOT NULL REFERENCES imports (id),
    line              INTEGER NOT NULL,
    value             REAL    NOT NULL,
    level_set_id      INTEGER NOT NULL REFERENCES level_sets (id),
    PRIMARY KEY (characteristic_id, ts_ms, import_id, line)
) WITHOUT ROWID;

-- Process changes: a tooling change, a new supplier lot, a program edit. Optionally tied to one
-- characteristic, and to factor levels through event_scopes ("machine = M4").
CREATE TABLE events (
    id                INTEGER PRIMARY KEY,
    ts_ms             INTEGER NOT NULL,
    note              TEXT    NOT NULL,
    characteristic_id INTEGER REFERENCES characteristics (id),
    created_ms        INTEGER NOT NULL
);

CREATE INDEX events_ts ON events (ts_ms);

CREATE TABLE event_scopes (
    event_id  INTEGER NOT NULL REFERENCES events (id) ON DELETE CASCADE,
    factor_id INTEGER NOT NULL REFERENCES factors (id),
    level     TEXT    NOT NULL,
    PRIMARY KEY (event_id, factor_id)
) WITHOUT ROWID;
