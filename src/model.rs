//! Plain domain types shared by every layer: periods (and, in `ingest`, measurements).
//!
//! A [`Period`] is a half-open interval of UTC instants `[start, end)` with a label a quality
//! engineer types: `2026-11-30` (production day), `2026-11-30/night` (shift), `2026-W48` (ISO
//! week of production days), `2026-11` (month of production days) or `2026-11-01..2026-11-15`
//! (a range of production days, both ends included). The bounds always come from
//! `calendar::PlantCalendar` (`parse_period`, `next_period`, `previous_period`), which knows the
//! plant's time zone, production-day start and shifts; this module holds no calendar arithmetic
//! and imports no other module of samewise.

use chrono::{DateTime, Utc};

/// The kind of a [`Period`]; serialized as its lowercase name ([`PeriodKind::as_str`]).
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize,
)]
#[serde(rename_all = "lowercase")]
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
    /// The kind of a lowercase name (`"shift"`, `"day"`, ...).
    pub fn parse(text: &str) -> Option<PeriodKind> {
        [
            PeriodKind::Shift,
            PeriodKind::Day,
            PeriodKind::Week,
            PeriodKind::Month,
            PeriodKind::Range,
        ]
        .into_iter()
        .find(|k| k.as_str() == text)
    }

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

/// Whether a [`Finding`] still flags.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum FindingStatus {
    /// Flagged in fewer periods than confirm a finding (`[findings] confirm_after`): one flag
    /// may be one of the false discoveries the FDR level allows; watched, not alerted.
    Watch,
    /// Flagged in the latest checked periods (fewer quiet periods since than close it).
    Open,
    /// Quiet for as many checked periods as close a finding.
    Closed,
}

impl FindingStatus {
    /// The stored and printed name (`"open"`, `"closed"`).
    pub fn as_str(self) -> &'static str {
        match self {
            FindingStatus::Watch => "watch",
            FindingStatus::Open => "open",
            FindingStatus::Closed => "closed",
        }
    }

    /// The status of a stored name.
    pub fn parse(text: &str) -> Option<FindingStatus> {
        match text {
            "watch" => Some(FindingStatus::Watch),
            "open" => Some(FindingStatus::Open),
            "closed" => Some(FindingStatus::Closed),
            _ => None,
        }
    }
}

/// A finding: the flags of one characteristic x factor whose standing-out group is the same,
/// joined over consecutive checked periods of one kind (quiet stretches shorter than
/// `[findings] close_after` included). Built by `analysis::findings`, kept by `storage`.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    /// Its number (`samewise findings note N`); 0 before it is stored.
    pub id: i64,
    /// The kind of the periods it was found in.
    pub period_kind: PeriodKind,
    /// The characteristic.
    pub characteristic: String,
    /// The factor.
    pub factor: String,
    /// The standing-out level.
    pub level: String,
    /// Open or closed.
    pub status: FindingStatus,
    /// How often it closed and flagged again.
    pub times_reopened: u32,
    /// The first period it ever flagged: label and start.
    pub first_label: String,
    /// See `first_label`.
    pub first_start: DateTime<Utc>,
    /// The first flagged period of the current episode (since the last reopening).
    pub episode_label: String,
    /// See `episode_label`.
    pub episode_start: DateTime<Utc>,
    /// The last flagged period: label, start and end.
    pub last_label: String,
    /// See `last_label`.
    pub last_start: DateTime<Utc>,
    /// See `last_label`.
    pub last_end: DateTime<Utc>,
    /// Flagged periods of the current episode.
    pub n_flagged: u32,
    /// Of those, flags resting on weak evidence (clearly non-normal residuals in small groups,
    /// where the leading test's p-value is less trustworthy).
    pub n_weak: u32,
    /// Checked periods since the last flag.
    pub quiet_periods: u32,
    /// The characteristic's unit.
    pub unit: String,
    /// The standing-out group's mean minus the grand mean in the last flagged period, in units.
    pub effect_now: Option<f64>,
    /// The same in within-group SDs.
    pub effect_now_sd: Option<f64>,
    /// The same in % of the tolerance (or of the distance to a single limit).
    pub effect_now_pct: Option<f64>,
    /// The within-group SD of the last flagged period.
    pub within_sd: Option<f64>,
    /// The largest effect (by size) of the current episode, in units.
    pub peak_effect: Option<f64>,
    /// The same in % of the tolerance.
    pub peak_pct: Option<f64>,
    /// The period of the peak.
    pub peak_label: Option<String>,
    /// When the standing-out group's offset from the others changed (change-point estimate),
    /// with its interval; or the start of the first flagged period.
    pub onset: Option<DateTime<Utc>>,
    /// See `onset`.
    pub onset_low: Option<DateTime<Utc>>,
    /// See `onset`.
    pub onset_high: Option<DateTime<Utc>>,
    /// How the onset was found.
    pub onset_method: String,
    /// The nearest logged process change in scope at or before the onset: id, time, note.
    pub event_id: Option<i64>,
    /// See `event_id`.
    pub event_at: Option<DateTime<Utc>>,
    /// See `event_id`.
    pub event_note: Option<String>,
    /// When it was first stored and last changed.
    pub created: DateTime<Utc>,
    /// See `created`.
    pub updated: DateTime<Utc>,
}
