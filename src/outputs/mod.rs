//! The documents the commands other than `check` print, as types deriving `Serialize` and
//! `JsonSchema`: `status`, `db check`, `event list`, `import list`, `history`, `findings` (and
//! the findings inside `check --json` and the alert command's input) and the JSON lines of
//! `schedule due`/`schedule run`. The JSON of a command is its document serialized (then
//! p-values below the floor written as bounds, `cli::format::bound_tiny_p`); the JSON Schemas in
//! docs/schema/ are generated from the same types (`schema`).
//!
//! The vocabulary of docs/json.md holds in every type: groups as
//! `{name, n, mean, sd, min, max}` in measurement units, every interval `{low, high}`, every
//! value that can be unavailable an `Option` with a sibling `<name>_reason` that is present
//! exactly when the value is `null`, times RFC 3339 with the plant's offset.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use chrono_tz::Tz;
use schemars::JsonSchema;
use serde::Serialize;

use crate::results::{DesignKind, GroupResult, LeadingTest, TestResult, TestState};
use crate::stats::Stat;

pub mod compare;
pub mod investigate;
pub mod sites;

/// `t` as RFC 3339 with the plant's offset.
pub fn plant_time(t: DateTime<Utc>, tz: Tz) -> String {
    t.with_timezone(&tz).to_rfc3339()
}

/// An instant in ms since the epoch as RFC 3339 with the plant's offset (`None` outside
/// chrono's range).
pub fn plant_time_ms(ms: i64, tz: Tz) -> Option<String> {
    DateTime::<Utc>::from_timestamp_millis(ms).map(|t| plant_time(t, tz))
}

/// The reason to write beside `value`: `reason` when it is `None`, else nothing.
pub fn reason_if_none<T>(value: &Option<T>, reason: impl Into<String>) -> Option<String> {
    value.is_none().then(|| reason.into())
}

/// A statistic as an optional value and the reason it is unavailable.
pub fn split<'a, T, U>(
    stat: &'a Stat<T>,
    f: impl FnOnce(&'a T) -> U,
) -> (Option<U>, Option<String>) {
    match stat {
        Ok(v) => (Some(f(v)), None),
        Err(e) => (None, Some(e.reason.clone())),
    }
}

/// A finite number, or `None` (JSON has no NaN or infinity).
pub fn finite(x: Option<f64>) -> Option<f64> {
    x.filter(|v| v.is_finite())
}

/// The unit and specification limits of a characteristic, each limit `null` with its reason
/// when it is not configured.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Limits {
    /// The characteristic's unit (empty when none is configured).
    pub unit: String,
    /// Lower specification limit.
    pub lsl: Option<f64>,
    /// Why `lsl` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lsl_reason: Option<String>,
    /// Upper specification limit.
    pub usl: Option<f64>,
    /// Why `usl` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub usl_reason: Option<String>,
    /// Target.
    pub target: Option<f64>,
    /// Why `target` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub target_reason: Option<String>,
}

impl Limits {
    /// The limits of `characteristic` in `config` (all `null` for one no longer configured).
    pub fn of(config: &crate::config::Config, characteristic: &str) -> Limits {
        let c = config.characteristic(characteristic);
        let lsl = c.and_then(|c| c.lsl);
        let usl = c.and_then(|c| c.usl);
        let target = c.and_then(|c| c.target);
        let why = if c.is_none() {
            "the characteristic is no longer in the configuration"
        } else {
            "no such limit configured for this characteristic"
        };
        Limits {
            unit: c.map(|c| c.unit.clone()).unwrap_or_default(),
            lsl,
            lsl_reason: reason_if_none(&lsl, why),
            usl,
            usl_reason: reason_if_none(&usl, why),
            target,
            target_reason: reason_if_none(&target, why),
        }
    }
}

/// One group of a stored test in measurement units: the shape of `groups[]` everywhere.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct GroupSummary {
    /// The level's name.
    pub name: String,
    /// Values in the group (subgroups for a nested or mixed design).
    pub n: u64,
    /// Mean, in units.
    pub mean: f64,
    /// SD.
    pub sd: Option<f64>,
    /// Why `sd` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_reason: Option<String>,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
}

impl From<&GroupResult> for GroupSummary {
    fn from(g: &GroupResult) -> Self {
        let sd = finite(g.sd);
        GroupSummary {
            name: g.name.clone(),
            n: g.n,
            mean: g.mean,
            sd,
            sd_reason: reason_if_none(&sd, "a group of one value has no SD"),
            min: g.min,
            max: g.max,
        }
    }
}

/// The groups, in units, of the test of `characteristic` x `factor` in stored run `run_id`
/// (empty when the run holds no such test).
pub fn stored_groups(
    store: &dyn crate::storage::PlantStore,
    run_id: i64,
    characteristic: &str,
    factor: &str,
) -> crate::Result<Vec<GroupSummary>> {
    Ok(groups_of_test(
        &store.run_content(run_id)?,
        characteristic,
        factor,
    ))
}

