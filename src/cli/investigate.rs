//! `samewise investigate --characteristic C --by FACTOR (--event ID | --at TIME) [--before 14d]
//! [--after 14d] [--json]`: before vs after a process change, per group and pooled, with the
//! two-way ANOVA group x before/after; without `--event`/`--at`, a change-point scan per group
//! over the window `[--to - --before, --to)` (default: the 14 days up to now) and the nearest
//! logged events. The characteristic may still stand first, as in earlier versions; times follow
//! the command line's one grammar ([`super::when`]).
//!
//! The statistics come from [`crate::analysis::investigate`]; this file turns flags into a
//! request, and prints the terminal view or one JSON object.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use chrono::{DateTime, Utc};
use serde_json::Value;

use crate::analysis::investigate::{
    format_ms, investigate, CompareOptions, Comparison, GroupChange, GroupScan, Outcome, Request,
    Target,
};
use crate::config::parse_duration;
use crate::outputs::investigate::{BeforeAfterDocument, InvestigateHead, Near, ScanDocument};
use crate::stats::changepoint::ScanOptions;
use crate::{Error, Result};

use super::common::{load_config, open_store};
use super::vocab;
use super::when::{self, When};
use crate::stats::twoway::TermRow;
use crate::stats::variance_components::VarianceComponents;
use crate::stats::Stat;

/// Flags of `samewise investigate`.
#[derive(Debug, clap::Args)]
pub struct InvestigateArgs {
    /// The characteristic: `--characteristic NAME`, or first without the flag.
    #[command(flatten)]
    pub characteristic: vocab::CharacteristicArg,
    /// The grouping factor (machine, line, supplier, ...).
    #[arg(long, value_name = "FACTOR")]
    pub by: String,
    /// A logged event (see `samewise event list`): its time is the change.
    #[arg(long, value_name = "ID", conflicts_with = "at")]
    pub event: Option<i64>,
    /// The change time: plant-local 2026-11-30 14:05 or 2026-11-30T14:05[:SS], or RFC 3339
    /// with an offset or Z (2026-11-30T13:05:00Z).
    #[arg(long, value_name = "TIME", value_parser = when::instant)]
    pub at: Option<When>,
    /// Window before the change (with no change: the scan window's length back from --to).
    #[arg(long, value_name = "DURATION", default_value = "14d")]
    pub before: String,
    /// Window after the change.
    #[arg(long, value_name = "DURATION", default_value = "14d")]
    pub after: String,
    /// Scan mode only: end of the scan window, an instant (excluded; default: now), written as
    /// --at is.
    #[arg(long, value_name = "TIME", value_parser = when::instant, conflicts_with_all = ["event", "at"])]
    pub to: Option<When>,
    /// Print one JSON object instead of the readable report.
    #[arg(long)]
    pub json: bool,
}

fn duration_flag(flag: &str, text: &str) -> Result<chrono::Duration> {
    let d = parse_duration(text).map_err(|r| Error::Usage(format!("{flag} {text}: {r}")))?;
    if d <= chrono::Duration::zero() {
        return Err(Error::Usage(format!(
            "{flag} {text}: the window must be longer than zero"
        )));
    }
    Ok(d)
}

