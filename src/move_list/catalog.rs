//! Which move lists a machine has: the files beside its configuration whose names contain
//! `list` (`configs/tray-inspection-list.toml` beside `configs/demo-greenhouse.toml`), or,
//! for the built-in demo machine, the demo's own list compiled in. Every list is read with
//! [`MoveList::load`], the loader `servotty run` uses, so the cockpit and the command line
//! accept and refuse exactly the same files.
//!
//! Reading directories and files blocks: call [`find`] off the key path (the cockpit runs it
//! on the blocking pool).

use std::path::{Path, PathBuf};

use super::MoveList;
use crate::config::{ConfigSource, MachineConfig};

/// The demo machine's list (invented scenario, like the demo itself).
pub const DEMO_LIST: &str = include_str!("../../configs/tray-inspection-list.toml");
/// How the demo list is named on screen.
pub const DEMO_LIST_NAME: &str = "tray-inspection-list.toml (built in)";

/// One list found, read and checked for form, or why it could not be.
#[derive(Debug, Clone, PartialEq)]
pub struct Found {
    /// File name (or the built-in list's name), for the screen.
    pub name: String,
    /// Where it is; `None` for the built-in list.
    pub path: Option<PathBuf>,
    /// The list, or the loader's error in words (file, line and step).
    pub list: Result<MoveList, String>,
}

/// Whether a file beside the configuration is taken for a move list.
pub fn looks_like_list(path: &Path) -> bool {
    path.extension().is_some_and(|e| e == "toml")
        && path.file_stem().is_some_and(|s| s.to_string_lossy().contains("list"))
}

/// The lists of the machine in `cfg`, loaded from `source`: sorted by file name.
pub fn find(cfg: &MachineConfig, source: &ConfigSource) -> Vec<Found> {
    match source {
        ConfigSource::BuiltInDemo => vec![Found {
            name: DEMO_LIST_NAME.to_owned(),
            path: None,
            list: MoveList::from_toml_str(DEMO_LIST, DEMO_LIST_NAME, cfg)
                .map_err(|e| e.to_string()),
        }],
        ConfigSource::File(config) => {
            let dir = match config.parent() {
                Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
                _ => PathBuf::from("."),
            };
            let mut paths: Vec<PathBuf> = match std::fs::read_dir(&dir) {
                Ok(rd) => rd
                    .filter_map(Result::ok)
                    .map(|e| e.path())
                    .filter(|p| p.is_file() && looks_like_list(p) && p != config)
                    .collect(),
                Err(_) => Vec::new(),
            };
            paths.sort();
            paths
                .into_iter()
                .map(|p| Found {
                    name: p.file_name().map_or_else(
                        || p.display().to_string(),
                        |n| n.to_string_lossy().into_owned(),
                    ),
                    list: MoveList::load(&p, cfg).map_err(|e| e.to_string()),
                    path: Some(p),
                })
                .collect()
        }
    }
}
