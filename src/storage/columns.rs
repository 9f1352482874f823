//! The column mappings both backends share: a result, a run, a finding, an event to the columns
//! of their tables and back, written once.
//!
//! Writing goes through [`Value`], a typed column value (an integer, a double or a text, each
//! possibly NULL) that binds to an SQLite statement and to a PostgreSQL one alike. Reading goes
//! through [`ColumnRow`], the few typed getters the mappings need, implemented for an SQLite row
//! and a PostgreSQL row. The SQL around them (placeholders `?1` or `$1`, `last_insert_rowid` or
//! `RETURNING`, locking) stays with each backend; the column lists here fix the order in which
//! the values are written and read.
//!
//! Both schemas hold the same columns with the same meaning (`migrations/` and
//! `migrations/postgres/`): integers are 64-bit, booleans 0/1 integers, doubles IEEE binary64
//! (stored and read back bit for bit), times integer milliseconds since the epoch, UTC.

use chrono::{DateTime, TimeZone, Utc};

use crate::model::{Finding, FindingStatus, PeriodKind};
use crate::results::{
    AnovaResult, ComponentsResult, DesignKind, DesignResult, EffectResult, GroupResult, Interval,
    KruskalResult, LeadingResult, LeadingTest, OptInterval, PairResult, Sensitivity, SerialResult,
    ShapiroResult, StandsOut, StatP, TestResult, TestState, WelchResult,
};
use crate::{Error, Result};

use super::events::{Event, EventChange};
use super::findings::{AlertRecord, FlagHistoryRow};
use super::runs::{RunHeader, RunStatus, StoredRun};
use crate::stats::fdr::FdrMethod;

/// One column value to write, typed so that a NULL binds to a column of any backend.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Value<'a> {
    /// An integer (counts, ids, booleans 0/1, times in ms).
    Int(Option<i64>),
    /// A double.
    Real(Option<f64>),
    /// A text.
    Text(Option<&'a str>),
}

impl From<i64> for Value<'_> {
    fn from(v: i64) -> Self {
        Value::Int(Some(v))
    }
}

impl From<Option<i64>> for Value<'_> {
    fn from(v: Option<i64>) -> Self {
        Value::Int(v)
    }
}

impl From<u32> for Value<'_> {
    fn from(v: u32) -> Self {
        Value::Int(Some(i64::from(v)))
    }
}

impl From<u64> for Value<'_> {
    fn from(v: u64) -> Self {
        Value::Int(Some(i64::try_from(v).unwrap_or(i64::MAX)))
    }
}

impl From<Option<u64>> for Value<'_> {
    fn from(v: Option<u64>) -> Self {
        Value::Int(v.map(|n| i64::try_from(n).unwrap_or(i64::MAX)))
    }
}

impl From<Option<i32>> for Value<'_> {
    fn from(v: Option<i32>) -> Self {
        Value::Int(v.map(i64::from))
    }
}

impl From<bool> for Value<'_> {
    fn from(v: bool) -> Self {
        Value::Int(Some(i64::from(v)))
    }
}

impl From<Option<bool>> for Value<'_> {
    fn from(v: Option<bool>) -> Self {
        Value::Int(v.map(i64::from))
    }
}

/// A double as both backends store it: -0 as 0 (SQLite keeps an integral REAL as an integer, so
/// it reads -0 back as 0; PostgreSQL would keep the sign), every other value bit for bit.
fn as_stored(v: f64) -> f64 {
    if v == 0.0 {
        0.0
    } else {
        v
    }
}

impl From<f64> for Value<'_> {
    fn from(v: f64) -> Self {
        Value::Real(Some(as_stored(v)))
    }
}

impl From<Option<f64>> for Value<'_> {
    fn from(v: Option<f64>) -> Self {
        Value::Real(v.map(as_stored))
    }
}

impl<'a> From<&'a str> for Value<'a> {
    fn from(v: &'a str) -> Self {
        Value::Text(Some(v))
    }
}

impl<'a> From<&'a String> for Value<'a> {
    fn from(v: &'a String) -> Self {
        Value::Text(Some(v.as_str()))
    }
}

impl<'a> From<Option<&'a str>> for Value<'a> {
    fn from(v: Option<&'a str>) -> Self {
        Value::Text(v)
    }
}

impl<'a> From<&'a Option<String>> for Value<'a> {
    fn from(v: &'a Option<String>) -> Self {
        Value::Text(v.as_deref())
    }
}

impl From<DateTime<Utc>> for Value<'_> {
    fn from(t: DateTime<Utc>) -> Self {
        Value::Int(Some(t.timestamp_millis()))
    }
}

impl From<Option<DateTime<Utc>>> for Value<'_> {
    fn from(t: Option<DateTime<Utc>>) -> Self {
        Value::Int(t.map(|t| t.timestamp_millis()))
    }
}