/// The groups, in units, of the test of `characteristic` x `factor` in a run's content (empty
/// when the run holds no such test).
pub fn groups_of_test(
    content: &crate::results::RunContent,
    characteristic: &str,
    factor: &str,
) -> Vec<GroupSummary> {
    content
        .tests
        .iter()
        .find(|t| t.characteristic == characteristic && t.factor == factor)
        .map(|t| t.groups.iter().map(GroupSummary::from).collect())
        .unwrap_or_default()
}

/// Group means as one CSV cell: `name=mean;...` in units at full precision.
pub fn group_means_cell(groups: &[GroupSummary]) -> String {
    groups
        .iter()
        .map(|g| format!("{}={:?}", g.name, g.mean))
        .collect::<Vec<_>>()
        .join(";")
}

/// The two degrees of freedom of a test (`df1`, `df2`), each `null` with its reason when the
/// test has no such number.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Dfs {
    /// Numerator degrees of freedom.
    pub df1: Option<f64>,
    /// Why `df1` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub df1_reason: Option<String>,
    /// Denominator degrees of freedom.
    pub df2: Option<f64>,
    /// Why `df2` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub df2_reason: Option<String>,
}

impl From<&crate::stats::TestResult> for Dfs {
    fn from(t: &crate::stats::TestResult) -> Self {
        let none = "the test has no such degrees of freedom";
        Dfs {
            df1: t.df1,
            df1_reason: reason_if_none(&t.df1, none),
            df2: t.df2,
            df2_reason: reason_if_none(&t.df2, none),
        }
    }
}

/// A test with its statistic, degrees of freedom and p-value.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct StatTest {
    /// The statistic.
    pub statistic: f64,
    /// Its degrees of freedom.
    #[serde(flatten)]
    pub dfs: Dfs,
    /// p-value.
    pub p: f64,
}

impl From<&crate::stats::TestResult> for StatTest {
    fn from(t: &crate::stats::TestResult) -> Self {
        StatTest {
            statistic: t.statistic,
            dfs: Dfs::from(t),
            p: t.p,
        }
    }
}

/// An F test.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct FTest {
    /// F.
    pub f: f64,
    /// Its degrees of freedom.
    #[serde(flatten)]
    pub dfs: Dfs,
    /// p-value.
    pub p: f64,
}

impl From<&crate::stats::TestResult> for FTest {
    fn from(t: &crate::stats::TestResult) -> Self {
        FTest {
            f: t.statistic,
            dfs: Dfs::from(t),
            p: t.p,
        }
    }
}

/// The degrees of freedom and p-value of a test with a chi-square reference distribution.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct DfP {
    /// Degrees of freedom.
    pub df: Option<f64>,
    /// Why `df` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub df_reason: Option<String>,
    /// p-value.
    pub p: f64,
}

impl From<&crate::stats::TestResult> for DfP {
    fn from(t: &crate::stats::TestResult) -> Self {
        DfP {
            df: t.df1,
            df_reason: reason_if_none(&t.df1, "the test has no degrees of freedom"),
            p: t.p,
        }
    }
}

/// A test with a chi-square reference distribution: statistic, degrees of freedom, p-value.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ChiSquareTest {
    /// The statistic.
    pub statistic: f64,
    /// Degrees of freedom and p-value.
    #[serde(flatten)]
    pub rest: DfP,
}

impl From<&crate::stats::TestResult> for ChiSquareTest {
    fn from(t: &crate::stats::TestResult) -> Self {
        ChiSquareTest {
            statistic: t.statistic,
            rest: DfP::from(t),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// status

/// One characteristic of `status --json`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CharacteristicLine {
    /// Its name.
    pub name: String,
    /// Measurements stored.
    pub measurements: u64,
    /// First measurement.
    pub first: Option<String>,
    /// Why `first` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub first_reason: Option<String>,
    /// Last measurement.
    pub last: Option<String>,
    /// Why `last` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_reason: Option<String>,
    /// Whether the configuration names it.
    pub configured: bool,
    /// Whether checks include it.
    pub active: bool,
}

/// The latest import of `status --json`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct LastImport {
    /// Import id.
    pub id: i64,
    /// File name.
    pub file_name: String,
    /// When it started.
    pub started_at: String,
    /// Measurements it stored.
    pub measurements: u64,
}

/// The latest run of the alert command.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct LastAlert {
    /// When it started.
    pub started_at: String,
    /// The command line.
    pub command: String,
    /// Findings it was given.
    pub findings: u32,
    /// Its exit code.
    pub exit_code: Option<i32>,
    /// Why `exit_code` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub exit_code_reason: Option<String>,
    /// What went wrong.
    pub error: Option<String>,
    /// Why `error` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error_reason: Option<String>,
}

/// A period that data made stale after its check.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct StalePeriod {
    /// The schedule that checked it (or `by hand`).
    pub schedule: String,
    /// `shift`, `day`, `week` or `month`.
    pub period_kind: String,
    /// Its label.
    pub period: String,
}

