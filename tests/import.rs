//! `samewise init / import / status / event / db` driven as a binary, each test in its own
//! temporary directory. Data are invented; DST dates are those of the IANA tz database for
//! Europe/Berlin (2026-03-29 02:00 -> 03:00, 2026-10-25 03:00 -> 02:00).

use std::path::{Path, PathBuf};
use std::process::Command;

use samewise::config::Config;
use samewise::storage::PlantStore;

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
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, CONFIG)).unwrap();
    let o = run(&dir, &["init"]);
    assert!(o.status.success(), "{}", text(&o));
    dir
}

fn store(dir: &Path) -> Box<dyn PlantStore> {
    common::open_store(dir, "plant.db")
}

/// Measurements stored, over every characteristic.
fn total_obs(s: &dyn PlantStore) -> u64 {
    let status = s.status().unwrap();
    status.characteristics.iter().map(|c| c.n_obs).sum()
}

fn n_measurements(dir: &Path) -> u64 {
    total_obs(&*store(dir))
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
    if common::postgres_backend().is_some() {
        // A server database is backed up with the server's own tool: the command says how.
        assert!(!o.status.success(), "{}", text(&o));
        assert!(text(&o).contains("pg_dump --schema="), "{}", text(&o));
        return;
    }
    assert!(o.status.success(), "{}", text(&o));
    let copy = common::open_store(&dir, "copy.db");
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
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, CONFIG)).unwrap();
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
    let s = samewise::storage::open(&cfg).unwrap();
    assert_eq!(s.status().unwrap().n_imports, 0);
    let total = total_obs(&*s);
    assert_eq!(total, 0);
    assert!(s.integrity_check().unwrap().is_ok());
    drop(s);
    let o = run(&dir, &["import", "--config", &config, "big.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let s = samewise::storage::open(&cfg).unwrap();
    let total = total_obs(&*s);
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
    let reader = samewise::storage::open(&cfg).unwrap();
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
            let k: usize = g["name"].as_str().unwrap()[1..].parse::<usize>().unwrap() - 1;
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

/// A wide file of 3,000 bad rows x 300 characteristic columns (issue 15): one rejection record
/// per bad row, the database stays small, the counts are exact.
#[test]
fn issue_15_wide_bad_rows_are_one_record_each() {
    let dir = temp_dir("issue-15-wide-bad");
    let mut config = String::from(
        "[plant]\nname = \"Invented wide plant\"\ntime_zone = \"UTC\"\ndatabase = \"plant.db\"\n\n[[factor]]\nname = \"machine\"\n",
    );
    let names: Vec<String> = (0..300).map(|i| format!("c{i:03}")).collect();
    for n in &names {
        config.push_str(&format!("\n[[characteristic]]\nname = \"{n}\"\n"));
    }
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &config)).unwrap();
    assert!(run(&dir, &["init"]).status.success());
    let mut csv = format!("timestamp,machine,{}\n", names.join(","));
    let cells = vec!["1.25"; 300].join(",");
    // Two good rows, then 3,000 rows whose timestamp is unreadable.
    csv.push_str(&format!("2026-11-30T07:00:00Z,M1,{cells}\n"));
    csv.push_str(&format!("2026-11-30T07:01:00Z,M2,{cells}\n"));
    for i in 0..3000 {
        csv.push_str(&format!("30.11.2026 25:{:02},M1,{cells}\n", i % 60));
    }
    std::fs::write(dir.join("wide.csv"), &csv).unwrap();
    let o = run(&dir, &["import", "wide.csv", "--rejects", "rej.csv"]);
    let t = text(&o);
    assert!(o.status.success(), "{t}");
    assert!(
        t.contains("3002 rows read, 900600 measurements: 600 stored, 0 already stored (duplicate), 900000 rejected"),
        "{t}"
    );
    assert!(t.contains("(the whole row: 300 measurements)"), "{t}");
    let rejects = std::fs::read_to_string(dir.join("rej.csv")).unwrap();
    assert_eq!(rejects.lines().count(), 1 + 3000, "one line per bad row");
    assert!(rejects.lines().nth(1).unwrap().ends_with(",300"));
    let s = store(&dir);
    assert_eq!(s.status().unwrap().n_rejected, 3000, "records");
    assert!(s.integrity_check().unwrap().is_ok());
    drop(s);
    // 3,000 records of at most 1,000 characters each: a few MB, not a gigabyte.
    let size: u64 = if common::postgres_backend().is_some() {
        common::sql_rows(&dir, "SELECT pg_total_relation_size('rejected_rows')")[0][0]
            .parse()
            .unwrap()
    } else {
        std::fs::metadata(dir.join("plant.db")).unwrap().len()
            + std::fs::metadata(dir.join("plant.db-wal")).map_or(0, |m| m.len())
    };
    assert!(size < 16 << 20, "database of {size} bytes");
}

