//! Measures the CSV parsing side of an import alone (no database): rows per second and peak
//! memory while streaming a synthetic long-format export of N rows (50 characteristics, 5
//! column factors plus the derived shift), generated on the fly so no file is needed.
//!
//! The rows are read the way `samewise import` reads them, through `ImportStream::read_into`
//! (borrowed names, no allocation per row); `--owned` reads them through the iterator instead
//! (an owned `Measurement` per row).
//!
//! Run: `cargo run --release --example ingest_throughput -- 10000000 [--owned]` (add
//! `/usr/bin/time -v` for the peak memory).

use std::io::Read;
use std::time::Instant;

use samewise::config::Config;
use samewise::ingest::{self, MeasurementRef, OutcomeSink, ReadOptions, Rejection, RowOutcome};

struct Synthetic {
    rows: u64,
    cache: Vec<Vec<u8>>,
    next: u64,
    pending: Vec<u8>,
    at: usize,
}

impl Read for Synthetic {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        if self.at == self.pending.len() {
            self.pending.clear();
            self.at = 0;
            if self.next == 0 {
                self.pending.extend_from_slice(
                    b"timestamp,machine,line,supplier,operator,lot,characteristic,value\n",
                );
            }
            while self.pending.len() < 1 << 16 && self.next < self.rows {
                // Text of the first 100,000 rows, repeated, so the generator costs little.
                let i = self.next % 100_000;
                let seconds = i / 50; // 50 characteristics per part
                let (d, s) = (seconds / 86_400, seconds % 86_400);
                if let Some(line) = self.cache.get(i as usize) {
                    self.pending.extend_from_slice(line);
                    self.next += 1;
                    continue;
                }
                let line = format!(
                    "2026-11-{:02}T{:02}:{:02}:{:02}+01:00,M{},L{},S{},OP{:02},LOT{},c{:02},{}.{:04}\n",
                    1 + d % 28,
                    s / 3600,
                    (s / 60) % 60,
                    s % 60,
                    i % 6,
                    i % 3,
                    i % 4,
                    i % 9,
                    i % 20,
                    i % 50,
                    10 + i % 7,
                    (i * 7919) % 10_000
                );
                self.pending.extend_from_slice(line.as_bytes());
                self.cache.push(line.into_bytes());
                self.next += 1;
            }
            if self.pending.is_empty() {
                return Ok(0);
            }
        }
        let n = out.len().min(self.pending.len() - self.at);
        out[..n].copy_from_slice(&self.pending[self.at..self.at + n]);
        self.at += n;
        Ok(n)
    }
}

/// Counts what it is handed, touching the borrowed names so the reading is not optimised away.
#[derive(Default)]
struct Count {
    accepted: u64,
    name_bytes: u64,
}

impl OutcomeSink for Count {
    fn accepted(&mut self, m: MeasurementRef<'_>) {
        self.accepted += 1;
        self.name_bytes +=
            (m.characteristic.len() + m.levels.iter().map(|l| l.len()).sum::<usize>()) as u64;
    }

    fn rejected(&mut self, _: Rejection) {}
}

fn main() {
    let is_owned = std::env::args().any(|a| a == "--owned");
    let rows: u64 = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(1_000_000);
    let mut toml = String::from(
        "[plant]\nname = \"bench (invented)\"\ntime_zone = \"Europe/Berlin\"\nproduction_day_start = \"06:00\"\n\
         [[shift]]\nname = \"early\"\nstart = \"06:00\"\n[[shift]]\nname = \"late\"\nstart = \"14:00\"\n\
         [[shift]]\nname = \"night\"\nstart = \"22:00\"\n",
    );
    for c in 0..50 {
        toml.push_str(&format!("[[characteristic]]\nname = \"c{c:02}\"\n"));
    }
    for f in ["machine", "line", "supplier", "operator", "lot"] {
        toml.push_str(&format!("[[factor]]\nname = \"{f}\"\n"));
    }
    toml.push_str("[[factor]]\nname = \"shift\"\nderived = \"shift\"\n");
    let config = Config::from_toml_str(&toml, "bench.toml").unwrap();
    let source = Synthetic {
        rows,
        cache: Vec::new(),
        next: 0,
        pending: Vec::new(),
        at: 0,
    };
    let start = Instant::now();
    let mut stream =
        ingest::read_from(source, "synthetic.csv", &config, &ReadOptions::default()).unwrap();
    let mut accepted = 0u64;
    if is_owned {
        for outcome in stream.by_ref() {
            if let RowOutcome::Accepted(_) = outcome {
                accepted += 1;
            }
        }
    } else {
        let mut count = Count::default();
        while stream.read_into(&mut count) {}
        accepted = count.accepted;
        assert!(count.name_bytes > 0);
    }
    let elapsed = start.elapsed().as_secs_f64();
    let counts = stream.counts();
    assert_eq!(counts.rows_read, rows);
    assert_eq!(accepted, rows);
    println!(
        "{rows} rows in {elapsed:.2} s wall clock ({}): {:.0} rows/s, sha256 {}",
        if is_owned {
            "iterator, owned rows"
        } else {
            "read_into, borrowed rows"
        },
        rows as f64 / elapsed,
        stream.file_sha256().unwrap()
    );
}
