//! Checks of the simulated plant (src/sim/plant.rs) against published DC-motor responses,
//! closed-form steady states and the mechanics the plant is meant to show (breakaway, hard
//! stops, faults, encoder scale).
//!
//! Plant numbers come from the demo configuration (configs/demo-greenhouse.toml, invented);
//! motor numbers for the published checks come from the University of Michigan tutorials.

use std::f64::consts::TAU;

use servotty::config::{MachineConfig, PlantParams, TransportConfig};
use servotty::sim::plant::{breakaway_duty, DcMotor, Discretisation, MotorParams, Plant};
use servotty::sim::quadrature::{ab_state, QuadratureDecoder};

const MS: f64 = 1e-3;

fn demo_plant(axis: &str) -> PlantParams {
    let cfg = MachineConfig::demo().expect("embedded demo parses");
    match &cfg.axis(axis).expect("demo axis exists").transport {
        TransportConfig::Sim(sim) => sim.plant.clone(),
        TransportConfig::Serial { .. } => panic!("demo axis {axis} is not simulated"),
    }
}

/// Runs `secs` of 1 ms steps at constant duty.
fn run(p: &mut Plant, duty: f64, secs: f64) {
    for _ in 0..(secs / MS).round() as u64 {
        p.step(duty, MS);
    }
}

fn rel_err(got: f64, want: f64) -> f64 {
    ((got - want) / want).abs()
}

/// University of Michigan, Control Tutorials for MATLAB and Simulink, "DC Motor Speed:
/// System Modeling": J = 0.01, b = 0.1, K = Kt = Ke = 0.01, R = 1, L = 0.5.
fn speed_model() -> MotorParams {
    MotorParams {
        resistance_ohm: 1.0,
        inductance_h: 0.5,
        torque_constant: 0.01,
        back_emf_constant: 0.01,
        inertia: 0.01,
        viscous_friction: 0.1,
    }
}

/// University of Michigan, Control Tutorials for MATLAB and Simulink, "DC Motor Position:
/// System Modeling": J = 3.2284e-6, b = 3.5077e-6, K = 0.0274, R = 4, L = 2.75e-6.
fn position_model() -> MotorParams {
    MotorParams {
        resistance_ohm: 4.0,
        inductance_h: 2.75e-6,
        torque_constant: 0.0274,
        back_emf_constant: 0.0274,
        inertia: 3.2284e-6,
        viscous_friction: 3.5077e-6,
    }
}

// ---------------------------------------------------------------------------------------
// 1. DC motor speed model

/// Source: U. Michigan, "DC Motor Speed: System Modeling", open-loop 1 V step of
/// Ω/V = K / ((Js + b)(Ls + R) + K²); values computed with python-control 0.10.2
/// (tests/reference/dc_motor.py, dc_motor.txt). Published to 7 digits; the discretisation is
/// exact, so the tolerance is the rounding of the published numbers.
#[test]
fn speed_model_step_matches_published_response() {
    let mut m = DcMotor::new(speed_model());
    let checks = [(100, 6.855537e-3), (500, 5.417010e-2), (1000, 8.303711e-2), (2000, 9.762349e-2)];
    let mut k = 0;
    for (at, want) in checks {
        while k < at {
            m.step(1.0, 0.0, MS);
            k += 1;
        }
        let got = m.speed_rad_s();
        assert!(rel_err(got, want) < 1e-6, "t = {} s: ω = {got}, published {want}", at as f64 * MS);
    }
    for _ in 0..18_000 {
        m.step(1.0, 0.0, MS);
    }
    // Steady state K/(R b + K²) = 0.0999001 rad/s for 1 V (same source).
    assert!(rel_err(m.speed_rad_s(), 0.0999001) < 1e-6);
    assert!(rel_err(speed_model().steady_state_speed(1.0), 0.0999001) < 1e-6);
}

