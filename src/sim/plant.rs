//! The simulated axis mechanics: a brushed DC motor driven by an H-bridge, through a gearbox
//! and belt pulley to a carriage on a rail with hard stops, Coulomb and static friction, an
//! encoder on the motor shaft, an optional home switch, and injectable mechanical faults.
//!
//! # Model
//! - Driver: `|duty| < driver_deadband` → 0 V, otherwise `V = duty · supply_v` (duty clamped
//!   to −1…1). 0 V means the bridge shorts the motor (it brakes through R), it does not
//!   leave it floating. PWM is averaged: the bridge is an ideal voltage source.
//! - Motor (University of Michigan, *Control Tutorials for MATLAB and Simulink*, "DC Motor
//!   Speed: System Modeling"): `V = R i + L di/dt + Ke ω`,
//!   `J_total dω/dt = Kt i − b ω − τ_friction`, `dθ/dt = ω`, all at the motor shaft.
//! - Transmission: carriage travel per motor radian `k = r/N` with `r = mm_per_output_rev /
//!   (2π)` and `N = gear_ratio`. The carriage mass is reflected as `m k²` and its friction
//!   forces as `F k` (gear reflection; common practice, no source).
//! - Friction (Karnopp-style stick-slip; common practice, no source): at rest the carriage
//!   stays at rest while `|Kt i| ≤ F_static k`; moving, `F_coulomb k` opposes the motion.
//!   When the speed would change sign within a substep the carriage stops at the crossing,
//!   and the stick test decides on the next substep whether it breaks away again, so the
//!   speed never chatters through zero.
//! - Gravity (`gravity_load_kg`, signed): a constant load force `m·g` on the carriage towards
//!   the negative end (positive mass) or the positive end, reflected like friction. At rest it
//!   adds to the torque static friction must hold, so breakaway differs by direction; moving,
//!   it adds to the load. A load heavier than static friction falls when unpowered.
//!   g = 9.80665 m/s² (standard gravity, ISO 80000-3).
//! - Hard stops at 0 and `rail_length_mm`: inelastic; the motor then stalls against the stop
//!   and its current settles at `V/R`.
//! - Faults ([`PlantFaults`]): swapped motor leads, a jammed carriage (a stop in both
//!   directions), a slipping belt, an encoder offset.
//!
//! # Integration
//! The (i, ω, θ) system is linear for constant inputs (voltage, load torque), so each substep
//! is advanced with its exact zero-order-hold discretisation `x⁺ = Φ x + Γ u`, from one
//! matrix exponential of the augmented matrix `[[A h, B h], [0, 0]]`. This is exact at any
//! substep whatever the electrical time constant (L/R from under a microsecond to a second),
//! where explicit integrators would need substeps shorter than L/R. Friction is a
//! piecewise-constant input; the stick and stop logic runs between substeps of at most
//! [`MAX_SUBSTEP_S`]. Hand-written because the matrices are 5×5 and the cost per substep
//! must be a handful of multiply-adds; a linear-algebra crate would add a dependency for a
//! 60-line routine.

use std::f64::consts::TAU;

use crate::config::PlantParams;

/// Longest substep [`Plant::step`] integrates in one go, s. Friction and stop events are
/// resolved at this granularity; the motor itself is exact at any substep.
pub const MAX_SUBSTEP_S: f64 = 50e-6;

/// Longest interval one [`Plant::step`] call advances, s; longer requests are cut to this so
/// a wild `h` costs bounded time.
pub const MAX_STEP_S: f64 = 10.0;

/// Above this `R h / L` the current is taken to follow its quasi-steady value `(V − Ke ω)/R`
/// within the step: the electrical transient has decayed by e^(−10⁶).
const ALGEBRAIC_CURRENT_RATIO: f64 = 1e6;

