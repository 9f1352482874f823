//! The run history and its leases on PostgreSQL: [`RunStore`] for [`PgStore`], with the
//! behaviour of the SQLite implementation (`storage::runs`): the same lifecycle, versions,
//! statuses, lease rules and messages, and the shared column mappings (`storage::columns`).
//!
//! Where SQLite has its single write lock, PostgreSQL gets explicit locks:
//! - versions and the import mark: [`RunStore::begin_run`] takes the site's import fence
//!   ([`IMPORT_FENCE`], a transaction-scoped advisory lock) exclusively, then numbers the new
//!   version and records the highest import id it can see. Two processes beginning the same
//!   period at once thus get versions 1 and 2 (the `UNIQUE (period_kind, period_label,
//!   version)` constraint stands behind it), and an import that holds the fence shared until it
//!   commits is never counted as seen before it is visible;
//! - leases: one `INSERT ... ON CONFLICT DO UPDATE ... WHERE` statement, atomic under
//!   concurrency (the loser's statement sees the winner's row and changes nothing);
//! - completing a run: the final `UPDATE ... WHERE status = 'running'` takes the run's row lock,
//!   so a recovery that marked it abandoned first makes the whole transaction roll back.
//!
//! Waiting for a lock is bounded by the busy timeout (`SAMEWISE_BUSY_TIMEOUT`), as on SQLite.

use postgres::binary_copy::BinaryCopyInWriter;
use postgres::types::{ToSql, Type};
use postgres::{GenericClient, Transaction};

use super::PgStore;
use crate::storage::columns::{
    attach_groups_and_pairs, column_count, group_from, group_values, new_run_values, pair_from,
    pair_values, pg_params, placeholders, qualified, run_from, test_from, test_values, ColumnRow,
    Value, GROUP_COLUMNS, NEW_RUN_COLUMNS, PAIR_COLUMNS, RUN_COLUMNS, TEST_COLUMNS,
};
use crate::storage::runs::{
    no_longer_running, HistoryPoint, LeaseKey, RunContent, RunHeader, RunStore, StoredRun,
    ABANDONED,
};
use crate::Result;

/// The advisory lock key (an SQL expression) of the site's run writer, which also orders a
/// run's import mark after the imports it counts as seen: an import of this site holds it
/// shared (`pg_advisory_xact_lock_shared`) from before its `imports` row gets an id until it
/// commits, so imports never wait for each other; [`RunStore::begin_run`] takes it exclusively
/// while it numbers the version and reads the highest import id, so runs begin one at a time
/// and every import up to that id has committed (with SQLite's single writer both hold by
/// themselves).
pub(crate) const IMPORT_FENCE: &str =
    "hashtextextended('samewise imports ' || current_schema(), 0)";

/// Limits the waits for locks of the current transaction to the busy timeout, as SQLite's busy
/// timeout does; a timeout is a busy error (`storage::is_busy`).
pub(super) fn bound_lock_waits(tx: &mut Transaction<'_>) -> Result<()> {
    let ms = crate::storage::busy_timeout().as_millis().max(1);
    tx.batch_execute(&format!("SET LOCAL lock_timeout = {ms}"))?;
    Ok(())
}

