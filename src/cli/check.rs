//! `samewise check`: one period, every active characteristic x every factor, FDR across the run,
//! stored as a new run version; terminal summary, `--json`, `--csv FILE`.
//!
//! Exit status: 0 nothing flagged, 3 at least one flag, 4 no measurement in the period, 1 error
//! (see `cli::EXIT_*`).

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use chrono::{NaiveDate, Utc};
use clap::Args;

use super::vocab::Fdr;
use super::when;
use crate::analysis::run::check_and_record;
use crate::analysis::{state, CheckOptions};
use crate::calendar::PlantCalendar;
use crate::config::Config;
use crate::model::Period;
use crate::output::{refuse_protected, AtomicFile, Protected};
use crate::stats::fdr::FdrMethod;
use crate::storage::runs::{is_flag_state, RunContent, StoredRun, TestRow};
use crate::{Error, Result};

/// Flags of `samewise check`.
#[derive(Debug, Args)]
pub struct CheckArgs {
    /// A production day, YYYY-MM-DD, e.g. 2026-11-30.
    #[arg(long, group = "period", value_name = "DAY", value_parser = when::day)]
    pub day: Option<NaiveDate>,
    /// A shift, e.g. 2026-11-30/night.
    #[arg(long, group = "period")]
    pub shift: Option<String>,
    /// An ISO week of production days, e.g. 2026-W48.
    #[arg(long, group = "period")]
    pub week: Option<String>,
    /// A month of production days, e.g. 2026-11.
    #[arg(long, group = "period")]
    pub month: Option<String>,
    /// First production day of a range, YYYY-MM-DD (with --to).
    #[arg(long, group = "period", requires = "to", value_name = "DAY", value_parser = when::day)]
    pub from: Option<NaiveDate>,
    /// Last production day of a range, YYYY-MM-DD, included.
    #[arg(long, requires = "from", value_name = "DAY", value_parser = when::day)]
    pub to: Option<NaiveDate>,
    /// Print one JSON object instead of the summary.
    #[arg(long)]
    pub json: bool,
    /// Also write every test as a CSV row to FILE (never the database or its configuration;
    /// written whole or not at all).
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// False-discovery procedure (default from the configuration).
    #[arg(long, value_enum)]
    pub fdr: Option<Fdr>,
    /// False-discovery level q (default from the configuration, 0.05).
    #[arg(long, conflicts_with = "stored")]
    pub level: Option<f64>,
    /// Print the latest stored run of the period instead of checking it again (reads only: no
    /// new run version is made).
    #[arg(long, conflicts_with = "fdr")]
    pub stored: bool,
}

/// The period named by the flags.
pub fn period_from_flags(args: &CheckArgs, calendar: &PlantCalendar) -> Result<Period> {
    let label = if let Some(d) = &args.day {
        d.format("%Y-%m-%d").to_string()
    } else if let Some(s) = args
        .shift
        .as_ref()
        .or(args.week.as_ref())
        .or(args.month.as_ref())
    {
        s.clone()
    } else if let (Some(a), Some(b)) = (&args.from, &args.to) {
        format!("{a}..{b}")
    } else {
        return Err(Error::Usage(
            "say which period: --day D, --shift D/NAME, --week 2026-W48, --month 2026-11 or --from A --to B".into(),
        ));
    };
    Period::parse_label(&label, calendar)
}

