//! Schema migrations: the numbered SQL files of `migrations/`, embedded in the binary.
//!
//! [`MIGRATIONS`] lists them in order. Opening a database applies the pending ones (those past
//! `PRAGMA user_version`) in one transaction and sets `user_version` to the number applied in
//! total, so a database is always at a whole schema version. A database whose `user_version` is
//! larger than this build knows was written by a newer samewise and is refused untouched.
//!
//! Adding a migration: create `migrations/NNNN_short_description.sql` with the next number and
//! append it to [`MIGRATIONS`]. A migration that has shipped is never edited or deleted.

use rusqlite::{Connection, TransactionBehavior};

use crate::{Error, Result};

/// One embedded migration: its file name and its SQL.
#[derive(Debug, Clone, Copy)]
pub struct Migration {
    /// The file name in `migrations/`, e.g. `0001_initial.sql`.
    pub name: &'static str,
    /// The SQL text.
    pub sql: &'static str,
}

/// Every migration, in the order it is applied. Entry `i` brings the schema to version `i + 1`.
pub const MIGRATIONS: &[Migration] = &[
    Migration {
        name: "0001_initial.sql",
        sql: include_str!("../../migrations/0001_initial.sql"),
    },
    Migration {
        name: "0002_runs.sql",
        sql: include_str!("../../migrations/0002_runs.sql"),
    },
    Migration {
        name: "0003_import_duplicates.sql",
        sql: include_str!("../../migrations/0003_import_duplicates.sql"),
    },
    Migration {
        name: "0004_stale_periods.sql",
        sql: include_str!("../../migrations/0004_stale_periods.sql"),
    },
    Migration {
        name: "0005_import_undo_rejections.sql",
        sql: include_str!("../../migrations/0005_import_undo_rejections.sql"),
    },
    Migration {
        name: "0006_findings.sql",
        sql: include_str!("../../migrations/0006_findings.sql"),
    },
    Migration {
        name: "0007_views.sql",
        sql: include_str!("../../migrations/0007_views.sql"),
    },
    Migration {
        name: "0008_event_history.sql",
        sql: include_str!("../../migrations/0008_event_history.sql"),
    },
    Migration {
        name: "0009_subgroups.sql",
        sql: include_str!("../../migrations/0009_subgroups.sql"),
    },
    Migration {
        name: "0010_component_intervals.sql",
        sql: include_str!("../../migrations/0010_component_intervals.sql"),
    },
    Migration {
        name: "0011_server_results.sql",
        sql: include_str!("../../migrations/0011_server_results.sql"),
    },
];

/// SQLite's `PRAGMA application_id` of a samewise database: "SMWS" in ASCII. Set when a database
/// is created and on the first open of a database made before it was set, so a samewise file is
/// known as such exactly.
pub const APPLICATION_ID: i32 = 0x534D_5753;

/// What an opened SQLite file holds, before anything is written to it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileKind {
    /// A samewise database (its application id, or from before the id: schema version and tables).
    Samewise,
    /// A file without any table and schema version 0: a new file, or an interrupted copy.
    Empty,
    /// Another program's database (its own application id, or tables samewise did not make).
    Foreign,
}

/// Tells a samewise database from an empty or another program's SQLite file (reads only).
pub(super) fn file_kind(conn: &Connection) -> Result<FileKind> {
    let app_id: i32 = conn.query_row("PRAGMA application_id", [], |r| r.get(0))?;
    if app_id == APPLICATION_ID {
        return Ok(FileKind::Samewise);
    }
    if app_id != 0 {
        return Ok(FileKind::Foreign);
    }
    let objects: i64 = conn.query_row("SELECT COUNT(*) FROM sqlite_master", [], |r| r.get(0))?;
    let version = schema_version(conn)?;
    if objects == 0 && version == 0 {
        return Ok(FileKind::Empty);
    }
    let ours: i64 = conn.query_row(
        "SELECT COUNT(*) FROM sqlite_master WHERE type = 'table' \
         AND name IN ('characteristics', 'imports', 'measurements', 'rejected_rows')",
        [],
        |r| r.get(0),
    )?;
    Ok(if version > 0 && ours == 4 {
        FileKind::Samewise
    } else {
        FileKind::Foreign
    })
}

