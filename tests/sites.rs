//! A check that compares sites (`check --sites`, `analysis::sites`): the same characteristic in
//! several plants' data, the site as the factor.
//!
//! - NIST StRD one-way ANOVA datasets (tests/data/nist_strd_anova, source in its README) with
//!   each group stored as a site of its own: every site picks its own exact decimal origin from
//!   its own first value, the comparison moves them onto one, and the certified values must hold
//!   as they do for `samewise compare` of the same file (tests/compare.rs), LRE >= 9.
//! - Three invented sites in schemas of a database of their own on the PostgreSQL server named
//!   by `SAMEWISE_TEST_POSTGRES`
//!   (`.ci/run` starts one and sets it; the test fails in CI without it): the site that is off
//!   is flagged and named, a characteristic made to other limits and one that only one site has
//!   are left out with their reasons, the JSON validates against docs/schema/check-sites.json,
//!   and the statistics equal `samewise compare` of the same values with a site column.

mod common;

use std::path::Path;

use chrono::{Duration, TimeZone, Utc};
use common::{lre, output_text, samewise, samewise_ok, temp_dir, Rng};
use samewise::analysis::sites::{check_sites, Site};
use samewise::analysis::CheckOptions;
use serde_json::Value;

const NIST_CONFIG: &str = r#"
[plant]
name = "Invented site holding NIST StRD values"
time_zone = "UTC"
production_day_start = "06:00"
database = "unused.db"

[[characteristic]]
name = "x"

[[factor]]
name = "machine"
"#;

/// The certified NIST fields a check's test carries (its mean square between is not printed).
const CERTIFIED: [&str; 8] = [
    "ss_between",
    "ss_within",
    "df_between",
    "df_within",
    "ms_within",
    "f",
    "r_squared",
    "resid_sd",
];

fn data_dir() -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data")
}

/// An in-memory plant holding `values` (exact decimal text) of characteristic `x` on
/// 2026-11-10, one value per second from 07:00 UTC.
fn site_with(
    dir: &Path,
    tag: &str,
    values: &[&str],
) -> (
    samewise::config::Config,
    Box<dyn samewise::storage::PlantStore>,
) {
    let config_path = dir.join(format!("{tag}.toml"));
    std::fs::write(&config_path, NIST_CONFIG).unwrap();
    let config = samewise::config::Config::load(&config_path).unwrap();
    let mut store = samewise::storage::open_in_memory().unwrap();
    store.sync_config(&config).unwrap();
    let t0 = Utc.with_ymd_and_hms(2026, 11, 10, 7, 0, 0).unwrap();
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    for (i, v) in values.iter().enumerate() {
        let ts = t0 + Duration::seconds(i as i64);
        csv.push_str(&format!("{},x,{v},m1\n", ts.format("%Y-%m-%dT%H:%M:%SZ")));
    }
    let csv_path = dir.join(format!("{tag}.csv"));
    std::fs::write(&csv_path, csv).unwrap();
    let accepted = import_into(&mut *store, &config, &csv_path);
    assert_eq!(accepted as usize, values.len(), "{tag}: every value stored");
    (config, store)
}

/// Imports the CSV at `path` into `store` by the plant's layout; the values stored.
fn import_into(
    store: &mut dyn samewise::storage::PlantStore,
    config: &samewise::config::Config,
    path: &Path,
) -> u64 {
    let stream = samewise::ingest::read_file(path, config, None).unwrap();
    let options = samewise::storage::ImportOptions {
        force: false,
        started_at: Utc::now(),
    };
    store.import(stream, &options).unwrap().accepted
}

