//! How a command fails: a typed error per kind of failure. The binary prints it once (and,
//! for `--json`, a JSON object too) and turns it into the exit code; commands never print
//! their own errors or pick codes.

use crate::config::ConfigError;
use crate::engine::machine::HomeError;
use crate::engine::{CommandError, StartError};
use crate::process::{EXIT_FAILED, EXIT_OK, EXIT_USAGE};

/// Why a command failed.
#[derive(Debug, thiserror::Error)]
pub enum Failure {
    /// Bad arguments.
    #[error("{0}")]
    Usage(String),
    /// The configuration could not be used.
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// The machine could not start (a `--port` for an axis it lacks).
    #[error(transparent)]
    Start(#[from] StartError),
    /// An axis refused a command.
    #[error(transparent)]
    Refused(#[from] CommandError),
    /// Homing stopped on an axis.
    #[error("homing failed: {0}")]
    Homing(#[from] HomeError),
    /// The machine did not do it (a link down, a trip, the OS refusing resources).
    #[error("{0}")]
    Machine(String),
    /// Writing the output failed.
    #[error("cannot write the output: {0}")]
    Output(#[from] std::io::Error),
    /// A signal ended the command; the motors were turned off.
    #[error("interrupted by {}; motors off", .0.name())]
    Interrupted(crate::signals::Interrupt),
}

impl Failure {
    /// The exit code: 2 for what the operator typed or configured, 1 for what the machine
    /// did not do, 0 for a closed output pipe (`servotty man | head` is not a failure).
    pub fn exit_code(&self) -> u8 {
        match self {
            Self::Usage(_) | Self::Config(_) | Self::Start(_) => EXIT_USAGE,
            Self::Output(e) if e.kind() == std::io::ErrorKind::BrokenPipe => EXIT_OK,
            Self::Refused(_) | Self::Homing(_) | Self::Machine(_) | Self::Output(_) => EXIT_FAILED,
            Self::Interrupted(sig) => sig.exit_code(),
        }
    }

    /// True when the reader went away: nothing to print, nobody to print it to.
    pub fn is_quiet(&self) -> bool {
        matches!(self, Self::Output(e) if e.kind() == std::io::ErrorKind::BrokenPipe)
    }
}

/// Writes `text` to stdout and flushes, so a closed pipe is an error to handle, not a panic.
///
/// # Errors
/// [`Failure::Output`].
pub fn emit(text: &str) -> Result<(), Failure> {
    use std::io::Write as _;
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

/// Writes `value` as one line of JSON to stdout.
///
/// # Errors
/// [`Failure::Output`].
pub fn emit_json(value: &impl serde::Serialize) -> Result<(), Failure> {
    let line = serde_json::to_string(value).map_err(|e| Failure::Machine(e.to_string()))?;
    emit(&format!("{line}\n"))
}
