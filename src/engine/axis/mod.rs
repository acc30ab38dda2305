//! The axis task: one per axis, the only owner of that axis's link, controller, profile,
//! supervision, homing, jogging and state machine.
//!
//! The loop is clocked by the board's telemetry frames: each frame is unwrapped into a
//! position, the profile is sampled at the board's own time, the controller runs with the
//! board's dt, supervision checks the result, and the duty goes straight back. Operator
//! commands arrive on a bounded channel; stop-all arrives on its own `watch` so it never waits
//! behind them. Snapshots go out on a `watch` and events on a `broadcast`: the task never
//! waits for a reader.
//!
//! The task is two layers:
//! - [`core`] (with [`frame`] and [`commands`]): the axis's decisions, synchronous, with the
//!   host time passed in — no I/O, no clock, testable without a runtime; its motion state is
//!   one enum whose variants carry their own data ([`motion`]);
//! - this file, the link shell: open, handshake, read, decode, write (each write with a time
//!   limit), relink, and publishing what the core decided;
//! - [`move_stats`]: per-move statistics; [`handle`]: the command vocabulary and the
//!   cloneable handle.

mod commands;
pub mod core;
mod frame;
pub mod handle;
mod motion;
pub mod move_stats;

use std::sync::Arc;
use std::time::Duration;

use futures::FutureExt;
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::{broadcast, mpsc, watch};
use tokio::time::Instant;

pub use self::core::{AxisCore, Output};
pub use handle::{AxisCommand, AxisHandle, CommandError, Reply, Request, StopAll};
pub use move_stats::MoveStats;

use crate::config::AxisConfig;
use crate::engine::events::{Event, EventKind};
use crate::engine::link_meter::LinkMeter;
use crate::engine::snapshot::{AxisSnapshot, AxisState};
use crate::link::{BoxStream, Link, LinkError, Retry};
use crate::protocol::{
    self, BoardMessage, DecodeError, FrameDecoder, HostMessage, PROTOCOL_VERSION,
};

/// How long the board has to answer Hello.
const HELLO_TIMEOUT: Duration = Duration::from_millis(500);
/// Hellos sent before the board counts as not answering.
const HELLO_TRIES: u32 = 3;
/// After Configure the board's seq restarts at 0. Frames still queued from before it (a PTY
/// or USB buffer holds about a second of them) are skipped until one with a seq this small
/// arrives; a few may be lost on the way, and if more are, the relink sends Configure again.
const FRESH_SEQ_WINDOW: u16 = 5;
/// While the link is lost, ask the board to start again this often.
const RELINK_PERIOD: Duration = Duration::from_millis(500);

/// Channels the task is wired to.
pub struct AxisWiring {
    /// Operator commands.
    pub commands: mpsc::Receiver<Request>,
    /// Stop-all.
    pub stop_all: watch::Receiver<StopAll>,
    /// Shutdown: becomes true once.
    pub shutdown: watch::Receiver<bool>,
    /// Where snapshots go.
    pub snapshots: watch::Sender<AxisSnapshot>,
    /// Where events go.
    pub events: broadcast::Sender<Event>,
    /// Seconds of full-rate history to keep.
    pub history_seconds: f64,
}

/// Writes all of `bytes`, or fails with `TimedOut` when that takes longer than `limit`: a
/// board that does not take its bytes in time (a wedged USB device, a full PTY nobody reads)
/// is a lost link, and the axis must not wait on it.
///
/// A write the device takes at once (nearly every one: a reply is a few bytes) completes
/// without a timer; only a write that has to wait arms one. Building the time limit for
/// every reply read the clock and registered a timer a thousand times a second per axis.
async fn write_within(
    stream: &mut BoxStream,
    bytes: &[u8],
    limit: Duration,
) -> std::io::Result<()> {
    let mut write = std::pin::pin!(stream.write_all(bytes));
    // Progress made by this first attempt stays in `write`, so nothing is written twice.
    if let Some(r) = write.as_mut().now_or_never() {
        return r;
    }
    match tokio::time::timeout(limit, write).await {
        Ok(r) => r,
        Err(_) => Err(std::io::Error::new(
            std::io::ErrorKind::TimedOut,
            format!("a write to the board did not complete within {} ms", limit.as_millis()),
        )),
    }
}

