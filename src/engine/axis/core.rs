//! The axis core: everything an axis decides, with no I/O and no clock of its own.
//!
//! The link shell (`axis/mod.rs`) feeds it telemetry frames, operator commands, stop-all and
//! link changes, passing the host time in; the core answers with what to write to the board
//! and queues the events it raised. It never reads a clock, a channel or a device, so it can
//! be driven frame by frame from a plain unit test (no runtime).
//!
//! Its behaviour is spread over [`super::frame`] (one telemetry frame) and
//! [`super::commands`] (operator commands and stop-all); this file holds the state, the
//! public calls and the bookkeeping around them.

use std::sync::Arc;

use tokio::time::Instant;

use super::handle::{AxisCommand, CommandError, Reply, StopAll};
use super::motion::{Drive, JogTap, Motion};
use super::move_stats::MoveStats;
use crate::config::AxisConfig;
use crate::control::{Controller, Setpoint};
use crate::engine::events::EventKind;
use crate::engine::experiment::ExperimentResult;
use crate::engine::history::History;
use crate::engine::link_quality::LinkQuality;
use crate::engine::snapshot::{AxisSnapshot, AxisState, TripCause};
use crate::engine::supervisor::Supervisor;
use crate::protocol::{self, HostMessage, Telemetry};

/// What the shell must do after a call into the core.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Output {
    /// Write this to the board now (None: nothing to write).
    pub send: Option<HostMessage>,
    /// For a telemetry frame: the ticks it accounts for by sequence number (1 when none was
    /// lost since the previous frame); 0 otherwise.
    pub ticks: u32,
}

impl Output {
    const NOTHING: Self = Self { send: None, ticks: 0 };
}

/// One axis's state and decisions.
pub struct AxisCore {
    pub(super) cfg: AxisConfig,
    pub(super) name: Arc<str>,
    pub(super) controller: Controller,
    pub(super) supervisor: Supervisor,
    /// The motion state with the data only that state has (motion.rs).
    pub(super) motion: Motion,
    /// A first jog press waiting for its repeat (never kept while jogging).
    pub(super) tap: Option<JogTap>,
    pub(super) setpoint: Setpoint,
    pub(super) goal: f64,
    /// Host-side unwrapped count.
    pub(super) count: i64,
    /// position = count / counts_per_unit + offset; homing sets the offset.
    pub(super) offset: f64,
    pub(super) homed: bool,
    /// Set when the motor comes on (or homing ends); cleared once the position is inside the
    /// soft limits. While set, the soft-limit rule is off so the axis can be brought back in.
    pub(super) outside_limits: bool,
    /// The last finished test's result, until it is taken.
    pub(super) experiment_result: Option<Box<ExperimentResult>>,
    pub(super) position: f64,
    pub(super) velocity: f64,
    /// Board time, s (sum of the board's frame intervals).
    pub(super) t: f64,
    pub(super) inputs: u8,
    /// The previous telemetry frame, for unwrapping; None after a (re)link.
    pub(super) last: Option<Telemetry>,
    pub(super) link_up: bool,
    /// The stop-all signal as last applied.
    pub(super) stop: StopAll,
    /// Duty commanded for the interval now running, %.
    pub(super) duty: f64,
    pub(super) moves: MoveStats,
    /// Bad and missed frames over the last second, for link-quality events.
    quality: LinkQuality,
    pub(super) history: History,
    /// Events raised since the shell last took them, with the board time they happened at.
    events: Vec<(Option<f64>, EventKind)>,
}

