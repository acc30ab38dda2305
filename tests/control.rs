//! Controllers, motion profiles and step-response metrics checked against published forms and
//! worked examples (source beside each check) and against python-control fixtures
//! (tests/reference/control/step_info_fixtures.py).

use proptest::prelude::*;
use servotty::config::{AntiWindup, ControlMode, ControllerConfig};
use servotty::control::step_metrics::{step_metrics, StepError, StepMetrics, DEFAULT_BAND_FRAC};
use servotty::control::{
    filtered_derivative, Controller, Setpoint, Trapezoid, MIN_DUTY_BLEND_FRACTION,
};

// ---------------------------------------------------------------------------------------------
// Helpers
// ---------------------------------------------------------------------------------------------

/// The Åström check case: K = 2, Ti = 1, Td = 0.25, N = 10 in parallel form
/// (kp = K, ki = K/Ti, kd = K·Td, Tf = Td/N).
fn astrom_pid() -> ControllerConfig {
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

fn at(position: f64) -> Setpoint {
    Setpoint { position, ..Setpoint::default() }
}

const H: f64 = 0.01;

/// Closed loop on an integrator plant y' = gain·u (u in %), explicit Euler at step h; the
/// setpoint comes from `sp(t)`. Returns (t, y, u) per step. A plain integrator is the
/// simplest plant on which a saturated integrating controller winds up.
fn run_integrator(
    c: &mut Controller,
    gain: f64,
    sp: impl Fn(f64) -> Setpoint,
    steps: usize,
) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let (mut ts, mut ys, mut us) = (Vec::new(), Vec::new(), Vec::new());
    let mut y = 0.0;
    for k in 0..steps {
        let t = k as f64 * H;
        let u = c.update(&sp(t), y, H);
        ts.push(t);
        ys.push(y);
        us.push(u);
        y += gain * u * H;
    }
    (ts, ys, us)
}

// ---------------------------------------------------------------------------------------------
// PID: discrete form
// ---------------------------------------------------------------------------------------------

// Filtered derivative on the ERROR for a unit step, K = 2, Ti = 1, Td = 0.25, N = 10, h = 0.01:
// D0 = 14.2857, D1 = 10.2041, D2 = 7.28863 (D_k = ad·D_{k−1} + bd·(e_k − e_{k−1}),
// ad = Td/(Td+Nh), bd = K·Td·N/(Td+Nh)).
// Source: K. J. Åström and B. Wittenmark, Computer-Controlled Systems, 3rd ed., 1997, ch. 8;
// K. J. Åström and T. Hägglund, PID Controllers: Theory, Design and Tuning, 2nd ed., 1995, ch. 3.
#[test]
fn filtered_derivative_on_error_matches_textbook_sequence() {
    let c = astrom_pid();
    let e = [0.0, 1.0, 1.0, 1.0];
    let mut d = 0.0;
    let mut got = Vec::new();
    for k in 1..e.len() {
        d = filtered_derivative(d, e[k], e[k - 1], c.kd, c.derivative_filter_s, H);
        got.push(d);
    }
    for (g, want) in got.iter().zip([14.2857, 10.2041, 7.28863]) {
        assert!((g - want).abs() < 1e-4, "got {got:?}");
    }
}

// Derivative on MEASUREMENT: a setpoint step gives no derivative kick at all (D ≡ 0).
// Source: Åström & Hägglund, PID Controllers, 2nd ed., 1995, ch. 3 (derivative acting on the
// process output); Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997, ch. 8.
#[test]
fn setpoint_step_gives_no_derivative_kick() {
    let mut c = Controller::new(&astrom_pid());
    for k in 0..50 {
        let sp = if k < 5 { 0.0 } else { 1.0 };
        c.update(&at(sp), 0.0, H);
        assert_eq!(c.terms().d, 0.0);
    }
    // The step shows up in P only: u = K·1 + I.
    assert!((c.terms().p - 2.0).abs() < 1e-12);
}

// Measurement ramp y = t: the filtered derivative settles at −K·Td = −0.5.
// Source: Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997, ch. 8 (check value
// computed from the recurrence with K = 2, Td = 0.25, N = 10, h = 0.01).
#[test]
fn measurement_ramp_derivative_tends_to_minus_k_td() {
    let mut c = Controller::new(&astrom_pid());
    for k in 0..200 {
        let t = f64::from(k) * H;
        c.update(&at(t), t, H);
    }
    assert!((c.terms().d + 0.5).abs() < 1e-9, "D = {}", c.terms().d);
}

// Back-calculation: e = 0.2 constant, output limited to ±1, Tt = 0.5 → I → 0.8 (fixed point of
// I += (K·h/Ti)·e + (h/Tt)·(u − v) with v = K·e + I, u = 1).
// Source: Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997, ch. 8; Åström &
// Hägglund, PID Controllers, 2nd ed., 1995, ch. 3 (tracking time constant Tt).
#[test]
fn back_calculation_integral_converges_to_textbook_value() {
    let cfg = ControllerConfig {
        max_duty: 1.0,
        anti_windup: AntiWindup::BackCalculation,
        tracking_time_s: 0.5,
        ..astrom_pid()
    };
    let mut c = Controller::new(&cfg);
    let mut u = 0.0;
    for _ in 0..3000 {
        u = c.update(&at(0.2), 0.0, H);
    }
    assert!((c.integral() - 0.8).abs() < 1e-9, "I = {}", c.integral());
    assert_eq!(u, 1.0);
}

