//! CSV import parsing: both layouts, header detection, every kind of bad input, DST edge cases,
//! BOM/CRLF, and a property test that the counts always add up and nothing panics.
//!
//! DST transition instants used here come from the IANA tz database (files `europe`, rule EU:
//! last Sunday of March/October at 01:00 UTC, and `northamerica`, rule US): in 2026 Europe/Berlin
//! goes 02:00 -> 03:00 on 29 March and 03:00 -> 02:00 on 25 October; America/Chicago goes
//! 02:00 -> 03:00 on 8 March and 02:00 -> 01:00 on 1 November.

use std::path::Path;

use chrono::{DateTime, Utc};
use proptest::prelude::*;
use samewise::config::Config;
use samewise::ingest::{
    self, Counts, ImportStream, MeasurementRef, OutcomeSink, ReadOptions, Rejection, RowOutcome,
};
use sha2::{Digest, Sha256};

mod common;
use common::temp_dir;

const CONFIG: &str = r#"
[plant]
name = "Test plant (invented)"
time_zone = "Europe/Berlin"
production_day_start = "06:00"

[[shift]]
name = "early"
start = "06:00"
[[shift]]
name = "late"
start = "14:00"
[[shift]]
name = "night"
start = "22:00"

[[characteristic]]
name = "bore"
unit = "mm"
lsl = 9.9
usl = 10.1
[[characteristic]]
name = "mass"
unit = "g"

[[factor]]
name = "machine"
[[factor]]
name = "shift"
derived = "shift"
[[factor]]
name = "supplier"
"#;

fn config() -> Config {
    Config::from_toml_str(CONFIG, "test.toml").unwrap()
}

fn config_with(extra: &str) -> Config {
    Config::from_toml_str(&format!("{CONFIG}{extra}"), "test.toml").unwrap()
}

fn utc(text: &str) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(text)
        .unwrap()
        .with_timezone(&Utc)
}

fn open(bytes: &[u8], config: &Config, options: &ReadOptions) -> ImportStream<&'static [u8]> {
    let leaked: &'static [u8] = Box::leak(bytes.to_vec().into_boxed_slice());
    ingest::read_from(leaked, "input.csv", config, options).unwrap()
}

/// Reads everything; returns the outcomes, the final counts and the stream's hash.
fn read_all(
    bytes: &[u8],
    config: &Config,
    options: &ReadOptions,
) -> (Vec<RowOutcome>, Counts, String) {
    let mut stream = open(bytes, config, options);
    let outcomes: Vec<RowOutcome> = stream.by_ref().collect();
    assert!(stream.take_error().is_none());
    let sha = stream.file_sha256().expect("read to the end").to_string();
    (outcomes, stream.counts(), sha)
}

fn rejections(outcomes: &[RowOutcome]) -> Vec<&Rejection> {
    outcomes
        .iter()
        .filter_map(|o| match o {
            RowOutcome::Rejected(r) => Some(r),
            RowOutcome::Accepted(_) => None,
        })
        .collect()
}

fn accepted(outcomes: &[RowOutcome]) -> Vec<&ingest::Measurement> {
    outcomes
        .iter()
        .filter_map(|o| match o {
            RowOutcome::Accepted(m) => Some(m),
            RowOutcome::Rejected(_) => None,
        })
        .collect()
}

/// The measurements the outcomes stand for (a wide row rejected as a whole is one rejection).
fn measurements(outcomes: &[RowOutcome]) -> usize {
    outcomes
        .iter()
        .map(|o| match o {
            RowOutcome::Accepted(_) => 1,
            RowOutcome::Rejected(r) => r.measurements as usize,
        })
        .sum()
}

fn assert_counts_add_up(counts: &Counts, measurements: usize) {
    assert_eq!(counts.accepted + counts.rejected, counts.measurements_read);
    assert_eq!(counts.measurements_read, measurements as u64);
    assert_eq!(
        counts.measurements_read,
        counts.rows_read * counts.cells_per_row
    );
}

/// A single rejection of a one-row long file, with its column and reason.
fn reject_one(row: &str) -> Rejection {
    let text = format!("timestamp,machine,supplier,characteristic,value\n{row}\n");
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_eq!(counts.rows_read, 1);
    assert_eq!(counts.rejected, 1, "{row}: {outcomes:?}");
    rejections(&outcomes)[0].clone()
}

