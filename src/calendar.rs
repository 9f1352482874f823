//! The plant calendar: production days, shifts, ISO weeks and months in the plant's time zone,
//! turned into half-open UTC intervals.
//!
//! Rules (all computed on local wall-clock time in the plant's IANA zone, through the tz
//! database that `chrono-tz` compiles in):
//!
//! - Production day `D` starts at `D` + `production_day_start` local time and ends when day
//!   `D + 1` starts. With a 06:00 start, 2026-11-30 runs from 2026-11-30 06:00 to 2026-12-01
//!   06:00 local. Across a DST change a production day is 23 or 25 hours long.
//! - Shift `k` of day `D` starts at `D` + `production_day_start` + (its offset from the day
//!   start) and ends at the next shift's start; the last shift ends when the next production day
//!   starts. So a night shift 22:00-06:00 belongs to the production day it started in.
//! - An ISO week `2026-W48` is the production days Monday 2026-11-23 to Sunday 2026-11-29; a
//!   month `2026-11` is the production days 2026-11-01 to 2026-11-30; a range
//!   `2026-11-01..2026-11-15` is the production days from the first to the last, both included.
//! - Local times that do not exist (spring forward) or occur twice (fall back) only matter for
//!   period boundaries here. A boundary at a local time is the earliest instant whose local time
//!   is at or after it: inside a gap that is the end of the gap, in a repeated hour it is the
//!   first occurrence. This rule is monotone, so consecutive periods always tile time without
//!   gaps or overlaps, and [`PlantCalendar::production_day`] and [`PlantCalendar::shift_of`] are
//!   defined from the bounds, never from a separate wall-clock rule.
//!   (Measurement timestamps without a zone that fall in a gap or a repeated hour are a different
//!   matter: `ingest` rejects them rather than guess.)
//!
//! Start reading at [`PlantCalendar::period_bounds`].

use chrono::offset::LocalResult;
use chrono::{
    DateTime, Datelike, Duration, FixedOffset, NaiveDate, NaiveDateTime, NaiveTime, TimeZone, Utc,
};
use chrono_tz::Tz;

use crate::config::{offset_in_day, Config, Shift};
use crate::model::{Period, PeriodKind};
use crate::{Error, Result};

/// The name of the single shift of a plant that configures no shifts (see
/// [`PlantCalendar::shift_of`]).
pub const WHOLE_DAY_SHIFT: &str = "day";

/// Production days, shifts, weeks and months of one plant.
#[derive(Debug, Clone)]
pub struct PlantCalendar {
    time_zone: Tz,
    day_start: NaiveTime,
    /// Sorted by position in the production day; the first starts at `day_start`.
    shifts: Vec<Shift>,
    /// Seconds from the day start, one per shift.
    shift_offsets: Vec<i64>,
}

/// The shift boundaries of one production day, for fast repeated look-ups (see
/// [`PlantCalendar::shift_table`]).
#[derive(Debug, Clone)]
pub struct ShiftTable {
    /// The production day.
    pub day: NaiveDate,
    /// Start instant of each shift, in shift order (the first is the day start).
    pub starts: Vec<DateTime<Utc>>,
    /// Start of the next production day.
    pub end: DateTime<Utc>,
}

impl ShiftTable {
    /// The index of the shift containing `ts`, or `None` when `ts` is outside this day.
    pub fn find(&self, ts: DateTime<Utc>) -> Option<usize> {
        if ts < self.starts[0] || ts >= self.end {
            return None;
        }
        Some(self.starts.partition_point(|s| *s <= ts) - 1)
    }
}

impl PlantCalendar {
    /// The calendar of the configured plant.
    pub fn new(config: &Config) -> PlantCalendar {
        PlantCalendar::from_parts(
            config.plant.time_zone,
            config.plant.day_start,
            &config.shifts,
        )
    }

    /// A calendar from its parts. Shifts are sorted by their position in the production day; if
    /// none starts at `day_start`, the time from the day start to the first shift belongs to the
    /// last shift of the previous day's order (the configuration refuses that case, see
    /// `config`), so prefer [`PlantCalendar::new`].
    pub fn from_parts(time_zone: Tz, day_start: NaiveTime, shifts: &[Shift]) -> PlantCalendar {
        let mut shifts: Vec<Shift> = shifts.to_vec();
        shifts.sort_by_key(|s| offset_in_day(s.start, day_start));
        if shifts.is_empty() {
            shifts.push(Shift {
                name: WHOLE_DAY_SHIFT.to_string(),
                start: day_start,
            });
        } else if shifts[0].start != day_start {
            // Keep the invariant "first shift starts at the day start": the last shift
            // (which runs over the day start) owns the stretch until the first start.
            let last = shifts.last().cloned().expect("non-empty");
            shifts.insert(
                0,
                Shift {
                    name: last.name,
                    start: day_start,
                },
            );
        }
        let shift_offsets = shifts
            .iter()
            .map(|s| offset_in_day(s.start, day_start))
            .collect();
        PlantCalendar {
            time_zone,
            day_start,
            shifts,
            shift_offsets,
        }
    }

