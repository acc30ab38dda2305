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
    /// Whether the following-error rule applies (off while a step trial jumps the target).
    pub following_active: bool,
    /// Whether the host is sending duty now (any motor-on state, pushing and open-loop tests
    /// included): the board-status and heating rules apply whenever it is.
    pub host_drives: bool,
    /// Whether the board has acknowledged (`ack_seq`) a duty of the present drive: before
    /// that, its motor-off status is from before the host started driving.
    pub drive_acked: bool,
    /// The board's status bits say the motor is on.
    pub board_motor_on: bool,
    /// The board's status bits say its watchdog turned the motor off.
    pub board_watchdog: bool,
    /// Breakaway duty in the direction of `duty`, % (controller.min_duty_forward or
    /// min_duty_reverse): above it (plus the stall margin) the axis should move.
    pub breakaway: f64,
    /// The move's in-position band, units: the breakaway stall rule applies only while the
    /// axis is farther than this from its target (it is asked to move).
    pub position_band: f64,
    /// Board time at which the running move's profile ends, s, while a move has not yet
    /// reached its in-position band; None otherwise.
    pub move_planned_end: Option<f64>,
    /// Board watchdog, ms, for the operator's sentence.
    pub watchdog_ms: u16,
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
    /// Motor heating estimate: duty² (duty as a fraction of full) through a first-order lag.
    /// Never reset by a trip or a clear: the winding stays hot.
    heat: f64,
    /// Board time of the previous observation, for the heating estimate's step.
    last_t: Option<f64>,
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
            heat: 0.0,
            last_t: None,
        }
    }

    /// The heating estimate as a fraction of its trip level (1.0 trips).
    pub fn heat_share(&self) -> f64 {
        let c = self.limits.continuous_duty / 100.0;
        if c >= 1.0 {
            0.0
        } else {
            self.heat / (c * c)
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
        // The board's word is final (brief.md, settled): it explains whatever else follows.
        if let Some(f) = self.check_board(o) {
            return Some(f);
        }
        if let Some(f) = self.check_heating(o) {
            return Some(f);
        }
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
        if let Some(f) = self.check_settling(o) {
            return Some(f);
        }
        self.check_stall(o)
    }

    /// A board that switched its motor off while the host drives it is a latched trip, never
    /// silently re-driven: the next duty would power the motor again with nobody knowing
    /// why it stopped.
    fn check_board(&self, o: &Observation) -> Option<Finding> {
        if !(o.host_drives && o.drive_acked) {
            return None;
        }
        if o.board_watchdog {
            return Some(Finding {
                cause: TripCause::BoardWatchdog,
                detail: format!(
                    "the board's watchdog turned the motor off: no duty reached it for over {} ms (host stalled, or the USB link paused); check the host's load and the cable, then clear",
                    o.watchdog_ms
                ),
            });
        }
        if !o.board_motor_on {
            return Some(Finding {
                cause: TripCause::BoardMotorOff,
                detail: "the board reports its motor off while the host drives it (board reset, brown-out or refused duty): check the board's supply, then clear"
                    .to_owned(),
            });
        }
        None
    }

    /// Motor heating, estimated without a current sensor: the winding's I²R heat follows
    /// duty² at stall (I = duty × V / R with no back-EMF; at speed the real current is lower,
    /// so the estimate errs on the hot side), through a first-order lag with the winding's
    /// thermal time constant, compared with the square of the continuous duty. Common
    /// practice in servo drives as an I²t limit (from memory; check-values.md "Motor
    /// heating").
    fn check_heating(&mut self, o: &Observation) -> Option<Finding> {
        let dt = self.last_t.map_or(0.0, |t0| (o.t - t0).max(0.0));
        self.last_t = Some(o.t);
        let d = if o.host_drives { (o.duty / 100.0).clamp(-1.0, 1.0) } else { 0.0 };
        let tau = self.limits.thermal_time_s.max(1e-3);
        self.heat += (d * d - self.heat) * (1.0 - (-dt / tau).exp());
        let c = self.limits.continuous_duty / 100.0;
        if c >= 1.0 || !o.host_drives || self.heat <= c * c {
            return None;
        }
        Some(Finding {
            cause: TripCause::Thermal,
            detail: format!(
                "estimated motor heating passed its limit: duty {:.0} % now, a running rms of {:.0} % against a continuous {:.0} % (time constant {:.0} s); let the motor cool, check for a binding load, lower the duty or the duty cycle of the moves",
                o.duty,
                100.0 * self.heat.sqrt(),
                self.limits.continuous_duty,
                self.limits.thermal_time_s
            ),
        })
    }

    /// A move must reach its band within its planned time plus the settle timeout; a jam
    /// short of the goal, or a load the motor cannot push, otherwise sits in `moving`.
    fn check_settling(&self, o: &Observation) -> Option<Finding> {
        let end = o.move_planned_end?;
        let late = o.t - end;
        if late <= self.limits.settle_timeout_s {
            return None;
        }
        let u = &self.unit;
        Some(Finding {
            cause: TripCause::NotInPosition,
            detail: format!(
                "the move is {:.3} {u} from its target {late:.2} s after its profile ended (allowed {:.2} s) at duty {:.0} %: check for a jam, a load beyond the motor, or too little gain near the target",
                o.target - o.position,
                self.limits.settle_timeout_s,
                o.duty
            ),
        })
    }

    fn check_stall(&mut self, o: &Observation) -> Option<Finding> {
        // Above the axis's own breakaway (plus a margin for static friction) it should move,
        // at any duty, whenever it is asked to; above stall_duty always.
        let asked = (o.target - o.position).abs() > o.position_band;
        let low = o.breakaway + self.limits.stall_margin_duty;
        let threshold =
            if asked { self.limits.stall_duty.min(low) } else { self.limits.stall_duty };
        if o.duty.abs() <= threshold {
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
                            "duty {:.0} % (above {threshold:.0} %) for {:.2} s with no encoder \
                             motion: check for a jam, a hard stop, motor power, or a broken \
                             coupling",
                            o.duty,
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

    /// Frames 1 ms apart from t = 0 with `f` shaping each; the first finding and its time.
    fn run_until(
        s: &mut Supervisor,
        secs: f64,
        f: impl Fn(&mut Observation),
    ) -> Option<(TripCause, f64)> {
        let n = (secs * 1000.0).round() as i64;
        (0..=n).find_map(|k| {
            let mut o = obs(k as f64 * 0.001);
            f(&mut o);
            s.observe(&o).map(|x| (x.cause, o.t))
        })
    }

    fn driving(o: &mut Observation) {
        o.host_drives = true;
        o.drive_acked = true;
        o.board_motor_on = true;
        o.watchdog_ms = 50;
    }

    // The board's status is final (brief.md, settled in round two; docs/protocol.md's
    // watchdog contract): servotty's own rule, common practice, no outside source.
    #[test]
    fn a_board_that_cut_the_motor_latches_its_own_cause() {
        let mut s = sup();
        let mut o = obs(0.0);
        driving(&mut o);
        assert_eq!(s.observe(&o), None);
        o.board_watchdog = true;
        o.board_motor_on = false;
        let f = s.observe(&o).expect("trips");
        assert_eq!(f.cause, TripCause::BoardWatchdog);
        assert!(f.detail.contains("50 ms"), "{f:?}");
        o.board_watchdog = false;
        assert_eq!(s.observe(&o).map(|f| f.cause), Some(TripCause::BoardMotorOff));
        // Before the board has acknowledged the drive, its motor-off status is old news.
        o.drive_acked = false;
        assert_eq!(s.observe(&o), None);
        // Not driving (disabled, stopped): the board's motor is meant to be off.
        o.drive_acked = true;
        o.host_drives = false;
        o.motor_on = false;
        assert_eq!(s.observe(&o), None);
    }

    // servotty's own rule (common practice, no source): a jam is no motion while the duty
    // stays above the axis's breakaway plus a margin, whatever the absolute duty.
    #[test]
    fn a_jam_at_moderate_duty_is_a_stall_when_the_axis_is_asked_to_move() {
        let jammed = |o: &mut Observation| {
            o.duty = 40.0; // below stall_duty (50 %), well above breakaway 8.5 % + 10 %
            o.breakaway = 8.5;
            o.position_band = 0.1;
            o.target = 1.0;
            o.count = 0;
        };
        let (cause, at) = run_until(&mut sup(), 2.0, jammed).expect("trips");
        assert_eq!(cause, TripCause::Stall);
        assert!((at - 0.5).abs() < 0.002, "at {at}");
        // Holding inside the band at the same duty (static friction) is not a stall.
        let holding = |o: &mut Observation| {
            jammed(o);
            o.target = 0.05;
        };
        assert_eq!(run_until(&mut sup(), 2.0, holding), None);
        // Below breakaway + margin it is not a stall either.
        let gentle = |o: &mut Observation| {
            jammed(o);
            o.duty = 15.0;
        };
        assert_eq!(run_until(&mut sup(), 2.0, gentle), None);
    }

    #[test]
    fn a_move_not_in_position_after_its_planned_time_and_margin_trips() {
        let late = |o: &mut Observation| {
            o.target = 1.0;
            o.position = 0.7;
            o.duty = 12.0;
            o.breakaway = 8.5; // 12 % < 8.5 % + 10 %: not a stall
            o.move_planned_end = Some(0.3);
        };
        let (cause, at) = run_until(&mut sup(), 5.0, late).expect("trips");
        assert_eq!(cause, TripCause::NotInPosition);
        // settle_timeout_s = 2.0 after the profile's end at 0.3 s.
        assert!((at - 2.3).abs() < 0.002, "at {at}");
    }

    // First-order thermal model driven by duty²: common practice in drives as an I²t limit
    // (from memory; check-values.md "Motor heating"). For a step of duty d from cold the
    // estimate is d²(1 − e^(−t/τ)); it passes c² at t = −τ ln(1 − c²/d²). With d = 100 %,
    // c = 50 %, τ = 30 s: t = 30 ln(4/3) = 8.6305 s.
    #[test]
    fn heating_trips_where_the_first_order_model_says() {
        let mut l = limits();
        l.continuous_duty = 50.0;
        l.thermal_time_s = 30.0;
        let mut s = Supervisor::new(&l, "mm", 24.0, 200.0);
        let full = |o: &mut Observation| {
            driving(o);
            o.duty = -100.0;
            o.motor_on = false; // pushing or open loop: the heating rule still applies
        };
        let (cause, at) = run_until(&mut s, 20.0, full).expect("trips");
        assert_eq!(cause, TripCause::Thermal);
        let expected = 30.0 * (4.0_f64 / 3.0).ln();
        assert!((at - expected).abs() < 0.002, "at {at}, expected {expected}");
        // At the continuous duty itself it never trips.
        let mut s = Supervisor::new(&l, "mm", 24.0, 200.0);
        let rated = |o: &mut Observation| {
            driving(o);
            o.duty = 49.9;
        };
        assert_eq!(run_until(&mut s, 200.0, rated), None);
    }
}
