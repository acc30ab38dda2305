//! The machine core: starts one task per axis, hands out cloneable handles, owns the
//! stop-all signal and shutdown.
//!
//! Stop-all is a `watch` every axis task selects on directly, so it never queues behind
//! operator commands and costs one atomic read per frame to check.

use std::sync::Arc;
use std::time::Duration;

use tokio::sync::{broadcast, mpsc, watch};
use tokio::task::JoinSet;

use crate::config::MachineConfig;
use crate::engine::axis::{AxisCommand, AxisHandle, AxisTask, AxisWiring, StopAll};
use crate::engine::events::{Event, EventKind, EVENT_BUFFER};
use crate::engine::recorder::RecorderPaths;
use crate::engine::snapshot::{AxisSnapshot, AxisState};
use crate::link::Link;
use crate::sim::board::SimBoardHandle;

/// Commands waiting per axis before senders wait; operator input is far slower than this.
const COMMAND_QUEUE: usize = 32;

/// `--port AXIS=PATH`: put that axis on a serial device instead of its configured transport.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PortOverride {
    /// Axis name.
    pub axis: String,
    /// Device path.
    pub device: String,
}

impl std::str::FromStr for PortOverride {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.split_once('=') {
            Some((a, p)) if !a.is_empty() && !p.is_empty() => {
                Ok(Self { axis: a.to_owned(), device: p.to_owned() })
            }
            _ => Err(format!("expected AXIS=PATH (e.g. x=/dev/ttyACM0), found {s:?}")),
        }
    }
}

/// Why the machine could not start.
#[derive(Debug, thiserror::Error)]
pub enum StartError {
    /// A `--port` names an axis the configuration does not have.
    #[error("--port {axis}=…: no axis called {axis:?} (axes: {known})")]
    UnknownAxis {
        /// The name given.
        axis: String,
        /// The configured names.
        known: String,
    },
}

/// Longest shutdown waits for pending trip captures before it turns the motors off, s.
const FLUSH_LIMIT: Duration = Duration::from_secs(2);

/// A running machine. Dropping it without [`Machine::shutdown`] aborts the tasks; the boards'
/// watchdogs then turn the motors off.
pub struct Machine {
    handle: MachineHandle,
    shutdown: watch::Sender<bool>,
    /// Asks the recorder to finish the captures already due (None without a recorder).
    flush: Option<mpsc::Sender<crate::engine::recorder::Flush>>,
    tasks: JoinSet<TaskEnd>,
    /// Names of the axis tasks still running (in configuration order).
    running: Vec<String>,
    sims: Vec<(String, SimBoardHandle)>,
}

/// How one of the machine's tasks ended.
enum TaskEnd {
    /// An axis task; `failure` says why it ended before shutdown asked it to.
    Axis { name: String, failure: Option<String> },
    /// The recorder.
    Recorder,
}

/// What [`Machine::shutdown_within`] found.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ShutdownReport {
    /// Axes whose task did not end within the limit (their boards' watchdogs take over).
    pub not_stopped: Vec<String>,
    /// Axes whose task had ended on its own (returned or panicked), with the reason.
    pub ended_early: Vec<(String, String)>,
    /// The engine itself failed (its thread panicked or ended before reporting).
    pub engine: Option<String>,
}

impl ShutdownReport {
    /// A report for an engine that could not report for itself.
    pub fn engine_failed(why: &str) -> Self {
        Self { engine: Some(why.to_owned()), ..Self::default() }
    }

    /// True when every axis task stopped when asked and none had ended before.
    pub fn is_clean(&self) -> bool {
        self.not_stopped.is_empty() && self.ended_early.is_empty() && self.engine.is_none()
    }
}

