//! Relay-feedback analysis: from a recorded relay experiment (time, position, duty), the
//! steady oscillation and the point of the frequency response it measured.
//!
//! # What a relay experiment measures
//! Under relay feedback (duty `±d` switched on the sign of the position error, with a
//! hysteresis of ±ε) the loop settles into a limit cycle at a frequency ω0. By the describing
//! function of a relay with hysteresis, `N(a) = (4d/(πa))·(√(1 − (ε/a)²) − j·ε/a)`, the cycle
//! sits where `G(jω0) = −1/N(a) = −(π/(4d))·(√(a² − ε²) + j·ε)`: a point at phase
//! `−180° + arcsin(ε/a)`, *not* the −180° point. Only for ε → 0 is it the ultimate point
//! (`Ku ≈ 4d/(πa)`, `Tu = 2π/ω0`). Source: K. J. Åström and T. Hägglund, "Automatic tuning of
//! simple regulators with specifications on phase and amplitude margins", *Automatica* 20(5),
//! 1984, 645–651; the describing function of the hysteresis relay as in K. J. Åström and
//! R. M. Murray, *Feedback Systems*, 2nd ed., 2021, on relay feedback.
//!
//! Rather than trusting that formula (first harmonic only, and blind to friction), the point
//! is computed from the record itself: over whole accepted cycles, the first Fourier
//! coefficients `Y1` of the position and `U1` of the duty give `G(jω0) = Y1/U1` (the
//! definition of the frequency response for a periodic input and output; common practice,
//! no source). The duty is integrated as the zero-order hold it is; the position by the
//! trapezoid rule.
//!
//! # Friction
//! Sliding (Coulomb) friction costs a duty `u0` against the motion: the linear part of the
//! axis sees `u − u0·sign(v)`. When it differs by direction (`u0f` forwards, `u0r` in reverse:
//! a load under gravity), `u0f·[v > 0] − u0r·[v < 0]` is the mean `(u0f + u0r)/2` times
//! `sign(v)` plus a constant, and a constant has no first harmonic: correct for the mean. With `u0` known (from identification), the input's first
//! harmonic is corrected by `u0` times that of `sign(v)`, the velocity's sign taken from the
//! turning points of the position (each plateau of equal counts at a top or bottom split where
//! the drive and the friction put the turn, `turn_fraction` in [`analyze_relay`]). Without the correction the measured gain is too low by about `u0/d` and the
//! phase too high: on the demo X axis the describing-function "Ku" was 85, 106, 116 and 137
//! %/mm for d = 10, 20, 30, 40 %.
//!
//! # Accepting cycles (our definitions)
//! - The level is the midrange (2nd to 98th percentile) of the second half of the record; a cycle runs from one upward
//!   crossing of that level to the next, each crossing interpolated linearly between samples.
//!   A crossing only counts after the signal has been below the level by a quarter of the
//!   half-range, so noise and encoder counts around the level make no extra cycles.
//! - A cycle's amplitude is half its peak-to-peak; each peak is refined by a parabola through
//!   the largest (smallest) sample and its neighbours.
//! - The first cycle (the start-up transient) is never used. A later cycle is accepted when
//!   its period is within `tolerance + 2h/P` of the median period (h the sample period: a
//!   sampled relay switches up to a tick late at each end of a cycle) and its amplitude
//!   within `tolerance + q/a` of the median amplitude (q one encoder count: each peak is read
//!   to a count). Amplitude, period and the Fourier point are taken over the accepted cycles.
//!
//! # Ultimate gain and period
//! [`RelayResult::ultimate`] is given only when the measured point lies within
//! [`ULTIMATE_PHASE_TOLERANCE_DEG`] of −180° (`Ku = 1/|G|`, `Tu = 2π/ω0`); otherwise the rules
//! stated for the ultimate point (Ziegler–Nichols, Tyreus–Luyben) do not apply, and the gains
//! come from a design for the measured point ([`super::rules::phase_margin_design`]).
//!
//! Hand-written rather than taken from a crate: crossing and peak detection and a Fourier
//! coefficient over a window whose definitions must be stated exactly for the tests and docs.

use std::f64::consts::{PI, TAU};

use serde::Serialize;

