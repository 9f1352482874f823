//! Scheduler tests: weeks of simulated time (with a DST change and a 06:00 production-day start),
//! an outage with catch-up, failed runs retried, and two schedulers on one database.
//!
//! Sources for the calendar facts used below: EU summer time ends on the last Sunday of October
//! at 01:00 UTC (Directive 2000/84/EC, art. 2), so in Europe/Berlin the clocks go back at 03:00
//! local on 2026-10-25, inside production day 2026-10-24 (06:00 to 06:00 local), which lasts 25 h. ISO 8601 weeks run Monday to
//! Sunday (ISO 8601-1:2019, 3.1.1.23).

use std::collections::HashMap;
use std::sync::atomic::AtomicBool;
use std::sync::{Arc, Mutex};

use chrono::{DateTime, Duration, NaiveDate, TimeZone, Utc};

use samewise::config::{Config, ScheduleConfig};
use samewise::model::Period;
use samewise::results::{TestResult, TestState};
use samewise::schedule::{self, Clock, PeriodOutcome, PeriodRunner, SchedulerOptions};
use samewise::stats::fdr::FdrMethod;
use samewise::storage::runs::{RunContent, RunHeader, RunStatus};
use samewise::storage::PlantStore;

const CONFIG: &str = r#"
[plant]
name = "Invented test plant"
time_zone = "Europe/Berlin"
production_day_start = "06:00"
database = "plant.db"

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
lsl = 10.0
usl = 10.2

[[factor]]
name = "machine"

[[schedule]]
name = "daily"
period = "day"
delay = "2h"

[[schedule]]
name = "weekly"
period = "week"
delay = "6h"
"#;

fn config() -> Config {
    Config::from_toml_str(CONFIG, "/nonexistent/plant.toml").expect("test configuration")
}