/// The document `samewise status --json` prints.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct StatusDocument {
    /// The database: the file as configured, or the PostgreSQL schema and server.
    pub database: String,
    /// The database's schema version.
    pub schema_version: u32,
    /// The plant's time zone.
    pub time_zone: String,
    /// Per characteristic.
    pub characteristics: Vec<CharacteristicLine>,
    /// Measurements over all characteristics.
    pub measurements: u64,
    /// Imports recorded.
    pub imports: u64,
    /// The latest import.
    pub last_import: Option<LastImport>,
    /// Why `last_import` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_import_reason: Option<String>,
    /// Rejected rows stored.
    pub rejected_rows: u64,
    /// Events recorded.
    pub events: u64,
    /// Open findings.
    pub open_findings: usize,
    /// The latest run of the alert command.
    pub last_alert: Option<LastAlert>,
    /// Why `last_alert` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_alert_reason: Option<String>,
    /// Checked periods that later data made stale.
    pub stale_periods: Vec<StalePeriod>,
}

impl StatusDocument {
    /// The document of a store's status.
    pub fn new(
        config: &crate::config::Config,
        status: &crate::storage::Status,
        last_alert: Option<crate::storage::AlertRecord>,
        open_findings: usize,
    ) -> StatusDocument {
        let tz = config.plant.time_zone;
        let none_stored = "no measurement stored";
        let characteristics = status
            .characteristics
            .iter()
            .map(|c| {
                let first = c.first.map(|t| plant_time(t, tz));
                let last = c.last.map(|t| plant_time(t, tz));
                CharacteristicLine {
                    name: c.name.clone(),
                    measurements: c.n_obs,
                    first_reason: reason_if_none(&first, none_stored),
                    first,
                    last_reason: reason_if_none(&last, none_stored),
                    last,
                    configured: c.is_configured,
                    active: c.is_active,
                }
            })
            .collect();
        let last_import = status.last_import.as_ref().map(|p| LastImport {
            id: p.id,
            file_name: p.file_name.clone(),
            started_at: plant_time(p.started_at, tz),
            measurements: p.accepted,
        });
        let last_alert = last_alert.map(|a| LastAlert {
            started_at: plant_time(a.started, tz),
            command: a.command,
            findings: a.n_findings,
            exit_code_reason: reason_if_none(
                &a.exit_code,
                "the command did not exit by itself (it could not start, was killed or timed out; see error)",
            ),
            exit_code: a.exit_code,
            error_reason: reason_if_none(&a.error, "delivered (exit status 0)"),
            error: a.error,
        });
        StatusDocument {
            database: crate::storage::describe(config),
            schema_version: status.schema_version,
            time_zone: tz.name().to_string(),
            characteristics,
            measurements: status.characteristics.iter().map(|c| c.n_obs).sum(),
            imports: status.n_imports,
            last_import_reason: reason_if_none(&last_import, "nothing imported yet"),
            last_import,
            rejected_rows: status.n_rejected,
            events: status.n_events,
            open_findings,
            last_alert_reason: reason_if_none(
                &last_alert,
                if config.alert.is_some() {
                    "the alert command has not run yet"
                } else {
                    "no [alert] configured"
                },
            ),
            last_alert,
            stale_periods: status
                .stale_periods
                .iter()
                .map(|(schedule, kind, label)| StalePeriod {
                    schedule: schedule.clone(),
                    period_kind: kind.clone(),
                    period: label.clone(),
                })
                .collect(),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// db check

/// The document `samewise db check --json` prints.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct DbCheckDocument {
    /// The database: the file as configured, or the PostgreSQL schema and server.
    pub database: String,
    /// True when nothing is wrong (the exit status is 1 otherwise).
    pub sound: bool,
    /// Rows per table.
    pub counts: BTreeMap<String, u64>,
    /// SQLite's integrity messages (`["ok"]` when sound).
    pub integrity: Vec<String>,
    /// Rows whose parent is missing.
    pub orphan_rows: Vec<String>,
    /// Other consistency problems.
    pub problems: Vec<String>,
}

impl DbCheckDocument {
    /// The document of an integrity report.
    pub fn new(database: String, report: &crate::storage::IntegrityReport) -> Self {
        DbCheckDocument {
            database,
            sound: report.is_ok(),
            counts: report.counts.iter().cloned().collect(),
            integrity: report.integrity.clone(),
            orphan_rows: report.foreign_keys.clone(),
            problems: report.problems.clone(),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// event list

/// A factor and level an event concerns.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ScopeEntry {
    /// The factor.
    pub factor: String,
    /// The level.
    pub level: String,
}

/// One logged process change.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct EventLine {
    /// Event id.
    pub id: i64,
    /// When the change happened.
    pub at: String,
    /// What changed.
    pub note: String,
    /// The characteristic it concerns.
    pub characteristic: Option<String>,
    /// Why `characteristic` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub characteristic_reason: Option<String>,
    /// The levels it concerns (empty: every level).
    pub scope: Vec<ScopeEntry>,
    /// When it was recorded.
    pub recorded: String,
    /// When it was removed.
    pub removed: Option<String>,
    /// Why `removed` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub removed_reason: Option<String>,
}

impl EventLine {
    /// The line of a stored event.
    pub fn new(e: &crate::storage::Event, tz: Tz) -> EventLine {
        let removed = e.removed.map(|t| plant_time(t, tz));
        EventLine {
            id: e.id,
            at: plant_time(e.at, tz),
            note: e.note.clone(),
            characteristic_reason: reason_if_none(
                &e.characteristic,
                "the event concerns every characteristic",
            ),
            characteristic: e.characteristic.clone(),
            scope: e
                .scope
                .iter()
                .map(|(f, l)| ScopeEntry {
                    factor: f.clone(),
                    level: l.clone(),
                })
                .collect(),
            recorded: plant_time(e.created, tz),
            removed_reason: reason_if_none(&removed, "not removed"),
            removed,
        }
    }
}

/// The document `samewise event list --json` prints.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct EventListDocument {
    /// The events, in time order.
    pub events: Vec<EventLine>,
    /// Whether removed events are listed (`--all`).
    pub include_removed: bool,
}

// ---------------------------------------------------------------------------------------------
// import list

/// One import of `import list --json`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ImportLine {
    /// Import id.
    pub id: i64,
    /// File name.
    pub file_name: String,
    /// The path it was read from.
    pub path: String,
    /// SHA-256 of the file's bytes.
    pub sha256: String,
    /// `long` or `wide`.
    pub layout: String,
    /// When it started.
    pub started_at: String,
    /// When it finished.
    pub finished_at: String,
    /// Measurements read.
    pub measurements_read: u64,
    /// Measurements stored.
    pub stored: u64,
    /// Measurements already stored before.
    pub duplicates: u64,
    /// Rejected measurements.
    pub rejected: u64,
    /// Rejected measurements beyond the number kept with their reasons.
    pub rejected_not_kept: u64,
    /// Imported again with `--force`.
    pub forced: bool,
    /// First stored measurement.
    pub first_measurement: Option<String>,
    /// Why `first_measurement` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub first_measurement_reason: Option<String>,
    /// Last stored measurement.
    pub last_measurement: Option<String>,
    /// Why `last_measurement` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_measurement_reason: Option<String>,
    /// The import this row records the undo of.
    pub undoes: Option<i64>,
    /// Why `undoes` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub undoes_reason: Option<String>,
    /// The import that undid this one.
    pub undone_by: Option<i64>,
    /// Why `undone_by` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub undone_by_reason: Option<String>,
}

impl ImportLine {
    /// The line of a stored import.
    pub fn new(r: &crate::storage::ImportRecord, tz: Tz) -> ImportLine {
        let empty = if r.undoes.is_some() {
            "an undo stores nothing; see the undone import"
        } else {
            "the import stored no measurement"
        };
        let first = r.first_measurement.map(|t| plant_time(t, tz));
        let last = r.last_measurement.map(|t| plant_time(t, tz));
        ImportLine {
            id: r.id,
            file_name: r.file_name.clone(),
            path: r.path.clone(),
            sha256: r.sha256.clone(),
            layout: r.layout.clone(),
            started_at: plant_time(r.started_at, tz),
            finished_at: plant_time(r.finished_at, tz),
            measurements_read: r.measurements_read,
            stored: r.stored,
            duplicates: r.duplicates,
            rejected: r.rejected,
            rejected_not_kept: r.rejected_not_kept,
            forced: r.forced,
            first_measurement_reason: reason_if_none(&first, empty),
            first_measurement: first,
            last_measurement_reason: reason_if_none(&last, empty),
            last_measurement: last,
            undoes: r.undoes,
            undoes_reason: reason_if_none(&r.undoes, "an import, not an undo"),
            undone_by: r.undone_by,
            undone_by_reason: reason_if_none(&r.undone_by, "not undone"),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// schedule

/// What happened to one period of a scheduler pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum PassOutcome {
    /// Run and stored as complete.
    Completed,
    /// Run and failed (the error is stored with the run).
    Failed,
    /// Finished by someone else between listing and taking the lease.
    AlreadyDone,
    /// Another scheduler holds the lease.
    HeldByAnotherScheduler,
}

/// One period of a pass.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct PassPeriod {
    /// Schedule name.
    pub schedule: String,
    /// Period label.
    pub period: String,
    /// What happened.
    pub outcome: PassOutcome,
    /// The run this pass made.
    pub run_id: Option<i64>,
    /// Why `run_id` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub run_id_reason: Option<String>,
    /// Flagged tests of the run.
    pub tests_flagged: Option<u64>,
    /// Why `tests_flagged` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub tests_flagged_reason: Option<String>,
    /// The error of a failed run.
    pub error: Option<String>,
    /// Why `error` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error_reason: Option<String>,
}

impl PassPeriod {
    /// The line of one entry of a pass.
    pub fn new(e: &crate::schedule::PassEntry) -> PassPeriod {
        use crate::schedule::PeriodOutcome as O;
        let not_run = "this pass did not run the period";
        let (outcome, run_id, flagged, error) = match &e.outcome {
            O::Completed(id, n) => (PassOutcome::Completed, Some(*id), Some(*n as u64), None),
            O::Failed(id, why) => (PassOutcome::Failed, Some(*id), None, Some(why.clone())),
            O::AlreadyDone => (PassOutcome::AlreadyDone, None, None, None),
            O::Leased => (PassOutcome::HeldByAnotherScheduler, None, None, None),
        };
        PassPeriod {
            schedule: e.schedule.clone(),
            period: e.period.clone(),
            outcome,
            run_id_reason: reason_if_none(&run_id, not_run),
            run_id,
            tests_flagged_reason: reason_if_none(
                &flagged,
                if outcome == PassOutcome::Failed {
                    "the run failed"
                } else {
                    not_run
                },
            ),
            tests_flagged: flagged,
            error_reason: reason_if_none(
                &error,
                if outcome == PassOutcome::Completed {
                    "the run completed"
                } else {
                    not_run
                },
            ),
            error,
        }
    }
}

/// The summary at the end of a pass.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct PassSummary {
    /// Periods run to completion.
    pub periods_run: usize,
    /// Of those, periods with a flag.
    pub with_flag: usize,
    /// Periods whose run failed.
    pub failed: usize,
    /// Every period of the pass.
    pub periods: Vec<PassPeriod>,
}

/// A log line of the scheduler.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct LogLine {
    /// When, RFC 3339 with the plant's offset (whole seconds).
    pub time: String,
    /// What happened.
    pub message: String,
}

