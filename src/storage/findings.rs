//! Findings, their notes and the alert log (migration 0006): what `analysis::findings` reads of
//! the run history and writes back.

use chrono::{DateTime, Utc};
use rusqlite::params;

use crate::model::{Finding, PeriodKind};
use crate::{Error, Result};

use super::columns::{
    alert_from, alert_values, finding_columns_without_id, finding_from, finding_values,
    flag_history_from, placeholders, sqlite_row, sqlite_rows, ColumnRow, ALERT_COLUMNS,
    FINDING_COLUMNS, FLAG_HISTORY_COLUMNS,
};
use super::Store;

/// One test of the latest complete run of one period, as findings need it.
#[derive(Debug, Clone, PartialEq)]
pub struct FlagHistoryRow {
    /// The period.
    pub label: String,
    /// Its start.
    pub start: DateTime<Utc>,
    /// Its end.
    pub end: DateTime<Utc>,
    /// The run and the test's index in it (for the group means).
    pub run_id: i64,
    /// See `run_id`.
    pub test_idx: i64,
    /// The characteristic.
    pub characteristic: String,
    /// The factor.
    pub factor: String,
    /// The stored state.
    pub state: crate::results::TestState,
    /// The standing-out level and its distance from the grand mean (units, SDs, % tolerance).
    pub stands_out: crate::results::StandsOut,
    /// The within-group SD.
    pub resid_sd: Option<f64>,
    /// Kruskal-Wallis recommended (clearly non-normal residuals in small groups).
    pub recommend_kruskal: bool,
}

/// One run of the alert command.
#[derive(Debug, Clone, PartialEq)]
pub struct AlertRecord {
    /// When it started and ended.
    pub started: DateTime<Utc>,
    /// See `started`.
    pub finished: DateTime<Utc>,
    /// Findings it was given.
    pub n_findings: u32,
    /// The command line.
    pub command: String,
    /// Its exit code, when it exited.
    pub exit_code: Option<i32>,
    /// What went wrong; `None` when it exited 0.
    pub error: Option<String>,
}

/// The error for a note to finding `id`, which does not exist; `last` is the highest id stored.
pub(super) fn unknown_finding(id: i64, last: Option<i64>) -> Error {
    Error::Usage(match last {
        Some(last) => format!(
            "there is no finding #{id} (the highest is #{last}; `samewise findings --all` lists them)"
        ),
        None => "there are no findings yet".to_string(),
    })
}

impl Store {
    /// Every test of the latest complete run of every `kind` period, by characteristic, factor
    /// and period start: the flag history findings are built from.
    pub fn flag_history(&self, kind: PeriodKind) -> Result<Vec<FlagHistoryRow>> {
        sqlite_rows(
            &self.conn,
            &format!(
                "SELECT {FLAG_HISTORY_COLUMNS}
                 FROM run r JOIN run_result t ON t.run_id = r.run_id
                 WHERE r.period_kind = ?1 AND r.status = 'complete'
                   AND r.version = (SELECT MAX(version) FROM run r2
                                    WHERE r2.period_kind = r.period_kind
                                      AND r2.period_label = r.period_label
                                      AND r2.status = 'complete')
                 ORDER BY t.characteristic, t.factor, r.period_start_ms"
            ),
            [kind.as_str()],
            |r| flag_history_from(r),
        )
    }

    /// The groups of one stored test: (level, n, mean offset), in group order. Means of one run
    /// share their characteristic's origin, so differences between them are exact.
    pub fn group_means(&self, run_id: i64, test_idx: i64) -> Result<Vec<(String, u64, f64)>> {
        sqlite_rows(
            &self.conn,
            "SELECT level, n, mean FROM run_group WHERE run_id = ?1 AND test_idx = ?2 \
             ORDER BY group_idx",
            params![run_id, test_idx],
            |r| Ok((r.text(0)?, r.count(1)?, r.real(2)?)),
        )
    }

    /// The stored findings of `kind` (every kind when `None`), most recently flagged first.
    pub fn findings(&self, kind: Option<PeriodKind>) -> Result<Vec<Finding>> {
        let sql = format!(
            "SELECT {FINDING_COLUMNS} FROM finding WHERE ?1 IS NULL OR period_kind = ?1 \
             ORDER BY last_start_ms DESC, finding_id"
        );
        sqlite_rows(&self.conn, &sql, [kind.map(PeriodKind::as_str)], |r| {
            finding_from(r)
        })
    }

    /// One finding by its number.
    pub fn finding(&self, id: i64) -> Result<Option<Finding>> {
        let sql = format!("SELECT {FINDING_COLUMNS} FROM finding WHERE finding_id = ?1");
        sqlite_row(&self.conn, &sql, [id], |r| finding_from(r))
    }

    /// Writes findings in one transaction: a finding with id 0 is inserted (its id is set),
    /// others are updated in place.
    pub fn save_findings(&mut self, findings: &mut [Finding]) -> Result<()> {
        // The ids of new findings are handed out only once the transaction commits: after a
        // failure the caller's findings are as they were (a retry inserts them again).
        let mut ids = Vec::with_capacity(findings.len());
        let tx = self.conn.transaction()?;
        {
            let mut insert = tx.prepare_cached(&format!(
                "INSERT INTO finding ({}) VALUES ({})",
                finding_columns_without_id(),
                placeholders('?', 1, 33)
            ))?;
            let mut update = tx.prepare_cached(&format!(
                "UPDATE finding SET ({}) = ({}) WHERE finding_id = ?1",
                finding_columns_without_id(),
                placeholders('?', 2, 33)
            ))?;
            for f in findings.iter() {
                let id = {
                    let values = finding_values(f);
                    if f.id == 0 {
                        // Every column but the id, which SQLite assigns.
                        insert.execute(rusqlite::params_from_iter(&values[1..]))?;
                        tx.last_insert_rowid()
                    } else {
                        update.execute(rusqlite::params_from_iter(values))?;
                        f.id
                    }
                };
                ids.push(id);
            }
        }
        tx.commit()?;
        for (f, id) in findings.iter_mut().zip(ids) {
            f.id = id;
        }
        Ok(())
    }