    /// The plant's time zone.
    pub fn time_zone(&self) -> Tz {
        self.time_zone
    }

    /// The shifts in order of their start within the production day.
    pub fn shifts(&self) -> &[Shift] {
        &self.shifts
    }

    /// The earliest instant whose local time in the plant zone is at or after `local`
    /// (the boundary rule of the module docs).
    pub fn boundary(&self, local: NaiveDateTime) -> DateTime<Utc> {
        match self.time_zone.from_local_datetime(&local) {
            LocalResult::Single(t) => t.with_timezone(&Utc),
            LocalResult::Ambiguous(a, b) => a.with_timezone(&Utc).min(b.with_timezone(&Utc)),
            LocalResult::None => {
                // Inside a gap: binary search the first instant at or after `local` in local
                // time. Offsets stay within +-26 h, so the bracket holds.
                let local_of = |u: DateTime<Utc>| u.with_timezone(&self.time_zone).naive_local();
                let mut lo = local.and_utc() - Duration::hours(26);
                let mut hi = local.and_utc() + Duration::hours(26);
                while hi - lo > Duration::seconds(1) {
                    let mid = lo + (hi - lo) / 2;
                    if local_of(mid) >= local {
                        hi = mid;
                    } else {
                        lo = mid;
                    }
                }
                // Transitions are on whole seconds; step back onto one if `hi` overshoots.
                let candidate = hi - Duration::nanoseconds(hi.timestamp_subsec_nanos() as i64);
                if local_of(candidate) >= local {
                    candidate
                } else {
                    hi
                }
            }
        }
    }

    /// The instant production day `day` starts.
    pub fn day_start_utc(&self, day: NaiveDate) -> DateTime<Utc> {
        self.boundary(day.and_time(self.day_start))
    }

    /// The production day containing `ts`.
    pub fn production_day(&self, ts: DateTime<Utc>) -> NaiveDate {
        let local = ts.with_timezone(&self.time_zone).naive_local();
        let mut day = if local.time() >= self.day_start {
            local.date()
        } else {
            local.date().pred_opt().unwrap_or(local.date())
        };
        // Settle on the day whose bounds contain ts (differs from the wall-clock guess only in
        // a repeated hour around the day start).
        for _ in 0..3 {
            if ts < self.day_start_utc(day) {
                day = day.pred_opt().unwrap_or(day);
            } else if ts >= self.day_start_utc(day.succ_opt().unwrap_or(day)) {
                day = day.succ_opt().unwrap_or(day);
            } else {
                break;
            }
        }
        day
    }

    /// The start instants of every shift of `day` and the end of the day.
    pub fn shift_table(&self, day: NaiveDate) -> ShiftTable {
        let base = day.and_time(self.day_start);
        let starts = self
            .shift_offsets
            .iter()
            .map(|offset| self.boundary(base + Duration::seconds(*offset)))
            .collect();
        ShiftTable {
            day,
            starts,
            end: self.day_start_utc(day.succ_opt().unwrap_or(day)),
        }
    }

    /// The production day and index into [`PlantCalendar::shifts`] of the shift containing `ts`.
    pub fn shift_index(&self, ts: DateTime<Utc>) -> (NaiveDate, usize) {
        let day = self.production_day(ts);
        let table = self.shift_table(day);
        (day, table.find(ts).unwrap_or(0))
    }

    /// The production day and name of the shift containing `ts`. A plant without configured
    /// shifts has one shift per day, called [`WHOLE_DAY_SHIFT`].
    pub fn shift_of(&self, ts: DateTime<Utc>) -> (NaiveDate, String) {
        let (day, idx) = self.shift_index(ts);
        (day, self.shifts[idx].name.clone())
    }

    /// The bounds `[start, end)` of `period` in this calendar, recomputed from its label (so a
    /// period read back from storage gets this configuration's bounds). A label this calendar
    /// cannot read (a shift that is no longer configured, a hand-made label) or of another kind
    /// keeps the period's own `start` and `end`.
    pub fn period_bounds(&self, period: &Period) -> (DateTime<Utc>, DateTime<Utc>) {
        match self.parse_period(&period.label) {
            Ok(parsed) if parsed.kind == period.kind => (parsed.start, parsed.end),
            _ => (period.start, period.end),
        }
    }

    /// Production day `day`.
    pub fn day(&self, day: NaiveDate) -> Period {
        Period {
            kind: PeriodKind::Day,
            label: day.format("%Y-%m-%d").to_string(),
            start: self.day_start_utc(day),
            end: self.day_start_utc(day.succ_opt().unwrap_or(day)),
        }
    }

