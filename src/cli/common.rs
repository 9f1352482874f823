//! Helpers shared by the subcommands (owned by the store engineer): finding the plant
//! configuration and opening its database.
//!
//! The configuration is found, in order, from `--config FILE`, the `SAMEWISE_CONFIG` environment
//! variable, or `plant.toml` in the current directory.

use std::path::{Path, PathBuf};

use crate::config::Config;
use crate::storage::PlantStore;
use crate::{Error, Result};

/// The environment variable naming the configuration file.
pub const CONFIG_ENV: &str = "SAMEWISE_CONFIG";

/// The global `--config FILE` of this invocation (set once by `cli::run`).
static CONFIG_FLAG: std::sync::OnceLock<Option<PathBuf>> = std::sync::OnceLock::new();

/// Records the global `--config` flag (the first call wins; `cli::run` makes it once).
pub fn set_config_flag(path: Option<PathBuf>) {
    let _ = CONFIG_FLAG.set(path);
}

/// The global `--config` flag, when one was given.
pub fn config_flag() -> Option<&'static Path> {
    CONFIG_FLAG.get().and_then(|p| p.as_deref())
}

/// Where the configuration file is: `--config`, then `$SAMEWISE_CONFIG`, then `./plant.toml`.
pub fn config_path(flag: Option<&Path>) -> Result<PathBuf> {
    if let Some(path) = flag {
        return Ok(path.to_path_buf());
    }
    if let Some(path) = std::env::var_os(CONFIG_ENV).filter(|v| !v.is_empty()) {
        return Ok(PathBuf::from(path));
    }
    let default = PathBuf::from("plant.toml");
    if default.exists() {
        return Ok(default);
    }
    Err(Error::Usage(format!(
        "no plant configuration: pass --config FILE, set {CONFIG_ENV}, or put plant.toml in the \
         current directory (sample-plant/plant.toml is an example)"
    )))
}

/// Finds and loads the configuration (see [`config_path`]).
pub fn load_config(flag: Option<&Path>) -> Result<Config> {
    let path = config_path(flag)?;
    if !path.exists() {
        return Err(Error::Usage(format!(
            "the plant configuration {} does not exist",
            path.display()
        )));
    }
    Config::load(&path)
}

/// The database this command opened (for the message of a writer that gave up waiting).
static DATABASE: std::sync::Mutex<Option<PathBuf>> = std::sync::Mutex::new(None);

/// Notes the database this command uses (see [`database_in_use`]).
pub fn note_database(path: &Path) {
    *DATABASE.lock().unwrap_or_else(|p| p.into_inner()) = Some(path.to_path_buf());
}

/// The database this command uses, once it was opened.
pub fn database_in_use() -> Option<PathBuf> {
    DATABASE.lock().unwrap_or_else(|p| p.into_inner()).clone()
}

/// Opens the configuration's existing database (an error suggesting `samewise init` if there is
/// none yet).
pub fn open_store(config: &Config) -> Result<Box<dyn PlantStore>> {
    if config.plant.server.is_none() {
        note_database(&config.plant.database);
    }
    crate::storage::open(config)
}
