//! Store tests on in-memory and temporary databases: migrations from empty, the schema version,
//! refusal of a newer database, exact round trip of values with a large offset, and
//! `sync_config` idempotence.

use samewise::config::Config;
use samewise::ingest;
use samewise::stats::decimal::Decimal;
use samewise::storage::{exact_value, migrate, ImportOptions, PlantStore};

mod common;
use common::temp_dir;

const CONFIG: &str = r#"
[plant]
name = "Invented test plant"
time_zone = "Europe/Berlin"
production_day_start = "06:00"
database = "plant.db"

[[characteristic]]
name = "length"
unit = "mm"
lsl = 999999999999.0
usl = 1000000000001.0

[[characteristic]]
name = "bore"
unit = "mm"

[[factor]]
name = "machine"
"#;

fn config(dir: &std::path::Path, text: &str) -> Config {
    let path = dir.join("plant.toml");
    std::fs::write(&path, text).unwrap();
    Config::load(&path).unwrap()
}

fn started() -> chrono::DateTime<chrono::Utc> {
    chrono::DateTime::from_timestamp(1_800_000_000, 0).unwrap()
}

/// Imports the file at `path` into `store`, not forced, started at [`started`].
fn import_file(store: &mut dyn PlantStore, path: &std::path::Path, cfg: &Config) {
    let stream = ingest::read_file(path, cfg, None).unwrap();
    store
        .import(
            stream,
            &ImportOptions {
                force: false,
                started_at: started(),
            },
        )
        .unwrap();
}

#[test]
fn migrations_apply_from_empty_and_version_counts_the_files() {
    let store = samewise::storage::open_in_memory().unwrap();
    let files = std::fs::read_dir(concat!(env!("CARGO_MANIFEST_DIR"), "/migrations"))
        .unwrap()
        .filter(|e| {
            e.as_ref()
                .unwrap()
                .file_name()
                .to_string_lossy()
                .ends_with(".sql")
        })
        .count();
    assert_eq!(store.schema_version().unwrap() as usize, files);
    assert_eq!(migrate::latest_version() as usize, files);
    assert_eq!(migrate::MIGRATIONS.len(), files);
}

#[test]
fn reopening_applies_nothing_twice() {
    let dir = temp_dir("reopen");
    let cfg = config(&dir, CONFIG);
    drop(samewise::storage::create(&cfg).unwrap());
    let store = samewise::storage::open(&cfg).unwrap();
    assert_eq!(store.schema_version().unwrap(), migrate::latest_version());
}

#[test]
fn a_newer_database_is_refused_untouched() {
    let dir = temp_dir("newer");
    let cfg = config(&dir, CONFIG);
    let db = cfg.plant.database.clone();
    drop(samewise::storage::open_or_create(&cfg).unwrap());
    let newer = migrate::latest_version() + 1;
    {
        let conn = rusqlite::Connection::open(&db).unwrap();
        conn.pragma_update(None, "user_version", newer).unwrap();
    }
    let err = samewise::storage::open(&cfg).err().unwrap().to_string();
    assert!(err.contains("newer samewise"), "{err}");
    let conn = rusqlite::Connection::open(&db).unwrap();
    let v: u32 = conn
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .unwrap();
    assert_eq!(v, newer);
}

#[test]
fn a_missing_database_suggests_init() {
    let dir = temp_dir("missing");
    let cfg = config(&dir, CONFIG);
    let err = samewise::storage::open(&cfg).err().unwrap().to_string();
    assert!(err.contains("samewise init"), "{err}");
}

#[test]
fn sync_config_is_idempotent_and_keeps_measurements() {
    let dir = temp_dir("sync");
    let cfg = config(&dir, CONFIG);
    let mut store = samewise::storage::create(&cfg).unwrap();
    let second = store.sync_config(&cfg).unwrap();
    assert!(second.is_unchanged(), "{second:?}");
    let csv = dir.join("a.csv");
    std::fs::write(
        &csv,
        "timestamp,characteristic,value,machine\n2026-11-30T07:00:00Z,bore,42.001,M1\n",
    )
    .unwrap();
    import_file(&mut *store, &csv, &cfg);
    // A changed limit updates the characteristic; the measurement stays.
    let changed = config(
        &dir,
        &CONFIG.replace(
            "name = \"bore\"\nunit = \"mm\"",
            "name = \"bore\"\nunit = \"mm\"\nlsl = 41.9",
        ),
    );
    let report = store.sync_config(&changed).unwrap();
    assert_eq!(report.characteristics_updated, ["bore"]);
    let status = store.status().unwrap();
    let bore = status
        .characteristics
        .iter()
        .find(|c| c.name == "bore")
        .unwrap();
    assert_eq!(bore.n_obs, 1);
    assert!(store.sync_config(&changed).unwrap().is_unchanged());
}

