//! The document `samewise check --sites ... --json` prints: a period compared across sites
//! (`analysis::sites`), with the site as the factor of every test.

use schemars::JsonSchema;
use serde::Serialize;

use crate::results::{CheckedPeriod, CheckedTest};

/// `samewise check --sites ... --json` (docs/json.md; schema in docs/schema/check-sites.json).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct SitesDocument {
    /// The plant whose configuration asked; its calendar sets the period for every site.
    pub plant: String,
    /// The compared period.
    pub period: CheckedPeriod,
    /// The calendar the period follows, in words (time zone and start of the production day).
    pub calendar: String,
    /// Every site, in the order given.
    pub sites: Vec<SiteLine>,
    /// The false-discovery procedure over the tests (`bh` or `by`).
    pub fdr_method: String,
    /// The false-discovery level q.
    pub fdr_level: f64,
    /// Whether the comparison was stored: always `false` (a site's runs and findings belong to
    /// the site; the comparison is read again each time).
    pub stored: bool,
    /// Tests (one per compared characteristic).
    pub n_tests: usize,
    /// Flagged tests.
    pub n_flagged: usize,
    /// The tests, flagged first; the factor of each is `site`, its groups the sites.
    pub tests: Vec<CheckedTest>,
    /// The characteristics some site has active that were not compared, with the reason.
    pub not_compared: Vec<NotComparedLine>,
    /// The caution every output carries.
    pub caution: String,
}

/// One site of a comparison.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct SiteLine {
    /// The site (its schema on the server).
    pub site: String,
    /// Its active characteristics.
    pub active_characteristics: usize,
    /// Its values in the period, over the compared characteristics.
    pub values: u64,
}

/// A characteristic left out of a comparison of sites.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct NotComparedLine {
    /// The characteristic.
    pub characteristic: String,
    /// The sites that have it active.
    pub sites: Vec<String>,
    /// Why it was left out.
    pub reason: String,
}
