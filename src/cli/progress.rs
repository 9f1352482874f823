//! A progress line on standard error for long imports and catch-ups, drawn only when standard
//! error is a terminal (never into a log, a pipe or a test), only once the work has run a second,
//! and redrawn at most ten times a second with `\r` (no dependency: a line of text is all it is).
//!
//! The formatting and the throttle are pure (time is an argument) and tested below; only
//! [`Bar`] touches the terminal.

use std::io::{IsTerminal, Read, Write};
use std::time::{Duration, Instant};

/// Nothing is drawn before the work has run this long.
pub const FIRST_DRAW_AFTER: Duration = Duration::from_secs(1);
/// At most one redraw per this interval.
pub const REDRAW_EVERY: Duration = Duration::from_millis(100);

/// Decides when to redraw: not before `FIRST_DRAW_AFTER`, then at most once per `REDRAW_EVERY`.
#[derive(Debug, Clone)]
pub struct Throttle {
    start: Instant,
    last: Option<Instant>,
}

impl Throttle {
    /// A throttle whose work began at `start`.
    pub fn new(start: Instant) -> Self {
        Throttle { start, last: None }
    }

    /// Whether to draw at `now` (and if so, `now` counts as the last draw).
    pub fn due(&mut self, now: Instant) -> bool {
        if now.saturating_duration_since(self.start) < FIRST_DRAW_AFTER {
            return false;
        }
        if self
            .last
            .is_some_and(|l| now.saturating_duration_since(l) < REDRAW_EVERY)
        {
            return false;
        }
        self.last = Some(now);
        true
    }

    /// Time since the work began.
    pub fn elapsed(&self, now: Instant) -> Duration {
        now.saturating_duration_since(self.start)
    }
}

/// `1.5 MB`, `116.0 MB`, `2.3 GB` (decimal units).
pub fn bytes_text(bytes: u64) -> String {
    let b = bytes as f64;
    if b < 1e3 {
        format!("{bytes} B")
    } else if b < 1e6 {
        format!("{:.1} kB", b / 1e3)
    } else if b < 1e9 {
        format!("{:.1} MB", b / 1e6)
    } else {
        format!("{:.2} GB", b / 1e9)
    }
}

/// `950`, `12.3 k`, `1.02 M`.
pub fn count_text(n: f64) -> String {
    if n < 1e4 {
        format!("{n:.0}")
    } else if n < 1e6 {
        format!("{:.1} k", n / 1e3)
    } else {
        format!("{:.2} M", n / 1e6)
    }
}

/// `45 s`, `3 min 05 s`, `2 h 07 min`.
pub fn duration_text(d: Duration) -> String {
    let s = d.as_secs();
    if s < 60 {
        format!("{s} s")
    } else if s < 3600 {
        format!("{} min {:02} s", s / 60, s % 60)
    } else {
        format!("{} h {:02} min", s / 3600, (s % 3600) / 60)
    }
}

/// The import line: name, share and bytes when the size is known, rows, rate, time left.
/// `rows` counts line ends read so far (a row holding a quoted line break counts twice: the
/// line is an estimate, the final summary is exact).
pub fn import_line(
    name: &str,
    bytes: u64,
    total: Option<u64>,
    rows: u64,
    elapsed: Duration,
) -> String {
    let secs = elapsed.as_secs_f64().max(1e-3);
    let rate = rows as f64 / secs;
    let mut line = format!("importing {name}: ");
    match total.filter(|t| *t > 0) {
        Some(total) => {
            let share = (bytes as f64 / total as f64).min(1.0);
            line.push_str(&format!(
                "{:>3.0}% ({} of {}), {} rows, {} rows/s",
                share * 100.0,
                bytes_text(bytes),
                bytes_text(total),
                count_text(rows as f64),
                count_text(rate)
            ));
            if bytes > 0 && bytes < total {
                let left = secs * (total - bytes) as f64 / bytes as f64;
                line.push_str(&format!(
                    ", {} left",
                    duration_text(Duration::from_secs_f64(left))
                ));
            }
        }
        None => line.push_str(&format!(
            "{} read, {} rows, {} rows/s",
            bytes_text(bytes),
            count_text(rows as f64),
            count_text(rate)
        )),
    }
    line
}

/// The catch-up line: periods done of total, the current one, time left at the pace so far.
pub fn periods_line(done: usize, total: usize, current: &str, elapsed: Duration) -> String {
    let mut line = format!("checking periods: {done} of {total}");
    if done > 0 && done < total {
        let left = elapsed.as_secs_f64() / done as f64 * (total - done) as f64;
        line.push_str(&format!(
            ", {} left",
            duration_text(Duration::from_secs_f64(left))
        ));
    }
    if !current.is_empty() {
        line.push_str(&format!(" (now {current})"));
    }
    line
}

/// The progress line on standard error; does nothing unless standard error is a terminal.
#[derive(Debug)]
pub struct Bar {
    enabled: bool,
    throttle: Throttle,
    drawn: bool,
}

impl Bar {
    /// A bar for work beginning now: enabled when standard error is a terminal (and `TERM` is not
    /// `dumb`).
    pub fn for_stderr() -> Self {
        let enabled =
            std::io::stderr().is_terminal() && std::env::var("TERM").map_or(true, |t| t != "dumb");
        Bar {
            enabled,
            throttle: Throttle::new(Instant::now()),
            drawn: false,
        }
    }

    /// Whether anything will ever be drawn.
    pub fn enabled(&self) -> bool {
        self.enabled
    }