impl rusqlite::ToSql for Value<'_> {
    fn to_sql(&self) -> rusqlite::Result<rusqlite::types::ToSqlOutput<'_>> {
        use rusqlite::types::{ToSqlOutput, ValueRef};
        Ok(ToSqlOutput::Borrowed(match *self {
            Value::Int(Some(v)) => ValueRef::Integer(v),
            Value::Real(Some(v)) => ValueRef::Real(v),
            Value::Text(Some(v)) => ValueRef::Text(v.as_bytes()),
            Value::Int(None) | Value::Real(None) | Value::Text(None) => ValueRef::Null,
        }))
    }
}

impl Value<'_> {
    /// The value as a PostgreSQL parameter (BIGINT, DOUBLE PRECISION or TEXT).
    pub(crate) fn pg(&self) -> &(dyn postgres::types::ToSql + Sync) {
        match self {
            Value::Int(v) => v,
            Value::Real(v) => v,
            Value::Text(v) => v,
        }
    }
}

/// The values as PostgreSQL parameters, in order.
pub(crate) fn pg_params<'v>(
    values: &'v [Value<'_>],
) -> Vec<&'v (dyn postgres::types::ToSql + Sync)> {
    values.iter().map(Value::pg).collect()
}

/// `count` numbered placeholders from `first`, comma-separated, with the backend's sigil: `?`
/// for SQLite (`?1, ?2`), `$` for PostgreSQL (`$1, $2`).
pub(crate) fn placeholders(sigil: char, first: usize, count: usize) -> String {
    (first..first + count)
        .map(|i| format!("{sigil}{i}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// How many names a comma-separated column list holds.
pub(crate) fn column_count(columns: &str) -> usize {
    columns.split(',').count()
}

/// `columns` (a comma-separated list) with each name prefixed by `alias.`.
pub(crate) fn qualified(alias: &str, columns: &str) -> String {
    columns
        .split(',')
        .map(|c| format!("{alias}.{}", c.trim()))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The typed getters the mappings read a row with, for either backend. Indexes count from 0.
pub(crate) trait ColumnRow {
    /// An integer column, `None` for NULL.
    fn opt_int(&self, i: usize) -> Result<Option<i64>>;
    /// A double column, `None` for NULL.
    fn opt_real(&self, i: usize) -> Result<Option<f64>>;
    /// A text column, `None` for NULL.
    fn opt_text(&self, i: usize) -> Result<Option<String>>;
    /// The name of column `i`, for messages.
    fn column_name(&self, i: usize) -> String;

    /// An integer column that is never NULL.
    fn int(&self, i: usize) -> Result<i64> {
        self.opt_int(i)?.ok_or_else(|| self.null(i))
    }
    /// A double column that is never NULL.
    fn real(&self, i: usize) -> Result<f64> {
        self.opt_real(i)?.ok_or_else(|| self.null(i))
    }
    /// A text column that is never NULL.
    fn text(&self, i: usize) -> Result<String> {
        self.opt_text(i)?.ok_or_else(|| self.null(i))
    }
    /// A 0/1 column as a boolean (any non-zero is true).
    fn flag(&self, i: usize) -> Result<bool> {
        Ok(self.int(i)? != 0)
    }
    /// A nullable 0/1 column as a boolean.
    fn opt_flag(&self, i: usize) -> Result<Option<bool>> {
        Ok(self.opt_int(i)?.map(|v| v != 0))
    }
    /// A count column (never negative; a negative value reads as 0).
    fn count(&self, i: usize) -> Result<u64> {
        Ok(self.int(i)?.max(0) as u64)
    }
    /// A nullable count column.
    fn opt_count(&self, i: usize) -> Result<Option<u64>> {
        Ok(self.opt_int(i)?.map(|n| n.max(0) as u64))
    }
    /// An integer column that must fit a 32-bit type (an index, a small count, an exit code).
    fn small<T: TryFrom<i64>>(&self, i: usize) -> Result<T>
    where
        Self: Sized,
    {
        let v = self.int(i)?;
        T::try_from(v).map_err(|_| self.out_of_range(i, v))
    }
    /// A nullable integer column that must fit a 32-bit type.
    fn opt_small<T: TryFrom<i64>>(&self, i: usize) -> Result<Option<T>>
    where
        Self: Sized,
    {
        match self.opt_int(i)? {
            None => Ok(None),
            Some(v) => T::try_from(v)
                .map(Some)
                .map_err(|_| self.out_of_range(i, v)),
        }
    }
    /// A time column (ms since the epoch, UTC).
    fn instant(&self, i: usize) -> Result<DateTime<Utc>> {
        Ok(from_ms(self.int(i)?))
    }
    /// A nullable time column.
    fn opt_instant(&self, i: usize) -> Result<Option<DateTime<Utc>>> {
        Ok(self.opt_int(i)?.map(from_ms))
    }
    /// A text column read through `parse` (a stored state, method or design name); an unknown
    /// name is an error naming the value.
    fn named<T>(
        &self,
        i: usize,
        what: &'static str,
        parse: fn(&str) -> Option<T>,
    ) -> Result<Option<T>>
    where
        Self: Sized,
    {
        let Some(text) = self.opt_text(i)? else {
            return Ok(None);
        };
        parse(&text).map(Some).ok_or_else(|| {
            Error::Database(format!(
                "unknown {what} {text:?} stored (a newer samewise wrote it?)"
            ))
        })
    }

    /// A stored name that must be there and known (`what` names it in the error).
    fn stored_name<T>(
        &self,
        i: usize,
        what: &'static str,
        parse: fn(&str) -> Option<T>,
    ) -> Result<T>
    where
        Self: Sized,
    {
        self.named(i, what, parse)?
            .ok_or_else(|| Error::Database(format!("no {what} stored")))
    }

    /// The error for an unexpected NULL in column `i`.
    fn null(&self, i: usize) -> Error {
        Error::Database(format!(
            "column {} holds NULL where a value is required; run `samewise db check`",
            self.column_name(i)
        ))
    }
    /// The error for an integer that does not fit where it is read.
    fn out_of_range(&self, i: usize, v: i64) -> Error {
        Error::Database(format!(
            "column {} holds {v}, out of range; run `samewise db check`",
            self.column_name(i)
        ))
    }
}

impl ColumnRow for rusqlite::Row<'_> {
    fn opt_int(&self, i: usize) -> Result<Option<i64>> {
        Ok(self.get(i)?)
    }
    fn opt_real(&self, i: usize) -> Result<Option<f64>> {
        Ok(self.get(i)?)
    }
    fn opt_text(&self, i: usize) -> Result<Option<String>> {
        Ok(self.get(i)?)
    }
    fn column_name(&self, i: usize) -> String {
        self.as_ref()
            .column_name(i)
            .map_or_else(|_| format!("#{i}"), str::to_string)
    }
}

impl ColumnRow for postgres::Row {
    fn opt_int(&self, i: usize) -> Result<Option<i64>> {
        Ok(self.try_get(i)?)
    }
    fn opt_real(&self, i: usize) -> Result<Option<f64>> {
        Ok(self.try_get(i)?)
    }
    fn opt_text(&self, i: usize) -> Result<Option<String>> {
        Ok(self.try_get(i)?)
    }
    fn column_name(&self, i: usize) -> String {
        self.columns()
            .get(i)
            .map_or_else(|| format!("#{i}"), |c| c.name().to_string())
    }
}

/// Every row an SQLite statement selects, each read by `read` (the mappings of this module).
pub(crate) fn sqlite_rows<T>(
    conn: &rusqlite::Connection,
    sql: &str,
    params: impl rusqlite::Params,
    mut read: impl FnMut(&rusqlite::Row<'_>) -> Result<T>,
) -> Result<Vec<T>> {
    let mut st = conn.prepare_cached(sql)?;
    let mut rows = st.query(params)?;
    let mut out = Vec::new();
    while let Some(r) = rows.next()? {
        out.push(read(r)?);
    }
    Ok(out)
}

/// The first row an SQLite statement selects, read by `read`; `None` when it selects none.
pub(crate) fn sqlite_row<T>(
    conn: &rusqlite::Connection,
    sql: &str,
    params: impl rusqlite::Params,
    read: impl FnOnce(&rusqlite::Row<'_>) -> Result<T>,
) -> Result<Option<T>> {
    let mut st = conn.prepare_cached(sql)?;
    let mut rows = st.query(params)?;
    match rows.next()? {
        Some(r) => Ok(Some(read(r)?)),
        None => Ok(None),
    }
}

/// A stored time (ms since the epoch) as a UTC instant; out of chrono's range reads as the epoch.
pub(crate) fn from_ms(ms: i64) -> DateTime<Utc> {
    Utc.timestamp_millis_opt(ms).single().unwrap_or_default()
}

// ---------------------------------------------------------------------------------------------
// Runs

/// The columns of a `run` row, as [`run_from`] reads them.
pub(crate) const RUN_COLUMNS: &str = "run_id, version, period_kind, period_label, \
    period_start_ms, period_end_ms, schedule, config_hash, tool_version, fdr_method, fdr_level, \
    started_ms, finished_ms, status, error, n_tests, n_flagged";

/// A stored run from the [`RUN_COLUMNS`] starting at column `o`.
pub(crate) fn run_from<R: ColumnRow>(r: &R, o: usize) -> Result<StoredRun> {
    Ok(StoredRun {
        run_id: r.int(o)?,
        version: r.int(o + 1)?,
        header: RunHeader {
            period_kind: r.stored_name(o + 2, "period kind", PeriodKind::parse)?,
            period_label: r.text(o + 3)?,
            period_start_ms: r.int(o + 4)?,
            period_end_ms: r.int(o + 5)?,
            schedule: r.opt_text(o + 6)?,
            config_hash: r.text(o + 7)?,
            tool_version: r.text(o + 8)?,
            fdr_method: r.stored_name(o + 9, "false-discovery method", FdrMethod::from_key)?,
            fdr_level: r.real(o + 10)?,
        },
        started_ms: r.int(o + 11)?,
        finished_ms: r.opt_int(o + 12)?,
        status: r.stored_name(o + 13, "run status", RunStatus::parse)?,
        error: r.opt_text(o + 14)?,
        n_tests: r.opt_int(o + 15)?,
        n_flagged: r.opt_int(o + 16)?,
    })
}

/// The columns a new `run` row is written with (status and the import mark are set by the SQL),
/// in the order of [`new_run_values`].
pub(crate) const NEW_RUN_COLUMNS: &str = "period_kind, period_label, period_start_ms, \
    period_end_ms, schedule, version, config_hash, tool_version, fdr_method, fdr_level, \
    started_ms";

/// The values of a new run row, in the order of [`NEW_RUN_COLUMNS`].
pub(crate) fn new_run_values(h: &RunHeader, version: i64, started_ms: i64) -> Vec<Value<'_>> {
    vec![
        h.period_kind.as_str().into(),
        (&h.period_label).into(),
        h.period_start_ms.into(),
        h.period_end_ms.into(),
        (&h.schedule).into(),
        version.into(),
        (&h.config_hash).into(),
        (&h.tool_version).into(),
        h.fdr_method.key().into(),
        h.fdr_level.into(),
        started_ms.into(),
    ]
}

/// The columns of a `run_result` row after `run_id`, as [`test_values`] writes them and
/// [`test_from`] reads them.
pub(crate) const TEST_COLUMNS: &str = "test_idx, characteristic, factor, state, is_new, n_obs, \
    n_groups, n_groups_used, leading_method, leading_reason, recommend_kruskal, \
    leading_statistic, leading_p, q_value, anova_f, anova_df1, anova_df2, anova_p, ss_between, \
    ss_within, ms_within, r_squared, resid_sd, welch_f, welch_df1, welch_df2, welch_p, \
    kruskal_h, kruskal_p, levene_stat, levene_p, brown_forsythe_stat, brown_forsythe_p, \
    bartlett_stat, bartlett_p, shapiro_w, shapiro_p, sd_ratio, n_beyond_3sd, eta_squared, \
    omega_squared, var_between, var_within, share_between, icc, icc_low, icc_high, tolerance, \
    spread_of_means, spread_pct_tolerance, standout_level, standout_diff, standout_sd_units, \
    standout_pct_tolerance, min_detectable_diff, min_detectable_pct_tolerance, notes, design, \
    n_subgroups, var_subgroups, share_subgroups, serial_r1, serial_z, serial_p, \
    var_between_low, var_between_high, var_within_low, var_within_high, var_subgroups_low, \
    var_subgroups_high";

/// The values of one `run_result` row: `run_id`, then the [`TEST_COLUMNS`] in order.
pub(crate) fn test_values(run_id: i64, t: &TestResult) -> Vec<Value<'_>> {
    let (a, w, k, c, vc, so) = (
        &t.anova,
        &t.welch,
        &t.kruskal_wallis,
        &t.design,
        &t.variance_components,
        &t.stands_out,
    );
    vec![
        run_id.into(),
        t.index.into(),
        (&t.characteristic).into(),
        (&t.factor).into(),
        t.state.as_str().into(),
        t.is_new.into(),
        t.n_obs.into(),
        t.n_groups.into(),
        t.n_groups_used.into(),
        t.leading.method.map(LeadingTest::as_str).into(),
        (&t.leading.reason).into(),
        t.leading.recommend_kruskal_wallis.into(),
        t.leading.statistic.into(),
        t.leading.p.into(),
        t.q_value.into(),
        a.f.into(),
        a.df_between.into(),
        a.df_within.into(),
        a.p.into(),
        a.ss_between.into(),
        a.ss_within.into(),
        a.ms_within.into(),
        a.r_squared.into(),
        a.resid_sd.into(),
        w.f.into(),
        w.df1.into(),
        w.df2.into(),
        w.p.into(),
        k.h.into(),
        k.p.into(),
        t.levene.statistic.into(),
        t.levene.p.into(),
        t.brown_forsythe.statistic.into(),
        t.brown_forsythe.p.into(),
        t.bartlett.statistic.into(),
        t.bartlett.p.into(),
        t.shapiro_wilk.w.into(),
        t.shapiro_wilk.p.into(),
        t.sd_ratio.into(),
        t.n_beyond_3sd.into(),
        t.effect.eta_squared.into(),
        t.effect.omega_squared.into(),
        vc.between.into(),
        vc.within.into(),
        vc.share_between.into(),
        vc.icc.into(),
        vc.icc_ci.low.into(),
        vc.icc_ci.high.into(),
        t.tolerance.into(),
        t.spread_of_means.into(),
        t.spread_pct_tolerance.into(),
        (&so.level).into(),
        so.diff.into(),
        so.sd_units.into(),
        so.pct_tolerance.into(),
        t.sensitivity.min_detectable_diff.into(),
        t.sensitivity.min_detectable_pct_tolerance.into(),
        (&t.notes).into(),
        c.kind.map(DesignKind::as_str).into(),
        c.n_subgroups.into(),
        c.var_subgroups.into(),
        c.share_subgroups.into(),
        t.serial_dependence.r1.into(),
        t.serial_dependence.z.into(),
        t.serial_dependence.p.into(),
        vc.between_ci.low.into(),
        vc.between_ci.high.into(),
        vc.within_ci.low.into(),
        vc.within_ci.high.into(),
        c.var_subgroups_ci.low.into(),
        c.var_subgroups_ci.high.into(),
    ]
}

/// A stored test (without its groups and pairs) from the [`TEST_COLUMNS`] starting at column `o`.
pub(crate) fn test_from<R: ColumnRow>(r: &R, o: usize) -> Result<TestResult> {
    let g = |i: usize| r.opt_real(o + i);
    Ok(TestResult {
        index: r.small(o)?,
        characteristic: r.text(o + 1)?,
        factor: r.text(o + 2)?,
        state: r
            .named(o + 3, "state", TestState::parse)?
            .unwrap_or_default(),
        is_new: r.flag(o + 4)?,
        n_obs: r.count(o + 5)?,
        n_groups: r.count(o + 6)?,
        n_groups_used: r.count(o + 7)?,
        leading: LeadingResult {
            method: r.named(o + 8, "leading method", LeadingTest::parse)?,
            reason: r.opt_text(o + 9)?,
            recommend_kruskal_wallis: r.opt_flag(o + 10)?,
            statistic: g(11)?,
            p: g(12)?,
        },
        q_value: g(13)?,
        anova: AnovaResult {
            f: g(14)?,
            df_between: g(15)?,
            df_within: g(16)?,
            p: g(17)?,
            ss_between: g(18)?,
            ss_within: g(19)?,
            ms_within: g(20)?,
            r_squared: g(21)?,
            resid_sd: g(22)?,
        },
        welch: WelchResult {
            f: g(23)?,
            df1: g(24)?,
            df2: g(25)?,
            p: g(26)?,
        },
        kruskal_wallis: KruskalResult {
            h: g(27)?,
            p: g(28)?,
        },
        levene: StatP {
            statistic: g(29)?,
            p: g(30)?,
        },
        brown_forsythe: StatP {
            statistic: g(31)?,
            p: g(32)?,
        },
        bartlett: StatP {
            statistic: g(33)?,
            p: g(34)?,
        },
        shapiro_wilk: ShapiroResult {
            w: g(35)?,
            p: g(36)?,
        },
        sd_ratio: g(37)?,
        n_beyond_3sd: r.opt_count(o + 38)?,
        effect: EffectResult {
            eta_squared: g(39)?,
            omega_squared: g(40)?,
        },
        variance_components: ComponentsResult {
            between: g(41)?,
            within: g(42)?,
            share_between: g(43)?,
            icc: g(44)?,
            icc_ci: OptInterval {
                low: g(45)?,
                high: g(46)?,
            },
            between_ci: OptInterval {
                low: g(64)?,
                high: g(65)?,
            },
            within_ci: OptInterval {
                low: g(66)?,
                high: g(67)?,
            },
        },
        tolerance: g(47)?,
        spread_of_means: g(48)?,
        spread_pct_tolerance: g(49)?,
        stands_out: StandsOut {
            level: r.opt_text(o + 50)?,
            diff: g(51)?,
            sd_units: g(52)?,
            pct_tolerance: g(53)?,
        },
        sensitivity: Sensitivity {
            min_detectable_diff: g(54)?,
            min_detectable_pct_tolerance: g(55)?,
        },
        notes: r.text(o + 56)?,
        design: DesignResult {
            kind: r.named(o + 57, "design", DesignKind::parse)?,
            n_subgroups: r.opt_count(o + 58)?,
            var_subgroups: g(59)?,
            share_subgroups: g(60)?,
            var_subgroups_ci: OptInterval {
                low: g(68)?,
                high: g(69)?,
            },
        },
        serial_dependence: SerialResult {
            r1: g(61)?,
            z: g(62)?,
            p: g(63)?,
        },
        groups: Vec::new(),
        pairs: Vec::new(),
    })
}

/// The columns of a `run_group` row after `run_id, test_idx, group_idx`, as [`group_values`]
/// writes them and [`group_from`] reads them.
pub(crate) const GROUP_COLUMNS: &str = "level, n, mean, sd, min, max, origin, diff_from_grand";

/// The values of one `run_group` row: `run_id, test_idx, group_idx`, then the [`GROUP_COLUMNS`].
pub(crate) fn group_values(
    run_id: i64,
    test_idx: u32,
    group_idx: usize,
    g: &GroupResult,
) -> Vec<Value<'_>> {
    vec![
        run_id.into(),
        test_idx.into(),
        (group_idx as u64).into(),
        (&g.name).into(),
        g.n.into(),
        g.mean_offset.into(),
        g.sd.into(),
        g.min_offset.into(),
        g.max_offset.into(),
        (&g.origin).into(),
        g.diff_from_grand.into(),
    ]
}

/// A stored group from the [`GROUP_COLUMNS`] starting at column `o` (means in units rebuilt from
/// the exact origin and the offsets).
pub(crate) fn group_from<R: ColumnRow>(r: &R, o: usize) -> Result<GroupResult> {
    Ok(GroupResult::from_offsets(
        r.text(o)?,
        r.count(o + 1)?,
        r.text(o + 6)?,
        r.real(o + 2)?,
        r.opt_real(o + 3)?,
        r.real(o + 4)?,
        r.real(o + 5)?,
        r.opt_real(o + 7)?,
    ))
}

/// The columns of a `run_pair` row after `run_id, test_idx`, as [`pair_values`] writes them and
/// [`pair_from`] reads them.
pub(crate) const PAIR_COLUMNS: &str =
    "level_a, level_b, method, diff, se, statistic, df, p_adj, ci_low, ci_high";

/// The values of one `run_pair` row: `run_id, test_idx`, then the [`PAIR_COLUMNS`].
pub(crate) fn pair_values(run_id: i64, test_idx: u32, p: &PairResult) -> Vec<Value<'_>> {
    vec![
        run_id.into(),
        test_idx.into(),
        (&p.a).into(),
        (&p.b).into(),
        (&p.method).into(),
        p.diff.into(),
        p.se.into(),
        p.statistic.into(),
        p.df.into(),
        p.p_adj.into(),
        p.ci.low.into(),
        p.ci.high.into(),
    ]
}

/// A stored pair from the [`PAIR_COLUMNS`] starting at column `o`.
pub(crate) fn pair_from<R: ColumnRow>(r: &R, o: usize) -> Result<PairResult> {
    Ok(PairResult {
        a: r.text(o)?,
        b: r.text(o + 1)?,
        method: r.text(o + 2)?,
        diff: r.real(o + 3)?,
        se: r.real(o + 4)?,
        statistic: r.real(o + 5)?,
        df: r.real(o + 6)?,
        p_adj: r.real(o + 7)?,
        ci: Interval {
            low: r.real(o + 8)?,
            high: r.real(o + 9)?,
        },
    })
}

/// Puts groups and pairs read as `(test_idx, row)` under their tests (found by index, so a gap
/// in the numbering is harmless); a row of a test the run does not hold is an error.
pub(crate) fn attach_groups_and_pairs(
    run_id: i64,
    tests: &mut [TestResult],
    groups: Vec<(u32, GroupResult)>,
    pairs: Vec<(u32, PairResult)>,
) -> Result<()> {
    let position: std::collections::HashMap<u32, usize> = tests
        .iter()
        .enumerate()
        .map(|(i, t)| (t.index, i))
        .collect();
    let missing = |what: &str, test_idx: u32| {
        Error::Database(format!(
            "run {run_id}: a stored {what} row belongs to test {test_idx}, which the run does not hold; run `samewise db check`"
        ))
    };
    for (test_idx, g) in groups {
        let &i = position
            .get(&test_idx)
            .ok_or_else(|| missing("group", test_idx))?;
        tests[i].groups.push(g);
    }
    for (test_idx, p) in pairs {
        let &i = position
            .get(&test_idx)
            .ok_or_else(|| missing("pair", test_idx))?;
        tests[i].pairs.push(p);
    }
    Ok(())
}

/// The columns of the flag history, from `run r JOIN run_result t`, as [`flag_history_from`]
/// reads them.
pub(crate) const FLAG_HISTORY_COLUMNS: &str = "r.period_label, r.period_start_ms, \
    r.period_end_ms, r.run_id, t.test_idx, t.characteristic, t.factor, t.state, \
    t.standout_level, t.standout_diff, t.standout_sd_units, t.standout_pct_tolerance, \
    t.resid_sd, t.recommend_kruskal";

/// One flag history row from the [`FLAG_HISTORY_COLUMNS`].
pub(crate) fn flag_history_from<R: ColumnRow>(r: &R) -> Result<FlagHistoryRow> {
    Ok(FlagHistoryRow {
        label: r.text(0)?,
        start: r.instant(1)?,
        end: r.instant(2)?,
        run_id: r.int(3)?,
        test_idx: r.int(4)?,
        characteristic: r.text(5)?,
        factor: r.text(6)?,
        state: r.named(7, "state", TestState::parse)?.unwrap_or_default(),
        stands_out: StandsOut {
            level: r.opt_text(8)?,
            diff: r.opt_real(9)?,
            sd_units: r.opt_real(10)?,
            pct_tolerance: r.opt_real(11)?,
        },
        resid_sd: r.opt_real(12)?,
        recommend_kruskal: r.opt_int(13)?.is_some_and(|v| v != 0),
    })
}

// ---------------------------------------------------------------------------------------------
// Findings

/// The columns of a `finding` row, `finding_id` first, as [`finding_values`] writes them and
/// [`finding_from`] reads them.
pub(crate) const FINDING_COLUMNS: &str = "finding_id, period_kind, characteristic, factor, \
    level, status, times_reopened, first_label, first_start_ms, episode_label, \
    episode_start_ms, last_label, last_start_ms, last_end_ms, n_flagged, n_weak, quiet_periods, \
    unit, effect_now, effect_now_sd, effect_now_pct, within_sd, peak_effect, peak_pct, \
    peak_label, onset_ms, onset_low_ms, onset_high_ms, onset_method, event_id, event_ms, \
    event_note, created_ms, updated_ms";

/// [`FINDING_COLUMNS`] without `finding_id`: what an insert writes (the id is the database's).
pub(crate) fn finding_columns_without_id() -> &'static str {
    &FINDING_COLUMNS["finding_id, ".len()..]
}