/// The discretisation is exact for any interval: one 0.1 s step lands on the published
/// ω(0.1 s) (source as above).
#[test]
fn speed_model_single_long_step_is_exact() {
    let mut m = DcMotor::new(speed_model());
    m.step(1.0, 0.0, 0.1);
    assert!(rel_err(m.speed_rad_s(), 6.855537e-3) < 1e-6);
    m.step(1.0, 0.0, 0.4);
    assert!(rel_err(m.speed_rad_s(), 5.417010e-2) < 1e-6);
}

/// Negative test, source as above: with L → 0 the speed response would be first order with
/// τ = RJ/(Rb + K²) = 0.0999 s and gain K/(Rb + K²). Here L/R = 0.5 s is not negligible: the
/// true poles are −2.002501 and −9.997499 (time constants 0.4994 s and 0.1000 s), which the
/// discretisation's eigenvalues must reproduce.
#[test]
fn speed_model_is_not_first_order() {
    let p = speed_model();
    let (j, b, k, r) = (p.inertia, p.viscous_friction, p.torque_constant, p.resistance_ohm);
    let tau = r * j / (r * b + k * k);
    assert!(rel_err(tau, 0.0999001) < 1e-6);
    let gain = k / (r * b + k * k);
    let first_order_at_0_1 = gain * (1.0 - (-0.1 / tau).exp());

    let mut m = DcMotor::new(p);
    m.step(1.0, 0.0, 0.1);
    // The first-order model is about 9× too fast at t = 0.1 s.
    assert!(
        first_order_at_0_1 > 5.0 * m.speed_rad_s(),
        "{first_order_at_0_1} vs {}",
        m.speed_rad_s()
    );

    for h in [1e-4, MS, 0.1] {
        let poles = Discretisation::new(&p, h).poles().expect("two real poles");
        assert!(rel_err(poles[0], -9.997499) < 1e-6, "h = {h}: {poles:?}");
        assert!(rel_err(poles[1], -2.002501) < 1e-6, "h = {h}: {poles:?}");
        assert!(rel_err(-1.0 / poles[1], 0.4994) < 1e-4);
        assert!(rel_err(-1.0 / poles[0], 0.1000) < 1e-3);
    }
}

// ---------------------------------------------------------------------------------------
// 2. DC motor position model, unity feedback

/// Overshoot (%) and 2 % settling time (last crossing of the band, interpolated) of a unit
/// step response sampled every `dt`.
fn step_metrics(y: &[f64], dt: f64) -> (f64, f64) {
    let peak = y.iter().copied().fold(f64::MIN, f64::max);
    let band = 0.02;
    let last_out = y.iter().rposition(|v| (v - 1.0).abs() > band).expect("leaves the band");
    let e0 = (y[last_out] - 1.0).abs() - band;
    let e1 = (y[last_out + 1] - 1.0).abs() - band;
    let settle = (last_out as f64 + e0 / (e0 - e1)) * dt;
    (100.0 * (peak - 1.0), settle)
}

/// Source: U. Michigan, "DC Motor Position: System Modeling"; unity feedback with C = Kp = 1
/// and a 1 rad step give overshoot 7.1607 % and 2 % settling time 0.13031 s (continuous
/// loop, computed with python-control 0.10.2). Here the controller acts on samples every
/// 10 µs and holds V between them, which adds about 5 µs of effective delay: the sampled loop
/// has overshoot 7.16644 % and settling 0.130306 s (tests/reference/dc_motor.py simulates
/// exactly that with scipy's ZOH discretisation, so it is checked tightly). Against the
/// continuous values the tolerance is 0.5 %, several times the 0.08 % sampling effect.
#[test]
fn position_model_unity_feedback_step() {
    let dt = 10e-6;
    let mut m = DcMotor::new(position_model());
    let mut y = vec![0.0];
    for _ in 0..50_000 {
        let volts = 1.0 * (1.0 - m.angle_rad());
        m.step(volts, 0.0, dt);
        y.push(m.angle_rad());
    }
    let (overshoot, settle) = step_metrics(&y, dt);
    assert!(rel_err(overshoot, 7.1607) < 5e-3, "overshoot {overshoot} %");
    assert!(rel_err(settle, 0.13031) < 5e-3, "settling {settle} s");
    assert!(rel_err(overshoot, 7.16644) < 1e-4, "overshoot {overshoot} % (ZOH fixture)");
    assert!(rel_err(settle, 0.130306) < 1e-4, "settling {settle} s (ZOH fixture)");
}

