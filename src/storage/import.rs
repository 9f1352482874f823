//! [`Store::import`]: one file, one transaction, every row stored or rejected.
//!
//! The file is read (parsed by `ingest`) in one thread and written in the calling thread, linked
//! by a small bounded channel of batches, so memory stays constant whatever the file size. The
//! import row, the measurements, the rejected rows and any new characteristics, levels and level
//! sets are written in one IMMEDIATE transaction: a crash, a kill or an error before the commit
//! leaves the database exactly as it was. The content hash is checked against earlier imports
//! before the commit; a duplicate is refused (rolled back) unless `force` is set.

use std::collections::HashMap;
use std::io::Read;
use std::path::PathBuf;
use std::sync::mpsc;
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeZone, Utc};
use rusqlite::{params, Connection, OptionalExtension, TransactionBehavior};

use crate::ingest::{ImportStream, Rejection, RowOutcome};
use crate::stats::decimal::Decimal;
use crate::{Error, Result};

use super::master::{load_characteristics, LevelSetWriter};
use super::Store;

/// Outcomes per batch handed from the reading thread to the writing one.
const BATCH: usize = 4096;
/// Batches in flight between the threads (bounds memory).
const IN_FLIGHT: usize = 8;
/// How many rejections the report keeps in full.
const FIRST_REJECTIONS: usize = 10;

/// Options of [`Store::import`].
#[derive(Debug, Clone)]
pub struct ImportOptions {
    /// Import even when the same content was imported before.
    pub force: bool,
    /// When the import started (recorded in the import row; the caller reads the clock).
    pub started_at: DateTime<Utc>,
}

/// An earlier import of the same content.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PriorImport {
    /// Its import id.
    pub id: i64,
    /// The file name it was imported from.
    pub file_name: String,
    /// When it started.
    pub started_at: DateTime<Utc>,
    /// Measurements it stored.
    pub accepted: u64,
}

impl std::fmt::Display for PriorImport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "import #{} ({}, {}, {} measurements)",
            self.id,
            self.file_name,
            self.started_at.format("%Y-%m-%d %H:%M:%S UTC"),
            self.accepted
        )
    }
}

/// What one import did. Always `accepted + rejected == measurements_read`.
#[derive(Debug, Clone)]
pub struct ImportReport {
    /// The new import's id.
    pub import_id: i64,
    /// The file.
    pub path: PathBuf,
    /// SHA-256 of its bytes.
    pub sha256: String,
    /// The layout used.
    pub layout: String,
    /// Data lines read (after the header), blank lines included.
    pub rows_read: u64,
    /// Measurements read: `rows_read` for long files, `rows_read x characteristic columns` for wide.
    pub measurements_read: u64,
    /// Measurements stored.
    pub accepted: u64,
    /// Measurements rejected (stored in `rejected_rows`).
    pub rejected: u64,
    /// Rejection counts by reason (quoted values folded), most frequent first.
    pub reasons: Vec<(String, u64)>,
    /// The first rejections, in file order.
    pub first_rejections: Vec<Rejection>,
    /// Characteristics created by this import (`--add-new`).
    pub new_characteristics: Vec<String>,
    /// The earlier import of the same content, when `force` imported it anyway.
    pub forced_over: Option<PriorImport>,
    /// Wall time of the import.
    pub elapsed: Duration,
}

struct CharacteristicState {
    id: i64,
    name: String,
    origin: Option<Decimal>,
    decimals: u32,
    is_changed: bool,
}

/// Folds the values quoted in a reason (`value "1,5" is ...` -> `value "…" is ...`) so that
/// rejections count by kind.
pub(crate) fn reason_kind(reason: &str) -> String {
    let mut out = String::with_capacity(reason.len());
    let mut in_quote = false;
    for c in reason.chars() {
        if c == '"' {
            if in_quote {
                out.push_str("…\"");
            } else {
                out.push('"');
            }
            in_quote = !in_quote;
        } else if !in_quote {
            out.push(c);
        }
    }
    if in_quote {
        out.push('"');
    }
    out
}

fn ms(ts: DateTime<Utc>) -> i64 {
    ts.timestamp_millis()
}

