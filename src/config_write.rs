//! Writing the configuration file without disturbing it: tuned controller parameters (the
//! cockpit's `w`, `servotty tune --save`) and the atomic replacement any state file uses
//! (the spots store). A library module of its own, so that the cockpit and the CLI share it
//! without either importing the other.
//!
//! The file is edited as a document (`toml_edit`), not re-serialised: only the changed
//! values are replaced, and everything else — comments, blank lines, key order, number
//! style — stays byte for byte. A changed value's trailing comment described the old value,
//! so it is replaced by a note of where the new one came from (`# tune identify: SIMC …,
//! 2026-12-02`); comment lines above a key are kept. The result is
//! loaded and validated like any configuration before it replaces the file.
//!
//! Replacement is atomic: the new text goes to a temporary file in the same directory, is
//! flushed to disk, the old file is copied to `<name>.bak`, and a rename puts the new one in
//! place. A crash at any point leaves either the old or the new file, never half of one.
//!
//! Which values are carried over is the parameter table's business
//! ([`crate::control::params::ALL`]): a parameter added there is saved with no change here.
//!
//! These functions do blocking file I/O (and fsync, which can take long on an SD card): the
//! cockpit runs them on tokio's blocking pool, never in the key or render path.

use std::fs::{self, File, OpenOptions};
use std::io::{self, Write as _};
use std::path::{Path, PathBuf};

use toml_edit::{DocumentMut, Item, Value};

use crate::config::MachineConfig;
use crate::control::params;

/// What a save did.
#[derive(Debug, Clone, PartialEq)]
pub struct SaveReport {
    /// The file written.
    pub path: PathBuf,
    /// Where the previous version was kept, if there was one.
    pub backup: Option<PathBuf>,
    /// The keys changed, e.g. `x.controller.kp`.
    pub changed: Vec<String>,
}

/// Why a save did not happen. The file is untouched in every case.
#[derive(Debug, thiserror::Error)]
pub enum SaveError {
    /// Reading, writing or renaming failed.
    #[error("{}: {err}", path.display())]
    Io {
        /// Which file.
        path: PathBuf,
        /// The OS error.
        err: io::Error,
    },
    /// The file on disk no longer parses or validates.
    #[error("{0}")]
    Config(#[from] crate::config::ConfigError),
    /// An axis of the running machine is not in the file.
    #[error("{}: has no [[axis]] named {axis:?}", path.display())]
    NoAxis {
        /// The file.
        path: PathBuf,
        /// The axis.
        axis: String,
    },
    /// The edited text would not load (the new values are refused).
    #[error("refused, the file would not load: {0}")]
    Refused(String),
    /// Writing a copy would overwrite an existing file.
    #[error("{} already exists; choose another name", .0.display())]
    Exists(PathBuf),
}

fn io_err(path: &Path) -> impl FnOnce(io::Error) -> SaveError + '_ {
    move |err| SaveError::Io { path: path.to_path_buf(), err }
}

/// `text` with every editable controller value set to the value in `live` where the two
/// differ, each changed value's trailing comment replaced by `# note` (no comment when
/// `note` is empty). Returns the new text and the keys changed.
///
/// # Errors
/// [`SaveError`] when `text` does not load, lacks an axis of `live`, or the edited text
/// would not load.
pub fn update_text(
    text: &str,
    source_name: &str,
    live: &MachineConfig,
    note: &str,
) -> Result<(String, Vec<String>), SaveError> {
    let on_disk = MachineConfig::from_toml_str(text, source_name)?;
    let mut doc: DocumentMut =
        text.parse().map_err(|e: toml_edit::TomlError| SaveError::Refused(e.to_string()))?;
    let mut changed = Vec::new();
    for axis in &live.axes {
        let Some(index) = on_disk.axes.iter().position(|a| a.name == axis.name) else {
            return Err(SaveError::NoAxis { path: source_name.into(), axis: axis.name.clone() });
        };
        let file_ctl = &on_disk.axes[index].controller;
        for p in params::ALL.iter().copied() {
            // As stored, not as in force: a key the file leaves out stays out unless the
            // live value gives it one, and one the live value drops is taken out.
            let v = p.stored(&axis.controller);
            if p.stored(file_ctl).map(f64::to_bits) == v.map(f64::to_bits) {
                continue;
            }
            let table = doc
                .get_mut("axis")
                .and_then(Item::as_array_of_tables_mut)
                .and_then(|a| a.get_mut(index))
                .and_then(|t| t.get_mut("controller"))
                .and_then(Item::as_table_like_mut)
                .ok_or_else(|| SaveError::NoAxis {
                    path: source_name.into(),
                    axis: axis.name.clone(),
                })?;
            match v {
                Some(v) => set_number(table, p.key(), v, note),
                None => {
                    table.remove(p.key());
                }
            }
            changed.push(format!("{}.controller.{}", axis.name, p.key()));
        }
    }
    let out = doc.to_string();
    MachineConfig::from_toml_str(&out, source_name)
        .map_err(|e| SaveError::Refused(e.to_string()))?;
    Ok((out, changed))
}

