//! Imports on PostgreSQL: [`ImportStore`] for [`PgStore`], through the import driver every
//! backend shares ([`drive_import`]).
//!
//! One file is one transaction. It first takes the site's write lock (a transaction-scoped
//! advisory lock on the schema: imports, undos and `init` of one site go one at a time, as on
//! SQLite; other sites never wait). Measurements are buffered per batch and written with binary
//! COPY; the few that a later row of the same file may look up (the overlap with an earlier
//! export, or rows identified by their part id) are inserted at once instead, so the look-up
//! sees them. Readers see the import whole or not at all (MVCC).

use std::collections::HashMap;
use std::io::Read;
use std::path::Path;
use std::time::Instant;

use chrono::{DateTime, Utc};
use postgres::binary_copy::BinaryCopyInWriter;
use postgres::types::{ToSql, Type};
use postgres::{Statement, Transaction};

use super::master::{load_characteristics, load_factors};
use super::PgStore;
use crate::ingest::{ImportStream, Rejection};
use crate::storage::import::{
    drive_import, BoxedStream, Candidates, FinishedImport, ImportOptions, ImportReport, ImportRow,
    ImportStore, ImportWriter, PriorImport, RejectionSink,
};
use crate::storage::imports::{undo_refusal, ImportRecord, UndoRefusal, UndoReport};
use crate::storage::maintenance::from_ms;
use crate::storage::master::{LevelSetStore, StoredCharacteristic, StoredFactor};
use crate::Result;

/// Takes the site's write lock for the rest of the transaction (imports, undos and the
/// master-data sync of one site go one at a time, as on SQLite; other sites never wait), and
/// the import fence shared, so a run that begins meanwhile waits for this transaction to end
/// before it reads the highest import id it has seen (`runs::IMPORT_FENCE`). Waits are bounded
/// by the busy timeout.
pub(crate) fn lock_site_writes(tx: &mut Transaction<'_>) -> Result<()> {
    super::runs::bound_lock_waits(tx)?;
    tx.batch_execute(&format!(
        "SELECT pg_advisory_xact_lock(hashtextextended('samewise writes ' || current_schema(), 0)); \
         SELECT pg_advisory_xact_lock_shared({});",
        super::runs::IMPORT_FENCE
    ))?;
    Ok(())
}

const PRIOR_SQL: &str = "SELECT id, file_name, started_ms, accepted FROM imports i \
     WHERE sha256 = $1 AND accepted > 0 \
     AND NOT EXISTS (SELECT 1 FROM imports u WHERE u.undoes = i.id) ORDER BY id LIMIT 1";

fn prior(row: &postgres::Row) -> PriorImport {
    PriorImport {
        id: row.get(0),
        file_name: row.get(1),
        started_at: from_ms(row.get(2)),
        accepted: row.get::<_, i64>(3) as u64,
    }
}

/// One measurement waiting for the batch's COPY.
struct Buffered {
    characteristic: i64,
    ts_ms: i64,
    import_id: i64,
    line: i64,
    value: f64,
    level_set: i64,
    part: Option<String>,
    subgroup: Option<String>,
}

/// PostgreSQL's side of one import.
struct PgImport<'t, 'c> {
    tx: &'t mut Transaction<'c>,
    insert_measurement: Statement,
    latest: Statement,
    insert_rejection: Statement,
    by_time_and_levels: Statement,
    by_time: Statement,
    by_part: Statement,
    members: Statement,
    buffer: Vec<Buffered>,
}

