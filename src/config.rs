//! The plant configuration file (TOML), validated once into a [`Config`].
//!
//! This module owns reading `plant.toml` and checking it: everything below `cli` receives a
//! [`Config`] that is already known to be consistent (unique names, LSL below USL, every layout
//! column pointing at a known factor or characteristic, a real IANA time zone). It does no other
//! I/O than reading the one file, and it never touches the database.
//!
//! Start reading at [`Config::from_toml_str`]: the file is first deserialised into private `Raw*`
//! structs that mirror the TOML (unknown keys are refused, so a typo such as `uls = 10.2` is an
//! error rather than a silently missing limit), then `validate` turns them into the public typed
//! structs. Every error names the configuration file and the key, for example
//! `plant.toml: characteristic "bore": lsl 10.2 is not below usl 10.1`.
//!
//! The file format, key by key (sample-plant/plant.toml is a complete, commented example):
//!
//! ```toml
//! [plant]
//! name = "Example plant"
//! time_zone = "Europe/Berlin"        # IANA name; DST handled by the tz database
//! production_day_start = "06:00"     # local wall-clock time the production day starts
//! database = "plant.db"              # relative to the directory of this file
//!
//! [[shift]]                           # optional; one shift must start at production_day_start
//! name = "early"
//! start = "06:00"
//!
//! [check]                             # all optional, defaults shown
//! fdr_method = "bh"                   # "bh" (Benjamini-Hochberg) or "by" (Benjamini-Yekutieli)
//! fdr_level = 0.05
//! material_share = 0.10
//! min_per_group = 2
//! alpha = 0.05
//! power_target = 0.8
//!
//! [findings]                          # optional
//! close_after = 3                     # quiet checked periods that close a finding (1-100)
//! confirm_after = 2                   # flagged periods that confirm it (on watch before)
//!
//! [alert]                             # optional: a command run when findings are new or change
//! command = ["/usr/local/bin/notify-quality", "--channel", "line-2"]  # program and arguments
//! timeout = "30s"                     # the command is stopped after this long (default 30s)
//!
//! [[characteristic]]
//! name = "bore_diameter"
//! unit = "mm"
//! lsl = 41.98
//! usl = 42.02
//! target = 42.0
//! resolution = 0.001
//! active = true                       # default true
//! plausible = [41.5, 42.5]            # values outside are rejected at import; default: the
//!                                     # limits widened by 10 tolerance widths (none without
//!                                     # both limits). The stored values' exact origin is the
//!                                     # target, or the middle of the limits (or of plausible),
//!                                     # else the median of the first 31 values imported.
//!
//! [[factor]]
//! name = "machine"
//! column = "Machine"                  # default column: the factor name
//! [[factor]]
//! name = "shift"
//! derived = "shift"                   # computed from the timestamp through the shifts
//! # case = "upper"                    # optional on a column factor: levels upper- (or "lower"-)
//!                                     # cased at import, so imm1 and IMM1 are one machine
//!
//! [[layout]]
//! name = "cmm-long"
//! kind = "long"                       # or "wide"
//! timestamp = "Timestamp"             # default "timestamp"
//! timestamp_format = "%d.%m.%Y %H:%M:%S"  # optional chrono format; default ISO 8601
//! characteristic = "Feature"          # long only; default "characteristic"
//! value = "Value"                     # long only; default "value"
//! delimiter = ";"                     # one ASCII character, or "auto"; default ","
//! decimal = ","                       # decimal separator: "." (default) or "," (then the
//!                                     # delimiter must not be ","; default then ";";
//!                                     # thousands separators are refused)
//! ignore = ["Comment"]                # columns that are present but not read
//! part = "Serial"                     # optional part (serial) id column, stored
//! identity = ["characteristic", "part"]  # optional; default: characteristic, time, every
//!                                     # factor, and the part when there is a part column
//! subgroup = "Shot"                   # optional: the column naming measurements taken
//!                                     # together (shot, sample, batch); a list of columns
//!                                     # (["Machine", "Shot"]) is joined with "/"; stored
//! # subgroup_window = "10m"           # no such column: the values of one combination of the
//! # subgroup_by = ["machine"]         # subgroup_by factors (default: every column factor)
//!                                     # within one clock window of this length (aligned to
//!                                     # midnight UTC) form a subgroup
//! [layout.factors]                    # factor = "Column"; default: the factor's own column
//! machine = "Machine ID"
//! [layout.characteristics]            # wide: characteristic = "Column"; long: characteristic =
//!                                     # "CODE" (the station's code in the characteristic column)
//! bore_diameter = "Bore D"
//!
//! [[schedule]]
//! name = "daily"
//! period = "day"                      # "shift", "day", "week" or "month"
//! delay = "2h"                        # wait after the period end for late data: "90s", "30m", "2h", "1d", "1h30m"
//! characteristics = []                # empty = all active characteristics
//! factors = []                        # empty = all factors
//! fdr_level = 0.05                    # optional; default [check] fdr_level
//! ```
//!
//! When the file defines no `[[layout]]`, two default layouts are added: `long` (columns
//! `timestamp`, `characteristic`, `value` and one column per column-sourced factor named after
//! the factor) and `wide` (columns `timestamp`, the factor columns and one column per
//! characteristic named after the characteristic).

use std::collections::{BTreeMap, HashSet};
use std::path::{Path, PathBuf};

use chrono::format::{Item, StrftimeItems};
use chrono::{Duration, NaiveTime};

pub use crate::stats::fdr::FdrMethod;
use serde::Deserialize;

use crate::model::PeriodKind;
use crate::names::{unknown_name, NameKind};
use crate::{Error, Result};

/// The validated plant configuration.
#[derive(Debug, Clone)]
pub struct Config {
    /// The file the configuration was read from (as given; used in messages).
    pub path: PathBuf,
    /// Plant identity, time zone, production-day start and database location.
    pub plant: Plant,
    /// Shifts sorted by their start within the production day (the first starts at
    /// `plant.day_start`). Empty when the plant does not use shifts.
    pub shifts: Vec<Shift>,
    /// Settings of the periodic checks.
    pub check: CheckSettings,
    /// Characteristics in file order.
    pub characteristics: Vec<CharacteristicConfig>,
    /// Grouping factors in file order; `Measurement::levels` follow this order.
    pub factors: Vec<FactorConfig>,
    /// Import layouts in file order (or the two defaults, see the module docs).
    pub layouts: Vec<Layout>,
    /// Schedules in file order.
    pub schedules: Vec<ScheduleConfig>,
    /// How flags become findings.
    pub findings: FindingsSettings,
    /// The command run when findings are new or change, if any.
    pub alert: Option<AlertConfig>,
    /// SHA-256 of the text that was parsed, first 16 hex digits: the configuration hash every
    /// run records (the file is not read again to make it, so a later edit cannot slip in).
    pub source_hash: String,
}

/// The `[findings]` table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FindingsSettings {
    /// Checked periods without the flag after which a finding closes; shorter quiet stretches
    /// keep it open and join the flags around them into one finding.
    pub close_after: u32,
    /// Flagged periods that confirm a finding (it is on watch before: not alerted, not listed
    /// by default).
    pub confirm_after: u32,
}

impl Default for FindingsSettings {
    fn default() -> Self {
        FindingsSettings {
            close_after: 3,
            confirm_after: 2,
        }
    }
}

/// The `[alert]` table: a program run (without a shell) with the new and changed findings as
/// JSON on its standard input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AlertConfig {
    /// The program and its arguments.
    pub command: Vec<String>,
    /// How long the program may run before it is stopped.
    pub timeout: Duration,
}

/// The `[plant]` table.
#[derive(Debug, Clone)]
pub struct Plant {
    /// Plant name, shown in reports.
    pub name: String,
    /// The plant's IANA time zone (DST from the tz database).
    pub time_zone: chrono_tz::Tz,
    /// Local wall-clock time at which a production day starts.
    pub day_start: NaiveTime,
    /// The SQLite database, resolved relative to the configuration file's directory (unused
    /// when `server` names a PostgreSQL database).
    pub database: PathBuf,
    /// The site this configuration is (`[plant] site`): one plant of a company's group, whose
    /// data lives in its own schema of a shared PostgreSQL database. `None`: a single plant.
    pub site: Option<String>,
    /// A PostgreSQL database (`database = "postgresql://..."` or a `[database]` table), or
    /// `None` for the embedded SQLite file at `database`.
    pub server: Option<ServerDatabase>,
}