/// Writes `rows` (each the values of `columns`, in order) into `table` with one binary COPY:
/// a round trip or two whatever the number of rows, where multi-row `INSERT`s of a few hundred
/// rows cost the server several milliseconds each to bind (docs/performance.md, "PostgreSQL
/// daily check"). Identity columns are assigned in the order of the rows; the values keep
/// their bits (binary format).
pub(super) fn insert_rows(
    tx: &mut Transaction<'_>,
    table: &str,
    columns: &str,
    rows: &[Vec<Value<'_>>],
) -> Result<()> {
    if rows.is_empty() {
        return Ok(());
    }
    // The columns' types as the server has them: binary COPY does not convert, so each value is
    // checked against its column's type as it is written (a mismatch is an error).
    let types: Vec<Type> = tx
        .prepare(&format!("SELECT {columns} FROM {table}"))?
        .columns()
        .iter()
        .map(|c| c.type_().clone())
        .collect();
    debug_assert_eq!(types.len(), column_count(columns));
    let sink = tx.copy_in(&format!(
        "COPY {table} ({columns}) FROM STDIN (FORMAT binary)"
    ))?;
    let mut writer = BinaryCopyInWriter::new(sink, &types);
    let mut params: Vec<&(dyn ToSql + Sync)> = Vec::with_capacity(types.len());
    for row in rows {
        if row.len() != types.len() {
            return Err(crate::Error::Database(format!(
                "{table}: a row of {} values for the {} columns {columns}",
                row.len(),
                types.len()
            )));
        }
        params.clear();
        params.extend(row.iter().map(Value::pg));
        writer.write(&params)?;
    }
    writer.finish()?;
    Ok(())
}

/// Executes `sql` with the lease key bound to `$1` (schedule), `$2` (period kind) and `$3`
/// (period label), and `more` after them; returns the rows changed.
fn execute_for_lease(
    client: &mut impl GenericClient,
    sql: &str,
    key: &LeaseKey,
    more: &[&(dyn ToSql + Sync)],
) -> Result<u64> {
    let mut all: Vec<&(dyn ToSql + Sync)> =
        vec![&key.schedule, &key.period_kind, &key.period_label];
    all.extend_from_slice(more);
    Ok(client.execute(sql, &all)?)
}

/// Every run a query selects (its first columns the [`RUN_COLUMNS`]).
fn runs(
    client: &mut impl GenericClient,
    sql: &str,
    params: &[&(dyn ToSql + Sync)],
) -> Result<Vec<StoredRun>> {
    client
        .query(sql, params)?
        .iter()
        .map(|r| run_from(r, 0))
        .collect()
}

fn latest_complete_run(
    client: &mut impl GenericClient,
    period_kind: &str,
    period_label: &str,
) -> Result<Option<StoredRun>> {
    let sql = format!(
        "SELECT {RUN_COLUMNS} FROM run WHERE period_kind = $1 AND period_label = $2
         AND status = 'complete' ORDER BY version DESC LIMIT 1"
    );
    Ok(runs(client, &sql, &[&period_kind, &period_label])?.pop())
}

fn complete_versions(
    client: &mut impl GenericClient,
    period_kind: &str,
    period_label: &str,
) -> Result<i64> {
    Ok(client
        .query_one(
            "SELECT COUNT(*) FROM run WHERE period_kind = $1 AND period_label = $2 \
             AND status = 'complete'",
            &[&period_kind, &period_label],
        )?
        .get(0))
}

impl RunStore for PgStore {
    fn begin_run(&mut self, header: &RunHeader, started_ms: i64) -> Result<StoredRun> {
        let mut client = self.conn();
        let mut tx = client.transaction()?;
        bound_lock_waits(&mut tx)?;
        let (kind, label) = (header.period_kind.as_str(), &header.period_label);
        tx.execute(
            &format!("SELECT pg_advisory_xact_lock({IMPORT_FENCE})"),
            &[],
        )?;
        // Read after the lock: each statement sees what committed before it began, so the
        // previous begin's version too.
        let version: i64 = tx
            .query_one(
                "SELECT COALESCE(MAX(version), 0) + 1 FROM run \
                 WHERE period_kind = $1 AND period_label = $2",
                &[&kind, label],
            )?
            .get(0);
        let values = new_run_values(header, version, started_ms);
        let run_id: i64 = tx
            .query_one(
                &format!(
                    "INSERT INTO run ({NEW_RUN_COLUMNS}, status, max_import_id)
                     VALUES ({}, 'running', (SELECT COALESCE(MAX(id), 0) FROM imports))
                     RETURNING run_id",
                    placeholders('$', 1, values.len())
                ),
                &pg_params(&values),
            )?
            .get(0);
        tx.commit()?;
        Ok(StoredRun::begun(run_id, version, header, started_ms))
    }

    fn complete_run(&mut self, run_id: i64, finished_ms: i64, content: &RunContent) -> Result<()> {
        let mut client = self.conn();
        let mut tx = client.transaction()?;
        bound_lock_waits(&mut tx)?;
        let tests: Vec<Vec<Value<'_>>> = content
            .tests
            .iter()
            .map(|t| test_values(run_id, t))
            .collect();
        insert_rows(
            &mut tx,
            "run_result",
            &format!("run_id, {TEST_COLUMNS}"),
            &tests,
        )?;
        let groups: Vec<Vec<Value<'_>>> = content
            .tests
            .iter()
            .flat_map(|t| {
                t.groups
                    .iter()
                    .enumerate()
                    .map(move |(i, g)| group_values(run_id, t.index, i, g))
            })
            .collect();
        insert_rows(
            &mut tx,
            "run_group",
            &format!("run_id, test_idx, group_idx, {GROUP_COLUMNS}"),
            &groups,
        )?;
        let pairs: Vec<Vec<Value<'_>>> = content
            .tests
            .iter()
            .flat_map(|t| t.pairs.iter().map(move |p| pair_values(run_id, t.index, p)))
            .collect();
        insert_rows(
            &mut tx,
            "run_pair",
            &format!("run_id, test_idx, {PAIR_COLUMNS}"),
            &pairs,
        )?;
        let n_tests = content.tests.len() as i64;
        let n_flagged = content.tests.iter().filter(|t| t.is_flag()).count() as i64;
        let changed = tx.execute(
            "UPDATE run SET status = 'complete', finished_ms = $2, n_tests = $3, n_flagged = $4
             WHERE run_id = $1 AND status = 'running'",
            &[&run_id, &finished_ms, &n_tests, &n_flagged],
        )?;
        if changed != 1 {
            // Dropping the transaction rolls every insert back.
            return Err(no_longer_running(run_id));
        }
        tx.commit()?;
        Ok(())
    }

    fn fail_run(&self, run_id: i64, finished_ms: i64, error: &str) -> Result<()> {
        self.conn().execute(
            "UPDATE run SET status = 'failed', finished_ms = $2, error = $3
             WHERE run_id = $1 AND status = 'running'",
            &[&run_id, &finished_ms, &error],
        )?;
        Ok(())
    }

    fn recover_abandoned(&self, now_ms: i64) -> Result<usize> {
        let n = self.conn().execute(
            "UPDATE run SET status = 'failed', finished_ms = $1, error = $2
             WHERE status = 'running' AND NOT EXISTS (
                SELECT 1 FROM run_lease l
                WHERE l.schedule = COALESCE(run.schedule, '') AND l.period_kind = run.period_kind
                  AND l.period_label = run.period_label AND l.expires_ms > $1)",
            &[&now_ms, &ABANDONED],
        )?;
        Ok(n as usize)
    }

    fn abandon_running(&self, key: &LeaseKey, now_ms: i64) -> Result<usize> {
        let n = execute_for_lease(
            &mut *self.conn(),
            "UPDATE run SET status = 'failed', finished_ms = $4, error = $5
             WHERE status = 'running' AND COALESCE(schedule, '') = $1 AND period_kind = $2
               AND period_label = $3",
            key,
            &[&now_ms, &ABANDONED],
        )?;
        Ok(n as usize)
    }

    fn complete_versions(&self, period_kind: &str, period_label: &str) -> Result<i64> {
        complete_versions(&mut *self.conn(), period_kind, period_label)
    }

    fn latest_complete_run(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<StoredRun>> {
        latest_complete_run(&mut *self.conn(), period_kind, period_label)
    }

    fn runs_of_period(&self, period_kind: &str, period_label: &str) -> Result<Vec<StoredRun>> {
        let sql = format!(
            "SELECT {RUN_COLUMNS} FROM run WHERE period_kind = $1 AND period_label = $2
             ORDER BY version"
        );
        runs(&mut *self.conn(), &sql, &[&period_kind, &period_label])
    }

    fn all_runs(&self) -> Result<Vec<StoredRun>> {
        let sql = format!("SELECT {RUN_COLUMNS} FROM run ORDER BY run_id");
        runs(&mut *self.conn(), &sql, &[])
    }

    fn completed_labels(&self, schedule: Option<&str>, period_kind: &str) -> Result<Vec<String>> {
        // As on SQLite: done when a complete run exists and no import that stored measurements
        // inside the period (or undid some) came after the latest complete run began. Labels
        // sort by their bytes, as SQLite's default collation does.
        let rows = self.conn().query(
            "SELECT g.label FROM (
                 SELECT period_label AS label, MAX(max_import_id) AS seen,
                        MIN(period_start_ms) AS start_ms, MAX(period_end_ms) AS end_ms
                 FROM run WHERE period_kind = $1 AND status = 'complete'
                   AND schedule IS NOT DISTINCT FROM $2
                 GROUP BY period_label) g
             WHERE NOT EXISTS (SELECT 1 FROM imports i
                 WHERE i.id > g.seen AND (i.accepted > i.duplicates OR i.undoes IS NOT NULL)
                   AND i.ts_min_ms < g.end_ms AND i.ts_max_ms >= g.start_ms)
             ORDER BY g.label COLLATE \"C\"",
            &[&period_kind, &schedule],
        )?;
        rows.iter().map(|r| r.text(0)).collect()
    }

    fn run_content(&self, run_id: i64) -> Result<RunContent> {
        let mut conn = self.conn();
        // One snapshot: a run completed meanwhile is read whole or not at all.
        let mut client = conn
            .build_transaction()
            .isolation_level(postgres::IsolationLevel::RepeatableRead)
            .read_only(true)
            .start()?;
        let mut tests = client
            .query(
                &format!(
                    "SELECT {TEST_COLUMNS} FROM run_result WHERE run_id = $1 ORDER BY test_idx"
                ),
                &[&run_id],
            )?
            .iter()
            .map(|r| test_from(r, 0))
            .collect::<Result<Vec<_>>>()?;
        let groups = client
            .query(
                &format!(
                    "SELECT test_idx, {GROUP_COLUMNS} FROM run_group WHERE run_id = $1 \
                     ORDER BY test_idx, group_idx"
                ),
                &[&run_id],
            )?
            .iter()
            .map(|r| Ok((r.small(0)?, group_from(r, 1)?)))
            .collect::<Result<Vec<_>>>()?;
        let pairs = client
            .query(
                &format!(
                    "SELECT test_idx, {PAIR_COLUMNS} FROM run_pair WHERE run_id = $1 \
                     ORDER BY test_idx, pair_id"
                ),
                &[&run_id],
            )?
            .iter()
            .map(|r| Ok((r.small(0)?, pair_from(r, 1)?)))
            .collect::<Result<Vec<_>>>()?;
        attach_groups_and_pairs(run_id, &mut tests, groups, pairs)?;
        client.commit()?;
        Ok(RunContent { tests })
    }

    fn history(
        &self,
        characteristic: &str,
        factor: &str,
        period_kind: &str,
        last: usize,
    ) -> Result<Vec<HistoryPoint>> {
        let run_cols = qualified("r", RUN_COLUMNS);
        let test_cols = qualified("t", TEST_COLUMNS);
        let sql = format!(
            "SELECT {run_cols}, {test_cols} FROM run r JOIN run_result t ON t.run_id = r.run_id
             WHERE r.period_kind = $1 AND r.status = 'complete' AND t.characteristic = $2
               AND t.factor = $3
               AND r.version = (SELECT MAX(version) FROM run r2
                                WHERE r2.period_kind = r.period_kind
                                  AND r2.period_label = r.period_label
                                  AND r2.status = 'complete')
             ORDER BY r.period_start_ms DESC LIMIT $4"
        );
        let limit = i64::try_from(last).unwrap_or(i64::MAX);
        let mut client = self.conn();
        let mut points = client
            .query(&sql, &[&period_kind, &characteristic, &factor, &limit])?
            .iter()
            .map(|r| {
                Ok(HistoryPoint {
                    run: run_from(r, 0)?,
                    test: test_from(r, column_count(RUN_COLUMNS))?,
                    complete_versions: 1,
                })
            })
            .collect::<Result<Vec<_>>>()?;
        points.reverse();
        for p in &mut points {
            p.complete_versions = complete_versions(
                &mut *client,
                p.run.header.period_kind.as_str(),
                &p.run.header.period_label,
            )?;
        }
        Ok(points)
    }

    fn latest_complete_runs_between(
        &self,
        period_kind: &str,
        start_ms: i64,
        end_ms: i64,
    ) -> Result<Vec<StoredRun>> {
        let run_cols = qualified("r", RUN_COLUMNS);
        let sql = format!(
            "SELECT {run_cols} FROM run r
             WHERE r.period_kind = $1 AND r.status = 'complete'
               AND r.period_start_ms >= $2 AND r.period_start_ms < $3
               AND r.version = (SELECT MAX(version) FROM run r2
                                WHERE r2.period_kind = r.period_kind
                                  AND r2.period_label = r.period_label
                                  AND r2.status = 'complete')
             ORDER BY r.period_start_ms, r.period_label COLLATE \"C\""
        );
        runs(&mut *self.conn(), &sql, &[&period_kind, &start_ms, &end_ms])
    }

    fn flagged_tests(
        &self,
        period_kind: &str,
        period_label: &str,
    ) -> Result<Option<Vec<(String, String)>>> {
        let mut client = self.conn();
        let Some(run) = latest_complete_run(&mut *client, period_kind, period_label)? else {
            return Ok(None);
        };
        let rows = client.query(
            "SELECT characteristic, factor FROM run_result
             WHERE run_id = $1 AND state IN ('differs_material', 'differs') ORDER BY test_idx",
            &[&run.run_id],
        )?;
        let flagged = rows
            .iter()
            .map(|r| Ok((r.text(0)?, r.text(1)?)))
            .collect::<Result<Vec<_>>>()?;
        Ok(Some(flagged))
    }

    fn first_measurement_ms(&self) -> Result<Option<i64>> {
        self.conn()
            .query_one("SELECT MIN(ts_ms) FROM measurements", &[])?
            .opt_int(0)
    }

    fn lease_count(&self) -> Result<usize> {
        let n = self
            .conn()
            .query_one("SELECT COUNT(*) FROM run_lease", &[])?
            .int(0)?;
        Ok(n as usize)
    }

    fn take_lease(&self, key: &LeaseKey, holder: &str, now_ms: i64, ttl_ms: i64) -> Result<bool> {
        // One statement: a concurrent taker's insert makes this one see its row and change
        // nothing (unless that lease has expired or is this holder's).
        let changed = execute_for_lease(
            &mut *self.conn(),
            "INSERT INTO run_lease (schedule, period_kind, period_label, holder, taken_ms,
                heartbeat_ms, expires_ms) VALUES ($1, $2, $3, $4, $5, $5, $6)
             ON CONFLICT (schedule, period_kind, period_label) DO UPDATE SET
                holder = excluded.holder, taken_ms = excluded.taken_ms,
                heartbeat_ms = excluded.heartbeat_ms, expires_ms = excluded.expires_ms
             WHERE run_lease.expires_ms <= excluded.taken_ms
                OR run_lease.holder = excluded.holder",
            key,
            &[&holder, &now_ms, &(now_ms + ttl_ms)],
        )?;
        Ok(changed == 1)
    }

    fn heartbeat(&self, key: &LeaseKey, holder: &str, now_ms: i64, ttl_ms: i64) -> Result<bool> {
        let changed = execute_for_lease(
            &mut *self.conn(),
            "UPDATE run_lease SET heartbeat_ms = $5, expires_ms = $6
             WHERE schedule = $1 AND period_kind = $2 AND period_label = $3 AND holder = $4",
            key,
            &[&holder, &now_ms, &(now_ms + ttl_ms)],
        )?;
        Ok(changed == 1)
    }

    fn lease_holder(&self, key: &LeaseKey) -> Result<Option<String>> {
        let row = self.conn().query_opt(
            "SELECT holder FROM run_lease WHERE schedule = $1 AND period_kind = $2
             AND period_label = $3",
            &[&key.schedule, &key.period_kind, &key.period_label],
        )?;
        row.map(|r| r.text(0)).transpose()
    }

    fn take_over_lease(
        &self,
        key: &LeaseKey,
        old: &str,
        holder: &str,
        now_ms: i64,
        ttl_ms: i64,
    ) -> Result<bool> {
        let changed = execute_for_lease(
            &mut *self.conn(),
            "UPDATE run_lease SET holder = $5, taken_ms = $6, heartbeat_ms = $6, expires_ms = $7
             WHERE schedule = $1 AND period_kind = $2 AND period_label = $3 AND holder = $4",
            key,
            &[&old, &holder, &now_ms, &(now_ms + ttl_ms)],
        )?;
        Ok(changed == 1)
    }

    fn release_lease(&self, key: &LeaseKey, holder: &str) -> Result<()> {
        execute_for_lease(
            &mut *self.conn(),
            "DELETE FROM run_lease WHERE schedule = $1 AND period_kind = $2 AND period_label = $3
             AND holder = $4",
            key,
            &[&holder],
        )?;
        Ok(())
    }
}
