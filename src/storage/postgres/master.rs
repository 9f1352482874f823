//! Master data on PostgreSQL: characteristics, factors and levels, kept in step with the plant
//! configuration by the plan every backend carries out ([`plan_sync`]).

use postgres::GenericClient;

use super::PgStore;
use crate::config::{CharacteristicConfig, Config};
use crate::storage::master::{
    case_collisions, measurement_view_factor_columns, parse_origin, plan_sync, FactorRow,
    StoredCharacteristic, StoredFactor, SyncAction, SyncReport,
};
use crate::Result;

/// Every stored characteristic, in id order.
pub(crate) fn load_characteristics(
    c: &mut impl GenericClient,
) -> Result<Vec<StoredCharacteristic>> {
    let rows = c.query(
        "SELECT id, name, unit, lsl, usl, target, resolution, is_active, is_configured, origin, \
         decimals FROM characteristics ORDER BY id",
        &[],
    )?;
    rows.iter()
        .map(|r| {
            let name: String = r.get(1);
            let origin = parse_origin(r.get(9), &name)?;
            Ok(StoredCharacteristic {
                id: r.get(0),
                config: CharacteristicConfig {
                    name,
                    unit: r.get(2),
                    lsl: r.get(3),
                    usl: r.get(4),
                    target: r.get(5),
                    resolution: r.get(6),
                    is_active: r.get::<_, i64>(7) != 0,
                    plausible: None,
                },
                is_configured: r.get::<_, i64>(8) != 0,
                origin,
                decimals: r.get::<_, i64>(10).max(0) as u32,
            })
        })
        .collect()
}

/// Every stored factor: the configured ones in configuration order, then the others by name.
pub(crate) fn load_factors(c: &mut impl GenericClient) -> Result<Vec<StoredFactor>> {
    let rows = c.query(
        "SELECT id, name, is_configured FROM factors \
         ORDER BY is_configured DESC, position, name COLLATE \"C\"",
        &[],
    )?;
    Ok(rows
        .iter()
        .map(|r| StoredFactor {
            id: r.get(0),
            name: r.get(1),
            is_configured: r.get::<_, i64>(2) != 0,
        })
        .collect())
}

fn load_factor_rows(c: &mut impl GenericClient) -> Result<Vec<FactorRow>> {
    let rows = c.query(
        "SELECT id, name, position, source, source_column, is_configured FROM factors",
        &[],
    )?;
    Ok(rows
        .iter()
        .map(|r| FactorRow {
            id: r.get(0),
            name: r.get(1),
            position: r.get(2),
            source: r.get(3),
            source_column: r.get(4),
            is_configured: r.get::<_, i64>(5) != 0,
        })
        .collect())
}

/// (Re)creates `measurement_values` (docs/database.md), as on SQLite.
fn create_measurement_view(c: &mut impl GenericClient) -> Result<()> {
    let factors: Vec<(i64, String)> = c
        .query(
            "SELECT id, name FROM factors WHERE is_configured = 1 ORDER BY position",
            &[],
        )?
        .iter()
        .map(|r| (r.get(0), r.get(1)))
        .collect();
    let columns = measurement_view_factor_columns(&factors);
    c.batch_execute(&format!(
        "DROP VIEW IF EXISTS measurement_values;
         CREATE VIEW measurement_values AS
         SELECT utc_text(m.ts_ms) AS ts_utc,
                m.ts_ms, c.name AS characteristic, c.unit,
                CAST(c.origin AS DOUBLE PRECISION) + m.value AS value,
                m.import_id, m.line, m.part, m.subgroup, m.level_set_id{columns}
         FROM measurements m JOIN characteristics c ON c.id = m.characteristic_id;"
    ))?;
    Ok(())
}

fn flag(b: bool) -> i64 {
    i64::from(b)
}

impl PgStore {
    /// Brings characteristics and factors in step with `config` in one transaction (the plan
    /// of [`plan_sync`]: adds and updates, never deletes, never touches measurements or origins).
    /// Under the site's write lock, so two `init`s (or an `init` and an import) at once apply it
    /// once.
    pub(crate) fn sync_config_pg(&mut self, config: &Config) -> Result<SyncReport> {
        let mut conn = self.conn();
        let mut tx = conn.transaction()?;
        super::import::lock_site_writes(&mut tx)?;
        let plan = plan_sync(
            &load_characteristics(&mut tx)?,
            &load_factor_rows(&mut tx)?,
            config,
        );
        for action in &plan.actions {
            match action {
                SyncAction::AddCharacteristic(c) => {
                    tx.execute(
                        "INSERT INTO characteristics (name, unit, lsl, usl, target, resolution, \
                         is_active, is_configured) VALUES ($1, $2, $3, $4, $5, $6, $7, 1)",
                        &[
                            &c.name,
                            &c.unit,
                            &c.lsl,
                            &c.usl,
                            &c.target,
                            &c.resolution,
                            &flag(c.is_active),
                        ],
                    )?;
                }
                SyncAction::UpdateCharacteristic(id, c) => {
                    tx.execute(
                        "UPDATE characteristics SET unit = $2, lsl = $3, usl = $4, target = $5, \
                         resolution = $6, is_active = $7, is_configured = 1 WHERE id = $1",
                        &[
                            id,
                            &c.unit,
                            &c.lsl,
                            &c.usl,
                            &c.target,
                            &c.resolution,
                            &flag(c.is_active),
                        ],
                    )?;
                }
                SyncAction::UnconfigureCharacteristic(id) => {
                    tx.execute(
                        "UPDATE characteristics SET is_configured = 0 WHERE id = $1",
                        &[id],
                    )?;
                }
                SyncAction::AddFactor {
                    name,
                    position,
                    source,
                    column,
                } => {
                    tx.execute(
                        "INSERT INTO factors (name, position, source, source_column, \
                         is_configured) VALUES ($1, $2, $3, $4, 1)",
                        &[name, position, source, column],
                    )?;
                }
                SyncAction::UpdateFactor {
                    id,
                    position,
                    source,
                    column,
                } => {
                    tx.execute(
                        "UPDATE factors SET position = $2, source = $3, source_column = $4, \
                         is_configured = 1 WHERE id = $1",
                        &[id, position, source, column],
                    )?;
                }
                SyncAction::UnconfigureFactor(id) => {
                    tx.execute(
                        "UPDATE factors SET is_configured = 0, position = -1 WHERE id = $1",
                        &[id],
                    )?;
                }
            }
        }
        create_measurement_view(&mut tx)?;
        tx.commit()?;
        drop(conn);
        self.level_cache.borrow_mut().clear();
        Ok(plan.report)
    }

    /// Levels of one factor that differ only in case or surrounding blanks.
    pub(crate) fn level_case_collisions_pg(&self) -> Result<Vec<(String, Vec<String>)>> {
        let rows: Vec<(String, String)> = self
            .conn()
            .query(
                "SELECT f.name, l.name FROM levels l JOIN factors f ON f.id = l.factor_id \
                 ORDER BY f.position, l.name COLLATE \"C\"",
                &[],
            )?
            .iter()
            .map(|r| (r.get(0), r.get(1)))
            .collect();
        Ok(case_collisions(rows))
    }
}
