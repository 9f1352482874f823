//! `samewise history --characteristic C --by FACTOR [--last 30] [--kind day]`: the comparison's
//! own trend, one line per period from the latest complete run of each period. The characteristic
//! may still stand first (`samewise history C --by FACTOR`), as in earlier versions.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::Args;

use super::check::{cell, leading, share, standout};
use super::vocab::{self, RunKind};
use crate::outputs::{group_means_cell, HistoryDocument, HistoryPeriod, Limits};
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
        let tz = config.plant.time_zone;
        let periods = points
            .iter()
            .map(|p| {
                let groups = crate::outputs::stored_groups(
                    &*store,
                    p.run.run_id,
                    characteristic,
                    &args.factor,
                )?;
                Ok(HistoryPeriod::new(p, groups, tz))
            })
            .collect::<Result<Vec<_>>>()?;
        let doc = HistoryDocument {
            characteristic: characteristic.to_string(),
            factor: args.factor.clone(),
            limits: Limits::of(&config, characteristic),
            period_kind: kind.to_string(),
            periods,
            caution: crate::CAUTION.to_string(),
        };
        if let Some(path) = &args.csv {
            write_csv(path, &doc)?;
            println!(
                "{} periods written to {}",
                doc.periods.len(),
                path.display()
            );
        } else {
            println!("{}", super::format::document_json(&doc));
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

/// One row per period: the period and run, the characteristic's unit and limits, the result
/// and the group means in units (`level=mean;...`); an unavailable value is an empty cell.
fn write_csv(path: &std::path::Path, doc: &HistoryDocument) -> Result<()> {
    let header = [
        "period_kind",
        "period",
        "start",
        "end",
        "run_id",
        "version",
        "revised",
        "characteristic",
        "factor",
        "unit",
        "lsl",
        "usl",
        "target",
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
        "stands_out_level",
        "stands_out_diff",
        "stands_out_sd_units",
        "stands_out_pct_tolerance",
        "group_means",
        "notes",
    ];
    let f = crate::output::csv_number;
    let l = &doc.limits;
    let rows = doc.periods.iter().map(|p| {
        let s = p.stands_out.as_ref();
        [
            doc.period_kind.clone(),
            p.period.clone(),
            p.start.clone().unwrap_or_default(),
            p.end.clone().unwrap_or_default(),
            p.run_id.to_string(),
            p.version.to_string(),
            p.revised.to_string(),
            doc.characteristic.clone(),
            doc.factor.clone(),
            l.unit.clone(),
            f(l.lsl),
            f(l.usl),
            f(l.target),
            p.state.as_str().to_string(),
            p.n_obs.to_string(),
            p.n_groups.to_string(),
            p.design.as_str().to_string(),
            p.n_subgroups.map_or(String::new(), |n| n.to_string()),
            p.leading_method
                .map_or(String::new(), |m| m.as_str().to_string()),
            f(p.statistic),
            f(p.p),
            f(p.q),
            f(p.share_between),
            f(p.within_sd),
            s.map_or(String::new(), |s| s.level.clone()),
            f(s.and_then(|s| s.diff)),
            f(s.and_then(|s| s.sd_units)),
            f(s.and_then(|s| s.pct_tolerance)),
            group_means_cell(&p.groups),
            p.notes.clone(),
        ]
    });
    crate::output::write_csv(path, &header, rows)
}
