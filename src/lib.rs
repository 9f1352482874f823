//! samewise: checks whether the groups of a plant (machines, lines, cavities, shifts, suppliers)
//! still produce the same result for every critical characteristic, keeps the history of every
//! check, and draws the charts and the monthly review report.
//!
//! Modules in reading order, following the one-way flow of data
//! (`ingest -> storage -> analysis -> stats`, results `-> report`; `cli` and `schedule` decide when):
//!
//! - [`stats`]: pure statistics (no I/O, no clock, no SQL). Start at `stats::oneway`.
//! - [`model`]: plain domain types shared by every layer.
//! - [`config`]: the plant configuration file, validated once into a `Config`.
//! - [`calendar`]: production days, shifts, ISO weeks and months of the plant zone as UTC intervals.
//! - [`ingest`]: CSV exports to measurements, with row-level rejections.
//! - [`storage`]: all SQLite code (migrations, typed queries).
//! - [`analysis`]: loads a period, calls `stats`, returns an analysis run.
//! - [`schedule`]: which periods are due at a given `now`; runs the engine for each.
//! - [`output`]: output files that never replace an input, written through a temporary name.
//! - [`outputs`]: the JSON documents of the commands other than `check`, as typed results.
//! - [`process`]: host name and whether a process still runs (lease and lock holders).
//! - [`report`]: charts (plotters) and the self-contained HTML review report.
//! - [`cli`]: clap types and one file per subcommand; the only module that reads the wall clock.
#![warn(missing_docs)]

pub mod analysis;
pub mod calendar;
pub mod cli;
pub mod config;
pub mod error;
pub mod ingest;
pub mod model;
pub mod names;
pub mod output;
pub mod outputs;
pub mod process;
pub mod report;
pub mod results;
pub mod sample;
pub mod scenario;
pub mod schedule;
pub mod schema;
pub mod shot_plant;
pub mod stats;
pub mod storage;

pub use error::{Error, Result};

/// The caution printed with every report and summary.
pub const CAUTION: &str =
    "Caution: a statistical flag is decision support, not a verdict. Release, \
containment and safety decisions follow the site's own quality procedures, the applicable \
standards and qualified people.";