fn temp_db(name: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("samewise-schedule-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir.join("plant.db")
}

/// The test configuration's store at `path`, opened (or created) through `storage`.
fn open(path: &std::path::Path) -> Box<dyn PlantStore> {
    let mut config = config();
    config.plant.database = path.to_path_buf();
    samewise::storage::open_or_create(&config).unwrap()
}

fn count_leases(store: &dyn PlantStore) -> usize {
    // Leases are released after each run; a leftover lease would block the period until expiry.
    store.lease_count().unwrap()
}

/// A stand-in for the engine: records what it was asked to run, can fail chosen periods once,
/// and returns a one-test run content naming the period.
struct Recorder {
    first: DateTime<Utc>,
    computed: Arc<Mutex<Vec<(String, String)>>>,
    fail_once: Vec<String>,
    compute_time: std::time::Duration,
}

impl PeriodRunner for Recorder {
    fn first_measurement(
        &mut self,
        _store: &dyn PlantStore,
    ) -> samewise::Result<Option<DateTime<Utc>>> {
        Ok(Some(self.first))
    }
    fn header(&self, schedule: &ScheduleConfig, period: &Period) -> RunHeader {
        RunHeader {
            period_kind: period.kind,
            period_label: period.label.clone(),
            period_start_ms: period.start.timestamp_millis(),
            period_end_ms: period.end.timestamp_millis(),
            schedule: Some(schedule.name.clone()),
            config_hash: "test".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            fdr_method: FdrMethod::BenjaminiHochberg,
            fdr_level: 0.05,
        }
    }
    fn compute(
        &mut self,
        _store: &dyn PlantStore,
        schedule: &ScheduleConfig,
        period: &Period,
    ) -> samewise::Result<RunContent> {
        std::thread::sleep(self.compute_time);
        self.computed
            .lock()
            .unwrap()
            .push((schedule.name.clone(), period.label.clone()));
        if let Some(pos) = self.fail_once.iter().position(|l| *l == period.label) {
            self.fail_once.remove(pos);
            return Err(samewise::Error::Database(format!(
                "injected failure for {}",
                period.label
            )));
        }
        Ok(RunContent {
            tests: vec![TestResult {
                characteristic: "bore".into(),
                factor: "machine".into(),
                state: TestState::NoEvidence,
                notes: period.label.clone(),
                ..TestResult::default()
            }],
        })
    }
}

fn berlin(y: i32, m: u32, d: u32, h: u32) -> DateTime<Utc> {
    chrono_tz::Europe::Berlin
        .with_ymd_and_hms(y, m, d, h, 0, 0)
        .single()
        .unwrap()
        .with_timezone(&Utc)
}

fn days(from: NaiveDate, to_inclusive: NaiveDate) -> Vec<String> {
    let mut out = Vec::new();
    let mut d = from;
    while d <= to_inclusive {
        out.push(d.format("%Y-%m-%d").to_string());
        d = d.succ_opt().unwrap();
    }
    out
}

#[test]
fn three_weeks_with_outage_every_period_once_in_order_across_dst() {
    let path = temp_db("three-weeks");
    let mut conn = open(&path);
    let config = config();
    // First measurement Monday 2026-10-12 07:00 local (production day 2026-10-12).
    let first = berlin(2026, 10, 12, 7);
    let clock = schedule::SimulatedClock::new(first);
    let computed = Arc::new(Mutex::new(Vec::new()));
    let mut runner = Recorder {
        first,
        computed: computed.clone(),
        fail_once: vec!["2026-10-20".into()],
        compute_time: std::time::Duration::ZERO,
    };
    let options = SchedulerOptions::new("test:1");
    let stop = AtomicBool::new(false);
    let mut log = Vec::new();
    // Up to Friday 2026-10-23 12:00 local, then the scheduler is down for 2 days.
    let outage_start = berlin(2026, 10, 23, 12);
    let mut entries = schedule::run_forever(
        &mut *conn,
        &config,
        &clock,
        &mut runner,
        &options,
        &stop,
        Some(outage_start),
        &mut |l: &str| log.push(l.to_string()),
    )
    .unwrap();
    assert_eq!(clock.now(), outage_start);
    // The injected failure was kept with its error and retried.
    let failed: Vec<_> = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Failed(..)))
        .collect();
    assert_eq!(failed.len(), 1);
    assert_eq!(failed[0].period, "2026-10-20");
    let all = conn.all_runs().unwrap();
    let f = all.iter().find(|r| r.status == RunStatus::Failed).unwrap();
    assert_eq!(f.header.period_label, "2026-10-20");
    assert_eq!(f.error.as_deref(), Some("injected failure for 2026-10-20"));

    clock.advance(Duration::days(2));
    let restart = clock.now();
    // Until Monday 2026-11-02 09:00 local: 3 weeks after the first measurement.
    let end = berlin(2026, 11, 2, 9);
    entries.extend(
        schedule::run_forever(
            &mut *conn,
            &config,
            &clock,
            &mut runner,
            &options,
            &stop,
            Some(end),
            &mut |l: &str| log.push(l.to_string()),
        )
        .unwrap(),
    );

    let all = conn.all_runs().unwrap();
    let complete: Vec<_> = all
        .iter()
        .filter(|r| r.status == RunStatus::Complete)
        .collect();
    // Daily: production days 2026-10-12 .. 2026-11-01 (day 11-01 ends 11-02 06:00, due 08:00).
    let daily: Vec<String> = complete
        .iter()
        .filter(|r| r.header.schedule.as_deref() == Some("daily"))
        .map(|r| r.header.period_label.clone())
        .collect();
    let expected = days(
        NaiveDate::from_ymd_opt(2026, 10, 12).unwrap(),
        NaiveDate::from_ymd_opt(2026, 11, 1).unwrap(),
    );
    // Exactly once each, and in period order except the retried day, which comes once, later.
    let mut sorted = daily.clone();
    sorted.sort();
    assert_eq!(sorted, expected);
    let without_retry: Vec<_> = daily.iter().filter(|l| *l != "2026-10-20").collect();
    let mut check = without_retry.clone();
    check.sort();
    assert_eq!(without_retry, check, "daily runs not in period order");
    // Weekly: ISO weeks 42, 43, 44 (Mon 10-12 .. Sun 11-01); W44 ends 11-02 06:00, due 12:00,
    // after the end of the simulation, so only W42 and W43.
    let weekly: Vec<String> = complete
        .iter()
        .filter(|r| r.header.schedule.as_deref() == Some("weekly"))
        .map(|r| r.header.period_label.clone())
        .collect();
    assert_eq!(weekly, ["2026-W42", "2026-W43"]);
    // Every run started no earlier than its period's end + delay.
    for r in &complete {
        let delay = if r.header.period_kind == samewise::model::PeriodKind::Day {
            2
        } else {
            6
        };
        assert!(r.started_ms >= r.header.period_end_ms + delay * 3_600_000);
    }
    // Catch-up after the outage (Fri 10-23 12:00 to Sun 10-25 12:00 local): days 10-23 and 10-24
    // became due during it (at 08:00 the next morning) and run at restart, oldest first; W43
    // (ends Mon 10-26 06:00) is not due yet.
    let caught_up: Vec<_> = complete
        .iter()
        .filter(|r| r.started_ms == restart.timestamp_millis())
        .map(|r| r.header.period_label.as_str())
        .collect();
    assert_eq!(caught_up, ["2026-10-23", "2026-10-24"]);
    // The production day holding the DST change is 25 hours long (see the module docs).
    let dst = complete
        .iter()
        .find(|r| r.header.period_label == "2026-10-24")
        .unwrap();
    assert_eq!(
        dst.header.period_end_ms - dst.header.period_start_ms,
        25 * 3_600_000
    );
    // The engine was asked exactly once per period, plus once for the retried failure.
    let asked = computed.lock().unwrap().clone();
    let mut counts: HashMap<(String, String), usize> = HashMap::new();
    for a in &asked {
        *counts.entry(a.clone()).or_default() += 1;
    }
    for ((s, p), n) in counts {
        let expect = if p == "2026-10-20" { 2 } else { 1 };
        assert_eq!(n, expect, "{s} {p} computed {n} times");
    }
    // No lease is left behind.
    assert_eq!(count_leases(&*conn), 0);
}