impl AxisCore {
    /// An axis not yet linked, keeping `history_seconds` of full-rate history.
    pub fn new(cfg: AxisConfig, history_seconds: f64, stop: StopAll) -> Self {
        let controller = Controller::new(&cfg.controller);
        let supervisor = Supervisor::new(
            &cfg.limits,
            &cfg.scale.unit,
            cfg.scale.counts_per_unit,
            cfg.motion.max_velocity,
        );
        let history = History::new(history_seconds, cfg.board.tick_hz);
        let tick_hz = cfg.board.tick_hz;
        Self {
            name: Arc::from(cfg.name.as_str()),
            cfg,
            controller,
            supervisor,
            motion: Motion::Offline,
            tap: None,
            setpoint: Setpoint::default(),
            goal: 0.0,
            count: 0,
            offset: 0.0,
            homed: false,
            outside_limits: true,
            experiment_result: None,
            position: 0.0,
            velocity: 0.0,
            t: 0.0,
            inputs: 0,
            last: None,
            link_up: false,
            stop,
            duty: 0.0,
            moves: MoveStats::default(),
            quality: LinkQuality::new(tick_hz),
            history,
            events: Vec::new(),
        }
    }

    /// The axis's name.
    pub fn name(&self) -> &Arc<str> {
        &self.name
    }

    /// The axis's configuration (its controller as last set).
    pub fn config(&self) -> &AxisConfig {
        &self.cfg
    }

    /// The motion state.
    pub fn state(&self) -> AxisState {
        self.motion.state()
    }

    /// Board time, s.
    pub fn board_time(&self) -> f64 {
        self.t
    }

    /// One telemetry frame received at `host_now`: control, supervise, record. The answer
    /// (duty or stop) is in `send`; after a backlog the shell writes only the last one.
    pub fn on_frame(&mut self, tm: &Telemetry, host_now: Instant) -> Output {
        let ticks = self.on_telemetry(tm, host_now);
        if let Some(e) = self.quality.frame(ticks) {
            self.event(e);
        }
        let send = self.answer();
        // A Duty answer goes out only while driven; a Stop ends any drive with the motion.
        if let (HostMessage::Duty { seq, .. }, Some(slot)) = (send, self.motion.drive_slot()) {
            slot.get_or_insert(Drive { since_seq: seq, confirmed: false, ticks: 0 });
        }
        Output { send: Some(send), ticks }
    }

    /// An operator command at `host_now`. `send` holds Stop when the motor must go off at
    /// once (disable), not waiting for the next frame.
    pub fn command(
        &mut self,
        cmd: AxisCommand,
        host_now: Instant,
    ) -> (Result<Reply, CommandError>, Output) {
        let (answer, off) = self.handle_command(cmd, host_now);
        (answer, if off { self.motor_off() } else { Output::NOTHING })
    }

    /// The stop-all signal changed to `s`. `send` holds Stop for category 0.
    pub fn stop_all(&mut self, s: StopAll) -> Output {
        self.stop = s;
        if self.apply_stop_all() {
            self.motor_off()
        } else {
            Output::NOTHING
        }
    }

    /// The link came up (handshake done): an axis that was offline becomes disabled (or
    /// stopped while stop-all is latched); the next frame starts the count afresh.
    pub fn link_up(&mut self, detail: String) {
        self.link_up = true;
        self.last = None;
        self.quality = LinkQuality::new(self.cfg.board.tick_hz);
        self.event(EventKind::Link { up: true, detail });
        self.leave_offline();
    }

    /// Telemetry came back on a link that was up but silent: as after a handshake, an axis
    /// that was offline (a trip cleared while the link was down) is linked again.
    pub fn telemetry_resumed(&mut self) {
        self.link_up = true;
        self.event(EventKind::Link { up: true, detail: "telemetry resumed".to_owned() });
        self.leave_offline();
    }

    /// Offline becomes disabled (or stopped while stop-all is latched); motion never starts.
    fn leave_offline(&mut self) {
        if matches!(self.motion, Motion::Offline) {
            self.motion = if self.stop.latched { Motion::Stopped } else { Motion::Disabled };
        }
    }

    /// A frame the decoder rejected (CRC, framing): counts against the link's quality.
    pub fn bad_frame(&mut self) {
        self.quality.bad_frame();
    }

    /// Whether the core counts the link as up.
    pub fn is_linked(&self) -> bool {
        self.link_up
    }

    /// The board restarted its sequence (after Configure): the next frame is not compared
    /// with the previous one.
    pub fn restart_sequence(&mut self) {
        self.last = None;
    }

