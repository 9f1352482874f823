//! Sampling structure end to end: a moulding plant whose parts come in shots (everything
//! invented). Simulated days prove the designs keep their flags honest (binomial bounds), and an
//! export with a shot column goes through import, check and its JSON.
//!
//! Binomial bounds below are exact upper-tail quantiles of Bin(n, p) computed in the test
//! (the binomial distribution; no table).

mod common;

use common::{samewise_ok, temp_dir};
use samewise::results::TestState;
use samewise::scenario::study_options;
use samewise::shot_plant::{run_days, ShotPlant};

/// Smallest `c` with `P(Bin(n, p) > c) <= tail`.
fn binomial_upper(n: usize, p: f64, tail: f64) -> usize {
    let mut pmf = (1.0 - p).powi(n as i32);
    let mut cdf = pmf;
    let mut c = 0;
    while 1.0 - cdf > tail {
        pmf *= (n - c) as f64 / (c + 1) as f64 * p / (1.0 - p);
        cdf += pmf;
        c += 1;
    }
    c
}

const PLANT: ShotPlant = ShotPlant {
    machines: 4,
    cavities: 8,
    shots_per_machine: 12,
    shot_sd: 1.5,
    cavity_offset: 0.0,
    machine_offset: 0.0,
};

#[test]
fn null_days_with_the_shot_as_subgroup_stay_within_the_false_discovery_level() {
    // Shot-to-shot SD 1.5 x the part SD, nothing differs. With the shot as the subgroup, the
    // share of days with any flag (BH at 0.05 over the machine and cavity tests) stays within
    // what 5 % allows: at most the 0.999 binomial quantile of 300 days at 0.05.
    let options = study_options();
    let days = 300;
    let o = run_days(&PLANT, days, 0x5b_0001, true, &options).unwrap();
    assert_eq!(o.design["machine"], "nested");
    assert_eq!(o.design["cavity"], "blocked");
    let bound = binomial_upper(days, 0.05, 0.001);
    assert!(
        o.days_with_flag <= bound,
        "{} of {days} days flagged (bound {bound}): {o:?}",
        o.days_with_flag
    );
    // Without the column: the dependence check fires on most days, and a flag of the machine
    // test that rests on the dependence is not a flag.
    let o = run_days(&PLANT, days, 0x5b_0002, false, &options).unwrap();
    assert_eq!(o.design["machine"], "independent");
    let fired = o.serial_fired.get("machine").copied().unwrap_or(0);
    assert!(
        fired > days * 9 / 10,
        "dependence found on {fired} of {days} days"
    );
    assert!(
        o.count("machine", TestState::DiffersDependent) > 0,
        "some days would have flagged machines on shot noise: {o:?}"
    );
    assert!(
        o.flagged("machine") <= bound,
        "{} machine flags of {days} days: {o:?}",
        o.flagged("machine")
    );
}

#[test]
fn a_cavity_offset_is_found_every_day_with_blocks_and_rarely_without() {
    // Power: cavity C1 +1 part SD, shot SD 1.5. Blocked on the shot, the offset is found on
    // (nearly) every day, so within one day; without the shot column the shot noise hides it on
    // many days (about half, in this shape).
    let plant = ShotPlant {
        cavity_offset: 1.0,
        ..PLANT
    };
    let options = study_options();
    let days = 100;
    let with = run_days(&plant, days, 0x5b_0003, true, &options).unwrap();
    let without = run_days(&plant, days, 0x5b_0003, false, &options).unwrap();
    assert!(with.flagged("cavity") >= 95, "blocked: {with:?}");
    assert!(without.flagged("cavity") < 80, "without: {without:?}");
}

const CONFIG: &str = r#"
[plant]
name = "Invented moulding plant"
time_zone = "Europe/Berlin"
production_day_start = "06:00"
database = "plant.db"

[[characteristic]]
name = "weight"
unit = "g"
lsl = 11.80
usl = 12.20
target = 12.00

[[factor]]
name = "machine"
column = "Machine"

[[factor]]
name = "cavity"
column = "Cavity"

[[layout]]
name = "press"
kind = "wide"
timestamp = "Time"
subgroup = ["Machine", "Shot"]
[layout.characteristics]
weight = "Weight"
"#;

/// An invented day: 3 machines x 10 shots x 4 cavities, shot SD 0.03 g, part SD 0.02 g;
/// cavity C3 0.05 g heavy. The shot counter restarts on each machine (so the subgroup is the
/// machine with the shot).
fn write_day(dir: &std::path::Path) {
    let mut rng = common::Rng(77);
    let mut csv = String::from("Time,Machine,Shot,Cavity,Weight\n");
    for shot in 0..10 {
        for m in 1..=3 {
            let dev = 0.03 * rng.normal();
            for c in 1..=4 {
                let mut v = 12.0 + dev + 0.02 * rng.normal();
                if c == 3 {
                    v += 0.05;
                }
                csv.push_str(&format!(
                    "2026-11-30T{:02}:{:02}:00Z,M{m},{},C{c},{v:.4}\n",
                    8 + shot / 6,
                    (shot % 6) * 10 + m,
                    1000 + shot
                ));
            }
        }
    }
    std::fs::write(dir.join("press.csv"), csv).unwrap();
    std::fs::write(dir.join("plant.toml"), common::plant_config(dir, CONFIG)).unwrap();
}

