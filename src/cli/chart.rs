//! `samewise chart trend|share|detail|grid|before-after ... --out FILE.svg|png`: one chart from
//! the stored runs (trend, share, grid) or the stored values (detail, before-after). The format
//! comes from the extension of `--out`.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use chrono::{Duration, NaiveDate};
use clap::{Args, ValueEnum};

use super::vocab::Kind;
use super::when;
use crate::analysis::report;
use crate::calendar::PlantCalendar;
use crate::config::Config;
use crate::model::{Period, PeriodKind};
use crate::report::{Format, Size};
use crate::{Error, Result};

/// Which chart.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ChartKind {
    /// Group means per period with their 95% intervals, limits, events and flagged periods.
    Trend,
    /// Between-group share of variance per period with its interval.
    Share,
    /// Every value of one period per group, beside a normal Q-Q plot of the residuals.
    Detail,
    /// The month overview: one row per characteristic x factor, one cell per day.
    Grid,
    /// One panel per group around a logged process change.
    BeforeAfter,
}

/// Flags of `samewise chart`.
#[derive(Debug, Args)]
pub struct ChartArgs {
    /// Which chart.
    #[arg(value_enum, value_name = "CHART")]
    pub chart: ChartKind,
    /// The characteristic (trend, share, detail, before-after).
    #[arg(long, value_name = "NAME")]
    pub characteristic: Option<String>,
    /// The factor whose groups are compared (trend, share, detail, before-after).
    #[arg(long = "by", value_name = "FACTOR")]
    pub factor: Option<String>,
    /// A month, YYYY-MM (grid; or the range of trend and share).
    #[arg(long)]
    pub month: Option<String>,
    /// First production day of the range (trend, share), YYYY-MM-DD.
    #[arg(long, value_name = "DAY", value_parser = when::day)]
    pub from: Option<NaiveDate>,
    /// Last production day of the range, YYYY-MM-DD, included (trend, share; default: --from).
    #[arg(long, value_name = "DAY", value_parser = when::day, requires = "from")]
    pub to: Option<NaiveDate>,
    /// Period kind of the runs drawn (trend, share; `--period-kind` is accepted too).
    #[arg(long, value_enum, default_value_t = Kind::Day, alias = "period-kind")]
    pub kind: Kind,
    /// Production day of the detail chart, YYYY-MM-DD.
    #[arg(long, value_name = "DAY", value_parser = when::day)]
    pub day: Option<NaiveDate>,
    /// Any period label for the detail chart ("2026-11-30/night", "2026-W48", "2026-11").
    #[arg(long)]
    pub period: Option<String>,
    /// Event id (before-after; list them with `samewise event list`).
    #[arg(long)]
    pub event: Option<i64>,
    /// Days before and after the event (before-after).
    #[arg(long, default_value_t = report::EVENT_WINDOW_DAYS)]
    pub window_days: i64,
    /// The file to write: .svg or .png (never the database or its configuration; written to a
    /// temporary name and renamed).
    #[arg(long)]
    pub out: PathBuf,
    /// Width in pixels (default 1280; the grid sizes itself).
    #[arg(long)]
    pub width: Option<u32>,
    /// Height in pixels (default 680).
    #[arg(long)]
    pub height: Option<u32>,
}

fn need<'a>(value: &'a Option<String>, flag: &str, kind: ChartKind) -> Result<&'a str> {
    value.as_deref().ok_or_else(|| {
        Error::Usage(format!(
            "chart {}: {flag} is required",
            kind.to_possible_value()
                .map_or("?".into(), |v| v.get_name().to_string())
        ))
    })
}

/// `--characteristic` and `--by`, both required here, checked against the configuration (an
/// unknown name is answered with the closest ones).
fn subject<'a>(args: &'a ChartArgs, config: &Config) -> Result<(&'a str, &'a str)> {
    let c = need(&args.characteristic, "--characteristic", args.chart)?;
    let f = need(&args.factor, "--by", args.chart)?;
    config.known_characteristic(c)?;
    config.known_factor(f)?;
    Ok((c, f))
}

fn range(args: &ChartArgs, calendar: &PlantCalendar) -> Result<Period> {
    match (&args.month, args.from, args.to) {
        (Some(m), None, None) => super::report::parse_month(calendar, m),
        (None, Some(from), Some(to)) => calendar.range(from, to),
        (None, Some(from), None) => calendar.range(from, from),
        _ => Err(Error::Usage(
            "give the range as --month YYYY-MM or --from YYYY-MM-DD [--to YYYY-MM-DD]".into(),
        )),
    }
}

