//! One telemetry frame: unwrap, advance the setpoint (profile, jog, homing), control,
//! supervise, record.

use tokio::time::Instant;

use super::core::AxisCore;
use super::motion::{AfterStop, Motion, Ramp, Run, StopRun};
use crate::control::{Limits, Profile, Setpoint};
use crate::engine::events::EventKind;
use crate::engine::experiment::Drive;
use crate::engine::history::Sample;
use crate::engine::homing::{HomingView, Order};
use crate::engine::snapshot::{AxisState, Trip, TripCause};
use crate::engine::supervisor::Observation;
use crate::protocol::{inputs, status, Telemetry};

/// Time constant of the velocity estimate's low-pass filter, s.
const VELOCITY_FILTER_S: f64 = 0.01;
/// Below this fraction of the axis's top speed it counts as standing still (category 1).
const STANDSTILL_FRACTION: f64 = 0.005;
/// Longest wait for standstill after a category 1 ramp before power is removed anyway, s.
const STANDSTILL_WAIT_S: f64 = 0.25;

/// Ticks from one frame's seq to the next's (1: none lost). A step back (a wrapping
/// difference of half the range or more) is the board restarting its count after a
/// Configure the host sent again, not 65 000 lost frames: a gap that long would have ended
/// the link (its timeout is well under the 32 s that half the range lasts at 1 kHz).
fn ticks_between(prev: u16, now: u16) -> u32 {
    match now.wrapping_sub(prev) {
        d if d >= 0x8000 => 1,
        d => u32::from(d),
    }
}