#[test]
fn shift_schedule_across_dst_spring_forward() {
    // Europe/Berlin summer time starts 2026-03-29 at 01:00 UTC (Directive 2000/84/EC, art. 1):
    // local 02:00-03:00 does not exist, so the night shift of 2026-03-28 (22:00 to 06:00 local)
    // lasts 7 hours.
    let path = temp_db("shift-dst");
    let mut conn = open(&path);
    let mut config = config();
    config.schedules.retain(|s| s.name == "daily");
    config.schedules[0].period = samewise::model::PeriodKind::Shift;
    config.schedules[0].name = "per-shift".into();
    let first = berlin(2026, 3, 28, 7);
    let clock = schedule::SimulatedClock::new(first);
    let mut runner = Recorder {
        first,
        computed: Arc::new(Mutex::new(Vec::new())),
        fail_once: Vec::new(),
        compute_time: std::time::Duration::ZERO,
    };
    let stop = AtomicBool::new(false);
    schedule::run_forever(
        &mut *conn,
        &config,
        &clock,
        &mut runner,
        &SchedulerOptions::new("t"),
        &stop,
        Some(berlin(2026, 3, 30, 9)),
        &mut |_: &str| {},
    )
    .unwrap();
    let all = conn.all_runs().unwrap();
    let labels: Vec<_> = all.iter().map(|r| r.header.period_label.as_str()).collect();
    assert_eq!(
        labels,
        [
            "2026-03-28/early",
            "2026-03-28/late",
            "2026-03-28/night",
            "2026-03-29/early",
            "2026-03-29/late",
            "2026-03-29/night",
        ]
    );
    let night = &all[2];
    assert_eq!(
        night.header.period_end_ms - night.header.period_start_ms,
        7 * 3_600_000
    );
    assert!(all.iter().all(|r| r.status == RunStatus::Complete));
}

