//! Operator commands and stop-all: what each does in each state, and why it is refused.

use std::time::Duration;

use tokio::time::Instant;

use super::core::AxisCore;
use super::motion::{
    AfterStop, Driven, HomingDrive, JogRun, JogTap, Motion, MoveRun, Ramp, Run, StopRun,
};
use super::{AxisCommand, CommandError, Reply};
use crate::control::{Limits, Profile};
use crate::engine::events::EventKind;
use crate::engine::experiment::{ExperimentBounds, ExperimentRun, ExperimentSpec};
use crate::engine::homing::HomingRun;
use crate::engine::refusal::{Asked, Refusal};
use crate::engine::snapshot::TripCause;

/// Continuous jog without homing has no soft limit to run to; it aims this far away and
/// relies on the operator's key (and the deadman) to stop it.
const UNHOMED_JOG_REACH: f64 = 1.0e6;

impl AxisCore {
    /// Handles an operator command. Returns the answer and whether the motor must go off now.
    pub(super) fn handle_command(
        &mut self,
        cmd: AxisCommand,
        now: Instant,
    ) -> (Result<Reply, CommandError>, bool) {
        let log = cmd.is_operator_action().then(|| cmd.words());
        let (answer, off) = self.dispatch(cmd, now);
        if let Some(action) = log {
            let (accepted, reason) = match &answer {
                Ok(_) => (true, None),
                Err(CommandError::Refused { reason, .. }) => (false, Some(reason.to_string())),
                Err(e) => (false, Some(e.to_string())),
            };
            self.event(EventKind::Operator { action, accepted, reason });
        }
        (answer, off)
    }

    fn dispatch(&mut self, cmd: AxisCommand, now: Instant) -> (Result<Reply, CommandError>, bool) {
        let latched = self.stop.latched;
        match cmd {
            AxisCommand::Enable => match self.motion {
                Motion::Disabled if latched => (Err(self.refuse(Refusal::StopAllLatched)), false),
                Motion::Disabled => {
                    self.hold_here();
                    self.motion = Motion::Driven(Driven { drive: None, run: Run::Steady });
                    self.outside_limits = true;
                    (Ok(Reply::Done), false)
                }
                Motion::Driven(_) => (Ok(Reply::Done), false),
                _ => {
                    let state = self.state();
                    (Err(self.refuse(Refusal::NotNow { asked: Asked::Enable, state })), false)
                }
            },
            AxisCommand::Disable => {
                let was_on = self.motion.driven();
                self.end_experiment(Some("disabled by the operator".to_owned()));
                if was_on {
                    self.motion = Motion::Disabled;
                    self.tap = None;
                }
                (Ok(Reply::Done), was_on)
            }
            AxisCommand::MoveTo(goal) => {
                (self.start_move(goal, Limits::of(&self.cfg.motion)), false)
            }
            AxisCommand::MoveWithin { goal, limits } => (self.start_move(goal, limits), false),
            AxisCommand::Stop => {
                // A trial stops like a move: from the speed it has now.
                let tested = self.end_experiment(Some("stopped by the operator".to_owned()));
                if tested {
                    self.setpoint.velocity = self.velocity;
                }
                let moving = matches!(
                    self.motion.run(),
                    Some(Run::Moving(_) | Run::Jogging(_) | Run::Homing(_))
                );
                if tested || moving {
                    self.tap = None;
                    self.begin_stop(AfterStop::Hold);
                }
                (Ok(Reply::Done), false)
            }
            AxisCommand::ClearTrip => (self.clear_trip(), false),
            AxisCommand::Home => (self.start_homing(), false),
            AxisCommand::JogStep { distance, speed } => (self.jog_step(distance, speed), false),
            AxisCommand::JogPulse { direction, speed } => {
                (self.jog_pulse(direction, speed, now), false)
            }
            AxisCommand::JogRelease => {
                if matches!(self.motion.run(), Some(Run::Jogging(_))) {
                    self.begin_stop(AfterStop::Hold);
                }
                (Ok(Reply::Done), false)
            }
            AxisCommand::SetController(c, by) => {
                let changes = controller_changes(&self.cfg.controller, &c);
                if !changes.is_empty() {
                    self.event(EventKind::Gains { changes, by });
                }
                self.controller.set_config(&c);
                self.cfg.controller = c;
                (Ok(Reply::Done), false)
            }
            // The link meter is the shell's: it answers link reports before they get here.
            AxisCommand::LinkReport { .. } => (Ok(Reply::Done), false),
            AxisCommand::History => (Ok(Reply::History(self.history.to_vec())), false),
            AxisCommand::LiveController => {
                (Ok(Reply::Controller(Box::new(self.cfg.controller.clone()))), false)
            }
            AxisCommand::Experiment { spec, bounds } => {
                (self.start_experiment(spec, bounds), false)
            }
            AxisCommand::TakeExperiment => {
                (Ok(Reply::Experiment(self.experiment_result.take())), false)
            }
        }
    }

