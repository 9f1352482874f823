//! Check benchmarks (criterion): the daily and the monthly check of issue 5 on the 10,000,000-row
//! benchmark plant (50 characteristics, 5 factors, 30 days), through the same code path as
//! `samewise check --day ... / --month ...` (`analysis::run::check_and_record`: lease, load, every
//! statistic, FDR, post-hoc for flagged tests, the run stored in one transaction).
//!
//! Run with `cargo bench --bench check` (never part of `cargo test`). Setup, only when
//! `target/bench-data/check-10m.ready` is absent (about a minute): `samewise generate-bench-data
//! --rows 10000000 --characteristics 50 --factors 5 --days 30` (deterministic, fixed random
//! state) into `target/bench-data/check-10m.csv`, then `samewise init` and `samewise import`.
//!
//! Before the criterion groups it prints, once each:
//! - the stages on their own (loading the whole period, loading it characteristic by
//!   characteristic, `check_frame` on one and on two threads, writing the run) and, for the day,
//!   the cost of the post-hoc pairs: the machine tests with every test flagged against none
//!   flagged (the benchmark plant has no injected differences, so nothing is flagged at 0.05);
//! - wall time, CPU time and peak RSS of the release binary `samewise check --day / --month`
//!   under `/usr/bin/time -v` (skipped when `/usr/bin/time` is missing).
//!
//! Targets (issue 5): daily check < 0.5 s, monthly check < 6 s, peak memory < 500 MB.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use criterion::{criterion_group, criterion_main, Criterion};
use samewise::analysis::run::{check_and_record, frame_from, header, previous_flags, run_check};
use samewise::analysis::{check_frame, check_frames, CheckOptions};
use samewise::calendar::PlantCalendar;
use samewise::config::Config;

/// A production day inside the data (2026-11-02 06:00 UTC .. 2026-12-02 06:00 UTC).
const DAY: &str = "2026-11-10";
/// The month of production days that holds the data (all but the last hours of it).
const MONTH: &str = "2026-11";

fn bench_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("target")
        .join("bench-data")
}

fn run_binary(args: &[&str], config: &Path) {
    let status = Command::new(env!("CARGO_BIN_EXE_samewise"))
        .args(args)
        .arg("--config")
        .arg(config)
        .status()
        .expect("run samewise");
    assert!(status.success(), "samewise {args:?} failed: {status}");
}

/// The benchmark plant's configuration path; builds its database once.
fn setup() -> PathBuf {
    let dir = bench_dir();
    let csv = dir.join("check-10m.csv");
    let config = PathBuf::from(format!("{}.plant.toml", csv.display()));
    let ready = dir.join("check-10m.ready");
    if !ready.exists() {
        std::fs::create_dir_all(&dir).unwrap();
        let db = dir.join("check-10m.csv.db");
        let _ = std::fs::remove_file(&db);
        let t = Instant::now();
        let status = Command::new(env!("CARGO_BIN_EXE_samewise"))
            .args(["generate-bench-data", "--rows", "10000000"])
            .args(["--characteristics", "50", "--factors", "5", "--days", "30"])
            .arg("--out")
            .arg(&csv)
            .status()
            .unwrap();
        assert!(status.success());
        run_binary(&["init"], &config);
        run_binary(&["import", csv.to_str().unwrap()], &config);
        // The database is all the benchmark needs; the CSV is 580 MB.
        std::fs::remove_file(&csv).unwrap();
        std::fs::write(&ready, "imported\n").unwrap();
        eprintln!("benchmark plant built in {:.1?}", t.elapsed());
    }
    config
}

/// CPU time of this process so far (all threads, user + system), from `/proc/self/stat`
/// (clock ticks of 10 ms); `None` where that file does not exist.
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    // Fields after the command name (which is in parentheses): state is field 3, utime 14, stime 15.
    let rest = &stat[stat.rfind(')')? + 2..];
    let fields: Vec<&str> = rest.split_whitespace().collect();
    let ticks: f64 = fields.get(11)?.parse::<f64>().ok()? + fields.get(12)?.parse::<f64>().ok()?;
    Some(ticks / 100.0)
}

fn timed<T>(what: &str, f: impl FnOnce() -> T) -> T {
    let cpu = cpu_seconds();
    let t = Instant::now();
    let out = f();
    let wall = t.elapsed().as_secs_f64();
    match (cpu, cpu_seconds()) {
        (Some(a), Some(b)) => eprintln!("  {what:<62} {wall:>8.3} s wall {:>8.2} s CPU", b - a),
        _ => eprintln!("  {what:<62} {wall:>8.3} s wall"),
    }
    out
}