/// The values of one `finding` row in the order of [`FINDING_COLUMNS`] (the id first).
pub(crate) fn finding_values(f: &Finding) -> Vec<Value<'_>> {
    vec![
        f.id.into(),
        f.period_kind.as_str().into(),
        (&f.characteristic).into(),
        (&f.factor).into(),
        (&f.level).into(),
        f.status.as_str().into(),
        f.times_reopened.into(),
        (&f.first_label).into(),
        f.first_start.into(),
        (&f.episode_label).into(),
        f.episode_start.into(),
        (&f.last_label).into(),
        f.last_start.into(),
        f.last_end.into(),
        f.n_flagged.into(),
        f.n_weak.into(),
        f.quiet_periods.into(),
        (&f.unit).into(),
        f.effect_now.into(),
        f.effect_now_sd.into(),
        f.effect_now_pct.into(),
        f.within_sd.into(),
        f.peak_effect.into(),
        f.peak_pct.into(),
        (&f.peak_label).into(),
        f.onset.into(),
        f.onset_low.into(),
        f.onset_high.into(),
        (&f.onset_method).into(),
        f.event_id.into(),
        f.event_at.into(),
        (&f.event_note).into(),
        f.created.into(),
        f.updated.into(),
    ]
}

/// A finding from the [`FINDING_COLUMNS`]. An unknown period kind or status (a newer samewise)
/// reads as `day` and `open`.
pub(crate) fn finding_from<R: ColumnRow>(r: &R) -> Result<Finding> {
    Ok(Finding {
        id: r.int(0)?,
        period_kind: PeriodKind::parse(&r.text(1)?).unwrap_or(PeriodKind::Day),
        characteristic: r.text(2)?,
        factor: r.text(3)?,
        level: r.text(4)?,
        status: FindingStatus::parse(&r.text(5)?).unwrap_or(FindingStatus::Open),
        times_reopened: r.small(6)?,
        first_label: r.text(7)?,
        first_start: r.instant(8)?,
        episode_label: r.text(9)?,
        episode_start: r.instant(10)?,
        last_label: r.text(11)?,
        last_start: r.instant(12)?,
        last_end: r.instant(13)?,
        n_flagged: r.small(14)?,
        n_weak: r.small(15)?,
        quiet_periods: r.small(16)?,
        unit: r.text(17)?,
        effect_now: r.opt_real(18)?,
        effect_now_sd: r.opt_real(19)?,
        effect_now_pct: r.opt_real(20)?,
        within_sd: r.opt_real(21)?,
        peak_effect: r.opt_real(22)?,
        peak_pct: r.opt_real(23)?,
        peak_label: r.opt_text(24)?,
        onset: r.opt_instant(25)?,
        onset_low: r.opt_instant(26)?,
        onset_high: r.opt_instant(27)?,
        onset_method: r.text(28)?,
        event_id: r.opt_int(29)?,
        event_at: r.opt_instant(30)?,
        event_note: r.opt_text(31)?,
        created: r.instant(32)?,
        updated: r.instant(33)?,
    })
}

