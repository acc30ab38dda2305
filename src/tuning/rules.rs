//! Tuning rules from the ultimate gain and period (Ku, Tu), and the conversion of their
//! ideal-form results to servotty's parallel gains.
//!
//! # Forms
//! The rules give the *ideal* (ISA) form `C(s) = Kc·(1 + 1/(Ti·s) + Td·s)`. servotty's PID is
//! parallel, `kp·e + ki·∫e − kd·ẏ` (derivative on the measurement), so `kp = Kc`,
//! `ki = Kc/Ti`, `kd = Kc·Td`; with Ku in %/unit, kp is in %/unit, ki in %/(unit·s) and kd in
//! %·s/unit, as in `[axis.controller]`.
//!
//! # Sources
//! - J. G. Ziegler and N. B. Nichols, "Optimum settings for automatic controllers",
//!   *Trans. ASME* 64, 1942, 759–768: P `Kc = 0.5 Ku`; PI `Kc = 0.45 Ku`, `Ti = Tu/1.2`;
//!   PID `Kc = 0.6 Ku`, `Ti = Tu/2`, `Td = Tu/8`.
//! - Tyreus–Luyben, as tabulated in D. E. Seborg, T. F. Edgar and D. A. Mellichamp, *Process
//!   Dynamics and Control*, 2nd ed., Wiley 2004, Table 12.6: PI `Kc = Ku/3.2`, `Ti = 2.2 Tu`;
//!   PID `Kc = Ku/2.2`, `Ti = 2.2 Tu`, `Td = Tu/6.3`.
//!
//! - SIMC for first- and second-order plants with delay (no integrator, e.g. a velocity
//!   loop): [`simc_first_order`], [`simc_second_order`] (Skogestad 2003, Table 1; the
//!   integrating rule servotty's position loop uses is in [`super::suggest::simc`]).
//!
//! Ziegler–Nichols aims at a quarter-amplitude decay and overshoots a lot; Tyreus–Luyben is
//! the conservative choice (less gain, much slower integral). Both need the *ultimate* point
//! (phase −180°); a relay with hysteresis or friction measures another point.
//!
//! # A design for any measured point
//! [`phase_margin_design`]: given one point `G(jω0) = r·e^(jγ)` of the frequency response, the
//! PID `Kc·(1 + 1/(Ti s) + Td s)` with `Ti = α·Td` is chosen so that the loop passes through
//! `e^(j(−180° + φm))` at ω0: gain crossover at ω0 with phase margin φm. With
//! `ψ = −180° + φm − γ`: `Kc = cos ψ / r` and `ω0·Td − 1/(ω0·Ti) = tan ψ`, so
//! `ω0·Td = (tan ψ + √(tan² ψ + 4/α))/2`. Source: K. J. Åström and T. Hägglund, "Automatic
//! tuning of simple regulators with specifications on phase and amplitude margins",
//! *Automatica* 20(5), 1984, 645–651 (phase-margin design from the relay's point, α = 4 from
//! memory). At the ultimate point with φm = 25° it gives exactly Ziegler–Nichols' `Ti = Tu/2`
//! and `Td = Tu/8` (checked in the tests).
//!
//! # The design point, and why not the measured one
//! The design puts the crossover at the frequency the relay measured, and that frequency is
//! set by the experiment (duty, hysteresis, friction, the encoder count), not by the axis: on
//! demo X it moved between 67 and 87 rad/s across relay duties of 10–40 %, and gains designed
//! at exact points of the true response there spread by over 20 %. So the measured point is
//! first carried along the curve to a fixed phase, [`DESIGN_PHASE_DEG`]: an integrating process
//! with lag, `k·e^(−θs)/(s(τs + 1))` (an axis's position per % of duty, with the tick as the
//! delay θ), is fitted through the point ([`IntegratingLag::through`]: two numbers, k and τ,
//! from the point's gain and phase), and its point at −155° is the design point
//! ([`IntegratingLag::at_phase`]). The model is used only for a short step along the curve
//! (the relay lands within a few degrees of −155° at the default hysteresis), so its errors
//! matter little. −155° is our choice: where the default relay lands on the demo axes, and
//! where a PID with 60° margin adds a moderate 35° of lead.

use serde::Serialize;

use super::relay::FrequencyPoint;

