//! `samewise init / import / status / event / db` driven as a binary, each test in its own
//! temporary directory. Data are invented; DST dates are those of the IANA tz database for
//! Europe/Berlin (2026-03-29 02:00 -> 03:00, 2026-10-25 03:00 -> 02:00).

use std::path::{Path, PathBuf};
use std::process::Command;

use samewise::config::Config;
use samewise::storage::Store;

mod common;
use common::{output_text as text, samewise as run, temp_dir};

fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_samewise")
}

const CONFIG: &str = r#"
[plant]
name = "Invented test plant"
time_zone = "Europe/Berlin"
production_day_start = "06:00"
database = "plant.db"

[[characteristic]]
name = "bore_diameter"
unit = "mm"
lsl = 41.98
usl = 42.02

[[characteristic]]
name = "flatness"
unit = "mm"

[[factor]]
name = "machine"
"#;

fn setup(name: &str) -> PathBuf {
    let dir = temp_dir(name);
    std::fs::write(dir.join("plant.toml"), CONFIG).unwrap();
    let o = run(&dir, &["init"]);
    assert!(o.status.success(), "{}", text(&o));
    dir
}

fn store(dir: &Path) -> Store {
    Store::open(dir.join("plant.db")).unwrap()
}

/// Measurements stored, over every characteristic.
fn total_obs(s: &Store) -> u64 {
    let status = s.status().unwrap();
    status.characteristics.iter().map(|c| c.n_obs).sum()
}

fn n_measurements(dir: &Path) -> u64 {
    total_obs(&store(dir))
}

const MIXED: &str = "timestamp,characteristic,value,machine
2026-11-30T07:00:00Z,bore_diameter,42.001,M1
2026-11-30T07:01:00Z,bore_diameter,1,5,M1
2026-11-30T07:02:00Z,bore_diameter,NaN,M2

2026-11-30T07:03:00Z,unknown_thing,1.0,M2
2026-11-30T07:04:00Z,flatness,0.012,M2
2026-11-30T07:05:00Z,flatness,1e400,M2
2026-11-30T07:06:00Z,flatness,12.5 mm,M1
";