#[test]
fn long_file_with_derived_shift() {
    let text = "timestamp,machine,supplier,characteristic,value\n\
                2026-11-30 06:15:00,M1,S1,bore,10.0012\n\
                2026-11-30T21:00:00Z,M2,S2,mass,1000000000000.4\n\
                2026-12-01 05:59:59,M1,S1,mass,-0.5e-3\n";
    // (The exponent value is on "mass", which has no limits: on "bore", limits 9.9-10.1, it would
    // be rejected as implausible, see the plausible-range test below.)
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_counts_add_up(&counts, measurements(&outcomes));
    assert_eq!(
        (counts.rows_read, counts.accepted, counts.rejected),
        (3, 3, 0)
    );
    let m = accepted(&outcomes);
    assert_eq!(m[0].line, 2);
    assert_eq!(m[0].characteristic, "bore");
    // CET = UTC+1 in November.
    assert_eq!(m[0].ts, utc("2026-11-30T05:15:00Z"));
    assert_eq!(m[0].value.to_string(), "10.0012");
    assert_eq!(m[0].levels, ["M1", "early", "S1"]);
    // 21:00 UTC = 22:00 local: the night shift starts.
    assert_eq!(m[1].levels, ["M2", "night", "S2"]);
    assert_eq!(
        m[1].value.to_string(),
        "1000000000000.4",
        "every digit kept"
    );
    // 05:59:59 local on 1 December is still the night shift (of 30 November).
    assert_eq!(m[2].levels[1], "night");
    assert_eq!(m[2].value.to_string(), "-0.0005");
}

#[test]
fn wide_file_counts_measurements() {
    let text = "timestamp,machine,supplier,bore,mass\n\
                2026-11-30 07:00:00,M1,S1,10.01,250.5\n\
                2026-11-30 07:01:00,M1,S1,10.02,\n\
                2026-11-30 07:02:00,M1,S1,1,5,250.5\n\
                not a time,M1,S1,10.03,250.6\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_counts_add_up(&counts, measurements(&outcomes));
    assert_eq!(counts.cells_per_row, 2);
    assert_eq!(counts.rows_read, 4);
    // Row 2: two accepted. Row 3: one accepted, empty mass cell rejected. Row 4: ragged (6
    // fields), both rejected in one record. Row 5: bad timestamp, both rejected in one record.
    assert_eq!((counts.accepted, counts.rejected), (3, 5));
    let r = rejections(&outcomes);
    assert_eq!(r.len(), 3, "one record per bad cell or bad row: {r:?}");
    assert_eq!((r[0].line, r[0].column.as_deref()), (3, Some("mass")));
    assert!(r[0].reason.contains("empty"), "{}", r[0].reason);
    assert_eq!(r[0].measurements, 1);
    assert!(r[1].reason.contains("row has 6 fields, the header has 5"));
    assert_eq!(
        (r[1].line, r[1].column.as_deref(), r[1].measurements),
        (4, None, 2)
    );
    assert_eq!((r[2].line, r[2].column.as_deref()), (5, Some("timestamp")));
    assert_eq!(r[2].measurements, 2);
    let m = accepted(&outcomes);
    assert_eq!(
        (m[0].characteristic.as_str(), m[1].characteristic.as_str()),
        ("bore", "mass")
    );
}

