//! The run history: runs, their per-test results, group summaries and pairs, and the leases that
//! keep two schedulers from running one period at once. Schema in `migrations/0002_runs.sql`.
//!
//! Lifecycle of a run (what a reader can rely on):
//! 1. [`begin_run`] commits a `run` row with status `running` and the next version number of its
//!    period. No result rows exist yet.
//! 2. [`complete_run`] writes every result, group and pair row and flips the status to `complete`,
//!    all in one transaction. A process killed before that commit leaves only the `running` row.
//! 3. [`fail_run`] records status `failed` with the error text (kept; the period is retried).
//! 4. [`recover_abandoned`] marks as `failed` ("abandoned: ...") every `running` row whose lease is
//!    gone or expired, so a killed run is visible in the history but never read as a result.
//!
//! Readers ([`latest_complete_run`], [`history`]) only ever see the highest `complete` version.
//! Times are integer milliseconds since the Unix epoch, UTC.
//!
//! Functions take a `rusqlite::Connection` so they work on any store connection; `Store` exposes
//! them through its own methods.

use rusqlite::{params, Connection, OptionalExtension, ToSql, TransactionBehavior};

use super::columns::{
    attach_groups_and_pairs, group_from, group_values, new_run_values, pair_from, pair_values,
    placeholders, qualified, run_from, sqlite_row, sqlite_rows, test_from, test_values, ColumnRow,
    GROUP_COLUMNS, NEW_RUN_COLUMNS, PAIR_COLUMNS, RUN_COLUMNS, TEST_COLUMNS,
};
use crate::model::PeriodKind;
use crate::results::TestResult;
use crate::stats::fdr::FdrMethod;
use crate::Result;

/// The identity and settings of one run, written when it starts.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct RunHeader {
    /// The kind of the period checked.
    pub period_kind: PeriodKind,
    /// The period's label (`2026-11-30`, `2026-W48`, ...).
    pub period_label: String,
    /// Period start, ms since the epoch (inclusive).
    pub period_start_ms: i64,
    /// Period end, ms since the epoch (exclusive).
    pub period_end_ms: i64,
    /// Schedule name, `None` for a run started by hand.
    pub schedule: Option<String>,
    /// Hash of the configuration that produced the run.
    pub config_hash: String,
    /// samewise version.
    pub tool_version: String,
    /// The false-discovery procedure of the flags.
    pub fdr_method: FdrMethod,
    /// The FDR level used for the flags.
    pub fdr_level: f64,
}

/// Where a run stands; stored as its lowercase name ([`RunStatus::as_str`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RunStatus {
    /// Begun; no result is written yet (a process that stopped leaves it so until a recovery
    /// marks it failed).
    Running,
    /// Every result written: the only status whose results are read.
    Complete,
    /// Ended by an error (kept with the run) or abandoned; no results.
    Failed,
}

impl RunStatus {
    /// The stored name: `running`, `complete` or `failed`.
    pub fn as_str(self) -> &'static str {
        match self {
            RunStatus::Running => "running",
            RunStatus::Complete => "complete",
            RunStatus::Failed => "failed",
        }
    }

    /// The status of a stored name; `None` for any other text.
    pub fn parse(text: &str) -> Option<RunStatus> {
        [RunStatus::Running, RunStatus::Complete, RunStatus::Failed]
            .into_iter()
            .find(|s| s.as_str() == text)
    }
}

