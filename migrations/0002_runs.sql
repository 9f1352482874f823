-- Run history of the analysis engine (owned by src/storage/runs.rs).
-- Self-contained: no foreign keys into the measurement tables of 0001, so the history survives a
-- re-import and the engine's tables can be reasoned about on their own.
-- Times are integer milliseconds since 1970-01-01 UTC.

-- One row per run of the check over one period. A rerun of the same period gets the next
-- `version`; readers take the highest version whose status is 'complete'.
CREATE TABLE run (
    run_id          INTEGER PRIMARY KEY,
    period_kind     TEXT    NOT NULL,            -- shift | day | week | month | range
    period_label    TEXT    NOT NULL,            -- e.g. 2026-11-30, 2026-W48
    period_start_ms INTEGER NOT NULL,
    period_end_ms   INTEGER NOT NULL,            -- half-open [start, end)
    schedule        TEXT,                        -- NULL for a run started by hand
    version         INTEGER NOT NULL,
    config_hash     TEXT    NOT NULL,
    tool_version    TEXT    NOT NULL,
    fdr_method      TEXT    NOT NULL,            -- bh | by
    fdr_level       REAL    NOT NULL,
    started_ms      INTEGER NOT NULL,
    finished_ms     INTEGER,
    status          TEXT    NOT NULL CHECK (status IN ('running', 'complete', 'failed')),
    error           TEXT,
    n_tests         INTEGER,
    n_flagged       INTEGER,
    UNIQUE (period_kind, period_label, version)
);
CREATE INDEX run_by_period ON run (period_kind, period_label, status, version);
CREATE INDEX run_by_schedule ON run (schedule, period_kind, period_start_ms);

-- One row per test (characteristic x factor) of a run. NULL = statistic not available; the
-- reason is in `notes`.
CREATE TABLE run_result (
    run_id            INTEGER NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    test_idx          INTEGER NOT NULL,
    characteristic    TEXT    NOT NULL,
    factor            TEXT    NOT NULL,
    state             TEXT    NOT NULL,          -- differs_material | differs | no_evidence | too_little_data
    is_new            INTEGER NOT NULL,          -- flagged now, not flagged in the previous period
    n_obs             INTEGER NOT NULL,
    n_groups          INTEGER NOT NULL,
    n_groups_used     INTEGER NOT NULL,
    leading_method    TEXT,                      -- classic_f | welch
    leading_reason    TEXT,
    recommend_kruskal INTEGER,
    leading_statistic REAL,
    leading_p         REAL,
    q_value           REAL,
    anova_f           REAL, anova_df1 REAL, anova_df2 REAL, anova_p REAL,
    ss_between        REAL, ss_within REAL, ms_within REAL, r_squared REAL, resid_sd REAL,
    welch_f           REAL, welch_df1 REAL, welch_df2 REAL, welch_p REAL,
    kruskal_h         REAL, kruskal_p REAL,
    levene_stat       REAL, levene_p REAL,
    brown_forsythe_stat REAL, brown_forsythe_p REAL,
    bartlett_stat     REAL, bartlett_p REAL,
    shapiro_w         REAL, shapiro_p REAL,
    sd_ratio          REAL,
    n_beyond_3sd      INTEGER,
    eta_squared       REAL, omega_squared REAL,
    var_between       REAL, var_within REAL, share_between REAL, icc REAL,
    icc_low           REAL, icc_high REAL,
    tolerance         REAL,                      -- USL - LSL, when both are set
    spread_of_means   REAL,                      -- max - min of group means
    spread_pct_tolerance REAL,
    standout_level    TEXT,
    standout_diff     REAL,
    standout_sd_units REAL,
    standout_pct_tolerance REAL,
    min_detectable_diff REAL,
    min_detectable_pct_tolerance REAL,
    notes             TEXT    NOT NULL,          -- '; '-joined reasons for unavailable statistics
    PRIMARY KEY (run_id, test_idx)
);
CREATE INDEX run_result_by_test ON run_result (characteristic, factor);

-- Group summaries per test (values are offsets from the characteristic's origin, as in the store;
-- `origin` is the exact decimal text).
CREATE TABLE run_group (
    run_id    INTEGER NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    test_idx  INTEGER NOT NULL,
    group_idx INTEGER NOT NULL,
    level     TEXT    NOT NULL,
    n         INTEGER NOT NULL,
    mean      REAL    NOT NULL,
    sd        REAL,
    min       REAL    NOT NULL,
    max       REAL    NOT NULL,
    origin    TEXT    NOT NULL,
    diff_from_grand REAL,
    PRIMARY KEY (run_id, test_idx, group_idx)
);

-- Pairwise comparisons, stored for flagged tests only.
CREATE TABLE run_pair (
    run_id    INTEGER NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    test_idx  INTEGER NOT NULL,
    level_a   TEXT    NOT NULL,
    level_b   TEXT    NOT NULL,
    method    TEXT    NOT NULL,                  -- tukey_kramer | games_howell
    diff      REAL    NOT NULL,
    se        REAL    NOT NULL,
    statistic REAL    NOT NULL,
    df        REAL    NOT NULL,
    p_adj     REAL    NOT NULL,
    ci_low    REAL    NOT NULL,
    ci_high   REAL    NOT NULL
);
CREATE INDEX run_pair_by_test ON run_pair (run_id, test_idx);

-- One lease per (schedule, period): whoever holds an unexpired lease runs the period. Taken by an
-- atomic INSERT ... ON CONFLICT DO UPDATE ... WHERE expired; kept alive by a heartbeat.
CREATE TABLE run_lease (
    schedule     TEXT    NOT NULL,               -- '' for a run started by hand
    period_kind  TEXT    NOT NULL,
    period_label TEXT    NOT NULL,
    holder       TEXT    NOT NULL,               -- host:pid:random
    taken_ms     INTEGER NOT NULL,
    heartbeat_ms INTEGER NOT NULL,
    expires_ms   INTEGER NOT NULL,
    PRIMARY KEY (schedule, period_kind, period_label)
);
