//! Invented chart and report inputs shared by tests/charts.rs, tests/browser.rs and
//! benches/report.rs. Every value here is INVENTED (a made-up plant, deterministic formulas with
//! a fixed RNG state); none comes from a real plant or a publication.
#![allow(dead_code)]

use chrono::{DateTime, Duration, NaiveDate, TimeZone, Utc};
use samewise::report::*;

/// A small deterministic generator (64-bit LCG, Knuth MMIX constants) with a fixed RNG state.
pub struct Rng(pub u64);

impl Rng {
    pub fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Approximately normal (sum of 12 uniforms minus 6; Irwin-Hall, common practice).
    pub fn normal(&mut self) -> f64 {
        (0..12).map(|_| self.uniform()).sum::<f64>() - 6.0
    }
}

/// Production day `d` of November 2026 (1-based) starting at 05:00 UTC.
pub fn day_start(d: u32) -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2026, 11, 1, 5, 0, 0).unwrap() + Duration::days(i64::from(d) - 1)
}

pub fn limits() -> Limits {
    Limits {
        lsl: Some(11.95),
        usl: Some(12.05),
        target: Some(12.0),
    }
}

/// Invented trend: `levels.len()` groups over `days` daily periods; group 1 drifts up from
/// day 15 (after the event "new insert holder"). Periods 16 and 20 are flagged (material),
/// period 18 flagged (differs), period 5 too little data.
pub fn trend(characteristic: &str, factor: &str, levels: &[&str], days: u32) -> TrendInput {
    let mut rng = Rng(0x1234_5678);
    let periods = (1..=days)
        .map(|d| {
            let state = match d {
                16 | 20 => FlagState::DiffersMaterial,
                18 => FlagState::Differs,
                5 => FlagState::TooLittleData,
                _ => FlagState::NoEvidence,
            };
            let groups = levels
                .iter()
                .enumerate()
                .map(|(gi, l)| {
                    let drift = if gi == 1 && d >= 15 { 0.012 } else { 0.0 };
                    let mean = 12.0 + 0.004 * (gi as f64 - 1.0) + drift + 0.002 * rng.normal();
                    let half = 0.004 + 0.001 * rng.uniform();
                    GroupPoint {
                        level: l.to_string(),
                        n: 10,
                        mean,
                        ci_low: Some(mean - half),
                        ci_high: Some(mean + half),
                    }
                })
                .collect();
            TrendPeriod {
                label: format!("2026-11-{d:02}"),
                start: day_start(d),
                end: day_start(d + 1),
                state,
                groups,
            }
        })
        .collect();
    TrendInput {
        characteristic: characteristic.to_string(),
        unit: "mm".to_string(),
        factor: factor.to_string(),
        limits: limits(),
        periods,
        events: vec![
            EventMarker {
                at: day_start(15) + Duration::hours(3),
                label: "new insert holder on M4".to_string(),
            },
            EventMarker {
                at: day_start(22),
                label: "coolant change".to_string(),
            },
        ],
        highlight: None,
    }
}

/// Invented share series matching [`trend`]; day 5 has no estimate.
pub fn share(characteristic: &str, factor: &str, days: u32) -> ShareInput {
    let mut rng = Rng(0x9abc_def0);
    let periods = (1..=days)
        .map(|d| {
            let base = if d >= 15 { 0.35 } else { 0.05 };
            let s = (base + 0.04 * rng.normal()).clamp(0.0, 0.95);
            let (share, lo, hi) = if d == 5 {
                (None, None, None)
            } else {
                (
                    Some(s),
                    Some((s - 0.05).max(0.0)),
                    Some((s + 0.12).min(1.0)),
                )
            };
            SharePeriod {
                label: format!("2026-11-{d:02}"),
                start: day_start(d),
                end: day_start(d + 1),
                state: match d {
                    16 | 20 => FlagState::DiffersMaterial,
                    18 => FlagState::Differs,
                    5 => FlagState::TooLittleData,
                    _ => FlagState::NoEvidence,
                },
                share,
                ci_low: lo,
                ci_high: hi,
            }
        })
        .collect();
    ShareInput {
        characteristic: characteristic.to_string(),
        factor: factor.to_string(),
        material_share: Some(0.10),
        confidence: 0.95,
        periods,
        events: vec![EventMarker {
            at: day_start(15) + Duration::hours(3),
            label: "new insert holder on M4".to_string(),
        }],
    }
}

