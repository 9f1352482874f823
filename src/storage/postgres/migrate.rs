//! Schema migrations for PostgreSQL: the numbered files of `migrations/postgres/`, embedded.
//!
//! The numbers are those of the SQLite migrations: `0010_initial.sql` creates in one step the
//! schema that SQLite reaches through 0001-0010, so both backends are at version 10 after it and
//! a later change gets the same number on both. The version applied is kept in the table
//! `samewise_schema`; migrating takes a transaction-scoped advisory lock on the schema name so
//! two processes opening a new site at once apply each migration once. A migration that has
//! shipped is never edited.

use postgres::Client;

use super::quote_ident;
use crate::{Error, Result};

/// One embedded migration: the schema version it brings the schema to, its file and its SQL.
#[derive(Debug, Clone, Copy)]
pub struct PgMigration {
    /// The schema version after it.
    pub version: u32,
    /// The file name in `migrations/postgres/`.
    pub name: &'static str,
    /// The SQL text.
    pub sql: &'static str,
}

/// Every PostgreSQL migration, in order.
pub const MIGRATIONS: &[PgMigration] = &[
    PgMigration {
        version: 10,
        name: "0010_initial.sql",
        sql: include_str!("../../../migrations/postgres/0010_initial.sql"),
    },
    PgMigration {
        version: 11,
        name: "0011_server_results.sql",
        sql: include_str!("../../../migrations/postgres/0011_server_results.sql"),
    },
];

/// The schema version the newest migration brings a schema to.
pub fn latest_version() -> u32 {
    MIGRATIONS.last().map_or(0, |m| m.version)
}

/// The samewise schema version of `schema`, `None` when the schema or its version table does not
/// exist.
pub fn schema_version_of(client: &mut Client, schema: &str) -> Result<Option<u32>> {
    let has_table: bool = client
        .query_one(
            "SELECT EXISTS (SELECT 1 FROM information_schema.tables \
             WHERE table_schema = $1 AND table_name = 'samewise_schema')",
            &[&schema],
        )?
        .get(0);
    if !has_table {
        return Ok(None);
    }
    let sql = format!(
        "SELECT MAX(version) FROM {}.samewise_schema",
        quote_ident(schema)
    );
    let v: Option<i64> = client.query_one(&sql, &[])?.get(0);
    Ok(Some(v.unwrap_or(0) as u32))
}

/// Every schema of the database that holds samewise's version table (one per site), in name
/// order.
pub fn samewise_schemas(client: &mut Client) -> Result<Vec<String>> {
    Ok(client
        .query(
            "SELECT table_schema::text FROM information_schema.tables \
             WHERE table_name = 'samewise_schema' ORDER BY table_schema COLLATE \"C\"",
            &[],
        )?
        .iter()
        .map(|r| r.get(0))
        .collect())
}

/// What a schema holds, before anything is written to it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SchemaKind {
    /// No such schema.
    Missing,
    /// A schema without tables.
    Empty,
    /// samewise's (its version table is there).
    Samewise,
    /// Another program's: this many tables, none of them samewise's version table.
    Foreign(i64),
}

/// What `schema` holds.
pub fn schema_kind(tx: &mut impl postgres::GenericClient, schema: &str) -> Result<SchemaKind> {
    let exists: bool = tx
        .query_one(
            "SELECT EXISTS (SELECT 1 FROM information_schema.schemata WHERE schema_name = $1)",
            &[&schema],
        )?
        .get(0);
    if !exists {
        return Ok(SchemaKind::Missing);
    }
    let tables: i64 = tx
        .query_one(
            "SELECT COUNT(*) FROM information_schema.tables WHERE table_schema = $1",
            &[&schema],
        )?
        .get(0);
    let ours: bool = tx
        .query_one(
            "SELECT EXISTS (SELECT 1 FROM information_schema.tables \
             WHERE table_schema = $1 AND table_name = 'samewise_schema')",
            &[&schema],
        )?
        .get(0);
    Ok(match (tables, ours) {
        (_, true) => SchemaKind::Samewise,
        (0, false) => SchemaKind::Empty,
        (n, false) => SchemaKind::Foreign(n),
    })
}

/// Creates `schema` if needed, sets the session's search path to it and applies the pending
/// migrations, each in its own transaction with the version recorded in it.
pub fn migrate(client: &mut Client, schema: &str) -> Result<()> {
    let q = quote_ident(schema);
    let mut tx = client.transaction()?;
    tx.execute(
        "SELECT pg_advisory_xact_lock(hashtext('samewise schema ' || $1))",
        &[&schema],
    )?;
    match schema_kind(&mut tx, schema)? {
        SchemaKind::Samewise | SchemaKind::Empty => {}
        SchemaKind::Foreign(tables) => {
            return Err(Error::Database(format!(
                "schema {schema} holds {tables} tables that samewise did not make; nothing was \
                 changed: choose another schema ([database] schema, or [plant] site)"
            )));
        }
        SchemaKind::Missing => tx.batch_execute(&format!("CREATE SCHEMA {q}"))?,
    }
    tx.batch_execute(&format!(
        "SET LOCAL search_path TO {q}; \
         CREATE TABLE IF NOT EXISTS samewise_schema ( \
             version    BIGINT PRIMARY KEY, \
             name       TEXT   NOT NULL, \
             applied_at TIMESTAMPTZ NOT NULL DEFAULT now())"
    ))?;
    let current: Option<i64> = tx
        .query_one("SELECT MAX(version) FROM samewise_schema", &[])?
        .get(0);
    let current = current.unwrap_or(0) as u32;
    if current > latest_version() {
        return Err(Error::Database(format!(
            "schema {schema} is at schema version {current}, written by a newer samewise (this \
             one knows up to {}); nothing was changed: use the newer samewise",
            latest_version()
        )));
    }
    for m in MIGRATIONS.iter().filter(|m| m.version > current) {
        tx.batch_execute(m.sql).map_err(|e| {
            // The server's own message (the driver's `Display` says only "db error").
            Error::Database(format!("migration {} failed: {}", m.name, Error::from(e)))
        })?;
        tx.execute(
            "INSERT INTO samewise_schema (version, name) VALUES ($1, $2)",
            &[&i64::from(m.version), &m.name],
        )?;
    }
    tx.commit()?;
    client.batch_execute(&format!("SET search_path TO {q}"))?;
    Ok(())
}