#[test]
fn two_schedulers_at_once_run_each_period_once() {
    let path = temp_db("two-schedulers");
    drop(open(&path));
    let config = Arc::new(config());
    let first = berlin(2026, 11, 2, 7);
    let now = berlin(2026, 11, 16, 12);
    let computed = Arc::new(Mutex::new(Vec::new()));
    let handles: Vec<_> = (0..2)
        .map(|i| {
            let path = path.clone();
            let config = config.clone();
            let computed = computed.clone();
            std::thread::spawn(move || {
                let mut conn = open(&path);
                let clock = schedule::SimulatedClock::new(now);
                let mut runner = Recorder {
                    first,
                    computed,
                    fail_once: Vec::new(),
                    compute_time: std::time::Duration::from_millis(15),
                };
                let stop = AtomicBool::new(false);
                schedule::run_pass(
                    &mut *conn,
                    &config,
                    &clock,
                    &mut runner,
                    &SchedulerOptions::new(format!("scheduler-{i}")),
                    &stop,
                    &mut |_: &str| {},
                )
                .unwrap()
            })
        })
        .collect();
    let results: Vec<_> = handles.into_iter().map(|h| h.join().unwrap()).collect();
    let conn = open(&path);
    let all = conn.all_runs().unwrap();
    // 14 days (11-02 .. 11-15) and 2 weeks (W45, W46): each run exactly once, by one of the two.
    assert_eq!(all.len(), 16, "{all:#?}");
    assert!(all
        .iter()
        .all(|r| r.status == RunStatus::Complete && r.version == 1));
    let mut labels: Vec<_> = all.iter().map(|r| r.header.period_label.clone()).collect();
    labels.sort();
    labels.dedup();
    assert_eq!(labels.len(), 16);
    assert_eq!(computed.lock().unwrap().len(), 16);
    let completed: usize = results
        .iter()
        .flatten()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Completed(..)))
        .count();
    assert_eq!(completed, 16);
}

#[test]
fn nothing_is_due_before_end_plus_delay() {
    let config = config();
    let calendar = samewise::calendar::PlantCalendar::new(&config);
    let first = berlin(2026, 11, 30, 7);
    let day = &config.schedules[0];
    // Day 2026-11-30 ends 12-01 06:00 local; with 2 h delay it is due at 08:00.
    let due_by =
        |now| schedule::periods_until(&calendar, day.period, day.delay, first, now).unwrap();
    let p = due_by(berlin(2026, 12, 1, 7));
    assert!(p.is_empty());
    let p = due_by(berlin(2026, 12, 1, 8));
    assert_eq!(p.len(), 1);
    assert_eq!(p[0].label, "2026-11-30");
    let next = schedule::next_due_time(
        &calendar,
        day.period,
        day.delay,
        first,
        berlin(2026, 12, 1, 8),
    )
    .unwrap();
    assert_eq!(next, berlin(2026, 12, 2, 8));
}

mod common;

/// The engine, slowed down once the run row is written: `compute` waits `pause` before it
/// checks the period, so a run stays `running` (lease held, no results) for that long.
struct SlowEngine<'a> {
    engine: samewise::analysis::run::EngineRunner<'a>,
    pause: std::time::Duration,
}

impl PeriodRunner for SlowEngine<'_> {
    fn first_measurement(
        &mut self,
        store: &dyn PlantStore,
    ) -> samewise::Result<Option<DateTime<Utc>>> {
        self.engine.first_measurement(store)
    }
    fn header(&self, schedule: &ScheduleConfig, period: &Period) -> RunHeader {
        self.engine.header(schedule, period)
    }
    fn compute(
        &mut self,
        store: &dyn PlantStore,
        schedule: &ScheduleConfig,
        period: &Period,
    ) -> samewise::Result<RunContent> {
        std::thread::sleep(self.pause);
        self.engine.compute(store, schedule, period)
    }
}

/// Set (to the plant directory) only when `killed_scheduler_...` starts this test binary as the
/// scheduler process it kills.
const KILLED_SCHEDULER_PLANT: &str = "SAMEWISE_TEST_KILLED_SCHEDULER_PLANT";