/// Values with a huge offset and a tiny spread: stored as offsets from an exact origin they keep
/// every digit, and statistics from stored values equal those from the CSV text. The check values
/// are exact decimal arithmetic on the literals below (hand check): mean of 1000000000000.3,
/// 1000000000000.4, 1000000000000.5 is 1000000000000.4; sample variance 0.01.
#[test]
fn large_offset_values_round_trip_exactly() {
    let dir = temp_dir("offset");
    let cfg = config(&dir, CONFIG);
    let mut store = samewise::storage::create(&cfg).unwrap();
    let texts = ["1000000000000.4", "1000000000000.3", "1000000000000.5"];
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    for (i, t) in texts.iter().enumerate() {
        csv.push_str(&format!("2026-11-30T07:00:0{i}Z,length,{t},M1\n"));
    }
    let path = dir.join("big.csv");
    std::fs::write(&path, csv).unwrap();
    import_file(&mut *store, &path, &cfg);
    let frame = store
        .load_period(
            chrono::DateTime::from_timestamp(0, 0).unwrap(),
            chrono::DateTime::from_timestamp(4_000_000_000, 0).unwrap(),
            Some(&["length".to_string()]),
        )
        .unwrap();
    let c = &frame.characteristics[0];
    assert_eq!(c.values.len(), 3);
    let stored = store
        .characteristics()
        .unwrap()
        .into_iter()
        .find(|c| c.config.name == "length")
        .unwrap();
    let back: Vec<String> = c
        .values
        .iter()
        .map(|&v| exact_value(&c.origin, v, stored.decimals).to_string())
        .collect();
    assert_eq!(back, texts);
    // The origin is the middle of the configured limits (issue 13: no single value fixes it),
    // and the stored offsets equal the CSV text centred on it exactly.
    let parsed: Vec<Decimal> = texts.iter().map(|t| Decimal::parse(t).unwrap()).collect();
    let origin = Decimal::parse("1000000000000").unwrap();
    assert_eq!(origin, c.origin);
    let offsets: Vec<f64> = parsed.iter().map(|d| d.offset_from(&origin)).collect();
    assert_eq!(offsets, c.values);
    let summary = samewise::stats::describe::Summary::from_slice(&c.values);
    let mean = origin.plus_offset(summary.mean);
    assert_eq!(mean, 1000000000000.4);
    assert!((summary.variance().unwrap() - 0.01).abs() < 1e-15);
}

/// The levels of each row as the frame gives them, by factor name order of the configuration.
fn frame_levels(frame: &samewise::storage::PeriodFrame, c: usize) -> Vec<Vec<String>> {
    let ch = &frame.characteristics[c];
    (0..ch.values.len())
        .map(|row| {
            frame
                .factors
                .iter()
                .enumerate()
                .map(|(f, factor)| factor.levels[ch.level_idx[f][row] as usize].clone())
                .collect()
        })
        .collect()
}