    /// Shift number `idx` (in [`PlantCalendar::shifts`] order) of production day `day`.
    pub fn shift_period(&self, day: NaiveDate, idx: usize) -> Period {
        let table = self.shift_table(day);
        let idx = idx.min(self.shifts.len() - 1);
        let end = table.starts.get(idx + 1).copied().unwrap_or(table.end);
        Period {
            kind: PeriodKind::Shift,
            label: format!("{}/{}", day.format("%Y-%m-%d"), self.shifts[idx].name),
            start: table.starts[idx],
            end,
        }
    }

    /// The shift called `name` on production day `day`.
    pub fn shift(&self, day: NaiveDate, name: &str) -> Result<Period> {
        let idx = self
            .shifts
            .iter()
            .position(|s| s.name == name)
            .ok_or_else(|| {
                let names: Vec<&str> = self.shifts.iter().map(|s| s.name.as_str()).collect();
                Error::Usage(format!(
                    "shift \"{name}\" is not configured (shifts: {})",
                    names.join(", ")
                ))
            })?;
        Ok(self.shift_period(day, idx))
    }

    /// ISO 8601 week `week` of ISO year `year` (Monday to Sunday production days).
    pub fn week(&self, year: i32, week: u32) -> Result<Period> {
        let monday =
            NaiveDate::from_isoywd_opt(year, week, chrono::Weekday::Mon).ok_or_else(|| {
                Error::Usage(format!(
                    "{year}-W{week:02} is not an ISO week (weeks run 01 to 52 or 53)"
                ))
            })?;
        Ok(Period {
            kind: PeriodKind::Week,
            label: format!("{year:04}-W{week:02}"),
            start: self.day_start_utc(monday),
            end: self.day_start_utc(monday + Duration::days(7)),
        })
    }

    /// Calendar month `month` of `year` (its production days).
    pub fn month(&self, year: i32, month: u32) -> Result<Period> {
        let first = NaiveDate::from_ymd_opt(year, month, 1)
            .ok_or_else(|| Error::Usage(format!("{year}-{month:02} is not a month")))?;
        let next = if month == 12 {
            NaiveDate::from_ymd_opt(year + 1, 1, 1)
        } else {
            NaiveDate::from_ymd_opt(year, month + 1, 1)
        }
        .ok_or_else(|| Error::Usage(format!("{year}-{month:02} is out of range")))?;
        Ok(Period {
            kind: PeriodKind::Month,
            label: format!("{year:04}-{month:02}"),
            start: self.day_start_utc(first),
            end: self.day_start_utc(next),
        })
    }

    /// Production days `from` to `to`, both included.
    pub fn range(&self, from: NaiveDate, to: NaiveDate) -> Result<Period> {
        if to < from {
            return Err(Error::Usage(format!(
                "range {}..{}: the last day is before the first",
                from.format("%Y-%m-%d"),
                to.format("%Y-%m-%d")
            )));
        }
        Ok(Period {
            kind: PeriodKind::Range,
            label: format!("{}..{}", from.format("%Y-%m-%d"), to.format("%Y-%m-%d")),
            start: self.day_start_utc(from),
            end: self.day_start_utc(to.succ_opt().unwrap_or(to)),
        })
    }

    /// The period of `kind` containing `ts` (a range has no natural container: refused).
    pub fn period_containing(&self, kind: PeriodKind, ts: DateTime<Utc>) -> Result<Period> {
        match kind {
            PeriodKind::Shift => {
                let (day, idx) = self.shift_index(ts);
                Ok(self.shift_period(day, idx))
            }
            PeriodKind::Day => Ok(self.day(self.production_day(ts))),
            PeriodKind::Week => {
                let week = self.production_day(ts).iso_week();
                self.week(week.year(), week.week())
            }
            PeriodKind::Month => {
                let day = self.production_day(ts);
                self.month(day.year(), day.month())
            }
            PeriodKind::Range => Err(Error::Usage(
                "a range period is given by its days, it has no containing period".to_string(),
            )),
        }
    }