impl LevelSetStore for PgImport<'_, '_> {
    fn stored_factors(&mut self) -> Result<Vec<StoredFactor>> {
        load_factors(self.tx)
    }
    fn levels_of(&mut self, factor_id: i64) -> Result<Vec<(String, i64)>> {
        Ok(self
            .tx
            .query(
                "SELECT name, id FROM levels WHERE factor_id = $1",
                &[&factor_id],
            )?
            .iter()
            .map(|r| (r.get(0), r.get(1)))
            .collect())
    }
    fn has_level_sets(&mut self) -> Result<bool> {
        Ok(self
            .tx
            .query_one("SELECT EXISTS (SELECT 1 FROM level_sets)", &[])?
            .get(0))
    }
    fn insert_level(&mut self, factor_id: i64, name: &str) -> Result<i64> {
        Ok(self
            .tx
            .query_one(
                "INSERT INTO levels (factor_id, name) VALUES ($1, $2) RETURNING id",
                &[&factor_id, &name],
            )?
            .get(0))
    }
    fn find_level_sets(&mut self, keys: &[&str]) -> Result<HashMap<String, i64>> {
        Ok(self
            .tx
            .query(
                "SELECT key, id FROM level_sets WHERE key = ANY($1)",
                &[&keys],
            )?
            .iter()
            .map(|r| (r.get(0), r.get(1)))
            .collect())
    }
    /// All the sets in two statements: the keys (ids returned by key), then every member.
    fn insert_level_sets(&mut self, sets: &[(&str, &[(i64, i64)])]) -> Result<Vec<i64>> {
        if sets.is_empty() {
            return Ok(Vec::new());
        }
        let keys: Vec<&str> = sets.iter().map(|(k, _)| *k).collect();
        let ids: HashMap<String, i64> = self
            .tx
            .query(
                "INSERT INTO level_sets (key) SELECT unnest($1::text[]) RETURNING key, id",
                &[&keys],
            )?
            .iter()
            .map(|r| (r.get(0), r.get(1)))
            .collect();
        let mut set_ids = Vec::new();
        let mut factors = Vec::new();
        let mut levels = Vec::new();
        let mut out = Vec::with_capacity(sets.len());
        for (key, members) in sets {
            let id = *ids
                .get(*key)
                .ok_or_else(|| crate::Error::Database(format!("level set {key} was not stored")))?;
            out.push(id);
            for (f, l) in members.iter() {
                set_ids.push(id);
                factors.push(*f);
                levels.push(*l);
            }
        }
        self.tx.execute(
            "INSERT INTO level_set_members (level_set_id, factor_id, level_id) \
             SELECT * FROM unnest($1::bigint[], $2::bigint[], $3::bigint[])",
            &[&set_ids, &factors, &levels],
        )?;
        Ok(out)
    }
}

