//! The pure statistics core. Nothing here does I/O, reads a clock, prints or touches SQL: functions
//! take slices and small structs and return structs. Everything else in samewise calls into it.
//!
//! Start reading at [`oneway`], which bundles every one-way result for one characteristic x factor.
//! Values handed to the core are `f64` offsets from an exact decimal origin ([`decimal`]), so data
//! with a huge offset and a tiny spread keep their digits.
//!
//! A statistic that cannot be computed for the data at hand is an [`Unavailable`] carrying the
//! reason, never a NaN and never a panic.

pub mod anova;
pub mod blocked;
pub mod bootstrap;
pub mod changepoint;
pub mod constant_groups;
pub mod decimal;
pub mod describe;
pub mod distributions;
pub mod effect;
pub mod fdr;
pub mod fstar;
pub mod kruskal;
pub mod materiality;
pub mod nested;
pub mod noncentral;
pub mod normality;
pub mod oneway;
pub mod posthoc;
pub mod power;
pub mod ptukey;
pub mod serial;
pub mod shift;
pub mod spread;
pub mod twoway;
pub mod variance_components;
pub mod welch;

use std::fmt;

/// Why a statistic could not be computed for the data at hand (for example "fewer than two groups").
///
/// Reported beside the statistic (as `null` plus `reason` in JSON), it is not an error that stops
/// the analysis.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Unavailable {
    /// Plain-language reason, lowercase, no trailing period.
    pub reason: String,
}

impl Unavailable {
    /// Builds an `Unavailable` from any message.
    pub fn new(reason: impl Into<String>) -> Self {
        Unavailable {
            reason: reason.into(),
        }
    }
}

impl fmt::Display for Unavailable {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.reason)
    }
}

impl std::error::Error for Unavailable {}

/// A statistic, or the reason it is not available.
pub type Stat<T> = Result<T, Unavailable>;

/// A test statistic with its p-value (upper tail unless the test says otherwise).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TestResult {
    /// The test statistic.
    pub statistic: f64,
    /// Its p-value.
    pub p: f64,
    /// Numerator / first degrees of freedom, where the test has them.
    pub df1: Option<f64>,
    /// Denominator / second degrees of freedom, where the test has them.
    pub df2: Option<f64>,
}

/// Test helper: log relative error, about the number of correct significant digits
/// (NIST StRD's measure of accuracy). Returns 15.9 (the f64 limit) for an exact match.
#[cfg(test)]
pub(crate) fn lre(x: f64, c: f64) -> f64 {
    if x == c {
        return 15.9;
    }
    if c == 0.0 {
        return -(x.abs().log10());
    }
    (-((x - c).abs() / c.abs()).log10()).min(15.9)
}