impl std::fmt::Display for ShutdownReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let mut parts = Vec::new();
        if let Some(e) = &self.engine {
            parts.push(format!("{e}; the boards' watchdogs turn the motors off"));
        }
        if !self.not_stopped.is_empty() {
            parts.push(format!(
                "axis {} did not stop in time; its board's watchdog turns the motor off",
                self.not_stopped.join(", ")
            ));
        }
        for (axis, why) in &self.ended_early {
            parts.push(format!("axis {axis} had stopped working: {why}"));
        }
        if parts.is_empty() {
            f.write_str("every axis stopped")
        } else {
            f.write_str(&parts.join("; "))
        }
    }
}

/// A cloneable way to command the whole machine.
#[derive(Debug, Clone)]
pub struct MachineHandle {
    axes: Arc<[AxisHandle]>,
    stop: Arc<watch::Sender<StopAll>>,
    config: Arc<MachineConfig>,
    events: broadcast::Sender<Event>,
    recorder: Option<Arc<RecorderPaths>>,
    /// The in-process simulated boards, by axis name, for fault drills: their handles take
    /// a short lock the board reads at its tick, so nothing here waits on an axis loop.
    sims: Arc<[(String, SimBoardHandle)]>,
}

/// Why homing did not finish.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{axis}: {reason}")]
pub struct HomeError {
    /// The axis that failed.
    pub axis: String,
    /// Why.
    pub reason: String,
}

impl Machine {
    /// Starts every axis task (and the in-process simulated boards). Links come up in the
    /// background; use [`MachineHandle::wait_linked`] to wait for them.
    ///
    /// # Errors
    /// [`StartError`] for a bad port override.
    pub fn start(cfg: &MachineConfig, ports: &[PortOverride]) -> Result<Self, StartError> {
        Self::start_with(cfg, ports, None)
    }

    /// As [`Machine::start`], with a recorder writing the event log and trip captures.
    ///
    /// # Errors
    /// [`StartError`] for a bad port override.
    pub fn start_with(
        cfg: &MachineConfig,
        ports: &[PortOverride],
        recorder: Option<RecorderPaths>,
    ) -> Result<Self, StartError> {
        for p in ports {
            if cfg.axis(&p.axis).is_none() {
                return Err(StartError::UnknownAxis {
                    axis: p.axis.clone(),
                    known: cfg.axes.iter().map(|a| a.name.as_str()).collect::<Vec<_>>().join(", "),
                });
            }
        }
        let mut sims = Vec::new();
        let mut links = Vec::new();
        for (i, axis) in cfg.axes.iter().enumerate() {
            let device = ports.iter().find(|p| p.axis == axis.name).map(|p| p.device.as_str());
            let built = crate::link::build(axis, i, device);
            if let Some(sim) = built.sim {
                sims.push((axis.name.clone(), sim));
            }
            links.push(built.link);
        }
        let mut m = Self::start_links(cfg, links, recorder);
        m.handle.sims = sims.clone().into();
        m.sims = sims;
        Ok(m)
    }

