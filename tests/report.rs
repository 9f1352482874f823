//! `samewise report` and `samewise chart` on a small invented plant built in the test
//! (tests/common: 3 machines x 2 suppliers, bore on M2 0.03 mm high from 2026-11-30, 15% of the
//! 0.2 mm tolerance): the HTML has its sections and the flagged item with its standing-out group,
//! the SVGs parse with the expected number of points and cells, the PNG is written.
//!
//! All data here are invented (generated with a fixed RNG state); no plant data. The expected
//! counts follow from the invented plant's construction (common practice: a chart shows one
//! marker per group per checked period, one cell per characteristic x factor x day).

#![allow(dead_code)]

mod common;
use common::samewise_ok as ok;

use samewise::analysis::report;
use samewise::model::PeriodKind;
use samewise::report::{draw_trend, Format, Size};

mod svg;
use svg::*;

/// The invented plant with three checked days (2026-11-28, -29, -30) out of five imported.
fn checked_plant(name: &str) -> std::path::PathBuf {
    let dir = common::temp_dir(name);
    common::invented_plant(&dir, 5);
    for day in ["2026-11-28", "2026-11-29", "2026-11-30"] {
        let out = common::samewise(&dir, &["check", "--day", day]);
        assert!(
            out.status.code() == Some(0) || out.status.code() == Some(3),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    dir
}

#[test]
fn month_report_has_every_section_and_the_flagged_machine() {
    let dir = checked_plant("report-month");
    let stdout = ok(
        &dir,
        &["report", "--month", "2026-11", "--out", "review.html"],
    );
    assert!(stdout.contains("wrote review.html"), "{stdout}");
    let html = std::fs::read_to_string(dir.join("review.html")).unwrap();
    for id in [
        "summary",
        "overview",
        "flagged",
        "characteristics",
        "requirements",
        "coverage",
        "methods",
    ] {
        assert!(
            html.contains(&format!("id=\"{id}\"")),
            "section {id} missing"
        );
    }
    assert!(html.contains(samewise::CAUTION) || html.contains("decision support"));
    // The flagged item: bore by machine on 2026-11-30, M2 standing out.
    let config = samewise::config::Config::load(dir.join("plant.toml")).unwrap();
    let store = samewise::storage::open(&config).unwrap();
    let calendar = samewise::calendar::PlantCalendar::new(&config);
    let month = calendar.parse_period("2026-11").unwrap();
    let r = report::month_report(&*store, &config, &month, "test").unwrap();
    let item = r
        .flagged
        .iter()
        .find(|f| f.characteristic == "bore" && f.factor == "machine")
        .expect("bore by machine flagged");
    assert_eq!(item.period_label, "2026-11-30");
    assert_eq!(item.standing_out, "M2");
    // M2 is +0.03 against a grand mean that includes M2 (about a third of the rows), so the
    // standing-out distance is near +0.02 mm, i.e. near 10% of the 0.2 mm tolerance.
    assert!(item.diff_units > 0.01 && item.diff_units < 0.03, "{item:?}");
    let pct = item.diff_pct_tolerance.unwrap();
    assert!((pct - 100.0 * item.diff_units / 0.2).abs() < 1e-9);
    assert!(!item.pairs.is_empty());
    assert!(html.contains("M2"));
    // Counts: 30 days x 2 characteristics x 2 factors = 120 cells; 3 days checked = 12 tests.
    assert_eq!(r.counts.tests_run(), 12);
    assert_eq!(r.counts.not_run, 108);
    // Coverage: data on 28, 29 and 30 November only (the rest is in December).
    assert_eq!(r.coverage.days_without_data.len(), 27);
    assert_eq!(r.coverage.rows_stored, 3 * 240 * 2);
    // Per characteristic: bore shows the flagged factor (machine); width its first factor.
    let bore = r
        .characteristics
        .iter()
        .find(|c| c.characteristic == "bore")
        .unwrap();
    assert!(bore.factors.iter().any(|f| f.trend.factor == "machine"));
    assert_eq!(bore.factors[0].trend.periods.len(), 3);
}

#[test]
fn trend_svg_has_one_point_per_group_per_checked_day() {
    let dir = checked_plant("report-trend");
    ok(
        &dir,
        &[
            "chart",
            "trend",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--month",
            "2026-11",
            "--out",
            "trend.svg",
        ],
    );
    let bytes = std::fs::read(dir.join("trend.svg")).unwrap();
    let svg = parse_svg(&bytes);
    // The same input through the library gives the layout (and the same bytes).
    let config = samewise::config::Config::load(dir.join("plant.toml")).unwrap();
    let store = samewise::storage::open(&config).unwrap();
    let calendar = samewise::calendar::PlantCalendar::new(&config);
    let month = calendar.parse_period("2026-11").unwrap();
    let input = report::trend_input(
        &*store,
        &config,
        "bore",
        "machine",
        PeriodKind::Day,
        month.start,
        month.end,
    )
    .unwrap();
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    assert_eq!(chart.bytes, bytes);
    let p = &chart.layout.panels[0];
    let [circles, squares, triangles, _] = svg.group_markers(p);
    assert_eq!([circles, squares, triangles], [3, 3, 3]);
    // Means come back in the unit (origin added): bore is near 10 mm, M2 higher on the 30th.
    let last = &input.periods[2];
    let m2 = last.groups.iter().find(|g| g.level == "M2").unwrap();
    let m1 = last.groups.iter().find(|g| g.level == "M1").unwrap();
    assert!((m1.mean - 10.0).abs() < 0.005, "{m1:?}");
    assert!((m2.mean - m1.mean - 0.03).abs() < 0.005, "{m2:?}");
    assert!(m2.ci_low.unwrap() < m2.mean && m2.ci_high.unwrap() > m2.mean);
}

#[test]
fn grid_svg_has_a_cell_per_row_and_day_and_png_is_written() {
    let dir = checked_plant("report-grid");
    ok(
        &dir,
        &["chart", "grid", "--month", "2026-11", "--out", "grid.svg"],
    );
    let svg = parse_svg(&std::fs::read(dir.join("grid.svg")).unwrap());
    // Row labels: 2 characteristics x 2 factors; 30 day columns.
    let config = samewise::config::Config::load(dir.join("plant.toml")).unwrap();
    let store = samewise::storage::open(&config).unwrap();
    let calendar = samewise::calendar::PlantCalendar::new(&config);
    let month = calendar.parse_period("2026-11").unwrap();
    let grid = report::grid_input(&*store, &config, &month).unwrap();
    assert_eq!(grid.rows.len(), 4);
    assert_eq!(grid.days.len(), 30);
    assert!(grid.rows.iter().all(|r| r.cells.len() == 30));
    let bore_machine = grid
        .rows
        .iter()
        .find(|r| r.characteristic == "bore" && r.factor == "machine")
        .unwrap();
    assert!(bore_machine.cells[29].is_flag());
    assert_eq!(bore_machine.cells[0], samewise::report::FlagState::NotRun);
    assert!(svg.width > 0.0 && !svg.shapes.is_empty());

    ok(
        &dir,
        &["chart", "grid", "--month", "2026-11", "--out", "grid.png"],
    );
    let png = std::fs::read(dir.join("grid.png")).unwrap();
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");

    ok(
        &dir,
        &[
            "chart",
            "detail",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--day",
            "2026-11-30",
            "--out",
            "detail.png",
        ],
    );
    assert_eq!(
        &std::fs::read(dir.join("detail.png")).unwrap()[..4],
        b"\x89PNG"
    );
    ok(
        &dir,
        &[
            "chart",
            "share",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--from",
            "2026-11-28",
            "--to",
            "2026-11-30",
            "--out",
            "share.svg",
        ],
    );
    parse_svg(&std::fs::read(dir.join("share.svg")).unwrap());
}

#[test]
fn chart_errors_name_the_fix() {
    let dir = checked_plant("report-errors");
    let out = common::samewise(
        &dir,
        &[
            "chart",
            "trend",
            "--characteristic",
            "bor",
            "--by",
            "machine",
            "--month",
            "2026-11",
            "--out",
            "t.svg",
        ],
    );
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("did you mean \"bore\""), "{err}");
    let out = common::samewise(
        &dir,
        &["chart", "grid", "--month", "2026-11", "--out", "g.jpg"],
    );
    assert!(String::from_utf8_lossy(&out.stderr).contains(".svg or .png"));
    let out = common::samewise(
        &dir,
        &[
            "chart",
            "before-after",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--event",
            "99",
            "--out",
            "b.svg",
        ],
    );
    assert!(String::from_utf8_lossy(&out.stderr).contains("no event #99"));
}

/// Issue 16: the month report of an invented 32-cavity plant (two parts per cavity and day, 30
/// days, cavity C17 0.6 SD high from day 10) opens with its findings, draws the finding's trend
/// with the standing-out cavity highlighted, keeps the chronological flag list collapsed, and
/// stays under 2 MB.
#[test]
fn issue_16_report_of_32_cavities_leads_with_findings_and_stays_small() {
    use chrono::{Duration, TimeZone, Utc};
    let dir = common::temp_dir("issue-16-32-cavities");
    std::fs::write(
        dir.join("plant.toml"),
        r#"
[plant]
name = "Invented moulding plant"
time_zone = "UTC"
production_day_start = "06:00"
database = "plant.db"

[[characteristic]]
name = "pin_pitch"
unit = "mm"
lsl = 2.44
usl = 2.56

[[characteristic]]
name = "weight"
unit = "g"
lsl = 11.4
usl = 12.6

[[factor]]
name = "cavity"

[[schedule]]
name = "daily"
period = "day"
delay = "1h"
"#,
    )
    .unwrap();
    let mut rng = common::Rng(32);
    let mut csv = String::from("timestamp,characteristic,value,cavity\n");
    let t0 = Utc.with_ymd_and_hms(2026, 11, 1, 6, 0, 0).unwrap();
    for day in 0..30 {
        for part in 0..12 {
            for cavity in 1..=32 {
                let ts = t0 + Duration::days(day) + Duration::minutes(part * 100 + cavity);
                // 12 parts per cavity and day: enough to see a 0.01 mm (1 SD) cavity offset.
                let offset = if cavity == 17 && day >= 10 { 0.01 } else { 0.0 };
                let pitch = 2.5 + 0.01 * rng.normal() + offset;
                let weight = 12.0 + 0.05 * rng.normal();
                for (name, v) in [("pin_pitch", pitch), ("weight", weight)] {
                    csv.push_str(&format!(
                        "{},{name},{v:.4},C{cavity:02}\n",
                        ts.format("%Y-%m-%dT%H:%M:%SZ")
                    ));
                }
            }
        }
    }
    std::fs::write(dir.join("m.csv"), csv).unwrap();
    for args in [
        vec!["init"],
        vec!["import", "m.csv"],
        vec!["schedule", "due", "--now", "2026-12-02T12:00:00Z"],
    ] {
        let o = common::samewise(&dir, &args);
        assert!(
            o.status.success() || o.status.code() == Some(3),
            "{args:?}: {}",
            common::output_text(&o)
        );
    }
    let o = common::samewise(&dir, &["findings", "--json"]);
    let findings: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let c17 = findings
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["characteristic"] == "pin_pitch" && f["group"] == "C17")
        .unwrap_or_else(|| panic!("{findings}"));
    assert_eq!(c17["status"], "open");
    let o = common::samewise(&dir, &["report", "--month", "2026-11", "--out", "r.html"]);
    assert!(o.status.success(), "{}", common::output_text(&o));
    let html = std::fs::read_to_string(dir.join("r.html")).unwrap();
    assert!(html.len() < 2_000_000, "report of {} bytes", html.len());
    let findings_at = html.find("<h2>Findings of the month</h2>").unwrap();
    let flagged_at = html.find("<h2>Flagged checks</h2>").unwrap();
    assert!(findings_at < flagged_at, "the findings lead");
    let section = &html[findings_at..flagged_at];
    assert!(
        section.contains("pin_pitch by cavity: C17 stands out"),
        "{}",
        &section[..2000.min(section.len())]
    );
    assert!(
        section.contains("C17 (stands out)"),
        "the legend names the highlighted cavity"
    );
    assert!(section.contains("the other 31 groups"));
    assert!(
        html[flagged_at..].contains("<details><summary>All "),
        "the flag list is collapsed"
    );
    let _ = std::fs::remove_dir_all(&dir);
}
