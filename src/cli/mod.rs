//! The command line: clap types, one file per subcommand. The only module that knows clap and the
//! only one that reads the wall clock. It turns flags and the config file into values, calls the
//! layers below, and prints.

use std::io::Write;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;

use clap::{Parser, Subcommand};

use crate::Error;

// Every `println!` and `print!` in the subcommands below goes through [`write_stdout`] (these
// definitions shadow the standard macros in this module and its children): a closed pipe
// (`samewise status | head -1`) or a full device never panics; the command carries on quietly
// and [`run`] turns a write error other than a closed pipe into an error status at the end.
macro_rules! println {
    () => {
        $crate::cli::write_stdout(format_args!("\n"))
    };
    ($($arg:tt)*) => {
        $crate::cli::write_stdout(format_args!("{}\n", format_args!($($arg)*)))
    };
}

#[allow(unused_macros)]
macro_rules! print {
    ($($arg:tt)*) => {
        $crate::cli::write_stdout(format_args!($($arg)*))
    };
}

// `eprintln!` likewise never panics: stderr may be a closed pipe too (`2>&1 | head -1`); a
// message that cannot be written is dropped.
macro_rules! eprintln {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stderr().lock(), $($arg)*);
    }};
}

pub mod alert;
pub mod chart;
pub mod check;
pub mod common;
pub mod compare;
pub mod db;
pub mod demo;
pub mod event;
pub mod findings;
pub mod format;
pub mod history;
pub mod import;
pub mod init;
pub mod investigate;
pub mod progress;
pub mod report;
pub mod schedule;
pub mod status;
pub mod vocab;
pub mod when;

/// Exit code: finished, nothing flagged.
pub const EXIT_OK: u8 = 0;
/// Exit code: an error stopped the command.
pub const EXIT_ERROR: u8 = 1;
/// Exit code: finished, and at least one test was flagged.
pub const EXIT_FLAGGED: u8 = 3;
/// Exit code (`check`): finished, but the period holds no measurement of the checked
/// characteristics, which is not the same as "nothing flagged".
pub const EXIT_NO_DATA: u8 = 4;

/// The exit statuses every command shares (the README's table lists them per command).
const EXITS_COMMON: &str = "Exit status: 0 done; 1 an error stopped it (message on stderr); \
2 the command line could not be parsed. A closed stdout (`| head`) does not change the status; \
a stdout that cannot be written otherwise (a full device) gives 1.";

