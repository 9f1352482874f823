//! `samewise event add/edit/remove/list/history` through the binary, on the invented test plant
//! (all data invented).

mod common;

use common::{invented_plant, output_text, samewise, samewise_ok, temp_dir};

fn add(dir: &std::path::Path, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "event",
        "add",
        "--at",
        "2026-11-29 10:00",
        "--note",
        "insert holder changed",
    ];
    args.extend_from_slice(extra);
    samewise(dir, &args)
}

#[test]
fn scope_is_checked_against_stored_factors_and_levels() {
    let dir = temp_dir("event-scope");
    invented_plant(&dir, 3);
    // A known factor and level is accepted.
    let out = add(&dir, &["--where", "machine=M2"]);
    assert!(out.status.success(), "{}", output_text(&out));
    // A mistyped factor: refused, the closest known name suggested, nothing stored.
    let out = add(&dir, &["--where", "machin=M2"]);
    assert_eq!(out.status.code(), Some(1), "{}", output_text(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("unknown factor \"machin\""), "{err}");
    assert!(err.contains("did you mean \"machine\"?"), "{err}");
    // A level never stored: refused with the closest stored levels.
    let out = add(&dir, &["--where", "machine=M5"]);
    assert_eq!(out.status.code(), Some(1), "{}", output_text(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("unknown level \"M5\" of factor \"machine\""),
        "{err}"
    );
    assert!(err.contains("\"M1\", \"M2\" or \"M3\""), "{err}");
    let out = add(&dir, &["--where", "supplier=S9", "--where", "machine=M1"]);
    assert!(String::from_utf8_lossy(&out.stderr).contains("unknown level \"S9\""));
    // An unknown characteristic keeps its suggestion.
    let out = add(&dir, &["--characteristic", "bor"]);
    assert!(String::from_utf8_lossy(&out.stderr).contains("did you mean \"bore\"?"));
    // Only the first event was stored.
    let list = samewise_ok(&dir, &["event", "list", "--all"]);
    assert_eq!(list.lines().count(), 1, "{list}");
    assert!(list.contains("[machine=M2]"), "{list}");
}

#[test]
fn edit_changes_the_given_fields_and_records_each() {
    let dir = temp_dir("event-edit");
    invented_plant(&dir, 3);
    assert!(
        add(&dir, &["--where", "machine=M2", "--characteristic", "bore"])
            .status
            .success()
    );
    let out = samewise_ok(
        &dir,
        &[
            "event",
            "edit",
            "1",
            "--at",
            "2026-11-30 06:00",
            "--note",
            "insert holder changed on M3",
            "--where",
            "machine=M3",
            "--reason",
            "wrong machine logged",
        ],
    );
    assert!(out.contains("corrected event #1"), "{out}");
    let list = samewise_ok(&dir, &["event", "list"]);
    assert!(list.contains("2026-11-30 06:00:00"), "{list}");
    assert!(list.contains("insert holder changed on M3"), "{list}");
    assert!(list.contains("[characteristic=bore, machine=M3]"), "{list}");
    // Three fields changed (the characteristic did not): three history entries, with who and why.
    let history = samewise_ok(&dir, &["event", "history", "1"]);
    let lines: Vec<&str> = history.lines().collect();
    assert_eq!(lines.len(), 3, "{history}");
    assert!(
        lines[0].contains("at: \"2026-11-29T10:00:00.000Z\" -> \"2026-11-30T06:00:00.000Z\""),
        "{history}"
    );
    assert!(
        lines[1].contains("note: \"insert holder changed\" -> \"insert holder changed on M3\""),
        "{history}"
    );
    assert!(
        lines[2].contains("where: \"machine=M2\" -> \"machine=M3\""),
        "{history}"
    );
    assert!(
        lines
            .iter()
            .all(|l| l.contains("@") && l.contains("reason: wrong machine logged")),
        "{history}"
    );
    // Clearing characteristic and scope.
    samewise_ok(
        &dir,
        &["event", "edit", "1", "--any-characteristic", "--no-where"],
    );
    let list = samewise_ok(&dir, &["event", "list"]);
    assert!(!list.contains('['), "{list}");
    // An edit that changes nothing, an edit with no option, a bad level, a missing event: refused.
    for args in [
        &[
            "event",
            "edit",
            "1",
            "--note",
            "insert holder changed on M3",
        ][..],
        &["event", "edit", "1"][..],
        &["event", "edit", "1", "--where", "machine=M7"][..],
        &["event", "edit", "9", "--note", "x"][..],
    ] {
        let out = samewise(&dir, args);
        assert_eq!(
            out.status.code(),
            Some(1),
            "{args:?}: {}",
            output_text(&out)
        );
    }
    let out = samewise(&dir, &["event", "edit", "9", "--note", "x"]);
    assert!(String::from_utf8_lossy(&out.stderr).contains("no event #9"));
    // Refused edits left the event and its history as they were.
    assert_eq!(
        samewise_ok(&dir, &["event", "history", "1"])
            .lines()
            .count(),
        5
    );
}

#[test]
fn removed_events_leave_lists_and_investigations_but_stay_in_the_log() {
    let dir = temp_dir("event-remove");
    invented_plant(&dir, 4);
    assert!(add(&dir, &["--where", "machine=M2"]).status.success());
    let out = samewise(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-30 06:00",
            "--note",
            "bore tool changed on M2",
        ],
    );
    assert!(out.status.success());
    let out = samewise_ok(&dir, &["event", "remove", "1", "--reason", "logged twice"]);
    assert!(
        out.contains("removed event #1") && out.contains("(removed "),
        "{out}"
    );
    let list = samewise_ok(&dir, &["event", "list"]);
    assert_eq!(list.lines().count(), 1, "{list}");
    assert!(list.starts_with("#2 "), "{list}");
    let all = samewise_ok(&dir, &["event", "list", "--all"]);
    assert_eq!(all.lines().count(), 2, "{all}");
    assert!(all.lines().next().unwrap().contains("(removed "), "{all}");
    // The same lists as JSON: times with the plant's offset, a reason beside each null.
    let json: serde_json::Value =
        serde_json::from_str(&samewise_ok(&dir, &["event", "list", "--all", "--json"])).unwrap();
    let events = json["events"].as_array().unwrap();
    assert_eq!(events.len(), 2, "{json}");
    // RFC 3339 with the plant's offset (the test plant keeps UTC).
    assert!(
        events[0]["removed"].as_str().unwrap().ends_with("+00:00"),
        "{json}"
    );
    assert_eq!(events[0]["scope"][0]["factor"], "machine");
    assert_eq!(events[1]["removed"], serde_json::Value::Null);
    assert_eq!(events[1]["removed_reason"], "not removed");
    assert_eq!(
        events[1]["characteristic_reason"],
        "the event concerns every characteristic"
    );
    let json: serde_json::Value =
        serde_json::from_str(&samewise_ok(&dir, &["event", "list", "--json"])).unwrap();
    assert_eq!(json["events"].as_array().unwrap().len(), 1, "{json}");
    let history = samewise_ok(&dir, &["event", "history"]);
    assert!(
        history.contains("#1 ") && history.contains("removed (at=2026-11-29T"),
        "{history}"
    );
    assert!(history.contains("where=machine=M2") && history.contains("reason: logged twice"));
    // Removed: not editable, not removable twice, not an anchor for investigate.
    for args in [
        &["event", "remove", "1"][..],
        &["event", "edit", "1", "--note", "x"][..],
        &["investigate", "bore", "--by", "machine", "--event", "1"][..],
    ] {
        let out = samewise(&dir, args);
        assert_eq!(
            out.status.code(),
            Some(1),
            "{args:?}: {}",
            output_text(&out)
        );
        assert!(
            String::from_utf8_lossy(&out.stderr).contains("removed"),
            "{args:?}"
        );
    }
    // The event left standing still anchors an investigation.
    samewise_ok(
        &dir,
        &["investigate", "bore", "--by", "machine", "--event", "2"],
    );
}

/// Issue 15: a note with a control character is refused, naming the character escaped.
#[test]
fn notes_with_control_characters_are_refused() {
    let dir = common::temp_dir("event-control");
    common::invented_plant(&dir, 1);
    let o = common::samewise(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-28 08:00",
            "--note",
            "new tool\u{1b}[31m",
        ],
    );
    assert!(!o.status.success());
    assert!(
        common::output_text(&o).contains("control character (\\u{1b})"),
        "{}",
        common::output_text(&o)
    );
}