/// A PostgreSQL database holding this plant's data in one schema.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ServerDatabase {
    /// The connection URL as configured (`postgresql://user@host:port/dbname?options`); a
    /// password belongs in the environment variable `password_env`, not here.
    pub url: String,
    /// The schema that holds this site's tables: `[database] schema`, else the site name, else
    /// `samewise`. Lower-case letters, digits and `_`.
    pub schema: String,
    /// The environment variable the password is read from, if any.
    pub password_env: Option<String>,
    /// `[database] tls_ca`: the PEM file of the CA that signed the server's certificate,
    /// resolved relative to the configuration file's directory (the URL's `sslrootcert` is the
    /// same setting, taken as written).
    pub tls_ca: Option<PathBuf>,
    /// `[database] tls_cert`: a client certificate chain (PEM) for servers that ask for one.
    pub tls_cert: Option<PathBuf>,
    /// `[database] tls_key`: the client certificate's private key (PEM).
    pub tls_key: Option<PathBuf>,
}

impl ServerDatabase {
    /// The URL without any password, for messages.
    pub fn display_url(&self) -> String {
        redact_url(&self.url)
    }
}

/// `url` with a password (`user:secret@`) replaced by `***`.
pub fn redact_url(url: &str) -> String {
    let Some(scheme_end) = url.find("://") else {
        return url.to_string();
    };
    let rest = &url[scheme_end + 3..];
    let authority_end = rest.find(['/', '?']).unwrap_or(rest.len());
    let authority = &rest[..authority_end];
    match (authority.rfind('@'), authority.find(':')) {
        (Some(at), Some(colon)) if colon < at => format!(
            "{}{}:***{}",
            &url[..scheme_end + 3],
            &authority[..colon],
            &rest[at..]
        ),
        _ => url.to_string(),
    }
}

/// Whether a `database` setting names a PostgreSQL server rather than an SQLite file.
pub fn is_server_url(text: &str) -> bool {
    let t = text.trim_start();
    t.starts_with("postgresql://") || t.starts_with("postgres://")
}

/// Checks a schema or site name usable as a PostgreSQL schema: 1-63 characters, lower-case
/// ASCII letters, digits and `_`, not starting with a digit, not `pg_...` or
/// `information_schema`.
pub fn check_schema_name(name: &str) -> std::result::Result<(), String> {
    let ok_chars = name
        .chars()
        .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_');
    if name.is_empty() || name.len() > 63 || !ok_chars {
        return Err(format!(
            "\"{name}\" is not usable as a database schema name: use 1 to 63 lower-case letters, \
             digits and _"
        ));
    }
    if name.starts_with(|c: char| c.is_ascii_digit()) {
        return Err(format!(
            "\"{name}\" starts with a digit; a schema name cannot"
        ));
    }
    if name.starts_with("pg_") || name == "information_schema" || name == "public" {
        return Err(format!(
            "\"{name}\" is reserved by PostgreSQL; choose another name"
        ));
    }
    Ok(())
}

/// One `[[shift]]`: it runs from its start until the next shift's start (the last shift of the
/// production day runs until the next production day starts, so a night shift crossing midnight
/// belongs to the production day it started in).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Shift {
    /// Shift name, used as the factor level of a derived `shift` factor and in period labels.
    pub name: String,
    /// Local wall-clock start time.
    pub start: NaiveTime,
}

/// The `[check]` table.
#[derive(Debug, Clone)]
pub struct CheckSettings {
    /// FDR procedure across all tests of a run.
    pub fdr_method: FdrMethod,
    /// q-value level at or below which a test is flagged.
    pub fdr_level: f64,
    /// Share of the tolerance width the spread of group means must reach to be "material".
    pub material_share: f64,
    /// Minimum observations a group needs to take part in a test.
    pub min_per_group: u64,
    /// Significance level for the requirement checks and the sensitivity.
    pub alpha: f64,
    /// Power target of the sensitivity (minimum detectable difference).
    pub power_target: f64,
}

impl Default for CheckSettings {
    fn default() -> Self {
        CheckSettings {
            fdr_method: FdrMethod::BenjaminiHochberg,
            fdr_level: 0.05,
            material_share: 0.10,
            min_per_group: 2,
            alpha: 0.05,
            power_target: 0.8,
        }
    }
}

/// One `[[characteristic]]`.
#[derive(Debug, Clone, PartialEq)]
pub struct CharacteristicConfig {
    /// Name as it appears in long-format files and in commands.
    pub name: String,
    /// Unit, for display only (values in files carry no unit).
    pub unit: String,
    /// Lower specification limit.
    pub lsl: Option<f64>,
    /// Upper specification limit.
    pub usl: Option<f64>,
    /// Nominal value.
    pub target: Option<f64>,
    /// Gauge resolution (smallest step the gauge reports).
    pub resolution: Option<f64>,
    /// Whether the periodic checks include it.
    pub is_active: bool,
    /// Values outside this range are rejected at import as implausible (`plausible = [lo, hi]`);
    /// see [`CharacteristicConfig::plausible_range`] for the default. Not stored in the
    /// database: only the import uses it.
    pub plausible: Option<(f64, f64)>,
}

/// The default plausible range reaches this many tolerance widths beyond each limit.
pub const PLAUSIBLE_WIDTHS: f64 = 10.0;

impl CharacteristicConfig {
    /// The range outside which a value is rejected at import as implausible (a typo such as
    /// `10000123000000` for `10.000123`): `plausible = [lo, hi]` when configured, otherwise, with
    /// both limits, the limits widened by [`PLAUSIBLE_WIDTHS`] tolerance widths on each side (a
    /// value that far out is a misreading, not a part; common practice, no published source);
    /// `None` without both limits.
    pub fn plausible_range(&self) -> Option<(f64, f64)> {
        if self.plausible.is_some() {
            return self.plausible;
        }
        let (lsl, usl) = (self.lsl?, self.usl?);
        let w = usl - lsl;
        Some((lsl - PLAUSIBLE_WIDTHS * w, usl + PLAUSIBLE_WIDTHS * w))
    }

    /// The exact decimal origin its values are stored against when none is stored yet: the
    /// target, or the middle of the limits (so no single value, a typo among them, can fix an
    /// origin far from the data); `None` without them.
    pub fn configured_origin(&self) -> Option<crate::stats::decimal::Decimal> {
        let centre = self.target.or(match (self.lsl, self.usl) {
            (Some(l), Some(u)) => Some(0.5 * (l + u)),
            _ => self.plausible.map(|(l, u)| 0.5 * (l + u)),
        })?;
        crate::stats::decimal::Decimal::parse(&format!("{centre}")).ok()
    }
}

/// Where a factor's level comes from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum FactorSource {
    /// A column of the input file (the default column name; layouts may map it).
    Column(String),
    /// The shift, derived from the measurement's timestamp through the plant calendar.
    DerivedShift,
}

/// One `[[factor]]`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FactorConfig {
    /// Factor name (machine, shift, supplier, ...).
    pub name: String,
    /// Where its level comes from.
    pub source: FactorSource,
    /// How its levels are normalised at import (`case = "upper"`): `imm1` and `IMM1` one machine.
    pub case: LevelCase,
}

/// Case normalisation of a factor's levels at import (surrounding blanks are always trimmed).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum LevelCase {
    /// As written (the default).
    #[default]
    Keep,
    /// Upper case (`imm1` -> `IMM1`).
    Upper,
    /// Lower case.
    Lower,
}

/// The shape of an import file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LayoutKind {
    /// One row per measurement: timestamp, characteristic name, value, factor columns.
    Long {
        /// Column holding the characteristic name.
        characteristic_column: String,
        /// Column holding the value.
        value_column: String,
    },
    /// One row per part: timestamp, factor columns, one column per characteristic.
    Wide {
        /// `(characteristic, column)` pairs. Empty means: every column that is not the
        /// timestamp, a factor column or ignored holds the characteristic of the same name.
        characteristic_columns: Vec<(String, String)>,
    },
}

