//! Drives `samewise compare` end to end: CSV text in, JSON (or the readable report) out.
//!
//! Certified values: NIST Statistical Reference Datasets, Analysis of Variance
//! (itl.nist.gov/div898/strd/anova), copied with their certified values into
//! tests/data/nist_strd_anova/ (see its README.md). Accuracy is measured as NIST does, by the log
//! relative error (about the number of correct significant digits).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use serde_json::Value;

mod common;
use common::{lre, temp_dir};

fn data_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data")
}

fn samewise(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_samewise"))
        .args(args)
        .output()
        .expect("run samewise")
}

fn compare_json(file: &Path, by: &str, measure: &str, extra: &[&str]) -> Value {
    let file = file.to_str().unwrap();
    let mut args = vec!["compare", file, "--by", by, "--measure", measure, "--json"];
    args.extend_from_slice(extra);
    let out = samewise(&args);
    assert!(
        out.status.success(),
        "samewise failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(!text.contains("NaN"), "JSON must never hold NaN");
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("not one JSON object: {e}\n{text}"))
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, bytes).unwrap();
    path
}

fn f(v: &Value, path: &[&str]) -> f64 {
    let mut cur = v;
    for key in path {
        cur = &cur[*key];
    }
    cur.as_f64()
        .unwrap_or_else(|| panic!("{} is not a number: {cur}", path.join(".")))
}

