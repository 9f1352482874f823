//! Contract tests of the store traits, written once over the traits and run on every backend:
//! SQLite always (in memory; two connections to one file for the races), PostgreSQL when
//! `SAMEWISE_TEST_POSTGRES` names a server (a fresh schema per test, dropped afterwards).
//!
//! Each contract states what a caller of the trait may rely on: order, versions, statuses,
//! lease rules, atomicity, and the words of the errors an engineer sees. A backend passes when
//! it gives the same answers as the other, value for value and bit for bit.

use std::cell::Cell;
use std::path::PathBuf;
use std::sync::Barrier;

use chrono::{DateTime, Utc};

use super::columns::from_ms;
use super::postgres::testing;
use super::runs::{LeaseKey, RunHeader, RunStatus};
use super::{AlertRecord, EventEdit, EventStore, FindingStore, NewEvent, PgStore, RunStore, Store};
use crate::model::{Finding, FindingStatus, PeriodKind};
use crate::results::{
    AnovaResult, ComponentsResult, DesignKind, DesignResult, EffectResult, GroupResult, Interval,
    KruskalResult, LeadingResult, LeadingTest, OptInterval, PairResult, RunContent, Sensitivity,
    SerialResult, ShapiroResult, StandsOut, StatP, TestResult, TestState, WelchResult,
};
use crate::schedule::lifecycle;
use crate::stats::fdr::FdrMethod;

/// Plain SQL both backends run as it is: what the contracts need besides their own trait
/// (master data for event scopes). Invented names.
const MASTER_DATA: &str = "
    INSERT INTO characteristics (name, unit) VALUES ('bore', 'mm'), ('flatness', 'mm');
    INSERT INTO factors (name, position, source, source_column)
        VALUES ('shift', 1, 'shift', NULL), ('machine', 0, 'column', 'machine'),
               ('cavity', 2, 'column', 'cavity');
    INSERT INTO levels (factor_id, name) SELECT id, 'M1' FROM factors WHERE name = 'machine';
    INSERT INTO levels (factor_id, name) SELECT id, 'M2' FROM factors WHERE name = 'machine';
    INSERT INTO levels (factor_id, name) SELECT id, 'M4' FROM factors WHERE name = 'machine';
    INSERT INTO levels (factor_id, name) SELECT id, 'A' FROM factors WHERE name = 'shift';
    INSERT INTO levels (factor_id, name) SELECT id, 'B' FROM factors WHERE name = 'shift';";

/// An import record of `accepted` new rows (`duplicates` of them already stored) with
/// measurements between `ts_min_ms` and `ts_max_ms`, as the import writes it.
fn import_sql(accepted: i64, duplicates: i64, ts_min_ms: i64, ts_max_ms: i64) -> String {
    format!(
        "INSERT INTO imports (file_name, path, sha256, layout, started_ms, finished_ms,
             rows_read, accepted, rejected, duplicates, ts_min_ms, ts_max_ms)
         VALUES ('line-2.csv', '/data/line-2.csv', 'ab12', 'long', 1, 2, {accepted},
             {accepted}, 0, {duplicates}, {ts_min_ms}, {ts_max_ms})"
    )
}

/// One measurement of `bore` at `ts_ms` in the latest import (with a level set of its own).
fn measurement_sql(ts_ms: i64) -> String {
    format!(
        "INSERT INTO level_sets (key) VALUES ('set-{ts_ms}');
         INSERT INTO measurements (characteristic_id, ts_ms, import_id, line, value, level_set_id)
         SELECT (SELECT id FROM characteristics WHERE name = 'bore'), {ts_ms},
                (SELECT MAX(id) FROM imports), 2, 0.25,
                (SELECT id FROM level_sets WHERE key = 'set-{ts_ms}')"
    )
}

/// Plain SQL on a backend under test, for the rows a contract needs besides its own trait.
trait RawSql {
    fn exec(&self, sql: &str);
}

impl RawSql for Store {
    fn exec(&self, sql: &str) {
        self.conn.execute_batch(sql).unwrap();
    }
}

impl RawSql for PgStore {
    fn exec(&self, sql: &str) {
        self.conn().batch_execute(sql).unwrap();
    }
}

/// What the run contract uses of a backend.
trait Runs: RunStore + RawSql {}
impl<T: RunStore + RawSql> Runs for T {}

/// What the findings contract uses of a backend (findings are built from runs).
trait Findings: FindingStore + RunStore + RawSql {}
impl<T: FindingStore + RunStore + RawSql> Findings for T {}

/// What the event contract uses of a backend.
trait Events: EventStore + RawSql {}
impl<T: EventStore + RawSql> Events for T {}

/// Runs `$contract` on an SQLite store in memory and, when a server is named, on a PostgreSQL
/// store in a fresh schema; both start with [`MASTER_DATA`].
macro_rules! on_both_backends {
    ($name:ident, $contract:path) => {
        mod $name {
            use super::*;

            #[test]
            fn sqlite() {
                let mut store = Store::open_in_memory().unwrap();
                store.exec(MASTER_DATA);
                $contract(&mut store);
            }

            #[test]
            fn postgres() {
                let Some(mut store) = testing::store() else {
                    return;
                };
                store.exec(MASTER_DATA);
                $contract(&mut *store);
            }
        }
    };
}

on_both_backends!(runs, runs_contract);
on_both_backends!(run_round_trip, run_round_trip_contract);
on_both_backends!(large_run, large_run_contract);
on_both_backends!(leases, leases_contract);
on_both_backends!(findings, findings_contract);
on_both_backends!(flag_history, flag_history_contract);
on_both_backends!(events, events_contract);

// ---------------------------------------------------------------------------------------------
// Fixtures

/// One day in milliseconds.
const DAY: i64 = 86_400_000;

/// The start of day `d` of the invented calendar (day 28 is 2026-11-28's label).
fn day_start(d: i64) -> i64 {
    d * DAY
}

fn header(kind: &str, label: &str, start_ms: i64, schedule: Option<&str>) -> RunHeader {
    RunHeader {
        period_kind: PeriodKind::parse(kind).expect("a period kind"),
        period_label: label.into(),
        period_start_ms: start_ms,
        period_end_ms: start_ms + DAY,
        schedule: schedule.map(str::to_string),
        config_hash: "c0ffee".into(),
        tool_version: "0.1.0".into(),
        fdr_method: FdrMethod::BenjaminiHochberg,
        fdr_level: 0.05,
    }
}

