//! Quick release-mode timing of the studentized range functions (calls per second), independent of
//! criterion: `cargo run --release --example ptukey_timing`.

use samewise::stats::ptukey::{ptukey_sf, qtukey};
use std::time::Instant;

fn time<F: FnMut() -> f64>(label: &str, mut f: F) {
    let start = Instant::now();
    let mut n = 0u32;
    let mut sink = 0.0;
    while n < 3 || (start.elapsed().as_secs_f64() < 0.3 && n < 20_000) {
        sink += f();
        n += 1;
    }
    let per = start.elapsed().as_secs_f64() / f64::from(n);
    println!(
        "{label:<40} {:>10.1} us/call  ({:.0} calls/s)  [{sink:.3e}]",
        per * 1e6,
        1.0 / per
    );
}

fn main() {
    for &p in &[0.95, 0.99, 0.999] {
        for &k in &[3.0, 5.0, 10.0, 20.0, 50.0] {
            for &df in &[1.0, 2.5, 12.0, 45.0, 100.0, 1000.0, 1e6, f64::INFINITY] {
                time(&format!("qtukey p={p} k={k} df={df}"), || {
                    qtukey(p, k, df).unwrap()
                });
            }
        }
    }
    // Small fractional df at the largest k of the target (k = 50): the widest chi densities.
    for &p in &[0.95, 0.99, 0.999] {
        for &df in &[1.5, 2.0, 3.0, 5.0] {
            time(&format!("qtukey p={p} k=50 df={df}"), || {
                qtukey(p, 50.0, df).unwrap()
            });
        }
    }
    for &(q, k, df) in &[
        (4.0, 5.0, 45.0),
        (3.0, 3.0, 12.0),
        (6.0, 10.0, 20.0),
        (7.0, 20.0, 100.0),
        (12.0, 10.0, 1e6),
    ] {
        time(&format!("ptukey_sf q={q} k={k} df={df}"), || {
            ptukey_sf(q, k, df).unwrap()
        });
    }
}
