//! Gain suggestions: PID gains and feedforward for an axis, either from an identified model
//! (SIMC rules) or from a relay experiment (Ziegler–Nichols or Tyreus–Luyben), as a patch to
//! `[axis.controller]` with the reasoning spelled out.
//!
//! # From the model: SIMC
//! The position plant is the identified velocity model integrated, with a delay:
//! `G(s) = K·e^(−θs) / (s·(τ s + 1))` (position per % of duty), an "integrating process with
//! lag". S. Skogestad, "Simple analytic rules for model reduction and PID controller tuning",
//! *Journal of Process Control* 13 (2003) 291–309, Table 1, gives for it, in series form
//! `Kc·(1 + 1/(τI s))·(1 + τD s)`:
//!
//! `Kc = 1/(K·(τc + θ))`, `τI = 4·(τc + θ)`, `τD = τ`,
//!
//! with `τc` the one tuning knob (desired closed-loop time constant); the paper recommends
//! `τc ≥ θ` for robustness. Multiplying out the series form gives the parallel gains
//! `kp = Kc·(1 + τD/τI)`, `ki = Kc/τI`, `kd = Kc·τD` (the paper gives the same conversion to
//! the ideal form: `Kc' = Kc·(1 + τD/τI)`, `τI' = τI + τD`, `τD' = τD/(1 + τD/τI)`).
//!
//! - **θ** = the identified input delay (link and electrical lag; one tick if it was not
//!   observable) plus half a tick: the host samples the position and holds the duty for a
//!   tick, and a zero-order hold behaves like a delay of half its period (K. J. Åström and
//!   B. Wittenmark, *Computer-Controlled Systems*, 3rd ed., 1997, on approximating a sampled
//!   loop by a continuous one; from memory).
//! - **τc** defaults to θ, the paper's recommendation for tight control (a trade-off between
//!   speed and robustness; from memory of the same paper), raised until one encoder count
//!   of error asks the proportional term for no more than the minimum duty (`kp·q ≤ min duty`,
//!   solved for τc in closed form). A count is the finest error the loop can see; asking more
//!   than the duty that starts the axis for it makes every count of flicker a start of the
//!   motor. The bound is our choice, no source; the reason is printed with the numbers. On
//!   demo X it gives τc ≈ 3.7 ms (θ ≈ 1.2 ms, τ ≈ 26 ms). The earlier default τc = τ asked
//!   for a slow loop whose integral winds up during a small step: a 2 mm step overshot by
//!   19 % and full tuning stopped at its verification. (With τD cancelling the lag and no
//!   delay, this rule's loop overshoots a setpoint step by e^(−2) ≈ 13.5 % whatever τc, our
//!   derivation, as long as the output does not saturate; a tight loop saturates on all but
//!   the smallest steps, and the clamping anti-windup then holds the integral: 2 mm overshoots
//!   by one count.)
//! - The derivative filter is `Tf = Td/N` with the ideal-form `Td` and `N` = 10 by default
//!   (Åström & Hägglund, *PID Controllers*, 2nd ed., 1995, ch. 3: N typically 8–20).
//!
//! # Minimum duty, and why the gains are scaled by it
//! servotty's controller maps its linear output `u` to the motor duty
//! `min + |u|·(max − min)/max` ([`crate::control::controller`]), so the loop sees the plant
//! times the slope `(max − min)/max`. Every suggested gain and feedforward is divided by that
//! slope so the loop gain is what the rule asks for. The minimum duty itself is the measured
//! breakaway duty when known (what it takes to start moving from rest: driver deadband or
//! static friction), else the identified offset `u0` (what sliding friction costs).
//!
//! # Feedforward
//! With a profile velocity `v` and acceleration `a`, the model needs the duty
//! `v/K + τ·a/K + u0·sign(v)`. Because servotty's derivative acts on the measurement, an axis
//! that follows the profile at `v` also gets `D = −kd·v`; the velocity feedforward must pay
//! that back, so `ff_velocity = 1/K + kd` (common practice, no source). Then
//! `ff_acceleration = τ/K`; `ff_static = (u0 − min)/slope` for each direction (the sliding
//! offset that way, identified per direction, less the minimum duty that way): the
//! compensation already adds the minimum duty to every non-zero output, so where it pays
//! more than sliding friction (the usual case: the breakaway duty is above the sliding
//! offset) the static feedforward is negative and takes the excess back while the profile
//! moves; the controller never lets it take back more than the velocity feedforward adds.
//! With a load under gravity the two directions differ (`ff_static_reverse`); on the demo
//! lift this halves the RMS following error of a 30 mm move each way against one offset for
//! both directions (tests/tuning.rs).
//!
//! # From a relay experiment
//! [`from_relay`] designs from the point of the frequency response the relay measured
//! ([`super::relay`]): by default the Åström–Hägglund phase-margin design
//! ([`super::rules::phase_margin_design`]); a rule for the ultimate point (Ziegler–Nichols,
//! Tyreus–Luyben) only when the point is the ultimate point. The relay's duty is the raw duty
//! the driver saw, so the same slope scaling applies. No feedforward: a relay experiment does
//! not measure K or τ.

