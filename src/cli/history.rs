//! `samewise history CHARACTERISTIC --by FACTOR [--last 30] [--kind day]`: the comparison's own
//! trend, one line per period from the latest complete run of each period.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::Args;

use super::check::{cell, leading, share, standout};
use crate::analysis::state;
use crate::storage::runs;
use crate::{Error, Result};

/// Flags of `samewise history`.
#[derive(Debug, Args)]
pub struct HistoryArgs {
    /// Plant configuration (default: $SAMEWISE_CONFIG, then ./plant.toml).
    #[arg(long)]
    pub config: Option<PathBuf>,
    /// The characteristic.
    pub characteristic: String,
    /// The factor whose groups are compared.
    #[arg(long = "by")]
    pub factor: String,
    /// How many periods, newest last.
    #[arg(long, default_value_t = 30)]
    pub last: usize,
    /// Period kind: shift, day, week, month or range.
    #[arg(long, default_value = "day", value_parser = ["shift", "day", "week", "month", "range"])]
    pub kind: String,
}

/// Runs `samewise history`.
pub fn run(args: &HistoryArgs) -> Result<ExitCode> {
    let config = super::common::load_config(args.config.as_deref())?;
    if config.characteristic(&args.characteristic).is_none() {
        return Err(Error::Usage(format!(
            "characteristic \"{}\" is not in {}",
            args.characteristic,
            config.path.display()
        )));
    }
    if config.factor_index(&args.factor).is_none() {
        return Err(Error::Usage(format!(
            "--by {}: no such factor in {}",
            args.factor,
            config.path.display()
        )));
    }
    let store = super::common::open_store(&config)?;
    let points = runs::history(
        store.connection(),
        &args.characteristic,
        &args.factor,
        &args.kind,
        args.last,
    )?;
    let mut out = std::io::stdout().lock();
    let mut body = || -> std::io::Result<()> {
        writeln!(
            out,
            "{} by {}: last {} {} period(s) with a complete run",
            args.characteristic,
            args.factor,
            points.len(),
            args.kind
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
                cell(t.leading_statistic),
                super::format::p_cell(t.leading_p),
                super::format::p_cell(t.q_value),
                share(t),
                state::label(&t.state),
                standout(t)
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