/// Runs `samewise check`.
pub fn run(args: &CheckArgs) -> Result<ExitCode> {
    let config = super::common::load_config(super::common::config_flag())?;
    if let Some(path) = &args.csv {
        let protected = Protected::plant(&config.plant.database, &config.path);
        refuse_protected(path, "--csv", &protected)?;
    }
    let calendar = PlantCalendar::new(&config);
    let period = period_from_flags(args, &calendar)?;
    let mut options = CheckOptions::from_config(&config);
    if let Some(f) = args.fdr {
        options.fdr_method = FdrMethod::from(f);
    }
    if let Some(level) = args.level {
        if !(level > 0.0 && level < 1.0) {
            return Err(Error::Usage(format!(
                "--level {level}: the false-discovery level must lie between 0 and 1"
            )));
        }
        options.fdr_level = level;
    }
    let mut store = super::common::open_store(&config)?;
    let (run, content) = if args.stored {
        store
            .latest_run(period.kind.as_str(), &period.label)?
            .ok_or_else(|| {
                Error::Usage(format!(
                    "{} has no complete stored run: check it first (samewise check without --stored)",
                    period.label
                ))
            })?
    } else {
        check_and_record(&mut store, &config, &period, &options, &Utc::now)?
    };
    if let Some(path) = &args.csv {
        write_csv(path, &config, &period, &run, &content)?;
    }
    // A new check brings the findings of its period kind up to date (ranges have none).
    let (findings, findings_json) = if args.stored || period.kind == crate::model::PeriodKind::Range
    {
        (None, serde_json::Value::Null)
    } else {
        let update = crate::analysis::findings::update_findings(
            &mut store,
            &config,
            period.kind,
            Utc::now(),
        )?;
        let tz = config.plant.time_zone;
        let list = |v: &[crate::model::Finding]| -> Result<Vec<serde_json::Value>> {
            v.iter()
                .map(|f| super::findings::finding_json(&store, f, tz))
                .collect()
        };
        let doc = serde_json::json!({
            "new": list(&update.new)?,
            "changed": list(&update.changed)?,
            "open": update.open.iter().map(|f| f.id).collect::<Vec<_>>(),
        });
        (
            Some(super::findings::summary_lines(&store, tz, &update)?),
            doc,
        )
    };
    let mut out = std::io::stdout().lock();
    if let (Some(lines), false) = (&findings, args.json) {
        let mut block = || -> std::io::Result<()> {
            for line in lines {
                writeln!(out, "{line}")?;
            }
            writeln!(out)
        };
        if let Err(e) = block() {
            if e.kind() != std::io::ErrorKind::BrokenPipe {
                return Err(Error::io("<stdout>", e));
            }
        }
    }
    let written = if args.json {
        print_json(&mut out, &config, &period, &run, &content, findings_json)
    } else {
        print_summary(&mut out, &config, &period, &run, &content, None)
    };
    // A closed stdout pipe counts as success.
    if let Err(e) = written {
        if e.kind() != std::io::ErrorKind::BrokenPipe {
            return Err(Error::io("<stdout>", e));
        }
    }
    let flagged = content.tests.iter().any(|t| is_flag_state(&t.state));
    let no_data = content.tests.iter().all(|t| t.n_obs == 0);
    if no_data {
        eprintln!(
            "note: {} holds no measurement of the checked characteristics (exit status {}): is an export missing?",
            period.label,
            super::EXIT_NO_DATA
        );
    }
    Ok(ExitCode::from(if flagged {
        super::EXIT_FLAGGED
    } else if no_data {
        super::EXIT_NO_DATA
    } else {
        super::EXIT_OK
    }))
}

/// A table cell: the number to 4 significant digits, or "-" when absent.
pub fn cell(x: Option<f64>) -> String {
    match x {
        None => "-".into(),
        Some(0.0) => "0".into(),
        Some(v) if v.abs() < 1e-3 || v.abs() >= 1e5 => format!("{v:.2e}"),
        Some(v) => {
            let digits = (3 - v.abs().log10().floor() as i32).clamp(0, 6) as usize;
            format!("{v:.digits$}")
        }
    }
}

/// The leading test of a row in a table column: `Welch F`, `F`, `exact` (the permutation test
/// of constant groups), or `-` when none ran or the rule declined to judge.
pub fn leading(t: &TestRow) -> &'static str {
    if t.state == crate::analysis::state::TOO_FEW_TO_COMPARE {
        return "-";
    }
    match t.leading_method.as_deref() {
        Some("welch") => "Welch F",
        Some("f_star") => "F*",
        Some("exact_permutation") => "exact",
        Some("blocked_f") => "F blocked",
        Some(_) => "F",
        None => "-",
    }
}

/// The design of a row in a table column: `values` (independent), `nested`, `blocked`,
/// `cells`, or `-` for runs stored before designs were recorded.
pub fn design_cell(t: &TestRow) -> &'static str {
    match t.design.as_deref() {
        Some("independent") => "values",
        Some("nested") => "nested",
        Some("blocked") => "blocked",
        Some("cell_means") => "cells",
        _ => "-",
    }
}

/// The between-group share of a row as a percentage with one decimal, or `-`.
pub fn share(t: &TestRow) -> String {
    t.share_between
        .map_or("-".to_string(), |s| format!("{:.1}%", 100.0 * s))
}