/// A published rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Rule {
    /// Ziegler–Nichols, P only.
    ZieglerNicholsP,
    /// Ziegler–Nichols, PI.
    ZieglerNicholsPi,
    /// Ziegler–Nichols, PID.
    ZieglerNicholsPid,
    /// Tyreus–Luyben, PI.
    TyreusLuybenPi,
    /// Tyreus–Luyben, PID.
    TyreusLuybenPid,
}

impl Rule {
    /// Every rule, for menus and tables.
    pub const ALL: [Rule; 5] = [
        Rule::ZieglerNicholsP,
        Rule::ZieglerNicholsPi,
        Rule::ZieglerNicholsPid,
        Rule::TyreusLuybenPi,
        Rule::TyreusLuybenPid,
    ];

    /// Short name for the command line and reports (`zn-p`, `zn-pi`, `zn-pid`, `tl-pi`,
    /// `tl-pid`).
    pub fn name(self) -> &'static str {
        match self {
            Rule::ZieglerNicholsP => "zn-p",
            Rule::ZieglerNicholsPi => "zn-pi",
            Rule::ZieglerNicholsPid => "zn-pid",
            Rule::TyreusLuybenPi => "tl-pi",
            Rule::TyreusLuybenPid => "tl-pid",
        }
    }

    /// Where the rule is published.
    pub fn source(self) -> &'static str {
        match self {
            Rule::ZieglerNicholsP | Rule::ZieglerNicholsPi | Rule::ZieglerNicholsPid => {
                "Ziegler & Nichols, Trans. ASME 64, 1942"
            }
            Rule::TyreusLuybenPi | Rule::TyreusLuybenPid => {
                "Tyreus-Luyben, in Seborg, Edgar & Mellichamp, Process Dynamics and Control, \
                 2nd ed., Table 12.6"
            }
        }
    }
}

impl std::str::FromStr for Rule {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Rule::ALL.into_iter().find(|r| r.name() == s).ok_or_else(|| {
            let names: Vec<&str> = Rule::ALL.iter().map(|r| r.name()).collect();
            format!("unknown rule {s:?}; expected one of {}", names.join(", "))
        })
    }
}

/// Ideal-form PID settings `Kc·(1 + 1/(Ti s) + Td s)`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IdealPid {
    /// Controller gain Kc, output unit per process-output unit.
    pub kc: f64,
    /// Integral time Ti, s; `None` for no integral action.
    pub ti_s: Option<f64>,
    /// Derivative time Td, s (0 for none).
    pub td_s: f64,
}

/// servotty's parallel gains (`[axis.controller]` kp, ki, kd).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ParallelGains {
    /// %/unit.
    pub kp: f64,
    /// %/(unit·s).
    pub ki: f64,
    /// %·s/unit.
    pub kd: f64,
}

impl IdealPid {
    /// `kp = Kc`, `ki = Kc/Ti` (0 without integral), `kd = Kc·Td`.
    pub fn to_parallel(&self) -> ParallelGains {
        ParallelGains {
            kp: self.kc,
            ki: self.ti_s.map_or(0.0, |ti| self.kc / ti),
            kd: self.kc * self.td_s,
        }
    }
}

/// The rule's settings for an ultimate gain `ku` and ultimate period `tu_s` (module docs).
pub fn from_ultimate(rule: Rule, ku: f64, tu_s: f64) -> IdealPid {
    match rule {
        Rule::ZieglerNicholsP => IdealPid { kc: 0.5 * ku, ti_s: None, td_s: 0.0 },
        Rule::ZieglerNicholsPi => IdealPid { kc: 0.45 * ku, ti_s: Some(tu_s / 1.2), td_s: 0.0 },
        Rule::ZieglerNicholsPid => {
            IdealPid { kc: 0.6 * ku, ti_s: Some(tu_s / 2.0), td_s: tu_s / 8.0 }
        }
        Rule::TyreusLuybenPi => IdealPid { kc: ku / 3.2, ti_s: Some(2.2 * tu_s), td_s: 0.0 },
        Rule::TyreusLuybenPid => {
            IdealPid { kc: ku / 2.2, ti_s: Some(2.2 * tu_s), td_s: tu_s / 6.3 }
        }
    }
}

