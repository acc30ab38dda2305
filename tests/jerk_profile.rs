//! Jerk-limited (double S) profiles checked against the published treatment and against a
//! numerical integration of the profile's own acceleration.
//!
//! Source for the closed forms: L. Biagiotti and C. Melchiorri, *Trajectory Planning for
//! Automatic Machines and Robots*, Springer 2008, §3.4 (double S velocity profile): case 1
//! (v_max reached) `T_a = T_j + (v_max − v0)/a_max` when `(v_max − v0)·j ≥ a_max²`, else
//! `T_a = 2√((v_max − v0)/j)`; `T_v = h/v_max − T_a/2·(1 + v0/v_max) − T_d/2·(1 + v1/v_max)`;
//! case 2 (v_max not reached, a_max reached) `Δ = a⁴/j² + 2(v0² + v1²) + a(4h − 2a/j·(v0 + v1))`,
//! `T_a = (a²/j − 2v0 + √Δ)/(2a)`, `T_d = (a²/j − 2v1 + √Δ)/(2a)`. The data of the moving-start
//! cases (h = 10, v0 = 1, v1 = 0, a_max = 10, j_max = 30, v_max = 5 then 10) are the book's
//! worked examples 3.9 and 3.10 as recalled from memory; the expected times below are
//! computed here from the formulas above, not copied from the book.

use proptest::prelude::*;
use servotty::control::jerk_limited::velocity_change;
use servotty::control::{JerkLimited, Limits, Profile, Setpoint};

const EPS: f64 = 1e-9;

fn rest(position: f64) -> Setpoint {
    Setpoint { position, ..Setpoint::default() }
}

fn moving(position: f64, velocity: f64, acceleration: f64) -> Setpoint {
    Setpoint { position, velocity, acceleration }
}

/// Segment boundary times (start of each piece, then the end).
fn boundaries(p: &JerkLimited) -> Vec<f64> {
    let mut t: Vec<f64> = p.segments().iter().map(|s| s.start_s).collect();
    t.push(p.duration());
    t
}

/// Checks the profile by integrating its sampled acceleration (trapezoidal rule, fine
/// step) and comparing the integral with its sampled velocity and position; checks the
/// limits and that acceleration is continuous (no jump bigger than j·dt).
fn integrate_and_check(p: &JerkLimited, from: Setpoint, goal: f64, v: f64, a: f64, j: f64) {
    let n = 200_000;
    let dt = p.duration() / f64::from(n);
    let (mut pos, mut vel) = (from.position, from.velocity);
    let mut prev = p.sample(0.0);
    // An accelerating start keeps speeding up while its acceleration is ramped down.
    let coast = from.velocity.abs() + from.acceleration * from.acceleration / (2.0 * j);
    let vmax = v.max(coast) * (1.0 + 1e-9) + EPS;
    let scale = 1.0 + (goal - from.position).abs() + from.velocity.abs();
    for i in 1..=n {
        let t = f64::from(i) * dt;
        // Just before the end: at `duration` the sample snaps to rest at the goal.
        let now = p.sample(t.min(p.duration() * (1.0 - 1e-12)));
        vel += 0.5 * (prev.acceleration + now.acceleration) * dt;
        pos += 0.5 * (prev.velocity + now.velocity) * dt;
        assert!(now.velocity.abs() <= vmax, "v {} > {vmax} at {t}", now.velocity);
        assert!(now.acceleration.abs() <= a * (1.0 + 1e-9), "a {} at {t}", now.acceleration);
        let da = (now.acceleration - prev.acceleration).abs();
        assert!(da <= j * dt * (1.0 + 1e-6) + EPS, "jerk {} > {j} at {t}", da / dt);
        assert!((vel - now.velocity).abs() < 1e-6 * scale, "∫a {vel} vs v {}", now.velocity);
        assert!((pos - now.position).abs() < 1e-6 * scale, "∫v {pos} vs p {}", now.position);
        prev = now;
    }
    assert!((pos - goal).abs() < 1e-6 * scale, "ends at {pos}, goal {goal}");
    assert!(prev.velocity.abs() < 1e-6 * scale && prev.acceleration.abs() < 1e-5 * a);
    assert_eq!(p.sample(p.duration()), rest(goal));
}

