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

use rusqlite::{params, Connection, OptionalExtension, Row, ToSql, TransactionBehavior};

use crate::Result;

/// The identity and settings of one run, written when it starts.
#[derive(Debug, Clone, PartialEq)]
pub struct RunHeader {
    /// `shift`, `day`, `week`, `month` or `range`.
    pub period_kind: String,
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
    /// `bh` or `by`.
    pub fdr_method: String,
    /// The FDR level used for the flags.
    pub fdr_level: f64,
}

/// A stored run row.
#[derive(Debug, Clone, PartialEq)]
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
    /// `running`, `complete` or `failed`.
    pub status: String,
    /// Error text of a failed run.
    pub error: Option<String>,
    /// Number of tests (complete runs).
    pub n_tests: Option<i64>,
    /// Number of flagged tests (complete runs).
    pub n_flagged: Option<i64>,
}

/// One test's stored result. `None` = not available (reason in `notes`).
#[allow(missing_docs)]
#[derive(Debug, Clone, Default, PartialEq)]
pub struct TestRow {
    pub test_idx: i64,
    pub characteristic: String,
    pub factor: String,
    /// `differs_material`, `differs`, `no_evidence` or `too_little_data`.
    pub state: String,
    pub is_new: bool,
    pub n_obs: i64,
    pub n_groups: i64,
    pub n_groups_used: i64,
    pub leading_method: Option<String>,
    pub leading_reason: Option<String>,
    pub recommend_kruskal: Option<bool>,
    pub leading_statistic: Option<f64>,
    pub leading_p: Option<f64>,
    pub q_value: Option<f64>,
    pub anova_f: Option<f64>,
    pub anova_df1: Option<f64>,
    pub anova_df2: Option<f64>,
    pub anova_p: Option<f64>,
    pub ss_between: Option<f64>,
    pub ss_within: Option<f64>,
    pub ms_within: Option<f64>,
    pub r_squared: Option<f64>,
    pub resid_sd: Option<f64>,
    pub welch_f: Option<f64>,
    pub welch_df1: Option<f64>,
    pub welch_df2: Option<f64>,
    pub welch_p: Option<f64>,
    pub kruskal_h: Option<f64>,
    pub kruskal_p: Option<f64>,
    pub levene_stat: Option<f64>,
    pub levene_p: Option<f64>,
    pub brown_forsythe_stat: Option<f64>,
    pub brown_forsythe_p: Option<f64>,
    pub bartlett_stat: Option<f64>,
    pub bartlett_p: Option<f64>,
    pub shapiro_w: Option<f64>,
    pub shapiro_p: Option<f64>,
    pub sd_ratio: Option<f64>,
    pub n_beyond_3sd: Option<i64>,
    pub eta_squared: Option<f64>,
    pub omega_squared: Option<f64>,
    pub var_between: Option<f64>,
    pub var_within: Option<f64>,
    pub share_between: Option<f64>,
    pub icc: Option<f64>,
    pub icc_low: Option<f64>,
    pub icc_high: Option<f64>,
    pub tolerance: Option<f64>,
    pub spread_of_means: Option<f64>,
    pub spread_pct_tolerance: Option<f64>,
    pub standout_level: Option<String>,
    pub standout_diff: Option<f64>,
    pub standout_sd_units: Option<f64>,
    pub standout_pct_tolerance: Option<f64>,
    pub min_detectable_diff: Option<f64>,
    pub min_detectable_pct_tolerance: Option<f64>,
    pub notes: String,
    /// `independent`, `nested`, `blocked` or `cell_means` (`None` in runs stored before 0009).
    pub design: Option<String>,
    pub n_subgroups: Option<i64>,
    pub var_subgroups: Option<f64>,
    pub share_subgroups: Option<f64>,
    pub serial_r1: Option<f64>,
    pub serial_z: Option<f64>,
    pub serial_p: Option<f64>,
}