/// A short run: `bore` x `machine` in `state` (and `flatness` x `shift`, not flagged), with
/// groups and a pair.
fn small_content(state: TestState) -> RunContent {
    let test = |index: u32, characteristic: &str, factor: &str, state: TestState| TestResult {
        index,
        characteristic: characteristic.into(),
        factor: factor.into(),
        state,
        n_obs: 12,
        n_groups: 2,
        n_groups_used: 2,
        anova: AnovaResult {
            f: Some(4.5),
            ..AnovaResult::default()
        },
        stands_out: StandsOut {
            level: Some("M2".into()),
            diff: Some(0.012),
            ..StandsOut::default()
        },
        groups: vec![
            GroupResult::from_offsets(
                "M1".into(),
                6,
                "25".into(),
                -0.01,
                Some(0.02),
                -0.04,
                0.02,
                Some(-0.006),
            ),
            GroupResult::from_offsets(
                "M2".into(),
                6,
                "25".into(),
                0.002,
                Some(0.018),
                -0.02,
                0.03,
                Some(0.006),
            ),
        ],
        pairs: vec![PairResult {
            a: "M2".into(),
            b: "M1".into(),
            method: "tukey_kramer".into(),
            diff: 0.012,
            se: 0.004,
            statistic: 4.2,
            df: 10.0,
            p_adj: 0.02,
            ci: Interval {
                low: 0.003,
                high: 0.021,
            },
        }],
        ..TestResult::default()
    };
    RunContent {
        tests: vec![
            test(0, "bore", "machine", state),
            test(1, "flatness", "shift", TestState::NoEvidence),
        ],
    }
}

/// Distinct doubles that are hard to keep: the extremes of binary64, subnormals, values that
/// are not short decimals, negative and integral ones (none is NaN, infinite or -0).
fn awkward(i: u32) -> f64 {
    let k = f64::from(i + 1);
    match i % 7 {
        0 => 1e-300 * k,
        1 => 1.797_693_134_862_315_7e308 / k,
        2 => -k / 3.0,
        3 => f64::from_bits(1) * k,
        4 => 1e15 + k * 0.1,
        5 => -(k.sqrt()) * 1e-7,
        _ => -2.225_073_858_507_201_4e-308 * k,
    }
}

/// A test with every field set (no default: a new field breaks this fixture until it is set
/// here), from doubles drawn with `n` so that no two fields hold the same value.
fn full_test(index: u32, characteristic: &str, factor: &str, n: &Cell<u32>) -> TestResult {
    let x = || {
        n.set(n.get() + 1);
        awkward(n.get())
    };
    let some = || Some(x());
    TestResult {
        index,
        characteristic: characteristic.into(),
        factor: factor.into(),
        state: TestState::DiffersMaterial,
        is_new: true,
        n_obs: 4_000_000_123,
        n_groups: 17,
        n_groups_used: 16,
        design: DesignResult {
            kind: Some(DesignKind::CellMeans),
            n_subgroups: Some(321),
            var_subgroups: some(),
            share_subgroups: some(),
            var_subgroups_ci: OptInterval {
                low: some(),
                high: some(),
            },
        },
        serial_dependence: SerialResult {
            r1: some(),
            z: some(),
            p: some(),
        },
        leading: LeadingResult {
            method: Some(LeadingTest::ExactPermutation),
            reason: Some("groups of 3 or fewer values; the permutation test is exact".into()),
            statistic: Some(1.797_693_134_862_315_7e308),
            p: Some(1e-300),
            recommend_kruskal_wallis: Some(true),
        },
        q_value: some(),
        anova: AnovaResult {
            f: some(),
            df_between: some(),
            df_within: some(),
            p: some(),
            ss_between: some(),
            ss_within: some(),
            ms_within: some(),
            r_squared: some(),
            resid_sd: some(),
        },
        welch: WelchResult {
            f: some(),
            df1: some(),
            df2: some(),
            p: some(),
        },
        kruskal_wallis: KruskalResult {
            h: some(),
            p: some(),
        },
        levene: StatP {
            statistic: some(),
            p: some(),
        },
        brown_forsythe: StatP {
            statistic: some(),
            p: some(),
        },
        bartlett: StatP {
            statistic: some(),
            p: some(),
        },
        shapiro_wilk: ShapiroResult {
            w: some(),
            p: some(),
        },
        sd_ratio: some(),
        n_beyond_3sd: Some(9),
        effect: EffectResult {
            eta_squared: some(),
            omega_squared: some(),
        },
        variance_components: ComponentsResult {
            between: some(),
            within: some(),
            share_between: some(),
            icc: some(),
            icc_ci: OptInterval {
                low: some(),
                high: some(),
            },
            between_ci: OptInterval {
                low: some(),
                high: some(),
            },
            within_ci: OptInterval {
                low: some(),
                high: some(),
            },
        },
        tolerance: some(),
        spread_of_means: some(),
        spread_pct_tolerance: some(),
        stands_out: StandsOut {
            level: Some("Cavity 7 \"left\" – ü".into()),
            diff: some(),
            sd_units: some(),
            pct_tolerance: some(),
        },
        sensitivity: Sensitivity {
            min_detectable_diff: some(),
            min_detectable_pct_tolerance: some(),
        },
        notes: "design: cells; origin: 1000000000000.4".into(),
        groups: (0..3u32)
            .map(|g| {
                GroupResult::from_offsets(
                    format!("C{g}"),
                    u64::from(g) + 1,
                    "1000000000000.4".into(),
                    x(),
                    if g == 0 { None } else { some() },
                    x(),
                    x(),
                    some(),
                )
            })
            .collect(),
        // Stored order, not sorted order: the pairs come back as they were written.
        pairs: [("C2", "C0"), ("C0", "C1"), ("C2", "C1")]
            .iter()
            .map(|(a, b)| PairResult {
                a: (*a).into(),
                b: (*b).into(),
                method: "games_howell".into(),
                diff: x(),
                se: x(),
                statistic: x(),
                df: x(),
                p_adj: x(),
                ci: Interval {
                    low: x(),
                    high: x(),
                },
            })
            .collect(),
    }
}

/// Whether two values are equal bit for bit: the shortest round-trip text of every double
/// (Rust's `Debug`) differs for any two distinct non-NaN bit patterns, -0 and 0 included.
fn assert_same_bits<T: std::fmt::Debug + PartialEq>(got: &T, want: &T) {
    assert_eq!(got, want);
    assert_eq!(format!("{got:?}"), format!("{want:?}"));
}

// ---------------------------------------------------------------------------------------------
// Runs