impl std::fmt::Display for RunStatus {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A stored run row.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct StoredRun {
    /// Row id.
    pub run_id: i64,
    /// Version within its period (1, 2, ...).
    pub version: i64,
    /// What was run.
    pub header: RunHeader,
    /// Start, ms since the epoch.
    pub started_ms: i64,
    /// End, ms since the epoch (absent while running).
    pub finished_ms: Option<i64>,
    /// Where the run stands.
    pub status: RunStatus,
    /// Error text of a failed run.
    pub error: Option<String>,
    /// Number of tests (complete runs).
    pub n_tests: Option<i64>,
    /// Number of flagged tests (complete runs).
    pub n_flagged: Option<i64>,
}

impl StoredRun {
    /// A run just begun: `running`, with nothing finished or counted yet.
    pub(crate) fn begun(run_id: i64, version: i64, header: &RunHeader, started_ms: i64) -> Self {
        StoredRun {
            run_id,
            version,
            header: header.clone(),
            started_ms,
            finished_ms: None,
            status: RunStatus::Running,
            error: None,
            n_tests: None,
            n_flagged: None,
        }
    }
}

pub use crate::results::RunContent;

/// Inserts a `running` row with the next version of its period and commits it; returns the run.
pub(super) fn begin_run(
    conn: &mut Connection,
    header: &RunHeader,
    started_ms: i64,
) -> Result<StoredRun> {
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    let version: i64 = tx.query_row(
        "SELECT COALESCE(MAX(version), 0) + 1 FROM run WHERE period_kind = ?1 AND period_label = ?2",
        params![header.period_kind.as_str(), header.period_label],
        |r| r.get(0),
    )?;
    tx.execute(
        &format!(
            "INSERT INTO run ({NEW_RUN_COLUMNS}, status, max_import_id)
             VALUES ({}, 'running', (SELECT COALESCE(MAX(id), 0) FROM imports))",
            placeholders('?', 1, 11)
        ),
        rusqlite::params_from_iter(new_run_values(header, version, started_ms)),
    )?;
    let run_id = tx.last_insert_rowid();
    tx.commit()?;
    Ok(StoredRun::begun(run_id, version, header, started_ms))
}

/// Writes every result row of the run and marks it `complete`, in one transaction.
///
/// Fails (and writes nothing) when the run is no longer `running` (for example because a
/// recovery marked it abandoned).
pub(super) fn complete_run(
    conn: &mut Connection,
    run_id: i64,
    finished_ms: i64,
    content: &RunContent,
) -> Result<()> {
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    {
        let mut ins = tx.prepare_cached(&format!(
            "INSERT INTO run_result (run_id, {TEST_COLUMNS}) VALUES ({})",
            placeholders('?', 1, 71)
        ))?;
        for t in &content.tests {
            ins.execute(rusqlite::params_from_iter(test_values(run_id, t)))?;
        }
        let mut ins = tx.prepare_cached(&format!(
            "INSERT INTO run_group (run_id, test_idx, group_idx, {GROUP_COLUMNS}) VALUES ({})",
            placeholders('?', 1, 11)
        ))?;
        for t in &content.tests {
            for (group_idx, g) in t.groups.iter().enumerate() {
                ins.execute(rusqlite::params_from_iter(group_values(
                    run_id, t.index, group_idx, g,
                )))?;
            }
        }
        let mut ins = tx.prepare_cached(&format!(
            "INSERT INTO run_pair (run_id, test_idx, {PAIR_COLUMNS}) VALUES ({})",
            placeholders('?', 1, 12)
        ))?;
        for t in &content.tests {
            for p in &t.pairs {
                ins.execute(rusqlite::params_from_iter(pair_values(run_id, t.index, p)))?;
            }
        }
    }
    let n_flagged = content.tests.iter().filter(|t| t.is_flag()).count() as i64;
    let changed = tx.execute(
        "UPDATE run SET status = 'complete', finished_ms = ?2, n_tests = ?3, n_flagged = ?4
         WHERE run_id = ?1 AND status = 'running'",
        params![run_id, finished_ms, content.tests.len() as i64, n_flagged],
    )?;
    if changed != 1 {
        // Dropping the transaction rolls every insert back.
        return Err(no_longer_running(run_id));
    }
    tx.commit()?;
    Ok(())
}

/// The error for results of a run that is no longer `running`.
pub(super) fn no_longer_running(run_id: i64) -> crate::Error {
    crate::Error::Database(format!(
        "run {run_id} is no longer running (it was recovered as abandoned); its results were not written"
    ))
}

/// Marks a run `failed` and keeps the error text.
pub(super) fn fail_run(
    conn: &Connection,
    run_id: i64,
    finished_ms: i64,
    error: &str,
) -> Result<()> {
    conn.execute(
        "UPDATE run SET status = 'failed', finished_ms = ?2, error = ?3
         WHERE run_id = ?1 AND status = 'running'",
        params![run_id, finished_ms, error],
    )?;
    Ok(())
}

/// The error text of a run recovered as abandoned.
pub(super) const ABANDONED: &str =
    "abandoned: the process stopped before the run was written; no results were kept";

/// Marks as failed every `running` run whose lease (schedule, or `''` for a run by hand, and
/// period) is missing or expired at `now_ms`. Returns how many were recovered.
pub(super) fn recover_abandoned(conn: &Connection, now_ms: i64) -> Result<usize> {
    let n = conn.execute(
        "UPDATE run SET status = 'failed', finished_ms = ?1, error = ?2
         WHERE status = 'running' AND NOT EXISTS (
            SELECT 1 FROM run_lease l
            WHERE l.schedule = COALESCE(run.schedule, '') AND l.period_kind = run.period_kind
              AND l.period_label = run.period_label AND l.expires_ms > ?1)",
        params![now_ms, ABANDONED],
    )?;
    Ok(n)
}

/// Marks as failed ("abandoned") the `running` runs of one schedule and period. Called by the
/// holder of that period's lease: while it holds the lease, no other process can be running it.
pub(super) fn abandon_running(conn: &Connection, key: &LeaseKey, now_ms: i64) -> Result<usize> {
    let n = execute_for_lease(
        conn,
        "UPDATE run SET status = 'failed', finished_ms = ?4, error = ?5
         WHERE status = 'running' AND COALESCE(schedule, '') = ?1 AND period_kind = ?2
           AND period_label = ?3",
        key,
        params![now_ms, ABANDONED],
    )?;
    Ok(n)
}

/// How many complete versions a period's run has: more than one means the period was checked
/// again (late or undone data made it stale, or it was rerun) and is shown as revised.
pub(super) fn complete_versions(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<i64> {
    Ok(conn
        .prepare_cached(
            "SELECT COUNT(*) FROM run WHERE period_kind = ?1 AND period_label = ?2 \
             AND status = 'complete'",
        )?
        .query_row(params![period_kind, period_label], |r| r.get(0))?)
}

/// The latest complete version of a period's run, if any.
pub(super) fn latest_complete_run(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Option<StoredRun>> {
    let sql = format!(
        "SELECT {RUN_COLUMNS} FROM run WHERE period_kind = ?1 AND period_label = ?2
         AND status = 'complete' ORDER BY version DESC LIMIT 1"
    );
    sqlite_row(conn, &sql, params![period_kind, period_label], |r| {
        run_from(r, 0)
    })
}

/// Every run of a period (all versions and statuses), oldest first.
pub(super) fn runs_of_period(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Vec<StoredRun>> {
    let sql = format!(
        "SELECT {RUN_COLUMNS} FROM run WHERE period_kind = ?1 AND period_label = ?2
         ORDER BY version"
    );
    sqlite_rows(conn, &sql, params![period_kind, period_label], |r| {
        run_from(r, 0)
    })
}

/// Every run, oldest first (for status displays and tests).
pub(super) fn all_runs(conn: &Connection) -> Result<Vec<StoredRun>> {
    let sql = format!("SELECT {RUN_COLUMNS} FROM run ORDER BY run_id");
    sqlite_rows(conn, &sql, [], |r| run_from(r, 0))
}

/// Labels of the periods of `period_kind` (and `schedule`) that are done: checked to the end,
/// and not stale (no import stored measurements inside them, and no undo removed any, after
/// their latest complete run began).
pub(super) fn completed_labels(
    conn: &Connection,
    schedule: Option<&str>,
    period_kind: &str,
) -> Result<Vec<String>> {
    // Done: a complete run exists, and no import that stored measurements inside the period
    // came after the latest complete run began (else the period is stale and due again).
    let mut st = conn.prepare_cached(
        "SELECT g.label FROM (
             SELECT period_label AS label, MAX(max_import_id) AS seen,
                    MIN(period_start_ms) AS start_ms, MAX(period_end_ms) AS end_ms
             FROM run WHERE period_kind = ?1 AND status = 'complete' AND schedule IS ?2
             GROUP BY period_label) g
         WHERE NOT EXISTS (SELECT 1 FROM imports i
             WHERE i.id > g.seen AND (i.accepted > i.duplicates OR i.undoes IS NOT NULL)
               AND i.ts_min_ms < g.end_ms AND i.ts_max_ms >= g.start_ms)
         ORDER BY g.label",
    )?;
    let rows = st.query_map(params![period_kind, schedule], |r| r.get(0))?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// Reads the full content of one run.
/// Runs `read` inside one read transaction of `conn`, so that all its statements see the same
/// committed state (under WAL, the snapshot of its first read): a write committed by another
/// connection meanwhile is not half seen. Inside a transaction already, `read` runs in that one.
pub(super) fn in_read_transaction<T>(
    conn: &Connection,
    read: impl FnOnce(&Connection) -> Result<T>,
) -> Result<T> {
    if !conn.is_autocommit() {
        return read(conn);
    }
    // A deferred transaction: it takes no lock until its first read, and never a write lock.
    let tx = conn.unchecked_transaction()?;
    let out = read(&tx)?;
    tx.commit()?;
    Ok(out)
}

/// Reads the full content of one run (its tests, then their groups, then their pairs) in one
/// read transaction: a run completed meanwhile is read whole or not at all, never as tests
/// without their groups or groups without their tests.
pub(super) fn run_content(conn: &Connection, run_id: i64) -> Result<RunContent> {
    in_read_transaction(conn, |conn| run_content_now(conn, run_id))
}

/// The latest complete run of a period with its content, both read in one read transaction.
pub(super) fn latest_run(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Option<(StoredRun, RunContent)>> {
    in_read_transaction(conn, |conn| {
        let Some(run) = latest_complete_run(conn, period_kind, period_label)? else {
            return Ok(None);
        };
        let content = run_content(conn, run.run_id)?;
        Ok(Some((run, content)))
    })
}

fn run_content_now(conn: &Connection, run_id: i64) -> Result<RunContent> {
    let mut tests = sqlite_rows(
        conn,
        &format!("SELECT {TEST_COLUMNS} FROM run_result WHERE run_id = ?1 ORDER BY test_idx"),
        [run_id],
        |r| test_from(r, 0),
    )?;
    let groups = sqlite_rows(
        conn,
        &format!(
            "SELECT test_idx, {GROUP_COLUMNS} FROM run_group WHERE run_id = ?1 \
             ORDER BY test_idx, group_idx"
        ),
        [run_id],
        |r| Ok((r.small(0)?, group_from(r, 1)?)),
    )?;
    let pairs = sqlite_rows(
        conn,
        &format!(
            "SELECT test_idx, {PAIR_COLUMNS} FROM run_pair WHERE run_id = ?1 \
             ORDER BY test_idx, rowid"
        ),
        [run_id],
        |r| Ok((r.small(0)?, pair_from(r, 1)?)),
    )?;
    attach_groups_and_pairs(run_id, &mut tests, groups, pairs)?;
    Ok(RunContent { tests })
}

/// One period of a characteristic x factor history.
#[derive(Debug, Clone, PartialEq)]
pub struct HistoryPoint {
    /// The run the result comes from (the latest complete version of its period).
    pub run: StoredRun,
    /// The stored result (without its groups and pairs).
    pub test: TestResult,
    /// Complete versions of the period's run (more than one: the period was checked again).
    pub complete_versions: i64,
}

/// The latest complete result of `characteristic` x `factor` for each of the last `last` periods
/// of `period_kind`, oldest first.
pub(super) fn history(
    conn: &Connection,
    characteristic: &str,
    factor: &str,
    period_kind: &str,
    last: usize,
) -> Result<Vec<HistoryPoint>> {
    in_read_transaction(conn, |conn| {
        history_now(conn, characteristic, factor, period_kind, last)
    })
}

fn history_now(
    conn: &Connection,
    characteristic: &str,
    factor: &str,
    period_kind: &str,
    last: usize,
) -> Result<Vec<HistoryPoint>> {
    let run_cols = qualified("r", RUN_COLUMNS);
    let test_cols = qualified("t", TEST_COLUMNS);
    let sql = format!(
        "SELECT {run_cols}, {test_cols} FROM run r JOIN run_result t ON t.run_id = r.run_id
         WHERE r.period_kind = ?1 AND r.status = 'complete' AND t.characteristic = ?2
           AND t.factor = ?3
           AND r.version = (SELECT MAX(version) FROM run r2 WHERE r2.period_kind = r.period_kind
                            AND r2.period_label = r.period_label AND r2.status = 'complete')
         ORDER BY r.period_start_ms DESC LIMIT ?4"
    );
    let mut points = sqlite_rows(
        conn,
        &sql,
        params![period_kind, characteristic, factor, last as i64],
        |r| {
            Ok(HistoryPoint {
                run: run_from(r, 0)?,
                test: test_from(r, super::columns::column_count(RUN_COLUMNS))?,
                complete_versions: 1,
            })
        },
    )?;
    points.reverse();
    for p in &mut points {
        p.complete_versions = complete_versions(
            conn,
            p.run.header.period_kind.as_str(),
            &p.run.header.period_label,
        )?;
    }
    Ok(points)
}

/// The latest complete run of every `period_kind` period whose start lies in
/// `[start_ms, end_ms)`, in time order (the month report and the chart command read these).
pub(super) fn latest_complete_runs_between(
    conn: &Connection,
    period_kind: &str,
    start_ms: i64,
    end_ms: i64,
) -> Result<Vec<StoredRun>> {
    let run_cols = qualified("r", RUN_COLUMNS);
    let sql = format!(
        "SELECT {run_cols} FROM run r
         WHERE r.period_kind = ?1 AND r.status = 'complete'
           AND r.period_start_ms >= ?2 AND r.period_start_ms < ?3
           AND r.version = (SELECT MAX(version) FROM run r2 WHERE r2.period_kind = r.period_kind
                            AND r2.period_label = r.period_label AND r2.status = 'complete')
         ORDER BY r.period_start_ms, r.period_label"
    );
    sqlite_rows(conn, &sql, params![period_kind, start_ms, end_ms], |r| {
        run_from(r, 0)
    })
}

/// Flagged (characteristic, factor) pairs of the latest complete run of a period.
pub(super) fn flagged_tests(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Option<Vec<(String, String)>>> {
    in_read_transaction(conn, |conn| {
        let Some(run) = latest_complete_run(conn, period_kind, period_label)? else {
            return Ok(None);
        };
        let rows = sqlite_rows(
            conn,
            "SELECT characteristic, factor FROM run_result
             WHERE run_id = ?1 AND state IN ('differs_material', 'differs') ORDER BY test_idx",
            [run.run_id],
            |r| Ok((r.text(0)?, r.text(1)?)),
        )?;
        Ok(Some(rows))
    })
}

/// The earliest measurement instant in the store (ms since the epoch), `None` when empty.
pub(super) fn first_measurement_ms(conn: &Connection) -> Result<Option<i64>> {
    Ok(conn.query_row("SELECT MIN(ts_ms) FROM measurements", [], |r| r.get(0))?)
}

/// Number of lease rows (taken and not released).
pub(super) fn lease_count(conn: &Connection) -> Result<usize> {
    let n: i64 = conn.query_row("SELECT COUNT(*) FROM run_lease", [], |r| r.get(0))?;
    Ok(n as usize)
}

/// Identifies one lease: schedule (`""` for a run by hand) and period.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LeaseKey {
    /// Schedule name, `""` for a run by hand.
    pub schedule: String,
    /// Period kind.
    pub period_kind: String,
    /// Period label.
    pub period_label: String,
}

/// Executes `sql` with the lease key bound to `?1` (schedule), `?2` (period kind) and `?3`
/// (period label), and `more` to the parameters after them; returns the rows changed.
fn execute_for_lease(
    conn: &Connection,
    sql: &str,
    key: &LeaseKey,
    more: &[&dyn ToSql],
) -> Result<usize> {
    let mut all: Vec<&dyn ToSql> = vec![&key.schedule, &key.period_kind, &key.period_label];
    all.extend_from_slice(more);
    Ok(conn.execute(sql, all.as_slice())?)
}

/// Takes the lease atomically: succeeds when no lease exists, when the existing one has expired
/// at `now_ms`, or when `holder` already holds it. Returns whether `holder` now holds it.
pub(super) fn take_lease(
    conn: &Connection,
    key: &LeaseKey,
    holder: &str,
    now_ms: i64,
    ttl_ms: i64,
) -> Result<bool> {
    let changed = execute_for_lease(
        conn,
        "INSERT INTO run_lease (schedule, period_kind, period_label, holder, taken_ms,
            heartbeat_ms, expires_ms) VALUES (?1, ?2, ?3, ?4, ?5, ?5, ?6)
         ON CONFLICT (schedule, period_kind, period_label) DO UPDATE SET
            holder = excluded.holder, taken_ms = excluded.taken_ms,
            heartbeat_ms = excluded.heartbeat_ms, expires_ms = excluded.expires_ms
         WHERE run_lease.expires_ms <= excluded.taken_ms OR run_lease.holder = excluded.holder",
        key,
        params![holder, now_ms, now_ms + ttl_ms],
    )?;
    Ok(changed == 1)
}

/// Extends the lease held by `holder`; returns false when it is no longer held by it.
pub(super) fn heartbeat(
    conn: &Connection,
    key: &LeaseKey,
    holder: &str,
    now_ms: i64,
    ttl_ms: i64,
) -> Result<bool> {
    let changed = execute_for_lease(
        conn,
        "UPDATE run_lease SET heartbeat_ms = ?5, expires_ms = ?6
         WHERE schedule = ?1 AND period_kind = ?2 AND period_label = ?3 AND holder = ?4",
        key,
        params![holder, now_ms, now_ms + ttl_ms],
    )?;
    Ok(changed == 1)
}

/// The current holder of a lease, if any.
pub(super) fn lease_holder(conn: &Connection, key: &LeaseKey) -> Result<Option<String>> {
    Ok(conn
        .query_row(
            "SELECT holder FROM run_lease WHERE schedule = ?1 AND period_kind = ?2
             AND period_label = ?3",
            params![key.schedule, key.period_kind, key.period_label],
            |r| r.get(0),
        )
        .optional()?)
}

/// Takes a lease over from `old` (known to be dead); atomic: fails if someone else got it first.
pub(super) fn take_over_lease(
    conn: &Connection,
    key: &LeaseKey,
    old: &str,
    holder: &str,
    now_ms: i64,
    ttl_ms: i64,
) -> Result<bool> {
    let changed = execute_for_lease(
        conn,
        "UPDATE run_lease SET holder = ?5, taken_ms = ?6, heartbeat_ms = ?6, expires_ms = ?7
         WHERE schedule = ?1 AND period_kind = ?2 AND period_label = ?3 AND holder = ?4",
        key,
        params![old, holder, now_ms, now_ms + ttl_ms],
    )?;
    Ok(changed == 1)
}

/// Gives the lease up (only when `holder` holds it).
pub(super) fn release_lease(conn: &Connection, key: &LeaseKey, holder: &str) -> Result<()> {
    execute_for_lease(
        conn,
        "DELETE FROM run_lease WHERE schedule = ?1 AND period_kind = ?2 AND period_label = ?3
         AND holder = ?4",
        key,
        params![holder],
    )?;
    Ok(())
}

/// The run history and its leases, as the rest of samewise sees them: what a second backend
/// implements. The lifecycle these serve is in `schedule::lifecycle` (one for `check` and the
/// scheduler alike); the module documentation above describes a run's states.
///
/// Contract common to every method:
/// - Times are integer milliseconds since the Unix epoch, UTC. A period is named by its kind
///   (`shift`, `day`, `week`, `month`, `range`) and label; a run by its id, which increases
///   with every run begun.
/// - Every write is atomic: it is committed whole or not at all, and a failed call leaves the
///   store as it was. A method that reads several tables reads them in one consistent
///   snapshot, so a write committed by another process meanwhile is seen whole or not at all.
/// - Readers of results only ever see `complete` runs; a `running` or `failed` run has no
///   results to read.
/// - Errors: `Error::Storage` for the backend's own failures (a busy database among them), and
///   `Error::Database` for stored data that breaks these rules; an unknown period or run is
///   not an error for the readers below (they return `None` or an empty list).
pub trait RunStore {
    /// Begins a run of the period in `header`: commits a row with status `running`, the next
    /// version number of its period (1 for the first run, one more than the highest version of
    /// any status otherwise), `started_ms`, and the highest import id at this moment (which
    /// later tells whether the period went stale). Returns the row as stored. Two runs of one
    /// period begun at once get different versions; callers keep them apart with the period's
    /// lease.
    fn begin_run(&mut self, header: &RunHeader, started_ms: i64) -> Result<StoredRun>;
    /// Writes every result of the run (each test with its groups and pairs, in test order) and
    /// marks the run `complete` with `finished_ms`, the number of tests and of flagged tests,
    /// all in one transaction. Fails with `Error::Database`, writing nothing, when the run is
    /// no longer `running` (a recovery marked it abandoned meanwhile).
    fn complete_run(&mut self, run_id: i64, finished_ms: i64, content: &RunContent) -> Result<()>;
    /// Marks the run `failed` with `finished_ms` and the error text, which is kept for the
    /// history. Only a `running` run changes; for any other run (or an unknown id) this does
    /// nothing and is not an error. No result of the run is written.
    fn fail_run(&self, run_id: i64, finished_ms: i64, error: &str) -> Result<()>;
    /// Marks `failed` (with an "abandoned: ..." error) every `running` run whose lease (its
    /// schedule, or none for a run by hand, and its period) is missing or expired at `now_ms`,
    /// in one statement; returns how many runs changed. A run whose holder still holds a live
    /// lease is left alone.
    fn recover_abandoned(&self, now_ms: i64) -> Result<usize>;
    /// Marks `failed` ("abandoned: ...") the `running` runs of the schedule and period of
    /// `key`; returns how many changed. The caller holds that lease, so no other process can
    /// be running them: they were left by a process that stopped.
    fn abandon_running(&self, key: &LeaseKey, now_ms: i64) -> Result<usize>;
    /// How many `complete` versions the period's run has (0 when none): more than one means
    /// the period was checked again and its results are shown as revised.
    fn complete_versions(&self, period_kind: &str, period_label: &str) -> Result<i64>;
    /// The `complete` run of the period with the highest version, or `None` when the period
    /// has none (running and failed versions are never returned).
    fn latest_complete_run(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<StoredRun>>;
    /// Every run of the period, of any status, in version order (oldest first); empty when the
    /// period was never run.
    fn runs_of_period(&self, period_kind: &str, period_label: &str) -> Result<Vec<StoredRun>>;
    /// Every run of every period, of any status, in the order they were begun (run id order).
    fn all_runs(&self) -> Result<Vec<StoredRun>>;
    /// The labels of the periods of `period_kind` run by `schedule` (`None`: by hand) that are
    /// done, in label order: a `complete` run exists, and no import that stored measurements
    /// inside the period, and no undo of one, came after its latest complete run began. A
    /// period not listed is due (again).
    fn completed_labels(&self, schedule: Option<&str>, period_kind: &str) -> Result<Vec<String>>;
    /// The full content of a run: its tests in test order, each with its groups (in group
    /// order) and pairs (in the order written), read in one snapshot. A run without results
    /// (running, failed, or an unknown id) gives an empty content. A stored group or pair of a
    /// test the run does not hold is an `Error::Database` naming the run, never dropped.
    fn run_content(&self, run_id: i64) -> Result<RunContent>;
    /// The result of `characteristic` x `factor` in the latest complete run of each of the
    /// last `last` periods of `period_kind` that hold it, oldest period first (by period
    /// start), each with its run and the number of complete versions of its period; the
    /// results come without groups and pairs. Empty when no run holds the test.
    fn history(
        &self,
        characteristic: &str,
        factor: &str,
        period_kind: &str,
        last: usize,
    ) -> Result<Vec<HistoryPoint>>;
    /// The latest complete run of every period of `period_kind` whose start lies in
    /// `[start_ms, end_ms)`, in time order (ties by label); periods without a complete run are
    /// left out. The month report and the charts read these.
    fn latest_complete_runs_between(
        &self,
        period_kind: &str,
        start_ms: i64,
        end_ms: i64,
    ) -> Result<Vec<StoredRun>>;
    /// The (characteristic, factor) pairs flagged (states `differs_material` and `differs`) in
    /// the period's latest complete run, in test order; `None` when the period has no complete
    /// run, an empty list when it has one without flags.
    fn flagged_tests(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<Vec<(String, String)>>>;
    /// The latest complete run of the period with its content ([`RunStore::run_content`]),
    /// `None` when the period has no complete run. Reads only. The default reads the two one
    /// after the other; a backend should read both in one snapshot (the SQLite one does).
    fn latest_run(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<(StoredRun, RunContent)>> {
        let Some(run) = self.latest_complete_run(period_kind, period_label)? else {
            return Ok(None);
        };
        let content = self.run_content(run.run_id)?;
        Ok(Some((run, content)))
    }
    /// The earliest measurement instant in the store, `None` when it holds no measurement
    /// (where a schedule's periods start).
    fn first_measurement_ms(&self) -> Result<Option<i64>>;
    /// How many leases exist (taken and not released, expired ones included).
    fn lease_count(&self) -> Result<usize>;
    /// Takes the lease of `key` for `holder` until `now_ms + ttl_ms`, atomically: succeeds
    /// when no lease exists, when the existing one expired at or before `now_ms`, or when
    /// `holder` holds it already (then it is renewed). Returns whether `holder` holds it now;
    /// `false` when another holder's lease is still live (nothing changes then).
    fn take_lease(&self, key: &LeaseKey, holder: &str, now_ms: i64, ttl_ms: i64) -> Result<bool>;
    /// Extends the lease of `key` to `now_ms + ttl_ms` if `holder` still holds it; returns
    /// `false` (changing nothing) when it does not, e.g. after another process took the
    /// expired lease over.
    fn heartbeat(&self, key: &LeaseKey, holder: &str, now_ms: i64, ttl_ms: i64) -> Result<bool>;
    /// The holder of the lease of `key`, expired or not; `None` when there is no lease.
    fn lease_holder(&self, key: &LeaseKey) -> Result<Option<String>>;
    /// Takes the lease of `key` over from `old` (whose process is known to be gone) for
    /// `holder` until `now_ms + ttl_ms`, atomically: only while `old` still holds it. Returns
    /// whether it was taken; `false` when someone else took it first.
    fn take_over_lease(
        &self,
        key: &LeaseKey,
        old: &str,
        holder: &str,
        now_ms: i64,
        ttl_ms: i64,
    ) -> Result<bool>;
    /// Releases the lease of `key` if `holder` holds it; does nothing (and is not an error)
    /// when another holder, or nobody, holds it.
    fn release_lease(&self, key: &LeaseKey, holder: &str) -> Result<()>;
}

impl RunStore for crate::storage::Store {
    fn begin_run(&mut self, header: &RunHeader, started_ms: i64) -> Result<StoredRun> {
        begin_run(&mut self.conn, header, started_ms)
    }
    fn complete_run(&mut self, run_id: i64, finished_ms: i64, content: &RunContent) -> Result<()> {
        complete_run(&mut self.conn, run_id, finished_ms, content)
    }
    fn fail_run(&self, run_id: i64, finished_ms: i64, error: &str) -> Result<()> {
        fail_run(&self.conn, run_id, finished_ms, error)
    }
    fn recover_abandoned(&self, now_ms: i64) -> Result<usize> {
        recover_abandoned(&self.conn, now_ms)
    }
    fn abandon_running(&self, key: &LeaseKey, now_ms: i64) -> Result<usize> {
        abandon_running(&self.conn, key, now_ms)
    }
    fn complete_versions(&self, period_kind: &str, period_label: &str) -> Result<i64> {
        complete_versions(&self.conn, period_kind, period_label)
    }
    fn latest_complete_run(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<StoredRun>> {
        latest_complete_run(&self.conn, period_kind, period_label)
    }
    fn runs_of_period(&self, period_kind: &str, period_label: &str) -> Result<Vec<StoredRun>> {
        runs_of_period(&self.conn, period_kind, period_label)
    }
    fn all_runs(&self) -> Result<Vec<StoredRun>> {
        all_runs(&self.conn)
    }
    fn completed_labels(&self, schedule: Option<&str>, period_kind: &str) -> Result<Vec<String>> {
        completed_labels(&self.conn, schedule, period_kind)
    }
    fn run_content(&self, run_id: i64) -> Result<RunContent> {
        run_content(&self.conn, run_id)
    }
    fn latest_run(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<(StoredRun, RunContent)>> {
        latest_run(&self.conn, period_kind, period_label)
    }
    fn history(
        &self,
        characteristic: &str,
        factor: &str,
        period_kind: &str,
        last: usize,
    ) -> Result<Vec<HistoryPoint>> {
        history(&self.conn, characteristic, factor, period_kind, last)
    }
    fn latest_complete_runs_between(
        &self,
        period_kind: &str,
        start_ms: i64,
        end_ms: i64,
    ) -> Result<Vec<StoredRun>> {
        latest_complete_runs_between(&self.conn, period_kind, start_ms, end_ms)
    }
    fn flagged_tests(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<Vec<(String, String)>>> {
        flagged_tests(&self.conn, period_kind, period_label)
    }
    fn first_measurement_ms(&self) -> Result<Option<i64>> {
        first_measurement_ms(&self.conn)
    }
    fn lease_count(&self) -> Result<usize> {
        lease_count(&self.conn)
    }
    fn take_lease(&self, key: &LeaseKey, holder: &str, now_ms: i64, ttl_ms: i64) -> Result<bool> {
        take_lease(&self.conn, key, holder, now_ms, ttl_ms)
    }
    fn heartbeat(&self, key: &LeaseKey, holder: &str, now_ms: i64, ttl_ms: i64) -> Result<bool> {
        heartbeat(&self.conn, key, holder, now_ms, ttl_ms)
    }
    fn lease_holder(&self, key: &LeaseKey) -> Result<Option<String>> {
        lease_holder(&self.conn, key)
    }
    fn take_over_lease(
        &self,
        key: &LeaseKey,
        old: &str,
        holder: &str,
        now_ms: i64,
        ttl_ms: i64,
    ) -> Result<bool> {
        take_over_lease(&self.conn, key, old, holder, now_ms, ttl_ms)
    }
    fn release_lease(&self, key: &LeaseKey, holder: &str) -> Result<()> {
        release_lease(&self.conn, key, holder)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::results::{AnovaResult, GroupResult, Interval, PairResult, StandsOut, TestState};

    /// Every migration in order: the run history reads the import records too (stale
    /// periods, migration 0004).
    fn conn() -> Connection {
        let c = Connection::open_in_memory().unwrap();
        for m in crate::storage::migrate::MIGRATIONS {
            c.execute_batch(m.sql).unwrap();
        }
        c
    }

    fn header(label: &str) -> RunHeader {
        RunHeader {
            period_kind: PeriodKind::Day,
            period_label: label.into(),
            period_start_ms: 1000,
            period_end_ms: 2000,
            schedule: Some("daily".into()),
            config_hash: "abc".into(),
            tool_version: "0.1.0".into(),
            fdr_method: FdrMethod::BenjaminiHochberg,
            fdr_level: 0.05,
        }
    }

    fn content(state: TestState) -> RunContent {
        RunContent {
            tests: vec![TestResult {
                index: 0,
                characteristic: "bore".into(),
                factor: "machine".into(),
                state,
                n_obs: 10,
                n_groups: 2,
                n_groups_used: 2,
                anova: AnovaResult {
                    f: Some(3.5),
                    ..AnovaResult::default()
                },
                q_value: Some(0.01),
                stands_out: StandsOut {
                    level: Some("M2".into()),
                    ..StandsOut::default()
                },
                notes: String::new(),
                groups: vec![GroupResult::from_offsets(
                    "M1".into(),
                    5,
                    "10".into(),
                    0.25,
                    Some(0.1),
                    0.0,
                    0.5,
                    Some(-0.1),
                )],
                pairs: vec![PairResult {
                    a: "M1".into(),
                    b: "M2".into(),
                    method: "tukey_kramer".into(),
                    diff: -0.2,
                    se: 0.05,
                    statistic: 4.0,
                    df: 8.0,
                    p_adj: 0.01,
                    ci: Interval {
                        low: -0.3,
                        high: -0.1,
                    },
                }],
                ..TestResult::default()
            }],
        }
    }

    #[test]
    fn rerun_makes_new_version_and_readers_take_latest_complete() {
        let mut c = conn();
        let r1 = begin_run(&mut c, &header("2026-11-30"), 10).unwrap();
        complete_run(&mut c, r1.run_id, 20, &content(TestState::Differs)).unwrap();
        let r2 = begin_run(&mut c, &header("2026-11-30"), 30).unwrap();
        assert_eq!((r1.version, r2.version), (1, 2));
        // Version 2 is still running: readers keep version 1.
        let latest = latest_complete_run(&c, "day", "2026-11-30")
            .unwrap()
            .unwrap();
        assert_eq!(latest.run_id, r1.run_id);
        complete_run(&mut c, r2.run_id, 40, &content(TestState::NoEvidence)).unwrap();
        let latest = latest_complete_run(&c, "day", "2026-11-30")
            .unwrap()
            .unwrap();
        assert_eq!(latest.run_id, r2.run_id);
        assert_eq!(latest.n_flagged, Some(0));
        // The old version is kept with its content.
        let old = run_content(&c, r1.run_id).unwrap();
        assert_eq!(old, content(TestState::Differs));
        assert_eq!(runs_of_period(&c, "day", "2026-11-30").unwrap().len(), 2);
        let flagged = flagged_tests(&c, "day", "2026-11-30").unwrap().unwrap();
        assert!(flagged.is_empty());
    }

    #[test]
    fn failed_run_keeps_error_and_is_not_read() {
        let mut c = conn();
        let r = begin_run(&mut c, &header("2026-11-29"), 10).unwrap();
        fail_run(&c, r.run_id, 11, "database is locked").unwrap();
        assert!(latest_complete_run(&c, "day", "2026-11-29")
            .unwrap()
            .is_none());
        let all = all_runs(&c).unwrap();
        assert_eq!(all[0].status, RunStatus::Failed);
        assert_eq!(all[0].error.as_deref(), Some("database is locked"));
        // A failed run cannot be completed afterwards, and nothing is written.
        assert!(complete_run(&mut c, r.run_id, 12, &content(TestState::Differs)).is_err());
        assert!(run_content(&c, r.run_id).unwrap().tests.is_empty());
    }

    #[test]
    fn lease_is_exclusive_until_expired() {
        let c = conn();
        let key = LeaseKey {
            schedule: "daily".into(),
            period_kind: "day".into(),
            period_label: "2026-11-30".into(),
        };
        assert!(take_lease(&c, &key, "a", 1000, 100).unwrap());
        assert!(!take_lease(&c, &key, "b", 1050, 100).unwrap());
        assert!(heartbeat(&c, &key, "a", 1090, 100).unwrap());
        assert!(!take_lease(&c, &key, "b", 1150, 100).unwrap());
        assert!(!heartbeat(&c, &key, "b", 1150, 100).unwrap());
        // Expired at 1190: b takes it over; a's heartbeat now fails.
        assert!(take_lease(&c, &key, "b", 1190, 100).unwrap());
        assert!(!heartbeat(&c, &key, "a", 1195, 100).unwrap());
        release_lease(&c, &key, "a").unwrap();
        assert!(!take_lease(&c, &key, "c", 1200, 100).unwrap());
        release_lease(&c, &key, "b").unwrap();
        assert!(take_lease(&c, &key, "c", 1200, 100).unwrap());
    }

    #[test]
    fn abandoned_running_run_is_recovered_as_failed() {
        let mut c = conn();
        let key = LeaseKey {
            schedule: "daily".into(),
            period_kind: "day".into(),
            period_label: "2026-11-30".into(),
        };
        assert!(take_lease(&c, &key, "a", 1000, 100).unwrap());
        let r = begin_run(&mut c, &header("2026-11-30"), 1000).unwrap();
        // Lease alive: not recovered.
        assert_eq!(recover_abandoned(&c, 1050).unwrap(), 0);
        // Lease expired: recovered.
        assert_eq!(recover_abandoned(&c, 1200).unwrap(), 1);
        let all = all_runs(&c).unwrap();
        assert_eq!(all[0].status, RunStatus::Failed);
        assert!(all[0].error.as_deref().unwrap().starts_with("abandoned"));
        // The slow original process cannot write afterwards.
        assert!(complete_run(&mut c, r.run_id, 1300, &content(TestState::Differs)).is_err());
    }

    #[test]
    fn history_reads_latest_complete_version_per_period() {
        let mut c = conn();
        for (i, label) in ["2026-11-28", "2026-11-29", "2026-11-30"]
            .iter()
            .enumerate()
        {
            let mut h = header(label);
            h.period_start_ms = 1000 * i as i64;
            let r = begin_run(&mut c, &h, 1).unwrap();
            complete_run(&mut c, r.run_id, 2, &content(TestState::NoEvidence)).unwrap();
        }
        let mut h = header("2026-11-29");
        h.period_start_ms = 1000;
        let r = begin_run(&mut c, &h, 3).unwrap();
        complete_run(&mut c, r.run_id, 4, &content(TestState::Differs)).unwrap();
        let hist = history(&c, "bore", "machine", "day", 30).unwrap();
        let labels: Vec<_> = hist
            .iter()
            .map(|p| p.run.header.period_label.as_str())
            .collect();
        assert_eq!(labels, ["2026-11-28", "2026-11-29", "2026-11-30"]);
        assert_eq!(hist[1].test.state, TestState::Differs);
        assert_eq!(hist[1].run.version, 2);
        let last2 = history(&c, "bore", "machine", "day", 2).unwrap();
        assert_eq!(last2.len(), 2);
        assert_eq!(last2[0].run.header.period_label, "2026-11-29");
    }
}
