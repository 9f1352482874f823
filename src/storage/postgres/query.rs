//! The analysis read path on PostgreSQL: [`MeasurementStore`] for [`PgStore`].
//!
//! A call reads in one REPEATABLE READ, READ ONLY transaction: master data and rows come from
//! one snapshot, so an import that commits meanwhile is seen completely or not at all. The rows
//! of each characteristic stream from the primary-key range (characteristic, time) into the
//! backend-neutral [`FrameBuilder`], which the SQLite backend uses too.

use chrono::{DateTime, Utc};
use postgres::IsolationLevel;
#[cfg(test)]
use std::path::Path;

use super::master::{load_characteristics, load_factors};
use super::PgStore;
use crate::storage::master::{StoredCharacteristic, StoredFactor};
use crate::storage::query::{
    choose_characteristics, FrameBuilder, MeasurementStore, PeriodFrame, ReaderOpener,
};
use crate::{Error, Result};

impl MeasurementStore for PgStore {
    fn characteristics(&self) -> Result<Vec<StoredCharacteristic>> {
        load_characteristics(&mut *self.conn())
    }

    fn factors(&self) -> Result<Vec<StoredFactor>> {
        load_factors(&mut *self.conn())
    }

    fn count_between(
        &self,
        start: DateTime<Utc>,
        end: DateTime<Utc>,
    ) -> Result<Vec<(String, u64)>> {
        let rows = self.conn().query(
            "SELECT c.name, (SELECT COUNT(*) FROM measurements m WHERE m.characteristic_id = c.id \
             AND m.ts_ms >= $1 AND m.ts_ms < $2) FROM characteristics c ORDER BY c.id",
            &[&start.timestamp_millis(), &end.timestamp_millis()],
        )?;
        Ok(rows
            .iter()
            .map(|r| (r.get(0), r.get::<_, i64>(1) as u64))
            .collect())
    }

    fn has_data_between(&self, start: DateTime<Utc>, end: DateTime<Utc>) -> Result<bool> {
        Ok(self
            .conn()
            .query_one(
                "SELECT EXISTS (SELECT 1 FROM characteristics c WHERE EXISTS (SELECT 1 FROM \
                 measurements m WHERE m.characteristic_id = c.id AND m.ts_ms >= $1 \
                 AND m.ts_ms < $2))",
                &[&start.timestamp_millis(), &end.timestamp_millis()],
            )?
            .get(0))
    }