fn run_round_trip_contract(store: &mut dyn Runs) {
    let n = Cell::new(0);
    let mut content = RunContent {
        tests: vec![
            full_test(0, "bore", "machine", &n),
            full_test(1, "bore", "cavity", &n),
            // Every optional field empty: NULLs come back as `None`.
            TestResult {
                index: 2,
                characteristic: "flatness".into(),
                factor: "shift".into(),
                state: TestState::TooLittleData,
                notes: String::new(),
                ..TestResult::default()
            },
        ],
    };
    content.tests[1].state = TestState::DiffersDependent;
    content.tests[1].is_new = false;
    content.tests[1].leading.recommend_kruskal_wallis = Some(false);
    content.tests[1].design.kind = Some(DesignKind::Nested);
    content.tests[1].leading.method = Some(LeadingTest::BlockedF);
    assert!(
        n.get() > 150,
        "every double field drew its own value ({n:?})"
    );
    let run = store
        .begin_run(&header("month", "2026-11", 1_000, Some("monthly")), 5)
        .unwrap();
    store.complete_run(run.run_id, 6, &content).unwrap();
    let back = store.run_content(run.run_id).unwrap();
    assert_same_bits(&back, &content);
    let (stored, latest) = store.latest_run("month", "2026-11").unwrap().unwrap();
    assert_same_bits(&latest, &content);
    assert_eq!(stored.n_tests, Some(3));
    // DiffersMaterial is a flag; DiffersDependent and TooLittleData are not.
    assert_eq!(stored.n_flagged, Some(1));
    let hist = store.history("bore", "cavity", "month", 5).unwrap();
    assert_eq!(hist.len(), 1);
    let mut test = content.tests[1].clone();
    test.groups.clear();
    test.pairs.clear();
    assert_same_bits(&hist[0].test, &test);
    assert_same_bits(&hist[0].run, &stored);

    // -0 reads back as 0 on every backend (SQLite cannot keep the sign), so the backends agree.
    let mut signed = small_content(TestState::NoEvidence);
    signed.tests[0].anova.f = Some(-0.0);
    signed.tests[0].groups[0].diff_from_grand = Some(-0.0);
    signed.tests[0].pairs[0].diff = -0.0;
    let run = store
        .begin_run(&header("month", "2026-12", 2_000, None), 7)
        .unwrap();
    store.complete_run(run.run_id, 8, &signed).unwrap();
    let back = store.run_content(run.run_id).unwrap();
    let t = &back.tests[0];
    let positive_zero = |v: f64| v == 0.0 && v.is_sign_positive();
    assert!(positive_zero(t.anova.f.unwrap()));
    assert!(positive_zero(t.groups[0].diff_from_grand.unwrap()));
    assert!(positive_zero(t.pairs[0].diff));
}

/// A run larger than one batch of rows of any table (PostgreSQL writes several hundred rows
/// per statement): every row comes back, in its order.
fn large_run_contract(store: &mut dyn Runs) {
    let n = Cell::new(0);
    let content = RunContent {
        tests: (0..1_100u32)
            .map(|i| full_test(i, &format!("dim-{i:04}"), "cavity", &n))
            .collect(),
    };
    assert!(content.n_groups() > 3_000);
    let run = store
        .begin_run(&header("month", "2026-10", 0, None), 1)
        .unwrap();
    store.complete_run(run.run_id, 2, &content).unwrap();
    assert_same_bits(&store.run_content(run.run_id).unwrap(), &content);
}

