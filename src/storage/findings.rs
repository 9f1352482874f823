//! Findings, their notes and the alert log (migration 0006): what `analysis::findings` reads of
//! the run history and writes back.

use chrono::{DateTime, TimeZone, Utc};
use rusqlite::{params, OptionalExtension, Row};

use crate::model::{Finding, FindingStatus, PeriodKind};
use crate::{Error, Result};

use super::Store;

/// One test of the latest complete run of one period, as findings need it.
#[derive(Debug, Clone, PartialEq)]
pub struct FlagHistoryRow {
    /// The period.
    pub label: String,
    /// Its start.
    pub start: DateTime<Utc>,
    /// Its end.
    pub end: DateTime<Utc>,
    /// The run and the test's index in it (for the group means).
    pub run_id: i64,
    /// See `run_id`.
    pub test_idx: i64,
    /// The characteristic.
    pub characteristic: String,
    /// The factor.
    pub factor: String,
    /// The stored state.
    pub state: crate::results::TestState,
    /// The standing-out level and its distance from the grand mean (units, SDs, % tolerance).
    pub stands_out: crate::results::StandsOut,
    /// The within-group SD.
    pub resid_sd: Option<f64>,
    /// Kruskal-Wallis recommended (clearly non-normal residuals in small groups).
    pub recommend_kruskal: bool,
}

/// One run of the alert command.
#[derive(Debug, Clone, PartialEq)]
pub struct AlertRecord {
    /// When it started and ended.
    pub started: DateTime<Utc>,
    /// See `started`.
    pub finished: DateTime<Utc>,
    /// Findings it was given.
    pub n_findings: u32,
    /// The command line.
    pub command: String,
    /// Its exit code, when it exited.
    pub exit_code: Option<i32>,
    /// What went wrong; `None` when it exited 0.
    pub error: Option<String>,
}

fn instant(ms: i64) -> DateTime<Utc> {
    Utc.timestamp_millis_opt(ms).single().unwrap_or_default()
}

fn opt_instant(ms: Option<i64>) -> Option<DateTime<Utc>> {
    ms.map(instant)
}

const FINDING_COLUMNS: &str = "finding_id, period_kind, characteristic, factor, level, status, \
    times_reopened, first_label, first_start_ms, episode_label, episode_start_ms, last_label, \
    last_start_ms, last_end_ms, n_flagged, n_weak, quiet_periods, unit, effect_now, \
    effect_now_sd, effect_now_pct, within_sd, peak_effect, peak_pct, peak_label, onset_ms, \
    onset_low_ms, onset_high_ms, onset_method, event_id, event_ms, event_note, created_ms, \
    updated_ms";

fn finding_from_row(r: &Row<'_>) -> rusqlite::Result<Finding> {
    let kind: String = r.get(1)?;
    let status: String = r.get(5)?;
    Ok(Finding {
        id: r.get(0)?,
        period_kind: PeriodKind::parse(&kind).unwrap_or(PeriodKind::Day),
        characteristic: r.get(2)?,
        factor: r.get(3)?,
        level: r.get(4)?,
        status: FindingStatus::parse(&status).unwrap_or(FindingStatus::Open),
        times_reopened: r.get(6)?,
        first_label: r.get(7)?,
        first_start: instant(r.get(8)?),
        episode_label: r.get(9)?,
        episode_start: instant(r.get(10)?),
        last_label: r.get(11)?,
        last_start: instant(r.get(12)?),
        last_end: instant(r.get(13)?),
        n_flagged: r.get(14)?,
        n_weak: r.get(15)?,
        quiet_periods: r.get(16)?,
        unit: r.get(17)?,
        effect_now: r.get(18)?,
        effect_now_sd: r.get(19)?,
        effect_now_pct: r.get(20)?,
        within_sd: r.get(21)?,
        peak_effect: r.get(22)?,
        peak_pct: r.get(23)?,
        peak_label: r.get(24)?,
        onset: opt_instant(r.get(25)?),
        onset_low: opt_instant(r.get(26)?),
        onset_high: opt_instant(r.get(27)?),
        onset_method: r.get(28)?,
        event_id: r.get(29)?,
        event_at: opt_instant(r.get(30)?),
        event_note: r.get(31)?,
        created: instant(r.get(32)?),
        updated: instant(r.get(33)?),
    })
}

