//! Supervision: the per-frame checks that trip an axis.
//!
//! Pure logic with no I/O, fed one telemetry frame at a time by the axis task, so that every
//! rule can be unit-tested with made-up frames. It owns the timing state of the checks that
//! need a duration (stall, runaway); the latch itself lives in the axis state machine.
//!
//! Written by hand: these rules are the product's own supervision policy.

use crate::config::LimitsConfig;
use crate::engine::snapshot::TripCause;

/// One frame's worth of facts, as the axis task knows them after the control step.
#[derive(Debug, Clone, Copy, Default)]
pub struct Observation {
    /// Board time, s.
    pub t: f64,
    /// Profile setpoint, units.
    pub target: f64,
    /// Profile velocity, unit/s.
    pub target_velocity: f64,
    /// Measured position, units.
    pub position: f64,
    /// Estimated velocity, unit/s.
    pub velocity: f64,
    /// Duty applied during the interval that this frame closes, %.
    pub duty: f64,
    /// Unwrapped encoder count.
    pub count: i64,
    /// Count change since the previous frame.
    pub count_delta: i64,
    /// Board ticks since the previous frame (1 unless frames were lost).
    pub ticks: u32,
    /// Whether the host is driving the motor.
    pub motor_on: bool,
    /// Whether soft limits apply (the position has a trusted reference).
    pub limits_active: bool,
    /// Whether the following-error rule applies (off while a step test jumps the target).
    pub following_active: bool,
}

/// A check that fired: cause and a sentence for the operator.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    /// What tripped.
    pub cause: TripCause,
    /// What was exceeded, with numbers, and what to check.
    pub detail: String,
}

/// Supervision state for one axis.
#[derive(Debug, Clone)]
pub struct Supervisor {
    limits: LimitsConfig,
    unit: String,
    /// Velocity below which "moving" is noise, unit/s.
    min_speed: f64,
    stall: Option<(f64, i64)>,
    runaway: Option<(f64, f64)>,
}

impl Supervisor {
    /// `counts_per_unit` and `max_velocity` set the noise floors of the motion checks.
    pub fn new(limits: &LimitsConfig, unit: &str, counts_per_unit: f64, max_velocity: f64) -> Self {
        // Two counts per 10 ms is the smallest speed a 4× encoder reports with any
        // confidence; 2 % of the top speed keeps slow creeping from looking like a runaway.
        let min_speed = (200.0 / counts_per_unit).max(0.02 * max_velocity);
        Self {
            limits: limits.clone(),
            unit: unit.to_owned(),
            min_speed,
            stall: None,
            runaway: None,
        }
    }

    /// The following-error band at a given profile velocity, units.
    pub fn following_error_band(&self, target_velocity: f64) -> f64 {
        self.limits.following_error
            + self.limits.following_error_per_velocity * target_velocity.abs()
    }

    /// Forget the duration checks' history (after enable, clear or a change of state).
    pub fn reset(&mut self) {
        self.stall = None;
        self.runaway = None;
    }