/// The last line of a `schedule due` pass.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct SummaryLine {
    /// The summary.
    pub summary: PassSummary,
}

/// One JSON line of `schedule due --json` / `schedule run --json`: a log line or the summary.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum ScheduleLine {
    /// A log line.
    Log(LogLine),
    /// The summary of a pass.
    Summary(SummaryLine),
}

// ---------------------------------------------------------------------------------------------
// history

/// The standing-out group of a test.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct StandingOut {
    /// The level's name.
    pub level: String,
    /// Its mean minus the grand mean, in units.
    pub diff: Option<f64>,
    /// Why `diff` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub diff_reason: Option<String>,
    /// The same in within-group SDs.
    pub sd_units: Option<f64>,
    /// Why `sd_units` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_units_reason: Option<String>,
    /// The same in % of the tolerance width.
    pub pct_tolerance: Option<f64>,
    /// Why `pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pct_tolerance_reason: Option<String>,
}

impl StandingOut {
    /// The standing-out group of a test, `None` when it has none.
    pub fn of(t: &TestResult) -> Option<StandingOut> {
        let s = &t.stands_out;
        let level = s.level.clone()?;
        let diff = finite(s.diff);
        let sd_units = finite(s.sd_units);
        let pct = finite(s.pct_tolerance);
        Some(StandingOut {
            level,
            diff_reason: reason_if_none(&diff, "not stored for this test (see notes)"),
            diff,
            sd_units_reason: reason_if_none(&sd_units, "the within-group SD is unavailable"),
            sd_units,
            pct_tolerance_reason: reason_if_none(
                &pct,
                if t.tolerance.is_none() {
                    "no specification limits (LSL and USL) configured for this characteristic"
                } else {
                    "not stored for this test (see notes)"
                },
            ),
            pct_tolerance: pct,
        })
    }
}

