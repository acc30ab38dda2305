//! The event loop: one `select!` over terminal input, the frame clock, notices from
//! background work and an outside stop request.
//!
//! Data flows one way. Each frame the loop samples every axis's latest snapshot (a
//! latest-value read that never waits) and draws. Keys become actions; actions change the
//! cockpit's state and yield effects. Stop-all goes to the machine at once, in the same loop
//! turn as its key. Axis commands go into one small queue per axis, served by a background
//! task that awaits the axis's answer and reports it as a notice, so the loop never waits
//! for an axis and commands to one axis stay in order. Saves run on the blocking pool.

use std::future::Future;
use std::sync::Arc;
use std::time::Duration;

use crossterm::event::{Event, KeyEventKind};
use futures::{Stream, StreamExt};
use ratatui::backend::Backend;
use ratatui::Terminal;
use tokio::sync::mpsc::{self, error::TrySendError};
use tokio::sync::watch;
use tokio::time::{Instant, MissedTickBehavior};

use crate::cockpit::action::Effect;
use crate::cockpit::app::{App, Notice};
use crate::cockpit::keys;
use crate::cockpit::port::MachinePort;
use crate::config_write as save;
use crate::engine::AxisCommand;
use crate::move_list::runner::ListControl;

/// Time between frames (20 frames/s): smooth enough for numbers and bars, and cheap on an
/// SSH link because only changed cells are sent.
pub const FRAME_INTERVAL: Duration = Duration::from_millis(50);
/// Commands waiting per axis before the cockpit drops new ones (and says so).
const LANE_DEPTH: usize = 16;
/// Notices waiting for the loop.
const NOTICE_DEPTH: usize = 64;

/// Why the cockpit stopped other than by the operator quitting.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    /// Writing to the terminal failed.
    #[error("cannot draw: {0}")]
    Draw(String),
    /// Reading the terminal failed.
    #[error("cannot read the terminal: {0}")]
    Input(std::io::Error),
    /// The terminal went away.
    #[error("the terminal closed")]
    InputClosed,
    /// Some thread panicked; its message was printed after the terminal was restored.
    #[error("an internal error stopped the cockpit (message above; details in the log file)")]
    Panicked,
}

/// Runs the cockpit until the operator quits, `stop` resolves, or an error.
///
/// # Errors
/// [`RunError`] when the terminal fails or a thread panicked.
pub async fn run<B, E, P, S>(
    terminal: &mut Terminal<B>,
    mut events: E,
    port: Arc<P>,
    app: &mut App,
    stop: S,
) -> Result<(), RunError>
where
    B: Backend,
    E: Stream<Item = std::io::Result<Event>> + Unpin,
    P: MachinePort,
    S: Future<Output = ()>,
{
    app.drillable = (0..app.axes.len()).map(|i| port.drillable(i)).collect();
    let (notice_tx, mut notice_rx) = mpsc::channel(NOTICE_DEPTH);
    let lanes = spawn_lanes(&port, app.axes.len(), &notice_tx);
    if let Some(mut engine_events) = port.events() {
        let tx = notice_tx.clone();
        tokio::spawn(async move {
            use tokio::sync::broadcast::error::RecvError;
            loop {
                match engine_events.recv().await {
                    Ok(ev) => {
                        let wanted = matches!(
                            ev.kind,
                            crate::engine::EventKind::Capture { .. }
                                | crate::engine::EventKind::Notice { .. }
                                | crate::engine::EventKind::Gains { .. }
                                | crate::engine::EventKind::LinkQuality { .. }
                                | crate::engine::EventKind::RecorderFailed { .. }
                                | crate::engine::EventKind::Interrupted { .. }
                        );
                        if wanted && tx.send(Notice::Engine(ev)).await.is_err() {
                            return;
                        }
                    }
                    Err(RecvError::Lagged(_)) => {}
                    Err(RecvError::Closed) => return,
                }
            }
        });
    }
    let mut frame = tokio::time::interval(FRAME_INTERVAL);
    frame.set_missed_tick_behavior(MissedTickBehavior::Skip);
    let start = Instant::now();
    let mut snaps = Vec::with_capacity(app.axes.len());
    let mut dirty = true;
    // The running move list's control channel (pause, resume, abort); stop-all aborts it.
    let mut list_control: Option<watch::Sender<ListControl>> = None;
    tokio::pin!(stop);
    loop {
        if crate::cockpit::terminal::panicked() {
            return Err(RunError::Panicked);
        }
        if app.quit {
            return Ok(());
        }
        if dirty {
            terminal
                .draw(|f| f.render_widget(&*app, f.area()))
                .map_err(|e| RunError::Draw(e.to_string()))?;
            dirty = false;
        }
        tokio::select! {
            biased;
            ev = events.next() => match ev {
                Some(Ok(Event::Key(k))) if k.kind == KeyEventKind::Release => {
                    // Only a held jog key's release matters (terminals that report releases).
                    if let Some(crate::cockpit::action::Action::JogHold(_)) =
                        keys::map_key(app.mode(), &k)
                    {
                        let action = crate::cockpit::action::Action::JogRelease;
                        for fx in app.apply(start.elapsed(), action) {
                            execute(fx, &*port, &lanes, &notice_tx, app, start.elapsed(), &mut list_control);
                        }
                    }
                }
                // An auto-repeat is a press again (what terminals without releases send too).
                Some(Ok(Event::Key(k))) => {
                    if let Some(action) = keys::map_key(app.mode(), &k) {
                        for fx in app.apply(start.elapsed(), action) {
                            execute(fx, &*port, &lanes, &notice_tx, app, start.elapsed(), &mut list_control);
                        }
                        dirty = true;
                    }
                }
                Some(Ok(Event::Resize(..))) => dirty = true,
                Some(Ok(_)) => {}
                Some(Err(e)) => return Err(RunError::Input(e)),
                None => return Err(RunError::InputClosed),
            },
            Some(n) = notice_rx.recv() => {
                app.on_notice(start.elapsed(), n);
                dirty = true;
            }
            _ = frame.tick() => {
                port.snapshots_into(&mut snaps);
                app.observe(start.elapsed(), &snaps, port.stop_all_latched());
                dirty = true;
            }
            () = &mut stop => app.quit = true,
        }
    }
}