#[test]
fn a_shot_column_goes_through_import_and_check() {
    let dir = temp_dir("subgroup-e2e");
    write_day(&dir);
    samewise_ok(&dir, &["init"]);
    samewise_ok(&dir, &["import", "press.csv"]);
    // Exit status 3: something is flagged (the cavity).
    let out = common::samewise(&dir, &["check", "--day", "2026-11-30", "--json"]);
    assert_eq!(out.status.code(), Some(3), "{}", common::output_text(&out));
    let json = String::from_utf8(out.stdout).unwrap();
    let doc: serde_json::Value = serde_json::from_str(&json).unwrap();
    let tests = doc["tests"].as_array().unwrap();
    let test = |factor: &str| {
        tests
            .iter()
            .find(|t| t["factor"] == factor)
            .unwrap_or_else(|| panic!("{factor} in {json}"))
    };
    let machine = test("machine");
    assert_eq!(machine["design"]["kind"], "nested");
    assert_eq!(machine["design"]["n_subgroups"], 30);
    assert!(machine["design"]["var_subgroups"].as_f64().unwrap() > 0.0);
    assert_eq!(machine["groups"][0]["n"], 10, "ten shot means per machine");
    // Three-level components with their intervals (stats::nested: chi-square for within,
    // modified large-sample for the subgroups and the levels).
    let sub = machine["design"]["var_subgroups"].as_f64().unwrap();
    let ci = &machine["design"]["var_subgroups_ci"];
    assert!(
        ci["low"].as_f64().unwrap() <= sub && sub <= ci["high"].as_f64().unwrap(),
        "{machine}"
    );
    let within = machine["variance_components"]["within"].as_f64().unwrap();
    let wci = &machine["variance_components"]["within_ci"];
    assert!(wci["low"].as_f64().unwrap() < within && within < wci["high"].as_f64().unwrap());
    assert!(machine["serial_dependence"]["p"].is_null());
    assert!(machine["serial_dependence"]["p_reason"]
        .as_str()
        .unwrap()
        .contains("used its subgroups"));
    let cavity = test("cavity");
    assert_eq!(cavity["design"]["kind"], "blocked");
    assert_eq!(cavity["leading"]["method"], "blocked_f");
    assert!(cavity["design"]["var_subgroups_ci"]["low"].is_null());
    assert!(cavity["design"]["var_subgroups_ci"]["low_reason"]
        .as_str()
        .unwrap()
        .contains("blocked design"));
    assert!(
        cavity["state"].as_str().unwrap().starts_with("differs"),
        "{cavity}"
    );
    assert_eq!(cavity["stands_out"]["level"], "C3");
    assert!(cavity["pairs"]
        .as_array()
        .unwrap()
        .iter()
        .all(|p| p["method"] == "tukey_kramer_adjusted"));
    // The text summary names the designs.
    let out = common::samewise(&dir, &["check", "--day", "2026-11-30", "--stored"]);
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("blocked") && text.contains("nested"),
        "{text}"
    );
}

#[test]
fn investigate_compares_subgroup_means_when_subgroups_are_stored() {
    // The invented press day: 10 shots from 08:00; before/after 08:30 per machine compares
    // the shot means (3 of them before, 7 after per machine), not the 40 parts.
    let dir = temp_dir("subgroup-investigate");
    write_day(&dir);
    samewise_ok(&dir, &["init"]);
    samewise_ok(&dir, &["import", "press.csv"]);
    let json = samewise_ok(
        &dir,
        &[
            "investigate",
            "weight",
            "--by",
            "machine",
            "--at",
            "2026-11-30T08:30:00Z",
            "--json",
        ],
    );
    let doc: serde_json::Value = serde_json::from_str(&json).unwrap();
    assert!(
        doc["units"]
            .as_str()
            .unwrap()
            .starts_with("on 30 subgroup means"),
        "{json}"
    );
    let text = samewise_ok(
        &dir,
        &[
            "investigate",
            "weight",
            "--by",
            "machine",
            "--at",
            "2026-11-30T08:30:00Z",
        ],
    );
    assert!(text.contains("compared on 30 subgroup means"), "{text}");
}