/// A point within this many degrees of −180° counts as the ultimate point.
pub const ULTIMATE_PHASE_TOLERANCE_DEG: f64 = 5.0;

/// Choices for [`analyze_relay`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RelayOptions {
    /// Relay amplitude d: half the difference between the two relay outputs, in the output's
    /// unit (duty %, for an axis).
    pub amplitude: f64,
    /// Hysteresis ε of the switching, in the process output's unit (0 for an ideal relay).
    pub hysteresis: f64,
    /// Relative spread of period and amplitude tolerated between accepted cycles, at least
    /// (module docs: widened by the tick and the encoder count).
    pub tolerance: f64,
    /// Fewest accepted cycles required.
    pub min_cycles: usize,
    /// One encoder count in the output's unit; estimated from the record when `None`.
    pub resolution: Option<f64>,
    /// Sliding-friction offset u0 (%) to correct the duty for; 0 for none.
    pub friction_pct: f64,
}

impl RelayOptions {
    /// An ideal relay of amplitude `d`, 2 % tolerance, at least 3 accepted cycles, no
    /// friction correction.
    pub fn ideal(d: f64) -> Self {
        Self {
            amplitude: d,
            hysteresis: 0.0,
            tolerance: 0.02,
            min_cycles: 3,
            resolution: None,
            friction_pct: 0.0,
        }
    }
}

/// One point of a frequency response.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct FrequencyPoint {
    /// Angular frequency ω, rad/s.
    pub omega_rad_s: f64,
    /// |G(jω)|, output unit per input unit (unit per % for an axis).
    pub gain: f64,
    /// arg G(jω), degrees, in (−360°, 0°].
    pub phase_deg: f64,
}

/// Ultimate gain and period, when the measured point is the ultimate point.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Ultimate {
    /// Ku = 1/|G(jω0)|, input unit per output unit (%/unit).
    pub ku: f64,
    /// Tu = 2π/ω0, s.
    pub tu_s: f64,
}

/// The steady oscillation and what it measured.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RelayResult {
    /// Oscillation amplitude a (half peak-to-peak) of the process output, mean over the
    /// accepted cycles.
    pub amplitude: f64,
    /// Oscillation period, s, mean over the accepted cycles.
    pub period_s: f64,
    /// Midpoint of the oscillation.
    pub center: f64,
    /// Cycles accepted.
    pub cycles: usize,
    /// Cycles found after the first (accepted or not).
    pub cycles_found: usize,
    /// Largest relative deviation of an accepted cycle's period from their mean.
    pub period_spread: f64,
    /// Largest relative deviation of an accepted cycle's amplitude from their mean.
    pub amplitude_spread: f64,
    /// The frequency-response point measured (Fourier, friction-corrected; module docs).
    pub point: FrequencyPoint,
    /// The same without the friction correction.
    pub point_uncorrected: FrequencyPoint,
    /// Friction offset corrected for, %.
    pub friction_pct: f64,
    /// The describing function's phase for this relay, −180° + arcsin(ε/a), degrees.
    pub describing_function_phase_deg: f64,
    /// The describing function's gain estimate 4d/(π√(a² − ε²)), for comparison.
    pub describing_function_gain: f64,
    /// Ku and Tu, when the point is within [`ULTIMATE_PHASE_TOLERANCE_DEG`] of −180°.
    pub ultimate: Option<Ultimate>,
    /// The record's sample period (median step), s: the tick, for an axis.
    pub sample_period_s: f64,
}