    /// Applies the stop-all signal. Returns true when the motor must go off at once.
    pub(super) fn apply_stop_all(&mut self) -> bool {
        let s = self.stop;
        self.event(EventKind::Operator {
            action: if s.latched {
                format!("stop-all (category {})", s.category)
            } else {
                "release stop-all".to_owned()
            },
            accepted: true,
            reason: None,
        });
        if !s.latched {
            if matches!(self.motion, Motion::Stopped) {
                // Releasing never restarts motion.
                self.motion = if self.link_up { Motion::Disabled } else { Motion::Offline };
            }
            return false;
        }
        self.tap = None;
        if self.end_experiment(Some("stop-all".to_owned())) {
            self.setpoint.velocity = self.velocity;
        }
        match self.motion {
            Motion::Offline | Motion::Tripped(_) | Motion::Stopped => false,
            Motion::Disabled => {
                self.motion = Motion::Stopped;
                false
            }
            Motion::Driven(_) if s.category == 0 => {
                self.motion = Motion::Stopped;
                true
            }
            // Homing, a jog or a move is dropped for the ramp.
            Motion::Driven(_) => {
                self.begin_stop(AfterStop::Off);
                false
            }
        }
    }

    /// Starts a controlled deceleration at the axis's maximum acceleration.
    ///
    /// The ramp starts from the measured position (not the lagging setpoint) at the setpoint's
    /// velocity: a stop must cover the least ground, and the small step in the P term is the
    /// price of that.
    /// Only a driven axis stops this way; on any other it does nothing.
    pub(super) fn begin_stop(&mut self, then: AfterStop) {
        let from = crate::control::Setpoint { position: self.position, ..self.setpoint };
        let profile = Profile::stop(from, Limits::of(&self.cfg.motion));
        let ramp = Ramp { profile, t0: self.t };
        self.set_run(Run::Stopping(StopRun::Ramp { ramp, then }));
        self.goal = profile.goal();
        self.moves.leave();
    }

    /// A driven axis's motion becomes `run` (its drive goes on). An axis that is not
    /// driven is left alone: only enable turns a motor on.
    fn set_run(&mut self, run: Run) {
        if let Some(r) = self.motion.run_mut() {
            *r = run;
        }
    }

    fn require_motion_ready(&self, asked: Asked) -> Result<(), CommandError> {
        match self.motion.run() {
            Some(Run::Steady | Run::Moving(_)) => Ok(()),
            _ => Err(self.refuse(Refusal::NotNow { asked, state: self.state() })),
        }
    }

    /// An absolute move within `lim`, each limit capped at the axis's own.
    fn start_move(&mut self, goal: f64, lim: Limits) -> Result<Reply, CommandError> {
        if !self.homed {
            return Err(self.refuse(Refusal::NotHomed));
        }
        let l = &self.cfg.limits;
        if !goal.is_finite() || goal < l.soft_min || goal > l.soft_max {
            let (min, max, unit) = (l.soft_min, l.soft_max, self.cfg.scale.unit.clone());
            return Err(self.refuse(Refusal::OutsideSoftLimits { goal, min, max, unit }));
        }
        self.require_motion_ready(Asked::Move)?;
        self.plan_move(goal, lim.within(Limits::of(&self.cfg.motion)));
        Ok(Reply::Done)
    }

    /// A profiled move whose completion waits for the in-position dwell.
    fn plan_move(&mut self, goal: f64, lim: Limits) {
        let profile = Profile::plan(self.setpoint, goal, lim);
        self.set_run(Run::Moving(MoveRun {
            ramp: Some(Ramp { profile, t0: self.t }),
            planned_end: self.t + profile.duration(),
            settle_since: None,
        }));
        self.goal = goal;
        self.moves.start(self.t);
    }

    /// The jog speed allowed now: capped before homing.
    fn jog_speed(&self, asked: f64) -> f64 {
        let cap =
            if self.homed { self.cfg.motion.max_velocity } else { self.cfg.jog.unhomed_speed };
        asked.abs().min(cap).max(f64::MIN_POSITIVE)
    }