/// Electrical and mechanical constants of a DC motor with its load, all at the motor shaft.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MotorParams {
    /// Armature resistance R, Ω.
    pub resistance_ohm: f64,
    /// Armature inductance L, H (0 allowed: the current then follows the voltage at once).
    pub inductance_h: f64,
    /// Torque constant Kt, N·m/A.
    pub torque_constant: f64,
    /// Back-EMF constant Ke, V·s/rad.
    pub back_emf_constant: f64,
    /// Total inertia J at the motor shaft, kg·m².
    pub inertia: f64,
    /// Viscous friction b at the motor shaft, N·m·s/rad.
    pub viscous_friction: f64,
}

impl MotorParams {
    /// The bare motor of a plant (rotor inertia only, no carriage).
    pub fn from_plant(p: &PlantParams) -> Self {
        Self {
            resistance_ohm: p.resistance_ohm,
            inductance_h: p.inductance_h,
            torque_constant: p.torque_constant,
            back_emf_constant: p.back_emf_constant,
            inertia: p.rotor_inertia,
            viscous_friction: p.viscous_friction,
        }
    }

    /// Speed the motor settles at with `volts` applied and no load torque:
    /// `ω = Kt V / (R b + Kt Ke)`, rad/s.
    pub fn steady_state_speed(&self, volts: f64) -> f64 {
        self.torque_constant * volts
            / (self.resistance_ohm * self.viscous_friction
                + self.torque_constant * self.back_emf_constant)
    }
}

/// Exact zero-order-hold discretisation of the motor over one interval `h`:
/// `(i, ω, Δθ)⁺ = phi · (i, ω, θ) + gamma · (V, τ_load)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Discretisation {
    /// The interval, s.
    pub h: f64,
    /// State transition over `h`; states (i, ω, θ). The θ column is (0, 0, 1).
    pub phi: [[f64; 3]; 3],
    /// Input matrix over `h`; inputs (V, τ_load).
    pub gamma: [[f64; 2]; 3],
    /// Current decay over `h` with the shaft held still: e^(−R h / L), 0 when the current is
    /// algebraic.
    pub locked_decay: f64,
}

impl Discretisation {
    /// Discretises `m` over `h` seconds. Parameters are expected to be validated (positive
    /// R, J, Kt); otherwise the result may hold non-finite numbers, never a panic.
    pub fn new(m: &MotorParams, h: f64) -> Self {
        let MotorParams {
            resistance_ohm: r,
            inductance_h: l,
            torque_constant: kt,
            back_emf_constant: ke,
            inertia: j,
            viscous_friction: b,
        } = *m;
        let algebraic = l.is_nan() || l <= 0.0 || r * h / l > ALGEBRAIC_CURRENT_RATIO;
        // Augmented matrix: rows/cols 0..3 are (i, ω, θ), 3..5 the inputs (V, τ_load).
        let mut a = [[0.0; 5]; 5];
        if algebraic {
            // i = (V − Ke ω)/R folded into the mechanical equation.
            a[1][1] = -(b + kt * ke / r) / j * h;
            a[1][3] = kt / (r * j) * h;
        } else {
            a[0][0] = -r / l * h;
            a[0][1] = -ke / l * h;
            a[0][3] = h / l;
            a[1][0] = kt / j * h;
            a[1][1] = -b / j * h;
        }
        a[1][4] = -h / j;
        a[2][1] = h;
        let e = expm5(&a);
        let mut phi = [[0.0; 3]; 3];
        let mut gamma = [[0.0; 2]; 3];
        for row in 0..3 {
            phi[row].copy_from_slice(&e[row][..3]);
            gamma[row].copy_from_slice(&e[row][3..]);
        }
        let locked_decay = if algebraic {
            // The current row becomes (V − Ke ω⁺)/R with ω⁺ from the mechanical rows.
            phi[0] = [0.0, -ke / r * phi[1][1], 0.0];
            gamma[0] = [1.0 / r - ke / r * gamma[1][0], -ke / r * gamma[1][1]];
            0.0
        } else {
            (-r * h / l).exp()
        };
        phi[0][2] = 0.0;
        phi[1][2] = 0.0;
        phi[2][2] = 1.0;
        Self { h, phi, gamma, locked_decay }
    }

