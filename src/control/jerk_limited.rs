//! Jerk-limited ("double S") profiles: bounded velocity, acceleration and jerk; continuous
//! position, velocity and acceleration, from any moving start to rest at a goal.
//!
//! Hand-written for the same reasons as the trapezoid (see [`super::profile`]): the planner
//! must start from the setpoint the axis is following now (position, velocity and
//! acceleration), be `Copy` and allocation-free for the control loop, and it is only a few
//! constant-jerk segments.
//!
//! # The building block: a velocity change
//! [`velocity_change`] takes the axis from velocity `v0` and acceleration `a0` to velocity
//! `w` at zero acceleration in at most three constant-jerk pieces: jerk `±j` until the
//! acceleration reaches its peak `a_p`, hold `a_p`, jerk `∓j` back to zero. With `a0 = 0` and
//! `Δv = |w − v0|` this is Biagiotti & Melchiorri's acceleration phase: `a_max` is reached
//! when `Δv·j ≥ a_max²` (`T_j = a_max/j`, `T_a = T_j + Δv/a_max`), otherwise
//! `T_j = √(Δv/j)` and `T_a = 2T_j` with peak `√(Δv·j)`.
//!
//! # Planning ([`JerkLimited::plan`])
//! 1. Where would the axis come to rest if it stopped now ([`velocity_change`] to 0)? The
//!    side of the goal that point is on gives the direction of the move; if it is the goal,
//!    the stop is the move.
//! 2. The move is "change velocity to `v_p`, cruise, change velocity to 0". Its length grows
//!    with the peak `v_p`; at `v_p = 0` it is the stop of step 1, which ends short of the
//!    goal. If the length at `v_p = v_max` still fits, the axis cruises at `v_max` for the
//!    rest (all limits reached, B&M's case 1: from rest `T = D/v + v/a + a/j`); otherwise
//!    `v_p` is found by bisection so the length is exactly the distance, with no cruise
//!    (B&M's case 2, where `v_max` is not reached and `a_max` may not be either).
//!
//! The first velocity change may pass through zero (a new goal behind the axis: one
//! continuous S through the reversal) or come down from above `v_max` (the limit was lowered
//! during a move). An `a0` beyond `a_max` is clamped to `±a_max` (a step in acceleration,
//! only possible when the limits change during a move).
//!
//! At and after [`JerkLimited::duration`] [`JerkLimited::sample`] returns exactly the goal at
//! rest. Limits that are not finite and positive, or non-finite inputs, give a profile that
//! holds the start at rest, as the trapezoid does.
//!
//! # Source
//! L. Biagiotti and C. Melchiorri, *Trajectory Planning for Automatic Machines and Robots*,
//! Springer 2008, §3.4 (trajectory with double S velocity profile). The bisection on the
//! peak velocity replaces the book's iterative reduction of `a_max` for case 2 with an exact
//! solution of the same equations; the moving-start cases are our own composition of the
//! same pieces.

use super::profile::{sample_pieces, Piece};
use super::Setpoint;

/// Velocity change (3) + cruise (1) + velocity change (3).
const MAX_SEGMENTS: usize = 7;
/// Bisection steps for the peak velocity: 2⁻⁸⁰ of `v_max` is far below any encoder count.
const BISECTION_STEPS: usize = 80;

/// One constant-jerk piece of a profile.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct JerkSegment {
    /// Start time from the start of the profile, s.
    pub start_s: f64,
    /// Length, s (> 0).
    pub duration_s: f64,
    /// Position at the start of the segment, units.
    pub position: f64,
    /// Velocity at the start, units/s.
    pub velocity: f64,
    /// Acceleration at the start, units/s².
    pub acceleration: f64,
    /// Constant jerk during the segment, units/s³.
    pub jerk: f64,
}

impl Piece for JerkSegment {
    fn start_s(&self) -> f64 {
        self.start_s
    }

    fn at(&self, tau: f64) -> Setpoint {
        let (v, a, j) = (self.velocity, self.acceleration, self.jerk);
        Setpoint {
            position: self.position + tau * (v + tau * (a / 2.0 + tau * j / 6.0)),
            velocity: v + tau * (a + tau * j / 2.0),
            acceleration: a + tau * j,
        }
    }
}

/// The three pieces of a velocity change: (jerk, duration) each; durations may be 0.
pub type Change = [(f64, f64); 3];

/// From velocity `v0` and acceleration `a0` to velocity `w` at zero acceleration, with
/// |a| ≤ `a_max` and |jerk| = `j` (see the module docs). `a0` must lie in ±`a_max`.
pub fn velocity_change(v0: f64, a0: f64, w: f64, a_max: f64, j: f64) -> Change {
    // Velocity reached if the acceleration were ramped to zero at once.
    let coast = v0 + a0 * a0.abs() / (2.0 * j);
    let s = if w >= coast { 1.0 } else { -1.0 };
    let (v0, a0, w) = (s * v0, s * a0, s * w);
    // Peak acceleration with no constant-acceleration piece: (2a_p² − a0²)/(2j) = w − v0.
    let peak = ((j * (w - v0) + 0.5 * a0 * a0).max(0.0)).sqrt();
    let (peak, hold) = if peak > a_max {
        (a_max, ((w - v0) - (2.0 * a_max * a_max - a0 * a0) / (2.0 * j)) / a_max)
    } else {
        (peak, 0.0)
    };
    [(s * j, ((peak - a0) / j).max(0.0)), (0.0, hold.max(0.0)), (-s * j, peak / j)]
}

