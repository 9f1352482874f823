//! The import log: [`ImportStore::import_records`](super::ImportStore::import_records) lists every import, and [`ImportStore::undo_import`](super::ImportStore::undo_import)
//! removes one import's measurements and rejected rows in one transaction, recording the undo as
//! an import row of its own (migration 0005), so a checked period it touches becomes stale and
//! the scheduler checks it again.

use chrono::{DateTime, Utc};
use rusqlite::{params, OptionalExtension, TransactionBehavior};

use crate::{Error, Result};

use super::Store;

/// One row of the import log.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ImportRecord {
    /// The import id (`import #N`).
    pub id: i64,
    /// The file name (`<stdin>` for standard input).
    pub file_name: String,
    /// The path as given.
    pub path: String,
    /// SHA-256 of the bytes read (empty for an undo).
    pub sha256: String,
    /// The layout used.
    pub layout: String,
    /// When it started.
    pub started_at: DateTime<Utc>,
    /// When it ended.
    pub finished_at: DateTime<Utc>,
    /// Measurements read (`stored + duplicates + rejected`).
    pub measurements_read: u64,
    /// Measurements it stored.
    pub stored: u64,
    /// Measurements already stored by an earlier import (not stored again).
    pub duplicates: u64,
    /// Measurements rejected.
    pub rejected: u64,
    /// Of `rejected`, the measurements whose records the database did not keep.
    pub rejected_not_kept: u64,
    /// Imported again over the same content with `--force`.
    pub forced: bool,
    /// The first and last instant it stored (none when it stored nothing).
    pub first_measurement: Option<DateTime<Utc>>,
    /// See `first_measurement`.
    pub last_measurement: Option<DateTime<Utc>>,
    /// This row records the undo of that import.
    pub undoes: Option<i64>,
    /// This import was undone by that one (its measurements and rejections are gone).
    pub undone_by: Option<i64>,
}

/// What [`ImportStore::undo_import`](super::ImportStore::undo_import) removed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct UndoReport {
    /// The import undone.
    pub import_id: i64,
    /// Its file name.
    pub file_name: String,
    /// The id of the row recording the undo.
    pub undo_id: i64,
    /// Measurements removed.
    pub measurements_removed: u64,
    /// Rejection records removed.
    pub rejections_removed: u64,
}

/// Every import in id order, undos included (the same SQL on both backends).
pub(crate) const IMPORT_RECORDS_SQL: &str =
    "SELECT i.id, i.file_name, i.path, i.sha256, i.layout, i.started_ms, i.finished_ms, \
            i.rows_read, i.accepted - i.duplicates, i.duplicates, i.rejected, \
            i.rejected_not_kept, i.is_forced, i.ts_min_ms, i.ts_max_ms, i.undoes, \
            (SELECT u.id FROM imports u WHERE u.undoes = i.id) \
     FROM imports i ORDER BY i.id";

/// Why an undo was refused (nothing changed).
#[derive(Debug, Clone)]
pub(crate) enum UndoRefusal {
    /// No import has the id; the last one has `last`.
    Unknown { last: i64 },
    /// The id records an undo itself.
    IsAnUndo { undoes: i64 },
    /// The import was undone already.
    UndoneAlready { file_name: String, by: i64 },
    /// The stored measurements do not match the import's record.
    CountsDisagree {
        file_name: String,
        stored: i64,
        removed: u64,
    },
}

/// The error for an undo of import `id` that was refused (the same words on every backend).
pub(crate) fn undo_refusal(id: i64, why: UndoRefusal) -> Error {
    match why {
        UndoRefusal::Unknown { last } => Error::Usage(format!(
            "there is no import #{id} (the last is #{last}; `samewise import list` shows them)"
        )),
        UndoRefusal::IsAnUndo { undoes } => Error::Usage(format!(
            "import #{id} records the undo of import #{undoes}; an undo cannot be undone \
             (import the file again)"
        )),
        UndoRefusal::UndoneAlready { file_name, by } => Error::Usage(format!(
            "import #{id} ({file_name}) was undone already, by #{by}"
        )),
        UndoRefusal::CountsDisagree {
            file_name,
            stored,
            removed,
        } => Error::Database(format!(
            "import #{id} ({file_name}) recorded {stored} stored measurements but {removed} \
             were found in its time range; nothing was undone (run `samewise db check`)"
        )),
    }
}

use super::columns::from_ms as instant;

