//! The plant database behind traits, and its SQLite implementation.
//!
//! The rest of samewise reaches the store only through the traits of its areas, gathered in
//! [`PlantStore`], and opens it with [`open`], [`create`] or [`open_or_create`] (the backend
//! for a configuration; today always SQLite). A second backend (a server database) implements
//! these traits; nothing outside this module names a backend:
//! - [`MeasurementStore`] (`query`): characteristics, factors, counts and the analysis read path
//!   ([`MeasurementStore::load_period`], columnar and in one pass), a second reader;
//! - [`RunStore`] (`runs`): run history, versions and leases;
//! - [`ImportStore`] (`import`): one transaction per file, every row stored or rejected; the
//!   import records and undo;
//! - [`EventStore`] (`events`): process changes and their audit trail;
//! - [`FindingStore`] (`findings`): findings, their notes, the flag history, the alert log;
//! - [`MaintenanceStore`] (`maintenance`, `master`): status, staleness, integrity check,
//!   backup, schema version, and the master data kept in step with the plant configuration.
//!
//! [`Store`] is the SQLite implementation: all SQL of samewise is in this module, and no SQLite
//! type appears in a public signature. [`migrate`] holds the numbered files of `migrations/`,
//! embedded and applied in order. [`PgStore`] (`postgres`) is the PostgreSQL implementation.
//! The wide row mappings (a test result, a group, a pair, a run, a finding, an event to their
//! columns and back) are written once in `columns` and used by both backends; the contract
//! tests (`contract`) run the same checks of each trait on both.
//!
//! Values are stored as `f64` offsets from an exact decimal origin per characteristic (its
//! target or the middle of its limits when configured, else the median of its first 31 imported
//! values: no single value, a typo, fixes it), so data such as 1000000000000.4 and
//! 1000000000000.3 keep every digit; see `migrations/0001_initial.sql`.

mod columns;
#[cfg(test)]
mod contract;
mod events;
mod findings;
mod import;
mod imports;
mod maintenance;
mod master;
pub mod migrate;
pub mod postgres;
mod query;
pub mod runs;

pub use events::{Event, EventChange, EventEdit, EventStore, NewEvent};
pub use findings::{AlertRecord, FindingStore, FlagHistoryRow};
pub use import::{
    BoxedStream, ImportCpu, ImportOptions, ImportReport, ImportStore, PriorImport, RejectionSink,
    MAX_KEPT_REJECTIONS,
};
pub use imports::{ImportRecord, UndoReport};
pub use maintenance::{CharacteristicStatus, IntegrityReport, MaintenanceStore, Status};
pub use master::{StoredCharacteristic, StoredFactor, SyncReport};
pub use postgres::PgStore;
pub use query::{
    exact_value, CharacteristicFrame, FactorLevels, MeasurementStore, PeriodFrame, ReaderOpener,
    NO_SUBGROUP,
};
pub use runs::RunStore;

use std::path::{Path, PathBuf};
use std::time::Duration;

use rusqlite::{Connection, OpenFlags};

use crate::config::Config;
use crate::{Error, Result};

/// The whole plant database as samewise uses it: every area's trait. A backend implements the
/// six traits and is a `PlantStore` by the blanket implementation below. `Send` so that a
/// command may hand its store to another thread (one thread at a time uses it).
pub trait PlantStore:
    MeasurementStore + RunStore + ImportStore + EventStore + FindingStore + MaintenanceStore + Send
{
}

impl<T> PlantStore for T where
    T: MeasurementStore
        + RunStore
        + ImportStore
        + EventStore
        + FindingStore
        + MaintenanceStore
        + Send
{
}

/// An opened plant database, whatever its backend.
pub type BoxedStore = Box<dyn PlantStore>;

/// Opens the existing plant database of `config`, applying pending migrations: the SQLite file
/// at `plant.database` ([`Store::open`]), or the site's schema on the PostgreSQL server of
/// `plant.server` ([`PgStore::open_existing`]). A missing database is an error that suggests
/// `samewise init`.
pub fn open(config: &Config) -> Result<Box<dyn PlantStore>> {
    match &config.plant.server {
        Some(server) => Ok(Box::new(PgStore::open_existing(server)?)),
        None => Ok(Box::new(Store::open(&config.plant.database)?)),
    }
}