/// SIMC settings in series form `Kc·(1 + 1/(τI s))·(1 + τD s)` (S. Skogestad, "Simple
/// analytic rules for model reduction and PID controller tuning", *J. Process Control* 13
/// (2003) 291–309, Table 1).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SeriesPid {
    /// Kc, output unit per process-output unit.
    pub kc: f64,
    /// τI, s.
    pub ti_s: f64,
    /// τD, s (0 for PI).
    pub td_s: f64,
}

impl SeriesPid {
    /// The same controller in ideal form: `Kc' = Kc(1 + τD/τI)`, `Ti' = τI + τD`,
    /// `Td' = τD/(1 + τD/τI)` (the conversion given in the same paper).
    pub fn to_ideal(&self) -> IdealPid {
        let f = 1.0 + self.td_s / self.ti_s;
        IdealPid { kc: self.kc * f, ti_s: Some(self.ti_s + self.td_s), td_s: self.td_s / f }
    }
}

/// SIMC for a first-order plant with delay `k·e^(−θs)/(τ1 s + 1)` (no integrator, e.g. a
/// velocity loop): `Kc = τ1/(k(τc + θ))`, `τI = min(τ1, 4(τc + θ))`, PI. `None` unless every
/// number is positive and finite (θ may be 0).
pub fn simc_first_order(k: f64, tau1: f64, theta: f64, tau_c: f64) -> Option<SeriesPid> {
    let ok = |x: f64| x.is_finite() && x > 0.0;
    if !(ok(k) && ok(tau1) && ok(tau_c) && theta.is_finite() && theta >= 0.0) {
        return None;
    }
    let s = tau_c + theta;
    Some(SeriesPid { kc: tau1 / (k * s), ti_s: tau1.min(4.0 * s), td_s: 0.0 })
}

/// SIMC for a second-order plant with delay `k·e^(−θs)/((τ1 s + 1)(τ2 s + 1))`, τ1 ≥ τ2:
/// as [`simc_first_order`] with τ1, plus `τD = τ2`.
pub fn simc_second_order(
    k: f64,
    tau1: f64,
    tau2: f64,
    theta: f64,
    tau_c: f64,
) -> Option<SeriesPid> {
    if !(tau2.is_finite() && tau2 >= 0.0) {
        return None;
    }
    let (t1, t2) = if tau1 >= tau2 { (tau1, tau2) } else { (tau2, tau1) };
    simc_first_order(k, t1, theta, tau_c).map(|p| SeriesPid { td_s: t2, ..p })
}

/// Default phase margin of [`phase_margin_design`], degrees (our choice, for a well-damped
/// step on the demo axes; see docs/tuning.md).
pub const DEFAULT_PHASE_MARGIN_DEG: f64 = 60.0;

/// Default ratio α = Ti/Td of [`phase_margin_design`].
pub const DEFAULT_TI_TD_RATIO: f64 = 4.0;

/// PID settings that put the loop through `e^(j(−180° + margin))` at the point's frequency
/// (module docs). `None` when the point cannot be moved there by a PID (the phase to add is
/// not within ±90°) or the numbers are not usable.
pub fn phase_margin_design(
    point: &FrequencyPoint,
    margin_deg: f64,
    alpha: f64,
) -> Option<IdealPid> {
    let (w, r, gamma) = (point.omega_rad_s, point.gain, point.phase_deg);
    if !(w.is_finite() && w > 0.0 && r.is_finite() && r > 0.0 && gamma.is_finite()) {
        return None;
    }
    if !(alpha.is_finite() && alpha > 0.0 && margin_deg.is_finite()) {
        return None;
    }
    let psi = (-180.0 + margin_deg - gamma).to_radians();
    if psi.abs() >= 0.5 * std::f64::consts::PI - 1e-6 {
        return None;
    }
    let tp = psi.tan();
    let wtd = 0.5 * (tp + (tp * tp + 4.0 / alpha).sqrt());
    let td = wtd / w;
    Some(IdealPid { kc: psi.cos() / r, ti_s: Some(alpha * td), td_s: td })
}

/// Phase of the frequency-response point the relay gains are designed at, degrees (our
/// choice; see [`along_integrating_lag`] and docs/tuning.md).
pub const DESIGN_PHASE_DEG: f64 = -155.0;

/// An integrating process with lag and delay, `k·e^(−θs)/(s·(τs + 1))` (the position of a
/// DC-motor axis per % of duty), fitted through one measured point.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IntegratingLag {
    /// k, output unit per second per input unit.
    pub gain: f64,
    /// τ, s.
    pub lag_s: f64,
    /// θ, s (assumed, not fitted).
    pub delay_s: f64,
}