/// L/R ≈ 0.7 µs in the position model: 50 µs and 100 µs steps must stay stable and agree
/// with 10 µs steps at common times (the ZOH discretisation is exact for constant V). The
/// steady state is the no-load speed K V/(R b + K²) (same source's model).
#[test]
fn position_model_is_stable_at_long_substeps() {
    let p = position_model();
    let mut fine = DcMotor::new(p);
    let mut mid = DcMotor::new(p);
    let mut coarse = DcMotor::new(p);
    for k in 0..5000 {
        for _ in 0..10 {
            fine.step(1.0, 0.0, 10e-6);
        }
        mid.step(1.0, 0.0, 50e-6);
        mid.step(1.0, 0.0, 50e-6);
        coarse.step(1.0, 0.0, 100e-6);
        for m in [&mid, &coarse] {
            let dw = (m.speed_rad_s() - fine.speed_rad_s()).abs();
            assert!(dw < 1e-9 * fine.speed_rad_s().abs().max(1.0), "step {k}: Δω = {dw}");
            assert!((m.current_a() - fine.current_a()).abs() < 1e-9, "step {k}");
        }
    }
    let want =
        p.torque_constant / (p.resistance_ohm * p.viscous_friction + p.torque_constant.powi(2));
    assert!(rel_err(coarse.speed_rad_s(), want) < 1e-6, "{} vs {want}", coarse.speed_rad_s());
}

// ---------------------------------------------------------------------------------------
// 6. Energy and steady-state sanity

/// Energy balance of the motor equations (common practice, no source): multiplying
/// V = R i + L di/dt + K ω by i and J dω/dt = K i − b ω by ω gives
/// ∫V i = ∫R i² + ∫b ω² + ½ L i² + ½ J ω². Integrals by the trapezoid rule on 10 µs samples.
#[test]
fn motor_energy_balances() {
    let p = speed_model();
    let mut m = DcMotor::new(p);
    let dt = 10e-6;
    let (mut e_in, mut e_r, mut e_b) = (0.0, 0.0, 0.0);
    let volts = 1.0;
    let (mut i0, mut w0) = (0.0, 0.0);
    for _ in 0..100_000 {
        m.step(volts, 0.0, dt);
        let (i1, w1) = (m.current_a(), m.speed_rad_s());
        e_in += volts * 0.5 * (i0 + i1) * dt;
        e_r += p.resistance_ohm * 0.5 * (i0 * i0 + i1 * i1) * dt;
        e_b += p.viscous_friction * 0.5 * (w0 * w0 + w1 * w1) * dt;
        (i0, w0) = (i1, w1);
    }
    let stored = 0.5 * p.inductance_h * i0 * i0 + 0.5 * p.inertia * w0 * w0;
    assert!(rel_err(e_r + e_b + stored, e_in) < 1e-6, "{} vs {e_in}", e_r + e_b + stored);
}

