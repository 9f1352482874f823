//! `samewise findings [--all] [--since DAY] [--kind KIND] [--characteristic C] [--by FACTOR]
//! [--json | --csv FILE]` and
//! `samewise findings note N TEXT`: the flags of the run history joined into findings (see
//! `analysis::findings`), with an engineer's notes.

use std::path::PathBuf;
use std::process::ExitCode;

use chrono::{DateTime, NaiveDate, Utc};
use chrono_tz::Tz;
use clap::{Args, Subcommand};

use crate::calendar::PlantCalendar;
use crate::config::Config;
use crate::model::{Finding, FindingStatus, PeriodKind};
use crate::names::{unknown_name, NameKind};
use crate::output::{refuse_protected, Protected};
use crate::outputs::{group_means_cell, AlertDocument, FindingLine, Limits};
use crate::storage::PlantStore;
use crate::{Error, Result};

use super::common::{load_config, open_store};
use super::vocab::Kind;
use super::when;

/// Arguments of `samewise findings`.
#[derive(Debug, Args)]
#[command(args_conflicts_with_subcommands = true)]
pub struct FindingsArgs {
    /// `note N TEXT` adds a note to finding N instead of listing.
    #[command(subcommand)]
    pub action: Option<FindingsAction>,
    /// Every finding: on watch (flagged once) and closed ones too (default: open ones).
    #[arg(long)]
    pub all: bool,
    /// Findings flagged on or after this production day (YYYY-MM-DD, included), open or closed.
    #[arg(long, value_name = "DAY", value_parser = when::day)]
    pub since: Option<NaiveDate>,
    /// Only findings of this period kind (`--period-kind` is accepted too).
    #[arg(long, value_enum, alias = "period-kind")]
    pub kind: Option<Kind>,
    /// Only findings of this characteristic.
    #[arg(long, value_name = "NAME")]
    pub characteristic: Option<String>,
    /// Only findings of this grouping factor.
    #[arg(long = "by", value_name = "FACTOR")]
    pub factor: Option<String>,
    /// Print JSON (an array of findings; times RFC 3339 in the plant's zone).
    #[arg(long, conflicts_with = "csv")]
    pub json: bool,
    /// Write the findings to this CSV file (one row each).
    #[arg(long, value_name = "FILE.csv")]
    pub csv: Option<PathBuf>,
}

/// `samewise findings` actions.
#[derive(Debug, Subcommand)]
pub enum FindingsAction {
    /// Add an engineer's note to a finding (e.g. "containment in place, 100 % check of M4").
    Note {
        /// The finding's number.
        #[arg(value_name = "N")]
        id: i64,
        /// The note.
        #[arg(value_name = "TEXT")]
        text: String,
    },
}

/// Runs `samewise findings`.
pub fn run(args: &FindingsArgs, now: DateTime<Utc>) -> Result<ExitCode> {
    let config = load_config(super::common::config_flag())?;
    if let Some(FindingsAction::Note { id, text }) = &args.action {
        if text.trim().is_empty() || text.chars().any(|c| c.is_control() && c != '\t') {
            return Err(Error::Usage(
                "the note is empty or holds control characters".to_string(),
            ));
        }
        let mut store = open_store(&config)?;
        store.add_finding_note(*id, text.trim(), now)?;
        println!("note added to finding #{id}");
        return Ok(ExitCode::from(super::EXIT_OK));
    }
    let protected = Protected::plant(&config.plant.database, &config.path);
    if let Some(path) = &args.csv {
        refuse_protected(path, "--csv", &protected)?;
    }
    let store = open_store(&config)?;
    let kind = args.kind.map(PeriodKind::from);
    let calendar = PlantCalendar::new(&config);
    let since = args.since.map(|d| calendar.day_start_utc(d));
    let stored = store.findings(kind)?;
    check_names(&config, &stored, args)?;
    let findings: Vec<Finding> = stored
        .into_iter()
        .filter(|f| match since {
            Some(t) => f.last_end > t,
            None => args.all || f.status == FindingStatus::Open,
        })
        .filter(|f| {
            args.characteristic
                .as_ref()
                .is_none_or(|c| *c == f.characteristic)
        })
        .filter(|f| args.factor.as_ref().is_none_or(|b| *b == f.factor))
        .collect();
    if args.json || args.csv.is_some() {
        let rows = finding_lines_of(&*store, &config, &findings)?;
        if let Some(path) = &args.csv {
            write_csv(path, &rows)?;
            println!("{} findings written to {}", rows.len(), path.display());
        } else {
            println!("{}", super::format::document_json(&rows));
        }
        return Ok(ExitCode::from(super::EXIT_OK));
    }
    print_text(&*store, &config, &findings, args)?;
    Ok(ExitCode::from(super::EXIT_OK))
}

