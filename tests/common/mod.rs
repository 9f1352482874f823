//! Shared helpers of the integration tests: a fixed-state generator, the log relative error, a
//! fresh temporary directory per test, and for the
//! engine's binary-driving tests an invented plant (configuration and a
//! long-format CSV generated with a fixed RNG state) imported into a fresh database.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

use chrono::{Duration, TimeZone, Utc};

/// splitmix64 (Steele, Lea and Flood 2014), a fixed-state generator for invented data.
pub struct Rng(pub u64);
impl Rng {
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    pub fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    /// Standard normal by Box-Muller.
    pub fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
    /// A whole number in `[0, n)`.
    pub fn below(&mut self, n: u32) -> u32 {
        (self.next_u64() % n as u64) as u32
    }
}

/// Log relative error of `x` against the certified `c` (about the number of significant digits
/// in agreement; 15.9 for an exact match), as NIST StRD measures accuracy.
pub fn lre(x: f64, c: f64) -> f64 {
    if x == c {
        return 15.9;
    }
    if c == 0.0 {
        return -(x.abs().log10());
    }
    (-((x - c).abs() / c.abs()).log10()).min(15.9)
}

pub const CONFIG: &str = r#"
[plant]
name = "Invented test plant"
time_zone = "UTC"
production_day_start = "06:00"
database = "plant.db"

[[characteristic]]
name = "bore"
unit = "mm"
lsl = 9.9
usl = 10.1

[[characteristic]]
name = "width"
unit = "mm"
lsl = 4.9
usl = 5.1

[[factor]]
name = "machine"
[[factor]]
name = "supplier"

[[schedule]]
name = "daily"
period = "day"
delay = "2h"
"#;

/// A fresh directory named after the test.
pub fn temp_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("samewise-test-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// The PostgreSQL server the plant tests run against instead of an SQLite file, when
/// `SAMEWISE_TEST_BACKEND=postgres` (`.ci/run` runs the plant suites a second time so); the
/// server is the one `SAMEWISE_TEST_POSTGRES` names.
pub fn postgres_backend() -> Option<String> {
    match std::env::var("SAMEWISE_TEST_BACKEND").as_deref() {
        Ok("postgres") => Some(std::env::var("SAMEWISE_TEST_POSTGRES").expect(
            "SAMEWISE_TEST_BACKEND=postgres needs SAMEWISE_TEST_POSTGRES to name the server",
        )),
        Ok("sqlite") | Err(_) => None,
        Ok(other) => panic!("SAMEWISE_TEST_BACKEND={other}: expected postgres or sqlite"),
    }
}

/// `config` (which names `database = "plant.db"`) for the backend under test: unchanged for
/// SQLite; on PostgreSQL ([`postgres_backend`]) the plant's data go to a schema of the test
/// server named after the test's directory (`t_<name>_<process id>`, unique per test and run).
pub fn plant_config(dir: &Path, config: &str) -> String {
    let Some(url) = postgres_backend() else {
        return config.to_string();
    };
    let name: String = dir
        .file_name()
        .unwrap()
        .to_string_lossy()
        .trim_start_matches("samewise-test-")
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '_'
            }
        })
        .collect();
    // PostgreSQL names hold 63 bytes; the process id at the end keeps runs apart.
    let schema = format!("t_{}", &name[name.len().saturating_sub(60)..]);
    let config = config.replace("database = \"plant.db\"\n", "");
    assert!(
        !config.contains("database ="),
        "plant_config: the configuration must name database = \"plant.db\" on a line of its own"
    );
    SCHEMAS.with(|s| {
        s.borrow_mut().push(DropSchema {
            url: url.clone(),
            name: schema.clone(),
        })
    });
    format!("{config}\n[database]\nurl = \"{url}\"\nschema = \"{schema}\"\n")
}

/// A test's PostgreSQL schema, dropped when the test's thread ends (passed or failed).
pub struct DropSchema {
    pub url: String,
    pub name: String,
}

impl Drop for DropSchema {
    fn drop(&mut self) {
        let _ = std::process::Command::new("psql")
            .args([
                self.url.as_str(),
                "-X",
                "-q",
                "-c",
                &format!("DROP SCHEMA IF EXISTS \"{}\" CASCADE", self.name),
            ])
            .env("PGOPTIONS", "-c client_min_messages=warning")
            .output();
    }
}