/// Opens the plant database of `config`, creating it if it does not exist (a file, or the
/// site's schema), and applies pending migrations; the master data is not touched (see
/// [`create`]).
pub fn open_or_create(config: &Config) -> Result<Box<dyn PlantStore>> {
    match &config.plant.server {
        Some(server) => Ok(Box::new(PgStore::open(server)?)),
        None => Ok(Box::new(Store::open_or_create(&config.plant.database)?)),
    }
}

/// Creates the plant database of `config` (or opens it if it exists), applies pending
/// migrations and brings characteristics and factors in step with the configuration.
pub fn create(config: &Config) -> Result<Box<dyn PlantStore>> {
    let mut store = open_or_create(config)?;
    store.sync_config(config)?;
    Ok(store)
}

/// Removes the plant database of `config` so that it can be created afresh (the demo does
/// this): the SQLite file with its `-wal` and `-shm`, or the site's schema on the server. A
/// schema that holds tables samewise did not make is refused untouched.
pub fn discard(config: &Config) -> Result<()> {
    if let Some(server) = &config.plant.server {
        return PgStore::drop_site(server);
    }
    for suffix in ["", "-wal", "-shm"] {
        let mut name = config.plant.database.clone().into_os_string();
        name.push(suffix);
        let path = PathBuf::from(name);
        if path.exists() {
            std::fs::remove_file(&path).map_err(|e| Error::io(&path, e))?;
        }
    }
    Ok(())
}

/// Another site of the same server database, opened for reading only, for a check that
/// compares sites: `site` names its schema on the server of `config` (its `site` name unless
/// its configuration names another schema). Sites share a database only on PostgreSQL, so an
/// SQLite plant gets an error that says so.
pub fn open_site(config: &Config, site: &str) -> Result<Box<dyn MeasurementStore + Send>> {
    let server = shared_server(config)?;
    let target = crate::config::ServerDatabase {
        schema: site.to_string(),
        ..server.clone()
    };
    Ok(Box::new(PgStore::open_site_reader(&target)?))
}

/// The sites (schemas holding samewise's data) of the server database of `config`, in name
/// order; an error for an SQLite plant, as [`open_site`].
pub fn sites(config: &Config) -> Result<Vec<String>> {
    PgStore::sites(shared_server(config)?)
}

fn shared_server(config: &Config) -> Result<&crate::config::ServerDatabase> {
    config.plant.server.as_ref().ok_or_else(|| {
        Error::Usage(format!(
            "comparing sites needs their data in one PostgreSQL database: this plant's data is \
             the SQLite file {} (set `database = \"postgresql://...\"` and `site` in [plant] for \
             every site; docs/database.md)",
            config.plant.database.display()
        ))
    })
}

/// Where the plant database of `config` is, for messages: the file, or the server (password
/// hidden) and schema.
pub fn describe(config: &Config) -> String {
    match &config.plant.server {
        Some(server) => format!("schema {} on {}", server.schema, server.display_url()),
        None => config.plant.database.display().to_string(),
    }
}

/// A fresh, empty store in memory with every migration applied (for tests and dry runs); it
/// has no second reader ([`MeasurementStore::reader_opener`] is `None`).
pub fn open_in_memory() -> Result<Box<dyn PlantStore>> {
    Ok(Box::new(Store::open_in_memory()?))
}

/// Whether the plant database of `config` exists and holds data (`false` for a missing place or
/// an empty file, where `samewise init` creates the database).
pub fn exists(config: &Config) -> Result<bool> {
    if let Some(server) = &config.plant.server {
        return PgStore::exists(server);
    }
    let db = &config.plant.database;
    Ok(db.exists() && !Store::is_empty_file(db)?)
}

/// How long a connection waits for another process's lock before giving up (unless
/// `SAMEWISE_BUSY_TIMEOUT` says otherwise, see [`busy_timeout`]).
pub const BUSY_TIMEOUT: Duration = Duration::from_secs(60);

/// The environment variable that sets the busy timeout in seconds (e.g. `5` or `0.5`).
pub const BUSY_TIMEOUT_ENV: &str = "SAMEWISE_BUSY_TIMEOUT";

/// How long a writer waits for another process's write lock: `SAMEWISE_BUSY_TIMEOUT` seconds
/// when set to a number, else [`BUSY_TIMEOUT`].
pub fn busy_timeout() -> Duration {
    std::env::var(BUSY_TIMEOUT_ENV)
        .ok()
        .and_then(|v| v.trim().parse::<f64>().ok())
        .filter(|s| s.is_finite() && *s >= 0.0 && *s < 1e6)
        .map_or(BUSY_TIMEOUT, Duration::from_secs_f64)
}