/// Renders the chart the flags ask for.
pub fn render(
    args: &ChartArgs,
    config: &Config,
    store: &dyn crate::storage::PlantStore,
) -> Result<Vec<u8>> {
    let format = Format::from_path(&args.out).ok_or_else(|| {
        Error::Usage(format!(
            "--out {}: the file name must end in .svg or .png",
            args.out.display()
        ))
    })?;
    let size = Size::new(
        args.width.unwrap_or(Size::DEFAULT.width),
        args.height.unwrap_or(Size::DEFAULT.height),
    );
    let calendar = PlantCalendar::new(config);
    let kind = args.chart;
    match kind {
        ChartKind::Trend | ChartKind::Share => {
            let (c, f) = subject(args, config)?;
            let p = range(args, &calendar)?;
            let pk = PeriodKind::from(args.kind);
            if kind == ChartKind::Trend {
                let input = report::trend_input(store, config, c, f, pk, p.start, p.end)?;
                if input.periods.is_empty() {
                    return Err(no_runs(pk.as_str(), &p));
                }
                // Small multiples (many groups) need more height than the default.
                let size = match args.height {
                    Some(_) => size,
                    None => Size::new(size.width, crate::report::trend_size(&input).height),
                };
                crate::report::render_trend(&input, format, size)
            } else {
                let input = report::share_input(store, config, c, f, pk, p.start, p.end)?;
                if input.periods.is_empty() {
                    return Err(no_runs(pk.as_str(), &p));
                }
                crate::report::render_share(&input, format, size)
            }
        }
        ChartKind::Detail => {
            let (c, f) = subject(args, config)?;
            let period = match (&args.day, &args.period) {
                (Some(d), None) => calendar.day(*d),
                (None, Some(label)) => calendar.parse_period(label)?,
                _ => {
                    return Err(Error::Usage(
                        "chart detail: give --day YYYY-MM-DD or --period LABEL".into(),
                    ))
                }
            };
            let input = report::detail_input(store, config, c, f, &period)?;
            crate::report::render_detail(&input, format, size)
        }
        ChartKind::Grid => {
            let m = need(&args.month, "--month", kind)?;
            let month = super::report::parse_month(&calendar, m)?;
            let input = report::grid_input(store, config, &month)?;
            let natural = crate::report::grid_natural_size(&input);
            let size = Size::new(
                args.width.unwrap_or(natural.width),
                args.height.unwrap_or(natural.height),
            );
            crate::report::render_grid(&input, format, size)
        }
        ChartKind::BeforeAfter => {
            let (c, f) = subject(args, config)?;
            let id = args
                .event
                .ok_or_else(|| Error::Usage("chart before-after: --event ID is required".into()))?;
            if args.window_days < 1 {
                return Err(Error::Usage("--window-days must be at least 1".into()));
            }
            let input = report::before_after_input(
                store,
                config,
                c,
                f,
                id,
                Duration::days(args.window_days),
            )?;
            if input.groups.is_empty() {
                return Err(Error::Usage(format!(
                    "no values of \"{c}\" within {} day(s) of event #{id}",
                    args.window_days
                )));
            }
            let size = match args.height {
                Some(_) => size,
                None => crate::report::before_after_natural_size(&input),
            };
            crate::report::render_before_after(&input, format, size)
        }
    }
}

fn no_runs(kind: &str, p: &Period) -> Error {
    Error::Usage(format!(
        "no complete {kind} run is stored for {}: run `samewise check` or `samewise schedule due` first",
        p.label
    ))
}

/// Runs `samewise chart`.
pub fn run(args: &ChartArgs) -> Result<ExitCode> {
    let config = super::common::load_config(super::common::config_flag())?;
    let protected = crate::output::Protected::plant(&config.plant.database, &config.path);
    crate::output::refuse_protected(&args.out, "--out", &protected)?;
    let store = super::common::open_store(&config)?;
    let bytes = render(args, &config, &*store)?;
    crate::report::write_chart(&args.out, &bytes)?;
    let mut out = std::io::stdout().lock();
    if let Err(e) = writeln!(out, "wrote {} ({} bytes)", args.out.display(), bytes.len()) {
        if e.kind() != std::io::ErrorKind::BrokenPipe {
            return Err(Error::io("<stdout>", e));
        }
    }
    Ok(ExitCode::from(super::EXIT_OK))
}
