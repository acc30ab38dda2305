//! The position controller: turns a setpoint and a measured position into a duty (%).
//!
//! Hand-written rather than taken from a crate: the loop needs derivative on measurement with
//! its own filter, two anti-windup schemes, per-direction minimum-duty compensation, bumpless
//! gain changes and a variable time step from the board's clock, all in a few dozen lines that
//! must be exactly the textbook discrete form the tests check.
//!
//! # Modes
//! With error `e = setpoint.position − position`:
//!
//! - **On-off** ([`ControlMode::OnOff`]): `±on_off_duty` (limited to `max_duty`) towards the
//!   setpoint while `|e| > tolerance`, zero inside the band. No hysteresis: the band itself is
//!   the dead zone that keeps the output from reversing around zero error; at its edge the
//!   output only toggles between zero and one direction. No compensation or feedforward: the
//!   configured duty is what the motor gets.
//! - **Proportional** ([`ControlMode::Proportional`]): `kp·e`, limited to `±max_duty`, then
//!   minimum-duty compensation. No integral, derivative or feedforward.
//! - **PID** ([`ControlMode::Pid`]): parallel form
//!   `v = P + I + D + FF`, `u = sat(v)` to `±max_duty`, then minimum-duty compensation:
//!   - `P = kp·e`.
//!   - `I` is stored already multiplied by `ki` (in %), so changing `ki` never bumps the
//!     output. It is advanced after the output is computed, as in Åström & Wittenmark's
//!     listing: `I += ki·h·e` (forward difference), then limited to `±integral_limit`.
//!   - `D` acts on the measurement, not the error, so a setpoint step gives no derivative kick,
//!     through a first-order filter with time constant `Tf = derivative_filter_s`:
//!     `D_k = ad·D_{k−1} − bd·(y_k − y_{k−1})`, `ad = Tf/(Tf+h)`, `bd = kd/(Tf+h)`. This is
//!     Åström's `ad = Td/(Td+N·h)`, `bd = K·Td·N/(Td+N·h)` with `kd = K·Td`, `Tf = Td/N`
//!     (backward difference, stable for every h). The filter state is kept as the filtered
//!     velocity of the measurement (units/s, see [`filtered_derivative`]) and multiplied by
//!     `kd` at use, so a `kd` change moves D by a known amount that the integral absorbs.
//!   - `FF = ff_velocity·v_sp + ff_acceleration·a_sp + ff_static·sign(v_sp)` from the profile,
//!     with `ff_static_reverse` in place of `ff_static` while `v_sp < 0` when it is given
//!     (friction that differs by direction, e.g. a lift carrying a weight). A negative static
//!     term (the minimum duty already pays more than the friction) is limited to
//!     `|ff_velocity·v_sp|`, so it never turns the feedforward against the profile.
//!   - Anti-windup [`AntiWindup::Clamp`]: the integral holds while the output is saturated
//!     and the error pushes further into saturation (`(v − u)·e > 0`).
//!     [`AntiWindup::BackCalculation`]: `I += ki·h·e + (h/Tt)·(u − v)`; `h/Tt` is capped at 1
//!     so a long time step (h ≥ Tt) removes the excess in one step instead of overshooting
//!     it (the explicit update is unstable for h/Tt > 2).
//!
//! # Minimum-duty (deadband) compensation
//! A brushed gearmotor does not move below a breakaway duty, different in each direction. The
//! controller works in a linear domain `u ∈ [−max_duty, max_duty]` and maps it to the duty
//! the motor sees: for `|u| ≥ w`,
//! `u' = sign(u)·(min_dir + |u|·(max_duty − min_dir)/max_duty)`, so every such output is at
//! least `min_dir` and `max_duty` stays reachable. A pure jump to `±min_dir` at `u = 0` would
//! make the output chatter between `+min_forward` and `−min_reverse` whenever encoder noise
//! or a one-count error flips the sign of `e`, so for `|u| < w` the offset is blended in
//! linearly: `u' = sign(u)·(min_dir·|u|/w + |u|·(max_duty − min_dir)/max_duty)`. The map is
//! continuous, odd-shaped and strictly increasing (so it has an inverse, used for bumpless
//! changes) and leaves a small residual deadband near zero error that the integral works
//! through. `w = MIN_DUTY_BLEND_FRACTION · max_duty` (1 %). Common practice, no source; the
//! width is our choice.
//!
//! # Robustness
//! `dt ≤ 0`, a non-finite `dt`, position or setpoint, or a non-finite result leave every state
//! untouched and return the previous output, so the output is never NaN. Nonsensical
//! configuration numbers (which [`MachineConfig::validate`](crate::config::MachineConfig::validate)
//! rejects anyway) are treated as zero limits rather than panicking.
//!
//! # Bumpless changes
//! [`Controller::set_config`] recomputes the integral as `I = u − P − D − FF` with the new
//! gains, where `u` is the last output mapped back into the new linear domain (Åström &
//! Hägglund's bumpless parameter change), so the next output continues from the last one.
//! Only PID has a state to absorb a difference; a switch to on-off or proportional jumps to
//! that law's output.
//!
//! # Sources
//! - K. J. Åström and B. Wittenmark, *Computer-Controlled Systems*, 3rd ed., Prentice Hall
//!   1997, ch. 8 (discrete PID, filtered derivative, anti-windup, bumpless transfer).
//! - K. J. Åström and T. Hägglund, *PID Controllers: Theory, Design and Tuning*, 2nd ed., ISA
//!   1995, ch. 3 (derivative on measurement, integrator windup, back-calculation with
//!   tracking time Tt, bumpless parameter changes).