/// The note beside the database (`<database>-writer`) naming the process in a long write
/// transaction (an import), so that a writer that gives up waiting can say what holds the
/// database. Written before the long transaction's work and removed after it; a note left by a
/// killed process is recognised by its process id.
#[derive(Debug)]
pub struct WriterNote {
    path: PathBuf,
    text: String,
}

/// The path of the writer note of `database`.
pub fn writer_note_path(database: &Path) -> PathBuf {
    let mut name = database.as_os_str().to_owned();
    name.push("-writer");
    PathBuf::from(name)
}

impl WriterNote {
    /// Writes the note (`what`, e.g. "import #12 of line-2026-11.csv"); `None` in memory or when
    /// the note cannot be written (it only serves messages).
    fn write(
        database: Option<&Path>,
        what: &str,
        started: chrono::DateTime<chrono::Utc>,
    ) -> Option<WriterNote> {
        let path = writer_note_path(database?);
        let text = format!(
            "{}\t{}\t{}\t{}\n",
            std::process::id(),
            crate::process::host_name(),
            started.timestamp_millis(),
            what.replace(['\t', '\n', '\r'], " ")
        );
        std::fs::write(&path, &text).ok()?;
        Some(WriterNote { path, text })
    }
}

impl Drop for WriterNote {
    fn drop(&mut self) {
        // Only our own note: another writer may have written its own since.
        if std::fs::read_to_string(&self.path).is_ok_and(|t| t == self.text) {
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

/// What holds `database`'s write lock, from its writer note: "import #12 of line-2026-11.csv,
/// started 14:03 UTC (process 4711 on host-a)"; `None` when there is no note or its process is
/// gone (then the holder is a short writer or another program).
pub fn describe_writer(database: &Path) -> Option<String> {
    let text = std::fs::read_to_string(writer_note_path(database)).ok()?;
    let mut parts = text.trim_end().splitn(4, '\t');
    let pid: u32 = parts.next()?.parse().ok()?;
    let host = parts.next()?;
    let started_ms: i64 = parts.next()?.parse().ok()?;
    let what = parts.next()?;
    if crate::process::is_gone(host, pid) {
        return None;
    }
    let started = chrono::DateTime::from_timestamp_millis(started_ms)?;
    Some(format!(
        "{what}, started {} (process {pid} on {host})",
        started.format("%Y-%m-%d %H:%M UTC")
    ))
}

/// Whether `err` is SQLite giving up on a lock another connection holds.
pub fn is_busy(err: &Error) -> bool {
    matches!(err, Error::Storage(e) if e.kind == crate::error::StorageErrorKind::Busy)
}

impl From<rusqlite::Error> for Error {
    fn from(e: rusqlite::Error) -> Self {
        use crate::error::{StorageError, StorageErrorKind};
        let kind = match &e {
            rusqlite::Error::SqliteFailure(code, _) => match code.code {
                rusqlite::ErrorCode::DatabaseBusy | rusqlite::ErrorCode::DatabaseLocked => {
                    StorageErrorKind::Busy
                }
                rusqlite::ErrorCode::NotADatabase => StorageErrorKind::NotADatabase,
                _ => StorageErrorKind::Other,
            },
            _ => StorageErrorKind::Other,
        };
        Error::Storage(StorageError {
            message: e.to_string(),
            kind,
        })
    }
}

/// The message for a writer that gave up waiting for `database`: what holds it (see
/// [`describe_writer`]), how long it waited and what to do.
pub fn busy_message(database: &Path) -> String {
    let holder = describe_writer(database).unwrap_or_else(|| {
        "another process (no samewise import is writing: a check, a schedule, `db backup` or \
         another program)"
            .to_string()
    });
    format!(
        "{} is busy: {holder} holds its write lock; gave up after waiting {} s; nothing was \
         changed by this command: run it again when that has finished",
        database.display(),
        busy_timeout().as_secs_f64()
    )
}

/// Page size of a new database file, in bytes.
pub const PAGE_SIZE: i64 = 16 * 1024;

/// Page cache per connection, in KiB (SQLite's negative `cache_size`).
const CACHE_KIB: i64 = 64 * 1024;

/// The SQLite backend: the plant database in one file (or in memory).
///
/// It implements every trait of [`PlantStore`], and the trait implementations are the one way
/// to its data (its own methods are the constructors and helpers private to `storage`). Code
/// outside `storage`, the tests included, never names it: it holds a `dyn PlantStore` from
/// [`open`] and its siblings (`tests/architecture.rs` checks this for `src/`).
///
/// One `Store` is one SQLite connection. Several processes may use the same database file at the
/// same time: WAL mode lets readers proceed while an import writes, and a busy timeout makes a
/// second writer wait rather than fail.
pub struct Store {
    conn: Connection,
    path: Option<PathBuf>,
    /// Level set id -> level index per configured factor, filled lazily by `load_period`.
    pub(crate) level_cache: std::cell::RefCell<query::LevelCache>,
}

impl std::fmt::Debug for Store {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Store").field("path", &self.path).finish()
    }
}

impl Store {
    /// Opens an existing database and applies pending migrations.
    ///
    /// A missing file is an error that suggests `samewise init` (which calls [`Store::create`]);
    /// a database written by a newer samewise is refused without being changed.
    pub fn open(path: impl AsRef<Path>) -> Result<Store> {
        let path = path.as_ref();
        if !path.exists() {
            return Err(Error::Database(format!(
                "no database at {}: run `samewise init` to create it from the plant configuration",
                path.display()
            )));
        }
        let flags = OpenFlags::SQLITE_OPEN_READ_WRITE
            | OpenFlags::SQLITE_OPEN_URI
            | OpenFlags::SQLITE_OPEN_NO_MUTEX;
        let empty_file = std::fs::metadata(path).is_ok_and(|m| m.is_file() && m.len() == 0);
        if empty_file {
            return Err(Error::Database(format!(
                "{} is an empty file (0 bytes), not a samewise database: if it is an interrupted \
                 copy, restore the database from a backup; to start a new one, delete the file and \
                 run `samewise init`",
                path.display()
            )));
        }
        let conn = Connection::open_with_flags(path, flags)?;
        match identify(&conn, path)? {
            migrate::FileKind::Samewise => {}
            migrate::FileKind::Empty => {
                return Err(Error::Database(format!(
                    "{} is an SQLite file without any table, not a samewise database (an \
                     interrupted copy?): restore the database from a backup, or delete the file \
                     and run `samewise init`",
                    path.display()
                )))
            }
            migrate::FileKind::Foreign => return Err(foreign(path)),
        }
        Store::from_connection(conn, Some(path.to_path_buf()))
    }

    /// Opens the database at `path`, creating the file if it does not exist, and applies pending
    /// migrations. `samewise init` uses this, then [`MaintenanceStore::sync_config`].
    pub fn open_or_create(path: impl AsRef<Path>) -> Result<Store> {
        let path = path.as_ref();
        if let Some(parent) = path.parent() {
            if !parent.as_os_str().is_empty() && !parent.exists() {
                std::fs::create_dir_all(parent).map_err(|e| Error::io(parent, e))?;
            }
        }
        let conn = Connection::open(path)?;
        if identify(&conn, path)? == migrate::FileKind::Foreign {
            return Err(foreign(path));
        }
        Store::from_connection(conn, Some(path.to_path_buf()))
    }

    /// Whether `path` is a file with no database in it yet (0 bytes, or SQLite without any table
    /// and at schema version 0): `samewise init` may create the database there; every other
    /// command refuses it ([`Store::open`]).
    pub fn is_empty_file(path: impl AsRef<Path>) -> Result<bool> {
        let path = path.as_ref();
        match std::fs::metadata(path) {
            Ok(m) if m.is_file() && m.len() == 0 => return Ok(true),
            Ok(m) if m.is_file() => {}
            _ => return Ok(false),
        }
        let conn = Connection::open_with_flags(
            path,
            OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX,
        )?;
        Ok(identify(&conn, path)? == migrate::FileKind::Empty)
    }

    /// Opens `path` read-only, as the second reader of a database another connection of this
    /// process has opened (and migrated) already: no migration runs and nothing is written to
    /// the file, not even a setting. A database at another schema version than this build's is
    /// refused, since only the first connection may bring it up to date.
    pub(crate) fn open_reader(path: &Path) -> Result<Store> {
        let flags = OpenFlags::SQLITE_OPEN_READ_ONLY
            | OpenFlags::SQLITE_OPEN_URI
            | OpenFlags::SQLITE_OPEN_NO_MUTEX;
        let conn = Connection::open_with_flags(path, flags)?;
        if identify(&conn, path)? != migrate::FileKind::Samewise {
            return Err(Error::Database(format!(
                "{} is not a samewise database (opened as a second reader)",
                path.display()
            )));
        }
        let version = migrate::schema_version(&conn)?;
        if version != migrate::latest_version() {
            return Err(Error::Database(format!(
                "{} has schema version {version}, this samewise reads version {}: a second \
                 reader does not migrate; open the database once the usual way first",
                path.display(),
                migrate::latest_version()
            )));
        }
        // Per-connection settings only (none is stored in the file).
        conn.pragma_update(None, "cache_size", -CACHE_KIB)?;
        conn.pragma_update(None, "temp_store", "MEMORY")?;
        Ok(Store {
            conn,
            path: Some(path.to_path_buf()),
            level_cache: Default::default(),
        })
    }

    /// A fresh database in memory with every migration applied (for tests and dry runs).
    pub fn open_in_memory() -> Result<Store> {
        Store::from_connection(Connection::open_in_memory()?, None)
    }

    fn from_connection(mut conn: Connection, path: Option<PathBuf>) -> Result<Store> {
        let what = match &path {
            Some(p) => format!("database {}", p.display()),
            None => "in-memory database".to_string(),
        };
        configure(&conn, path.is_some()).map_err(|e| match e {
            rusqlite::Error::SqliteFailure(code, _)
                if code.code == rusqlite::ErrorCode::NotADatabase =>
            {
                Error::Database(format!("{what} is not a samewise database (not SQLite)"))
            }
            other => Error::from(other),
        })?;
        migrate::migrate(&mut conn, &what)?;
        migrate::mark_samewise(&conn)?;
        Ok(Store {
            conn,
            path,
            level_cache: Default::default(),
        })
    }

    /// The names of the tables (views aside), sorted: the schema compared across backends.
    #[cfg(test)]
    pub(crate) fn table_names(&self) -> Result<Vec<String>> {
        let mut stmt = self.conn.prepare(
            "SELECT name FROM sqlite_schema WHERE type = 'table' AND name NOT LIKE 'sqlite_%' \
             ORDER BY name",
        )?;
        let names = stmt
            .query_map([], |r| r.get(0))?
            .collect::<rusqlite::Result<Vec<String>>>()?;
        Ok(names)
    }
}

/// What `path` holds ([`migrate::file_kind`]), before anything is written to it; a file that is
/// not SQLite at all is an error saying so.
fn identify(conn: &Connection, path: &Path) -> Result<migrate::FileKind> {
    conn.busy_timeout(busy_timeout())?;
    migrate::file_kind(conn).map_err(|e| match e {
        Error::Storage(e) if e.kind == crate::error::StorageErrorKind::NotADatabase => {
            Error::Database(format!(
                "{} is not a samewise database (not an SQLite file): check `database` in the \
                 plant configuration",
                path.display()
            ))
        }
        other => other,
    })
}

fn foreign(path: &Path) -> Error {
    Error::Database(format!(
        "{} is another program's SQLite database, not a samewise database; nothing was changed: \
         point `database` in the plant configuration at a new file (or at the samewise database)",
        path.display()
    ))
}

/// Per-connection settings, set every time a connection opens (never inside a migration).
fn configure(conn: &Connection, is_file: bool) -> rusqlite::Result<()> {
    conn.busy_timeout(busy_timeout())?;
    // Takes effect only while the file is still empty (a new database; an existing one keeps
    // the page size it was created with). Larger pages cut the B-tree work of an import: fewer
    // page splits and fetches per measurement (measured: see docs/performance.md, "Import speed").
    conn.pragma_update(None, "page_size", PAGE_SIZE)?;
    if is_file {
        // journal_mode answers with the mode in force; WAL persists in the file once set.
        let mode: String = conn.query_row("PRAGMA journal_mode = WAL", [], |row| row.get(0))?;
        if !mode.eq_ignore_ascii_case("wal") {
            return Err(rusqlite::Error::SqliteFailure(
                rusqlite::ffi::Error::new(rusqlite::ffi::SQLITE_CANTOPEN),
                Some(format!(
                    "could not switch the database to WAL mode (got {mode})"
                )),
            ));
        }
        // Under WAL, NORMAL is durable against application crashes and keeps every commit
        // atomic; a power cut can lose at most the last commits, never corrupt the file.
        conn.pragma_update(None, "synchronous", "NORMAL")?;
        // A large import leaves a large WAL; truncate it back after checkpoints.
        conn.pragma_update(None, "journal_size_limit", 64 * 1024 * 1024)?;
    }
    conn.pragma_update(None, "foreign_keys", "ON")?;
    conn.pragma_update(None, "cache_size", -CACHE_KIB)?;
    conn.pragma_update(None, "temp_store", "MEMORY")?;
    Ok(())
}
