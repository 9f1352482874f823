//! One command-line vocabulary (issue 17, item 7), through the binary: one time grammar for every
//! instant and day flag, the characteristic and factor given as `--characteristic` and `--by`
//! everywhere, `--kind` for the period kind, and an unknown name answered with the closest known
//! ones. On the invented test plant of tests/common (all data invented).
//!
//! Daylight-saving facts used below (tz database, EU rule: last Sunday of March and October at
//! 01:00 UTC): Europe/Berlin skips 02:00-03:00 local on 2026-03-29 (+01:00 to +02:00) and repeats
//! 02:00-03:00 local on 2026-10-25 (+02:00 to +01:00).

mod common;

use std::path::Path;

use common::{invented_plant, output_text, samewise, samewise_ok, temp_dir};
use serde_json::Value;

/// Runs a command that must fail with `code`; its standard error.
fn refused(dir: &Path, args: &[&str], code: i32) -> String {
    let out = samewise(dir, args);
    assert_eq!(
        out.status.code(),
        Some(code),
        "{args:?}:\n{}",
        output_text(&out)
    );
    String::from_utf8_lossy(&out.stderr).into_owned()
}

fn json(text: &str) -> Value {
    serde_json::from_str(text).unwrap_or_else(|e| panic!("{e}: {text}"))
}

/// An empty plant database in Europe/Berlin (the test plant's configuration, another zone).
fn berlin_plant(name: &str) -> std::path::PathBuf {
    let dir = temp_dir(name);
    let config = common::CONFIG.replace("time_zone = \"UTC\"", "time_zone = \"Europe/Berlin\"");
    assert_ne!(config, common::CONFIG);
    std::fs::write(dir.join("plant.toml"), config).unwrap();
    samewise_ok(&dir, &["init"]);
    dir
}

#[test]
fn one_instant_in_three_spellings_gives_one_result() {
    let dir = temp_dir("vocab-instant");
    invented_plant(&dir, 4);
    // The test plant keeps UTC: plant-local, plant-local with T and seconds, and RFC 3339 with
    // another offset all name 2026-11-30 06:00 UTC.
    let spellings = [
        "2026-11-30 06:00",
        "2026-11-30T06:00:00",
        "2026-11-30T07:00:00+01:00",
    ];
    let investigations: Vec<String> = spellings
        .iter()
        .map(|at| {
            samewise_ok(
                &dir,
                &[
                    "investigate",
                    "--characteristic",
                    "bore",
                    "--by",
                    "machine",
                    "--at",
                    at,
                    "--before",
                    "2d",
                    "--after",
                    "2d",
                    "--json",
                ],
            )
        })
        .collect();
    assert_eq!(investigations[0], investigations[1]);
    assert_eq!(investigations[0], investigations[2]);
    let v = json(&investigations[0]);
    assert_eq!(v["window"]["start"], "2026-11-28T06:00:00+00:00", "{v}");
    assert_eq!(v["window"]["end"], "2026-12-02T06:00:00+00:00", "{v}");
    // The old positional form gives the same report.
    let positional = samewise_ok(
        &dir,
        &[
            "investigate",
            "bore",
            "--by",
            "machine",
            "--at",
            "2026-11-30T06:00:00Z",
            "--before",
            "2d",
            "--after",
            "2d",
            "--json",
        ],
    );
    assert_eq!(positional, investigations[0]);

    // event add: one instant, three spellings.
    for (i, at) in spellings.iter().enumerate() {
        samewise_ok(
            &dir,
            &[
                "event",
                "add",
                "--at",
                at,
                "--note",
                &format!("spelling {i}"),
            ],
        );
    }
    let events = json(&samewise_ok(&dir, &["event", "list", "--json"]));
    let at: Vec<&str> = events["events"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["at"].as_str().unwrap())
        .collect();
    assert_eq!(at, vec!["2026-11-30T06:00:00+00:00"; 3], "{events}");
}

