//! `samewise investigate`: drives the binary on an invented plant (one characteristic, three
//! machines, one value per machine per hour for 20 days; machine M3 moves up by 0.004 mm at
//! 2026-11-10 12:00 UTC, when an event is logged). All data here are invented.

use std::path::Path;
use std::process::Output;

mod common;
use common::{samewise as run, samewise_ok as ok, temp_dir};

/// `samewise investigate bore_diameter --by machine` followed by `more`.
fn investigate(dir: &Path, more: &[&str]) -> Output {
    let args = [&["investigate", "bore_diameter", "--by", "machine"], more].concat();
    run(dir, &args)
}

/// [`investigate`] that must succeed: its standard output.
fn investigate_ok(dir: &Path, more: &[&str]) -> String {
    let args = [&["investigate", "bore_diameter", "--by", "machine"], more].concat();
    ok(dir, &args)
}

const CONFIG: &str = r#"
# invented plant for the investigate tests
[plant]
name = "invented test plant"
time_zone = "UTC"
production_day_start = "06:00"
database = "plant.db"

[[characteristic]]
name = "bore_diameter"
unit = "mm"
lsl = 41.98
usl = 42.02

[[factor]]
name = "machine"
column = "machine"
"#;

/// Invented values: 42.000 + machine offset + a deterministic wobble of +-0.0015 mm, and +0.004
/// for M3 from 2026-11-10 12:00 on. `with_m4_after` adds a machine M4 that only starts after it.
fn write_plant(dir: &Path, with_m4_after: bool) {
    std::fs::write(dir.join("plant.toml"), common::plant_config(dir, CONFIG)).unwrap();
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    let wobble = [
        0.0, 0.0012, -0.0008, 0.0015, -0.0013, 0.0004, -0.0002, 0.0009, -0.0015,
    ];
    let mut k = 0usize;
    for day in 1..=20u32 {
        for hour in 0..24u32 {
            for (m, base) in [("M1", 0.0), ("M2", 0.001), ("M3", -0.001), ("M4", 0.0)] {
                let after = day > 10 || (day == 10 && hour >= 12);
                if m == "M4" && !(with_m4_after && after) {
                    continue;
                }
                let shift = if m == "M3" && after { 0.004 } else { 0.0 };
                let v = 42.0 + base + shift + wobble[k % wobble.len()];
                k += 7;
                csv.push_str(&format!(
                    "2026-11-{day:02}T{hour:02}:30:00Z,bore_diameter,{v:.4},{m}\n"
                ));
            }
        }
    }
    std::fs::write(dir.join("cmm.csv"), csv).unwrap();
    ok(dir, &["init"]);
    ok(dir, &["import", "cmm.csv"]);
    ok(
        dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-10T12:00:00Z",
            "--note",
            "new insert holder on M3",
        ],
    );
}

#[test]
fn event_before_after_shows_the_moved_machine() {
    let dir = temp_dir("event");
    write_plant(&dir, false);
    let text = investigate_ok(&dir, &["--event", "1"]);
    assert!(text.contains("new insert holder on M3"), "{text}");
    assert!(text.contains("Two-way ANOVA"), "{text}");
    assert!(text.contains("Caution"), "{text}");
    let json = investigate_ok(&dir, &["--event", "1", "--json"]);
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    let groups = v["groups"].as_array().unwrap();
    assert_eq!(groups.len(), 3);
    let m3 = groups.iter().find(|g| g["name"] == "M3").unwrap();
    let s = &m3["mean_shift"];
    assert!((s["shift"].as_f64().unwrap() - 0.004).abs() < 0.0005, "{s}");
    assert!(s["ci"]["low"].as_f64().unwrap() < 0.004 && 0.004 < s["ci"]["high"].as_f64().unwrap());
    let m1 = groups.iter().find(|g| g["name"] == "M1").unwrap();
    assert!(m1["mean_shift"]["p"].as_f64().unwrap() > 0.001);
    // Issue 16: per-group p-values adjusted across the groups (Benjamini-Hochberg over 3 groups:
    // the adjusted p of each is at least its raw p and at most 3 times it), shifts in SD units.
    for g in groups {
        let s = &g["mean_shift"];
        let (p, q) = (s["p"].as_f64().unwrap(), s["p_adjusted"].as_f64().unwrap());
        assert!(q >= p && q <= (3.0 * p).min(1.0) + 1e-15, "{s}");
        assert_eq!(
            s["p_adjusted_method"],
            "Benjamini-Hochberg across the compared groups"
        );
        assert!(s["shift_sd"].as_f64().is_some(), "{s}");
    }
    assert!(m3["mean_shift"]["shift_sd"].as_f64().unwrap() > 2.0);
    assert!(v["pooled"]["mean_shift"]["p_adjusted"].is_null());
    assert!(v["pooled"]["mean_shift"]["p_adjusted_reason"].is_string());
    assert!(text.contains("p adj"), "{text}");
    // Times in the plant's zone with its offset.
    // (this invented plant's zone is UTC: the offset is +00:00).
    assert_eq!(v["change"]["at"], "2026-11-10T12:00:00+00:00");
    let inter = &v["two_way"]["type2"]["interaction"]["test"]["p"];
    assert!(inter.as_f64().unwrap() < 1e-6, "{inter}");
    // 14 days each side around 2026-11-10 12:00 covers all 20 days.
    assert_eq!(
        v["pooled"]["n_before"].as_u64().unwrap() + v["pooled"]["n_after"].as_u64().unwrap(),
        1440
    );
}

