//! Runs the machine on its own thread, with its own current-thread runtime.
//!
//! The UI writes to the terminal with blocking writes; over a slow SSH link a frame can
//! block for a long time. Were the axis tasks on the UI's runtime, that would stall the
//! control loops until the boards' watchdogs cut the motors. On separate threads, the UI can
//! block as long as it likes: the two talk only through the engine's channels (watch for
//! snapshots, mpsc for commands), which work across runtimes.
//!
//! Dropping the [`EngineThread`] (also during a panic's unwind) shuts the machine down, which
//! turns every motor off, and joins the thread.

use std::sync::mpsc as std_mpsc;
use std::thread::JoinHandle;
use std::time::Duration;

use tokio::sync::oneshot;

use crate::config::MachineConfig;
use crate::engine::{Machine, MachineHandle, PortOverride};

/// Longest wait for the axis tasks to end at shutdown; their boards' watchdogs are the
/// backstop if a link hangs.
const SHUTDOWN_LIMIT: Duration = Duration::from_secs(3);

/// Why the machine did not start.
#[derive(Debug, thiserror::Error)]
pub enum EngineStartError {
    /// Bad `--port`.
    #[error(transparent)]
    Start(#[from] crate::engine::StartError),
    /// The OS refused a thread or runtime.
    #[error("cannot start the engine thread: {0}")]
    Os(String),
}

/// The machine, running on its own thread.
pub struct EngineThread {
    handle: MachineHandle,
    stop: Option<oneshot::Sender<()>>,
    thread: Option<JoinHandle<()>>,
}

impl EngineThread {
    /// Starts the machine and waits until its tasks are spawned (not until boards link).
    ///
    /// # Errors
    /// [`EngineStartError`].
    pub fn start(
        cfg: MachineConfig,
        ports: Vec<PortOverride>,
        recorder: Option<crate::engine::recorder::RecorderPaths>,
    ) -> Result<Self, EngineStartError> {
        let (ready_tx, ready_rx) = std_mpsc::channel();
        let (stop_tx, stop_rx) = oneshot::channel::<()>();
        let thread = std::thread::Builder::new()
            .name("servotty-engine".into())
            .spawn(move || {
                let rt = match crate::process::runtime() {
                    Ok(rt) => rt,
                    Err(e) => {
                        let _ = ready_tx.send(Err(EngineStartError::Os(e.to_string())));
                        return;
                    }
                };
                rt.block_on(async move {
                    let machine = match Machine::start_with(&cfg, &ports, recorder) {
                        Ok(m) => m,
                        Err(e) => {
                            let _ = ready_tx.send(Err(e.into()));
                            return;
                        }
                    };
                    let _ = ready_tx.send(Ok(machine.handle()));
                    // A dropped sender (the UI thread unwinding) also means "stop".
                    let _ = stop_rx.await;
                    if tokio::time::timeout(SHUTDOWN_LIMIT, machine.shutdown()).await.is_err() {
                        tracing::warn!(
                            "axis tasks did not end in time; boards' watchdogs take over"
                        );
                    }
                });
            })
            .map_err(|e| EngineStartError::Os(e.to_string()))?;
        match ready_rx.recv() {
            Ok(Ok(handle)) => Ok(Self { handle, stop: Some(stop_tx), thread: Some(thread) }),
            Ok(Err(e)) => {
                let _ = thread.join();
                Err(e)
            }
            Err(_) => {
                let _ = thread.join();
                Err(EngineStartError::Os("it stopped while starting (message above)".into()))
            }
        }
    }

    /// A handle for commands and snapshots.
    pub fn handle(&self) -> &MachineHandle {
        &self.handle
    }

    /// Turns every motor off, ends the axis tasks and joins the thread.
    pub fn shutdown(mut self) {
        self.finish();
    }

    fn finish(&mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        if let Some(t) = self.thread.take() {
            if t.join().is_err() {
                eprintln!("servotty: the engine thread panicked while shutting down");
            }
        }
    }
}

impl Drop for EngineThread {
    fn drop(&mut self) {
        self.finish();
    }
}
