//! Trapezoidal velocity profiles: bounded velocity and acceleration, continuous position and
//! velocity, from any moving or resting start to rest at a goal.
//!
//! Hand-written rather than taken from a crate: the planner must start from a non-zero
//! velocity (a new target during a move, the end of a jog, a stop), must be `Copy` and
//! allocation-free for the control loop, and is only a few constant-acceleration segments.
//!
//! # Planning ([`Trapezoid::plan`])
//! Every profile is a short list of constant-acceleration [`Segment`]s, built in order:
//! 1. If `|v0| > v_max` (the limit was lowered during a move), decelerate at `a_max` to
//!    `v_max` in the same direction first; only this segment exceeds `v_max`.
//! 2. If the axis moves away from the goal, or too fast to stop before it
//!    (`|v0|·v0/(2·a_max)` beyond the goal), brake at `a_max` to rest; the move then
//!    continues from there, with the acceleration keeping its sign, so braking and the return
//!    form one continuous ramp through zero velocity.
//! 3. From a velocity `u0 ≥ 0` towards the goal, distance `D`: the peak velocity is
//!    `v_p = min(v_max, √(a·D + u0²/2))` (accelerate from `u0` to `v_p`, then brake to 0).
//!    If `v_p < v_max` the profile is triangular, else it cruises at `v_max` for
//!    `(D − (v_p² − u0²)/(2a) − v_p²/(2a))/v_p`. From rest this is Biagiotti & Melchiorri's
//!    `T = D/v + v/a` (trapezoid, `D ≥ v²/a`) or `T = 2√(D/a)`, peak `√(a·D)` (triangle).
//!
//! Each step takes the largest allowed acceleration as early as possible, so the result is the
//! minimum-time profile under the two limits. Position and velocity are continuous by
//! construction (each segment starts where the previous one ended); acceleration jumps, which
//! is what makes it a trapezoid (jerk-limited profiles come later).
//!
//! At and after [`Trapezoid::duration`] [`Trapezoid::sample`] returns exactly the goal at rest,
//! so rounding in the segment sums never leaves the axis a hair off its target.
//!
//! Limits that are not finite and positive, or non-finite positions, give a profile that
//! holds the start position (or the goal when the start is not finite) at rest: the engine
//! validates limits, and a loop must never see NaN.
//!
//! # Source
//! L. Biagiotti and C. Melchiorri, *Trajectory Planning for Automatic Machines and Robots*,
//! Springer 2008, §3.2 (trapezoidal velocity profile with preassigned velocity and
//! acceleration). The moving-start cases (steps 1–2) are our own composition of the same
//! constant-acceleration pieces.
//!
//! # One interface for both shapes
//! [`Profile`] is what the axis plans and samples: a trapezoid or a jerk-limited profile
//! ([`super::jerk_limited`]), chosen per axis by `motion.profile` ([`ProfileShape`]) through
//! [`Limits`], so the axis code does not care which shape it follows.

use serde::{Deserialize, Serialize};

use super::jerk_limited::JerkLimited;
use super::Setpoint;
use crate::config::MotionConfig;

/// Most segments a plan needs: slow to v_max, brake, accelerate, cruise, brake.
const MAX_SEGMENTS: usize = 5;

/// One constant-acceleration piece of a profile.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Segment {
    /// Start time from the start of the profile, s.
    pub start_s: f64,
    /// Length, s (> 0).
    pub duration_s: f64,
    /// Position at the start of the segment, units.
    pub position: f64,
    /// Velocity at the start of the segment, units/s.
    pub velocity: f64,
    /// Constant acceleration during the segment, units/s².
    pub acceleration: f64,
}

/// One piece of a planned profile: where it starts in the profile's time, and the setpoint
/// `tau` seconds into it. Both profile shapes are sampled the same way through it.
pub(crate) trait Piece {
    fn start_s(&self) -> f64;
    fn at(&self, tau: f64) -> Setpoint;
}