/// More bad rows than the database keeps per import: the counts stay exact, the records past
/// the bound are counted, and `--rejects` holds every one (issue 15).
#[test]
fn issue_15_rejection_records_are_bounded_and_counted() {
    let dir = setup("issue-15-reject-cap");
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    csv.push_str("2026-11-30T07:00:00Z,bore_diameter,42.001,M1\n");
    let bad = samewise::storage::MAX_KEPT_REJECTIONS + 2_500;
    for i in 0..bad {
        csv.push_str(&format!("2026-11-30T07:00:00Z,bore_diameter,x{i},M1\n"));
    }
    std::fs::write(dir.join("bad.csv"), &csv).unwrap();
    let o = run(&dir, &["import", "bad.csv", "--rejects", "rej.csv"]);
    let t = text(&o);
    assert!(o.status.success(), "{t}");
    assert!(
        t.contains(&format!(
            "1 stored, 0 already stored (duplicate), {bad} rejected"
        )),
        "{t}"
    );
    assert!(
        t.contains(
            "the database keeps the first 10000 (the other 2500 rejected measurements are counted"
        ),
        "{t}"
    );
    let rejects = std::fs::read_to_string(dir.join("rej.csv")).unwrap();
    assert_eq!(rejects.lines().count() as u64, 1 + bad);
    assert!(
        rejects.contains(&format!("\"x{}\"", bad - 1))
            || rejects.contains(&format!("x{}", bad - 1))
    );
    let s = store(&dir);
    assert_eq!(
        s.status().unwrap().n_rejected,
        samewise::storage::MAX_KEPT_REJECTIONS
    );
    // db check: the import's record (rejected minus not kept) agrees with the stored records.
    assert!(
        s.integrity_check().unwrap().is_ok(),
        "{:?}",
        s.integrity_check().unwrap()
    );
}