#[test]
fn counts_add_up_and_rejects_are_written() {
    let dir = setup("counts");
    std::fs::write(dir.join("a.csv"), MIXED).unwrap();
    let o = run(&dir, &["import", "a.csv", "--rejects", "rej.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let out = text(&o);
    assert!(out.contains("8 rows read"), "{out}");
    assert!(
        out.contains("2 stored, 0 already stored (duplicate), 6 rejected"),
        "{out}"
    );
    let rejects = std::fs::read_to_string(dir.join("rej.csv")).unwrap();
    // header + 6 rejections
    assert_eq!(rejects.lines().count(), 7, "{rejects}");
    assert!(rejects.contains("blank line"), "{rejects}");
    assert!(rejects.contains("unknown characteristic"), "{rejects}");
    let s = store(&dir);
    assert_eq!(n_measurements(&dir), 2);
    assert_eq!(s.status().unwrap().n_rejected, 6);
    assert!(s.integrity_check().unwrap().is_ok());
}

#[test]
fn unknown_characteristic_is_added_with_add_new() {
    let dir = setup("addnew");
    std::fs::write(dir.join("a.csv"), MIXED).unwrap();
    let o = run(&dir, &["import", "a.csv", "--add-new"]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(
        text(&o).contains("new characteristics: unknown_thing"),
        "{}",
        text(&o)
    );
    assert_eq!(n_measurements(&dir), 3);
}

#[test]
fn duplicate_content_is_refused_unless_forced() {
    let dir = setup("dup");
    std::fs::write(dir.join("a.csv"), MIXED).unwrap();
    std::fs::copy(dir.join("a.csv"), dir.join("b.csv")).unwrap();
    assert!(run(&dir, &["import", "a.csv"]).status.success());
    let o = run(&dir, &["import", "b.csv"]);
    assert!(!o.status.success());
    let out = text(&o);
    assert!(
        out.contains("already imported as import #1 (a.csv"),
        "{out}"
    );
    assert_eq!(n_measurements(&dir), 2);
    // Forced, the file is read again, but its rows are the stored ones (issue 15): counted as
    // duplicates, nothing stored twice.
    let o = run(&dir, &["import", "b.csv", "--force"]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(
        text(&o).contains("0 stored, 2 already stored (duplicate)"),
        "{}",
        text(&o)
    );
    assert_eq!(n_measurements(&dir), 2);
}

#[test]
fn status_event_check_and_backup() {
    let dir = setup("status");
    std::fs::write(dir.join("a.csv"), MIXED).unwrap();
    assert!(run(&dir, &["import", "a.csv"]).status.success());
    let o = run(&dir, &["status"]);
    let out = text(&o);
    assert!(o.status.success(), "{out}");
    assert!(out.contains("schema version"), "{out}");
    assert!(out.contains("rejected rows: 6"), "{out}");
    let o = run(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-30 08:15",
            "--note",
            "new boring bar",
            "--characteristic",
            "bore_diameter",
            // A level the store holds: an event scope naming a level never measured is refused.
            "--where",
            "machine=M2",
        ],
    );
    assert!(o.status.success(), "{}", text(&o));
    let o = run(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-30 08:15",
            "--note",
            "x",
            "--characteristic",
            "bore_diamter",
        ],
    );
    assert!(!o.status.success());
    assert!(
        text(&o).contains("did you mean \"bore_diameter\""),
        "{}",
        text(&o)
    );
    let o = run(&dir, &["event", "list"]);
    let out = text(&o);
    assert!(
        out.contains(
            "2026-11-30 08:15:00 CET  new boring bar  [characteristic=bore_diameter, machine=M2]"
        ),
        "{out}"
    );
    let o = run(&dir, &["db", "check"]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(text(&o).contains("database is sound"));
    let o = run(&dir, &["db", "backup", "copy.db"]);
    assert!(o.status.success(), "{}", text(&o));
    let copy = Store::open(dir.join("copy.db")).unwrap();
    assert_eq!(
        copy.status().unwrap().characteristics,
        store(&dir).status().unwrap().characteristics
    );
}

#[test]
fn no_database_and_no_config_are_explained() {
    let dir = temp_dir("nodb");
    let o = run(&dir, &["status"]);
    assert!(text(&o).contains("no plant configuration"), "{}", text(&o));
    std::fs::write(dir.join("plant.toml"), CONFIG).unwrap();
    let o = run(&dir, &["status"]);
    assert!(!o.status.success());
    assert!(text(&o).contains("samewise init"), "{}", text(&o));
}

/// Europe/Berlin 2026: 02:30 on 2026-03-29 does not exist, 02:30 on 2026-10-25 occurs twice
/// (IANA tz database). Both are rejected with a reason; zoned times at the change are stored.
#[test]
fn dst_edge_cases_end_to_end() {
    let dir = setup("dst");
    let csv = "timestamp,characteristic,value,machine
2026-03-29 01:59:00,bore_diameter,42.000,M1
2026-03-29 02:30:00,bore_diameter,42.001,M1
2026-03-29 03:00:00,bore_diameter,42.002,M1
2026-10-25 02:30:00,bore_diameter,42.003,M1
2026-10-25 02:30:00+01:00,bore_diameter,42.004,M1
2026-10-25 02:30:00+02:00,bore_diameter,42.005,M1
";
    std::fs::write(dir.join("dst.csv"), csv).unwrap();
    let o = run(&dir, &["import", "dst.csv"]);
    let out = text(&o);
    assert!(o.status.success(), "{out}");
    assert!(
        out.contains("4 stored, 0 already stored (duplicate), 2 rejected"),
        "{out}"
    );
    let frame = store(&dir)
        .load_period(
            chrono::DateTime::from_timestamp(0, 0).unwrap(),
            chrono::DateTime::from_timestamp(4_000_000_000, 0).unwrap(),
            Some(&["bore_diameter".to_string()]),
        )
        .unwrap();
    // 01:59 CET = 00:59Z; 03:00 CEST = 01:00Z: one minute apart in UTC.
    let ts = &frame.characteristics[0].ts_ms;
    assert_eq!(ts[1] - ts[0], 60_000);
    // 02:30+02:00 (00:30Z) comes one hour before 02:30+01:00 (01:30Z).
    assert_eq!(ts[3] - ts[2], 3_600_000);
}

fn big_csv(dir: &Path, rows: u64) -> PathBuf {
    let o = run(
        dir,
        &[
            "generate-bench-data",
            "--rows",
            &rows.to_string(),
            "--characteristics",
            "10",
            "--factors",
            "3",
            "--days",
            "2",
            "--out",
            "big.csv",
        ],
    );
    assert!(o.status.success(), "{}", text(&o));
    dir.join("big.csv")
}

/// A child importing a large file is killed with SIGKILL mid-import: the database holds none of
/// its rows, passes the integrity check, and the same file then imports completely.
#[test]
fn killed_import_leaves_nothing_and_the_file_imports_again() {
    let dir = temp_dir("crash");
    // Large enough that the import's pages outgrow SQLite's page cache (64 MiB) and spill into
    // the WAL well before the commit: a growing WAL then means the transaction is writing and
    // not committed (with a smaller file the WAL grows only at the commit, which a fast machine
    // finishes between two looks).
    let rows = 3_000_000;
    let csv = big_csv(&dir, rows);
    let config = format!("{}.plant.toml", csv.display());
    let o = run(&dir, &["init", "--config", &config]);
    assert!(o.status.success(), "{}", text(&o));
    let cfg = Config::load(&config).unwrap();
    let db = cfg.plant.database.clone();
    let mut child = Command::new(bin())
        .args(["import", "--config", &config, "big.csv"])
        .current_dir(&dir)
        .spawn()
        .unwrap();
    // Wait until the import is writing (the WAL grows), then kill it.
    let wal = PathBuf::from(format!("{}-wal", db.display()));
    let deadline = std::time::Instant::now() + std::time::Duration::from_secs(120);
    loop {
        let size = std::fs::metadata(&wal).map(|m| m.len()).unwrap_or(0);
        if size > 2_000_000 || std::time::Instant::now() > deadline {
            break;
        }
        if child.try_wait().unwrap().is_some() {
            panic!("the import finished before it could be killed; use a larger file");
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    child.kill().unwrap(); // SIGKILL on Unix
    let status = child.wait().unwrap();
    assert!(!status.success());
    let s = Store::open(&db).unwrap();
    assert_eq!(s.status().unwrap().n_imports, 0);
    let total = total_obs(&s);
    assert_eq!(total, 0);
    assert!(s.integrity_check().unwrap().is_ok());
    drop(s);
    let o = run(&dir, &["import", "--config", &config, "big.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let s = Store::open(&db).unwrap();
    let total = total_obs(&s);
    assert_eq!(total, rows);
    assert!(s.integrity_check().unwrap().is_ok());
}

/// An import and a reader (the analysis query) at the same time both succeed.
#[test]
fn import_and_reader_run_together() {
    let dir = temp_dir("concurrent");
    let csv = big_csv(&dir, 300_000);
    let config = format!("{}.plant.toml", csv.display());
    assert!(run(&dir, &["init", "--config", &config]).status.success());
    let cfg = Config::load(&config).unwrap();
    let mut child = Command::new(bin())
        .args(["import", "--config", &config, "big.csv"])
        .current_dir(&dir)
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let reader = Store::open(&cfg.plant.database).unwrap();
    let mut reads = 0;
    while child.try_wait().unwrap().is_none() {
        let frame = reader
            .load_period(
                chrono::DateTime::from_timestamp(0, 0).unwrap(),
                chrono::DateTime::from_timestamp(4_000_000_000, 0).unwrap(),
                Some(&["char01".to_string()]),
            )
            .unwrap();
        // Before the commit the reader sees nothing of the file, after it everything.
        let n = frame.characteristics[0].values.len();
        assert!(n == 0 || n == 30_000, "{n}");
        reads += 1;
    }
    let o = child.wait_with_output().unwrap();
    assert!(o.status.success(), "{}", text(&o));
    assert!(reads > 0);
    let frame = reader
        .load_period(
            chrono::DateTime::from_timestamp(0, 0).unwrap(),
            chrono::DateTime::from_timestamp(4_000_000_000, 0).unwrap(),
            Some(&["char01".to_string()]),
        )
        .unwrap();
    assert_eq!(frame.characteristics[0].values.len(), 30_000);
}

/// Issue 13, a decimal origin no single value can spoil: the first value of a characteristic
/// with limits is a typo (`42000012000000` for `42.000012`), the second an instrument's no-value
/// code (`9.9E+37`); both are rejected with their reasons, the origin comes from the limits, and
/// the later days keep 12 or more significant digits on F, the group means and SDs (checked
/// against sums computed here from the same decimal text, centred on 42 exactly) while later
/// imports work. Invented data.
#[test]
fn issue_13_wild_first_values_do_not_spoil_later_days() {
    let dir = setup("issue-13-wild-first");
    let mut first = String::from("timestamp,characteristic,value,machine\n");
    first.push_str("2026-11-02T06:00:00Z,bore_diameter,42000012000000,M1\n");
    first.push_str("2026-11-02T06:01:00Z,bore_diameter,9.9E+37,M1\n");
    std::fs::write(dir.join("first.csv"), &first).unwrap();
    let o = run(&dir, &["import", "first.csv"]);
    let t = text(&o);
    assert!(t.contains("implausible"), "{t}");
    assert!(t.contains("no-value code"), "{t}");
    // Two later days of real values (micrometre digits), three machines.
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    let mut by_day: Vec<Vec<Vec<i64>>> = vec![vec![Vec::new(); 3]; 2];
    for (day, groups) in by_day.iter_mut().enumerate() {
        for i in 0..60i64 {
            let m = (i % 3) as usize;
            // 42 mm + a few micrometres, machine M3 +3 um: integer micrometres x 1e-6.
            let um = 12 + (i * 37 % 11) - 5 + if m == 2 { 3 } else { 0 };
            groups[m].push(um);
            csv.push_str(&format!(
                "2026-11-{:02}T{:02}:{:02}:00Z,bore_diameter,{}.{:06},M{}\n",
                3 + day,
                7 + i / 20,
                (i % 20) * 2,
                42,
                um,
                m + 1
            ));
        }
    }
    std::fs::write(dir.join("later.csv"), &csv).unwrap();
    let o = run(&dir, &["import", "later.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    for (day, groups) in by_day.iter().enumerate() {
        let label = format!("2026-11-{:02}", 3 + day);
        let o = run(&dir, &["check", "--day", &label, "--json"]);
        let doc: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        let test = &doc["tests"][0];
        // Reference: sums in integer micrometres, exact, then one division.
        let n: Vec<f64> = groups.iter().map(|g| g.len() as f64).collect();
        let sums: Vec<f64> = groups
            .iter()
            .map(|g| g.iter().sum::<i64>() as f64)
            .collect();
        let total_n: f64 = n.iter().sum();
        let grand = sums.iter().sum::<f64>() / total_n;
        let ss_between: f64 = (0..3)
            .map(|k| n[k] * (sums[k] / n[k] - grand).powi(2))
            .sum();
        let ss_within: f64 = (0..3)
            .map(|k| {
                let mean = sums[k] / n[k];
                groups[k]
                    .iter()
                    .map(|&v| (v as f64 - mean).powi(2))
                    .sum::<f64>()
            })
            .sum();
        let f_ref = (ss_between / 2.0) / (ss_within / (total_n - 3.0));
        let f = test["anova"]["f"].as_f64().unwrap();
        assert!(common::lre(f, f_ref) >= 12.0, "{label}: F {f} vs {f_ref}");
        let ss_w = test["anova"]["ss_within"].as_f64().unwrap();
        assert!(
            common::lre(ss_w, ss_within * 1e-12) >= 12.0,
            "{label}: {ss_w}"
        );
        for g in test["groups"].as_array().unwrap() {
            let k: usize = g["level"].as_str().unwrap()[1..].parse::<usize>().unwrap() - 1;
            let mean_offset = g["mean_offset"].as_f64().unwrap();
            let origin: f64 = g["origin"].as_str().unwrap().parse().unwrap();
            // The origin is the middle of the limits (42), not the typo.
            assert_eq!(origin, 42.0, "{g}");
            assert!(
                common::lre(mean_offset, sums[k] / n[k] * 1e-6) >= 12.0,
                "{g}"
            );
            let sd = g["sd"].as_f64().unwrap();
            let mean = sums[k] / n[k];
            let var = groups[k]
                .iter()
                .map(|&v| (v as f64 - mean).powi(2))
                .sum::<f64>()
                / (n[k] - 1.0);
            assert!(common::lre(sd, var.sqrt() * 1e-6) >= 12.0, "{g}");
        }
    }
}

/// Issue 13: a characteristic without limits (no configured origin) whose first value is a typo:
/// the origin is the median of its first values, not the typo, so the other values keep their
/// digits (the typo itself is stored: without limits nothing says it is implausible).
#[test]
fn issue_13_wild_first_value_without_limits_does_not_fix_the_origin() {
    let dir = setup("issue-13-wild-no-limits");
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    csv.push_str("2026-11-02T06:00:00Z,flatness,10000123000000,M1\n");
    let mut groups: Vec<Vec<i64>> = vec![Vec::new(); 2];
    for i in 0..40i64 {
        let m = (i % 2) as usize;
        let um = 100 + (i * 29 % 13) + if m == 1 { 4 } else { 0 };
        groups[m].push(um);
        csv.push_str(&format!(
            "2026-11-03T{:02}:{:02}:00Z,flatness,0.{:06},M{}\n",
            7 + i / 20,
            (i % 20) * 2,
            um,
            m + 1
        ));
    }
    std::fs::write(dir.join("f.csv"), &csv).unwrap();
    let o = run(&dir, &["import", "f.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let o = run(&dir, &["check", "--day", "2026-11-03", "--json"]);
    let doc: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let test = &doc["tests"][0];
    let origin: f64 = test["groups"][0]["origin"]
        .as_str()
        .unwrap()
        .parse()
        .unwrap();
    assert!(origin < 1.0, "origin {origin} is the typo");
    let n = [20.0, 20.0];
    let sums: Vec<f64> = groups
        .iter()
        .map(|g| g.iter().sum::<i64>() as f64)
        .collect();
    let grand = (sums[0] + sums[1]) / 40.0;
    let ss_b: f64 = (0..2)
        .map(|k| n[k] * (sums[k] / n[k] - grand).powi(2))
        .sum();
    let ss_w: f64 = (0..2)
        .map(|k| {
            groups[k]
                .iter()
                .map(|&v| (v as f64 - sums[k] / n[k]).powi(2))
                .sum::<f64>()
        })
        .sum();
    let f_ref = ss_b / (ss_w / 38.0);
    let f = test["anova"]["f"].as_f64().unwrap();
    assert!(common::lre(f, f_ref) >= 12.0, "F {f} vs {f_ref}");
}

/// Issue 15: an export that overlaps the previous one (the last day again, with the next) is not
/// counted twice: identical rows are counted as duplicates and not stored, a row with the same
/// characteristic, time and levels but another value is rejected naming both values, and the
/// summary reads read = stored + duplicate + rejected. Invented data.
#[test]
fn issue_15_overlapping_export_is_not_counted_twice() {
    let dir = setup("issue-15-overlap");
    let row = |day: u32, i: u32, um: u32| {
        format!(
            "2026-11-{day:02}T{:02}:{:02}:00Z,bore_diameter,42.{um:06},M{}\n",
            7 + i / 20,
            (i % 20) * 2,
            1 + i % 3
        )
    };
    let header = "timestamp,characteristic,value,machine\n";
    let mut first = String::from(header);
    for day in [3, 4] {
        for i in 0..30 {
            first.push_str(&row(day, i, 10 + (i * 7) % 9));
        }
    }
    std::fs::write(dir.join("week1.csv"), &first).unwrap();
    let o = run(&dir, &["import", "week1.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    // The re-export: day 4 again (one value changed at the source) and day 5.
    let mut second = String::from(header);
    for i in 0..30 {
        let um = if i == 5 { 99 } else { 10 + (i * 7) % 9 };
        second.push_str(&row(4, i, um));
    }
    for i in 0..30 {
        second.push_str(&row(5, i, 10 + (i * 5) % 9));
    }
    std::fs::write(dir.join("week1b.csv"), &second).unwrap();
    let o = run(&dir, &["import", "week1b.csv"]);
    let t = text(&o);
    assert!(o.status.success(), "{t}");
    assert!(
        t.contains("60 measurements: 30 stored, 29 already stored (duplicate), 1 rejected"),
        "{t}"
    );
    assert!(t.contains("conflicts with a stored measurement"), "{t}");
    assert!(
        t.contains("stored \"42.000018\", this row \"42.000099\""),
        "{t}"
    );
    // Day 4 holds 30 measurements, not 60; the database check agrees with the import records.
    let o = run(&dir, &["check", "--day", "2026-11-04", "--json"]);
    let doc: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(doc["tests"][0]["n_obs"], 30, "{}", text(&o));
    assert_eq!(n_measurements(&dir), 90);
    let o = run(&dir, &["db", "check"]);
    assert!(o.status.success(), "{}", text(&o));
}
