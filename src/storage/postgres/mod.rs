//! The PostgreSQL backend: a plant's data in one schema of a shared server database, for a
//! company's quality group with several sites.
//!
//! [`PgStore`] implements the same traits as the SQLite [`Store`](super::Store), with the same
//! tables, columns and meaning (`migrations/postgres/`), so the analysis, the reports and every
//! command work unchanged on either. One site is one schema: the connection's `search_path`
//! names it, every statement is unqualified, and IT's own tools (roles, grants, `pg_dump
//! --schema`) act per site.
//!
//! One `PgStore` is one connection. PostgreSQL's MVCC lets readers proceed while an import
//! writes; writers of one site serialise on row locks and on transaction-scoped advisory locks
//! where SQLite would take its single write lock (the import's master data, the run versions);
//! different sites never wait for each other.

mod events;
mod findings;
mod import;
mod maintenance;
mod master;
mod migrate;
mod query;
mod runs;
mod tls;

use std::cell::{RefCell, RefMut};

use postgres::{Client, NoTls};

use crate::config::ServerDatabase;
use crate::error::{StorageError, StorageErrorKind};
use crate::{Error, Result};

/// The PostgreSQL backend: one site's schema, over one connection.
pub struct PgStore {
    client: RefCell<Client>,
    target: ServerDatabase,
    /// Level set id -> level per configured factor, filled lazily by `load_period`.
    pub(crate) level_cache: RefCell<crate::storage::query::LevelCache>,
}

impl std::fmt::Debug for PgStore {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PgStore")
            .field("url", &self.target.display_url())
            .field("schema", &self.target.schema)
            .finish()
    }
}

impl PgStore {
    /// Connects to the server of `target`, creates the site's schema if it does not exist and
    /// applies pending migrations (under an advisory lock, so two processes never migrate the
    /// same schema at once). A schema that holds tables samewise did not make is refused untouched.
    pub fn open(target: &ServerDatabase) -> Result<PgStore> {
        let mut client = connect(target)?;
        migrate::migrate(&mut client, &target.schema)
            .map_err(|e| context(e, &format!("preparing schema {}", target.schema)))?;
        Ok(PgStore {
            client: RefCell::new(client),
            target: target.clone(),
            level_cache: Default::default(),
        })
    }

    /// A second connection to the same site for reading only: no migration, the site's schema
    /// on the search path, every transaction read-only by default.
    pub fn open_reader(target: &ServerDatabase) -> Result<PgStore> {
        let mut client = connect(target)?;
        client.batch_execute(&format!(
            "SET search_path TO {}; SET default_transaction_read_only = on",
            quote_ident(&target.schema)
        ))?;
        Ok(PgStore {
            client: RefCell::new(client),
            target: target.clone(),
            level_cache: Default::default(),
        })
    }

    /// Opens the site's schema, which `samewise init` must have created: a missing schema is an
    /// error that says so (nothing is created).
    pub fn open_existing(target: &ServerDatabase) -> Result<PgStore> {
        if !PgStore::exists(target)? {
            return Err(Error::Database(format!(
                "no samewise data for schema {} in the PostgreSQL database {}: run `samewise \
                 init` to create it from the plant configuration",
                target.schema,
                target.display_url()
            )));
        }
        PgStore::open(target)
    }

    /// Another site's schema on the same server, for reading only (a check that compares
    /// sites): the schema must exist, hold samewise's tables and be at the schema version this
    /// build reads, since nothing is migrated or written. Errors name the site and list the
    /// sites the database holds.
    pub fn open_site_reader(target: &ServerDatabase) -> Result<PgStore> {
        let mut client = connect(target)?;
        let version = migrate::schema_version_of(&mut client, &target.schema)?;
        let latest = migrate::latest_version();
        match version {
            None => {
                let sites = migrate::samewise_schemas(&mut client)?;
                return Err(Error::Usage(format!(
                    "site {}: no samewise data in that schema of the PostgreSQL database {} \
                     (the sites there: {}); a site's schema is its `site` name unless its \
                     configuration names another `schema`",
                    target.schema,
                    target.display_url(),
                    if sites.is_empty() {
                        "none".to_string()
                    } else {
                        sites.join(", ")
                    }
                )));
            }
            Some(v) if v < latest => {
                return Err(Error::Database(format!(
                    "site {}: its schema is at version {v}, this build reads version {latest}; \
                     run any samewise command of that site with this build first (it migrates \
                     its own schema), since a comparison of sites writes nothing",
                    target.schema
                )));
            }
            Some(v) if v > latest => {
                return Err(Error::Database(format!(
                    "site {}: its schema is at version {v}, written by a newer samewise (this \
                     build reads version {latest}): compare the sites with that newer samewise",
                    target.schema
                )));
            }
            Some(_) => {}
        }
        drop(client);
        PgStore::open_reader(target)
    }

