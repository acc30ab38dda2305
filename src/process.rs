//! What every front end (the cockpit, `sim`, the headless commands) shares about the
//! process: how a command fails ([`Failure`], a typed error per kind of failure), the one
//! place that prints a failure and picks the exit code ([`report`]), the exit codes, and the
//! runtime the engine runs on.
//!
//! Front ends never print their own errors or pick codes: they return a [`Failure`], and the
//! binary hands it to [`report`], so every failure reads `servotty: <message>` on stderr
//! (and is a JSON object on stdout for `--json`) and maps to the same code.

use crate::config::ConfigError;
use crate::engine::machine::HomeError;
use crate::engine::{CommandError, StartError};

/// Exit code: done.
pub const EXIT_OK: u8 = 0;
/// Exit code: the machine could not do it (trip, refusal, link failure).
pub const EXIT_FAILED: u8 = 1;
/// Exit code: bad arguments or configuration.
pub const EXIT_USAGE: u8 = 2;

/// A current-thread runtime: one core is plenty for the host loop of several axes (measured,
/// docs/performance.md) and it leaves the other core of a small computer to the UI and OS.
/// Its blocking pool's threads (slow work: captures, analysis, files) run at a lower
/// priority than the thread that drives the runtime, so on two cores they never take a core
/// from the axis loops.
///
/// # Errors
/// When the OS refuses the runtime's resources.
pub fn runtime() -> std::io::Result<tokio::runtime::Runtime> {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .on_thread_start(crate::engine::thread::background_priority)
        .build()
}

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
    /// A signal ended a command that drives no motor (`sim --pty`, after its report).
    #[error("ended by {}", .0.name())]
    Ended(crate::signals::Interrupt),
}

impl Failure {
    /// The exit code: 2 for what the operator typed or configured, 1 for what the machine
    /// did not do, 0 for a closed output pipe (`servotty man | head` is not a failure).
    pub fn exit_code(&self) -> u8 {
        match self {
            Self::Usage(_) | Self::Config(_) | Self::Start(_) => EXIT_USAGE,
            Self::Output(e) if e.kind() == std::io::ErrorKind::BrokenPipe => EXIT_OK,
            Self::Refused(_) | Self::Homing(_) | Self::Machine(_) | Self::Output(_) => EXIT_FAILED,
            Self::Interrupted(sig) | Self::Ended(sig) => sig.exit_code(),
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

/// The JSON object a `--json` command prints when it fails: the same `ok` and `error` keys
/// its success object has, plus the exit code.
pub fn failure_json(message: &str, exit_code: u8) -> serde_json::Value {
    serde_json::json!({ "ok": false, "error": message, "exit_code": exit_code })
}

/// Prints a failure once, on stderr (and as a JSON object on stdout when `json`), and
/// returns the exit code; a reader that closed the pipe gets nothing and no error code.
pub fn report(result: anyhow::Result<u8>, json: bool) -> u8 {
    let err = match result {
        Ok(code) => return code,
        Err(e) => e,
    };
    let failure = err.downcast_ref::<Failure>();
    let code = failure.map_or(EXIT_FAILED, Failure::exit_code);
    if failure.is_some_and(Failure::is_quiet) {
        return code;
    }
    let message = format!("{err:#}");
    eprintln!("servotty: {message}");
    if json {
        // If stdout is gone too there is nobody left to tell.
        let _ = emit_json(&failure_json(&message, code));
    }
    code
}
