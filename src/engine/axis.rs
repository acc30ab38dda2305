//! The axis task: one per axis, the only owner of that axis's link, controller, profile,
//! supervision and state machine.
//!
//! The loop is clocked by the board's telemetry frames: each frame is unwrapped into a
//! position, the profile is sampled at the board's own time, the controller runs with the
//! board's dt, supervision checks the result, and the duty goes straight back. Operator
//! commands arrive on a bounded channel; stop-all arrives on its own `watch` so it never waits
//! behind them. Snapshots go out on a `watch`: the task never waits for a reader.

use std::sync::Arc;
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::{mpsc, oneshot, watch};
use tokio::time::Instant;

use crate::config::{AxisConfig, ControllerConfig};
use crate::control::{Controller, Setpoint, Trapezoid};
use crate::engine::link_meter::{LinkMeter, LinkReport};
use crate::engine::snapshot::{AxisSnapshot, AxisState, Trip, TripCause};
use crate::engine::supervisor::{Observation, Supervisor};
use crate::protocol::{
    self, status, BoardMessage, FrameDecoder, HostMessage, Telemetry, PROTOCOL_VERSION,
};
use crate::transport::{BoxStream, Connector};

/// How long the board has to answer Hello.
const HELLO_TIMEOUT: Duration = Duration::from_millis(500);
/// Pause between attempts to (re)open a link.
const RECONNECT_PAUSE: Duration = Duration::from_millis(1000);
/// While the link is lost, ask the board to start again this often.
const RELINK_PERIOD: Duration = Duration::from_millis(500);
/// Time constant of the velocity estimate's low-pass filter, s.
const VELOCITY_FILTER_S: f64 = 0.01;

/// What the operator (or a headless command) asks of one axis.
#[derive(Debug, Clone, PartialEq)]
pub enum AxisCommand {
    /// Motor on, holding the present position.
    Enable,
    /// Motor off.
    Disable,
    /// Profiled move to an absolute position, units.
    MoveTo(f64),
    /// Decelerate to rest and hold (the motor stays on).
    Stop,
    /// Clear a latched trip, if its cause has gone; the axis comes back disabled.
    ClearTrip,
    /// Replace the controller parameters without a bump.
    SetController(ControllerConfig),
    /// Link measurements since the last report (optionally starting afresh).
    LinkReport {
        /// Start a new measurement window after reporting.
        reset: bool,
    },
}

/// A successful answer.
#[derive(Debug, Clone, PartialEq)]
pub enum Reply {
    /// Done (or started, for motion).
    Done,
    /// Link measurements.
    Link(LinkReport),
}

/// Why a command was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CommandError {
    /// The axis cannot do it now; the text says why.
    #[error("{axis}: {reason}")]
    Refused {
        /// Axis name.
        axis: String,
        /// Why, in words.
        reason: String,
    },
    /// The axis task has ended.
    #[error("{0}: axis task has stopped")]
    Gone(String),
}

/// A command with its reply slot.
#[derive(Debug)]
pub struct Request {
    /// The command.
    pub command: AxisCommand,
    /// Where the answer goes.
    pub reply: oneshot::Sender<Result<Reply, CommandError>>,
}

/// The stop-all signal shared by every axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct StopAll {
    /// Latched until released.
    pub latched: bool,
    /// IEC 60204-1 stop category (0 or 1).
    pub category: u8,
}

/// Why a motion profile runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Purpose {
    Move,
    /// Decelerate, then hold.
    StopThenHold,
    /// Decelerate, then motor off (stop-all category 1).
    StopThenOff,
}

#[derive(Debug, Clone, Copy)]
struct ActiveProfile {
    profile: Trapezoid,
    t0: f64,
    purpose: Purpose,
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
}

enum SessionEnd {
    Shutdown,
    Closed(String),
}