/// Invented period detail: 4 groups of 12 values, group "M4" shifted.
pub fn detail(levels: &[&str]) -> DetailInput {
    let mut rng = Rng(0x00dd_ba11);
    let mut groups = Vec::new();
    let mut residuals = Vec::new();
    let mut all = Vec::new();
    for (gi, l) in levels.iter().enumerate() {
        let shift = if gi == 1 { 0.012 } else { 0.0 };
        let values: Vec<f64> = (0..12)
            .map(|_| 12.0 + shift + 0.005 * rng.normal())
            .collect();
        let mean = values.iter().sum::<f64>() / values.len() as f64;
        residuals.extend(values.iter().map(|v| v - mean));
        all.extend(values.iter().copied());
        groups.push(DetailGroup {
            level: l.to_string(),
            values,
            mean,
            ci_low: Some(mean - 0.0032),
            ci_high: Some(mean + 0.0032),
        });
    }
    DetailInput {
        characteristic: "bore diameter".to_string(),
        unit: "mm".to_string(),
        factor: "machine".to_string(),
        period_label: "2026-11-16".to_string(),
        limits: limits(),
        grand_mean: all.iter().sum::<f64>() / all.len() as f64,
        groups,
        residuals,
    }
}

/// Invented grid: `rows` characteristic x factor rows over `days` days of November 2026, states
/// from a fixed formula so each state appears.
pub fn grid(n_characteristics: usize, factors: &[&str], days: u32) -> GridInput {
    let mut rows = Vec::new();
    for c in 0..n_characteristics {
        for (fi, f) in factors.iter().enumerate() {
            let cells = (0..days)
                .map(|d| match (c * 7 + fi * 3 + d as usize * 5) % 23 {
                    0 => FlagState::DiffersMaterial,
                    1 | 2 => FlagState::Differs,
                    3 => FlagState::TooLittleData,
                    4 => FlagState::NotRun,
                    _ => FlagState::NoEvidence,
                })
                .collect();
            rows.push(GridRow {
                characteristic: format!("characteristic {:02}", c + 1),
                factor: f.to_string(),
                cells,
            });
        }
    }
    GridInput {
        title: "2026-11".to_string(),
        days: (1..=days)
            .map(|d| NaiveDate::from_ymd_opt(2026, 11, d).unwrap())
            .collect(),
        rows,
    }
}

/// Invented before/after: 3 groups of shift means over 14 days each side; "M4" shifts +0.015.
pub fn before_after(levels: &[&str]) -> BeforeAfterInput {
    let mut rng = Rng(0xfeed_beef);
    let event_at = day_start(15) + Duration::hours(3);
    let start = day_start(1);
    let end = day_start(29);
    let groups = levels
        .iter()
        .enumerate()
        .map(|(gi, l)| {
            let mut points = Vec::new();
            let (mut sb, mut nb, mut sa, mut na) = (0.0, 0.0, 0.0, 0.0);
            for k in 0..(28 * 3) {
                let at = start + Duration::hours(8 * k + 4);
                let after = at >= event_at;
                let v = 12.0 + if gi == 1 && after { 0.015 } else { 0.0 } + 0.003 * rng.normal();
                if after {
                    sa += v;
                    na += 1.0;
                } else {
                    sb += v;
                    nb += 1.0;
                }
                points.push(TimedValue { at, value: v });
            }
            BeforeAfterGroup {
                level: l.to_string(),
                points,
                mean_before: Some(sb / nb),
                mean_after: Some(sa / na),
            }
        })
        .collect();
    BeforeAfterInput {
        time_zone: chrono_tz::UTC,
        characteristic: "bore diameter".to_string(),
        unit: "mm".to_string(),
        factor: "machine".to_string(),
        point_kind: "shift mean".to_string(),
        window_start: start,
        window_end: end,
        event: EventMarker {
            at: event_at,
            label: "new insert holder on M4".to_string(),
        },
        limits: limits(),
        groups,
    }
}