#[test]
fn header_detection_and_named_layouts() {
    let config = config();
    let long = "Timestamp , MACHINE,supplier,characteristic,value,comment\n2026-11-30 07:00:00,M1,S1,bore,10\n";
    let stream =
        ingest::read_from(long.as_bytes(), "a.csv", &config, &ReadOptions::default()).unwrap();
    assert_eq!(stream.layout().name, "long");
    assert_eq!(stream.ignored_columns(), ["comment"]);
    let wide = "timestamp,machine,supplier,bore\n2026-11-30 07:00:00,M1,S1,10\n";
    let stream =
        ingest::read_from(wide.as_bytes(), "b.csv", &config, &ReadOptions::default()).unwrap();
    assert_eq!(stream.layout().name, "wide");
    // A named layout that does not fit names the missing columns.
    let options = ReadOptions {
        layout: Some("long".into()),
        add_new: false,
    };
    let err = ingest::read_from(wide.as_bytes(), "b.csv", &config, &options)
        .err()
        .unwrap()
        .to_string();
    assert!(
        err.starts_with("b.csv:1: the header fits no layout"),
        "{err}"
    );
    assert!(
        err.contains("missing column \"characteristic\", \"value\""),
        "{err}"
    );
    // No layout at all.
    let err = ingest::read_from(
        "a;b;c\n".as_bytes(),
        "c.csv",
        &config,
        &ReadOptions::default(),
    )
    .err()
    .unwrap()
    .to_string();
    assert!(err.contains("separated by ';'"), "{err}");
    // Unknown layout name.
    let options = ReadOptions {
        layout: Some("cmm".into()),
        add_new: false,
    };
    assert!(ingest::read_from(wide.as_bytes(), "b.csv", &config, &options).is_err());
    // Empty file and UTF-16 are refused as a whole.
    assert!(ingest::read_from(&b""[..], "e.csv", &config, &ReadOptions::default()).is_err());
    let utf16 = b"\xFF\xFEt\0i\0m\0e\0";
    let err = ingest::read_from(&utf16[..], "u.csv", &config, &ReadOptions::default())
        .err()
        .unwrap();
    assert!(err.to_string().contains("UTF-16"));
}

#[test]
fn two_configured_layouts_tie_needs_a_choice() {
    let layouts = r#"
[[layout]]
name = "a"
kind = "long"
[[layout]]
name = "b"
kind = "long"
"#;
    let config = config_with(layouts);
    let text = "timestamp,machine,supplier,characteristic,value\n";
    let err = ingest::read_from(text.as_bytes(), "t.csv", &config, &ReadOptions::default())
        .err()
        .unwrap();
    assert!(
        err.to_string()
            .contains("fits several layouts equally well (a, b)"),
        "{err}"
    );
}

#[test]
fn bad_values_are_rejected_with_reasons() {
    let cases = [
        (
            "2026-11-30 07:00:00,M1,S1,bore,\"1,5\"",
            "value",
            "use '.' as the decimal separator",
        ),
        (
            "2026-11-30 07:00:00,M1,S1,bore,1e400",
            "value",
            "out of range",
        ),
        ("2026-11-30 07:00:00,M1,S1,bore,NaN", "value", "NaN"),
        ("2026-11-30 07:00:00,M1,S1,bore,-", "value", "placeholder"),
        (
            "2026-11-30 07:00:00,M1,S1,bore,12.5 mm",
            "value",
            "no units",
        ),
        ("2026-11-30 07:00:00,M1,S1,bore,", "value", "empty"),
        ("2026-11-30 07:00:00,,S1,bore,10", "machine", "empty cell"),
        (
            "2026-11-30 07:00:00,M1,S1,bor,10",
            "characteristic",
            "unknown characteristic \"bor\"",
        ),
        (
            "30/11/2026 07:00,M1,S1,bore,10",
            "timestamp",
            "not ISO 8601",
        ),
        (
            "2026-11-31 07:00:00,M1,S1,bore,10",
            "timestamp",
            "not ISO 8601",
        ),
        (
            "0001-01-01 00:00:00Z,M1,S1,bore,10",
            "timestamp",
            "outside 1900 to 2200",
        ),
        (
            "9999-12-31T23:59:59-23:59,M1,S1,bore,10",
            "timestamp",
            "outside 1900 to 2200",
        ),
    ];
    for (row, column, reason) in cases {
        let r = reject_one(row);
        assert_eq!(r.line, 2);
        assert_eq!(r.column.as_deref(), Some(column), "{row}");
        assert!(r.reason.contains(reason), "{row}: {}", r.reason);
        assert_eq!(r.raw, row);
    }
    let r = reject_one("2026-11-30 07:00:00,M1,S1,bore");
    assert_eq!(r.column, None);
    assert!(r.reason.contains("row has 4 fields, the header has 5"));
    let r = reject_one("2026-11-30 07:00:00,M1,S1,bore,\"10");
    assert!(r.reason.contains("not closed"), "{}", r.reason);
}