use serde::Serialize;

use super::ident::VelocityModel;
use super::relay::RelayResult;
use super::rules::{
    from_ultimate, phase_margin_design, IdealPid, IntegratingLag, Rule, DEFAULT_PHASE_MARGIN_DEG,
    DEFAULT_TI_TD_RATIO, DESIGN_PHASE_DEG,
};
use crate::config::{ControlMode, ControllerConfig};
use crate::control::params::{self, Param};

/// Default derivative filter ratio N (`Tf = Td/N`).
pub const DEFAULT_FILTER_N: f64 = 10.0;

/// SIMC integral-time factor for integrating processes (`τI = 4·(τc + θ)`, Skogestad 2003).
pub const SIMC_INTEGRAL_FACTOR: f64 = 4.0;

/// Choices for [`simc`].
#[derive(Debug, Clone, PartialEq)]
pub struct SimcOptions {
    /// Board tick, s.
    pub tick_s: f64,
    /// Desired closed-loop time constant τc, s; the velocity time constant when `None`.
    pub closed_loop_time_s: Option<f64>,
    /// Derivative filter ratio N.
    pub filter_n: f64,
    /// Measured breakaway duty forwards, % (see the module docs).
    pub breakaway_forward_pct: Option<f64>,
    /// Measured breakaway duty in reverse, % (positive).
    pub breakaway_reverse_pct: Option<f64>,
    /// One encoder count in axis units, for the noise note and the default τc.
    pub resolution: Option<f64>,
}

impl SimcOptions {
    /// Defaults for a board ticking every `tick_s` seconds.
    pub fn new(tick_s: f64) -> Self {
        Self {
            tick_s,
            closed_loop_time_s: None,
            filter_n: DEFAULT_FILTER_N,
            breakaway_forward_pct: None,
            breakaway_reverse_pct: None,
            resolution: None,
        }
    }
}

/// New values for `[axis.controller]`; `None` leaves a key as it is.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ControllerPatch {
    /// %/unit.
    pub kp: f64,
    /// %/(unit·s).
    pub ki: f64,
    /// %·s/unit.
    pub kd: f64,
    /// s.
    pub derivative_filter_s: f64,
    /// % per unit/s.
    pub ff_velocity: Option<f64>,
    /// % per unit/s².
    pub ff_acceleration: Option<f64>,
    /// %; sets both directions unless `ff_static_reverse` is given too.
    pub ff_static: Option<f64>,
    /// %, the reverse direction's static feedforward when it differs.
    pub ff_static_reverse: Option<f64>,
    /// %.
    pub min_duty_forward: Option<f64>,
    /// %.
    pub min_duty_reverse: Option<f64>,
}