#[test]
fn nist_strd_groups_stored_as_sites_keep_the_certified_values() {
    let certified: Value = serde_json::from_str(
        &std::fs::read_to_string(data_dir().join("nist_strd_anova/certified.json")).unwrap(),
    )
    .unwrap();
    let dir = temp_dir("sites-nist");
    for name in ["SiRstv", "AtmWtAg", "SmLs04", "SmLs05", "SmLs06"] {
        let text = std::fs::read_to_string(data_dir().join(format!("nist_strd_anova/{name}.csv")))
            .unwrap();
        let mut groups: Vec<(String, Vec<&str>)> = Vec::new();
        for line in text.lines().skip(1) {
            let (g, v) = line.split_once(',').unwrap();
            match groups.iter_mut().find(|(name, _)| name == g) {
                Some((_, values)) => values.push(v),
                None => groups.push((g.to_string(), vec![v])),
            }
        }
        let stores: Vec<_> = groups
            .iter()
            .map(|(g, values)| site_with(&dir, &format!("{name}-{g}"), values))
            .collect();
        // The sites' origins differ (each is its own first value), so the comparison re-centres.
        let sites: Vec<Site<'_>> = groups
            .iter()
            .zip(&stores)
            .map(|((g, _), (_, store))| Site {
                name: format!("site{g}"),
                store: &**store,
            })
            .collect();
        let start = Utc.with_ymd_and_hms(2026, 11, 10, 6, 0, 0).unwrap();
        let options = CheckOptions::from_config(&stores[0].0);
        let checked = check_sites(&sites, start, start + Duration::days(1), &options).unwrap();
        assert_eq!(
            checked.content.tests.len(),
            1,
            "{name}: one shared characteristic"
        );
        let t = &checked.content.tests[0];
        assert_eq!(t.factor, "site");
        let cert = &certified[name];
        assert_eq!(Some(t.n_obs), cert["n_total"].as_u64(), "{name}");
        assert_eq!(Some(t.n_groups_used), cert["k_groups"].as_u64(), "{name}");
        let json = t.to_json();
        for field in CERTIFIED {
            let want: f64 = cert[field].as_str().unwrap().parse().unwrap();
            let got = json["anova"][field]
                .as_f64()
                .unwrap_or_else(|| panic!("{name} {field}: {}", json["anova"]));
            let digits = lre(got, want);
            assert!(
                digits >= 9.0,
                "{name} {field}: got {got:e}, certified {want:e}, LRE {digits:.2}"
            );
        }
        let values: u64 = checked.sites.iter().map(|s| s.values).sum();
        assert_eq!(
            Some(values),
            cert["n_total"].as_u64(),
            "{name}: every value read"
        );
    }
}

/// A database of this run on the test server, dropped at the end.
struct Database {
    server: String,
    name: String,
    url: String,
}

impl Database {
    fn create(server: &str, name: &str) -> Database {
        let (base, query) = server.split_once('?').unwrap_or((server, ""));
        let root = &base[..base.rfind('/').expect("a database URL ends in /dbname")];
        let url = if query.is_empty() {
            format!("{root}/{name}")
        } else {
            format!("{root}/{name}?{query}")
        };
        let psql = |sql: &str| {
            std::process::Command::new("psql")
                .args([server, "-X", "-q", "-c", sql])
                .output()
                .unwrap()
        };
        psql(&format!("DROP DATABASE IF EXISTS {name}"));
        let out = psql(&format!("CREATE DATABASE {name}"));
        assert!(out.status.success(), "{}", output_text(&out));
        Database {
            server: server.to_string(),
            name: name.to_string(),
            url,
        }
    }
}

impl Drop for Database {
    fn drop(&mut self) {
        let _ = std::process::Command::new("psql")
            .args([
                self.server.as_str(),
                "-X",
                "-q",
                "-c",
                &format!("DROP DATABASE IF EXISTS {} WITH (FORCE)", self.name),
            ])
            .output();
    }
}

fn server() -> Option<String> {
    match std::env::var("SAMEWISE_TEST_POSTGRES") {
        Ok(url) => Some(url),
        Err(_) => {
            assert!(
                std::env::var_os("CI").is_none(),
                "SAMEWISE_TEST_POSTGRES is not set in CI (.ci/run starts a server and sets it)"
            );
            eprintln!("SAMEWISE_TEST_POSTGRES is not set: PostgreSQL test skipped");
            None
        }
    }
}