use super::Setpoint;
use crate::config::{AntiWindup, ControlMode, ControllerConfig};

/// Width of the blend near zero in the minimum-duty compensation, as a fraction of
/// `max_duty`: below `|u| = w` the breakaway offset is scaled down linearly to avoid
/// chattering between the two directions. Common practice, no source; the value is ours.
pub const MIN_DUTY_BLEND_FRACTION: f64 = 0.01;

/// One step of the first-order filtered derivative (backward difference):
/// returns `ad·prev + bd·(x − x_prev)` with `ad = tf/(tf+h)`, `bd = gain/(tf+h)`.
///
/// With `gain = kd` and the error as `x` this is the textbook filtered derivative term
/// (Åström & Wittenmark, *Computer-Controlled Systems*, 3rd ed., ch. 8); with `gain = 1` it is
/// the filtered rate of change of `x`, which is how [`Controller`] keeps its state. `tf < 0`
/// or NaN counts as 0 (unfiltered difference quotient). `h` must be > 0.
pub fn filtered_derivative(prev: f64, x: f64, x_prev: f64, gain: f64, tf: f64, h: f64) -> f64 {
    let tf = if tf > 0.0 { tf } else { 0.0 };
    let ad = tf / (tf + h);
    let bd = gain / (tf + h);
    ad * prev + bd * (x - x_prev)
}

/// The parts of the last output, for telemetry and tuning screens. All in %.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Terms {
    /// Proportional part (the whole law's output in on-off mode).
    pub p: f64,
    /// Integral part used for this output (before this step's integration).
    pub i: f64,
    /// Derivative part (on measurement, filtered).
    pub d: f64,
    /// Feedforward part.
    pub ff: f64,
    /// Sum before limiting (linear domain).
    pub unsaturated: f64,
    /// After limiting to ±max_duty (linear domain).
    pub saturated: f64,
    /// What the motor gets: after minimum-duty compensation.
    pub output: f64,
}

/// Inputs of the last good update, needed to recompute the integral on a gain change.
#[derive(Debug, Clone, Copy)]
struct LastStep {
    error: f64,
    setpoint: Setpoint,
}

/// Position controller for one axis. See the module docs for the control laws.
#[derive(Debug, Clone)]
pub struct Controller {
    cfg: ControllerConfig,
    /// Integral term, %, already scaled by ki.
    integral: f64,
    /// Filtered rate of change of the measurement, units/s (D = −kd · this).
    rate: f64,
    prev_position: Option<f64>,
    last: Option<LastStep>,
    terms: Terms,
}

impl Controller {
    /// A controller at rest: no integral, no derivative history, output 0.
    pub fn new(cfg: &ControllerConfig) -> Self {
        Self {
            cfg: cfg.clone(),
            integral: 0.0,
            rate: 0.0,
            prev_position: None,
            last: None,
            terms: Terms::default(),
        }
    }