/// One background task per axis: sends that axis's commands in order and reports answers.
fn spawn_lanes<P: MachinePort>(
    port: &Arc<P>,
    axes: usize,
    notices: &mpsc::Sender<Notice>,
) -> Vec<mpsc::Sender<AxisCommand>> {
    (0..axes)
        .map(|axis| {
            let (tx, mut rx) = mpsc::channel::<AxisCommand>(LANE_DEPTH);
            let (port, notices) = (Arc::clone(port), notices.clone());
            tokio::spawn(async move {
                while let Some(command) = rx.recv().await {
                    let what = describe(&command).to_owned();
                    let result = port.send(axis, command).await;
                    if notices.send(Notice::Reply { axis, what, result }).await.is_err() {
                        return;
                    }
                }
            });
            tx
        })
        .collect()
}

fn describe(c: &AxisCommand) -> &'static str {
    match c {
        AxisCommand::Enable => "enable",
        AxisCommand::Disable => "disable",
        AxisCommand::MoveTo(_) | AxisCommand::MoveWithin { .. } => "go to",
        AxisCommand::Stop => "stop",
        AxisCommand::ClearTrip => "clear trip",
        AxisCommand::SetController(..) => "new gains",
        AxisCommand::LinkReport { .. } => "link report",
        AxisCommand::Home => "home",
        AxisCommand::JogStep { .. } => "jog step",
        AxisCommand::JogPulse { .. } => "jog",
        AxisCommand::JogRelease => "jog release",
        AxisCommand::History => "history",
        AxisCommand::LiveController => "live gains",
        AxisCommand::Experiment { .. } => "trial",
        AxisCommand::TakeExperiment => "trial result",
    }
}