impl Store {
    /// Every import in id order, undos included.
    pub(super) fn import_records(&self) -> Result<Vec<ImportRecord>> {
        let mut stmt = self.conn.prepare(IMPORT_RECORDS_SQL)?;
        let rows = stmt.query_map([], |r| {
            Ok(ImportRecord {
                id: r.get(0)?,
                file_name: r.get(1)?,
                path: r.get(2)?,
                sha256: r.get(3)?,
                layout: r.get(4)?,
                started_at: instant(r.get(5)?),
                finished_at: instant(r.get(6)?),
                measurements_read: r.get::<_, i64>(7)? as u64,
                stored: r.get::<_, i64>(8)? as u64,
                duplicates: r.get::<_, i64>(9)? as u64,
                rejected: r.get::<_, i64>(10)? as u64,
                rejected_not_kept: r.get::<_, i64>(11)? as u64,
                forced: r.get(12)?,
                first_measurement: r.get::<_, Option<i64>>(13)?.map(instant),
                last_measurement: r.get::<_, Option<i64>>(14)?.map(instant),
                undoes: r.get(15)?,
                undone_by: r.get(16)?,
            })
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }

    /// Removes import `id`'s measurements and rejection records in one transaction and records
    /// the undo (an import row whose `undoes` is `id`, with `id`'s time range, so every checked
    /// period it touched is stale). The undone import keeps its row, marked undone, and no
    /// longer counts as a duplicate of its content: the corrected file imports without `--force`.
    ///
    /// Refused, with nothing changed: an unknown id, an undo row, an import undone already, or
    /// a database whose measurements do not match the import's record (`db check` tells more).
    pub(super) fn undo_import(&mut self, id: i64, now: DateTime<Utc>) -> Result<UndoReport> {
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        type Found = (String, String, String, i64, i64, Option<i64>, Option<i64>);
        let found: Option<Found> = tx
            .query_row(
                "SELECT file_name, path, layout, accepted - duplicates, undoes, ts_min_ms, ts_max_ms \
                 FROM imports WHERE id = ?1",
                [id],
                |r| {
                    Ok((
                        r.get(0)?,
                        r.get(1)?,
                        r.get(2)?,
                        r.get(3)?,
                        r.get::<_, Option<i64>>(4)?.unwrap_or(0),
                        r.get(5)?,
                        r.get(6)?,
                    ))
                },
            )
            .optional()?;
        let Some((file_name, path, layout, stored, undoes, mut ts_min, mut ts_max)) = found else {
            let last: i64 =
                tx.query_row("SELECT COALESCE(MAX(id), 0) FROM imports", [], |r| r.get(0))?;
            return Err(undo_refusal(id, UndoRefusal::Unknown { last }));
        };
        if undoes != 0 {
            return Err(undo_refusal(id, UndoRefusal::IsAnUndo { undoes }));
        }
        let undone_by: Option<i64> = tx
            .query_row("SELECT id FROM imports WHERE undoes = ?1", [id], |r| {
                r.get(0)
            })
            .optional()?;
        if let Some(by) = undone_by {
            return Err(undo_refusal(
                id,
                UndoRefusal::UndoneAlready { file_name, by },
            ));
        }
        // An import made before its time range was recorded (migration 0004): find it once.
        if ts_min.is_none() && stored > 0 {
            (ts_min, ts_max) = tx.query_row(
                "SELECT MIN(ts_ms), MAX(ts_ms) FROM measurements WHERE import_id = ?1",
                [id],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )?;
        }
        // The measurements lie in the import's time range: delete them characteristic by
        // characteristic along the primary key (characteristic, time), not by a table scan.
        let mut removed = 0u64;
        if let (Some(lo), Some(hi)) = (ts_min, ts_max) {
            let ids: Vec<i64> = tx
                .prepare("SELECT id FROM characteristics ORDER BY id")?
                .query_map([], |r| r.get(0))?
                .collect::<rusqlite::Result<_>>()?;
            let mut delete = tx.prepare(
                "DELETE FROM measurements WHERE characteristic_id = ?1 AND ts_ms BETWEEN ?2 AND ?3 \
                 AND import_id = ?4",
            )?;
            for c in ids {
                removed += delete.execute(params![c, lo, hi, id])? as u64;
            }
        }
        if removed != stored as u64 {
            return Err(undo_refusal(
                id,
                UndoRefusal::CountsDisagree {
                    file_name,
                    stored,
                    removed,
                },
            ));
        }
        let rejections = tx.execute("DELETE FROM rejected_rows WHERE import_id = ?1", [id])? as u64;
        let now_ms = now.timestamp_millis();
        tx.execute(
            "INSERT INTO imports (file_name, path, sha256, layout, started_ms, finished_ms, \
             rows_read, accepted, rejected, is_forced, duplicates, ts_min_ms, ts_max_ms, undoes) \
             VALUES (?1, ?2, '', ?3, ?4, ?4, 0, 0, 0, 0, 0, ?5, ?6, ?7)",
            params![file_name, path, layout, now_ms, ts_min, ts_max, id],
        )?;
        let undo_id = tx.last_insert_rowid();
        tx.commit()?;
        Ok(UndoReport {
            import_id: id,
            file_name,
            undo_id,
            measurements_removed: removed,
            rejections_removed: rejections,
        })
    }
}
