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

/// Writes plant.toml and an invented CSV of `days` production days from 2026-11-28 (06:00 UTC),
/// 240 rows per characteristic per day; on machine M2 "bore" is 0.03 mm high (15% of the
/// tolerance) from 2026-11-30 on. Imports it; returns the configuration path.
pub fn invented_plant(dir: &Path, days: i64) -> PathBuf {
    let config_path = dir.join("plant.toml");
    std::fs::write(&config_path, CONFIG).unwrap();
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