impl ImportWriter for PgImport<'_, '_> {
    fn begin(
        &mut self,
        file_name: &str,
        path: &str,
        layout: &str,
        started_ms: i64,
        force: bool,
    ) -> Result<i64> {
        Ok(self
            .tx
            .query_one(
                "INSERT INTO imports (file_name, path, sha256, layout, started_ms, finished_ms, \
                 rows_read, accepted, rejected, is_forced) \
                 VALUES ($1, $2, '', $3, $4, $4, 0, 0, 0, $5) RETURNING id",
                &[&file_name, &path, &layout, &started_ms, &i64::from(force)],
            )?
            .get(0))
    }
    fn characteristics(&mut self) -> Result<Vec<StoredCharacteristic>> {
        load_characteristics(self.tx)
    }
    fn prior_import(&mut self, sha256: &str) -> Result<Option<PriorImport>> {
        Ok(self.tx.query_opt(PRIOR_SQL, &[&sha256])?.map(|r| prior(&r)))
    }
    fn insert_characteristic(&mut self, name: &str) -> Result<i64> {
        Ok(self
            .tx
            .query_one(
                "INSERT INTO characteristics (name, is_configured) VALUES ($1, 0) RETURNING id",
                &[&name],
            )?
            .get(0))
    }
    fn latest_ts(&mut self, characteristic: i64) -> Result<Option<i64>> {
        Ok(self.tx.query_one(&self.latest, &[&characteristic])?.get(0))
    }
    fn candidates(&mut self, by: &Candidates<'_>) -> Result<Vec<(f64, i64, Option<String>)>> {
        let rows = match *by {
            Candidates::TimeAndLevels {
                characteristic,
                ts_ms,
                level_set,
            } => self.tx.query(
                &self.by_time_and_levels,
                &[&characteristic, &ts_ms, &level_set],
            )?,
            Candidates::Time {
                characteristic,
                ts_ms,
            } => self.tx.query(&self.by_time, &[&characteristic, &ts_ms])?,
            Candidates::Part {
                characteristic,
                part,
            } => self.tx.query(&self.by_part, &[&characteristic, &part])?,
        };
        Ok(rows
            .iter()
            .map(|r| (r.get(0), r.get(1), r.get(2)))
            .collect())
    }
    fn level_set_members(&mut self, set: i64) -> Result<Vec<(i64, i64)>> {
        Ok(self
            .tx
            .query(&self.members, &[&set])?
            .iter()
            .map(|r| (r.get(0), r.get(1)))
            .collect())
    }
    fn write_measurement(
        &mut self,
        import_id: i64,
        row: &ImportRow,
        part: Option<&str>,
        subgroup: Option<&str>,
        visible: bool,
    ) -> Result<()> {
        if visible {
            self.tx.execute(
                &self.insert_measurement,
                &[
                    &row.characteristic,
                    &row.ts_ms,
                    &import_id,
                    &row.line,
                    &row.value,
                    &row.level_set,
                    &part,
                    &subgroup,
                ],
            )?;
        } else {
            self.buffer.push(Buffered {
                characteristic: row.characteristic,
                ts_ms: row.ts_ms,
                import_id,
                line: row.line,
                value: row.value,
                level_set: row.level_set,
                part: part.map(str::to_string),
                subgroup: subgroup.map(str::to_string),
            });
        }
        Ok(())
    }
    fn flush(&mut self) -> Result<()> {
        if self.buffer.is_empty() {
            return Ok(());
        }
        let sink = self.tx.copy_in(
            "COPY measurements (characteristic_id, ts_ms, import_id, line, value, level_set_id, \
             part, subgroup) FROM STDIN (FORMAT binary)",
        )?;
        let types = [
            Type::INT8,
            Type::INT8,
            Type::INT8,
            Type::INT8,
            Type::FLOAT8,
            Type::INT8,
            Type::TEXT,
            Type::TEXT,
        ];
        let mut writer = BinaryCopyInWriter::new(sink, &types);
        for b in self.buffer.drain(..) {
            let values: [&(dyn ToSql + Sync); 8] = [
                &b.characteristic,
                &b.ts_ms,
                &b.import_id,
                &b.line,
                &b.value,
                &b.level_set,
                &b.part,
                &b.subgroup,
            ];
            writer.write(&values)?;
        }
        writer.finish()?;
        Ok(())
    }
    fn write_rejection(&mut self, import_id: i64, r: &Rejection) -> Result<()> {
        self.tx.execute(
            &self.insert_rejection,
            &[
                &import_id,
                &(r.line as i64),
                &r.column.as_deref().map(super::text_without_nul),
                &super::text_without_nul(&r.reason),
                &super::text_without_nul(&r.raw),
                &(r.measurements as i64),
            ],
        )?;
        Ok(())
    }
    fn set_origin(&mut self, id: i64, origin: Option<String>, decimals: u32) -> Result<()> {
        self.tx.execute(
            "UPDATE characteristics SET origin = $2, decimals = $3 WHERE id = $1",
            &[&id, &origin, &i64::from(decimals)],
        )?;
        Ok(())
    }
    fn finish_import(&mut self, import_id: i64, f: &FinishedImport<'_>) -> Result<()> {
        self.tx.execute(
            "UPDATE imports SET sha256 = $2, finished_ms = $3, rows_read = $4, accepted = $5, \
             rejected = $6, duplicates = $7, ts_min_ms = $8, ts_max_ms = $9, \
             rejected_not_kept = $10 WHERE id = $1",
            &[
                &import_id,
                &f.sha256,
                &f.finished_ms,
                &f.rows_read,
                &f.accepted,
                &f.rejected,
                &f.duplicates,
                &f.ts_min_ms,
                &f.ts_max_ms,
                &f.rejected_not_kept,
            ],
        )?;
        Ok(())
    }
}