/// What the machine-wide signals ask of an axis during a session.
enum Signal {
    /// Shutdown (or the machine went away).
    Shutdown,
    /// Stop-all changed.
    StopAll,
}

/// Waits for shutdown or a stop-all change, on clones of the task's receivers (a clone starts
/// from what the original has seen), so that the session can keep one such future pinned
/// across frames instead of registering and removing two waiters on every frame.
async fn next_signal(
    mut shutdown: watch::Receiver<bool>,
    mut stop_all: watch::Receiver<StopAll>,
) -> Signal {
    tokio::select! {
        biased;
        _ = shutdown.changed() => Signal::Shutdown,
        r = stop_all.changed() => if r.is_err() { Signal::Shutdown } else { Signal::StopAll },
    }
}

enum SessionEnd {
    Shutdown,
    Closed(LinkError),
}

/// The link went away: the device closed or a read failed.
fn vanished(detail: impl Into<String>) -> SessionEnd {
    SessionEnd::Closed(LinkError::Vanished { detail: detail.into() })
}

/// A write failed or timed out (the timeout is a lost link too).
fn write_failed(e: &std::io::Error) -> SessionEnd {
    SessionEnd::Closed(if e.kind() == std::io::ErrorKind::TimedOut {
        LinkError::TimedOut { what: e.to_string() }
    } else {
        LinkError::Vanished { detail: format!("write failed: {e}") }
    })
}

/// The per-axis task: the link shell around an [`AxisCore`].
pub struct AxisTask {
    core: AxisCore,
    link: Arc<dyn Link>,
    wiring: AxisWiring,
    /// Longest a write to the board may take before the link counts as lost.
    write_timeout: Duration,
    published_state: AxisState,
    last_frame_at: Option<Instant>,
    /// Why the last attempt to open the link failed; cleared when a link comes up.
    link_error: Option<Arc<str>>,
    /// The link failure last reported (event and log): the same failure again is not
    /// reported again until the link has been up.
    reported: Option<LinkError>,
    /// A Configure went out: frames still queued from before it (their seq did not restart)
    /// are stale and skipped until the first fresh one.
    awaiting_fresh: bool,
    meter: LinkMeter,
    decoder: FrameDecoder,
    tx: Vec<u8>,
}

impl AxisTask {
    /// A task for one axis, not yet running.
    pub fn new(cfg: AxisConfig, link: Arc<dyn Link>, wiring: AxisWiring) -> Self {
        let stop = *wiring.stop_all.borrow();
        Self {
            write_timeout: Duration::from_secs_f64(cfg.limits.link_timeout_s),
            core: AxisCore::new(cfg, wiring.history_seconds, stop),
            link,
            wiring,
            published_state: AxisState::Offline,
            last_frame_at: None,
            link_error: None,
            reported: None,
            awaiting_fresh: false,
            meter: LinkMeter::default(),
            decoder: FrameDecoder::new(),
            tx: Vec::with_capacity(64),
        }
    }

    fn name(&self) -> &str {
        &self.core.config().name
    }

    /// Runs until shutdown. Leaves the motor off.
    pub async fn run(mut self) {
        self.publish();
        loop {
            let open = self.link.open();
            let opened = tokio::select! {
                biased;
                _ = self.wiring.shutdown.changed() => return,
                r = open => r,
            };
            let failure = match opened {
                Ok(stream) => match self.session(stream).await {
                    SessionEnd::Shutdown => return,
                    SessionEnd::Closed(e) => {
                        tracing::warn!(axis = %self.name(), why = %e, "link closed");
                        // Also why an axis that never linked (no Hello, another protocol
                        // version) stays offline.
                        self.link_error = Some(Arc::from(e.to_string()));
                        self.core.link_lost(&e.to_string());
                        e
                    }
                },
                Err(e) => {
                    self.link_error = Some(Arc::from(e.to_string()));
                    if self.reported.as_ref() != Some(&e) {
                        tracing::warn!(axis = %self.name(), error = %e, "cannot open link");
                        self.core.event(EventKind::Link { up: false, detail: e.to_string() });
                    }
                    e
                }
            };
            self.publish();
            let retry = failure.retry();
            self.reported = Some(failure);
            let pause = match retry {
                Retry::After(p) => Some(p),
                Retry::Never => {
                    tracing::warn!(axis = %self.name(), "not retrying this link");
                    None
                }
            };
            if self.idle(pause).await || pause.is_none() {
                return;
            }
        }
    }