    /// Runs every check on one frame; the first that fires wins.
    pub fn observe(&mut self, o: &Observation) -> Option<Finding> {
        // The encoder check runs even with the motor off: a jump is a wiring or noise fault
        // whatever the drive is doing, and it poisons the position reference.
        let allowed = u64::from(self.limits.encoder_jump_counts) * u64::from(o.ticks.max(1));
        if o.count_delta.unsigned_abs() > allowed {
            return Some(Finding {
                cause: TripCause::EncoderJump,
                detail: format!(
                    "count changed by {} in {} tick(s), more than {} allowed: check encoder \
                     wiring, shielding and supply",
                    o.count_delta, o.ticks, allowed
                ),
            });
        }
        if !o.motor_on {
            self.reset();
            return None;
        }
        let runaway = self.check_runaway(o);
        if runaway.is_some() {
            return runaway;
        }
        let u = &self.unit;
        if o.limits_active {
            let l = &self.limits;
            let margin = l.following_error;
            if o.position < l.soft_min - margin || o.position > l.soft_max + margin {
                return Some(Finding {
                    cause: TripCause::SoftLimit,
                    detail: format!(
                        "position {:.3} {u} is outside the soft limits {} … {} {u}",
                        o.position, l.soft_min, l.soft_max
                    ),
                });
            }
        }
        let band = self.following_error_band(o.target_velocity);
        let fe = o.target - o.position;
        if o.following_active && fe.abs() > band {
            // A miswired axis usually blows the band before the runaway rule's time is up;
            // if it is at that moment speeding up against its duty, say what is really wrong.
            if let Some((since, speed0)) = self.runaway {
                if o.velocity.abs() >= speed0 {
                    return Some(self.runaway_finding(o, o.t - since));
                }
            }
            return Some(Finding {
                cause: TripCause::FollowingError,
                detail: format!(
                    "following error {fe:.3} {u} exceeded the band ±{band:.3} {u} at profile \
                     velocity {:.1} {u}/s",
                    o.target_velocity
                ),
            });
        }
        self.check_stall(o)
    }

    fn check_stall(&mut self, o: &Observation) -> Option<Finding> {
        if o.duty.abs() <= self.limits.stall_duty {
            self.stall = None;
            return None;
        }
        // A couple of counts of dither is not motion.
        match self.stall {
            Some((since, count)) if (o.count - count).abs() <= 2 => {
                if o.t - since >= self.limits.stall_timeout_s {
                    return Some(Finding {
                        cause: TripCause::Stall,
                        detail: format!(
                            "duty {:.0} % (above {:.0} %) for {:.2} s with no encoder motion: \
                             check for a jam, a hard stop, motor power, or a broken coupling",
                            o.duty,
                            self.limits.stall_duty,
                            o.t - since
                        ),
                    });
                }
            }
            _ => self.stall = Some((o.t, o.count)),
        }
        None
    }

    fn check_runaway(&mut self, o: &Observation) -> Option<Finding> {
        // Braking also has duty against velocity, but the speed falls; a miswired axis
        // speeds up against its duty. So the test is "against, and not slowing down".
        let against = o.duty.abs() > self.limits.runaway_duty
            && o.velocity.abs() > self.min_speed
            && o.velocity.signum() != o.duty.signum();
        if !against {
            self.runaway = None;
            return None;
        }
        match self.runaway {
            None => self.runaway = Some((o.t, o.velocity.abs())),
            Some((since, speed0)) => {
                if o.velocity.abs() < speed0 {
                    // Slowing down: re-arm from here.
                    self.runaway = Some((o.t, o.velocity.abs()));
                } else if o.t - since >= self.limits.runaway_timeout_s {
                    return Some(self.runaway_finding(o, o.t - since));
                }
            }
        }
        None
    }