/// Findings (flags that persist over periods), their notes, the flag history they are built
/// from and the alert log: what a second backend implements. Writing methods are atomic.
pub trait FindingStore {
    /// Every test of the latest complete version of every `kind` period, ordered by
    /// characteristic, factor and period start; empty when no period of that kind is complete.
    fn flag_history(&self, kind: PeriodKind) -> Result<Vec<FlagHistoryRow>>;
    /// The groups of one stored test: (level, n, mean offset from the characteristic's origin),
    /// in group order; empty for an unknown run or test.
    fn group_means(&self, run_id: i64, test_idx: i64) -> Result<Vec<(String, u64, f64)>>;
    /// The stored findings of `kind` (every kind when `None`), most recently flagged first, then
    /// by id.
    fn findings(&self, kind: Option<PeriodKind>) -> Result<Vec<Finding>>;
    /// One finding by its number; `None` when there is no such finding.
    fn finding(&self, id: i64) -> Result<Option<Finding>>;
    /// Writes findings in one transaction (all or none): a finding with id 0 is inserted and its
    /// id set, others are updated in place.
    fn save_findings(&mut self, findings: &mut [Finding]) -> Result<()>;
    /// Adds a dated note to finding `id`; an unknown id is an error and nothing is written.
    fn add_finding_note(&mut self, id: i64, text: &str, now: DateTime<Utc>) -> Result<()>;
    /// The notes of finding `id`, oldest first; empty when it has none.
    fn finding_notes(&self, id: i64) -> Result<Vec<(DateTime<Utc>, String)>>;
    /// Records one run of the alert command (its start and end, how many findings it was given,
    /// the command, its exit code or error), committed at once; every record is kept, and
    /// [`FindingStore::last_alert`] returns the one recorded last.
    fn log_alert(&self, record: &AlertRecord) -> Result<()>;
    /// The latest recorded run of the alert command; `None` before the first.
    fn last_alert(&self) -> Result<Option<AlertRecord>>;
}