/// One period of `history --json` (and one row of `history --csv`).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct HistoryPeriod {
    /// The period's label.
    pub period: String,
    /// Its first instant.
    pub start: Option<String>,
    /// Why `start` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub start_reason: Option<String>,
    /// The first instant after it.
    pub end: Option<String>,
    /// Why `end` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub end_reason: Option<String>,
    /// The run the result comes from (the latest complete version of the period).
    pub run_id: i64,
    /// Its version.
    pub version: i64,
    /// The period was checked again after data arrived or were undone.
    pub revised: bool,
    /// The verdict.
    pub state: TestState,
    /// Values in the test.
    pub n_obs: u64,
    /// Groups large enough to take part.
    pub n_groups: u64,
    /// The sampling design.
    pub design: DesignKind,
    /// Subgroups in the test's values.
    pub n_subgroups: Option<u64>,
    /// Why `n_subgroups` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub n_subgroups_reason: Option<String>,
    /// The leading test.
    pub leading_method: Option<LeadingTest>,
    /// Why `leading_method` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub leading_method_reason: Option<String>,
    /// Its statistic.
    pub statistic: Option<f64>,
    /// Why `statistic` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub statistic_reason: Option<String>,
    /// Its p-value.
    pub p: Option<f64>,
    /// Why `p` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub p_reason: Option<String>,
    /// The false-discovery q-value.
    pub q: Option<f64>,
    /// Why `q` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub q_reason: Option<String>,
    /// The between-group share of the variance.
    pub share_between: Option<f64>,
    /// Why `share_between` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub share_between_reason: Option<String>,
    /// The within-group (residual) SD.
    pub within_sd: Option<f64>,
    /// Why `within_sd` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub within_sd_reason: Option<String>,
    /// The standing-out group.
    pub stands_out: Option<StandingOut>,
    /// Why `stands_out` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stands_out_reason: Option<String>,
    /// The groups, in units.
    pub groups: Vec<GroupSummary>,
    /// Notes of the analysis.
    pub notes: String,
}