    /// The link was lost (`why` in words): a running axis trips on link loss.
    pub fn link_lost(&mut self, why: &str) {
        self.link_up = false;
        self.last = None;
        self.event(EventKind::Link { up: false, detail: why.to_owned() });
        if !matches!(self.motion, Motion::Tripped(_) | Motion::Offline) {
            let was_on = self.motion.driven();
            self.latch_trip(
                TripCause::LinkLoss,
                format!(
                    "{why}{}: check the cable, the board's power and its USB connection",
                    if was_on { " while the motor was on" } else { "" }
                ),
            );
        }
    }

    /// Stop, at once: the duty is zero from now on (disable, stop-all category 0, shutdown).
    pub fn motor_off(&mut self) -> Output {
        self.duty = 0.0;
        if let Some(slot) = self.motion.drive_slot() {
            *slot = None;
        }
        Output { send: Some(HostMessage::Stop { seq: self.echo_seq() }), ticks: 0 }
    }

    /// The answer to the latest frame: the duty while the motor is on, else Stop. It echoes
    /// the telemetry seq being answered, so the board's ack_seq shows the reply latency in
    /// ticks (docs/protocol.md).
    pub fn answer(&self) -> HostMessage {
        let seq = self.echo_seq();
        if self.motion.driven() {
            let sign = if self.cfg.scale.invert_motor { -1.0 } else { 1.0 };
            let full = f64::from(protocol::DUTY_FULL_SCALE);
            let wire = (sign * self.duty / 100.0 * full).round().clamp(-full, full) as i16;
            HostMessage::Duty { seq, duty: wire }
        } else {
            HostMessage::Stop { seq }
        }
    }

    fn echo_seq(&self) -> u16 {
        self.last.map_or(0, |t| t.seq)
    }

    /// Takes the events raised since the last call, oldest first, each with the board time
    /// it happened at (None while the link is down).
    pub fn take_events(&mut self) -> std::vec::Drain<'_, (Option<f64>, EventKind)> {
        self.events.drain(..)
    }

    pub(super) fn event(&mut self, kind: EventKind) {
        let board_t = self.link_up.then_some(self.t);
        self.events.push((board_t, kind));
    }

    /// Writes the core's part of the snapshot (everything but the link's figures).
    pub fn fill_snapshot(&self, s: &mut AxisSnapshot) {
        s.state = self.motion.state();
        s.homed = self.homed;
        s.position = self.position;
        s.target = self.setpoint.position;
        s.goal = self.goal;
        s.velocity = self.velocity;
        s.following_error = self.setpoint.position - self.position;
        s.following_error_band = self.supervisor.following_error_band(self.setpoint.velocity);
        s.duty = self.duty;
        let trip = self.motion.trip();
        if s.trip.as_ref() != trip {
            s.trip = trip.cloned();
        }
        s.board_time_s = self.t;
        s.stop_latched = self.stop.latched;
        s.in_position = self.moves.in_position;
        s.moves_done = self.moves.moves_done;
        s.move_peak_following_error = self.moves.peak_following_error;
        s.move_settle_s = self.moves.settle_s;
        s.inputs = self.inputs;
    }
}

#[cfg(test)]
mod tests {
    //! The core driven frame by frame with made-up host times: no runtime, no board. The
    //! demo gantry's X axis (configs/demo-greenhouse.toml, invented numbers) is the subject.
    use std::time::Duration;

    use super::super::motion::{AfterStop, Run, StopRun};
    use super::*;
    use crate::config::MachineConfig;
    use crate::engine::experiment::{ExperimentBounds, ExperimentSpec};
    use crate::engine::refusal::Refusal;

    /// A board standing still at `count`, streaming at the configured tick.
    struct Frames {
        seq: u16,
        time_us: u32,
        tick_us: u32,
        /// Status bits the next frames carry.
        status: u8,
    }

    impl Frames {
        fn new(core: &AxisCore) -> Self {
            let tick_us = 1_000_000 / u32::from(core.cfg.board.tick_hz);
            Self { seq: 0, time_us: 0, tick_us, status: 0 }
        }