/// Why a relay record could not be analysed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RelayError {
    #[error("time, output and duty have different lengths ({t}, {y} and {u} samples)")]
    LengthMismatch { t: usize, y: usize, u: usize },
    #[error("sample {index} is not a finite number")]
    NotFinite { index: usize },
    #[error("sample times must increase (sample {index} does not)")]
    TimeNotIncreasing { index: usize },
    #[error(
        "the relay amplitude must be > 0, the hysteresis and friction ≥ 0 (found d = {d}, \
         ε = {eps}, u0 = {u0})"
    )]
    BadRelay { d: f64, eps: f64, u0: f64 },
    #[error(
        "the output does not oscillate: raise the duty (it must exceed the breakaway duty), \
         or lower the hysteresis"
    )]
    NoOscillation,
    #[error(
        "no steady oscillation: {found} of {total} cycle(s) agree, {needed} needed (period \
         spread {period_spread_pct:.1} %, amplitude {amplitude_counts:.1} counts): record \
         longer, raise the duty so the amplitude spans more counts, or raise the hysteresis"
    )]
    NotSteady {
        found: usize,
        total: usize,
        needed: usize,
        period_spread_pct: f64,
        amplitude_counts: f64,
    },
    #[error(
        "the amplitude {a} is not larger than the hysteresis {eps}: raise the duty or lower \
         the hysteresis"
    )]
    AmplitudeWithinHysteresis { a: f64, eps: f64 },
    #[error("the friction offset {u0} % cancels the duty's first harmonic: lower it")]
    FrictionTooLarge { u0: f64 },
}

/// One cycle between upward crossings.
#[derive(Debug, Clone, Copy)]
struct Cycle {
    /// Sample indices just after the two crossings.
    k0: usize,
    k1: usize,
    period: f64,
    amplitude: f64,
    center: f64,
    /// First and last sample time of the plateau of equal samples at the bottom and at the
    /// top.
    bottom_plateau: (f64, f64),
    top_plateau: (f64, f64),
}

