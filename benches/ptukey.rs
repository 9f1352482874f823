//! Speed of the studentized range quantile (issue 3: under 50 microseconds for k <= 50) and of the
//! upper tail used for adjusted p-values. Criterion's warm-up builds each `k`'s table of the range
//! (once per process, 20-60 ms; see src/stats/ptukey/table.rs), so these are the per-call costs
//! of a run that has seen that `k` before.

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use samewise::stats::ptukey::{ptukey_sf, qtukey};

fn quantile(c: &mut Criterion) {
    for &(k, df) in &[
        (3.0, 12.0),
        (5.0, 2.5),
        (5.0, 45.0),
        (50.0, 12.0),
        (10.0, 100.0),
        (20.0, 2.5),
        (50.0, 1.0),
        (50.0, 1.5),
        (50.0, 2.0),
        (50.0, 2.5),
        (50.0, 1000.0),
        (50.0, f64::INFINITY),
    ] {
        c.bench_function(&format!("qtukey p=0.95 k={k} df={df}"), |b| {
            b.iter(|| qtukey(black_box(0.95), black_box(k), black_box(df)).unwrap())
        });
    }
    // The slowest corner of the target (k = 50, small df) further in the upper tail.
    for p in [0.99, 0.999] {
        c.bench_function(&format!("qtukey p={p} k=50 df=2.5"), |b| {
            b.iter(|| qtukey(black_box(p), black_box(50.0), black_box(2.5)).unwrap())
        });
    }
    // Heavy upper tail: the Newton start (a Bonferroni bound) is about 300 times too large.
    c.bench_function("qtukey p=0.999 k=50 df=1", |b| {
        b.iter(|| qtukey(black_box(0.999), black_box(50.0), black_box(1.0)).unwrap())
    });
    c.bench_function("qtukey p=0.99 k=50 df=1e6", |b| {
        b.iter(|| qtukey(black_box(0.99), black_box(50.0), black_box(1e6)).unwrap())
    });
}

fn upper_tail(c: &mut Criterion) {
    c.bench_function("ptukey_sf q=4 k=5 df=45", |b| {
        b.iter(|| ptukey_sf(black_box(4.0), black_box(5.0), black_box(45.0)).unwrap())
    });
    c.bench_function("ptukey_sf q=12 k=10 df=1e6 (tail 1e-12)", |b| {
        b.iter(|| ptukey_sf(black_box(12.0), black_box(10.0), black_box(1e6)).unwrap())
    });
}

criterion_group!(benches, quantile, upper_tail);
criterion_main!(benches);
