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
//! - this file: the task's state, the link (connect, handshake, read, write) and the select
//!   loop;
//! - [`frame`]: what happens on each telemetry frame;
//! - [`commands`]: operator commands and stop-all;
//! - [`handle`]: the command vocabulary and the cloneable handle.

mod commands;
mod frame;
pub mod handle;

use std::sync::Arc;
use std::time::Duration;

use futures::FutureExt;
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::{broadcast, mpsc, watch};
use tokio::time::Instant;

pub use handle::{AxisCommand, AxisHandle, CommandError, Reply, Request, StopAll};

use crate::config::AxisConfig;
use crate::control::{Controller, Profile, Setpoint};
use crate::engine::events::{Event, EventKind};
use crate::engine::experiment::{ExperimentResult, ExperimentRun};
use crate::engine::history::History;
use crate::engine::homing::HomingRun;
use crate::engine::link_meter::LinkMeter;
use crate::engine::snapshot::{AxisSnapshot, AxisState, Trip};
use crate::engine::supervisor::Supervisor;
use crate::protocol::{self, BoardMessage, FrameDecoder, HostMessage, Telemetry, PROTOCOL_VERSION};
use crate::transport::{BoxStream, Connector};

/// How long the board has to answer Hello.
const HELLO_TIMEOUT: Duration = Duration::from_millis(500);
/// Pause between attempts to (re)open a link.
const RECONNECT_PAUSE: Duration = Duration::from_millis(1000);
/// After Configure the board's seq restarts at 0. Frames still queued from before it (a PTY
/// or USB buffer holds about a second of them) are skipped until one with a seq this small
/// arrives; a few may be lost on the way, and if more are, the relink sends Configure again.
const FRESH_SEQ_WINDOW: u16 = 5;
/// While the link is lost, ask the board to start again this often.
const RELINK_PERIOD: Duration = Duration::from_millis(500);

/// Why a motion profile runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Purpose {
    /// An absolute move or a jog step: completion waits for the in-position dwell.
    Move,
    /// Continuous jog (ends by deadman, release or stop).
    Jog,
    /// A homing move or stop: the homing run watches for its end.
    Homing,
    /// Decelerate, then hold.
    StopThenHold,
    /// Decelerate, then motor off (stop-all category 1).
    StopThenOff,
}

#[derive(Debug, Clone, Copy)]
struct ActiveProfile {
    profile: Profile,
    t0: f64,
    purpose: Purpose,
}

/// Continuous-jog bookkeeping (host time: jog keys are host events).
#[derive(Debug, Clone, Copy)]
struct JogKeys {
    direction: i8,
    /// When the first press of this key arrived.
    first_at: Instant,
    /// Continuous motion runs; stop when no repeat arrives by this time.
    deadman: Option<Instant>,
}

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
async fn write_within(
    stream: &mut BoxStream,
    bytes: &[u8],
    limit: Duration,
) -> std::io::Result<()> {
    match tokio::time::timeout(limit, stream.write_all(bytes)).await {
        Ok(r) => r,
        Err(_) => Err(std::io::Error::new(
            std::io::ErrorKind::TimedOut,
            format!("a write to the board did not complete within {} ms", limit.as_millis()),
        )),
    }
}

enum SessionEnd {
    Shutdown,
    Closed(String),
}