    fn load_period(
        &self,
        start: DateTime<Utc>,
        end: DateTime<Utc>,
        characteristics: Option<&[String]>,
    ) -> Result<PeriodFrame> {
        let mut conn = self.conn();
        let mut tx = conn
            .build_transaction()
            .isolation_level(IsolationLevel::RepeatableRead)
            .read_only(true)
            .start()?;
        // The rows are wanted in primary-key order, which a scan of that index yields as it
        // reads. The planner prices the heap visits of that scan by the whole table's
        // correlation of characteristic_id, low because imports write in time order, and picks
        // a bitmap heap scan and a sort instead (a month's sort spills to disk): three times
        // slower on the benchmark plant (docs/performance.md, "PostgreSQL daily check"). Plans
        // that need a sort are priced out for this transaction only. That pricing (and a
        // month's rows) would put the plans above the JIT compiler's threshold, which costs
        // 5 to 100 ms a query and gains nothing on a scan with no expressions: off as well.
        tx.batch_execute("SET LOCAL enable_sort = off; SET LOCAL jit = off")?;
        let stored = load_characteristics(&mut tx)?;
        let chosen = choose_characteristics(&stored, characteristics)?;
        let factors: Vec<StoredFactor> = load_factors(&mut tx)?
            .into_iter()
            .filter(|f| f.is_configured)
            .collect();
        let mut cache = self.level_cache.borrow_mut();
        // All of a characteristic's uncached level sets are asked for in one query.
        let mut builder = FrameBuilder::new(&factors, &mut cache).with_set_chunk(usize::MAX);
        let sets_stmt = tx.prepare("SELECT id, key FROM level_sets WHERE id = ANY($1)")?;
        let (start_ms, end_ms) = (start.timestamp_millis(), end.timestamp_millis());
        let mut copied = Vec::new();
        for c in chosen {
            builder.begin_characteristic();
            // The rows in binary COPY format: no row object per measurement on either side
            // (a query's rows cost about as much to build as the scan itself). COPY takes no
            // parameters; the three are integers written by this code.
            copied.clear();
            std::io::Read::read_to_end(
                &mut tx.copy_out(&format!(
                    "COPY (SELECT ts_ms, value, level_set_id, subgroup FROM measurements \
                 WHERE characteristic_id = {} AND ts_ms >= {start_ms} AND ts_ms < {end_ms} \
                 ORDER BY ts_ms, import_id, line) TO STDOUT (FORMAT binary)",
                    c.id
                ))?,
                &mut copied,
            )
            .map_err(|e| Error::Database(format!("reading {}'s values: {e}", c.config.name)))?;
            read_binary_copy(&copied, |ts_ms, value, set, subgroup| {
                builder.push(ts_ms, value, set, subgroup)
            })
            .map_err(|e| Error::Database(format!("reading {}'s values: {e}", c.config.name)))?;
            let tx = &mut tx;
            let sets_stmt = &sets_stmt;
            // Two closures need the transaction in turn; a cell hands it to whichever runs.
            let tx = std::cell::RefCell::new(tx);
            builder.finish_characteristic(
                c,
                |ids, out| {
                    let mut tx = tx.borrow_mut();
                    let rows = if read_every_set(&mut tx, ids.len())? {
                        tx.query("SELECT id, key FROM level_sets", &[])?
                    } else {
                        tx.query(sets_stmt, &[&ids])?
                    };
                    for r in rows {
                        out.push((r.get(0), r.get(1)));
                    }
                    Ok(())
                },
                |levels| {
                    for r in tx
                        .borrow_mut()
                        .query("SELECT id, factor_id, name FROM levels", &[])?
                    {
                        levels.insert(r.get(0), (r.get(1), r.get(2)));
                    }
                    Ok(())
                },
            )?;
        }
        let frame = builder.finish();
        tx.commit()?;
        Ok(frame)
    }

    fn level_case_collisions(&self) -> Result<Vec<(String, Vec<String>)>> {
        self.level_case_collisions_pg()
    }

    fn reader_opener(&self) -> Option<ReaderOpener> {
        let target = self.target.clone();
        Some(Box::new(move || {
            let reader = PgStore::open_reader(&target)?;
            Ok(Box::new(reader) as Box<dyn MeasurementStore + Send>)
        }))
    }
}

/// Uncached level sets asked for at once from which reading every level set (one sequential
/// scan) may be cheaper than looking each up by id.
const SETS_WORTH_A_WHOLE_READ: usize = 1024;

/// Whether to read every level set instead of the `asked` ones by id: when they are at least a
/// sixteenth of all (ids are numbered from 1, so the highest id bounds their number). Measured
/// on the benchmark plant (docs/performance.md, "PostgreSQL daily check"): a look-up by id costs
/// the server about 2.4 microseconds a set, reading every set about 0.2 a set, so at a sixteenth
/// the whole read costs about what the look-ups would, and a day touches most of a plant's
/// level sets: the whole read fills the connection's cache for the characteristics after it.
fn read_every_set(tx: &mut postgres::Transaction<'_>, asked: usize) -> Result<bool> {
    if asked < SETS_WORTH_A_WHOLE_READ {
        return Ok(false);
    }
    let highest: Option<i64> = tx.query_one("SELECT MAX(id) FROM level_sets", &[])?.get(0);
    Ok(highest.is_some_and(|h| (asked as i64).saturating_mul(16) >= h))
}

