//! Benchmarks of the statistics core and of `compare`'s CSV pass (criterion).
//!
//! Run: `cargo bench --bench stats` (or one group: `cargo bench --bench stats -- summary`).
//! Data: 1,000,000 values in 10 groups from a fixed linear congruential generator (fixed RNG
//! state), so every run measures the same numbers.
//!
//! - `summary_pass`: group summaries (n, mean, M2, min, max) over the 10 slices; throughput in
//!   values per second (issue 2 aims at >= 200 million values/s on one core).
//! - `summaries_anova_welch_checks`: summaries + ANOVA + Welch + Levene + Brown-Forsythe +
//!   Bartlett + SD ratio + residuals beyond 3 SD.
//! - `analyze_all`: the whole `stats::oneway::analyze` bundle (adds Kruskal-Wallis, which sorts
//!   all values, and the remaining parts).
//! - `compare_csv_parse`: `compare`'s CSV reading (csv parsing, exact decimal parsing, centring,
//!   grouping) of a 1,000,000-row file held in memory; throughput in rows per second.
//!
//! Figures measured 2026-12-01 on the shared 2-core build machine under heavy load from other
//! builds (`cargo bench --bench stats -- --warm-up-time 1 --measurement-time 4`):
//! summary_pass 4.1 ms (241 M values/s); summaries_anova_welch_checks 48 ms; analyze_all 0.90 s
//! (includes Kruskal-Wallis sorting 1e6 values and the 45 Tukey-Kramer pairs); compare_csv_parse
//! 0.92 s (1.08 M rows/s). The whole command on a 1,000,000-row, 31 MB file
//! (`/usr/bin/time target/release/samewise compare rows_1m.csv --by machine --measure
//! diameter_mm --json`): 2.8 s wall, 41 MB peak memory.

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use samewise::stats::anova::one_way;
use samewise::stats::describe::Summary;
use samewise::stats::oneway::{analyze, OneWayOptions};
use samewise::stats::spread::{bartlett, brown_forsythe, count_beyond, levene_mean, sd_ratio};
use samewise::stats::welch::welch;

const N: usize = 1_000_000;
const GROUPS: usize = 10;

/// Deterministic pseudo-normal values: sum of four uniforms from a 64-bit LCG (fixed RNG state).
fn data() -> Vec<Vec<f64>> {
    let mut rng_state: u64 = 0x2545_f491_4f6c_dd1d;
    let mut uniform = move || {
        rng_state = rng_state
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (rng_state >> 11) as f64 / (1u64 << 53) as f64
    };
    (0..GROUPS)
        .map(|g| {
            (0..N / GROUPS)
                .map(|_| {
                    let z = uniform() + uniform() + uniform() + uniform() - 2.0;
                    // Values like a gauge reading in mm, resolution 0.001, small group shifts.
                    ((z * 0.01 + g as f64 * 0.0005) * 1000.0).round() / 1000.0
                })
                .collect()
        })
        .collect()
}

fn bench_stats(c: &mut Criterion) {
    let groups = data();
    let refs: Vec<&[f64]> = groups.iter().map(Vec::as_slice).collect();

    let mut g = c.benchmark_group("summary_pass");
    g.throughput(Throughput::Elements(N as u64));
    g.bench_function("1m_values_10_groups", |b| {
        b.iter(|| {
            let s: Vec<Summary> = refs
                .iter()
                .map(|v| Summary::from_slice(black_box(v)))
                .collect();
            black_box(s)
        })
    });
    g.finish();

    let mut g = c.benchmark_group("summaries_anova_welch_checks");
    g.throughput(Throughput::Elements(N as u64));
    g.sample_size(20);
    g.bench_function("1m_values_10_groups", |b| {
        b.iter(|| {
            let s: Vec<Summary> = refs
                .iter()
                .map(|v| Summary::from_slice(black_box(v)))
                .collect();
            let table = one_way(&s).unwrap();
            let w = welch(&s).unwrap();
            let lev = levene_mean(&refs).unwrap();
            let bf = brown_forsythe(&refs).unwrap();
            let bart = bartlett(&s).unwrap();
            let ratio = sd_ratio(&s).unwrap();
            let beyond = count_beyond(&refs, &s, table.resid_sd, 3.0).unwrap();
            black_box((table, w, lev, bf, bart, ratio, beyond))
        })
    });
    g.finish();

    let mut g = c.benchmark_group("analyze_all");
    g.throughput(Throughput::Elements(N as u64));
    g.sample_size(10);
    g.bench_function("1m_values_10_groups", |b| {
        b.iter(|| black_box(analyze(black_box(&refs), &OneWayOptions::default()).unwrap()))
    });
    g.finish();

    // A 1,000,000-row CSV as `compare` reads it: "machine,diameter_mm" with labels M1..M10.
    let mut csv = String::from("timestamp,machine,diameter_mm\n");
    for i in 0..N {
        let gidx = i % GROUPS;
        let v = 12.0 + groups[gidx][i / GROUPS];
        csv.push_str(&format!(
            "2026-11-30T06:{:02}:00Z,M{},{:.3}\n",
            i % 60,
            gidx + 1,
            v
        ));
    }
    let bytes = csv.into_bytes();
    let mut g = c.benchmark_group("compare_csv_parse");
    g.throughput(Throughput::Elements(N as u64));
    g.sample_size(10);
    g.bench_function("1m_rows", |b| {
        b.iter(|| {
            let d = samewise::cli::compare::parse_grouped(
                std::path::Path::new("bench.csv"),
                black_box(&bytes),
                "machine",
                "diameter_mm",
                samewise::cli::compare::CsvFormat::default(),
            )
            .unwrap();
            black_box(d)
        })
    });
    g.finish();
}

criterion_group!(benches, bench_stats);
criterion_main!(benches);