    /// Where a jog toward `direction` may go: the soft limit once homed (the profile then
    /// decelerates to stop inside it), anywhere before.
    fn jog_reach(&self, direction: f64) -> f64 {
        let l = &self.cfg.limits;
        match (self.homed, direction > 0.0) {
            (true, true) => l.soft_max,
            (true, false) => l.soft_min,
            (false, true) => self.position + UNHOMED_JOG_REACH,
            (false, false) => self.position - UNHOMED_JOG_REACH,
        }
    }

    fn jog_step(&mut self, distance: f64, speed: f64) -> Result<Reply, CommandError> {
        if !distance.is_finite() || distance == 0.0 {
            return Err(
                self.refuse(Refusal::BadValue("a jog step needs a finite, non-zero distance"))
            );
        }
        self.require_motion_ready(Asked::Jog)?;
        let reach = self.jog_reach(distance.signum());
        let capped = self.step_goal(distance);
        let goal = if distance > 0.0 { capped.min(reach) } else { capped.max(reach) };
        let dir = distance.signum();
        // Outside a limit, a step outwards would be clamped into a step inwards: refuse it.
        if (goal - self.setpoint.position) * dir < f64::EPSILON {
            return Err(self.refuse(Refusal::AtSoftLimit));
        }
        // Already a full step ahead: the press changes nothing (nothing queues).
        if (goal - self.goal) * dir > f64::EPSILON {
            self.plan_move(goal, Limits::of(&self.cfg.motion).slower(self.jog_speed(speed)));
        }
        Ok(Reply::Done)
    }

    /// Where a jog step of `distance` may aim: one step beyond the present goal, but never
    /// more than one step beyond where the setpoint is now, so presses made while a step is
    /// still moving never queue up (30 quick presses of 10 mm once queued 300 mm that kept
    /// the axis moving long after the last key). Standing still, both are the same.
    fn step_goal(&self, distance: f64) -> f64 {
        let beyond_goal = self.goal + distance;
        let beyond_here = self.setpoint.position + distance;
        if distance > 0.0 {
            beyond_goal.min(beyond_here)
        } else {
            beyond_goal.max(beyond_here)
        }
    }

    fn jog_pulse(
        &mut self,
        direction: i8,
        speed: f64,
        now: Instant,
    ) -> Result<Reply, CommandError> {
        if direction == 0 || !speed.is_finite() || speed <= 0.0 {
            return Err(self.refuse(Refusal::BadValue("a jog needs a direction and a speed > 0")));
        }
        let window = Duration::from_secs_f64(self.cfg.jog.repeat_window_s);
        let deadman = Duration::from_secs_f64(self.cfg.jog.deadman_s);
        let dir = f64::from(direction.signum());
        // A repeat of the held key: keep continuous motion up...
        if let Some(Run::Jogging(j)) = self.motion.run_mut() {
            if j.direction == direction {
                j.deadman = now + deadman;
                return Ok(Reply::Done);
            }
        } else if self
            .tap
            .is_some_and(|t| t.direction == direction && now.duration_since(t.first_at) <= window)
        {
            // ...or start it: the first press's key came again within the window.
            self.require_jog_ready()?;
            let reach = self.jog_reach(dir);
            if (reach - self.position) * dir <= 0.0 {
                self.tap = None;
                return Err(self.refuse(Refusal::AtSoftLimit));
            }
            let lim = Limits::of(&self.cfg.motion).slower(self.jog_speed(speed));
            let profile = Profile::plan(self.setpoint, reach, lim);
            let ramp = Ramp { profile, t0: self.t };
            self.set_run(Run::Jogging(JogRun { ramp, direction, deadman: now + deadman }));
            self.tap = None;
            self.goal = reach;
            self.moves.leave();
            return Ok(Reply::Done);
        }
        // A first press (or a new direction): a short step, so a tap moves a little and a
        // held key does not run on through the terminal's auto-repeat delay.
        self.require_jog_ready()?;
        if matches!(self.motion.run(), Some(Run::Jogging(_))) {
            self.begin_stop(AfterStop::Hold);
            return Ok(Reply::Done);
        }
        let step = self.cfg.jog.first_step * dir;
        let reach = self.jog_reach(dir);
        let capped = self.step_goal(step);
        let goal = if dir > 0.0 { capped.min(reach) } else { capped.max(reach) };
        self.tap = Some(JogTap { direction, first_at: now });
        if (goal - self.goal) * dir > f64::EPSILON {
            self.plan_move(goal, Limits::of(&self.cfg.motion).slower(self.jog_speed(speed)));
        }
        Ok(Reply::Done)
    }