/// The standing-out group in words: `M2 +0.0113 (1.1 SD, 5.6% tol)`.
pub fn standout(t: &TestRow, unit: &str) -> String {
    let Some(level) = &t.standout_level else {
        return "-".into();
    };
    let mut s = format!(
        "{level} {}{}{}",
        if t.standout_diff.unwrap_or(0.0) >= 0.0 {
            "+"
        } else {
            ""
        },
        cell(t.standout_diff),
        if unit.is_empty() || t.standout_diff.is_none() {
            String::new()
        } else {
            format!(" {unit}")
        }
    );
    if let Some(sd) = t.standout_sd_units {
        s.push_str(&format!(" ({:+.2} SD", sd));
        if let Some(pct) = t.standout_pct_tolerance {
            s.push_str(&format!(", {pct:+.1}% tol"));
        }
        s.push(')');
    }
    s
}

fn sorted(content: &RunContent) -> Vec<&TestRow> {
    let mut tests: Vec<&TestRow> = content.tests.iter().collect();
    tests.sort_by(|a, b| {
        (state::rank(&a.state), a.q_value.unwrap_or(2.0), a.test_idx)
            .partial_cmp(&(state::rank(&b.state), b.q_value.unwrap_or(2.0), b.test_idx))
            .unwrap_or(std::cmp::Ordering::Equal)
    });
    tests
}

/// Prints the terminal summary of a run, flagged tests first. `max_unflagged` limits the lines
/// of tests without a flag (the rest are counted in one line); `None` prints them all.
pub fn print_summary(
    out: &mut impl Write,
    config: &Config,
    period: &Period,
    run: &StoredRun,
    content: &RunContent,
    max_unflagged: Option<usize>,
) -> std::io::Result<()> {
    let unit = |name: &str| {
        config
            .characteristic(name)
            .map(|c| c.unit.clone())
            .unwrap_or_default()
    };
    let n_flag = content
        .tests
        .iter()
        .filter(|t| is_flag_state(&t.state))
        .count();
    writeln!(
        out,
        "check {} ({}), run {} version {}: {} tests, {} flagged at {} q <= {}",
        period.label,
        period.kind,
        run.run_id,
        run.version,
        content.tests.len(),
        n_flag,
        run.header.fdr_method.to_uppercase(),
        run.header.fdr_level
    )?;
    writeln!(
        out,
        "{:<24} {:<20} {:<14} {:<8} {:<10} {:<9} {:>9} {:>9} {:>7}  {:<34} new",
        "state",
        "characteristic",
        "factor",
        "design",
        "leading",
        "F",
        "p",
        "q",
        "between",
        "stands out"
    )?;
    let mut unflagged = 0usize;
    for t in sorted(content) {
        if !is_flag_state(&t.state) {
            unflagged += 1;
            if max_unflagged.is_some_and(|m| unflagged > m) {
                continue;
            }
        }
        writeln!(
            out,
            "{:<24} {:<20} {:<14} {:<8} {:<10} {:<9} {:>9} {:>9} {:>7}  {:<34} {}",
            state::label(&t.state),
            t.characteristic,
            t.factor,
            design_cell(t),
            leading(t),
            cell(t.leading_statistic),
            super::format::p_cell(t.leading_p),
            super::format::p_cell(t.q_value),
            share(t),
            standout(t, &unit(&t.characteristic)),
            if t.is_new { "new" } else { "" }
        )?;
    }
    if let Some(m) = max_unflagged.filter(|m| unflagged > *m) {
        writeln!(
            out,
            "... and {} more tests without a flag (samewise check lists them all)",
            unflagged - m
        )?;
    }
    writeln!(out)?;
    writeln!(out, "{}", crate::CAUTION)
}

fn json_num(x: Option<f64>) -> serde_json::Value {
    x.filter(|v| v.is_finite())
        .map_or(serde_json::Value::Null, serde_json::Value::from)
}

