//! The same invented plant through both backends, command by command: an SQLite file and a
//! schema on the PostgreSQL server named by `SAMEWISE_TEST_POSTGRES` (skipped when it is unset;
//! `.ci/run` starts a server and sets it). Imports, checks, the scheduler, findings, history,
//! events, status, `db check` and the report give the same results: every number equal to at
//! least 12 significant digits (log relative error, as NIST StRD measures agreement), every
//! state, flag and name the same. Only what names the database or the clock may differ.

mod common;

use std::path::Path;

use common::{invented_plant, lre, output_text, samewise, temp_dir};
use serde_json::Value;

/// Keys whose values name the database, a file or a clock reading, or hash the configuration
/// (which names the database).
fn ignored(key: &str) -> bool {
    key == "database"
        || key == "config_hash"
        || key == "recorded"
        // the scheduler's log lines: when each line was written
        || key == "time"
        || key == "path"
        || key.ends_with("_at")
        || key.ends_with("_utc")
        || key == "elapsed_s"
        || key == "generated"
}

/// Compares two documents: numbers to >= 12 significant digits, everything else exactly.
fn same(a: &Value, b: &Value, at: &str, worst: &mut f64) {
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => {
            let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
            if x != y {
                let digits = lre(y, x);
                *worst = worst.min(digits);
                assert!(digits >= 12.0, "{at}: {x} vs {y} ({digits:.1} digits)");
            }
        }
        (Value::Object(x), Value::Object(y)) => {
            let keys = |m: &serde_json::Map<String, Value>| m.keys().cloned().collect::<Vec<_>>();
            assert_eq!(keys(x), keys(y), "{at}: keys");
            for (k, v) in x {
                if !ignored(k) {
                    same(v, &y[k], &format!("{at}.{k}"), worst);
                }
            }
        }
        (Value::Array(x), Value::Array(y)) => {
            assert_eq!(x.len(), y.len(), "{at}: lengths");
            for (i, (p, q)) in x.iter().zip(y).enumerate() {
                same(p, q, &format!("{at}[{i}]"), worst);
            }
        }
        _ => assert_eq!(a, b, "{at}"),
    }
}

fn json(dir: &Path, args: &[&str]) -> Value {
    let out = samewise(dir, args);
    let text = String::from_utf8_lossy(&out.stdout).to_string();
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{args:?}: {e}\n{}", output_text(&out)))
}

fn json_lines(dir: &Path, args: &[&str]) -> Vec<Value> {
    let out = samewise(dir, args);
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("{args:?}: {e}: {l}")))
        .collect()
}

/// A schema name of its own for this run, and a guard that drops it.
struct Schema {
    url: String,
    name: String,
}

impl Drop for Schema {
    fn drop(&mut self) {
        let _ = std::process::Command::new("psql")
            .args([
                self.url.as_str(),
                "-qc",
                &format!("DROP SCHEMA IF EXISTS {} CASCADE", self.name),
            ])
            .output();
    }
}

#[test]
fn the_invented_plant_gives_the_same_results_on_both_backends() {
    let Ok(url) = std::env::var("SAMEWISE_TEST_POSTGRES") else {
        assert!(
            std::env::var_os("CI").is_none(),
            "SAMEWISE_TEST_POSTGRES is not set in CI (.ci/run starts a server and sets it)"
        );
        eprintln!("SAMEWISE_TEST_POSTGRES is not set: PostgreSQL test skipped");
        return;
    };
    let schema = Schema {
        url: url.clone(),
        name: format!("it_{}", std::process::id()),
    };
    let lite = temp_dir("backends-sqlite");
    let pg = temp_dir("backends-postgres");
    invented_plant(&lite, 5);
    std::fs::copy(lite.join("measurements.csv"), pg.join("measurements.csv")).unwrap();
    let config = common::CONFIG.replace("database = \"plant.db\"\n", "");
    std::fs::write(
        pg.join("plant.toml"),
        format!(
            "{config}\n[database]\nurl = \"{url}\"\nschema = \"{}\"\n",
            schema.name
        ),
    )
    .unwrap();
    let text = common::samewise_ok(&pg, &["init"]);
    assert!(
        text.contains(&format!("created schema {}", schema.name)),
        "{text}"
    );
    let text = common::samewise_ok(&pg, &["import", "measurements.csv"]);
    assert!(text.contains("2400 measurements: 2400 stored"), "{text}");
    // The same file again is refused, nothing written.
    let out = samewise(&pg, &["import", "measurements.csv"]);
    assert!(!out.status.success(), "{}", output_text(&out));

    let mut worst = f64::INFINITY;
    let both = |args: &[&str], worst: &mut f64| {
        let (a, b) = (json(&lite, args), json(&pg, args));
        same(&a, &b, &args.join(" "), worst);
        b
    };
    // The scheduler over every period, then single days and a range by hand.
    let (a, b) = (
        json_lines(
            &lite,
            &["schedule", "due", "--now", "2026-12-03T12:00:00Z", "--json"],
        ),
        json_lines(
            &pg,
            &["schedule", "due", "--now", "2026-12-03T12:00:00Z", "--json"],
        ),
    );
    assert_eq!(a.len(), b.len());
    assert!(b.len() >= 5, "{b:?}");
    for (i, (x, y)) in a.iter().zip(&b).enumerate() {
        same(x, y, &format!("schedule line {i}"), &mut worst);
    }
    for day in ["2026-11-28", "2026-11-30", "2026-12-02"] {
        let doc = both(&["check", "--day", day, "--stored", "--json"], &mut worst);
        assert!(
            doc["tests"].as_array().is_some_and(|t| !t.is_empty()),
            "{doc}"
        );
    }
    let doc = both(&["check", "--day", "2026-12-01", "--json"], &mut worst);
    // The shifted machine is found on both.
    let bore = doc["tests"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["characteristic"] == "bore" && t["factor"] == "machine")
        .unwrap_or_else(|| panic!("no bore x machine test: {doc}"));
    assert!(
        bore["state"].as_str().unwrap_or("").starts_with("differs"),
        "{bore}"
    );
    both(
        &[
            "check",
            "--from",
            "2026-11-28",
            "--to",
            "2026-12-02",
            "--json",
        ],
        &mut worst,
    );
    both(&["findings", "--all", "--json"], &mut worst);
    both(
        &[
            "history",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--json",
        ],
        &mut worst,
    );
    for dir in [&lite, &pg] {
        common::samewise_ok(
            dir,
            &[
                "event",
                "add",
                "--at",
                "2026-11-30 05:00",
                "--note",
                "new insert on M2",
                "--where",
                "machine=M2",
            ],
        );
    }
    both(&["event", "list", "--json"], &mut worst);
    both(&["import", "list", "--json"], &mut worst);
    both(&["status", "--json"], &mut worst);
    let check = both(&["db", "check", "--json"], &mut worst);
    assert_eq!(check["sound"], true, "{check}");
    // The monthly report is written from either.
    for dir in [&lite, &pg] {
        common::samewise_ok(
            dir,
            &["report", "--month", "2026-11", "--out", "review.html"],
        );
        let html = std::fs::read_to_string(dir.join("review.html")).unwrap();
        assert!(html.contains("bore"), "report of {}", dir.display());
    }
    eprintln!("fewest significant digits in agreement: {worst:.1}");
}
