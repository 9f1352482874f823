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
    /// The database failed (the store's own description; no SQLite type leaves `storage`).
    Storage(StorageError),
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
            _ => None,
        }
    }
}

/// A failure of the database engine, as the store describes it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StorageError {
    /// What the engine said.
    pub message: String,
    /// What kind of failure it was.
    pub kind: StorageErrorKind,
}

/// Kinds of [`StorageError`] that callers act on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StorageErrorKind {
    /// Another connection holds a lock the engine gave up waiting for.
    Busy,
    /// The file is not a database at all.
    NotADatabase,
    /// Anything else.
    Other,
}

impl std::fmt::Display for StorageError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
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