/// Gives every `null` of a test's JSON a sibling `<key>_reason` (the JSON convention of
/// docs/json.md): the reason the analysis noted for that statistic when there is one (its notes
/// hold `Welch: ...`, `ANOVA: ...`), "no specification limits" for the tolerance-based fields,
/// and otherwise what the state says (too little data, declined, no p-value).
fn add_null_reasons(v: &mut serde_json::Value, t: &TestRow) {
    use crate::analysis::state;
    let note_for = |label: &str| {
        t.notes
            .split("; ")
            .find_map(|n| n.strip_prefix(&format!("{label}: ")).map(str::to_string))
    };
    let general = match t.state.as_str() {
        state::TOO_LITTLE_DATA => format!(
            "too little data: {}",
            if t.notes.is_empty() {
                "fewer than two groups with values"
            } else {
                &t.notes
            }
        ),
        state::TOO_FEW_TO_COMPARE => t
            .leading_reason
            .clone()
            .unwrap_or_else(|| "too few values per group to compare".into()),
        _ => "not computed for this test (see notes)".into(),
    };
    let no_limits = "no specification limits (LSL and USL) configured for this characteristic";
    let sections = [
        ("anova", "ANOVA"),
        ("effect", "ANOVA"),
        ("welch", "Welch"),
        ("kruskal_wallis", "Kruskal-Wallis"),
        ("levene", "Levene"),
        ("brown_forsythe", "Brown-Forsythe"),
        ("bartlett", "Bartlett"),
        ("shapiro_wilk", "Shapiro-Wilk"),
        ("variance_components", "variance components"),
        ("serial_dependence", "serial dependence"),
        ("sensitivity", "sensitivity"),
    ];
    let reason_for = |section: &str, key: &str| -> String {
        if key.contains("tolerance") && t.tolerance.is_none() {
            return no_limits.into();
        }
        if let Some((_, label)) = sections.iter().find(|(s, _)| *s == section) {
            if let Some(r) = note_for(label) {
                return r;
            }
        }
        match (section, key) {
            ("", "q_value") => {
                "no p-value, so the test is outside the false-discovery family".into()
            }
            ("leading", _) => t.leading_reason.clone().unwrap_or_else(|| general.clone()),
            ("stands_out", "sd_units") => "the within-group SD is unavailable".into(),
            ("design", "kind") => "stored before designs were recorded (independent values)".into(),
            ("design", _) if t.n_subgroups.is_none() => {
                "no subgroups: the values were tested as independent".into()
            }
            ("design", _) => "only a nested design has a between-subgroup component".into(),
            ("serial_dependence", _) if t.design.as_deref().is_some_and(|d| d != "independent") => {
                "checked only when values are tested as independent (this test used its subgroups)"
                    .into()
            }
            ("", "sd_ratio") => note_for("SD ratio").unwrap_or_else(|| general.clone()),
            _ => general.clone(),
        }
    };
    fn walk(v: &mut serde_json::Value, section: &str, reason_for: &dyn Fn(&str, &str) -> String) {
        if let serde_json::Value::Object(map) = v {
            let nulls: Vec<String> = map
                .iter()
                .filter(|(k, v)| v.is_null() && !map.contains_key(&format!("{k}_reason")))
                .map(|(k, _)| k.clone())
                .collect();
            for key in nulls {
                let reason = reason_for(section, &key);
                map.insert(format!("{key}_reason"), serde_json::Value::String(reason));
            }
            for (key, child) in map.iter_mut() {
                if child.is_object() {
                    let next = if section.is_empty() {
                        key.as_str()
                    } else {
                        section
                    };
                    walk(child, next, reason_for);
                }
            }
        }
    }
    walk(v, "", &reason_for);
}

/// One test as a JSON object (field names as the stored columns; every `null` with a reason).
pub fn test_json(t: &TestRow) -> serde_json::Value {
    let mut v = test_json_values(t);
    add_null_reasons(&mut v, t);
    v
}