#[test]
fn schedule_due_now_takes_every_spelling() {
    // The day 2026-11-30 ends 2026-12-01 06:00 UTC and is due 2 h later: at 08:30 UTC three days
    // are due, at 07:30 only two. The -01:00 spelling read without its offset would be 07:30.
    let mut summaries = Vec::new();
    for (i, now) in [
        "2026-12-01 08:30",
        "2026-12-01T08:30",
        "2026-12-01T07:30:00-01:00",
    ]
    .iter()
    .enumerate()
    {
        let dir = temp_dir(&format!("vocab-now-{i}"));
        invented_plant(&dir, 3);
        let out = samewise(&dir, &["schedule", "due", "--now", now, "--json"]);
        assert_eq!(out.status.code(), Some(3), "{now}: {}", output_text(&out));
        let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
        let summary = json(stdout.lines().last().unwrap())["summary"].clone();
        assert_eq!(summary["periods_run"], 3, "{now}: {summary}");
        summaries.push(summary);
    }
    assert_eq!(summaries[0], summaries[1]);
    assert_eq!(summaries[0], summaries[2]);
}

#[test]
fn plant_local_times_are_read_in_the_plant_zone_and_dst_changes_refused() {
    let dir = berlin_plant("vocab-berlin");
    // 14:05 in Berlin in November is CET, +01:00.
    for (i, at) in [
        "2026-11-30 14:05",
        "2026-11-30T14:05:00",
        "2026-11-30T13:05:00Z",
    ]
    .iter()
    .enumerate()
    {
        samewise_ok(
            &dir,
            &[
                "event",
                "add",
                "--at",
                at,
                "--note",
                &format!("spelling {i}"),
            ],
        );
    }
    let events = json(&samewise_ok(&dir, &["event", "list", "--json"]));
    let listed = events["events"].as_array().unwrap();
    assert!(!listed.is_empty(), "{events}");
    for e in listed {
        assert_eq!(e["at"], "2026-11-30T14:05:00+01:00", "{events}");
    }

    // A time the spring change skipped: refused (exit 1) with its name and both readings.
    let err = refused(
        &dir,
        &["event", "add", "--at", "2026-03-29 02:30", "--note", "x"],
        1,
    );
    assert!(err.contains("--at 2026-03-29 02:30:"), "{err}");
    assert!(err.contains("does not exist in Europe/Berlin"), "{err}");
    assert!(
        err.contains("2026-03-29T02:30:00+01:00 (that is 03:30 CEST)"),
        "{err}"
    );
    assert!(
        err.contains("2026-03-29T02:30:00+02:00 (that is 01:30 CET)"),
        "{err}"
    );
    // A time the autumn change repeated, in another command and flag.
    let err = refused(&dir, &["schedule", "due", "--now", "2026-10-25T02:30"], 1);
    assert!(err.contains("--now 2026-10-25T02:30:"), "{err}");
    assert!(err.contains("occurs twice in Europe/Berlin"), "{err}");
    assert!(err.contains("2026-10-25T02:30:00+02:00 (CEST"), "{err}");
    assert!(err.contains("2026-10-25T02:30:00+01:00 (CET"), "{err}");
    let err = refused(
        &dir,
        &[
            "investigate",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--at",
            "2026-03-29 02:00",
        ],
        1,
    );
    assert!(err.contains("--at 2026-03-29 02:00:"), "{err}");
    assert!(err.contains("does not exist in Europe/Berlin"), "{err}");
    // Either reading with its offset is accepted; nothing was stored by the refusals.
    samewise_ok(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-03-29T02:30:00+01:00",
            "--note",
            "after the change",
        ],
    );
    let events = json(&samewise_ok(&dir, &["event", "list", "--json"]));
    let list = events["events"].as_array().unwrap();
    assert_eq!(list.len(), 4, "{events}");
    assert_eq!(list[0]["at"], "2026-03-29T03:30:00+02:00", "{events}");
}

#[test]
fn time_and_day_flags_of_the_wrong_shape_show_the_forms() {
    let dir = temp_dir("vocab-shapes");
    invented_plant(&dir, 1);
    // An instant flag: the flag, the value and the accepted forms.
    let err = refused(
        &dir,
        &["event", "add", "--at", "30.11.2026 14:05", "--note", "x"],
        2,
    );
    assert!(
        err.contains("'30.11.2026 14:05' for '--at <TIME>'"),
        "{err}"
    );
    assert!(err.contains("plant-local 2026-11-30 14:05"), "{err}");
    assert!(err.contains("RFC 3339 with an offset or Z"), "{err}");
    let err = refused(&dir, &["schedule", "due", "--now", "2026-12-01"], 2);
    assert!(err.contains("a day without a time of day"), "{err}");
    // A day flag.
    let err = refused(
        &dir,
        &["check", "--from", "2026-11-28", "--to", "2026-11-31"],
        2,
    );
    assert!(err.contains("'2026-11-31' for '--to <DAY>'"), "{err}");
    assert!(err.contains("no such date"), "{err}");
    let err = refused(
        &dir,
        &[
            "chart",
            "trend",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--from",
            "2026-11-28 06:00",
            "--out",
            "t.svg",
        ],
        2,
    );
    assert!(err.contains("without a time"), "{err}");
    let err = refused(&dir, &["findings", "--since", "yesterday"], 2);
    assert!(err.contains("YYYY-MM-DD"), "{err}");
    // A day --to is included: the range ends where the day after it starts (UTC plant,
    // production day from 06:00).
    let out = samewise(
        &dir,
        &[
            "check",
            "--from",
            "2026-11-28",
            "--to",
            "2026-11-29",
            "--json",
        ],
    );
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(doc["period"]["start"], "2026-11-28T06:00:00+00:00", "{doc}");
    assert_eq!(doc["period"]["end"], "2026-11-30T06:00:00+00:00", "{doc}");
}