    /// Applies stop-all; returns what to write now.
    fn on_stop_all(&mut self) -> Output {
        let s = *self.wiring.stop_all.borrow_and_update();
        self.core.stop_all(s)
    }

    /// Runs a command through the core, intercepting what the shell answers itself (link
    /// reports: the meter is the shell's). Returns the answer and what to write now.
    fn on_command(&mut self, cmd: AxisCommand) -> (Result<Reply, CommandError>, Output) {
        if let AxisCommand::LinkReport { reset } = cmd {
            return (Ok(Reply::Link(self.meter.report(reset))), Output { send: None, ticks: 0 });
        }
        self.core.command(cmd, Instant::now())
    }

    /// Serves commands and stop-all with no link, for `pause` (or until shutdown if None).
    /// Returns true on shutdown.
    async fn idle(&mut self, pause: Option<Duration>) -> bool {
        let until = pause.map(|p| Instant::now() + p);
        loop {
            let sleep = async {
                match until {
                    Some(u) => tokio::time::sleep_until(u).await,
                    None => std::future::pending().await,
                }
            };
            tokio::select! {
                biased;
                _ = self.wiring.shutdown.changed() => return true,
                r = self.wiring.stop_all.changed() => {
                    if r.is_err() { return true; }
                    self.on_stop_all();
                    self.publish();
                }
                req = self.wiring.commands.recv() => {
                    let Some(req) = req else { return true };
                    let (answer, _) = self.on_command(req.command);
                    // Publish first: whoever gets the answer must already see its effect
                    // (e.g. the homing waiter watching for the state to leave `homing`).
                    self.publish();
                    let _ = req.reply.send(answer);
                }
                () = sleep => return false,
            }
        }
    }

    /// Writes what the core asked for, if anything. A write that fails or times out ends the
    /// session.
    async fn carry_out(&mut self, stream: &mut BoxStream, out: Output) -> Result<(), SessionEnd> {
        let Some(msg) = out.send else { return Ok(()) };
        self.send(stream, &msg).await.map_err(|e| write_failed(&e))
    }

    async fn send(&mut self, stream: &mut BoxStream, msg: &HostMessage) -> std::io::Result<()> {
        self.tx.clear();
        protocol::write_frame(msg, &mut self.tx);
        write_within(stream, &self.tx, self.write_timeout).await
    }

    /// Writes Stop at once (shutdown), without waiting for a frame; best effort.
    async fn motor_off_now(&mut self, stream: &mut BoxStream) {
        let out = self.core.motor_off();
        if self.carry_out(stream, out).await.is_ok() {
            let _ = tokio::time::timeout(self.write_timeout, stream.flush()).await;
        }
    }

