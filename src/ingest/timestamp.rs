//! Timestamp cells to UTC instants.
//!
//! Without a `timestamp_format` in the layout, a timestamp is ISO 8601 / RFC 3339 shaped:
//! `YYYY-MM-DD`, then `T`, `t` or one space, then `HH:MM`, optionally `:SS` and a fraction of up
//! to 9 digits, then optionally a zone: `Z`, `+HH:MM`, `+HHMM` or `+HH` (one space before the
//! zone is allowed). With a `timestamp_format`, the chrono `strftime` format is used; it carries
//! a zone when it contains `%z`, `%:z`, `%#z` or `%+`.
//!
//! A timestamp with an explicit offset or `Z` is taken as given. A timestamp without one is read
//! as local time in the plant zone; when that local time does not exist (clocks go forward) or
//! occurs twice (clocks go back) the cell is rejected with a reason that says so and names both
//! readings. It is never guessed: one hour of data booked on the wrong side of a shift change
//! would bias exactly the shift comparisons this tool exists for. The conversion is
//! [`crate::calendar::local_to_utc`], the one the command line's time flags use too.

use chrono::{DateTime, NaiveDateTime, NaiveTime, Utc};
use chrono_tz::Tz;

use crate::calendar::{local_to_utc, parse_date, LocalTimeError};
use crate::config::check_timestamp_format;

/// Parses timestamp cells for one layout in one plant zone.
#[derive(Debug, Clone)]
pub struct TimestampParser {
    time_zone: Tz,
    format: Option<(String, bool)>,
}

impl TimestampParser {
    /// A parser for `format` (`None` = ISO 8601) with zone-less times read in `time_zone`.
    /// `Err` when the format is not a valid chrono format.
    pub fn new(format: Option<&str>, time_zone: Tz) -> Result<TimestampParser, String> {
        let format = match format {
            None => None,
            Some(f) => Some((f.to_string(), check_timestamp_format(f)?)),
        };
        Ok(TimestampParser { time_zone, format })
    }

    /// The UTC instant of `text`, or the reason it cannot be used.
    pub fn parse(&self, text: &str) -> Result<DateTime<Utc>, String> {
        let text = text.trim();
        if text.is_empty() {
            return Err("empty timestamp".to_string());
        }
        match &self.format {
            None => match parse_iso(text) {
                Some((naive, Some(offset))) => offset_to_utc(naive, offset, text),
                Some((naive, None)) => self.local_to_utc(naive, text),
                None => Err(format!(
                    "timestamp \"{}\" is not ISO 8601 (expected e.g. 2026-11-30 06:15:00 or 2026-11-30T06:15:00+01:00; set timestamp_format in the layout for other shapes)",
                    shorten(text)
                )),
            },
            Some((format, true)) => DateTime::parse_from_str(text, format)
                .map(|t| t.with_timezone(&Utc))
                .map_err(|e| {
                    format!(
                        "timestamp \"{}\" does not match timestamp_format \"{format}\": {e}",
                        shorten(text)
                    )
                }),
            Some((format, false)) => {
                let naive = NaiveDateTime::parse_from_str(text, format).map_err(|e| {
                    format!(
                        "timestamp \"{}\" does not match timestamp_format \"{format}\": {e}",
                        shorten(text)
                    )
                })?;
                self.local_to_utc(naive, text)
            }
        }
    }

    fn local_to_utc(&self, naive: NaiveDateTime, text: &str) -> Result<DateTime<Utc>, String> {
        to_utc(naive, None, self.time_zone, text)
    }
}

fn offset_to_utc(naive: NaiveDateTime, offset_s: i32, text: &str) -> Result<DateTime<Utc>, String> {
    // The zone is not used with an offset.
    to_utc(naive, Some(offset_s), Tz::UTC, text)
}