/// Free-running plant: the carriage settles where motor torque balances viscous friction,
/// back-EMF braking and Coulomb friction reflected through the transmission:
/// ω = (Kt V/R − F_c k) / (b + Kt Ke / R), v = ω k (U. Michigan speed model with a constant
/// load torque; gear reflection is common practice, no source).
#[test]
fn plant_no_load_speed_matches_closed_form() {
    let mut pp = demo_plant("x");
    pp.rail_length_mm = 1e6; // room to reach steady state
    let mut plant = Plant::new(&pp);
    run(&mut plant, 1.0, 0.5);
    let k = pp.mm_per_output_rev / 1000.0 / TAU / pp.gear_ratio;
    let v = pp.supply_v;
    let (r, kt, ke) = (pp.resistance_ohm, pp.torque_constant, pp.back_emf_constant);
    let w = (kt * v / r - pp.coulomb_friction_n * k) / (pp.viscous_friction + kt * ke / r);
    assert!(rel_err(plant.motor_speed_rad_s(), w) < 1e-6, "{} vs {w}", plant.motor_speed_rad_s());
    assert!(rel_err(plant.velocity_mm_s(), w * k * 1000.0) < 1e-6);
    // Without friction and load the motor alone reaches Kt V / (R b + Kt Ke).
    let alone = MotorParams::from_plant(&pp);
    let mut m = DcMotor::new(alone);
    for _ in 0..10_000 {
        m.step(v, 0.0, MS);
    }
    assert!(rel_err(m.speed_rad_s(), kt * v / (r * pp.viscous_friction + kt * ke)) < 1e-6);
}

/// Gear reflection (common practice, no source): with friction removed, the plant behaves as
/// the bare motor with J = J_rotor + m (r/N)².
#[test]
fn carriage_mass_is_reflected_through_the_transmission() {
    let mut pp = demo_plant("x");
    pp.coulomb_friction_n = 0.0;
    pp.static_friction_n = 0.0;
    pp.driver_deadband = 0.0;
    pp.rail_length_mm = 1e6;
    let r_over_n = pp.mm_per_output_rev / 1000.0 / TAU / pp.gear_ratio;
    let j_total = pp.rotor_inertia + pp.carriage_mass_kg * r_over_n * r_over_n;
    let mut plant = Plant::new(&pp);
    assert!(rel_err(plant.inertia_at_motor(), j_total) < 1e-12);
    let mut m = DcMotor::new(MotorParams { inertia: j_total, ..MotorParams::from_plant(&pp) });
    for k in 0..300 {
        let duty = if k < 150 { 0.7 } else { -0.4 };
        plant.step(duty, MS);
        for _ in 0..20 {
            m.step(duty * pp.supply_v, 0.0, 50e-6);
        }
        assert!(
            (plant.motor_speed_rad_s() - m.speed_rad_s()).abs()
                < 1e-9 * m.speed_rad_s().abs().max(1.0)
        );
    }
    let travel = plant.position_mm() - pp.start_mm;
    assert!((travel - m.angle_rad() * r_over_n * 1000.0).abs() < 1e-9);
}

// ---------------------------------------------------------------------------------------
// 3. Breakaway

/// Static friction (common practice, no source): a carriage at rest stays at rest while the
/// stall torque Kt·V/R does not exceed F_s·r/N. Demo X axis with its static friction raised to
/// 40 N (Coulomb 30 N) so that friction, not the driver deadband, sets the breakaway duty.
#[test]
fn friction_sets_breakaway_duty() {
    let mut pp = demo_plant("x");
    pp.static_friction_n = 40.0;
    pp.coulomb_friction_n = 30.0;
    let k = pp.mm_per_output_rev / 1000.0 / TAU / pp.gear_ratio;
    let by_hand = pp.static_friction_n * k * pp.resistance_ohm / (pp.torque_constant * pp.supply_v);
    assert!(by_hand > pp.driver_deadband);
    assert!(rel_err(breakaway_duty(&pp), by_hand) < 1e-12);
    for sign in [1.0, -1.0] {
        pp.start_mm = 600.0;
        let mut below = Plant::new(&pp);
        run(&mut below, sign * 0.99 * by_hand, 2.0);
        assert_eq!(below.position_mm(), 600.0);
        assert_eq!(below.encoder_count(), 0);
        assert_eq!(below.velocity_mm_s(), 0.0);
        // Stalled: the current settles at V/R.
        assert!(
            rel_err(below.current_a(), sign * 0.99 * by_hand * pp.supply_v / pp.resistance_ohm)
                < 1e-9
        );

        let mut above = Plant::new(&pp);
        run(&mut above, sign * 1.01 * by_hand, 2.0);
        let moved = above.position_mm() - 600.0;
        assert!(moved * sign > 1.0, "moved {moved} mm");
        assert!(above.encoder_count() as f64 * sign > 10.0);
    }
}