impl ControllerPatch {
    /// The values this patch sets, each with its row of the parameter table, in the table's
    /// order. The struct's fields are named after the table's keys; this is the one place
    /// that pairs them (a key the table does not know is a bug the unit test below finds).
    pub fn entries(&self) -> Vec<(Param, f64)> {
        let set = [
            ("kp", Some(self.kp)),
            ("ki", Some(self.ki)),
            ("kd", Some(self.kd)),
            ("derivative_filter_s", Some(self.derivative_filter_s)),
            ("ff_velocity", self.ff_velocity),
            ("ff_acceleration", self.ff_acceleration),
            ("ff_static", self.ff_static),
            ("ff_static_reverse", self.ff_static_reverse),
            ("min_duty_forward", self.min_duty_forward),
            ("min_duty_reverse", self.min_duty_reverse),
        ];
        params::ALL
            .iter()
            .filter_map(|p| {
                set.iter().find(|(k, _)| *k == p.key).and_then(|(_, v)| v.map(|v| (*p, v)))
            })
            .collect()
    }

    /// `base` with this patch applied, in PID mode, at full precision. A patch that sets
    /// `ff_static` also decides `ff_static_reverse`: none means "the same both ways".
    pub fn apply(&self, base: &ControllerConfig) -> ControllerConfig {
        let mut c = base.clone();
        c.mode = ControlMode::Pid;
        if self.ff_static.is_some() {
            c.ff_static_reverse = None;
        }
        for (p, v) in self.entries() {
            p.set(&mut c, v);
        }
        c
    }

    /// `base` with this patch applied, each value rounded as the parameter table says: what
    /// [`Self::to_toml_lines`] shows is what goes on the axis and into the file.
    pub fn apply_rounded(&self, base: &ControllerConfig) -> ControllerConfig {
        let mut c = self.apply(base);
        for (p, v) in self.entries() {
            p.set(&mut c, p.round(v));
        }
        c
    }

    /// The patch as `key = value` lines for `[axis.controller]`, rounded as the parameter
    /// table says.
    pub fn to_toml_lines(&self) -> String {
        let mut s = String::from("mode = \"pid\"\n");
        for (p, v) in self.entries() {
            s.push_str(&format!("{} = {}\n", p.key, p.round(v)));
        }
        s
    }
}

/// A suggestion: the patch, the rule's own numbers and the reasoning.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Suggestion {
    /// Method and source, one line.
    pub method: String,
    pub patch: ControllerPatch,
    /// The rule's result in ideal form, before the minimum-duty slope scaling.
    pub ideal: IdealPid,
    /// Explanation, one point per line.
    pub notes: Vec<String>,
}

/// Why no suggestion could be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SuggestError {
    #[error("the model is not usable: {0}")]
    BadModel(String),
    #[error("the options are not usable: {0}")]
    BadOptions(String),
    #[error("the minimum duty ({min} %) leaves no range below max_duty ({max} %)")]
    NoDutyRange { min: f64, max: f64 },
}

/// Slope `(max − min)/max` of the minimum-duty compensation for one direction.
pub fn compensation_slope(max_duty: f64, min_duty: f64) -> f64 {
    (max_duty - min_duty) / max_duty
}

/// The smallest τc for which one encoder count `q` of error asks the proportional term for
/// no more than `min_duty` (module docs, "τc"): with `s = τc + θ` and the parallel
/// `kp = (1 + τ/(4s))/(K·s·slope)`, `kp·q ≤ min_duty` is `(τ/4)x² + x − A ≤ 0` in `x = 1/s`,
/// `A = min_duty·K·slope/q`. `None` without a minimum duty to bound by.
fn count_bound_tau_c(
    k: f64,
    tau: f64,
    theta: f64,
    slope: f64,
    min_duty: f64,
    q: f64,
) -> Option<f64> {
    if !(min_duty > 0.0 && slope > 0.0) {
        return None;
    }
    let a = min_duty * k * slope / q;
    let c = tau / SIMC_INTEGRAL_FACTOR;
    let x = (-1.0 + (1.0 + 4.0 * c * a).sqrt()) / (2.0 * c);
    (x.is_finite() && x > 0.0).then(|| 1.0 / x - theta)
}

