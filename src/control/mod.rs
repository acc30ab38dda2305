//! Controllers, motion profiles and step-response analysis: everything between "where the
//! axis should be" and "what duty to send".
//!
//! - [`controller`]: the position controller ([`Controller`]): on-off, proportional or PID,
//!   chosen by [`ControlMode`](crate::config::ControlMode), with anti-windup, output limits,
//!   minimum-duty compensation and feedforward.
//! - [`profile`]: trapezoidal velocity profiles ([`Trapezoid`]) for moves, jogs and stops,
//!   and [`Profile`], the one interface the axis uses for either shape.
//! - [`jerk_limited`]: jerk-limited (double S) profiles ([`JerkLimited`]).
//! - [`params`]: the table of controller parameters (key, unit, modes, range, rounding) that
//!   the gain editor, the configuration writer, the suggestions and the records all use.
//! - [`step_metrics`]: rise time, overshoot, settling time and steady-state error of a
//!   recorded step response, for tuning.
//!
//! The engine calls [`Profile::sample`] and then [`Controller::update`] once per board tick,
//! with the board's own time step; nothing here reads a clock, so every computation is a pure
//! function of its inputs and is tested deterministically.

pub mod controller;
pub mod jerk_limited;
pub mod params;
pub mod profile;
pub mod step_metrics;

pub use controller::{filtered_derivative, Controller, Terms, MIN_DUTY_BLEND_FRACTION};
pub use jerk_limited::{JerkLimited, JerkSegment};
pub use profile::{stopping_distance, Limits, Profile, ProfileShape, Segment, Trapezoid};

/// Where the axis should be at one instant, as produced by a motion profile.
///
/// `velocity` and `acceleration` feed the controller's feedforward; a plain position target
/// (no profile) leaves them at zero.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Setpoint {
    /// Target position, units.
    pub position: f64,
    /// Target velocity, units/s.
    pub velocity: f64,
    /// Target acceleration, units/s².
    pub acceleration: f64,
}
