//! The crate's error type. Each variant says what failed and carries what the user needs to fix it.
//! Messages start lowercase, have no trailing period, and name the input (file:line, flag, name).

use std::fmt;
use std::path::PathBuf;

/// Result alias used across samewise.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Everything that can stop a samewise command.
#[derive(Debug)]
pub enum Error {
    /// A file could not be read or written.
    Io {
        /// The file or folder involved.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
    /// Input data could not be used (a whole file or an argument, not a single rejected row).
    Ingest {
        /// The input file.
        path: PathBuf,
        /// 1-based line, when known.
        line: Option<u64>,
        /// Column name, when known.
        column: Option<String>,
        /// What is wrong and, when one exists, the fix.
        reason: String,
    },
    /// The plant configuration is invalid.
    Config {
        /// The configuration file.
        path: PathBuf,
        /// What is wrong.
        reason: String,
    },
    /// The database failed.
    Storage(rusqlite::Error),
    /// The database exists but cannot be used as it is (newer schema, missing, corrupt).
    Database(String),
    /// Not enough data for the analysis that was asked for.
    NotEnoughData {
        /// The characteristic (or measure column).
        characteristic: String,
        /// What was found.
        reason: String,
    },
    /// A command-line argument or combination is wrong.
    Usage(String),
    /// The same file content was imported before (refused unless `--force`).
    AlreadyImported {
        /// The file being imported.
        path: PathBuf,
        /// The earlier import, described.
        earlier: String,
    },
    /// A chart could not be drawn (bad input to the chart or a drawing failure).
    Chart {
        /// Which chart (for example "trend bore diameter by machine").
        chart: String,
        /// What went wrong.
        reason: String,
    },
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Error::Io { path, source } => write!(f, "{}: {}", path.display(), source),
            Error::Ingest {
                path,
                line,
                column,
                reason,
            } => {
                write!(f, "{}", path.display())?;
                if let Some(line) = line {
                    write!(f, ":{line}")?;
                }
                if let Some(column) = column {
                    write!(f, ": column \"{column}\"")?;
                }
                write!(f, ": {reason}")
            }
            Error::Config { path, reason } => write!(f, "{}: {}", path.display(), reason),
            Error::Storage(e) => write!(f, "database error: {e}"),
            Error::Database(msg) => f.write_str(msg),
            Error::NotEnoughData {
                characteristic,
                reason,
            } => write!(f, "not enough data for {characteristic}: {reason}"),
            Error::Usage(msg) => f.write_str(msg),
            Error::AlreadyImported { path, earlier } => write!(
                f,
                "{}: the same content was already imported as {earlier}; nothing was imported \
                 (use --force to import it again)",
                path.display()
            ),
            Error::Chart { chart, reason } => write!(f, "chart {chart}: {reason}"),
        }
    }
}

impl std::error::Error for Error {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Error::Io { source, .. } => Some(source),
            Error::Storage(e) => Some(e),
            _ => None,
        }
    }
}

impl From<rusqlite::Error> for Error {
    fn from(e: rusqlite::Error) -> Self {
        Error::Storage(e)
    }
}

impl Error {
    /// Wraps an I/O error with the path it concerns.
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }
}
