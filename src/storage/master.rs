//! Master data: characteristics, factors, levels and level sets, and keeping them in step with the
//! plant configuration ([`MaintenanceStore::sync_config`](super::MaintenanceStore::sync_config)).
//!
//! The configuration is the truth for what a characteristic's limits are and which factors exist;
//! the database keeps everything it ever stored. So `sync_config` adds and updates, but never
//! deletes: a characteristic or factor that left the configuration keeps its measurements and is
//! marked `is_configured = 0`. It never touches measurements, and it never changes a
//! characteristic's `origin` (stored values are offsets from it).

use std::collections::HashMap;

use rusqlite::{params, Connection, TransactionBehavior};

use crate::config::{CharacteristicConfig, Config, FactorSource};
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

pub(crate) fn source_parts(source: &FactorSource) -> (&'static str, Option<&str>) {
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
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let plan = plan_sync(
            &load_characteristics(&tx)?,
            &load_stored_factors(&tx)?,
            config,
        );
        for action in &plan.actions {
            match action {
                SyncAction::AddCharacteristic(c) => {
                    tx.execute(
                        "INSERT INTO characteristics (name, unit, lsl, usl, target, resolution, is_active, is_configured) \
                         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, 1)",
                        params![c.name, c.unit, c.lsl, c.usl, c.target, c.resolution, c.is_active],
                    )?;
                }
                SyncAction::UpdateCharacteristic(id, c) => {
                    tx.execute(
                        "UPDATE characteristics SET unit = ?2, lsl = ?3, usl = ?4, target = ?5, \
                         resolution = ?6, is_active = ?7, is_configured = 1 WHERE id = ?1",
                        params![
                            id,
                            c.unit,
                            c.lsl,
                            c.usl,
                            c.target,
                            c.resolution,
                            c.is_active
                        ],
                    )?;
                }
                SyncAction::UnconfigureCharacteristic(id) => {
                    tx.execute(
                        "UPDATE characteristics SET is_configured = 0 WHERE id = ?1",
                        [id],
                    )?;
                }
                SyncAction::AddFactor {
                    name,
                    position,
                    source,
                    column,
                } => {
                    tx.execute(
                        "INSERT INTO factors (name, position, source, source_column, is_configured) \
                         VALUES (?1, ?2, ?3, ?4, 1)",
                        params![name, position, source, column],
                    )?;
                }
                SyncAction::UpdateFactor {
                    id,
                    position,
                    source,
                    column,
                } => {
                    tx.execute(
                        "UPDATE factors SET position = ?2, source = ?3, source_column = ?4, \
                         is_configured = 1 WHERE id = ?1",
                        params![id, position, source, column],
                    )?;
                }
                SyncAction::UnconfigureFactor(id) => {
                    tx.execute(
                        "UPDATE factors SET is_configured = 0, position = -1 WHERE id = ?1",
                        [id],
                    )?;
                }
            }
        }
        create_measurement_view(&tx)?;
        tx.commit()?;
        self.level_cache.borrow_mut().clear();
        Ok(plan.report)
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
    let factors: Vec<(i64, String)> = tx
        .prepare("SELECT id, name FROM factors WHERE is_configured = 1 ORDER BY position")?
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    let columns = measurement_view_factor_columns(&factors);
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

/// A factor row as stored, for [`plan_sync`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct FactorRow {
    pub(crate) id: i64,
    pub(crate) name: String,
    pub(crate) position: i64,
    pub(crate) source: String,
    pub(crate) source_column: Option<String>,
    pub(crate) is_configured: bool,
}