/// `--characteristic` and `--by` must name a configured characteristic and factor, or one a
/// stored finding names (one since removed from the configuration); a typo is answered with the
/// closest names.
fn check_names(config: &Config, stored: &[Finding], args: &FindingsArgs) -> Result<()> {
    let source = config.path.display().to_string();
    let check = |kind: NameKind, name: &str, configured: Vec<&str>, of: fn(&Finding) -> &str| {
        if configured.contains(&name) || stored.iter().any(|f| of(f) == name) {
            return Ok(());
        }
        let mut known = configured;
        for f in stored {
            if !known.contains(&of(f)) {
                known.push(of(f));
            }
        }
        Err(unknown_name(kind, name, known.iter().copied(), &source))
    };
    if let Some(name) = &args.characteristic {
        let configured = config
            .characteristics
            .iter()
            .map(|c| c.name.as_str())
            .collect();
        check(NameKind::Characteristic, name, configured, |f| {
            &f.characteristic
        })?;
    }
    if let Some(name) = &args.factor {
        let configured = config.factors.iter().map(|f| f.name.as_str()).collect();
        check(NameKind::Factor, name, configured, |f| &f.factor)?;
    }
    Ok(())
}

/// The findings as printed (`findings --json`, `check --json`, the alert command's input): each
/// stored finding with its notes, its characteristic's limits, and the run of its last flagged
/// period with that run's groups of the finding's test (a run shared by several findings is read
/// once).
pub fn finding_lines_of(
    store: &dyn PlantStore,
    config: &Config,
    findings: &[Finding],
) -> Result<Vec<FindingLine>> {
    let mut runs: std::collections::HashMap<i64, crate::results::RunContent> =
        std::collections::HashMap::new();
    findings
        .iter()
        .map(|f| {
            let last_run = match store.latest_complete_run(f.period_kind.as_str(), &f.last_label)? {
                Some(run) => {
                    let content = match runs.entry(run.run_id) {
                        std::collections::hash_map::Entry::Occupied(e) => e.into_mut(),
                        std::collections::hash_map::Entry::Vacant(e) => {
                            e.insert(store.run_content(run.run_id)?)
                        }
                    };
                    Some((
                        run.run_id,
                        crate::outputs::groups_of_test(content, &f.characteristic, &f.factor),
                    ))
                }
                None => None,
            };
            Ok(FindingLine::new(
                f,
                Limits::of(config, &f.characteristic),
                store.finding_notes(f.id)?,
                last_run,
                config.plant.time_zone,
            ))
        })
        .collect()
}