#[test]
fn a_misspelled_name_gets_the_closest_in_every_command() {
    let dir = temp_dir("vocab-names");
    invented_plant(&dir, 3);
    samewise(&dir, &["schedule", "due", "--now", "2026-12-01T12:00:00Z"]);
    let chart = |more: &[&str]| -> Vec<String> {
        let mut args = vec!["chart"];
        args.extend_from_slice(more);
        args.extend_from_slice(&["--month", "2026-11", "--out", "t.svg"]);
        args.into_iter().map(str::to_string).collect()
    };
    let cases: Vec<(Vec<String>, &str)> = vec![
        (
            vec!["history", "--characteristic", "bor", "--by", "machine"]
                .into_iter()
                .map(str::to_string)
                .collect(),
            "unknown characteristic \"bor\" (did you mean \"bore\"?)",
        ),
        (
            vec!["history", "bor", "--by", "machine"]
                .into_iter()
                .map(str::to_string)
                .collect(),
            "unknown characteristic \"bor\" (did you mean \"bore\"?)",
        ),
        (
            vec!["history", "--characteristic", "bore", "--by", "machin"]
                .into_iter()
                .map(str::to_string)
                .collect(),
            "unknown factor \"machin\" (did you mean \"machine\"?)",
        ),
        (
            chart(&["trend", "--characteristic", "widht", "--by", "machine"]),
            "unknown characteristic \"widht\" (did you mean \"width\"?)",
        ),
        (
            chart(&["share", "--characteristic", "bore", "--by", "suplier"]),
            "unknown factor \"suplier\" (did you mean \"supplier\"?)",
        ),
        (
            vec![
                "investigate",
                "--characteristic",
                "bor",
                "--by",
                "machine",
                "--at",
                "2026-11-30 06:00",
            ]
            .into_iter()
            .map(str::to_string)
            .collect(),
            "unknown characteristic \"bor\" (did you mean \"bore\"?)",
        ),
        (
            vec![
                "investigate",
                "bore",
                "--by",
                "machin",
                "--at",
                "2026-11-30 06:00",
            ]
            .into_iter()
            .map(str::to_string)
            .collect(),
            "unknown factor \"machin\" (did you mean \"machine\"?)",
        ),
        (
            vec!["findings", "--characteristic", "bor"]
                .into_iter()
                .map(str::to_string)
                .collect(),
            "unknown characteristic \"bor\" (did you mean \"bore\"?)",
        ),
        (
            vec!["findings", "--all", "--by", "machin"]
                .into_iter()
                .map(str::to_string)
                .collect(),
            "unknown factor \"machin\" (did you mean \"machine\"?)",
        ),
        (
            vec![
                "compare",
                "measurements.csv",
                "--by",
                "machin",
                "--characteristic",
                "value",
            ]
            .into_iter()
            .map(str::to_string)
            .collect(),
            "column \"machin\" not found (did you mean \"machine\"?)",
        ),
    ];
    for (args, want) in &cases {
        let args: Vec<&str> = args.iter().map(String::as_str).collect();
        let err = refused(&dir, &args, 1);
        assert!(err.contains(want), "{args:?}: {err}");
    }
    // Nothing close: no guess, but the known names.
    let err = refused(
        &dir,
        &["history", "--characteristic", "zzzzzzzz", "--by", "machine"],
        1,
    );
    assert!(!err.contains("did you mean"), "{err}");
    assert!(err.contains("known in plant.toml: bore, width"), "{err}");
}