impl PgStore {
    fn import_pg<R: Read + Send>(
        &mut self,
        stream: ImportStream<R>,
        options: &ImportOptions,
        early_file: Option<&Path>,
        on_rejection: Option<RejectionSink<'_>>,
    ) -> Result<ImportReport> {
        let clock = Instant::now();
        let mut conn = self.conn();
        let mut tx = conn.transaction()?;
        lock_site_writes(&mut tx)?;
        let prepare = |tx: &mut Transaction<'_>, sql: &str| tx.prepare(sql);
        let mut w = PgImport {
            insert_measurement: prepare(
                &mut tx,
                "INSERT INTO measurements (characteristic_id, ts_ms, import_id, line, value, \
                 level_set_id, part, subgroup) VALUES ($1, $2, $3, $4, $5, $6, $7, $8)",
            )?,
            latest: prepare(
                &mut tx,
                "SELECT MAX(ts_ms) FROM measurements WHERE characteristic_id = $1",
            )?,
            insert_rejection: prepare(
                &mut tx,
                "INSERT INTO rejected_rows (import_id, line, column_name, reason, raw, \
                 measurements) VALUES ($1, $2, $3, $4, $5, $6)",
            )?,
            by_time_and_levels: prepare(
                &mut tx,
                "SELECT value, level_set_id, part FROM measurements WHERE characteristic_id = $1 \
                 AND ts_ms = $2 AND level_set_id = $3 ORDER BY ts_ms, import_id, line",
            )?,
            by_time: prepare(
                &mut tx,
                "SELECT value, level_set_id, part FROM measurements WHERE characteristic_id = $1 \
                 AND ts_ms = $2 ORDER BY ts_ms, import_id, line",
            )?,
            by_part: prepare(
                &mut tx,
                "SELECT value, level_set_id, part FROM measurements WHERE characteristic_id = $1 \
                 AND part = $2 ORDER BY ts_ms, import_id, line",
            )?,
            members: prepare(
                &mut tx,
                "SELECT factor_id, level_id FROM level_set_members WHERE level_set_id = $1",
            )?,
            buffer: Vec::new(),
            tx: &mut tx,
        };
        let (mut report, early_hash) =
            drive_import(&mut w, stream, options, early_file, on_rejection, |_, _| {})?;
        tx.commit()?;
        report.elapsed = clock.elapsed();
        report.cpu.early_hash = early_hash;
        Ok(report)
    }
}

impl ImportStore for PgStore {
    fn import_checking_early(
        &mut self,
        stream: BoxedStream<'_>,
        options: &ImportOptions,
        file: Option<&Path>,
        on_rejection: Option<RejectionSink<'_>>,
    ) -> Result<ImportReport> {
        let early_file = if options.force { None } else { file };
        self.import_pg(stream, options, early_file, on_rejection)
    }

    fn find_import_by_sha256(&self, sha256: &str) -> Result<Option<PriorImport>> {
        Ok(self
            .conn()
            .query_opt(PRIOR_SQL, &[&sha256])?
            .map(|r| prior(&r)))
    }

    fn rejected_rows(&self, import_id: i64) -> Result<Vec<Rejection>> {
        Ok(self
            .conn()
            .query(
                "SELECT line, column_name, reason, raw, measurements FROM rejected_rows \
                 WHERE import_id = $1 ORDER BY line, id",
                &[&import_id],
            )?
            .iter()
            .map(|r| Rejection {
                line: r.get::<_, i64>(0) as u64,
                column: r.get(1),
                reason: r.get(2),
                raw: r.get(3),
                measurements: r.get::<_, i64>(4) as u64,
            })
            .collect())
    }

    fn import_records(&self) -> Result<Vec<ImportRecord>> {
        Ok(self
            .conn()
            .query(crate::storage::imports::IMPORT_RECORDS_SQL, &[])?
            .iter()
            .map(|r| ImportRecord {
                id: r.get(0),
                file_name: r.get(1),
                path: r.get(2),
                sha256: r.get(3),
                layout: r.get(4),
                started_at: from_ms(r.get(5)),
                finished_at: from_ms(r.get(6)),
                measurements_read: r.get::<_, i64>(7) as u64,
                stored: r.get::<_, i64>(8) as u64,
                duplicates: r.get::<_, i64>(9) as u64,
                rejected: r.get::<_, i64>(10) as u64,
                rejected_not_kept: r.get::<_, i64>(11) as u64,
                forced: r.get::<_, i64>(12) != 0,
                first_measurement: r.get::<_, Option<i64>>(13).map(from_ms),
                last_measurement: r.get::<_, Option<i64>>(14).map(from_ms),
                undoes: r.get(15),
                undone_by: r.get(16),
            })
            .collect())
    }