#[test]
fn non_utf8_bytes_reject_the_cell_they_are_in() {
    // "M\xe91" is Latin-1 for "Mé1".
    let mut bytes = b"timestamp,machine,supplier,characteristic,value\n".to_vec();
    bytes.extend_from_slice(b"2026-11-30 07:00:00,M\xe91,S1,bore,10\n");
    bytes.extend_from_slice(b"2026-11-30 07:00:00,M1,S1,bore,10\xb5\n");
    let (outcomes, counts, _) = read_all(&bytes, &config(), &ReadOptions::default());
    assert_counts_add_up(&counts, measurements(&outcomes));
    let r = rejections(&outcomes);
    assert_eq!(r.len(), 2);
    assert_eq!(r[0].column.as_deref(), Some("machine"));
    assert!(r[0].reason.contains("not UTF-8"));
    assert_eq!(r[0].raw, "2026-11-30 07:00:00,M\u{fffd}1,S1,bore,10");
    assert_eq!(r[1].column.as_deref(), Some("value"));
}

#[test]
fn unknown_characteristics_with_add_new() {
    let text =
        "timestamp,machine,supplier,characteristic,value\n2026-11-30 07:00:00,M1,S1,torque,5.5\n";
    let options = ReadOptions {
        layout: None,
        add_new: true,
    };
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &options);
    assert_eq!(counts.accepted, 1);
    assert_eq!(accepted(&outcomes)[0].characteristic, "torque");
    // Wide: an unknown column is rejected per cell without add_new, accepted with it.
    let text = "timestamp,machine,supplier,bore,torque\n2026-11-30 07:00:00,M1,S1,10,5.5\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_eq!((counts.accepted, counts.rejected), (1, 1));
    assert!(rejections(&outcomes)[0]
        .reason
        .contains("unknown characteristic \"torque\""));
    let (_, counts, _) = read_all(text.as_bytes(), &config(), &options);
    assert_eq!((counts.accepted, counts.rejected), (2, 0));
}

#[test]
fn blank_lines_are_counted_and_rejected() {
    let text = "timestamp,machine,supplier,characteristic,value\n\
                2026-11-30 07:00:00,M1,S1,bore,10\n\
                \n   \n\
                2026-11-30 07:00:01,M1,S1,bore,10\n\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_counts_add_up(&counts, measurements(&outcomes));
    assert_eq!(
        (
            counts.rows_read,
            counts.blank_rows,
            counts.accepted,
            counts.rejected
        ),
        (5, 3, 2, 3)
    );
    let lines: Vec<u64> = rejections(&outcomes).iter().map(|r| r.line).collect();
    assert_eq!(lines, [3, 4, 6]);
    assert!(rejections(&outcomes)
        .iter()
        .all(|r| r.reason == "blank line"));
    // Wide: a blank line stands for one missing measurement per characteristic column.
    let text = "timestamp,machine,supplier,bore,mass\n\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_eq!((counts.rows_read, counts.rejected), (1, 2));
    assert_counts_add_up(&counts, measurements(&outcomes));
    assert_eq!(
        rejections(&outcomes).len(),
        1,
        "one record for the blank row"
    );
}

#[test]
fn bom_and_crlf() {
    let text = "\u{feff}timestamp,machine,supplier,characteristic,value\r\n\
                2026-11-30 07:00:00,M1,S1,bore,10.5\r\n\
                \"2026-11-30 07:00:01\",\"M1\",\"S,1\",\"bore\",\"10.6\"\r\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_eq!((counts.accepted, counts.rejected), (2, 0));
    let m = accepted(&outcomes);
    assert_eq!(
        m[0].value.to_string(),
        "10.5",
        "no stray \\r in the last cell"
    );
    assert_eq!(m[1].levels[2], "S,1", "quoted delimiter");
}

