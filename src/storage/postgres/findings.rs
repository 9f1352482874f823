//! Findings, their notes, the flag history and the alert log on PostgreSQL: [`FindingStore`] for
//! [`PgStore`], with the SQLite implementation's order, atomicity and messages and the shared
//! column mappings (`storage::columns`).

use chrono::{DateTime, Utc};

use super::PgStore;
use crate::model::{Finding, PeriodKind};
use crate::storage::columns::{
    alert_from, alert_values, finding_columns_without_id, finding_from, finding_values,
    flag_history_from, pg_params, placeholders, ColumnRow, ALERT_COLUMNS, FINDING_COLUMNS,
    FLAG_HISTORY_COLUMNS,
};
use crate::storage::findings::{unknown_finding, AlertRecord, FindingStore, FlagHistoryRow};
use crate::Result;

impl FindingStore for PgStore {
    fn flag_history(&self, kind: PeriodKind) -> Result<Vec<FlagHistoryRow>> {
        // Names sort by their bytes, as SQLite's default collation does.
        let rows = self.conn().query(
            &format!(
                "SELECT {FLAG_HISTORY_COLUMNS}
                 FROM run r JOIN run_result t ON t.run_id = r.run_id
                 WHERE r.period_kind = $1 AND r.status = 'complete'
                   AND r.version = (SELECT MAX(version) FROM run r2
                                    WHERE r2.period_kind = r.period_kind
                                      AND r2.period_label = r.period_label
                                      AND r2.status = 'complete')
                 ORDER BY t.characteristic COLLATE \"C\", t.factor COLLATE \"C\",
                          r.period_start_ms"
            ),
            &[&kind.as_str()],
        )?;
        rows.iter().map(flag_history_from).collect()
    }

    fn group_means(&self, run_id: i64, test_idx: i64) -> Result<Vec<(String, u64, f64)>> {
        let rows = self.conn().query(
            "SELECT level, n, mean FROM run_group WHERE run_id = $1 AND test_idx = $2 \
             ORDER BY group_idx",
            &[&run_id, &test_idx],
        )?;
        rows.iter()
            .map(|r| Ok((r.text(0)?, r.count(1)?, r.real(2)?)))
            .collect()
    }

    fn findings(&self, kind: Option<PeriodKind>) -> Result<Vec<Finding>> {
        let rows = self.conn().query(
            &format!(
                "SELECT {FINDING_COLUMNS} FROM finding \
                 WHERE $1::text IS NULL OR period_kind = $1 \
                 ORDER BY last_start_ms DESC, finding_id"
            ),
            &[&kind.map(PeriodKind::as_str)],
        )?;
        rows.iter().map(finding_from).collect()
    }

    fn finding(&self, id: i64) -> Result<Option<Finding>> {
        let row = self.conn().query_opt(
            &format!("SELECT {FINDING_COLUMNS} FROM finding WHERE finding_id = $1"),
            &[&id],
        )?;
        row.as_ref().map(finding_from).transpose()
    }

    fn save_findings(&mut self, findings: &mut [Finding]) -> Result<()> {
        let mut client = self.conn();
        let mut tx = client.transaction()?;
        let insert = tx.prepare(&format!(
            "INSERT INTO finding ({}) VALUES ({}) RETURNING finding_id",
            finding_columns_without_id(),
            placeholders('$', 1, 33)
        ))?;
        let update = tx.prepare(&format!(
            "UPDATE finding SET ({}) = ({}) WHERE finding_id = $1",
            finding_columns_without_id(),
            placeholders('$', 2, 33)
        ))?;
        // The ids of new findings are handed out only once the transaction commits: after a
        // failure the caller's findings are as they were (a retry inserts them again).
        let mut ids = Vec::with_capacity(findings.len());
        for f in findings.iter() {
            let id = {
                let values = finding_values(f);
                if f.id == 0 {
                    // Every column but the id, which the database assigns.
                    tx.query_one(&insert, &pg_params(&values[1..]))?.int(0)?
                } else {
                    tx.execute(&update, &pg_params(&values))?;
                    f.id
                }
            };
            ids.push(id);
        }
        tx.commit()?;
        for (f, id) in findings.iter_mut().zip(ids) {
            f.id = id;
        }
        Ok(())
    }

    fn add_finding_note(&mut self, id: i64, text: &str, now: DateTime<Utc>) -> Result<()> {
        if self.finding(id)?.is_none() {
            let last = self
                .conn()
                .query_one("SELECT MAX(finding_id) FROM finding", &[])?
                .opt_int(0)?;
            return Err(unknown_finding(id, last));
        }
        self.conn().execute(
            "INSERT INTO finding_note (finding_id, created_ms, text) VALUES ($1, $2, $3)",
            &[&id, &now.timestamp_millis(), &text],
        )?;
        Ok(())
    }

    fn finding_notes(&self, id: i64) -> Result<Vec<(DateTime<Utc>, String)>> {
        let rows = self.conn().query(
            "SELECT created_ms, text FROM finding_note WHERE finding_id = $1 \
             ORDER BY created_ms, note_id",
            &[&id],
        )?;
        rows.iter()
            .map(|r| Ok((r.instant(0)?, r.text(1)?)))
            .collect()
    }

    fn log_alert(&self, record: &AlertRecord) -> Result<()> {
        let values = alert_values(record);
        self.conn().execute(
            &format!(
                "INSERT INTO alert_log ({ALERT_COLUMNS}) VALUES ({})",
                placeholders('$', 1, values.len())
            ),
            &pg_params(&values),
        )?;
        Ok(())
    }

    fn last_alert(&self) -> Result<Option<AlertRecord>> {
        let row = self.conn().query_opt(
            &format!("SELECT {ALERT_COLUMNS} FROM alert_log ORDER BY alert_id DESC LIMIT 1"),
            &[],
        )?;
        row.as_ref().map(alert_from).transpose()
    }
}