    /// The sites (schemas holding samewise's tables) of the server database of `target`, in
    /// name order.
    pub fn sites(target: &ServerDatabase) -> Result<Vec<String>> {
        migrate::samewise_schemas(&mut connect(target)?)
    }

    /// Drops the site's schema with everything in it, if it exists and is samewise's (for a
    /// demo made afresh); a schema with tables samewise did not make is refused untouched.
    pub fn drop_site(target: &ServerDatabase) -> Result<()> {
        let mut client = connect(target)?;
        let mut tx = client.transaction()?;
        let found = migrate::schema_kind(&mut tx, &target.schema)?;
        match found {
            migrate::SchemaKind::Missing => {}
            migrate::SchemaKind::Samewise | migrate::SchemaKind::Empty => {
                tx.batch_execute(&format!(
                    "DROP SCHEMA {} CASCADE",
                    quote_ident(&target.schema)
                ))?;
            }
            migrate::SchemaKind::Foreign(n) => {
                return Err(Error::Database(format!(
                    "schema {} holds {n} tables that samewise did not make; nothing was dropped",
                    target.schema
                )))
            }
        }
        tx.commit()?;
        Ok(())
    }

    /// Whether the site's schema exists and holds samewise's tables (`samewise init` creates it
    /// otherwise).
    pub fn exists(target: &ServerDatabase) -> Result<bool> {
        let mut client = connect(target)?;
        Ok(migrate::schema_version_of(&mut client, &target.schema)?.is_some())
    }

    /// The connection, for one statement or one transaction. Never held across a call to another
    /// method of this store (a nested borrow would panic).
    pub(crate) fn conn(&self) -> RefMut<'_, Client> {
        self.client.borrow_mut()
    }

    /// The server database and schema this store works on.
    pub fn target(&self) -> &ServerDatabase {
        &self.target
    }

    /// The schema version of the site's schema.
    pub fn schema_version(&self) -> Result<u32> {
        migrate::schema_version_of(&mut self.conn(), &self.target.schema)?.ok_or_else(|| {
            Error::Database(format!(
                "schema {} has no samewise tables: run `samewise init`",
                self.target.schema
            ))
        })
    }
}

/// Connects to the server and sets the session up: the site's schema first on the search path,
/// UTC as the session time zone (times are stored as milliseconds; this only affects views).
/// TLS as the URL's `sslmode` and the `[database]` certificate keys say (see `tls.rs`).
fn connect(target: &ServerDatabase) -> Result<Client> {
    let (driver_url, tls) = tls::split_url(target)
        .map_err(|e| Error::Database(format!("database URL {}: {e}", target.display_url())))?;
    let mut config: postgres::Config = driver_url.parse().map_err(|e| {
        Error::Database(format!(
            "database URL {}: {e}; expected postgresql://user@host:port/dbname",
            target.display_url()
        ))
    })?;
    config.ssl_mode(tls.mode.driver_mode());
    if let Some(var) = &target.password_env {
        match std::env::var(var) {
            Ok(password) => {
                config.password(password);
            }
            Err(_) => {
                return Err(Error::Database(format!(
                    "the database password is to come from the environment variable {var}, which \
                     is not set: set it, or remove password_env from [database]"
                )))
            }
        }
    }
    if config.get_application_name().is_none() {
        config.application_name("samewise");
    }
    let connector = tls.connector().map_err(|e| {
        Error::Database(format!(
            "TLS for the PostgreSQL database {}: {e}",
            target.display_url()
        ))
    })?;
    let connected = match connector {
        Some(rustls) => config.connect(rustls),
        None => config.connect(NoTls),
    };
    let mut client =
        connected.map_err(|e| Error::Database(connect_message(target, &config, &tls, &e)))?;
    client
        .batch_execute("SET TIME ZONE 'UTC'")
        .map_err(|e| context(e.into(), "setting up the session"))?;
    Ok(client)
}