/// Peak overshoot in % of a 100-unit step on the integrator plant, with the given anti-windup
/// settings. kp = 10 %/unit, ki = 5 %/(unit·s), gain 0.1 unit/(s·%): the step saturates the
/// output at ±100 % for about 10 s.
fn windup_overshoot(anti_windup: AntiWindup, tracking_time_s: f64) -> f64 {
    let cfg = ControllerConfig {
        kp: 10.0,
        ki: 5.0,
        kd: 0.0,
        integral_limit: 1e12,
        anti_windup,
        tracking_time_s,
        ..astrom_pid()
    };
    let mut c = Controller::new(&cfg);
    c.reset(0.0);
    let (t, y, _) = run_integrator(&mut c, 0.1, |_| at(100.0), 6000);
    let m = step_metrics(&t, &y, 0.0, 100.0, 0.0, DEFAULT_BAND_FRAC).expect("valid record");
    m.overshoot_pct
}

// Integrator windup: after a long saturation an unprotected integral makes a large overshoot;
// clamping (conditional integration) and back-calculation keep it small.
// Source: Åström & Hägglund, PID Controllers, 2nd ed., 1995, ch. 3 (integrator windup,
// conditional integration, back-calculation); Åström & Wittenmark, Computer-Controlled
// Systems, 3rd ed., 1997, ch. 8. Plant and gains invented for the test.
#[test]
fn anti_windup_reduces_overshoot_after_long_saturation() {
    // Back-calculation with an enormous tracking time is the same law without anti-windup.
    let none = windup_overshoot(AntiWindup::BackCalculation, 1e12);
    let clamp = windup_overshoot(AntiWindup::Clamp, 0.5);
    let back = windup_overshoot(AntiWindup::BackCalculation, 0.5);
    assert!(none > 50.0, "no anti-windup should overshoot badly, got {none} %");
    assert!(clamp < 0.2 * none, "clamp {clamp} % vs none {none} %");
    assert!(back < 0.2 * none, "back-calculation {back} % vs none {none} %");
}

// integral_limit bounds |I| whatever happens. Common practice, no source.
#[test]
fn integral_limit_bounds_the_integral() {
    let cfg = ControllerConfig { integral_limit: 7.0, kp: 0.0, max_duty: 100.0, ..astrom_pid() };
    let mut c = Controller::new(&cfg);
    for _ in 0..1000 {
        c.update(&at(10.0), 0.0, H);
    }
    assert_eq!(c.integral(), 7.0);
    for _ in 0..2000 {
        c.update(&at(-10.0), 0.0, H);
    }
    assert_eq!(c.integral(), -7.0);
}

// Feedforward from the setpoint: ff_velocity·v + ff_acceleration·a + ff_static·sign(v).
// Common practice, no source (velocity/acceleration feedforward as in Åström & Hägglund,
// PID Controllers, 2nd ed., 1995, ch. 3, feedforward design).
#[test]
fn feedforward_adds_velocity_acceleration_and_static_parts() {
    let cfg =
        ControllerConfig { ff_velocity: 2.0, ff_acceleration: 0.1, ff_static: 5.0, ..astrom_pid() };
    let mut c = Controller::new(&cfg);
    let u = c.update(&Setpoint { position: 0.0, velocity: 10.0, acceleration: 100.0 }, 0.0, H);
    assert!((u - 35.0).abs() < 1e-12);
    let u = c.update(&Setpoint { position: 0.0, velocity: -10.0, acceleration: 0.0 }, 0.0, H);
    assert!((u + 25.0).abs() < 1e-12);
    let u = c.update(&Setpoint::default(), 0.0, H);
    assert_eq!(u, 0.0);
}

// ---------------------------------------------------------------------------------------------
// Bumpless changes
// ---------------------------------------------------------------------------------------------

fn gentle_move(t: f64) -> Setpoint {
    Trapezoid::plan(0.0, 0.0, 20.0, 10.0, 20.0).sample(t)
}

// Bumpless parameter change: recomputing the integral as I = u − P − D with the new gains
// keeps the output continuous. Source: Åström & Hägglund, PID Controllers, 2nd ed., 1995, ch. 3
// (bumpless parameter changes); Åström & Wittenmark, Computer-Controlled Systems, 3rd ed.,
// 1997, ch. 8 (bumpless transfer).
#[test]
fn gain_change_mid_move_is_bumpless() {
    let old = ControllerConfig { kp: 10.0, ki: 5.0, kd: 1.0, ff_velocity: 2.0, ..astrom_pid() };
    let new = ControllerConfig { kp: 25.0, ki: 20.0, kd: 3.0, ff_velocity: 6.0, ..old.clone() };
    let mut c = Controller::new(&old);
    let mut y = 0.0;
    let mut u = 0.0;
    let change_at = 80; // mid-move: setpoint moving, error and derivative non-zero
    let mut last_error = 0.0;
    for k in 0..change_at {
        let sp = gentle_move(f64::from(k) * H);
        u = c.update(&sp, y, H);
        last_error = sp.position - y;
        y += 0.1 * u * H;
    }
    assert!(last_error.abs() > 0.05 && u.abs() < 99.0, "test must change gains mid-move");
    let mut unchanged = c.clone();
    c.set_config(&new);
    assert_eq!(c.config(), &new);
    let sp = gentle_move(f64::from(change_at) * H);
    let after = c.update(&sp, y, H);
    let reference = unchanged.update(&sp, y, H);
    // Without the integral adjustment the P and FF parts alone would jump by this much.
    let naive_jump =
        (new.kp - old.kp) * last_error + (new.ff_velocity - old.ff_velocity) * sp.velocity;
    assert!(naive_jump.abs() > 5.0, "naive jump {naive_jump}");
    assert!((after - reference).abs() < 0.02 * naive_jump.abs(), "{after} vs {reference}");
    assert!((after - u).abs() < 0.02 * naive_jump.abs(), "{after} vs previous {u}");
}