/// Calls `row` with each row of PostgreSQL's binary COPY format holding (int8 ts_ms, float8
/// value, int8 level_set_id, text subgroup or NULL), in order (PostgreSQL documentation, COPY,
/// "Binary Format": an 11-byte signature, flags and a header extension, then per row a 16-bit
/// field count and per field a 32-bit length, -1 for NULL, and the value in network byte order;
/// a field count of -1 ends the data).
fn read_binary_copy(
    data: &[u8],
    mut row: impl FnMut(i64, f64, i64, Option<&[u8]>),
) -> std::result::Result<(), String> {
    const SIGNATURE: &[u8] = b"PGCOPY\n\xff\r\n\0";
    let mut c = CopyCursor { data, at: 0 };
    if c.take(SIGNATURE.len())? != SIGNATURE {
        return Err("the server's COPY data has no binary COPY signature".into());
    }
    c.take(4)?; // flags
    let extension = c.int4()?;
    c.take(usize::try_from(extension).map_err(|_| "a negative COPY header extension")?)?;
    loop {
        let fields = i16::from_be_bytes([c.take(1)?[0], c.take(1)?[0]]);
        if fields == -1 {
            return Ok(());
        }
        if fields != 4 {
            return Err(format!("a COPY row has {fields} fields, not 4"));
        }
        let ts_ms = i64::from_be_bytes(c.int8()?);
        let value = f64::from_be_bytes(c.int8()?);
        let set = i64::from_be_bytes(c.int8()?);
        let len = c.int4()?;
        let subgroup = if len < 0 {
            None
        } else {
            Some(c.take(len as usize)?)
        };
        row(ts_ms, value, set, subgroup);
    }
}

/// A position in binary COPY data.
struct CopyCursor<'a> {
    data: &'a [u8],
    at: usize,
}