/// Runs `samewise investigate`; `now` is the wall clock (scan window end by default).
pub fn run(args: &InvestigateArgs, now: DateTime<Utc>) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    let characteristic = args.characteristic.name.as_str();
    // The factor is checked here; the characteristic by the store, which also knows one that
    // has left the configuration (both answer a typo with the closest names).
    config.known_factor(&args.by)?;
    let tz = config.plant.time_zone;
    let store = open_store(&config)?;
    let before = duration_flag("--before", &args.before)?;
    let after = duration_flag("--after", &args.after)?;
    let target = match (&args.event, &args.at) {
        (Some(id), _) => Target::Event(*id),
        (None, Some(at)) => Target::At(at.resolve("--at", tz)?),
        (None, None) => {
            let end = match &args.to {
                Some(to) => to.resolve("--to", tz)?,
                None => now,
            };
            Target::Scan {
                start: end - before,
                end,
            }
        }
    };
    let request = Request {
        characteristic: characteristic.to_string(),
        factor: args.by.clone(),
        target,
        before,
        after,
        compare: CompareOptions {
            alpha: config.check.alpha,
            // Shifts in % of the tolerance, or of the distance from the target to a single limit.
            tolerance: config.characteristic(characteristic).and_then(|c| {
                match (c.lsl, c.usl, c.target) {
                    (Some(l), Some(u), _) => Some(u - l),
                    (Some(l), None, Some(t)) => Some(t - l),
                    (None, Some(u), Some(t)) => Some(u - t),
                    _ => None,
                }
            }),
            ..CompareOptions::default()
        },
        scan: ScanOptions {
            alpha: config.check.alpha,
            ..ScanOptions::default()
        },
    };
    let found = investigate(&*store, &request)?;
    let ctx = Context {
        characteristic: found.characteristic.name.clone(),
        unit: found.characteristic.unit.clone(),
        factor: found.factor.clone(),
        origin: found.origin.to_f64(),
        event: found.event.as_ref().map(|e| (e.id, e.note.clone())),
        window_start_ms: found.start.timestamp_millis(),
        window_end_ms: found.end.timestamp_millis(),
        tz: config.plant.time_zone,
        units: found.units.clone(),
    };
    let text = match &found.outcome {
        Outcome::BeforeAfter(c) => {
            if args.json {
                super::format::document_json(&compare_json(&ctx, c))
            } else {
                render_compare(&ctx, c)
            }
        }
        Outcome::Scan { scans, nearest } => {
            let near: Vec<Vec<Vec<NearEvent>>> = nearest
                .iter()
                .map(|g| {
                    g.iter()
                        .map(|cp| {
                            cp.iter()
                                .map(|e| NearEvent {
                                    id: e.id,
                                    at_ms: e.at.timestamp_millis(),
                                    note: e.note.clone(),
                                })
                                .collect()
                        })
                        .collect()
                })
                .collect();
            if args.json {
                super::format::document_json(&scan_json(&ctx, scans, &near))
            } else {
                render_scan(&ctx, scans, &near)
            }
        }
    };
    let mut out = std::io::stdout().lock();
    match writeln!(out, "{}", text.trim_end()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(Error::Io {
            path: PathBuf::from("<stdout>"),
            source: e,
        }),
        _ => Ok(ExitCode::from(super::EXIT_OK)),
    }
}

/// What the report is about (names, units, the change and the window).
#[derive(Debug, Clone, PartialEq)]
pub struct Context {
    /// Characteristic name.
    pub characteristic: String,
    /// Its unit ("" when none).
    pub unit: String,
    /// Grouping factor.
    pub factor: String,
    /// The value the stored offsets are measured from (added back for displayed means).
    pub origin: f64,
    /// The logged event, when one was named: (id, note).
    pub event: Option<(i64, String)>,
    /// Window start (ms since the epoch, UTC), inclusive.
    pub window_start_ms: i64,
    /// Window end, exclusive.
    pub window_end_ms: i64,
    /// The plant's time zone: every time is printed in it (JSON: RFC 3339 with its offset).
    pub tz: chrono_tz::Tz,
    /// The unit of the comparison when it is not the single value (subgroup means).
    pub units: Option<String>,
}

impl Context {
    /// An instant for the terminal, in the plant's zone ("2026-10-19 06:30:00 CEST").
    pub fn local(&self, ms: i64) -> String {
        match chrono::TimeZone::timestamp_millis_opt(&Utc, ms).single() {
            Some(t) => t
                .with_timezone(&self.tz)
                .format("%Y-%m-%d %H:%M:%S %Z")
                .to_string(),
            None => format_ms(ms),
        }
    }

    /// The part of the JSON document both modes share.
    pub fn head(&self) -> InvestigateHead {
        InvestigateHead::new(
            self.characteristic.clone(),
            self.unit.clone(),
            self.factor.clone(),
            (self.window_start_ms, self.window_end_ms),
            self.event.clone(),
            self.units.clone(),
            self.origin,
            self.tz,
        )
    }
}

/// A logged event near a detected change point.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NearEvent {
    /// Event id.
    pub id: i64,
    /// When it happened, ms since the epoch.
    pub at_ms: i64,
    /// What changed.
    pub note: String,
}

// ---------------------------------------------------------------------------------------------
// Number formatting

use super::format::{pval, sig};

// ---------------------------------------------------------------------------------------------
// Before/after: JSON

/// The JSON object of `investigate --json` with a change time
/// ([`crate::outputs::investigate::BeforeAfterDocument`]).
pub fn compare_json(ctx: &Context, c: &Comparison) -> Value {
    serde_json::to_value(BeforeAfterDocument::new(ctx.head(), c)).unwrap_or(Value::Null)
}

// ---------------------------------------------------------------------------------------------
// Before/after: text