#[test]
fn kind_names_the_period_kind_on_chart_history_and_findings() {
    let dir = temp_dir("vocab-kind");
    invented_plant(&dir, 3);
    let out = samewise(&dir, &["schedule", "due", "--now", "2026-12-01T12:00:00Z"]);
    assert_eq!(out.status.code(), Some(3), "{}", output_text(&out));

    // history: --kind, the old --period-kind spelling and the positional characteristic agree.
    let canonical = samewise_ok(
        &dir,
        &[
            "history",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--kind",
            "day",
        ],
    );
    assert!(
        canonical.starts_with("bore by machine: last 3 day period(s)"),
        "{canonical}"
    );
    for other in [
        vec!["history", "bore", "--by", "machine"],
        vec![
            "history",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--period-kind",
            "day",
        ],
    ] {
        assert_eq!(samewise_ok(&dir, &other), canonical, "{other:?}");
    }
    let week = samewise_ok(
        &dir,
        &["history", "bore", "--by", "machine", "--kind", "week"],
    );
    assert!(
        week.starts_with("bore by machine: last 0 week period(s)"),
        "{week}"
    );
    let err = refused(
        &dir,
        &["history", "bore", "--by", "machine", "--kind", "fortnight"],
        2,
    );
    assert!(
        err.contains("[possible values: shift, day, week, month, range]"),
        "{err}"
    );
    // Both spellings of the characteristic at once are refused, not silently one of them.
    refused(
        &dir,
        &[
            "history",
            "bore",
            "--characteristic",
            "width",
            "--by",
            "machine",
        ],
        2,
    );

    // chart: --kind and --period-kind draw the same chart; a kind without runs is named.
    let trend = |kind_flag: &str, kind: &str, out: &str| {
        samewise(
            &dir,
            &[
                "chart",
                "trend",
                "--characteristic",
                "bore",
                "--by",
                "machine",
                "--from",
                "2026-11-28",
                "--to",
                "2026-11-30",
                kind_flag,
                kind,
                "--out",
                out,
            ],
        )
    };
    assert!(trend("--kind", "day", "a.svg").status.success());
    assert!(trend("--period-kind", "day", "b.svg").status.success());
    let a = std::fs::read(dir.join("a.svg")).unwrap();
    assert!(a.len() > 1000);
    assert_eq!(a, std::fs::read(dir.join("b.svg")).unwrap());
    let out = trend("--kind", "week", "c.svg");
    assert_eq!(out.status.code(), Some(1));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("no complete week run is stored"),
        "{}",
        output_text(&out)
    );
    // Ranges have no charted series: not offered.
    let out = trend("--kind", "range", "d.svg");
    assert_eq!(out.status.code(), Some(2), "{}", output_text(&out));

    // findings: --kind, --characteristic and --by select.
    let all = json(&samewise_ok(
        &dir,
        &["findings", "--all", "--kind", "day", "--json"],
    ));
    let all = all.as_array().unwrap();
    assert!(!all.is_empty(), "the M2 shift of bore makes a finding");
    assert!(all.iter().all(|f| f["period_kind"] == "day"));
    // The filter removes something: the plant checks days only, so no finding is weekly.
    let weekly = json(&samewise_ok(
        &dir,
        &["findings", "--all", "--kind", "week", "--json"],
    ));
    assert_eq!(weekly.as_array().map(Vec::len), Some(0), "{weekly}");
    let bore = json(&samewise_ok(
        &dir,
        &[
            "findings",
            "--all",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--json",
        ],
    ));
    let bore = bore.as_array().unwrap();
    assert!(bore
        .iter()
        .any(|f| f["group"] == "M2" && f["characteristic"] == "bore"));
    assert!(bore
        .iter()
        .all(|f| f["characteristic"] == "bore" && f["factor"] == "machine"));
    let width = json(&samewise_ok(
        &dir,
        &["findings", "--all", "--characteristic", "width", "--json"],
    ));
    assert!(width
        .as_array()
        .unwrap()
        .iter()
        .all(|f| f["characteristic"] == "width"));
    let weekly = json(&samewise_ok(
        &dir,
        &["findings", "--all", "--kind", "week", "--json"],
    ));
    assert_eq!(weekly, Value::Array(vec![]));

    // check --fdr takes the method names only.
    let err = refused(&dir, &["check", "--day", "2026-11-30", "--fdr", "holm"], 2);
    assert!(err.contains("[possible values: bh, by]"), "{err}");
}