fn load_stored_factors(tx: &Connection) -> Result<Vec<FactorRow>> {
    let mut stmt =
        tx.prepare("SELECT id, name, position, source, source_column, is_configured FROM factors")?;
    let rows = stmt.query_map([], |r| {
        Ok(FactorRow {
            id: r.get(0)?,
            name: r.get(1)?,
            position: r.get(2)?,
            source: r.get(3)?,
            source_column: r.get(4)?,
            is_configured: r.get(5)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// One change that brings the master data in step with the configuration; every backend
/// carries out the same list ([`plan_sync`]) in one transaction.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum SyncAction {
    /// A configured characteristic new to the database.
    AddCharacteristic(CharacteristicConfig),
    /// A stored characteristic (id) whose unit, limits, target, resolution or active flag
    /// changed, or that is configured again.
    UpdateCharacteristic(i64, CharacteristicConfig),
    /// A stored characteristic (id) the configuration no longer lists.
    UnconfigureCharacteristic(i64),
    /// A configured factor new to the database.
    AddFactor {
        name: String,
        position: i64,
        source: &'static str,
        column: Option<String>,
    },
    /// A stored factor (id) whose position or source changed, or that is configured again.
    UpdateFactor {
        id: i64,
        position: i64,
        source: &'static str,
        column: Option<String>,
    },
    /// A stored factor (id) the configuration no longer lists (position -1).
    UnconfigureFactor(i64),
}

/// What `sync_config` does, decided once for every backend: the actions in order and the report.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct SyncPlan {
    pub(crate) actions: Vec<SyncAction>,
    pub(crate) report: SyncReport,
}

/// Compares the stored master data with the configuration: adds and updates, never deletes (a
/// characteristic or factor that left the configuration is marked not configured).
pub(crate) fn plan_sync(
    stored: &[StoredCharacteristic],
    stored_factors: &[FactorRow],
    config: &Config,
) -> SyncPlan {
    let mut plan = SyncPlan::default();
    let by_name: HashMap<&str, &StoredCharacteristic> =
        stored.iter().map(|c| (c.config.name.as_str(), c)).collect();
    for c in &config.characteristics {
        // `plausible` is not stored (only the import reads it from the file).
        let as_stored = CharacteristicConfig {
            plausible: None,
            ..c.clone()
        };
        match by_name.get(c.name.as_str()) {
            None => {
                plan.actions.push(SyncAction::AddCharacteristic(as_stored));
                plan.report.characteristics_added.push(c.name.clone());
            }
            Some(s) if s.config != as_stored || !s.is_configured => {
                plan.actions
                    .push(SyncAction::UpdateCharacteristic(s.id, as_stored));
                plan.report.characteristics_updated.push(c.name.clone());
            }
            Some(_) => {}
        }
    }
    for s in stored {
        if config.characteristic(&s.config.name).is_none() {
            if s.is_configured {
                plan.actions
                    .push(SyncAction::UnconfigureCharacteristic(s.id));
            }
            plan.report
                .characteristics_not_configured
                .push(s.config.name.clone());
        }
    }
    for (position, f) in config.factors.iter().enumerate() {
        let (source, column) = source_parts(&f.source);
        let position = position as i64;
        match stored_factors.iter().find(|s| s.name == f.name) {
            None => {
                plan.actions.push(SyncAction::AddFactor {
                    name: f.name.clone(),
                    position,
                    source,
                    column: column.map(str::to_string),
                });
                plan.report.factors_added.push(f.name.clone());
            }
            Some(s) => {
                let is_same = s.position == position
                    && s.source == source
                    && s.source_column.as_deref() == column
                    && s.is_configured;
                if !is_same {
                    plan.actions.push(SyncAction::UpdateFactor {
                        id: s.id,
                        position,
                        source,
                        column: column.map(str::to_string),
                    });
                    plan.report.factors_updated.push(f.name.clone());
                }
            }
        }
    }
    for s in stored_factors {
        if !config.factors.iter().any(|f| f.name == s.name) {
            if s.is_configured {
                plan.actions.push(SyncAction::UnconfigureFactor(s.id));
            }
            plan.report.factors_not_configured.push(s.name.clone());
        }
    }
    plan
}

/// The columns of `measurement_values` besides the factors; a factor named like one of them
/// gets a `factor_` prefix.
pub(crate) const MEASUREMENT_VIEW_FIXED: [&str; 10] = [
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

/// The factor columns of `measurement_values` for the configured factors (id, name) in order:
/// one correlated look-up of the level per factor, the column named after the factor (quoted).
/// The same SQL on both backends.
pub(crate) fn measurement_view_factor_columns(factors: &[(i64, String)]) -> String {
    let quote = |name: &str| format!("\"{}\"", name.replace('"', "\"\""));
    let mut columns = String::new();
    for (id, name) in factors {
        let column = if MEASUREMENT_VIEW_FIXED.contains(&name.as_str()) {
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
    columns
}

/// Levels of one factor that differ only in case or surrounding blanks, from (factor, level)
/// rows in factor order: (factor, the levels), for a warning that they count as different groups.
pub(crate) fn case_collisions(rows: Vec<(String, String)>) -> Vec<(String, Vec<String>)> {
    let mut groups: Vec<((String, String), Vec<String>)> = Vec::new();
    for (factor, level) in rows {
        let key = (factor, level.trim().to_lowercase());
        match groups.iter_mut().find(|(k, _)| *k == key) {
            Some((_, v)) => v.push(level),
            None => groups.push((key, vec![level])),
        }
    }
    groups
        .into_iter()
        .filter(|(_, v)| v.len() > 1)
        .map(|((factor, _), v)| (factor, v))
        .collect()
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
    /// Whether `level_sets` held any row when loaded: when it did not, every combination not in
    /// `by_names` is new, and the look-up by key can be skipped.
    had_sets: bool,
    /// Levels created since loading: a combination containing one cannot exist yet either.
    new_levels: std::collections::HashSet<i64>,
}

impl LevelSetWriter {
    /// Reads the configured factors and their levels through the import's writer.
    pub(crate) fn load(w: &mut impl LevelSetStore) -> Result<LevelSetWriter> {
        let factors: Vec<StoredFactor> = w
            .stored_factors()?
            .into_iter()
            .filter(|f| f.is_configured)
            .collect();
        let mut levels = Vec::with_capacity(factors.len());
        for f in &factors {
            levels.push(w.levels_of(f.id)?.into_iter().collect::<HashMap<_, _>>());
        }
        Ok(LevelSetWriter {
            factor_ids: factors.iter().map(|f| f.id).collect(),
            levels,
            had_sets: w.has_level_sets()?,
            new_levels: Default::default(),
        })
    }

    /// Configured factor ids, in configuration order.
    pub(crate) fn factor_ids(&self) -> &[i64] {
        &self.factor_ids
    }

    /// The level set ids of combinations of levels (each in configuration order), creating the
    /// new ones: their levels first, then one look-up of the keys that may exist and one insert
    /// of the rest (a backend may do each as one statement). The caller asks once per distinct
    /// combination (the import interns them), so nothing is cached here.
    pub(crate) fn ids_for(
        &mut self,
        w: &mut impl LevelSetStore,
        combinations: &[Vec<String>],
    ) -> Result<Vec<i64>> {
        let mut keyed: Vec<KeyedSet> = Vec::with_capacity(combinations.len());
        for names in combinations {
            if names.len() != self.factor_ids.len() {
                return Err(Error::Database(format!(
                    "a measurement has {} factor levels but the database has {} configured \
                     factors; run `samewise init` to bring the database in step with the \
                     configuration",
                    names.len(),
                    self.factor_ids.len()
                )));
            }
            let mut members: Vec<(i64, i64)> = Vec::with_capacity(names.len());
            for (f, name) in names.iter().enumerate() {
                let level_id = match self.levels[f].get(name) {
                    Some(&id) => id,
                    None => {
                        let id = w.insert_level(self.factor_ids[f], name)?;
                        self.levels[f].insert(name.clone(), id);
                        self.new_levels.insert(id);
                        id
                    }
                };
                members.push((self.factor_ids[f], level_id));
            }
            members.sort_unstable();
            let may_exist =
                self.had_sets && !members.iter().any(|(_, l)| self.new_levels.contains(l));
            keyed.push((level_set_key(&members), members, may_exist));
        }
        let to_find: Vec<&str> = keyed
            .iter()
            .filter(|(_, _, may)| *may)
            .map(|(k, _, _)| k.as_str())
            .collect();
        let found = if to_find.is_empty() {
            HashMap::new()
        } else {
            w.find_level_sets(&to_find)?
        };
        let to_insert: Vec<(&str, &[(i64, i64)])> = keyed
            .iter()
            .filter(|(k, _, _)| !found.contains_key(k))
            .map(|(k, m, _)| (k.as_str(), m.as_slice()))
            .collect();
        let inserted = w.insert_level_sets(&to_insert)?;
        let mut inserted = inserted.into_iter();
        keyed
            .iter()
            .map(|(k, _, _)| match found.get(k) {
                Some(&id) => Ok(id),
                None => inserted
                    .next()
                    .ok_or_else(|| Error::Database("a new level set was not stored".to_string())),
            })
            .collect()
    }
}

/// A combination's key, its (factor id, level id) members, and whether it may be stored already.
type KeyedSet = (String, Vec<(i64, i64)>, bool);

/// What [`LevelSetWriter`] reads and writes, inside an import's transaction (each backend's
/// import writer implements it).
pub(crate) trait LevelSetStore {
    /// Every stored factor ([`MeasurementStore::factors`](super::MeasurementStore::factors) order).
    fn stored_factors(&mut self) -> Result<Vec<StoredFactor>>;
    /// The levels of one factor: (name, id).
    fn levels_of(&mut self, factor_id: i64) -> Result<Vec<(String, i64)>>;
    /// Whether any level set is stored.
    fn has_level_sets(&mut self) -> Result<bool>;
    /// Stores a new level of a factor; its id.
    fn insert_level(&mut self, factor_id: i64, name: &str) -> Result<i64>;
    /// The stored level sets among these keys: key -> id.
    fn find_level_sets(&mut self, keys: &[&str]) -> Result<HashMap<String, i64>>;
    /// Stores new level sets (key and (factor id, level id) members each); their ids, in order.
    fn insert_level_sets(&mut self, sets: &[(&str, &[(i64, i64)])]) -> Result<Vec<i64>>;
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
        Ok(case_collisions(rows))
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