        fn next(&mut self, count: i32) -> Telemetry {
            let tm = Telemetry {
                seq: self.seq,
                board_time_us: self.time_us,
                count,
                inputs: 0,
                status: self.status,
                ack_seq: 0,
            };
            self.seq = self.seq.wrapping_add(1);
            self.time_us = self.time_us.wrapping_add(self.tick_us);
            tm
        }

        /// The next frame of a board that applies what the host answered (motor on with an
        /// ack of the previous answer while the core drives).
        fn applied(&mut self, core: &AxisCore, count: i32) -> Telemetry {
            let mut tm = self.next(count);
            if core.motion.driven() {
                tm.status |= crate::protocol::status::MOTOR_ON;
                tm.ack_seq = tm.seq.wrapping_sub(1);
            }
            tm
        }
    }

    fn linked_x(stop_category: u8) -> (AxisCore, Frames, Instant) {
        let cfg = MachineConfig::demo().expect("demo").axes[0].clone();
        let mut core = AxisCore::new(cfg, 1.0, StopAll { latched: false, category: stop_category });
        core.link_up("test link".to_owned());
        let frames = Frames::new(&core);
        (core, frames, Instant::now())
    }

    /// Linked, one frame in, enabled: steady at count 0.
    fn holding_x(stop_category: u8) -> (AxisCore, Frames, Instant) {
        let (mut core, mut f, now) = linked_x(stop_category);
        core.on_frame(&f.next(0), now);
        core.command(AxisCommand::Enable, now).0.expect("enables");
        assert_eq!(core.state(), AxisState::Steady);
        (core, f, now)
    }

    fn kinds(core: &mut AxisCore) -> Vec<EventKind> {
        core.take_events().map(|(_, k)| k).collect()
    }

    #[test]
    fn a_linked_axis_answers_stop_until_enabled_then_duty() {
        let (mut core, mut f, now) = linked_x(1);
        assert_eq!(core.state(), AxisState::Disabled);
        let out = core.on_frame(&f.next(0), now);
        assert_eq!(out.send, Some(HostMessage::Stop { seq: 0 }));
        assert_eq!(out.ticks, 1);
        let (answer, out) = core.command(AxisCommand::Enable, now);
        assert_eq!(answer, Ok(Reply::Done));
        assert_eq!(out.send, None, "enabling writes nothing until the next frame");
        assert_eq!(core.state(), AxisState::Steady);
        // Standing still on target: the duty answer echoes the frame's seq.
        let out = core.on_frame(&f.next(0), now);
        assert!(matches!(out.send, Some(HostMessage::Duty { seq: 1, .. })), "{out:?}");
        let k = kinds(&mut core);
        assert!(k.iter().any(|e| matches!(e, EventKind::Link { up: true, .. })), "{k:?}");
        assert!(k.iter().any(|e| matches!(e, EventKind::Operator { accepted: true, .. })));
    }

    #[test]
    fn lost_frames_are_counted_by_sequence() {
        let (mut core, mut f, now) = linked_x(1);
        core.on_frame(&f.next(0), now);
        f.next(0);
        f.next(0);
        assert_eq!(core.on_frame(&f.next(0), now).ticks, 3);
    }

    /// docs/protocol.md §8: the lost-frame count is the wrapping difference minus one; a
    /// seq that steps back is the board's restart at 0 after a repeated Configure.
    #[test]
    fn a_seq_that_restarts_is_not_counted_as_lost_frames() {
        let (mut core, mut f, now) = linked_x(1);
        f.seq = 65_534;
        core.on_frame(&f.next(0), now);
        assert_eq!(core.on_frame(&f.next(0), now).ticks, 1);
        assert_eq!(core.on_frame(&f.next(0), now).ticks, 1, "across the wrap");
        f.seq = 7;
        assert_eq!(core.on_frame(&f.next(0), now).ticks, 7, "7 ahead: 6 lost");
        f.seq = 2;
        assert_eq!(core.on_frame(&f.next(0), now).ticks, 1, "restarted after Configure");
    }

