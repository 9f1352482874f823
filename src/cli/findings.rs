//! `samewise findings [--all] [--since DAY] [--kind KIND] [--characteristic C] [--by FACTOR]
//! [--json | --csv FILE]` and
//! `samewise findings note N TEXT`: the flags of the run history joined into findings (see
//! `analysis::findings`), with an engineer's notes.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use chrono::{DateTime, NaiveDate, Utc};
use chrono_tz::Tz;
use clap::{Args, Subcommand};
use serde_json::{json, Map, Value};

use crate::calendar::PlantCalendar;
use crate::config::Config;
use crate::model::{Finding, FindingStatus, PeriodKind};
use crate::names::{unknown_name, NameKind};
use crate::output::{refuse_protected, AtomicFile, Protected};
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
    let tz = config.plant.time_zone;
    if args.json {
        let rows = findings
            .iter()
            .map(|f| finding_json(&*store, f, tz))
            .collect::<Result<Vec<_>>>()?;
        println!(
            "{}",
            serde_json::to_string_pretty(&Value::Array(rows)).unwrap_or_default()
        );
        return Ok(ExitCode::from(super::EXIT_OK));
    }
    if let Some(path) = &args.csv {
        let mut out = AtomicFile::create(path)?;
        write_csv(&mut out, &findings, tz).map_err(|e| Error::io(path, e))?;
        out.commit()?;
        println!("{} findings written to {}", findings.len(), path.display());
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

fn local(t: DateTime<Utc>, tz: Tz) -> String {
    t.with_timezone(&tz).to_rfc3339()
}

fn opt_num(map: &mut Map<String, Value>, key: &str, v: Option<f64>, reason: &str) {
    match v.filter(|x| x.is_finite()) {
        Some(x) => {
            map.insert(key.into(), json!(x));
        }
        None => {
            map.insert(key.into(), Value::Null);
            map.insert(format!("{key}_reason"), reason.into());
        }
    }
}

/// One finding as JSON: every field, times RFC 3339 with the plant's offset, every `null` with a
/// sibling `<name>_reason`.
pub fn finding_json(store: &dyn PlantStore, f: &Finding, tz: Tz) -> Result<Value> {
    let mut m = Map::new();
    m.insert("id".into(), json!(f.id));
    m.insert("status".into(), json!(f.status.as_str()));
    m.insert("period_kind".into(), json!(f.period_kind.as_str()));
    m.insert("characteristic".into(), json!(f.characteristic));
    m.insert("factor".into(), json!(f.factor));
    m.insert("group".into(), json!(f.level));
    m.insert("unit".into(), json!(f.unit));
    m.insert("times_reopened".into(), json!(f.times_reopened));
    m.insert("first_flagged".into(), json!(f.first_label));
    m.insert(
        "first_flagged_start".into(),
        json!(local(f.first_start, tz)),
    );
    m.insert("episode_first_flagged".into(), json!(f.episode_label));
    m.insert("episode_start".into(), json!(local(f.episode_start, tz)));
    m.insert("last_flagged".into(), json!(f.last_label));
    m.insert("last_flagged_end".into(), json!(local(f.last_end, tz)));
    m.insert("periods_flagged".into(), json!(f.n_flagged));
    m.insert("periods_flagged_on_weak_evidence".into(), json!(f.n_weak));
    m.insert("quiet_periods_since".into(), json!(f.quiet_periods));
    let no_effect = "the run stored no standing-out difference for this period";
    opt_num(&mut m, "effect_now", f.effect_now, no_effect);
    opt_num(
        &mut m,
        "effect_now_sd",
        f.effect_now_sd,
        "no within-group SD",
    );
    opt_num(
        &mut m,
        "effect_now_pct_tolerance",
        f.effect_now_pct,
        "no tolerance (or single limit) configured",
    );
    opt_num(&mut m, "within_sd", f.within_sd, "no within-group SD");
    opt_num(&mut m, "peak_effect", f.peak_effect, no_effect);
    opt_num(
        &mut m,
        "peak_pct_tolerance",
        f.peak_pct,
        "no tolerance (or single limit) configured",
    );
    m.insert("peak_period".into(), json!(f.peak_label));
    if f.peak_label.is_none() {
        m.insert("peak_period_reason".into(), json!(no_effect));
    }
    let onset = json!({
        "at": f.onset.map(|t| local(t, tz)),
        "low": f.onset_low.map(|t| local(t, tz)),
        "high": f.onset_high.map(|t| local(t, tz)),
        "method": f.onset_method,
    });
    m.insert("onset".into(), onset);
    if f.onset_low.is_none() {
        if let Some(Value::Object(o)) = m.get_mut("onset") {
            let why = "no change point was found: the onset is the first flagged period";
            o.insert("low_reason".into(), json!(why));
            o.insert("high_reason".into(), json!(why));
            if f.onset.is_none() {
                o.insert("at_reason".into(), json!("not computed yet"));
            }
        }
    }
    match (f.event_id, f.event_at) {
        (Some(id), Some(at)) => {
            let gap_hours = f
                .onset
                .map(|o| (o - at).num_minutes() as f64 / 60.0)
                .unwrap_or(f64::NAN);
            m.insert(
                "nearest_event".into(),
                json!({
                    "id": id,
                    "at": local(at, tz),
                    "note": f.event_note,
                    "hours_before_onset": if gap_hours.is_finite() { json!(gap_hours) } else { Value::Null },
                }),
            );
        }
        _ => {
            m.insert("nearest_event".into(), Value::Null);
            m.insert(
                "nearest_event_reason".into(),
                json!("no logged process change in scope (this characteristic or all, this group or none) at or before the onset"),
            );
        }
    }
    let notes: Vec<Value> = store
        .finding_notes(f.id)?
        .into_iter()
        .map(|(at, text)| json!({"at": local(at, tz), "text": text}))
        .collect();
    m.insert("notes".into(), Value::Array(notes));
    m.insert("updated_at".into(), json!(local(f.updated, tz)));
    Ok(Value::Object(m))
}

fn csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

fn write_csv(out: &mut impl Write, findings: &[Finding], tz: Tz) -> std::io::Result<()> {
    writeln!(
        out,
        "id,status,period_kind,characteristic,factor,group,unit,first_flagged,episode_first_flagged,last_flagged,periods_flagged,weak,quiet_periods,effect_now,effect_now_sd,effect_now_pct_tolerance,peak_effect,peak_period,onset,onset_low,onset_high,event_id,event_at,event_note"
    )?;
    let num = |v: Option<f64>| v.map_or(String::new(), |x| x.to_string());
    let time = |t: Option<DateTime<Utc>>| t.map_or(String::new(), |t| local(t, tz));
    for f in findings {
        writeln!(
            out,
            "{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
            f.id,
            f.status.as_str(),
            f.period_kind.as_str(),
            csv_field(&f.characteristic),
            csv_field(&f.factor),
            csv_field(&f.level),
            csv_field(&f.unit),
            f.first_label,
            f.episode_label,
            f.last_label,
            f.n_flagged,
            f.n_weak,
            f.quiet_periods,
            num(f.effect_now),
            num(f.effect_now_sd),
            num(f.effect_now_pct),
            num(f.peak_effect),
            f.peak_label.as_deref().unwrap_or(""),
            time(f.onset),
            time(f.onset_low),
            time(f.onset_high),
            f.event_id.map_or(String::new(), |v| v.to_string()),
            time(f.event_at),
            csv_field(f.event_note.as_deref().unwrap_or(""))
        )?;
    }
    Ok(())
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

/// The alert command's input: the new and changed findings as one JSON document.
pub fn alert_document(
    store: &dyn PlantStore,
    config: &Config,
    update: &crate::analysis::findings::FindingsUpdate,
    now: DateTime<Utc>,
) -> Result<Value> {
    let tz = config.plant.time_zone;
    let list = |v: &[Finding]| -> Result<Vec<Value>> {
        v.iter().map(|f| finding_json(store, f, tz)).collect()
    };
    Ok(json!({
        "plant": config.plant.name,
        "generated_at": local(now, tz),
        "new": list(&update.new)?,
        "changed": list(&update.changed)?,
        "open": update.open.len(),
        "caution": crate::CAUTION,
    }))
}