/// One row per finding, the columns named as the fields of `findings --json` (the onset and the
/// nearest event flattened, the groups as `level=mean;...` in units); an unavailable value is
/// an empty cell.
fn write_csv(path: &std::path::Path, rows: &[FindingLine]) -> Result<()> {
    let header = [
        "id",
        "status",
        "period_kind",
        "characteristic",
        "factor",
        "group",
        "unit",
        "lsl",
        "usl",
        "target",
        "first_flagged",
        "episode_first_flagged",
        "last_flagged",
        "last_run_id",
        "periods_flagged",
        "periods_flagged_on_weak_evidence",
        "quiet_periods_since",
        "effect_now",
        "effect_now_sd",
        "effect_now_pct_tolerance",
        "within_sd",
        "peak_effect",
        "peak_pct_tolerance",
        "peak_period",
        "onset",
        "onset_low",
        "onset_high",
        "nearest_event_id",
        "nearest_event_at",
        "nearest_event_note",
        "group_means",
    ];
    let num = crate::output::csv_number;
    let records = rows.iter().map(|r| {
        let e = r.nearest_event.as_ref();
        [
            r.id.to_string(),
            r.status.clone(),
            r.period_kind.clone(),
            r.characteristic.clone(),
            r.factor.clone(),
            r.group.clone(),
            r.limits.unit.clone(),
            num(r.limits.lsl),
            num(r.limits.usl),
            num(r.limits.target),
            r.first_flagged.clone(),
            r.episode_first_flagged.clone(),
            r.last_flagged.clone(),
            r.last_run_id.map_or(String::new(), |id| id.to_string()),
            r.periods_flagged.to_string(),
            r.periods_flagged_on_weak_evidence.to_string(),
            r.quiet_periods_since.to_string(),
            num(r.effect_now),
            num(r.effect_now_sd),
            num(r.effect_now_pct_tolerance),
            num(r.within_sd),
            num(r.peak_effect),
            num(r.peak_pct_tolerance),
            r.peak_period.clone().unwrap_or_default(),
            r.onset.at.clone().unwrap_or_default(),
            r.onset.low.clone().unwrap_or_default(),
            r.onset.high.clone().unwrap_or_default(),
            e.map_or(String::new(), |e| e.id.to_string()),
            e.map_or(String::new(), |e| e.at.clone()),
            e.and_then(|e| e.note.clone()).unwrap_or_default(),
            group_means_cell(&r.groups),
        ]
    });
    crate::output::write_csv(path, &header, records)
}

fn signed(x: f64) -> String {
    let s = super::format::sig(x, 3);
    if x > 0.0 {
        format!("+{s}")
    } else {
        s
    }
}

/// One finding in a few lines of text (also the daily summary's block).
pub fn finding_lines(f: &Finding, tz: Tz, notes: &[(DateTime<Utc>, String)]) -> Vec<String> {
    let day = |t: DateTime<Utc>| t.with_timezone(&tz).format("%Y-%m-%d %H:%M").to_string();
    let mut lines = vec![format!(
        "#{} {}  {} by {}: {} stands out ({} periods){}",
        f.id,
        f.status.as_str(),
        f.characteristic,
        f.factor,
        f.level,
        f.period_kind.as_str(),
        if f.times_reopened > 0 {
            format!(", reopened {}x", f.times_reopened)
        } else {
            String::new()
        }
    )];
    let onset = match (f.onset, f.onset_low, f.onset_high) {
        (Some(o), Some(lo), Some(hi)) => {
            format!(
                "onset about {} (between {} and {})",
                day(o),
                day(lo),
                day(hi)
            )
        }
        (Some(o), _, _) => format!(
            "onset {} (first flagged period; no change point found)",
            day(o)
        ),
        _ => "onset not computed".to_string(),
    };
    lines.push(format!(
        "    since {}, last flagged {}, {} periods flagged{}; {onset}",
        f.episode_label,
        f.last_label,
        f.n_flagged,
        if f.n_weak > 0 {
            format!(
                " ({} on weak evidence: non-normal residuals in small groups)",
                f.n_weak
            )
        } else {
            String::new()
        }
    ));
    let mut effect = match f.effect_now {
        Some(e) => format!("    effect now {} {}", signed(e), f.unit),
        None => "    effect now: not stored".to_string(),
    };
    if let Some(sd) = f.effect_now_sd {
        effect.push_str(&format!(" ({} within-group SD", signed(sd)));
        match f.effect_now_pct {
            Some(p) => effect.push_str(&format!(", {}% of tolerance)", signed(p))),
            None => effect.push(')'),
        }
    }
    if let (Some(p), Some(label)) = (f.peak_effect, &f.peak_label) {
        effect.push_str(&format!("; peak {} {} on {label}", signed(p), f.unit));
    }
    lines.push(effect);
    match (f.event_id, f.event_at, &f.event_note, f.onset) {
        (Some(id), Some(at), Some(note), Some(onset)) => {
            let hours = (onset - at).num_minutes() as f64 / 60.0;
            let gap = if hours.abs() < 48.0 {
                format!("{:.0} h", hours.abs())
            } else {
                format!("{:.1} days", hours.abs() / 24.0)
            };
            let when = if hours >= 0.0 {
                format!("{gap} before the estimated onset")
            } else {
                format!("{gap} after the estimated onset, within its interval")
            };
            lines.push(format!(
                "    nearest logged change: event #{id} at {} \"{note}\" ({when})",
                day(at)
            ));
        }
        _ => lines.push("    no logged change in scope before the onset".to_string()),
    }
    for (at, text) in notes {
        lines.push(format!("    note {}: {text}", day(*at)));
    }
    lines
}