    fn undo_import(&mut self, id: i64, now: DateTime<Utc>) -> Result<UndoReport> {
        let mut conn = self.conn();
        let mut tx = conn.transaction()?;
        lock_site_writes(&mut tx)?;
        let found = tx.query_opt(
            "SELECT file_name, path, layout, accepted - duplicates, undoes, ts_min_ms, ts_max_ms \
             FROM imports WHERE id = $1",
            &[&id],
        )?;
        let Some(found) = found else {
            let last: i64 = tx
                .query_one("SELECT COALESCE(MAX(id), 0) FROM imports", &[])?
                .get(0);
            return Err(undo_refusal(id, UndoRefusal::Unknown { last }));
        };
        let (file_name, path, layout): (String, String, String) =
            (found.get(0), found.get(1), found.get(2));
        let stored: i64 = found.get(3);
        if let Some(undoes) = found.get::<_, Option<i64>>(4) {
            return Err(undo_refusal(id, UndoRefusal::IsAnUndo { undoes }));
        }
        let (mut ts_min, mut ts_max): (Option<i64>, Option<i64>) = (found.get(5), found.get(6));
        if let Some(r) = tx.query_opt("SELECT id FROM imports WHERE undoes = $1", &[&id])? {
            return Err(undo_refusal(
                id,
                UndoRefusal::UndoneAlready {
                    file_name,
                    by: r.get(0),
                },
            ));
        }
        if ts_min.is_none() && stored > 0 {
            let r = tx.query_one(
                "SELECT MIN(ts_ms), MAX(ts_ms) FROM measurements WHERE import_id = $1",
                &[&id],
            )?;
            (ts_min, ts_max) = (r.get(0), r.get(1));
        }
        let mut removed = 0u64;
        if let (Some(lo), Some(hi)) = (ts_min, ts_max) {
            // Characteristic by characteristic along the primary key (characteristic, time),
            // not by a scan of the table.
            let ids: Vec<i64> = tx
                .query("SELECT id FROM characteristics ORDER BY id", &[])?
                .iter()
                .map(|r| r.get(0))
                .collect();
            let delete = tx.prepare(
                "DELETE FROM measurements WHERE characteristic_id = $1 \
                 AND ts_ms BETWEEN $2 AND $3 AND import_id = $4",
            )?;
            for c in ids {
                removed += tx.execute(&delete, &[&c, &lo, &hi, &id])?;
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
        let rejections = tx.execute("DELETE FROM rejected_rows WHERE import_id = $1", &[&id])?;
        let now_ms = now.timestamp_millis();
        let undo_id: i64 = tx
            .query_one(
                "INSERT INTO imports (file_name, path, sha256, layout, started_ms, finished_ms, \
                 rows_read, accepted, rejected, is_forced, duplicates, ts_min_ms, ts_max_ms, \
                 undoes) VALUES ($1, $2, '', $3, $4, $4, 0, 0, 0, 0, 0, $5, $6, $7) RETURNING id",
                &[&file_name, &path, &layout, &now_ms, &ts_min, &ts_max, &id],
            )?
            .get(0);
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Config;
    use crate::storage::maintenance::MaintenanceStore;
    use crate::storage::postgres::testing;
    use crate::storage::query::MeasurementStore;
    use crate::storage::Store;

    const CONFIG: &str = r#"
[plant]
name = "Invented test plant"
time_zone = "Europe/Berlin"

[[characteristic]]
name = "bore_diameter"
unit = "mm"
lsl = 41.98
usl = 42.02

[[characteristic]]
name = "flatness"
unit = "mm"

[[factor]]
name = "machine"

[[layout]]
name = "plain"
kind = "long"

[[layout]]
name = "cmm"
kind = "long"
timestamp = "measured"
part = "serial"
identity = ["characteristic", "part"]
"#;

    fn write(dir: &Path, name: &str, text: &str) -> std::path::PathBuf {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        path
    }

    fn import(
        store: &mut dyn ImportStore,
        config: &Config,
        path: &Path,
        layout: &str,
    ) -> Result<ImportReport> {
        let stream = crate::ingest::read_file(path, config, Some(layout))?;
        store.import_checking_early(
            stream,
            &ImportOptions {
                force: false,
                started_at: DateTime::from_timestamp_millis(1_764_000_000_000).unwrap(),
            },
            Some(path),
            None,
        )
    }

    /// What must agree between backends (times and durations aside).
    fn summary(r: &ImportReport) -> String {
        format!(
            "id {} read {} stored {} dup {} rejected {} records {} reasons {:?} first {:?} new {:?}",
            r.import_id,
            r.measurements_read,
            r.accepted,
            r.duplicates,
            r.rejected,
            r.rejection_records,
            r.reasons,
            r.first_rejections,
            r.new_characteristics
        )
    }

    fn records(s: &dyn ImportStore) -> Vec<String> {
        s.import_records()
            .unwrap()
            .iter()
            .map(|r| {
                format!(
                    "{} {} {} {} {} {} {} {:?} {:?} {:?} {:?}",
                    r.id,
                    r.file_name,
                    r.sha256,
                    r.stored,
                    r.duplicates,
                    r.rejected,
                    r.forced,
                    r.first_measurement,
                    r.last_measurement,
                    r.undoes,
                    r.undone_by
                )
            })
            .collect()
    }

    #[test]
    fn imports_overlaps_conflicts_parts_and_undo_agree_with_sqlite() {
        let Some(mut pg) = testing::store() else {
            return;
        };
        let dir = std::env::temp_dir().join(format!("samewise-pg-import-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let config = Config::from_toml_str(CONFIG, dir.join("plant.toml")).unwrap();
        let mut sqlite = Store::open_in_memory().unwrap();
        MaintenanceStore::sync_config(&mut sqlite, &config).unwrap();
        MaintenanceStore::sync_config(&mut *pg, &config).unwrap();

        // A day's export, with a bad value and a wild first flatness value (the origin is the
        // median of the first values, not the typo).
        let mut day1 = String::from("timestamp,characteristic,value,machine\n");
        for i in 0..40 {
            day1.push_str(&format!(
                "2026-11-30T07:{:02}:{:02}Z,bore_diameter,42.00{},M{}\n",
                i / 60,
                i % 60,
                i % 10,
                1 + i % 3
            ));
            let flat = if i == 0 {
                "10000123000000".to_string()
            } else {
                format!("0.01{}", i % 7)
            };
            day1.push_str(&format!(
                "2026-11-30T07:{:02}:{:02}Z,flatness,{flat},M{}\n",
                i / 60,
                i % 60,
                1 + i % 3
            ));
        }
        day1.push_str("2026-11-30T08:00:00Z,bore_diameter,4x.001,M1\n");
        // The next export overlaps the last ten rows of the first (one value changed at the
        // source: a conflict), then goes on.
        let mut day2 = String::from("timestamp,characteristic,value,machine\n");
        for i in 30..60 {
            let v = if i == 33 {
                "42.0099".to_string()
            } else {
                format!("42.00{}", i % 10)
            };
            day2.push_str(&format!(
                "2026-11-30T07:{:02}:{:02}Z,bore_diameter,{v},M{}\n",
                i / 60,
                i % 60,
                1 + i % 3
            ));
        }
        let mut cmm1 = String::from("measured,serial,characteristic,value,machine\n");
        let mut cmm2 = String::from("measured,serial,characteristic,value,machine\n");
        for i in 0..6 {
            cmm1.push_str(&format!(
                "2026-11-30T09:0{i}:00Z,SN{i:03},bore_diameter,42.01{i},M1\n"
            ));
            let v = if i == 2 {
                "42.0177".to_string()
            } else {
                format!("42.01{i}")
            };
            cmm2.push_str(&format!(
                "2026-11-30T15:00:00Z,SN{i:03},bore_diameter,{v},M2\n"
            ));
        }
        cmm2.push_str("2026-11-30T15:00:00Z,SN100,bore_diameter,42.001,M2\n");
        cmm2.push_str("2026-11-30T15:00:00Z,SN100,bore_diameter,42.001,M2\n");
        let files = [
            (write(&dir, "day1.csv", &day1), "plain"),
            (write(&dir, "day2.csv", &day2), "plain"),
            (write(&dir, "cmm1.csv", &cmm1), "cmm"),
            (write(&dir, "cmm2.csv", &cmm2), "cmm"),
        ];
        for (path, layout) in &files {
            let a = import(&mut sqlite, &config, path, layout).unwrap();
            let b = import(&mut *pg, &config, path, layout).unwrap();
            assert_eq!(summary(&a), summary(&b), "{}", path.display());
        }
        // The overlap: 10 rows seen before, one of them changed.
        let day2_report = pg.import_records().unwrap()[1].clone();
        assert_eq!((day2_report.duplicates, day2_report.rejected), (9, 1));
        // The same file again is refused on both, nothing written.
        for s in [&mut sqlite as &mut dyn ImportStore, &mut *pg] {
            let err = import(s, &config, &files[0].0, "plain")
                .unwrap_err()
                .to_string();
            assert!(
                err.contains("imported before") || err.contains("already"),
                "{err}"
            );
        }
        assert_eq!(records(&sqlite), records(&*pg));
        for id in 1..=4 {
            assert_eq!(
                ImportStore::rejected_rows(&sqlite, id).unwrap(),
                pg.rejected_rows(id).unwrap()
            );
        }
        let t0 = DateTime::from_timestamp_millis(1_764_000_000_000).unwrap();
        let t1 = t0 + chrono::Duration::days(10);
        let frame = pg.load_period(t0, t1, None).unwrap();
        assert_eq!(
            MeasurementStore::load_period(&sqlite, t0, t1, None).unwrap(),
            frame
        );
        assert_eq!(
            MeasurementStore::characteristics(&sqlite).unwrap(),
            pg.characteristics().unwrap()
        );
        assert!(pg.integrity_check().unwrap().is_ok());
        // Undo the second export on both: the same rows go, the same refusals after. (On
        // PostgreSQL a rolled-back import uses up its id, as identity values do, so the undo's
        // own id may be higher: ids increase, with gaps.)
        let now = t1;
        let (ua, ub) = (
            ImportStore::undo_import(&mut sqlite, 2, now).unwrap(),
            pg.undo_import(2, now).unwrap(),
        );
        assert_eq!(
            UndoReport {
                undo_id: 0,
                ..ua.clone()
            },
            UndoReport {
                undo_id: 0,
                ..ub.clone()
            }
        );
        assert!(ub.undo_id >= ua.undo_id);
        assert_eq!(ub.measurements_removed, 20);
        for (ida, idb) in [(2, 2), (ua.undo_id, ub.undo_id), (99, 99)] {
            let ea = ImportStore::undo_import(&mut sqlite, ida, now).unwrap_err();
            let eb = pg.undo_import(idb, now).unwrap_err();
            let same =
                |e: crate::Error, undo: i64| e.to_string().replace(&format!("#{undo}"), "#UNDO");
            assert_eq!(same(ea, ua.undo_id), same(eb, ub.undo_id));
        }
        let without_undo_row = |mut v: Vec<String>, undo: i64| {
            v.pop();
            v.iter()
                .map(|r| r.replace(&format!("Some({undo})"), "Some(UNDO)"))
                .collect::<Vec<_>>()
        };
        assert_eq!(
            without_undo_row(records(&sqlite), ua.undo_id),
            without_undo_row(records(&*pg), ub.undo_id)
        );
        assert_eq!(
            MeasurementStore::load_period(&sqlite, t0, t1, None).unwrap(),
            pg.load_period(t0, t1, None).unwrap()
        );
        assert!(pg.integrity_check().unwrap().is_ok());
        std::fs::remove_dir_all(&dir).ok();
    }

    /// Two sites import at once, each into its own schema, without waiting for each other;
    /// two imports into one site go one after the other, and both land whole.
    #[test]
    fn sites_import_side_by_side_and_one_site_one_at_a_time() {
        let (Some(mut north), Some(mut south)) = (testing::store(), testing::store()) else {
            return;
        };
        let dir = std::env::temp_dir().join(format!("samewise-pg-sites-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let config = Config::from_toml_str(CONFIG, dir.join("plant.toml")).unwrap();
        MaintenanceStore::sync_config(&mut *north, &config).unwrap();
        MaintenanceStore::sync_config(&mut *south, &config).unwrap();
        // 5,000 measurements a second apart from `hour` on.
        let file = |name: &str, hour: u32| {
            let mut text = String::from("timestamp,characteristic,value,machine\n");
            for i in 0..5000u32 {
                text.push_str(&format!(
                    "2026-11-30T{:02}:{:02}:{:02}Z,bore_diameter,42.00{},M{}\n",
                    hour + i / 3600,
                    i / 60 % 60,
                    i % 60,
                    i % 10,
                    1 + i % 3
                ));
            }
            write(&dir, name, &text)
        };
        let (a, b, c) = (file("a.csv", 4), file("b.csv", 10), file("c.csv", 16));
        // A third connection to the north site, for its second import.
        let mut north2 = PgStore::open(north.target()).unwrap();
        // While north's first import holds its site's write lock (its transaction is open),
        // south imports: it must not wait for north.
        let barrier = std::sync::Barrier::new(2);
        let done = std::sync::atomic::AtomicBool::new(false);
        let north_holder = PgStore::open(north.target()).unwrap();
        let (barrier, done) = (&barrier, &done);
        let south_waited = std::thread::scope(|scope| {
            let holder = scope.spawn(move || {
                let mut conn = north_holder.conn();
                let mut tx = conn.transaction().unwrap();
                lock_site_writes(&mut tx).unwrap();
                barrier.wait();
                // Hold the lock until south has finished; had south waited for it, this gives
                // up after 20 s and says so.
                let mut finished_meanwhile = false;
                for _ in 0..200 {
                    if done.load(std::sync::atomic::Ordering::SeqCst) {
                        finished_meanwhile = true;
                        break;
                    }
                    std::thread::sleep(std::time::Duration::from_millis(100));
                }
                tx.commit().unwrap();
                !finished_meanwhile
            });
            barrier.wait();
            let report = import(&mut *south, &config, &b, "plain").unwrap();
            done.store(true, std::sync::atomic::Ordering::SeqCst);
            assert_eq!(report.accepted, 5000);
            holder.join().unwrap()
        });
        assert!(
            !south_waited,
            "the south site's import waited for the north site's lock"
        );
        // One site: while another connection holds the north site's write lock, an import into
        // it waits; it goes on, whole, once the lock is released. Then a second import, whole.
        let holder = PgStore::open(north.target()).unwrap();
        let mut conn = holder.conn();
        let mut tx = conn.transaction().unwrap();
        lock_site_writes(&mut tx).unwrap();
        let finished = std::sync::atomic::AtomicBool::new(false);
        std::thread::scope(|scope| {
            let t = scope.spawn(|| {
                let report = import(&mut north2, &config, &c, "plain").unwrap();
                finished.store(true, std::sync::atomic::Ordering::SeqCst);
                report
            });
            std::thread::sleep(std::time::Duration::from_millis(1500));
            let waited = !finished.load(std::sync::atomic::Ordering::SeqCst);
            tx.commit().unwrap();
            let report = t.join().unwrap();
            assert!(waited, "the import did not wait for the site's write lock");
            assert_eq!(report.accepted, 5000);
        });
        drop(conn);
        let first = import(&mut *north, &config, &a, "plain").unwrap();
        assert_eq!(first.accepted, 5000);
        let records = north.import_records().unwrap();
        assert_eq!(records.len(), 2);
        assert!(records.iter().all(|r| r.stored == 5000));
        assert!(north.integrity_check().unwrap().is_ok());
        assert_eq!(south.import_records().unwrap().len(), 1);
        std::fs::remove_dir_all(&dir).ok();
    }
}