#[test]
fn a_subgroup_window_derives_subgroups_and_bad_settings_are_named() {
    // The same press day exported without a shot column: shots are derived as the values of
    // one machine within a 10-minute clock window (the invented shots are 10 minutes apart
    // per machine and never cross a window boundary).
    let dir = temp_dir("subgroup-window");
    write_day(&dir);
    let csv = std::fs::read_to_string(dir.join("press.csv")).unwrap();
    let without: String = csv
        .lines()
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            format!("{},{},{},{}\n", f[0], f[1], f[3], f[4])
        })
        .collect();
    std::fs::write(dir.join("press.csv"), without).unwrap();
    let config = CONFIG.replace(
        "subgroup = [\"Machine\", \"Shot\"]",
        "subgroup_window = \"10m\"\nsubgroup_by = [\"machine\"]",
    );
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &config)).unwrap();
    samewise_ok(&dir, &["init"]);
    samewise_ok(&dir, &["import", "press.csv"]);
    let out = common::samewise(&dir, &["check", "--day", "2026-11-30", "--json"]);
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let machine = doc["tests"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["factor"] == "machine")
        .unwrap();
    assert_eq!(machine["design"]["kind"], "nested", "{machine}");
    assert_eq!(machine["design"]["n_subgroups"], 30);

    // Configuration errors name the key and what to write.
    for (bad, expect) in [
        ("subgroup_window = \"7m\"", "must divide a day evenly"),
        (
            "subgroup_window = \"10m\"\nsubgroup_by = [\"press\"]",
            "\"press\" is not a configured factor",
        ),
        ("subgroup = []", "an empty list"),
    ] {
        let text = CONFIG.replace("subgroup = [\"Machine\", \"Shot\"]", bad);
        std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &text)).unwrap();
        let out = common::samewise(&dir, &["status"]);
        assert!(!out.status.success());
        let err = common::output_text(&out);
        assert!(err.contains(expect), "{bad}: {err}");
    }
    let both = CONFIG.replace(
        "subgroup = [\"Machine\", \"Shot\"]",
        "subgroup = \"Shot\"\nsubgroup_window = \"10m\"",
    );
    std::fs::write(dir.join("plant.toml"), common::plant_config(&dir, &both)).unwrap();
    let err = common::output_text(&common::samewise(&dir, &["status"]));
    assert!(err.contains("give one"), "{err}");
}

#[test]
fn the_detail_chart_interval_of_a_nested_group_rests_on_its_subgroup_means() {
    // The invented press day: machine is nested in the shots, so each machine's interval comes
    // from its 10 shot means (t with 9 df), not from its 40 parts; cavity varies within the
    // shots (blocked) and keeps the interval of its values.
    let dir = temp_dir("subgroup-detail");
    write_day(&dir);
    samewise_ok(&dir, &["init"]);
    samewise_ok(&dir, &["import", "press.csv"]);
    let config = samewise::config::Config::load(dir.join("plant.toml")).unwrap();
    let store = common::open_store(&dir, "plant.db");
    let period = samewise::calendar::PlantCalendar::new(&config)
        .parse_period("2026-11-30")
        .unwrap();
    let detail =
        samewise::analysis::report::detail_input(&*store, &config, "weight", "machine", &period)
            .unwrap();
    // The shot means of M1 straight from the file.
    let csv = std::fs::read_to_string(dir.join("press.csv")).unwrap();
    let mut shots: std::collections::BTreeMap<String, Vec<f64>> = Default::default();
    for line in csv.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        if f[1] == "M1" {
            shots
                .entry(f[2].to_string())
                .or_default()
                .push(f[4].parse().unwrap());
        }
    }
    let means: Vec<f64> = shots
        .values()
        .map(|v| v.iter().sum::<f64>() / v.len() as f64)
        .collect();
    let n = means.len() as f64;
    let m = means.iter().sum::<f64>() / n;
    let sd = (means.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    // t quantile from statrs, a general-purpose statistics library.
    use statrs::distribution::{ContinuousCDF, StudentsT};
    let t = StudentsT::new(0.0, 1.0, n - 1.0)
        .unwrap()
        .inverse_cdf(0.975);
    let half = t * sd / n.sqrt();
    let m1 = detail.groups.iter().find(|g| g.level == "M1").unwrap();
    let got = (m1.ci_high.unwrap() - m1.ci_low.unwrap()) / 2.0;
    assert!(
        (got - half).abs() <= 1e-9 * half,
        "half width {got} vs {half} from the shot means"
    );
    // Wider than the interval of the 40 parts taken as independent.
    let (pm, psd) = {
        let v = &m1.values;
        let k = v.len() as f64;
        let mean = v.iter().sum::<f64>() / k;
        (
            k,
            (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (k - 1.0)).sqrt(),
        )
    };
    let naive = StudentsT::new(0.0, 1.0, pm - 1.0)
        .unwrap()
        .inverse_cdf(0.975)
        * psd
        / pm.sqrt();
    assert!(got > naive, "{got} <= {naive}");
    let cavity =
        samewise::analysis::report::detail_input(&*store, &config, "weight", "cavity", &period)
            .unwrap();
    let c3 = cavity.groups.iter().find(|g| g.level == "C3").unwrap();
    assert_eq!(c3.values.len(), 30);
    assert!(c3.ci_low.is_some());
}
