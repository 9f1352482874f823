//! Plain domain types shared by every layer: periods (and, in `ingest`, measurements).
//!
//! A [`Period`] is a half-open interval of UTC instants `[start, end)` with a label a quality
//! engineer types: `2026-11-30` (production day), `2026-11-30/night` (shift), `2026-W48` (ISO
//! week of production days), `2026-11` (month of production days) or `2026-11-01..2026-11-15`
//! (a range of production days, both ends included). The bounds always come from
//! [`crate::calendar::PlantCalendar`], which knows the plant's time zone, production-day start and
//! shifts; this module holds no calendar arithmetic of its own.

use chrono::{DateTime, Utc};

use crate::calendar::PlantCalendar;
use crate::Result;

/// The kind of a [`Period`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum PeriodKind {
    /// One shift of one production day.
    Shift,
    /// One production day.
    Day,
    /// One ISO 8601 week (Monday to Sunday) of production days.
    Week,
    /// One calendar month of production days.
    Month,
    /// Any run of whole production days, both ends included.
    Range,
}

impl PeriodKind {
    /// The lowercase name used in configuration files and JSON (`"shift"`, `"day"`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            PeriodKind::Shift => "shift",
            PeriodKind::Day => "day",
            PeriodKind::Week => "week",
            PeriodKind::Month => "month",
            PeriodKind::Range => "range",
        }
    }
}

impl std::fmt::Display for PeriodKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A labelled, half-open interval of time `[start, end)` in UTC.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Period {
    /// Shift, day, week, month or range.
    pub kind: PeriodKind,
    /// Canonical label, e.g. `"2026-11-30/night"`, `"2026-W48"`.
    pub label: String,
    /// First instant inside the period.
    pub start: DateTime<Utc>,
    /// First instant after the period.
    pub end: DateTime<Utc>,
}

impl Period {
    /// Parses a period label (see the module docs) and computes its bounds in the plant's
    /// calendar. The kind is recognised from the label's shape.
    pub fn parse_label(label: &str, calendar: &PlantCalendar) -> Result<Period> {
        calendar.parse_period(label)
    }

    /// The period of the same kind that follows this one (the next shift, day, week or month;
    /// for a range, the equally long run of days right after it).
    pub fn next(&self, calendar: &PlantCalendar) -> Period {
        calendar.next_period(self)
    }

    /// The period of the same kind right before this one.
    pub fn previous(&self, calendar: &PlantCalendar) -> Period {
        calendar.previous_period(self)
    }

    /// Whether `ts` lies inside `[start, end)`.
    pub fn contains(&self, ts: DateTime<Utc>) -> bool {
        self.start <= ts && ts < self.end
    }
}

impl std::fmt::Display for Period {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.label)
    }
}