fn print_text(
    store: &dyn PlantStore,
    config: &Config,
    findings: &[Finding],
    args: &FindingsArgs,
) -> Result<()> {
    let tz = config.plant.time_zone;
    let mut what = match (args.since, args.all) {
        (Some(d), _) => format!("findings flagged since {d}"),
        (None, true) => "all findings (open, on watch, closed)".to_string(),
        (None, false) => "open findings".to_string(),
    };
    if let Some(c) = &args.characteristic {
        what.push_str(&format!(" of {c}"));
    }
    if let Some(b) = &args.factor {
        what.push_str(&format!(" by {b}"));
    }
    if findings.is_empty() {
        println!("{what}: none");
    } else {
        println!("{what}: {}", findings.len());
    }
    for f in findings {
        println!();
        for line in finding_lines(f, tz, &store.finding_notes(f.id)?) {
            println!("{line}");
        }
    }
    println!();
    println!("times in the plant's zone ({tz}); `samewise findings note N \"text\"` adds a note");
    println!("{}", crate::CAUTION);
    Ok(())
}

/// The daily summary's opening block: the findings a check or a scheduler pass made new or
/// closed or reopened, then the open ones in a line each.
pub fn summary_lines(
    store: &dyn PlantStore,
    tz: Tz,
    update: &crate::analysis::findings::FindingsUpdate,
) -> Result<Vec<String>> {
    let closed = update
        .changed
        .iter()
        .filter(|f| f.status == FindingStatus::Closed)
        .count();
    let reopened = update.changed.len() - closed;
    let mut lines = vec![format!(
        "findings: {} new, {reopened} reopened, {closed} closed, {} open, {} on watch (flagged once; confirmed by the next flag)",
        update.new.len(),
        update.open.len(),
        update.watch.len()
    )];
    for (what, f) in update
        .new
        .iter()
        .map(|f| ("new", f))
        .chain(update.changed.iter().map(|f| {
            (
                if f.status == FindingStatus::Closed {
                    "closed"
                } else {
                    "reopened"
                },
                f,
            )
        }))
    {
        lines.push(format!("  {what}:"));
        for line in finding_lines(f, tz, &store.finding_notes(f.id)?) {
            lines.push(format!("  {line}"));
        }
    }
    let listed: Vec<i64> = update
        .new
        .iter()
        .chain(&update.changed)
        .map(|f| f.id)
        .collect();
    for f in update
        .open
        .iter()
        .chain(&update.watch)
        .filter(|f| !listed.contains(&f.id))
    {
        lines.push(format!(
            "  {} #{}: {} by {}: {} since {}, last flagged {}{}",
            f.status.as_str(),
            f.id,
            f.characteristic,
            f.factor,
            f.level,
            f.episode_label,
            f.last_label,
            f.effect_now_pct
                .map_or(String::new(), |p| format!(", {}% of tolerance", signed(p)))
        ));
    }
    Ok(lines)
}

/// The alert command's input: the new and changed findings as one document.
pub fn alert_document(
    store: &dyn PlantStore,
    config: &Config,
    update: &crate::analysis::findings::FindingsUpdate,
    now: DateTime<Utc>,
) -> Result<AlertDocument> {
    Ok(AlertDocument {
        plant: config.plant.name.clone(),
        generated_at: crate::outputs::plant_time(now, config.plant.time_zone),
        new: finding_lines_of(store, config, &update.new)?,
        changed: finding_lines_of(store, config, &update.changed)?,
        open: update.open.len(),
        caution: crate::CAUTION.to_string(),
    })
}
