//! The engine's own thread: every front end (cockpit, `move`, `home`, `tune`, `linktest`)
//! runs the machine here, on a current-thread runtime that holds nothing but the axis tasks,
//! the recorder's bookkeeping and (for simulated axes) the in-process boards.
//!
//! Why a thread of its own: the front ends do slow things — blocking terminal writes over a
//! slow SSH link, commissioning analysis, report files. Were the axis tasks on the front
//! end's runtime, any of those would hold up every control loop until the boards' watchdogs
//! cut the motors. Across threads the two sides talk only through the engine's channels
//! (watch for snapshots, mpsc for commands, broadcast for events), which work across
//! runtimes, so the front end can block as long as it likes.
//!
//! The engine side itself hands slow work (capture formatting and writing, opening serial
//! devices) to tokio's blocking pool, which reports back by message (a join handle); the
//! pool's threads run at a lower priority ([`background_priority`]) so that they never take
//! a core from the axis loops.
//!
//! Dropping the [`EngineThread`] (also during a panic's unwind) shuts the machine down, which
//! turns every motor off, and joins the thread.

use std::sync::mpsc as std_mpsc;
use std::thread::JoinHandle;
use std::time::Duration;

use tokio::sync::oneshot;

use crate::config::MachineConfig;
use crate::engine::machine::ShutdownReport;
use crate::engine::recorder::RecorderPaths;
use crate::engine::{Machine, MachineHandle, PortOverride, StartError};

/// Longest wait for the axis tasks to end at shutdown; their boards' watchdogs are the
/// backstop if a link hangs.
pub const SHUTDOWN_LIMIT: Duration = Duration::from_secs(3);
/// How long the front end waits for the engine thread's shutdown report: the engine's own
/// limit plus room for the runtime to wind down.
const FINISH_LIMIT: Duration = Duration::from_secs(SHUTDOWN_LIMIT.as_secs() + 2);

/// Nice value of blocking-pool threads (0 is normal, 19 the lowest priority). Raising one's
/// own nice value needs no privilege; lowering it again would.
const BACKGROUND_NICE: i32 = 10;

/// Lowers the calling thread's scheduling priority: for blocking-pool threads, so that slow
/// work (capture formatting, analysis, report files) yields the core to the axis loops
/// whenever both want it. On Linux the nice value is per thread. Failure is harmless: the
/// work then runs at normal priority.
pub fn background_priority() {
    #[cfg(target_os = "linux")]
    {
        let _ =
            rustix::process::setpriority_process(Some(rustix::thread::gettid()), BACKGROUND_NICE);
    }
}

/// Why the machine did not start.
#[derive(Debug, thiserror::Error)]
pub enum EngineStartError {
    /// Bad `--port`.
    #[error(transparent)]
    Start(#[from] StartError),
    /// The OS refused a thread or runtime.
    #[error("cannot start the engine thread: {0}")]
    Os(String),
}

/// The machine, running on its own thread.
pub struct EngineThread {
    handle: MachineHandle,
    stop: Option<oneshot::Sender<()>>,
    report: Option<std_mpsc::Receiver<ShutdownReport>>,
    thread: Option<JoinHandle<()>>,
}

impl EngineThread {
    /// Starts the machine from its configuration and waits until its tasks are spawned (not
    /// until boards link).
    ///
    /// # Errors
    /// [`EngineStartError`].
    pub fn start(
        cfg: MachineConfig,
        ports: Vec<PortOverride>,
        recorder: Option<RecorderPaths>,
    ) -> Result<Self, EngineStartError> {
        Self::spawn(move || Machine::start_with(&cfg, &ports, recorder))
    }

    /// Starts a machine that `build` makes on the engine thread, inside its runtime (so the
    /// machine's tasks are spawned there). Tests use this to hand the engine links of their
    /// own.
    ///
    /// # Errors
    /// [`EngineStartError`].
    pub fn spawn<F>(build: F) -> Result<Self, EngineStartError>
    where
        F: FnOnce() -> Result<Machine, StartError> + Send + 'static,
    {
        let (ready_tx, ready_rx) = std_mpsc::channel();
        let (report_tx, report_rx) = std_mpsc::channel();
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
                    let machine = match build() {
                        Ok(m) => m,
                        Err(e) => {
                            let _ = ready_tx.send(Err(e.into()));
                            return;
                        }
                    };
                    let _ = ready_tx.send(Ok(machine.handle()));
                    // A dropped sender (the front end unwinding) also means "stop".
                    let _ = stop_rx.await;
                    let report = machine.shutdown_within(SHUTDOWN_LIMIT).await;
                    let _ = report_tx.send(report);
                });
            })
            .map_err(|e| EngineStartError::Os(e.to_string()))?;
        match ready_rx.recv() {
            Ok(Ok(handle)) => Ok(Self {
                handle,
                stop: Some(stop_tx),
                report: Some(report_rx),
                thread: Some(thread),
            }),
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

    /// Turns every motor off, ends the axis tasks (waiting at most [`SHUTDOWN_LIMIT`]) and
    /// joins the thread. The report names any axis that did not stop in time or whose task
    /// had ended on its own.
    pub fn shutdown(mut self) -> ShutdownReport {
        self.finish()
    }

    fn finish(&mut self) -> ShutdownReport {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        let mut report = match self.report.take().map(|r| r.recv_timeout(FINISH_LIMIT)) {
            Some(Ok(report)) => report,
            // A wedged engine must not wedge the front end too (it would ignore SIGTERM):
            // report it and leave the thread behind; each board's watchdog cuts its motor.
            Some(Err(std_mpsc::RecvTimeoutError::Timeout)) => {
                self.thread = None;
                return ShutdownReport::engine_failed(&format!(
                    "the engine thread did not stop within {} s; the boards' watchdogs turn \
                     their motors off",
                    FINISH_LIMIT.as_secs()
                ));
            }
            _ => ShutdownReport::engine_failed("the engine thread ended early"),
        };
        if let Some(t) = self.thread.take() {
            if t.join().is_err() {
                report = ShutdownReport::engine_failed("the engine thread panicked");
            }
        }
        report
    }
}

impl Drop for EngineThread {
    fn drop(&mut self) {
        if self.thread.is_some() {
            let report = self.finish();
            if !report.is_clean() {
                eprintln!("servotty: {report}");
            }
        }
    }
}