/// SIMC gains and model-based feedforward (module docs), starting from `base` (its
/// `max_duty`, limits and anti-windup are kept).
///
/// # Errors
/// A model or options that are not positive finite numbers, or a minimum duty at or above
/// `max_duty`.
pub fn simc(
    model: &VelocityModel,
    base: &ControllerConfig,
    opts: &SimcOptions,
) -> Result<Suggestion, SuggestError> {
    let (k, tau, u0) = (model.gain, model.time_constant_s, model.offset_pct);
    if !(k.is_finite() && k > 0.0 && tau.is_finite() && tau > 0.0 && u0.is_finite()) {
        return Err(SuggestError::BadModel(format!("K = {k}, τ = {tau}, u0 = {u0}")));
    }
    let h = opts.tick_s;
    if !(h.is_finite() && h > 0.0 && opts.filter_n.is_finite() && opts.filter_n > 0.0) {
        return Err(SuggestError::BadOptions(format!("tick {h} s, N {}", opts.filter_n)));
    }
    let identified = model.delay_s.filter(|d| d.is_finite() && *d >= 0.0);
    let theta = identified.unwrap_or(h) + 0.5 * h;
    let asked = opts.closed_loop_time_s;
    if asked.is_some_and(|t| !(t.is_finite() && t > 0.0)) {
        return Err(SuggestError::BadOptions(format!("closed-loop time {asked:?}")));
    }
    let max = base.max_duty;
    let u0_rev = model.offset_for(-1.0);
    let m_f = opts.breakaway_forward_pct.unwrap_or(u0).max(0.0);
    let m_r = opts.breakaway_reverse_pct.unwrap_or(u0_rev).max(0.0);
    if !(max.is_finite() && max > m_f.max(m_r)) {
        return Err(SuggestError::NoDutyRange { min: m_f.max(m_r), max });
    }
    let slope = 0.5 * (compensation_slope(max, m_f) + compensation_slope(max, m_r));
    let q = opts.resolution.filter(|q| q.is_finite() && *q > 0.0);
    let count_bound = q.and_then(|q| count_bound_tau_c(k, tau, theta, slope, m_f.min(m_r), q));
    let tau_c = match asked {
        Some(t) => t.max(theta),
        None => count_bound.unwrap_or(theta).max(theta),
    };

    // Skogestad 2003, Table 1, integrating process with lag (series form).
    let kc = 1.0 / (k * (tau_c + theta));
    let ti = SIMC_INTEGRAL_FACTOR * (tau_c + theta);
    let td = tau;
    // Series → parallel / ideal.
    let ideal =
        IdealPid { kc: kc * (1.0 + td / ti), ti_s: Some(ti + td), td_s: ti * td / (ti + td) };

    let kp = kc * (1.0 + td / ti) / slope;
    let ki = kc / ti / slope;
    let kd = kc * td / slope;
    let tf = ideal.td_s / opts.filter_n;
    let ff_velocity = 1.0 / (k * slope) + kd;
    let ff_acceleration = tau / (k * slope);
    // Per direction (module docs): the sliding offset that way less the minimum duty that way.
    let ff_static = (u0 - m_f) / slope;
    let ff_static_rev = (u0_rev - m_r) / slope;

    let mut notes = vec![
        format!(
            "model: K = {} unit/s per %, τ = {} s, u0 = {} % forwards / {} % in reverse, delay {}",
            round_sig(k, 4),
            round_sig(tau, 3),
            round_sig(u0, 3),
            round_sig(u0_rev, 3),
            identified.map_or("not observed (one tick assumed)".to_owned(), |d| format!(
                "{} s",
                round_sig(d, 2)
            ))
        ),
        format!(
            "θ = {} s: the delay plus half a tick for the sample-and-hold",
            round_sig(theta, 3)
        ),
        if asked.is_some_and(|t| t < theta) {
            format!("τc = {} s: raised to θ, SIMC asks for τc ≥ θ", round_sig(tau_c, 3))
        } else if asked.is_some() {
            format!("τc = {} s as asked", round_sig(tau_c, 3))
        } else if count_bound.is_some_and(|b| b > theta) {
            format!(
                "τc = {} s: Skogestad's τc = θ for tight control, raised until one encoder count \
                 of error asks the proportional term for no more than the minimum duty {} %",
                round_sig(tau_c, 3),
                round_sig(m_f.min(m_r), 3)
            )
        } else {
            format!("τc = θ = {} s: Skogestad's choice for tight control", round_sig(tau_c, 3))
        },
        format!(
            "SIMC, series form: Kc = 1/(K(τc+θ)) = {} %/unit, τI = 4(τc+θ) = {} s, τD = τ = {} s",
            round_sig(kc, 4),
            round_sig(ti, 3),
            round_sig(td, 3)
        ),
        format!(
            "parallel: kp = Kc(1+τD/τI), ki = Kc/τI, kd = Kc·τD, each divided by the \
             minimum-duty slope {} so the loop gain is what the rule asks",
            round_sig(slope, 3)
        ),
        format!(
            "min duty {} / {} % ({}): every non-zero output starts there",
            round_sig(m_f, 3),
            round_sig(m_r, 3),
            if opts.breakaway_forward_pct.is_some() || opts.breakaway_reverse_pct.is_some() {
                "measured breakaway"
            } else {
                "identified friction offset; measure the breakaway duty to do better"
            }
        ),
        format!(
            "ff_velocity = 1/K + kd = {}: the derivative acts on the measurement and takes \
             kd·v away at profile velocity v; the feedforward pays it back",
            round_sig(ff_velocity, 4)
        ),
        format!("ff_acceleration = τ/K = {}", round_sig(ff_acceleration, 3)),
        format!(
            "ff_static = (u0 − min duty)/slope = {} % forwards, {} % in reverse: {}",
            round_sig(ff_static, 3),
            round_sig(ff_static_rev, 3),
            if ff_static.min(ff_static_rev) < 0.0 {
                "negative where the minimum duty pays more than sliding friction (taken back \
                 while the profile moves, never more than the velocity feedforward adds)"
            } else {
                "sliding friction beyond the minimum duty"
            }
        ),
    ];
    if let Some(q) = opts.resolution.filter(|q| q.is_finite() && *q > 0.0) {
        let kick = kd * q / (tf + h);
        notes.push(format!(
            "one encoder count ({} unit) moves the derivative term by up to {} % and the \
             proportional term by {} %",
            round_sig(q, 3),
            round_sig(kick, 2),
            round_sig(kp * q, 2)
        ));
    }
    Ok(Suggestion {
        method: "SIMC for an integrating process with lag (Skogestad, J. Process Control 13, \
                 2003)"
            .to_owned(),
        patch: ControllerPatch {
            kp,
            ki,
            kd,
            derivative_filter_s: tf,
            ff_velocity: Some(ff_velocity),
            ff_acceleration: Some(ff_acceleration),
            ff_static: Some(ff_static),
            ff_static_reverse: ((ff_static_rev - ff_static).abs() >= 0.05).then_some(ff_static_rev),
            min_duty_forward: Some(m_f),
            min_duty_reverse: Some(m_r),
        },
        ideal,
        notes,
    })
}