    #[test]
    fn an_encoder_jump_trips_and_the_answer_is_stop() {
        let (mut core, mut f, now) = holding_x(1);
        core.on_frame(&f.next(0), now);
        let jump = core.cfg.limits.encoder_jump_counts as i32 * 10;
        let out = core.on_frame(&f.next(jump), now);
        assert_eq!(core.state(), AxisState::Tripped);
        assert!(matches!(out.send, Some(HostMessage::Stop { .. })), "{out:?}");
        let k = kinds(&mut core);
        assert!(
            k.iter().any(
                |e| matches!(e, EventKind::Trip { trip } if trip.cause == TripCause::EncoderJump)
            ),
            "{k:?}"
        );
    }

    #[test]
    fn stop_all_category_0_writes_stop_at_once_and_release_never_restarts() {
        let (mut core, _, now) = holding_x(0);
        let out = core.stop_all(StopAll { latched: true, category: 0 });
        assert!(matches!(out.send, Some(HostMessage::Stop { .. })));
        assert_eq!(core.state(), AxisState::Stopped);
        let (answer, _) = core.command(AxisCommand::Enable, now);
        assert!(answer.is_err(), "enable is refused while stop-all is latched");
        let out = core.stop_all(StopAll { latched: false, category: 0 });
        assert_eq!(out.send, None);
        assert_eq!(core.state(), AxisState::Disabled);
    }

    #[test]
    fn stop_all_category_1_decelerates_before_power_goes() {
        let (mut core, mut f, now) = holding_x(1);
        let out = core.stop_all(StopAll { latched: true, category: 1 });
        assert_eq!(out.send, None, "category 1 keeps control while it ramps down");
        assert_eq!(core.state(), AxisState::Stopping);
        // Standing still already: the standstill check ends it within its wait.
        for _ in 0..300 {
            core.on_frame(&f.next(0), now);
        }
        assert_eq!(core.state(), AxisState::Stopped);
        assert!(matches!(core.answer(), HostMessage::Stop { .. }));
    }

    #[test]
    fn a_held_jog_key_stops_at_the_deadman_in_host_time() {
        let (mut core, mut f, t0) = holding_x(1);
        let pulse = AxisCommand::JogPulse { direction: 1, speed: 5.0 };
        core.command(pulse.clone(), t0).0.expect("first press");
        let repeat = t0 + Duration::from_secs_f64(core.cfg.jog.repeat_window_s / 2.0);
        core.command(pulse, repeat).0.expect("repeat");
        assert_eq!(core.state(), AxisState::Jogging);
        // 50 ms of frames within the deadman: the jog runs (the target moves on).
        for _ in 0..50 {
            core.on_frame(&f.next(0), repeat);
        }
        assert_eq!(core.state(), AxisState::Jogging);
        assert!(core.setpoint.velocity > 0.0);
        // Frames keep coming but no key repeat: past the deadman the jog decelerates.
        let late = repeat + Duration::from_secs_f64(core.cfg.jog.deadman_s * 2.0);
        core.on_frame(&f.next(0), late);
        assert_eq!(core.state(), AxisState::Stopping);
    }

    #[test]
    fn link_loss_while_holding_trips_and_clearing_waits_for_the_link() {
        let (mut core, _, now) = holding_x(1);
        core.link_lost("no valid telemetry for 100 ms");
        assert_eq!(core.state(), AxisState::Tripped);
        assert!(core.command(AxisCommand::ClearTrip, now).0.is_err());
        core.link_up("relinked".to_owned());
        assert_eq!(core.command(AxisCommand::ClearTrip, now).0, Ok(Reply::Done));
        assert_eq!(core.state(), AxisState::Disabled);
    }