fn test_json_values(t: &TestRow) -> serde_json::Value {
    serde_json::json!({
        "characteristic": t.characteristic, "factor": t.factor, "state": t.state, "is_new": t.is_new,
        "n_obs": t.n_obs, "n_groups": t.n_groups, "n_groups_used": t.n_groups_used,
        "design": {"kind": t.design, "n_subgroups": t.n_subgroups,
                   "var_subgroups": json_num(t.var_subgroups), "share_subgroups": json_num(t.share_subgroups)},
        "serial_dependence": {"r1": json_num(t.serial_r1), "z": json_num(t.serial_z), "p": json_num(t.serial_p)},
        "leading": {"method": t.leading_method, "reason": t.leading_reason,
                    "statistic": json_num(t.leading_statistic), "p": json_num(t.leading_p),
                    "recommend_kruskal_wallis": t.recommend_kruskal},
        "q_value": json_num(t.q_value),
        "anova": {"f": json_num(t.anova_f), "df_between": json_num(t.anova_df1), "df_within": json_num(t.anova_df2),
                  "p": json_num(t.anova_p), "ss_between": json_num(t.ss_between), "ss_within": json_num(t.ss_within),
                  "ms_within": json_num(t.ms_within), "r_squared": json_num(t.r_squared), "resid_sd": json_num(t.resid_sd)},
        "welch": {"f": json_num(t.welch_f), "df1": json_num(t.welch_df1), "df2": json_num(t.welch_df2), "p": json_num(t.welch_p)},
        "kruskal_wallis": {"h": json_num(t.kruskal_h), "p": json_num(t.kruskal_p)},
        "levene": {"statistic": json_num(t.levene_stat), "p": json_num(t.levene_p)},
        "brown_forsythe": {"statistic": json_num(t.brown_forsythe_stat), "p": json_num(t.brown_forsythe_p)},
        "bartlett": {"statistic": json_num(t.bartlett_stat), "p": json_num(t.bartlett_p)},
        "shapiro_wilk": {"w": json_num(t.shapiro_w), "p": json_num(t.shapiro_p)},
        "sd_ratio": json_num(t.sd_ratio), "n_beyond_3sd": t.n_beyond_3sd,
        "effect": {"eta_squared": json_num(t.eta_squared), "omega_squared": json_num(t.omega_squared)},
        "variance_components": {"between": json_num(t.var_between), "within": json_num(t.var_within),
                                "share_between": json_num(t.share_between), "icc": json_num(t.icc),
                                "icc_ci": {"low": json_num(t.icc_low), "high": json_num(t.icc_high)}},
        "tolerance": json_num(t.tolerance), "spread_of_means": json_num(t.spread_of_means),
        "spread_pct_tolerance": json_num(t.spread_pct_tolerance),
        "stands_out": {"level": t.standout_level, "diff": json_num(t.standout_diff),
                       "sd_units": json_num(t.standout_sd_units), "pct_tolerance": json_num(t.standout_pct_tolerance)},
        "sensitivity": {"min_detectable_diff": json_num(t.min_detectable_diff),
                        "min_detectable_pct_tolerance": json_num(t.min_detectable_pct_tolerance)},
        "notes": t.notes,
    })
}

fn print_json(
    out: &mut impl Write,
    config: &Config,
    period: &Period,
    run: &StoredRun,
    content: &RunContent,
    findings: serde_json::Value,
) -> std::io::Result<()> {
    let tests: Vec<serde_json::Value> = sorted(content)
        .into_iter()
        .map(|t| {
            let mut v = test_json(t);
            let groups: Vec<serde_json::Value> = content
                .groups
                .iter()
                .filter(|g| g.test_idx == t.test_idx)
                .map(|g| {
                    let mut v = serde_json::json!({"level": g.level, "n": g.n, "mean_offset": g.mean,
                        "sd": json_num(g.sd), "min_offset": g.min, "max_offset": g.max, "origin": g.origin,
                        "diff_from_grand": json_num(g.diff_from_grand)});
                    if g.sd.is_none() {
                        v["sd_reason"] = "a group of one value has no SD".into();
                    }
                    if g.diff_from_grand.is_none() {
                        v["diff_from_grand_reason"] = "the group was left out of the test".into();
                    }
                    v
                })
                .collect();
            let pairs: Vec<serde_json::Value> = content
                .pairs
                .iter()
                .filter(|p| p.test_idx == t.test_idx)
                .map(|p| serde_json::json!({"a": p.level_a, "b": p.level_b, "method": p.method,
                    "diff": p.diff, "se": p.se, "statistic": p.statistic, "df": p.df,
                    "p_adj": p.p_adj, "ci_low": p.ci_low, "ci_high": p.ci_high}))
                .collect();
            v["groups"] = groups.into();
            v["pairs"] = pairs.into();
            v
        })
        .collect();
    let tz = config.plant.time_zone;
    let findings_reason = findings
        .is_null()
        .then_some("findings are kept for shift, day, week and month checks, not read back with --stored or for ranges");
    let doc = serde_json::json!({
        "plant": config.plant.name,
        "period": {"kind": period.kind.as_str(), "label": period.label,
                   "start": period.start.with_timezone(&tz).to_rfc3339(),
                   "end": period.end.with_timezone(&tz).to_rfc3339()},
        "findings": findings,
        "run": {"run_id": run.run_id, "version": run.version, "config_hash": run.header.config_hash,
                "tool_version": run.header.tool_version, "fdr_method": run.header.fdr_method,
                "fdr_level": run.header.fdr_level},
        "n_tests": content.tests.len(),
        "n_flagged": content.tests.iter().filter(|t| is_flag_state(&t.state)).count(),
        "tests": tests,
        "caution": crate::CAUTION,
    });
    let mut doc = doc;
    if let Some(reason) = findings_reason {
        doc["findings_reason"] = reason.into();
    }
    super::format::bound_tiny_p(&mut doc);
    serde_json::to_writer_pretty(&mut *out, &doc)?;
    writeln!(out)
}

