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
use crate::analysis::CheckOptions;
use crate::calendar::PlantCalendar;
use crate::config::Config;
use crate::model::Period;
use crate::output::{refuse_protected, Protected};
use crate::outputs::CheckFindings;
use crate::results::TestResult;
use crate::stats::fdr::FdrMethod;
use crate::storage::runs::{RunContent, StoredRun};
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
    /// Compare sites instead of checking this plant: every characteristic the named sites share
    /// (same name, unit, limits and target) with the site as the factor, e.g.
    /// `--sites north,south,east` (`all`: every site in the database). The sites' data must
    /// share this plant's PostgreSQL database; a site is its schema there. The period follows
    /// this plant's calendar; nothing is stored.
    #[arg(
        long,
        value_delimiter = ',',
        value_name = "SITE,SITE",
        conflicts_with_all = ["stored", "csv", "shift"]
    )]
    pub sites: Option<Vec<String>>,
}

/// The period named by the flags (days are dates already; only the shift, week and month
/// labels are parsed).
pub fn period_from_flags(args: &CheckArgs, calendar: &PlantCalendar) -> Result<Period> {
    if let Some(d) = args.day {
        return Ok(calendar.day(d));
    }
    if let (Some(a), Some(b)) = (args.from, args.to) {
        return calendar.range(a, b);
    }
    match args
        .shift
        .as_ref()
        .or(args.week.as_ref())
        .or(args.month.as_ref())
    {
        Some(label) => calendar.parse_period(label),
        None => Err(Error::Usage(
            "say which period: --day D, --shift D/NAME, --week 2026-W48, --month 2026-11 or --from A --to B".into(),
        )),
    }
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
    if let Some(sites) = &args.sites {
        return run_sites(args, &config, &period, &options, sites);
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
        check_and_record(&mut *store, &config, &period, &options, &Utc::now)?
    };
    if let Some(path) = &args.csv {
        write_csv(path, &config, &period, &run, &content)?;
    }
    // A new check brings the findings of its period kind up to date (ranges have none).
    let (findings, check_findings) = if args.stored
        || period.kind == crate::model::PeriodKind::Range
    {
        (None, None)
    } else {
        let update = crate::analysis::findings::update_findings(
            &mut *store,
            &config,
            period.kind,
            Utc::now(),
        )?;
        let lines =
            |v: &[crate::model::Finding]| super::findings::finding_lines_of(&*store, &config, v);
        let listed = CheckFindings {
            new: lines(&update.new)?,
            changed: lines(&update.changed)?,
            open: update.open.iter().map(|f| f.id).collect(),
        };
        (
            Some(super::findings::summary_lines(
                &*store,
                config.plant.time_zone,
                &update,
            )?),
            Some(listed),
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
        print_json(&mut out, &config, &period, &run, &content, check_findings)
    } else {
        print_summary(&mut out, &config, &period, &run, &content, None)
    };
    finish(
        written,
        &content.tests,
        &format!(
            "{} holds no measurement of the checked characteristics",
            period.label
        ),
    )
}

/// The end of a check: a closed stdout pipe counts as success, any other write error is the
/// error; then the exit status: flagged, else no data (with a note naming what is missing,
/// `no_data` in words), else ok.
fn finish(written: std::io::Result<()>, tests: &[TestResult], no_data: &str) -> Result<ExitCode> {
    if let Err(e) = written {
        if e.kind() != std::io::ErrorKind::BrokenPipe {
            return Err(Error::io("<stdout>", e));
        }
    }
    if tests.iter().any(|t| t.is_flag()) {
        return Ok(ExitCode::from(super::EXIT_FLAGGED));
    }
    if tests.iter().all(|t| t.n_obs == 0) {
        eprintln!(
            "note: {no_data} (exit status {}): is an export missing?",
            super::EXIT_NO_DATA
        );
        return Ok(ExitCode::from(super::EXIT_NO_DATA));
    }
    Ok(ExitCode::from(super::EXIT_OK))
}

/// `samewise check --sites`: the period compared across sites (`analysis::sites`), printed as
/// the check's table or as a [`crate::outputs::sites::SitesDocument`]; exit status as a check's.
fn run_sites(
    args: &CheckArgs,
    config: &Config,
    period: &Period,
    options: &CheckOptions,
    named: &[String],
) -> Result<ExitCode> {
    use crate::analysis::sites::{check_sites, Site};
    let mut names: Vec<String> = named.iter().map(|n| n.trim().to_string()).collect();
    if names.iter().any(String::is_empty) {
        return Err(Error::Usage(
            "--sites: a site name is empty; list the sites separated by commas, e.g. \
             --sites north,south"
                .into(),
        ));
    }
    if names == ["all"] {
        names = crate::storage::sites(config)?;
    }
    let stores = names
        .iter()
        .map(|n| crate::storage::open_site(config, n))
        .collect::<Result<Vec<_>>>()?;
    let sites: Vec<Site<'_>> = names
        .iter()
        .zip(&stores)
        .map(|(name, store)| Site {
            name: name.clone(),
            store: &**store,
        })
        .collect();
    let checked = check_sites(&sites, period.start, period.end, options)?;
    let tz = config.plant.time_zone;
    let calendar = format!(
        "{tz}, production days from {} (the calendar of {}, for every site)",
        config.plant.day_start.format("%H:%M"),
        config.plant.name
    );
    let spec = |name: &str| checked.compared.iter().find(|c| c.config.name == name);
    let mut out = std::io::stdout().lock();
    let written = if args.json {
        let tests: Vec<serde_json::Value> = sorted(&checked.content)
            .into_iter()
            .map(|t| with_spec(t, spec(&t.characteristic).map(|c| &c.config)).to_json())
            .collect();
        let document = crate::outputs::sites::SitesDocument {
            plant: config.plant.name.clone(),
            period: checked_period(period, tz),
            calendar,
            sites: checked
                .sites
                .iter()
                .map(|s| crate::outputs::sites::SiteLine {
                    site: s.site.clone(),
                    active_characteristics: s.active_characteristics,
                    values: s.values,
                })
                .collect(),
            fdr_method: options.fdr_method.key().to_string(),
            fdr_level: options.fdr_level,
            stored: false,
            n_tests: checked.content.tests.len(),
            n_flagged: checked.content.n_flagged(),
            tests: Vec::new(),
            not_compared: checked
                .not_compared
                .iter()
                .map(|n| crate::outputs::sites::NotComparedLine {
                    characteristic: n.characteristic.clone(),
                    sites: n.sites.clone(),
                    reason: n.reason.clone(),
                })
                .collect(),
            caution: crate::CAUTION.to_string(),
        };
        let mut doc = serde_json::to_value(&document).unwrap_or(serde_json::Value::Null);
        doc["tests"] = tests.into();
        super::format::bound_tiny_p(&mut doc);
        serde_json::to_writer_pretty(&mut out, &doc)
            .map_err(std::io::Error::from)
            .and_then(|()| writeln!(out))
    } else {
        let unit = |name: &str| {
            spec(name)
                .map(|c| c.config.unit.clone())
                .unwrap_or_default()
        };
        let mut text = || -> std::io::Result<()> {
            writeln!(
                out,
                "compare sites {}: {} ({}), {calendar}; not stored",
                names.join(", "),
                period.label,
                period.kind,
            )?;
            let width = checked
                .sites
                .iter()
                .map(|s| s.site.len())
                .max()
                .unwrap_or(0);
            for s in &checked.sites {
                writeln!(
                    out,
                    "  {:<width$}  {} active characteristics, {} values in the period",
                    s.site, s.active_characteristics, s.values
                )?;
            }
            writeln!(
                out,
                "{} tests, {} flagged at {} q <= {}",
                checked.content.tests.len(),
                checked.content.n_flagged(),
                options.fdr_method.key().to_uppercase(),
                options.fdr_level
            )?;
            print_table(&mut out, &checked.content, &unit, None)?;
            if !checked.not_compared.is_empty() {
                writeln!(out)?;
                writeln!(out, "not compared:")?;
                for n in &checked.not_compared {
                    writeln!(out, "  {:<20} {}", n.characteristic, n.reason)?;
                }
            }
            writeln!(out)?;
            writeln!(out, "{}", crate::CAUTION)
        };
        text()
    };
    finish(
        written,
        &checked.content.tests,
        &format!(
            "the sites hold no measurement of a shared characteristic in {}",
            period.label
        ),
    )
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
pub fn leading(t: &TestResult) -> &'static str {
    if t.state == crate::results::TestState::TooFewToCompare {
        return "-";
    }
    t.leading.method.map_or("-", |m| m.short())
}

/// The design of a row in a table column: `values` (independent), `nested`, `blocked`,
/// `cells`, or `-` for runs stored before designs were recorded.
pub fn design_cell(t: &TestResult) -> &'static str {
    t.design.kind.map_or("-", |d| d.short())
}

