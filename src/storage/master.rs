//! Master data: characteristics, factors, levels and level sets, and keeping them in step with the
//! plant configuration ([`MaintenanceStore::sync_config`](super::MaintenanceStore::sync_config)).
//!
//! The configuration is the truth for what a characteristic's limits are and which factors exist;
//! the database keeps everything it ever stored. So `sync_config` adds and updates, but never
//! deletes: a characteristic or factor that left the configuration keeps its measurements and is
//! marked `is_configured = 0`. It never touches measurements, and it never changes a
//! characteristic's `origin` (stored values are offsets from it).

use std::collections::HashMap;

use rusqlite::{params, Connection, OptionalExtension, TransactionBehavior};

use crate::config::{CharacteristicConfig, Config, FactorConfig, FactorSource};
use crate::stats::decimal::Decimal;
use crate::{Error, Result};

use super::Store;

/// What [`MaintenanceStore::sync_config`](super::MaintenanceStore::sync_config) changed. Every list is sorted as the configuration lists it.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct SyncReport {
    /// Characteristics new in the database.
    pub characteristics_added: Vec<String>,
    /// Characteristics whose unit, limits, target, resolution or active flag changed.
    pub characteristics_updated: Vec<String>,
    /// Characteristics kept in the database (with their measurements) but not in the configuration.
    pub characteristics_not_configured: Vec<String>,
    /// Factors new in the database.
    pub factors_added: Vec<String>,
    /// Factors whose position or source changed.
    pub factors_updated: Vec<String>,
    /// Factors kept in the database but not in the configuration.
    pub factors_not_configured: Vec<String>,
}

impl SyncReport {
    /// Whether the database already matched the configuration.
    pub fn is_unchanged(&self) -> bool {
        self.characteristics_added.is_empty()
            && self.characteristics_updated.is_empty()
            && self.factors_added.is_empty()
            && self.factors_updated.is_empty()
    }
}

/// A characteristic as stored.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredCharacteristic {
    /// Row id.
    pub id: i64,
    /// Name, unit, limits, target, resolution and active flag.
    pub config: CharacteristicConfig,
    /// Whether the plant configuration lists it (false when added by `import --add-new`, or when
    /// it was removed from the configuration).
    pub is_configured: bool,
    /// The exact origin its values are stored relative to; `None` until a value is stored.
    pub origin: Option<Decimal>,
    /// The most decimal places of any stored value.
    pub decimals: u32,
}

/// A factor as stored.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredFactor {
    /// Row id.
    pub id: i64,
    /// Factor name.
    pub name: String,
    /// Whether the plant configuration lists it.
    pub is_configured: bool,
}

fn source_parts(source: &FactorSource) -> (&'static str, Option<&str>) {
    match source {
        FactorSource::Column(column) => ("column", Some(column.as_str())),
        FactorSource::DerivedShift => ("shift", None),
    }
}

pub(crate) fn parse_origin(text: Option<String>, name: &str) -> Result<Option<Decimal>> {
    match text {
        None => Ok(None),
        Some(t) => Decimal::parse(&t).map(Some).map_err(|e| {
            Error::Database(format!(
                "characteristic \"{name}\": stored origin is damaged ({e})"
            ))
        }),
    }
}

const CHARACTERISTIC_COLUMNS: &str =
    "id, name, unit, lsl, usl, target, resolution, is_active, is_configured, origin, decimals";

fn characteristic_from_row(
    row: &rusqlite::Row<'_>,
) -> rusqlite::Result<(StoredCharacteristic, Option<String>)> {
    Ok((
        StoredCharacteristic {
            id: row.get(0)?,
            config: CharacteristicConfig {
                name: row.get(1)?,
                unit: row.get(2)?,
                lsl: row.get(3)?,
                usl: row.get(4)?,
                target: row.get(5)?,
                resolution: row.get(6)?,
                is_active: row.get(7)?,
                plausible: None,
            },
            is_configured: row.get(8)?,
            origin: None,
            decimals: row.get::<_, i64>(10)?.max(0) as u32,
        },
        row.get(9)?,
    ))
}

/// Every stored characteristic, in id order.
pub(crate) fn load_characteristics(conn: &Connection) -> Result<Vec<StoredCharacteristic>> {
    let mut stmt = conn.prepare_cached(&format!(
        "SELECT {CHARACTERISTIC_COLUMNS} FROM characteristics ORDER BY id"
    ))?;
    let rows = stmt.query_map([], characteristic_from_row)?;
    let mut out = Vec::new();
    for row in rows {
        let (mut c, origin) = row?;
        c.origin = parse_origin(origin, &c.config.name)?;
        out.push(c);
    }
    Ok(out)
}