/// An invented month report with `n_characteristics` x `factors` trend/share pairs over
/// `days` days, with user text `plant` and a hostile level name list.
pub fn month_report(
    plant: &str,
    n_characteristics: usize,
    factors: &[&str],
    levels: &[&str],
    days: u32,
) -> MonthReport {
    let mut characteristics = Vec::new();
    for c in 0..n_characteristics {
        let name = format!("characteristic {:02}", c + 1);
        characteristics.push(CharacteristicSection {
            characteristic: name.clone(),
            unit: "mm".to_string(),
            limits: limits(),
            factors: factors
                .iter()
                .map(|f| FactorCharts {
                    trend: trend(&name, f, levels, days),
                    share: share(&name, f, days),
                })
                .collect(),
        });
    }
    let g = grid(n_characteristics, factors, days);
    let mut counts = StateCounts::default();
    for r in &g.rows {
        for s in &r.cells {
            counts.add(*s);
        }
    }
    MonthReport {
        plant: plant.to_string(),
        month: "2026-11".to_string(),
        generated: "2026-12-01 06:00 UTC".to_string(),
        counts,
        new_this_month: vec![format!(
            "{} by machine flagged for the first time",
            levels[1]
        )],
        findings: Vec::new(),
        flagged: vec![FlaggedItem {
            characteristic: "characteristic 01".to_string(),
            factor: factors[0].to_string(),
            unit: "mm".to_string(),
            period_label: "2026-11-16".to_string(),
            state: FlagState::DiffersMaterial,
            test: "Welch".to_string(),
            p_value: 0.00012,
            q_value: 0.0031,
            share_between: Some(0.41),
            standing_out: levels[1].to_string(),
            diff_units: 0.0123,
            diff_pct_tolerance: Some(12.3),
            pairs: vec![PairRow {
                a: levels[1].to_string(),
                b: levels[0].to_string(),
                diff: 0.0151,
                ci_low: 0.0071,
                ci_high: 0.0231,
                p_adj: 0.0004,
                method: "Games-Howell".to_string(),
            }],
        }],
        grid: Some(g),
        characteristics,
        investigations: vec![before_after(&levels[..levels.len().min(3)])],
        requirement_notes: vec![RequirementNote {
            characteristic: "characteristic 01".to_string(),
            factor: factors[0].to_string(),
            period_label: "2026-11-16".to_string(),
            note: format!(
                "spread of {} differs (Brown-Forsythe p = 0.003); Welch used",
                levels[1]
            ),
        }],
        coverage: Coverage {
            rows_stored: 123_456,
            rows_rejected: 17,
            days_without_data: vec![NaiveDate::from_ymd_opt(2026, 11, 8).unwrap()],
            rows_by_characteristic: vec![("characteristic 01".to_string(), 2469)],
        },
        methods: standard_methods(),
    }
}

/// Where tests put artefacts: `<target>/test-artifacts/<sub>`.
pub fn artifact_dir(sub: &str) -> std::path::PathBuf {
    let tmp = std::path::Path::new(env!("CARGO_TARGET_TMPDIR"));
    let dir = tmp.parent().unwrap_or(tmp).join("test-artifacts").join(sub);
    std::fs::create_dir_all(&dir).expect("create artefact folder");
    dir
}