impl IntegratingLag {
    /// The model through `point` for an assumed delay `delay_s`: its phase
    /// `−90° − atan(ωτ) − ωθ` and gain `k/(ω√(1 + (ωτ)²))` equal the point's. `None` when the
    /// point's phase leaves no lag between 0° and 90° for τ.
    pub fn through(point: &FrequencyPoint, delay_s: f64) -> Option<Self> {
        let (w, r, gamma) = (point.omega_rad_s, point.gain, point.phase_deg);
        if !(w.is_finite() && w > 0.0 && r.is_finite() && r > 0.0 && delay_s >= 0.0) {
            return None;
        }
        let lag = (-gamma - 90.0 - (w * delay_s).to_degrees()).to_radians();
        if !(lag > 0.0 && lag < 0.5 * std::f64::consts::PI - 1e-6) {
            return None;
        }
        let tau = lag.tan() / w;
        Some(Self { gain: r * w * (1.0 + (w * tau).powi(2)).sqrt(), lag_s: tau, delay_s })
    }

    /// The model's frequency response at ω.
    pub fn at(&self, w: f64) -> FrequencyPoint {
        let phase = -90.0 - (w * self.lag_s).atan().to_degrees() - (w * self.delay_s).to_degrees();
        FrequencyPoint {
            omega_rad_s: w,
            gain: self.gain / (w * (1.0 + (w * self.lag_s).powi(2)).sqrt()),
            phase_deg: phase,
        }
    }