/// Where pieces take a state (p, v, a): integrates constant-jerk pieces exactly.
fn advance(mut at: Setpoint, pieces: &[(f64, f64)]) -> Setpoint {
    for &(j, dt) in pieces {
        let seg = JerkSegment {
            start_s: 0.0,
            duration_s: dt,
            position: at.position,
            velocity: at.velocity,
            acceleration: at.acceleration,
            jerk: j,
        };
        at = seg.at(dt);
    }
    at
}

/// A planned jerk-limited move, sampled by time since its start.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct JerkLimited {
    segments: [JerkSegment; MAX_SEGMENTS],
    len: usize,
    start: Setpoint,
    goal: f64,
    duration: f64,
}

impl JerkLimited {
    /// From the setpoint `from` (position, velocity, acceleration) to rest at `goal`, with
    /// |v| ≤ `v_max` (after coming down to it), |a| ≤ `a_max`, |jerk| ≤ `j_max`.
    pub fn plan(from: Setpoint, goal: f64, v_max: f64, a_max: f64, j_max: f64) -> Self {
        let Some(from) = checked(from, v_max, a_max, j_max) else {
            return Self::invalid(from.position, goal);
        };
        if !goal.is_finite() {
            return Self::invalid(from.position, goal);
        }
        let (a, j) = (a_max, j_max);
        let stop = velocity_change(from.velocity, from.acceleration, 0.0, a, j);
        let rest = advance(from, &stop).position;
        let d = goal - rest;
        if d == 0.0 {
            return Self::build(from, goal, &[&stop]);
        }
        let s = d.signum();
        let h = s * (goal - from.position);
        let (v0, a0) = (s * from.velocity, s * from.acceleration);
        // Length (in the direction of the move) of "change to vp, then change to 0".
        let length = |vp: f64| {
            let first = velocity_change(v0, a0, vp, a, j);
            let mid = advance(Setpoint { position: 0.0, velocity: v0, acceleration: a0 }, &first);
            let last = velocity_change(vp, 0.0, 0.0, a, j);
            advance(mid, &last).position
        };
        let at_max = length(v_max);
        let (peak, cruise) = if at_max <= h {
            (v_max, (h - at_max) / v_max)
        } else {
            // length(0) < h (step 1 chose the direction so) and length(v_max) > h.
            let (mut lo, mut hi) = (0.0, v_max);
            for _ in 0..BISECTION_STEPS {
                let mid = 0.5 * (lo + hi);
                if length(mid) <= h {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            (0.5 * (lo + hi), 0.0)
        };
        let mirror = |c: Change| c.map(|(jk, dt)| (s * jk, dt));
        let first = mirror(velocity_change(v0, a0, peak, a, j));
        let last = mirror(velocity_change(peak, 0.0, 0.0, a, j));
        Self::build(from, goal, &[&first, &[(0.0, cruise)], &last])
    }

    /// Decelerate from `from` to rest with |a| ≤ `a_max` and |jerk| ≤ `j_max` (stop-all
    /// category 1, end of jog). `goal()` is where it stops. Invalid limits give an immediate
    /// stop at `from.position`.
    pub fn stop(from: Setpoint, a_max: f64, j_max: f64) -> Self {
        let Some(from) = checked(from, f64::MAX, a_max, j_max) else {
            return Self::invalid(from.position, from.position);
        };
        let stop = velocity_change(from.velocity, from.acceleration, 0.0, a_max, j_max);
        let goal = advance(from, &stop).position;
        Self::build(from, goal, &[&stop])
    }

    fn build(from: Setpoint, goal: f64, parts: &[&[(f64, f64)]]) -> Self {
        let mut plan = Self::rest_at(from.position, goal);
        plan.start = from;
        let (mut t, mut at) = (0.0, from);
        for &(jerk, dt) in parts.iter().flat_map(|p| p.iter()) {
            if dt.is_nan() || dt <= 0.0 || plan.len == MAX_SEGMENTS {
                continue;
            }
            let seg = JerkSegment {
                start_s: t,
                duration_s: dt,
                position: at.position,
                velocity: at.velocity,
                acceleration: at.acceleration,
                jerk,
            };
            plan.segments[plan.len] = seg;
            plan.len += 1;
            at = seg.at(dt);
            t += dt;
        }
        plan.duration = t;
        plan
    }

    fn rest_at(p0: f64, goal: f64) -> Self {
        Self {
            segments: [JerkSegment::default(); MAX_SEGMENTS],
            len: 0,
            start: Setpoint { position: p0, velocity: 0.0, acceleration: 0.0 },
            goal,
            duration: 0.0,
        }
    }

    fn invalid(p0: f64, goal: f64) -> Self {
        let at = [p0, goal].into_iter().find(|x| x.is_finite()).unwrap_or(0.0);
        Self::rest_at(at, at)
    }

    /// t from the start of this profile; t < 0 (or NaN) → the start, t ≥ duration → rest at
    /// the goal.
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

    /// The constant-jerk pieces, in time order.
    pub fn segments(&self) -> &[JerkSegment] {
        &self.segments[..self.len]
    }
}

/// The start with its acceleration clamped into ±`a_max`, or None when a limit or the start
/// is not usable.
fn checked(from: Setpoint, v_max: f64, a_max: f64, j_max: f64) -> Option<Setpoint> {
    let ok = |x: f64| x.is_finite() && x > 0.0;
    let finite = from.position.is_finite() && from.velocity.is_finite();
    (ok(v_max) && ok(a_max) && ok(j_max) && finite).then(|| Setpoint {
        acceleration: if from.acceleration.is_finite() {
            from.acceleration.clamp(-a_max, a_max)
        } else {
            0.0
        },
        ..from
    })
}