#[test]
fn rest_to_rest_with_every_limit_reached_takes_d_over_v_plus_v_over_a_plus_a_over_j() {
    // B&M §3.4: T = D/v + v/a + a/j when v_max and a_max are both reached.
    let (d, v, a, j) = (10.0, 5.0, 10.0, 30.0);
    let p = JerkLimited::plan(rest(0.0), d, v, a, j);
    let expected = d / v + v / a + a / j;
    assert!((p.duration() - expected).abs() < 1e-9, "{} vs {expected}", p.duration());
    assert_eq!(p.segments().len(), 7);
    let tj = a / j;
    let ta = tj + v / a;
    let b = boundaries(&p);
    for (got, want) in b.iter().zip([0.0, tj, ta - tj, ta, expected - ta]) {
        assert!((got - want).abs() < 1e-9, "boundaries {b:?}");
    }
    integrate_and_check(&p, rest(0.0), d, v, a, j);
}

#[test]
fn moving_start_matches_case_one_of_the_book() {
    // Example 3.9 data (from memory): h = 10, v0 = 1, v_max = 5, a_max = 10, j_max = 30.
    let (h, v0, v, a, j) = (10.0, 1.0, 5.0, 10.0, 30.0);
    let from = moving(0.0, v0, 0.0);
    let p = JerkLimited::plan(from, h, v, a, j);
    let tj = a / j; // (v − v0)·j = 120 ≥ a² = 100: a_max reached while accelerating.
    let ta = tj + (v - v0) / a;
    let td = tj + v / a;
    let tv = h / v - ta / 2.0 * (1.0 + v0 / v) - td / 2.0;
    assert!((ta - 0.733_333).abs() < 1e-6 && (td - 0.833_333).abs() < 1e-6);
    assert!((tv - 1.143_333).abs() < 1e-6);
    assert!((p.duration() - (ta + tv + td)).abs() < 1e-9, "T {}", p.duration());
    assert!((p.duration() - 2.71).abs() < 1e-9);
    // The cruise runs at v_max and the peaks reach a_max.
    let mid = p.sample(ta + tv / 2.0);
    assert!((mid.velocity - v).abs() < 1e-9 && mid.acceleration.abs() < 1e-9);
    assert!((p.sample(ta / 2.0).acceleration - a).abs() < 1e-9);
    assert!((p.sample(ta + tv + td / 2.0).acceleration + a).abs() < 1e-9);
    integrate_and_check(&p, from, h, v, a, j);
}

#[test]
fn moving_start_matches_case_two_of_the_book() {
    // Example 3.10 data (from memory): as above with v_max = 10, which is not reached.
    let (h, v0, v, a, j) = (10.0, 1.0, 10.0, 10.0, 30.0);
    let from = moving(0.0, v0, 0.0);
    let p = JerkLimited::plan(from, h, v, a, j);
    let delta = a.powi(4) / (j * j) + 2.0 * v0 * v0 + a * (4.0 * h - 2.0 * a / j * v0);
    let ta = (a * a / j - 2.0 * v0 + delta.sqrt()) / (2.0 * a);
    let td = (a * a / j + delta.sqrt()) / (2.0 * a);
    let v_lim = v0 + (ta - a / j) * a;
    assert!((ta - 1.074_69).abs() < 1e-5 && (td - 1.174_69).abs() < 1e-5, "{ta} {td}");
    assert!((p.duration() - (ta + td)).abs() < 1e-9, "T {} vs {}", p.duration(), ta + td);
    let peak = p.sample(ta);
    assert!((peak.velocity - v_lim).abs() < 1e-8, "peak {} vs {v_lim}", peak.velocity);
    integrate_and_check(&p, from, h, v, a, j);
}

#[test]
fn rest_to_rest_with_v_max_reached_but_not_a_max() {
    // B&M §3.4 case 1 with (v_max − v0)·j < a_max²: T_j = √(v/j), T_a = 2T_j, T = D/v + T_a.
    let (d, v, a, j) = (10.0, 1.0, 10.0, 30.0);
    let p = JerkLimited::plan(rest(2.0), 2.0 + d, v, a, j);
    let ta = 2.0 * (v / j).sqrt();
    assert!((p.duration() - (d / v + ta)).abs() < 1e-9);
    let peak_a = p.sample(ta / 2.0).acceleration;
    assert!((peak_a - (v * j).sqrt()).abs() < 1e-9 && peak_a < a);
    integrate_and_check(&p, rest(2.0), 2.0 + d, v, a, j);
}