/// The between-group share of a row as a percentage with one decimal, or `-`.
pub fn share(t: &TestResult) -> String {
    t.variance_components
        .share_between
        .map_or("-".to_string(), |s| format!("{:.1}%", 100.0 * s))
}

/// The standing-out group in words: `M2 +0.0113 (1.1 SD, 5.6% tol)`.
pub fn standout(t: &TestResult, unit: &str) -> String {
    let s = &t.stands_out;
    let Some(level) = &s.level else {
        return "-".into();
    };
    let mut text = format!(
        "{level} {}{}{}",
        if s.diff.unwrap_or(0.0) >= 0.0 {
            "+"
        } else {
            ""
        },
        cell(s.diff),
        if unit.is_empty() || s.diff.is_none() {
            String::new()
        } else {
            format!(" {unit}")
        }
    );
    if let Some(sd) = s.sd_units {
        text.push_str(&format!(" ({:+.2} SD", sd));
        if let Some(pct) = s.pct_tolerance {
            text.push_str(&format!(", {pct:+.1}% tol"));
        }
        text.push(')');
    }
    text
}

fn sorted(content: &RunContent) -> Vec<&TestResult> {
    let mut tests: Vec<&TestResult> = content.tests.iter().collect();
    tests.sort_by(|a, b| {
        (a.state.rank(), a.q_value.unwrap_or(2.0), a.index)
            .partial_cmp(&(b.state.rank(), b.q_value.unwrap_or(2.0), b.index))
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
    let n_flag = content.tests.iter().filter(|t| t.is_flag()).count();
    writeln!(
        out,
        "check {} ({}), run {} version {}: {} tests, {} flagged at {} q <= {}",
        period.label,
        period.kind,
        run.run_id,
        run.version,
        content.tests.len(),
        n_flag,
        run.header.fdr_method.key().to_uppercase(),
        run.header.fdr_level
    )?;
    print_table(out, content, &unit, max_unflagged)?;
    writeln!(out)?;
    writeln!(out, "{}", crate::CAUTION)
}

/// The table of tests, flagged first: state, characteristic, factor, design, leading test,
/// statistic, p, q, between-group share, the standing-out group and the "new" mark.
/// `max_unflagged` limits the lines of tests without a flag.
fn print_table(
    out: &mut impl Write,
    content: &RunContent,
    unit: &dyn Fn(&str) -> String,
    max_unflagged: Option<usize>,
) -> std::io::Result<()> {
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
        if !t.is_flag() {
            unflagged += 1;
            if max_unflagged.is_some_and(|m| unflagged > m) {
                continue;
            }
        }
        writeln!(
            out,
            "{:<24} {:<20} {:<14} {:<8} {:<10} {:<9} {:>9} {:>9} {:>7}  {:<34} {}",
            t.state.label(),
            t.characteristic,
            t.factor,
            design_cell(t),
            leading(t),
            cell(t.leading.statistic),
            super::format::p_cell(t.leading.p),
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
    Ok(())
}

/// One test with its characteristic's unit and limits from the configuration.
pub fn checked_test(config: &Config, t: &TestResult) -> crate::results::CheckedTest {
    with_spec(t, config.characteristic(&t.characteristic))
}

/// One test with the unit and limits of `c` (none when `c` is `None`).
fn with_spec(
    t: &TestResult,
    c: Option<&crate::config::CharacteristicConfig>,
) -> crate::results::CheckedTest {
    crate::results::CheckedTest {
        result: t.clone(),
        unit: c.map(|c| c.unit.clone()).unwrap_or_default(),
        lsl: c.and_then(|c| c.lsl),
        usl: c.and_then(|c| c.usl),
        target: c.and_then(|c| c.target),
    }
}

/// The period of a check document, its instants in the plant's zone.
fn checked_period(period: &Period, tz: chrono_tz::Tz) -> crate::results::CheckedPeriod {
    crate::results::CheckedPeriod {
        kind: period.kind.as_str().to_string(),
        label: period.label.clone(),
        start: crate::outputs::plant_time(period.start, tz),
        end: crate::outputs::plant_time(period.end, tz),
    }
}

/// The `check --json` document as JSON: [`crate::results::CheckDocument`] serialized, every
/// `null` with its reason, p-values below the floor as bounds.
pub fn check_document(
    config: &Config,
    period: &Period,
    run: &StoredRun,
    content: &RunContent,
    findings: Option<CheckFindings>,
) -> serde_json::Value {
    use crate::results::{CheckDocument, CheckedRun};
    let tz = config.plant.time_zone;
    let tests: Vec<_> = sorted(content)
        .into_iter()
        .map(|t| checked_test(config, t))
        .collect();
    let document = CheckDocument {
        plant: config.plant.name.clone(),
        period: checked_period(period, tz),
        findings,
        run: CheckedRun {
            run_id: run.run_id,
            version: run.version,
            config_hash: run.header.config_hash.clone(),
            tool_version: run.header.tool_version.clone(),
            fdr_method: run.header.fdr_method.key().to_string(),
            fdr_level: run.header.fdr_level,
        },
        n_tests: content.tests.len(),
        n_flagged: content.n_flagged(),
        tests: Vec::new(),
        caution: crate::CAUTION.to_string(),
    };
    let mut doc = serde_json::to_value(&document).unwrap_or(serde_json::Value::Null);
    doc["tests"] = tests.iter().map(|t| t.to_json()).collect();
    if document.findings.is_none() {
        doc["findings_reason"] = "findings are kept for shift, day, week and month checks, not read back with --stored or for ranges".into();
    }
    super::format::bound_tiny_p(&mut doc);
    doc
}

fn print_json(
    out: &mut impl Write,
    config: &Config,
    period: &Period,
    run: &StoredRun,
    content: &RunContent,
    findings: Option<CheckFindings>,
) -> std::io::Result<()> {
    let doc = check_document(config, period, run, content, findings);
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
    let f = crate::output::csv_number;
    let start = period
        .start
        .with_timezone(&config.plant.time_zone)
        .to_rfc3339();
    let rows = sorted(content).into_iter().map(|t| {
        let c = config.characteristic(&t.characteristic);
        let means: Vec<String> = t
            .groups
            .iter()
            .map(|g| format!("{}={:?}", g.name, g.mean))
            .collect();
        [
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
            t.state.as_str().to_string(),
            t.is_new.to_string(),
            t.n_obs.to_string(),
            t.n_groups_used.to_string(),
            t.leading
                .method
                .map_or(String::new(), |m| m.as_str().to_string()),
            f(t.leading.statistic),
            f(t.leading.p),
            f(t.q_value),
            f(t.anova.f),
            f(t.anova.p),
            f(t.welch.f),
            f(t.welch.p),
            f(t.kruskal_wallis.h),
            f(t.kruskal_wallis.p),
            f(t.brown_forsythe.p),
            f(t.shapiro_wilk.p),
            f(t.variance_components.share_between),
            f(t.spread_of_means),
            f(t.spread_pct_tolerance),
            t.stands_out.level.clone().unwrap_or_default(),
            f(t.stands_out.diff),
            f(t.stands_out.sd_units),
            f(t.stands_out.pct_tolerance),
            means.join(";"),
            t.notes.clone(),
        ]
    });
    crate::output::write_csv(path, &header, rows)
}