/// One `[[layout]]`: how to read one kind of export.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Layout {
    /// Layout name, for `import --layout NAME`.
    pub name: String,
    /// Long or wide, with the kind-specific columns.
    pub kind: LayoutKind,
    /// Column holding the timestamp.
    pub timestamp_column: String,
    /// chrono `strftime` format of the timestamp; `None` means ISO 8601 (see `ingest`).
    pub timestamp_format: Option<String>,
    /// One entry per `Config::factors`, in order: the column for a column-sourced factor, `None`
    /// for a derived one.
    pub factor_columns: Vec<Option<String>>,
    /// Columns present in the files but deliberately not read.
    pub ignore: Vec<String>,
    /// Field separator, one ASCII character (default `,`; many European exports use `;`).
    pub delimiter: u8,
    /// `delimiter = "auto"`: the separator is chosen from the header line of each file (the one
    /// of `,` `;` tab `|` that splits it into the most fields; `,` left out with a decimal comma).
    pub delimiter_auto: bool,
    /// `decimal = ","`: values are written with a decimal comma (`10,0123`).
    pub decimal_comma: bool,
    /// Long layouts: the codes a station writes in the characteristic column mapped to the
    /// configured names (`[layout.characteristics]` name = "CODE"), as (code, name).
    pub codes: Vec<(String, String)>,
    /// Column holding a part (serial) id, stored with each measurement (`part = "Serial"`).
    pub part_column: Option<String>,
    /// Where each measurement's subgroup (shot, sample, batch) comes from, when the layout
    /// names one.
    pub subgroup: Option<SubgroupSource>,
    /// What identifies one measurement, for telling an overlapping export's rows (duplicates)
    /// and changed values (conflicts) from new measurements.
    pub identity: Identity,
}

/// Where a layout's subgroup ids come from: measurements of one subgroup were taken together
/// (the parts of one shot, one CMM sample, one batch) and share its deviation.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SubgroupSource {
    /// `subgroup = "Shot"` or `["Machine", "Shot"]`: the cells of these columns, joined with
    /// "/". A row whose cells are all empty has no subgroup.
    Columns(Vec<String>),
    /// `subgroup_window = "10m"`: the values of one combination of the `by` factors (indices
    /// into `Config::factors`) within one clock window of `window_ms` (windows aligned to
    /// midnight UTC) form a subgroup. A subgroup that straddles a window boundary is split: give
    /// the export's own subgroup column where it has one.
    Window {
        /// Window length in milliseconds.
        window_ms: i64,
        /// The factors whose levels are part of the subgroup id.
        by: Vec<usize>,
    },
}

/// What identifies one measurement of a layout (`identity = [...]` in a `[[layout]]`): always
/// the characteristic, and some of the time, the part id and the factor levels. The default is
/// the characteristic, the time, every factor level and the part id when the layout has a part
/// column. A stored measurement with the same identity and value is a duplicate (counted, not
/// stored again); with another value, a conflict (rejected, both values named).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Identity {
    /// The measurement's instant is part of its identity.
    pub time: bool,
    /// The part id is part of its identity (the layout has a part column).
    pub part: bool,
    /// The factors (indices into `Config::factors`) whose levels are part of it.
    pub factors: Vec<usize>,
}

impl Identity {
    /// The default identity: characteristic, time, every factor level, and the part id when
    /// there is a part column.
    pub fn full(n_factors: usize, has_part: bool) -> Identity {
        Identity {
            time: true,
            part: has_part,
            factors: (0..n_factors).collect(),
        }
    }
}

/// One `[[schedule]]`.
#[derive(Debug, Clone, PartialEq)]
pub struct ScheduleConfig {
    /// Schedule name.
    pub name: String,
    /// Period kind: shift, day, week or month (never range).
    pub period: PeriodKind,
    /// How long after the period end the check waits for late data.
    pub delay: Duration,
    /// Characteristics to check; empty = all active.
    pub characteristics: Vec<String>,
    /// Factors to check; empty = all.
    pub factors: Vec<String>,
    /// FDR level overriding `[check] fdr_level`.
    pub fdr_level: Option<f64>,
}

impl Config {
    /// Reads and validates the configuration file at `path`.
    pub fn load(path: impl AsRef<Path>) -> Result<Config> {
        let path = path.as_ref();
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Config::from_toml_str(&text, path)
    }

    /// Parses and validates configuration text; `path` is used in messages and to resolve the
    /// database path.
    pub fn from_toml_str(text: &str, path: impl AsRef<Path>) -> Result<Config> {
        let path = path.as_ref();
        let raw: RawConfig = toml::from_str(text).map_err(|e| Error::Config {
            path: path.to_path_buf(),
            reason: one_line(&e.to_string()),
        })?;
        let mut config = validate(raw, path)?;
        config.source_hash = source_hash(text);
        Ok(config)
    }

    /// The characteristic called `name`.
    pub fn characteristic(&self, name: &str) -> Option<&CharacteristicConfig> {
        self.characteristics.iter().find(|c| c.name == name)
    }

    /// The index of factor `name` in `factors` (and in `Measurement::levels`).
    pub fn factor_index(&self, name: &str) -> Option<usize> {
        self.factors.iter().position(|f| f.name == name)
    }

    /// The configured characteristic `name`, or the unknown-name error
    /// ([`crate::names::unknown_name`]) with the closest configured names.
    pub fn known_characteristic(&self, name: &str) -> Result<&CharacteristicConfig> {
        self.characteristic(name).ok_or_else(|| {
            unknown_name(
                NameKind::Characteristic,
                name,
                self.characteristics.iter().map(|c| c.name.as_str()),
                &self.path.display().to_string(),
            )
        })
    }

    /// The configured factor `name`, or the unknown-name error ([`crate::names::unknown_name`])
    /// with the closest configured names.
    pub fn known_factor(&self, name: &str) -> Result<&FactorConfig> {
        self.factors.iter().find(|f| f.name == name).ok_or_else(|| {
            unknown_name(
                NameKind::Factor,
                name,
                self.factors.iter().map(|f| f.name.as_str()),
                &self.path.display().to_string(),
            )
        })
    }

    /// The layout called `name`.
    pub fn layout(&self, name: &str) -> Option<&Layout> {
        self.layouts.iter().find(|l| l.name == name)
    }

    /// The schedule called `name`.
    pub fn schedule(&self, name: &str) -> Option<&ScheduleConfig> {
        self.schedules.iter().find(|s| s.name == name)
    }
}

/// Parses a duration such as `"90s"`, `"30m"`, `"2h"`, `"1d"` or `"1h30m"` (units s, m, h, d;
/// whole numbers; at least one part).
pub fn parse_duration(text: &str) -> std::result::Result<Duration, String> {
    let text = text.trim();
    if text.is_empty() {
        return Err("empty duration (write e.g. \"2h\", \"30m\", \"1d\")".to_string());
    }
    let mut total = Duration::zero();
    let mut digits = String::new();
    for ch in text.chars() {
        if ch.is_ascii_digit() {
            digits.push(ch);
            continue;
        }
        if digits.is_empty() {
            return Err(format!(
                "\"{text}\" is not a duration (write e.g. \"2h\", \"30m\", \"1d\", \"1h30m\")"
            ));
        }
        let n: i64 = digits
            .parse()
            .map_err(|_| format!("\"{text}\": number too large"))?;
        digits.clear();
        let seconds_per_unit = match ch {
            's' => 1,
            'm' => 60,
            'h' => 3600,
            'd' => 86_400,
            _ => {
                return Err(format!(
                    "\"{text}\": unknown unit '{ch}' (use s, m, h or d)"
                ))
            }
        };
        let part = n
            .checked_mul(seconds_per_unit)
            .filter(|s| *s <= 366 * 86_400)
            .ok_or_else(|| format!("\"{text}\" is longer than a year"))?;
        total += Duration::seconds(part);
    }
    if !digits.is_empty() {
        return Err(format!(
            "\"{text}\": number without unit (write e.g. \"{digits}m\" or \"{digits}h\")"
        ));
    }
    Ok(total)
}