/// Carries out one effect without waiting.
fn execute<P: MachinePort>(
    effect: Effect,
    port: &P,
    lanes: &[mpsc::Sender<AxisCommand>],
    notices: &mpsc::Sender<Notice>,
    app: &mut App,
    now: Duration,
    list_control: &mut Option<watch::Sender<ListControl>>,
) {
    match effect {
        Effect::StopAll => {
            port.stop_all();
            // Stop-all stops the list too (the axes stopping would end it anyway).
            if let Some(c) = list_control {
                let _ = c.send(ListControl::Abort);
            }
        }
        Effect::ListControl(c) => {
            if let Some(tx) = list_control {
                let _ = tx.send(c);
            }
        }
        Effect::RunList { list, from } => {
            let (tx, rx) = watch::channel(ListControl::Run);
            *list_control = Some(tx);
            let (progress_tx, mut progress) = mpsc::unbounded_channel();
            let job = port.run_list(*list, from, rx, progress_tx);
            let notices = notices.clone();
            // One task forwards progress and then the end, so the end is never seen before
            // the steps that led to it.
            tokio::spawn(async move {
                tokio::pin!(job);
                let result = loop {
                    tokio::select! {
                        biased;
                        Some(p) = progress.recv() => {
                            let _ = notices.send(Notice::ListProgress(p)).await;
                        }
                        r = &mut job => break r,
                    }
                };
                while let Ok(p) = progress.try_recv() {
                    let _ = notices.send(Notice::ListProgress(p)).await;
                }
                let _ = notices.send(Notice::ListEnded(result)).await;
            });
        }
        Effect::FindLists { config, source } => {
            let notices = notices.clone();
            tokio::spawn(async move {
                let job = move || crate::move_list::catalog::find(&config, &source);
                let found = tokio::task::spawn_blocking(job).await.unwrap_or_default();
                let _ = notices.send(Notice::Lists(found)).await;
            });
        }
        Effect::MoveLine { what, goals } => {
            let job = port.move_line(goals);
            let notices = notices.clone();
            tokio::spawn(async move {
                let result = job.await;
                let _ = notices.send(Notice::Line { what, result }).await;
            });
        }
        Effect::ReleaseStopAll => port.release_stop_all(),
        Effect::Command { axis, command } => {
            let what = describe(&command).to_owned();
            let why = match lanes.get(axis) {
                Some(lane) => match lane.try_send(command) {
                    Ok(()) => return,
                    Err(TrySendError::Full(_)) => "too many commands waiting; this one dropped",
                    Err(TrySendError::Closed(_)) => "the axis is not reachable",
                },
                None => "the axis is not reachable",
            };
            app.on_notice(now, Notice::Reply { axis, what, result: Err(why.to_owned()) });
        }
        Effect::Tune { axis, step, config } => {
            let job = port.tune(axis, *config, step);
            let notices = notices.clone();
            tokio::spawn(async move {
                let result = job.await;
                let _ = notices.send(Notice::Tuned { axis, result }).await;
            });
        }
        Effect::HomeAll => {
            let job = port.home_all();
            let notices = notices.clone();
            tokio::spawn(async move {
                let result = job.await;
                let _ = notices.send(Notice::HomeAll { result }).await;
            });
        }
        Effect::SaveGains { path, config } => {
            spawn_save(notices.clone(), config, false, move |c| {
                save::save_controllers(&path, c, &save::note("saved from the cockpit"))
            });
        }
        Effect::StoreSpot { path, name, position } => {
            let notices = notices.clone();
            tokio::spawn(async move {
                let job =
                    move || crate::spots::store(&path, &name, &position).map(|_| (path, name));
                let text = match tokio::task::spawn_blocking(job).await {
                    Ok(Ok((path, name))) => format!("@{name} stored in {}", path.display()),
                    Ok(Err(e)) => format!("storing the spot failed: {e}"),
                    Err(e) => format!("the store task failed: {e}"),
                };
                let kind = crate::engine::EventKind::Notice { text };
                let _ =
                    notices.send(Notice::Engine(crate::engine::Event::now(None, None, kind))).await;
            });
        }
        Effect::FetchHistory { axis } => {
            let job = port.history(axis);
            let notices = notices.clone();
            tokio::spawn(async move {
                let result = job.await;
                let _ = notices.send(Notice::History { axis, result }).await;
            });
        }
        Effect::Drill { axis, pick } => {
            // A short lock the simulated board reads at its tick: done here, in the key path.
            let result = port.drill(axis, &pick);
            app.on_notice(now, Notice::Drill { axis, result });
        }
        Effect::WriteCopy { path, config } => {
            spawn_save(notices.clone(), config, true, move |c| {
                save::write_copy(
                    &path,
                    crate::config::DEMO_CONFIG,
                    c,
                    &save::note("saved from the cockpit"),
                )
            });
        }
    }
}

/// Runs a save on the blocking pool (fsync can take a long time) and reports the outcome.
fn spawn_save<F>(
    notices: mpsc::Sender<Notice>,
    config: crate::config::MachineConfig,
    new_file: bool,
    job: F,
) where
    F: FnOnce(&crate::config::MachineConfig) -> Result<save::SaveReport, save::SaveError>
        + Send
        + 'static,
{
    tokio::spawn(async move {
        let controllers = config.axes.iter().map(|a| a.controller.clone()).collect();
        let result = tokio::task::spawn_blocking(move || job(&config))
            .await
            .map_err(|e| format!("the save task failed: {e}"))
            .and_then(|r| r.map_err(|e| e.to_string()));
        let _ = notices.send(Notice::Saved { result, controllers, new_file }).await;
    });
}