/// Analyses a relay experiment: process output `y` and relay output (duty) `u`, sampled at
/// times `t` (module docs). `u[k]` is the duty held from `t[k]` to `t[k+1]`.
///
/// # Errors
/// Bad numbers or relay settings, no oscillation, fewer agreeing cycles than asked for, or an
/// amplitude inside the hysteresis ([`RelayError`]), each saying what to change.
pub fn analyze_relay(
    t: &[f64],
    y: &[f64],
    u: &[f64],
    opts: &RelayOptions,
) -> Result<RelayResult, RelayError> {
    if t.len() != y.len() || t.len() != u.len() {
        return Err(RelayError::LengthMismatch { t: t.len(), y: y.len(), u: u.len() });
    }
    let (d, eps, u0) = (opts.amplitude, opts.hysteresis, opts.friction_pct);
    if !(d.is_finite() && d > 0.0 && eps.is_finite() && eps >= 0.0 && u0.is_finite() && u0 >= 0.0) {
        return Err(RelayError::BadRelay { d, eps, u0 });
    }
    if let Some(index) =
        (0..t.len()).position(|k| !(t[k].is_finite() && y[k].is_finite() && u[k].is_finite()))
    {
        return Err(RelayError::NotFinite { index });
    }
    if let Some(w) = t.windows(2).position(|w| w[1] <= w[0]) {
        return Err(RelayError::TimeNotIncreasing { index: w + 1 });
    }
    if t.len() < 4 {
        return Err(RelayError::NoOscillation);
    }
    let h = median_step(t);
    let q = opts.resolution.filter(|q| q.is_finite() && *q > 0.0).unwrap_or_else(|| {
        y.windows(2).map(|w| (w[1] - w[0]).abs()).filter(|d| *d > 0.0).fold(f64::INFINITY, f64::min)
    });
    let q = if q.is_finite() { q } else { 0.0 };
    let cycles = find_cycles(t, y)?;
    // Never the first cycle: it holds the start-up transient.
    let usable = &cycles[1.min(cycles.len())..];
    let needed = opts.min_cycles.max(1);
    if usable.is_empty() {
        return Err(RelayError::NotSteady {
            found: 0,
            total: 0,
            needed,
            period_spread_pct: 0.0,
            amplitude_counts: 0.0,
        });
    }
    let p_med = median(usable.iter().map(|c| c.period).collect());
    let a_med = median(usable.iter().map(|c| c.amplitude).collect());
    let p_tol = opts.tolerance + 2.0 * h / p_med;
    let a_tol = opts.tolerance + if a_med > 0.0 { q / a_med } else { 0.0 };
    let accepted: Vec<Cycle> = usable
        .iter()
        .filter(|c| {
            (c.period - p_med).abs() <= p_tol * p_med
                && (c.amplitude - a_med).abs() <= a_tol * a_med
        })
        .copied()
        .collect();
    let all_spread = usable.iter().map(|c| ((c.period - p_med) / p_med).abs()).fold(0.0, f64::max);
    if accepted.len() < needed {
        return Err(RelayError::NotSteady {
            found: accepted.len(),
            total: usable.len(),
            needed,
            period_spread_pct: 100.0 * all_spread,
            amplitude_counts: if q > 0.0 { a_med / q } else { 0.0 },
        });
    }
    let n = accepted.len() as f64;
    let a = accepted.iter().map(|c| c.amplitude).sum::<f64>() / n;
    let period = accepted.iter().map(|c| c.period).sum::<f64>() / n;
    let center = accepted.iter().map(|c| c.center).sum::<f64>() / n;
    let spread = |f: fn(&Cycle) -> f64, mean: f64| {
        accepted.iter().map(|c| ((f(c) - mean) / mean).abs()).fold(0.0, f64::max)
    };
    if a <= eps {
        return Err(RelayError::AmplitudeWithinHysteresis { a, eps });
    }

    // Where in a plateau of equal counts the axis turned. The relay has switched before the
    // turn (at the hysteresis), so near it the drive is a constant −d against the motion: the
    // carriage comes to rest under d + u0 (duty and friction both against it) and moves off
    // under d − u0 (friction now against the duty). The speed is near zero there, so the
    // back-EMF and viscous drag are negligible and both accelerations are constant:
    // y = peak − a·(t − t_turn)²/2 on each side, so the times from the level of the plateau to
    // the turn stand as 1/√(d + u0) to 1/√(d − u0), and the turn lies at the fraction
    // 1/(1 + √((d + u0)/(d − u0))) of the plateau (½ without friction). Our derivation; taking
    // the middle instead read the phase of demo X 2–4° low at d = 10 %.
    let turn_fraction =
        if u0 > 0.0 && d > u0 { 1.0 / (1.0 + ((d + u0) / (d - u0)).sqrt()) } else { 0.5 };
    let turn = |(first, last): (f64, f64)| first + turn_fraction * (last - first);

    // Fourier coefficients over each accepted cycle's whole sample window, averaged as
    // complex numbers (each window is one period to within a sample).
    let (mut y1, mut u1, mut s1) = (Cx::ZERO, Cx::ZERO, Cx::ZERO);
    let mut omega_sum = 0.0;
    for c in &accepted {
        let (ta, tb) = (t[c.k0], t[c.k1]);
        let w = TAU / (tb - ta);
        omega_sum += w;
        y1 = y1 + fourier_linear(t, y, c.k0, c.k1, w);
        u1 = u1 + fourier_hold(t, u, c.k0, c.k1, w);
        // sign(v): +1 from the bottom to the top, −1 elsewhere in the window.
        let (t_bottom, t_top) = (turn(c.bottom_plateau), turn(c.top_plateau));
        let (lo, hi) = if t_bottom <= t_top { (t_bottom, t_top) } else { (t_top, t_bottom) };
        let rising_inside = t_bottom <= t_top;
        let inner = segment(lo, hi, w);
        let outer = segment(ta, lo, w) + segment(hi, tb, w);
        let s = if rising_inside { inner - outer } else { outer - inner };
        s1 = s1 + s.scale(2.0 / (tb - ta));
    }
    let omega = omega_sum / n;
    let raw = y1.div(u1);
    let ue = u1 - s1.scale(u0);
    if ue.abs() < 1e-9 * u1.abs() {
        return Err(RelayError::FrictionTooLarge { u0 });
    }
    let g = y1.div(ue);
    let point = FrequencyPoint { omega_rad_s: omega, gain: g.abs(), phase_deg: phase_deg(g) };
    let point_uncorrected =
        FrequencyPoint { omega_rad_s: omega, gain: raw.abs(), phase_deg: phase_deg(raw) };
    let ultimate = ((point.phase_deg + 180.0).abs() <= ULTIMATE_PHASE_TOLERANCE_DEG)
        .then(|| Ultimate { ku: 1.0 / point.gain, tu_s: TAU / omega });
    Ok(RelayResult {
        amplitude: a,
        period_s: period,
        center,
        cycles: accepted.len(),
        cycles_found: usable.len(),
        period_spread: spread(|c| c.period, period),
        amplitude_spread: spread(|c| c.amplitude, a),
        point,
        point_uncorrected,
        friction_pct: u0,
        describing_function_phase_deg: -180.0 + (eps / a).asin().to_degrees(),
        describing_function_gain: describing_function_gain(d, a, eps),
        ultimate,
        sample_period_s: h,
    })
}