fn runs_contract(store: &mut dyn Runs) {
    let day = |label: &str, start: i64| header("day", label, start, Some("daily"));
    assert!(store.all_runs().unwrap().is_empty());
    assert_eq!(store.first_measurement_ms().unwrap(), None);
    assert_eq!(
        store.latest_complete_run("day", "2026-11-30").unwrap(),
        None
    );
    assert_eq!(store.flagged_tests("day", "2026-11-30").unwrap(), None);

    // begin: a running row with version 1, invisible to readers until complete.
    let v1 = store
        .begin_run(&day("2026-11-30", day_start(30)), 10)
        .unwrap();
    assert_eq!((v1.version, v1.status.as_str()), (1, "running"));
    assert_eq!(v1.finished_ms, None);
    assert_eq!(
        store.runs_of_period("day", "2026-11-30").unwrap(),
        std::slice::from_ref(&v1)
    );
    assert_eq!(
        store.latest_complete_run("day", "2026-11-30").unwrap(),
        None
    );
    store
        .complete_run(v1.run_id, 20, &small_content(TestState::Differs))
        .unwrap();
    let done1 = store
        .latest_complete_run("day", "2026-11-30")
        .unwrap()
        .unwrap();
    assert_eq!(done1.run_id, v1.run_id);
    assert_eq!(done1.status, RunStatus::Complete);
    assert_eq!(done1.finished_ms, Some(20));
    assert_eq!((done1.n_tests, done1.n_flagged), (Some(2), Some(1)));
    assert_eq!(done1.header, v1.header);

    // A rerun is version 2; readers keep version 1 until it completes.
    let v2 = store
        .begin_run(&day("2026-11-30", day_start(30)), 30)
        .unwrap();
    assert_eq!(v2.version, 2);
    assert_eq!(
        store
            .latest_complete_run("day", "2026-11-30")
            .unwrap()
            .unwrap()
            .run_id,
        v1.run_id
    );
    store
        .complete_run(v2.run_id, 40, &small_content(TestState::DiffersMaterial))
        .unwrap();
    assert_eq!(store.complete_versions("day", "2026-11-30").unwrap(), 2);
    assert_eq!(
        store
            .latest_complete_run("day", "2026-11-30")
            .unwrap()
            .unwrap()
            .version,
        2
    );
    assert_eq!(
        store.flagged_tests("day", "2026-11-30").unwrap(),
        Some(vec![("bore".to_string(), "machine".to_string())])
    );
    // The old version keeps its content.
    assert_eq!(
        store.run_content(v1.run_id).unwrap(),
        small_content(TestState::Differs)
    );

    // fail: kept with its error, never read as a result, never completed afterwards.
    let v3 = store
        .begin_run(&day("2026-11-30", day_start(30)), 50)
        .unwrap();
    assert_eq!(v3.version, 3);
    store.fail_run(v3.run_id, 51, "disk full").unwrap();
    let err = store
        .complete_run(v3.run_id, 52, &small_content(TestState::Differs))
        .unwrap_err()
        .to_string();
    assert_eq!(
        err,
        format!(
            "run {} is no longer running (it was recovered as abandoned); its \
             results were not written",
            v3.run_id
        )
    );
    assert!(store.run_content(v3.run_id).unwrap().tests.is_empty());
    let period = store.runs_of_period("day", "2026-11-30").unwrap();
    let summary: Vec<(i64, &str, Option<&str>)> = period
        .iter()
        .map(|r| (r.version, r.status.as_str(), r.error.as_deref()))
        .collect();
    assert_eq!(
        summary,
        [
            (1, "complete", None),
            (2, "complete", None),
            (3, "failed", Some("disk full"))
        ]
    );
    assert_eq!(period[2].finished_ms, Some(51));
    // A failed run is not failed again (the first error stays).
    store.fail_run(v3.run_id, 53, "second error").unwrap();
    assert_eq!(
        store.runs_of_period("day", "2026-11-30").unwrap()[2]
            .error
            .as_deref(),
        Some("disk full")
    );

    // More periods, a run by hand (no schedule), a week; history and ranges.
    for (label, start) in [("2026-11-28", day_start(28)), ("2026-11-29", day_start(29))] {
        let r = store.begin_run(&day(label, start), 60).unwrap();
        store
            .complete_run(r.run_id, 61, &small_content(TestState::NoEvidence))
            .unwrap();
    }
    let by_hand = store
        .begin_run(&header("day", "2026-12-01", day_start(31), None), 70)
        .unwrap();
    store
        .complete_run(by_hand.run_id, 71, &small_content(TestState::Differs))
        .unwrap();
    let week = store
        .begin_run(
            &header("week", "2026-W49", day_start(30), Some("weekly")),
            80,
        )
        .unwrap();
    store
        .complete_run(week.run_id, 81, &small_content(TestState::Differs))
        .unwrap();
    let all = store.all_runs().unwrap();
    assert_eq!(all.len(), 7);
    assert!(all.windows(2).all(|w| w[0].run_id < w[1].run_id));

    let hist = store.history("bore", "machine", "day", 30).unwrap();
    let seen: Vec<(&str, i64, i64, TestState)> = hist
        .iter()
        .map(|p| {
            (
                p.run.header.period_label.as_str(),
                p.run.version,
                p.complete_versions,
                p.test.state,
            )
        })
        .collect();
    assert_eq!(
        seen,
        [
            ("2026-11-28", 1, 1, TestState::NoEvidence),
            ("2026-11-29", 1, 1, TestState::NoEvidence),
            ("2026-11-30", 2, 2, TestState::DiffersMaterial),
            ("2026-12-01", 1, 1, TestState::Differs),
        ]
    );
    assert!(hist.iter().all(|p| p.test.groups.is_empty()));
    let last2 = store.history("bore", "machine", "day", 2).unwrap();
    let labels: Vec<&str> = last2
        .iter()
        .map(|p| p.run.header.period_label.as_str())
        .collect();
    assert_eq!(labels, ["2026-11-30", "2026-12-01"]);
    assert!(store
        .history("bore", "nozzle", "day", 30)
        .unwrap()
        .is_empty());

    let between = store
        .latest_complete_runs_between("day", day_start(29), day_start(31))
        .unwrap();
    let picked: Vec<(&str, i64)> = between
        .iter()
        .map(|r| (r.header.period_label.as_str(), r.version))
        .collect();
    assert_eq!(picked, [("2026-11-29", 1), ("2026-11-30", 2)]);

    // Done periods, per schedule (a run by hand belongs to no schedule).
    assert_eq!(
        store.completed_labels(Some("daily"), "day").unwrap(),
        ["2026-11-28", "2026-11-29", "2026-11-30"]
    );
    assert_eq!(store.completed_labels(None, "day").unwrap(), ["2026-12-01"]);
    assert_eq!(
        store.completed_labels(Some("weekly"), "week").unwrap(),
        ["2026-W49"]
    );
    // An import of duplicates only changes nothing; one with new rows inside 2026-11-29 makes
    // it due again; a new complete run makes it done again.
    store.exec(&import_sql(5, 5, day_start(29) + 500, day_start(29) + 600));
    assert_eq!(
        store.completed_labels(Some("daily"), "day").unwrap().len(),
        3
    );
    store.exec(&import_sql(5, 0, day_start(29) + 500, day_start(29) + 600));
    assert_eq!(
        store.completed_labels(Some("daily"), "day").unwrap(),
        ["2026-11-28", "2026-11-30"]
    );
    let again = store
        .begin_run(&day("2026-11-29", day_start(29)), 90)
        .unwrap();
    store
        .complete_run(again.run_id, 91, &small_content(TestState::NoEvidence))
        .unwrap();
    assert_eq!(
        store.completed_labels(Some("daily"), "day").unwrap().len(),
        3
    );

    store.exec(&measurement_sql(1_234_567));
    store.exec(&measurement_sql(987_654));
    assert_eq!(store.first_measurement_ms().unwrap(), Some(987_654));

    // Abandoned runs: recovered once their lease is gone or expired, not while it lives.
    let key = LeaseKey {
        schedule: "daily".into(),
        period_kind: "day".into(),
        period_label: "2026-12-02".into(),
    };
    assert!(store.take_lease(&key, "a", 1_000, 100).unwrap());
    let begun = store
        .begin_run(&day("2026-12-02", day_start(32)), 1_000)
        .unwrap();
    assert_eq!(store.recover_abandoned(1_050).unwrap(), 0);
    assert_eq!(store.recover_abandoned(1_200).unwrap(), 1);
    let stuck = &store.runs_of_period("day", "2026-12-02").unwrap()[0];
    assert_eq!(stuck.run_id, begun.run_id);
    assert_eq!(stuck.status, RunStatus::Failed);
    assert_eq!(stuck.finished_ms, Some(1_200));
    assert_eq!(
        stuck.error.as_deref(),
        Some("abandoned: the process stopped before the run was written; no results were kept")
    );
    assert!(store
        .complete_run(stuck.run_id, 1_300, &small_content(TestState::Differs))
        .is_err());
    // The holder of a period's lease abandons that period's running runs only.
    let hand_key = LeaseKey {
        schedule: String::new(),
        ..key.clone()
    };
    let hand = store
        .begin_run(&header("day", "2026-12-02", day_start(32), None), 1_400)
        .unwrap();
    let other = store
        .begin_run(&day("2026-12-03", day_start(33)), 1_400)
        .unwrap();
    assert_eq!(store.abandon_running(&hand_key, 1_500).unwrap(), 1);
    let status = |id: i64, store: &dyn Runs| {
        store
            .all_runs()
            .unwrap()
            .into_iter()
            .find(|r| r.run_id == id)
            .unwrap()
            .status
    };
    assert_eq!(status(hand.run_id, &*store), RunStatus::Failed);
    assert_eq!(status(other.run_id, &*store), RunStatus::Running);
}