/// The columns of an `alert_log` row after its id, as [`alert_values`] writes them and
/// [`alert_from`] reads them.
pub(crate) const ALERT_COLUMNS: &str =
    "started_ms, finished_ms, n_findings, command, exit_code, error";

/// The values of one `alert_log` row, in the order of [`ALERT_COLUMNS`].
pub(crate) fn alert_values(a: &AlertRecord) -> Vec<Value<'_>> {
    vec![
        a.started.into(),
        a.finished.into(),
        a.n_findings.into(),
        (&a.command).into(),
        a.exit_code.into(),
        (&a.error).into(),
    ]
}

/// An alert record from the [`ALERT_COLUMNS`].
pub(crate) fn alert_from<R: ColumnRow>(r: &R) -> Result<AlertRecord> {
    Ok(AlertRecord {
        started: r.instant(0)?,
        finished: r.instant(1)?,
        n_findings: r.small(2)?,
        command: r.text(3)?,
        exit_code: r.opt_small(4)?,
        error: r.opt_text(5)?,
    })
}

// ---------------------------------------------------------------------------------------------
// Events

/// The query of events with their characteristic's name, as [`event_from`] reads it (no
/// parameter: each backend appends its own `WHERE` and `ORDER BY`).
pub(crate) const EVENT_SELECT: &str =
    "SELECT e.id, e.ts_ms, e.note, c.name, e.created_ms, e.removed_ms \
     FROM events e LEFT JOIN characteristics c ON c.id = e.characteristic_id";