/// One group's summary within a test.
#[allow(missing_docs)]
#[derive(Debug, Clone, PartialEq)]
pub struct GroupRow {
    pub test_idx: i64,
    pub group_idx: i64,
    pub level: String,
    pub n: i64,
    /// Offset from `origin`.
    pub mean: f64,
    pub sd: Option<f64>,
    pub min: f64,
    pub max: f64,
    /// Exact decimal text of the characteristic's origin.
    pub origin: String,
    pub diff_from_grand: Option<f64>,
}

/// One pairwise comparison of a flagged test.
#[allow(missing_docs)]
#[derive(Debug, Clone, PartialEq)]
pub struct PairRow {
    pub test_idx: i64,
    pub level_a: String,
    pub level_b: String,
    /// `tukey_kramer` or `games_howell`.
    pub method: String,
    pub diff: f64,
    pub se: f64,
    pub statistic: f64,
    pub df: f64,
    pub p_adj: f64,
    pub ci_low: f64,
    pub ci_high: f64,
}

/// The full content of a finished run.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RunContent {
    /// One row per test.
    pub tests: Vec<TestRow>,
    /// Group summaries of every test.
    pub groups: Vec<GroupRow>,
    /// Pairs of the flagged tests.
    pub pairs: Vec<PairRow>,
}

/// Whether a state counts as a flag.
pub fn is_flag_state(state: &str) -> bool {
    state == "differs_material" || state == "differs"
}

/// Inserts a `running` row with the next version of its period and commits it; returns the run.
pub fn begin_run(conn: &mut Connection, header: &RunHeader, started_ms: i64) -> Result<StoredRun> {
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    let version: i64 = tx.query_row(
        "SELECT COALESCE(MAX(version), 0) + 1 FROM run WHERE period_kind = ?1 AND period_label = ?2",
        params![header.period_kind, header.period_label],
        |r| r.get(0),
    )?;
    tx.execute(
        "INSERT INTO run (period_kind, period_label, period_start_ms, period_end_ms, schedule,
            version, config_hash, tool_version, fdr_method, fdr_level, started_ms, status,
            max_import_id)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, 'running',
            (SELECT COALESCE(MAX(id), 0) FROM imports))",
        params![
            header.period_kind,
            header.period_label,
            header.period_start_ms,
            header.period_end_ms,
            header.schedule,
            version,
            header.config_hash,
            header.tool_version,
            header.fdr_method,
            header.fdr_level,
            started_ms
        ],
    )?;
    let run_id = tx.last_insert_rowid();
    tx.commit()?;
    Ok(StoredRun {
        run_id,
        version,
        header: header.clone(),
        started_ms,
        finished_ms: None,
        status: "running".into(),
        error: None,
        n_tests: None,
        n_flagged: None,
    })
}