/// The per-axis task's state.
pub struct AxisTask {
    cfg: AxisConfig,
    connector: Connector,
    wiring: AxisWiring,
    controller: Controller,
    supervisor: Supervisor,
    state: AxisState,
    trip: Option<Trip>,
    profile: Option<ActiveProfile>,
    setpoint: Setpoint,
    goal: f64,
    /// Host-side unwrapped count.
    count: i64,
    position: f64,
    velocity: f64,
    t: f64,
    last: Option<Telemetry>,
    last_frame_at: Option<Instant>,
    link_up: bool,
    /// Duty commanded for the interval now running, %.
    duty: f64,
    host_seq: u16,
    settle_since: Option<f64>,
    in_position: bool,
    moves_done: u64,
    move_t0: f64,
    move_peak_fe: f64,
    move_settle_s: Option<f64>,
    meter: LinkMeter,
    decoder: FrameDecoder,
    tx: Vec<u8>,
    board_status: u8,
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
        Self {
            cfg,
            connector,
            wiring,
            controller,
            supervisor,
            state: AxisState::Offline,
            trip: None,
            profile: None,
            setpoint: Setpoint::default(),
            goal: 0.0,
            count: 0,
            position: 0.0,
            velocity: 0.0,
            t: 0.0,
            last: None,
            last_frame_at: None,
            link_up: false,
            duty: 0.0,
            host_seq: 0,
            settle_since: None,
            in_position: false,
            moves_done: 0,
            move_t0: 0.0,
            move_peak_fe: 0.0,
            move_settle_s: None,
            meter: LinkMeter::default(),
            decoder: FrameDecoder::new(),
            tx: Vec::with_capacity(64),
            board_status: 0,
        }
    }

    fn name(&self) -> &str {
        &self.cfg.name
    }

    /// Runs until shutdown. Leaves the motor off.
    pub async fn run(mut self) {
        self.publish();
        loop {
            match self.connector.connect() {
                Ok(stream) => match self.session(stream).await {
                    SessionEnd::Shutdown => return,
                    SessionEnd::Closed(why) => {
                        tracing::warn!(axis = %self.cfg.name, %why, "link closed");
                        self.link_lost(&why);
                    }
                },
                Err(e) => {
                    tracing::warn!(axis = %self.cfg.name, error = %e, "cannot open link");
                    if self.state == AxisState::Offline {
                        self.publish();
                    }
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
                    self.apply_stop_all_offline();
                }
                req = self.wiring.commands.recv() => {
                    let Some(req) = req else { return true };
                    let answer = self.command_offline(req.command);
                    let _ = req.reply.send(answer);
                }
                () = sleep => return false,
            }
        }
    }

    fn command_offline(&mut self, cmd: AxisCommand) -> Result<Reply, CommandError> {
        match cmd {
            AxisCommand::Disable => Ok(Reply::Done),
            AxisCommand::SetController(c) => {
                self.controller.set_config(&c);
                self.cfg.controller = c;
                Ok(Reply::Done)
            }
            AxisCommand::LinkReport { reset } => Ok(Reply::Link(self.meter.report(reset))),
            _ => Err(self.refuse("no link to the board")),
        }
    }

    fn apply_stop_all_offline(&mut self) {
        let s = *self.wiring.stop_all.borrow_and_update();
        if !s.latched && self.state == AxisState::Stopped {
            self.state = AxisState::Offline;
        }
        self.publish();
    }

    async fn session(&mut self, mut stream: BoxStream) -> SessionEnd {
        self.decoder.clear();
        if let Err(why) = self.handshake(&mut stream).await {
            return why;
        }
        self.link_up = true;
        self.meter.link_up();
        self.last = None;
        self.last_frame_at = Some(Instant::now());
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
                    let _ = req.reply.send(answer);
                    self.publish();
                }
                () = tokio::time::sleep_until(deadline) => {
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
                    if self.send_configure(&mut stream).await.is_err() {
                        return SessionEnd::Closed("write failed".to_owned());
                    }
                }
                n = stream.read(&mut rx) => {
                    let n = match n {
                        Ok(0) => return SessionEnd::Closed("device closed".to_owned()),
                        Ok(n) => n,
                        Err(e) => return SessionEnd::Closed(e.to_string()),
                    };
                    let read_at = Instant::now();
                    self.decoder.extend(&rx[..n]);
                    let mut any = false;
                    while let Some(msg) = self.decoder.next_message::<BoardMessage>() {
                        match msg {
                            Ok(BoardMessage::Telemetry(tm)) => {
                                self.on_telemetry(&tm);
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
                        if self.write_output(&mut stream).await.is_err() {
                            return SessionEnd::Closed("write failed".to_owned());
                        }
                        let took = Instant::now().saturating_duration_since(read_at);
                        self.meter.turnaround(took);
                        self.publish();
                    }
                }
            }
        }
    }

    async fn handshake(&mut self, stream: &mut BoxStream) -> Result<(), SessionEnd> {
        let mut rx = vec![0u8; 1024];
        for _attempt in 0..3 {
            self.tx.clear();
            protocol::write_frame(&HostMessage::Hello, &mut self.tx);
            if let Err(e) = stream.write_all(&self.tx).await {
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
        self.tx.clear();
        protocol::write_frame(&HostMessage::Hello, &mut self.tx);
        protocol::write_frame(
            &HostMessage::Configure {
                tick_hz: self.cfg.board.tick_hz,
                watchdog_ms: self.cfg.board.watchdog_ms,
            },
            &mut self.tx,
        );
        stream.write_all(&self.tx).await
    }

    /// Writes Stop at once (category 0, disable, trip, shutdown) without waiting for a frame.
    async fn motor_off_now(&mut self, stream: &mut BoxStream) {
        self.duty = 0.0;
        self.host_seq = self.host_seq.wrapping_add(1);
        self.tx.clear();
        protocol::write_frame(&HostMessage::Stop { seq: self.host_seq }, &mut self.tx);
        let _ = stream.write_all(&self.tx).await;
        let _ = stream.flush().await;
    }

    async fn write_output(&mut self, stream: &mut BoxStream) -> std::io::Result<()> {
        self.host_seq = self.host_seq.wrapping_add(1);
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
        stream.write_all(&self.tx).await
    }

    fn on_telemetry(&mut self, tm: &Telemetry) {
        let now = Instant::now();
        self.last_frame_at = Some(now);
        if !self.link_up {
            self.link_up = true;
            self.meter.link_up();
        }
        let tick_s = 1.0 / f64::from(self.cfg.board.tick_hz);
        let (dt, ticks, delta) = match &self.last {
            None => (tick_s, 1u32, 0i64),
            Some(prev) => {
                let dt = f64::from(tm.board_time_us.wrapping_sub(prev.board_time_us)) * 1e-6;
                let ticks = u32::from(tm.seq.wrapping_sub(prev.seq));
                // The wire count is 32 bits and wraps; differences stay right across a wrap.
                let delta = i64::from(tm.count.wrapping_sub(prev.count));
                (dt, ticks, delta)
            }
        };
        self.meter.frame(ticks, self.t);
        self.last = Some(*tm);
        self.board_status = tm.status;
        let delta = if self.cfg.scale.invert_encoder { -delta } else { delta };
        self.count += delta;
        self.t += dt;
        self.position = self.count as f64 / self.cfg.scale.counts_per_unit;
        if dt > 0.0 {
            let v_raw = delta as f64 / self.cfg.scale.counts_per_unit / dt;
            let a = dt / (VELOCITY_FILTER_S + dt);
            self.velocity += a * (v_raw - self.velocity);
        }
        self.step_motion();
        let applied = self.duty;
        if self.state.motor_on() {
            self.duty = self.controller.update(&self.setpoint, self.position, dt);
        } else {
            self.duty = 0.0;
            self.setpoint = Setpoint { position: self.position, velocity: 0.0, acceleration: 0.0 };
        }
        if self.state == AxisState::Moving {
            self.move_peak_fe =
                self.move_peak_fe.max((self.setpoint.position - self.position).abs());
        }
        let obs = Observation {
            t: self.t,
            target: self.setpoint.position,
            target_velocity: self.setpoint.velocity,
            position: self.position,
            velocity: self.velocity,
            duty: applied,
            count: self.count,
            count_delta: delta,
            ticks,
            motor_on: self.state.motor_on(),
            limits_active: true,
        };
        if let Some(f) = self.supervisor.observe(&obs) {
            self.duty = applied;
            self.latch_trip(f.cause, f.detail);
        } else if self.state.motor_on() && tm.status & status::DRIVER_FAULT != 0 {
            self.latch_trip(TripCause::BoardFault, "the board reports a driver fault".to_owned());
        }
    }

    /// Advances the setpoint along the active profile and runs the move's state changes.
    fn step_motion(&mut self) {
        if !self.state.motor_on() {
            return;
        }
        if let Some(p) = self.profile {
            let tp = self.t - p.t0;
            self.setpoint = p.profile.sample(tp);
            if tp >= p.profile.duration() {
                match p.purpose {
                    Purpose::Move => {
                        // Hold the end point; completion waits for the in-position dwell.
                        self.profile = None;
                        self.settle_since = None;
                    }
                    Purpose::StopThenHold => {
                        self.profile = None;
                        self.goal = p.profile.goal();
                        self.state = AxisState::Holding;
                    }
                    Purpose::StopThenOff => {
                        self.profile = None;
                        self.state = AxisState::Stopped;
                        self.supervisor.reset();
                    }
                }
            }
        } else {
            self.setpoint = Setpoint { position: self.goal, velocity: 0.0, acceleration: 0.0 };
        }
        if self.state == AxisState::Moving && self.profile.is_none() {
            let inside = (self.goal - self.position).abs() <= self.cfg.motion.in_position_band;
            match (inside, self.settle_since) {
                (false, _) => self.settle_since = None,
                (true, None) => self.settle_since = Some(self.t),
                (true, Some(since)) => {
                    if self.t - since >= self.cfg.motion.in_position_dwell_s {
                        self.state = AxisState::Holding;
                        self.in_position = true;
                        self.moves_done += 1;
                        self.move_settle_s = Some(self.t - self.move_t0);
                    }
                }
            }
        }
    }

    fn latch_trip(&mut self, cause: TripCause, detail: String) {
        tracing::warn!(axis = %self.cfg.name, %cause, %detail, "trip");
        self.trip = Some(Trip {
            cause,
            at_s: self.t,
            target: self.setpoint.position,
            position: self.position,
            following_error: self.setpoint.position - self.position,
            duty: self.duty,
            velocity: self.velocity,
            detail,
        });
        self.state = AxisState::Tripped;
        self.profile = None;
        self.duty = 0.0;
        self.supervisor.reset();
    }

    fn link_lost(&mut self, why: &str) {
        self.link_up = false;
        self.last = None;
        if self.trip.is_none() && self.state != AxisState::Offline {
            let was_on = self.state.motor_on();
            self.latch_trip(
                TripCause::LinkLoss,
                format!(
                    "{why}{}: check the cable, the board's power and its USB connection",
                    if was_on { " while the motor was on" } else { "" }
                ),
            );
        }
        self.publish();
    }

    /// Applies the stop-all signal. Returns true when the motor must go off at once.
    fn apply_stop_all(&mut self) -> bool {
        let s = *self.wiring.stop_all.borrow_and_update();
        if !s.latched {
            if self.state == AxisState::Stopped {
                // Releasing never restarts motion.
                self.state = AxisState::Disabled;
            }
            return false;
        }
        match self.state {
            AxisState::Offline | AxisState::Tripped | AxisState::Stopped => false,
            AxisState::Disabled => {
                self.state = AxisState::Stopped;
                false
            }
            _ if s.category == 0 => {
                self.state = AxisState::Stopped;
                self.profile = None;
                true
            }
            _ => {
                self.begin_stop(Purpose::StopThenOff);
                false
            }
        }
    }

    /// Starts a controlled deceleration.
    ///
    /// The ramp starts from the measured position (not the lagging setpoint) at the setpoint's
    /// velocity: a stop must cover the least ground, and the small jump in the P term is the
    /// price of that.
    fn begin_stop(&mut self, purpose: Purpose) {
        let v0 = self.setpoint.velocity;
        let profile = Trapezoid::stop(self.position, v0, self.cfg.motion.max_acceleration);
        self.profile = Some(ActiveProfile { profile, t0: self.t, purpose });
        self.goal = profile.goal();
        self.state = AxisState::Stopping;
        self.in_position = false;
    }

    /// Handles an operator command. Returns the answer and whether the motor must go off now.
    fn command(&mut self, cmd: AxisCommand) -> (Result<Reply, CommandError>, bool) {
        let latched = self.wiring.stop_all.borrow().latched;
        match cmd {
            AxisCommand::Enable => match self.state {
                AxisState::Disabled if latched => {
                    (Err(self.refuse("stop-all is latched: release it first")), false)
                }
                AxisState::Disabled => {
                    self.goal = self.position;
                    self.setpoint =
                        Setpoint { position: self.position, velocity: 0.0, acceleration: 0.0 };
                    self.controller.reset(self.position);
                    self.supervisor.reset();
                    self.profile = None;
                    self.state = AxisState::Holding;
                    (Ok(Reply::Done), false)
                }
                s if s.motor_on() => (Ok(Reply::Done), false),
                s => (Err(self.refuse(&format!("cannot enable while {s}"))), false),
            },
            AxisCommand::Disable => {
                let was_on = self.state.motor_on();
                if was_on {
                    self.state = AxisState::Disabled;
                    self.profile = None;
                }
                (Ok(Reply::Done), was_on)
            }
            AxisCommand::MoveTo(goal) => (self.start_move(goal), false),
            AxisCommand::Stop => {
                if matches!(self.state, AxisState::Moving | AxisState::Jogging | AxisState::Homing)
                {
                    self.begin_stop(Purpose::StopThenHold);
                }
                (Ok(Reply::Done), false)
            }
            AxisCommand::ClearTrip => (self.clear_trip(), false),
            AxisCommand::SetController(c) => {
                self.controller.set_config(&c);
                self.cfg.controller = c;
                (Ok(Reply::Done), false)
            }
            AxisCommand::LinkReport { reset } => (Ok(Reply::Link(self.meter.report(reset))), false),
        }
    }

    fn start_move(&mut self, goal: f64) -> Result<Reply, CommandError> {
        let l = &self.cfg.limits;
        if !goal.is_finite() || goal < l.soft_min || goal > l.soft_max {
            let (lo, hi, u) = (l.soft_min, l.soft_max, self.cfg.scale.unit.clone());
            return Err(self
                .refuse(&format!("target {goal} {u} is outside the soft limits {lo} … {hi} {u}")));
        }
        match self.state {
            AxisState::Holding | AxisState::Moving => {}
            s => return Err(self.refuse(&format!("cannot move while {s} (enable the axis first)"))),
        }
        let m = &self.cfg.motion;
        let profile = Trapezoid::plan(
            self.setpoint.position,
            self.setpoint.velocity,
            goal,
            m.max_velocity,
            m.max_acceleration,
        );
        self.profile = Some(ActiveProfile { profile, t0: self.t, purpose: Purpose::Move });
        self.goal = goal;
        self.state = AxisState::Moving;
        self.in_position = false;
        self.settle_since = None;
        self.move_t0 = self.t;
        self.move_peak_fe = 0.0;
        Ok(Reply::Done)
    }

    fn clear_trip(&mut self) -> Result<Reply, CommandError> {
        let Some(trip) = &self.trip else { return Ok(Reply::Done) };
        if trip.cause == TripCause::LinkLoss && !self.link_up {
            return Err(self.refuse("the link is still down"));
        }
        self.trip = None;
        self.profile = None;
        self.goal = self.position;
        self.setpoint = Setpoint { position: self.position, velocity: 0.0, acceleration: 0.0 };
        self.supervisor.reset();
        self.state = if !self.link_up {
            AxisState::Offline
        } else if self.wiring.stop_all.borrow().latched {
            AxisState::Stopped
        } else {
            AxisState::Disabled
        };
        Ok(Reply::Done)
    }

    fn refuse(&self, reason: &str) -> CommandError {
        CommandError::Refused { axis: self.name().to_owned(), reason: reason.to_owned() }
    }

    fn publish(&self) {
        let band = self.supervisor.following_error_band(self.setpoint.velocity);
        let latched = self.wiring.stop_all.borrow().latched;
        let link = self.meter.stats();
        self.wiring.snapshots.send_modify(|s| {
            s.state = self.state;
            s.position = self.position;
            s.target = self.setpoint.position;
            s.goal = self.goal;
            s.velocity = self.velocity;
            s.following_error = self.setpoint.position - self.position;
            s.following_error_band = band;
            s.duty = self.duty;
            if s.trip != self.trip {
                s.trip.clone_from(&self.trip);
            }
            s.link = link;
            s.board_time_s = self.t;
            s.stop_latched = latched;
            s.in_position = self.in_position;
            s.moves_done = self.moves_done;
            s.move_peak_following_error = self.move_peak_fe;
            s.move_settle_s = self.move_settle_s;
        });
    }
}

/// A cloneable way to talk to one axis task.
#[derive(Debug, Clone)]
pub struct AxisHandle {
    name: Arc<str>,
    commands: mpsc::Sender<Request>,
    snapshots: watch::Receiver<AxisSnapshot>,
}

impl AxisHandle {
    /// Wires a handle to a task's channels.
    pub fn new(
        name: &str,
        commands: mpsc::Sender<Request>,
        snapshots: watch::Receiver<AxisSnapshot>,
    ) -> Self {
        Self { name: Arc::from(name), commands, snapshots }
    }

    /// The axis name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Sends a command and waits for the axis's answer (not for the motion to finish).
    ///
    /// # Errors
    /// [`CommandError`] when refused or when the task has ended.
    pub async fn send(&self, command: AxisCommand) -> Result<Reply, CommandError> {
        let (tx, rx) = oneshot::channel();
        self.commands
            .send(Request { command, reply: tx })
            .await
            .map_err(|_| CommandError::Gone(self.name.to_string()))?;
        rx.await.map_err(|_| CommandError::Gone(self.name.to_string()))?
    }

    /// The latest snapshot.
    pub fn snapshot(&self) -> AxisSnapshot {
        self.snapshots.borrow().clone()
    }

    /// A receiver for waiting on changes.
    pub fn watch(&self) -> watch::Receiver<AxisSnapshot> {
        self.snapshots.clone()
    }
}