#[test]
fn dst_local_times_in_berlin_are_rejected_not_guessed() {
    let text = "timestamp,machine,supplier,characteristic,value\n\
                2026-03-29 02:30:00,M1,S1,bore,10\n\
                2026-03-29 03:00:00,M1,S1,bore,10\n\
                2026-10-25 02:30:00,M1,S1,bore,10\n\
                2026-10-25T02:30:00+02:00,M1,S1,bore,10\n\
                2026-10-25T02:30:00+01:00,M1,S1,bore,10\n\
                2026-10-25T00:30:00Z,M1,S1,bore,10\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_counts_add_up(&counts, measurements(&outcomes));
    let r = rejections(&outcomes);
    assert_eq!(r.len(), 2);
    assert_eq!((r[0].line, r[0].column.as_deref()), (2, Some("timestamp")));
    assert!(
        r[0].reason.contains("does not exist in Europe/Berlin"),
        "{}",
        r[0].reason
    );
    assert_eq!(r[1].line, 4);
    assert!(
        r[1].reason.contains("occurs twice in Europe/Berlin"),
        "{}",
        r[1].reason
    );
    let m = accepted(&outcomes);
    assert_eq!(m[0].ts, utc("2026-03-29T01:00:00Z"));
    assert_eq!(m[1].ts, utc("2026-10-25T00:30:00Z"));
    assert_eq!(m[2].ts, utc("2026-10-25T01:30:00Z"));
    assert_eq!(m[3].ts, m[1].ts, "Z taken as given");
    // Both passes through 02:30 are the night shift of 24 October.
    assert_eq!(m[1].levels[1], "night");
    assert_eq!(m[2].levels[1], "night");
}

#[test]
fn dst_local_times_in_chicago() {
    let config = Config::from_toml_str(
        &CONFIG.replace("Europe/Berlin", "America/Chicago"),
        "c.toml",
    )
    .unwrap();
    let text = "timestamp,machine,supplier,characteristic,value\n\
                2026-03-08 02:15:00,M1,S1,bore,10\n\
                2026-11-01 01:15:00,M1,S1,bore,10\n\
                2026-11-01 02:15:00,M1,S1,bore,10\n";
    let (outcomes, _, _) = read_all(text.as_bytes(), &config, &ReadOptions::default());
    let r = rejections(&outcomes);
    assert_eq!(r.len(), 2);
    assert!(r[0].reason.contains("does not exist in America/Chicago"));
    assert!(r[1].reason.contains("occurs twice in America/Chicago"));
    // 02:15 CST (UTC-6) after the fall-back.
    assert_eq!(accepted(&outcomes)[0].ts, utc("2026-11-01T08:15:00Z"));
}

#[test]
fn custom_timestamp_format_and_delimiter() {
    let layout = r#"
[[layout]]
name = "line"
kind = "wide"
delimiter = ";"
timestamp = "Zeit"
timestamp_format = "%d.%m.%Y %H:%M"
[layout.factors]
machine = "Maschine"
supplier = "Lieferant"
[layout.characteristics]
bore = "Bohrung"
"#;
    let config = config_with(layout);
    let text = "Zeit;Maschine;Lieferant;Bohrung;Bemerkung\n30.11.2026 23:10;M3;S2;10.004;ok\n";
    let (outcomes, counts, _) = read_all(text.as_bytes(), &config, &ReadOptions::default());
    assert_eq!((counts.cells_per_row, counts.accepted), (1, 1));
    let m = accepted(&outcomes)[0];
    assert_eq!(m.ts, utc("2026-11-30T22:10:00Z"));
    assert_eq!(m.levels, ["M3", "night", "S2"]);
}

#[test]
fn huge_field_is_one_rejected_row_and_reading_goes_on() {
    let mut text = String::from("timestamp,machine,supplier,characteristic,value\n");
    text.push_str("2026-11-30 07:00:00,M1,S1,bore,");
    text.push_str(&"9".repeat(ingest::MAX_LINE_BYTES + 10));
    text.push('\n');
    text.push_str("2026-11-30 07:00:01,M1,S1,bore,");
    text.push_str(&"9".repeat(5000)); // within the line limit, but too many digits
    text.push('\n');
    text.push_str("2026-11-30 07:00:02,M1,S1,bore,10\n");
    let (outcomes, counts, sha) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_counts_add_up(&counts, measurements(&outcomes));
    assert_eq!(
        (counts.rows_read, counts.accepted, counts.rejected),
        (3, 1, 2)
    );
    let r = rejections(&outcomes);
    assert!(
        r[0].reason.contains("more than the 1048576 read"),
        "{}",
        r[0].reason
    );
    assert!(r[0].raw.len() < 2000, "raw text is cut");
    assert!(r[1].reason.len() < 300, "reason is short: {}", r[1].reason);
    assert_eq!(accepted(&outcomes)[0].line, 4);
    assert_eq!(
        sha,
        hex(&Sha256::digest(text.as_bytes())),
        "every byte hashed"
    );
}