    /// Adds an engineer's note to finding `id`; `now` is when.
    pub fn add_finding_note(&mut self, id: i64, text: &str, now: DateTime<Utc>) -> Result<()> {
        if self.finding(id)?.is_none() {
            let last: Option<i64> =
                self.conn
                    .query_row("SELECT MAX(finding_id) FROM finding", [], |r| r.get(0))?;
            return Err(unknown_finding(id, last));
        }
        self.conn.execute(
            "INSERT INTO finding_note (finding_id, created_ms, text) VALUES (?1, ?2, ?3)",
            params![id, now.timestamp_millis(), text],
        )?;
        Ok(())
    }

    /// The notes of finding `id`, oldest first: (when, text).
    pub fn finding_notes(&self, id: i64) -> Result<Vec<(DateTime<Utc>, String)>> {
        sqlite_rows(
            &self.conn,
            "SELECT created_ms, text FROM finding_note WHERE finding_id = ?1 ORDER BY created_ms, note_id",
            [id],
            |r| Ok((r.instant(0)?, r.text(1)?)),
        )
    }

    /// Records one run of the alert command.
    pub fn log_alert(&self, record: &AlertRecord) -> Result<()> {
        self.conn.execute(
            &format!(
                "INSERT INTO alert_log ({ALERT_COLUMNS}) VALUES ({})",
                placeholders('?', 1, 6)
            ),
            rusqlite::params_from_iter(alert_values(record)),
        )?;
        Ok(())
    }

    /// The latest run of the alert command, if any.
    pub fn last_alert(&self) -> Result<Option<AlertRecord>> {
        sqlite_row(
            &self.conn,
            &format!("SELECT {ALERT_COLUMNS} FROM alert_log ORDER BY alert_id DESC LIMIT 1"),
            [],
            |r| alert_from(r),
        )
    }
}

/// Findings (flags that persist over periods), their notes, the flag history they are built
/// from and the alert log: what a second backend implements. Writing methods are atomic.
pub trait FindingStore {
    /// Every test of the latest complete version of every `kind` period, ordered by
    /// characteristic, factor and period start; empty when no period of that kind is complete.
    fn flag_history(&self, kind: PeriodKind) -> Result<Vec<FlagHistoryRow>>;
    /// The groups of one stored test: (level, n, mean offset from the characteristic's origin),
    /// in group order; empty for an unknown run or test.
    fn group_means(&self, run_id: i64, test_idx: i64) -> Result<Vec<(String, u64, f64)>>;
    /// The stored findings of `kind` (every kind when `None`), most recently flagged first, then
    /// by id.
    fn findings(&self, kind: Option<PeriodKind>) -> Result<Vec<Finding>>;
    /// One finding by its number; `None` when there is no such finding.
    fn finding(&self, id: i64) -> Result<Option<Finding>>;
    /// Writes findings in one transaction (all or none): a finding with id 0 is inserted and its
    /// id set, others are updated in place.
    fn save_findings(&mut self, findings: &mut [Finding]) -> Result<()>;
    /// Adds a dated note to finding `id`; an unknown id is an error and nothing is written.
    fn add_finding_note(&mut self, id: i64, text: &str, now: DateTime<Utc>) -> Result<()>;
    /// The notes of finding `id`, oldest first; empty when it has none.
    fn finding_notes(&self, id: i64) -> Result<Vec<(DateTime<Utc>, String)>>;
    /// Records one run of the alert command (its start and end, how many findings it was given,
    /// the command, its exit code or error), committed at once; every record is kept, and
    /// [`FindingStore::last_alert`] returns the one recorded last.
    fn log_alert(&self, record: &AlertRecord) -> Result<()>;
    /// The latest recorded run of the alert command; `None` before the first.
    fn last_alert(&self) -> Result<Option<AlertRecord>>;
}

impl FindingStore for Store {
    fn flag_history(&self, kind: PeriodKind) -> Result<Vec<FlagHistoryRow>> {
        Store::flag_history(self, kind)
    }
    fn group_means(&self, run_id: i64, test_idx: i64) -> Result<Vec<(String, u64, f64)>> {
        Store::group_means(self, run_id, test_idx)
    }
    fn findings(&self, kind: Option<PeriodKind>) -> Result<Vec<Finding>> {
        Store::findings(self, kind)
    }
    fn finding(&self, id: i64) -> Result<Option<Finding>> {
        Store::finding(self, id)
    }
    fn save_findings(&mut self, findings: &mut [Finding]) -> Result<()> {
        Store::save_findings(self, findings)
    }
    fn add_finding_note(&mut self, id: i64, text: &str, now: DateTime<Utc>) -> Result<()> {
        Store::add_finding_note(self, id, text, now)
    }
    fn finding_notes(&self, id: i64) -> Result<Vec<(DateTime<Utc>, String)>> {
        Store::finding_notes(self, id)
    }
    fn log_alert(&self, record: &AlertRecord) -> Result<()> {
        Store::log_alert(self, record)
    }
    fn last_alert(&self) -> Result<Option<AlertRecord>> {
        Store::last_alert(self)
    }
}
