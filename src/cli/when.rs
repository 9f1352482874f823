//! The time grammar of every command-line flag, in one place.
//!
//! - An **instant** (`--at`, `--now`, `--since` of the scheduler, `investigate --to`) is written
//!   in the plant's local time as `2026-11-30 14:05` or `2026-11-30T14:05`, optionally with
//!   seconds (`:SS`, and a fraction), or as RFC 3339 with an offset or `Z`
//!   (`2026-11-30T14:05:00+01:00`, `2026-11-30T13:05:00Z`). These are the shapes of the import's
//!   ISO timestamps ([`crate::ingest::timestamp`]), read by the same code and placed by the
//!   same conversion ([`crate::calendar::local_to_utc`], years 1800 to 2400). clap checks the shape
//!   ([`instant`]); the plant's zone, known once the configuration is read, turns it into an
//!   instant ([`When::resolve`]). A plant-local time that does not exist (the clocks go forward)
//!   or occurs twice (they go back) is refused with both readings, never guessed.
//! - A **day** (`--day`, `--since` of `findings`, `--from` and `--to` of `check` and `chart`) is a
//!   production day `YYYY-MM-DD` ([`day`]); a day `--to` is included everywhere.
//!
//! Every error names the flag and the value (clap's `invalid value '...' for '--at <TIME>'`, or
//! the flag and value at the head of the message) and shows the accepted forms.

use chrono::{DateTime, NaiveDate, NaiveDateTime, Utc};
use chrono_tz::Tz;

use crate::calendar::{local_to_utc, parse_date, DateError};
use crate::ingest::timestamp::parse_iso;
use crate::{Error, Result};

/// The accepted forms of an instant, for help texts and messages.
pub const INSTANT_FORMS: &str = "plant-local 2026-11-30 14:05 or 2026-11-30T14:05[:SS], \
or RFC 3339 with an offset or Z (2026-11-30T14:05:00+01:00, 2026-11-30T13:05:00Z)";

/// The accepted form of a day, for help texts and messages.
pub const DAY_FORM: &str = "a production day YYYY-MM-DD, e.g. 2026-11-30";

/// An instant as written on the command line, its shape checked; [`When::resolve`] places it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct When {
    text: String,
    local: NaiveDateTime,
    offset_s: Option<i32>,
}

/// clap value parser of an instant flag: the shape only (the zone comes from the configuration).
pub fn instant(text: &str) -> std::result::Result<When, String> {
    let t = text.trim();
    match parse_iso(t) {
        Some((local, offset_s)) => Ok(When {
            text: t.to_string(),
            local,
            offset_s,
        }),
        None if day(t).is_ok() => Err(format!(
            "a day without a time of day; write an instant: {INSTANT_FORMS}"
        )),
        None => Err(format!("not an instant; write {INSTANT_FORMS}")),
    }
}

impl When {
    /// The text as given.
    pub fn text(&self) -> &str {
        &self.text
    }

    /// The UTC instant: with an offset as written, without one in the plant zone `tz`
    /// ([`crate::calendar::local_to_utc`]). A local time in a daylight-saving gap or overlap is
    /// an error naming `flag`, the value and the two readings.
    pub fn resolve(&self, flag: &str, tz: Tz) -> Result<DateTime<Utc>> {
        local_to_utc(self.local, self.offset_s, tz).map_err(|e| {
            let why = match e.readings() {
                Some(readings) => format!(
                    "the plant-local time {} {}; its two readings are {readings}: give the one \
                     meant with its offset",
                    self.local.format("%Y-%m-%d %H:%M:%S"),
                    e.what()
                ),
                None => format!("the time {}; write {INSTANT_FORMS}", e.what()),
            };
            Error::Usage(format!("{flag} {}: {why}", self.text))
        })
    }
}