/// Ku ≈ 4d/(π√(a² − ε²)) (Åström & Hägglund 1984); `ε = 0` for an ideal relay.
pub fn describing_function_gain(d: f64, a: f64, eps: f64) -> f64 {
    4.0 * d / (PI * (a * a - eps * eps).sqrt())
}

/// Upward crossings of the level and the cycles between them (module docs).
fn find_cycles(t: &[f64], y: &[f64]) -> Result<Vec<Cycle>, RelayError> {
    // 2nd and 98th percentiles rather than the extremes: one excursion (a late frame on a
    // loaded host) must not move the level or widen the margin for the whole record.
    let mut half = y[y.len() / 2..].to_vec();
    half.sort_by(f64::total_cmp);
    let at = |f: f64| half[((half.len() - 1) as f64 * f).round() as usize];
    let (lo, hi) = (at(0.02), at(0.98));
    let level = 0.5 * (lo + hi);
    let margin = 0.25 * (hi - lo);
    if !(margin.is_finite() && margin > 0.0) {
        return Err(RelayError::NoOscillation);
    }
    // Upward crossings of `level`, armed only after the output was below level − margin.
    let mut crossings = Vec::new();
    let mut armed = false;
    for k in 0..y.len() {
        if y[k] < level - margin {
            armed = true;
        } else if armed && y[k] > level + margin {
            armed = false;
            // The last sample at or below the level before k; the crossing lies after it.
            if let Some(j) = (0..k).rev().find(|&j| y[j] <= level) {
                let f = (level - y[j]) / (y[j + 1] - y[j]);
                crossings.push((j, t[j] + f * (t[j + 1] - t[j])));
            }
        }
    }
    let cycles: Vec<Cycle> = crossings
        .windows(2)
        .map(|w| {
            let (j0, c0) = w[0];
            let (j1, c1) = w[1];
            let (top, bottom) = peaks(t, y, j0, j1 + 1);
            Cycle {
                k0: j0 + 1,
                k1: j1 + 1,
                period: c1 - c0,
                amplitude: 0.5 * (top.0 - bottom.0),
                center: 0.5 * (top.0 + bottom.0),
                bottom_plateau: bottom.1,
                top_plateau: top.1,
            }
        })
        .collect();
    if cycles.is_empty() {
        return Err(RelayError::NoOscillation);
    }
    Ok(cycles)
}

fn median_step(t: &[f64]) -> f64 {
    median(t.windows(2).map(|w| w[1] - w[0]).collect())
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Largest and smallest value of `y` on samples `from..to` as (value, plateau): the value
/// refined by a parabola through the extreme sample and its neighbours, the plateau the first
/// and last time of the run of equal samples at the extreme.
#[allow(clippy::type_complexity)]
fn peaks(t: &[f64], y: &[f64], from: usize, to: usize) -> ((f64, (f64, f64)), (f64, (f64, f64))) {
    let to = to.min(y.len());
    let (mut imax, mut imin) = (from, from);
    for k in from..to {
        if y[k] > y[imax] {
            imax = k;
        }
        if y[k] < y[imin] {
            imin = k;
        }
    }
    let plateau = |k: usize| {
        let mut end = k;
        while end + 1 < to && y[end + 1] == y[k] {
            end += 1;
        }
        (t[k], t[end])
    };
    ((parabola_peak(t, y, imax), plateau(imax)), (parabola_peak(t, y, imin), plateau(imin)))
}

/// Vertex value of the parabola through samples k−1, k, k+1 (`y[k]` at the ends or when the
/// three are collinear or the vertex falls outside them).
fn parabola_peak(t: &[f64], y: &[f64], k: usize) -> f64 {
    if k == 0 || k + 1 >= y.len() {
        return y[k];
    }
    let (t0, t1, t2) = (t[k - 1] - t[k], 0.0, t[k + 1] - t[k]);
    let (y0, y1, y2) = (y[k - 1], y[k], y[k + 1]);
    // Lagrange form of the quadratic through three points, coefficients of (τ², τ, 1).
    let d0 = (t0 - t1) * (t0 - t2);
    let d1 = (t1 - t0) * (t1 - t2);
    let d2 = (t2 - t0) * (t2 - t1);
    let a = y0 / d0 + y1 / d1 + y2 / d2;
    let b = -(y0 * (t1 + t2) / d0 + y1 * (t0 + t2) / d1 + y2 * (t0 + t1) / d2);
    if a == 0.0 {
        return y1;
    }
    let tv = -b / (2.0 * a);
    if !(tv >= t0 && tv <= t2) {
        return y1;
    }
    y1 + b * tv + a * tv * tv
}

/// A complex number: the few operations the Fourier coefficients need.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Cx {
    re: f64,
    im: f64,
}