    /// Starts the machine on links made elsewhere, one per configured axis in order (tests
    /// hand in boards that run on another thread). Must run inside a tokio runtime.
    ///
    /// # Panics
    /// When `links` does not hold exactly one link per configured axis.
    pub fn start_links(
        cfg: &MachineConfig,
        links: Vec<Arc<dyn Link>>,
        recorder: Option<RecorderPaths>,
    ) -> Self {
        assert_eq!(links.len(), cfg.axes.len(), "one link per configured axis");
        let category = cfg.machine.stop_category;
        let (stop_tx, _) = watch::channel(StopAll { latched: false, category });
        let (shutdown_tx, _) = watch::channel(false);
        let (events_tx, events_rx) = broadcast::channel(EVENT_BUFFER);
        let mut tasks = JoinSet::new();
        let mut handles = Vec::new();
        for (axis, link) in cfg.axes.iter().zip(links) {
            let (cmd_tx, cmd_rx) = mpsc::channel(COMMAND_QUEUE);
            let (snap_tx, snap_rx) =
                watch::channel(AxisSnapshot::offline(&axis.name, &axis.scale.unit));
            let wiring = AxisWiring {
                commands: cmd_rx,
                stop_all: stop_tx.subscribe(),
                shutdown: shutdown_tx.subscribe(),
                snapshots: snap_tx.clone(),
                events: events_tx.clone(),
                history_seconds: cfg.machine.capture_seconds,
            };
            let run = AxisTask::new(axis.clone(), link, wiring).run();
            tasks.spawn(guarded(
                axis.name.clone(),
                run,
                snap_tx,
                events_tx.clone(),
                shutdown_tx.subscribe(),
            ));
            handles.push(AxisHandle::new(&axis.name, cmd_tx, snap_rx));
        }
        let axes: Arc<[AxisHandle]> = handles.into();
        let config = Arc::new(cfg.clone());
        let mut flush = None;
        if let Some(paths) = &recorder {
            let (flush_tx, flush_rx) = mpsc::channel(1);
            flush = Some(flush_tx);
            let rec = crate::engine::recorder::run(
                paths.clone(),
                events_rx,
                events_tx.clone(),
                axes.clone(),
                config.clone(),
                shutdown_tx.subscribe(),
                flush_rx,
            );
            tasks.spawn(async move {
                rec.await;
                TaskEnd::Recorder
            });
        } else {
            drop(events_rx);
        }
        Self {
            handle: MachineHandle {
                axes,
                stop: Arc::new(stop_tx),
                config,
                events: events_tx,
                recorder: recorder.map(Arc::new),
                sims: Arc::new([]),
            },
            shutdown: shutdown_tx,
            flush,
            tasks,
            running: cfg.axes.iter().map(|a| a.name.clone()).collect(),
            sims: Vec::new(),
        }
    }

    /// A handle for commands and snapshots.
    pub fn handle(&self) -> MachineHandle {
        self.handle.clone()
    }

    /// The simulated board behind an axis, if it is simulated in process.
    pub fn sim(&self, axis: &str) -> Option<SimBoardHandle> {
        self.sims.iter().find(|(a, _)| a == axis).map(|(_, h)| h.clone())
    }

    /// Turns every motor off, ends every axis task and waits for them.
    pub async fn shutdown(self) -> ShutdownReport {
        self.shutdown_within(Duration::MAX).await
    }

    /// Turns every motor off and ends every axis task, waiting at most `limit`; tasks still
    /// running then are aborted (their boards' watchdogs turn the motors off) and named in
    /// the report, as are axes whose task had ended on its own.
    pub async fn shutdown_within(mut self, limit: Duration) -> ShutdownReport {
        let deadline = tokio::time::Instant::now().checked_add(limit);
        // Every trip already reported gets its capture while the axes still answer for their
        // history; a headless command that ends right after a trip would otherwise leave an
        // empty file. Bounded: shutdown must still turn the motors off.
        if let Some(flush) = self.flush.take() {
            // Waiting must not leave other axes driving: stop-all first, so every moving axis
            // begins its configured stop while the captures are finished.
            self.handle.stop_all();
            let (done_tx, done_rx) = tokio::sync::oneshot::channel();
            let wait = async {
                if flush.send(done_tx).await.is_ok() {
                    let _ = done_rx.await;
                }
            };
            let bound = limit.min(FLUSH_LIMIT);
            if tokio::time::timeout(bound, wait).await.is_err() {
                tracing::warn!("trip captures not finished before shutdown");
            }
        }
        let _ = self.shutdown.send(true);
        let mut report = ShutdownReport::default();
        loop {
            let next = match deadline {
                Some(d) => match tokio::time::timeout_at(d, self.tasks.join_next()).await {
                    Ok(n) => n,
                    Err(_) => break,
                },
                None => self.tasks.join_next().await,
            };
            match next {
                None => break,
                Some(Ok(TaskEnd::Axis { name, failure })) => {
                    self.running.retain(|n| *n != name);
                    if let Some(why) = failure {
                        report.ended_early.push((name, why));
                    }
                }
                Some(Ok(TaskEnd::Recorder)) => {}
                Some(Err(e)) => tracing::error!(error = %e, "a machine task failed"),
            }
        }
        report.not_stopped = std::mem::take(&mut self.running);
        self.tasks.abort_all();
        report
    }
}