#[test]
fn load_period_resolves_many_level_combinations_across_imports() {
    // 3 factors and 700 rows per file, every row a combination of its own: more level sets than
    // one bulk fetch of the level cache takes, and a second import adding new ones to a store
    // whose cache already holds the first file's.
    let dir = temp_dir("combinations");
    let text = format!("{CONFIG}\n[[factor]]\nname = \"supplier\"\n\n[[factor]]\nname = \"lot\"\n");
    let cfg = config(&dir, &text);
    let mut store = samewise::storage::create(&cfg).unwrap();
    let mut expected: Vec<Vec<String>> = Vec::new();
    let window = (
        chrono::DateTime::from_timestamp(0, 0).unwrap(),
        chrono::DateTime::from_timestamp(4_000_000_000, 0).unwrap(),
    );
    for (file, first) in [("a.csv", 0u32), ("b.csv", 700)] {
        let mut csv = String::from("timestamp,characteristic,value,machine,supplier,lot\n");
        for i in first..first + 700 {
            let levels = vec![
                format!("M{}", i % 7),
                format!("S{}", (i / 7) % 11),
                format!("LOT{}", i / 77),
            ];
            csv.push_str(&format!(
                "2026-11-30T{:02}:{:02}:{:02}Z,bore,10.{:03},{}\n",
                i / 3600,
                (i / 60) % 60,
                i % 60,
                i % 1000,
                levels.join(",")
            ));
            expected.push(levels);
        }
        let path = dir.join(file);
        std::fs::write(&path, csv).unwrap();
        let stream = ingest::read_file(&path, &cfg, None).unwrap();
        let options = ImportOptions {
            force: false,
            started_at: started(),
        };
        assert_eq!(store.import(stream, &options).unwrap().accepted, 700);
        let names = ["bore".to_string()];
        let frame = store.load_period(window.0, window.1, Some(&names)).unwrap();
        assert_eq!(frame_levels(&frame, 0), expected);
        // A fresh connection (empty cache) gives the same frame.
        let fresh = samewise::storage::open(&cfg).unwrap();
        assert_eq!(
            fresh.load_period(window.0, window.1, Some(&names)).unwrap(),
            frame
        );
    }
}

#[test]
fn a_factor_added_later_reads_as_no_level_and_db_check_verifies_level_set_keys() {
    // Rows imported before `supplier` was configured have no supplier level: "(none)", on a
    // connection that has read nothing yet as well.
    let dir = temp_dir("added-factor");
    let cfg = config(&dir, CONFIG);
    let mut store = samewise::storage::create(&cfg).unwrap();
    let options = ImportOptions {
        force: false,
        started_at: started(),
    };
    let first = dir.join("first.csv");
    std::fs::write(
        &first,
        "timestamp,characteristic,value,machine\n\
         2026-11-30T07:00:00Z,bore,10.1,M1\n2026-11-30T07:01:00Z,bore,10.2,M2\n",
    )
    .unwrap();
    let stream = ingest::read_file(&first, &cfg, None).unwrap();
    assert_eq!(store.import(stream, &options).unwrap().accepted, 2);
    drop(store);

    let text = format!("{CONFIG}\n[[factor]]\nname = \"supplier\"\n");
    let cfg = config(&dir, &text);
    let mut store = samewise::storage::open(&cfg).unwrap();
    store.sync_config(&cfg).unwrap();
    let second = dir.join("second.csv");
    std::fs::write(
        &second,
        "timestamp,characteristic,value,machine,supplier\n\
         2026-11-30T08:00:00Z,bore,10.3,M1,S7\n",
    )
    .unwrap();
    let stream = ingest::read_file(&second, &cfg, None).unwrap();
    assert_eq!(store.import(stream, &options).unwrap().accepted, 1);
    drop(store);

    let window = (
        chrono::DateTime::from_timestamp(0, 0).unwrap(),
        chrono::DateTime::from_timestamp(4_000_000_000, 0).unwrap(),
    );
    let names = ["bore".to_string()];
    let fresh = samewise::storage::open(&cfg).unwrap();
    let frame = fresh.load_period(window.0, window.1, Some(&names)).unwrap();
    assert_eq!(
        frame_levels(&frame, 0),
        [["M1", "(none)"], ["M2", "(none)"], ["M1", "S7"]]
    );
    assert!(fresh.integrity_check().unwrap().is_ok());
    drop(fresh);

    // A key that no longer lists its set's members is a problem `db check` names.
    let conn = rusqlite::Connection::open(&cfg.plant.database).unwrap();
    let changed = conn
        .execute(
            "UPDATE level_sets SET key = key || ',999' WHERE id = (SELECT min(id) FROM level_sets)",
            [],
        )
        .unwrap();
    assert_eq!(changed, 1);
    drop(conn);
    let store = samewise::storage::open(&cfg).unwrap();
    let report = store.integrity_check().unwrap();
    assert!(!report.is_ok());
    assert_eq!(
        report.problems,
        ["1 level sets have a key that does not list their members"]
    );
    // And the analysis refuses to read it rather than guess.
    let err = store
        .load_period(window.0, window.1, Some(&names))
        .unwrap_err()
        .to_string();
    assert!(err.contains("does not list known level ids"), "{err}");
}