/// samewise: do your machines, lines, shifts and suppliers still produce the same result?
#[derive(Debug, Parser)]
#[command(name = "samewise", version, about, long_about = None, after_help = EXITS_ALL)]
pub struct Args {
    /// The plant configuration, for every command that reads one (default: $SAMEWISE_CONFIG,
    /// then ./plant.toml); it may stand before or after the command.
    #[arg(long, value_name = "FILE", global = true)]
    pub config: Option<std::path::PathBuf>,
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The exit statuses of every command, for `samewise --help`.
const EXITS_ALL: &str = "Exit status: 0 done (nothing flagged); 1 an error stopped the command \
(`import`: a file failed, was already imported, or stored nothing; `schedule`: a period failed; \
`db check`: the database failed the check); 2 the command line could not be parsed; 3 `check` \
finished and at least one test was flagged. A closed stdout (`| head`) does not change the \
status. `samewise COMMAND --help` gives each command's.";

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the invented sample plant end to end: import, catch-up of every check, report.
    #[command(after_help = EXITS_COMMON)]
    Demo(demo::DemoArgs),
    /// Compare the groups of one CSV file: one-way ANOVA, checks, Welch, Kruskal-Wallis and more.
    #[command(after_help = EXITS_COMMON)]
    Compare(compare::CompareArgs),
    /// Create the plant database from the configuration, or bring it up to date.
    #[command(
        after_help = "Exit status: 0 the database is created or up to date; 1 an error stopped it (also: the file is another program's database); 2 the command line could not be parsed."
    )]
    Init(init::InitArgs),
    /// Import CSV exports; each file goes in completely or not at all.
    #[command(
        after_help = "Exit status: 0 every file stored measurements; 1 a file could not be read, was already imported (without --force), or stored nothing (every row rejected, or no data rows: such an import keeps its rejections but does not count as imported, so the corrected file needs no --force); the other files are still imported; 2 the command line could not be parsed. A closed stdout does not change the status; with several files, stderr then names the files stored. `import list`: 0 listed, 1 an error. `import undo N`: 0 undone; 1 nothing changed (no such import, undone already, an undo, or an error)."
    )]
    Import(import::ImportArgs),
    /// Show what the database holds.
    #[command(after_help = EXITS_COMMON)]
    Status(status::StatusArgs),
    /// Record and list process-change events.
    #[command(after_help = EXITS_COMMON)]
    Event(event::EventArgs),
    /// Check or back up the database.
    #[command(
        after_help = "Exit status: 0 done (`db check`: the database is sound); 1 an error stopped it, or `db check` found a problem; 2 the command line could not be parsed."
    )]
    Db(db::DbArgs),
    /// Before vs after a process change per group (two-way ANOVA), or a change-point scan.
    #[command(after_help = EXITS_COMMON)]
    Investigate(investigate::InvestigateArgs),
    /// Write the deterministic benchmark plant (CSV + configuration).
    #[command(hide = true)]
    GenerateBenchData(import::GenerateArgs),
    /// Check one period: every characteristic x factor, false-discovery control, stored as a run.
    #[command(
        long_about = CHECK_RULE,
        after_help = "Exit status: 0 done, nothing flagged; 3 done, at least one test flagged; 4 done, but the period holds no measurement of the checked characteristics (an export may be missing); 1 an error stopped it (the run is kept as failed); 2 the command line could not be parsed. A closed stdout does not change the status."
    )]
    Check(check::CheckArgs),
    /// Findings: flags of one group joined over the periods (which group, how much, since
    /// when, after which logged change); `findings note N TEXT` adds a note.
    #[command(after_help = EXITS_COMMON)]
    Findings(findings::FindingsArgs),
    /// The trend of one comparison (characteristic by factor) over the stored runs.
    #[command(after_help = EXITS_COMMON)]
    History(history::HistoryArgs),
    /// Run the configured schedules: `due` once (for cron), `run` in the foreground.
    #[command(
        after_help = "Exit status (`schedule due`): 0 every due period ran and none has a flag; 3 every due period ran and at least one run it made has a flag (the alert hook for cron and timers); 1 a period failed (the others still ran; a failure outranks a flag) or an error stopped it; 2 the command line could not be parsed."
    )]
    Schedule(schedule::ScheduleArgs),
    /// Write the monthly review report (one self-contained HTML file) from the stored runs.
    #[command(after_help = EXITS_COMMON)]
    Report(report::ReportArgs),
    /// Draw one chart (trend, share, detail, grid, before-after) as SVG or PNG.
    #[command(after_help = EXITS_COMMON)]
    Chart(chart::ChartArgs),
    /// Print a shell completion script (bash, zsh or fish) to stdout.
    #[command(after_help = EXITS_COMMON)]
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
- groups about equally sized (largest at most 1.5 x smallest) but smaller than Welch's test needs (5 values per group up to 5 groups, 10 up to 10, 15 up to 20, 30 up to 40), without a check of the spreads: from 5 values per group Brown and Forsythe's F* (its df follow the group variances), with 2-4 the classic F;
- very unequal sizes and a group below Welch's size: no test; the state is \"too few values to compare\";
- very unequal sizes and every group at Welch's size: Welch's test, without a check of the spreads;
- about equal sizes at Welch's size: Brown-Forsythe (p < 0.05) and, with at most 5 groups, the SD ratio (> 2) judge the spreads: alike, the classic F leads; different, Welch's test;
- where Welch's test leads with at most 5 groups and 20-49 values in the smallest: its p-value from the bootstrap-t (599 resamples of each group's values around its own mean; the random stream starts from a state computed from the data, so the same data give the same verdict), which holds its level on skewed values where Welch's F distribution does not.

