//! End to end: `samewise demo` on the invented sample plant finds the injected effects
//! (sample-plant/README.md: heavier castings from Castalloy, M4's bore drift after the tooling
//! change of 2026-10-19, more wall-thickness spread on the night shift) and mostly nothing else.

use std::process::Command;

mod common;
use common::temp_dir;

/// The first number after `key` in `line`.
fn number_after(line: &str, key: &str) -> f64 {
    let rest = &line[line
        .find(key)
        .unwrap_or_else(|| panic!("{key:?} in {line:?}"))
        + key.len()..];
    let text: String = rest
        .trim_start()
        .chars()
        .take_while(|c| c.is_ascii_digit() || *c == '.')
        .collect();
    text.parse()
        .unwrap_or_else(|_| panic!("number after {key:?} in {line:?}"))
}

fn story_line<'a>(stdout: &'a str, start: &str) -> &'a str {
    stdout
        .lines()
        .find(|l| l.trim_start().starts_with(start))
        .unwrap_or_else(|| panic!("no line starting {start:?} in:\n{stdout}"))
}

#[test]
fn demo_finds_the_injected_effects() {
    let dir = temp_dir("demo");
    let out = Command::new(env!("CARGO_BIN_EXE_samewise"))
        .args(["demo", "--quiet", "--dir"])
        .arg(&dir)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "demo failed:\n{stdout}\n{stderr}");

    // Import: every measurement stored, a duplicate or rejected (the sample exports do not
    // overlap, so no duplicate), and the planted bad rows were rejected.
    let import = story_line(&stdout, "1. Imported 6 exports");
    let read = number_after(import, "exports:");
    let stored = number_after(import, "read,");
    let duplicate = number_after(import, "stored,");
    let rejected = number_after(import, "duplicate,");
    assert_eq!(duplicate, 0.0, "{import}");
    assert_eq!(stored + duplicate + rejected, read, "{import}");
    assert!((10.0..100.0).contains(&rejected), "{import}");

    // Catch-up ran every schedule without a failure.
    let catch_up = story_line(&stdout, "3. Scheduler catch-up");
    assert!(catch_up.contains(", 0 failed"), "{catch_up}");
    assert!(
        number_after(catch_up, "UTC:") >= 90.0 + 13.0 + 3.0,
        "{catch_up}"
    );

    // Heavier castings from Castalloy: flagged on (nearly) every day, Castalloy standing out.
    let mass = story_line(&stdout, "- housing_mass by supplier");
    assert!(number_after(mass, "flagged on") >= 80.0, "{mass}");
    assert!(mass.contains("Castalloy stands out"), "{mass}");

    // M4's bore drifts after the tooling change: flagged after, with M4 standing out, and not
    // (or hardly) before.
    let bore = story_line(&stdout, "- bore_diameter by machine");
    let before = number_after(bore, "days (");
    assert!(before <= 3.0, "{bore}");
    let first = bore
        .split("M4 first stands out on ")
        .nth(1)
        .unwrap_or_else(|| panic!("{bore}"));
    assert!(
        first[..10] >= *"2026-10-19" && first[..10] <= *"2026-11-15",
        "{bore}"
    );
    assert!(number_after(bore, "and on") >= 10.0, "{bore}");

    // Night-shift spread: a variance difference, seen by Brown-Forsythe on most days.
    let wall = story_line(&stdout, "- wall_thickness by shift");
    assert!(number_after(wall, "on") >= 60.0, "{wall}");

    // Everything else: false flags stay rare (BH at q = 0.05 over 40 tests a day).
    let null = story_line(&stdout, "- every other characteristic");
    let flags = number_after(null, "factor:");
    let tests = number_after(null, "flags in");
    assert!(tests >= 3000.0, "{null}");
    assert!(flags / tests < 0.02, "{null}");

    // Without the shot columns the dependence check finds the shots in most tests, and some
    // flags do not hold once it is allowed for (issue 14's demo story).
    let bare = story_line(
        &stdout,
        "7. The same exports read as if they had no shot columns",
    );
    let words: Vec<&str> = bare
        .split("alike in ")
        .nth(1)
        .unwrap_or_else(|| panic!("{bare}"))
        .split_whitespace()
        .collect();
    let fired: f64 = words[0].parse().unwrap();
    let tests: f64 = words[2].parse().unwrap();
    let dependent: f64 = words[4].parse().unwrap();
    assert!(fired > 0.5 * tests, "{bare}");
    assert!(dependent > 0.0, "{bare}");

    // The monthly review report exists and holds the expected sections (issue 6).
    let report = std::fs::read_to_string(dir.join("review-2026-11.html")).unwrap();
    for section in [
        "Summary of the month",
        "Month overview",
        "Flagged checks",
        "Characteristics",
        "Process changes investigated",
        "Requirement checks",
        "Data coverage",
        "Methods",
    ] {
        assert!(
            report.contains(&format!("<h2>{section}</h2>")),
            "report section {section:?}"
        );
    }
    assert!(
        report.contains("Castalloy"),
        "the heavier supplier is named"
    );
    assert!(
        report.contains("decision support"),
        "the caution is in the report"
    );
    assert!(report.matches("<svg").count() >= 5, "charts are inline SVG");
    // Nothing is fetched: the only URL is the SVG namespace name, which is never loaded.
    let urls = report.replace("http://www.w3.org/2000/svg", "");
    assert!(
        !urls.contains("http://") && !urls.contains("https://"),
        "nothing fetched"
    );
    let charts: Vec<_> = std::fs::read_dir(dir.join("charts")).unwrap().collect();
    assert!(charts.len() >= 8, "PNG and SVG charts written");

    // The latest daily summary and the caution are printed.
    assert!(stdout.contains("check 2026-11-29 (day)"));
    assert!(stdout.contains("decision support"));

    // Findings (issue 16): the M4 bore finding, open, its onset within a few days of the logged
    // insert-holder change of 2026-10-19 (the drift grows from that day: sample-plant/README.md),
    // that event named; the Castalloy mass finding, open; every other open finding, of any period
    // kind, is one of these two or the documented confounding (bore by operator follows M4: each
    // operator looks after two machines).
    let out = Command::new(env!("CARGO_BIN_EXE_samewise"))
        .current_dir(&dir)
        .args(["findings", "--json"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let open: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let open = open.as_array().unwrap();
    let find = |c: &str, f: &str| {
        open.iter()
            .find(|x| x["characteristic"] == c && x["factor"] == f && x["period_kind"] == "day")
            .unwrap_or_else(|| panic!("no open finding {c} by {f}: {open:?}"))
    };
    let bore = find("bore_diameter", "machine");
    assert_eq!(bore["group"], "M4");
    assert_eq!(bore["status"], "open");
    let onset = bore["onset"]["at"].as_str().unwrap();
    assert!(
        ("2026-10-14"..="2026-10-24").contains(&&onset[..10]),
        "onset {onset}: {bore}"
    );
    let (low, high) = (
        bore["onset"]["low"].as_str().unwrap(),
        bore["onset"]["high"].as_str().unwrap(),
    );
    assert!(
        low[..10] <= *"2026-10-19" && high[..10] >= *"2026-10-19",
        "{bore}"
    );
    assert!(
        bore["nearest_event"]["note"]
            .as_str()
            .unwrap()
            .contains("insert holder"),
        "{bore}"
    );
    assert!(
        bore["effect_now_pct_tolerance"].as_f64().unwrap() > 10.0,
        "{bore}"
    );
    let mass = find("housing_mass", "supplier");
    assert_eq!(mass["group"], "Castalloy");
    for f in open {
        let key = (
            f["characteristic"].as_str().unwrap(),
            f["factor"].as_str().unwrap(),
        );
        assert!(
            matches!(
                key,
                ("bore_diameter", "machine")
                    | ("housing_mass", "supplier")
                    | ("bore_diameter", "operator")
            ),
            "an open finding the sample plant does not explain: {f}"
        );
    }
    let _ = std::fs::remove_dir_all(&dir);
}