/// Samples a profile made of `pieces` at `t` from its start: before the start (or NaN) it
/// is `start`, from `duration` on it rests at `goal`.
pub(crate) fn sample_pieces<P: Piece>(
    pieces: &[P],
    start: Setpoint,
    goal: f64,
    duration: f64,
    t: f64,
) -> Setpoint {
    if t >= duration {
        return Setpoint { position: goal, velocity: 0.0, acceleration: 0.0 };
    }
    if t.is_nan() || t < 0.0 {
        return start;
    }
    let i = pieces.iter().rposition(|s| s.start_s() <= t).unwrap_or(0);
    pieces.get(i).map_or(start, |s| s.at(t - s.start_s()))
}

impl Piece for Segment {
    fn start_s(&self) -> f64 {
        self.start_s
    }

    fn at(&self, tau: f64) -> Setpoint {
        Setpoint {
            position: self.position + self.velocity * tau + 0.5 * self.acceleration * tau * tau,
            velocity: self.velocity + self.acceleration * tau,
            acceleration: self.acceleration,
        }
    }
}

/// A planned trapezoidal (or triangular) move, sampled by time since its start.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Trapezoid {
    segments: [Segment; MAX_SEGMENTS],
    len: usize,
    start: Setpoint,
    goal: f64,
    duration: f64,
}

/// Accumulates segments from the current state.
struct Builder {
    plan: Trapezoid,
    t: f64,
    p: f64,
    v: f64,
}

impl Builder {
    fn new(p0: f64, v0: f64, goal: f64) -> Self {
        let mut plan = Trapezoid::rest_at(p0, goal);
        plan.start.velocity = v0;
        Self { plan, t: 0.0, p: p0, v: v0 }
    }

    /// Appends a segment of acceleration `a` lasting `dt` (skipped when not > 0).
    fn push(&mut self, a: f64, dt: f64) {
        if dt.is_nan() || dt <= 0.0 || self.plan.len == MAX_SEGMENTS {
            return;
        }
        self.plan.segments[self.plan.len] = Segment {
            start_s: self.t,
            duration_s: dt,
            position: self.p,
            velocity: self.v,
            acceleration: a,
        };
        self.plan.len += 1;
        self.p += self.v * dt + 0.5 * a * dt * dt;
        self.v += a * dt;
        self.t += dt;
    }

    fn finish(mut self) -> Trapezoid {
        self.plan.duration = self.t;
        self.plan
    }
}

impl Trapezoid {
    /// Rest-or-moving start at (p0, v0) to rest at goal, |v| ≤ v_max, |a| ≤ a_max. Handles
    /// v0 ≠ 0, including v0 pointing away from goal or too fast to stop before goal
    /// (decelerate, reverse, come back), and short moves (triangular). If |v0| > v_max it first
    /// decelerates to v_max (see the module docs).
    pub fn plan(p0: f64, v0: f64, goal: f64, v_max: f64, a_max: f64) -> Self {
        let limits_ok = v_max.is_finite() && v_max > 0.0 && a_max.is_finite() && a_max > 0.0;
        if !(limits_ok && p0.is_finite() && v0.is_finite() && goal.is_finite()) {
            return Self::invalid(p0, goal);
        }
        let a = a_max;
        let mut b = Builder::new(p0, v0, goal);

        if v0.abs() > v_max {
            b.push(-a.copysign(v0), (v0.abs() - v_max) / a);
            b.v = v_max.copysign(v0);
        }

        let d = goal - b.p;
        let stopping = b.v * b.v.abs() / (2.0 * a);
        if b.v != 0.0 && (b.v * d <= 0.0 || stopping.abs() > d.abs()) {
            b.push(-a.copysign(b.v), b.v.abs() / a);
            b.v = 0.0;
        }

        let d = goal - b.p;
        let dist = d.abs();
        if dist > 0.0 {
            let s = if d > 0.0 { 1.0 } else { -1.0 };
            let u0 = (s * b.v).max(0.0);
            let peak = (a * dist + 0.5 * u0 * u0).sqrt().min(v_max).max(u0);
            let accel_dist = (peak * peak - u0 * u0) / (2.0 * a);
            let brake_dist = peak * peak / (2.0 * a);
            b.push(s * a, (peak - u0) / a);
            b.v = s * peak;
            if peak > 0.0 {
                b.push(0.0, (dist - accel_dist - brake_dist).max(0.0) / peak);
            }
            b.push(-s * a, peak / a);
        }
        b.finish()
    }