#[test]
fn file_hash_matches_separate_read() {
    let dir = temp_dir("file_hash_matches_separate_read");
    let path = dir.join("a.csv");
    let text =
        "timestamp,machine,supplier,characteristic,value\n2026-11-30 07:00:00,M1,S1,bore,10\n";
    std::fs::write(&path, text).unwrap();
    let mut stream = ingest::read_file(&path, &config(), None).unwrap();
    assert_eq!(stream.file_sha256(), None, "not known before the end");
    assert_eq!(stream.by_ref().count(), 1);
    let up_front = ingest::file_sha256(&path).unwrap();
    assert_eq!(stream.file_sha256(), Some(up_front.as_str()));
    assert_eq!(up_front, hex(&Sha256::digest(text.as_bytes())));
    let missing = ingest::read_file(dir.join("missing.csv"), &config(), None)
        .err()
        .unwrap();
    assert!(missing.to_string().contains("missing.csv"));
}

#[test]
fn sample_plant_config_and_exports() {
    let config =
        Config::load(Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-plant/plant.toml"))
            .unwrap();
    assert_eq!(config.characteristics.len(), 8);
    assert_eq!(config.factors.len(), 5);
    let dir = temp_dir("sample_plant_config_and_exports");
    let paths = samewise::sample::write_exports(&dir).unwrap();
    let mut totals = Counts::default();
    let mut rejected = Vec::new();
    for path in &paths {
        let mut stream = ingest::read_file(path, &config, None).unwrap();
        let name = path.file_name().unwrap().to_string_lossy().to_string();
        let expected_layout = if name.starts_with("cmm") {
            "cmm"
        } else {
            "line"
        };
        assert_eq!(stream.layout().name, expected_layout, "{name}");
        let mut outcomes = 0;
        for outcome in stream.by_ref() {
            match outcome {
                RowOutcome::Accepted(m) => {
                    outcomes += 1;
                    assert_eq!(m.levels.len(), 5);
                    assert!(config.characteristic(&m.characteristic).is_some());
                }
                RowOutcome::Rejected(r) => {
                    outcomes += r.measurements as usize;
                    rejected.push((name.clone(), r))
                }
            }
        }
        let c = stream.counts();
        assert_counts_add_up(&c, outcomes);
        // Physical lines minus the header.
        let bytes = std::fs::read(path).unwrap();
        assert_eq!(c.rows_read, physical_lines(&bytes) - 1, "{name}");
        totals.accepted += c.accepted;
        totals.rejected += c.rejected;
    }
    // The generator plants a handful of bad rows per export (src/sample.rs) and the October DST
    // repeated hour; each must be rejected, and they stay a small share.
    // The generator (src/sample.rs, write_exports) plants these bad rows; each must be
    // rejected where it was planted, with the right column and reason.
    let planted: [(&str, u64, Option<&str>, &str, u64); 7] = [
        (
            "cmm-2026-09.csv",
            137,
            Some("value"),
            "use '.' as the decimal separator",
            1,
        ),
        ("cmm-2026-09.csv", 2203, Some("value"), "NaN", 1),
        (
            "line-2026-09.csv",
            502,
            None,
            "row has 10 fields, the header has 11",
            4,
        ),
        ("cmm-2026-10.csv", 911, Some("value"), "empty cell", 1),
        (
            "cmm-2026-10.csv",
            4410,
            Some("characteristic"),
            "unknown characteristic \"bore_dia\"",
            1,
        ),
        ("line-2026-10.csv", 1502, Some("Time"), "31.09.2026", 4),
        ("cmm-2026-11.csv", 1288, Some("value"), "no units", 1),
    ];
    let mut n_planted = 0u64;
    for (file, line, column, reason, n) in planted {
        let found: Vec<&Rejection> = rejected
            .iter()
            .filter(|(name, r)| name == file && r.line == line)
            .map(|(_, r)| r)
            .collect();
        // One record per bad row (a wide row's record stands for its n measurements).
        assert_eq!(found.len(), 1, "{file}:{line}");
        assert_eq!(found[0].measurements, n, "{file}:{line}");
        assert_eq!(found[0].column.as_deref(), column, "{file}:{line}");
        assert!(
            found.iter().all(|r| r.reason.contains(reason)),
            "{file}:{line}: {}",
            found[0].reason
        );
        n_planted += n;
    }
    // The extra field of line-2026-11.csv:702.
    let extra: Vec<&Rejection> = rejected
        .iter()
        .filter(|(name, r)| name == "line-2026-11.csv" && r.line == 702)
        .map(|(_, r)| r)
        .collect();
    assert_eq!(extra.len(), 1);
    assert_eq!(extra[0].measurements, 4);
    assert!(extra[0].reason.contains("row has 12 fields"));
    n_planted += 4;
    // Everything else: local times in the repeated hour of 25 October 2026 (IANA tz database:
    // Europe/Berlin 03:00 CEST -> 02:00 CET), one rejection per characteristic of the part.
    let repeated: Vec<&Rejection> = rejected
        .iter()
        .filter(|(name, r)| name == "line-2026-10.csv" && r.reason.contains("occurs twice"))
        .map(|(_, r)| r)
        .collect();
    assert!(!repeated.is_empty());
    assert!(repeated.iter().all(|r| r.raw.contains("25.10.2026 02:")));
    let repeated_measurements: u64 = repeated.iter().map(|r| r.measurements).sum();
    let rejected_measurements: u64 = rejected.iter().map(|(_, r)| r.measurements).sum();
    assert_eq!(rejected_measurements, n_planted + repeated_measurements);
    assert_eq!(totals.rejected, rejected_measurements);
}

fn physical_lines(bytes: &[u8]) -> u64 {
    let newlines = bytes.iter().filter(|&&b| b == b'\n').count() as u64;
    if bytes.is_empty() {
        0
    } else if bytes.last() == Some(&b'\n') {
        newlines
    } else {
        newlines + 1
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

// ---------------------------------------------------------------------------------------------
// Property test: whatever the bytes, no panic, and the counts add up.

fn nasty_cell() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("1,5".to_string()),
        Just("1e400".to_string()),
        Just("NaN".to_string()),
        Just("-".to_string()),
        Just("12.5 mm".to_string()),
        Just("\"10.5\"".to_string()),
        Just("\"unclosed".to_string()),
        Just("\"a\"\"b\"".to_string()),
        Just("\"x\"y".to_string()),
        Just(String::new()),
        Just("   ".to_string()),
        Just("2026-10-25 02:30:00".to_string()),
        Just("2026-03-29 02:30:00".to_string()),
        Just("2026-11-30T07:00:00Z".to_string()),
        Just("\u{feff}".to_string()),
        "[0-9]{1,40}(\\.[0-9]{0,40})?",
        "-?[0-9]{1,3}\\.[0-9]{1,6}(e-?[0-9]{1,3})?",
        "\\PC{0,20}",
        (1usize..5000).prop_map(|n| "7".repeat(n)),
    ]
}

fn nasty_line() -> impl Strategy<Value = Vec<u8>> {
    prop_oneof![
        // A well-formed row with one nasty cell somewhere.
        (nasty_cell(), 0usize..5, any::<bool>()).prop_map(|(cell, at, crlf)| {
            let mut cells = [
                "2026-11-30 07:00:00".to_string(),
                "M1".to_string(),
                "S1".to_string(),
                "bore".to_string(),
                "10.01".to_string(),
            ];
            cells[at] = cell;
            let mut line = cells.join(",").into_bytes();
            if crlf {
                line.push(b'\r');
            }
            line
        }),
        // Random bytes (wrong encodings, stray quotes and carriage returns).
        prop::collection::vec(any::<u8>(), 0..80).prop_map(|mut v| {
            v.retain(|&b| b != b'\n');
            v
        }),
        Just(Vec::new()),
        Just(b"\xff\xfe\x00".to_vec()),
        Just(b"2026-11-30 07:00:00,M\xe91,S1,bore,10".to_vec()),
    ]
}

fn check_invariants(bytes: &[u8], config: &Config, options: &ReadOptions) {
    let header_end = bytes.iter().position(|&b| b == b'\n');
    let mut stream = match ingest::read_from(bytes, "fuzz.csv", config, options) {
        Ok(s) => s,
        Err(_) => return, // the header was refused as a whole: nothing imported
    };
    let outcomes: Vec<RowOutcome> = stream.by_ref().collect();
    let counts = stream.counts();
    assert_counts_add_up(&counts, measurements(&outcomes));
    let expected_rows = match header_end {
        None => 0,
        Some(_) => physical_lines(bytes) - 1,
    };
    assert_eq!(counts.rows_read, expected_rows);
    assert_eq!(stream.file_sha256().unwrap(), hex(&Sha256::digest(bytes)));
    for o in &outcomes {
        if let RowOutcome::Rejected(r) = o {
            assert!(r.line >= 2 && r.line <= counts.rows_read + 1);
            assert!(!r.reason.is_empty());
        }
    }
    // The borrowing path the import uses gives the same outcomes and counts as the iterator,
    // read wholly through it or after a few outcomes taken by the iterator.
    for taken_first in [0, 3] {
        let mut stream = ingest::read_from(bytes, "fuzz.csv", config, options).unwrap();
        let mut sink = Collect(stream.by_ref().take(taken_first).collect());
        while stream.read_into(&mut sink) {}
        assert_eq!(sink.0, outcomes);
        assert_eq!(stream.counts(), counts);
        assert_eq!(stream.file_sha256().unwrap(), hex(&Sha256::digest(bytes)));
    }
}

/// Copies every outcome of `ImportStream::read_into`.
struct Collect(Vec<RowOutcome>);

impl OutcomeSink for Collect {
    fn accepted(&mut self, m: MeasurementRef<'_>) {
        self.0.push(RowOutcome::Accepted(m.to_measurement()));
    }

    fn rejected(&mut self, r: Rejection) {
        self.0.push(RowOutcome::Rejected(r));
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]

    #[test]
    fn long_files_never_panic_and_counts_add_up(
        lines in prop::collection::vec(nasty_line(), 0..30),
        final_newline in any::<bool>(),
    ) {
        let mut bytes = b"timestamp,machine,supplier,characteristic,value\n".to_vec();
        for (i, line) in lines.iter().enumerate() {
            bytes.extend_from_slice(line);
            if i + 1 < lines.len() || final_newline {
                bytes.push(b'\n');
            }
        }
        check_invariants(&bytes, &config(), &ReadOptions::default());
        check_invariants(&bytes, &config(), &ReadOptions { layout: None, add_new: true });
    }

    #[test]
    fn wide_files_never_panic_and_counts_add_up(lines in prop::collection::vec(nasty_line(), 0..30)) {
        let mut bytes = "\u{feff}timestamp,machine,supplier,bore,mass,extra\r\n".as_bytes().to_vec();
        for line in &lines {
            bytes.extend_from_slice(line);
            bytes.extend_from_slice(b"\r\n");
        }
        check_invariants(&bytes, &config(), &ReadOptions::default());
    }

    #[test]
    fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        check_invariants(&bytes, &config(), &ReadOptions::default());
        let mut with_header = b"timestamp,machine,supplier,characteristic,value\n".to_vec();
        with_header.extend_from_slice(&bytes);
        check_invariants(&with_header, &config(), &ReadOptions::default());
    }
}