/// One invented site: `bore` (the same limits everywhere) with its values shifted by `bore_shift`
/// mm, `width` with the upper limit `width_usl`, and `extra` characteristics of its own.
fn invented_site(
    dir: &Path,
    url: &str,
    schema: &str,
    seed: u64,
    bore_shift: f64,
    width_usl: f64,
    extra: &[&str],
) -> String {
    let mut config = format!(
        r#"
[plant]
name = "Invented site {schema}"
time_zone = "UTC"
production_day_start = "06:00"

[database]
url = "{url}"
schema = "{schema}"

[[characteristic]]
name = "bore"
unit = "mm"
lsl = 9.9
usl = 10.1

[[characteristic]]
name = "width"
unit = "mm"
lsl = 4.9
usl = {width_usl}

[[factor]]
name = "machine"
"#
    );
    for name in extra {
        config.push_str(&format!(
            "\n[[characteristic]]\nname = \"{name}\"\nunit = \"mm\"\n"
        ));
    }
    std::fs::write(dir.join("plant.toml"), config).unwrap();
    let mut rng = Rng(seed);
    let mut csv = String::from("timestamp,characteristic,value,machine\n");
    let mut rows = Vec::new();
    let t0 = Utc.with_ymd_and_hms(2026, 11, 10, 7, 0, 0).unwrap();
    for i in 0..24 {
        let ts = (t0 + Duration::minutes(20 * i)).format("%Y-%m-%dT%H:%M:%SZ");
        let machine = 1 + i % 2;
        let bore = 10.0 + bore_shift + 0.004 * rng.normal();
        let width = 5.0 + 0.004 * rng.normal();
        csv.push_str(&format!("{ts},bore,{bore:.4},M{machine}\n"));
        csv.push_str(&format!("{ts},width,{width:.4},M{machine}\n"));
        for name in extra {
            csv.push_str(&format!(
                "{ts},{name},{:.4},M{machine}\n",
                2.0 + rng.normal()
            ));
        }
        rows.push(format!("{bore:.4}"));
    }
    std::fs::write(dir.join("m.csv"), csv).unwrap();
    samewise_ok(dir, &["init"]);
    samewise_ok(dir, &["import", "m.csv"]);
    rows.join(",")
}

