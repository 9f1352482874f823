//! Snapshots of what every command prints, as text and as JSON, on a small invented plant
//! (tests/common: two characteristics, two factors, four production days, machine M2 high on
//! "bore" from the third day). A change to any output shows up here as a diff to review; accept
//! an intended one with `INSTA_UPDATE=always cargo test --release --test snapshots` and read the
//! `.snap` files before committing them. What depends on the run itself (the temporary
//! directory, the wall-clock time of the import, durations, the host and user) is replaced by a
//! placeholder first.

mod common;

use std::path::Path;

use common::{invented_plant, samewise, temp_dir};

/// Runs a command and returns its exit status, stdout and stderr in one text, with the
/// run-dependent parts replaced.
fn shot(dir: &Path, args: &[&str]) -> String {
    let out = samewise(dir, args);
    format!(
        "exit status: {}\n--- stdout\n{}--- stderr\n{}",
        out.status
            .code()
            .map_or("signal".to_string(), |c| c.to_string()),
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}

fn filters(dir: &Path) -> Vec<(String, String)> {
    let today = chrono::Utc::now().format("%Y-%m-%d").to_string();
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|h| h.trim().to_string())
        .unwrap_or_default();
    let mut f = vec![
        (
            regex_escape(&dir.display().to_string()),
            "[DIR]".to_string(),
        ),
        (
            format!(r"{today}[T ]\d\d:\d\d(:\d\d(\.\d+)?)?( ?(Z|UTC|[+-]\d\d:\d\d))?"),
            "[NOW]".to_string(),
        ),
        (
            r"\b\d+(\.\d+)? (s|ms)\b".to_string(),
            "[DURATION]".to_string(),
        ),
        (
            r#""sha256": "[0-9a-f]{64}""#.to_string(),
            r#""sha256": "[SHA256]""#.to_string(),
        ),
    ];
    if !host.is_empty() {
        f.push((regex_escape(&host), "[HOST]".to_string()));
    }
    // Who corrected an event: the login name (or "unknown user" without one) at the host.
    f.push((
        r"(unknown user|[A-Za-z0-9._-]+)@(\[HOST\]|\S+)".to_string(),
        "[USER]@[HOST]".to_string(),
    ));
    f
}

fn regex_escape(text: &str) -> String {
    text.chars()
        .flat_map(|c| {
            if "\\.+*?()|[]{}^$#&-~".contains(c) {
                vec!['\\', c]
            } else {
                vec![c]
            }
        })
        .collect()
}