    #[test]
    fn a_test_starts_only_from_holding() {
        let (mut core, mut f, now) = linked_x(1);
        core.on_frame(&f.next(0), now);
        let spec = ExperimentSpec::DutySteps { steps: vec![(10.0, 0.01)], settle_s: 0.01 };
        let bounds = ExperimentBounds { travel: 1.0, seconds: 1.0 };
        let cmd = AxisCommand::Experiment { spec, bounds };
        assert!(core.command(cmd.clone(), now).0.is_err(), "disabled: refused");
        core.command(AxisCommand::Enable, now).0.expect("enables");
        assert_eq!(core.command(cmd, now).0, Ok(Reply::Done));
        assert_eq!(core.state(), AxisState::Trialing);
        for _ in 0..40 {
            core.on_frame(&f.next(0), now);
        }
        assert_ne!(core.state(), AxisState::Trialing, "the steps and settle time have passed");
    }

    // ---- Transitions carry their own data (motion.rs): what a state leaves behind. ----

    /// Holding, and homed by declaration (a test shortcut: moves need a homed axis).
    fn homed_x(stop_category: u8) -> (AxisCore, Frames, Instant) {
        let (mut core, f, now) = holding_x(stop_category);
        core.homed = true;
        (core, f, now)
    }

    /// The raw count of a board whose axis follows the host's setpoint exactly (a perfect
    /// drive, one tick late), up to an end stop at raw count `stop` on the positive side.
    fn following(core: &AxisCore, stop: i32) -> i32 {
        let raw = (core.setpoint.position - core.offset) * core.cfg.scale.counts_per_unit;
        (raw.round() as i32).min(stop)
    }

    #[test]
    fn a_stop_during_a_move_keeps_nothing_of_the_move() {
        let (mut core, mut f, now) = homed_x(1);
        let l = &core.cfg.limits;
        let goal = (l.soft_min + 0.25 * (l.soft_max - l.soft_min)).max(l.soft_min + 1.0);
        core.command(AxisCommand::MoveTo(goal), now).0.expect("moves");
        let Some(Run::Moving(m)) = core.motion.run() else { panic!("{:?}", core.motion) };
        assert!(m.ramp.is_some() && m.planned_end > core.t && m.settle_since.is_none());
        for _ in 0..5 {
            let tm = f.applied(&core, following(&core, i32::MAX));
            core.on_frame(&tm, now);
        }
        core.command(AxisCommand::Stop, now).0.expect("stops");
        // The stop holds its own ramp and what follows it; the move's goal, planned end and
        // dwell timer are gone with the move.
        let Some(Run::Stopping(StopRun::Ramp { ramp, then })) = core.motion.run() else {
            panic!("{:?}", core.motion)
        };
        assert_eq!(*then, AfterStop::Hold);
        assert_eq!(core.goal, ramp.profile.goal());
        assert!((core.goal - goal).abs() > 1.0, "the stop aims near here, not at the goal");
        for _ in 0..2000 {
            if core.state() == AxisState::Steady {
                break;
            }
            let tm = f.applied(&core, following(&core, i32::MAX));
            core.on_frame(&tm, now);
        }
        assert_eq!(core.state(), AxisState::Steady);
        assert_eq!(core.moves.moves_done, 0, "the stopped move never arrived");
        assert!(!core.moves.in_position);
    }

    #[test]
    fn clearing_a_trip_leaves_no_trip_data() {
        let (mut core, mut f, now) = holding_x(1);
        core.on_frame(&f.next(0), now);
        core.on_frame(&f.next(core.cfg.limits.encoder_jump_counts as i32 * 10), now);
        let cause = core.motion.trip().map(|t| t.cause);
        assert_eq!(cause, Some(TripCause::EncoderJump));
        let mut snap = AxisSnapshot::offline("x", "mm");
        core.fill_snapshot(&mut snap);
        assert!(snap.trip.is_some());
        assert_eq!(core.command(AxisCommand::ClearTrip, now).0, Ok(Reply::Done));
        assert!(matches!(core.motion, Motion::Disabled), "{:?}", core.motion);
        assert!(core.motion.trip().is_none());
        core.fill_snapshot(&mut snap);
        assert_eq!((snap.state, snap.trip), (AxisState::Disabled, None));
        // Enabled again, it holds where it is with no drive left over from before the trip.
        core.command(AxisCommand::Enable, now).0.expect("enables");
        assert!(core.motion.drive().is_none());
    }