thread_local! {
    /// The schemas the current test made (each test runs on a thread of its own).
    static SCHEMAS: std::cell::RefCell<Vec<DropSchema>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// The rows of `sql` on the plant database of `dir/plant.toml`, every value as text (`NULL` as
/// an empty string), by the backend's own client: rusqlite for the SQLite file, `psql` with the
/// site's schema on the search path for PostgreSQL. For SQL both dialects accept.
pub fn sql_rows(dir: &Path, sql: &str) -> Vec<Vec<String>> {
    let config = samewise::config::Config::load(dir.join("plant.toml")).unwrap();
    if let Some(server) = &config.plant.server {
        let out = std::process::Command::new("psql")
            .args([
                server.url.as_str(),
                "-X",
                "-q",
                "-A",
                "-t",
                "-F",
                "\u{1f}",
                "-c",
                sql,
            ])
            .env("PGOPTIONS", format!("-c search_path={}", server.schema))
            .output()
            .expect("psql runs");
        assert!(
            out.status.success(),
            "{sql}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        return String::from_utf8(out.stdout)
            .unwrap()
            .lines()
            .map(|l| l.split('\u{1f}').map(str::to_string).collect())
            .collect();
    }
    let conn = rusqlite::Connection::open(&config.plant.database).unwrap();
    let mut stmt = conn.prepare(sql).unwrap();
    let n = stmt.column_count();
    stmt.query_map([], |r| {
        (0..n)
            .map(|i| {
                Ok(match r.get::<_, rusqlite::types::Value>(i)? {
                    rusqlite::types::Value::Null => String::new(),
                    rusqlite::types::Value::Integer(v) => v.to_string(),
                    rusqlite::types::Value::Real(v) => v.to_string(),
                    rusqlite::types::Value::Text(v) => v,
                    rusqlite::types::Value::Blob(v) => format!("{v:?}"),
                })
            })
            .collect::<rusqlite::Result<Vec<String>>>()
    })
    .unwrap()
    .collect::<rusqlite::Result<_>>()
    .unwrap()
}

/// Writes plant.toml and an invented CSV of `days` production days from 2026-11-28 (06:00 UTC),
/// 240 rows per characteristic per day; on machine M2 "bore" is 0.03 mm high (15% of the
/// tolerance) from 2026-11-30 on. Imports it; returns the configuration path.
pub fn invented_plant(dir: &Path, days: i64) -> PathBuf {
    let config_path = dir.join("plant.toml");
    std::fs::write(&config_path, plant_config(dir, CONFIG)).unwrap();
    let mut csv = String::from("timestamp,characteristic,value,machine,supplier\n");
    let mut rng = Rng(20261130);
    let t0 = Utc.with_ymd_and_hms(2026, 11, 28, 6, 0, 0).unwrap();
    for day in 0..days {
        for i in 0..240 {
            let ts = t0 + Duration::days(day) + Duration::seconds(i * 360);
            let machine = 1 + (rng.next_u64() % 3);
            let supplier = 1 + (rng.next_u64() % 2);
            for (name, centre) in [("bore", 10.0), ("width", 5.0)] {
                let mut v = centre + 0.01 * rng.normal();
                if name == "bore" && machine == 2 && day >= 2 {
                    v += 0.03;
                }
                csv.push_str(&format!(
                    "{},{name},{v:.4},M{machine},S{supplier}\n",
                    ts.format("%Y-%m-%dT%H:%M:%SZ")
                ));
            }
        }
    }
    let csv_path = dir.join("measurements.csv");
    std::fs::write(&csv_path, csv).unwrap();
    let config = samewise::config::Config::load(&config_path).unwrap();
    if config.plant.server.is_some() {
        // A schema left by an earlier run of the same test and process id starts afresh.
        samewise::storage::discard(&config).unwrap();
    }
    let mut store = samewise::storage::create(&config).unwrap();
    let stream = samewise::ingest::read_file(&csv_path, &config, None).unwrap();
    store
        .import(
            stream,
            &samewise::storage::ImportOptions {
                force: false,
                started_at: Utc::now(),
            },
        )
        .unwrap();
    config_path
}

/// Opens the database `file` of the plant in `dir` (configured by `dir/plant.toml`) through
/// `storage::open`, as every command opens it; `file` may be another database than the
/// configured one (a backup copy).
pub fn open_store(dir: &Path, file: &str) -> Box<dyn samewise::storage::PlantStore> {
    let mut config = samewise::config::Config::load(dir.join("plant.toml")).unwrap();
    config.plant.database = dir.join(file);
    samewise::storage::open(&config).unwrap()
}

/// Runs the binary in `dir` with `args` (the caller's `SAMEWISE_CONFIG` removed, so only the
/// test's own configuration is read).
pub fn samewise(dir: &Path, args: &[&str]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_samewise"))
        .current_dir(dir)
        .args(args)
        .env_remove("SAMEWISE_CONFIG")
        .output()
        .unwrap()
}

/// [`samewise`] that must succeed: its standard output (stdout and stderr shown on failure).
pub fn samewise_ok(dir: &Path, args: &[&str]) -> String {
    let out = samewise(dir, args);
    assert!(
        out.status.success(),
        "{args:?} failed:\n{}",
        output_text(&out)
    );
    String::from_utf8(out.stdout).unwrap()
}

/// Standard output followed by standard error, for messages.
pub fn output_text(out: &std::process::Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}