fn leases_contract(store: &mut dyn Runs) {
    let key = LeaseKey {
        schedule: "daily".into(),
        period_kind: "day".into(),
        period_label: "2026-11-30".into(),
    };
    assert_eq!(store.lease_count().unwrap(), 0);
    assert_eq!(store.lease_holder(&key).unwrap(), None);
    assert!(store.take_lease(&key, "a", 1000, 100).unwrap());
    // Taking again by the holder renews it.
    assert!(store.take_lease(&key, "a", 1010, 100).unwrap());
    assert!(!store.take_lease(&key, "b", 1050, 100).unwrap());
    assert!(store.heartbeat(&key, "a", 1090, 100).unwrap());
    assert!(!store.take_lease(&key, "b", 1150, 100).unwrap());
    assert!(!store.heartbeat(&key, "b", 1150, 100).unwrap());
    assert_eq!(store.lease_holder(&key).unwrap().as_deref(), Some("a"));
    // Expired at 1190 (exactly): b takes it; a's heartbeat fails from then on.
    assert!(store.take_lease(&key, "b", 1190, 100).unwrap());
    assert!(!store.heartbeat(&key, "a", 1195, 100).unwrap());
    // A release by someone who does not hold it changes nothing.
    store.release_lease(&key, "a").unwrap();
    assert!(!store.take_lease(&key, "c", 1200, 100).unwrap());
    assert_eq!(store.lease_count().unwrap(), 1);
    // Take-over: only from the holder named.
    assert!(!store.take_over_lease(&key, "a", "c", 1210, 100).unwrap());
    assert!(store.take_over_lease(&key, "b", "c", 1210, 100).unwrap());
    assert_eq!(store.lease_holder(&key).unwrap().as_deref(), Some("c"));
    assert!(!store.heartbeat(&key, "b", 1220, 100).unwrap());
    assert!(store.heartbeat(&key, "c", 1220, 100).unwrap());
    // Leases of other periods or schedules are independent.
    let by_hand = LeaseKey {
        schedule: String::new(),
        ..key.clone()
    };
    assert!(store.take_lease(&by_hand, "d", 1220, 100).unwrap());
    assert_eq!(store.lease_count().unwrap(), 2);
    store.release_lease(&key, "c").unwrap();
    store.release_lease(&by_hand, "d").unwrap();
    assert_eq!(store.lease_count().unwrap(), 0);
    assert!(store.take_lease(&key, "e", 1230, 100).unwrap());
}

// ---------------------------------------------------------------------------------------------
// Races between two connections

/// Two stores on one database, each for a thread of its own.
type Pair = (Box<dyn RunStore + Send>, Box<dyn RunStore + Send>);

/// Two connections to one SQLite file (removed afterwards).
struct SqlitePair {
    dir: PathBuf,
}