    /// Redraws with the line `make(elapsed)` if the throttle allows it now.
    pub fn tick(&mut self, make: impl FnOnce(Duration) -> String) {
        if !self.enabled {
            return;
        }
        let now = Instant::now();
        if self.throttle.due(now) {
            let line = make(self.throttle.elapsed(now));
            let mut err = std::io::stderr().lock();
            let _ = write!(err, "\r{line}\x1b[K");
            let _ = err.flush();
            self.drawn = true;
        }
    }

    /// Erases the line (before other output, and at the end).
    pub fn clear(&mut self) {
        if self.drawn {
            let mut err = std::io::stderr().lock();
            let _ = write!(err, "\r\x1b[K");
            let _ = err.flush();
            self.drawn = false;
        }
    }
}

impl Drop for Bar {
    fn drop(&mut self) {
        self.clear();
    }
}

/// A reader that counts the bytes and line ends passing through it and keeps an import's
/// [`Bar`] up to date. Its cost per read (of 64 KiB, the CSV reader's buffer) is a line-end
/// count and a clock reading; it is only put in place when the bar is enabled.
pub struct ProgressReader<R> {
    inner: R,
    name: String,
    total: Option<u64>,
    bytes: u64,
    rows: u64,
    bar: Bar,
}

impl<R: Read> ProgressReader<R> {
    /// Wraps `inner`, named `name`, of `total` bytes when known.
    pub fn new(inner: R, name: String, total: Option<u64>, bar: Bar) -> Self {
        ProgressReader {
            inner,
            name,
            total,
            bytes: 0,
            rows: 0,
            bar,
        }
    }
}

impl<R: Read> Read for ProgressReader<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        self.bytes += n as u64;
        self.rows += buf[..n].iter().filter(|&&b| b == b'\n').count() as u64;
        let (name, bytes, total, rows) = (&self.name, self.bytes, self.total, self.rows);
        self.bar
            .tick(|elapsed| import_line(name, bytes, total, rows.saturating_sub(1), elapsed));
        if n == 0 {
            self.bar.clear();
        }
        Ok(n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn throttle_waits_a_second_then_draws_at_most_ten_times_a_second() {
        let t0 = Instant::now();
        let mut t = Throttle::new(t0);
        let at = |ms: u64| t0 + Duration::from_millis(ms);
        assert!(!t.due(at(0)));
        assert!(!t.due(at(999)));
        assert!(t.due(at(1000)));
        assert!(!t.due(at(1050)));
        assert!(!t.due(at(1099)));
        assert!(t.due(at(1100)));
        // Over ten seconds of reads every millisecond, at most 10 draws a second.
        let mut t = Throttle::new(t0);
        let draws = (0..11_000).filter(|ms| t.due(at(*ms))).count();
        assert_eq!(draws, 100);
        // A clock that appears to step back never panics nor draws early.
        let mut t = Throttle::new(t0 + Duration::from_secs(5));
        assert!(!t.due(t0));
    }

    #[test]
    fn units() {
        assert_eq!(bytes_text(999), "999 B");
        assert_eq!(bytes_text(116_030_533), "116.0 MB");
        assert_eq!(bytes_text(2_300_000_000), "2.30 GB");
        assert_eq!(count_text(950.0), "950");
        assert_eq!(count_text(12_345.0), "12.3 k");
        assert_eq!(count_text(1_020_000.0), "1.02 M");
        assert_eq!(duration_text(Duration::from_secs(45)), "45 s");
        assert_eq!(duration_text(Duration::from_secs(185)), "3 min 05 s");
        assert_eq!(duration_text(Duration::from_secs(7620)), "2 h 07 min");
    }

    #[test]
    fn import_line_with_known_size_has_share_rate_and_time_left() {
        // Half of the file in 1 s: 1 s left; 500,000 rows in 1 s.
        let line = import_line(
            "b.csv",
            58_000_000,
            Some(116_000_000),
            500_000,
            Duration::from_secs(1),
        );
        assert_eq!(
            line,
            "importing b.csv:  50% (58.0 MB of 116.0 MB), 500.0 k rows, 500.0 k rows/s, 1 s left"
        );
        // At the end: no time left shown.
        let line = import_line("b.csv", 10, Some(10), 2, Duration::from_secs(2));
        assert!(line.contains("100%") && !line.contains("left"), "{line}");
    }

    #[test]
    fn import_line_from_a_pipe_has_rows_and_rate() {
        let line = import_line(
            "<stdin>",
            3_000_000,
            None,
            2_500_000,
            Duration::from_secs(2),
        );
        assert_eq!(
            line,
            "importing <stdin>: 3.0 MB read, 2.50 M rows, 1.25 M rows/s"
        );
        // Zero elapsed time does not divide by zero.
        let line = import_line("<stdin>", 0, None, 0, Duration::ZERO);
        assert!(line.ends_with("0 rows, 0 rows/s"), "{line}");
    }

    #[test]
    fn periods_line_counts_and_estimates() {
        assert_eq!(
            periods_line(3, 12, "2026-11-04", Duration::from_secs(30)),
            "checking periods: 3 of 12, 1 min 30 s left (now 2026-11-04)"
        );
        assert_eq!(
            periods_line(0, 12, "", Duration::from_secs(3)),
            "checking periods: 0 of 12"
        );
    }

    #[test]
    fn reader_counts_bytes_and_lines_and_passes_them_on() {
        let data = b"h\n1\n2\n3";
        let bar = Bar {
            enabled: false,
            throttle: Throttle::new(Instant::now()),
            drawn: false,
        };
        let mut r = ProgressReader::new(&data[..], "x".into(), Some(7), bar);
        let mut out = Vec::new();
        r.read_to_end(&mut out).unwrap();
        assert_eq!(out, data);
        assert_eq!((r.bytes, r.rows), (7, 3));
    }
}