/// Parses a wall-clock time `"06:00"` or `"06:00:00"`.
pub fn parse_time_of_day(text: &str) -> std::result::Result<NaiveTime, String> {
    NaiveTime::parse_from_str(text.trim(), "%H:%M")
        .or_else(|_| NaiveTime::parse_from_str(text.trim(), "%H:%M:%S"))
        .map_err(|_| format!("\"{text}\" is not a time of day (write e.g. \"06:00\")"))
}

/// Whether a chrono format string is valid, and whether it carries a UTC offset (`%z`, `%:z`,
/// `%#z`, `%::z`) or is a complete RFC 3339/2822 (`%+`); `Err` names the problem.
pub fn check_timestamp_format(format: &str) -> std::result::Result<bool, String> {
    let mut has_offset = false;
    let mut has_date = false;
    let mut has_time = false;
    for item in StrftimeItems::new(format) {
        match item {
            Item::Error => {
                return Err(format!(
                    "timestamp_format \"{format}\" is not a valid chrono format"
                ))
            }
            Item::Fixed(fixed) => {
                use chrono::format::Fixed;
                match fixed {
                    Fixed::TimezoneOffset
                    | Fixed::TimezoneOffsetColon
                    | Fixed::TimezoneOffsetDoubleColon
                    | Fixed::TimezoneOffsetTripleColon
                    | Fixed::TimezoneOffsetColonZ
                    | Fixed::TimezoneOffsetZ => has_offset = true,
                    Fixed::RFC3339 | Fixed::RFC2822 => {
                        has_offset = true;
                        has_date = true;
                        has_time = true;
                    }
                    _ => {}
                }
            }
            Item::Numeric(numeric, _) => {
                use chrono::format::Numeric;
                match numeric {
                    Numeric::Year | Numeric::Day | Numeric::Ordinal => has_date = true,
                    Numeric::Hour | Numeric::Hour12 => has_time = true,
                    Numeric::Timestamp => {
                        has_date = true;
                        has_time = true;
                        has_offset = true;
                    }
                    _ => {}
                }
            }
            _ => {}
        }
    }
    if !has_date || !has_time {
        return Err(format!(
            "timestamp_format \"{format}\" needs a date and a time (e.g. \"%Y-%m-%d %H:%M:%S\")"
        ));
    }
    Ok(has_offset)
}

fn one_line(message: &str) -> String {
    // toml's messages span several lines (a source excerpt); keep them but flatten for one line.
    message
        .lines()
        .map(str::trim_end)
        .filter(|l| !l.trim().is_empty())
        .collect::<Vec<_>>()
        .join(" | ")
}