// Switching from the proportional law to PID starts from the last output (bumpless transfer,
// I = u − P − D). Source: Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997, ch. 8.
#[test]
fn mode_switch_to_pid_is_bumpless() {
    let p_only = ControllerConfig {
        mode: ControlMode::Proportional,
        kp: 10.0,
        min_duty_forward: 15.0,
        min_duty_reverse: 15.0,
        ..astrom_pid()
    };
    let pid =
        ControllerConfig { mode: ControlMode::Pid, kp: 4.0, ki: 8.0, kd: 0.5, ..p_only.clone() };
    let mut c = Controller::new(&p_only);
    let before = c.update(&at(3.0), 0.0, H);
    c.update(&at(3.0), 0.0, H);
    c.set_config(&pid);
    let after = c.update(&at(3.0), 0.0, H);
    assert!(before > 40.0);
    // Same inputs, so the PID law reproduces the proportional output exactly (its integral
    // is advanced after the output, as in Åström & Wittenmark's listing).
    assert!((after - before).abs() < 1e-9, "{before} → {after}");
}

// reset() forgets integral and derivative history: the next update at the measured position
// gives exactly zero (no derivative kick, no stale integral). Common practice, no source.
#[test]
fn reset_starts_clean_from_the_measured_position() {
    let mut c = Controller::new(&astrom_pid());
    for k in 0..300 {
        c.update(&at(50.0), f64::from(k) * 0.01, H);
    }
    assert!(c.integral() != 0.0);
    c.reset(12.5);
    assert_eq!(c.output(), 0.0);
    assert_eq!(c.update(&at(12.5), 12.5, H), 0.0);
    assert_eq!(c.terms().d, 0.0);
}

// ---------------------------------------------------------------------------------------------
// On-off, proportional, minimum-duty compensation, robustness
// ---------------------------------------------------------------------------------------------

// On-off with a tolerance band: full duty towards the setpoint outside, zero inside.
// Common practice, no source.
#[test]
fn on_off_drives_towards_setpoint_outside_band_only() {
    let cfg = ControllerConfig {
        mode: ControlMode::OnOff,
        on_off_duty: 40.0,
        tolerance: 0.5,
        ..astrom_pid()
    };
    let mut c = Controller::new(&cfg);
    assert_eq!(c.update(&at(1.0), 0.0, H), 40.0);
    assert_eq!(c.update(&at(-1.0), 0.0, H), -40.0);
    assert_eq!(c.update(&at(0.3), 0.0, H), 0.0);
    assert_eq!(c.update(&at(-0.5), 0.0, H), 0.0);
    let capped = ControllerConfig { max_duty: 30.0, ..cfg };
    let mut c = Controller::new(&capped);
    assert_eq!(c.update(&at(5.0), 0.0, H), 30.0);
}

// Minimum-duty compensation: every output outside the small blend near zero is at least the
// breakaway duty of its direction, max_duty stays reachable, and the map is continuous and
// increasing (no chatter at zero). Common practice, no source.
#[test]
fn minimum_duty_compensation_per_direction() {
    let cfg = ControllerConfig {
        mode: ControlMode::Proportional,
        kp: 10.0,
        min_duty_forward: 12.0,
        min_duty_reverse: 20.0,
        max_duty: 80.0,
        ..astrom_pid()
    };
    let mut c = Controller::new(&cfg);
    let blend_error = MIN_DUTY_BLEND_FRACTION * cfg.max_duty / cfg.kp;
    let mut previous = f64::NEG_INFINITY;
    for i in -20_000..=20_000 {
        let e = f64::from(i) * 0.001;
        let out = c.update(&at(e), 0.0, H);
        assert!(out >= previous, "not increasing at e = {e}");
        assert!(out - previous < 1.0 || previous == f64::NEG_INFINITY, "jump at e = {e}");
        previous = out;
        if e >= blend_error {
            assert!(out >= 12.0, "e {e} → {out}");
        } else if e <= -blend_error {
            assert!(out <= -20.0, "e {e} → {out}");
        }
        assert!(out.abs() <= 80.0);
    }
    assert_eq!(c.update(&at(0.0), 0.0, H), 0.0);
    assert_eq!(c.update(&at(100.0), 0.0, H), 80.0);
    assert_eq!(c.update(&at(-100.0), 0.0, H), -80.0);
    // Exactly the linear map above the blend: u = 40 → 12 + 40·(80 − 12)/80 = 46.
    assert!((c.update(&at(4.0), 0.0, H) - 46.0).abs() < 1e-9);
    // A one-count error (0.01 units → u = 0.1 %) does not bang out the full breakaway duty.
    assert!(c.update(&at(0.01), 0.0, H) < 2.0);
}