/// An import that fails takes its lines back out of the --rejects file (issue 15).
#[test]
fn issue_15_failed_import_leaves_no_rejects_lines() {
    let dir = setup("issue-15-reject-rollback");
    std::fs::write(dir.join("a.csv"), MIXED).unwrap();
    assert!(run(&dir, &["import", "a.csv"]).status.success());
    // The same file again is a duplicate: refused; a second file with one bad row is stored.
    std::fs::write(
        dir.join("b.csv"),
        "timestamp,characteristic,value,machine\n2026-12-01T07:00:00Z,bore_diameter,42.001,M1\n2026-12-01T07:01:00Z,bore_diameter,oops,M1\n",
    )
    .unwrap();
    // Read from a pipe the duplicate is found only at the end, after its six rejections were
    // written: they must be taken out again.
    use std::io::Write as _;
    let mut child = Command::new(bin())
        .current_dir(&dir)
        .args(["import", "-", "b.csv", "--rejects", "rej.csv"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(MIXED.as_bytes())
        .unwrap();
    let o = child.wait_with_output().unwrap();
    assert!(!o.status.success());
    assert!(text(&o).contains("already imported"), "{}", text(&o));
    let rejects = std::fs::read_to_string(dir.join("rej.csv")).unwrap();
    assert_eq!(
        rejects.lines().count(),
        2,
        "header and b.csv's one rejection: {rejects}"
    );
    assert!(
        rejects.lines().nth(1).unwrap().starts_with("b.csv,3,"),
        "{rejects}"
    );
}

/// Measurement identity (issue 15): a layout names a part id column and identifies a measurement
/// by characteristic and part. A re-export that gives the same parts new timestamps (the CMM
/// report was regenerated) is counted as duplicates; a part whose value changed is a conflict
/// naming both values; new parts are stored.
#[test]
fn issue_15_identity_by_part_id() {
    let dir = temp_dir("issue-15-identity");
    let config = format!(
        "{CONFIG}\n[[layout]]\nname = \"cmm\"\nkind = \"long\"\ntimestamp = \"measured\"\npart = \"serial\"\nidentity = [\"characteristic\", \"part\"]\n"
    );
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &config)).unwrap();
    assert!(run(&dir, &["init"]).status.success());
    let header = "measured,serial,characteristic,value,machine\n";
    let mut first = String::from(header);
    for i in 0..10 {
        first.push_str(&format!(
            "2026-11-30T07:{i:02}:00Z,SN{i:04},bore_diameter,42.00{},M{}\n",
            i % 10,
            1 + i % 2
        ));
    }
    std::fs::write(dir.join("r1.csv"), &first).unwrap();
    let o = run(&dir, &["import", "r1.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    // Regenerated report: the same ten parts with the report's time (one part's value
    // corrected at the source), and two new parts.
    let mut second = String::from(header);
    for i in 0..10 {
        let v = if i == 3 {
            "42.0111".to_string()
        } else {
            format!("42.00{}", i % 10)
        };
        second.push_str(&format!(
            "2026-11-30T15:00:00Z,SN{i:04},bore_diameter,{v},M{}\n",
            1 + i % 2
        ));
    }
    for i in 10..12 {
        second.push_str(&format!(
            "2026-11-30T15:{i:02}:00Z,SN{i:04},bore_diameter,42.005,M1\n"
        ));
    }
    std::fs::write(dir.join("r2.csv"), &second).unwrap();
    let o = run(&dir, &["import", "r2.csv"]);
    let t = text(&o);
    assert!(o.status.success(), "{t}");
    assert!(
        t.contains("12 measurements: 2 stored, 9 already stored (duplicate), 1 rejected"),
        "{t}"
    );
    assert!(t.contains("stored \"42.003\", this row \"42.0111\""), "{t}");
    assert_eq!(n_measurements(&dir), 12);
    // A row without its part id cannot be identified: rejected with the reason.
    std::fs::write(
        dir.join("r3.csv"),
        format!("{header}2026-11-30T16:00:00Z,,bore_diameter,42.001,M1\n2026-11-30T16:01:00Z,SN0100,bore_diameter,42.001,M1\n"),
    )
    .unwrap();
    let o = run(&dir, &["import", "r3.csv"]);
    let t = text(&o);
    assert!(t.contains("the part id identifies the measurement"), "{t}");
    assert!(run(&dir, &["db", "check"]).status.success());
}

/// The default identity (characteristic, time, every factor level) with a part column: the same
/// instant and levels but another part is a new measurement (two parts gauged together).
#[test]
fn issue_15_default_identity_includes_the_part() {
    let dir = temp_dir("issue-15-identity-default");
    let config =
        format!("{CONFIG}\n[[layout]]\nname = \"cmm\"\nkind = \"long\"\npart = \"serial\"\n");
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &config)).unwrap();
    assert!(run(&dir, &["init"]).status.success());
    let csv = "timestamp,serial,characteristic,value,machine\n\
               2026-11-30T07:00:00Z,A1,bore_diameter,42.001,M1\n\
               2026-11-30T07:00:00Z,A2,bore_diameter,42.002,M1\n";
    std::fs::write(dir.join("a.csv"), csv).unwrap();
    assert!(run(&dir, &["import", "a.csv"]).status.success());
    std::fs::write(
        dir.join("b.csv"),
        format!("{csv}2026-11-30T07:05:00Z,A3,bore_diameter,42.003,M1\n"),
    )
    .unwrap();
    let o = run(&dir, &["import", "b.csv"]);
    let t = text(&o);
    assert!(
        t.contains("1 stored, 2 already stored (duplicate), 0 rejected"),
        "{t}"
    );
    assert_eq!(n_measurements(&dir), 3);
}