impl AxisCore {
    /// Runs the loop for one frame; returns the ticks it accounts for by sequence number.
    pub(super) fn on_telemetry(&mut self, tm: &Telemetry, now: Instant) -> u32 {
        let tick_s = 1.0 / f64::from(self.cfg.board.tick_hz);
        let (dt, ticks, delta) = match &self.last {
            None => (tick_s, 1u32, 0i64),
            Some(prev) => {
                let dt = f64::from(tm.board_time_us.wrapping_sub(prev.board_time_us)) * 1e-6;
                let ticks = ticks_between(prev.seq, tm.seq);
                // The wire count is 32 bits and wraps; differences stay right across a wrap.
                let delta = i64::from(tm.count.wrapping_sub(prev.count));
                (dt, ticks, delta)
            }
        };
        self.last = Some(*tm);
        self.inputs = tm.inputs;
        let delta = if self.cfg.scale.invert_encoder { -delta } else { delta };
        self.count += delta;
        self.t += dt;
        self.position = self.count as f64 / self.cfg.scale.counts_per_unit + self.offset;
        if dt > 0.0 {
            let v_raw = delta as f64 / self.cfg.scale.counts_per_unit / dt;
            let a = dt / (VELOCITY_FILTER_S + dt);
            self.velocity += a * (v_raw - self.velocity);
        }

        self.check_jog_deadman(now);
        self.step_motion();
        self.step_homing();
        let open_loop = self.step_experiment();

        let applied = self.duty;
        // The controller's parts for the history: only for frames where it set the duty.
        let mut terms = crate::control::controller::Terms::default();
        let mut saturated = false;
        if let Some(duty) = open_loop {
            self.duty = duty;
        } else if self.motion.driven() {
            let mut u = self.controller.update(&self.setpoint, self.position, dt);
            terms = self.controller.terms();
            saturated = terms.unsaturated != terms.saturated;
            if let Some(lim) = self.motion.duty_limit() {
                saturated |= u.abs() > lim;
                u = u.clamp(-lim, lim);
            }
            self.duty = u;
        } else {
            self.duty = 0.0;
            self.setpoint = Setpoint { position: self.position, velocity: 0.0, acceleration: 0.0 };
            self.goal = self.position;
        }
        let fe = self.setpoint.position - self.position;
        if matches!(self.motion.run(), Some(Run::Moving(_) | Run::Homing(_))) {
            self.moves.observe(fe);
        }
        // Pushing into an end stop is the point of hard-stop homing, and open-loop tests
        // drive duty with no target: the following-error, stall and runaway rules would
        // fire on purpose, so only the encoder rule stays on (their own bounds apply).
        let pushing = self.motion.homing().is_some_and(|h| h.run.pushing()) || open_loop.is_some();
        // An axis that starts outside its soft limits (home set beyond one, or enabled where
        // it was pushed by hand) must be allowed back in: the limit rule waits until the
        // position is inside once; moves and jogs can only head inwards meanwhile.
        if self.outside_limits {
            let l = &self.cfg.limits;
            self.outside_limits = !(l.soft_min..=l.soft_max).contains(&self.position);
        }
        let state = self.motion.state();
        let trialing = state == AxisState::Trialing;
        let motor_on = self.motion.driven();
        let host_drives = self.motion.drive().is_some();
        // The board's status counts once it has shown this drive applied (wrapping seq
        // arithmetic for the ack, docs/protocol.md), or after a grace of a link timeout.
        let grace = (self.cfg.limits.link_timeout_s * f64::from(self.cfg.board.tick_hz)) as u32;
        let board_on = tm.status & status::MOTOR_ON != 0;
        let drive_acked = self
            .motion
            .drive_slot()
            .and_then(Option::as_mut)
            .is_some_and(|d| d.frame(tm.ack_seq, board_on, ticks, grace));
        let c = &self.cfg.controller;
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
            motor_on: motor_on && !pushing,
            limits_active: self.homed
                && !self.outside_limits
                && !matches!(state, AxisState::Homing | AxisState::Trialing),
            following_active: !trialing,
            host_drives,
            drive_acked,
            board_motor_on: board_on,
            board_watchdog: tm.status & status::WATCHDOG_TRIPPED != 0,
            breakaway: if applied >= 0.0 { c.min_duty_forward } else { c.min_duty_reverse },
            position_band: self.cfg.motion.in_position_band,
            move_planned_end: match self.motion.run() {
                Some(Run::Moving(m)) if !self.moves.in_position => Some(m.planned_end),
                _ => None,
            },
            watchdog_ms: self.cfg.board.watchdog_ms,
        };
        if motor_on && tm.status & status::DRIVER_FAULT != 0 {
            // Its own cause, ahead of the motor-off rule the fault also sets off.
            self.latch_trip(TripCause::BoardFault, "the board reports a driver fault".to_owned());
        } else if let Some(f) = self.supervisor.observe(&obs) {
            self.duty = applied;
            self.latch_trip(f.cause, f.detail);
            self.duty = 0.0;
        }
        let sample = Sample {
            t: self.t,
            target: self.setpoint.position,
            position: self.position,
            following_error: self.setpoint.position - self.position,
            duty: self.duty,
            velocity: self.velocity,
            state: self.motion.state(),
            count: self.count,
            board_time_us: tm.board_time_us,
            missed_frames: ticks.saturating_sub(1),
            status: tm.status,
            inputs: tm.inputs,
            target_velocity: self.setpoint.velocity,
            target_acceleration: self.setpoint.acceleration,
            band: self.supervisor.following_error_band(self.setpoint.velocity),
            p: terms.p,
            i: terms.i,
            d: terms.d,
            ff: terms.ff,
            saturated,
        };
        self.history.push(sample);
        if let Some(Run::Trialing(run)) = self.motion.run_mut() {
            run.record(sample);
        }
        ticks
    }

    /// Feeds a running experiment. Returns the open-loop duty to apply, if it gives one.
    fn step_experiment(&mut self) -> Option<f64> {
        let Some(Run::Trialing(run)) = self.motion.run_mut() else { return None };
        match run.drive(self.t, self.position, self.count) {
            Drive::Duty(d) => {
                let lim = self.cfg.controller.max_duty;
                self.setpoint =
                    Setpoint { position: self.position, velocity: 0.0, acceleration: 0.0 };
                self.goal = self.position;
                Some(d.clamp(-lim, lim))
            }
            Drive::Target(p) => {
                self.setpoint = Setpoint { position: p, velocity: 0.0, acceleration: 0.0 };
                self.goal = p;
                None
            }
            Drive::Done | Drive::Abort => {
                let closed = run.spec_closed_loop();
                // Files the result; the axis is steady from here: a closed-loop step's end
                // holds where the step put the target.
                self.end_experiment(None);
                if !closed {
                    // Open loop may end at speed: brake to rest under control.
                    self.setpoint = Setpoint {
                        position: self.position,
                        velocity: self.velocity,
                        acceleration: 0.0,
                    };
                    self.controller.reset(self.position);
                    self.begin_stop(AfterStop::Hold);
                }
                None
            }
        }
    }

    /// Ends a running experiment, if one runs, and files its result (with `why` if it was cut
    /// short from outside). The axis is steady until the caller moves it on. Returns whether
    /// one was running.
    pub(super) fn end_experiment(&mut self, why: Option<String>) -> bool {
        let Some(run) = self.motion.run_mut() else { return false };
        if !matches!(run, Run::Trialing(_)) {
            return false;
        }
        let Run::Trialing(test) = std::mem::replace(run, Run::Steady) else { return false };
        let result = test.finish(why);
        let text = match &result.aborted {
            Some(r) => format!("trial ended early: {r}"),
            None => "trial finished".to_owned(),
        };
        self.experiment_result = Some(Box::new(result));
        self.event(EventKind::Notice { text });
        true
    }

    /// Ends continuous jog when the operator's key repeats stop arriving.
    fn check_jog_deadman(&mut self, now: Instant) {
        // A first press's session (its step finishing, or anything else) ends once the
        // repeat window has passed.
        if let Some(tap) = self.tap {
            if now.saturating_duration_since(tap.first_at).as_secs_f64()
                > self.cfg.jog.repeat_window_s
            {
                self.tap = None;
            }
        }
        if let Some(Run::Jogging(j)) = self.motion.run() {
            if now >= j.deadman {
                self.begin_stop(AfterStop::Hold);
            }
        }
    }

    /// Advances the setpoint along the running profile and runs the motion's own state
    /// changes (a move's in-position dwell, the end of a jog or a stop).
    fn step_motion(&mut self) {
        /// What the run turns into this frame.
        enum Next {
            Stay,
            /// Steady at the goal; the key session, if any, is over.
            Hold,
            /// Steady: the move arrived.
            Arrived,
            /// Motor off: stop-all category 1 achieved its stop.
            Off,
        }
        let t = self.t;
        let hold = Setpoint { position: self.goal, velocity: 0.0, acceleration: 0.0 };
        let Motion::Driven(driven) = &mut self.motion else { return };
        let mut next = Next::Stay;
        match &mut driven.run {
            Run::Steady | Run::Trialing(_) => self.setpoint = hold,
            Run::Moving(m) => {
                if let Some(ramp) = m.ramp {
                    let (sp, ended) = ramp.at(t);
                    self.setpoint = sp;
                    if ended {
                        m.ramp = None;
                        m.settle_since = None;
                    }
                } else {
                    self.setpoint = hold;
                }
                if m.ramp.is_none() {
                    let band = self.cfg.motion.in_position_band;
                    let inside = (self.goal - self.position).abs() <= band;
                    match (inside, m.settle_since) {
                        (false, _) => m.settle_since = None,
                        (true, None) => m.settle_since = Some(t),
                        (true, Some(since)) => {
                            if t - since >= self.cfg.motion.in_position_dwell_s {
                                next = Next::Arrived;
                            }
                        }
                    }
                }
            }
            Run::Jogging(j) => {
                let (sp, ended) = j.ramp.at(t);
                self.setpoint = sp;
                if ended {
                    self.goal = j.ramp.profile.goal();
                    next = Next::Hold;
                }
            }
            Run::Homing(h) => match h.ramp {
                Some(ramp) => {
                    let (sp, ended) = ramp.at(t);
                    self.setpoint = sp;
                    if ended {
                        // The homing run sees it ended (`profile_done`) and orders the next.
                        h.ramp = None;
                    }
                }
                None => self.setpoint = hold,
            },
            Run::Stopping(stop) => match *stop {
                StopRun::Ramp { ramp, then } => {
                    let (sp, ended) = ramp.at(t);
                    self.setpoint = sp;
                    if ended {
                        self.goal = ramp.profile.goal();
                        match then {
                            AfterStop::Hold => next = Next::Hold,
                            // Hold the end of the ramp until the axis stands still.
                            AfterStop::Off => *stop = StopRun::Standstill { since: t },
                        }
                    }
                }
                StopRun::Standstill { since } => {
                    self.setpoint = hold;
                    let still =
                        self.velocity.abs() < STANDSTILL_FRACTION * self.cfg.motion.max_velocity;
                    if still || t - since >= STANDSTILL_WAIT_S {
                        next = Next::Off;
                    }
                }
            },
        }
        match next {
            Next::Stay => {}
            Next::Hold => {
                driven.run = Run::Steady;
                self.tap = None;
            }
            Next::Arrived => {
                driven.run = Run::Steady;
                self.moves.arrived(t);
            }
            Next::Off => {
                // Stopped while stop-all holds; released during the stop, the axis ends
                // disabled, as releasing would have made it (stopped would have no way out).
                self.motion = if self.stop.latched { Motion::Stopped } else { Motion::Disabled };
                self.supervisor.reset();
            }
        }
    }

    /// Feeds the homing run and carries out its orders.
    fn step_homing(&mut self) {
        let Some(h) = self.motion.homing_mut() else { return };
        let view = HomingView {
            t: self.t,
            position: self.position,
            count: self.count,
            velocity: self.velocity,
            following_error: self.setpoint.position - self.position,
            switch: self.inputs & inputs::HOME != 0,
            index: self.inputs & inputs::INDEX != 0,
            profile_done: h.ramp.is_none(),
        };
        let orders = h.run.step(&view);
        for order in orders {
            // Done and Fail are a run's last orders; what it asks after them has no run to
            // apply to.
            let Some(h) = self.motion.homing_mut() else { return };
            match order {
                Order::MoveTo { goal, velocity } => {
                    let lim = Limits::of(&self.cfg.motion).slower(velocity);
                    let profile = Profile::plan(self.setpoint, goal, lim);
                    h.ramp = Some(Ramp { profile, t0: self.t });
                    self.goal = goal;
                }
                Order::Stop => {
                    let profile = Profile::stop(self.setpoint, Limits::of(&self.cfg.motion));
                    h.ramp = Some(Ramp { profile, t0: self.t });
                    self.goal = profile.goal();
                }
                Order::HoldHere => {
                    h.ramp = None;
                    self.hold_here();
                }
                Order::SetHome { count, value } => {
                    h.ramp = None;
                    let new_offset = value - count as f64 / self.cfg.scale.counts_per_unit;
                    let shift = new_offset - self.offset;
                    self.offset = new_offset;
                    self.position += shift;
                    self.setpoint.position += shift;
                    self.goal += shift;
                    // The measurement jumped with the frame of reference; restart the
                    // controller's memory there so the derivative does not see a step.
                    self.controller.reset(self.position);
                }
                Order::LimitDuty(lim) => h.duty_limit = lim,
                Order::Done => {
                    // Leaving homing drops its run, ramp and duty limit with it.
                    if let Some(run) = self.motion.run_mut() {
                        *run = Run::Steady;
                    }
                    self.homed = true;
                    self.outside_limits = true;
                    self.hold_here_at_goal();
                    let method = format!("{:?}", self.cfg.homing.method).to_lowercase();
                    if self.cfg.homing.method == crate::config::HomingMethod::None {
                        self.event(EventKind::Notice {
                            text: "homing method is none: the present position was declared \
                                   home and nothing was checked"
                                .to_owned(),
                        });
                    }
                    self.event(EventKind::Homed { position: self.position, method });
                }
                Order::Fail(why) => {
                    self.latch_trip(TripCause::Homing, why);
                    return;
                }
            }
        }
    }

    /// Target = where the axis is now, at rest; controller memory restarted.
    pub(super) fn hold_here(&mut self) {
        self.goal = self.position;
        self.setpoint = Setpoint { position: self.position, velocity: 0.0, acceleration: 0.0 };
        self.controller.reset(self.position);
        self.supervisor.reset();
    }

    /// Hold at the present setpoint (end of a profile).
    fn hold_here_at_goal(&mut self) {
        self.goal = self.setpoint.position;
        self.setpoint.velocity = 0.0;
        self.setpoint.acceleration = 0.0;
    }

    /// Latches a trip: the motion ends (a running test is filed as ended early) and the axis
    /// keeps only the trip record until it is cleared.
    pub(super) fn latch_trip(&mut self, cause: TripCause, detail: String) {
        tracing::warn!(axis = %self.cfg.name, %cause, %detail, "trip");
        let trip = Trip {
            cause,
            at_s: self.t,
            target: self.setpoint.position,
            position: self.position,
            following_error: self.setpoint.position - self.position,
            band: self.supervisor.following_error_band(self.setpoint.velocity),
            duty: self.duty,
            velocity: self.velocity,
            detail,
        };
        self.end_experiment(Some(format!("trip: {}", trip.cause)));
        self.motion = Motion::Tripped(Box::new(trip.clone()));
        self.tap = None;
        self.duty = 0.0;
        self.supervisor.reset();
        self.event(EventKind::Trip { trip });
    }
}
