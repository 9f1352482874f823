//! Status, integrity check and online backup of the plant database.

use std::path::Path;
use std::time::Duration;

use chrono::{DateTime, Utc};
use rusqlite::backup::Backup;
use rusqlite::Connection;

use crate::{Error, Result};

use super::import::PriorImport;
use super::master::SyncReport;
use super::{Store, WriterNote};
use crate::config::Config;

/// Stored rows of one characteristic.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CharacteristicStatus {
    /// Name.
    pub name: String,
    /// Measurements stored.
    pub n_obs: u64,
    /// First and last measurement instant.
    pub first: Option<DateTime<Utc>>,
    /// Last measurement instant.
    pub last: Option<DateTime<Utc>>,
    /// Whether the configuration lists it.
    pub is_configured: bool,
    /// Whether periodic checks include it.
    pub is_active: bool,
}

/// What `samewise status` shows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Status {
    /// `PRAGMA user_version`.
    pub schema_version: u32,
    /// Per characteristic.
    pub characteristics: Vec<CharacteristicStatus>,
    /// Imports recorded.
    pub n_imports: u64,
    /// The latest import.
    pub last_import: Option<PriorImport>,
    /// Rejected rows stored, over all imports.
    pub n_rejected: u64,
    /// Events recorded.
    pub n_events: u64,
    /// Checked periods that later data made stale (schedule or `by hand`, kind, label): the
    /// scheduler checks them again on its next pass.
    pub stale_periods: Vec<(String, String, String)>,
}

/// What `samewise db check` found.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct IntegrityReport {
    /// `PRAGMA integrity_check` messages (`["ok"]` when sound).
    pub integrity: Vec<String>,
    /// `PRAGMA foreign_key_check` violations, as `table rowid -> parent`.
    pub foreign_keys: Vec<String>,
    /// Other consistency problems: imports whose counts disagree with the stored rows, level
    /// sets without members.
    pub problems: Vec<String>,
    /// Row counts per table.
    pub counts: Vec<(String, u64)>,
}

impl IntegrityReport {
    /// Whether nothing is wrong.
    pub fn is_ok(&self) -> bool {
        self.integrity == ["ok"] && self.foreign_keys.is_empty() && self.problems.is_empty()
    }
}

/// Periods whose latest complete run began before a later data change inside them (the same
/// SQL on both backends).
pub(crate) const STALE_PERIODS_SQL: &str =
    "SELECT COALESCE(g.schedule, 'by hand'), g.kind, g.label FROM (
         SELECT schedule, period_kind AS kind, period_label AS label,
                MAX(max_import_id) AS seen, MIN(period_start_ms) AS start_ms,
                MAX(period_end_ms) AS end_ms
         FROM run WHERE status = 'complete'
         GROUP BY schedule, period_kind, period_label) g
     WHERE EXISTS (SELECT 1 FROM imports i
         WHERE i.id > g.seen AND (i.accepted > i.duplicates OR i.undoes IS NOT NULL)
           AND i.ts_min_ms < g.end_ms AND i.ts_max_ms >= g.start_ms)
     ORDER BY g.start_ms, g.kind";

/// Per import: id, file, measurements and rejections it recorded as stored (0 once undone),
/// and what is stored of it (the same SQL on both backends).
pub(crate) const IMPORT_COUNTS_SQL: &str = "SELECT i.id, i.file_name, \
   CASE WHEN EXISTS (SELECT 1 FROM imports u WHERE u.undoes = i.id) THEN 0 \
        ELSE i.accepted - i.duplicates END, \
   CASE WHEN EXISTS (SELECT 1 FROM imports u WHERE u.undoes = i.id) THEN 0 \
        ELSE i.rejected - i.rejected_not_kept END, \
   (SELECT count(*) FROM measurements m WHERE m.import_id = i.id), \
   (SELECT CAST(COALESCE(SUM(r.measurements), 0) AS BIGINT) FROM rejected_rows r \
    WHERE r.import_id = i.id) \
 FROM imports i ORDER BY i.id";

/// The problem an import's row of [`IMPORT_COUNTS_SQL`] shows, if any.
pub(crate) fn import_count_problem(
    (id, file, accepted, rejected, stored, stored_rejected): (i64, String, i64, i64, i64, i64),
) -> Option<String> {
    (accepted != stored || rejected != stored_rejected).then(|| {
        format!(
            "import #{id} ({file}) recorded {accepted} stored and {rejected} rejected, \
             but {stored} measurements and {stored_rejected} rejected rows are stored"
        )
    })
}