/// The per-axis task's state.
pub struct AxisTask {
    cfg: AxisConfig,
    name: Arc<str>,
    connector: Arc<Connector>,
    wiring: AxisWiring,
    /// Longest a write to the board may take before the link counts as lost.
    write_timeout: Duration,
    controller: Controller,
    supervisor: Supervisor,
    state: AxisState,
    published_state: AxisState,
    trip: Option<Trip>,
    profile: Option<ActiveProfile>,
    setpoint: Setpoint,
    goal: f64,
    /// Host-side unwrapped count.
    count: i64,
    /// position = count / counts_per_unit + offset; homing sets the offset.
    offset: f64,
    homed: bool,
    /// Set when the motor comes on (or homing ends); cleared once the position is inside the
    /// soft limits. While set, the soft-limit rule is off so the axis can be brought back in.
    outside_limits: bool,
    homing: Option<HomingRun>,
    /// Extra |duty| limit while homing pushes into an end stop, %.
    duty_limit: Option<f64>,
    jog: Option<JogKeys>,
    experiment: Option<ExperimentRun>,
    experiment_result: Option<Box<ExperimentResult>>,
    position: f64,
    velocity: f64,
    t: f64,
    inputs: u8,
    last: Option<Telemetry>,
    last_frame_at: Option<Instant>,
    link_up: bool,
    /// Why the last attempt to open the link failed; cleared when a link comes up.
    link_error: Option<Arc<str>>,
    /// A Configure went out: frames still queued from before it (their seq did not restart)
    /// are stale and skipped until the first fresh one.
    awaiting_fresh: bool,
    /// Duty commanded for the interval now running, %.
    duty: f64,
    host_seq: u16,
    settle_since: Option<f64>,
    in_position: bool,
    moves_done: u64,
    move_t0: f64,
    move_peak_fe: f64,
    move_settle_s: Option<f64>,
    history: History,
    meter: LinkMeter,
    decoder: FrameDecoder,
    tx: Vec<u8>,
}

impl AxisTask {
    /// A task for one axis, not yet running.
    pub fn new(cfg: AxisConfig, connector: Connector, wiring: AxisWiring) -> Self {
        let controller = Controller::new(&cfg.controller);
        let supervisor = Supervisor::new(
            &cfg.limits,
            &cfg.scale.unit,
            cfg.scale.counts_per_unit,
            cfg.motion.max_velocity,
        );
        let history = History::new(wiring.history_seconds, cfg.board.tick_hz);
        Self {
            name: Arc::from(cfg.name.as_str()),
            write_timeout: Duration::from_secs_f64(cfg.limits.link_timeout_s),
            cfg,
            connector: Arc::new(connector),
            wiring,
            controller,
            supervisor,
            state: AxisState::Offline,
            published_state: AxisState::Offline,
            trip: None,
            profile: None,
            setpoint: Setpoint::default(),
            goal: 0.0,
            count: 0,
            offset: 0.0,
            homed: false,
            outside_limits: true,
            homing: None,
            duty_limit: None,
            jog: None,
            experiment: None,
            experiment_result: None,
            position: 0.0,
            velocity: 0.0,
            t: 0.0,
            inputs: 0,
            last: None,
            last_frame_at: None,
            link_up: false,
            link_error: None,
            awaiting_fresh: false,
            duty: 0.0,
            host_seq: 0,
            settle_since: None,
            in_position: false,
            moves_done: 0,
            move_t0: 0.0,
            move_peak_fe: 0.0,
            move_settle_s: None,
            history,
            meter: LinkMeter::default(),
            decoder: FrameDecoder::new(),
            tx: Vec::with_capacity(64),
        }
    }

    /// Runs until shutdown. Leaves the motor off.
    pub async fn run(mut self) {
        self.publish();
        loop {
            let Some(opened) = self.open_link().await else { return };
            match opened {
                Ok(stream) => match self.session(stream).await {
                    SessionEnd::Shutdown => return,
                    SessionEnd::Closed(why) => {
                        tracing::warn!(axis = %self.cfg.name, %why, "link closed");
                        self.link_lost(&why);
                    }
                },
                Err(e) => {
                    tracing::warn!(axis = %self.cfg.name, error = %e, "cannot open link");
                    self.link_error = Some(Arc::from(e.to_string()));
                    self.publish();
                    self.event(EventKind::Link { up: false, detail: e.to_string() });
                    if !self.connector.can_reconnect() {
                        self.idle(None).await;
                        return;
                    }
                }
            }
            if self.idle(Some(RECONNECT_PAUSE)).await {
                return;
            }
        }
    }