/// How gains follow from a relay experiment.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum RelayDesign {
    /// Åström–Hägglund phase-margin design at the measured point ([`phase_margin_design`]),
    /// margin in degrees, `Ti = 4·Td`.
    PhaseMargin(f64),
    /// A rule stated for the ultimate point; refused when the measured point is not it.
    Rule(Rule),
}

impl Default for RelayDesign {
    fn default() -> Self {
        RelayDesign::PhaseMargin(DEFAULT_PHASE_MARGIN_DEG)
    }
}

/// Gains from a relay experiment (module docs). The minimum duty and feedforward of `base`
/// are kept; `filter_n` sets `Tf = Td/N` (the base filter is kept when there is no
/// derivative).
///
/// # Errors
/// A measured point that is not positive and finite, a point a PID cannot place, a rule for
/// the ultimate point when the point measured is not it, or a minimum duty at or above
/// max_duty.
pub fn from_relay(
    relay: &RelayResult,
    design: RelayDesign,
    base: &ControllerConfig,
    filter_n: f64,
) -> Result<Suggestion, SuggestError> {
    let p = relay.point;
    if !(p.gain.is_finite() && p.gain > 0.0 && p.omega_rad_s.is_finite() && p.omega_rad_s > 0.0) {
        return Err(SuggestError::BadModel(format!("measured point {p:?}")));
    }
    if !(filter_n.is_finite() && filter_n > 0.0) {
        return Err(SuggestError::BadOptions(format!("N {filter_n}")));
    }
    let max = base.max_duty;
    let (m_f, m_r) = (base.min_duty_forward.max(0.0), base.min_duty_reverse.max(0.0));
    if !(max.is_finite() && max > m_f.max(m_r)) {
        return Err(SuggestError::NoDutyRange { min: m_f.max(m_r), max });
    }
    let slope = 0.5 * (compensation_slope(max, m_f) + compensation_slope(max, m_r));
    let mut notes = vec![format!(
        "relay: a = {} unit, period {} s over {} of {} cycles; measured point |G| = {} unit/%, \
         phase {}° at ω = {} rad/s (friction offset {} % corrected; uncorrected |G| {}, {}°; \
         the describing function puts it at {}°)",
        round_sig(relay.amplitude, 4),
        round_sig(relay.period_s, 4),
        relay.cycles,
        relay.cycles_found,
        round_sig(p.gain, 4),
        round_sig(p.phase_deg, 4),
        round_sig(p.omega_rad_s, 4),
        round_sig(relay.friction_pct, 3),
        round_sig(relay.point_uncorrected.gain, 4),
        round_sig(relay.point_uncorrected.phase_deg, 4),
        round_sig(relay.describing_function_phase_deg, 4),
    )];
    let (ideal, method) = match design {
        RelayDesign::PhaseMargin(margin) => {
            // The design point: the measured point carried along the integrating-with-lag model
            // through it to DESIGN_PHASE_DEG (rules module docs), so that the gains describe
            // the axis, not the relay duty that happened to set the limit cycle's frequency.
            let h = relay.sample_period_s;
            let theta = if h.is_finite() && h > 0.0 { 1.5 * h } else { 0.0 };
            let model = IntegratingLag::through(&p, theta);
            let at = model.and_then(|m| m.at_phase(DESIGN_PHASE_DEG));
            let q = match (model, at) {
                (Some(m), Some(q)) => {
                    notes.push(format!(
                        "design point: the model k·e^(−θs)/(s(τs+1)) through the measured point \
                         (θ = 1.5 ticks = {} s assumed: k = {} unit/s per %, τ = {} s) at phase \
                         {DESIGN_PHASE_DEG}°: |G| = {} unit/% at ω = {} rad/s",
                        round_sig(theta, 3),
                        round_sig(m.gain, 4),
                        round_sig(m.lag_s, 3),
                        round_sig(q.gain, 4),
                        round_sig(q.omega_rad_s, 4)
                    ));
                    q
                }
                _ => {
                    notes.push(format!(
                        "design point: the measured point itself (no integrating-with-lag model \
                         fits a phase of {}°)",
                        round_sig(p.phase_deg, 4)
                    ));
                    p
                }
            };
            let ideal = phase_margin_design(&q, margin, DEFAULT_TI_TD_RATIO).ok_or_else(|| {
                SuggestError::BadModel(format!(
                    "a PID cannot move the point at {}° to a {margin}° phase margin",
                    round_sig(q.phase_deg, 3)
                ))
            })?;
            notes.push(format!(
                "phase-margin design: crossover at ω = {} rad/s with {margin}° margin, Ti = 4 Td: \
                 Kc = {} %/unit, Ti = {} s, Td = {} s (ideal form)",
                round_sig(q.omega_rad_s, 4),
                round_sig(ideal.kc, 4),
                round_sig(ideal.ti_s.unwrap_or(0.0), 4),
                round_sig(ideal.td_s, 4)
            ));
            (
                ideal,
                format!(
                    "relay point with phase-margin design, {margin}° (Åström & Hägglund, \
                     Automatica 20(5), 1984)"
                ),
            )
        }
        RelayDesign::Rule(rule) => {
            let u = relay.ultimate.ok_or_else(|| {
                SuggestError::BadModel(format!(
                    "{} needs the ultimate point (−180°); the relay measured {}°: use the \
                     phase-margin design",
                    rule.name(),
                    round_sig(p.phase_deg, 3)
                ))
            })?;
            let ideal = from_ultimate(rule, u.ku, u.tu_s);
            notes.push(format!(
                "{}: Ku = {} %/unit, Tu = {} s → Kc = {} %/unit, Ti = {}, Td = {} s (ideal form)",
                rule.name(),
                round_sig(u.ku, 4),
                round_sig(u.tu_s, 4),
                round_sig(ideal.kc, 4),
                ideal.ti_s.map_or("none".to_owned(), |t| format!("{} s", round_sig(t, 4))),
                round_sig(ideal.td_s, 4)
            ));
            (ideal, format!("relay ultimate point, {}", rule.source()))
        }
    };
    let g = ideal.to_parallel();
    let tf = if ideal.td_s > 0.0 { ideal.td_s / filter_n } else { base.derivative_filter_s };
    notes.push(format!(
        "parallel: kp = Kc, ki = Kc/Ti, kd = Kc·Td, each divided by the minimum-duty slope {}",
        round_sig(slope, 3)
    ));
    Ok(Suggestion {
        method,
        patch: ControllerPatch {
            kp: g.kp / slope,
            ki: g.ki / slope,
            kd: g.kd / slope,
            derivative_filter_s: tf,
            ff_velocity: None,
            ff_acceleration: None,
            ff_static: None,
            ff_static_reverse: None,
            min_duty_forward: None,
            min_duty_reverse: None,
        },
        ideal,
        notes,
    })
}