/// Driver deadband (common practice, no source): on the demo X axis the deadband (8 %) is
/// above the friction breakaway, so 7.9 % does nothing and 8 % moves.
#[test]
fn deadband_sets_breakaway_duty() {
    let pp = demo_plant("x");
    assert_eq!(breakaway_duty(&pp), pp.driver_deadband);
    let mut below = Plant::new(&pp);
    run(&mut below, 0.079, 1.0);
    assert_eq!(below.position_mm(), pp.start_mm);
    assert_eq!(below.current_a(), 0.0);
    let mut above = Plant::new(&pp);
    run(&mut above, 0.08, 1.0);
    assert!(above.position_mm() > pp.start_mm + 1.0);
}

/// Stick-slip (common practice, no source): after the drive is removed the carriage slows
/// under Coulomb friction and back-EMF braking, stops, and stays stopped; its speed never
/// dips below zero on the way (no chatter through zero). Watched at every 50 µs substep.
#[test]
fn carriage_stops_without_chatter() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    run(&mut plant, 0.5, 0.3);
    assert!(plant.velocity_mm_s() > 10.0);
    let mut stopped_at = None;
    for k in 0..10_000 {
        plant.step(0.0, 50e-6);
        let v = plant.velocity_mm_s();
        assert!(v >= 0.0, "substep {k}: v = {v}");
        if v == 0.0 && stopped_at.is_none() {
            stopped_at = Some(plant.position_mm());
        }
        if let Some(x) = stopped_at {
            assert_eq!(v, 0.0, "restarted at substep {k}");
            assert_eq!(plant.position_mm(), x);
        }
    }
    assert!(stopped_at.is_some());
}

/// Reversing at speed passes through a stop and moves the other way (common practice, no
/// source).
#[test]
fn reversal_passes_through_rest() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    run(&mut plant, 0.6, 0.5);
    let x = plant.position_mm();
    run(&mut plant, -0.6, 0.5);
    assert!(plant.velocity_mm_s() < -10.0);
    assert!(plant.position_mm() < x);
}

// ---------------------------------------------------------------------------------------
// 4. Encoder scale and quadrature

/// Counts per mm = counts per motor rev × gear ratio / travel per output rev (common
/// practice, no source); after a long move without slip the count is travel × counts/mm
/// within one count (the count is the floor of the angle).
#[test]
fn encoder_counts_match_travel() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    assert_eq!(plant.counts_per_mm(), 24.0);
    run(&mut plant, 1.0, 2.5);
    run(&mut plant, 0.0, 0.5);
    let travel = plant.position_mm() - pp.start_mm;
    assert!(travel > 400.0, "{travel}");
    let counts = plant.encoder_count() as f64;
    assert!((counts - travel * plant.counts_per_mm()).abs() <= 1.0, "{counts} vs {travel} mm");
}

/// End to end with the 4× decoder (Alciatore & Histand, 4th ed., §9.3, from memory): sampled
/// every 20 µs, the A/B levels of the plant's count decode back to the same count with no
/// illegal transitions, forwards and backwards.
#[test]
fn quadrature_signals_decode_to_the_plant_count() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    let mut dec = QuadratureDecoder::new(ab_state(plant.encoder_count()));
    let mut peak = 0;
    for k in 0..100_000 {
        let duty = if k < 50_000 { 0.3 } else { -0.3 };
        plant.step(duty, 20e-6);
        dec.update(ab_state(plant.encoder_count()));
        peak = peak.max(dec.count());
    }
    assert!(peak > 1000, "peak {peak}");
    assert!(dec.count() < peak - 1000, "came back: {}", dec.count());
    assert_eq!(dec.count(), plant.encoder_count());
    assert_eq!(dec.errors(), 0);
}