impl HistoryPeriod {
    /// The line of one stored result; `groups` are the test's groups (the history query reads
    /// the test without them).
    pub fn new(
        p: &crate::storage::runs::HistoryPoint,
        groups: Vec<GroupSummary>,
        tz: Tz,
    ) -> HistoryPeriod {
        let t = &p.test;
        let why = if matches!(
            t.state,
            TestState::TooFewToCompare | TestState::TooLittleData
        ) {
            format!("{}: no test was run", t.state.label())
        } else {
            "not available for this test (see notes)".to_string()
        };
        let start = plant_time_ms(p.run.header.period_start_ms, tz);
        let end = plant_time_ms(p.run.header.period_end_ms, tz);
        let out_of_range = "the stored instant is outside the calendar's range";
        let statistic = finite(t.leading.statistic);
        let pv = finite(t.leading.p);
        let q = finite(t.q_value);
        let share = finite(t.variance_components.share_between);
        let within = finite(t.anova.resid_sd);
        let stands_out = StandingOut::of(t);
        HistoryPeriod {
            period: p.run.header.period_label.clone(),
            start_reason: reason_if_none(&start, out_of_range),
            start,
            end_reason: reason_if_none(&end, out_of_range),
            end,
            run_id: p.run.run_id,
            version: p.run.version,
            revised: p.complete_versions > 1,
            state: t.state,
            n_obs: t.n_obs,
            n_groups: t.n_groups_used,
            design: t.design.kind.unwrap_or(DesignKind::Independent),
            n_subgroups: t.design.n_subgroups,
            n_subgroups_reason: reason_if_none(
                &t.design.n_subgroups,
                "no subgroups: the values were tested as independent",
            ),
            leading_method: t.leading.method,
            leading_method_reason: reason_if_none(&t.leading.method, why.clone()),
            statistic_reason: reason_if_none(&statistic, why.clone()),
            statistic,
            p_reason: reason_if_none(&pv, why.clone()),
            p: pv,
            q_reason: reason_if_none(&q, why.clone()),
            q,
            share_between_reason: reason_if_none(&share, why.clone()),
            share_between: share,
            within_sd_reason: reason_if_none(&within, why.clone()),
            within_sd: within,
            stands_out_reason: reason_if_none(&stands_out, why),
            stands_out,
            groups,
            notes: t.notes.clone(),
        }
    }
}

/// The document `samewise history --json` prints.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct HistoryDocument {
    /// The characteristic.
    pub characteristic: String,
    /// The factor whose groups are compared.
    pub factor: String,
    /// Unit and limits of the characteristic.
    #[serde(flatten)]
    pub limits: Limits,
    /// `shift`, `day`, `week` or `month`.
    pub period_kind: String,
    /// The periods, oldest first.
    pub periods: Vec<HistoryPeriod>,
    /// The caution every output carries.
    pub caution: String,
}

// ---------------------------------------------------------------------------------------------
// findings

/// When the standing-out group's offset began, with its interval.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Onset {
    /// The estimate.
    pub at: Option<String>,
    /// Why `at` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub at_reason: Option<String>,
    /// Lower end of its interval.
    pub low: Option<String>,
    /// Why `low` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub low_reason: Option<String>,
    /// Upper end of its interval.
    pub high: Option<String>,
    /// Why `high` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub high_reason: Option<String>,
    /// How it was found.
    pub method: String,
}

/// The nearest logged process change in scope at or before the onset.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct NearestEvent {
    /// Event id.
    pub id: i64,
    /// When it happened.
    pub at: String,
    /// What changed.
    pub note: Option<String>,
    /// Why `note` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note_reason: Option<String>,
    /// Hours from the event to the onset.
    pub hours_before_onset: Option<f64>,
    /// Why `hours_before_onset` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hours_before_onset_reason: Option<String>,
}

/// An engineer's note on a finding.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct FindingNote {
    /// When it was written.
    pub at: String,
    /// The note.
    pub text: String,
}