    /// The two continuous-time poles of the (i, ω) dynamics recovered from this
    /// discretisation's eigenvalues (`λ = ln μ / h`), most negative first; `None` when they
    /// form a complex pair. An algebraic current shows as a pole at −∞.
    pub fn poles(&self) -> Option<[f64; 2]> {
        let [[a, b, _], [c, d, _], _] = self.phi;
        let tr = a + d;
        let det = a * d - b * c;
        let disc = tr * tr / 4.0 - det;
        if disc < 0.0 {
            return None;
        }
        let s = disc.sqrt();
        let (hi, lo) = (tr / 2.0 + s, tr / 2.0 - s);
        Some([lo.ln() / self.h, hi.ln() / self.h])
    }
}

type M5 = [[f64; 5]; 5];

fn mul5(x: &M5, y: &M5) -> M5 {
    let mut z = [[0.0; 5]; 5];
    for (zr, xr) in z.iter_mut().zip(x) {
        for (k, &xk) in xr.iter().enumerate() {
            if xk != 0.0 {
                for (zc, &yc) in zr.iter_mut().zip(&y[k]) {
                    *zc += xk * yc;
                }
            }
        }
    }
    z
}

/// Matrix exponential by scaling and squaring with a degree-12 Taylor polynomial: after
/// scaling the ∞-norm is ≤ ½, where the truncation error is below 1e-13 (½¹³/13!).
fn expm5(a: &M5) -> M5 {
    let norm = a.iter().map(|r| r.iter().map(|v| v.abs()).sum::<f64>()).fold(0.0, f64::max);
    if !norm.is_finite() {
        return [[f64::NAN; 5]; 5];
    }
    let squarings = if norm > 0.5 { (norm / 0.5).log2().ceil() as i32 } else { 0 };
    let scale = 0.5_f64.powi(squarings);
    let mut id = [[0.0; 5]; 5];
    for (k, r) in id.iter_mut().enumerate() {
        r[k] = 1.0;
    }
    let mut scaled = *a;
    scaled.iter_mut().flatten().for_each(|v| *v *= scale);
    // Horner form: I + A(I + A/2(I + A/3(…))).
    let mut e = id;
    for k in (1..=12).rev() {
        let mut t = mul5(&scaled, &e);
        for (r, tr) in t.iter_mut().enumerate() {
            for (c, v) in tr.iter_mut().enumerate() {
                *v = id[r][c] + *v / f64::from(k);
            }
        }
        e = t;
    }
    for _ in 0..squarings {
        e = mul5(&e, &e);
    }
    e
}

/// A DC motor on its own: armature current, shaft speed and shaft angle.
#[derive(Debug, Clone)]
pub struct DcMotor {
    params: MotorParams,
    current: f64,
    speed: f64,
    angle: f64,
    /// Discretisation for the last interval used; steps of the same length reuse it.
    disc: Option<Discretisation>,
}

impl DcMotor {
    /// A motor at rest with no current, angle 0.
    pub fn new(params: MotorParams) -> Self {
        Self { params, current: 0.0, speed: 0.0, angle: 0.0, disc: None }
    }

    /// The constants in use.
    pub fn params(&self) -> &MotorParams {
        &self.params
    }

    /// Changes the constants, keeping the state (current, speed, angle).
    pub fn set_params(&mut self, params: MotorParams) {
        if params != self.params {
            self.params = params;
            self.disc = None;
        }
    }

    /// The discretisation for an interval of `h` seconds, cached for the next call with the
    /// same `h`.
    pub fn discretisation(&mut self, h: f64) -> &Discretisation {
        if self.disc.as_ref().is_none_or(|d| d.h.to_bits() != h.to_bits()) {
            self.disc = None;
        }
        self.disc.get_or_insert_with(|| Discretisation::new(&self.params, h))
    }

    /// Advances `h` seconds with `volts` across the terminals and `load_torque` (N·m)
    /// opposing positive rotation, both held constant. Exact for any `h`; an `h` that is not
    /// a positive finite number does nothing.
    pub fn step(&mut self, volts: f64, load_torque: f64, h: f64) {
        if !(h > 0.0 && h.is_finite()) {
            return;
        }
        let x = [self.current, self.speed];
        let u = [volts, load_torque];
        let d = self.discretisation(h);
        let row = |r: usize| {
            d.phi[r][0] * x[0] + d.phi[r][1] * x[1] + d.gamma[r][0] * u[0] + d.gamma[r][1] * u[1]
        };
        let (i, w, dtheta) = (row(0), row(1), row(2));
        self.current = i;
        self.speed = w;
        self.angle += dtheta;
    }