    /// Decelerate from (p0, v0) to rest at a_max (stop-all category 1, end of jog). goal() is
    /// where it stops: p0 + v0|v0|/(2 a_max).
    ///
    /// A non-finite or non-positive `a_max` gives a profile at rest at `p0` (an immediate
    /// stop: the velocity jumps to zero).
    pub fn stop(p0: f64, v0: f64, a_max: f64) -> Self {
        if !(a_max.is_finite() && a_max > 0.0 && p0.is_finite() && v0.is_finite()) {
            return Self::invalid(p0, p0);
        }
        let goal = p0 + stopping_distance(v0, a_max);
        let mut b = Builder::new(p0, v0, goal);
        b.push(-a_max.copysign(v0), v0.abs() / a_max);
        b.finish()
    }

    /// A profile that holds `position` at rest (duration 0).
    pub fn hold(position: f64) -> Self {
        Self::invalid(position, position)
    }

    /// Rest at `p0` with `goal` as the reported goal: the starting state for the builder.
    fn rest_at(p0: f64, goal: f64) -> Self {
        Self {
            segments: [Segment::default(); MAX_SEGMENTS],
            len: 0,
            start: Setpoint { position: p0, velocity: 0.0, acceleration: 0.0 },
            goal,
            duration: 0.0,
        }
    }

    fn invalid(p0: f64, goal: f64) -> Self {
        let at = if p0.is_finite() {
            p0
        } else if goal.is_finite() {
            goal
        } else {
            0.0
        };
        Self::rest_at(at, at)
    }

    /// t from the start of this profile; t<0 (or NaN) → start (p0, v0, no acceleration),
    /// t ≥ duration → rest at goal.
    pub fn sample(&self, t: f64) -> Setpoint {
        sample_pieces(self.segments(), self.start, self.goal, self.duration, t)
    }

    /// Total time to rest at the goal, s.
    pub fn duration(&self) -> f64 {
        self.duration
    }

    /// Where the profile ends, at rest.
    pub fn goal(&self) -> f64 {
        self.goal
    }

    /// The constant-acceleration pieces, in time order.
    pub fn segments(&self) -> &[Segment] {
        &self.segments[..self.len]
    }

    /// Largest |velocity| reached (including the start), units/s.
    pub fn peak_velocity(&self) -> f64 {
        self.segments()
            .iter()
            .flat_map(|s| [s.velocity, s.at(s.duration_s).velocity])
            .fold(0.0, |m, v| m.max(v.abs()))
    }
}

/// Signed distance to stop from velocity `v` at deceleration `a` (> 0): `v·|v|/(2a)`.
pub fn stopping_distance(v: f64, a: f64) -> f64 {
    v * v.abs() / (2.0 * a)
}

/// `motion.profile`: the shape of an axis's moves, jogs and stops.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ProfileShape {
    /// Bounded velocity and acceleration; the acceleration steps.
    #[default]
    Trapezoid,
    /// Bounded velocity, acceleration and jerk (`motion.max_jerk`): the double S.
    JerkLimited,
}

/// The limits one profile is planned with.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Limits {
    /// |v| limit, units/s.
    pub velocity: f64,
    /// |a| limit, units/s².
    pub acceleration: f64,
    /// |jerk| limit, units/s³; None plans a trapezoid.
    pub jerk: Option<f64>,
}