    /// A jog may start while steady, moving, jogging or in an operator's stop (a tap during
    /// the deceleration), never during a stop that ends with power off: that is stop-all's,
    /// and a jog would turn it back into motion with stop-all still latched.
    fn require_jog_ready(&self) -> Result<(), CommandError> {
        match self.motion.run() {
            Some(Run::Steady | Run::Moving(_) | Run::Jogging(_)) => Ok(()),
            Some(Run::Stopping(StopRun::Ramp { then: AfterStop::Hold, .. })) => Ok(()),
            Some(Run::Stopping(_)) if self.stop.latched => {
                Err(self.refuse(Refusal::StopAllLatched))
            }
            _ => Err(self.refuse(Refusal::NotNow { asked: Asked::Jog, state: self.state() })),
        }
    }

    fn start_homing(&mut self) -> Result<Reply, CommandError> {
        match self.motion.run() {
            Some(Run::Steady) => {}
            Some(Run::Homing(_)) => return Ok(Reply::Done),
            _ => {
                let state = self.state();
                return Err(self.refuse(Refusal::NotNow { asked: Asked::Home, state }));
            }
        }
        let min_speed =
            (200.0 / self.cfg.scale.counts_per_unit).max(0.02 * self.cfg.motion.max_velocity);
        let run = HomingRun::new(
            &self.cfg.homing,
            &self.cfg.scale.unit,
            min_speed.min(0.5 * self.cfg.homing.touch_speed),
            self.cfg.limits.following_error,
        );
        self.set_run(Run::Homing(Box::new(HomingDrive { run, ramp: None, duty_limit: None })));
        self.homed = false;
        self.moves.start(self.t);
        Ok(Reply::Done)
    }

    fn start_experiment(
        &mut self,
        spec: ExperimentSpec,
        bounds: ExperimentBounds,
    ) -> Result<Reply, CommandError> {
        if !matches!(self.motion.run(), Some(Run::Steady)) {
            return Err(self.refuse(Refusal::NotNow { asked: Asked::Trial, state: self.state() }));
        }
        let positive = |v: f64| v.is_finite() && v > 0.0;
        if !positive(bounds.travel) || !positive(bounds.seconds) {
            return Err(
                self.refuse(Refusal::BadValue("a trial needs a travel bound and a time bound > 0"))
            );
        }
        self.experiment_result = None;
        let run = ExperimentRun::new(spec, bounds, self.position, self.count, &self.cfg.scale.unit);
        self.set_run(Run::Trialing(Box::new(run)));
        self.moves.leave();
        Ok(Reply::Done)
    }

    fn clear_trip(&mut self) -> Result<Reply, CommandError> {
        let Some(trip) = self.motion.trip() else { return Ok(Reply::Done) };
        if trip.cause == TripCause::LinkLoss && !self.link_up {
            return Err(self.refuse(Refusal::LinkStillDown));
        }
        self.goal = self.position;
        self.setpoint.position = self.position;
        self.setpoint.velocity = 0.0;
        self.setpoint.acceleration = 0.0;
        self.supervisor.reset();
        // The trip record goes with the state.
        self.motion = if !self.link_up {
            Motion::Offline
        } else if self.stop.latched {
            Motion::Stopped
        } else {
            Motion::Disabled
        };
        Ok(Reply::Done)
    }

    pub(super) fn refuse(&self, reason: Refusal) -> CommandError {
        CommandError::Refused { axis: self.cfg.name.clone(), reason }
    }
}

/// The controller keys that differ between `old` and `new`, as `key old → new`, in the
/// configuration's own key names (read through serde, so every key is covered).
fn controller_changes(
    old: &crate::config::ControllerConfig,
    new: &crate::config::ControllerConfig,
) -> Vec<String> {
    let (Ok(toml::Value::Table(a)), Ok(toml::Value::Table(b))) =
        (toml::Value::try_from(old), toml::Value::try_from(new))
    else {
        return Vec::new();
    };
    b.iter()
        .filter_map(|(k, v)| {
            let was = a.get(k)?;
            (was != v).then(|| format!("{k} {was} → {v}"))
        })
        .collect()
}