    /// Advances `h` seconds with the shaft held still by something outside the motor
    /// (static friction, a hard stop): speed stays 0, the current follows `L di/dt = V − R i`.
    pub fn step_locked(&mut self, volts: f64, h: f64) {
        if !(h > 0.0 && h.is_finite()) {
            return;
        }
        let r = self.params.resistance_ohm;
        let decay = self.discretisation(h).locked_decay;
        self.speed = 0.0;
        self.current = decay * self.current + (1.0 - decay) * volts / r;
    }

    /// Armature current, A.
    pub fn current_a(&self) -> f64 {
        self.current
    }

    /// Shaft speed, rad/s.
    pub fn speed_rad_s(&self) -> f64 {
        self.speed
    }

    /// Shaft angle since construction, rad.
    pub fn angle_rad(&self) -> f64 {
        self.angle
    }
}

/// Mechanical faults that can be switched on and off at run time. `Default` = no faults.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PlantFaults {
    /// Motor leads swapped: the bridge voltage reaches the motor negated.
    pub reversed_motor: bool,
    /// The carriage is jammed where it is: it cannot move either way, so (unless the belt
    /// slips completely) the motor stalls.
    pub blocked: bool,
    /// Fraction 0…1 of motor motion that does not reach the carriage (a slipping belt). The
    /// encoder is on the motor, so counts run ahead of the carriage. Modelled as a reduced
    /// transmission ratio `k (1 − slip)`, which also reduces the reflected mass and friction.
    pub belt_slip: f64,
    /// Added to every reported encoder count (a glitch or a missed index).
    pub encoder_offset_counts: i64,
    /// A jam armed at this rail position, mm: a simulated board turns it into
    /// [`blocked`](Self::blocked) at the tick the carriage reaches or passes it (the plant
    /// itself ignores it).
    pub jam_at_mm: Option<f64>,
    /// Fraction 0…1 of the supply voltage lost (a sagging supply, a weak battery, a long thin
    /// supply cable): the bridge applies `duty × supply_v × (1 − sag)`, so the motor is weaker
    /// than the duty says. 0 = none.
    pub supply_sag: f64,
}

/// Standard gravity, m/s² (ISO 80000-3).
pub const STANDARD_GRAVITY: f64 = 9.80665;

/// Duty (0…1) at which a carriage at rest, with its current settled, starts to move forwards:
/// the larger of the driver deadband and the duty whose stall torque `Kt V / R` equals the
/// static friction (plus the weight of a load pulled towards the negative end) reflected to
/// the motor. Above 1 means full duty cannot move it.
///
/// At exactly this duty the friction still holds (breakaway needs the torque to exceed it);
/// any duty above it moves the carriage.
pub fn breakaway_duty(p: &PlantParams) -> f64 {
    breakaway_duties(p).0
}

/// Breakaway duty (0…1, magnitude) forwards and in reverse ([`breakaway_duty`]); with gravity
/// they differ. A direction in which the load falls without power has breakaway 0.
pub fn breakaway_duties(p: &PlantParams) -> (f64, f64) {
    let k = transmission_m_per_rad(p);
    let to_duty = |force: f64| force * k * p.resistance_ohm / (p.torque_constant * p.supply_v);
    let weight = p.gravity_load_kg * STANDARD_GRAVITY;
    let dir = |load: f64| {
        let f = p.static_friction_n + load;
        if f < 0.0 {
            0.0
        } else {
            to_duty(f).max(p.driver_deadband)
        }
    };
    (dir(weight), dir(-weight))
}

/// Carriage travel per motor radian without slip, m/rad.
fn transmission_m_per_rad(p: &PlantParams) -> f64 {
    p.mm_per_output_rev / 1000.0 / TAU / p.gear_ratio
}