impl FindingStore for Store {
    fn flag_history(&self, kind: PeriodKind) -> Result<Vec<FlagHistoryRow>> {
        let mut stmt = self.conn.prepare(
            "SELECT r.period_label, r.period_start_ms, r.period_end_ms, r.run_id, t.test_idx,
                    t.characteristic, t.factor, t.state, t.standout_level, t.standout_diff,
                    t.standout_sd_units, t.standout_pct_tolerance, t.resid_sd, t.recommend_kruskal
             FROM run r JOIN run_result t ON t.run_id = r.run_id
             WHERE r.period_kind = ?1 AND r.status = 'complete'
               AND r.version = (SELECT MAX(version) FROM run r2 WHERE r2.period_kind = r.period_kind
                                AND r2.period_label = r.period_label AND r2.status = 'complete')
             ORDER BY t.characteristic, t.factor, r.period_start_ms",
        )?;
        let rows = stmt.query_map([kind.as_str()], |r| {
            Ok(FlagHistoryRow {
                label: r.get(0)?,
                start: instant(r.get(1)?),
                end: instant(r.get(2)?),
                run_id: r.get(3)?,
                test_idx: r.get(4)?,
                characteristic: r.get(5)?,
                factor: r.get(6)?,
                state: super::runs::named(r, 7, "state", crate::results::TestState::parse)?
                    .unwrap_or_default(),
                stands_out: crate::results::StandsOut {
                    level: r.get(8)?,
                    diff: r.get(9)?,
                    sd_units: r.get(10)?,
                    pct_tolerance: r.get(11)?,
                },
                resid_sd: r.get(12)?,
                recommend_kruskal: r.get::<_, Option<bool>>(13)?.unwrap_or(false),
            })
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn group_means(&self, run_id: i64, test_idx: i64) -> Result<Vec<(String, u64, f64)>> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT level, n, mean FROM run_group WHERE run_id = ?1 AND test_idx = ?2 \
             ORDER BY group_idx",
        )?;
        let rows = stmt.query_map(params![run_id, test_idx], |r| {
            Ok((r.get(0)?, r.get::<_, i64>(1)? as u64, r.get(2)?))
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn findings(&self, kind: Option<PeriodKind>) -> Result<Vec<Finding>> {
        let sql = format!(
            "SELECT {FINDING_COLUMNS} FROM finding WHERE ?1 IS NULL OR period_kind = ?1 \
             ORDER BY last_start_ms DESC, finding_id"
        );
        let mut stmt = self.conn.prepare(&sql)?;
        let rows = stmt.query_map([kind.map(PeriodKind::as_str)], finding_from_row)?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn finding(&self, id: i64) -> Result<Option<Finding>> {
        let sql = format!("SELECT {FINDING_COLUMNS} FROM finding WHERE finding_id = ?1");
        Ok(self
            .conn
            .query_row(&sql, [id], finding_from_row)
            .optional()?)
    }
    fn save_findings(&mut self, findings: &mut [Finding]) -> Result<()> {
        let tx = self.conn.transaction()?;
        {
            let mut insert = tx.prepare_cached(&format!(
                "INSERT INTO finding ({}) VALUES ({})",
                &FINDING_COLUMNS["finding_id, ".len()..],
                (1..=33)
                    .map(|i| format!("?{i}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            ))?;
            let mut update = tx.prepare_cached(&format!(
                "UPDATE finding SET ({}) = ({}) WHERE finding_id = ?1",
                &FINDING_COLUMNS["finding_id, ".len()..],
                (2..=34)
                    .map(|i| format!("?{i}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            ))?;
            for f in findings.iter_mut() {
                let ms = |t: DateTime<Utc>| t.timestamp_millis();
                let values = params![
                    f.id,
                    f.period_kind.as_str(),
                    f.characteristic,
                    f.factor,
                    f.level,
                    f.status.as_str(),
                    f.times_reopened,
                    f.first_label,
                    ms(f.first_start),
                    f.episode_label,
                    ms(f.episode_start),
                    f.last_label,
                    ms(f.last_start),
                    ms(f.last_end),
                    f.n_flagged,
                    f.n_weak,
                    f.quiet_periods,
                    f.unit,
                    f.effect_now,
                    f.effect_now_sd,
                    f.effect_now_pct,
                    f.within_sd,
                    f.peak_effect,
                    f.peak_pct,
                    f.peak_label,
                    f.onset.map(ms),
                    f.onset_low.map(ms),
                    f.onset_high.map(ms),
                    f.onset_method,
                    f.event_id,
                    f.event_at.map(ms),
                    f.event_note,
                    ms(f.created),
                    ms(f.updated),
                ];
                if f.id == 0 {
                    // Every column but the id, which SQLite assigns.
                    insert.execute(&values[1..])?;
                    f.id = tx.last_insert_rowid();
                } else {
                    update.execute(values)?;
                }
            }
        }
        tx.commit()?;
        Ok(())
    }
    fn add_finding_note(&mut self, id: i64, text: &str, now: DateTime<Utc>) -> Result<()> {
        if self.finding(id)?.is_none() {
            let last: Option<i64> =
                self.conn
                    .query_row("SELECT MAX(finding_id) FROM finding", [], |r| r.get(0))?;
            return Err(Error::Usage(match last {
                Some(last) => format!(
                    "there is no finding #{id} (the highest is #{last}; `samewise findings --all` lists them)"
                ),
                None => "there are no findings yet".to_string(),
            }));
        }
        self.conn.execute(
            "INSERT INTO finding_note (finding_id, created_ms, text) VALUES (?1, ?2, ?3)",
            params![id, now.timestamp_millis(), text],
        )?;
        Ok(())
    }
    fn finding_notes(&self, id: i64) -> Result<Vec<(DateTime<Utc>, String)>> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT created_ms, text FROM finding_note WHERE finding_id = ?1 ORDER BY created_ms, note_id",
        )?;
        let rows = stmt.query_map([id], |r| Ok((instant(r.get(0)?), r.get(1)?)))?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn log_alert(&self, record: &AlertRecord) -> Result<()> {
        self.conn.execute(
            "INSERT INTO alert_log (started_ms, finished_ms, n_findings, command, exit_code, error) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
            params![
                record.started.timestamp_millis(),
                record.finished.timestamp_millis(),
                record.n_findings,
                record.command,
                record.exit_code,
                record.error
            ],
        )?;
        Ok(())
    }
    fn last_alert(&self) -> Result<Option<AlertRecord>> {
        Ok(self
            .conn
            .query_row(
                "SELECT started_ms, finished_ms, n_findings, command, exit_code, error FROM alert_log \
                 ORDER BY alert_id DESC LIMIT 1",
                [],
                |r| {
                    Ok(AlertRecord {
                        started: instant(r.get(0)?),
                        finished: instant(r.get(1)?),
                        n_findings: r.get(2)?,
                        command: r.get(3)?,
                        exit_code: r.get(4)?,
                        error: r.get(5)?,
                    })
                },
            )
            .optional()?)
    }
}