/// A connection failure in words: which server, database and user, what went wrong, and what to
/// check.
fn connect_message(
    target: &ServerDatabase,
    config: &postgres::Config,
    tls: &tls::TlsSettings,
    e: &postgres::Error,
) -> String {
    let hosts: Vec<String> = config
        .get_hosts()
        .iter()
        .zip(config.get_ports().iter().chain(std::iter::repeat(&5432)))
        .map(|(h, p)| match h {
            postgres::config::Host::Tcp(name) => format!("{name}:{p}"),
            postgres::config::Host::Unix(path) => format!("socket {}", path.display()),
        })
        .collect();
    let host = if hosts.is_empty() {
        "localhost:5432".to_string()
    } else {
        hosts.join(", ")
    };
    let dbname = config.get_dbname().unwrap_or("(the user's name)");
    let user = config.get_user().unwrap_or("(not given)");
    let (cause, hint) = match tls::explain(e, tls, &host) {
        Some(explained) => explained,
        None => {
            let cause = std::error::Error::source(e)
                .map(|s| s.to_string())
                .unwrap_or_else(|| e.to_string());
            let hint = if cause.contains("password") {
                "check the user's password (give it in the environment variable named by \
                 [database] password_env)"
            } else if cause.contains("does not exist") {
                "create the database (createdb) or fix the name in the URL"
            } else if cause.contains("certificate") {
                "give the client certificate the server asks for as [database] tls_cert and \
                 tls_key (or sslcert and sslkey in the URL), with sslmode=require or stricter"
            } else if cause.contains("SSL off") || cause.contains("no encryption") {
                "the server admits this user over TLS only (hostssl in pg_hba.conf): use \
                 sslmode=require, verify-ca or verify-full"
            } else {
                "check that the server runs, listens on that host and port, and admits this user \
                 from this host (pg_hba.conf)"
            };
            (cause, hint.to_string())
        }
    };
    format!(
        "could not connect to PostgreSQL at {host}, database {dbname}, user {user} \
         ({}, sslmode={}): {cause}; {hint}",
        target.display_url(),
        tls.mode.name()
    )
}

/// An error with what was being done.
pub(crate) fn context(e: Error, doing: &str) -> Error {
    match e {
        Error::Storage(mut s) => {
            s.message = format!("{doing}: {}", s.message);
            Error::Storage(s)
        }
        other => other,
    }
}

impl From<postgres::Error> for Error {
    fn from(e: postgres::Error) -> Self {
        use postgres::error::SqlState;
        let kind = match e.code() {
            Some(c)
                if *c == SqlState::LOCK_NOT_AVAILABLE || *c == SqlState::T_R_DEADLOCK_DETECTED =>
            {
                StorageErrorKind::Busy
            }
            _ => StorageErrorKind::Other,
        };
        let message = match e.as_db_error() {
            Some(db) => match db.detail() {
                Some(detail) => format!("{} ({detail})", db.message()),
                None => db.message().to_string(),
            },
            None => e.to_string(),
        };
        Error::Storage(StorageError { message, kind })
    }
}

/// `text` as PostgreSQL can store it: its `text` type cannot hold the NUL character, which a
/// rejected line of a damaged export may contain (SQLite keeps it), so each NUL is written as
/// the six characters `\u{0}`, as the import's messages show control characters.
pub(crate) fn text_without_nul(text: &str) -> std::borrow::Cow<'_, str> {
    if text.contains('\0') {
        std::borrow::Cow::Owned(text.replace('\0', "\\u{0}"))
    } else {
        std::borrow::Cow::Borrowed(text)
    }
}

/// Quotes an identifier for SQL (schema names are checked by the configuration; this is the
/// second line of defence).
pub(crate) fn quote_ident(name: &str) -> String {
    format!("\"{}\"", name.replace('"', "\"\""))
}

/// The environment variable that names a PostgreSQL server for the tests of this backend
/// (`postgresql://user@host:port/dbname`); each test works in a schema of its own, dropped
/// afterwards. Unset: the PostgreSQL tests are skipped (`.ci/run` sets it).
pub const TEST_SERVER_ENV: &str = "SAMEWISE_TEST_POSTGRES";

/// A store in a fresh schema of the test server, dropped with it.
#[cfg(test)]
pub(crate) mod testing {
    use super::*;

    /// A [`PgStore`] on a schema made for one test; the schema is dropped when this is.
    pub(crate) struct TestStore {
        pub(crate) store: Option<PgStore>,
        url: String,
        schema: String,
    }

    impl std::ops::Deref for TestStore {
        type Target = PgStore;
        fn deref(&self) -> &PgStore {
            self.store.as_ref().expect("store present until drop")
        }
    }

    impl std::ops::DerefMut for TestStore {
        fn deref_mut(&mut self) -> &mut PgStore {
            self.store.as_mut().expect("store present until drop")
        }
    }