fn header(ctx: &Context, o: &mut String) {
    let unit = if ctx.unit.is_empty() {
        String::new()
    } else {
        format!(" ({})", ctx.unit)
    };
    o.push_str(&format!("{}{unit} by {}\n", ctx.characteristic, ctx.factor));
    o.push_str(&format!(
        "window: {} to {}\n",
        ctx.local(ctx.window_start_ms),
        ctx.local(ctx.window_end_ms)
    ));
    if let Some((id, note)) = &ctx.event {
        o.push_str(&format!("event {id}: {note}\n"));
    }
    if let Some(units) = &ctx.units {
        o.push_str(&format!("compared {units}\n"));
    }
}

fn term_line(o: &mut String, name: &str, row: &Stat<TermRow>) {
    match row {
        Ok(r) => {
            let (f, p) = match &r.test {
                Ok(t) => (sig(t.statistic, 5), pval(t.p)),
                Err(_) => ("-".into(), "-".into()),
            };
            o.push_str(&format!(
                "  {name:<28} {:>12} {:>5} {:>12} {:>10} {:>10}\n",
                sig(r.ss, 6),
                r.df,
                sig(r.ms, 6),
                f,
                p
            ));
            if let Err(e) = &r.test {
                o.push_str(&format!("    (no F test: {})\n", e.reason));
            }
        }
        Err(e) => o.push_str(&format!("  {name:<28} not testable: {}\n", e.reason)),
    }
}

/// The terminal view of a before/after comparison.
pub fn render_compare(ctx: &Context, c: &Comparison) -> String {
    let mut o = String::new();
    header(ctx, &mut o);
    o.push_str(&format!(
        "change at {}: values before it count as before, values at or after it as after\n\n",
        ctx.local(c.change_ms)
    ));
    let mut lines: Vec<&GroupChange> = c.groups.iter().collect();
    lines.push(&c.pooled);
    o.push_str(
        "Mean shift (after - before), 95% Welch interval; p adjusted across the groups (Benjamini-Hochberg)\n",
    );
    o.push_str(&format!(
        "  {:<14} {:>8} {:>8} {:>12} {:>12} {:>11} {:>25} {:>10} {:>10} {:>8} {:>8}\n",
        "group",
        "n before",
        "n after",
        "mean before",
        "mean after",
        "shift",
        "interval",
        "p",
        "p adj",
        "SDs",
        "% tol"
    ));
    for g in &lines {
        let (shift, interval, p) = match &g.mean_shift {
            Ok(s) => (
                sig(s.shift, 4),
                format!("[{}, {}]", sig(s.ci_low, 4), sig(s.ci_high, 4)),
                pval(s.p),
            ),
            Err(e) => ("-".into(), e.reason.clone(), "-".into()),
        };
        let opt = |v: Option<f64>, f: &dyn Fn(f64) -> String| v.map_or("-".to_string(), f);
        o.push_str(&format!(
            "  {:<14} {:>8} {:>8} {:>12} {:>12} {:>11} {:>25} {:>10} {:>10} {:>8} {:>8}\n",
            g.group,
            g.before.n,
            g.after.n,
            sig(ctx.origin + g.before.mean, 7),
            sig(ctx.origin + g.after.mean, 7),
            shift,
            interval,
            p,
            opt(g.p_adjusted, &pval),
            opt(g.shift_sd, &|x| format!("{:+.2}", x)),
            opt(g.shift_pct_tolerance, &|x| format!("{:+.1}", x))
        ));
    }
    o.push_str(
        "\nWithin-group spread: SD after / SD before (95% F interval), Brown-Forsythe test\n",
    );
    o.push_str(&format!(
        "  {:<14} {:>10} {:>10} {:>8} {:>22} {:>14}\n",
        "group", "SD before", "SD after", "ratio", "interval", "B-F p"
    ));
    for g in &lines {
        let (ratio, interval) = match &g.sd_ratio {
            Ok(r) => (
                sig(r.ratio, 3),
                format!("[{}, {}]", sig(r.ci_low, 3), sig(r.ci_high, 3)),
            ),
            Err(e) => ("-".into(), e.reason.clone()),
        };
        let bf = match &g.brown_forsythe {
            Ok(t) => pval(t.p),
            Err(_) => "-".into(),
        };
        o.push_str(&format!(
            "  {:<14} {:>10} {:>10} {:>8} {:>22} {:>14}\n",
            g.group,
            g.before.sd().map_or("-".into(), |s| sig(s, 4)),
            g.after.sd().map_or("-".into(), |s| sig(s, 4)),
            ratio,
            interval,
            bf
        ));
    }
    o.push_str("\nBetween-group share of variance\n");
    let share = |s: &Stat<VarianceComponents>| match s {
        Ok(v) => format!("{:.1}%", 100.0 * v.share_between),
        Err(e) => format!("not available ({})", e.reason),
    };
    o.push_str(&format!(
        "  before {}  ->  after {}\n",
        share(&c.share_before),
        share(&c.share_after)
    ));
    o.push_str(&format!(
        "\nTwo-way ANOVA: {} x before/after (did the change affect the groups differently?)\n",
        ctx.factor
    ));
    match &c.two_way {
        Ok(t) => {
            let table = t.leading_table();
            o.push_str(&format!(
                "  {} sums of squares: {}\n",
                table.ss_type.label(),
                t.leading_reason
            ));
            o.push_str(&format!(
                "  {:<28} {:>12} {:>5} {:>12} {:>10} {:>10}\n",
                "source", "SS", "df", "MS", "F", "p"
            ));
            term_line(&mut o, &ctx.factor, &table.a);
            term_line(&mut o, "before/after", &table.b);
            term_line(
                &mut o,
                &format!("{} x before/after", ctx.factor),
                &table.interaction,
            );
            o.push_str(&format!(
                "  {:<28} {:>12} {:>5} {:>12}\n",
                "residual",
                sig(t.residual.ss, 6),
                t.residual.df,
                t.residual.ms.map_or("-".into(), |m| sig(m, 6))
            ));
            for note in &t.notes {
                o.push_str(&format!("  note: {note}\n"));
            }
        }
        Err(e) => o.push_str(&format!("  not available: {}\n", e.reason)),
    }
    if !c.notes.is_empty() {
        o.push('\n');
        for note in &c.notes {
            o.push_str(&format!("note: {note}\n"));
        }
    }
    o.push('\n');
    o.push_str(crate::CAUTION);
    o.push('\n');
    o
}