/// `x` rounded to `digits` significant digits (for display and config files).
pub fn round_sig(x: f64, digits: i32) -> f64 {
    params::Rounding::Significant(digits).apply(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn base() -> ControllerConfig {
        ControllerConfig {
            mode: ControlMode::Proportional,
            kp: 1.0,
            integral_limit: 20.0,
            ..ControllerConfig::default()
        }
    }

    // SIMC for k'e^{−θs}/(s(τ1 s+1)): Kc = 1/(k'(τc+θ)), τI = 4(τc+θ), τD = τ1 in series form
    // (S. Skogestad, J. Process Control 13 (2003) 291–309, Table 1); with no minimum duty the
    // slope is 1, so the parallel gains are Kc(1+τD/τI), Kc/τI, Kc·τD exactly.
    // Every field of the patch is a row of the parameter table (a misspelt key would drop out
    // of `entries` and so out of the proposed lines, the applied gains and the saved file).
    #[test]
    fn every_patch_field_is_a_parameter_of_the_table() {
        let p = ControllerPatch {
            kp: 1.0,
            ki: 2.0,
            kd: 3.0,
            derivative_filter_s: 4.0,
            ff_velocity: Some(5.0),
            ff_acceleration: Some(6.0),
            ff_static: Some(7.0),
            ff_static_reverse: Some(7.5),
            min_duty_forward: Some(8.0),
            min_duty_reverse: Some(9.0),
        };
        assert_eq!(p.entries().len(), 10);
        assert_eq!(p.to_toml_lines().lines().count(), 11, "mode and ten keys");
        // Setting the forward static feedforward alone clears a reverse one.
        let base = ControllerConfig { ff_static_reverse: Some(2.0), ..base() };
        let one_way = ControllerPatch { ff_static_reverse: None, ..p };
        assert_eq!(one_way.apply(&base).ff_static_reverse, None);
        assert_eq!(p.apply(&base).ff_static_reverse, Some(7.5));
    }

    #[test]
    fn simc_matches_the_published_rule() {
        let model = VelocityModel {
            gain: 2.0,
            time_constant_s: 0.05,
            offset_pct: 0.0,
            offset_reverse_pct: None,
            delay_s: Some(0.0095),
        };
        let opts = SimcOptions { closed_loop_time_s: Some(0.04), ..SimcOptions::new(0.001) };
        let s = simc(&model, &base(), &opts).expect("suggests");
        let theta = 0.0095 + 0.0005;
        let kc = 1.0 / (2.0 * (0.04 + theta));
        let ti = 4.0 * (0.04 + theta);
        assert!((s.patch.kp - kc * (1.0 + 0.05 / ti)).abs() < 1e-12);
        assert!((s.patch.ki - kc / ti).abs() < 1e-12);
        assert!((s.patch.kd - kc * 0.05).abs() < 1e-12);
        // Ideal form is the same controller: Kc'(1 + 1/(Ti' s) + Td' s).
        assert!((s.ideal.kc - s.patch.kp).abs() < 1e-12);
        assert!((s.ideal.kc / s.ideal.ti_s.expect("PI") - s.patch.ki).abs() < 1e-12);
        assert!((s.ideal.kc * s.ideal.td_s - s.patch.kd).abs() < 1e-12);
        assert_eq!(s.patch.ff_velocity, Some(1.0 / 2.0 + s.patch.kd));
        assert_eq!(s.patch.ff_acceleration, Some(0.05 / 2.0));
    }

    #[test]
    fn minimum_duty_scales_the_gains() {
        let model = VelocityModel {
            gain: 2.0,
            time_constant_s: 0.05,
            offset_pct: 3.0,
            offset_reverse_pct: None,
            delay_s: None,
        };
        let plain = simc(&model, &base(), &SimcOptions::new(0.001)).expect("suggests");
        let opts = SimcOptions {
            breakaway_forward_pct: Some(20.0),
            breakaway_reverse_pct: Some(20.0),
            ..SimcOptions::new(0.001)
        };
        let comp = simc(&model, &base(), &opts).expect("suggests");
        // Without breakaway the minimum duty is u0 = 3 %, slope 0.97; with 20 %, slope 0.8.
        assert!((plain.patch.kp * 0.97 / 0.8 - comp.patch.kp).abs() < 1e-9);
        assert_eq!(plain.patch.min_duty_forward, Some(3.0));
        // Sliding friction 3 % against a 20 % minimum duty: 17 % too much, taken back.
        assert_eq!(comp.patch.ff_static, Some((3.0 - 20.0) / 0.8));
        assert_eq!(comp.patch.ff_static_reverse, None);
        let cfg = comp.patch.apply(&base());
        assert_eq!(cfg.mode, ControlMode::Pid);
        assert_eq!(cfg.min_duty_reverse, 20.0);
        assert!(comp.patch.to_toml_lines().contains("min_duty_forward = 20\n"));
    }

    #[test]
    fn bad_inputs_are_errors() {
        let bad = VelocityModel {
            gain: -1.0,
            time_constant_s: 0.05,
            offset_pct: 0.0,
            offset_reverse_pct: None,
            delay_s: None,
        };
        assert!(matches!(
            simc(&bad, &base(), &SimcOptions::new(0.001)),
            Err(SuggestError::BadModel(_))
        ));
        let ok = VelocityModel { gain: 1.0, ..bad };
        assert!(matches!(
            simc(&ok, &base(), &SimcOptions::new(0.0)),
            Err(SuggestError::BadOptions(_))
        ));
        let opts = SimcOptions { breakaway_forward_pct: Some(100.0), ..SimcOptions::new(0.001) };
        assert!(matches!(simc(&ok, &base(), &opts), Err(SuggestError::NoDutyRange { .. })));
    }

    #[test]
    fn rounding_to_significant_digits() {
        assert_eq!(round_sig(0.0123456, 3), 0.0123);
        assert_eq!(round_sig(12345.0, 2), 12000.0);
        assert_eq!(round_sig(-2.5349, 4), -2.535);
    }
}