impl Limits {
    /// The axis's own limits from its `[axis.motion]` table.
    pub fn of(m: &MotionConfig) -> Self {
        let jerk = match m.profile {
            ProfileShape::Trapezoid => None,
            ProfileShape::JerkLimited => Some(m.max_jerk.unwrap_or(f64::NAN)),
        };
        Self { velocity: m.max_velocity, acceleration: m.max_acceleration, jerk }
    }

    /// The same limits with the velocity limit lowered to `velocity` (jog speeds, homing
    /// speeds, a move list's speed limit); never raised.
    #[must_use]
    pub fn slower(self, velocity: f64) -> Self {
        Self { velocity: velocity.min(self.velocity), ..self }
    }

    /// Each limit no higher than `own`'s. A jerk limit from either side applies (the smaller
    /// when both have one).
    #[must_use]
    pub fn within(self, own: Self) -> Self {
        let jerk = match (self.jerk, own.jerk) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        };
        Self {
            velocity: self.velocity.min(own.velocity),
            acceleration: self.acceleration.min(own.acceleration),
            jerk,
        }
    }

    /// Every limit multiplied by `k` (> 0): from rest, the profile over `k·D` with limits
    /// `k·(v, a, j)` is `k` times the profile over `D`, in the same time.
    #[must_use]
    pub fn scaled(self, k: f64) -> Self {
        Self {
            velocity: self.velocity * k,
            acceleration: self.acceleration * k,
            jerk: self.jerk.map(|j| j * k),
        }
    }
}

/// A planned move of either shape; what the axis follows.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Profile {
    /// Velocity and acceleration bounded.
    Trapezoid(Trapezoid),
    /// Velocity, acceleration and jerk bounded.
    JerkLimited(JerkLimited),
}

impl Profile {
    /// From the setpoint being followed now to rest at `goal`.
    pub fn plan(from: Setpoint, goal: f64, lim: Limits) -> Self {
        match lim.jerk {
            None => Self::Trapezoid(Trapezoid::plan(
                from.position,
                from.velocity,
                goal,
                lim.velocity,
                lim.acceleration,
            )),
            Some(j) => {
                Self::JerkLimited(JerkLimited::plan(from, goal, lim.velocity, lim.acceleration, j))
            }
        }
    }

    /// Decelerate from `from` to rest as fast as the limits allow.
    pub fn stop(from: Setpoint, lim: Limits) -> Self {
        match lim.jerk {
            None => {
                Self::Trapezoid(Trapezoid::stop(from.position, from.velocity, lim.acceleration))
            }
            Some(j) => Self::JerkLimited(JerkLimited::stop(from, lim.acceleration, j)),
        }
    }

    /// The setpoint `t` seconds after the start.
    pub fn sample(&self, t: f64) -> Setpoint {
        match self {
            Self::Trapezoid(p) => p.sample(t),
            Self::JerkLimited(p) => p.sample(t),
        }
    }

    /// Total time to rest at the goal, s.
    pub fn duration(&self) -> f64 {
        match self {
            Self::Trapezoid(p) => p.duration(),
            Self::JerkLimited(p) => p.duration(),
        }
    }

    /// Where the profile ends, at rest.
    pub fn goal(&self) -> f64 {
        match self {
            Self::Trapezoid(p) => p.goal(),
            Self::JerkLimited(p) => p.goal(),
        }
    }
}

/// Why `motion.max_jerk` does not fit `motion.profile`, if it does not (config validation).
pub fn check_jerk(m: &MotionConfig) -> Option<String> {
    match (m.profile, m.max_jerk) {
        (ProfileShape::JerkLimited, None) => {
            Some("profile = \"jerk_limited\" needs max_jerk (unit/s³)".to_owned())
        }
        (_, Some(j)) if !(j.is_finite() && j > 0.0) => {
            Some(format!("expected a number > 0, found {j}"))
        }
        _ => None,
    }
}