impl Cx {
    const ZERO: Cx = Cx { re: 0.0, im: 0.0 };

    fn expj(phi: f64) -> Cx {
        Cx { re: phi.cos(), im: phi.sin() }
    }

    fn scale(self, s: f64) -> Cx {
        Cx { re: self.re * s, im: self.im * s }
    }

    fn abs(self) -> f64 {
        self.re.hypot(self.im)
    }

    fn div(self, b: Cx) -> Cx {
        let d = b.re * b.re + b.im * b.im;
        Cx { re: (self.re * b.re + self.im * b.im) / d, im: (self.im * b.re - self.re * b.im) / d }
    }
}

impl std::ops::Add for Cx {
    type Output = Cx;
    fn add(self, b: Cx) -> Cx {
        Cx { re: self.re + b.re, im: self.im + b.im }
    }
}

impl std::ops::Sub for Cx {
    type Output = Cx;
    fn sub(self, b: Cx) -> Cx {
        Cx { re: self.re - b.re, im: self.im - b.im }
    }
}

/// arg in degrees, in (−360°, 0°]: a plant's lag reads as a negative phase.
fn phase_deg(g: Cx) -> f64 {
    let p = g.im.atan2(g.re).to_degrees();
    if p > 0.0 {
        p - 360.0
    } else {
        p
    }
}

/// ∫ from a to b of e^(−jωt) dt = (e^(−jωa) − e^(−jωb))/(jω).
fn segment(a: f64, b: f64, w: f64) -> Cx {
    if b <= a {
        return Cx::ZERO;
    }
    let diff = Cx::expj(-w * a) - Cx::expj(-w * b);
    // (x + jy)/(jω) = y/ω − j·x/ω
    Cx { re: diff.im / w, im: -diff.re / w }
}

/// First Fourier coefficient (2/T)∫ v e^(−jωt) dt over samples k0..=k1 of a held signal
/// (`v[k]` from `t[k]` to `t[k+1]`).
fn fourier_hold(t: &[f64], v: &[f64], k0: usize, k1: usize, w: f64) -> Cx {
    let mut acc = Cx::ZERO;
    for k in k0..k1 {
        acc = acc + segment(t[k], t[k + 1], w).scale(v[k]);
    }
    acc.scale(2.0 / (t[k1] - t[k0]))
}