/// An event (without its scope) from a row of [`EVENT_SELECT`].
pub(crate) fn event_from<R: ColumnRow>(r: &R) -> Result<Event> {
    Ok(Event {
        id: r.int(0)?,
        at: r.instant(1)?,
        note: r.text(2)?,
        characteristic: r.opt_text(3)?,
        scope: Vec::new(),
        created: r.instant(4)?,
        removed: r.opt_instant(5)?,
    })
}

/// The columns of an `event_history` row, as [`event_change_from`] reads them.
pub(crate) const EVENT_CHANGE_COLUMNS: &str =
    "event_id, changed_ms, who, action, field, before, after, reason";

/// One recorded change of an event from the [`EVENT_CHANGE_COLUMNS`].
pub(crate) fn event_change_from<R: ColumnRow>(r: &R) -> Result<EventChange> {
    Ok(EventChange {
        event_id: r.int(0)?,
        changed: r.instant(1)?,
        who: r.text(2)?,
        action: r.text(3)?,
        field: r.opt_text(4)?,
        before: r.opt_text(5)?,
        after: r.opt_text(6)?,
        reason: r.opt_text(7)?,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_value_list_matches_its_column_list() {
        let t = TestResult::default();
        assert_eq!(test_values(1, &t).len(), 1 + column_count(TEST_COLUMNS));
        let g = GroupResult::from_offsets("M1".into(), 3, "10".into(), 0.5, None, 0.0, 1.0, None);
        assert_eq!(
            group_values(1, 0, 0, &g).len(),
            3 + column_count(GROUP_COLUMNS)
        );
        let p = PairResult {
            a: "M1".into(),
            b: "M2".into(),
            method: "tukey_kramer".into(),
            diff: 0.0,
            se: 0.0,
            statistic: 0.0,
            df: 0.0,
            p_adj: 1.0,
            ci: Interval {
                low: 0.0,
                high: 0.0,
            },
        };
        assert_eq!(pair_values(1, 0, &p).len(), 2 + column_count(PAIR_COLUMNS));
        let h = RunHeader {
            period_kind: PeriodKind::Day,
            period_label: "2026-11-30".into(),
            period_start_ms: 0,
            period_end_ms: 1,
            schedule: None,
            config_hash: "h".into(),
            tool_version: "t".into(),
            fdr_method: FdrMethod::BenjaminiHochberg,
            fdr_level: 0.05,
        };
        assert_eq!(
            new_run_values(&h, 1, 0).len(),
            column_count(NEW_RUN_COLUMNS)
        );
        let a = AlertRecord {
            started: from_ms(0),
            finished: from_ms(1),
            n_findings: 0,
            command: "true".into(),
            exit_code: Some(0),
            error: None,
        };
        assert_eq!(alert_values(&a).len(), column_count(ALERT_COLUMNS));
        assert_eq!(column_count(RUN_COLUMNS), 17);
        assert_eq!(column_count(FINDING_COLUMNS), 34);
        assert_eq!(column_count(FLAG_HISTORY_COLUMNS), 14);
    }

    #[test]
    fn placeholders_are_numbered_in_each_dialect() {
        assert_eq!(placeholders('?', 1, 3), "?1, ?2, ?3");
        assert_eq!(placeholders('$', 2, 2), "$2, $3");
        assert_eq!(qualified("r", "a, b"), "r.a, r.b");
    }
}