Sampling structure (a layout's subgroup = \"Shot\" column, or subgroup_window): parts of one subgroup share its deviation. A factor constant within every subgroup (machine, lot, shift) is tested on the subgroup means (nested); a factor that varies within the subgroups (cavity, spindle) is tested with the subgroups as blocks (additive two-way ANOVA, Type II); anything else on the mean of each level within each subgroup. Without subgroups the values are checked for serial dependence in time order; a flag that does not hold once the design effect of that dependence is allowed for becomes \"differs? not independent\" (not a flag: name the subgroup column).

States: differs and material (q <= level and the near end of the standing-out group's 95% interval against the rest, Bonferroni over the groups, reaches the material share of the tolerance, or of the distance from the target to a single limit), differs, differs? not independent, no evidence, too few values to compare (no p-value, outside the false-discovery family), too little data.";

/// Set once a write to stdout failed: later output is dropped.
static STDOUT_CLOSED: AtomicBool = AtomicBool::new(false);
/// The first stdout write error that was not a closed pipe (a full device, an I/O error).
static STDOUT_ERROR: Mutex<Option<std::io::Error>> = Mutex::new(None);

/// Writes to stdout; once a write has failed (closed pipe, full device) output is dropped and
/// the failure is noted for [`run`] (see [`note_stdout_error`]). Used by `println!` and `print!`
/// in this module.
pub fn write_stdout(args: std::fmt::Arguments<'_>) {
    if STDOUT_CLOSED.load(Ordering::Relaxed) {
        return;
    }
    let mut out = std::io::stdout().lock();
    if let Err(e) = out.write_fmt(args) {
        note_stdout_error(e);
    }
}

/// Notes a failed write to stdout: a closed pipe ends the output quietly (the reader wanted no
/// more, as `head` does); any other error makes the command end with the error status.
pub fn note_stdout_error(e: std::io::Error) {
    STDOUT_CLOSED.store(true, Ordering::Relaxed);
    if e.kind() != std::io::ErrorKind::BrokenPipe {
        let mut first = STDOUT_ERROR.lock().unwrap_or_else(|p| p.into_inner());
        if first.is_none() {
            *first = Some(e);
        }
    }
}

/// Whether a write to stdout has failed (its later output was dropped).
pub fn stdout_closed() -> bool {
    STDOUT_CLOSED.load(Ordering::Relaxed)
}

/// Runs one command and returns the process exit code.
///
/// A closed stdout pipe counts as success (exit status of the command as if it had printed); a
/// stdout that could not be written otherwise (a full device) gives the error status.
pub fn run(args: Args) -> crate::Result<ExitCode> {
    let result = run_command(args);
    if !stdout_closed() {
        if let Err(e) = std::io::stdout().lock().flush() {
            note_stdout_error(e);
        }
    }
    let failed = STDOUT_ERROR
        .lock()
        .unwrap_or_else(|p| p.into_inner())
        .take();
    match (result, failed) {
        (Ok(_), Some(e)) => Err(Error::io("<stdout>", e)),
        (result, _) => result,
    }
}

fn run_command(args: Args) -> crate::Result<ExitCode> {
    common::set_config_flag(args.config.clone());
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
        Command::Findings(a) => findings::run(&a, chrono::Utc::now()),
        Command::Schedule(a) => schedule::run(&a),
        Command::Report(a) => report::run(&a, chrono::Utc::now()),
        Command::Chart(a) => chart::run(&a),
        Command::Completions { shell } => {
            let mut cmd = without_hidden(<Args as clap::CommandFactory>::command());
            // Generated into memory: the generator panics on a failed write.
            let mut script = Vec::new();
            clap_complete::generate(shell, &mut cmd, "samewise", &mut script);
            let mut out = std::io::stdout().lock();
            if let Err(e) = out.write_all(&script).and_then(|_| out.flush()) {
                note_stdout_error(e);
            }
            Ok(ExitCode::from(EXIT_OK))
        }
    }
}

/// `cmd` without its hidden subcommands (a benchmark helper), for the shell completions: clap
/// cannot remove a subcommand, so the top level is rebuilt with the same flags and the visible
/// subcommands.
fn without_hidden(cmd: clap::Command) -> clap::Command {
    let visible: Vec<clap::Command> = cmd
        .get_subcommands()
        .filter(|s| !s.is_hide_set())
        .cloned()
        .collect();
    clap::Command::new("samewise")
        .args(cmd.get_arguments().cloned())
        .subcommands(visible)
}

/// Prints `error: ` and the message with each cause on its own line to stderr; returns exit code 1.
/// A writer that gave up waiting for the database's lock says what holds it.
pub fn report_error(err: &Error) -> ExitCode {
    let mut stderr = std::io::stderr().lock();
    match common::database_in_use().filter(|_| crate::storage::is_busy(err)) {
        Some(db) => {
            let _ = writeln!(stderr, "error: {}", crate::storage::busy_message(&db));
            let _ = writeln!(stderr, "  caused by: {err}");
        }
        None => {
            let _ = writeln!(stderr, "error: {err}");
        }
    }
    let mut source = std::error::Error::source(err);
    while let Some(cause) = source {
        let _ = writeln!(stderr, "  caused by: {cause}");
        source = cause.source();
    }
    ExitCode::from(EXIT_ERROR)
}