/// A slipping belt (fault contract, no outside source): the encoder sits on the motor, so the counts say the carriage went
/// further than it did; with slip s the carriage covers (1 − s) of the counted travel.
#[test]
fn belt_slip_makes_counts_run_ahead_of_the_carriage() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    plant.faults.belt_slip = 0.3;
    run(&mut plant, 0.7, 1.0);
    run(&mut plant, 0.0, 0.5);
    let travel = plant.position_mm() - pp.start_mm;
    let counted = plant.encoder_count() as f64 / plant.counts_per_mm();
    assert!(travel > 100.0);
    assert!(counted > travel * 1.3, "counted {counted} mm, travelled {travel} mm");
    assert!(rel_err(travel, 0.7 * counted) < 1e-3);
}

/// Fault contract of the simulator (no outside source).
#[test]
fn encoder_offset_fault_shifts_the_count() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    assert_eq!(plant.encoder_count(), 0);
    plant.faults.encoder_offset_counts = -123;
    assert_eq!(plant.encoder_count(), -123);
}

/// Index: one count wide at each whole motor revolution (simulator contract; one index per
/// revolution is common practice, no source). Over a slow move of several
/// revolutions, sampled finer than a count, it rises once per revolution.
#[test]
fn index_pulse_once_per_motor_revolution() {
    let pp = demo_plant("x");
    let cpr = i64::from(pp.encoder_counts_per_rev);
    let mut plant = Plant::new(&pp);
    assert!(plant.index_pulse());
    let (mut rises, mut was) = (0, true);
    while plant.encoder_count() < 5 * cpr + cpr / 2 {
        plant.step(0.2, 20e-6);
        let now = plant.index_pulse();
        assert_eq!(now, plant.encoder_count().rem_euclid(cpr) == 0);
        if now && !was {
            rises += 1;
        }
        was = now;
    }
    assert_eq!(rises, 5);
}

/// Switch on the low side of its position: the contract homing relies on (no outside source).
#[test]
fn home_switch_closes_below_its_position() {
    let mut pp = demo_plant("x");
    pp.home_switch_mm = Some(10.0);
    pp.start_mm = 5.0;
    let mut plant = Plant::new(&pp);
    assert!(plant.home_switch());
    while plant.position_mm() <= 10.0 {
        plant.step(0.3, MS);
    }
    assert!(!plant.home_switch());
    pp.home_switch_mm = None;
    assert!(!Plant::new(&pp).home_switch());
}

// ---------------------------------------------------------------------------------------
// 5. Hard stops and faults

/// Hard stops (common practice, no source): the carriage cannot pass the rail ends, stops
/// dead on them, and the motor then stalls with current V/R; it leaves when driven away.
#[test]
fn hard_stops_hold_and_the_motor_stalls() {
    let pp = demo_plant("x");
    let stall = pp.supply_v / pp.resistance_ohm;

    let mut plant = Plant::new(&pp);
    run(&mut plant, -1.0, 1.0);
    assert_eq!(plant.position_mm(), 0.0);
    assert!(plant.at_hard_stop());
    assert_eq!(plant.velocity_mm_s(), 0.0);
    assert!(rel_err(plant.current_a(), -stall) < 1e-9);
    let counts = plant.encoder_count();
    assert!((counts as f64 + pp.start_mm * plant.counts_per_mm()).abs() <= 1.0);
    run(&mut plant, -1.0, 1.0);
    assert_eq!(plant.encoder_count(), counts);
    run(&mut plant, 0.5, 0.2);
    assert!(plant.position_mm() > 0.0 && !plant.at_hard_stop());

    let mut top = pp.clone();
    top.start_mm = top.rail_length_mm - 5.0;
    let mut plant = Plant::new(&top);
    run(&mut plant, 1.0, 1.0);
    assert_eq!(plant.position_mm(), top.rail_length_mm);
    assert!(plant.at_hard_stop());
    assert!(rel_err(plant.current_a(), stall) < 1e-9);
}