/// One row per test: the period and run, the characteristic's unit and limits, the results,
/// and the group means in units (`level=mean;...`).
fn write_csv(
    path: &std::path::Path,
    config: &crate::config::Config,
    period: &Period,
    run: &StoredRun,
    content: &RunContent,
) -> Result<()> {
    let mut w = csv::Writer::from_writer(AtomicFile::create(path)?);
    let header = [
        "period_kind",
        "period",
        "period_start",
        "run_id",
        "version",
        "characteristic",
        "factor",
        "unit",
        "lsl",
        "usl",
        "target",
        "state",
        "is_new",
        "n_obs",
        "n_groups_used",
        "leading_method",
        "leading_statistic",
        "leading_p",
        "q_value",
        "anova_f",
        "anova_p",
        "welch_f",
        "welch_p",
        "kruskal_h",
        "kruskal_p",
        "brown_forsythe_p",
        "shapiro_p",
        "share_between",
        "spread_of_means",
        "spread_pct_tolerance",
        "standout_level",
        "standout_diff",
        "standout_sd_units",
        "standout_pct_tolerance",
        "group_means",
        "notes",
    ];
    let io = |e: csv::Error| Error::Io {
        path: path.to_path_buf(),
        source: std::io::Error::other(e),
    };
    w.write_record(header).map_err(io)?;
    let f = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:?}"));
    let start = period
        .start
        .with_timezone(&config.plant.time_zone)
        .to_rfc3339();
    for t in sorted(content) {
        let c = config.characteristic(&t.characteristic);
        let means: Vec<String> = content
            .groups
            .iter()
            .filter(|g| g.test_idx == t.test_idx)
            .map(|g| {
                let origin: f64 = g.origin.parse().unwrap_or(0.0);
                format!("{}={:?}", g.level, origin + g.mean)
            })
            .collect();
        w.write_record([
            period.kind.as_str().to_string(),
            period.label.clone(),
            start.clone(),
            run.run_id.to_string(),
            run.version.to_string(),
            t.characteristic.clone(),
            t.factor.clone(),
            c.map(|c| c.unit.clone()).unwrap_or_default(),
            f(c.and_then(|c| c.lsl)),
            f(c.and_then(|c| c.usl)),
            f(c.and_then(|c| c.target)),
            t.state.clone(),
            t.is_new.to_string(),
            t.n_obs.to_string(),
            t.n_groups_used.to_string(),
            t.leading_method.clone().unwrap_or_default(),
            f(t.leading_statistic),
            f(t.leading_p),
            f(t.q_value),
            f(t.anova_f),
            f(t.anova_p),
            f(t.welch_f),
            f(t.welch_p),
            f(t.kruskal_h),
            f(t.kruskal_p),
            f(t.brown_forsythe_p),
            f(t.shapiro_p),
            f(t.share_between),
            f(t.spread_of_means),
            f(t.spread_pct_tolerance),
            t.standout_level.clone().unwrap_or_default(),
            f(t.standout_diff),
            f(t.standout_sd_units),
            f(t.standout_pct_tolerance),
            means.join(";"),
            t.notes.clone(),
        ])
        .map_err(io)?;
    }
    w.flush().map_err(|e| Error::io(path, e))?;
    let file = w
        .into_inner()
        .map_err(|e| Error::io(path, e.into_error()))?;
    file.commit()
}