    async fn session(&mut self, mut stream: BoxStream) -> SessionEnd {
        self.decoder.clear();
        if let Err(why) = self.handshake(&mut stream).await {
            return why;
        }
        self.link_error = None;
        self.reported = None;
        self.meter.link_up();
        self.last_frame_at = Some(Instant::now());
        self.core.link_up(self.link.describe());
        self.publish();
        let link_timeout = Duration::from_secs_f64(self.core.config().limits.link_timeout_s);
        let mut rx = vec![0u8; 4096];
        let mut next_relink = Instant::now();
        // The futures that outlive a frame: the machine's signals, and one timer for the link
        // timeout. The timer is re-armed lazily: every frame moves the true deadline later,
        // but the timer is only moved when it fires (early, mostly: then it is set to the
        // deadline as it stands) or when the deadline moved earlier than it. That replaces a
        // timer built and torn down per frame by one re-arm per link timeout.
        let signals = next_signal(self.wiring.shutdown.clone(), self.wiring.stop_all.clone());
        let timer = tokio::time::sleep_until(self.link_deadline(link_timeout, next_relink));
        tokio::pin!(signals, timer);
        loop {
            let deadline = self.link_deadline(link_timeout, next_relink);
            if deadline < timer.deadline() {
                timer.as_mut().reset(deadline);
            }
            tokio::select! {
                biased;
                signal = &mut signals => {
                    if let Signal::Shutdown = signal {
                        self.motor_off_now(&mut stream).await;
                        return SessionEnd::Shutdown;
                    }
                    let out = self.on_stop_all();
                    let written = self.carry_out(&mut stream, out).await;
                    self.publish();
                    if let Err(end) = written {
                        return end;
                    }
                    // The originals have now seen this change; fresh clones start from it.
                    signals.set(next_signal(
                        self.wiring.shutdown.clone(),
                        self.wiring.stop_all.clone(),
                    ));
                }
                req = self.wiring.commands.recv() => {
                    let Some(req) = req else {
                        self.motor_off_now(&mut stream).await;
                        return SessionEnd::Shutdown;
                    };
                    let (answer, out) = self.on_command(req.command);
                    let written = self.carry_out(&mut stream, out).await;
                    // Publish first: whoever gets the answer must already see its effect
                    // (e.g. the homing waiter watching for the state to leave `homing`).
                    self.publish();
                    let _ = req.reply.send(answer);
                    if let Err(end) = written {
                        return end;
                    }
                }
                () = &mut timer => {
                    if deadline > Instant::now() {
                        // Frames came meanwhile: not due yet.
                        timer.as_mut().reset(deadline);
                        continue;
                    }
                    // A starved process wakes with the timer and the data both due: let the
                    // other tasks (an in-process board) run and look for bytes once more
                    // before calling the link lost.
                    tokio::task::yield_now().await;
                    if let Some(n) = stream.read(&mut rx).now_or_never() {
                        match n {
                            Ok(0) => return vanished("device closed"),
                            Ok(n) => {
                                if let Err(end) = self.on_bytes(&mut stream, &rx[..n]).await {
                                    return end;
                                }
                                timer.as_mut().reset(self.link_deadline(link_timeout, next_relink));
                                continue;
                            }
                            Err(e) => return vanished(e.to_string()),
                        }
                    }
                    if self.core.is_linked() {
                        let why = format!(
                            "no valid telemetry for {:.0} ms",
                            self.core.config().limits.link_timeout_s * 1000.0
                        );
                        self.core.link_lost(&why);
                        self.publish();
                    }
                    // The board may have reset: ask it to start streaming again.
                    next_relink = Instant::now() + RELINK_PERIOD;
                    timer.as_mut().reset(next_relink);
                    if let Err(e) = self.send_configure(&mut stream).await {
                        return write_failed(&e);
                    }
                }
                n = stream.read(&mut rx) => {
                    let n = match n {
                        Ok(0) => return vanished("device closed"),
                        Ok(n) => n,
                        Err(e) => return vanished(e.to_string()),
                    };
                    if let Err(end) = self.on_bytes(&mut stream, &rx[..n]).await {
                        return end;
                    }
                }
            }
        }
    }

    /// When the link counts as lost (linked: one link timeout after the last frame), or when
    /// to ask the board to start again (not linked).
    fn link_deadline(&self, link_timeout: Duration, next_relink: Instant) -> Instant {
        if self.core.is_linked() {
            self.last_frame_at.map_or_else(Instant::now, |t| t + link_timeout)
        } else {
            next_relink
        }
    }

    /// Decodes what one read brought, runs the loop for every telemetry frame in it and
    /// answers once.
    async fn on_bytes(&mut self, stream: &mut BoxStream, bytes: &[u8]) -> Result<(), SessionEnd> {
        let read_at = Instant::now();
        self.decoder.extend(bytes);
        let mut answer = None;
        while let Some(msg) = self.decoder.next_message::<BoardMessage>() {
            match msg {
                Ok(BoardMessage::Telemetry(tm)) => {
                    if self.awaiting_fresh {
                        if tm.seq > FRESH_SEQ_WINDOW {
                            continue;
                        }
                        self.awaiting_fresh = false;
                        self.core.restart_sequence();
                    }
                    if !self.core.is_linked() {
                        self.meter.link_up();
                        self.core.telemetry_resumed();
                    }
                    self.last_frame_at = Some(read_at);
                    let out = self.core.on_frame(&tm, read_at);
                    self.meter.frame(out.ticks, self.core.board_time());
                    answer = out.send;
                }
                Ok(BoardMessage::Hello(_)) => {}
                Err(e) => {
                    tracing::debug!(axis = %self.name(), error = %e, "bad frame");
                    self.meter.bad_frame();
                    self.core.bad_frame();
                }
            }
        }
        if let Some(msg) = answer {
            // One answer per read: after a backlog only the newest state matters.
            if let Err(e) = self.send(stream, &msg).await {
                return Err(write_failed(&e));
            }
            let took = Instant::now().saturating_duration_since(read_at);
            self.meter.turnaround(took);
            self.publish();
        }
        Ok(())
    }

