//! The command line: clap types, one file per subcommand. The only module that knows clap and the
//! only one that reads the wall clock. It turns flags and the config file into values, calls the
//! layers below, and prints.

use std::io::Write;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use crate::Error;

pub mod chart;
pub mod check;
pub mod common;
pub mod compare;
pub mod db;
pub mod demo;
pub mod event;
pub mod format;
pub mod history;
pub mod import;
pub mod init;
pub mod investigate;
pub mod report;
pub mod schedule;
pub mod status;

/// Exit code: finished, nothing flagged.
pub const EXIT_OK: u8 = 0;
/// Exit code: an error stopped the command.
pub const EXIT_ERROR: u8 = 1;
/// Exit code: finished, and at least one test was flagged.
pub const EXIT_FLAGGED: u8 = 3;

/// samewise: do your machines, lines, shifts and suppliers still produce the same result?
#[derive(Debug, Parser)]
#[command(name = "samewise", version, about, long_about = None)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the invented sample plant end to end: import, catch-up of every check, report.
    Demo(demo::DemoArgs),
    /// Compare the groups of one CSV file: one-way ANOVA, checks, Welch, Kruskal-Wallis and more.
    Compare(compare::CompareArgs),
    /// Create the plant database from the configuration, or bring it up to date.
    Init(init::InitArgs),
    /// Import CSV exports; each file goes in completely or not at all.
    Import(import::ImportArgs),
    /// Show what the database holds.
    Status(status::StatusArgs),
    /// Record and list process-change events.
    Event(event::EventArgs),
    /// Check or back up the database.
    Db(db::DbArgs),
    /// Before vs after a process change per group (two-way ANOVA), or a change-point scan.
    Investigate(investigate::InvestigateArgs),
    /// Write the deterministic benchmark plant (CSV + configuration).
    #[command(hide = true)]
    GenerateBenchData(import::GenerateArgs),
    /// Check one period: every characteristic x factor, false-discovery control, stored as a run.
    #[command(long_about = CHECK_RULE)]
    Check(check::CheckArgs),
    /// The trend of one comparison (characteristic by factor) over the stored runs.
    History(history::HistoryArgs),
    /// Run the configured schedules: `due` once (for cron), `run` in the foreground.
    Schedule(schedule::ScheduleArgs),
    /// Write the monthly review report (one self-contained HTML file) from the stored runs.
    Report(report::ReportArgs),
    /// Draw one chart (trend, share, detail, grid, before-after) as SVG or PNG.
    Chart(chart::ChartArgs),
    /// Print a shell completion script (bash, zsh or fish) to stdout.
    Completions {
        /// The shell.
        shell: clap_complete::Shell,
    },
}

impl Args {
    /// Parses the process arguments (exits with clap's message on a usage error).
    pub fn parse_from_env() -> Self {
        Args::parse()
    }
}

/// The leading-method rule and the flag states, for `samewise check --help` (the same text as the
/// README's concepts; the numbers come from the null-rate study, docs/null-rates.md).
const CHECK_RULE: &str = "Check one period: every characteristic x factor, false-discovery control, stored as a run.

Which test leads (chosen from the null-rate study in docs/null-rates.md, `cargo run --release --example null_rates`):
- every group constant (a coarse gauge): the exact permutation test of the group labels;
- groups about equally sized (largest at most 1.5 x smallest) but smaller than Welch's test needs (5 values per group up to 5 groups, 10 up to 10, 15 up to 20, 30 up to 40): the classic F, without a check of the spreads;
- very unequal sizes and a group below Welch's size: no test; the state is \"too few values to compare\";
- very unequal sizes and every group at Welch's size: Welch's test, without a check of the spreads;
- about equal sizes at Welch's size: Brown-Forsythe (p < 0.05) and, with at most 5 groups, the SD ratio (> 2) judge the spreads: alike, the classic F leads; different, Welch's test.

States: differs and material (q <= level and the near end of the standing-out group's 95% interval against the rest, Bonferroni over the groups, reaches the material share of the tolerance, or of the distance from the target to a single limit), differs, no evidence, too few values to compare (no p-value, outside the false-discovery family), too little data.

Exit status: 0 nothing flagged, 3 something flagged, 2 an error.";

/// Runs one command and returns the process exit code.
pub fn run(args: Args) -> crate::Result<ExitCode> {
    match args.command {
        Command::Demo(a) => demo::run(&a),
        Command::Compare(compare_args) => compare::run(&compare_args),
        Command::Init(a) => init::run(&a),
        Command::Import(a) => import::run(&a),
        Command::Status(a) => status::run(&a),
        Command::Event(a) => event::run(&a),
        Command::Db(a) => db::run(&a),
        Command::Investigate(a) => investigate::run(&a, chrono::Utc::now()),
        Command::GenerateBenchData(a) => import::generate(&a),
        Command::Check(a) => check::run(&a),
        Command::History(a) => history::run(&a),
        Command::Schedule(a) => schedule::run(&a),
        Command::Report(a) => report::run(&a, chrono::Utc::now()),
        Command::Chart(a) => chart::run(&a),
        Command::Completions { shell } => {
            let mut cmd = <Args as clap::CommandFactory>::command();
            let mut out = std::io::stdout().lock();
            clap_complete::generate(shell, &mut cmd, "samewise", &mut out);
            let _ = out.flush();
            Ok(ExitCode::from(EXIT_OK))
        }
    }
}

/// Prints `error: ` and the message with each cause on its own line to stderr; returns exit code 1.
pub fn report_error(err: &Error) -> ExitCode {
    let mut stderr = std::io::stderr().lock();
    let _ = writeln!(stderr, "error: {err}");
    let mut source = std::error::Error::source(err);
    while let Some(cause) = source {
        let _ = writeln!(stderr, "  caused by: {cause}");
        source = cause.source();
    }
    ExitCode::from(EXIT_ERROR)
}
