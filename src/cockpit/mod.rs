//! The cockpit: a keyboard-driven terminal UI for every axis of a machine.
//!
//! # Layout
//! - [`action`]: what the operator asked for ([`action::Action`]) and what must happen
//!   outside the cockpit's state ([`action::Effect`]).
//! - [`keys`]: the keymap table (key → action per mode), which the help overlay prints.
//! - [`app`]: the cockpit's state; applies actions, samples snapshots, derives the event log.
//! - [`history`], [`event_log`]: ring buffers of sampled values; the event log.
//! - [`jog`]: jog settings and the one place jog/home keys meet the engine.
//! - [`lists`]: the list screen's state (which list, how its run stands).
//! - [`gain_edit`]: checking a typed gain (saving it is [`crate::config_write`]).
//! - [`ui`]: drawing, a pure function of the state.
//! - [`runner`]: the event loop; [`port`]: the trait the loop needs from a machine.
//! - [`terminal`], [`logging`]: terminal lifecycle and the log file (the machine runs on
//!   the engine's own thread, `engine::thread`).
//!
//! [`run`] is what `servotty` and `servotty cockpit` call.

pub mod action;
pub mod app;
pub mod drill;
pub mod event_log;
/// Number formatting now lives at the crate root, shared with the CLI; kept here by name.
pub use crate::format;
pub mod gain_edit;
pub mod history;
pub mod jog;
pub mod keys;
pub mod lists;
pub mod logging;
pub mod port;
pub mod runner;
pub mod terminal;
pub mod theme;
pub mod trip_view;
pub mod ui;

use std::io::IsTerminal as _;
use std::sync::Arc;

pub use app::App;
pub use theme::Theme;

use crate::config::MachineConfig;
use crate::engine::events::EventKind;
use crate::engine::{EngineStartError, EngineThread, MachineHandle, PortOverride};
use crate::process::{Failure, EXIT_OK};
use crate::signals::{Interrupt, Signals};

/// Opens the cockpit on the machine in `config` (the built-in demo when `None`), with the
/// axes in `ports` on serial devices; returns the process exit code, or the failure for the
/// one printer ([`crate::process::report`]) to print after the terminal is restored.
///
/// Configuration errors come back before the terminal is touched. Whatever happens after,
/// every motor is off when this returns.
///
/// # Errors
/// [`Failure::Config`], [`Failure::Usage`] without a terminal, [`Failure::Start`] for a
/// `--port` the machine lacks, [`Failure::Interrupted`] when a signal ended it,
/// [`Failure::Machine`] for what the OS or the terminal refused.
pub fn run(config: Option<&std::path::Path>, ports: &[PortOverride]) -> Result<u8, Failure> {
    let (cfg, source) = MachineConfig::load_or_demo(config)?;
    if !(std::io::stdin().is_terminal() && std::io::stdout().is_terminal()) {
        return Err(Failure::Usage(
            "the cockpit needs a terminal; for scripts use `servotty move` or \
             `servotty linktest`"
                .to_owned(),
        ));
    }
    // Read the local offset now, while the process has one thread (the OS-level lookup is
    // not safe once threads run); the event panel then shows local time of day.
    let day_origin = local_seconds_of_day();
    let log_file = logging::init();
    let paths = crate::engine::recorder::RecorderPaths::resolve(&cfg, &source);
    let engine = EngineThread::start(cfg.clone(), ports.to_vec(), Some(paths.clone())).map_err(
        |e| match e {
            EngineStartError::Start(s) => Failure::Start(s),
            e @ EngineStartError::Os(_) => Failure::Machine(e.to_string()),
        },
    )?;
    let rt = match crate::process::runtime() {
        Ok(rt) => rt,
        Err(e) => {
            engine.shutdown();
            return Err(Failure::Machine(format!("cannot start the runtime: {e}")));
        }
    };
    let mut app = App::new(cfg, source, Theme::from_env());
    app.log_file = log_file;
    app.log.set_day_origin(day_origin);
    app.set_recorder(paths);
    let port = Arc::new(engine.handle().clone());
    let caught = Arc::new(std::sync::OnceLock::new());
    let hangup = hangup(caught.clone(), engine.handle().clone());
    let result = rt.block_on(async {
        let mut session = terminal::Session::enter()
            .map_err(|e| format!("cannot take over the terminal: {e}"))?;
        let events = crossterm::event::EventStream::new();
        runner::run(&mut session.terminal, events, port, &mut app, hangup)
            .await
            .map_err(|e| e.to_string())
        // `session` drops here: the terminal is restored before anything is printed.
    });
    // Motors off and tasks joined before the process reports anything.
    let report = engine.shutdown();
    if let Some(sig) = caught.get() {
        return Err(Failure::Interrupted(*sig));
    }
    match result {
        Ok(()) if report.is_clean() => Ok(EXIT_OK),
        Ok(()) => Err(Failure::Machine(report.to_string())),
        Err(e) => {
            if !report.is_clean() {
                // The cockpit's own failure is the one reported; this is what shutdown found.
                eprintln!("servotty: {report}");
            }
            Err(Failure::Machine(e))
        }
    }
}

/// Seconds since local midnight now (UTC when the local offset cannot be known).
fn local_seconds_of_day() -> f64 {
    let now = time::OffsetDateTime::now_local().unwrap_or_else(|_| time::OffsetDateTime::now_utc());
    let t = now.time();
    f64::from(t.hour()) * 3600.0
        + f64::from(t.minute()) * 60.0
        + f64::from(t.second())
        + f64::from(t.nanosecond()) * 1e-9
}

/// Resolves when the process is asked to end from outside: SIGTERM, SIGHUP when an SSH
/// session drops, or SIGINT sent by `kill` (a Ctrl-C key in the cockpit is a key, not a
/// signal). The cockpit then quits as if confirmed, which turns every motor off; the signal is
/// kept in `caught` for the exit code.
async fn hangup(caught: Arc<std::sync::OnceLock<Interrupt>>, machine: MachineHandle) {
    match Signals::install() {
        Ok(mut signals) => {
            let sig = signals.recv().await;
            machine.emit(EventKind::Interrupted { signal: sig.name().to_owned() });
            let _ = caught.set(sig);
        }
        Err(_) => std::future::pending().await,
    }
}