#[test]
fn sites_in_one_database_are_compared_with_the_site_as_the_factor() {
    let Some(server_url) = server() else { return };
    let pid = std::process::id();
    // A database of its own, so that `--sites all` sees exactly the sites made here.
    let database = Database::create(&server_url, &format!("samewise_sites_{pid}"));
    let url = database.url.clone();
    let names = [
        format!("north_{pid}"),
        format!("south_{pid}"),
        format!("east_{pid}"),
    ];
    let dirs: Vec<_> = names
        .iter()
        .map(|n| temp_dir(&format!("sites-{n}")))
        .collect();
    // South's bores run 0.02 mm high (10 % of the tolerance, five within-site SDs); east makes
    // width to a wider limit, and only east measures depth.
    let bores = [
        invented_site(&dirs[0], &url, &names[0], 1, 0.0, 5.1, &[]),
        invented_site(&dirs[1], &url, &names[1], 2, 0.02, 5.1, &[]),
        invented_site(&dirs[2], &url, &names[2], 3, 0.0, 5.2, &["depth"]),
    ];
    let list = names.join(",");
    let out = samewise(
        &dirs[0],
        &["check", "--day", "2026-11-10", "--sites", &list, "--json"],
    );
    assert_eq!(out.status.code(), Some(3), "a flag: {}", output_text(&out));
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    let schema: Value = serde_json::from_str(
        &std::fs::read_to_string(
            Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/schema/check-sites.json"),
        )
        .unwrap(),
    )
    .unwrap();
    let validator = jsonschema::validator_for(&schema).unwrap();
    let errors: Vec<String> = validator.iter_errors(&doc).map(|e| e.to_string()).collect();
    assert!(errors.is_empty(), "{errors:#?}");
    assert_eq!(doc["stored"], false);
    let sites: Vec<&str> = doc["sites"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["site"].as_str().unwrap())
        .collect();
    assert_eq!(sites, names.iter().map(String::as_str).collect::<Vec<_>>());
    for s in doc["sites"].as_array().unwrap() {
        assert_eq!(
            s["values"], 24,
            "{s}: bore's 24 values (width is not compared)"
        );
    }
    let tests = doc["tests"].as_array().unwrap();
    assert_eq!(
        tests.len(),
        1,
        "only bore is shared under one specification"
    );
    let bore = &tests[0];
    assert_eq!(bore["characteristic"], "bore");
    assert_eq!(bore["factor"], "site");
    assert!(
        bore["state"].as_str().unwrap().starts_with("differs"),
        "{bore}"
    );
    assert_eq!(bore["stands_out"]["level"], names[1].as_str(), "{bore}");
    assert_eq!(bore["n_obs"], 72);
    let left: Vec<(&str, &str)> = doc["not_compared"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| {
            (
                n["characteristic"].as_str().unwrap(),
                n["reason"].as_str().unwrap(),
            )
        })
        .collect();
    assert_eq!(left.len(), 2, "{left:?}");
    assert_eq!(left[0].0, "width");
    assert!(
        left[0].1.contains("usl 5.2") && left[0].1.contains(names[2].as_str()),
        "{}",
        left[0].1
    );
    assert_eq!(left[1].0, "depth");
    assert!(left[1].1.contains("only site"), "{}", left[1].1);

    // The same values with a site column through `samewise compare`: the same statistics.
    let mut csv = String::from("site,bore\n");
    for (site, values) in names.iter().zip(&bores) {
        for v in values.split(',') {
            csv.push_str(&format!("{site},{v}\n"));
        }
    }
    std::fs::write(dirs[0].join("bores.csv"), csv).unwrap();
    let compared: Value = serde_json::from_str(&samewise_ok(
        &dirs[0],
        &[
            "compare",
            "bores.csv",
            "--by",
            "site",
            "--measure",
            "bore",
            "--json",
        ],
    ))
    .unwrap();
    for field in ["f", "ss_between", "ss_within", "p"] {
        let (a, b) = (
            bore["anova"][field].as_f64().unwrap(),
            compared["anova"][field].as_f64().unwrap(),
        );
        assert!(lre(a, b) >= 12.0, "{field}: sites {a:e}, compare {b:e}");
    }

    // The text form names the sites, says nothing was stored, and carries the caution.
    let out = samewise(
        &dirs[1],
        &["check", "--day", "2026-11-10", "--sites", &list],
    );
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("not stored"), "{text}");
    assert!(text.contains("not compared:"), "{text}");
    assert!(text.contains("decision support"), "{text}");
    // Nothing was stored in any site: no run of the day.
    for dir in &dirs {
        let out = samewise(dir, &["check", "--day", "2026-11-10", "--stored"]);
        assert!(!out.status.success(), "{}", output_text(&out));
    }

    // `all` names every site of the database, these three among them.
    let out = samewise(
        &dirs[0],
        &["check", "--day", "2026-11-10", "--sites", "all", "--json"],
    );
    let doc: Value = serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", output_text(&out)));
    let all: Vec<&str> = doc["sites"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["site"].as_str().unwrap())
        .collect();
    let mut expected: Vec<&str> = names.iter().map(String::as_str).collect();
    expected.sort();
    assert_eq!(all, expected, "every site of the database, in name order");

    // An unknown site is named, with the sites there are.
    let out = samewise(
        &dirs[0],
        &[
            "check",
            "--day",
            "2026-11-10",
            "--sites",
            &format!("{},nowhere_{pid}", names[0]),
        ],
    );
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains(&format!("site nowhere_{pid}")) && err.contains(names[1].as_str()),
        "{err}"
    );
    // Shifts are each site's own: the two flags are refused together (by the command line,
    // before any shift name is looked at).
    let out = samewise(
        &dirs[0],
        &["check", "--shift", "2026-11-10/early", "--sites", &list],
    );
    assert_eq!(out.status.code(), Some(2), "{}", output_text(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--shift") && err.contains("cannot be used with") && err.contains("--sites"),
        "{err}"
    );
}