/// Replaces (or adds) `key = v`, keeping the key's comment lines and the spacing before the
/// value: the value is swapped inside its item, not the item inside the table. Its trailing
/// comment becomes `# note` (none when `note` is empty).
fn set_number(table: &mut dyn toml_edit::TableLike, key: &str, v: f64, note: &str) {
    let suffix = if note.is_empty() { String::new() } else { format!("  # {note}") };
    if let Some(old) = table.get_mut(key).and_then(Item::as_value_mut) {
        let prefix = old.decor().prefix().cloned();
        *old = Value::from(v);
        if let Some(p) = prefix {
            old.decor_mut().set_prefix(p);
        }
        old.decor_mut().set_suffix(suffix);
        return;
    }
    let mut value = Value::from(v);
    value.decor_mut().set_suffix(suffix);
    table.insert(key, Item::Value(value));
}

/// A save note: what set the values and today's date (UTC), e.g. `tune identify: SIMC,
/// 2026-12-02`.
pub fn note(what: &str) -> String {
    let stamp = crate::engine::events::rfc3339_utc(std::time::SystemTime::now());
    format!("{what}, {}", stamp.get(..10).unwrap_or(&stamp))
}

/// Saves the live controller parameters into the configuration file at `path`, keeping the
/// previous file as `<name>.bak`; changed values carry `# note` ([`update_text`]).
///
/// # Errors
/// [`SaveError`]; the file is unchanged when it fails.
pub fn save_controllers(
    path: &Path,
    live: &MachineConfig,
    note: &str,
) -> Result<SaveReport, SaveError> {
    // Write where the file really is: renaming over a symlink would replace the link.
    let real = fs::canonicalize(path).map_err(io_err(path))?;
    let text = fs::read_to_string(&real).map_err(io_err(&real))?;
    let (out, changed) = update_text(&text, &path.display().to_string(), live, note)?;
    if changed.is_empty() {
        return Ok(SaveReport { path: path.to_path_buf(), backup: None, changed });
    }
    let backup = replace_atomically(&real, &out, true)?;
    Ok(SaveReport { path: path.to_path_buf(), backup, changed })
}

/// Saves `controller` as axis `axis`'s controller into the file at `path`, every other axis
/// as `machine` has it (`servotty tune --save`): [`save_controllers`] on the machine with that
/// one controller replaced.
///
/// # Errors
/// As [`save_controllers`]; [`SaveError::NoAxis`] when `machine` has no such axis.
pub fn save_axis_controller(
    path: &Path,
    machine: &MachineConfig,
    axis: &str,
    controller: &crate::config::ControllerConfig,
    note: &str,
) -> Result<SaveReport, SaveError> {
    let mut whole = machine.clone();
    let a = whole
        .axes
        .iter_mut()
        .find(|a| a.name == axis)
        .ok_or_else(|| SaveError::NoAxis { path: path.to_path_buf(), axis: axis.to_owned() })?;
    a.controller = controller.clone();
    save_controllers(path, &whole, note)
}

/// Writes a new configuration file at `path` from `base` (the text the machine was loaded
/// from, e.g. the built-in demo) with the live controller parameters. Refuses to overwrite.
///
/// # Errors
/// [`SaveError::Exists`] when `path` exists, else as [`save_controllers`].
pub fn write_copy(
    path: &Path,
    base: &str,
    live: &MachineConfig,
    note: &str,
) -> Result<SaveReport, SaveError> {
    if path.exists() {
        return Err(SaveError::Exists(path.to_path_buf()));
    }
    let (out, changed) = update_text(base, &path.display().to_string(), live, note)?;
    replace_atomically(path, &out, false)?;
    Ok(SaveReport { path: path.to_path_buf(), backup: None, changed })
}

/// Temp file beside `path` → fsync → (copy old to `.bak`) → rename → fsync the directory.
/// Returns the backup's path when one was made.
pub fn replace_atomically(
    path: &Path,
    text: &str,
    keep_backup: bool,
) -> Result<Option<PathBuf>, SaveError> {
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path
        .file_name()
        .ok_or_else(|| SaveError::Refused(format!("{} is not a file name", path.display())))?
        .to_string_lossy()
        .into_owned();
    let tmp = dir.join(format!(".{name}.servotty-{}.tmp", std::process::id()));
    let result = (|| {
        let _ = fs::remove_file(&tmp);
        let mut f =
            OpenOptions::new().write(true).create_new(true).open(&tmp).map_err(io_err(&tmp))?;
        f.write_all(text.as_bytes()).map_err(io_err(&tmp))?;
        if let Ok(meta) = fs::metadata(path) {
            // Keep the original's permissions (a config may be deliberately read-only to others).
            f.set_permissions(meta.permissions()).map_err(io_err(&tmp))?;
        }
        f.sync_all().map_err(io_err(&tmp))?;
        drop(f);
        let backup = if keep_backup && path.exists() {
            let bak = dir.join(format!("{name}.bak"));
            fs::copy(path, &bak).map_err(io_err(&bak))?;
            File::open(&bak).and_then(|b| b.sync_all()).map_err(io_err(&bak))?;
            Some(bak)
        } else {
            None
        };
        fs::rename(&tmp, path).map_err(io_err(path))?;
        // Make the rename itself durable; not every platform can fsync a directory.
        if let Ok(d) = File::open(&dir) {
            let _ = d.sync_all();
        }
        Ok(backup)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result
}