    /// Parses `2026-11-30`, `2026-11-30/night`, `2026-W48`, `2026-11` or
    /// `2026-11-01..2026-11-15` and computes the bounds.
    pub fn parse_period(&self, label: &str) -> Result<Period> {
        let text = label.trim();
        let bad = |why: &str| {
            Error::Usage(format!(
                "period \"{label}\": {why} (write a day 2026-11-30, a shift 2026-11-30/night, a week 2026-W48, a month 2026-11 or a range 2026-11-01..2026-11-15)"
            ))
        };
        if let Some((from, to)) = text.split_once("..") {
            let from = parse_date(from.trim()).map_err(|_| bad("the first day is not a date"))?;
            let to = parse_date(to.trim()).map_err(|_| bad("the last day is not a date"))?;
            return self.range(from, to);
        }
        if let Some((day, shift)) = text.split_once('/') {
            let day = parse_date(day.trim()).map_err(|_| bad("the day is not a date"))?;
            return self.shift(day, shift.trim());
        }
        if let Some((year, week)) = text.split_once("-W").or_else(|| text.split_once("-w")) {
            let year: i32 = parse_digits(year, 4).ok_or_else(|| bad("the year is not a number"))?;
            let week: u32 = parse_digits(week, 2).ok_or_else(|| bad("the week is not a number"))?;
            return self.week(year, week);
        }
        if let Ok(day) = parse_date(text) {
            return Ok(self.day(day));
        }
        if let Some((year, month)) = text.split_once('-') {
            if let (Some(year), Some(month)) =
                (parse_digits::<i32>(year, 4), parse_digits::<u32>(month, 2))
            {
                return self.month(year, month);
            }
        }
        Err(bad("not a period label"))
    }

    /// The period of the same kind right after `period`.
    pub fn next_period(&self, period: &Period) -> Period {
        self.step(period, true)
    }

    /// The period of the same kind right before `period`.
    pub fn previous_period(&self, period: &Period) -> Period {
        self.step(period, false)
    }

    fn step(&self, period: &Period, forward: bool) -> Period {
        // Work from the bounds so a hand-built period steps correctly too.
        let probe = if forward {
            period.end
        } else {
            period.start - Duration::nanoseconds(1)
        };
        match period.kind {
            PeriodKind::Range => {
                let first = self.production_day(period.start);
                let last = self.production_day(period.end - Duration::nanoseconds(1));
                let len = (last - first).num_days() + 1;
                let (from, to) = if forward {
                    (last + Duration::days(1), last + Duration::days(len))
                } else {
                    (first - Duration::days(len), first - Duration::days(1))
                };
                self.range(from, to).expect("from <= to")
            }
            kind => self
                .period_containing(kind, probe)
                .expect("only range has no container"),
        }
    }
}

/// Why a text is not a date ([`parse_date`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DateError {
    /// Not shaped `YYYY-MM-DD` (four digits, two, two, joined by `-`).
    Shape,
    /// Shaped like one, but not a day of the calendar (`2026-02-30`).
    NoSuchDate,
}

/// A date written `YYYY-MM-DD`, exactly (no spaces, no sign, two-digit month and day): the one
/// date reader of the command line's day flags, the period labels and the import's ISO
/// timestamps.
pub fn parse_date(text: &str) -> std::result::Result<NaiveDate, DateError> {
    let b = text.as_bytes();
    let shaped = b.len() == 10
        && b.iter().enumerate().all(|(i, c)| match i {
            4 | 7 => *c == b'-',
            _ => c.is_ascii_digit(),
        });
    if !shaped {
        return Err(DateError::Shape);
    }
    let number = |from: usize, to: usize| {
        b[from..to]
            .iter()
            .fold(0u32, |n, c| n * 10 + u32::from(c - b'0'))
    };
    NaiveDate::from_ymd_opt(number(0, 4) as i32, number(5, 7), number(8, 10))
        .ok_or(DateError::NoSuchDate)
}

/// The years a wall-clock time may have to be placed ([`local_to_utc`]): far from the ends of
/// chrono's range, where zone arithmetic could overflow, and wide of any plant's data.
pub const PLACEABLE_YEARS: std::ops::RangeInclusive<i32> = 1800..=2400;

/// Why a wall-clock time has no one instant ([`local_to_utc`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LocalTimeError {
    /// Its year lies outside [`PLACEABLE_YEARS`].
    Year(i32),
    /// The offset written with it (seconds east of UTC) is not a UTC offset.
    Offset(i32),
    /// It occurs twice in the zone (the clocks go back): its two readings, earlier first.
    Repeated {
        /// The plant zone.
        zone: Tz,
        /// The reading before the change (the earlier instant).
        first: DateTime<FixedOffset>,
        /// The reading after the change.
        second: DateTime<FixedOffset>,
    },
    /// It does not exist in the zone (the clocks go forward): read with the offset in force
    /// before the change and with the one after it (`None` where those offsets cannot be found).
    Skipped {
        /// The plant zone.
        zone: Tz,
        /// The instants of the two readings: (offset before, offset after).
        readings: Option<(DateTime<FixedOffset>, DateTime<FixedOffset>)>,
    },
}

impl LocalTimeError {
    /// What is wrong, without the time itself: "occurs twice in Europe/Berlin (the clocks go
    /// back)", "does not exist in ...", "has the year 3000, outside 1800 to 2400".
    pub fn what(&self) -> String {
        match self {
            LocalTimeError::Year(y) => format!(
                "has the year {y}, outside {} to {}",
                PLACEABLE_YEARS.start(),
                PLACEABLE_YEARS.end()
            ),
            LocalTimeError::Offset(s) => format!("has the offset {s} s, not a UTC offset"),
            LocalTimeError::Repeated { zone, .. } => {
                format!("occurs twice in {} (the clocks go back)", zone.name())
            }
            LocalTimeError::Skipped { zone, .. } => {
                format!("does not exist in {} (the clocks go forward)", zone.name())
            }
        }
    }