impl SqlitePair {
    fn open(name: &str) -> (SqlitePair, Pair) {
        let dir =
            std::env::temp_dir().join(format!("samewise-contract-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("plant.sqlite");
        let a = Store::open_or_create(&path).unwrap();
        let b = Store::open(&path).unwrap();
        (SqlitePair { dir }, (Box::new(a), Box::new(b)))
    }
}

impl Drop for SqlitePair {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}

/// Two connections to one fresh PostgreSQL schema; the guard drops the schema.
fn pg_pair() -> Option<(testing::TestStore, Pair)> {
    let guard = testing::store()?;
    let a = PgStore::open(guard.target()).unwrap();
    let b = PgStore::open(guard.target()).unwrap();
    Some((guard, (Box::new(a), Box::new(b))))
}

/// Runs `body(store, which)` on both stores at once, each on its own thread, started together.
fn race<T: Send>(
    pair: &mut Pair,
    body: impl Fn(&mut (dyn RunStore + Send), usize) -> T + Sync,
) -> (T, T) {
    let (a, b) = pair;
    std::thread::scope(|s| {
        let body = &body;
        let ta = s.spawn(move || body(&mut **a, 0));
        let tb = s.spawn(move || body(&mut **b, 1));
        (ta.join().unwrap(), tb.join().unwrap())
    })
}

/// Two connections ask for the same lease at the same instant, round after round: exactly one
/// gets it each time, and it is the one the store names as holder.
fn lease_race_contract(mut pair: Pair) {
    const ROUNDS: usize = 40;
    let barrier = Barrier::new(2);
    let key = |round: usize| LeaseKey {
        schedule: "daily".into(),
        period_kind: "day".into(),
        period_label: format!("round-{round}"),
    };
    let (won_a, won_b) = race(&mut pair, |store, which| {
        (0..ROUNDS)
            .map(|round| {
                barrier.wait();
                store
                    .take_lease(&key(round), &format!("holder-{which}"), 1_000, 60_000)
                    .unwrap()
            })
            .collect::<Vec<bool>>()
    });
    for round in 0..ROUNDS {
        assert!(won_a[round] != won_b[round], "round {round}: one winner");
        let winner = if won_a[round] { "holder-0" } else { "holder-1" };
        assert_eq!(
            pair.0.lease_holder(&key(round)).unwrap().as_deref(),
            Some(winner)
        );
    }
    assert_eq!(pair.1.lease_count().unwrap(), ROUNDS);
}

/// Two connections begin runs of the same period at once: every run gets its own version, and
/// the versions are 1, 2, ... without a gap.
fn version_race_contract(mut pair: Pair) {
    const EACH: usize = 12;
    let barrier = Barrier::new(2);
    let (va, vb) = race(&mut pair, |store, _| {
        barrier.wait();
        (0..EACH)
            .map(|i| {
                store
                    .begin_run(&header("day", "2026-11-30", 0, Some("daily")), i as i64)
                    .unwrap()
                    .version
            })
            .collect::<Vec<i64>>()
    });
    let mut all: Vec<i64> = va.into_iter().chain(vb).collect();
    all.sort_unstable();
    let want: Vec<i64> = (1..=2 * EACH as i64).collect();
    assert_eq!(all, want);
    let stored: Vec<i64> = pair
        .0
        .runs_of_period("day", "2026-11-30")
        .unwrap()
        .iter()
        .map(|r| r.version)
        .collect();
    assert_eq!(stored, want);
}

/// Two schedulers (the lifecycle of `schedule`, each on its own connection) work through the
/// same periods at once: every period is run exactly once, and no run is left running.
fn scheduler_race_contract(mut pair: Pair) {
    const PERIODS: usize = 16;
    let label = |p: usize| format!("2026-11-{:02}", p + 1);
    let barrier = Barrier::new(2);
    let clock = std::time::Instant::now();
    let now = || 1_000_000 + clock.elapsed().as_millis() as i64;
    race(&mut pair, |store, which| {
        let holder = crate::schedule::holder_name(which as i64);
        barrier.wait();
        for p in 0..PERIODS {
            let lease = lifecycle::Lease {
                key: LeaseKey {
                    schedule: "daily".into(),
                    period_kind: "day".into(),
                    period_label: label(p),
                },
                holder: &holder,
                ttl_ms: 60_000,
            };
            if !lifecycle::acquire(&*store, &lease, now())
                .unwrap()
                .is_ours()
            {
                continue;
            }
            lifecycle::holding(store, &lease, |store| {
                store.recover_abandoned(now())?;
                store.abandon_running(&lease.key, now())?;
                if store
                    .completed_labels(Some("daily"), "day")?
                    .contains(&label(p))
                {
                    return Ok(());
                }
                let h = header("day", &label(p), day_start(p as i64 + 1), Some("daily"));
                let finished = lifecycle::run_period(store, &lease, &h, &now, &mut |_| {}, |_| {
                    std::thread::sleep(std::time::Duration::from_millis(2));
                    Ok(small_content(TestState::NoEvidence))
                })?;
                assert!(matches!(finished, lifecycle::Finished::Completed(..)));
                Ok(())
            })
            .unwrap();
        }
    });
    let runs = pair.0.all_runs().unwrap();
    assert_eq!(runs.len(), PERIODS, "each period run once: {runs:#?}");
    assert!(runs.iter().all(|r| r.status == RunStatus::Complete));
    let mut labels: Vec<&str> = runs
        .iter()
        .map(|r| r.header.period_label.as_str())
        .collect();
    labels.sort_unstable();
    labels.dedup();
    assert_eq!(labels.len(), PERIODS);
    assert_eq!(pair.1.lease_count().unwrap(), 0);
}

/// Runs a race contract on two SQLite connections to one file and, when a server is named, on
/// two PostgreSQL connections to one schema.
macro_rules! raced_on_both_backends {
    ($name:ident, $contract:path) => {
        mod $name {
            use super::*;

            #[test]
            fn sqlite() {
                let (_dir, pair) = SqlitePair::open(stringify!($name));
                $contract(pair);
            }

            #[test]
            fn postgres() {
                let Some((_schema, pair)) = pg_pair() else {
                    return;
                };
                $contract(pair);
            }
        }
    };
}

raced_on_both_backends!(lease_race, lease_race_contract);
raced_on_both_backends!(version_race, version_race_contract);
raced_on_both_backends!(scheduler_race, scheduler_race_contract);

// ---------------------------------------------------------------------------------------------
// Findings

fn at(ms: i64) -> DateTime<Utc> {
    from_ms(ms)
}

/// A finding with every field set; `level` tells findings apart.
fn finding(kind: PeriodKind, level: &str, last_start_ms: i64) -> Finding {
    Finding {
        id: 0,
        period_kind: kind,
        characteristic: "bore".into(),
        factor: "machine".into(),
        level: level.into(),
        status: FindingStatus::Open,
        times_reopened: 2,
        first_label: "2026-11-02".into(),
        first_start: at(1_000),
        episode_label: "2026-11-20".into(),
        episode_start: at(2_000),
        last_label: "2026-11-30".into(),
        last_start: at(last_start_ms),
        last_end: at(last_start_ms + DAY),
        n_flagged: 7,
        n_weak: 1,
        quiet_periods: 0,
        unit: "mm".into(),
        effect_now: Some(1e-300),
        effect_now_sd: Some(1.797_693_134_862_315_7e308),
        effect_now_pct: Some(-1.0 / 3.0),
        within_sd: Some(f64::from_bits(1)),
        peak_effect: Some(0.1 + 0.2),
        peak_pct: Some(-2.225_073_858_507_201_4e-308),
        peak_label: Some("2026-11-25".into()),
        onset: Some(at(1_500)),
        onset_low: Some(at(1_400)),
        onset_high: Some(at(1_600)),
        onset_method: "change point".into(),
        event_id: Some(3),
        event_at: Some(at(1_450)),
        event_note: Some("new insert, M2".into()),
        created: at(5_000),
        updated: at(6_000),
    }
}

fn findings_contract(store: &mut dyn Findings) {
    assert!(store.findings(None).unwrap().is_empty());
    assert_eq!(store.finding(1).unwrap(), None);
    assert_eq!(store.last_alert().unwrap(), None);
    let err = store
        .add_finding_note(1, "checked", at(1))
        .unwrap_err()
        .to_string();
    assert_eq!(err, "there are no findings yet");

    let mut batch = vec![
        finding(PeriodKind::Day, "M2", 3_000),
        finding(PeriodKind::Day, "M4", 4_000),
        finding(PeriodKind::Week, "M2", 3_000),
    ];
    // The third one with every optional field empty.
    let f = &mut batch[2];
    (f.effect_now, f.effect_now_sd, f.effect_now_pct, f.within_sd) = (None, None, None, None);
    (f.peak_effect, f.peak_pct, f.peak_label) = (None, None, None);
    (f.onset, f.onset_low, f.onset_high) = (None, None, None);
    (f.event_id, f.event_at, f.event_note) = (None, None, None);
    f.status = FindingStatus::Watch;
    store.save_findings(&mut batch).unwrap();
    let ids: Vec<i64> = batch.iter().map(|f| f.id).collect();
    assert!(ids[0] > 0 && ids[0] < ids[1] && ids[1] < ids[2], "{ids:?}");
    for f in &batch {
        assert_same_bits(&store.finding(f.id).unwrap().unwrap(), f);
    }
    // Most recently flagged first, then by id; filtered by kind.
    let order: Vec<i64> = store.findings(None).unwrap().iter().map(|f| f.id).collect();
    assert_eq!(order, [ids[1], ids[0], ids[2]]);
    let days: Vec<i64> = store
        .findings(Some(PeriodKind::Day))
        .unwrap()
        .iter()
        .map(|f| f.id)
        .collect();
    assert_eq!(days, [ids[1], ids[0]]);
    assert!(store.findings(Some(PeriodKind::Month)).unwrap().is_empty());

    // Updated in place, and a new one in the same batch.
    batch[0].status = FindingStatus::Closed;
    batch[0].quiet_periods = 3;
    batch[0].updated = at(7_000);
    let mut second = vec![batch[0].clone(), finding(PeriodKind::Day, "M1", 1_000)];
    store.save_findings(&mut second).unwrap();
    assert_eq!(second[0].id, ids[0]);
    assert!(second[1].id > ids[2]);
    assert_same_bits(&store.finding(ids[0]).unwrap().unwrap(), &second[0]);
    assert_eq!(store.findings(None).unwrap().len(), 4);

    // All or nothing: a batch whose second finding repeats a stored one writes nothing.
    let mut bad = vec![
        finding(PeriodKind::Month, "M9", 1_000),
        finding(PeriodKind::Day, "M4", 1_000),
    ];
    assert!(store.save_findings(&mut bad).is_err());
    assert_eq!(store.findings(None).unwrap().len(), 4);

    // Notes, oldest first (same instant: in the order written).
    store.add_finding_note(ids[1], "second", at(20)).unwrap();
    store.add_finding_note(ids[1], "first", at(10)).unwrap();
    store.add_finding_note(ids[1], "third", at(20)).unwrap();
    assert_eq!(
        store.finding_notes(ids[1]).unwrap(),
        [
            (at(10), "first".to_string()),
            (at(20), "second".to_string()),
            (at(20), "third".to_string())
        ]
    );
    assert!(store.finding_notes(ids[0]).unwrap().is_empty());
    let last = second[1].id;
    let err = store
        .add_finding_note(last + 10, "x", at(1))
        .unwrap_err()
        .to_string();
    assert_eq!(
        err,
        format!(
            "there is no finding #{} (the highest is #{last}; `samewise findings --all` lists \
             them)",
            last + 10
        )
    );

    // The alert log: the latest record, every field kept.
    let first = AlertRecord {
        started: at(100),
        finished: at(150),
        n_findings: 2,
        command: "notify --to quality".into(),
        exit_code: Some(0),
        error: None,
    };
    let failed = AlertRecord {
        started: at(200),
        finished: at(260),
        n_findings: 4_000_000_000,
        command: "notify --to quality".into(),
        exit_code: None,
        error: Some("killed by signal 9".into()),
    };
    store.log_alert(&first).unwrap();
    assert_eq!(store.last_alert().unwrap(), Some(first));
    store.log_alert(&failed).unwrap();
    assert_eq!(store.last_alert().unwrap(), Some(failed));
}

fn flag_history_contract(store: &mut dyn Findings) {
    assert!(store.flag_history(PeriodKind::Day).unwrap().is_empty());
    // Two periods, the second checked twice: the history holds its latest version only.
    for (label, start, state) in [
        ("2026-11-29", 2_000, TestState::Differs),
        ("2026-11-28", 1_000, TestState::NoEvidence),
        ("2026-11-29", 2_000, TestState::DiffersMaterial),
    ] {
        let r = store
            .begin_run(&header("day", label, start, Some("daily")), 1)
            .unwrap();
        store
            .complete_run(r.run_id, 2, &small_content(state))
            .unwrap();
    }
    let running = store
        .begin_run(&header("day", "2026-11-30", 3_000, Some("daily")), 3)
        .unwrap();
    let rows = store.flag_history(PeriodKind::Day).unwrap();
    let seen: Vec<(&str, &str, &str, TestState)> = rows
        .iter()
        .map(|r| {
            (
                r.characteristic.as_str(),
                r.factor.as_str(),
                r.label.as_str(),
                r.state,
            )
        })
        .collect();
    assert_eq!(
        seen,
        [
            ("bore", "machine", "2026-11-28", TestState::NoEvidence),
            ("bore", "machine", "2026-11-29", TestState::DiffersMaterial),
            ("flatness", "shift", "2026-11-28", TestState::NoEvidence),
            ("flatness", "shift", "2026-11-29", TestState::NoEvidence),
        ]
    );
    let r = &rows[1];
    assert_eq!((r.start, r.end), (at(2_000), at(2_000 + DAY)));
    assert_eq!(r.stands_out.level.as_deref(), Some("M2"));
    assert_eq!(r.stands_out.diff, Some(0.012));
    assert!(!r.recommend_kruskal);
    assert!(rows.iter().all(|r| r.run_id != running.run_id));
    assert!(store.flag_history(PeriodKind::Week).unwrap().is_empty());
    // Group means of a stored test, in group order; nothing for an unknown one.
    assert_eq!(
        store.group_means(r.run_id, r.test_idx).unwrap(),
        [("M1".to_string(), 6, -0.01), ("M2".to_string(), 6, 0.002)]
    );
    assert!(store.group_means(r.run_id, 99).unwrap().is_empty());
}

// ---------------------------------------------------------------------------------------------
// Events

fn new_event(
    ms: i64,
    note: &str,
    characteristic: Option<&str>,
    scope: &[(&str, &str)],
) -> NewEvent {
    NewEvent {
        at: at(ms),
        note: note.into(),
        characteristic: characteristic.map(str::to_string),
        scope: scope
            .iter()
            .map(|(f, l)| (f.to_string(), l.to_string()))
            .collect(),
    }
}

fn events_contract(store: &mut dyn Events) {
    let err = |r: crate::Result<i64>| r.unwrap_err().to_string();
    assert_eq!(
        store.event(1).unwrap_err().to_string(),
        "no event #1: no event is recorded"
    );
    // Refused, and nothing written.
    assert_eq!(
        err(store.add_event(&new_event(1, "  ", None, &[]), at(0))),
        "the event note is empty"
    );
    assert_eq!(
        err(store.add_event(&new_event(1, "tool\u{1b}[31m", None, &[]), at(0))),
        "the event note holds a control character (\\u{1b}): write it without"
    );
    assert_eq!(
        err(store.add_event(&new_event(1, "x", Some("bor"), &[]), at(0))),
        "unknown characteristic \"bor\" (did you mean \"bore\"?); known in the database: bore, \
         flatness"
    );
    assert_eq!(
        err(store.add_event(&new_event(1, "x", None, &[("machin", "M1")]), at(0))),
        "unknown factor \"machin\" (did you mean \"machine\"?); known in the database: machine, \
         shift, cavity"
    );
    assert_eq!(
        err(store.add_event(&new_event(1, "x", None, &[("machine", "M3")]), at(0))),
        "unknown level \"M3\" of factor \"machine\" (did you mean \"M1\", \"M2\" or \"M4\"?); \
         known in the database: M1, M2, M4"
    );
    assert_eq!(
        err(store.add_event(&new_event(1, "x", None, &[("cavity", "7")]), at(0))),
        "unknown level \"7\" of factor \"cavity\"; none is known in the database"
    );
    assert_eq!(
        err(store.add_event(
            &new_event(1, "x", None, &[("machine", "M1"), ("machine", "M2")]),
            at(0)
        )),
        "factor \"machine\" is given twice"
    );
    assert!(store.events_including_removed().unwrap().is_empty());

    // Recorded: ids increase; listed in time order, then id; scope in factor order.
    let e1 = store
        .add_event(
            &new_event(
                5_000,
                "new insert",
                Some("bore"),
                &[("shift", "B"), ("machine", "M4")],
            ),
            at(100),
        )
        .unwrap();
    let e2 = store
        .add_event(
            &new_event(2_000, "lot 4471 of bar stock", None, &[]),
            at(101),
        )
        .unwrap();
    let e3 = store
        .add_event(
            &new_event(5_000, "program edit", None, &[("shift", "A")]),
            at(102),
        )
        .unwrap();
    assert!(e1 < e2 && e2 < e3);
    let listed: Vec<i64> = store
        .events(None, None)
        .unwrap()
        .iter()
        .map(|e| e.id)
        .collect();
    assert_eq!(listed, [e2, e1, e3]);
    let one = store.event(e1).unwrap();
    assert_eq!(one.at, at(5_000));
    assert_eq!(one.note, "new insert");
    assert_eq!(one.characteristic.as_deref(), Some("bore"));
    assert_eq!(
        one.scope,
        [
            ("machine".to_string(), "M4".to_string()),
            ("shift".to_string(), "B".to_string())
        ]
    );
    assert_eq!((one.created, one.removed), (at(100), None));
    // Bounds: start included, end excluded.
    let window: Vec<i64> = store
        .events(Some(at(2_000)), Some(at(5_000)))
        .unwrap()
        .iter()
        .map(|e| e.id)
        .collect();
    assert_eq!(window, [e2]);
    assert_eq!(store.events(Some(at(5_001)), None).unwrap(), []);
    assert_eq!(
        store.event(e3 + 5).unwrap_err().to_string(),
        format!(
            "no event #{} (events are numbered 1 to {e3}; see `samewise event list --all`)",
            e3 + 5
        )
    );

    // Edits: one history entry per field that changes; nothing changed is refused.
    let edit = EventEdit {
        note: Some("new insert, grade P25".into()),
        scope: Some(vec![("machine".into(), "M2".into())]),
        ..EventEdit::default()
    };
    let edited = store
        .edit_event(e1, &edit, "qe@host-3", Some("typo"), at(200))
        .unwrap();
    assert_eq!(edited.note, "new insert, grade P25");
    assert_eq!(edited.scope, [("machine".to_string(), "M2".to_string())]);
    assert_eq!(store.event(e1).unwrap(), edited);
    assert_eq!(
        store
            .edit_event(e1, &edit, "qe@host-3", None, at(201))
            .unwrap_err()
            .to_string(),
        format!("event #{e1} already reads so: nothing changed")
    );
    assert_eq!(
        store
            .edit_event(e1, &EventEdit::default(), "qe@host-3", None, at(201))
            .unwrap_err()
            .to_string(),
        "nothing to change: give --at, --note, --characteristic/--any-characteristic or \
         --where/--no-where"
    );
    let moved = EventEdit {
        at: Some(at(1_000)),
        characteristic: Some(None),
        ..EventEdit::default()
    };
    store
        .edit_event(e1, &moved, "qe@host-3", None, at(202))
        .unwrap();
    let listed: Vec<i64> = store
        .events(None, None)
        .unwrap()
        .iter()
        .map(|e| e.id)
        .collect();
    assert_eq!(listed, [e1, e2, e3]);
    // An unknown name in an edit is refused and changes nothing.
    let bad = EventEdit {
        characteristic: Some(Some("flatnes".into())),
        ..EventEdit::default()
    };
    assert!(store.edit_event(e1, &bad, "qe", None, at(203)).is_err());
    assert_eq!(store.event(e1).unwrap().characteristic, None);

    // Removal: kept, marked, out of the list; not removed or edited again.
    let removed = store
        .remove_event(e2, "qe@host-3", Some("recorded twice"), at(300))
        .unwrap();
    assert_eq!(removed.removed, Some(at(300)));
    assert!(store.events(None, None).unwrap().iter().all(|e| e.id != e2));
    let everything = store.events_including_removed().unwrap();
    assert_eq!(everything.len(), 3);
    assert_eq!(everything.iter().find(|e| e.id == e2), Some(&removed));
    assert_eq!(
        store
            .remove_event(e2, "qe", None, at(301))
            .unwrap_err()
            .to_string(),
        format!("event #{e2} was already removed (1970-01-01 00:00 UTC)")
    );
    assert_eq!(
        store
            .edit_event(e2, &edit, "qe", None, at(301))
            .unwrap_err()
            .to_string(),
        format!("event #{e2} was removed (1970-01-01 00:00 UTC); record a new event instead")
    );

    // The audit trail, oldest first.
    let history = store.event_history(None).unwrap();
    type Entry<'a> = (
        i64,
        &'a str,
        Option<&'a str>,
        Option<&'a str>,
        Option<&'a str>,
    );
    let trail: Vec<Entry<'_>> = history
        .iter()
        .map(|c| {
            (
                c.event_id,
                c.action.as_str(),
                c.field.as_deref(),
                c.before.as_deref(),
                c.after.as_deref(),
            )
        })
        .collect();
    assert_eq!(
        trail,
        [
            (
                e1,
                "edit",
                Some("note"),
                Some("new insert"),
                Some("new insert, grade P25")
            ),
            (
                e1,
                "edit",
                Some("where"),
                Some("machine=M4, shift=B"),
                Some("machine=M2")
            ),
            (
                e1,
                "edit",
                Some("at"),
                Some("1970-01-01T00:00:05.000Z"),
                Some("1970-01-01T00:00:01.000Z")
            ),
            (e1, "edit", Some("characteristic"), Some("bore"), Some("")),
            (
                e2,
                "remove",
                None,
                Some("at=1970-01-01T00:00:02.000Z; note=lot 4471 of bar stock"),
                None
            ),
        ]
    );
    assert_eq!(history[0].who, "qe@host-3");
    assert_eq!(history[0].reason.as_deref(), Some("typo"));
    assert_eq!(history[0].changed, at(200));
    assert_eq!(history[2].reason, None);
    assert_eq!(history[4].reason.as_deref(), Some("recorded twice"));
    assert_eq!(store.event_history(Some(e2)).unwrap(), history[4..]);
    assert!(store.event_history(Some(e3)).unwrap().is_empty());
    assert!(store.event_history(Some(e3 + 1)).is_err());
}