/// A jammed carriage holds in both directions, also when jammed mid-move; counts stop and the
/// motor stalls at V/R (fault contract; stall current from the motor equation with ω = 0).
#[test]
fn blocked_carriage_does_not_move() {
    let pp = demo_plant("x");
    let mut plant = Plant::new(&pp);
    run(&mut plant, 0.8, 0.3);
    assert!(plant.velocity_mm_s() > 10.0);
    plant.faults.blocked = true;
    plant.step(0.8, MS);
    let (x, c) = (plant.position_mm(), plant.encoder_count());
    for duty in [1.0, -1.0] {
        run(&mut plant, duty, 0.5);
        assert_eq!(plant.position_mm(), x);
        assert_eq!(plant.encoder_count(), c);
        assert_eq!(plant.velocity_mm_s(), 0.0);
        assert!(rel_err(plant.current_a(), duty * pp.supply_v / pp.resistance_ohm) < 1e-9);
    }
    assert!(!plant.at_hard_stop());
    plant.faults.blocked = false;
    run(&mut plant, 0.5, 0.2);
    assert!(plant.position_mm() > x);
}

/// Swapped motor leads: positive duty drives the carriage (and the count) backwards (fault
/// contract, no outside source).
#[test]
fn reversed_motor_moves_the_other_way() {
    let mut pp = demo_plant("x");
    pp.start_mm = 600.0;
    let mut plant = Plant::new(&pp);
    plant.faults.reversed_motor = true;
    run(&mut plant, 0.5, 0.5);
    assert!(plant.position_mm() < 590.0);
    assert!(plant.encoder_count() < -200);
    assert!(plant.motor_voltage() < 0.0);
}

// ---------------------------------------------------------------------------------------
// Integration robustness

/// The substep is chosen inside `step`: one 100 ms call and a hundred 1 ms calls integrate
/// the same 50 µs substeps (integration contract, no outside source).
#[test]
fn one_long_step_equals_many_short_ones() {
    let pp = demo_plant("x");
    let mut a = Plant::new(&pp);
    let mut b = Plant::new(&pp);
    a.step(0.6, 0.1);
    run(&mut b, 0.6, 0.1);
    assert!((a.position_mm() - b.position_mm()).abs() < 1e-9);
    assert!((a.current_a() - b.current_a()).abs() < 1e-9);
    assert_eq!(a.encoder_count(), b.encoder_count());
}

/// Zero inductance is allowed by the configuration: the current then follows the voltage,
/// i = V/R with the shaft held (Ohm's law; the speed model of U. Michigan with L = 0).
#[test]
fn zero_inductance_plant_runs() {
    let mut pp = demo_plant("x");
    pp.inductance_h = 0.0;
    let mut plant = Plant::new(&pp);
    plant.faults.blocked = true;
    plant.step(0.5, MS);
    assert!(rel_err(plant.current_a(), 0.5 * pp.supply_v / pp.resistance_ohm) < 1e-12);
    plant.faults.blocked = false;
    run(&mut plant, 0.5, 0.5);
    assert!(plant.position_mm() > pp.start_mm + 10.0);
}

/// Bad numbers never panic: NaN duty counts as 0, a non-positive or NaN interval does nothing
/// (project rule, no outside source).
#[test]
fn bad_inputs_are_harmless() {
    let pp = demo_plant("z");
    let mut plant = Plant::new(&pp);
    plant.step(f64::NAN, MS);
    plant.step(1.0, f64::NAN);
    plant.step(1.0, -1.0);
    plant.step(1.0, 0.0);
    plant.step(5.0, f64::INFINITY);
    assert_eq!(plant.position_mm(), pp.start_mm);
    plant.faults.belt_slip = f64::NAN;
    plant.step(50.0, MS);
    assert!(plant.current_a().is_finite());
}