// dt ≤ 0 or non-finite inputs hold the previous output and never produce NaN.
// Common practice, no source.
#[test]
fn bad_time_step_holds_previous_output() {
    let mut c = Controller::new(&astrom_pid());
    let u = c.update(&at(3.0), 0.0, H);
    let integral = c.integral();
    for dt in [0.0, -0.01, f64::NAN, f64::INFINITY] {
        assert_eq!(c.update(&at(3.0), 0.0, dt), u);
    }
    assert_eq!(c.update(&at(f64::NAN), 0.0, H), u);
    assert_eq!(c.update(&at(3.0), f64::NAN, H), u);
    assert_eq!(c.integral(), integral);
}

fn any_mode() -> impl Strategy<Value = ControlMode> {
    prop_oneof![Just(ControlMode::OnOff), Just(ControlMode::Proportional), Just(ControlMode::Pid)]
}

fn any_config() -> impl Strategy<Value = ControllerConfig> {
    (
        any_mode(),
        (0.0..100.0f64, 0.01..10.0f64, 0.0..100.0f64, 0.0..100.0f64, 0.0..10.0f64),
        (0.0005..0.1f64, 0.0..100.0f64, any::<bool>(), 0.001..1.0f64),
        (0.0..0.9f64, 0.0..0.9f64, 1.0..100.0f64),
        (0.0..10.0f64, 0.0..1.0f64, 0.0..20.0f64),
    )
        .prop_map(
            |(
                mode,
                (on_off_duty, tolerance, kp, ki, kd),
                (tf, il, back, tt),
                (mf, mr, max),
                (fv, fa, fs),
            )| {
                ControllerConfig {
                    mode,
                    on_off_duty,
                    tolerance,
                    kp,
                    ki,
                    kd,
                    derivative_filter_s: tf,
                    integral_limit: il,
                    anti_windup: if back { AntiWindup::BackCalculation } else { AntiWindup::Clamp },
                    tracking_time_s: tt,
                    min_duty_forward: mf * max,
                    min_duty_reverse: mr * max,
                    max_duty: max,
                    ff_velocity: fv,
                    ff_acceleration: fa,
                    ff_static: fs,
                    ff_static_reverse: None,
                }
            },
        )
}