    /// One control step: setpoint from the profile, measured position (axis units), dt = board
    /// time since last step (s). Returns duty in % (−max_duty..=max_duty).
    ///
    /// `dt ≤ 0` or any non-finite input returns the previous output and changes nothing.
    pub fn update(&mut self, sp: &Setpoint, position: f64, dt: f64) -> f64 {
        let inputs_ok = dt.is_finite()
            && dt > 0.0
            && position.is_finite()
            && sp.position.is_finite()
            && sp.velocity.is_finite()
            && sp.acceleration.is_finite();
        if !inputs_ok {
            return self.terms.output;
        }
        let c = &self.cfg;
        let max = non_negative(c.max_duty);
        let e = sp.position - position;
        // The derivative filter runs in every mode so that a switch to PID starts with a
        // settled filter (bumpless transfer needs the idle law to track).
        let rate = match self.prev_position {
            Some(prev) => {
                filtered_derivative(self.rate, position, prev, 1.0, c.derivative_filter_s, dt)
            }
            None => 0.0,
        };
        let mut integral = self.integral;
        let terms = match c.mode {
            ControlMode::OnOff => {
                let duty = non_negative(c.on_off_duty).min(max);
                let out = if e.abs() > c.tolerance { duty.copysign(e) } else { 0.0 };
                Terms { p: out, unsaturated: out, saturated: out, output: out, ..Terms::default() }
            }
            ControlMode::Proportional => {
                let v = c.kp * e;
                let u = limit(v, max);
                let out = self.compensate(u);
                Terms { p: v, unsaturated: v, saturated: u, output: out, ..Terms::default() }
            }
            ControlMode::Pid => {
                let p = c.kp * e;
                let d = -c.kd * rate;
                let ff = feedforward(c, sp);
                let v = p + integral + d + ff;
                let u = limit(v, max);
                integral = match c.anti_windup {
                    AntiWindup::Clamp => {
                        if (v - u) * e > 0.0 {
                            integral
                        } else {
                            integral + c.ki * dt * e
                        }
                    }
                    AntiWindup::BackCalculation => {
                        let k = if c.tracking_time_s > 0.0 {
                            (dt / c.tracking_time_s).min(1.0)
                        } else {
                            1.0
                        };
                        integral + c.ki * dt * e + k * (u - v)
                    }
                };
                integral = limit(integral, non_negative(c.integral_limit));
                let out = self.compensate(u);
                Terms { p, i: self.integral, d, ff, unsaturated: v, saturated: u, output: out }
            }
        };
        // Belt and braces: whatever the configuration, never hand out NaN or exceed the limit.
        let finite =
            [terms.unsaturated, terms.output, integral, rate].iter().all(|x| x.is_finite());
        if !finite {
            return self.terms.output;
        }
        self.terms = Terms { output: limit(terms.output, max), ..terms };
        self.integral = if c.mode == ControlMode::Pid { integral } else { 0.0 };
        self.rate = rate;
        self.prev_position = Some(position);
        self.last = Some(LastStep { error: e, setpoint: *sp });
        self.terms.output
    }

    /// Forget integrator/derivative history (bumpless: next update starts from the measured
    /// position with no derivative kick). The held output becomes 0.
    pub fn reset(&mut self, position: f64) {
        self.integral = 0.0;
        self.rate = 0.0;
        self.prev_position = position.is_finite().then_some(position);
        self.last = None;
        self.terms = Terms::default();
    }

    /// Change gains live without a bump in the output (bumpless parameter change: the stored
    /// integral is recomputed as `I = u − P − D − FF` with the new gains, `u` being the last
    /// output mapped back through the new minimum-duty compensation). Continuity holds unless
    /// the new `max_duty` or `integral_limit` is too small to reproduce the last output.
    pub fn set_config(&mut self, cfg: &ControllerConfig) {
        if *cfg == self.cfg {
            return;
        }
        self.cfg = cfg.clone();
        // The held output (returned on a bad time step) must respect the new limit too.
        let max = non_negative(cfg.max_duty);
        self.terms.output = limit(self.terms.output, max);
        if cfg.mode != ControlMode::Pid {
            self.integral = 0.0;
            return;
        }
        let Some(last) = self.last else { return };
        let u = self.decompensate(self.terms.output);
        let p = cfg.kp * last.error;
        let d = -cfg.kd * self.rate;
        let ff = feedforward(cfg, &last.setpoint);
        let integral = limit(u - p - d - ff, non_negative(cfg.integral_limit));
        if integral.is_finite() {
            self.integral = integral;
        }
    }

    /// The configuration in use.
    pub fn config(&self) -> &ControllerConfig {
        &self.cfg
    }

    /// The last output, % (0 after `new` or `reset`).
    pub fn output(&self) -> f64 {
        self.terms.output
    }

    /// The parts of the last output.
    pub fn terms(&self) -> Terms {
        self.terms
    }

    /// The integral term that the next update will use, %.
    pub fn integral(&self) -> f64 {
        self.integral
    }

    /// Linear-domain `u` → duty the motor sees (minimum-duty compensation, module docs).
    pub fn compensate(&self, u: f64) -> f64 {
        let max = non_negative(self.cfg.max_duty);
        if u == 0.0 || max == 0.0 {
            return 0.0;
        }
        let (m, w) = self.min_and_blend(u > 0.0, max);
        let a = u.abs().min(max);
        let offset = m * (a / w).min(1.0);
        (offset + a * (max - m) / max).copysign(u)
    }

    /// Inverse of [`Controller::compensate`] on `−max_duty..=max_duty`.
    pub fn decompensate(&self, out: f64) -> f64 {
        let max = non_negative(self.cfg.max_duty);
        if out == 0.0 || max == 0.0 {
            return 0.0;
        }
        let (m, w) = self.min_and_blend(out > 0.0, max);
        let a = out.abs().min(max);
        let slope = (max - m) / max;
        let knee = m + w * slope;
        let u = if a >= knee {
            if slope > 0.0 {
                (a - m) / slope
            } else {
                max
            }
        } else {
            a / (m / w + slope)
        };
        u.min(max).copysign(out)
    }