/// One simulated axis: motor, gearbox, belt and carriage.
#[derive(Debug, Clone)]
pub struct Plant {
    /// Faults in effect; change them at any time, they apply from the next [`step`](Self::step).
    pub faults: PlantFaults,
    params: PlantParams,
    motor: DcMotor,
    /// Carriage position from the lower stop, mm.
    position_mm: f64,
    /// Direction of motion: −1, +1, or 0 while held (static friction, a stop, the jam).
    direction: i8,
    /// Slip the reflected quantities below were computed for.
    slip: f64,
    /// Carriage travel per motor radian with the current slip, mm/rad.
    mm_per_rad: f64,
    /// Coulomb friction at the motor shaft, N·m.
    coulomb_torque: f64,
    /// Static friction at the motor shaft, N·m.
    static_torque: f64,
    /// Gravity's load torque at the motor shaft, N·m, opposing positive rotation when positive.
    gravity_torque: f64,
    /// Voltage the bridge applied during the last step (after the reversed-leads fault), V.
    volts: f64,
}

impl Plant {
    /// Carriage at `p.start_mm` (clamped onto the rail), at rest, no current, encoder count
    /// 0, no faults. `p` should have passed
    /// [`crate::config::MachineConfig::validate`].
    pub fn new(p: &PlantParams) -> Self {
        let mut plant = Self {
            faults: PlantFaults::default(),
            params: p.clone(),
            motor: DcMotor::new(MotorParams::from_plant(p)),
            position_mm: p.start_mm.clamp(0.0, p.rail_length_mm.max(0.0)),
            direction: 0,
            slip: 0.0,
            mm_per_rad: 0.0,
            coulomb_torque: 0.0,
            static_torque: 0.0,
            gravity_torque: 0.0,
            volts: 0.0,
        };
        plant.reflect(0.0);
        plant
    }

    /// Recomputes everything that depends on the transmission ratio for `slip`.
    fn reflect(&mut self, slip: f64) {
        let p = &self.params;
        let k = transmission_m_per_rad(p) * (1.0 - slip);
        self.slip = slip;
        self.mm_per_rad = k * 1000.0;
        self.coulomb_torque = p.coulomb_friction_n * k;
        self.static_torque = p.static_friction_n * k;
        self.gravity_torque = p.gravity_load_kg * STANDARD_GRAVITY * k;
        let mut m = MotorParams::from_plant(p);
        m.inertia += p.carriage_mass_kg * k * k;
        self.motor.set_params(m);
    }

    /// Advances the plant `h` seconds (at most [`MAX_STEP_S`]; not a positive finite number
    /// does nothing) with the driver commanded to `duty` (−1…1, clamped; not a number counts
    /// as 0). Internally substeps at [`MAX_SUBSTEP_S`] or less.
    pub fn step(&mut self, duty: f64, h: f64) {
        if !(h > 0.0 && h.is_finite()) {
            return;
        }
        let h = h.min(MAX_STEP_S);
        let slip = if self.faults.belt_slip.is_nan() { 0.0 } else { self.faults.belt_slip };
        let slip = slip.clamp(0.0, 1.0);
        if slip.to_bits() != self.slip.to_bits() {
            self.reflect(slip);
        }
        let duty = if duty.is_nan() { 0.0 } else { duty.clamp(-1.0, 1.0) };
        let mut volts = if duty.abs() < self.params.driver_deadband {
            0.0
        } else {
            let sag = if self.faults.supply_sag.is_nan() { 0.0 } else { self.faults.supply_sag };
            duty * self.params.supply_v * (1.0 - sag.clamp(0.0, 1.0))
        };
        if self.faults.reversed_motor {
            volts = -volts;
        }
        self.volts = volts;
        // The small tolerance keeps 1 ms / 50 µs at 20 substeps despite rounding.
        let n = ((h / MAX_SUBSTEP_S) * (1.0 - 1e-12)).ceil().max(1.0);
        let hs = h / n;
        for _ in 0..n as u64 {
            self.substep(volts, hs);
        }
    }

