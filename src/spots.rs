//! Named positions ("spots"): the `[spots]` table of the machine configuration, where each
//! name gives a position for some or all axes, e.g.
//!
//! ```toml
//! [spots]
//! tray3 = { x = 420.0, y = 150.0 }   # over tray 3, lift untouched
//! park = { x = 5.0, y = 5.0, z = 0.0 }
//! ```
//!
//! This module owns the table's type, its checks (names, axes, soft limits — run with the
//! configuration's validation), turning `@name` into per-axis targets, and storing a position
//! under a name in the configuration file: the file is edited as a document (`toml_edit`) so
//! comments and layout stay, the result must load before it replaces the file, and the
//! replacement is atomic with a `.bak` kept (the configuration writer of
//! [`crate::config_write`]).

use std::collections::BTreeMap;
use std::fs;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use toml_edit::{DocumentMut, InlineTable, Item, Table, Value};

use crate::cli::Target;
use crate::config::{Invalid, MachineConfig};
use crate::config_write::{replace_atomically, SaveError};

/// One spot: axis name → position in that axis's units.
pub type Spot = BTreeMap<String, f64>;

/// The `[spots]` table: name → spot, kept in name order.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Spots(pub BTreeMap<String, Spot>);

impl Spots {
    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// The spot called `name` (without the `@`).
    pub fn get(&self, name: &str) -> Option<&Spot> {
        self.0.get(name)
    }

    /// Names in order.
    pub fn names(&self) -> impl Iterator<Item = &str> {
        self.0.keys().map(String::as_str)
    }
}

/// Whether `name` may name a spot: letters, digits, `_` and `-`.
pub fn valid_name(name: &str) -> bool {
    !name.is_empty() && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
}

/// The `[spots]` checks, for [`MachineConfig::validate`]: names, known axes, finite values
/// inside each axis's soft limits.
pub fn check(cfg: &MachineConfig) -> Vec<Invalid> {
    let mut out = Vec::new();
    for (name, spot) in &cfg.spots.0 {
        let path = |rest: &[&str]| {
            let mut p = vec!["spots".to_owned(), name.clone()];
            p.extend(rest.iter().map(|s| (*s).to_owned()));
            p
        };
        if !valid_name(name) {
            let message =
                format!("expected letters, digits, _ or - in a spot name, found {name:?}");
            out.push(Invalid { path: path(&[]), message });
        }
        if spot.is_empty() {
            let message = "a spot needs a position for at least one axis".to_owned();
            out.push(Invalid { path: path(&[]), message });
        }
        for (axis, &v) in spot {
            let Some(a) = cfg.axis(axis) else {
                let known: Vec<&str> = cfg.axes.iter().map(|a| a.name.as_str()).collect();
                let message = format!("no axis called {axis:?} (axes: {})", known.join(", "));
                out.push(Invalid { path: path(&[axis]), message });
                continue;
            };
            let (lo, hi) = (a.limits.soft_min, a.limits.soft_max);
            if !(v.is_finite() && (lo..=hi).contains(&v)) {
                let u = &a.scale.unit;
                let message = format!("{v} {u} is outside the soft limits {lo} … {hi} {u}");
                out.push(Invalid { path: path(&[axis]), message });
            }
        }
    }
    out
}

/// The targets of `@name` (the `@` optional), in configuration axis order.
///
/// # Errors
/// Text naming the spots there are when there is no such spot.
pub fn targets(cfg: &MachineConfig, name: &str) -> Result<Vec<Target>, String> {
    let name = name.strip_prefix('@').unwrap_or(name);
    let Some(spot) = cfg.spots.get(name) else {
        let known: Vec<&str> = cfg.spots.names().collect();
        return Err(if known.is_empty() {
            format!("no spot called {name:?}: the configuration has no [spots] table")
        } else {
            format!("no spot called {name:?} (spots: {})", known.join(", "))
        });
    };
    Ok(cfg
        .axes
        .iter()
        .filter_map(|a| {
            spot.get(&a.name).map(|&position| Target { axis: a.name.clone(), position })
        })
        .collect())
}