    fn runaway_finding(&self, o: &Observation, for_s: f64) -> Finding {
        Finding {
            cause: TripCause::Runaway,
            detail: format!(
                "moving at {:.1} {u}/s against a duty of {:.0} % for {for_s:.3} s: the motor or \
                 the encoder is wired the other way round (flip scale.invert_motor or \
                 scale.invert_encoder)",
                o.velocity,
                o.duty,
                u = self.unit
            ),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn limits() -> LimitsConfig {
        LimitsConfig {
            soft_min: 0.0,
            soft_max: 100.0,
            following_error: 2.0,
            following_error_per_velocity: 0.01,
            stall_duty: 50.0,
            stall_timeout_s: 0.5,
            link_timeout_s: 0.1,
            encoder_jump_counts: 100,
            runaway_duty: 20.0,
            runaway_timeout_s: 0.03,
            stall_margin_duty: 10.0,
            settle_timeout_s: 2.0,
            continuous_duty: 100.0,
            thermal_time_s: 30.0,
        }
    }

    fn sup() -> Supervisor {
        Supervisor::new(&limits(), "mm", 24.0, 200.0)
    }

    fn obs(t: f64) -> Observation {
        Observation {
            t,
            ticks: 1,
            motor_on: true,
            limits_active: true,
            following_active: true,
            ..Default::default()
        }
    }

    // The band rules below are the configuration's documented semantics (common practice,
    // no source): static band plus a velocity-proportional allowance.
    #[test]
    fn following_error_band_grows_with_velocity() {
        let s = sup();
        assert!((s.following_error_band(100.0) - 3.0).abs() < 1e-12);
        assert!((s.following_error_band(-100.0) - 3.0).abs() < 1e-12);
    }

    #[test]
    fn following_error_trips_outside_band_only() {
        let mut s = sup();
        let mut o = obs(0.0);
        o.target = 10.0;
        o.position = 8.1;
        assert_eq!(s.observe(&o), None);
        o.position = 7.9;
        assert_eq!(s.observe(&o).map(|f| f.cause), Some(TripCause::FollowingError));
    }

    #[test]
    fn stall_needs_duty_and_time() {
        let mut s = sup();
        let mut t = 0.0;
        let mut fired = None;
        while t < 1.0 && fired.is_none() {
            let mut o = obs(t);
            o.duty = 60.0;
            o.count = 1000 + i64::from(((t * 1000.0) as i64 % 2) == 0);
            fired = s.observe(&o).map(|f| (f.cause, t));
            t += 0.001;
        }
        let (cause, at) = fired.expect("stall fires");
        assert_eq!(cause, TripCause::Stall);
        assert!((at - 0.5).abs() < 0.002, "fired at {at}");
    }

    #[test]
    fn braking_is_not_runaway_but_speeding_up_against_duty_is() {
        let mut s = sup();
        // Braking: moving forward, negative duty, speed falling.
        for k in 0..100 {
            let mut o = obs(f64::from(k) * 0.001);
            o.duty = -60.0;
            o.velocity = 150.0 - f64::from(k);
            assert_eq!(s.observe(&o), None);
        }
        // Miswired: positive duty, speeding up backwards.
        let mut s = sup();
        let mut fired = None;
        for k in 0..100 {
            let mut o = obs(f64::from(k) * 0.001);
            o.duty = 40.0;
            o.velocity = -10.0 - f64::from(k);
            if let Some(f) = s.observe(&o) {
                fired = Some((f.cause, k));
                break;
            }
        }
        let (cause, k) = fired.expect("runaway fires");
        assert_eq!(cause, TripCause::Runaway);
        assert!((29..=31).contains(&k), "fired at tick {k}");
    }

    #[test]
    fn a_band_blown_while_speeding_up_against_the_duty_is_called_runaway() {
        let mut s = sup();
        let mut last = None;
        for k in 0..10 {
            let mut o = obs(f64::from(k) * 0.001);
            o.duty = -60.0;
            o.velocity = 20.0 + f64::from(k);
            o.target = -0.5 * f64::from(k);
            last = s.observe(&o);
            if last.is_some() {
                break;
            }
        }
        let f = last.expect("fires before the runaway timeout");
        assert_eq!(f.cause, TripCause::Runaway, "{f:?}");
    }

    #[test]
    fn encoder_jump_scales_with_lost_ticks() {
        let mut s = sup();
        let mut o = obs(0.0);
        o.count_delta = 150;
        o.ticks = 2;
        assert_eq!(s.observe(&o), None);
        o.ticks = 1;
        assert_eq!(s.observe(&o).map(|f| f.cause), Some(TripCause::EncoderJump));
    }

    #[test]
    fn soft_limit_trips_past_the_margin() {
        let mut s = sup();
        let mut o = obs(0.0);
        o.position = 102.5;
        o.target = 102.5;
        assert_eq!(s.observe(&o).map(|f| f.cause), Some(TripCause::SoftLimit));
        o.limits_active = false;
        assert_eq!(s.observe(&o), None);
    }
}