    /// Whether the carriage may move in direction `dir` from where it is.
    fn free_to_move(&self, dir: i8) -> bool {
        if self.mm_per_rad <= 0.0 {
            return true; // belt slips completely: the motor turns freely
        }
        !(self.faults.blocked
            || (dir < 0 && self.position_mm <= 0.0)
            || (dir > 0 && self.position_mm >= self.params.rail_length_mm))
    }

    fn substep(&mut self, volts: f64, hs: f64) {
        if self.direction == 0 {
            let torque = self.params.torque_constant * self.motor.current - self.gravity_torque;
            let want = if torque > self.static_torque {
                1
            } else if torque < -self.static_torque {
                -1
            } else {
                0
            };
            if self.static_torque > 0.0 {
                if want == 0 || !self.free_to_move(want) {
                    self.motor.step_locked(volts, hs);
                    return;
                }
                self.direction = want;
            } else if !self.free_to_move(want) {
                // No friction to hold it: only a stop or the jam, in the direction pushed.
                self.motor.step_locked(volts, hs);
                return;
            }
        } else if self.faults.blocked && self.mm_per_rad > 0.0 {
            // Jammed mid-motion: an inelastic stop where it is.
            self.direction = 0;
            self.motor.step_locked(volts, hs);
            return;
        }

        let dir = f64::from(self.direction);
        let (theta0, w0, x0) = (self.motor.angle, self.motor.speed, self.position_mm);
        self.motor.step(volts, dir * self.coulomb_torque + self.gravity_torque, hs);
        let w1 = self.motor.speed;
        if w1 * dir <= 0.0 {
            if self.static_torque > 0.0 {
                // Stopped inside the substep: Coulomb friction would otherwise push it back
                // through zero. Stop at the (linearly interpolated) crossing.
                let f = if w0 * dir > 0.0 { w0 / (w0 - w1) } else { 0.0 };
                self.motor.angle = theta0 + 0.5 * w0 * f * hs;
                self.motor.speed = 0.0;
                self.direction = 0;
            } else {
                // No friction: nothing holds it at zero speed.
                self.direction = if w1 > 0.0 {
                    1
                } else if w1 < 0.0 {
                    -1
                } else {
                    0
                };
            }
        }
        let k = self.mm_per_rad;
        let x = x0 + (self.motor.angle - theta0) * k;
        let rail = self.params.rail_length_mm;
        let stop = if k > 0.0 && x < 0.0 {
            Some(0.0)
        } else if k > 0.0 && x > rail {
            Some(rail)
        } else {
            None
        };
        if let Some(limit) = stop {
            // Inelastic impact: the motor stops where the carriage meets the stop.
            self.motor.angle = theta0 + (limit - x0) / k;
            self.motor.speed = 0.0;
            self.direction = 0;
            self.position_mm = limit;
        } else {
            self.position_mm = x;
        }
    }

    /// Carriage position from the lower hard stop, mm.
    pub fn position_mm(&self) -> f64 {
        self.position_mm
    }

    /// Carriage velocity, mm/s.
    pub fn velocity_mm_s(&self) -> f64 {
        self.motor.speed * self.mm_per_rad
    }

    /// Motor shaft speed, rad/s.
    pub fn motor_speed_rad_s(&self) -> f64 {
        self.motor.speed
    }

    /// Motor shaft angle since power-up, rad.
    pub fn motor_angle_rad(&self) -> f64 {
        self.motor.angle
    }

    /// Encoder count without the offset fault: floor(θ · cpr / 2π).
    fn raw_count(&self) -> i64 {
        let cpr = f64::from(self.params.encoder_counts_per_rev);
        // `as` saturates, so a runaway angle cannot panic.
        (self.motor.angle * cpr / TAU).floor() as i64
    }

    /// 4× quadrature count of the motor shaft since power-up, plus the offset fault.
    pub fn encoder_count(&self) -> i64 {
        self.raw_count().saturating_add(self.faults.encoder_offset_counts)
    }

    /// Armature current, A.
    pub fn current_a(&self) -> f64 {
        self.motor.current
    }

    /// Voltage the bridge applied in the last step, V (after the reversed-leads fault).
    pub fn motor_voltage(&self) -> f64 {
        self.volts
    }

