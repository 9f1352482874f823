//! A check that compares sites: the same characteristic, made to the same limits in several
//! plants whose data share one server database, tested with the site as the grouping factor.
//!
//! Each site keeps its own schema, characteristics, origins and level ids; nothing here writes.
//! A characteristic takes part when at least two of the sites have it active under the same
//! name with the same unit, limits and target (a site-to-site difference means nothing when the
//! sites make the part to different drawings); every other one is listed with the reason it was
//! left out. The values of each site are re-centred exactly onto one origin (the offsets stay
//! offsets: `origin_site - origin` is an exact decimal difference, added once), the shots and
//! samples of each site stay that site's own subgroups, and the merged period goes through the
//! same analysis as a plant's own check ([`super::check_frames`]): the same leading-method rule,
//! false-discovery step, flag states, pairs and variance components.
//!
//! The comparison is not stored: a site's runs and findings belong to that site, and this check
//! is read again from the sites' data each time it is asked for.

use std::sync::Arc;

use chrono::{DateTime, Utc};

use super::run::{frame_from, CHARACTERISTICS_PER_PART};
use super::{check_frames, CheckOptions, Frame, FrameCharacteristic, FrameFactor, NO_SUBGROUP};
use crate::config::CharacteristicConfig;
use crate::results::RunContent;
use crate::stats::decimal::Decimal;
use crate::storage::MeasurementStore;
use crate::{Error, Result};

/// The name of the grouping factor whose levels are the sites.
pub const SITE_FACTOR: &str = "site";

/// One site taking part: its name (its schema on the server) and its data, read only.
pub struct Site<'a> {
    /// The site's name as the check shows it.
    pub name: String,
    /// Its data.
    pub store: &'a dyn MeasurementStore,
}

/// A characteristic compared across sites.
#[derive(Debug, Clone, PartialEq)]
pub struct SharedCharacteristic {
    /// Name, unit, limits and target (the same in every site that takes part); the gauge
    /// resolution is the coarsest of theirs.
    pub config: CharacteristicConfig,
    /// The sites that have it active, in the order the sites were given.
    pub sites: Vec<String>,
}

/// A characteristic some site has that was not compared, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct NotCompared {
    /// Its name.
    pub characteristic: String,
    /// The sites that have it active.
    pub sites: Vec<String>,
    /// Why it was left out, in words.
    pub reason: String,
}

/// What one site contributed.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteContribution {
    /// The site.
    pub site: String,
    /// Its active characteristics.
    pub active_characteristics: usize,
    /// Its values in the period, over the compared characteristics.
    pub values: u64,
}

/// The outcome of [`check_sites`].
#[derive(Debug, Clone, PartialEq)]
pub struct SitesCheck {
    /// Every site, in the order given.
    pub sites: Vec<SiteContribution>,
    /// The compared characteristics, in the order of their tests.
    pub compared: Vec<SharedCharacteristic>,
    /// The characteristics left out, with their reasons.
    pub not_compared: Vec<NotCompared>,
    /// One test per compared characteristic (factor [`SITE_FACTOR`]), numbered as
    /// `compared`. No test is marked new: "new" is measured against a stored earlier run, and
    /// a comparison of sites is not stored.
    pub content: RunContent,
}