#[test]
fn every_command_as_text_and_json() {
    let dir = temp_dir("snapshots");
    invented_plant(&dir, 4);
    let owned = filters(&dir);
    let filters: Vec<(&str, &str)> = owned
        .iter()
        .map(|(a, b)| (a.as_str(), b.as_str()))
        .collect();
    let run = |name: &str, args: &[&str]| {
        let text = shot(&dir, args);
        insta::with_settings!({filters => filters.clone(), snapshot_suffix => name, prepend_module_to_snapshot => false, description => args.join(" "), omit_expression => true}, {
            insta::assert_snapshot!("command", text);
        });
    };
    run("status", &["status"]);
    run("status-json", &["status", "--json"]);
    run(
        "event-add",
        &[
            "event",
            "add",
            "--at",
            "2026-11-30 05:00",
            "--note",
            "New boring bar on M2",
            "--where",
            "machine=M2",
        ],
    );
    run("event-list", &["event", "list"]);
    run("event-list-json", &["event", "list", "--json"]);
    run("check-day", &["check", "--day", "2026-11-30"]);
    run(
        "check-day-json",
        &["check", "--day", "2026-11-30", "--stored", "--json"],
    );
    run(
        "check-week-json",
        &["check", "--week", "2026-W48", "--json"],
    );
    run(
        "history",
        &["history", "--characteristic", "bore", "--by", "machine"],
    );
    run(
        "history-json",
        &[
            "history",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--json",
        ],
    );
    run(
        "schedule-due",
        &["schedule", "due", "--now", "2026-12-02T09:00:00Z"],
    );
    run("findings", &["findings", "--all"]);
    run("findings-json", &["findings", "--all", "--json"]);
    run(
        "investigate",
        &[
            "investigate",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--event",
            "1",
        ],
    );
    run(
        "investigate-json",
        &[
            "investigate",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--event",
            "1",
            "--json",
        ],
    );
    run(
        "schedule-due-json",
        &["schedule", "due", "--now", "2026-12-02T09:00:00Z", "--json"],
    );
    // The change-point scan over the four days, as text and as JSON.
    let scan = [
        "investigate",
        "--characteristic",
        "bore",
        "--by",
        "machine",
        "--to",
        "2026-12-02 06:00",
        "--before",
        "4d",
    ];
    run("investigate-scan", &scan);
    run("investigate-scan-json", &[&scan[..], &["--json"]].concat());
    // The CSV files, with what the command printed.
    let file = |name: &str, args: &[&str], path: &str| {
        let text = shot(&dir, args)
            + &format!(
                "--- {path}\n{}",
                std::fs::read_to_string(dir.join(path)).unwrap_or_default()
            );
        insta::with_settings!({filters => filters.clone(), snapshot_suffix => name, prepend_module_to_snapshot => false, description => args.join(" "), omit_expression => true}, {
            insta::assert_snapshot!("command", text);
        });
    };
    file(
        "check-day-csv",
        &[
            "check",
            "--day",
            "2026-11-30",
            "--stored",
            "--csv",
            "day.csv",
        ],
        "day.csv",
    );
    file(
        "history-csv",
        &[
            "history",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--csv",
            "history.csv",
        ],
        "history.csv",
    );
    file(
        "findings-csv",
        &["findings", "--all", "--csv", "findings.csv"],
        "findings.csv",
    );
    run("import-list", &["import", "list"]);
    run("import-list-json", &["import", "list", "--json"]);
    run("db-check", &["db", "check"]);
    run("db-check-json", &["db", "check", "--json"]);
    // compare reads a file of its own: the first day's bore values by machine.
    let csv = std::fs::read_to_string(dir.join("measurements.csv")).unwrap();
    let mut rows = String::from("machine,bore\n");
    for line in csv.lines().skip(1).filter(|l| l.starts_with("2026-11-28")) {
        let f: Vec<&str> = line.split(',').collect();
        if f[1] == "bore" {
            rows.push_str(&format!("{},{}\n", f[3], f[2]));
        }
    }
    std::fs::write(dir.join("day1.csv"), rows).unwrap();
    run(
        "compare",
        &[
            "compare",
            "day1.csv",
            "--by",
            "machine",
            "--measure",
            "bore",
        ],
    );
    run(
        "compare-json",
        &[
            "compare",
            "day1.csv",
            "--by",
            "machine",
            "--measure",
            "bore",
            "--json",
        ],
    );
    // The commands that change or write something, last, so the outputs above stay as they are:
    // the week as text, a note on the finding, the charts and the report (what they print; the
    // files are tested in tests/charts.rs and tests/report.rs), a backup, the same file imported
    // again, an event corrected and removed, and the import undone.
    run("check-week", &["check", "--week", "2026-W48"]);
    run(
        "findings-note",
        &[
            "findings",
            "note",
            "1",
            "containment: 100 % check of M2 bores",
        ],
    );
    run("findings-with-note", &["findings"]);
    run(
        "chart-trend",
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
            "2026-12-01",
            "--out",
            "trend.svg",
        ],
    );
    run(
        "chart-grid",
        &["chart", "grid", "--month", "2026-11", "--out", "grid.svg"],
    );
    run(
        "report",
        &["report", "--month", "2026-11", "--out", "review.html"],
    );
    run("db-backup", &["db", "backup", "backup.db"]);
    run("import-again", &["import", "measurements.csv"]);
    run(
        "event-edit",
        &[
            "event",
            "edit",
            "1",
            "--note",
            "New boring bar and insert on M2",
            "--reason",
            "insert changed too",
        ],
    );
    run(
        "event-remove",
        &[
            "event",
            "remove",
            "1",
            "--reason",
            "logged on the wrong line",
        ],
    );
    run("event-history", &["event", "history", "1"]);
    run("event-list-all-json", &["event", "list", "--all", "--json"]);
    run("import-undo", &["import", "undo", "1"]);
    run("status-after-undo-json", &["status", "--json"]);
    let _ = std::fs::remove_dir_all(&dir);
}