    /// Minimum duty for the direction (kept inside 0..=max) and the blend width.
    fn min_and_blend(&self, forward: bool, max: f64) -> (f64, f64) {
        let m = if forward { self.cfg.min_duty_forward } else { self.cfg.min_duty_reverse };
        (non_negative(m).min(max), MIN_DUTY_BLEND_FRACTION * max)
    }
}

fn feedforward(c: &ControllerConfig, sp: &Setpoint) -> f64 {
    let direction = if sp.velocity > 0.0 {
        1.0
    } else if sp.velocity < 0.0 {
        -1.0
    } else {
        0.0
    };
    // Per direction: a lift's weight adds to the friction going up and takes from it going
    // down.
    let stat =
        if direction < 0.0 { c.ff_static_reverse.unwrap_or(c.ff_static) } else { c.ff_static };
    // A negative value (the minimum duty pays more than the friction) takes back no more than
    // the velocity feedforward adds: near standstill at the ends of a move it must not turn
    // the output against the profile, where the minimum-duty map would kick it the other way.
    let stat = if stat < 0.0 { stat.max(-(c.ff_velocity * sp.velocity).abs()) } else { stat };
    c.ff_velocity * sp.velocity + c.ff_acceleration * sp.acceleration + stat * direction
}

/// A magnitude limit from a configuration number: negative or NaN counts as 0.
fn non_negative(x: f64) -> f64 {
    if x > 0.0 {
        x
    } else {
        0.0
    }
}

/// `x` limited to `±m` (`m ≥ 0`, may be infinite); never panics, unlike `f64::clamp`.
fn limit(x: f64, m: f64) -> f64 {
    x.max(-m).min(m)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pid() -> ControllerConfig {
        ControllerConfig {
            mode: ControlMode::Pid,
            kp: 2.0,
            ki: 2.0,
            kd: 0.5,
            derivative_filter_s: 0.025,
            integral_limit: 100.0,
            tracking_time_s: 0.5,
            ..ControllerConfig::default()
        }
    }

    // Coefficients for K = 2, Ti = 1, Td = 0.25, N = 10, h = 0.01: ad = Td/(Td+Nh) = 0.714286,
    // bd = K·Td·N/(Td+Nh) = 14.2857. Source: Åström & Wittenmark, Computer-Controlled Systems,
    // 3rd ed., 1997, ch. 8 (filtered derivative, backward difference).
    #[test]
    fn filter_coefficients_match_textbook_form() {
        let (k, td, n, h) = (2.0, 0.25, 10.0, 0.01);
        let ad = filtered_derivative(1.0, 0.0, 0.0, 0.0, td / n, h);
        let bd = filtered_derivative(0.0, 1.0, 0.0, k * td, td / n, h);
        assert!((ad - td / (td + n * h)).abs() < 1e-12 && (ad - 0.714286).abs() < 1e-6);
        assert!((bd - k * td * n / (td + n * h)).abs() < 1e-12 && (bd - 14.2857).abs() < 1e-4);
    }

    // Inverse of the compensation map: common practice, no source (property of our map).
    #[test]
    fn decompensate_inverts_compensate() {
        let cfg = ControllerConfig { min_duty_forward: 12.0, min_duty_reverse: 20.0, ..pid() };
        let c = Controller::new(&cfg);
        for i in -1000..=1000 {
            let u = f64::from(i) * 0.1;
            let back = c.decompensate(c.compensate(u));
            assert!((back - u).abs() < 1e-9, "u {u} → {back}");
        }
    }

    // A configuration that validation would reject must still not panic or produce NaN.
    // Common practice, no source.
    #[test]
    fn nonsense_config_never_panics_or_gives_nan() {
        let cfg = ControllerConfig {
            max_duty: f64::NAN,
            integral_limit: -1.0,
            min_duty_forward: 500.0,
            derivative_filter_s: f64::NAN,
            tracking_time_s: -3.0,
            anti_windup: AntiWindup::BackCalculation,
            ..pid()
        };
        let mut c = Controller::new(&cfg);
        for k in 0..10 {
            let u =
                c.update(&Setpoint { position: 1.0, ..Setpoint::default() }, f64::from(k), 0.01);
            assert!(u.is_finite());
        }
        let mut c = Controller::new(&ControllerConfig { kp: f64::INFINITY, ..pid() });
        assert_eq!(c.update(&Setpoint::default(), 0.0, 0.01), 0.0);
        assert!(c
            .update(&Setpoint { position: 1.0, ..Setpoint::default() }, 0.0, 0.01)
            .is_finite());
    }
}
