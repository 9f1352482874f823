//! Store benchmarks (criterion): the analysis read path, one characteristic-day.
//!
//! Setup writes the deterministic benchmark plant with `samewise generate-bench-data`
//! (1,000,000 rows, 50 characteristics, 5 factors, 3 days: about 6,700 rows per
//! characteristic-day) and imports it once; the benchmark then times `MeasurementStore::load_period` of one
//! characteristic over one production day, on an open store (its level cache warm) and on a
//! freshly opened one (open, migration check, and the level sets fetched in bulk).
//!
//! The import throughput target (10,000,000 rows) is measured with the binary, see docs/performance.md:
//! `samewise generate-bench-data --rows 10000000 --characteristics 50 --factors 5 --days 30 --out /tmp/b.csv`,
//! then `samewise init --config /tmp/b.csv.plant.toml` and
//! `/usr/bin/time -v samewise import --config /tmp/b.csv.plant.toml /tmp/b.csv`.

use std::path::PathBuf;
use std::process::Command;

use criterion::{criterion_group, criterion_main, Criterion};
use samewise::config::Config;

fn setup() -> Config {
    // One directory per page size, so a database written with another page size is not reused.
    let dir = std::env::temp_dir().join(format!(
        "samewise-bench-import-p{}",
        samewise::storage::PAGE_SIZE
    ));
    let csv = dir.join("day.csv");
    let config_path = PathBuf::from(format!("{}.plant.toml", csv.display()));
    if !config_path.exists() {
        std::fs::create_dir_all(&dir).unwrap();
        let bin = env!("CARGO_BIN_EXE_samewise");
        let status = Command::new(bin)
            .args([
                "generate-bench-data",
                "--rows",
                "1000000",
                "--characteristics",
                "50",
            ])
            .args(["--factors", "5", "--days", "3", "--out"])
            .arg(&csv)
            .status()
            .unwrap();
        assert!(status.success());
        for args in [vec!["init"], vec!["import", csv.to_str().unwrap()]] {
            let status = Command::new(bin)
                .args(&args)
                .arg("--config")
                .arg(&config_path)
                .status()
                .unwrap();
            assert!(status.success());
        }
    }
    Config::load(&config_path).unwrap()
}

fn characteristic_day(c: &mut Criterion) {
    let config = setup();
    let store = samewise::storage::open(&config).unwrap();
    // 2026-11-03 06:00 UTC .. 2026-11-04 06:00 UTC: the second day of the data.
    let start = chrono::DateTime::from_timestamp(1_793_685_600, 0).unwrap();
    let end = chrono::DateTime::from_timestamp(1_793_772_000, 0).unwrap();
    let names = ["char07".to_string()];
    let n = store
        .load_period(start, end, Some(&names))
        .unwrap()
        .characteristics[0]
        .values
        .len();
    assert!(n > 6000, "{n} rows");
    c.bench_function(
        &format!("load_period one characteristic-day ({n} rows)"),
        |b| b.iter(|| store.load_period(start, end, Some(&names)).unwrap()),
    );
}

fn characteristic_day_fresh_store(c: &mut Criterion) {
    let config = setup();
    let start = chrono::DateTime::from_timestamp(1_793_685_600, 0).unwrap();
    let end = chrono::DateTime::from_timestamp(1_793_772_000, 0).unwrap();
    let names = ["char07".to_string()];
    c.bench_function("open + load_period one characteristic-day", |b| {
        b.iter(|| {
            let store = samewise::storage::open(&config).unwrap();
            store.load_period(start, end, Some(&names)).unwrap()
        })
    });
}

criterion_group!(benches, characteristic_day, characteristic_day_fresh_store);
criterion_main!(benches);
