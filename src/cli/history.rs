//! `samewise history --characteristic C --by FACTOR [--last 30] [--kind day]`: the comparison's
//! own trend, one line per period from the latest complete run of each period. The characteristic
//! may still stand first (`samewise history C --by FACTOR`), as in earlier versions.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::Args;

use super::check::{cell, leading, share, standout};
use super::vocab::{self, RunKind};
use crate::results::TestState;
use crate::storage::runs;
use crate::{Error, Result};

/// Flags of `samewise history`.
#[derive(Debug, Args)]
pub struct HistoryArgs {
    /// The characteristic: `--characteristic NAME`, or first without the flag.
    #[command(flatten)]
    pub characteristic: vocab::CharacteristicArg,
    /// The factor whose groups are compared.
    #[arg(long = "by", value_name = "FACTOR")]
    pub factor: String,
    /// How many periods, newest last.
    #[arg(long, default_value_t = 30)]
    pub last: usize,
    /// Period kind of the runs shown (`--period-kind` is accepted too).
    #[arg(long, value_enum, default_value_t = RunKind::Day, alias = "period-kind")]
    pub kind: RunKind,
    /// Print one JSON object (the periods oldest first; times RFC 3339 in the plant's zone).
    #[arg(long, conflicts_with = "csv")]
    pub json: bool,
    /// Write the periods to this CSV file (one row each).
    #[arg(long, value_name = "FILE.csv")]
    pub csv: Option<PathBuf>,
}

/// Runs `samewise history`.
pub fn run(args: &HistoryArgs) -> Result<ExitCode> {
    let config = super::common::load_config(super::common::config_flag())?;
    let characteristic = args.characteristic.name.as_str();
    let c = config.known_characteristic(characteristic)?;
    config.known_factor(&args.factor)?;
    let kind = crate::model::PeriodKind::from(args.kind).as_str();
    if let Some(path) = &args.csv {
        let protected = crate::output::Protected::plant(&config.plant.database, &config.path);
        crate::output::refuse_protected(path, "--csv", &protected)?;
    }
    let unit = c.unit.clone();
    let store = super::common::open_store(&config)?;
    let points = store.history(characteristic, &args.factor, kind, args.last)?;
    if args.json || args.csv.is_some() {
        let rows: Vec<serde_json::Value> = points.iter().map(|p| point_json(&config, p)).collect();
        if let Some(path) = &args.csv {
            write_csv(path, &rows)?;
            println!("{} periods written to {}", rows.len(), path.display());
        } else {
            let doc = serde_json::json!({
                "characteristic": characteristic,
                "factor": args.factor,
                "unit": c.unit,
                "lsl": c.lsl,
                "usl": c.usl,
                "target": c.target,
                "period_kind": kind,
                "periods": rows,
                "caution": crate::CAUTION,
            });
            println!("{}", serde_json::to_string_pretty(&doc).unwrap_or_default());
        }
        return Ok(ExitCode::from(super::EXIT_OK));
    }
    let mut out = std::io::stdout().lock();
    let mut body = || -> std::io::Result<()> {
        writeln!(
            out,
            "{} by {}: last {} {} period(s) with a complete run{}",
            characteristic,
            args.factor,
            points.len(),
            kind,
            if unit.is_empty() {
                String::new()
            } else {
                format!(" (differences in {unit})")
            }
        )?;
        writeln!(
            out,
            "{:<24} {:<8} {:>9} {:>9} {:>9} {:>8}  {:<22} stands out",
            "period", "leading", "F", "p", "q", "between", "state"
        )?;
        for p in &points {
            let t = &p.test;
            writeln!(
                out,
                "{:<24} {:<8} {:>9} {:>9} {:>9} {:>8}  {:<22} {}",
                if p.complete_versions > 1 {
                    format!("{} (revised)", p.run.header.period_label)
                } else {
                    p.run.header.period_label.clone()
                },
                leading(t),
                cell(t.leading.statistic),
                super::format::p_cell(t.leading.p),
                super::format::p_cell(t.q_value),
                share(t),
                t.state.label(),
                standout(t, &unit)
            )?;
        }
        writeln!(out)?;
        if points.iter().any(|p| p.complete_versions > 1) {
            writeln!(
                out,
                "(revised): the period was checked again after data arrived or was undone; its newest check is shown"
            )?;
        }
        writeln!(out, "{}", crate::CAUTION)
    };
    if let Err(e) = body() {
        if e.kind() != std::io::ErrorKind::BrokenPipe {
            return Err(Error::io("<stdout>", e));
        }
    }
    Ok(ExitCode::from(super::EXIT_OK))
}