/// The tables `db check` counts, in order.
pub(crate) const COUNTED_TABLES: [&str; 8] = [
    "characteristics",
    "factors",
    "levels",
    "level_sets",
    "imports",
    "measurements",
    "rejected_rows",
    "events",
];

/// Level sets without members while factors exist (the same SQL on both backends).
pub(crate) const EMPTY_SETS_SQL: &str =
    "SELECT count(*) FROM level_sets s WHERE (SELECT count(*) FROM factors) > 0 \
     AND NOT EXISTS (SELECT 1 FROM level_set_members m WHERE m.level_set_id = s.id)";

pub(crate) use super::columns::from_ms;

fn count(conn: &Connection, sql: &str) -> Result<u64> {
    Ok(conn.query_row(sql, [], |r| r.get::<_, i64>(0))? as u64)
}

/// Status, staleness, integrity, backup, schema and the plant configuration's master data:
/// what a second backend implements.
pub trait MaintenanceStore {
    /// Row counts and time range per characteristic, last import, rejected rows, schema
    /// version; zeros and empty ranges for a new database.
    fn status(&self) -> Result<Status>;
    /// Periods whose latest complete run began before an import that stored measurements inside
    /// them or an undo that removed some: (schedule or "by hand", period kind, label), oldest
    /// period first; empty when none is stale.
    fn stale_periods(&self) -> Result<Vec<(String, String, String)>>;
    /// A full consistency check (storage structure, references, counts against the import
    /// records); reads only.
    fn integrity_check(&self) -> Result<IntegrityReport>;
    /// A consistent copy (one snapshot) of the whole database at `dest`, safe while others read
    /// and write; `dest` must not exist.
    fn backup(&self, dest: &Path) -> Result<()>;
    /// The schema version of the database: how many of samewise's numbered migrations it has
    /// (a database at a later version than this build knows is refused when it is opened).
    fn schema_version(&self) -> Result<u32>;
    /// Brings characteristics, factors and levels in step with `config` in one transaction
    /// (adds, updates, deactivates; never deletes stored data); reports what changed.
    fn sync_config(&mut self, config: &Config) -> Result<SyncReport>;
    /// The database file, when the backend is a local file (`None` in memory or on a server):
    /// shown to the user and used for the writer note.
    fn path(&self) -> Option<&Path>;
    /// Marks a long write (an import) so that a writer that gives up waiting can name it; the
    /// mark lasts until the returned note is dropped. `None` when the backend needs none.
    fn note_writer(&self, what: &str, started: DateTime<Utc>) -> Option<WriterNote>;
}