/// One finding, as `findings --json` lists it (and `check --json` and the alert command's
/// input embed it); one row of `findings --csv`.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct FindingLine {
    /// Its number.
    pub id: i64,
    /// `open` or `closed`.
    pub status: String,
    /// The kind of the periods it was found in.
    pub period_kind: String,
    /// The characteristic.
    pub characteristic: String,
    /// The factor.
    pub factor: String,
    /// The standing-out level.
    pub group: String,
    /// Unit and limits of the characteristic (from the configuration).
    #[serde(flatten)]
    pub limits: Limits,
    /// How often it closed and flagged again.
    pub times_reopened: u32,
    /// The first period it ever flagged.
    pub first_flagged: String,
    /// Its start.
    pub first_flagged_start: String,
    /// The first flagged period since the last reopening.
    pub episode_first_flagged: String,
    /// Its start.
    pub episode_start: String,
    /// The last flagged period.
    pub last_flagged: String,
    /// Its end.
    pub last_flagged_end: String,
    /// The latest complete run of the last flagged period.
    pub last_run_id: Option<i64>,
    /// Why `last_run_id` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_run_id_reason: Option<String>,
    /// Flagged periods of the current episode.
    pub periods_flagged: u32,
    /// Of those, flags resting on weak evidence.
    pub periods_flagged_on_weak_evidence: u32,
    /// Checked periods since the last flag.
    pub quiet_periods_since: u32,
    /// Standing-out mean minus the grand mean in the last flagged period, in units.
    pub effect_now: Option<f64>,
    /// Why `effect_now` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub effect_now_reason: Option<String>,
    /// The same in within-group SDs.
    pub effect_now_sd: Option<f64>,
    /// Why `effect_now_sd` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub effect_now_sd_reason: Option<String>,
    /// The same in % of the tolerance.
    pub effect_now_pct_tolerance: Option<f64>,
    /// Why `effect_now_pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub effect_now_pct_tolerance_reason: Option<String>,
    /// Within-group SD of the last flagged period.
    pub within_sd: Option<f64>,
    /// Why `within_sd` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub within_sd_reason: Option<String>,
    /// The largest effect of the current episode, in units.
    pub peak_effect: Option<f64>,
    /// Why `peak_effect` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub peak_effect_reason: Option<String>,
    /// The same in % of the tolerance.
    pub peak_pct_tolerance: Option<f64>,
    /// Why `peak_pct_tolerance` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub peak_pct_tolerance_reason: Option<String>,
    /// The period of the peak.
    pub peak_period: Option<String>,
    /// Why `peak_period` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub peak_period_reason: Option<String>,
    /// When the offset began.
    pub onset: Onset,
    /// The nearest logged change before the onset.
    pub nearest_event: Option<NearestEvent>,
    /// Why `nearest_event` is null.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub nearest_event_reason: Option<String>,
    /// The groups of the test in the last flagged period's latest run, in units.
    pub groups: Vec<GroupSummary>,
    /// Engineers' notes, oldest first.
    pub notes: Vec<FindingNote>,
    /// When it last changed.
    pub updated_at: String,
}

