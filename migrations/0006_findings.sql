-- Findings: flags of one characteristic x factor whose standing-out group is the same, joined over
-- the periods of one kind (a shorter quiet stretch than `[findings] close_after` keeps a finding
-- open; fewer flagged periods than `[findings] confirm_after` keep it on watch), kept up to date
-- after every run (src/analysis/findings.rs). One row per period kind,
-- characteristic, factor and standing-out level: a finding that closed and flags again is
-- reopened, not a new one. Times are integer milliseconds since 1970-01-01 UTC.
CREATE TABLE finding (
    finding_id        INTEGER PRIMARY KEY,
    period_kind       TEXT    NOT NULL,
    characteristic    TEXT    NOT NULL,
    factor            TEXT    NOT NULL,
    level             TEXT    NOT NULL,
    status            TEXT    NOT NULL CHECK (status IN ('watch', 'open', 'closed')),
    times_reopened    INTEGER NOT NULL DEFAULT 0,
    first_label       TEXT    NOT NULL,            -- first flagged period ever
    first_start_ms    INTEGER NOT NULL,
    episode_label     TEXT    NOT NULL,            -- first flagged period of the current episode
    episode_start_ms  INTEGER NOT NULL,
    last_label        TEXT    NOT NULL,            -- last flagged period
    last_start_ms     INTEGER NOT NULL,
    last_end_ms       INTEGER NOT NULL,
    n_flagged         INTEGER NOT NULL,            -- flagged periods of the current episode
    n_weak            INTEGER NOT NULL,            -- of those, resting on weak evidence
    quiet_periods     INTEGER NOT NULL,            -- checked periods since the last flag
    unit              TEXT    NOT NULL DEFAULT '',
    effect_now        REAL,                        -- standing-out group - grand mean, last flag
    effect_now_sd     REAL,                        -- the same in within-group SDs
    effect_now_pct    REAL,                        -- the same in % of the tolerance (or distance to a single limit)
    within_sd         REAL,
    peak_effect       REAL,
    peak_pct          REAL,
    peak_label        TEXT,
    onset_ms          INTEGER,                     -- change-point estimate of the onset
    onset_low_ms      INTEGER,
    onset_high_ms     INTEGER,
    onset_method      TEXT    NOT NULL DEFAULT '',
    event_id          INTEGER,                     -- nearest earlier logged change in scope
    event_ms          INTEGER,
    event_note        TEXT,
    created_ms        INTEGER NOT NULL,
    updated_ms        INTEGER NOT NULL,
    UNIQUE (period_kind, characteristic, factor, level)
);
CREATE INDEX finding_by_status ON finding (status, last_start_ms);

-- An engineer's notes on a finding (containment in place, cause found, ...).
CREATE TABLE finding_note (
    note_id    INTEGER PRIMARY KEY,
    finding_id INTEGER NOT NULL REFERENCES finding (finding_id),
    created_ms INTEGER NOT NULL,
    text       TEXT    NOT NULL
);
CREATE INDEX finding_note_by_finding ON finding_note (finding_id, created_ms);

-- Every run of the `[alert]` command: when, for how many findings, and how it ended.
CREATE TABLE alert_log (
    alert_id    INTEGER PRIMARY KEY,
    started_ms  INTEGER NOT NULL,
    finished_ms INTEGER NOT NULL,
    n_findings  INTEGER NOT NULL,
    command     TEXT    NOT NULL,
    exit_code   INTEGER,
    error       TEXT                                -- NULL when the command exited 0
);