/// Writes every result row of the run and marks it `complete`, in one transaction.
///
/// Fails (and writes nothing) when the run is no longer `running` (for example because a
/// recovery marked it abandoned).
pub fn complete_run(
    conn: &mut Connection,
    run_id: i64,
    finished_ms: i64,
    content: &RunContent,
) -> Result<()> {
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    {
        let mut ins = tx.prepare_cached(
            "INSERT INTO run_result (run_id, test_idx, characteristic, factor, state, is_new, n_obs,
                n_groups, n_groups_used, leading_method, leading_reason, recommend_kruskal,
                leading_statistic, leading_p, q_value, anova_f, anova_df1, anova_df2, anova_p,
                ss_between, ss_within, ms_within, r_squared, resid_sd, welch_f, welch_df1,
                welch_df2, welch_p, kruskal_h, kruskal_p, levene_stat, levene_p,
                brown_forsythe_stat, brown_forsythe_p, bartlett_stat, bartlett_p, shapiro_w,
                shapiro_p, sd_ratio, n_beyond_3sd, eta_squared, omega_squared, var_between,
                var_within, share_between, icc, icc_low, icc_high, tolerance, spread_of_means,
                spread_pct_tolerance, standout_level, standout_diff, standout_sd_units,
                standout_pct_tolerance, min_detectable_diff, min_detectable_pct_tolerance, notes,
                design, n_subgroups, var_subgroups, share_subgroups, serial_r1, serial_z, serial_p)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17,
                ?18, ?19, ?20, ?21, ?22, ?23, ?24, ?25, ?26, ?27, ?28, ?29, ?30, ?31, ?32, ?33,
                ?34, ?35, ?36, ?37, ?38, ?39, ?40, ?41, ?42, ?43, ?44, ?45, ?46, ?47, ?48, ?49,
                ?50, ?51, ?52, ?53, ?54, ?55, ?56, ?57, ?58, ?59, ?60, ?61, ?62, ?63, ?64, ?65)",
        )?;
        for t in &content.tests {
            ins.execute(rusqlite::params![
                run_id,
                t.test_idx,
                t.characteristic,
                t.factor,
                t.state,
                t.is_new,
                t.n_obs,
                t.n_groups,
                t.n_groups_used,
                t.leading_method,
                t.leading_reason,
                t.recommend_kruskal,
                t.leading_statistic,
                t.leading_p,
                t.q_value,
                t.anova_f,
                t.anova_df1,
                t.anova_df2,
                t.anova_p,
                t.ss_between,
                t.ss_within,
                t.ms_within,
                t.r_squared,
                t.resid_sd,
                t.welch_f,
                t.welch_df1,
                t.welch_df2,
                t.welch_p,
                t.kruskal_h,
                t.kruskal_p,
                t.levene_stat,
                t.levene_p,
                t.brown_forsythe_stat,
                t.brown_forsythe_p,
                t.bartlett_stat,
                t.bartlett_p,
                t.shapiro_w,
                t.shapiro_p,
                t.sd_ratio,
                t.n_beyond_3sd,
                t.eta_squared,
                t.omega_squared,
                t.var_between,
                t.var_within,
                t.share_between,
                t.icc,
                t.icc_low,
                t.icc_high,
                t.tolerance,
                t.spread_of_means,
                t.spread_pct_tolerance,
                t.standout_level,
                t.standout_diff,
                t.standout_sd_units,
                t.standout_pct_tolerance,
                t.min_detectable_diff,
                t.min_detectable_pct_tolerance,
                t.notes,
                t.design,
                t.n_subgroups,
                t.var_subgroups,
                t.share_subgroups,
                t.serial_r1,
                t.serial_z,
                t.serial_p,
            ])?;
        }
        let mut ins = tx.prepare_cached(
            "INSERT INTO run_group (run_id, test_idx, group_idx, level, n, mean, sd, min, max,
                origin, diff_from_grand) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11)",
        )?;
        for g in &content.groups {
            ins.execute(params![
                run_id,
                g.test_idx,
                g.group_idx,
                g.level,
                g.n,
                g.mean,
                g.sd,
                g.min,
                g.max,
                g.origin,
                g.diff_from_grand
            ])?;
        }
        let mut ins = tx.prepare_cached(
            "INSERT INTO run_pair (run_id, test_idx, level_a, level_b, method, diff, se,
                statistic, df, p_adj, ci_low, ci_high)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
        )?;
        for p in &content.pairs {
            ins.execute(params![
                run_id,
                p.test_idx,
                p.level_a,
                p.level_b,
                p.method,
                p.diff,
                p.se,
                p.statistic,
                p.df,
                p.p_adj,
                p.ci_low,
                p.ci_high
            ])?;
        }
    }
    let n_flagged = content
        .tests
        .iter()
        .filter(|t| is_flag_state(&t.state))
        .count() as i64;
    let changed = tx.execute(
        "UPDATE run SET status = 'complete', finished_ms = ?2, n_tests = ?3, n_flagged = ?4
         WHERE run_id = ?1 AND status = 'running'",
        params![run_id, finished_ms, content.tests.len() as i64, n_flagged],
    )?;
    if changed != 1 {
        // Dropping the transaction rolls every insert back.
        return Err(crate::Error::Database(format!(
            "run {run_id} is no longer running (it was recovered as abandoned); its results were not written"
        )));
    }
    tx.commit()?;
    Ok(())
}