impl FindingLine {
    /// The line of a stored finding, with its notes and the run of its last flagged period
    /// (`None` when that period has no complete run any more) and that run's groups of the
    /// finding's test.
    pub fn new(
        f: &crate::model::Finding,
        limits: Limits,
        notes: Vec<(DateTime<Utc>, String)>,
        last_run: Option<(i64, Vec<GroupSummary>)>,
        tz: Tz,
    ) -> FindingLine {
        let no_effect = "the run stored no standing-out difference for this period";
        let no_sd = "no within-group SD";
        let no_tolerance = "no tolerance (or single limit) configured";
        let effect_now = finite(f.effect_now);
        let effect_now_sd = finite(f.effect_now_sd);
        let effect_now_pct = finite(f.effect_now_pct);
        let within_sd = finite(f.within_sd);
        let peak_effect = finite(f.peak_effect);
        let peak_pct = finite(f.peak_pct);
        let onset_at = f.onset.map(|t| plant_time(t, tz));
        let no_interval = "no change point was found: the onset is the first flagged period";
        let onset = Onset {
            at_reason: reason_if_none(&onset_at, "not computed yet"),
            at: onset_at,
            low: f.onset_low.map(|t| plant_time(t, tz)),
            low_reason: reason_if_none(&f.onset_low, no_interval),
            high: f.onset_high.map(|t| plant_time(t, tz)),
            high_reason: reason_if_none(&f.onset_high, no_interval),
            method: f.onset_method.clone(),
        };
        let nearest_event = match (f.event_id, f.event_at) {
            (Some(id), Some(at)) => {
                let hours = f
                    .onset
                    .map(|o| (o - at).num_minutes() as f64 / 60.0)
                    .filter(|h| h.is_finite());
                Some(NearestEvent {
                    id,
                    at: plant_time(at, tz),
                    note_reason: reason_if_none(&f.event_note, "the event has no note"),
                    note: f.event_note.clone(),
                    hours_before_onset_reason: reason_if_none(
                        &hours,
                        "the onset is not computed yet",
                    ),
                    hours_before_onset: hours,
                })
            }
            _ => None,
        };
        let (last_run_id, groups) = match last_run {
            Some((id, groups)) => (Some(id), groups),
            None => (None, Vec::new()),
        };
        FindingLine {
            id: f.id,
            status: f.status.as_str().to_string(),
            period_kind: f.period_kind.as_str().to_string(),
            characteristic: f.characteristic.clone(),
            factor: f.factor.clone(),
            group: f.level.clone(),
            limits: Limits {
                unit: f.unit.clone(),
                ..limits
            },
            times_reopened: f.times_reopened,
            first_flagged: f.first_label.clone(),
            first_flagged_start: plant_time(f.first_start, tz),
            episode_first_flagged: f.episode_label.clone(),
            episode_start: plant_time(f.episode_start, tz),
            last_flagged: f.last_label.clone(),
            last_flagged_end: plant_time(f.last_end, tz),
            last_run_id_reason: reason_if_none(
                &last_run_id,
                "the last flagged period has no complete run any more",
            ),
            last_run_id,
            periods_flagged: f.n_flagged,
            periods_flagged_on_weak_evidence: f.n_weak,
            quiet_periods_since: f.quiet_periods,
            effect_now_reason: reason_if_none(&effect_now, no_effect),
            effect_now,
            effect_now_sd_reason: reason_if_none(&effect_now_sd, no_sd),
            effect_now_sd,
            effect_now_pct_tolerance_reason: reason_if_none(&effect_now_pct, no_tolerance),
            effect_now_pct_tolerance: effect_now_pct,
            within_sd_reason: reason_if_none(&within_sd, no_sd),
            within_sd,
            peak_effect_reason: reason_if_none(&peak_effect, no_effect),
            peak_effect,
            peak_pct_tolerance_reason: reason_if_none(&peak_pct, no_tolerance),
            peak_pct_tolerance: peak_pct,
            peak_period_reason: reason_if_none(&f.peak_label, no_effect),
            peak_period: f.peak_label.clone(),
            onset,
            nearest_event_reason: reason_if_none(
                &nearest_event,
                "no logged process change in scope (this characteristic or all, this group or none) at or before the onset",
            ),
            nearest_event,
            groups,
            notes: notes
                .into_iter()
                .map(|(at, text)| FindingNote {
                    at: plant_time(at, tz),
                    text,
                })
                .collect(),
            updated_at: plant_time(f.updated, tz),
        }
    }
}

/// The findings a check brought up to date (`check --json`'s `findings`).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct CheckFindings {
    /// Findings confirmed for the first time.
    pub new: Vec<FindingLine>,
    /// Findings that closed or were confirmed again.
    pub changed: Vec<FindingLine>,
    /// The numbers of the open findings of the period kind.
    pub open: Vec<i64>,
}

/// What the `[alert]` command reads on its standard input.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct AlertDocument {
    /// The plant's name.
    pub plant: String,
    /// When the document was made.
    pub generated_at: String,
    /// Findings confirmed for the first time.
    pub new: Vec<FindingLine>,
    /// Findings that closed or were confirmed again.
    pub changed: Vec<FindingLine>,
    /// How many findings are open.
    pub open: usize,
    /// The caution every output carries.
    pub caution: String,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_group_of_one_has_an_sd_reason_and_the_means_cell_reads_back() {
        let g =
            GroupResult::from_offsets("M1".into(), 1, "10.5".into(), 0.25, None, 0.25, 0.25, None);
        let s = GroupSummary::from(&g);
        let v = serde_json::to_value(&s).unwrap();
        assert_eq!(v["mean"], 10.75);
        assert!(v["sd"].is_null());
        assert_eq!(v["sd_reason"], "a group of one value has no SD");
        let two = GroupSummary {
            name: "M2".into(),
            sd: Some(0.1),
            sd_reason: None,
            ..s.clone()
        };
        assert!(serde_json::to_value(&two)
            .unwrap()
            .get("sd_reason")
            .is_none());
        assert_eq!(group_means_cell(&[s, two]), "M1=10.75;M2=10.75");
    }

    #[test]
    fn a_pass_entry_says_why_its_values_are_missing() {
        let e = crate::schedule::PassEntry {
            schedule: "daily".into(),
            period: "2026-11-30".into(),
            outcome: crate::schedule::PeriodOutcome::Failed(7, "disk full".into()),
        };
        let v = serde_json::to_value(PassPeriod::new(&e)).unwrap();
        assert_eq!(v["outcome"], "failed");
        assert_eq!(v["run_id"], 7);
        assert!(v["tests_flagged"].is_null());
        assert_eq!(v["tests_flagged_reason"], "the run failed");
        assert!(v.get("error_reason").is_none());
        let line = ScheduleLine::Summary(SummaryLine {
            summary: PassSummary {
                periods_run: 0,
                with_flag: 0,
                failed: 1,
                periods: vec![PassPeriod::new(&e)],
            },
        });
        assert_eq!(serde_json::to_value(line).unwrap()["summary"]["failed"], 1);
    }
}