    /// The two readings of a time at a daylight-saving change, in words, each as RFC 3339 with
    /// its offset: "2026-10-25T02:30:00+02:00 (CEST, the first) and 2026-10-25T02:30:00+01:00
    /// (CET, the second)", or for a skipped time "2026-03-29T02:30:00+01:00 (that is 03:30
    /// CEST) with the offset before the change and 2026-03-29T02:30:00+02:00 (that is 01:30 CET)
    /// with the offset after it". `None` for the other errors.
    pub fn readings(&self) -> Option<String> {
        let rfc = |t: &DateTime<FixedOffset>| t.format("%Y-%m-%dT%H:%M:%S%:z").to_string();
        match self {
            LocalTimeError::Repeated {
                zone,
                first,
                second,
            } => Some(format!(
                "{} ({}, the first) and {} ({}, the second)",
                rfc(first),
                first.with_timezone(zone).format("%Z"),
                rfc(second),
                second.with_timezone(zone).format("%Z"),
            )),
            LocalTimeError::Skipped {
                zone,
                readings: Some((before, after)),
            } => {
                let read = |t: &DateTime<FixedOffset>| {
                    let there = t.with_timezone(zone);
                    format!(
                        "{} (that is {} {})",
                        rfc(t),
                        there.format("%H:%M"),
                        there.format("%Z")
                    )
                };
                Some(format!(
                    "{} with the offset before the change and {} with the offset after it",
                    read(before),
                    read(after)
                ))
            }
            _ => None,
        }
    }
}

/// The instant of the wall-clock time `local`: with `offset_s` (seconds east of UTC) as
/// written, without one in the plant zone `zone`. A plant-local time that does not exist (the
/// clocks go forward) or occurs twice (they go back) is an error with both its readings, never
/// guessed: an hour booked on the wrong side of a change would bias exactly the shift
/// comparisons this tool makes. The one conversion of the command line's instants and the
/// import's timestamps.
pub fn local_to_utc(
    local: NaiveDateTime,
    offset_s: Option<i32>,
    zone: Tz,
) -> std::result::Result<DateTime<Utc>, LocalTimeError> {
    use chrono::Offset;
    if !PLACEABLE_YEARS.contains(&local.year()) {
        return Err(LocalTimeError::Year(local.year()));
    }
    if let Some(offset_s) = offset_s {
        return chrono::FixedOffset::east_opt(offset_s)
            .and_then(|o| o.from_local_datetime(&local).single())
            .map(|t| t.with_timezone(&Utc))
            .ok_or(LocalTimeError::Offset(offset_s));
    }
    match zone.from_local_datetime(&local) {
        LocalResult::Single(t) => Ok(t.with_timezone(&Utc)),
        LocalResult::Ambiguous(a, b) => {
            let (a, b) = (a.fixed_offset(), b.fixed_offset());
            let (first, second) = if a <= b { (a, b) } else { (b, a) };
            Err(LocalTimeError::Repeated {
                zone,
                first,
                second,
            })
        }
        LocalResult::None => {
            // The offsets in force a day before and a day after: the two readings of a
            // wall-clock time the change skipped.
            let at = |d: Duration| {
                local
                    .checked_add_signed(d)
                    .map(|n| zone.offset_from_utc_datetime(&n).fix())
            };
            let read = |o: FixedOffset| o.from_local_datetime(&local).single();
            let readings = match (at(Duration::days(-1)), at(Duration::days(1))) {
                (Some(before), Some(after)) if before != after => read(before).zip(read(after)),
                _ => None,
            };
            Err(LocalTimeError::Skipped { zone, readings })
        }
    }
}