/// Runs one axis task; if it ends before shutdown (it returned, or it panicked), publishes
/// the axis as offline with the reason and sends an event, so the machine can report it.
async fn guarded(
    name: String,
    run: impl std::future::Future<Output = ()>,
    snapshots: watch::Sender<AxisSnapshot>,
    events: broadcast::Sender<Event>,
    shutdown: watch::Receiver<bool>,
) -> TaskEnd {
    use futures::FutureExt;
    let outcome = std::panic::AssertUnwindSafe(run).catch_unwind().await;
    let reason = match outcome {
        Ok(()) if *shutdown.borrow() => return TaskEnd::Axis { name, failure: None },
        Ok(()) => "the axis task ended by itself".to_owned(),
        Err(panic) => {
            let what = panic
                .downcast_ref::<&str>()
                .map(|s| (*s).to_owned())
                .or_else(|| panic.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "no message".to_owned());
            format!("the axis task panicked ({what})")
        }
    };
    tracing::error!(axis = %name, %reason, "axis task ended");
    let text: Arc<str> = Arc::from(format!("{reason}; restart servotty").as_str());
    snapshots.send_modify(|s| {
        s.state = AxisState::Offline;
        s.link_error = Some(text.clone());
        s.ended = Some(text.clone());
    });
    let _ = events.send(Event::now(
        Some(Arc::from(name.as_str())),
        None,
        EventKind::AxisEnded { reason: reason.clone() },
    ));
    TaskEnd::Axis { name, failure: Some(reason) }
}

impl MachineHandle {
    /// Every axis, in configuration order.
    pub fn axes(&self) -> &[AxisHandle] {
        &self.axes
    }

    /// The axis called `name`.
    pub fn axis(&self, name: &str) -> Option<&AxisHandle> {
        self.axes.iter().find(|a| a.name() == name)
    }

    /// The configuration the machine was started with.
    pub fn config(&self) -> &MachineConfig {
        &self.config
    }

    /// The in-process simulated board behind `axis`, for fault drills (None for a real
    /// board, or a simulated one served elsewhere).
    pub fn sim_board(&self, axis: &str) -> Option<SimBoardHandle> {
        self.sims.iter().find(|(a, _)| a == axis).map(|(_, h)| h.clone())
    }

    /// Latches stop-all on every axis (category from the configuration). Never waits.
    pub fn stop_all(&self) {
        self.stop.send_modify(|s| s.latched = true);
    }

    /// Releases stop-all. No axis starts moving because of it.
    pub fn release_stop_all(&self) {
        self.stop.send_modify(|s| s.latched = false);
    }

    /// Subscribes to machine events (state changes, trips, operator actions, links).
    pub fn events(&self) -> broadcast::Receiver<Event> {
        self.events.subscribe()
    }

    /// Where the event log and captures go, if recording.
    pub fn recorder_paths(&self) -> Option<&RecorderPaths> {
        self.recorder.as_deref()
    }

    /// Adds a machine-wide event (an interruption, a recorder failure) to the event stream.
    pub fn emit(&self, kind: EventKind) {
        let _ = self.events.send(Event::now(None, None, kind));
    }

    /// Adds a machine-wide line to the event stream (e.g. from the cockpit).
    pub fn note(&self, text: impl Into<String>) {
        let _ = self.events.send(Event::now(None, None, EventKind::Notice { text: text.into() }));
    }