/// One scheduler pass at 2026-11-30T12:00Z through the engine, paused a minute in each run when
/// started as the process `killed_scheduler_...` kills (it is killed in that pause), and without
/// a pause on a plant of its own otherwise (`cargo test -- --ignored`), where both due days must
/// complete with their four tests.
#[test]
#[ignore = "the scheduler process of killed_scheduler_leaves_no_partial_run_and_next_start_redoes_it"]
fn scheduler_process_paused_in_each_run() {
    let (dir, pause) = match std::env::var_os(KILLED_SCHEDULER_PLANT) {
        Some(dir) => (
            std::path::PathBuf::from(dir),
            std::time::Duration::from_secs(60),
        ),
        None => {
            let dir = common::temp_dir("paused-scheduler");
            common::invented_plant(&dir, 2);
            (dir, std::time::Duration::ZERO)
        }
    };
    let config = Config::load(dir.join("plant.toml")).unwrap();
    let mut store = samewise::storage::open(&config).unwrap();
    let mut runner = SlowEngine {
        engine: samewise::analysis::run::EngineRunner::new(&config),
        pause,
    };
    let clock =
        schedule::SimulatedClock::new(Utc.with_ymd_and_hms(2026, 11, 30, 12, 0, 0).unwrap());
    let options = SchedulerOptions::new(schedule::holder_name(1));
    let entries = schedule::run_pass(
        &mut *store,
        &config,
        &clock,
        &mut runner,
        &options,
        &AtomicBool::new(false),
        &mut |_| {},
    )
    .unwrap();
    let completed: Vec<&str> = entries
        .iter()
        .filter(|e| matches!(e.outcome, PeriodOutcome::Completed(..)))
        .map(|e| e.period.as_str())
        .collect();
    assert_eq!(completed, ["2026-11-28", "2026-11-29"], "{entries:?}");
}

/// A scheduler process killed (SIGKILL) in the middle of a run leaves no result rows, only the
/// run row in state `running`; the next start marks it abandoned (failed, error kept) and redoes
/// the period. The killed process is this test binary running
/// `scheduler_process_paused_in_each_run` (the engine paused after the run row is written): the
/// pause is the test's own runner, not a switch of the shipped program.
#[test]
fn killed_scheduler_leaves_no_partial_run_and_next_start_redoes_it() {
    let dir = common::temp_dir("killed-scheduler");
    common::invented_plant(&dir, 2);
    // Days 11-28 and 11-29 are due at 2026-11-30T12:00Z (ends 06:00 + 2 h delay).
    let mut child = std::process::Command::new(std::env::current_exe().unwrap())
        .current_dir(&dir)
        .args([
            "--exact",
            "scheduler_process_paused_in_each_run",
            "--ignored",
            "--nocapture",
        ])
        .env(KILLED_SCHEDULER_PLANT, &dir)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let started = std::time::Instant::now();
    loop {
        let store = common::open_store(&dir, "plant.db");
        let all = store.all_runs().unwrap();
        if all.iter().any(|r| r.status == RunStatus::Running) {
            break;
        }
        assert!(started.elapsed().as_secs() < 60, "no run started");
        std::thread::sleep(std::time::Duration::from_millis(50));
    }
    child.kill().unwrap(); // SIGKILL
    child.wait().unwrap();
    let store = common::open_store(&dir, "plant.db");
    let all = store.all_runs().unwrap();
    assert_eq!(all.len(), 1);
    assert_eq!(all[0].status, RunStatus::Running);
    assert!(store.run_content(all[0].run_id).unwrap().tests.is_empty());
    drop(store);
    let out = common::samewise(&dir, &["schedule", "due", "--now", "2026-11-30T12:00:00Z"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let store = common::open_store(&dir, "plant.db");
    let all = store.all_runs().unwrap();
    let killed = &all[0];
    assert_eq!(killed.status, RunStatus::Failed);
    assert!(killed.error.as_deref().unwrap().starts_with("abandoned"));
    let complete: Vec<_> = all
        .iter()
        .filter(|r| r.status == RunStatus::Complete)
        .collect();
    let labels: Vec<_> = complete
        .iter()
        .map(|r| r.header.period_label.as_str())
        .collect();
    assert_eq!(labels, ["2026-11-28", "2026-11-29"]);
    assert_eq!(complete[0].version, 2);
    for r in complete {
        assert_eq!(store.run_content(r.run_id).unwrap().tests.len(), 4);
    }
    // Nothing due any more: a third start runs nothing.
    let out = common::samewise(&dir, &["schedule", "due", "--now", "2026-11-30T12:00:00Z"]);
    assert_eq!(out.status.code(), Some(0));
    let store = common::open_store(&dir, "plant.db");
    assert_eq!(store.all_runs().unwrap().len(), 3);
}