fn parse_digits<T: std::str::FromStr>(text: &str, len: usize) -> Option<T> {
    let text = text.trim();
    if text.len() != len || !text.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    text.parse().ok()
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono_tz::{America, Europe};

    #[test]
    fn dates_are_read_in_one_shape() {
        assert_eq!(
            parse_date("2026-11-30"),
            Ok(NaiveDate::from_ymd_opt(2026, 11, 30).unwrap())
        );
        assert_eq!(
            parse_date("2024-02-29"),
            Ok(NaiveDate::from_ymd_opt(2024, 2, 29).unwrap())
        );
        // 2026 is not a leap year (Gregorian rule).
        assert_eq!(parse_date("2026-02-29"), Err(DateError::NoSuchDate));
        assert_eq!(parse_date("2026-13-01"), Err(DateError::NoSuchDate));
        for bad in [
            "2026-1-05",
            "2026-11-5",
            " 2026-11-30",
            "2026/11/30",
            "+026-11-30",
            "2026-11-30T06",
            "2026-11",
            "",
        ] {
            assert_eq!(parse_date(bad), Err(DateError::Shape), "{bad:?}");
        }
    }

    #[test]
    fn local_times_at_a_change_are_refused_with_both_readings() {
        // IANA tz database, Europe/Berlin 2026: 02:00 -> 03:00 on 03-29, 03:00 -> 02:00 on 10-25.
        let local = |text: &str| NaiveDateTime::parse_from_str(text, "%Y-%m-%d %H:%M").unwrap();
        let utc = |text: &str| {
            DateTime::parse_from_rfc3339(text)
                .unwrap()
                .with_timezone(&Utc)
        };
        assert_eq!(
            local_to_utc(local("2026-11-30 14:05"), None, Europe::Berlin),
            Ok(utc("2026-11-30T13:05:00Z"))
        );
        assert_eq!(
            local_to_utc(local("2026-11-30 14:05"), Some(-6 * 3600), Europe::Berlin),
            Ok(utc("2026-11-30T20:05:00Z"))
        );
        let twice = local_to_utc(local("2026-10-25 02:30"), None, Europe::Berlin).unwrap_err();
        assert_eq!(
            twice.what(),
            "occurs twice in Europe/Berlin (the clocks go back)"
        );
        assert_eq!(
            twice.readings().unwrap(),
            "2026-10-25T02:30:00+02:00 (CEST, the first) and 2026-10-25T02:30:00+01:00 (CET, \
             the second)"
        );
        let gap = local_to_utc(local("2026-03-29 02:30"), None, Europe::Berlin).unwrap_err();
        assert_eq!(
            gap.what(),
            "does not exist in Europe/Berlin (the clocks go forward)"
        );
        assert_eq!(
            gap.readings().unwrap(),
            "2026-03-29T02:30:00+01:00 (that is 03:30 CEST) with the offset before the change \
             and 2026-03-29T02:30:00+02:00 (that is 01:30 CET) with the offset after it"
        );
        // America/Chicago, 2026-03-08 02:00 CST -> 03:00 CDT (US rule: second Sunday of March).
        let gap = local_to_utc(local("2026-03-08 02:15"), None, America::Chicago).unwrap_err();
        assert!(gap
            .readings()
            .unwrap()
            .starts_with("2026-03-08T02:15:00-06:00 (that is 03:15 CDT)"));
        // The years a time may have, with or without an offset.
        assert_eq!(
            local_to_utc(local("2401-01-01 00:00"), None, Europe::Berlin),
            Err(LocalTimeError::Year(2401))
        );
        assert_eq!(
            local_to_utc(local("1799-12-31 23:59"), Some(0), Europe::Berlin),
            Err(LocalTimeError::Year(1799))
        );
        assert!(local_to_utc(local("2400-12-31 23:59"), Some(0), Europe::Berlin).is_ok());
        assert_eq!(
            LocalTimeError::Year(2401).what(),
            "has the year 2401, outside 1800 to 2400"
        );
    }

    fn shifts() -> Vec<Shift> {
        [("early", 6), ("late", 14), ("night", 22)]
            .iter()
            .map(|(name, h)| Shift {
                name: name.to_string(),
                start: NaiveTime::from_hms_opt(*h, 0, 0).unwrap(),
            })
            .collect()
    }

    fn berlin() -> PlantCalendar {
        PlantCalendar::from_parts(
            Europe::Berlin,
            NaiveTime::from_hms_opt(6, 0, 0).unwrap(),
            &shifts(),
        )
    }

    fn utc(text: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(text)
            .unwrap()
            .with_timezone(&Utc)
    }

    fn date(text: &str) -> NaiveDate {
        NaiveDate::parse_from_str(text, "%Y-%m-%d").unwrap()
    }

    // Transition times from the IANA tz database (file `europe`, rule EU: last Sunday of March
    // and of October at 01:00 UTC; file `northamerica`, rule US: second Sunday of March and first
    // Sunday of November at 02:00 local). 2026: Berlin 29 March and 25 October; Chicago 8 March
    // and 1 November.

    #[test]
    fn ordinary_day_and_night_shift_in_berlin() {
        let cal = berlin();
        // Winter, CET = UTC+1: 2026-11-30 06:00 local = 05:00 UTC.
        let day = cal.day(date("2026-11-30"));
        assert_eq!(day.start, utc("2026-11-30T05:00:00Z"));
        assert_eq!(day.end, utc("2026-12-01T05:00:00Z"));
        // 02:00 local on 1 December is the night shift of 30 November.
        let (d, shift) = cal.shift_of(utc("2026-12-01T01:00:00Z"));
        assert_eq!((d, shift.as_str()), (date("2026-11-30"), "night"));
        let night = cal.parse_period("2026-11-30/night").unwrap();
        assert_eq!(night.start, utc("2026-11-30T21:00:00Z"));
        assert_eq!(night.end, utc("2026-12-01T05:00:00Z"));
        // 05:59:59 local still belongs to the day before; 06:00 local starts the new one.
        assert_eq!(
            cal.production_day(utc("2026-12-01T04:59:59Z")),
            date("2026-11-30")
        );
        assert_eq!(
            cal.production_day(utc("2026-12-01T05:00:00Z")),
            date("2026-12-01")
        );
    }

    #[test]
    fn spring_forward_day_is_23_hours_in_berlin() {
        let cal = berlin();
        // 2026-03-29 02:00 CET -> 03:00 CEST (01:00 UTC). Production day 28 March runs from
        // 28 March 06:00 CET (05:00 UTC) to 29 March 06:00 CEST (04:00 UTC): 23 hours.
        let day = cal.day(date("2026-03-28"));
        assert_eq!(day.start, utc("2026-03-28T05:00:00Z"));
        assert_eq!(day.end, utc("2026-03-29T04:00:00Z"));
        assert_eq!(day.end - day.start, Duration::hours(23));
        // Its night shift 22:00 CET to 06:00 CEST lasts 7 hours.
        let night = cal.parse_period("2026-03-28/night").unwrap();
        assert_eq!(night.start, utc("2026-03-28T21:00:00Z"));
        assert_eq!(night.end - night.start, Duration::hours(7));
        // 29 March is an ordinary 24 h day in CEST.
        let next = cal.next_period(&day);
        assert_eq!(next.label, "2026-03-29");
        assert_eq!(next.end - next.start, Duration::hours(24));
    }

    #[test]
    fn fall_back_day_is_25_hours_in_berlin() {
        let cal = berlin();
        // 2026-10-25 03:00 CEST -> 02:00 CET (01:00 UTC). Production day 24 October runs from
        // 24 October 06:00 CEST (04:00 UTC) to 25 October 06:00 CET (05:00 UTC): 25 hours.
        let day = cal.parse_period("2026-10-24").unwrap();
        assert_eq!(day.start, utc("2026-10-24T04:00:00Z"));
        assert_eq!(day.end, utc("2026-10-25T05:00:00Z"));
        assert_eq!(day.end - day.start, Duration::hours(25));
        let night = cal.shift(date("2026-10-24"), "night").unwrap();
        assert_eq!(night.end - night.start, Duration::hours(9));
        // Both passes through 02:30 local belong to the same night shift.
        assert_eq!(cal.shift_of(utc("2026-10-25T00:30:00Z")).1, "night");
        assert_eq!(cal.shift_of(utc("2026-10-25T01:30:00Z")).1, "night");
        assert_eq!(
            cal.production_day(utc("2026-10-25T01:30:00Z")),
            date("2026-10-24")
        );
    }

    #[test]
    fn boundary_inside_gap_and_repeated_hour() {
        // Day start at 02:30 local: nonexistent on 29 March, repeated on 25 October 2026.
        let cal = PlantCalendar::from_parts(
            Europe::Berlin,
            NaiveTime::from_hms_opt(2, 30, 0).unwrap(),
            &[],
        );
        // In the gap: the end of the gap, 03:00 CEST = 01:00 UTC.
        assert_eq!(
            cal.day_start_utc(date("2026-03-29")),
            utc("2026-03-29T01:00:00Z")
        );
        // Repeated: the first occurrence, 02:30 CEST = 00:30 UTC.
        assert_eq!(
            cal.day_start_utc(date("2026-10-25")),
            utc("2026-10-25T00:30:00Z")
        );
        // The second 02:30 (CET, 01:30 UTC) is inside day 25 October, not the start of another.
        assert_eq!(
            cal.production_day(utc("2026-10-25T01:30:00Z")),
            date("2026-10-25")
        );
        assert_eq!(
            cal.production_day(utc("2026-10-25T00:29:59Z")),
            date("2026-10-24")
        );
        // Consecutive days tile time.
        let mut period = cal.day(date("2026-03-27"));
        for _ in 0..250 {
            let next = cal.next_period(&period);
            assert_eq!(period.end, next.start, "{}", period.label);
            assert!(next.end > next.start);
            period = next;
        }
    }

    #[test]
    fn chicago_dst_days() {
        let cal = PlantCalendar::from_parts(
            America::Chicago,
            NaiveTime::from_hms_opt(6, 0, 0).unwrap(),
            &shifts(),
        );
        // 2026-03-08 02:00 CST -> 03:00 CDT. Day 7 March: 06:00 CST (12:00 UTC) to 8 March
        // 06:00 CDT (11:00 UTC).
        let day = cal.day(date("2026-03-07"));
        assert_eq!(day.start, utc("2026-03-07T12:00:00Z"));
        assert_eq!(day.end, utc("2026-03-08T11:00:00Z"));
        // 2026-11-01 02:00 CDT -> 01:00 CST: day 31 October lasts 25 hours.
        let day = cal.day(date("2026-10-31"));
        assert_eq!(day.start, utc("2026-10-31T11:00:00Z"));
        assert_eq!(day.end, utc("2026-11-01T12:00:00Z"));
        assert_eq!(cal.shift_of(utc("2026-11-01T06:30:00Z")).1, "night");
        assert_eq!(cal.shift_of(utc("2026-11-01T07:30:00Z")).1, "night");
    }

    #[test]
    fn week_month_and_range_labels() {
        let cal = berlin();
        let week = cal.parse_period("2026-W48").unwrap();
        assert_eq!(week.kind, PeriodKind::Week);
        // ISO 8601: week 48 of 2026 runs Monday 23 November to Sunday 29 November.
        assert_eq!(week.start, cal.day_start_utc(date("2026-11-23")));
        assert_eq!(week.end, cal.day_start_utc(date("2026-11-30")));
        assert_eq!(cal.next_period(&week).label, "2026-W49");
        assert_eq!(
            cal.parse_period("2026-W01")
                .map(|p| cal.previous_period(&p))
                .unwrap()
                .label,
            "2025-W52"
        );
        // 2026 has 53 ISO weeks (it starts on a Thursday).
        assert_eq!(
            cal.parse_period("2026-W53")
                .map(|p| cal.next_period(&p))
                .unwrap()
                .label,
            "2027-W01"
        );
        assert!(cal.parse_period("2025-W53").is_err());

        let month = cal.parse_period("2026-10").unwrap();
        assert_eq!(month.kind, PeriodKind::Month);
        assert_eq!(month.start, utc("2026-10-01T04:00:00Z"));
        assert_eq!(month.end, utc("2026-11-01T05:00:00Z"));
        assert_eq!(cal.next_period(&month).label, "2026-11");
        assert_eq!(
            cal.parse_period("2026-01")
                .map(|p| cal.previous_period(&p))
                .unwrap()
                .label,
            "2025-12"
        );

        let range = cal.parse_period("2026-11-01..2026-11-15").unwrap();
        assert_eq!(range.kind, PeriodKind::Range);
        assert_eq!(range.start, utc("2026-11-01T05:00:00Z"));
        assert_eq!(range.end, utc("2026-11-16T05:00:00Z"));
        assert_eq!(cal.next_period(&range).label, "2026-11-16..2026-11-30");
        assert_eq!(cal.previous_period(&range).label, "2026-10-17..2026-10-31");
        assert_eq!(cal.period_bounds(&range), (range.start, range.end));
        // The same label in a calendar with another day start gets that calendar's bounds.
        let at_seven = PlantCalendar::from_parts(
            Europe::Berlin,
            NaiveTime::from_hms_opt(7, 0, 0).unwrap(),
            &[],
        );
        assert_eq!(
            at_seven.period_bounds(&range).0,
            utc("2026-11-01T06:00:00Z")
        );

        for bad in [
            "2026-13",
            "2026-11-31",
            "yesterday",
            "2026-11-30/swing",
            "2026-11-15..2026-11-01",
            "",
        ] {
            assert!(cal.parse_period(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn shifts_step_across_days() {
        let cal = berlin();
        let night = cal.parse_period("2026-11-30/night").unwrap();
        assert_eq!(cal.next_period(&night).label, "2026-12-01/early");
        assert_eq!(cal.previous_period(&night).label, "2026-11-30/late");
        assert_eq!(
            cal.previous_period(&cal.parse_period("2026-12-01/early").unwrap())
                .label,
            "2026-11-30/night"
        );
        // Shifts tile their day across both DST changes.
        for day in ["2026-03-28", "2026-03-29", "2026-10-24", "2026-10-25"] {
            let d = cal.day(date(day));
            let mut p = cal.shift_period(date(day), 0);
            assert_eq!(p.start, d.start);
            for _ in 0..2 {
                let n = cal.next_period(&p);
                assert_eq!(p.end, n.start);
                p = n;
            }
            assert_eq!(p.end, d.end);
        }
    }

    #[test]
    fn shift_index_agrees_with_bounds_every_ten_minutes() {
        // Over the whole of 2026 the shift found for an instant contains it.
        let cal = berlin();
        let mut ts = utc("2026-01-01T00:00:00Z");
        let end = utc("2027-01-01T00:00:00Z");
        while ts < end {
            let (day, idx) = cal.shift_index(ts);
            let p = cal.shift_period(day, idx);
            assert!(p.contains(ts), "{ts} not in {}", p.label);
            ts += Duration::minutes(10);
        }
    }
}