/// [`local_to_utc`] with the reasons of a rejected cell: the cell quoted first, the readings
/// after ", e.g." (so that a report groups the rows of one kind of problem together).
fn to_utc(
    naive: NaiveDateTime,
    offset_s: Option<i32>,
    zone: Tz,
    text: &str,
) -> Result<DateTime<Utc>, String> {
    local_to_utc(naive, offset_s, zone).map_err(|e| match (&e, e.readings()) {
        (LocalTimeError::Year(year), _) => super::year_refused(*year),
        (LocalTimeError::Skipped { .. }, Some(readings)) => format!(
            "local time \"{}\" {}; check the gauge clock or write the time with its offset, \
             e.g. one of its two readings {readings}",
            shorten(text),
            e.what()
        ),
        (_, Some(readings)) => format!(
            "local time \"{}\" {}; write the time with its offset, e.g. one of its two readings \
             {readings}",
            shorten(text),
            e.what()
        ),
        (_, None) => format!("timestamp \"{}\" {}", shorten(text), e.what()),
    })
}

/// At most 60 characters of a cell, for messages.
pub(crate) fn shorten(text: &str) -> String {
    if text.chars().count() <= 60 {
        text.to_string()
    } else {
        let head: String = text.chars().take(57).collect();
        format!("{head}...")
    }
}