    /// The demo's lift (z) homes by pushing into its top stop (configs/demo-greenhouse.toml).
    fn holding_z() -> (AxisCore, Frames, Instant) {
        let cfg = MachineConfig::demo().expect("demo").axes[2].clone();
        assert_eq!(cfg.homing.method, crate::config::HomingMethod::HardStop);
        let mut core = AxisCore::new(cfg, 1.0, StopAll { latched: false, category: 1 });
        core.link_up("test link".to_owned());
        let mut f = Frames::new(&core);
        let now = Instant::now();
        core.on_frame(&f.next(0), now);
        core.command(AxisCommand::Enable, now).0.expect("enables");
        (core, f, now)
    }

    #[test]
    fn a_homing_duty_limit_lives_and_ends_with_homing() {
        let (mut core, mut f, now) = holding_z();
        // The end stop 3 mm above the start.
        let stop = (3.0 * core.cfg.scale.counts_per_unit) as i32;
        let hard_stop_duty = core.cfg.homing.hard_stop_duty;
        core.command(AxisCommand::Home, now).0.expect("homes");
        let mut limited = false;
        for _ in 0..5000 {
            if core.state() != AxisState::Homing {
                break;
            }
            let tm = f.applied(&core, following(&core, stop));
            core.on_frame(&tm, now);
            if let Some(lim) = core.motion.duty_limit() {
                limited = true;
                assert_eq!(lim, hard_stop_duty);
                assert!(core.duty.abs() <= lim + 1e-9, "duty {} over the limit", core.duty);
            }
        }
        assert!(limited, "the push ran under the homing duty limit");
        assert_eq!(core.state(), AxisState::Steady, "{:?}", core.motion.trip());
        assert!(core.homed);
        assert!(core.motion.homing().is_none() && core.motion.duty_limit().is_none());
    }

    #[test]
    fn stopping_homing_drops_its_run_and_duty_limit() {
        let (mut core, mut f, now) = holding_z();
        core.command(AxisCommand::Home, now).0.expect("homes");
        core.on_frame(&f.next(0), now);
        assert_eq!(core.motion.duty_limit(), Some(core.cfg.homing.hard_stop_duty));
        core.command(AxisCommand::Stop, now).0.expect("stops");
        assert_eq!(core.state(), AxisState::Stopping);
        assert!(core.motion.homing().is_none() && core.motion.duty_limit().is_none());
        assert!(!core.homed, "a stopped homing run homes nothing");
    }

    #[test]
    fn a_held_jog_key_lives_in_the_jog_and_a_tap_expires_on_its_own() {
        let (mut core, mut f, t0) = holding_x(1);
        let pulse = AxisCommand::JogPulse { direction: 1, speed: 5.0 };
        core.command(pulse.clone(), t0).0.expect("first press");
        assert!(core.tap.is_some(), "a first press waits for its repeat");
        assert_eq!(core.state(), AxisState::Moving, "a tap is a short step");
        let repeat = t0 + Duration::from_secs_f64(core.cfg.jog.repeat_window_s / 2.0);
        core.command(pulse, repeat).0.expect("repeat");
        let Some(Run::Jogging(j)) = core.motion.run() else { panic!("{:?}", core.motion) };
        assert_eq!(j.direction, 1);
        assert!(j.deadman > repeat);
        assert!(core.tap.is_none(), "while jogging the key lives in the jog");
        core.command(AxisCommand::JogRelease, repeat).0.expect("release");
        assert_eq!(core.state(), AxisState::Stopping);
        assert!(core.tap.is_none());
        // A tap in the other direction while the release ramp runs, then no repeat: once its
        // window has passed the key memory is gone.
        let tap = AxisCommand::JogPulse { direction: -1, speed: 5.0 };
        core.command(tap, repeat).0.expect("a tap during an operator's stop");
        assert!(core.tap.is_some());
        let late = repeat + Duration::from_secs_f64(core.cfg.jog.repeat_window_s * 2.0);
        core.on_frame(&f.next(0), late);
        assert!(core.tap.is_none());
    }