/// Issue 13: a value far outside a characteristic's plausible range (by default its limits
/// widened by 10 tolerance widths) and an instrument's no-value code are rejected with reasons
/// naming the value and the range; a characteristic without limits has no range.
#[test]
fn implausible_values_and_no_value_codes_are_rejected() {
    let r = reject_one("2026-11-30 06:15:00,M1,S1,bore,10000123000000");
    assert_eq!(r.column.as_deref(), Some("value"));
    assert!(r.reason.contains("implausible"), "{}", r.reason);
    assert!(r.reason.contains("outside [7.9, 12.1]"), "{}", r.reason);
    let r = reject_one("2026-11-30 06:15:00,M1,S1,mass,9.9E+37");
    assert!(r.reason.contains("no-value code"), "{}", r.reason);
    let r = reject_one("2026-11-30 06:15:00,M1,S1,bore,-9.91E37");
    assert!(r.reason.contains("no-value code"), "{}", r.reason);
    // Without limits, a large value is kept (no range is known).
    let text = "timestamp,machine,supplier,characteristic,value\n\
                2026-11-30 06:15:00,M1,S1,mass,10000123000000\n";
    let (_, counts, _) = read_all(text.as_bytes(), &config(), &ReadOptions::default());
    assert_eq!(counts.accepted, 1);
}