/// One period of the history as JSON: the period and run, the state and leading test, the
/// between-group share and the standing-out group; every `null` with a `<name>_reason`.
fn point_json(config: &crate::config::Config, p: &runs::HistoryPoint) -> serde_json::Value {
    use serde_json::{json, Map, Value};
    let tz = config.plant.time_zone;
    let t = &p.test;
    let time = |ms: i64| {
        chrono::DateTime::<chrono::Utc>::from_timestamp_millis(ms)
            .map_or(Value::Null, |d| json!(d.with_timezone(&tz).to_rfc3339()))
    };
    let mut m = Map::new();
    m.insert("period".into(), json!(p.run.header.period_label));
    m.insert("start".into(), time(p.run.header.period_start_ms));
    m.insert("end".into(), time(p.run.header.period_end_ms));
    m.insert("run_id".into(), json!(p.run.run_id));
    m.insert("version".into(), json!(p.run.version));
    m.insert("revised".into(), json!(p.complete_versions > 1));
    m.insert("state".into(), json!(t.state));
    m.insert("n_obs".into(), json!(t.n_obs));
    m.insert("n_groups".into(), json!(t.n_groups_used));
    let why = if t.state == TestState::TooFewToCompare || t.state == TestState::TooLittleData {
        format!("{}: no test was run", t.state.label())
    } else {
        "not available for this test (see notes)".to_string()
    };
    let mut num = |key: &str, v: Option<f64>| {
        m.insert(
            key.into(),
            v.filter(|x| x.is_finite())
                .map_or(Value::Null, |x| json!(x)),
        );
        if v.is_none() {
            m.insert(format!("{key}_reason"), json!(why));
        }
    };
    num("statistic", t.leading.statistic);
    num("p", t.leading.p);
    num("q", t.q_value);
    num("share_between", t.variance_components.share_between);
    num("within_sd", t.anova.resid_sd);
    m.insert(
        "design".into(),
        json!(t
            .design
            .kind
            .unwrap_or(crate::results::DesignKind::Independent)),
    );
    m.insert("n_subgroups".into(), json!(t.design.n_subgroups));
    if t.design.n_subgroups.is_none() {
        m.insert(
            "n_subgroups_reason".into(),
            json!("no subgroups: the values were tested as independent"),
        );
    }
    m.insert("leading_method".into(), json!(t.leading.method));
    if t.leading.method.is_none() {
        m.insert("leading_method_reason".into(), json!(why));
    }
    match &t.stands_out.level {
        Some(level) => {
            m.insert(
                "stands_out".into(),
                json!({"level": level, "diff": t.stands_out.diff, "sd_units": t.stands_out.sd_units,
                       "pct_tolerance": t.stands_out.pct_tolerance}),
            );
        }
        None => {
            m.insert("stands_out".into(), Value::Null);
            m.insert("stands_out_reason".into(), json!(why));
        }
    }
    m.insert("notes".into(), json!(t.notes));
    Value::Object(m)
}

fn write_csv(path: &std::path::Path, rows: &[serde_json::Value]) -> Result<()> {
    let mut out = crate::output::AtomicFile::create(path)?;
    let cell = |v: &serde_json::Value| match v {
        serde_json::Value::Null => String::new(),
        serde_json::Value::String(s) if s.contains([',', '"', '\n', '\r']) => {
            format!("\"{}\"", s.replace('"', "\"\""))
        }
        serde_json::Value::String(s) => s.clone(),
        other => other.to_string(),
    };
    let columns = [
        "period",
        "start",
        "end",
        "run_id",
        "version",
        "revised",
        "state",
        "n_obs",
        "n_groups",
        "design",
        "n_subgroups",
        "leading_method",
        "statistic",
        "p",
        "q",
        "share_between",
        "within_sd",
    ];
    let mut text = format!(
        "{},stands_out_level,stands_out_diff,stands_out_sd_units,stands_out_pct_tolerance\n",
        columns.join(",")
    );
    for r in rows {
        let mut line: Vec<String> = columns.iter().map(|c| cell(&r[*c])).collect();
        for k in ["level", "diff", "sd_units", "pct_tolerance"] {
            line.push(cell(&r["stands_out"][k]));
        }
        text.push_str(&line.join(","));
        text.push('\n');
    }
    out.write_all(text.as_bytes())
        .map_err(|e| Error::io(path, e))?;
    out.commit()
}