#[test]
fn an_sqlite_plant_is_told_that_sites_share_a_postgresql_database() {
    let dir = temp_dir("sites-sqlite");
    std::fs::write(dir.join("plant.toml"), common::CONFIG).unwrap();
    samewise_ok(&dir, &["init"]);
    let out = samewise(&dir, &["check", "--day", "2026-11-28", "--sites", "a,b"]);
    assert_eq!(out.status.code(), Some(1), "{}", output_text(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("one PostgreSQL database") && err.contains("plant.db"),
        "{err}"
    );
}

const SHOT_CONFIG: &str = r#"
[plant]
name = "Invented moulding site"
time_zone = "UTC"
production_day_start = "06:00"
database = "unused.db"

[[characteristic]]
name = "weight"
unit = "g"
lsl = 11.80
usl = 12.20

[[factor]]
name = "cavity"
column = "Cavity"

[[layout]]
name = "press"
kind = "wide"
timestamp = "Time"
subgroup = "Shot"
[layout.characteristics]
weight = "Weight"
"#;

/// Parts of one shot share its deviation, and every site numbers its shots from 1: the shots
/// must stay each site's own (20 subgroups, not 10 shared numbers), and the site, constant
/// within every shot, is tested on the shot means (nested design), as a plant's own machine is.
#[test]
fn each_sites_shots_stay_its_own_subgroups() {
    let dir = temp_dir("sites-shots");
    let mut rng = Rng(41);
    let mut stores = Vec::new();
    for (tag, offset) in [("a", 0.0), ("b", 0.01)] {
        let path = dir.join(format!("{tag}.toml"));
        std::fs::write(&path, SHOT_CONFIG).unwrap();
        let config = samewise::config::Config::load(&path).unwrap();
        let mut store = samewise::storage::open_in_memory().unwrap();
        store.sync_config(&config).unwrap();
        let mut csv = String::from("Time,Shot,Cavity,Weight\n");
        for shot in 1..=10 {
            let dev = 0.03 * rng.normal();
            for cavity in 1..=4 {
                let v = 12.0 + offset + dev + 0.01 * rng.normal();
                csv.push_str(&format!(
                    "2026-11-10T{:02}:{:02}:00Z,{shot},C{cavity},{v:.4}\n",
                    7 + shot / 6,
                    (shot % 6) * 10
                ));
            }
        }
        let csv_path = dir.join(format!("{tag}.csv"));
        std::fs::write(&csv_path, csv).unwrap();
        import_into(&mut *store, &config, &csv_path);
        stores.push((config, store));
    }
    let sites: Vec<Site<'_>> = ["a", "b"]
        .iter()
        .zip(&stores)
        .map(|(name, (_, store))| Site {
            name: name.to_string(),
            store: &**store,
        })
        .collect();
    let start = Utc.with_ymd_and_hms(2026, 11, 10, 6, 0, 0).unwrap();
    let options = CheckOptions::from_config(&stores[0].0);
    let checked = check_sites(&sites, start, start + Duration::days(1), &options).unwrap();
    let t = &checked.content.tests[0];
    assert_eq!(t.n_obs, 80);
    assert_eq!(t.design.n_subgroups, Some(20), "{:?}", t.design);
    assert_eq!(
        t.design.kind,
        Some(samewise::results::DesignKind::Nested),
        "{:?}",
        t.design
    );
    // The nested test is the classic F on the 20 shot means (10 per site).
    assert_eq!(t.anova.df_between, Some(1.0), "{:?}", t.anova);
    assert_eq!(t.anova.df_within, Some(18.0), "{:?}", t.anova);
}