impl MaintenanceStore for Store {
    fn status(&self) -> Result<Status> {
        let mut stmt = self.conn.prepare(
            "SELECT c.name, c.is_configured, c.is_active, \
               (SELECT count(*) FROM measurements m WHERE m.characteristic_id = c.id), \
               (SELECT min(ts_ms) FROM measurements m WHERE m.characteristic_id = c.id), \
               (SELECT max(ts_ms) FROM measurements m WHERE m.characteristic_id = c.id) \
             FROM characteristics c ORDER BY c.id",
        )?;
        let characteristics = stmt
            .query_map([], |r| {
                Ok(CharacteristicStatus {
                    name: r.get(0)?,
                    is_configured: r.get(1)?,
                    is_active: r.get(2)?,
                    n_obs: r.get::<_, i64>(3)? as u64,
                    first: r.get::<_, Option<i64>>(4)?.map(from_ms),
                    last: r.get::<_, Option<i64>>(5)?.map(from_ms),
                })
            })?
            .collect::<rusqlite::Result<_>>()?;
        let last_import = self
            .conn
            .query_row(
                "SELECT id, file_name, started_ms, accepted FROM imports ORDER BY id DESC LIMIT 1",
                [],
                |r| {
                    Ok(PriorImport {
                        id: r.get(0)?,
                        file_name: r.get(1)?,
                        started_at: from_ms(r.get(2)?),
                        accepted: r.get::<_, i64>(3)? as u64,
                    })
                },
            )
            .ok();
        Ok(Status {
            schema_version: self.schema_version()?,
            characteristics,
            n_imports: count(&self.conn, "SELECT count(*) FROM imports")?,
            last_import,
            n_rejected: count(&self.conn, "SELECT count(*) FROM rejected_rows")?,
            n_events: count(&self.conn, "SELECT count(*) FROM events")?,
            stale_periods: self.stale_periods()?,
        })
    }
    fn stale_periods(&self) -> Result<Vec<(String, String, String)>> {
        let mut stmt = self.conn.prepare(STALE_PERIODS_SQL)?;
        let rows = stmt.query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn integrity_check(&self) -> Result<IntegrityReport> {
        let integrity: Vec<String> = self
            .conn
            .prepare("PRAGMA integrity_check")?
            .query_map([], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?;
        let foreign_keys: Vec<String> = self
            .conn
            .prepare("PRAGMA foreign_key_check")?
            .query_map([], |r| {
                Ok(format!(
                    "{} row {} -> {}",
                    r.get::<_, String>(0)?,
                    r.get::<_, Option<i64>>(1)?
                        .map_or("?".to_string(), |v| v.to_string()),
                    r.get::<_, String>(2)?
                ))
            })?
            .collect::<rusqlite::Result<_>>()?;
        let mut problems = Vec::new();
        let mut stmt = self.conn.prepare(IMPORT_COUNTS_SQL)?;
        let rows = stmt.query_map([], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, i64>(2)?,
                r.get::<_, i64>(3)?,
                r.get::<_, i64>(4)?,
                r.get::<_, i64>(5)?,
            ))
        })?;
        for row in rows {
            problems.extend(import_count_problem(row?));
        }
        let empty_sets = count(&self.conn, EMPTY_SETS_SQL)?;
        if empty_sets > 0 {
            problems.push(format!("{empty_sets} level sets have no members"));
        }
        // The analysis reads a level set's members from its key (one row per set); the key
        // must list exactly its member level ids, in factor order.
        let key_mismatch = count(
            &self.conn,
            "SELECT count(*) FROM level_sets s WHERE s.key IS NOT \
               (SELECT coalesce(group_concat(m.level_id, ',' ORDER BY m.factor_id), '') \
                FROM level_set_members m WHERE m.level_set_id = s.id)",
        )?;
        if key_mismatch > 0 {
            problems.push(format!(
                "{key_mismatch} level sets have a key that does not list their members"
            ));
        }
        let mut counts = Vec::new();
        for table in COUNTED_TABLES {
            counts.push((
                table.to_string(),
                count(&self.conn, &format!("SELECT count(*) FROM {table}"))?,
            ));
        }
        Ok(IntegrityReport {
            integrity,
            foreign_keys,
            problems,
            counts,
        })
    }
    fn backup(&self, dest: &Path) -> Result<()> {
        if dest.exists() {
            return Err(Error::Usage(format!(
                "{} already exists; choose a new file for the backup",
                dest.display()
            )));
        }
        // Written under a temporary name beside `dest` and renamed once it is whole and has
        // passed its integrity check: an interrupted backup leaves no file that looks like one.
        let temp = crate::output::temp_name(dest);
        let result = (|| -> Result<()> {
            let mut target = Connection::open(&temp)?;
            {
                let backup = Backup::new(&self.conn, &mut target)?;
                // Copy in steps so writers are not blocked for the whole copy; a write by another
                // connection restarts the copy, which the loop runs to completion.
                backup.run_to_completion(1024, Duration::from_millis(5), None)?;
            }
            let check: String = target.query_row("PRAGMA integrity_check", [], |r| r.get(0))?;
            if check != "ok" {
                return Err(Error::Database(format!(
                    "the backup {} failed its integrity check: {check}",
                    dest.display()
                )));
            }
            target.close().map_err(|(_, e)| Error::from(e))?;
            if dest.exists() {
                return Err(Error::Usage(format!(
                    "{} appeared while the backup was written; choose a new file for the backup",
                    dest.display()
                )));
            }
            std::fs::rename(&temp, dest).map_err(|e| Error::io(dest, e))
        })();
        if result.is_err() {
            let _ = std::fs::remove_file(&temp);
            let mut journal = temp.into_os_string();
            journal.push("-journal");
            let _ = std::fs::remove_file(journal);
        }
        result
    }
    fn schema_version(&self) -> Result<u32> {
        super::migrate::schema_version(&self.conn)
    }
    fn sync_config(&mut self, config: &Config) -> Result<SyncReport> {
        Store::sync_config(self, config)
    }
    fn path(&self) -> Option<&Path> {
        self.path.as_deref()
    }
    fn note_writer(&self, what: &str, started: DateTime<Utc>) -> Option<WriterNote> {
        WriterNote::write(self.path.as_deref(), what, started)
    }
}
