//! The analysis engine: loads one period's values from `storage`, runs the `stats` core for every
//! characteristic x factor, applies false-discovery control across the run and returns the run.
//! It is the only module that calls both `storage` and `stats`.
pub mod investigate;
