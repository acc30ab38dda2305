//! Diagnostics go to a file, never to the screen the cockpit draws on.
//!
//! The file is `$SERVOTTY_LOG` if set, else `servotty/cockpit.log` under the XDG state
//! directory (`$XDG_STATE_HOME`, or `~/.local/state`), else in the temporary directory. The
//! level follows `RUST_LOG` (default `info`). The help overlay shows the path.

use std::fs::{self, OpenOptions};
use std::path::PathBuf;
use std::sync::Mutex;

use tracing_subscriber::EnvFilter;

/// Where the log goes.
pub fn log_path() -> PathBuf {
    if let Some(p) = std::env::var_os("SERVOTTY_LOG").filter(|p| !p.is_empty()) {
        return PathBuf::from(p);
    }
    let state = std::env::var_os("XDG_STATE_HOME")
        .filter(|p| !p.is_empty())
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".local/state")));
    match state {
        Some(dir) => dir.join("servotty").join("cockpit.log"),
        None => std::env::temp_dir().join("servotty-cockpit.log"),
    }
}

/// Sends `tracing` output to the log file (appending). Returns its path, or why there is
/// none (the cockpit runs either way).
///
/// # Errors
/// A sentence saying why logging is off.
pub fn init() -> Result<PathBuf, String> {
    let path = log_path();
    if let Some(dir) = path.parent() {
        fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    let file = OpenOptions::new()
        .create(true)
        .append(true)
        .open(&path)
        .map_err(|e| format!("{}: {e}", path.display()))?;
    let filter = EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new("info"));
    tracing_subscriber::fmt()
        .with_writer(Mutex::new(file))
        .with_ansi(false)
        .with_env_filter(filter)
        .try_init()
        .map_err(|e| format!("logging already set up: {e}"))?;
    Ok(path)
}