/// Each stage once, on its own.
fn stages(config: &Config, label: &str, with_pairs: bool) {
    let calendar = PlantCalendar::new(config);
    let period = calendar.parse_period(label).unwrap();
    let mut store = samewise::storage::open(config).unwrap();
    let options = CheckOptions::from_config(config);
    eprintln!("stages of the check of {label}:");
    let frame = timed("load_period, all characteristics at once", || {
        frame_from(store.load_period(period.start, period.end, None).unwrap())
    });
    let n_rows: usize = frame.characteristics.iter().map(|c| c.values.len()).sum();
    let names: Vec<String> = frame
        .characteristics
        .iter()
        .map(|c| c.characteristic.name.clone())
        .collect();
    timed("load_period, one characteristic at a time", || {
        for name in &names {
            let one = std::slice::from_ref(name);
            store
                .load_period(period.start, period.end, Some(one))
                .unwrap();
        }
    });
    let prev = timed("previous period's flags", || {
        previous_flags(&*store, &calendar, &period).unwrap()
    });
    let mut content = None;
    for threads in [1, 2] {
        let opts = CheckOptions {
            threads,
            ..options.clone()
        };
        content = Some(timed(
            &format!("check_frame, {threads} thread(s), {n_rows} rows"),
            || check_frame(&frame, &opts, prev.as_ref()).unwrap(),
        ));
    }
    let content = content.unwrap();
    let streamed = timed(
        "run_check: parts of 5 characteristics, overlapped with analysis",
        || run_check(&*store, config, &period, &options).unwrap(),
    );
    assert_eq!(
        streamed, content,
        "the streamed check must equal check_frame"
    );
    // Parts of several characteristics: fewer load_period calls, more values in memory at once.
    for per_part in [1, 2, 10] {
        let streamed = timed(
            &format!("check_frames, {per_part} characteristics per load_period call"),
            || {
                let parts = names.chunks(per_part).map(|chunk| {
                    store
                        .load_period(period.start, period.end, Some(chunk))
                        .map(|pf| std::sync::Arc::new(frame_from(pf)))
                });
                check_frames(parts, &options, prev.as_ref()).unwrap()
            },
        );
        assert_eq!(streamed, content);
    }
    let n_flagged = content.tests.iter().filter(|t| t.state.is_flag()).count();
    eprintln!("    ({} tests, {n_flagged} flagged)", content.tests.len());
    // Level 0.999999: every test with a p-value is flagged, so every one computes its pairs
    // (Tukey-Kramer or Games-Howell, studentized range in stats::ptukey). Only the machine tests
    // (8 levels, 28 pairs each): all 250 tests give 44,500 pairs, minutes of ptukey.
    if with_pairs {
        for threads in [1, 2] {
            let opts = CheckOptions {
                threads,
                fdr_level: 0.999_999,
                factors: Some(vec!["machine".to_string()]),
                ..options.clone()
            };
            let t = Instant::now();
            let all = check_frame(&frame, &opts, prev.as_ref()).unwrap();
            let flagged_s = t.elapsed().as_secs_f64();
            let opts = CheckOptions {
                fdr_level: 1e-300,
                ..opts
            };
            let t = Instant::now();
            check_frame(&frame, &opts, prev.as_ref()).unwrap();
            let none_s = t.elapsed().as_secs_f64();
            eprintln!(
                "  machine tests only, {threads} thread(s): {:.3} s all flagged, {:.3} s none flagged: \
                 {} pairs in {:.3} s, {:.2} ms per pair",
                flagged_s,
                none_s,
                all.n_pairs(),
                flagged_s - none_s,
                1e3 * (flagged_s - none_s) / all.n_pairs().max(1) as f64
            );
        }
    }
    let head = header(config, &period, None, &options);
    let run = store.begin_run(&head, 0).unwrap();
    timed(
        &format!(
            "write the run ({} results, {} groups, {} pairs)",
            content.tests.len(),
            content.n_groups(),
            content.n_pairs()
        ),
        || store.complete_run(run.run_id, 1, &content).unwrap(),
    );
}

/// Wall, CPU and peak RSS of the binary, from `/usr/bin/time -v`.
fn whole_process(config: &Path, flag: &str, label: &str) {
    let time = Path::new("/usr/bin/time");
    if !time.exists() {
        eprintln!("/usr/bin/time not found: peak RSS not measured");
        return;
    }
    let out = Command::new(time)
        .arg("-v")
        .arg(env!("CARGO_BIN_EXE_samewise"))
        .args(["check", flag, label, "--config"])
        .arg(config)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    let field = |name: &str| {
        stderr
            .lines()
            .find_map(|l| l.trim().strip_prefix(name).map(|v| v.trim().to_string()))
            .unwrap_or_else(|| "?".into())
    };
    let rss_kb: f64 = field("Maximum resident set size (kbytes):")
        .parse()
        .unwrap_or(f64::NAN);
    eprintln!(
        "samewise check {flag} {label}: wall {} s, user {} s, sys {} s, CPU {}, peak RSS {:.1} MB (exit {})",
        field("Elapsed (wall clock) time (h:mm:ss or m:ss):"),
        field("User time (seconds):"),
        field("System time (seconds):"),
        field("Percent of CPU this job got:"),
        rss_kb * 1024.0 / 1e6,
        out.status.code().unwrap_or(-1),
    );
}

fn checks(c: &mut Criterion) {
    let config_path = setup();
    let config = Config::load(&config_path).unwrap();
    if std::env::var_os("SAMEWISE_BENCH_NO_STAGES").is_none() {
        stages(&config, DAY, true);
        stages(&config, MONTH, false);
        whole_process(&config_path, "--day", DAY);
        whole_process(&config_path, "--month", MONTH);
    }
    let calendar = PlantCalendar::new(&config);
    let options = CheckOptions::from_config(&config);
    let mut store = samewise::storage::open(&config).unwrap();
    let mut group = c.benchmark_group("check");
    group.sample_size(10);
    for (name, label, seconds) in [("day", DAY, 10), ("month", MONTH, 60)] {
        let period = calendar.parse_period(label).unwrap();
        group.measurement_time(Duration::from_secs(seconds));
        group.bench_function(format!("{name} {label} (check_and_record)"), |b| {
            b.iter(|| {
                check_and_record(&mut *store, &config, &period, &options, &chrono::Utc::now)
                    .unwrap()
            })
        });
    }
    group.finish();
}

criterion_group!(benches, checks);
criterion_main!(benches);