    impl Drop for TestStore {
        fn drop(&mut self) {
            drop(self.store.take());
            let target = ServerDatabase {
                url: self.url.clone(),
                schema: self.schema.clone(),
                password_env: None,
                tls_ca: None,
                tls_cert: None,
                tls_key: None,
            };
            if let Ok(mut c) = connect(&target) {
                let _ = c.batch_execute(&format!(
                    "DROP SCHEMA IF EXISTS {} CASCADE",
                    quote_ident(&self.schema)
                ));
            }
        }
    }

    /// A store on a new schema of the server named by [`TEST_SERVER_ENV`], or `None` when the
    /// variable is unset (the test then returns early, saying so on stderr).
    pub(crate) fn store() -> Option<TestStore> {
        let Ok(url) = std::env::var(TEST_SERVER_ENV) else {
            assert!(
                std::env::var_os("CI").is_none(),
                "{TEST_SERVER_ENV} is not set in CI (.ci/run starts a server and sets it)"
            );
            eprintln!("{TEST_SERVER_ENV} is not set: PostgreSQL test skipped");
            return None;
        };
        use std::sync::atomic::{AtomicU32, Ordering};
        static NEXT: AtomicU32 = AtomicU32::new(0);
        let schema = format!(
            "t_{}_{}_{}",
            std::process::id(),
            NEXT.fetch_add(1, Ordering::Relaxed),
            chrono::Utc::now().timestamp_micros() % 1_000_000
        );
        let target = ServerDatabase {
            url: url.clone(),
            schema: schema.clone(),
            password_env: None,
            tls_ca: None,
            tls_cert: None,
            tls_key: None,
        };
        let store = PgStore::open(&target).expect("test server reachable");
        Some(TestStore {
            store: Some(store),
            url,
            schema,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_new_schema_is_migrated_to_the_latest_version_and_reopened_unchanged() {
        let Some(store) = testing::store() else {
            return;
        };
        assert_eq!(store.schema_version().unwrap(), migrate::latest_version());
        // Reopening applies nothing and keeps the version.
        let again = PgStore::open(store.target()).unwrap();
        assert_eq!(again.schema_version().unwrap(), migrate::latest_version());
        // The same tables as SQLite's at the same version (views aside).
        let tables: Vec<String> = store
            .conn()
            .query(
                "SELECT table_name::text FROM information_schema.tables \
                 WHERE table_schema = current_schema() AND table_type = 'BASE TABLE' \
                 AND table_name <> 'samewise_schema' ORDER BY 1",
                &[],
            )
            .unwrap()
            .iter()
            .map(|r| r.get(0))
            .collect();
        let sqlite = crate::storage::Store::open_in_memory().unwrap();
        let sqlite_tables = sqlite.table_names().unwrap();
        assert_eq!(tables, sqlite_tables);
    }

    #[test]
    fn a_schema_with_foreign_tables_is_refused_untouched() {
        let Some(store) = testing::store() else {
            return;
        };
        let other = format!("{}_x", store.target().schema);
        store
            .conn()
            .batch_execute(&format!(
                "CREATE SCHEMA {other}; CREATE TABLE {other}.orders (id int)"
            ))
            .unwrap();
        let target = ServerDatabase {
            schema: other.clone(),
            ..store.target().clone()
        };
        let err = PgStore::open(&target).unwrap_err().to_string();
        store
            .conn()
            .batch_execute(&format!("DROP SCHEMA {other} CASCADE"))
            .unwrap();
        assert!(err.contains("did not make"), "{err}");
    }

    #[test]
    fn a_connection_failure_names_host_database_and_user() {
        let target = ServerDatabase {
            url: "postgresql://quality@127.0.0.1:1/plants?connect_timeout=2".to_string(),
            schema: "north".to_string(),
            password_env: None,
            tls_ca: None,
            tls_cert: None,
            tls_key: None,
        };
        let err = PgStore::open(&target).unwrap_err().to_string();
        assert!(err.contains("127.0.0.1:1"), "{err}");
        assert!(err.contains("database plants"), "{err}");
        assert!(err.contains("user quality"), "{err}");
    }

    #[test]
    fn a_password_in_the_url_never_reaches_a_message() {
        assert_eq!(
            crate::config::redact_url("postgresql://q:s3cret@db:5432/plants"),
            "postgresql://q:***@db:5432/plants"
        );
        assert_eq!(
            crate::config::redact_url("postgresql://q@db/plants"),
            "postgresql://q@db/plants"
        );
    }
}