/// clap value parser of a day flag: `YYYY-MM-DD`, a date of the calendar
/// ([`crate::calendar::parse_date`]).
pub fn day(text: &str) -> std::result::Result<NaiveDate, String> {
    let t = text.trim();
    parse_date(t).map_err(|e| match e {
        DateError::NoSuchDate => format!("no such date in the calendar; write {DAY_FORM}"),
        DateError::Shape if parse_iso(t).is_some() => {
            format!("a day flag takes the day alone, without a time; write {DAY_FORM}")
        }
        DateError::Shape => format!("not a day; write {DAY_FORM}"),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;
    use chrono_tz::Europe;

    fn at(text: &str, tz: Tz) -> Result<DateTime<Utc>> {
        instant(text).map_err(Error::Usage)?.resolve("--at", tz)
    }

    #[test]
    fn the_accepted_spellings_name_one_instant() {
        // 2026-11-30 14:05 in Berlin is CET (+01:00): 13:05 UTC (tz database).
        let want = Utc.with_ymd_and_hms(2026, 11, 30, 13, 5, 0).unwrap();
        for text in [
            "2026-11-30 14:05",
            "2026-11-30T14:05",
            "2026-11-30T14:05:00",
            "2026-11-30 14:05:00",
            "2026-11-30T14:05:00+01:00",
            "2026-11-30T13:05:00Z",
            " 2026-11-30T15:05:00+02:00 ",
        ] {
            assert_eq!(at(text, Europe::Berlin).unwrap(), want, "{text}");
        }
    }

    #[test]
    fn a_skipped_local_time_is_refused_with_both_readings() {
        // Berlin went from +01:00 to +02:00 at 02:00 on 2026-03-29 (EU summer time: last Sunday
        // of March, 01:00 UTC).
        let err = at("2026-03-29 02:30", Europe::Berlin)
            .unwrap_err()
            .to_string();
        assert!(err.starts_with("--at 2026-03-29 02:30: "), "{err}");
        assert!(err.contains("does not exist in Europe/Berlin"), "{err}");
        assert!(
            err.contains("2026-03-29T02:30:00+01:00 (that is 03:30 CEST)"),
            "{err}"
        );
        assert!(
            err.contains("2026-03-29T02:30:00+02:00 (that is 01:30 CET)"),
            "{err}"
        );
        // Either reading, written with its offset, is accepted.
        assert!(at("2026-03-29T02:30:00+01:00", Europe::Berlin).is_ok());
        // Just outside the gap.
        assert_eq!(
            at("2026-03-29 01:59", Europe::Berlin).unwrap(),
            Utc.with_ymd_and_hms(2026, 3, 29, 0, 59, 0).unwrap()
        );
        assert_eq!(
            at("2026-03-29 03:00", Europe::Berlin).unwrap(),
            Utc.with_ymd_and_hms(2026, 3, 29, 1, 0, 0).unwrap()
        );
    }

    #[test]
    fn a_repeated_local_time_is_refused_with_both_readings() {
        // Berlin went back from +02:00 to +01:00 at 03:00 on 2026-10-25 (last Sunday of October).
        let err = at("2026-10-25T02:30", Europe::Berlin)
            .unwrap_err()
            .to_string();
        assert!(err.contains("occurs twice in Europe/Berlin"), "{err}");
        assert!(
            err.contains("2026-10-25T02:30:00+02:00 (CEST, the first)"),
            "{err}"
        );
        assert!(
            err.contains("2026-10-25T02:30:00+01:00 (CET, the second)"),
            "{err}"
        );
        assert_eq!(
            at("2026-10-25T02:30:00+01:00", Europe::Berlin).unwrap(),
            Utc.with_ymd_and_hms(2026, 10, 25, 1, 30, 0).unwrap()
        );
    }

    #[test]
    fn years_outside_the_placeable_range_are_refused() {
        // The import's range (calendar::PLACEABLE_YEARS) holds for the flags too.
        for text in ["3000-01-01 00:00", "1700-06-01T12:00:00Z"] {
            let err = at(text, Europe::Berlin).unwrap_err().to_string();
            assert!(err.contains("outside 1800 to 2400"), "{err}");
            assert!(err.contains("RFC 3339 with an offset or Z"), "{err}");
        }
        assert!(at("2400-12-31 23:00", Europe::Berlin).is_ok());
        assert!(at("1800-01-01T00:00:00Z", Europe::Berlin).is_ok());
    }

    #[test]
    fn shapes_that_are_refused_show_the_forms() {
        for bad in [
            "yesterday",
            "2026-11-30 25:00",
            "30.11.2026 14:05",
            "2026-11-30T14",
        ] {
            let err = instant(bad).unwrap_err();
            assert!(err.contains("RFC 3339 with an offset or Z"), "{bad}: {err}");
        }
        assert!(instant("2026-11-30")
            .unwrap_err()
            .starts_with("a day without a time of day"));
    }

    #[test]
    fn days() {
        assert_eq!(
            day("2026-11-30").unwrap(),
            NaiveDate::from_ymd_opt(2026, 11, 30).unwrap()
        );
        assert!(day("2026-02-30").unwrap_err().contains("no such date"));
        assert!(day("2026-11-30 06:00")
            .unwrap_err()
            .contains("without a time"));
        assert!(day("2026-1-5").unwrap_err().contains("YYYY-MM-DD"));
        assert!(day("2026-11").unwrap_err().contains("YYYY-MM-DD"));
    }
}