    /// Opens the link on the blocking pool (opening a serial device is a blocking system call
    /// that a confused USB device can hold up), serving nothing meanwhile but shutdown.
    /// Returns None on shutdown.
    async fn open_link(&mut self) -> Option<Result<BoxStream, crate::transport::TransportError>> {
        if !self.connector.can_reconnect() {
            // A stream handed over once: nothing to open, nothing that can block.
            return Some(self.connector.connect());
        }
        let connector = Arc::clone(&self.connector);
        let open = tokio::task::spawn_blocking(move || connector.connect());
        tokio::select! {
            biased;
            _ = self.wiring.shutdown.changed() => None,
            r = open => Some(r.unwrap_or_else(|e| {
                Err(crate::transport::TransportError::Other {
                    device: self.connector.describe(),
                    message: format!("the open failed: {e}"),
                })
            })),
        }
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
                    self.apply_stop_all();
                    self.publish();
                }
                req = self.wiring.commands.recv() => {
                    let Some(req) = req else { return true };
                    let (answer, _) = self.command(req.command);
                    // Publish first: whoever gets the answer must already see its effect
                    // (e.g. the homing waiter watching for the state to leave `homing`).
                    self.publish();
                    let _ = req.reply.send(answer);
                }
                () = sleep => return false,
            }
        }
    }

    async fn session(&mut self, mut stream: BoxStream) -> SessionEnd {
        self.decoder.clear();
        if let Err(why) = self.handshake(&mut stream).await {
            return why;
        }
        self.link_up = true;
        self.link_error = None;
        self.meter.link_up();
        self.last = None;
        self.last_frame_at = Some(Instant::now());
        self.event(EventKind::Link { up: true, detail: self.connector.describe() });
        if self.state == AxisState::Offline {
            self.state = if self.wiring.stop_all.borrow().latched {
                AxisState::Stopped
            } else {
                AxisState::Disabled
            };
        }
        self.publish();
        let link_timeout = Duration::from_secs_f64(self.cfg.limits.link_timeout_s);
        let mut rx = vec![0u8; 4096];
        let mut next_relink = Instant::now();
        loop {
            let deadline = if self.link_up {
                self.last_frame_at.map_or_else(Instant::now, |t| t + link_timeout)
            } else {
                next_relink
            };
            tokio::select! {
                biased;
                _ = self.wiring.shutdown.changed() => {
                    self.motor_off_now(&mut stream).await;
                    return SessionEnd::Shutdown;
                }
                r = self.wiring.stop_all.changed() => {
                    if r.is_err() {
                        self.motor_off_now(&mut stream).await;
                        return SessionEnd::Shutdown;
                    }
                    if self.apply_stop_all() {
                        self.motor_off_now(&mut stream).await;
                    }
                    self.publish();
                }
                req = self.wiring.commands.recv() => {
                    let Some(req) = req else {
                        self.motor_off_now(&mut stream).await;
                        return SessionEnd::Shutdown;
                    };
                    let (answer, off) = self.command(req.command);
                    if off {
                        self.motor_off_now(&mut stream).await;
                    }
                    // Publish first: whoever gets the answer must already see its effect
                    // (e.g. the homing waiter watching for the state to leave `homing`).
                    self.publish();
                    let _ = req.reply.send(answer);
                }
                () = tokio::time::sleep_until(deadline) => {
                    // A starved process wakes with the timer and the data both due: let the
                    // other tasks (an in-process board) run and look for bytes once more
                    // before calling the link lost.
                    tokio::task::yield_now().await;
                    if let Some(n) = stream.read(&mut rx).now_or_never() {
                        match n {
                            Ok(0) => return SessionEnd::Closed("device closed".to_owned()),
                            Ok(n) => {
                                if let Err(end) = self.on_bytes(&mut stream, &rx[..n]).await {
                                    return end;
                                }
                                continue;
                            }
                            Err(e) => return SessionEnd::Closed(e.to_string()),
                        }
                    }
                    if self.link_up {
                        self.link_up = false;
                        let why = format!(
                            "no valid telemetry for {:.0} ms",
                            self.cfg.limits.link_timeout_s * 1000.0
                        );
                        self.link_lost(&why);
                    }
                    // The board may have reset: ask it to start streaming again.
                    next_relink = Instant::now() + RELINK_PERIOD;
                    if let Err(e) = self.send_configure(&mut stream).await {
                        return SessionEnd::Closed(format!("write failed: {e}"));
                    }
                }
                n = stream.read(&mut rx) => {
                    let n = match n {
                        Ok(0) => return SessionEnd::Closed("device closed".to_owned()),
                        Ok(n) => n,
                        Err(e) => return SessionEnd::Closed(e.to_string()),
                    };
                    if let Err(end) = self.on_bytes(&mut stream, &rx[..n]).await {
                        return end;
                    }
                }
            }
        }
    }

    /// Decodes what one read brought, runs the loop for every telemetry frame in it and
    /// answers once.
    async fn on_bytes(&mut self, stream: &mut BoxStream, bytes: &[u8]) -> Result<(), SessionEnd> {
        let read_at = Instant::now();
        self.decoder.extend(bytes);
        let mut any = false;
        while let Some(msg) = self.decoder.next_message::<BoardMessage>() {
            match msg {
                Ok(BoardMessage::Telemetry(tm)) => {
                    if self.awaiting_fresh {
                        if tm.seq > FRESH_SEQ_WINDOW {
                            continue;
                        }
                        self.awaiting_fresh = false;
                        self.last = None;
                    }
                    if !self.link_up {
                        self.link_up = true;
                        self.meter.link_up();
                        self.event(EventKind::Link {
                            up: true,
                            detail: "telemetry resumed".to_owned(),
                        });
                    }
                    self.last_frame_at = Some(read_at);
                    self.on_telemetry(&tm, read_at);
                    any = true;
                }
                Ok(BoardMessage::Hello(_)) => {}
                Err(e) => {
                    tracing::debug!(axis = %self.cfg.name, error = %e, "bad frame");
                    self.meter.bad_frame();
                }
            }
        }
        if any {
            // One answer per read: after a backlog only the newest state matters.
            if let Err(e) = self.write_output(stream).await {
                return Err(SessionEnd::Closed(format!("write failed: {e}")));
            }
            let took = Instant::now().saturating_duration_since(read_at);
            self.meter.turnaround(took);
            self.publish();
        }
        Ok(())
    }

    async fn handshake(&mut self, stream: &mut BoxStream) -> Result<(), SessionEnd> {
        let mut rx = vec![0u8; 1024];
        for _attempt in 0..3 {
            self.tx.clear();
            protocol::write_frame(&HostMessage::Hello, &mut self.tx);
            if let Err(e) = write_within(stream, &self.tx, self.write_timeout).await {
                return Err(SessionEnd::Closed(e.to_string()));
            }
            let deadline = Instant::now() + HELLO_TIMEOUT;
            loop {
                tokio::select! {
                    biased;
                    _ = self.wiring.shutdown.changed() => return Err(SessionEnd::Shutdown),
                    () = tokio::time::sleep_until(deadline) => break,
                    n = stream.read(&mut rx) => {
                        let n = match n {
                            Ok(0) => return Err(SessionEnd::Closed("device closed".to_owned())),
                            Ok(n) => n,
                            Err(e) => return Err(SessionEnd::Closed(e.to_string())),
                        };
                        self.decoder.extend(&rx[..n]);
                        while let Some(msg) = self.decoder.next_message::<BoardMessage>() {
                            if let Ok(BoardMessage::Hello(caps)) = msg {
                                if caps.protocol_version != PROTOCOL_VERSION {
                                    return Err(SessionEnd::Closed(format!(
                                        "board speaks protocol v{}, servotty speaks v{}",
                                        caps.protocol_version, PROTOCOL_VERSION
                                    )));
                                }
                                tracing::info!(axis = %self.cfg.name, board = %caps.board_name, "linked");
                                self.send_configure(stream)
                                    .await
                                    .map_err(|e| SessionEnd::Closed(e.to_string()))?;
                                return Ok(());
                            }
                        }
                    }
                }
            }
        }
        Err(SessionEnd::Closed("the board did not answer Hello".to_owned()))
    }

    async fn send_configure(&mut self, stream: &mut BoxStream) -> std::io::Result<()> {
        self.awaiting_fresh = true;
        self.tx.clear();
        protocol::write_frame(&HostMessage::Hello, &mut self.tx);
        protocol::write_frame(
            &HostMessage::Configure {
                tick_hz: self.cfg.board.tick_hz,
                watchdog_ms: self.cfg.board.watchdog_ms,
            },
            &mut self.tx,
        );
        write_within(stream, &self.tx, self.write_timeout).await
    }

    /// Writes Stop at once (category 0, disable, shutdown) without waiting for a frame.
    async fn motor_off_now(&mut self, stream: &mut BoxStream) {
        self.duty = 0.0;
        self.host_seq = self.last.map_or(0, |t| t.seq);
        self.tx.clear();
        protocol::write_frame(&HostMessage::Stop { seq: self.host_seq }, &mut self.tx);
        if write_within(stream, &self.tx, self.write_timeout).await.is_ok() {
            let _ = tokio::time::timeout(self.write_timeout, stream.flush()).await;
        }
    }

    async fn write_output(&mut self, stream: &mut BoxStream) -> std::io::Result<()> {
        // Echo the telemetry seq being answered: the board's ack_seq then shows the reply
        // latency in ticks (docs/protocol.md).
        self.host_seq = self.last.map_or(0, |t| t.seq);
        let msg = if self.state.motor_on() {
            let sign = if self.cfg.scale.invert_motor { -1.0 } else { 1.0 };
            let full = f64::from(protocol::DUTY_FULL_SCALE);
            let wire = (sign * self.duty / 100.0 * full).round().clamp(-full, full) as i16;
            HostMessage::Duty { seq: self.host_seq, duty: wire }
        } else {
            HostMessage::Stop { seq: self.host_seq }
        };
        self.tx.clear();
        protocol::write_frame(&msg, &mut self.tx);
        write_within(stream, &self.tx, self.write_timeout).await
    }

    fn link_lost(&mut self, why: &str) {
        self.link_up = false;
        self.last = None;
        self.event(EventKind::Link { up: false, detail: why.to_owned() });
        if self.trip.is_none() && self.state != AxisState::Offline {
            let was_on = self.state.motor_on();
            self.latch_trip(
                crate::engine::snapshot::TripCause::LinkLoss,
                format!(
                    "{why}{}: check the cable, the board's power and its USB connection",
                    if was_on { " while the motor was on" } else { "" }
                ),
            );
        }
        self.publish();
    }

    fn event(&self, kind: EventKind) {
        let board_t = self.link_up.then_some(self.t);
        // No listener is fine: events are for whoever cares.
        let _ = self.wiring.events.send(Event::now(Some(self.name.clone()), board_t, kind));
    }

    fn publish(&mut self) {
        if self.state != self.published_state {
            let (from, to) = (self.published_state, self.state);
            self.published_state = self.state;
            self.event(EventKind::State { from, to });
        }
        let band = self.supervisor.following_error_band(self.setpoint.velocity);
        let latched = self.wiring.stop_all.borrow().latched;
        let link = self.meter.stats();
        let this = &*self;
        this.wiring.snapshots.send_modify(|s| {
            s.state = this.state;
            s.homed = this.homed;
            s.position = this.position;
            s.target = this.setpoint.position;
            s.goal = this.goal;
            s.velocity = this.velocity;
            s.following_error = this.setpoint.position - this.position;
            s.following_error_band = band;
            s.duty = this.duty;
            if s.trip != this.trip {
                s.trip.clone_from(&this.trip);
            }
            s.link = link;
            if s.link_error != this.link_error {
                s.link_error.clone_from(&this.link_error);
            }
            s.board_time_s = this.t;
            s.stop_latched = latched;
            s.in_position = this.in_position;
            s.moves_done = this.moves_done;
            s.move_peak_following_error = this.move_peak_fe;
            s.move_settle_s = this.move_settle_s;
        });
    }
}