/// Marks a run `failed` and keeps the error text.
pub fn fail_run(conn: &Connection, run_id: i64, finished_ms: i64, error: &str) -> Result<()> {
    conn.execute(
        "UPDATE run SET status = 'failed', finished_ms = ?2, error = ?3
         WHERE run_id = ?1 AND status = 'running'",
        params![run_id, finished_ms, error],
    )?;
    Ok(())
}

/// Marks as failed every `running` run whose lease (schedule, or `''` for a run by hand, and
/// period) is missing or expired at `now_ms`. Returns how many were recovered.
pub fn recover_abandoned(conn: &Connection, now_ms: i64) -> Result<usize> {
    let n = conn.execute(
        "UPDATE run SET status = 'failed', finished_ms = ?1,
            error = 'abandoned: the process stopped before the run was written; no results were kept'
         WHERE status = 'running' AND NOT EXISTS (
            SELECT 1 FROM run_lease l
            WHERE l.schedule = COALESCE(run.schedule, '') AND l.period_kind = run.period_kind
              AND l.period_label = run.period_label AND l.expires_ms > ?1)",
        params![now_ms],
    )?;
    Ok(n)
}

/// Marks as failed ("abandoned") the `running` runs of one schedule and period. Called by the
/// holder of that period's lease: while it holds the lease, no other process can be running it.
pub fn abandon_running(conn: &Connection, key: &LeaseKey, now_ms: i64) -> Result<usize> {
    let n = execute_for_lease(
        conn,
        "UPDATE run SET status = 'failed', finished_ms = ?4,
            error = 'abandoned: the process stopped before the run was written; no results were kept'
         WHERE status = 'running' AND COALESCE(schedule, '') = ?1 AND period_kind = ?2
           AND period_label = ?3",
        key,
        params![now_ms],
    )?;
    Ok(n)
}

const RUN_COLUMNS: &str = "run_id, version, period_kind, period_label, period_start_ms, \
    period_end_ms, schedule, config_hash, tool_version, fdr_method, fdr_level, started_ms, \
    finished_ms, status, error, n_tests, n_flagged";

fn run_from_row(r: &Row<'_>) -> rusqlite::Result<StoredRun> {
    Ok(StoredRun {
        run_id: r.get(0)?,
        version: r.get(1)?,
        header: RunHeader {
            period_kind: r.get(2)?,
            period_label: r.get(3)?,
            period_start_ms: r.get(4)?,
            period_end_ms: r.get(5)?,
            schedule: r.get(6)?,
            config_hash: r.get(7)?,
            tool_version: r.get(8)?,
            fdr_method: r.get(9)?,
            fdr_level: r.get(10)?,
        },
        started_ms: r.get(11)?,
        finished_ms: r.get(12)?,
        status: r.get(13)?,
        error: r.get(14)?,
        n_tests: r.get(15)?,
        n_flagged: r.get(16)?,
    })
}

/// How many complete versions a period's run has: more than one means the period was checked
/// again (late or undone data made it stale, or it was rerun) and is shown as revised.
pub fn complete_versions(conn: &Connection, period_kind: &str, period_label: &str) -> Result<i64> {
    Ok(conn
        .prepare_cached(
            "SELECT COUNT(*) FROM run WHERE period_kind = ?1 AND period_label = ?2 \
             AND status = 'complete'",
        )?
        .query_row(params![period_kind, period_label], |r| r.get(0))?)
}