proptest! {
    // Any valid configuration and any finite inputs: the output is finite and within
    // ±max_duty. Common practice, no source.
    #[test]
    fn output_is_always_finite_and_limited(
        cfg in any_config(),
        cfg2 in any_config(),
        inputs in prop::collection::vec((-1e3..1e3f64, -1e3..1e3f64, -1e4..1e4f64, -1e3..1e3f64, -0.01..0.5f64), 1..60),
    ) {
        let mut c = Controller::new(&cfg);
        for (k, (sp, v, a, y, dt)) in inputs.iter().enumerate() {
            if k == inputs.len() / 2 {
                c.set_config(&cfg2);
            }
            let max = c.config().max_duty;
            let u = c.update(&Setpoint { position: *sp, velocity: *v, acceleration: *a }, *y, *dt);
            prop_assert!(u.is_finite() && u.abs() <= max, "u = {} max {}", u, max);
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Trapezoidal profiles
// ---------------------------------------------------------------------------------------------

// Rest to rest, D ≥ v²/a: T = D/v + v/a; (D, v, a) = (100, 50, 200) → T = 2.25 s,
// acceleration phase 0.25 s, cruise 1.75 s.
// Source: L. Biagiotti and C. Melchiorri, Trajectory Planning for Automatic Machines and
// Robots, Springer 2008, §3.2 (trapezoidal velocity profile).
#[test]
fn trapezoid_rest_to_rest_matches_biagiotti_melchiorri() {
    for (p0, goal) in [(0.0, 100.0), (250.0, 150.0)] {
        let p = Trapezoid::plan(p0, 0.0, goal, 50.0, 200.0);
        assert!((p.duration() - 2.25).abs() < 1e-12);
        let d: Vec<f64> = p.segments().iter().map(|s| s.duration_s).collect();
        assert_eq!(d.len(), 3);
        assert!(
            (d[0] - 0.25).abs() < 1e-12
                && (d[1] - 1.75).abs() < 1e-12
                && (d[2] - 0.25).abs() < 1e-12
        );
        assert!((p.peak_velocity() - 50.0).abs() < 1e-12);
        assert_eq!(p.goal(), goal);
        assert_eq!(p.sample(2.25).position, goal);
        // Mid-cruise: half way, at full speed.
        let mid = p.sample(1.125);
        assert!((mid.position - (p0 + goal) / 2.0).abs() < 1e-9);
        assert!((mid.velocity.abs() - 50.0).abs() < 1e-12);
    }
}

// Rest to rest, D < v²/a: triangular, T = 2√(D/a), peak √(a·D); (10, 50, 200) → T = 0.447214 s,
// peak 44.7214. Source: Biagiotti & Melchiorri, Trajectory Planning, Springer 2008, §3.2.
#[test]
fn short_move_is_triangular() {
    let p = Trapezoid::plan(0.0, 0.0, 10.0, 50.0, 200.0);
    assert!((p.duration() - 0.447214).abs() < 1e-6);
    assert!((p.peak_velocity() - 44.7214).abs() < 1e-4);
    assert_eq!(p.segments().len(), 2);
    assert_eq!(p.sample(1.0), Setpoint { position: 10.0, velocity: 0.0, acceleration: 0.0 });
}

// stop(): braking at a_max covers v0²/(2a) in v0/a. Kinematics of constant deceleration
// (Biagiotti & Melchiorri, Trajectory Planning, Springer 2008, §3.2).
#[test]
fn stop_covers_v_squared_over_two_a() {
    for v0 in [30.0, -30.0] {
        let p = Trapezoid::stop(5.0, v0, 120.0);
        let d = v0 * v0 / (2.0 * 120.0);
        assert!((p.goal() - (5.0 + d * v0.signum())).abs() < 1e-12);
        assert!((p.duration() - 0.25).abs() < 1e-12);
        let end = p.sample(p.duration() - 1e-9);
        assert!((end.position - p.goal()).abs() < 1e-6 && end.velocity.abs() < 1e-6);
    }
    let still = Trapezoid::stop(5.0, 0.0, 120.0);
    assert_eq!((still.goal(), still.duration()), (5.0, 0.0));
}

// Moving starts (our own composition of the §3.2 pieces; checked by kinematics):
// away from the goal → brake, reverse, come back; too fast to stop before the goal → overshoot
// and return; faster than v_max → slow to v_max first.
#[test]
fn moving_starts_brake_reverse_and_return() {
    // Away: v0 = −20 at a = 100 brakes in 0.2 s over 2 units, then a rest-to-rest move of 12.
    let p = Trapezoid::plan(0.0, -20.0, 10.0, 50.0, 100.0);
    let lowest = p.sample(0.2);
    assert!((lowest.position + 2.0).abs() < 1e-9 && lowest.velocity.abs() < 1e-9);
    assert!((p.duration() - (0.2 + 2.0 * (12.0f64 / 100.0).sqrt())).abs() < 1e-9);
    // Too fast: v0 = 40 towards a goal 4 away needs 8 to stop: stops at 8, returns to 4.
    let p = Trapezoid::plan(0.0, 40.0, 4.0, 50.0, 100.0);
    let furthest = p.sample(0.4);
    assert!((furthest.position - 8.0).abs() < 1e-9 && furthest.velocity.abs() < 1e-9);
    assert!((p.duration() - (0.4 + 2.0 * (4.0f64 / 100.0).sqrt())).abs() < 1e-9);
    // Over the limit: 80 with v_max 50 slows for 0.3 s first, then cruises at 50.
    let p = Trapezoid::plan(0.0, 80.0, 1000.0, 50.0, 100.0);
    assert!((p.sample(0.3).velocity - 50.0).abs() < 1e-9);
    assert!((p.sample(1.0).velocity - 50.0).abs() < 1e-9);
}

// Invalid limits never panic and never give NaN. Common practice, no source.
#[test]
fn invalid_limits_hold_position() {
    for (v, a) in [(0.0, 10.0), (10.0, 0.0), (f64::NAN, 10.0), (10.0, f64::INFINITY), (-1.0, 1.0)] {
        let p = Trapezoid::plan(3.0, 1.0, 7.0, v, a);
        assert_eq!(p.duration(), 0.0);
        assert_eq!(p.sample(0.5).position, 3.0);
    }
    assert_eq!(Trapezoid::stop(3.0, 1.0, f64::NAN).sample(1.0).position, 3.0);
    assert_eq!(Trapezoid::plan(f64::NAN, 0.0, 7.0, 1.0, 1.0).sample(1.0).position, 7.0);
}

proptest! {
    // Any start, goal and limits: |v| ≤ v_max (after an initial slow-down when |v0| > v_max),
    // |a| ≤ a_max, position and velocity continuous, ends at rest exactly at the goal.
    // Source: Biagiotti & Melchiorri, Trajectory Planning, Springer 2008, §3.2 (constraints of
    // the trapezoidal profile); moving-start handling is ours.
    #[test]
    fn trapezoid_respects_limits_and_ends_at_goal(
        p0 in -1000.0..1000.0f64,
        goal in -1000.0..1000.0f64,
        v_max in 0.1..500.0f64,
        a_max in 0.1..5000.0f64,
        v0_frac in prop_oneof![Just(0.0), -2.0..2.0f64],
        stop in any::<bool>(),
    ) {
        let v0 = v0_frac * v_max;
        let p = if stop { Trapezoid::stop(p0, v0, a_max) } else { Trapezoid::plan(p0, v0, goal, v_max, a_max) };
        let goal = if stop { p0 + v0 * v0.abs() / (2.0 * a_max) } else { goal };
        prop_assert_eq!(p.goal(), goal);
        let t_end = p.duration();
        prop_assert!(t_end.is_finite() && t_end >= 0.0);
        let scale = 1.0 + p0.abs() + goal.abs();
        let v_tol = 1e-9 * (v_max + v0.abs());
        let slow_down = ((v0.abs() - v_max) / a_max).max(0.0);
        let v_bound = v_max.max(v0.abs());

        let start = p.sample(0.0);
        prop_assert!((start.position - p0).abs() <= 1e-12 * scale && (start.velocity - v0).abs() <= v_tol);
        for s in p.segments() {
            prop_assert!(s.acceleration.abs() <= a_max * (1.0 + 1e-12));
        }
        let n = 4000;
        let dt = t_end / f64::from(n);
        let mut prev = start;
        for i in 1..=n + 1 {
            let t = f64::from(i) * dt;
            let s = p.sample(t);
            prop_assert!(s.position.is_finite() && s.velocity.is_finite());
            let limit = if stop || t < slow_down { v_bound } else { v_max };
            prop_assert!(s.velocity.abs() <= limit + v_tol, "|v| {} > {} at t {}", s.velocity, limit, t);
            prop_assert!(s.acceleration.abs() <= a_max * (1.0 + 1e-12));
            // Continuity: no jump larger than the limits allow over one sample interval.
            prop_assert!((s.position - prev.position).abs() <= v_bound * dt + 1e-9 * scale,
                "position jump at t {}", t);
            prop_assert!((s.velocity - prev.velocity).abs() <= a_max * dt * (1.0 + 1e-9) + v_tol,
                "velocity jump at t {}", t);
            prev = s;
        }
        let end = p.sample(t_end);
        prop_assert_eq!(end, Setpoint { position: goal, velocity: 0.0, acceleration: 0.0 });
        prop_assert_eq!(p.sample(t_end + 10.0).position, goal);
        // Just before the end the profile has already arrived (continuous into the goal).
        let eps = t_end * 1e-9;
        let nearly = p.sample(t_end - eps);
        prop_assert!((nearly.position - goal).abs() <= 0.5 * a_max * eps * eps + 1e-9 * scale);
        prop_assert!(nearly.velocity.abs() <= a_max * eps * (1.0 + 1e-6) + v_tol);
    }

    // Rest-to-rest profiles take exactly the textbook time: T = D/v + v/a if D ≥ v²/a, else
    // 2√(D/a). Source: Biagiotti & Melchiorri, Trajectory Planning, Springer 2008, §3.2.
    #[test]
    fn rest_to_rest_duration_matches_formula(
        p0 in -1000.0..1000.0f64, goal in -1000.0..1000.0f64, v in 0.1..500.0f64, a in 0.1..5000.0f64,
    ) {
        let d = (goal - p0).abs();
        let want = if d >= v * v / a { d / v + v / a } else { 2.0 * (d / a).sqrt() };
        let got = Trapezoid::plan(p0, 0.0, goal, v, a).duration();
        prop_assert!((got - want).abs() <= 1e-9 * (1.0 + want), "{} vs {}", got, want);
    }
}

// ---------------------------------------------------------------------------------------------
// Step-response metrics
// ---------------------------------------------------------------------------------------------

/// Unit-step response of ωn²/(s² + 2ζωn s + ωn²), 0 < ζ < 1 (Ogata, Modern Control
/// Engineering, 5th ed., 2010, §5-3): y = 1 − e^{−σt}(cos ωd t + ζ/√(1−ζ²) sin ωd t).
fn second_order(zeta: f64, wn: f64, t_end: f64, h: f64) -> (Vec<f64>, Vec<f64>) {
    let wd = wn * (1.0 - zeta * zeta).sqrt();
    let sigma = zeta * wn;
    let n = (t_end / h).round() as usize;
    let t: Vec<f64> = (0..=n).map(|i| i as f64 * h).collect();
    let y = t
        .iter()
        .map(|&t| {
            1.0 - (-sigma * t).exp()
                * ((wd * t).cos() + zeta / (1.0 - zeta * zeta).sqrt() * (wd * t).sin())
        })
        .collect();
    (t, y)
}

fn metrics(t: &[f64], y: &[f64], band: f64) -> StepMetrics {
    step_metrics(t, y, 0.0, 1.0, 0.0, band).expect("valid record")
}

// Exact second-order values: tr (10–90 %), tp = π/ωd, Mp = exp(−ζπ/√(1−ζ²)), exact 2 % and 5 %
// settling (last time |y − 1| equals the band), on an analytic grid of h = 1e-4 s.
// Source: K. Ogata, Modern Control Engineering, 5th ed., 2010, §5-3 (definitions and closed
// forms; 10–90 % rise and exact settling solved numerically from the same y(t)).
#[test]
fn second_order_metrics_match_ogata_exact_values() {
    let h = 1e-4;
    // ζ, ωn, tr 10–90, tp, Mp, ts 2 %, ts 5 % (tp of the second case is π/4 = 0.78540).
    let cases = [
        (0.2, 10.0, 0.12034, 0.32064, 0.52662, 1.9602, 1.3744),
        (0.6, 5.0, 0.37081, std::f64::consts::FRAC_PI_4, 0.094780, 1.1886, 1.0458),
    ];
    for (zeta, wn, tr, tp, mp, ts2, ts5) in cases {
        let (t, y) = second_order(zeta, wn, 4.0, h);
        let m2 = metrics(&t, &y, 0.02);
        let m5 = metrics(&t, &y, 0.05);
        // Table values are given to 5 significant digits (1e-4 relative) and the grid adds
        // at most one step; interpolated times are far closer than that.
        let close = |got: f64, want: f64| (got - want).abs() <= 1e-4 * want + h;
        assert!(close(m2.rise_s.expect("rises"), tr), "ζ {zeta}: tr {:?}", m2.rise_s);
        assert!(close(m2.peak_time_s, tp), "ζ {zeta}: tp {}", m2.peak_time_s);
        assert!(
            (m2.overshoot_pct / 100.0 - mp).abs() <= 1e-4 * mp + 1e-6,
            "ζ {zeta}: Mp {}",
            m2.overshoot_pct
        );
        assert!(close(m2.settling_s.expect("settles"), ts2), "ζ {zeta}: ts2 {:?}", m2.settling_s);
        assert!(close(m5.settling_s.expect("settles"), ts5), "ζ {zeta}: ts5 {:?}", m5.settling_s);
        assert!(m2.steady_state_error.abs() < 1e-3);
        assert_eq!(m2.undershoot_pct, 0.0);
        // And the closed forms themselves (Ogata §5-3).
        let wd = wn * (1.0 - zeta * zeta).sqrt();
        assert!((m2.peak_time_s - std::f64::consts::PI / wd).abs() <= h);
    }
}

// Ogata's worked example: Mp = 0.2 and tp = 1 s give ζ = 0.456, ωn = 3.53 rad/s; the envelope
// estimates are ts ≈ 4/σ = 2.48 s (2 %) and 3/σ = 1.86 s (5 %).
// Source: K. Ogata, Modern Control Engineering, 5th ed., 2010, §5-3, p. 177 (example).
#[test]
fn ogata_worked_example_round_trip() {
    let h = 1e-4;
    let (t, y) = second_order(0.456, 3.53, 6.0, h);
    let m = metrics(&t, &y, 0.02);
    // ζ and ωn are rounded to three digits in the book, so Mp and tp come back to ~1e-3.
    assert!((m.overshoot_pct / 100.0 - 0.2).abs() < 1e-3, "Mp {}", m.overshoot_pct);
    assert!((m.peak_time_s - 1.0).abs() < 2e-3, "tp {}", m.peak_time_s);
    // Inverting the measured Mp and tp (Ogata §5-3) recovers the book's ζ and ωn.
    let ln_mp = (m.overshoot_pct / 100.0).ln();
    let zeta = -ln_mp / (std::f64::consts::PI.powi(2) + ln_mp * ln_mp).sqrt();
    let wn = std::f64::consts::PI / (m.peak_time_s * (1.0 - zeta * zeta).sqrt());
    assert!((zeta - 0.456).abs() < 5e-4, "ζ {zeta}");
    assert!((wn - 3.53).abs() < 5e-3, "ωn {wn}");
    // The book's 4/σ and 3/σ are envelope bounds, up to ~20 % longer than the exact time.
    let ts2 = m.settling_s.expect("settles");
    let ts5 = metrics(&t, &y, 0.05).settling_s.expect("settles");
    assert!(ts2 <= 2.48 + h && ts2 > 0.8 * 2.48, "ts2 {ts2}");
    assert!(ts5 <= 1.86 + h && ts5 > 0.75 * 1.86, "ts5 {ts5}");
}

// Definition property: metrics of a response scaled, shifted and mirrored by the same
// affine map as its step are unchanged (everything is relative to the commanded step).
#[test]
fn metrics_are_relative_to_the_commanded_step() {
    let (t, y) = second_order(0.3, 4.0, 5.0, 1e-3);
    let base = metrics(&t, &y, 0.02);
    let t_shift: Vec<f64> = t.iter().map(|ti| ti + 7.0).collect();
    let mirrored: Vec<f64> = y.iter().map(|yi| 50.0 - 3.0 * yi).collect();
    let m = step_metrics(&t_shift, &mirrored, 50.0, -3.0, 7.0, 0.02).expect("valid record");
    let same = |a: f64, b: f64| (a - b).abs() < 1e-9;
    assert!(same(m.rise_s.expect("rises"), base.rise_s.expect("rises")));
    assert!(same(m.settling_s.expect("settles"), base.settling_s.expect("settles")));
    assert!(same(m.overshoot_pct, base.overshoot_pct));
    assert!(same(m.peak_time_s, base.peak_time_s));
    assert!(same(m.peak_value, 50.0 - 3.0 * base.peak_value));
    assert!(same(m.steady_state_error, -3.0 * base.steady_state_error));
}

// Records that stop short: no 90 % crossing → no rise time; still outside the band at the end
// → no settling time; a servo stuck at 95 % has a 5 % steady-state error (band around the
// commanded value, not the final one). Definitions of this module; common practice, no source.
#[test]
fn unfinished_and_offset_responses() {
    let t: Vec<f64> = (0..1000).map(|i| f64::from(i) * 0.01).collect();
    let slow: Vec<f64> = t.iter().map(|&ti| 0.5 * (1.0 - (-ti).exp())).collect();
    let m = metrics(&t, &slow, 0.02);
    assert_eq!((m.rise_s, m.settling_s), (None, None));
    let short: Vec<f64> = t.iter().map(|&ti| 0.95 * (1.0 - (-5.0 * ti).exp())).collect();
    let m = metrics(&t, &short, 0.02);
    assert!(m.rise_s.is_some() && m.settling_s.is_none());
    assert!((m.steady_state_error - 0.05).abs() < 1e-6);
    // Samples before the step are ignored; times are measured from the step.
    let mut t2 = vec![-1.0, -0.5];
    t2.extend(&t);
    let mut y2 = vec![0.0, 0.0];
    y2.extend(&short);
    let m2 = step_metrics(&t2, &y2, 0.0, 1.0, 0.0, 0.02).expect("valid record");
    assert_eq!(m2, m);
    assert!(matches!(
        step_metrics(&t, &short, 0.0, f64::NAN, 0.0, 0.02),
        Err(StepError::BadStep(_))
    ));
}

// First-order lag 1/(τs+1): 10–90 % rise = τ·ln 9 (from y = 1 − e^{−t/τ}); common practice
// (e.g. Ogata, Modern Control Engineering, 5th ed., §5-2, first-order systems, from memory).
#[test]
fn first_order_rise_is_tau_ln9() {
    let tau = 0.5;
    let t: Vec<f64> = (0..=50_000).map(|i| f64::from(i) * 1e-4).collect();
    let y: Vec<f64> = t.iter().map(|&ti| 1.0 - (-ti / tau).exp()).collect();
    let m = metrics(&t, &y, 0.02);
    assert!((m.rise_s.expect("rises") - tau * 9.0f64.ln()).abs() < 1e-6);
    assert!((m.settling_s.expect("settles") - tau * 50.0f64.ln()).abs() < 1e-6);
    assert_eq!(m.overshoot_pct, 0.0);
}

// ---------------------------------------------------------------------------------------------
// python-control fixtures
// ---------------------------------------------------------------------------------------------

// Against control.step_info (python-control 0.10.2) on the same sampled responses.
// python-control picks samples: rise = first sample ≥ 90 % − first sample ≥ 10 %; settling =
// the sample after the last one outside ±2 % of the final value; overshoot from the largest
// sample. Ours interpolates the crossings and uses the commanded step (the same as the DC gain
// here, 1), so times agree to within one sample period and the percentages exactly.
// Fixtures: tests/reference/control/step_info_fixtures.py → step_info.json. The docstring
// case also reproduces python-control's published numbers (RiseTime 1.256, SettlingTime
// 9.071, Overshoot 20.85 %, Undershoot 27.88 %, PeakTime 4.187).
#[test]
fn agrees_with_python_control_step_info() {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/control/step_info.json"
    ))
    .expect("fixture present");
    let doc: serde_json::Value = serde_json::from_str(&text).expect("fixture is JSON");
    let cases = doc["cases"].as_array().expect("cases");
    assert_eq!(cases.len(), 6);
    for case in cases {
        let name = case["name"].as_str().expect("name");
        let num = |v: &serde_json::Value| v.as_f64().expect("number");
        let (t0, dt) = (num(&case["t0"]), num(&case["dt"]));
        let y: Vec<f64> = case["y"].as_array().expect("y").iter().map(num).collect();
        let t: Vec<f64> = (0..y.len()).map(|i| t0 + i as f64 * dt).collect();
        let info = &case["step_info"];
        let m = metrics(&t, &y, 0.02);

        let rise = m.rise_s.expect("rises");
        assert!(
            (rise - num(&info["RiseTime"])).abs() <= dt * (1.0 + 1e-9),
            "{name}: rise {rise} vs {}",
            info["RiseTime"]
        );
        let settle = m.settling_s.expect("settles");
        let py_settle = num(&info["SettlingTime"]);
        // Ours lies between the last sample outside and the next, which is python's choice.
        assert!(
            settle <= py_settle + 1e-9 && settle > py_settle - dt,
            "{name}: ts {settle} vs {py_settle}"
        );
        assert!((m.overshoot_pct - num(&info["Overshoot"])).abs() < 1e-6, "{name}: Mp");
        assert!((m.undershoot_pct - num(&info["Undershoot"])).abs() < 1e-6, "{name}: undershoot");
        assert!((m.peak_time_s - num(&info["PeakTime"])).abs() <= 1e-9, "{name}: tp");
        assert!((m.peak_value - num(&info["Peak"])).abs() <= 1e-9, "{name}: peak");

        if name == "nonminimum_phase_docstring" {
            // python-control 0.10.2 step_info docstring, published values.
            assert!((num(&info["RiseTime"]) - 1.256).abs() < 1e-3);
            assert!((num(&info["SettlingTime"]) - 9.071).abs() < 1e-3);
            assert!((m.overshoot_pct - 20.85).abs() < 1e-2);
            assert!((m.undershoot_pct - 27.88).abs() < 1e-2);
            assert!((m.peak_time_s - 4.187).abs() < 1e-3);
        }
        if name == "motor_position_kp1" {
            // UMich Control Tutorials, DC Motor Position, Kp = 1 (computed): overshoot
            // 7.1607 %, 2 % settling 0.13031 s.
            assert!((m.overshoot_pct - 7.1607).abs() < 1e-3);
            assert!((settle - 0.13031).abs() < dt);
        }
    }
}