/// Identity settings are checked with the configuration.
#[test]
fn issue_15_identity_configuration_errors() {
    let dir = temp_dir("issue-15-identity-config");
    for (identity, part, expected) in [
        ("[\"characteristic\", \"machine\"]", "", "must include \"time\" or \"part\""),
        ("[\"time\", \"part\"]", "", "\"part\" needs a part column"),
        ("[\"time\", \"machin\"]", "", "is not \"characteristic\", \"time\", \"part\" or a configured factor (known: characteristic, time, part, machine)"),
        ("[\"time\"]", "part = \"machine\"\n", "column \"machine\" is used both as a factor and as the part id"),
    ] {
        let config = format!(
            "{CONFIG}\n[[layout]]\nname = \"x\"\nkind = \"long\"\n{part}identity = {identity}\n"
        );
        std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &config)).unwrap();
        let o = run(&dir, &["init"]);
        assert!(!o.status.success());
        assert!(text(&o).contains(expected), "{identity}: {}", text(&o));
    }
}

/// An identity without the factor levels (issue 15): a re-export whose machine column was
/// corrected at the source repeats the same measurements (time and value) and is counted as
/// duplicates, not stored a second time under the other machine.
#[test]
fn issue_15_identity_without_levels() {
    let dir = temp_dir("issue-15-identity-levels");
    let config = format!(
        "{CONFIG}\n[[layout]]\nname = \"x\"\nkind = \"long\"\nidentity = [\"characteristic\", \"time\"]\n"
    );
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &config)).unwrap();
    assert!(run(&dir, &["init"]).status.success());
    let header = "timestamp,characteristic,value,machine\n";
    std::fs::write(
        dir.join("a.csv"),
        format!("{header}2026-11-30T07:00:00Z,bore_diameter,42.001,M1\n2026-11-30T07:01:00Z,bore_diameter,42.002,M1\n"),
    )
    .unwrap();
    assert!(run(&dir, &["import", "a.csv"]).status.success());
    std::fs::write(
        dir.join("b.csv"),
        format!("{header}2026-11-30T07:00:00Z,bore_diameter,42.001,M2\n2026-11-30T07:01:00Z,bore_diameter,42.009,M2\n2026-11-30T07:02:00Z,bore_diameter,42.003,M2\n"),
    )
    .unwrap();
    let o = run(&dir, &["import", "b.csv"]);
    let t = text(&o);
    assert!(
        t.contains("1 stored, 1 already stored (duplicate), 1 rejected"),
        "{t}"
    );
    assert!(t.contains("stored \"42.002\", this row \"42.009\""), "{t}");
    assert_eq!(n_measurements(&dir), 3);
}