    /// Homes `only` these axes (all when None) in the configured order: groups in turn, the
    /// axes of a group together. Disabled axes are enabled first. Stops at the first failure.
    ///
    /// # Errors
    /// [`HomeError`] naming the axis that failed and why.
    pub async fn home(&self, only: Option<&[String]>) -> Result<(), HomeError> {
        if let Some(axis) = self.wait_linked(Duration::from_secs(3)).await.into_iter().next() {
            let reason = self.offline_reason(&axis);
            return Err(HomeError { axis, reason });
        }
        for group in self.config.homing_groups() {
            let group: Vec<&String> =
                group.iter().filter(|a| only.is_none_or(|o| o.contains(a))).collect();
            for name in &group {
                let a = self.axis(name).ok_or_else(|| HomeError {
                    axis: (*name).clone(),
                    reason: "no such axis".to_owned(),
                })?;
                // The axis is named once, by the HomeError.
                let err = |e: crate::engine::CommandError| HomeError {
                    axis: (*name).clone(),
                    reason: match e {
                        crate::engine::CommandError::Refused { reason, .. } => reason.to_string(),
                        e @ crate::engine::CommandError::Gone(_) => e.to_string(),
                    },
                };
                if a.snapshot().state == AxisState::Disabled {
                    a.send(AxisCommand::Enable).await.map_err(err)?;
                }
                a.send(AxisCommand::Home).await.map_err(err)?;
            }
            for name in &group {
                let Some(a) = self.axis(name) else { continue };
                let bound = self.config.axis(name).map_or(120.0, |c| c.homing.timeout_s) + 5.0;
                let timed_out = tokio::time::timeout(
                    Duration::from_secs_f64(bound),
                    a.wait_until(|s| s.state != AxisState::Homing),
                )
                .await
                .is_err();
                let s = a.snapshot();
                if timed_out || !s.homed || s.state != AxisState::Steady {
                    let reason = match (&s.trip, timed_out) {
                        (Some(t), _) => format!("{}: {}", t.cause, t.detail),
                        (None, true) => "homing did not finish in time".to_owned(),
                        (None, false) => format!("homing interrupted ({})", s.state),
                    };
                    return Err(HomeError { axis: (*name).clone(), reason });
                }
            }
        }
        Ok(())
    }

    /// Whether stop-all is latched.
    pub fn stop_all_latched(&self) -> bool {
        self.stop.borrow().latched
    }

    /// The stop category stop-all uses.
    pub fn stop_category(&self) -> u8 {
        self.stop.borrow().category
    }

    /// Every axis's latest snapshot.
    pub fn snapshots(&self) -> Vec<AxisSnapshot> {
        self.axes.iter().map(AxisHandle::snapshot).collect()
    }

    /// Axes whose task has ended while the machine runs, with the reason. Such an axis stays
    /// offline; a front end should say so and end with a failure.
    pub fn ended(&self) -> Vec<(String, String)> {
        self.axes
            .iter()
            .filter_map(|a| a.snapshot().ended.map(|why| (a.name().to_owned(), why.to_string())))
            .collect()
    }

    /// Why an axis has no link, in words: the open error if there was one.
    pub fn offline_reason(&self, axis: &str) -> String {
        match self.axis(axis).and_then(|a| a.snapshot().link_error) {
            Some(e) => format!("no link to the board: {e}"),
            None => "no link to the board (it did not answer)".to_owned(),
        }
    }

    /// Waits until every axis has linked (left `offline`), or the timeout passes.
    /// Returns the axes still offline.
    pub async fn wait_linked(&self, timeout: Duration) -> Vec<String> {
        let deadline = tokio::time::Instant::now() + timeout;
        for a in self.axes.iter() {
            let _ =
                tokio::time::timeout_at(deadline, a.wait_until(|s| s.state != AxisState::Offline))
                    .await;
        }
        self.axes
            .iter()
            .filter(|a| a.snapshot().state == AxisState::Offline)
            .map(|a| a.name().to_owned())
            .collect()
    }
}
