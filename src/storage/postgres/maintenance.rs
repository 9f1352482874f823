//! Status, staleness, consistency check and backup of a site's schema on PostgreSQL.

use std::path::Path;

use chrono::{DateTime, Utc};
use postgres::GenericClient;

use super::PgStore;
use crate::config::Config;
use crate::storage::import::PriorImport;
use crate::storage::maintenance::{
    from_ms, import_count_problem, CharacteristicStatus, IntegrityReport, MaintenanceStore, Status,
    COUNTED_TABLES, EMPTY_SETS_SQL, IMPORT_COUNTS_SQL, STALE_PERIODS_SQL,
};
use crate::storage::master::SyncReport;
use crate::storage::WriterNote;
use crate::{Error, Result};

fn count(c: &mut impl GenericClient, sql: &str) -> Result<u64> {
    Ok(c.query_one(sql, &[])?.get::<_, i64>(0) as u64)
}

/// The references between the tables, checked one by one: those of `measurements` and of the run
/// tables to `run`, which the schema does not declare (the import writes only ids it has just
/// read or created, a run only its own id), and the
/// foreign keys PostgreSQL enforces, checked again (a constraint dropped or disabled by hand
/// would let them break): (child table, column, parent table, parent column).
const REFERENCES: [(&str, &str, &str, &str); 12] = [
    ("levels", "factor_id", "factors", "id"),
    ("level_set_members", "level_set_id", "level_sets", "id"),
    ("level_set_members", "level_id", "levels", "id"),
    ("rejected_rows", "import_id", "imports", "id"),
    ("measurements", "characteristic_id", "characteristics", "id"),
    ("measurements", "import_id", "imports", "id"),
    ("measurements", "level_set_id", "level_sets", "id"),
    ("event_scopes", "event_id", "events", "id"),
    ("finding_note", "finding_id", "finding", "finding_id"),
    ("run_result", "run_id", "run", "run_id"),
    ("run_group", "run_id", "run", "run_id"),
    ("run_pair", "run_id", "run", "run_id"),
];

impl MaintenanceStore for PgStore {
    fn status(&self) -> Result<Status> {
        let schema_version = self.schema_version()?;
        let stale_periods = self.stale_periods()?;
        let mut conn = self.conn();
        let characteristics = conn
            .query(
                "SELECT c.name, c.is_configured, c.is_active, \
                   (SELECT count(*) FROM measurements m WHERE m.characteristic_id = c.id), \
                   (SELECT min(ts_ms) FROM measurements m WHERE m.characteristic_id = c.id), \
                   (SELECT max(ts_ms) FROM measurements m WHERE m.characteristic_id = c.id) \
                 FROM characteristics c ORDER BY c.id",
                &[],
            )?
            .iter()
            .map(|r| CharacteristicStatus {
                name: r.get(0),
                is_configured: r.get::<_, i64>(1) != 0,
                is_active: r.get::<_, i64>(2) != 0,
                n_obs: r.get::<_, i64>(3) as u64,
                first: r.get::<_, Option<i64>>(4).map(from_ms),
                last: r.get::<_, Option<i64>>(5).map(from_ms),
            })
            .collect();
        let last_import = conn
            .query_opt(
                "SELECT id, file_name, started_ms, accepted FROM imports ORDER BY id DESC LIMIT 1",
                &[],
            )?
            .map(|r| PriorImport {
                id: r.get(0),
                file_name: r.get(1),
                started_at: from_ms(r.get(2)),
                accepted: r.get::<_, i64>(3) as u64,
            });
        Ok(Status {
            schema_version,
            characteristics,
            n_imports: count(&mut *conn, "SELECT count(*) FROM imports")?,
            last_import,
            n_rejected: count(&mut *conn, "SELECT count(*) FROM rejected_rows")?,
            n_events: count(&mut *conn, "SELECT count(*) FROM events")?,
            stale_periods,
        })
    }

    fn stale_periods(&self) -> Result<Vec<(String, String, String)>> {
        Ok(self
            .conn()
            .query(STALE_PERIODS_SQL, &[])?
            .iter()
            .map(|r| (r.get(0), r.get(1), r.get(2)))
            .collect())
    }