#[test]
fn short_rest_to_rest_reaches_neither_limit() {
    // Pure jerk pieces, symmetric: D = 2·j·T_j³, so T = 4·(D/(2j))^(1/3) (B&M §3.4, case 2
    // with T_a = 2T_j; the closed form is the textbook limit case).
    let (d, v, a, j) = (0.01, 5.0, 10.0, 30.0);
    let p = JerkLimited::plan(rest(0.0), -d, v, a, j);
    let tj = (d / (2.0 * j)).cbrt();
    assert!((p.duration() - 4.0 * tj).abs() < 1e-9, "{} vs {}", p.duration(), 4.0 * tj);
    assert!((p.sample(2.0 * tj).velocity + j * tj * tj).abs() < 1e-9);
    integrate_and_check(&p, rest(0.0), -d, v, a, j);
}

#[test]
fn stop_respects_jerk_from_an_accelerating_start() {
    let (a, j) = (10.0, 30.0);
    let from = moving(1.0, 4.0, 6.0);
    let p = JerkLimited::stop(from, a, j);
    // Ramp a from +6 to −10 (16/30 s), hold, ramp back to 0 (1/3 s): the distance is the
    // exact integral of those pieces.
    integrate_and_check(&p, from, p.goal(), 4.0, a, j);
    assert!(p.sample(0.1).velocity > 4.0, "still speeding up while a ramps down");
    assert!(p.goal() > 1.0 + 4.0 * 4.0 / (2.0 * a), "a jerk-limited stop is longer");
}

#[test]
fn velocity_change_from_rest_matches_the_acceleration_phase_of_the_book() {
    // a_max reached: T_j = a/j, hold (Δv − a²/j)/a.
    let c = velocity_change(0.0, 0.0, 5.0, 10.0, 30.0);
    assert!((c[0].1 - 1.0 / 3.0).abs() < 1e-12 && (c[1].1 - 1.0 / 6.0).abs() < 1e-12);
    // Not reached: T_j = √(Δv/j), no hold.
    let c = velocity_change(0.0, 0.0, 1.0, 10.0, 30.0);
    assert!((c[0].1 - (1.0_f64 / 30.0).sqrt()).abs() < 1e-12 && c[1].1 == 0.0);
}

#[test]
fn new_goal_behind_a_moving_axis_reverses_in_one_s_curve() {
    let (v, a, j) = (5.0, 10.0, 30.0);
    let from = moving(3.0, 4.0, 2.0);
    let p = JerkLimited::plan(from, 0.0, v, a, j);
    integrate_and_check(&p, from, 0.0, v, a, j);
    assert!(p.segments().len() <= 7);
}

#[test]
fn the_axis_interface_picks_the_shape_from_the_limits() {
    let trap = Limits { velocity: 5.0, acceleration: 10.0, jerk: None };
    let jerk = Limits { jerk: Some(30.0), ..trap };
    let a = Profile::plan(rest(0.0), 10.0, trap);
    let b = Profile::plan(rest(0.0), 10.0, jerk);
    assert!(matches!(a, Profile::Trapezoid(_)) && matches!(b, Profile::JerkLimited(_)));
    // B&M: the double S is longer than the trapezoid by a/j when every limit is reached.
    assert!((b.duration() - a.duration() - 10.0 / 30.0).abs() < 1e-9);
    // Scaling every limit with the distance keeps the time (coordinated moves rely on it).
    let c = Profile::plan(rest(0.0), 25.0, jerk.scaled(2.5));
    assert!((c.duration() - b.duration()).abs() < 1e-9);
}

#[test]
fn bad_limits_hold_the_start() {
    for (v, a, j) in [(0.0, 1.0, 1.0), (1.0, f64::NAN, 1.0), (1.0, 1.0, -1.0)] {
        let p = JerkLimited::plan(rest(1.5), 9.0, v, a, j);
        assert_eq!(p.duration(), 0.0);
        assert_eq!(p.sample(0.3), rest(1.5));
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]
    #[test]
    fn any_start_reaches_the_goal_within_the_limits(
        p0 in -50.0..50.0f64, v0 in -8.0..8.0f64, a0 in -10.0..10.0f64, goal in -50.0..50.0f64,
        v in 0.5..6.0f64, a in 1.0..20.0f64, j in 5.0..200.0f64,
    ) {
        let from = moving(p0, v0, a0.clamp(-a, a));
        let p = JerkLimited::plan(from, goal, v, a, j);
        prop_assert!(p.duration().is_finite() && p.duration() < 1e3);
        integrate_and_check(&p, from, goal, v, a, j);
    }
}