/// Sets the samewise application id where it is not set yet (a new database, or one made before
/// the id existed). Call only on a file [`file_kind`] found to be samewise or empty.
pub(super) fn mark_samewise(conn: &Connection) -> Result<()> {
    let app_id: i32 = conn.query_row("PRAGMA application_id", [], |r| r.get(0))?;
    if app_id != APPLICATION_ID {
        conn.pragma_update(None, "application_id", APPLICATION_ID)?;
    }
    Ok(())
}

/// The schema version this build writes (the number of migrations).
pub fn latest_version() -> u32 {
    MIGRATIONS.len() as u32
}

/// Reads `PRAGMA user_version`.
pub(super) fn schema_version(conn: &Connection) -> Result<u32> {
    let version: i64 = conn.query_row("PRAGMA user_version", [], |row| row.get(0))?;
    Ok(version.max(0) as u32)
}

/// Applies every pending migration in one transaction; returns how many were applied.
///
/// `what` names the database in messages (its path, or "in-memory database").
pub(super) fn migrate(conn: &mut Connection, what: &str) -> Result<usize> {
    refuse_newer(schema_version(conn)?, what)?;
    if schema_version(conn)? == latest_version() {
        return Ok(0);
    }
    // IMMEDIATE takes the write lock first, so two processes opening a fresh database at the same
    // time do not both apply migration 1: the second one waits, then sees the new version.
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    let current = schema_version(&tx)?;
    refuse_newer(current, what)?;
    let pending = &MIGRATIONS[current as usize..];
    for migration in pending {
        tx.execute_batch(migration.sql).map_err(|e| {
            Error::Database(format!("{what}: migration {} failed: {e}", migration.name))
        })?;
    }
    tx.pragma_update(None, "user_version", latest_version())?;
    tx.commit()?;
    Ok(pending.len())
}

fn refuse_newer(version: u32, what: &str) -> Result<()> {
    if version > latest_version() {
        return Err(Error::Database(format!(
            "{what} has schema version {version}, but this samewise knows only up to version {}: \
             it was written by a newer samewise; use that version (this one changes nothing)",
            latest_version()
        )));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn samewise_empty_and_foreign_files_are_told_apart() {
        let conn = Connection::open_in_memory().unwrap();
        assert_eq!(file_kind(&conn).unwrap(), FileKind::Empty);
        // A samewise database from before the application id: schema version and tables.
        let mut conn = Connection::open_in_memory().unwrap();
        migrate(&mut conn, "test").unwrap();
        assert_eq!(file_kind(&conn).unwrap(), FileKind::Samewise);
        mark_samewise(&conn).unwrap();
        let id: i32 = conn
            .query_row("PRAGMA application_id", [], |r| r.get(0))
            .unwrap();
        assert_eq!(id, APPLICATION_ID);
        assert_eq!(file_kind(&conn).unwrap(), FileKind::Samewise);
        // Another program's tables, with or without a schema version; another application id.
        let conn = Connection::open_in_memory().unwrap();
        conn.execute_batch("CREATE TABLE measurements (x)").unwrap();
        assert_eq!(file_kind(&conn).unwrap(), FileKind::Foreign);
        conn.execute_batch("PRAGMA user_version = 2").unwrap();
        assert_eq!(file_kind(&conn).unwrap(), FileKind::Foreign);
        let conn = Connection::open_in_memory().unwrap();
        conn.execute_batch("PRAGMA application_id = 7").unwrap();
        assert_eq!(file_kind(&conn).unwrap(), FileKind::Foreign);
    }

    #[test]
    fn migration_names_are_numbered_in_order() {
        for (i, migration) in MIGRATIONS.iter().enumerate() {
            let number: usize = migration.name[..4].parse().expect("four-digit prefix");
            assert_eq!(number, i + 1, "{} is out of order", migration.name);
            assert!(migration.name.ends_with(".sql"));
        }
    }
}