    /// On PostgreSQL the server keeps its own storage sound (and data checksums, where the
    /// cluster has them, are checked as pages are read); this checks, in one snapshot, that the
    /// schema is samewise's at a version this build knows, every reference (again, although
    /// the server enforces them), the import counts and the level-set keys.
    fn integrity_check(&self) -> Result<IntegrityReport> {
        let version = self.schema_version()?;
        let mut conn = self.conn();
        let mut tx = conn
            .build_transaction()
            .isolation_level(postgres::IsolationLevel::RepeatableRead)
            .read_only(true)
            .start()?;
        let mut integrity = Vec::new();
        let known = super::migrate::latest_version();
        if version != known {
            integrity.push(format!(
                "schema {} is at version {version}; this samewise expects {known}",
                self.target.schema
            ));
        }
        let tables: Vec<String> = tx
            .query(
                "SELECT table_name::text FROM information_schema.tables \
                 WHERE table_schema = current_schema() AND table_type = 'BASE TABLE'",
                &[],
            )?
            .iter()
            .map(|r| r.get(0))
            .collect();
        let mut missing: Vec<&str> = Vec::new();
        for (child, _, parent, _) in REFERENCES {
            for t in [child, parent] {
                if !tables.iter().any(|x| x == t) && !missing.contains(&t) {
                    missing.push(t);
                    integrity.push(format!("table {t} is missing"));
                }
            }
        }
        if integrity.is_empty() {
            integrity.push("ok".to_string());
        }
        let mut foreign_keys = Vec::new();
        if integrity == ["ok"] {
            for (child, column, parent, key) in REFERENCES {
                let n = count(
                    &mut tx,
                    &format!(
                        "SELECT count(*) FROM {child} c WHERE NOT EXISTS \
                         (SELECT 1 FROM {parent} p WHERE p.{key} = c.{column})"
                    ),
                )?;
                if n > 0 {
                    foreign_keys.push(format!("{child}.{column}: {n} rows -> {parent}"));
                }
            }
        }
        let mut problems = Vec::new();
        for r in tx.query(IMPORT_COUNTS_SQL, &[])? {
            problems.extend(import_count_problem((
                r.get(0),
                r.get(1),
                r.get(2),
                r.get(3),
                r.get(4),
                r.get::<_, i64>(5),
            )));
        }
        let empty_sets = count(&mut tx, EMPTY_SETS_SQL)?;
        if empty_sets > 0 {
            problems.push(format!("{empty_sets} level sets have no members"));
        }
        let key_mismatch = count(
            &mut tx,
            "SELECT count(*) FROM level_sets s WHERE s.key IS DISTINCT FROM \
               (SELECT coalesce(string_agg(m.level_id::text, ',' ORDER BY m.factor_id), '') \
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
                count(&mut tx, &format!("SELECT count(*) FROM {table}"))?,
            ));
        }
        tx.commit()?;
        Ok(IntegrityReport {
            integrity,
            foreign_keys,
            problems,
            counts,
        })
    }

    /// A server database is backed up with PostgreSQL's own tool, which takes one consistent
    /// snapshot while others read and write: the error says the command for this site.
    fn backup(&self, dest: &Path) -> Result<()> {
        Err(Error::Usage(format!(
            "this plant's data is in schema {} of the PostgreSQL database {}; back it up with \
             PostgreSQL's own tool, which takes one consistent snapshot while samewise runs: \
             pg_dump --schema={} --format=custom --file={} \"{}\" (restore with pg_restore); \
             the site's IT may already back the whole database up",
            self.target.schema,
            self.target.display_url(),
            self.target.schema,
            dest.display(),
            self.target.display_url()
        )))
    }

    fn schema_version(&self) -> Result<u32> {
        PgStore::schema_version(self)
    }

    fn sync_config(&mut self, config: &Config) -> Result<SyncReport> {
        self.sync_config_pg(config)
    }

    fn path(&self) -> Option<&Path> {
        None
    }

    /// PostgreSQL names the holder of a lock itself (`pg_stat_activity`); no note is needed.
    fn note_writer(&self, _what: &str, _started: DateTime<Utc>) -> Option<WriterNote> {
        None
    }
}