    /// The model's point where its phase is `phase_deg` (between −90° and −180° when there is
    /// no delay; any phase below −90° with one). `None` when there is no such frequency.
    pub fn at_phase(&self, phase_deg: f64) -> Option<FrequencyPoint> {
        let want = -phase_deg - 90.0;
        let lag = |w: f64| (w * self.lag_s).atan().to_degrees() + (w * self.delay_s).to_degrees();
        if want <= 0.0 || want.is_nan() || (self.delay_s == 0.0 && want >= 90.0) {
            return None;
        }
        // The lag grows monotonically with ω: bisection on a bracket found by doubling.
        let (mut lo, mut hi) = (0.0, 1.0 / self.lag_s.max(self.delay_s).max(1e-12));
        while lag(hi) < want {
            lo = hi;
            hi *= 2.0;
            if !hi.is_finite() {
                return None;
            }
        }
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if lag(mid) < want {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        Some(self.at(0.5 * (lo + hi)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // SIMC worked example (S. Skogestad, J. Process Control 13 (2003) 291–309, Example E1,
    // values from memory): the plant reduced by the half rule to first order k = 1, τ1 = 2.5,
    // θ = 1.47 gives with τc = θ the PI Kc = 0.85, τI = 2.5; to second order τ1 = 2,
    // τ2 = 1.2, θ = 0.77 the PID Kc = 1.30, τI = 2, τD = 1.2 (series form).
    #[test]
    fn simc_first_and_second_order_match_the_worked_example() {
        let pi = simc_first_order(1.0, 2.5, 1.47, 1.47).expect("valid");
        assert!((pi.kc - 0.85).abs() < 0.005 && pi.ti_s == 2.5 && pi.td_s == 0.0, "{pi:?}");
        let pid = simc_second_order(1.0, 2.0, 1.2, 0.77, 0.77).expect("valid");
        assert!((pid.kc - 1.30).abs() < 0.005, "{pid:?}");
        assert!(pid.ti_s == 2.0 && pid.td_s == 1.2, "{pid:?}");
        // τI = 4(τc + θ) when that is shorter than τ1 (a lag-dominant plant).
        let slow = simc_first_order(1.0, 100.0, 1.0, 1.0).expect("valid");
        assert_eq!(slow.ti_s, 8.0);
        // Series → ideal: the same controller.
        let ideal = pid.to_ideal();
        assert!((ideal.kc - 1.30 * 1.6).abs() < 0.01 && ideal.ti_s == Some(3.2), "{ideal:?}");
        assert!((ideal.td_s - 0.75).abs() < 1e-12);
        assert!(simc_first_order(0.0, 1.0, 0.1, 0.1).is_none());
        assert!(simc_second_order(1.0, 1.0, -1.0, 0.1, 0.1).is_none());
    }

    // The design puts C(jω0)·G(jω0) on the unit circle at −180° + φm (its definition), and
    // at the ultimate point with φm = 25°, α = 4 it reproduces Ziegler–Nichols' integral and
    // derivative times Ti = Tu/2, Td = Tu/8 (J. G. Ziegler and N. B. Nichols, Trans. ASME 64,
    // 1942; the correspondence noted by Åström & Hägglund, Automatica 20(5), 1984).
    #[test]
    fn phase_margin_design_places_the_point() {
        let p = FrequencyPoint { omega_rad_s: 70.0, gain: 0.0165, phase_deg: -156.0 };
        let c = phase_margin_design(&p, 60.0, 4.0).expect("designable");
        let (w, ti) = (p.omega_rad_s, c.ti_s.expect("PI"));
        let (re, im) = (c.kc, c.kc * (w * c.td_s - 1.0 / (w * ti)));
        let mag = re.hypot(im) * p.gain;
        let phase = im.atan2(re).to_degrees() + p.phase_deg;
        assert!((mag - 1.0).abs() < 1e-12, "{mag}");
        assert!((phase - (-120.0)).abs() < 1e-9, "{phase}");
        assert!((ti / c.td_s - 4.0).abs() < 1e-12);
        let tu = 0.05;
        let u = FrequencyPoint {
            omega_rad_s: std::f64::consts::TAU / tu,
            gain: 0.01,
            phase_deg: -180.0,
        };
        let zn = phase_margin_design(&u, 25.0, 4.0).expect("designable");
        // tan 25° = 0.4663 gives ω·Td = 0.7848 ≈ π/4 (Td = Tu/8 within 0.1 %).
        assert!((zn.td_s - tu / 8.0).abs() < 1e-3 * tu, "{zn:?}");
        assert!((zn.ti_s.expect("PI") - tu / 2.0).abs() < 1e-3 * tu, "{zn:?}");
        assert!(phase_margin_design(&u, 100.0, 4.0).is_none());
    }

    // The integrating process with lag k·e^(−θs)/(s(τs+1)) has phase −90° − atan(ωτ) − ωθ
    // and gain k/(ω√(1+(ωτ)²)) (its definition; common practice, no source): fitted through
    // one of its own points it is recovered exactly, and its point at a given phase has it.
    #[test]
    fn integrating_lag_through_a_point_and_along_it() {
        let truth = IntegratingLag { gain: 2.5, lag_s: 0.026, delay_s: 0.0015 };
        let p = truth.at(70.0);
        let m = IntegratingLag::through(&p, 0.0015).expect("fits");
        assert!((m.gain - 2.5).abs() < 1e-12 && (m.lag_s - 0.026).abs() < 1e-12, "{m:?}");
        let q = m.at_phase(-155.0).expect("reachable");
        assert!((q.phase_deg + 155.0).abs() < 1e-9, "{q:?}");
        assert!((truth.at(q.omega_rad_s).gain - q.gain).abs() < 1e-12);
        // Without delay the phase never passes −180°; a phase above −90° fits no lag.
        let no_delay = IntegratingLag { delay_s: 0.0, ..truth };
        assert!(no_delay.at_phase(-185.0).is_none());
        let lead = FrequencyPoint { omega_rad_s: 70.0, gain: 0.01, phase_deg: -80.0 };
        assert!(IntegratingLag::through(&lead, 0.0).is_none());
    }

    #[test]
    fn names_round_trip() {
        for r in Rule::ALL {
            assert_eq!(r.name().parse::<Rule>(), Ok(r));
        }
        assert!("zn".parse::<Rule>().is_err());
    }

    // Ideal → parallel: kp = Kc, ki = Kc/Ti, kd = Kc·Td (K. J. Åström and T. Hägglund, PID
    // Controllers: Theory, Design and Tuning, 2nd ed., ISA 1995, ch. 3, forms of the PID).
    #[test]
    fn ideal_to_parallel() {
        let g = IdealPid { kc: 4.0, ti_s: Some(2.0), td_s: 0.5 }.to_parallel();
        assert_eq!(g, ParallelGains { kp: 4.0, ki: 2.0, kd: 2.0 });
        let p = IdealPid { kc: 4.0, ti_s: None, td_s: 0.0 }.to_parallel();
        assert_eq!(p, ParallelGains { kp: 4.0, ki: 0.0, kd: 0.0 });
    }
}