#[test]
fn scan_without_event_finds_the_change_and_the_event() {
    let dir = temp_dir("scan");
    write_plant(&dir, false);
    let json = investigate_ok(
        &dir,
        &["--to", "2026-11-21T00:00:00Z", "--before", "20d", "--json"],
    );
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    let m3 = v["groups"]
        .as_array()
        .unwrap()
        .iter()
        .find(|g| g["name"] == "M3")
        .unwrap();
    let cps = m3["change_points"].as_array().unwrap();
    assert!(!cps.is_empty(), "{m3}");
    // Stated tolerance: within 3 hours of 2026-11-10 12:00 (the first value after is 12:30).
    let at = cps[0]["at_ms"].as_i64().unwrap();
    let truth = 1_794_313_800_000i64; // 2026-11-10T12:30:00Z
    assert!((at - truth).abs() <= 3 * 3_600_000, "{at}");
    assert_eq!(
        cps[0]["nearest_events"][0]["note"],
        "new insert holder on M3"
    );
}

#[test]
fn event_outside_the_data_is_a_clear_error() {
    let dir = temp_dir("outside");
    write_plant(&dir, false);
    let out = investigate(&dir, &["--at", "2027-03-01T00:00:00Z"]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bore_diameter"), "{err}");
    assert!(
        err.contains("no values") || err.contains("outside the data"),
        "{err}"
    );
    assert!(!err.contains("panicked"), "{err}");
}

#[test]
fn too_little_data_on_one_side_is_a_clear_error() {
    let dir = temp_dir("little");
    write_plant(&dir, false);
    // Change at 00:31 on the first day with one hour before it: each machine has only its 00:30
    // value before the change.
    let out = investigate(&dir, &["--at", "2026-11-01T00:31:00Z", "--before", "1h"]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("on each side"), "{err}");
    assert!(err.contains("--before"), "{err}");
    assert!(!err.contains("panicked"), "{err}");
}

#[test]
fn group_on_one_side_only_is_named() {
    let dir = temp_dir("oneside");
    write_plant(&dir, true);
    let text = investigate_ok(&dir, &["--event", "1"]);
    assert!(
        text.contains("machine M4: no values before the change"),
        "{text}"
    );
}

#[test]
fn bad_flags_are_clear_errors() {
    let dir = temp_dir("flags");
    write_plant(&dir, false);
    let out = run(
        &dir,
        &[
            "investigate",
            "bore_diameter",
            "--by",
            "spindle",
            "--event",
            "1",
        ],
    );
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("unknown factor"));
    let out = investigate(&dir, &["--event", "99"]);
    assert!(String::from_utf8_lossy(&out.stderr).contains("no logged event has id 99"));
    let out = investigate(&dir, &["--at", "2026-11-10T12:00:00Z", "--before", "soon"]);
    assert!(String::from_utf8_lossy(&out.stderr).contains("--before soon"));
}