/// First Fourier coefficient over samples k0..=k1 of a sampled signal, trapezoid rule.
fn fourier_linear(t: &[f64], v: &[f64], k0: usize, k1: usize, w: f64) -> Cx {
    let mut acc = Cx::ZERO;
    for k in k0..k1 {
        let f0 = Cx::expj(-w * t[k]).scale(v[k]);
        let f1 = Cx::expj(-w * t[k + 1]).scale(v[k + 1]);
        acc = acc + (f0 + f1).scale(0.5 * (t[k + 1] - t[k]));
    }
    acc.scale(2.0 / (t[k1] - t[k0]))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn square(t: &[f64], p: f64, d: f64, lag: f64) -> Vec<f64> {
        t.iter().map(|&t| if ((t - lag) / p).rem_euclid(1.0) < 0.5 { d } else { -d }).collect()
    }

    // A sinusoid of amplitude a and period P driven by a square wave of amplitude d with a
    // known lag: amplitude, period and the Fourier point are exact (the first harmonic of a
    // square wave is 4d/π; common practice, no source).
    #[test]
    fn sinusoid_under_a_square_wave_is_measured_exactly() {
        let (a, p, d) = (0.4, 2.5, 10.0);
        let h = 0.001;
        let t: Vec<f64> = (0..20_000).map(|k| k as f64 * h).collect();
        // y lags the square wave's fundamental by 150°: phase −150°.
        let lag = 150.0 / 360.0 * p;
        let y: Vec<f64> = t.iter().map(|&t| 3.0 + a * (TAU * (t - lag) / p).sin()).collect();
        let u = square(&t, p, d, 0.0);
        let r = analyze_relay(&t, &y, &u, &RelayOptions::ideal(d)).expect("oscillates");
        assert!((r.period_s - p).abs() < 1e-6, "{r:?}");
        assert!((r.amplitude - a).abs() < 1e-5, "{r:?}");
        assert!((r.center - 3.0).abs() < 1e-5, "{r:?}");
        assert!((r.point.omega_rad_s - TAU / p).abs() < 1e-3 * TAU / p, "{r:?}");
        assert!((r.point.gain - a / (4.0 * d / PI)).abs() < 2e-3 * r.point.gain, "{r:?}");
        assert!((r.point.phase_deg + 150.0).abs() < 0.5, "{r:?}");
        assert!(r.ultimate.is_none());
        assert!((r.describing_function_gain - 40.0 / (PI * a)).abs() < 1e-3);
    }

    #[test]
    fn flat_growing_and_bad_records_are_errors() {
        let t: Vec<f64> = (0..1000).map(|k| k as f64 * 0.01).collect();
        let flat = vec![1.0; 1000];
        let u = square(&t, 1.0, 1.0, 0.0);
        assert_eq!(
            analyze_relay(&t, &flat, &u, &RelayOptions::ideal(1.0)),
            Err(RelayError::NoOscillation)
        );
        // Growing by 10 % a cycle: never steady.
        let grow: Vec<f64> = t.iter().map(|&t| (0.3 * t).exp() * (TAU * t).sin()).collect();
        let err = analyze_relay(&t, &grow, &u, &RelayOptions::ideal(1.0)).expect_err("grows");
        assert!(matches!(err, RelayError::NotSteady { .. }), "{err:?}");
        assert!(err.to_string().contains("raise the duty"), "{err}");
        assert!(matches!(
            analyze_relay(&t, &flat[..3], &u, &RelayOptions::ideal(1.0)),
            Err(RelayError::LengthMismatch { .. })
        ));
        assert!(matches!(
            analyze_relay(&t, &flat, &u, &RelayOptions::ideal(0.0)),
            Err(RelayError::BadRelay { .. })
        ));
        let sine: Vec<f64> = t.iter().map(|&t| 0.05 * (TAU * t).sin()).collect();
        let opts = RelayOptions { hysteresis: 0.1, ..RelayOptions::ideal(1.0) };
        assert!(matches!(
            analyze_relay(&t, &sine, &u, &opts),
            Err(RelayError::AmplitudeWithinHysteresis { .. })
        ));
    }

    // One tick of jitter on a cycle and one count on a peak no longer break the run: the
    // tolerance is widened by the tick and the count (module docs).
    #[test]
    fn quantised_jittery_cycles_are_accepted() {
        let h = 0.001;
        let q = 1.0 / 24.0;
        let t: Vec<f64> = (0..3000).map(|k| k as f64 * h).collect();
        // Period 0.0655 s (not a whole number of ticks), amplitude 5 counts, quantised.
        let y: Vec<f64> =
            t.iter().map(|&t| ((5.0 * q * (TAU * t / 0.0655).sin()) / q).floor() * q).collect();
        let u = square(&t, 0.0655, 20.0, 0.01);
        let opts = RelayOptions { resolution: Some(q), ..RelayOptions::ideal(20.0) };
        let r = analyze_relay(&t, &y, &u, &opts).expect("steady");
        assert!(r.cycles as f64 >= 0.9 * r.cycles_found as f64, "{r:?}");
        assert!((r.period_s - 0.0655).abs() < 1e-3, "{r:?}");
    }
}