/// Hand-written ISO 8601 reader: local date-time and, when present, the offset in seconds (also
/// the grammar of the command line's time flags, `cli::when`).
pub(crate) fn parse_iso(text: &str) -> Option<(NaiveDateTime, Option<i32>)> {
    let b = text.as_bytes();
    let digits = |from: usize, len: usize| -> Option<u32> {
        let part = b.get(from..from + len)?;
        let mut n = 0u32;
        for &c in part {
            if !c.is_ascii_digit() {
                return None;
            }
            n = n * 10 + u32::from(c - b'0');
        }
        Some(n)
    };
    let date = parse_date(text.get(..10)?).ok()?;
    if !matches!(b.get(10), Some(b'T' | b't' | b' ')) {
        return None;
    }
    let hour = digits(11, 2)?;
    if b.get(13) != Some(&b':') {
        return None;
    }
    let minute = digits(14, 2)?;
    let mut i = 16;
    let mut second = 0;
    let mut nanos = 0u32;
    if b.get(i) == Some(&b':') {
        second = digits(i + 1, 2)?;
        i += 3;
        if matches!(b.get(i), Some(b'.' | b',')) {
            i += 1;
            let start = i;
            while i < b.len() && b[i].is_ascii_digit() {
                i += 1;
            }
            let n = i - start;
            if n == 0 || n > 9 {
                return None;
            }
            nanos = digits(start, n)? * 10u32.pow(9 - n as u32);
        }
    }
    let time = NaiveTime::from_hms_nano_opt(hour, minute, second, nanos)?;
    let naive = date.and_time(time);
    let mut rest = &b[i..];
    if rest.first() == Some(&b' ') {
        rest = &rest[1..];
        if rest.is_empty() {
            return None;
        }
    }
    let offset = match rest {
        [] => None,
        [b'Z' | b'z'] => Some(0),
        [sign @ (b'+' | b'-'), tail @ ..] => {
            let tail = std::str::from_utf8(tail).ok()?;
            let (h, m) = match tail.len() {
                2 => (tail, "00"),
                4 => (&tail[..2], &tail[2..]),
                5 if tail.as_bytes()[2] == b':' => (&tail[..2], &tail[3..]),
                _ => return None,
            };
            if !h.bytes().chain(m.bytes()).all(|c| c.is_ascii_digit()) {
                return None;
            }
            let (h, m): (i32, i32) = (h.parse().ok()?, m.parse().ok()?);
            if h > 23 || m > 59 {
                return None;
            }
            let s = h * 3600 + m * 60;
            Some(if *sign == b'-' { -s } else { s })
        }
        _ => return None,
    };
    Some((naive, offset))
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono_tz::Europe;

    fn utc(text: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(text)
            .unwrap()
            .with_timezone(&Utc)
    }

    #[test]
    fn iso_shapes() {
        let p = TimestampParser::new(None, Europe::Berlin).unwrap();
        // Winter: CET = UTC+1.
        assert_eq!(
            p.parse("2026-11-30 06:15:00").unwrap(),
            utc("2026-11-30T05:15:00Z")
        );
        assert_eq!(
            p.parse("2026-11-30T06:15").unwrap(),
            utc("2026-11-30T05:15:00Z")
        );
        assert_eq!(
            p.parse("2026-11-30T06:15:00.25Z").unwrap(),
            utc("2026-11-30T06:15:00.25Z")
        );
        assert_eq!(
            p.parse("2026-11-30T06:15:00-06:00").unwrap(),
            utc("2026-11-30T12:15:00Z")
        );
        assert_eq!(
            p.parse("2026-11-30 06:15:00 +0530").unwrap(),
            utc("2026-11-30T00:45:00Z")
        );
        assert_eq!(
            p.parse("2026-11-30T06:15:00+02").unwrap(),
            utc("2026-11-30T04:15:00Z")
        );
        for bad in [
            "2026-11-30",
            "30.11.2026 06:15",
            "2026-11-31 06:15",
            "2026-11-30 25:00",
            "2026-11-30 06:15:00 CET",
            "2026-11-30T06:15:00+2",
            "2026-11-30 06:15:00.",
            "",
        ] {
            assert!(p.parse(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn dst_local_times_are_rejected_not_guessed() {
        // IANA tz database, Europe/Berlin: 2026-03-29 02:00 -> 03:00, 2026-10-25 03:00 -> 02:00.
        let p = TimestampParser::new(None, Europe::Berlin).unwrap();
        let gap = p.parse("2026-03-29 02:30:00").unwrap_err();
        assert!(gap.contains("does not exist in Europe/Berlin"), "{gap}");
        assert!(
            gap.contains("2026-03-29T02:30:00+01:00 (that is 03:30 CEST)"),
            "{gap}"
        );
        assert!(
            gap.contains("2026-03-29T02:30:00+02:00 (that is 01:30 CET)"),
            "{gap}"
        );
        let twice = p.parse("2026-10-25 02:30:00").unwrap_err();
        assert!(twice.contains("occurs twice in Europe/Berlin"), "{twice}");
        assert!(
            twice.contains("2026-10-25T02:30:00+02:00 (CEST, the first)"),
            "{twice}"
        );
        assert!(
            twice.contains("2026-10-25T02:30:00+01:00 (CET, the second)"),
            "{twice}"
        );

        // With an explicit offset both passes are fine and an hour apart.
        let first = p.parse("2026-10-25T02:30:00+02:00").unwrap();
        let second = p.parse("2026-10-25T02:30:00+01:00").unwrap();
        assert_eq!(second - first, chrono::Duration::hours(1));
        // Just outside the gap and the repeated hour.
        assert_eq!(
            p.parse("2026-03-29 03:00:00").unwrap(),
            utc("2026-03-29T01:00:00Z")
        );
        assert_eq!(
            p.parse("2026-10-25 03:00:00").unwrap(),
            utc("2026-10-25T02:00:00Z")
        );
    }

    #[test]
    fn custom_formats() {
        let p = TimestampParser::new(Some("%d.%m.%Y %H:%M:%S"), Europe::Berlin).unwrap();
        assert_eq!(
            p.parse("30.11.2026 06:15:00").unwrap(),
            utc("2026-11-30T05:15:00Z")
        );
        assert!(p.parse("2026-11-30 06:15:00").is_err());
        assert!(p
            .parse("25.10.2026 02:30:00")
            .unwrap_err()
            .contains("occurs twice"));
        let p = TimestampParser::new(Some("%Y/%m/%d %H:%M:%S %z"), Europe::Berlin).unwrap();
        assert_eq!(
            p.parse("2026/11/30 06:15:00 +0000").unwrap(),
            utc("2026-11-30T06:15:00Z")
        );
        assert!(TimestampParser::new(Some("%Q"), Europe::Berlin).is_err());
        // Extreme years are refused before any zone arithmetic.
        let p = TimestampParser::new(Some("%Y-%m-%d %H:%M"), Europe::Berlin).unwrap();
        assert!(p
            .parse("+262000-01-01 00:00")
            .unwrap_err()
            .contains("outside"));
        assert!(p
            .parse("-262000-01-01 00:00")
            .unwrap_err()
            .contains("outside"));
    }
}