/// The latest complete version of a period's run, if any.
pub fn latest_complete_run(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Option<StoredRun>> {
    let sql = format!(
        "SELECT {RUN_COLUMNS} FROM run WHERE period_kind = ?1 AND period_label = ?2
         AND status = 'complete' ORDER BY version DESC LIMIT 1"
    );
    Ok(conn
        .query_row(&sql, params![period_kind, period_label], run_from_row)
        .optional()?)
}

/// Every run of a period (all versions and statuses), oldest first.
pub fn runs_of_period(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Vec<StoredRun>> {
    let sql = format!(
        "SELECT {RUN_COLUMNS} FROM run WHERE period_kind = ?1 AND period_label = ?2
         ORDER BY version"
    );
    let mut st = conn.prepare(&sql)?;
    let rows = st.query_map(params![period_kind, period_label], run_from_row)?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// Every run, oldest first (for status displays and tests).
pub fn all_runs(conn: &Connection) -> Result<Vec<StoredRun>> {
    let sql = format!("SELECT {RUN_COLUMNS} FROM run ORDER BY run_id");
    let mut st = conn.prepare(&sql)?;
    let rows = st.query_map([], run_from_row)?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// Labels of the periods of `period_kind` (and `schedule`) that are done: checked to the end,
/// and not stale (no import stored measurements inside them, and no undo removed any, after
/// their latest complete run began).
pub fn completed_labels(
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

const TEST_COLUMNS: &str = "test_idx, characteristic, factor, state, is_new, n_obs, n_groups, \
    n_groups_used, leading_method, leading_reason, recommend_kruskal, leading_statistic, \
    leading_p, q_value, anova_f, anova_df1, anova_df2, anova_p, ss_between, ss_within, \
    ms_within, r_squared, resid_sd, welch_f, welch_df1, welch_df2, welch_p, kruskal_h, \
    kruskal_p, levene_stat, levene_p, brown_forsythe_stat, brown_forsythe_p, bartlett_stat, \
    bartlett_p, shapiro_w, shapiro_p, sd_ratio, n_beyond_3sd, eta_squared, omega_squared, \
    var_between, var_within, share_between, icc, icc_low, icc_high, tolerance, \
    spread_of_means, spread_pct_tolerance, standout_level, standout_diff, standout_sd_units, \
    standout_pct_tolerance, min_detectable_diff, min_detectable_pct_tolerance, notes, design, \
    n_subgroups, var_subgroups, share_subgroups, serial_r1, serial_z, serial_p";

fn test_from_row(r: &Row<'_>, o: usize) -> rusqlite::Result<TestRow> {
    Ok(TestRow {
        test_idx: r.get(o)?,
        characteristic: r.get(o + 1)?,
        factor: r.get(o + 2)?,
        state: r.get(o + 3)?,
        is_new: r.get(o + 4)?,
        n_obs: r.get(o + 5)?,
        n_groups: r.get(o + 6)?,
        n_groups_used: r.get(o + 7)?,
        leading_method: r.get(o + 8)?,
        leading_reason: r.get(o + 9)?,
        recommend_kruskal: r.get(o + 10)?,
        leading_statistic: r.get(o + 11)?,
        leading_p: r.get(o + 12)?,
        q_value: r.get(o + 13)?,
        anova_f: r.get(o + 14)?,
        anova_df1: r.get(o + 15)?,
        anova_df2: r.get(o + 16)?,
        anova_p: r.get(o + 17)?,
        ss_between: r.get(o + 18)?,
        ss_within: r.get(o + 19)?,
        ms_within: r.get(o + 20)?,
        r_squared: r.get(o + 21)?,
        resid_sd: r.get(o + 22)?,
        welch_f: r.get(o + 23)?,
        welch_df1: r.get(o + 24)?,
        welch_df2: r.get(o + 25)?,
        welch_p: r.get(o + 26)?,
        kruskal_h: r.get(o + 27)?,
        kruskal_p: r.get(o + 28)?,
        levene_stat: r.get(o + 29)?,
        levene_p: r.get(o + 30)?,
        brown_forsythe_stat: r.get(o + 31)?,
        brown_forsythe_p: r.get(o + 32)?,
        bartlett_stat: r.get(o + 33)?,
        bartlett_p: r.get(o + 34)?,
        shapiro_w: r.get(o + 35)?,
        shapiro_p: r.get(o + 36)?,
        sd_ratio: r.get(o + 37)?,
        n_beyond_3sd: r.get(o + 38)?,
        eta_squared: r.get(o + 39)?,
        omega_squared: r.get(o + 40)?,
        var_between: r.get(o + 41)?,
        var_within: r.get(o + 42)?,
        share_between: r.get(o + 43)?,
        icc: r.get(o + 44)?,
        icc_low: r.get(o + 45)?,
        icc_high: r.get(o + 46)?,
        tolerance: r.get(o + 47)?,
        spread_of_means: r.get(o + 48)?,
        spread_pct_tolerance: r.get(o + 49)?,
        standout_level: r.get(o + 50)?,
        standout_diff: r.get(o + 51)?,
        standout_sd_units: r.get(o + 52)?,
        standout_pct_tolerance: r.get(o + 53)?,
        min_detectable_diff: r.get(o + 54)?,
        min_detectable_pct_tolerance: r.get(o + 55)?,
        notes: r.get(o + 56)?,
        design: r.get(o + 57)?,
        n_subgroups: r.get(o + 58)?,
        var_subgroups: r.get(o + 59)?,
        share_subgroups: r.get(o + 60)?,
        serial_r1: r.get(o + 61)?,
        serial_z: r.get(o + 62)?,
        serial_p: r.get(o + 63)?,
    })
}

/// The rows `sql` selects with the run id bound to `?1`, each read by `read`.
fn rows_of_run<T>(
    conn: &Connection,
    sql: &str,
    run_id: i64,
    read: impl FnMut(&Row<'_>) -> rusqlite::Result<T>,
) -> Result<Vec<T>> {
    let mut st = conn.prepare(sql)?;
    let rows = st
        .query_map(params![run_id], read)?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

/// Reads the full content of one run.
pub fn run_content(conn: &Connection, run_id: i64) -> Result<RunContent> {
    let sql = format!("SELECT {TEST_COLUMNS} FROM run_result WHERE run_id = ?1 ORDER BY test_idx");
    let tests = rows_of_run(conn, &sql, run_id, |r| test_from_row(r, 0))?;
    let groups = rows_of_run(
        conn,
        "SELECT test_idx, group_idx, level, n, mean, sd, min, max, origin, diff_from_grand
         FROM run_group WHERE run_id = ?1 ORDER BY test_idx, group_idx",
        run_id,
        |r| {
            Ok(GroupRow {
                test_idx: r.get(0)?,
                group_idx: r.get(1)?,
                level: r.get(2)?,
                n: r.get(3)?,
                mean: r.get(4)?,
                sd: r.get(5)?,
                min: r.get(6)?,
                max: r.get(7)?,
                origin: r.get(8)?,
                diff_from_grand: r.get(9)?,
            })
        },
    )?;
    let pairs = rows_of_run(
        conn,
        "SELECT test_idx, level_a, level_b, method, diff, se, statistic, df, p_adj, ci_low, ci_high
         FROM run_pair WHERE run_id = ?1 ORDER BY test_idx, rowid",
        run_id,
        |r| {
            Ok(PairRow {
                test_idx: r.get(0)?,
                level_a: r.get(1)?,
                level_b: r.get(2)?,
                method: r.get(3)?,
                diff: r.get(4)?,
                se: r.get(5)?,
                statistic: r.get(6)?,
                df: r.get(7)?,
                p_adj: r.get(8)?,
                ci_low: r.get(9)?,
                ci_high: r.get(10)?,
            })
        },
    )?;
    Ok(RunContent {
        tests,
        groups,
        pairs,
    })
}

/// One period of a characteristic x factor history.
#[derive(Debug, Clone, PartialEq)]
pub struct HistoryPoint {
    /// The run the result comes from (the latest complete version of its period).
    pub run: StoredRun,
    /// The stored result.
    pub test: TestRow,
    /// Complete versions of the period's run (more than one: the period was checked again).
    pub complete_versions: i64,
}

/// `columns` (a comma-separated list) with each name prefixed by `alias.`.
fn qualified(alias: &str, columns: &str) -> String {
    columns
        .split(',')
        .map(|c| format!("{alias}.{}", c.trim()))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The latest complete result of `characteristic` x `factor` for each of the last `last` periods
/// of `period_kind`, oldest first.
pub fn history(
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
    let mut st = conn.prepare(&sql)?;
    let mut points = st
        .query_map(
            params![period_kind, characteristic, factor, last as i64],
            |r| {
                Ok(HistoryPoint {
                    run: run_from_row(r)?,
                    test: test_from_row(r, RUN_COLUMNS.split(',').count())?,
                    complete_versions: 1,
                })
            },
        )?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    points.reverse();
    for p in &mut points {
        p.complete_versions =
            complete_versions(conn, &p.run.header.period_kind, &p.run.header.period_label)?;
    }
    Ok(points)
}

/// The latest complete run of every `period_kind` period whose start lies in
/// `[start_ms, end_ms)`, in time order (the month report and the chart command read these).
pub fn latest_complete_runs_between(
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
    let mut st = conn.prepare(&sql)?;
    let rows = st.query_map(params![period_kind, start_ms, end_ms], run_from_row)?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// Flagged (characteristic, factor) pairs of the latest complete run of a period.
pub fn flagged_tests(
    conn: &Connection,
    period_kind: &str,
    period_label: &str,
) -> Result<Option<Vec<(String, String)>>> {
    let Some(run) = latest_complete_run(conn, period_kind, period_label)? else {
        return Ok(None);
    };
    let rows = rows_of_run(
        conn,
        "SELECT characteristic, factor FROM run_result
         WHERE run_id = ?1 AND state IN ('differs_material', 'differs')",
        run.run_id,
        |r| Ok((r.get(0)?, r.get(1)?)),
    )?;
    Ok(Some(rows))
}

/// The earliest measurement instant in the store (ms since the epoch), `None` when empty.
pub fn first_measurement_ms(conn: &Connection) -> Result<Option<i64>> {
    Ok(conn.query_row("SELECT MIN(ts_ms) FROM measurements", [], |r| r.get(0))?)
}

/// Number of lease rows (taken and not released).
pub fn lease_count(conn: &Connection) -> Result<usize> {
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
pub fn take_lease(
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
pub fn heartbeat(
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
pub fn lease_holder(conn: &Connection, key: &LeaseKey) -> Result<Option<String>> {
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
pub fn take_over_lease(
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
pub fn release_lease(conn: &Connection, key: &LeaseKey, holder: &str) -> Result<()> {
    execute_for_lease(
        conn,
        "DELETE FROM run_lease WHERE schedule = ?1 AND period_kind = ?2 AND period_label = ?3
         AND holder = ?4",
        key,
        params![holder],
    )?;
    Ok(())
}

impl crate::storage::Store {
    /// The connection, for the run-history functions of this module.
    pub fn connection(&self) -> &Connection {
        &self.conn
    }

    /// The connection, mutable, for the functions of this module that open a transaction
    /// ([`begin_run`], [`complete_run`]).
    pub fn connection_mut(&mut self) -> &mut Connection {
        &mut self.conn
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
            period_kind: "day".into(),
            period_label: label.into(),
            period_start_ms: 1000,
            period_end_ms: 2000,
            schedule: Some("daily".into()),
            config_hash: "abc".into(),
            tool_version: "0.1.0".into(),
            fdr_method: "bh".into(),
            fdr_level: 0.05,
        }
    }

    fn content(state: &str) -> RunContent {
        RunContent {
            tests: vec![TestRow {
                test_idx: 0,
                characteristic: "bore".into(),
                factor: "machine".into(),
                state: state.into(),
                n_obs: 10,
                n_groups: 2,
                n_groups_used: 2,
                anova_f: Some(3.5),
                q_value: Some(0.01),
                standout_level: Some("M2".into()),
                notes: String::new(),
                ..TestRow::default()
            }],
            groups: vec![GroupRow {
                test_idx: 0,
                group_idx: 0,
                level: "M1".into(),
                n: 5,
                mean: 0.25,
                sd: Some(0.1),
                min: 0.0,
                max: 0.5,
                origin: "10".into(),
                diff_from_grand: Some(-0.1),
            }],
            pairs: vec![PairRow {
                test_idx: 0,
                level_a: "M1".into(),
                level_b: "M2".into(),
                method: "tukey_kramer".into(),
                diff: -0.2,
                se: 0.05,
                statistic: 4.0,
                df: 8.0,
                p_adj: 0.01,
                ci_low: -0.3,
                ci_high: -0.1,
            }],
        }
    }

    #[test]
    fn rerun_makes_new_version_and_readers_take_latest_complete() {
        let mut c = conn();
        let r1 = begin_run(&mut c, &header("2026-11-30"), 10).unwrap();
        complete_run(&mut c, r1.run_id, 20, &content("differs")).unwrap();
        let r2 = begin_run(&mut c, &header("2026-11-30"), 30).unwrap();
        assert_eq!((r1.version, r2.version), (1, 2));
        // Version 2 is still running: readers keep version 1.
        let latest = latest_complete_run(&c, "day", "2026-11-30")
            .unwrap()
            .unwrap();
        assert_eq!(latest.run_id, r1.run_id);
        complete_run(&mut c, r2.run_id, 40, &content("no_evidence")).unwrap();
        let latest = latest_complete_run(&c, "day", "2026-11-30")
            .unwrap()
            .unwrap();
        assert_eq!(latest.run_id, r2.run_id);
        assert_eq!(latest.n_flagged, Some(0));
        // The old version is kept with its content.
        let old = run_content(&c, r1.run_id).unwrap();
        assert_eq!(old, content("differs"));
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
        assert_eq!(all[0].status, "failed");
        assert_eq!(all[0].error.as_deref(), Some("database is locked"));
        // A failed run cannot be completed afterwards, and nothing is written.
        assert!(complete_run(&mut c, r.run_id, 12, &content("differs")).is_err());
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
        assert_eq!(all[0].status, "failed");
        assert!(all[0].error.as_deref().unwrap().starts_with("abandoned"));
        // The slow original process cannot write afterwards.
        assert!(complete_run(&mut c, r.run_id, 1300, &content("differs")).is_err());
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
            complete_run(&mut c, r.run_id, 2, &content("no_evidence")).unwrap();
        }
        let mut h = header("2026-11-29");
        h.period_start_ms = 1000;
        let r = begin_run(&mut c, &h, 3).unwrap();
        complete_run(&mut c, r.run_id, 4, &content("differs")).unwrap();
        let hist = history(&c, "bore", "machine", "day", 30).unwrap();
        let labels: Vec<_> = hist
            .iter()
            .map(|p| p.run.header.period_label.as_str())
            .collect();
        assert_eq!(labels, ["2026-11-28", "2026-11-29", "2026-11-30"]);
        assert_eq!(hist[1].test.state, "differs");
        assert_eq!(hist[1].run.version, 2);
        let last2 = history(&c, "bore", "machine", "day", 2).unwrap();
        assert_eq!(last2.len(), 2);
        assert_eq!(last2[0].run.header.period_label, "2026-11-29");
    }
}