fn certified() -> Value {
    let text = std::fs::read_to_string(data_dir().join("nist_strd_anova/certified.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

const CERTIFIED_FIELDS: [&str; 9] = [
    "ss_between",
    "ss_within",
    "df_between",
    "df_within",
    "ms_between",
    "ms_within",
    "f",
    "r_squared",
    "resid_sd",
];

/// Checks every certified value of one dataset at LRE >= 9.
fn check_certified(name: &str, json: &Value, cert: &Value) {
    for field in CERTIFIED_FIELDS {
        let want: f64 = cert[field].as_str().unwrap().parse().unwrap();
        let got = f(json, &["anova", field]);
        let digits = lre(got, want);
        assert!(
            digits >= 9.0,
            "{name} {field}: got {got:e}, certified {want:e}, LRE {digits:.2}"
        );
    }
}

// NIST StRD ANOVA: SiRstv, SmLs01-06, AtmWtAg, each run through the binary from its CSV text.
#[test]
fn nist_strd_certified_values() {
    let cert = certified();
    for name in [
        "SiRstv", "SmLs01", "SmLs02", "SmLs03", "AtmWtAg", "SmLs04", "SmLs05", "SmLs06",
    ] {
        let path = data_dir().join(format!("nist_strd_anova/{name}.csv"));
        let json = compare_json(&path, "group", "value", &[]);
        check_certified(name, &json, &cert[name]);
        assert_eq!(
            json["n_obs"].as_u64(),
            cert[name]["n_total"].as_u64(),
            "{name}"
        );
        assert_eq!(
            json["n_groups"].as_u64(),
            cert[name]["k_groups"].as_u64(),
            "{name}"
        );
    }
}

/// Adds an exact decimal integer `shift` to decimal text such as "1000000.4" (string arithmetic,
/// no floating point).
fn shift_decimal(text: &str, shift: u128) -> String {
    let (int, frac) = text.split_once('.').unwrap_or((text, ""));
    let int: u128 = int.parse().unwrap();
    if frac.is_empty() {
        format!("{}", int + shift)
    } else {
        format!("{}.{frac}", int + shift)
    }
}

/// NIST's higher-difficulty SmLs07-09 are SmLs04-06 with every value shifted to about 1e12
/// (1000000000000.4 and so on) and carry the same certified values: every certified quantity
/// (sums of squares about means, df, mean squares, F, R-squared, residual SD) is invariant to
/// adding a constant. Here the shift is done by exact decimal string arithmetic on SmLs04-06, and
/// every certified value must still hold at LRE >= 9. Every other statistic (Welch, Kruskal-Wallis,
/// Levene, Brown-Forsythe, Bartlett, effect sizes, group SDs) must match the unshifted SmLs01-03 run
/// (the same data without the offset, whose ANOVA is certified above) at LRE >= 9 too.
#[test]
fn nist_strd_shifted_to_1e12() {
    let cert = certified();
    let dir = temp_dir("nist_strd_shifted_to_1e12");
    for (source, small) in [
        ("SmLs04", "SmLs01"),
        ("SmLs05", "SmLs02"),
        ("SmLs06", "SmLs03"),
    ] {
        let text =
            std::fs::read_to_string(data_dir().join(format!("nist_strd_anova/{source}.csv")))
                .unwrap();
        let mut shifted = String::from("group,value\n");
        for line in text.lines().skip(1) {
            let (g, v) = line.split_once(',').unwrap();
            // 1000000.4 + 999999000000 = 1000000000000.4
            shifted.push_str(&format!("{g},{}\n", shift_decimal(v, 999_999_000_000)));
        }
        assert!(shifted.contains("\n1,1000000000000.4\n"));
        let path = write(&dir, &format!("{source}_1e12.csv"), shifted.as_bytes());
        let json = compare_json(&path, "group", "value", &[]);
        check_certified(&format!("{source} shifted"), &json, &cert[source]);

        let reference = compare_json(
            &data_dir().join(format!("nist_strd_anova/{small}.csv")),
            "group",
            "value",
            &[],
        );
        let paths: [&[&str]; 17] = [
            &["welch", "f"],
            &["welch", "df2"],
            &["welch", "p"],
            &["kruskal_wallis", "h"],
            &["kruskal_wallis", "p"],
            &["levene", "statistic"],
            &["levene", "p"],
            &["brown_forsythe", "statistic"],
            &["brown_forsythe", "p"],
            &["bartlett", "statistic"],
            &["bartlett", "p"],
            &["effect", "eta_squared"],
            &["effect", "omega_squared"],
            &["effect", "mean_spread"],
            &["anova", "p"],
            &["sd_ratio"],
            &["n_beyond_3sd"],
        ];
        for p in paths {
            let got = f(&json, p);
            let want = f(&reference, p);
            assert!(
                lre(got, want) >= 9.0,
                "{source} shifted {}: {got:e} vs {want:e}",
                p.join(".")
            );
        }
        // The parts from the rest of the core: the same at LRE >= 9, or unavailable in both
        // (Shapiro-Wilk is defined for at most 5000 values).
        let more: [&[&str]; 8] = [
            &["shapiro_wilk", "w"],
            &["shapiro_wilk", "p"],
            &["variance_components", "between"],
            &["variance_components", "within"],
            &["variance_components", "icc"],
            &["sensitivity", "min_detectable_diff"],
            &["pairs", "0", "diff"],
            &["pairs", "0", "p_adj"],
        ];
        for p in more {
            let get = |v: &Value| {
                let mut cur = v;
                for key in p {
                    cur = match key.parse::<usize>() {
                        Ok(i) => &cur[i],
                        Err(_) => &cur[*key],
                    };
                }
                cur.as_f64()
            };
            match (get(&json), get(&reference)) {
                (Some(got), Some(want)) => assert!(
                    lre(got, want) >= 9.0,
                    "{source} shifted {}: {got:e} vs {want:e}",
                    p.join(".")
                ),
                (None, None) => assert_eq!(p[0], "shapiro_wilk", "{source}"),
                other => panic!("{source} {}: {other:?}", p.join(".")),
            }
        }
        for (g_big, g_small) in json["groups"]
            .as_array()
            .unwrap()
            .iter()
            .zip(reference["groups"].as_array().unwrap())
        {
            assert!(lre(f(g_big, &["sd"]), f(g_small, &["sd"])) >= 9.0);
            // mean_offset is relative to the origin, the median of the first 31 values (the
            // shifted file's is the reference's shifted by 999999999999): equal offsets.
            let (a, b) = (f(g_big, &["mean_offset"]), f(g_small, &["mean_offset"]));
            assert!((a - b).abs() <= 1e-9 * b.abs().max(0.1), "{a} vs {b}");
        }
        let shifted_origin = shift_decimal(reference["origin"].as_str().unwrap(), 999_999_999_999);
        assert_eq!(json["origin"].as_str().unwrap(), shifted_origin);
    }
}

// NIST/SEMATECH e-Handbook, section 7.4.3.3 (tests/data/nist_handbook/resistor_7433.csv):
// treatments SS 27.897 (df 2), error SS 17.452 (df 12), F 9.59, p = 0.00325 (printed precision).
#[test]
fn handbook_7433_through_the_binary() {
    let json = compare_json(
        &data_dir().join("nist_handbook/resistor_7433.csv"),
        "group",
        "value",
        &[],
    );
    assert!((f(&json, &["anova", "ss_between"]) - 27.897).abs() < 5e-4);
    assert!((f(&json, &["anova", "ss_within"]) - 17.452).abs() < 5e-4);
    assert!((f(&json, &["anova", "f"]) - 9.59).abs() < 5e-3);
    assert!((f(&json, &["anova", "p"]) - 0.00325).abs() < 5e-6);
}

// NIST/SEMATECH e-Handbook sections 1.3.5.10 / 1.3.5.7 (gear.csv): Brown-Forsythe (median Levene)
// W = 1.70591769300090, Bartlett T = 20.7858734280650 (exact values from the data,
// shared/refs/SOURCES.md), one-way F = 2.297, p = 0.0227 (printed).
#[test]
fn handbook_gear_through_the_binary() {
    let json = compare_json(
        &data_dir().join("nist_handbook/gear.csv"),
        "group",
        "value",
        &[],
    );
    assert!(
        lre(
            f(&json, &["brown_forsythe", "statistic"]),
            1.705_917_693_000_90
        ) >= 12.0
    );
    assert!(lre(f(&json, &["bartlett", "statistic"]), 20.785_873_428_065_0) >= 12.0);
    assert!(lre(f(&json, &["levene", "statistic"]), 2.159_459_856_472_87) >= 12.0);
    assert!((f(&json, &["anova", "f"]) - 2.297).abs() < 5e-4);
    assert!((f(&json, &["anova", "p"]) - 0.0227).abs() < 5e-5);
    assert!((f(&json, &["anova", "resid_sd"]) - 0.005938574).abs() < 5e-10);
    assert_eq!(json["groups"].as_array().unwrap().len(), 10);
    assert!(json["caution"]
        .as_str()
        .unwrap()
        .contains("decision support"));
}

// Quoted labels with commas and non-ASCII text, a byte-order mark, CRLF line ends, extra columns,
// first-seen group order.
#[test]
fn csv_dialects() {
    let dir = temp_dir("csv_dialects");
    let text = "\u{feff}id,\"Maschine, Linie\",Durchmesser mm\r\n\
                1,\"Presse 2, Süd\",10.5\r\n\
                2,Ofen Ä,11.0\r\n\
                3,\"Presse 2, Süd\",10.7\r\n\
                4,Ofen Ä,11.4\r\n\
                5,\"Presse 2, Süd\",10.6\r\n\
                6,Ofen Ä,11.1\r\n";
    let path = write(&dir, "dialect.csv", text.as_bytes());
    let json = compare_json(&path, "Maschine, Linie", "Durchmesser mm", &[]);
    let groups = json["groups"].as_array().unwrap();
    assert_eq!(groups[0]["name"], "Presse 2, Süd");
    assert_eq!(groups[1]["name"], "Ofen Ä");
    assert_eq!(groups[0]["n"], 3);
    // Hand check: means 10.6 and 11.1666...; SS_within = 0.02 + 0.26/3 (squared deviations
    // 0.01 + 0.01 + 0 and 0.02777... + 0.05444... + 0.00444...) = 0.0666...
    assert!(lre(f(&groups[0], &["mean"]), 10.6) > 14.0);
    assert!(lre(f(&json, &["anova", "ss_within"]), 0.02 + 0.26 / 3.0) > 13.0);
}

#[test]
fn readable_report() {
    let out = samewise(&[
        "compare",
        data_dir().join("nist_handbook/gear.csv").to_str().unwrap(),
        "--by",
        "group",
        "--measure",
        "value",
        "--lsl",
        "0.98",
        "--usl",
        "1.02",
    ]);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    for needle in [
        "One-way ANOVA",
        "Brown-Forsythe",
        "Bartlett",
        "Leading result",
        "Welch",
        "Kruskal-Wallis",
        "eta-squared",
        "% of the tolerance",
        "decision support",
    ] {
        assert!(text.contains(needle), "report lacks {needle}:\n{text}");
    }
}

// --- Bad input (issue 2): a clear error naming file, line and column, exit code non-zero; or a
// per-statistic null with a reason when the analysis can still run.

fn compare_fails(test: &str, bytes: &[u8], by: &str, measure: &str) -> String {
    let dir = temp_dir(test);
    let path = write(&dir, "input.csv", bytes);
    let out = samewise(&[
        "compare",
        path.to_str().unwrap(),
        "--by",
        by,
        "--measure",
        measure,
        "--json",
    ]);
    assert!(!out.status.success(), "{test}: expected failure");
    assert!(out.stdout.is_empty(), "{test}: no JSON on failure");
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(
        err.contains("input.csv"),
        "{test}: error names the file: {err}"
    );
    assert!(!err.contains("panicked"), "{test}: {err}");
    err
}

#[test]
fn bad_input_fewer_than_two_groups() {
    let err = compare_fails("fewer_groups", b"g,v\na,1\na,2\n", "g", "v");
    assert!(err.contains("at least two groups"), "{err}");
}

#[test]
fn bad_input_empty_file() {
    let err = compare_fails("empty_file", b"", "g", "v");
    assert!(err.contains("empty"), "{err}");
    let err = compare_fails("header_only", b"g,v\n", "g", "v");
    assert!(err.contains("no data rows"), "{err}");
}

#[test]
fn bad_input_missing_column() {
    let err = compare_fails("missing_column", b"g,v\na,1\nb,2\n", "g", "diameter");
    assert!(err.contains("column \"diameter\" not found"), "{err}");
    assert!(err.contains("\"g\", \"v\""), "{err}");
}

#[test]
fn bad_input_ragged_row() {
    let err = compare_fails("ragged", b"g,v\na,1\nb,2,7\na,3\n", "g", "v");
    assert!(err.contains(":3:") && err.contains("ragged"), "{err}");
}

#[test]
fn bad_input_non_utf8() {
    let err = compare_fails("non_utf8", b"g,v\na,1\nb\xe9,2\n", "g", "v");
    assert!(err.contains(":3:") && err.contains("UTF-8"), "{err}");
}

#[test]
fn bad_input_cells() {
    for (name, cell, needle) in [
        ("nan", "NaN", "NaN"),
        ("inf", "inf", "inf"),
        ("empty_cell", "", "empty"),
        ("text", "n/a", "n/a"),
        ("comma", "1,5", "1,5"),
    ] {
        let csv = if cell.contains(',') {
            format!("g,v\na,1\nb,2\nb,\"{cell}\"\n")
        } else {
            format!("g,v\na,1\nb,2\nb,{cell}\n")
        };
        let err = compare_fails(name, csv.as_bytes(), "g", "v");
        assert!(
            err.contains(":4:") && err.contains("column \"v\"") && err.contains(needle),
            "{name}: {err}"
        );
    }
}

#[test]
fn bad_input_empty_label() {
    let err = compare_fails("empty_label", b"g,v\na,1\n,2\n", "g", "v");
    assert!(err.contains(":3:") && err.contains("column \"g\""), "{err}");
}

// A group with one value: the analysis runs, statistics needing that group's variance are null
// with a reason beside them.
#[test]
fn group_with_one_value_gives_reasons() {
    let dir = temp_dir("one_value");
    let path = write(&dir, "one.csv", b"g,v\na,1\na,2\na,4\nb,3\n");
    let json = compare_json(&path, "g", "v", &[]);
    assert!(json["anova"]["f"].is_number());
    assert!(json["welch"].is_null());
    assert!(json["welch_reason"].as_str().unwrap().contains("group 2"));
    assert!(json["bartlett"].is_null() && json["bartlett_reason"].is_string());
    assert!(json["groups"][1]["sd"].is_null() && json["groups"][1]["sd_reason"].is_string());
}

// All values equal: zero within-group variance; F undefined, said so, exit 0 with the group table.
#[test]
fn all_values_equal_gives_reasons() {
    let dir = temp_dir("all_equal");
    let path = write(&dir, "flat.csv", b"g,v\na,5\na,5\nb,5\nb,5\n");
    let json = compare_json(&path, "g", "v", &[]);
    assert!(json["anova"].is_null());
    assert!(json["anova_reason"]
        .as_str()
        .unwrap()
        .contains("F is undefined"));
    assert!(json["kruskal_wallis"].is_null() && json["kruskal_wallis_reason"].is_string());
    assert!(json["leading"]["p"].is_null());
    assert_eq!(json["groups"][0]["mean"], 5.0);
}

// --- Reference fixtures from general-purpose libraries (tests/data/reference/oneway.json, written
// by scripts/reference.py: exact rational SS; scipy f_oneway, kruskal, levene, bartlett;
// statsmodels anova_oneway for Welch; see tests/data/README.md). Each dataset goes through the
// binary as CSV text. The values are written with Rust's shortest round-trip formatting, which
// gives back the decimal text of the fixture (at most 15 significant digits), so the exact-origin
// path sees the same decimals the script used.
//
// Agreement required (issue 2): >= 10 significant digits for SS, MS, F, Welch, Kruskal-Wallis,
// Levene, Brown-Forsythe and Bartlett statistics and effect sizes; >= 8 for their p-values (down
// to 1e-300 where the reference represents them).

fn fixture_csv(dir: &Path, name: &str, groups: &[Value]) -> PathBuf {
    let path = dir.join(format!("{name}.csv"));
    let mut w = csv::Writer::from_path(&path).unwrap();
    w.write_record(["group", "value"]).unwrap();
    for g in groups {
        let label = g["name"].as_str().unwrap();
        for v in g["values"].as_array().unwrap() {
            w.write_record([label, &format!("{}", v.as_f64().unwrap())])
                .unwrap();
        }
    }
    w.flush().unwrap();
    path
}

fn check_close(failures: &mut Vec<String>, what: String, got: &Value, want: &Value, digits: f64) {
    let Some(want) = want.as_f64() else {
        return; // the reference could not give this value
    };
    if digits == 8.0 && want < 1e-300 {
        return;
    }
    let Some(got) = got.as_f64() else {
        failures.push(format!("{what}: null, reference {want:e}"));
        return;
    };
    let d = lre(got, want);
    if d < digits {
        failures.push(format!(
            "{what}: {got:e} vs reference {want:e} (LRE {d:.2})"
        ));
    }
}

#[test]
fn reference_fixtures_oneway() {
    let text = std::fs::read_to_string(data_dir().join("reference/oneway.json")).unwrap();
    let fixtures: Value = serde_json::from_str(&text).unwrap();
    let dir = temp_dir("reference_fixtures_oneway");
    let mut failures = Vec::new();
    let datasets = fixtures["datasets"].as_array().unwrap();
    assert!(datasets.len() >= 12);
    for ds in datasets {
        let name = ds["name"].as_str().unwrap();
        let path = fixture_csv(&dir, name, ds["groups"].as_array().unwrap());
        let json = compare_json(&path, "group", "value", &[]);
        let e = &ds["expected"];
        for field in [
            "ss_between",
            "ss_within",
            "ss_total",
            "ms_between",
            "ms_within",
            "f",
            "r_squared",
            "resid_sd",
        ] {
            check_close(
                &mut failures,
                format!("{name} anova.{field}"),
                &json["anova"][field],
                &e["anova"][field],
                10.0,
            );
        }
        for field in ["df_between", "df_within"] {
            assert_eq!(json["anova"][field], e["anova"][field], "{name} {field}");
        }
        check_close(
            &mut failures,
            format!("{name} anova.p"),
            &json["anova"]["p"],
            &e["anova"]["p"],
            8.0,
        );
        let pairs: [(&str, &str, &str, &str); 6] = [
            ("welch", "f", "welch", "f"),
            ("welch", "df2", "welch", "df2"),
            ("kruskal_wallis", "h", "kruskal_wallis", "h"),
            ("levene", "statistic", "levene", "statistic"),
            ("brown_forsythe", "statistic", "brown_forsythe", "statistic"),
            ("bartlett", "statistic", "bartlett", "statistic"),
        ];
        let all_pairs = ds["groups"]
            .as_array()
            .unwrap()
            .iter()
            .all(|g| g["values"].as_array().unwrap().len() == 2);
        for (ours, field, theirs, their_field) in pairs {
            if e[theirs].is_null() {
                continue;
            }
            if all_pairs && (ours == "levene" || ours == "brown_forsythe") {
                // Every group has two values, so both absolute deviations of a group are equal
                // (|x1 - x2| / 2): the deviations have zero within-group variance and the statistic
                // is undefined. scipy reports F = 4.6e26 here, which is rounding noise divided by
                // rounding noise; samewise reports null with the reason instead.
                assert!(json[ours].is_null(), "{name} {ours} should be unavailable");
                assert!(json[format!("{ours}_reason")].is_string());
                assert!(e[theirs][their_field].as_f64().unwrap() > 1e15);
                continue;
            }
            check_close(
                &mut failures,
                format!("{name} {ours}.{field}"),
                &json[ours][field],
                &e[theirs][their_field],
                10.0,
            );
            check_close(
                &mut failures,
                format!("{name} {ours}.p"),
                &json[ours]["p"],
                &e[theirs]["p"],
                8.0,
            );
        }
        // Shapiro-Wilk on the residuals: scipy.stats.shapiro, >= 6 digits (issue 2).
        if !e["shapiro_wilk"].is_null() {
            for field in ["w", "p"] {
                check_close(
                    &mut failures,
                    format!("{name} shapiro_wilk.{field}"),
                    &json["shapiro_wilk"][field],
                    &e["shapiro_wilk"][field],
                    6.0,
                );
            }
        }
        // Pairs: the JSON carries every pair (a < b) with the method that matches the leading
        // result; differences against scipy tukey_hsd (>= 8 digits, issue 3; compared absolutely
        // when the reference difference is 0).
        let pairs = json["pairs"].as_array().unwrap();
        let k = ds["groups"].as_array().unwrap().len();
        assert_eq!(pairs.len(), k * (k - 1) / 2, "{name}");
        // Welch's statistic leads with its F distribution or with the bootstrap-t p: pairs by
        // Games-Howell either way.
        let method = if json["leading"]["method"] == "welch"
            || json["leading"]["method"] == "welch_bootstrap_t"
        {
            "games_howell"
        } else {
            "tukey_kramer"
        };
        for (ours, theirs) in pairs.iter().zip(e["tukey"].as_array().unwrap()) {
            assert_eq!(ours["method"], method, "{name}");
            assert_eq!(
                (&ours["a_index"], &ours["b_index"]),
                (&theirs["a"], &theirs["b"]),
                "{name}"
            );
            let (g, w) = (f(ours, &["diff"]), f(theirs, &["diff"]));
            if w == 0.0 {
                assert!(g.abs() < 1e-12, "{name} diff {g}");
            } else {
                check_close(
                    &mut failures,
                    format!("{name} pair diff"),
                    &ours["diff"],
                    &theirs["diff"],
                    8.0,
                );
            }
        }
        check_close(
            &mut failures,
            format!("{name} eta_squared"),
            &json["effect"]["eta_squared"],
            &e["eta_squared"],
            10.0,
        );
        check_close(
            &mut failures,
            format!("{name} omega_squared"),
            &json["effect"]["omega_squared"],
            &e["omega_squared"],
            10.0,
        );
    }
    assert!(
        failures.is_empty(),
        "{} disagreements:\n{}",
        failures.len(),
        failures.join("\n")
    );
}

/// Issue 13, printing: a p-value below what a double holds is shown as `< 1e-300` (never `0`)
/// and in JSON as the bound with `p_is_bound`; the outlier count is read against what normal
/// residuals give; the Shapiro-Wilk verdict uses the level its header states (5 %).
#[test]
fn issue_13_p_bounds_outlier_expectation_and_stated_levels() {
    let dir = temp_dir("issue-13-printing");
    let mut csv = String::from("machine,bore\n");
    for i in 0..400 {
        let wiggle = f64::from(i % 7) * 0.0001;
        csv.push_str(&format!("A,{:.4}\nB,{:.4}\n", 10.0 + wiggle, 20.0 + wiggle));
    }
    let file = write(&dir, "far.csv", csv.as_bytes());
    let json = compare_json(&file, "machine", "bore", &[]);
    assert_eq!(
        json["leading"]["p"].as_f64(),
        Some(1e-300),
        "{:#}",
        json["leading"]
    );
    assert_eq!(json["leading"]["p_is_bound"], true);
    let out = samewise(&[
        "compare",
        file.to_str().unwrap(),
        "--by",
        "machine",
        "--measure",
        "bore",
    ]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("< 1e-300"), "{text}");
    assert!(
        !text.contains("p = 0\n") && !text.contains("p = 0.00e0"),
        "{text}"
    );
    let outliers = text
        .lines()
        .find(|l| l.contains("residuals beyond 3 SD"))
        .unwrap();
    assert!(
        outliers.contains("normal residuals give 2.16"),
        "{outliers}"
    );
    assert!(text.contains("at the 5% level"), "{text}");
    let sw = text.lines().find(|l| l.contains("Shapiro-Wilk")).unwrap();
    let p: f64 = sw
        .split("p = ")
        .nth(1)
        .unwrap()
        .split_whitespace()
        .next()
        .unwrap()
        .parse()
        .unwrap_or(0.0);
    assert_eq!(sw.trim_end().ends_with("attention"), p < 0.05, "{sw}");
}

/// Issue 13: the origin is the median of the first 31 values, so a wild first value (a typo)
/// costs the other values no digits: the same rows with the typo first or last give the same
/// statistics to 12 digits, and the origin is never the typo.
#[test]
fn issue_13_a_wild_first_value_does_not_fix_the_origin() {
    let dir = temp_dir("issue-13-compare-wild");
    let mut rows = Vec::new();
    for i in 0..60 {
        rows.push(format!(
            "{},42.{:06}",
            ["A", "B", "C"][i % 3],
            12 + (i * 37) % 11
        ));
    }
    let typo = "A,42000012000000".to_string();
    let first = format!("machine,bore\n{typo}\n{}\n", rows.join("\n"));
    let last = format!("machine,bore\n{}\n{typo}\n", rows.join("\n"));
    let a = compare_json(
        &write(&dir, "first.csv", first.as_bytes()),
        "machine",
        "bore",
        &[],
    );
    let b = compare_json(
        &write(&dir, "last.csv", last.as_bytes()),
        "machine",
        "bore",
        &[],
    );
    assert_ne!(a["origin"], "42000012000000");
    for path in [
        &["anova", "f"][..],
        &["anova", "ss_within"],
        &["welch", "f"],
    ] {
        let (x, y) = (f(&a, path), f(&b, path));
        assert!(lre(x, y) >= 12.0, "{path:?}: {x} vs {y}");
    }
}

/// Issue 13: groups that are each constant (a coarse gauge) and differ are a difference: the
/// exact permutation test leads (hand count: 3! of 15!/(5! 5! 5!) = 756,756 arrangements keep
/// every group constant, p = 6/756756), and the defined parts of the table are given.
#[test]
fn issue_13_constant_groups_are_a_difference() {
    let dir = temp_dir("issue-13-constant");
    let mut csv = String::from("machine,bore\n");
    for (g, v) in [("A", "2.5"), ("B", "2.6"), ("C", "2.7")] {
        for _ in 0..5 {
            csv.push_str(&format!("{g},{v}\n"));
        }
    }
    let json = compare_json(
        &write(&dir, "c.csv", csv.as_bytes()),
        "machine",
        "bore",
        &[],
    );
    assert_eq!(json["leading"]["method"], "exact_permutation");
    assert!(lre(f(&json, &["leading", "p"]), 6.0 / 756_756.0) >= 13.0);
    assert!(json["leading"]["statistic_reason"].is_string());
    let c = &json["constant_groups"];
    assert!(lre(f(c, &["ss_between"]), 0.1) >= 12.0);
    assert_eq!((f(c, &["df_between"]), f(c, &["df_within"])), (2.0, 12.0));
    assert!(lre(f(c, &["grand_mean"]), 2.6) >= 14.0);
}

/// Issue 15: `compare --delimiter` and `--decimal-comma` read a German-locale export; header
/// names match ignoring case, as in the import; the same values with points give the same F.
#[test]
fn issue_15_compare_reads_decimal_comma_and_other_delimiters() {
    let dir = std::env::temp_dir().join(format!("samewise-compare-locale-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let mut de = String::from("Maschine;Durchmesser\r\n");
    let mut pt = String::from("maschine,durchmesser\n");
    for i in 0..30u32 {
        let v = format!("{},{:03}", 10 + i % 2, (i * 37) % 1000);
        de.push_str(&format!("M{};{v}\r\n", 1 + i % 3));
        pt.push_str(&format!("M{},{}\n", 1 + i % 3, v.replace(',', ".")));
    }
    std::fs::write(dir.join("de.csv"), &de).unwrap();
    std::fs::write(dir.join("pt.csv"), &pt).unwrap();
    let run = |args: &[&str]| {
        Command::new(env!("CARGO_BIN_EXE_samewise"))
            .current_dir(&dir)
            .args(args)
            .output()
            .unwrap()
    };
    let a = run(&[
        "compare",
        "de.csv",
        "--by",
        "MASCHINE",
        "--measure",
        "durchmesser",
        "--decimal-comma",
        "--json",
    ]);
    assert!(a.status.success(), "{}", String::from_utf8_lossy(&a.stderr));
    let b = run(&[
        "compare",
        "pt.csv",
        "--by",
        "Maschine",
        "--measure",
        "Durchmesser",
        "--json",
    ]);
    assert!(b.status.success(), "{}", String::from_utf8_lossy(&b.stderr));
    let (a, b): (serde_json::Value, serde_json::Value) = (
        serde_json::from_slice(&a.stdout).unwrap(),
        serde_json::from_slice(&b.stdout).unwrap(),
    );
    assert_eq!(a["anova"]["f"], b["anova"]["f"]);
    assert_eq!(a["groups"], b["groups"]);
    // auto finds the semicolon.
    let c = run(&[
        "compare",
        "de.csv",
        "--by",
        "maschine",
        "--measure",
        "durchmesser",
        "--decimal-comma",
        "--delimiter",
        "auto",
        "--json",
    ]);
    assert!(c.status.success(), "{}", String::from_utf8_lossy(&c.stderr));
    // A comma delimiter with a decimal comma is refused.
    let d = run(&[
        "compare",
        "de.csv",
        "--by",
        "maschine",
        "--measure",
        "durchmesser",
        "--decimal-comma",
        "--delimiter",
        ",",
    ]);
    assert!(!d.status.success());
    assert!(String::from_utf8_lossy(&d.stderr).contains("could not be told from two fields"));
    let _ = std::fs::remove_dir_all(&dir);
}

/// Issue 15: `compare` reads CSV with the import's reader: the line numbers in its errors are
/// physical lines, after blank lines and with CRLF line ends, and a quoted line break is an
/// error as in the import.
#[test]
fn issue_15_compare_line_numbers_and_quoting_follow_the_import() {
    let dir = std::env::temp_dir().join(format!("samewise-compare-lines-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let run = |file: &str, text: &str| {
        std::fs::write(dir.join(file), text).unwrap();
        let o = Command::new(env!("CARGO_BIN_EXE_samewise"))
            .current_dir(&dir)
            .args(["compare", file, "--by", "m", "--measure", "v"])
            .output()
            .unwrap();
        String::from_utf8_lossy(&o.stderr).into_owned()
    };
    // Line 6 (after two blank lines) holds the bad value.
    let err = run("a.csv", "m,v\r\nA,1.0\r\n\r\n\r\nB,2.0\r\nB,x\r\n");
    assert!(err.contains("a.csv:6"), "{err}");
    let err = run("b.csv", "m,v\nA,1.0\nB,\"2.0\n\"\n");
    assert!(err.contains("b.csv:3"), "{err}");
    let _ = std::fs::remove_dir_all(&dir);
}