/// Compares the sites over `[start, end)`: every characteristic the sites share (see the
/// module documentation) with the site as the factor. `options` gives the false-discovery
/// procedure and level, the materiality share, the confidence and the threads; its
/// characteristic and factor lists do not apply (the characteristics are the shared ones, the
/// factor is the site). At least two sites, each named once.
pub fn check_sites(
    sites: &[Site<'_>],
    start: DateTime<Utc>,
    end: DateTime<Utc>,
    options: &CheckOptions,
) -> Result<SitesCheck> {
    if sites.len() < 2 {
        return Err(Error::Usage(format!(
            "a comparison of sites needs at least two sites; {} given",
            sites.len()
        )));
    }
    for (i, s) in sites.iter().enumerate() {
        if sites[..i].iter().any(|t| t.name == s.name) {
            return Err(Error::Usage(format!(
                "site {} is named twice: name each site once",
                s.name
            )));
        }
    }
    let mut active: Vec<Vec<CharacteristicConfig>> = Vec::with_capacity(sites.len());
    for s in sites {
        active.push(
            s.store
                .characteristics()?
                .into_iter()
                .filter(|c| c.config.is_active)
                .map(|c| c.config)
                .collect(),
        );
    }
    let (compared, not_compared) = shared_characteristics(sites, &active);
    let mut contributions: Vec<SiteContribution> = sites
        .iter()
        .zip(&active)
        .map(|(s, a)| SiteContribution {
            site: s.name.clone(),
            active_characteristics: a.len(),
            values: 0,
        })
        .collect();
    let mut options = options.clone();
    options.characteristics = None;
    options.factors = None;
    let levels: Vec<String> = sites.iter().map(|s| s.name.clone()).collect();
    let counts = std::cell::RefCell::new(vec![0u64; sites.len()]);
    let parts = compared.chunks(CHARACTERISTICS_PER_PART).map(|part| {
        merged_part(sites, part, &levels, start, end, &mut counts.borrow_mut()).map(Arc::new)
    });
    let mut content = check_frames(parts, &options, None)?;
    for t in &mut content.tests {
        t.is_new = false;
    }
    for (c, n) in contributions.iter_mut().zip(counts.into_inner()) {
        c.values = n;
    }
    Ok(SitesCheck {
        sites: contributions,
        compared,
        not_compared,
        content,
    })
}

/// The characteristics at least two sites have active with the same unit, limits and target,
/// and every other active one with its reason; both in the order of first appearance (the first
/// site's order, then each later site's new ones).
fn shared_characteristics(
    sites: &[Site<'_>],
    active: &[Vec<CharacteristicConfig>],
) -> (Vec<SharedCharacteristic>, Vec<NotCompared>) {
    let mut names: Vec<&str> = Vec::new();
    for list in active {
        for c in list {
            if !names.contains(&c.name.as_str()) {
                names.push(&c.name);
            }
        }
    }
    let mut compared = Vec::new();
    let mut left_out = Vec::new();
    for name in names {
        let having: Vec<(&str, &CharacteristicConfig)> = sites
            .iter()
            .zip(active)
            .filter_map(|(s, list)| {
                list.iter()
                    .find(|c| c.name == name)
                    .map(|c| (s.name.as_str(), c))
            })
            .collect();
        let site_names: Vec<String> = having.iter().map(|(s, _)| s.to_string()).collect();
        if having.len() < 2 {
            left_out.push(NotCompared {
                characteristic: name.to_string(),
                reason: format!(
                    "only site {} has it active, so there is nothing to compare it with",
                    site_names.join(", ")
                ),
                sites: site_names,
            });
            continue;
        }
        let first = having[0].1;
        let same_spec = |c: &CharacteristicConfig| {
            c.unit == first.unit
                && c.lsl == first.lsl
                && c.usl == first.usl
                && c.target == first.target
        };
        if !having.iter().all(|(_, c)| same_spec(c)) {
            let specs: Vec<String> = having
                .iter()
                .map(|(s, c)| format!("{s}: {}", spec_words(c)))
                .collect();
            left_out.push(NotCompared {
                characteristic: name.to_string(),
                reason: format!(
                    "the sites do not make it to the same specification ({}): sites are \
                     compared only on the same unit, limits and target",
                    specs.join("; ")
                ),
                sites: site_names,
            });
            continue;
        }
        let mut config = first.clone();
        config.resolution = having
            .iter()
            .filter_map(|(_, c)| c.resolution)
            .fold(None, |acc: Option<f64>, r| {
                Some(acc.map_or(r, |a| a.max(r)))
            });
        config.plausible = None;
        compared.push(SharedCharacteristic {
            config,
            sites: site_names,
        });
    }
    (compared, left_out)
}

/// `lsl 10 usl 10.2 target 10.1 mm`, with `-` for a limit that is not set.
fn spec_words(c: &CharacteristicConfig) -> String {
    let v = |x: Option<f64>| x.map_or("-".to_string(), |x| x.to_string());
    let unit = if c.unit.is_empty() {
        "(no unit)".to_string()
    } else {
        c.unit.clone()
    };
    format!(
        "lsl {} usl {} target {} {unit}",
        v(c.lsl),
        v(c.usl),
        v(c.target)
    )
}

/// One part of the compared characteristics, read from every site that has them and merged
/// into one frame whose only factor is the site. `counts` gathers each site's values.
fn merged_part(
    sites: &[Site<'_>],
    part: &[SharedCharacteristic],
    levels: &[String],
    start: DateTime<Utc>,
    end: DateTime<Utc>,
    counts: &mut [u64],
) -> Result<Frame> {
    // Each site's frame of the part's characteristics it has (all of them, by construction,
    // for the sites listed with each one).
    let mut per_site: Vec<Option<Frame>> = Vec::with_capacity(sites.len());
    for s in sites {
        let names: Vec<String> = part
            .iter()
            .filter(|c| c.sites.contains(&s.name))
            .map(|c| c.config.name.clone())
            .collect();
        if names.is_empty() {
            per_site.push(None);
            continue;
        }
        let frame = s
            .store
            .load_period(start, end, Some(&names))
            .map_err(|e| site_context(e, &s.name))?;
        per_site.push(Some(frame_from(frame)));
    }
    let mut characteristics = Vec::with_capacity(part.len());
    for shared in part {
        let pieces: Vec<(usize, &FrameCharacteristic)> = per_site
            .iter()
            .enumerate()
            .filter_map(|(i, f)| {
                f.as_ref().and_then(|f| {
                    f.characteristics
                        .iter()
                        .find(|c| c.characteristic.name == shared.config.name)
                        .map(|c| (i, c))
                })
            })
            .collect();
        // The origin of the first site with values: the other sites' offsets move onto it.
        let (origin_site, origin) = pieces
            .iter()
            .find(|(_, c)| !c.values.is_empty())
            .map_or((0, Decimal::ZERO), |(i, c)| (*i, c.origin));
        let rows: usize = pieces.iter().map(|(_, c)| c.values.len()).sum();
        let with_subgroups = pieces.iter().any(|(_, c)| !c.subgroup.is_empty());
        let mut values = Vec::with_capacity(rows);
        let mut site_idx = Vec::with_capacity(rows);
        let mut subgroup = Vec::with_capacity(if with_subgroups { rows } else { 0 });
        let mut next_subgroup = 0u32;
        for (i, c) in pieces {
            if c.values.is_empty() {
                continue;
            }
            let shift = c
                .origin
                .checked_sub(&origin)
                .ok_or_else(|| {
                    Error::Database(format!(
                        "{}: the origins of site {} ({}) and site {} ({}) are too far apart to \
                         compare exactly",
                        shared.config.name, sites[i].name, c.origin, levels[origin_site], origin
                    ))
                })?
                .to_f64();
            values.extend(c.values.iter().map(|v| v + shift));
            site_idx.extend(std::iter::repeat_n(i as u32, c.values.len()));
            counts[i] += c.values.len() as u64;
            if with_subgroups {
                if c.subgroup.is_empty() {
                    subgroup.extend(std::iter::repeat_n(NO_SUBGROUP, c.values.len()));
                } else {
                    // Each site's shots stay its own: numbered after the previous site's.
                    let mut highest = None;
                    subgroup.extend(c.subgroup.iter().map(|&g| {
                        if g == NO_SUBGROUP {
                            NO_SUBGROUP
                        } else {
                            highest = Some(highest.map_or(g, |h: u32| h.max(g)));
                            next_subgroup + g
                        }
                    }));
                    if let Some(h) = highest {
                        next_subgroup += h + 1;
                    }
                }
            }
        }
        characteristics.push(FrameCharacteristic {
            characteristic: shared.config.clone(),
            origin,
            values,
            level_idx: vec![site_idx],
            subgroup,
        });
    }
    Ok(Frame {
        factors: vec![FrameFactor {
            name: SITE_FACTOR.to_string(),
            levels: levels.to_vec(),
        }],
        characteristics,
    })
}

/// An error of one site's read, with the site named.
fn site_context(e: Error, site: &str) -> Error {
    match e {
        Error::Usage(m) => Error::Usage(format!("site {site}: {m}")),
        Error::Database(m) => Error::Database(format!("site {site}: {m}")),
        other => other,
    }
}