impl<'a> CopyCursor<'a> {
    fn take(&mut self, n: usize) -> std::result::Result<&'a [u8], String> {
        let piece = self
            .data
            .get(self.at..self.at + n)
            .ok_or_else(|| format!("the server's COPY data ends early at byte {}", self.at))?;
        self.at += n;
        Ok(piece)
    }

    fn int4(&mut self) -> std::result::Result<i32, String> {
        let b = self.take(4)?;
        Ok(i32::from_be_bytes([b[0], b[1], b[2], b[3]]))
    }

    /// An 8-byte field with its length word.
    fn int8(&mut self) -> std::result::Result<[u8; 8], String> {
        let len = self.int4()?;
        if len != 8 {
            return Err(format!("an 8-byte field is {len} bytes long"));
        }
        let b = self.take(8)?;
        Ok([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Binary COPY data as PostgreSQL's COPY documentation ("Binary Format") lays it out, one
    /// row with a subgroup and one without, read back; damaged data is an error, never a guess.
    #[test]
    fn binary_copy_rows_are_read_and_damaged_data_refused() {
        let mut data = b"PGCOPY\n\xff\r\n\0".to_vec();
        data.extend(0i32.to_be_bytes()); // flags
        data.extend(0i32.to_be_bytes()); // header extension length
        let mut row = |ts: i64, v: f64, set: i64, sub: Option<&str>| {
            data.extend(4i16.to_be_bytes());
            for b in [ts.to_be_bytes(), v.to_be_bytes(), set.to_be_bytes()] {
                data.extend(8i32.to_be_bytes());
                data.extend(b);
            }
            match sub {
                Some(t) => {
                    data.extend((t.len() as i32).to_be_bytes());
                    data.extend(t.as_bytes());
                }
                None => data.extend((-1i32).to_be_bytes()),
            }
        };
        row(1_000, -0.0125, 7, Some("s1"));
        row(2_000, 1e-300, 9, None);
        data.extend((-1i16).to_be_bytes());
        let mut got = Vec::new();
        read_binary_copy(&data, |t, v, s, g| {
            got.push((t, v, s, g.map(<[u8]>::to_vec)))
        })
        .unwrap();
        assert_eq!(
            got,
            [
                (1_000, -0.0125, 7, Some(b"s1".to_vec())),
                (2_000, 1e-300, 9, None)
            ]
        );
        let cut = &data[..data.len() - 5];
        assert!(read_binary_copy(cut, |_, _, _, _| {})
            .unwrap_err()
            .contains("ends early"));
        assert!(read_binary_copy(b"COPY", |_, _, _, _| {}).is_err());
    }
    use crate::storage::maintenance::MaintenanceStore;
    use crate::storage::postgres::testing;
    use crate::storage::query::testing::cached_sets;
    use crate::storage::Store;

    const CONFIG: &str = r#"
[plant]
name = "Invented test plant"
time_zone = "Europe/Berlin"

[[characteristic]]
name = "bore"
unit = "mm"
lsl = 10.0
usl = 10.2

[[characteristic]]
name = "pitch"
unit = "mm"

[[factor]]
name = "machine"
[[factor]]
name = "cavity"
"#;

    /// The same measurements written by hand into both backends (ids given, so both agree),
    /// in SQL that both accept: two machines, two cavities, shots as subgroups, a level set
    /// whose cavity level differs only in case, and one row outside the period.
    const ROWS: &str = "
        INSERT INTO imports (id, file_name, path, sha256, layout, started_ms, finished_ms,
            rows_read, accepted, rejected) VALUES (1, 'a.csv', 'a.csv', 'x', 'long', 0, 0, 7, 7, 0);
        INSERT INTO levels (id, factor_id, name) VALUES (1, 1, 'M10'), (2, 1, 'M2'),
            (3, 2, 'c1'), (4, 2, 'C1 ');
        INSERT INTO level_sets (id, key) VALUES (1, '1,3'), (2, '2,3'), (3, '2,4');
        INSERT INTO level_set_members (level_set_id, factor_id, level_id) VALUES
            (1, 1, 1), (1, 2, 3), (2, 1, 2), (2, 2, 3), (3, 1, 2), (3, 2, 4);
        UPDATE characteristics SET origin = '10.1', decimals = 3 WHERE name = 'bore';
        INSERT INTO measurements (characteristic_id, ts_ms, import_id, line, value, level_set_id,
            part, subgroup) VALUES
            (1, 1000, 1, 2, 0.001, 1, NULL, 's1'), (1, 1000, 1, 3, -0.002, 2, NULL, 's1'),
            (1, 2000, 1, 4, 0.0125, 3, NULL, 's2'), (1, 3000, 1, 5, 1e-300, 1, 'p9', NULL),
            (1, 90000000, 1, 6, 0.5, 1, NULL, NULL),
            (2, 1500, 1, 7, 3.25, 2, NULL, NULL), (2, 500, 1, 8, -1.5, 1, NULL, NULL);
    ";

    #[test]
    fn the_same_rows_read_the_same_on_both_backends() {
        let Some(mut pg) = testing::store() else {
            return;
        };
        let config = crate::config::Config::from_toml_str(CONFIG, "plant.toml").unwrap();
        let mut sqlite = Store::open_in_memory().unwrap();
        let report_sqlite = MaintenanceStore::sync_config(&mut sqlite, &config).unwrap();
        let report_pg = MaintenanceStore::sync_config(&mut *pg, &config).unwrap();
        assert_eq!(report_pg, report_sqlite);
        assert_eq!(report_pg.characteristics_added, ["bore", "pitch"]);
        // A second sync changes nothing on either.
        assert!(MaintenanceStore::sync_config(&mut *pg, &config)
            .unwrap()
            .is_unchanged());
        sqlite.conn.execute_batch(ROWS).unwrap();
        pg.conn().batch_execute(ROWS).unwrap();
        assert_eq!(
            pg.characteristics().unwrap(),
            sqlite.characteristics().unwrap()
        );
        assert_eq!(
            pg.factors().unwrap(),
            MeasurementStore::factors(&sqlite).unwrap()
        );
        let t0 = DateTime::from_timestamp_millis(0).unwrap();
        let t1 = DateTime::from_timestamp_millis(86_400_000).unwrap();
        for names in [None, Some(vec!["pitch".to_string(), "bore".to_string()])] {
            let a = MeasurementStore::load_period(&sqlite, t0, t1, names.as_deref()).unwrap();
            let b = pg.load_period(t0, t1, names.as_deref()).unwrap();
            assert_eq!(a, b);
            // Read twice (the second from the level cache), the same.
            assert_eq!(pg.load_period(t0, t1, names.as_deref()).unwrap(), b);
        }
        let frame = pg.load_period(t0, t1, None).unwrap();
        assert_eq!(frame.factors[0].levels, ["M2", "M10"]);
        assert_eq!(frame.characteristics[0].values.len(), 4);
        assert_eq!(
            frame.characteristics[0].values[3].to_bits(),
            1e-300f64.to_bits()
        );
        assert_eq!(
            pg.count_between(t0, t1).unwrap(),
            MeasurementStore::count_between(&sqlite, t0, t1).unwrap()
        );
        assert!(pg.has_data_between(t0, t1).unwrap());
        let t2 = DateTime::from_timestamp_millis(100_000_000).unwrap();
        assert!(!pg
            .has_data_between(
                t1 + chrono::Duration::days(1),
                t2 + chrono::Duration::days(1)
            )
            .unwrap());
        assert_eq!(
            pg.level_case_collisions().unwrap(),
            MeasurementStore::level_case_collisions(&sqlite).unwrap()
        );
        assert_eq!(pg.level_case_collisions().unwrap().len(), 1);
        let (sa, sb) = (
            MaintenanceStore::status(&sqlite).unwrap(),
            pg.status().unwrap(),
        );
        assert_eq!(sa.characteristics, sb.characteristics);
        assert_eq!(sa.schema_version, sb.schema_version);
        let (ia, ib) = (
            MaintenanceStore::integrity_check(&sqlite).unwrap(),
            pg.integrity_check().unwrap(),
        );
        assert!(ib.is_ok(), "{ib:?}");
        assert_eq!(ia.counts, ib.counts);
        // A second reader sees the same.
        let reader = (pg.reader_opener().unwrap())().unwrap();
        assert_eq!(reader.load_period(t0, t1, None).unwrap(), frame);
        // The measurement view reads values in units on both.
        let v: f64 = pg
            .conn()
            .query_one(
                "SELECT value FROM measurement_values WHERE line = 4 AND machine = 'M2'",
                &[],
            )
            .unwrap()
            .get(0);
        assert_eq!(v, 10.1 + 0.0125);
    }

    /// 1,600 level sets (40 machines x 40 cavities), 1,100 of them used by `bore` on the first
    /// day and 10 by `pitch`: reading `pitch` asks for its sets by id; reading `bore` asks for
    /// 1,100 sets at once, enough to read all 1,600 in one pass. Both read the same as on
    /// SQLite, which asks by id in chunks (the reference here).
    #[test]
    fn many_level_sets_are_read_whole_and_give_the_same_frames() {
        let Some(mut pg) = testing::store() else {
            return;
        };
        let config = crate::config::Config::from_toml_str(CONFIG, "plant.toml").unwrap();
        let mut sqlite = Store::open_in_memory().unwrap();
        MaintenanceStore::sync_config(&mut sqlite, &config).unwrap();
        MaintenanceStore::sync_config(&mut *pg, &config).unwrap();
        let mut sql = String::from(
            "INSERT INTO imports (id, file_name, path, sha256, layout, started_ms, finished_ms, \
             rows_read, accepted, rejected) VALUES (1, 'a.csv', 'a.csv', 'x', 'long', 0, 0, \
             1110, 1110, 0);\n",
        );
        let levels: Vec<String> = (1..=80)
            .map(|id| {
                let (factor, name) = if id <= 40 {
                    (1, format!("M{id}"))
                } else {
                    (2, format!("c{}", id - 40))
                };
                format!("({id}, {factor}, '{name}')")
            })
            .collect();
        sql += &format!(
            "INSERT INTO levels (id, factor_id, name) VALUES {};\n",
            levels.join(", ")
        );
        let (mut sets, mut members) = (Vec::new(), Vec::new());
        for m in 1..=40 {
            for c in 41..=80 {
                let id = (m - 1) * 40 + (c - 40);
                sets.push(format!("({id}, '{m},{c}')"));
                members.push(format!("({id}, 1, {m}), ({id}, 2, {c})"));
            }
        }
        sql += &format!(
            "INSERT INTO level_sets (id, key) VALUES {};\n",
            sets.join(", ")
        );
        sql += &format!(
            "INSERT INTO level_set_members (level_set_id, factor_id, level_id) VALUES {};\n",
            members.join(", ")
        );
        // bore: 1,100 distinct sets (37 i mod 1600, plus 1), every 7th value negative; pitch:
        // every 100th set.
        let mut rows: Vec<String> = (1..=1100)
            .map(|i| {
                let set = (i * 37) % 1600 + 1;
                let value = if i % 7 == 0 {
                    -(i as f64) / 8.0
                } else {
                    i as f64 / 1000.0
                };
                format!(
                    "(1, {}, 1, {i}, {value:e}, {set}, NULL, 's{}')",
                    i * 60_000,
                    i / 3
                )
            })
            .collect();
        rows.extend((1..=10).map(|i| {
            format!(
                "(2, {}, 1, {}, {}.5, {}, NULL, NULL)",
                i * 1000,
                2000 + i,
                i,
                i * 100
            )
        }));
        sql += &format!(
            "INSERT INTO measurements (characteristic_id, ts_ms, import_id, line, value, \
             level_set_id, part, subgroup) VALUES {};",
            rows.join(", ")
        );
        sqlite.conn.execute_batch(&sql).unwrap();
        pg.conn().batch_execute(&sql).unwrap();
        let t0 = DateTime::from_timestamp_millis(0).unwrap();
        let t1 = DateTime::from_timestamp_millis(86_400_000).unwrap();
        let pitch = Some(vec!["pitch".to_string()]);
        let a = MeasurementStore::load_period(&sqlite, t0, t1, pitch.as_deref()).unwrap();
        assert_eq!(pg.load_period(t0, t1, pitch.as_deref()).unwrap(), a);
        assert_eq!(cached_sets(&pg.level_cache.borrow()), 10, "pitch by id");
        let a = MeasurementStore::load_period(&sqlite, t0, t1, None).unwrap();
        assert_eq!(a.characteristics[0].values.len(), 1100);
        assert_eq!(pg.load_period(t0, t1, None).unwrap(), a);
        assert_eq!(
            cached_sets(&pg.level_cache.borrow()),
            1600,
            "every set read"
        );
        // From the cache alone, and on a fresh reader (whole read first), the same.
        assert_eq!(pg.load_period(t0, t1, None).unwrap(), a);
        let reader = (pg.reader_opener().unwrap())().unwrap();
        assert_eq!(reader.load_period(t0, t1, None).unwrap(), a);
    }

    #[test]
    fn db_check_finds_an_import_whose_counts_disagree() {
        let Some(mut pg) = testing::store() else {
            return;
        };
        let config = crate::config::Config::from_toml_str(CONFIG, "plant.toml").unwrap();
        MaintenanceStore::sync_config(&mut *pg, &config).unwrap();
        pg.conn().batch_execute(ROWS).unwrap();
        pg.conn()
            .batch_execute("UPDATE imports SET accepted = 8, rows_read = 8 WHERE id = 1")
            .unwrap();
        let report = pg.integrity_check().unwrap();
        assert!(!report.is_ok());
        assert!(
            report.problems[0].contains("recorded 8 stored"),
            "{:?}",
            report.problems
        );
        let err = pg.backup(Path::new("/tmp/x.dump")).unwrap_err().to_string();
        assert!(err.contains("pg_dump --schema="), "{err}");
    }

    /// The run tables' references to `run` are not enforced by the schema (migration 0011):
    /// `db check` finds a result row whose run does not exist.
    #[test]
    fn db_check_finds_run_rows_without_their_run() {
        let Some(mut pg) = testing::store() else {
            return;
        };
        let config = crate::config::Config::from_toml_str(CONFIG, "plant.toml").unwrap();
        MaintenanceStore::sync_config(&mut *pg, &config).unwrap();
        assert!(pg.integrity_check().unwrap().is_ok());
        pg.conn()
            .batch_execute(
                "INSERT INTO run_group (run_id, test_idx, group_idx, level, n, mean, min, max, \
                 origin) VALUES (424242, 0, 0, 'M1', 2, 0.5, 0.0, 1.0, '10')",
            )
            .unwrap();
        let report = pg.integrity_check().unwrap();
        assert!(!report.is_ok());
        assert_eq!(
            report.foreign_keys,
            ["run_group.run_id: 1 rows -> run"],
            "{report:?}"
        );
    }

    #[test]
    fn an_empty_site_reads_empty_and_names_an_unknown_characteristic() {
        let Some(store) = testing::store() else {
            return;
        };
        let t0 = DateTime::from_timestamp_millis(0).unwrap();
        let t1 = DateTime::from_timestamp_millis(86_400_000).unwrap();
        assert!(store.characteristics().unwrap().is_empty());
        assert!(!store.has_data_between(t0, t1).unwrap());
        let frame = store.load_period(t0, t1, None).unwrap();
        assert!(frame.characteristics.is_empty());
        let err = store
            .load_period(t0, t1, Some(&["bore".to_string()]))
            .unwrap_err();
        assert!(err.to_string().contains("unknown characteristic"), "{err}");
    }
}