// ---------------------------------------------------------------------------------------------
// Raw structs: exactly the TOML, nothing checked yet.

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawConfig {
    plant: RawPlant,
    #[serde(default)]
    shift: Vec<RawShift>,
    #[serde(default)]
    check: RawCheck,
    #[serde(default)]
    characteristic: Vec<RawCharacteristic>,
    #[serde(default)]
    factor: Vec<RawFactor>,
    #[serde(default)]
    layout: Vec<RawLayout>,
    #[serde(default)]
    schedule: Vec<RawSchedule>,
    findings: Option<RawFindings>,
    alert: Option<RawAlert>,
    database: Option<RawDatabase>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawDatabase {
    url: String,
    schema: Option<String>,
    password_env: Option<String>,
    tls_ca: Option<PathBuf>,
    tls_cert: Option<PathBuf>,
    tls_key: Option<PathBuf>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFindings {
    close_after: Option<u32>,
    confirm_after: Option<u32>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawAlert {
    command: Vec<String>,
    timeout: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPlant {
    name: String,
    time_zone: String,
    production_day_start: Option<String>,
    database: Option<String>,
    site: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawShift {
    name: String,
    start: String,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct RawCheck {
    fdr_method: Option<String>,
    fdr_level: Option<f64>,
    material_share: Option<f64>,
    min_per_group: Option<u64>,
    alpha: Option<f64>,
    power_target: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCharacteristic {
    name: String,
    #[serde(default)]
    unit: String,
    lsl: Option<f64>,
    usl: Option<f64>,
    target: Option<f64>,
    resolution: Option<f64>,
    active: Option<bool>,
    plausible: Option<[f64; 2]>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFactor {
    name: String,
    column: Option<String>,
    derived: Option<String>,
    case: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawLayout {
    name: String,
    kind: String,
    timestamp: Option<String>,
    timestamp_format: Option<String>,
    characteristic: Option<String>,
    value: Option<String>,
    delimiter: Option<String>,
    decimal: Option<String>,
    part: Option<String>,
    identity: Option<Vec<String>>,
    subgroup: Option<RawColumns>,
    subgroup_window: Option<String>,
    subgroup_by: Option<Vec<String>>,
    #[serde(default)]
    ignore: Vec<String>,
    #[serde(default)]
    factors: BTreeMap<String, String>,
    #[serde(default)]
    characteristics: BTreeMap<String, String>,
}

/// One column name or a list of them.
#[derive(Deserialize)]
#[serde(untagged)]
enum RawColumns {
    One(String),
    Many(Vec<String>),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSchedule {
    name: String,
    period: String,
    delay: Option<String>,
    #[serde(default)]
    characteristics: Vec<String>,
    #[serde(default)]
    factors: Vec<String>,
    fdr_level: Option<f64>,
}

// ---------------------------------------------------------------------------------------------
// Validation: raw -> typed, every error naming the file and the key.

/// Turns the raw TOML structs into a [`Config`], or names the first problem found.
fn validate(raw: RawConfig, path: &Path) -> Result<Config> {
    let fail = |reason: String| Error::Config {
        path: path.to_path_buf(),
        reason,
    };

    // [plant]
    let plant_name = check_label(&raw.plant.name).map_err(|r| fail(format!("plant.name: {r}")))?;
    let time_zone: chrono_tz::Tz = raw.plant.time_zone.parse().map_err(|_| {
        fail(format!(
            "plant.time_zone: \"{}\" is not an IANA time zone name (e.g. \"Europe/Berlin\", \"America/Chicago\")",
            raw.plant.time_zone
        ))
    })?;
    let day_start = match &raw.plant.production_day_start {
        Some(text) => {
            parse_time_of_day(text).map_err(|r| fail(format!("plant.production_day_start: {r}")))?
        }
        None => NaiveTime::MIN,
    };
    let database_text = raw.plant.database.as_deref().unwrap_or("samewise.db");
    if database_text.trim().is_empty() {
        return Err(fail("plant.database: empty path".to_string()));
    }
    let database = {
        let db = PathBuf::from(database_text);
        if db.is_absolute() {
            db
        } else {
            path.parent()
                .map(|dir| dir.join(&db))
                .unwrap_or_else(|| db.clone())
        }
    };
    let site = match &raw.plant.site {
        Some(site) => {
            check_schema_name(site).map_err(|r| fail(format!("plant.site: {r}")))?;
            Some(site.clone())
        }
        None => None,
    };
    let server = match (&raw.database, raw.plant.database.as_deref()) {
        (Some(_), Some(_)) => {
            return Err(fail(
                "plant.database and a [database] table are both given: keep one (a file path \
                 for SQLite, or the [database] table for PostgreSQL)"
                    .to_string(),
            ))
        }
        (Some(table), None) => {
            if !is_server_url(&table.url) {
                return Err(fail(format!(
                    "database.url: \"{}\" is not a PostgreSQL URL (postgresql://user@host:port/dbname)",
                    redact_url(&table.url)
                )));
            }
            let schema = match &table.schema {
                Some(s) => s.clone(),
                None => site.clone().unwrap_or_else(|| "samewise".to_string()),
            };
            check_schema_name(&schema).map_err(|r| fail(format!("database.schema: {r}")))?;
            // Certificate files: relative to the configuration file, like the SQLite file.
            let beside_config = |p: &Option<PathBuf>| {
                p.as_ref().map(|p| match path.parent() {
                    Some(dir) if p.is_relative() => dir.join(p),
                    _ => p.clone(),
                })
            };
            Some(ServerDatabase {
                url: table.url.trim().to_string(),
                schema,
                password_env: table.password_env.clone(),
                tls_ca: beside_config(&table.tls_ca),
                tls_cert: beside_config(&table.tls_cert),
                tls_key: beside_config(&table.tls_key),
            })
        }
        (None, Some(text)) if is_server_url(text) => {
            let schema = site.clone().unwrap_or_else(|| "samewise".to_string());
            Some(ServerDatabase {
                url: text.trim().to_string(),
                schema,
                password_env: None,
                tls_ca: None,
                tls_cert: None,
                tls_key: None,
            })
        }
        (None, _) => None,
    };
    let plant = Plant {
        name: plant_name,
        time_zone,
        day_start,
        database,
        site,
        server,
    };

    // [[shift]]
    let mut shifts = Vec::with_capacity(raw.shift.len());
    let mut seen = HashSet::new();
    for s in &raw.shift {
        let name = check_name(&s.name).map_err(|r| fail(format!("shift.name: {r}")))?;
        if !seen.insert(name.clone()) {
            return Err(fail(format!("shift \"{name}\": defined twice")));
        }
        let start = parse_time_of_day(&s.start)
            .map_err(|r| fail(format!("shift \"{name}\": start: {r}")))?;
        if let Some(other) = shifts.iter().find(|o: &&Shift| o.start == start) {
            return Err(fail(format!(
                "shift \"{name}\": start {} is also the start of shift \"{}\"",
                start.format("%H:%M"),
                other.name
            )));
        }
        shifts.push(Shift { name, start });
    }
    if !shifts.is_empty() {
        if !shifts.iter().any(|s| s.start == day_start) {
            return Err(fail(format!(
                "shift: no shift starts at production_day_start {} (the first shift of a production day must start when the day starts)",
                day_start.format("%H:%M")
            )));
        }
        // Order by position within the production day.
        shifts.sort_by_key(|s| offset_in_day(s.start, day_start));
    }

    // [check]
    let defaults = CheckSettings::default();
    let fdr_method = match raw.check.fdr_method.as_deref() {
        None => defaults.fdr_method,
        Some(m) => FdrMethod::from_key(m).ok_or_else(|| {
            fail(format!(
                "check.fdr_method: \"{m}\" is not \"bh\" (Benjamini-Hochberg) or \"by\" (Benjamini-Yekutieli)"
            ))
        })?,
    };
    let open_unit = |key: &str, value: Option<f64>, default: f64| -> Result<f64> {
        match value {
            None => Ok(default),
            Some(v) if v > 0.0 && v < 1.0 => Ok(v),
            Some(v) => Err(fail(format!(
                "{key}: {v} is not between 0 and 1 (exclusive)"
            ))),
        }
    };
    let material_share = match raw.check.material_share {
        None => defaults.material_share,
        Some(v) if v.is_finite() && v >= 0.0 => v,
        Some(v) => {
            return Err(fail(format!(
            "check.material_share: {v} must be a non-negative share of the tolerance (0.10 = 10%)"
        )))
        }
    };
    let min_per_group = match raw.check.min_per_group {
        None => defaults.min_per_group,
        Some(n) if n >= 2 => n,
        Some(n) => {
            return Err(fail(format!(
                "check.min_per_group: {n} is below 2 (a group needs two values for a within-group spread)"
            )))
        }
    };
    let check = CheckSettings {
        fdr_method,
        fdr_level: open_unit("check.fdr_level", raw.check.fdr_level, defaults.fdr_level)?,
        material_share,
        min_per_group,
        alpha: open_unit("check.alpha", raw.check.alpha, defaults.alpha)?,
        power_target: open_unit(
            "check.power_target",
            raw.check.power_target,
            defaults.power_target,
        )?,
    };

    // [[characteristic]]
    let mut characteristics: Vec<CharacteristicConfig> = Vec::new();
    for c in &raw.characteristic {
        let name = check_name(&c.name).map_err(|r| fail(format!("characteristic.name: {r}")))?;
        let key = |k: &str| format!("characteristic \"{name}\": {k}");
        if characteristics.iter().any(|o| o.name == name) {
            return Err(fail(format!("characteristic \"{name}\": defined twice")));
        }
        for (k, v) in [
            ("lsl", c.lsl),
            ("usl", c.usl),
            ("target", c.target),
            ("resolution", c.resolution),
        ] {
            if let Some(v) = v {
                if !v.is_finite() {
                    return Err(fail(format!("{}: {v} is not a finite number", key(k))));
                }
            }
        }
        if let (Some(lsl), Some(usl)) = (c.lsl, c.usl) {
            if lsl >= usl {
                return Err(fail(format!("{}lsl {lsl} is not below usl {usl}", key(""))));
            }
        }
        if let Some(target) = c.target {
            if c.lsl.is_some_and(|l| target < l) || c.usl.is_some_and(|u| target > u) {
                return Err(fail(format!(
                    "{}target {target} is outside the specification limits",
                    key("")
                )));
            }
        }
        if let Some(r) = c.resolution {
            if r <= 0.0 {
                return Err(fail(format!("{}: {r} must be positive", key("resolution"))));
            }
        }
        if let Some([lo, hi]) = c.plausible {
            if !(lo.is_finite() && hi.is_finite() && lo < hi) {
                return Err(fail(format!(
                    "{}: [{lo}, {hi}] must be two finite numbers, the first below the second",
                    key("plausible")
                )));
            }
            if c.lsl.is_some_and(|l| l < lo) || c.usl.is_some_and(|u| u > hi) {
                return Err(fail(format!(
                    "{}: [{lo}, {hi}] must contain the specification limits",
                    key("plausible")
                )));
            }
        }
        characteristics.push(CharacteristicConfig {
            name,
            unit: c.unit.trim().to_string(),
            lsl: c.lsl,
            usl: c.usl,
            target: c.target,
            resolution: c.resolution,
            is_active: c.active.unwrap_or(true),
            plausible: c.plausible.map(|[lo, hi]| (lo, hi)),
        });
    }

    // [[factor]]
    let mut factors: Vec<FactorConfig> = Vec::new();
    for f in &raw.factor {
        let name = check_name(&f.name).map_err(|r| fail(format!("factor.name: {r}")))?;
        if factors.iter().any(|o| o.name == name) {
            return Err(fail(format!("factor \"{name}\": defined twice")));
        }
        let source = match (&f.column, &f.derived) {
            (Some(_), Some(_)) => {
                return Err(fail(format!(
                    "factor \"{name}\": give either column or derived, not both"
                )))
            }
            (Some(col), None) => FactorSource::Column(
                check_label(col).map_err(|r| fail(format!("factor \"{name}\": column: {r}")))?,
            ),
            (None, None) => FactorSource::Column(name.clone()),
            (None, Some(d)) if d == "shift" => {
                if shifts.is_empty() {
                    return Err(fail(format!(
                        "factor \"{name}\": derived = \"shift\" needs at least one [[shift]]"
                    )));
                }
                FactorSource::DerivedShift
            }
            (None, Some(d)) => {
                return Err(fail(format!(
                    "factor \"{name}\": derived: \"{d}\" is unknown (the only derived factor is \"shift\")"
                )))
            }
        };
        let case = match f.case.as_deref() {
            None | Some("keep") => LevelCase::Keep,
            Some("upper") => LevelCase::Upper,
            Some("lower") => LevelCase::Lower,
            Some(other) => {
                return Err(fail(format!(
                    "factor \"{name}\": case: \"{other}\" is not \"keep\", \"upper\" or \"lower\""
                )))
            }
        };
        factors.push(FactorConfig { name, source, case });
    }

    // [[layout]]
    let mut layouts: Vec<Layout> = Vec::new();
    for l in &raw.layout {
        let name = check_name(&l.name).map_err(|r| fail(format!("layout.name: {r}")))?;
        if layouts.iter().any(|o| o.name == name) {
            return Err(fail(format!("layout \"{name}\": defined twice")));
        }
        let layout = validate_layout(l, &name, &factors, &characteristics)
            .map_err(|r| fail(format!("layout \"{name}\": {r}")))?;
        layouts.push(layout);
    }
    if layouts.is_empty() {
        layouts = default_layouts(&factors);
    }

    // [[schedule]]
    let mut schedules: Vec<ScheduleConfig> = Vec::new();
    for s in &raw.schedule {
        let name = check_name(&s.name).map_err(|r| fail(format!("schedule.name: {r}")))?;
        let key = |k: &str| format!("schedule \"{name}\": {k}");
        if schedules.iter().any(|o| o.name == name) {
            return Err(fail(format!("schedule \"{name}\": defined twice")));
        }
        let period = match s.period.as_str() {
            "shift" => PeriodKind::Shift,
            "day" => PeriodKind::Day,
            "week" => PeriodKind::Week,
            "month" => PeriodKind::Month,
            other => {
                return Err(fail(format!(
                    "{}\"{other}\" is not \"shift\", \"day\", \"week\" or \"month\"",
                    key("period: ")
                )))
            }
        };
        if period == PeriodKind::Shift && shifts.is_empty() {
            return Err(fail(format!(
                "{}\"shift\" needs at least one [[shift]]",
                key("period: ")
            )));
        }
        let delay = match &s.delay {
            None => Duration::zero(),
            Some(text) => {
                parse_duration(text).map_err(|r| fail(format!("{}{r}", key("delay: "))))?
            }
        };
        for c in &s.characteristics {
            if !characteristics.iter().any(|k| &k.name == c) {
                return Err(fail(format!(
                    "{}\"{c}\" is not a configured characteristic",
                    key("characteristics: ")
                )));
            }
        }
        for f in &s.factors {
            if !factors.iter().any(|k| &k.name == f) {
                return Err(fail(format!(
                    "{}\"{f}\" is not a configured factor",
                    key("factors: ")
                )));
            }
        }
        let fdr_level = match s.fdr_level {
            None => None,
            Some(v) if v > 0.0 && v < 1.0 => Some(v),
            Some(v) => {
                return Err(fail(format!(
                    "{}{v} is not between 0 and 1 (exclusive)",
                    key("fdr_level: ")
                )))
            }
        };
        schedules.push(ScheduleConfig {
            name,
            period,
            delay,
            characteristics: s.characteristics.clone(),
            factors: s.factors.clone(),
            fdr_level,
        });
    }

    // [findings]
    let mut findings = FindingsSettings::default();
    if let Some(f) = &raw.findings {
        if let Some(n) = f.close_after {
            if !(1..=100).contains(&n) {
                return Err(fail(format!(
                    "findings.close_after: {n} is not between 1 and 100 quiet periods"
                )));
            }
            findings.close_after = n;
        }
        if let Some(n) = f.confirm_after {
            if !(1..=100).contains(&n) {
                return Err(fail(format!(
                    "findings.confirm_after: {n} is not between 1 and 100 flagged periods"
                )));
            }
            findings.confirm_after = n;
        }
    }
    // [alert]
    let alert = match &raw.alert {
        None => None,
        Some(a) => {
            if a.command.is_empty() || a.command[0].trim().is_empty() {
                return Err(fail(
                    "alert.command: give the program and its arguments, e.g. [\"/usr/local/bin/notify\", \"--to\", \"quality\"]"
                        .to_string(),
                ));
            }
            let timeout = match &a.timeout {
                None => Duration::seconds(30),
                Some(t) => parse_duration(t).map_err(|r| fail(format!("alert.timeout: {r}")))?,
            };
            Some(AlertConfig {
                command: a.command.clone(),
                timeout,
            })
        }
    };

    Ok(Config {
        path: path.to_path_buf(),
        plant,
        shifts,
        check,
        characteristics,
        factors,
        layouts,
        schedules,
        findings,
        alert,
        source_hash: String::new(),
    })
}

/// SHA-256 of configuration text, first 16 hex digits.
fn source_hash(text: &str) -> String {
    use sha2::{Digest, Sha256};
    Sha256::digest(text.as_bytes())
        .iter()
        .take(8)
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn validate_layout(
    l: &RawLayout,
    name: &str,
    factors: &[FactorConfig],
    characteristics: &[CharacteristicConfig],
) -> std::result::Result<Layout, String> {
    let column =
        |key: &str, value: &Option<String>, default: &str| -> std::result::Result<String, String> {
            match value {
                None => Ok(default.to_string()),
                Some(v) => check_label(v).map_err(|r| format!("{key}: {r}")),
            }
        };
    let timestamp_column = column("timestamp", &l.timestamp, "timestamp")?;
    if let Some(format) = &l.timestamp_format {
        check_timestamp_format(format).map_err(|r| format!("timestamp_format: {r}"))?;
    }
    for key in l.factors.keys() {
        match factors.iter().find(|f| &f.name == key) {
            None => return Err(format!("factors: \"{key}\" is not a configured factor")),
            Some(f) if f.source == FactorSource::DerivedShift => {
                return Err(format!(
                    "factors: \"{key}\" is derived from the timestamp and has no column"
                ))
            }
            Some(_) => {}
        }
    }
    let mut factor_columns = Vec::with_capacity(factors.len());
    for f in factors {
        factor_columns.push(match &f.source {
            FactorSource::DerivedShift => None,
            FactorSource::Column(default) => Some(match l.factors.get(&f.name) {
                Some(col) => check_label(col).map_err(|r| format!("factors.{}: {r}", f.name))?,
                None => default.clone(),
            }),
        });
    }
    let mut codes: Vec<(String, String)> = Vec::new();
    let other_name = |codes: &[(String, String)], code: &str| {
        codes
            .iter()
            .find(|(c, _)| c == code)
            .map(|(_, n)| n.clone())
            .unwrap_or_default()
    };
    let kind = match l.kind.as_str() {
        "long" => {
            // [layout.characteristics] maps a station's codes (CH07) to configured names.
            for (name, code) in &l.characteristics {
                if !characteristics.iter().any(|c| &c.name == name) {
                    return Err(format!(
                        "characteristics: \"{name}\" is not a configured characteristic"
                    ));
                }
                let code = check_label(code).map_err(|r| format!("characteristics.{name}: {r}"))?;
                if let Some((other, _)) = codes.iter().find(|(c, _)| *c == code) {
                    return Err(format!(
                        "characteristics: the code \"{code}\" is given to \"{name}\" and to \"{}\"",
                        other_name(&codes, other)
                    ));
                }
                codes.push((code, name.clone()));
            }
            LayoutKind::Long {
                characteristic_column: column(
                    "characteristic",
                    &l.characteristic,
                    "characteristic",
                )?,
                value_column: column("value", &l.value, "value")?,
            }
        }
        "wide" => {
            if l.characteristic.is_some() || l.value.is_some() {
                return Err(
                    "characteristic/value: a wide layout has one column per characteristic; \
                     map them in [layout.characteristics]"
                        .to_string(),
                );
            }
            let mut pairs = Vec::new();
            // File order of characteristics, not the map's alphabetical order.
            for key in l.characteristics.keys() {
                if !characteristics.iter().any(|c| &c.name == key) {
                    return Err(format!(
                        "characteristics: \"{key}\" is not a configured characteristic"
                    ));
                }
            }
            for c in characteristics {
                if let Some(col) = l.characteristics.get(&c.name) {
                    let col =
                        check_label(col).map_err(|r| format!("characteristics.{}: {r}", c.name))?;
                    pairs.push((c.name.clone(), col));
                }
            }
            LayoutKind::Wide {
                characteristic_columns: pairs,
            }
        }
        other => return Err(format!("kind: \"{other}\" is not \"long\" or \"wide\"")),
    };
    let decimal_comma = match l.decimal.as_deref() {
        None | Some(".") => false,
        Some(",") => true,
        Some(d) => {
            return Err(format!(
                "decimal: \"{}\" is not \".\" or \",\"",
                d.escape_default()
            ))
        }
    };
    let delimiter_auto = l.delimiter.as_deref() == Some("auto");
    let delimiter = match l.delimiter.as_deref() {
        // A decimal comma with no delimiter named: the semicolon such exports use.
        None if decimal_comma => b';',
        None => b',',
        Some("auto") => b',',
        Some(",") if decimal_comma => {
            return Err(
                "delimiter and decimal separator are both \",\": a value like 10,5 could not be told from two fields; use delimiter = \";\""
                    .to_string(),
            )
        }
        Some(d) if d.len() == 1 && d.is_ascii() && !matches!(d, "\"" | "\n" | "\r") => {
            d.as_bytes()[0]
        }
        Some(d) => {
            return Err(format!(
                "delimiter: \"{}\" is not one ASCII character other than a quote or a line end",
                d.escape_default()
            ))
        }
    };
    let mut ignore = Vec::new();
    for col in &l.ignore {
        ignore.push(check_label(col).map_err(|r| format!("ignore: {r}"))?);
    }
    let part_column = match &l.part {
        None => None,
        Some(c) => Some(check_label(c).map_err(|r| format!("part: {r}"))?),
    };
    let identity = match &l.identity {
        None => Identity::full(factors.len(), part_column.is_some()),
        Some(names) => {
            let mut identity = Identity {
                time: false,
                part: false,
                factors: Vec::new(),
            };
            for n in names {
                match n.as_str() {
                    "characteristic" => {}
                    "time" => identity.time = true,
                    "part" if part_column.is_some() => identity.part = true,
                    "part" => {
                        return Err("identity: \"part\" needs a part column (part = \"COLUMN\")"
                            .to_string())
                    }
                    other => match factors.iter().position(|f| f.name == other) {
                        Some(i) if !identity.factors.contains(&i) => identity.factors.push(i),
                        Some(_) => {}
                        None => {
                            let known: Vec<&str> = ["characteristic", "time", "part"]
                                .into_iter()
                                .chain(factors.iter().map(|f| f.name.as_str()))
                                .collect();
                            return Err(format!(
                                "identity: \"{other}\" is not \"characteristic\", \"time\", \"part\" or a configured factor (known: {})",
                                known.join(", ")
                            ));
                        }
                    },
                }
            }
            if !identity.time && !identity.part {
                return Err(
                    "identity: must include \"time\" or \"part\" (else every measurement of a \
                     characteristic would be the same one)"
                        .to_string(),
                );
            }
            identity.factors.sort_unstable();
            identity
        }
    };
    let subgroup = match (&l.subgroup, &l.subgroup_window) {
        (Some(_), Some(_)) => {
            return Err(
                "subgroup and subgroup_window: give one (a column names the subgroup; \
                 a window derives it where the export has no such column)"
                    .to_string(),
            )
        }
        (Some(columns), None) => {
            if l.subgroup_by.is_some() {
                return Err(
                    "subgroup_by goes with subgroup_window, not with a subgroup column".into(),
                );
            }
            let columns = match columns {
                RawColumns::One(c) => vec![c.clone()],
                RawColumns::Many(c) => c.clone(),
            };
            if columns.is_empty() {
                return Err("subgroup: an empty list (name at least one column)".into());
            }
            let mut checked = Vec::with_capacity(columns.len());
            for c in &columns {
                checked.push(check_label(c).map_err(|r| format!("subgroup: {r}"))?);
            }
            Some(SubgroupSource::Columns(checked))
        }
        (None, Some(window)) => {
            let length = parse_duration(window).map_err(|r| format!("subgroup_window: {r}"))?;
            let window_ms = length.num_milliseconds();
            if window_ms <= 0 || 86_400_000 % window_ms != 0 {
                return Err(format!(
                    "subgroup_window: \"{window}\" must divide a day evenly (e.g. \"5m\", \"10m\", \"1h\"), so windows line up from midnight"
                ));
            }
            let by = match &l.subgroup_by {
                None => factors
                    .iter()
                    .enumerate()
                    .filter(|(_, f)| matches!(f.source, FactorSource::Column(_)))
                    .map(|(i, _)| i)
                    .collect(),
                Some(names) => {
                    let mut by = Vec::new();
                    for n in names {
                        match factors.iter().position(|f| &f.name == n) {
                            Some(i) if !by.contains(&i) => by.push(i),
                            Some(_) => {}
                            None => {
                                let known: Vec<&str> =
                                    factors.iter().map(|f| f.name.as_str()).collect();
                                return Err(format!(
                                    "subgroup_by: \"{n}\" is not a configured factor (known: {})",
                                    known.join(", ")
                                ));
                            }
                        }
                    }
                    by.sort_unstable();
                    by
                }
            };
            Some(SubgroupSource::Window { window_ms, by })
        }
        (None, None) => {
            if l.subgroup_by.is_some() {
                return Err("subgroup_by goes with subgroup_window".into());
            }
            None
        }
    };
    let layout = Layout {
        name: name.to_string(),
        kind,
        timestamp_column,
        timestamp_format: l.timestamp_format.clone(),
        factor_columns,
        ignore,
        delimiter,
        delimiter_auto,
        decimal_comma,
        codes,
        part_column,
        subgroup,
        identity,
    };
    // One column, one role.
    let mut roles: Vec<(String, &str)> = vec![(layout.timestamp_column.clone(), "timestamp")];
    match &layout.kind {
        LayoutKind::Long {
            characteristic_column,
            value_column,
        } => {
            roles.push((characteristic_column.clone(), "characteristic"));
            roles.push((value_column.clone(), "value"));
        }
        LayoutKind::Wide {
            characteristic_columns,
        } => {
            for (_, col) in characteristic_columns {
                roles.push((col.clone(), "a characteristic"));
            }
        }
    }
    for col in layout.factor_columns.iter().flatten() {
        roles.push((col.clone(), "a factor"));
    }
    for col in &layout.ignore {
        roles.push((col.clone(), "ignore"));
    }
    if let Some(col) = &layout.part_column {
        roles.push((col.clone(), "the part id"));
    }
    for i in 0..roles.len() {
        for j in 0..i {
            if roles[i].0.eq_ignore_ascii_case(&roles[j].0) {
                return Err(format!(
                    "column \"{}\" is used both as {} and as {}",
                    roles[i].0, roles[j].1, roles[i].1
                ));
            }
        }
    }
    Ok(layout)
}

fn default_layouts(factors: &[FactorConfig]) -> Vec<Layout> {
    let factor_columns: Vec<Option<String>> = factors
        .iter()
        .map(|f| match &f.source {
            FactorSource::Column(c) => Some(c.clone()),
            FactorSource::DerivedShift => None,
        })
        .collect();
    vec![
        Layout {
            name: "long".to_string(),
            kind: LayoutKind::Long {
                characteristic_column: "characteristic".to_string(),
                value_column: "value".to_string(),
            },
            timestamp_column: "timestamp".to_string(),
            timestamp_format: None,
            factor_columns: factor_columns.clone(),
            ignore: Vec::new(),
            delimiter: b',',
            delimiter_auto: false,
            decimal_comma: false,
            codes: Vec::new(),
            part_column: None,
            subgroup: None,
            identity: Identity::full(factors.len(), false),
        },
        Layout {
            name: "wide".to_string(),
            kind: LayoutKind::Wide {
                characteristic_columns: Vec::new(),
            },
            timestamp_column: "timestamp".to_string(),
            timestamp_format: None,
            factor_columns,
            ignore: Vec::new(),
            delimiter: b',',
            delimiter_auto: false,
            decimal_comma: false,
            codes: Vec::new(),
            part_column: None,
            subgroup: None,
            identity: Identity::full(factors.len(), false),
        },
    ]
}

/// Position of `t` within a production day starting at `day_start`, in seconds `[0, 86400)`.
pub(crate) fn offset_in_day(t: NaiveTime, day_start: NaiveTime) -> i64 {
    (t - day_start).num_seconds().rem_euclid(86_400)
}

/// A plant name or a column name: trimmed, non-empty, no control characters, at most 200
/// characters.
pub(crate) fn check_label(text: &str) -> std::result::Result<String, String> {
    let name = text.trim();
    if name.is_empty() {
        return Err("empty name".to_string());
    }
    if name.chars().count() > 200 {
        return Err(format!("\"{name}\" is longer than 200 characters"));
    }
    if name.chars().any(|c| c.is_control()) {
        return Err(format!(
            "\"{}\" contains a control character",
            name.escape_default()
        ));
    }
    Ok(name.to_string())
}

/// The name of a characteristic, factor, shift, layout or schedule: as [`check_label`], and no
/// `=` or `,` (they separate `--where machine=M4,M5`).
pub(crate) fn check_name(text: &str) -> std::result::Result<String, String> {
    let name = check_label(text)?;
    if name.contains('=') || name.contains(',') {
        return Err(format!(
            "\"{name}\" contains '=' or ',' (they separate filters)"
        ));
    }
    Ok(name)
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = r#"
[plant]
name = "Test"
time_zone = "Europe/Berlin"
production_day_start = "06:00"
database = "plant.db"

[[shift]]
name = "night"
start = "22:00"
[[shift]]
name = "early"
start = "06:00"
[[shift]]
name = "late"
start = "14:00"

[[characteristic]]
name = "bore"
unit = "mm"
lsl = 10.0
usl = 10.2

[[factor]]
name = "machine"
[[factor]]
name = "shift"
derived = "shift"
"#;

    fn config_error(text: &str) -> String {
        Config::from_toml_str(text, "plant.toml")
            .expect_err("configuration should be refused")
            .to_string()
    }

    #[test]
    fn the_hash_is_of_the_text_parsed_not_of_the_file_later() {
        let dir = std::env::temp_dir().join(format!("samewise-config-hash-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("plant.toml");
        std::fs::write(&path, MINIMAL).unwrap();
        let loaded = Config::load(&path).unwrap();
        // SHA-256 of the same bytes (the sha2 crate's digest, first 8 bytes as hex).
        assert_eq!(loaded.source_hash, source_hash(MINIMAL));
        assert_eq!(loaded.source_hash.len(), 16);
        // An edit after loading does not change what the loaded configuration reports.
        std::fs::write(&path, format!("{MINIMAL}\n# edited\n")).unwrap();
        assert_eq!(loaded.source_hash, source_hash(MINIMAL));
        assert_ne!(Config::load(&path).unwrap().source_hash, loaded.source_hash);
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn minimal_config_is_typed() {
        let config = Config::from_toml_str(MINIMAL, "/x/y/plant.toml").unwrap();
        assert_eq!(config.plant.time_zone, chrono_tz::Europe::Berlin);
        assert_eq!(
            config.plant.day_start,
            NaiveTime::from_hms_opt(6, 0, 0).unwrap()
        );
        assert_eq!(config.plant.database, PathBuf::from("/x/y/plant.db"));
        // Shifts are ordered from the production-day start, night last.
        let names: Vec<&str> = config.shifts.iter().map(|s| s.name.as_str()).collect();
        assert_eq!(names, ["early", "late", "night"]);
        assert_eq!(
            config.factors[0].source,
            FactorSource::Column("machine".into())
        );
        assert_eq!(config.factors[1].source, FactorSource::DerivedShift);
        assert_eq!(config.layouts.len(), 2, "default long and wide layouts");
        assert_eq!(
            config.layouts[0].factor_columns,
            vec![Some("machine".into()), None]
        );
        assert_eq!(config.check.fdr_level, 0.05);
        assert!(config.characteristics[0].is_active);
    }

    #[test]
    fn lsl_not_below_usl_names_file_and_key() {
        let text = MINIMAL.replace("lsl = 10.0\nusl = 10.2", "lsl = 10.2\nusl = 10.1");
        assert_eq!(
            config_error(&text),
            "plant.toml: characteristic \"bore\": lsl 10.2 is not below usl 10.1"
        );
    }

    #[test]
    fn unknown_time_zone_is_refused() {
        let text = MINIMAL.replace("Europe/Berlin", "Europe/Atlantis");
        assert!(config_error(&text).contains("plant.time_zone: \"Europe/Atlantis\""));
    }

    #[test]
    fn unknown_key_is_refused() {
        let text = MINIMAL.replace("usl = 10.2", "usl = 10.2\nuls = 10.3");
        let message = config_error(&text);
        assert!(message.starts_with("plant.toml: "), "{message}");
        assert!(message.contains("uls"), "{message}");
    }

    #[test]
    fn bad_times_and_durations() {
        let text = MINIMAL.replace("\"06:00\"\ndatabase", "\"6 o'clock\"\ndatabase");
        assert!(config_error(&text).contains("plant.production_day_start"));
        assert_eq!(parse_duration("2h").unwrap(), Duration::hours(2));
        assert_eq!(parse_duration("30m").unwrap(), Duration::minutes(30));
        assert_eq!(parse_duration("1d").unwrap(), Duration::days(1));
        assert_eq!(parse_duration("1h30m").unwrap(), Duration::minutes(90));
        assert!(parse_duration("2").is_err());
        assert!(parse_duration("2w").is_err());
        assert!(parse_duration("").is_err());
        assert!(parse_duration("h").is_err());
    }

    #[test]
    fn shifts_must_cover_day_start() {
        let text = MINIMAL.replace(
            "name = \"early\"\nstart = \"06:00\"",
            "name = \"early\"\nstart = \"05:30\"",
        );
        assert!(config_error(&text).contains("no shift starts at production_day_start 06:00"));
    }

    #[test]
    fn duplicates_are_refused() {
        let text = format!("{MINIMAL}\n[[factor]]\nname = \"machine\"\n");
        assert!(config_error(&text).contains("factor \"machine\": defined twice"));
        let text = format!("{MINIMAL}\n[[characteristic]]\nname = \"bore\"\n");
        assert!(config_error(&text).contains("characteristic \"bore\": defined twice"));
    }

    #[test]
    fn layout_references_are_checked() {
        let layout = "\n[[layout]]\nname = \"w\"\nkind = \"wide\"\n[layout.characteristics]\nflatness = \"F\"\n";
        assert!(config_error(&format!("{MINIMAL}{layout}")).contains(
            "layout \"w\": characteristics: \"flatness\" is not a configured characteristic"
        ));
        let layout =
            "\n[[layout]]\nname = \"l\"\nkind = \"long\"\n[layout.factors]\nsupplier = \"S\"\n";
        assert!(config_error(&format!("{MINIMAL}{layout}"))
            .contains("layout \"l\": factors: \"supplier\" is not a configured factor"));
        let layout =
            "\n[[layout]]\nname = \"l\"\nkind = \"long\"\n[layout.factors]\nshift = \"S\"\n";
        assert!(config_error(&format!("{MINIMAL}{layout}")).contains("derived from the timestamp"));
        let layout = "\n[[layout]]\nname = \"l\"\nkind = \"long\"\nvalue = \"machine\"\n";
        assert!(config_error(&format!("{MINIMAL}{layout}")).contains("used both as"));
        let layout =
            "\n[[layout]]\nname = \"l\"\nkind = \"long\"\ntimestamp_format = \"%Y-%m-%d\"\n";
        assert!(config_error(&format!("{MINIMAL}{layout}")).contains("needs a date and a time"));
        let layout = "\n[[layout]]\nname = \"l\"\nkind = \"sideways\"\n";
        assert!(config_error(&format!("{MINIMAL}{layout}")).contains("kind: \"sideways\""));
    }

    #[test]
    fn schedule_is_checked() {
        let ok = format!(
            "{MINIMAL}\n[[schedule]]\nname = \"daily\"\nperiod = \"day\"\ndelay = \"2h\"\n"
        );
        let config = Config::from_toml_str(&ok, "plant.toml").unwrap();
        assert_eq!(config.schedules[0].period, PeriodKind::Day);
        assert_eq!(config.schedules[0].delay, Duration::hours(2));
        let bad = ok.replace("\"day\"", "\"fortnight\"");
        assert!(config_error(&bad).contains("schedule \"daily\": period: \"fortnight\""));
        let bad = ok.replace("\"2h\"", "\"2 hours\"");
        assert!(config_error(&bad).contains("schedule \"daily\": delay"));
        let bad = format!("{ok}characteristics = [\"nope\"]\n");
        assert!(config_error(&bad).contains("\"nope\" is not a configured characteristic"));
    }

    #[test]
    fn derived_factor_needs_shifts_and_known_source() {
        let text = MINIMAL.replace("derived = \"shift\"", "derived = \"weekday\"");
        assert!(config_error(&text).contains("\"weekday\" is unknown"));
        let text = MINIMAL.replace("derived = \"shift\"", "derived = \"shift\"\ncolumn = \"S\"");
        assert!(config_error(&text).contains("not both"));
    }
}