/// Why spot `name` cannot be gone to now, if it cannot: a value outside its axis's soft
/// limits (the live configuration may differ from the file's), or an axis that is not homed
/// (its position is not trusted yet). `homed` answers for an axis name.
pub fn unreachable(
    cfg: &MachineConfig,
    name: &str,
    homed: impl Fn(&str) -> bool,
) -> Option<String> {
    let spot = cfg.spots.get(name.strip_prefix('@').unwrap_or(name))?;
    let mut outside = Vec::new();
    let mut unhomed = Vec::new();
    for (axis, &v) in spot {
        match cfg.axis(axis) {
            Some(a) if (a.limits.soft_min..=a.limits.soft_max).contains(&v) => {}
            _ => outside.push(axis.as_str()),
        }
        if !homed(axis) {
            unhomed.push(axis.as_str());
        }
    }
    if !outside.is_empty() {
        Some(format!("outside the soft limits: {}", outside.join(", ")))
    } else if !unhomed.is_empty() {
        Some(format!("not homed: {}", unhomed.join(", ")))
    } else {
        None
    }
}

/// `text` (a configuration file) with `name = { axis = value, … }` set in `[spots]`,
/// replacing a spot of that name, adding the table if there is none. Values are rounded to
/// the axis's encoder resolution. The result must load (soft limits included).
///
/// # Errors
/// [`SaveError::Refused`] for a bad name, a file that does not parse, or a result that would
/// not load.
pub fn store_text(
    text: &str,
    source_name: &str,
    name: &str,
    position: &[(String, f64)],
) -> Result<String, SaveError> {
    if !valid_name(name) {
        return Err(SaveError::Refused(format!(
            "expected letters, digits, _ or - in a spot name, found {name:?}"
        )));
    }
    let cfg = MachineConfig::from_toml_str(text, source_name)?;
    let mut doc: DocumentMut =
        text.parse().map_err(|e: toml_edit::TomlError| SaveError::Refused(e.to_string()))?;
    let mut spot = InlineTable::new();
    for (axis, v) in position {
        let counts = cfg.axis(axis).map_or(1000.0, |a| a.scale.counts_per_unit.abs());
        // Enough decimals to resolve one count, no more: 1/counts_per_unit.
        let decimals = counts.log10().ceil().clamp(0.0, 9.0) as i32;
        let k = 10f64.powi(decimals);
        spot.insert(axis, Value::from((v * k).round() / k));
    }
    if !doc.contains_key("spots") {
        let mut t = Table::new();
        t.decor_mut().set_prefix("\n# Named positions: `servotty move --to @name`.\n");
        doc.insert("spots", Item::Table(t));
    }
    let table = doc
        .get_mut("spots")
        .and_then(Item::as_table_like_mut)
        .ok_or_else(|| SaveError::Refused("`spots` is not a table".to_owned()))?;
    match table.get_mut(name).and_then(Item::as_value_mut) {
        Some(old) => {
            let decor = old.decor().clone();
            *old = Value::InlineTable(spot);
            *old.decor_mut() = decor;
        }
        None => {
            table.insert(name, Item::Value(Value::InlineTable(spot)));
        }
    }
    let out = doc.to_string();
    MachineConfig::from_toml_str(&out, source_name)
        .map_err(|e| SaveError::Refused(e.to_string()))?;
    Ok(out)
}

/// Stores `position` under `name` in the configuration file at `path` (see
/// [`store_text`]), keeping the previous file as `<name>.bak`. Returns the backup's path.
/// Blocking file I/O with fsync: run it off the control and key paths.
///
/// # Errors
/// [`SaveError`]; the file is unchanged when it fails.
pub fn store(
    path: &Path,
    name: &str,
    position: &[(String, f64)],
) -> Result<Option<PathBuf>, SaveError> {
    let real = fs::canonicalize(path).map_err(|err| SaveError::Io { path: path.into(), err })?;
    let text =
        fs::read_to_string(&real).map_err(|err| SaveError::Io { path: real.clone(), err })?;
    let out = store_text(&text, &path.display().to_string(), name, position)?;
    replace_atomically(&real, &out, true)
}