/// Every stored factor: the configured ones in configuration order, then the others by name.
pub(crate) fn load_factors(conn: &Connection) -> Result<Vec<StoredFactor>> {
    let mut stmt = conn.prepare_cached(
        "SELECT id, name, is_configured FROM factors ORDER BY is_configured DESC, position, name",
    )?;
    let rows = stmt.query_map([], |row| {
        Ok(StoredFactor {
            id: row.get(0)?,
            name: row.get(1)?,
            is_configured: row.get(2)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

impl Store {
    /// Creates the database at `path` (or opens it if it exists), applies pending migrations and
    /// brings its characteristics and factors in step with `config`.
    pub fn create(path: impl AsRef<std::path::Path>, config: &Config) -> Result<Store> {
        let mut store = Store::open_or_create(path)?;
        store.sync_config(config)?;
        Ok(store)
    }

    /// Adds the configuration's new characteristics and factors and updates changed ones (unit,
    /// limits, target, resolution, active flag; factor order and source), in one transaction.
    ///
    /// Never deletes and never touches measurements or origins; running it twice with the same
    /// configuration changes nothing the second time.
    pub(super) fn sync_config(&mut self, config: &Config) -> Result<SyncReport> {
        let mut report = SyncReport::default();
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        {
            let stored = load_characteristics(&tx)?;
            let by_name: HashMap<&str, &StoredCharacteristic> =
                stored.iter().map(|c| (c.config.name.as_str(), c)).collect();
            for c in &config.characteristics {
                match by_name.get(c.name.as_str()) {
                    None => {
                        tx.execute(
                            "INSERT INTO characteristics (name, unit, lsl, usl, target, resolution, is_active, is_configured) \
                             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, 1)",
                            params![c.name, c.unit, c.lsl, c.usl, c.target, c.resolution, c.is_active],
                        )?;
                        report.characteristics_added.push(c.name.clone());
                    }
                    // `plausible` is not stored (only the import reads it from the file).
                    Some(s)
                        if s.config
                            != (CharacteristicConfig {
                                plausible: None,
                                ..c.clone()
                            })
                            || !s.is_configured =>
                    {
                        tx.execute(
                            "UPDATE characteristics SET unit = ?2, lsl = ?3, usl = ?4, target = ?5, \
                             resolution = ?6, is_active = ?7, is_configured = 1 WHERE id = ?1",
                            params![s.id, c.unit, c.lsl, c.usl, c.target, c.resolution, c.is_active],
                        )?;
                        report.characteristics_updated.push(c.name.clone());
                    }
                    Some(_) => {}
                }
            }
            for s in &stored {
                if config.characteristic(&s.config.name).is_none() {
                    if s.is_configured {
                        tx.execute(
                            "UPDATE characteristics SET is_configured = 0 WHERE id = ?1",
                            [s.id],
                        )?;
                    }
                    report
                        .characteristics_not_configured
                        .push(s.config.name.clone());
                }
            }
            sync_factors(&tx, &config.factors, &mut report)?;
            create_measurement_view(&tx)?;
        }
        tx.commit()?;
        self.level_cache.borrow_mut().clear();
        Ok(report)
    }

    /// Every stored characteristic (configured or not), in the order they were added.
    pub(super) fn characteristics(&self) -> Result<Vec<StoredCharacteristic>> {
        load_characteristics(&self.conn)
    }

    /// Every stored factor: the configured ones in configuration order, then the others.
    pub(super) fn factors(&self) -> Result<Vec<StoredFactor>> {
        load_factors(&self.conn)
    }
}

/// (Re)creates the view `measurement_values` (docs/database.md): one row per stored
/// measurement with its time (UTC), characteristic, unit, value in units, import and line, part
/// id, and one column per configured factor holding its level. Column names are the factor
/// names, quoted (a factor named like a fixed column gets a `factor_` prefix).
pub(crate) fn create_measurement_view(tx: &Connection) -> Result<()> {
    const FIXED: [&str; 10] = [
        "ts_utc",
        "ts_ms",
        "characteristic",
        "unit",
        "value",
        "import_id",
        "line",
        "part",
        "subgroup",
        "level_set_id",
    ];
    let factors: Vec<(i64, String)> = tx
        .prepare("SELECT id, name FROM factors WHERE is_configured = 1 ORDER BY position")?
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    let quote = |name: &str| format!("\"{}\"", name.replace('"', "\"\""));
    let mut columns = String::new();
    for (id, name) in &factors {
        let column = if FIXED.contains(&name.as_str()) {
            format!("factor_{name}")
        } else {
            name.clone()
        };
        columns.push_str(&format!(
            ",\n       (SELECT l.name FROM level_set_members s JOIN levels l ON l.id = s.level_id \
             WHERE s.level_set_id = m.level_set_id AND s.factor_id = {id}) AS {}",
            quote(&column)
        ));
    }
    tx.execute_batch(&format!(
        "DROP VIEW IF EXISTS measurement_values;
         CREATE VIEW measurement_values AS
         SELECT strftime('%Y-%m-%dT%H:%M:%fZ', m.ts_ms / 1000.0, 'unixepoch') AS ts_utc,
                m.ts_ms, c.name AS characteristic, c.unit,
                CAST(c.origin AS REAL) + m.value AS value,
                m.import_id, m.line, m.part, m.subgroup, m.level_set_id{columns}
         FROM measurements m JOIN characteristics c ON c.id = m.characteristic_id;"
    ))?;
    Ok(())
}

fn sync_factors(tx: &Connection, factors: &[FactorConfig], report: &mut SyncReport) -> Result<()> {
    struct Row {
        id: i64,
        name: String,
        position: i64,
        source: String,
        source_column: Option<String>,
        is_configured: bool,
    }
    let stored: Vec<Row> = {
        let mut stmt = tx.prepare(
            "SELECT id, name, position, source, source_column, is_configured FROM factors",
        )?;
        let rows = stmt.query_map([], |r| {
            Ok(Row {
                id: r.get(0)?,
                name: r.get(1)?,
                position: r.get(2)?,
                source: r.get(3)?,
                source_column: r.get(4)?,
                is_configured: r.get(5)?,
            })
        })?;
        rows.collect::<rusqlite::Result<_>>()?
    };
    for (position, f) in factors.iter().enumerate() {
        let (source, column) = source_parts(&f.source);
        match stored.iter().find(|s| s.name == f.name) {
            None => {
                tx.execute(
                    "INSERT INTO factors (name, position, source, source_column, is_configured) \
                     VALUES (?1, ?2, ?3, ?4, 1)",
                    params![f.name, position as i64, source, column],
                )?;
                report.factors_added.push(f.name.clone());
            }
            Some(s) => {
                let is_same = s.position == position as i64
                    && s.source == source
                    && s.source_column.as_deref() == column
                    && s.is_configured;
                if !is_same {
                    tx.execute(
                        "UPDATE factors SET position = ?2, source = ?3, source_column = ?4, \
                         is_configured = 1 WHERE id = ?1",
                        params![s.id, position as i64, source, column],
                    )?;
                    report.factors_updated.push(f.name.clone());
                }
            }
        }
    }
    for s in &stored {
        if !factors.iter().any(|f| f.name == s.name) {
            if s.is_configured {
                tx.execute(
                    "UPDATE factors SET is_configured = 0, position = -1 WHERE id = ?1",
                    [s.id],
                )?;
            }
            report.factors_not_configured.push(s.name.clone());
        }
    }
    Ok(())
}

/// Finds or creates level sets during an import (one write transaction).
///
/// The hot path is one hash lookup of the row's level names; a new combination costs a few
/// queries once.
pub(crate) struct LevelSetWriter {
    /// Configured factor ids, in configuration order (the order of `Measurement::levels`).
    factor_ids: Vec<i64>,
    /// Per configured factor: level name -> level id.
    levels: Vec<HashMap<String, i64>>,
    /// Level sets created by this import.
    pub(crate) created: u64,
    /// Whether `level_sets` held any row when loaded: when it did not, every combination not in
    /// `by_names` is new, and the look-up by key can be skipped.
    had_sets: bool,
    /// Levels created since loading: a combination containing one cannot exist yet either.
    new_levels: std::collections::HashSet<i64>,
}

impl LevelSetWriter {
    pub(crate) fn load(conn: &Connection) -> Result<LevelSetWriter> {
        let factors: Vec<StoredFactor> = load_factors(conn)?
            .into_iter()
            .filter(|f| f.is_configured)
            .collect();
        let mut levels = Vec::with_capacity(factors.len());
        let mut stmt = conn.prepare_cached("SELECT name, id FROM levels WHERE factor_id = ?1")?;
        for f in &factors {
            let rows = stmt.query_map([f.id], |r| {
                Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?))
            })?;
            levels.push(rows.collect::<rusqlite::Result<HashMap<_, _>>>()?);
        }
        Ok(LevelSetWriter {
            factor_ids: factors.iter().map(|f| f.id).collect(),
            levels,
            created: 0,
            had_sets: conn
                .query_row("SELECT EXISTS (SELECT 1 FROM level_sets)", [], |r| r.get(0))?,
            new_levels: Default::default(),
        })
    }

    /// Configured factor ids, in configuration order.
    pub(crate) fn factor_ids(&self) -> &[i64] {
        &self.factor_ids
    }

    /// The level set id of a combination of levels (in configuration order), creating it if new.
    /// The caller asks once per distinct combination (the import interns them), so nothing is
    /// cached here: a second call with the same names in one import could create it twice.
    pub(crate) fn id_for(&mut self, conn: &Connection, names: &[String]) -> Result<i64> {
        self.resolve(conn, names)
    }

    fn resolve(&mut self, conn: &Connection, names: &[String]) -> Result<i64> {
        if names.len() != self.factor_ids.len() {
            return Err(Error::Database(format!(
                "a measurement has {} factor levels but the database has {} configured factors; \
                 run `samewise init` to bring the database in step with the configuration",
                names.len(),
                self.factor_ids.len()
            )));
        }
        let mut members: Vec<(i64, i64)> = Vec::with_capacity(names.len());
        for (f, name) in names.iter().enumerate() {
            let level_id = match self.levels[f].get(name) {
                Some(&id) => id,
                None => {
                    conn.prepare_cached("INSERT INTO levels (factor_id, name) VALUES (?1, ?2)")?
                        .execute(params![self.factor_ids[f], name])?;
                    let id = conn.last_insert_rowid();
                    self.levels[f].insert(name.clone(), id);
                    self.new_levels.insert(id);
                    id
                }
            };
            members.push((self.factor_ids[f], level_id));
        }
        members.sort_unstable();
        let key = level_set_key(&members);
        let may_exist = self.had_sets && !members.iter().any(|(_, l)| self.new_levels.contains(l));
        let existing: Option<i64> = if may_exist {
            conn.prepare_cached("SELECT id FROM level_sets WHERE key = ?1")?
                .query_row([&key], |r| r.get(0))
                .optional()?
        } else {
            None
        };
        let id = match existing {
            Some(id) => id,
            None => {
                conn.prepare_cached("INSERT INTO level_sets (key) VALUES (?1)")?
                    .execute([&key])?;
                let id = conn.last_insert_rowid();
                let mut insert = conn.prepare_cached(
                    "INSERT INTO level_set_members (level_set_id, factor_id, level_id) VALUES (?1, ?2, ?3)",
                )?;
                insert.raw_bind_parameter(1, id)?;
                for (factor_id, level_id) in &members {
                    insert.raw_bind_parameter(2, factor_id)?;
                    insert.raw_bind_parameter(3, level_id)?;
                    insert.raw_execute()?;
                }
                self.created += 1;
                id
            }
        };
        Ok(id)
    }
}

/// The `level_sets.key` of a combination: member level ids in factor-id order, comma-separated.
/// (`samewise db check` rebuilds it from `level_set_members` with the same order and separator.)
fn level_set_key(members: &[(i64, i64)]) -> String {
    let ids: Vec<String> = members.iter().map(|(_, level)| level.to_string()).collect();
    ids.join(",")
}

/// The member level ids a `level_sets.key` lists ([`level_set_key`]), in order; `None` for a
/// part that is not an id.
pub(crate) fn level_set_key_ids(key: &str) -> impl Iterator<Item = Option<i64>> + '_ {
    key.split(',')
        .filter(|part| !part.is_empty())
        .map(|part| part.parse().ok())
}

impl Store {
    /// Levels of one factor that differ only in case or surrounding blanks (`imm1`, `IMM1`):
    /// (factor, the levels), for a warning that they are counted as different groups.
    pub(super) fn level_case_collisions(&self) -> Result<Vec<(String, Vec<String>)>> {
        let mut stmt = self.conn.prepare(
            "SELECT f.name, l.name FROM levels l JOIN factors f ON f.id = l.factor_id \
             ORDER BY f.position, l.name",
        )?;
        let rows: Vec<(String, String)> = stmt
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<_>>()?;
        let mut groups: Vec<((String, String), Vec<String>)> = Vec::new();
        for (factor, level) in rows {
            let key = (factor, level.trim().to_lowercase());
            match groups.iter_mut().find(|(k, _)| *k == key) {
                Some((_, v)) => v.push(level),
                None => groups.push((key, vec![level])),
            }
        }
        Ok(groups
            .into_iter()
            .filter(|(_, v)| v.len() > 1)
            .map(|((factor, _), v)| (factor, v))
            .collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn level_set_key_lists_the_levels_in_factor_order_and_reads_back() {
        // (factor id, level id) pairs, sorted by factor as the import sorts them.
        let key = level_set_key(&[(1, 12), (2, 7), (5, 30)]);
        assert_eq!(key, "12,7,30");
        let ids = |key: &str| level_set_key_ids(key).collect::<Option<Vec<i64>>>();
        assert_eq!(ids(&key), Some(vec![12, 7, 30]));
        // No configured factor: an empty key, no members.
        assert_eq!(level_set_key(&[]), "");
        assert_eq!(ids(""), Some(vec![]));
        for bad in ["12,x", "1.5", "12;7", " 3"] {
            assert_eq!(ids(bad), None, "{bad}");
        }
    }
}