/// The earlier imports with this content hash, oldest first.
pub(crate) fn imports_with_sha256(conn: &Connection, sha256: &str) -> Result<Option<PriorImport>> {
    Ok(conn
        .prepare_cached(
            "SELECT id, file_name, started_ms, accepted FROM imports WHERE sha256 = ?1 ORDER BY id LIMIT 1",
        )?
        .query_row([sha256], |r| {
            Ok(PriorImport {
                id: r.get(0)?,
                file_name: r.get(1)?,
                started_at: Utc
                    .timestamp_millis_opt(r.get(2)?)
                    .single()
                    .unwrap_or_default(),
                accepted: r.get::<_, i64>(3)? as u64,
            })
        })
        .optional()?)
}

impl Store {
    /// The earliest import of content with this SHA-256, if any (to refuse a duplicate before
    /// reading the file).
    pub fn find_import_by_sha256(&self, sha256: &str) -> Result<Option<PriorImport>> {
        imports_with_sha256(&self.conn, sha256)
    }

    /// The rejected rows stored for one import, in file order.
    pub fn rejected_rows(&self, import_id: i64) -> Result<Vec<Rejection>> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT line, column_name, reason, raw FROM rejected_rows WHERE import_id = ?1 ORDER BY line, id",
        )?;
        let rows = stmt.query_map([import_id], |r| {
            Ok(Rejection {
                line: r.get::<_, i64>(0)? as u64,
                column: r.get(1)?,
                reason: r.get(2)?,
                raw: r.get(3)?,
            })
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }

    /// Imports one file in one transaction: every measurement of the stream is stored or its
    /// rejection recorded (file line, column, reason, raw text). On any error, or a duplicate
    /// without `force`, nothing is written.
    pub fn import<R: Read + Send>(
        &mut self,
        stream: ImportStream<R>,
        options: &ImportOptions,
    ) -> Result<ImportReport> {
        let clock = Instant::now();
        let path = stream.path().to_path_buf();
        let layout = stream.layout().name.clone();
        let file_name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| path.display().to_string());
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        tx.execute(
            "INSERT INTO imports (file_name, path, sha256, layout, started_ms, finished_ms, rows_read, \
             accepted, rejected, is_forced) VALUES (?1, ?2, '', ?3, ?4, ?4, 0, 0, 0, ?5)",
            params![
                file_name,
                path.display().to_string(),
                layout,
                ms(options.started_at),
                options.force
            ],
        )?;
        let import_id = tx.last_insert_rowid();

        let mut characteristics: Vec<CharacteristicState> = load_characteristics(&tx)?
            .into_iter()
            .map(|c| CharacteristicState {
                id: c.id,
                name: c.config.name,
                origin: c.origin,
                decimals: c.decimals,
                is_changed: false,
            })
            .collect();
        let mut by_name: HashMap<String, usize> = characteristics
            .iter()
            .enumerate()
            .map(|(i, c)| (c.name.clone(), i))
            .collect();
        let mut level_sets = LevelSetWriter::load(&tx)?;
        let mut new_characteristics = Vec::new();
        let mut accepted = 0u64;
        let mut rejected = 0u64;
        let mut reasons: HashMap<String, u64> = HashMap::new();
        let mut first_rejections = Vec::new();

        let (sender, receiver) = mpsc::sync_channel::<Vec<RowOutcome>>(IN_FLIGHT);
        let (stream, write_result) = std::thread::scope(|scope| {
            let reader = scope.spawn(move || {
                let mut stream = stream;
                let mut batch = Vec::with_capacity(BATCH);
                for outcome in stream.by_ref() {
                    batch.push(outcome);
                    if batch.len() == BATCH {
                        let full = std::mem::replace(&mut batch, Vec::with_capacity(BATCH));
                        if sender.send(full).is_err() {
                            // The writer stopped on an error; stop reading.
                            return stream;
                        }
                    }
                }
                if !batch.is_empty() {
                    let _ = sender.send(batch);
                }
                stream
            });
            let write_result = (|| -> Result<()> {
                let mut insert_measurement = tx.prepare_cached(
                    "INSERT INTO measurements (characteristic_id, ts_ms, import_id, line, value, level_set_id) \
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                )?;
                let mut insert_rejection = tx.prepare_cached(
                    "INSERT INTO rejected_rows (import_id, line, column_name, reason, raw) VALUES (?1, ?2, ?3, ?4, ?5)",
                )?;
                for batch in receiver.iter() {
                    for outcome in batch {
                        match outcome {
                            RowOutcome::Accepted(m) => {
                                let idx = match by_name.get(m.characteristic.as_str()) {
                                    Some(&i) => i,
                                    None => {
                                        tx.execute(
                                            "INSERT INTO characteristics (name, is_configured) VALUES (?1, 0)",
                                            [&m.characteristic],
                                        )?;
                                        characteristics.push(CharacteristicState {
                                            id: tx.last_insert_rowid(),
                                            name: m.characteristic.clone(),
                                            origin: None,
                                            decimals: 0,
                                            is_changed: true,
                                        });
                                        new_characteristics.push(m.characteristic.clone());
                                        by_name.insert(
                                            m.characteristic.clone(),
                                            characteristics.len() - 1,
                                        );
                                        characteristics.len() - 1
                                    }
                                };
                                let state = &mut characteristics[idx];
                                let origin = match state.origin {
                                    Some(o) => o,
                                    None => {
                                        state.origin = Some(m.value);
                                        state.is_changed = true;
                                        m.value
                                    }
                                };
                                let decimals = m.value.scale().max(0) as u32;
                                if decimals > state.decimals {
                                    state.decimals = decimals;
                                    state.is_changed = true;
                                }
                                let value = m.value.offset_from(&origin);
                                let level_set_id = level_sets.id_for(&tx, &m.levels)?;
                                insert_measurement.execute(params![
                                    state.id,
                                    ms(m.ts),
                                    import_id,
                                    m.line as i64,
                                    value,
                                    level_set_id
                                ])?;
                                accepted += 1;
                            }
                            RowOutcome::Rejected(r) => {
                                insert_rejection.execute(params![
                                    import_id,
                                    r.line as i64,
                                    r.column,
                                    r.reason,
                                    r.raw
                                ])?;
                                *reasons.entry(reason_kind(&r.reason)).or_insert(0) += 1;
                                rejected += 1;
                                if first_rejections.len() < FIRST_REJECTIONS {
                                    first_rejections.push(r);
                                }
                            }
                        }
                    }
                }
                Ok(())
            })();
            // Dropping the receiver unblocks a reader still sending after a write error.
            drop(receiver);
            let stream = reader.join().expect("the import reading thread panicked");
            (stream, write_result)
        });
        let mut stream = stream;
        write_result?;
        if let Some(error) = stream.take_error() {
            return Err(error);
        }
        let counts = stream.counts();
        let sha256 = stream
            .file_sha256()
            .ok_or_else(|| Error::Ingest {
                path: path.clone(),
                line: None,
                column: None,
                reason: "the file was not read to the end".to_string(),
            })?
            .to_string();
        if accepted != counts.accepted || rejected != counts.rejected {
            return Err(Error::Database(format!(
                "{}: counts do not add up (stored {accepted} + rejected {rejected}, read {} + {}); nothing was imported",
                path.display(),
                counts.accepted,
                counts.rejected
            )));
        }
        let prior = imports_with_sha256(&tx, &sha256)?;
        if let Some(prior) = &prior {
            if !options.force {
                return Err(Error::AlreadyImported {
                    path,
                    earlier: prior.to_string(),
                });
            }
        }
        for c in characteristics.iter().filter(|c| c.is_changed) {
            tx.execute(
                "UPDATE characteristics SET origin = ?2, decimals = ?3 WHERE id = ?1",
                params![c.id, c.origin.map(|o| o.to_string()), c.decimals],
            )?;
        }
        let elapsed = clock.elapsed();
        let finished = options.started_at + chrono::Duration::from_std(elapsed).unwrap_or_default();
        tx.execute(
            "UPDATE imports SET sha256 = ?2, finished_ms = ?3, rows_read = ?4, accepted = ?5, rejected = ?6 \
             WHERE id = ?1",
            params![
                import_id,
                sha256,
                ms(finished),
                (accepted + rejected) as i64,
                accepted as i64,
                rejected as i64
            ],
        )?;
        tx.commit()?;
        let mut reasons: Vec<(String, u64)> = reasons.into_iter().collect();
        reasons.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
        Ok(ImportReport {
            import_id,
            path,
            sha256,
            layout,
            rows_read: counts.rows_read,
            measurements_read: counts.measurements_read,
            accepted,
            rejected,
            reasons,
            first_rejections,
            new_characteristics,
            forced_over: prior,
            elapsed: clock.elapsed(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::reason_kind;

    #[test]
    fn reasons_fold_quoted_values() {
        assert_eq!(
            reason_kind("value \"1,5\" is not a number"),
            "value \"…\" is not a number"
        );
        assert_eq!(reason_kind("blank line"), "blank line");
    }
}