// ---------------------------------------------------------------------------------------------
// Scan

/// The JSON object of `investigate --json` without a change time (the scan,
/// [`crate::outputs::investigate::ScanDocument`]).
pub fn scan_json(ctx: &Context, scans: &[GroupScan], nearest: &[Vec<Vec<NearEvent>>]) -> Value {
    let near: Vec<Vec<Vec<Near>>> = nearest
        .iter()
        .map(|g| {
            g.iter()
                .map(|cp| cp.iter().map(|e| (e.id, e.at_ms, e.note.clone())).collect())
                .collect()
        })
        .collect();
    serde_json::to_value(ScanDocument::new(ctx.head(), scans, &near)).unwrap_or(Value::Null)
}

/// The terminal view of the change-point scan.
pub fn render_scan(ctx: &Context, scans: &[GroupScan], nearest: &[Vec<Vec<NearEvent>>]) -> String {
    let mut o = String::new();
    header(ctx, &mut o);
    o.push_str(&format!(
        "change-point scan: {}\n\n",
        crate::stats::changepoint::METHOD
    ));
    for (gi, g) in scans.iter().enumerate() {
        match &g.scan {
            Err(e) => o.push_str(&format!(
                "{} ({} values): not scanned: {}\n",
                g.group, g.n, e.reason
            )),
            Ok(s) if s.change_points.is_empty() => {
                let p = s.tests.first().map_or("-".into(), |t| pval(t.p));
                o.push_str(&format!(
                    "{} ({} values): no change point (first test p = {p})\n",
                    g.group, g.n
                ));
            }
            Ok(s) => {
                o.push_str(&format!(
                    "{} ({} values): {} change point(s)\n",
                    g.group,
                    g.n,
                    s.change_points.len()
                ));
                for (ci, c) in s.change_points.iter().enumerate() {
                    o.push_str(&format!(
                        "  from {} (between {} and {}): shift {} (se {}, 95% bootstrap [{}, {}]), \
                         mean {} -> {}, p = {}\n",
                        ctx.local(g.change_ms[ci]),
                        ctx.local(g.change_range_ms[ci].0),
                        ctx.local(g.change_range_ms[ci].1),
                        sig(c.shift, 4),
                        sig(c.se, 3),
                        sig(c.shift_low, 4),
                        sig(c.shift_high, 4),
                        sig(ctx.origin + c.before.mean, 7),
                        sig(ctx.origin + c.after.mean, 7),
                        pval(c.p)
                    ));
                    let near = nearest.get(gi).and_then(|v| v.get(ci));
                    match near {
                        Some(events) if !events.is_empty() => {
                            for e in events {
                                o.push_str(&format!(
                                    "    nearest event {}: {} at {}\n",
                                    e.id,
                                    e.note,
                                    ctx.local(e.at_ms)
                                ));
                            }
                        }
                        _ => o.push_str("    no logged event in the window\n"),
                    }
                }
            }
        }
    }
    o.push('\n');
    o.push_str(crate::CAUTION);
    o.push('\n');
    o
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::investigate::{compare, scan_groups, CompareOptions, GroupedSeries};
    use crate::stats::changepoint::ScanOptions;

    fn data() -> (Vec<f64>, Vec<i64>, Vec<u32>, Vec<String>) {
        // Invented: two lines, 12 values each side; L2 moves up by 1 at t = 12.
        let mut v = Vec::new();
        let mut t = Vec::new();
        let mut g = Vec::new();
        for i in 0..24i64 {
            for line in 0..2u32 {
                let wobble = [0.1, -0.2, 0.15, -0.05][(i as usize + line as usize) % 4];
                let shift = if line == 1 && i >= 12 { 1.0 } else { 0.0 };
                v.push(wobble + shift);
                t.push(i * 1000 + line as i64);
                g.push(line);
            }
        }
        (v, t, g, vec!["L1".into(), "L2".into()])
    }

    /// The [`data`] as the series of characteristic "bore_d" by factor "line".
    fn series<'a>(
        values: &'a [f64],
        ts_ms: &'a [i64],
        group_idx: &'a [u32],
        groups: &'a [String],
    ) -> GroupedSeries<'a> {
        GroupedSeries {
            characteristic: "bore_d",
            factor: "line",
            values,
            ts_ms,
            group_idx,
            groups,
        }
    }

    fn ctx() -> Context {
        Context {
            characteristic: "bore_d".into(),
            unit: "mm".into(),
            factor: "line".into(),
            origin: 10.0,
            event: Some((3, "new insert holder".into())),
            window_start_ms: 0,
            window_end_ms: 24_000,
            tz: chrono_tz::UTC,
            units: None,
        }
    }

    #[test]
    fn compare_views_carry_every_part_and_the_caution() {
        let (v, t, g, names) = data();
        let s = series(&v, &t, &g, &names);
        let c = compare(&s, 12_000, &CompareOptions::default()).unwrap();
        let text = render_compare(&ctx(), &c);
        for part in [
            "Mean shift",
            "Within-group spread",
            "Between-group share",
            "Two-way ANOVA",
            "line x before/after",
            "all groups",
            crate::CAUTION,
        ] {
            assert!(text.contains(part), "missing {part}:\n{text}");
        }
        let j = compare_json(&ctx(), &c);
        assert_eq!(j["groups"].as_array().unwrap().len(), 2);
        assert_eq!(j["event"]["id"], 3);
        let shift = j["groups"][1]["mean_shift"]["shift"].as_f64().unwrap();
        assert!((shift - 1.0).abs() < 1e-12);
        // Displayed means carry the origin back.
        assert!(j["groups"][0]["mean_before"].as_f64().unwrap() > 9.0);
        assert!(
            j["two_way"]["type2"]["interaction"]["test"]["p"]
                .as_f64()
                .unwrap()
                < 1e-6
        );
        assert_eq!(j["caution"], crate::CAUTION);
    }

    #[test]
    fn scan_views_list_change_points_and_events() {
        let (v, t, g, names) = data();
        let s = series(&v, &t, &g, &names);
        let scans = scan_groups(&s, &ScanOptions::default()).unwrap();
        let near = vec![
            vec![],
            vec![vec![NearEvent {
                id: 3,
                at_ms: 11_500,
                note: "new insert holder".into(),
            }]],
        ];
        let text = render_scan(&ctx(), &scans, &near);
        assert!(text.contains("L1 (24 values): no change point"), "{text}");
        assert!(text.contains("L2 (24 values): 1 change point(s)"), "{text}");
        assert!(
            text.contains("nearest event 3: new insert holder"),
            "{text}"
        );
        let j = scan_json(&ctx(), &scans, &near);
        assert_eq!(j["groups"][1]["change_points"][0]["index"], 12);
        assert_eq!(
            j["groups"][1]["change_points"][0]["nearest_events"][0]["id"],
            3
        );
    }
}
