//! All SQLite code: opening, migrations, typed queries and the mapping between rows and `model`
//! types. No other module contains SQL.

pub mod runs;
