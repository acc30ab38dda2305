//! Which controller parameters the detail screen offers (the table in
//! [`crate::control::params`] says which a mode uses), and checking a typed value.
//!
//! A typed value is checked exactly as a configuration file would be: the whole machine
//! configuration is rebuilt with the new value and [`MachineConfig::validate`] must accept
//! it, so the screen can never hold a gain the file loader would refuse.

use crate::config::MachineConfig;
use crate::control::params::Param;

/// Why a typed value was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EditError {
    /// Not a finite number.
    #[error("{0:?} is not a number")]
    NotANumber(String),
    /// The configuration check refused it.
    #[error("{key}: {message}")]
    Invalid {
        /// Key path under the axis, e.g. `controller.max_duty`.
        key: String,
        /// Why.
        message: String,
    },
    /// No such axis.
    #[error("no axis number {0}")]
    NoAxis(usize),
}

/// The configuration with `param` of axis `axis` set to the number in `text`, if the
/// configuration check accepts it.
///
/// # Errors
/// [`EditError`] when `text` is not a finite number or the result would not validate.
pub fn edit(
    cfg: &MachineConfig,
    axis: usize,
    param: Param,
    text: &str,
) -> Result<MachineConfig, EditError> {
    let t = text.trim();
    let v: f64 = t.parse().map_err(|_| EditError::NotANumber(t.to_owned()))?;
    if !v.is_finite() {
        return Err(EditError::NotANumber(t.to_owned()));
    }
    let before = cfg.validate();
    let mut new = cfg.clone();
    param.set(&mut new.axes.get_mut(axis).ok_or(EditError::NoAxis(axis))?.controller, v);
    // Only problems this edit introduced count; a file that loaded is already valid.
    match new.validate().into_iter().find(|e| !before.contains(e)) {
        None => Ok(new),
        Some(bad) => Err(EditError::Invalid {
            key: bad.path.get(2..).map_or_else(|| bad.path.join("."), |p| p.join(".")),
            message: bad.message,
        }),
    }
}