    async fn handshake(&mut self, stream: &mut BoxStream) -> Result<(), SessionEnd> {
        let mut rx = vec![0u8; 1024];
        for _attempt in 0..HELLO_TRIES {
            if let Err(e) = self.send(stream, &HostMessage::Hello).await {
                return Err(write_failed(&e));
            }
            let deadline = Instant::now() + HELLO_TIMEOUT;
            loop {
                tokio::select! {
                    biased;
                    _ = self.wiring.shutdown.changed() => return Err(SessionEnd::Shutdown),
                    () = tokio::time::sleep_until(deadline) => break,
                    n = stream.read(&mut rx) => {
                        let n = match n {
                            Ok(0) => return Err(vanished("device closed")),
                            Ok(n) => n,
                            Err(e) => return Err(vanished(e.to_string())),
                        };
                        self.decoder.extend(&rx[..n]);
                        while let Some(msg) = self.decoder.next_message::<BoardMessage>() {
                            // docs/protocol.md: the header's version is the one the board
                            // speaks; the Hello body announces the newest it implements.
                            let mismatch = match &msg {
                                Err(DecodeError::Version(v)) => Some(*v),
                                Ok(BoardMessage::Hello(caps))
                                    if caps.protocol_version < PROTOCOL_VERSION =>
                                {
                                    Some(caps.protocol_version)
                                }
                                _ => None,
                            };
                            if let Some(board) = mismatch {
                                return Err(SessionEnd::Closed(LinkError::ProtocolMismatch {
                                    board,
                                    host: PROTOCOL_VERSION,
                                }));
                            }
                            if let Ok(BoardMessage::Hello(caps)) = msg {
                                tracing::info!(axis = %self.name(), board = %caps.board_name, "linked");
                                self.send_configure(stream).await.map_err(|e| write_failed(&e))?;
                                return Ok(());
                            }
                        }
                    }
                }
            }
        }
        Err(SessionEnd::Closed(LinkError::TimedOut {
            what: format!(
                "the board did not answer Hello ({} tries, {} ms each)",
                HELLO_TRIES,
                HELLO_TIMEOUT.as_millis()
            ),
        }))
    }

    async fn send_configure(&mut self, stream: &mut BoxStream) -> std::io::Result<()> {
        self.awaiting_fresh = true;
        let board = &self.core.config().board;
        let configure =
            HostMessage::Configure { tick_hz: board.tick_hz, watchdog_ms: board.watchdog_ms };
        self.tx.clear();
        protocol::write_frame(&HostMessage::Hello, &mut self.tx);
        protocol::write_frame(&configure, &mut self.tx);
        write_within(stream, &self.tx, self.write_timeout).await
    }

    /// Sends the core's events and, when the state changed, a state event; then publishes
    /// the snapshot.
    fn publish(&mut self) {
        let name = self.core.name().clone();
        for (board_t, kind) in self.core.take_events() {
            // No listener is fine: events are for whoever cares.
            let _ = self.wiring.events.send(Event::now(Some(name.clone()), board_t, kind));
        }
        let state = self.core.state();
        if state != self.published_state {
            let (from, to) = (self.published_state, state);
            self.published_state = state;
            let board_t = self.core.is_linked().then_some(self.core.board_time());
            let _ = self.wiring.events.send(Event::now(
                Some(name),
                board_t,
                EventKind::State { from, to },
            ));
        }
        let link = self.meter.stats();
        let (core, link_error) = (&self.core, &self.link_error);
        self.wiring.snapshots.send_modify(|s| {
            core.fill_snapshot(s);
            s.link = link;
            if s.link_error != *link_error {
                s.link_error.clone_from(link_error);
            }
        });
    }
}