    /// The carriage rests against either end of the rail.
    pub fn at_hard_stop(&self) -> bool {
        self.position_mm <= 0.0 || self.position_mm >= self.params.rail_length_mm
    }

    /// Home switch closed: the carriage is at or below `home_switch_mm`. Always open on a
    /// rail without a switch.
    pub fn home_switch(&self) -> bool {
        self.params.home_switch_mm.is_some_and(|h| self.position_mm <= h)
    }

    /// Encoder index: true in a window one count wide at the start of every motor
    /// revolution (the raw count is a whole multiple of counts per revolution). The mark is
    /// on the disc, so the encoder offset fault does not move it.
    pub fn index_pulse(&self) -> bool {
        self.raw_count().rem_euclid(i64::from(self.params.encoder_counts_per_rev.max(1))) == 0
    }

    /// Nominal encoder counts per mm of carriage travel (no slip).
    pub fn counts_per_mm(&self) -> f64 {
        self.params.counts_per_mm()
    }

    /// The parameters this plant was built from.
    pub fn params(&self) -> &PlantParams {
        &self.params
    }

    /// Total inertia at the motor shaft with the current slip, kg·m².
    pub fn inertia_at_motor(&self) -> f64 {
        self.motor.params.inertia
    }

    /// The motor inside the plant.
    pub fn motor(&self) -> &DcMotor {
        &self.motor
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Diagonal entries against `exp`; each squaring can double the rounding error, so 11
    /// squarings (norm 1000) leave about 2¹¹·ε relative.
    #[test]
    fn expm_matches_closed_form_for_diagonal_and_stiff() {
        let mut a = [[0.0; 5]; 5];
        a[0][0] = -1000.0;
        a[1][1] = 0.3;
        a[2][2] = -1e-9;
        let e = expm5(&a);
        assert!((e[0][0] - (-1000.0f64).exp()).abs() < 1e-300);
        assert!((e[1][1] - 0.3f64.exp()).abs() < 1e-12, "{}", e[1][1] - 0.3f64.exp());
        assert!((e[2][2] - (-1e-9f64).exp()).abs() < 1e-12);
        assert_eq!(e[3][3], 1.0);
        assert_eq!(e[0][1], 0.0);
    }

    /// Rotation generator: exp([[0, −t], [t, 0]]) = [[cos t, −sin t], [sin t, cos t]].
    #[test]
    fn expm_matches_rotation() {
        let t = 7.3;
        let mut a = [[0.0; 5]; 5];
        a[0][1] = -t;
        a[1][0] = t;
        let e = expm5(&a);
        assert!((e[0][0] - t.cos()).abs() < 1e-12);
        assert!((e[0][1] + t.sin()).abs() < 1e-12);
        assert!((e[1][0] - t.sin()).abs() < 1e-12);
    }

    #[test]
    fn expm_of_non_finite_is_nan_not_a_hang() {
        let mut a = [[0.0; 5]; 5];
        a[0][0] = f64::INFINITY;
        assert!(expm5(&a)[0][0].is_nan());
    }

    /// L = 0 takes the algebraic path; a tiny L must agree with it.
    #[test]
    fn zero_inductance_agrees_with_tiny_inductance() {
        let m = MotorParams {
            resistance_ohm: 2.0,
            inductance_h: 0.0,
            torque_constant: 0.02,
            back_emf_constant: 0.02,
            inertia: 5e-6,
            viscous_friction: 1e-6,
        };
        let mut a = DcMotor::new(m);
        let mut b = DcMotor::new(MotorParams { inductance_h: 1e-9, ..m });
        for _ in 0..1000 {
            a.step(12.0, 0.001, 50e-6);
            b.step(12.0, 0.001, 50e-6);
        }
        assert!((a.speed_rad_s() - b.speed_rad_s()).abs() < 1e-6 * b.speed_rad_s().abs());
        assert!((a.current_a() - b.current_a()).abs() < 1e-5);
        assert!((a.angle_rad() - b.angle_rad()).abs() < 1e-6 * b.angle_rad().abs());
    }
}