/// A German-locale CMM export (issue 15): semicolons between fields, decimal commas, local times
/// written day first. With `decimal = ","` every row is stored and the values are exactly those
/// of the same export written with points; a thousands separator is refused with its reason.
#[test]
fn issue_15_decimal_comma_cmm_file() {
    let dir = temp_dir("issue-15-decimal-comma");
    let layouts = r#"
[[layout]]
name = "cmm-de"
kind = "long"
timestamp = "Zeit"
timestamp_format = "%d.%m.%Y %H:%M:%S"
characteristic = "Merkmal"
value = "Messwert"
delimiter = ";"
decimal = ","
[layout.factors]
machine = "Maschine"

[[layout]]
name = "cmm-points"
kind = "long"
timestamp = "time"
characteristic = "feature"
value = "measured"
[layout.factors]
machine = "mach"
"#;
    std::fs::write(
        dir.join("plant.toml"),
        common::plant_config(&dir, &format!("{CONFIG}{layouts}")),
    )
    .unwrap();
    assert!(run(&dir, &["init"]).status.success());
    let mut de = String::from("Zeit;Merkmal;Messwert;Maschine\r\n");
    let mut points = String::from("time,feature,measured,mach\n");
    for i in 0..240u32 {
        let (h, m) = (7 + i / 60, i % 60);
        let v = format!("42,{:04}", 1000 + (i * 37) % 900);
        let machine = format!("M{}", 1 + i % 3);
        de.push_str(&format!(
            "30.11.2026 {h:02}:{m:02}:00;bore_diameter;{v};{machine}\r\n"
        ));
        points.push_str(&format!(
            "2026-11-30T{:02}:{m:02}:00Z,bore_diameter,{},{machine}\n",
            h,
            v.replace(',', ".")
        ));
    }
    de.push_str("30.11.2026 12:00:00;bore_diameter;1.042,0005;M1\r\n");
    std::fs::write(dir.join("de.csv"), &de).unwrap();
    let o = run(&dir, &["import", "de.csv"]);
    let t = text(&o);
    assert!(o.status.success(), "{t}");
    assert!(t.contains("(layout cmm-de)"), "{t}");
    assert!(
        t.contains("241 measurements: 240 stored, 0 already stored (duplicate), 1 rejected"),
        "{t}"
    );
    assert!(t.contains("thousands separators are not accepted"), "{t}");
    // The same values written with points, in another database: the exact same offsets.
    let dir2 = temp_dir("issue-15-decimal-points");
    std::fs::write(
        dir2.join("plant.toml"),
        common::plant_config(&dir2, &format!("{CONFIG}{layouts}")),
    )
    .unwrap();
    assert!(run(&dir2, &["init"]).status.success());
    std::fs::write(dir2.join("p.csv"), &points).unwrap();
    let o = run(&dir2, &["import", "p.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let values = |d: &Path| -> Vec<f64> {
        common::sql_rows(d, "SELECT value FROM measurement_values ORDER BY ts_ms")
            .iter()
            .map(|r| r[0].parse().unwrap())
            .collect()
    };
    // Local (Europe/Berlin, CET) 07:00 is 06:00 UTC: compare the values in time order.
    let (a, b) = (values(&dir), values(&dir2));
    assert_eq!(a.len(), 240);
    assert_eq!(a, b);
}

/// A decimal comma with a comma delimiter is refused in the configuration; `delimiter = "auto"`
/// finds the semicolon of a decimal-comma file (issue 15).
#[test]
fn issue_15_delimiter_auto_and_decimal_comma_configuration() {
    let dir = temp_dir("issue-15-delimiter-auto");
    std::fs::write(
        dir.join("plant.toml"),
        format!("{CONFIG}\n[[layout]]\nname = \"x\"\nkind = \"long\"\ndelimiter = \",\"\ndecimal = \",\"\n"),
    )
    .unwrap();
    let o = run(&dir, &["init"]);
    assert!(!o.status.success());
    assert!(
        text(&o).contains("delimiter and decimal separator are both \",\""),
        "{}",
        text(&o)
    );
    std::fs::write(
        dir.join("plant.toml"),
        format!("{CONFIG}\n[[layout]]\nname = \"x\"\nkind = \"long\"\ndelimiter = \"auto\"\ndecimal = \",\"\n"),
    )
    .unwrap();
    assert!(run(&dir, &["init"]).status.success());
    std::fs::write(
        dir.join("a.csv"),
        "timestamp;characteristic;value;machine\n2026-11-30T07:00:00Z;bore_diameter;42,001;M1\n2026-11-30T07:01:00Z;flatness;0,012;M2\n",
    )
    .unwrap();
    let o = run(&dir, &["import", "a.csv"]);
    assert!(text(&o).contains("2 stored"), "{}", text(&o));
    assert_eq!(n_measurements(&dir), 2);
}

/// Level hygiene (issue 15): control characters in a level are rejected with the character
/// shown escaped; levels that differ only in case are warned about, and `case = "upper"` makes
/// them one group.
#[test]
fn issue_15_level_hygiene() {
    let dir = setup("issue-15-levels");
    std::fs::write(
        dir.join("a.csv"),
        "timestamp,characteristic,value,machine\n\
         2026-11-30T07:00:00Z,bore_diameter,42.001,imm1\n\
         2026-11-30T07:01:00Z,bore_diameter,42.002,IMM1\n\
         2026-11-30T07:02:00Z,bore_diameter,42.003,M1\u{1b}[31m\n\
         2026-11-30T07:03:00Z,bore_diameter,42.004,M\u{0}2\n",
    )
    .unwrap();
    let o = run(&dir, &["import", "a.csv"]);
    let t = text(&o);
    assert!(
        t.contains("2 stored, 0 already stored (duplicate), 2 rejected"),
        "{t}"
    );
    assert!(t.contains("holds a control character"), "{t}");
    assert!(t.contains("\\u{1b}"), "the character shown escaped: {t}");
    assert!(
        t.contains(
            "factor machine has levels that differ only in case or blanks (\"IMM1\", \"imm1\")"
        ),
        "{t}"
    );
    // With case = "upper" the two spellings are one machine.
    let dir = temp_dir("issue-15-levels-upper");
    std::fs::write(
        dir.join("plant.toml"),
        CONFIG.replace(
            "[[factor]]\nname = \"machine\"",
            "[[factor]]\nname = \"machine\"\ncase = \"upper\"",
        ),
    )
    .unwrap();
    assert!(run(&dir, &["init"]).status.success());
    std::fs::write(
        dir.join("b.csv"),
        "timestamp,characteristic,value,machine\n\
         2026-11-30T07:00:00Z,bore_diameter,42.001,imm1\n\
         2026-11-30T07:01:00Z,bore_diameter,42.002,IMM1\n",
    )
    .unwrap();
    let o = run(&dir, &["import", "b.csv"]);
    let t = text(&o);
    assert!(t.contains("2 stored"), "{t}");
    assert!(!t.contains("differ only in case"), "{t}");
    let machines = common::sql_rows(&dir, "SELECT DISTINCT machine FROM measurement_values");
    assert_eq!(machines, [["IMM1"]]);
}

/// Long layouts map a station's channel codes to characteristic names (issue 15): CH07 is
/// stored as bore_diameter; an unmapped code that is no configured name is rejected.
#[test]
fn issue_15_long_layout_maps_channel_codes() {
    let dir = temp_dir("issue-15-codes");
    let layout = "\n[[layout]]\nname = \"station\"\nkind = \"long\"\ncharacteristic = \"channel\"\n[layout.characteristics]\nbore_diameter = \"CH07\"\nflatness = \"CH12\"\n";
    std::fs::write(
        dir.join("plant.toml"),
        common::plant_config(&dir, &format!("{CONFIG}{layout}")),
    )
    .unwrap();
    assert!(run(&dir, &["init"]).status.success());
    std::fs::write(
        dir.join("s.csv"),
        "timestamp,channel,value,machine\n\
         2026-11-30T07:00:00Z,CH07,42.001,M1\n\
         2026-11-30T07:00:00Z,CH12,0.012,M1\n\
         2026-11-30T07:00:00Z,CH99,1.5,M1\n\
         2026-11-30T07:01:00Z,bore_diameter,42.002,M1\n",
    )
    .unwrap();
    let o = run(&dir, &["import", "s.csv"]);
    let t = text(&o);
    assert!(
        t.contains("3 stored, 0 already stored (duplicate), 1 rejected"),
        "{t}"
    );
    assert!(t.contains("unknown characteristic \"CH99\""), "{t}");
    let n = common::sql_rows(
        &dir,
        "SELECT COUNT(*) FROM measurement_values WHERE characteristic = 'bore_diameter'",
    );
    assert_eq!(n, [["2"]]);
}
