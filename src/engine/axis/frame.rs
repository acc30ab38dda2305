//! One telemetry frame: unwrap, advance the setpoint (profile, jog, homing), control,
//! supervise, record.

use tokio::time::Instant;

use super::core::AxisCore;
use super::{ActiveProfile, Purpose};
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

impl AxisCore {
    /// Runs the loop for one frame; returns the ticks it accounts for by sequence number.
    pub(super) fn on_telemetry(&mut self, tm: &Telemetry, now: Instant) -> u32 {
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
        } else if self.state.motor_on() {
            let mut u = self.controller.update(&self.setpoint, self.position, dt);
            terms = self.controller.terms();
            saturated = terms.unsaturated != terms.saturated;
            if let Some(lim) = self.duty_limit {
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
        if matches!(self.state, AxisState::Moving | AxisState::Homing) {
            self.moves.observe(fe);
        }
        // Pushing into an end stop is the point of hard-stop homing, and open-loop tests
        // drive duty with no target: the following-error, stall and runaway rules would
        // fire on purpose, so only the encoder rule stays on (their own bounds apply).
        let pushing = self.homing.as_ref().is_some_and(|h| h.pushing()) || open_loop.is_some();
        // An axis that starts outside its soft limits (home set beyond one, or enabled where
        // it was pushed by hand) must be allowed back in: the limit rule waits until the
        // position is inside once; moves and jogs can only head inwards meanwhile.
        if self.outside_limits {
            let l = &self.cfg.limits;
            self.outside_limits = !(l.soft_min..=l.soft_max).contains(&self.position);
        }
        let trialing = self.state == AxisState::Trialing;
        let host_drives = self.state.motor_on() && self.drive.is_some();
        // The board's status counts once it has shown this drive applied (wrapping seq
        // arithmetic for the ack, docs/protocol.md), or after a grace of a link timeout.
        let grace = (self.cfg.limits.link_timeout_s * f64::from(self.cfg.board.tick_hz)) as u32;
        let board_on = tm.status & status::MOTOR_ON != 0;
        let drive_acked =
            self.drive.as_mut().is_some_and(|d| d.frame(tm.ack_seq, board_on, ticks, grace));
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
            motor_on: self.state.motor_on() && !pushing,
            limits_active: self.homed
                && !self.outside_limits
                && !matches!(self.state, AxisState::Homing | AxisState::Trialing),
            following_active: !trialing,
            host_drives,
            drive_acked,
            board_motor_on: board_on,
            board_watchdog: tm.status & status::WATCHDOG_TRIPPED != 0,
            breakaway: if applied >= 0.0 { c.min_duty_forward } else { c.min_duty_reverse },
            position_band: self.cfg.motion.in_position_band,
            move_planned_end: (self.state == AxisState::Moving && !self.moves.in_position)
                .then_some(self.move_planned_end),
            watchdog_ms: self.cfg.board.watchdog_ms,
        };
        if self.state.motor_on() && tm.status & status::DRIVER_FAULT != 0 {
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
            state: self.state,
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
        if let Some(run) = self.experiment.as_mut() {
            run.record(sample);
        }
        ticks
    }

    /// Feeds a running experiment. Returns the open-loop duty to apply, if it gives one.
    fn step_experiment(&mut self) -> Option<f64> {
        if self.state != AxisState::Trialing {
            return None;
        }
        let run = self.experiment.as_mut()?;
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
                self.end_experiment(None);
                if closed {
                    // The step's end: hold where the step put the target.
                    self.state = AxisState::Steady;
                } else {
                    // Open loop may end at speed: brake to rest under control.
                    self.setpoint = Setpoint {
                        position: self.position,
                        velocity: self.velocity,
                        acceleration: 0.0,
                    };
                    self.controller.reset(self.position);
                    self.begin_stop(super::Purpose::StopThenHold);
                }
                None
            }
        }
    }

    /// Files the running experiment's result (with `why` if it was cut short from outside).
    pub(super) fn end_experiment(&mut self, why: Option<String>) {
        if let Some(run) = self.experiment.take() {
            let result = run.finish(why);
            let text = match &result.aborted {
                Some(r) => format!("trial ended early: {r}"),
                None => "trial finished".to_owned(),
            };
            self.experiment_result = Some(Box::new(result));
            self.event(EventKind::Notice { text });
        }
    }

    /// Ends continuous jog when the operator's key repeats stop arriving.
    fn check_jog_deadman(&mut self, now: Instant) {
        let Some(j) = self.jog else { return };
        if self.state != AxisState::Jogging {
            // A first-press step finishing, or anything else, ends the key session once the
            // repeat window has passed.
            if j.deadman.is_none()
                && now.saturating_duration_since(j.first_at).as_secs_f64()
                    > self.cfg.jog.repeat_window_s
            {
                self.jog = None;
            }
            return;
        }
        if j.deadman.is_some_and(|d| now >= d) {
            self.jog = None;
            self.begin_stop(Purpose::StopThenHold);
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
                self.profile = None;
                match p.purpose {
                    Purpose::Move => self.settle_since = None,
                    Purpose::Jog | Purpose::StopThenHold => {
                        self.goal = p.profile.goal();
                        self.state = AxisState::Steady;
                        self.jog = None;
                    }
                    Purpose::Homing => {}
                    // IEC 60204-1 category 1 removes power once the stop is achieved:
                    // hold the end of the ramp until the axis stands still.
                    Purpose::StopThenOff => {
                        self.goal = p.profile.goal();
                        self.settle_since = Some(self.t);
                    }
                }
            }
        } else if self.state == AxisState::Stopping {
            self.setpoint = Setpoint { position: self.goal, velocity: 0.0, acceleration: 0.0 };
            let since = *self.settle_since.get_or_insert(self.t);
            let still = self.velocity.abs() < STANDSTILL_FRACTION * self.cfg.motion.max_velocity;
            if still || self.t - since >= STANDSTILL_WAIT_S {
                self.state = AxisState::Stopped;
                self.supervisor.reset();
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
                        self.state = AxisState::Steady;
                        self.moves.arrived(self.t);
                    }
                }
            }
        }
    }

    /// Feeds the homing run and carries out its orders.
    fn step_homing(&mut self) {
        if self.state != AxisState::Homing {
            return;
        }
        let Some(run) = self.homing.as_mut() else { return };
        let view = HomingView {
            t: self.t,
            position: self.position,
            count: self.count,
            velocity: self.velocity,
            following_error: self.setpoint.position - self.position,
            switch: self.inputs & inputs::HOME != 0,
            index: self.inputs & inputs::INDEX != 0,
            profile_done: self.profile.is_none(),
        };
        let orders = run.step(&view);
        for order in orders {
            match order {
                Order::MoveTo { goal, velocity } => {
                    let lim = Limits::of(&self.cfg.motion).slower(velocity);
                    let profile = Profile::plan(self.setpoint, goal, lim);
                    self.profile =
                        Some(ActiveProfile { profile, t0: self.t, purpose: Purpose::Homing });
                    self.goal = goal;
                }
                Order::Stop => {
                    let profile = Profile::stop(self.setpoint, Limits::of(&self.cfg.motion));
                    self.profile =
                        Some(ActiveProfile { profile, t0: self.t, purpose: Purpose::Homing });
                    self.goal = profile.goal();
                }
                Order::HoldHere => {
                    self.profile = None;
                    self.hold_here();
                }
                Order::SetHome { count, value } => {
                    let new_offset = value - count as f64 / self.cfg.scale.counts_per_unit;
                    let shift = new_offset - self.offset;
                    self.offset = new_offset;
                    self.position += shift;
                    self.setpoint.position += shift;
                    self.goal += shift;
                    self.profile = None;
                    // The measurement jumped with the frame of reference; restart the
                    // controller's memory there so the derivative does not see a step.
                    self.controller.reset(self.position);
                }
                Order::LimitDuty(lim) => self.duty_limit = lim,
                Order::Done => {
                    self.homing = None;
                    self.duty_limit = None;
                    self.homed = true;
                    self.outside_limits = true;
                    self.state = AxisState::Steady;
                    self.profile = None;
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
                    self.homing = None;
                    self.duty_limit = None;
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
        self.trip = Some(trip.clone());
        self.end_experiment(Some(format!("trip: {}", trip.cause)));
        self.state = AxisState::Tripped;
        self.profile = None;
        self.homing = None;
        self.duty_limit = None;
        self.jog = None;
        self.duty = 0.0;
        self.supervisor.reset();
        self.event(EventKind::Trip { trip });
    }
}