    #[test]
    fn a_jog_press_cannot_turn_a_stop_all_ramp_back_into_motion() {
        let (mut core, mut f, now) = homed_x(1);
        core.stop_all(StopAll { latched: true, category: 1 });
        let Some(Run::Stopping(StopRun::Ramp { then, .. })) = core.motion.run() else {
            panic!("{:?}", core.motion)
        };
        assert_eq!(*then, AfterStop::Off);
        let press = AxisCommand::JogPulse { direction: 1, speed: 5.0 };
        let (answer, _) = core.command(press, now);
        assert!(
            matches!(answer, Err(CommandError::Refused { reason: Refusal::StopAllLatched, .. })),
            "{answer:?}"
        );
        assert_eq!(core.state(), AxisState::Stopping);
        for _ in 0..300 {
            core.on_frame(&f.next(0), now);
        }
        assert_eq!(core.state(), AxisState::Stopped);
    }

    #[test]
    fn stop_all_released_during_its_ramp_ends_disabled_not_stuck_stopped() {
        let (mut core, mut f, now) = holding_x(1);
        core.stop_all(StopAll { latched: true, category: 1 });
        assert_eq!(core.state(), AxisState::Stopping);
        core.stop_all(StopAll { latched: false, category: 1 });
        assert_eq!(core.state(), AxisState::Stopping, "the stop runs to its end");
        for _ in 0..300 {
            core.on_frame(&f.next(0), now);
        }
        assert_eq!(core.state(), AxisState::Disabled);
        assert!(matches!(core.answer(), HostMessage::Stop { .. }));
        assert_eq!(core.command(AxisCommand::Enable, now).0, Ok(Reply::Done));
    }

    #[test]
    fn a_trip_during_a_test_files_the_test_and_keeps_only_the_trip() {
        let (mut core, mut f, now) = holding_x(1);
        let spec = ExperimentSpec::DutySteps { steps: vec![(10.0, 1.0)], settle_s: 0.5 };
        let bounds = ExperimentBounds { travel: 1.0, seconds: 2.0 };
        core.command(AxisCommand::Experiment { spec, bounds }, now).0.expect("starts");
        for _ in 0..3 {
            core.on_frame(&f.next(0), now);
        }
        assert!(matches!(core.motion.run(), Some(Run::Trialing(_))));
        f.status = crate::protocol::status::DRIVER_FAULT;
        core.on_frame(&f.next(0), now);
        assert_eq!(core.motion.trip().map(|t| t.cause), Some(TripCause::BoardFault));
        let Ok(Reply::Experiment(Some(result))) = core.command(AxisCommand::TakeExperiment, now).0
        else {
            panic!("the cut-short test is filed")
        };
        assert!(result.aborted.as_deref().is_some_and(|w| w.starts_with("trip")), "{result:?}");
        assert!(!result.samples.is_empty());
    }

    #[test]
    fn an_axis_cleared_while_the_link_was_down_links_again_when_telemetry_resumes() {
        let (mut core, mut f, now) = holding_x(1);
        core.on_frame(&f.next(0), now);
        core.on_frame(&f.next(core.cfg.limits.encoder_jump_counts as i32 * 10), now);
        assert_eq!(core.state(), AxisState::Tripped);
        // The link drops while tripped (the trip keeps its own cause), and the trip is
        // cleared meanwhile: with no link the axis is offline.
        core.link_lost("no valid telemetry for 100 ms");
        assert_eq!(core.command(AxisCommand::ClearTrip, now).0, Ok(Reply::Done));
        assert_eq!(core.state(), AxisState::Offline);
        // Frames come back on the same session (no new handshake).
        core.telemetry_resumed();
        core.restart_sequence();
        let out = core.on_frame(&f.next(0), now);
        assert_eq!(core.state(), AxisState::Disabled, "linked again, motor still off");
        assert!(matches!(out.send, Some(HostMessage::Stop { .. })));
    }
}
