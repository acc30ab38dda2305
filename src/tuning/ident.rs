//! Plant identification: fits a first-order velocity model to an open-loop duty experiment.
//!
//! # Model
//! While the duty `u` (%) has one sign σ, the carriage velocity `v` (unit/s) follows
//!
//! `τ·v̇ = K·(u(t − θ) − u0·σ) − v`,  `ẋ = v`,
//!
//! with `K` the velocity gain (unit/s per %), `τ` the time constant (s), `u0` the offset (%)
//! that sliding friction costs, and `θ` a small input delay (s: link, electrical lag). The
//! offset is fitted for each direction (`u0f` while σ = +1, `u0r` while σ = −1) when the
//! record moves both ways: a load under gravity adds its weight to the friction one way and
//! takes it away the other (`u0 = c ± w`), and one offset for both would bias K. With
//! the armature inductance small this is the DC-motor speed model of the University of
//! Michigan *Control Tutorials for MATLAB and Simulink*, "DC Motor Speed: System Modeling"
//! (`τ = R·J/(R·b + Kt·Ke)`), with Coulomb friction as a constant load torque expressed in duty.
//! Phases with zero duty (coasting, braking, standing still) are not fitted: there friction
//! acts against the motion whatever the duty, and static friction holds the carriage, which
//! a linear model cannot describe.
//!
//! # Why the position is fitted, not the velocity
//! With a 4× encoder at 1 kHz one count of the demo X axis (1/24 mm) is 42 mm/s of velocity
//! from one difference, a third of the speed being measured. A regression on the
//! discrete-time velocity equation `v[k+1] = a·v[k] + b·u[k] + c` would put that noise into
//! the regressor `v[k]`, which biases `a` (errors in variables) and hence `τ` by tens of
//! percent. Here the model is simulated from the duty record alone and compared with the
//! measured *position* (output-error fit): quantisation is then only output noise of 1/√12
//! count RMS, which does not bias the estimate.
//!
//! # Fit
//! Each run of same-sign duty is a segment. A segment that starts from rest (no count change
//! in the [`REST_WINDOW_S`] before the duty came on) starts at the sample where the duty came
//! on, with velocity 0 and its own start position; the onset shows the delay θ. Any other
//! segment starts [`IdentOptions::max_delay_s`] after the duty changed, once the motion runs
//! the duty's way, with its own start position and velocity. Given (τ, θ), the position is
//! linear in `K`, `K·u0f`, `K·u0r` and the start values, so these come from linear least
//! squares (the start values eliminated segment by segment, a 3×3 system left, 2×2 when the
//! record moves one way only, 1×1 with a given offset); τ is then found by a
//! golden-section search on ln τ and θ by a grid of ¼ sample period refined the same way.
//! The input is the exact zero-order hold of the duty record delayed by θ: duty row `k` acts
//! on `[t_k + θ, t_{k+1} + θ)`, as [`Sample::duty`] is "commanded for the next interval".
//!
//! # Fit quality
//! - `position_rms`: RMS of the position residual over the fitted samples, units.
//! - `r_squared`: 1 − SSE/SST of the *velocity*, both measured and model velocity taken as
//!   position differences over [`VELOCITY_WINDOW_S`] within the fitted segments. Position R²
//!   is always close to 1 (any drift explains most of a position record); velocity R² says
//!   how much of the speed variation the model explains.
//! - `velocity_rms`: RMS of that velocity residual, unit/s.
//!
//! Hand-written rather than taken from a crate: the model has a delay, a sign-dependent offset
//! and a start state per segment; no well-kept Rust crate fits such a grey-box model, and the
//! numerical work is a 2×2 least-squares solve inside a two-parameter search.

use serde::Serialize;

use crate::engine::history::Sample;

/// Window before a duty step in which the position must not change for the segment to count
/// as starting from rest, s.
pub const REST_WINDOW_S: f64 = 0.01;

/// Window of the position differences used for the velocity R², s (at least one sample).
pub const VELOCITY_WINDOW_S: f64 = 0.01;

/// Fewest samples a segment needs to be fitted.
pub const MIN_SEGMENT_SAMPLES: usize = 8;

/// One row of an open-loop experiment.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct DutySample {
    /// Board time, s.
    pub t: f64,
    /// Duty commanded for the interval that starts here, %.
    pub duty: f64,
    /// Measured position, units.
    pub position: f64,
}

impl From<&Sample> for DutySample {
    fn from(s: &Sample) -> Self {
        Self { t: s.t, duty: s.duty, position: s.position }
    }
}

/// Choices for [`identify`].
#[derive(Debug, Clone, PartialEq)]
pub struct IdentOptions {
    /// Position resolution (one encoder count in units); estimated from the record (smallest
    /// non-zero position change) when `None`.
    pub resolution: Option<f64>,
    /// Largest input delay searched, s; 5 sample periods when `None`.
    pub max_delay_s: Option<f64>,
    /// Use this offset u0 (%) instead of fitting it (e.g. when every step had the same size).
    pub offset_pct: Option<f64>,
    /// Fits with a lower velocity R² are refused.
    pub min_r_squared: f64,
}

impl Default for IdentOptions {
    fn default() -> Self {
        Self { resolution: None, max_delay_s: None, offset_pct: None, min_r_squared: 0.9 }
    }
}

/// The identified first-order velocity model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct VelocityModel {
    /// Velocity gain K, unit/s per % of duty.
    pub gain: f64,
    /// Time constant τ, s.
    pub time_constant_s: f64,
    /// Offset u0: the duty sliding friction costs, %; forwards only when
    /// `offset_reverse_pct` is given.
    pub offset_pct: f64,
    /// The offset in reverse, % (positive), when it was fitted apart from the forward one
    /// (module docs); `offset_pct` holds for both directions when `None`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub offset_reverse_pct: Option<f64>,
    /// Input delay θ, s; `None` when no step started from rest (the delay is then not
    /// observable and 0 was used).
    pub delay_s: Option<f64>,
}

impl VelocityModel {
    /// The offset for the direction of `duty`'s sign, %.
    pub fn offset_for(&self, duty: f64) -> f64 {
        if duty < 0.0 {
            self.offset_reverse_pct.unwrap_or(self.offset_pct)
        } else {
            self.offset_pct
        }
    }

    /// Steady velocity at a constant duty, unit/s (0 inside the offset).
    pub fn steady_velocity(&self, duty: f64) -> f64 {
        let net = duty.abs() - self.offset_for(duty);
        if net <= 0.0 {
            0.0
        } else {
            (self.gain * net).copysign(duty)
        }
    }
}

/// Result of [`identify`]: the model and how well it fits.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Identification {
    pub model: VelocityModel,
    /// Velocity R² over the fitted samples (module docs).
    pub r_squared: f64,
    /// RMS velocity residual, unit/s.
    pub velocity_rms: f64,
    /// RMS position residual, units.
    pub position_rms: f64,
    /// Segments (same-sign duty runs) fitted.
    pub segments: usize,
    /// Segments that started from rest.
    pub segments_from_rest: usize,
    /// Samples fitted.
    pub samples_used: usize,
    /// Position resolution used, units.
    pub resolution: f64,
    /// Median sample period, s.
    pub sample_period_s: f64,
}

/// Why a record could not be identified.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum IdentError {
    #[error("the record has {0} samples; identification needs at least 20")]
    TooShort(usize),
    #[error("sample {index} holds a number that is not finite")]
    NotFinite { index: usize },
    #[error("sample times must increase (sample {index} does not)")]
    TimeNotIncreasing { index: usize },
    #[error("the duty is zero throughout: nothing was excited")]
    NoExcitation,
    #[error(
        "the axis hardly moved ({span} units, {counts:.0} counts): check power, the driver \
         enable and the breakaway duty"
    )]
    NoMotion { span: f64, counts: f64 },
    #[error(
        "no duty step can be fitted: each needs {MIN_SEGMENT_SAMPLES} or more samples of motion \
         in the duty's direction"
    )]
    NoUsableStep,
    #[error("gain and offset cannot be told apart: use steps of two or more duty sizes")]
    GainOffsetAmbiguous,
    #[error(
        "the position moved against the duty (gain {gain:.4}): the motor or the encoder is \
         wired the other way round"
    )]
    WrongDirection { gain: f64 },
    #[error(
        "the position moved against the duty: the motor or the encoder is wired the other way \
         round"
    )]
    MovedAgainstDuty,
    #[error("the time constant is not identifiable: the fit ran to {tau_s:.4} s, {which}")]
    TimeConstantAtBound { tau_s: f64, which: &'static str },
    #[error("the model does not fit the record (velocity R² {r_squared:.3} < {min:.3})")]
    PoorFit { r_squared: f64, min: f64 },
}

/// A run of same-sign duty chosen for fitting.
#[derive(Debug, Clone, Copy)]
struct Segment {
    /// First and last sample fitted (inclusive).
    k0: usize,
    k1: usize,
    /// Sign of the duty in this run.
    sign: f64,
    /// Started from rest: velocity 0 at `k0`, and the duty before `k0` is part of the input.
    from_rest: bool,
}

/// The parameters that are linear given (τ, θ), and the residual.
#[derive(Debug, Clone)]
struct LinearFit {
    sse: f64,
    gain: f64,
    /// K·u0f and K·u0r (equal unless fitted apart).
    offset_gain: [f64; 2],
    /// Per segment: start position and start velocity.
    starts: Vec<(f64, f64)>,
}

/// The checks every record must pass before any fit: long enough, finite, time increasing.
fn check_record(samples: &[DutySample]) -> Result<(), IdentError> {
    if samples.len() < 20 {
        return Err(IdentError::TooShort(samples.len()));
    }
    if let Some(index) = samples
        .iter()
        .position(|s| !(s.t.is_finite() && s.duty.is_finite() && s.position.is_finite()))
    {
        return Err(IdentError::NotFinite { index });
    }
    if let Some(w) = samples.windows(2).position(|w| w[1].t <= w[0].t) {
        return Err(IdentError::TimeNotIncreasing { index: w + 1 });
    }
    Ok(())
}

/// Identifies the velocity model from an open-loop duty experiment (module docs).
///
/// The experiment that fits best: from rest, duty pulses of two or more sizes in each
/// direction, each long enough for the speed to settle (≥ 4 τ), each followed by zero duty
/// until the axis stands still.
///
/// # Errors
/// Bad numbers, too short a record, no duty, no motion, nothing fittable, a gain that is
/// negative (wiring) or a fit that explains too little ([`IdentError`]).
pub fn identify(samples: &[DutySample], opts: &IdentOptions) -> Result<Identification, IdentError> {
    check_record(samples)?;
    if samples.iter().all(|s| s.duty == 0.0) {
        return Err(IdentError::NoExcitation);
    }
    let h = median_period(samples);
    let resolution = opts
        .resolution
        .filter(|r| r.is_finite() && *r > 0.0)
        .unwrap_or_else(|| estimate_resolution(samples));
    let (lo, hi) = samples.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), s| {
        (lo.min(s.position), hi.max(s.position))
    });
    let span = hi - lo;
    let counts = if resolution > 0.0 { span / resolution } else { 0.0 };
    if span == 0.0 || counts < 10.0 {
        return Err(IdentError::NoMotion { span, counts });
    }
    let max_delay = opts.max_delay_s.filter(|d| d.is_finite() && *d >= 0.0).unwrap_or(5.0 * h);
    let segments = find_segments(samples, resolution, max_delay, h);
    if segments.is_empty() {
        return Err(IdentError::NoUsableStep);
    }
    let from_rest = segments.iter().filter(|s| s.from_rest).count();
    let fixed_offset = opts.offset_pct.filter(|u| u.is_finite());

    // τ bounds: below a quarter sample period the lag is invisible; above twice the longest
    // segment the speed never approaches its final value and K, τ are not separable.
    let longest = segments.iter().map(|s| samples[s.k1].t - samples[s.k0].t).fold(0.0, f64::max);
    let tau_lo = 0.25 * h;
    let tau_hi = (2.0 * longest).max(2.0 * tau_lo);
    // An offset per direction when both directions were driven (module docs).
    let both_ways = segments.iter().any(|s| s.sign > 0.0) && segments.iter().any(|s| s.sign < 0.0);
    let globals = if fixed_offset.is_some() {
        1
    } else if both_ways {
        3
    } else {
        2
    };
    let search = Search { samples, segments: &segments, fixed_offset, globals };

    let delay_identified = from_rest > 0 && max_delay > 0.0;
    let (tau, theta, fit) = if delay_identified {
        // Grid over θ at quarter sample periods, then golden refinement around the best.
        let steps = ((max_delay / (0.25 * h)).round() as usize).max(1);
        let mut best: Option<(f64, f64, f64)> = None;
        for i in 0..=steps {
            let theta = max_delay * i as f64 / steps as f64;
            if let Some((tau, sse)) = search.best_tau(theta, tau_lo, tau_hi)? {
                if best.is_none_or(|b| sse < b.2) {
                    best = Some((theta, tau, sse));
                }
            }
        }
        let Some((theta0, tau0, _)) = best else { return Err(IdentError::NoUsableStep) };
        let cell = max_delay / steps as f64;
        let (a, b) = ((theta0 - cell).max(0.0), (theta0 + cell).min(max_delay));
        let (t_lo, t_hi) = ((tau0 / 1.5).max(tau_lo), (tau0 * 1.5).min(tau_hi));
        let mut inner_err = None;
        let theta = golden(a, b, 1e-3 * h, |theta| match search.best_tau_in(theta, t_lo, t_hi) {
            Ok(Some((_, sse))) => sse,
            Ok(None) => f64::INFINITY,
            Err(e) => {
                inner_err = Some(e);
                f64::INFINITY
            }
        });
        if let Some(e) = inner_err {
            return Err(e);
        }
        let (tau, _) = search.best_tau_in(theta, t_lo, t_hi)?.ok_or(IdentError::NoUsableStep)?;
        let fit = search.fit(tau, theta)?.ok_or(IdentError::NoUsableStep)?;
        (tau, theta, fit)
    } else {
        let (tau, _) = search.best_tau(0.0, tau_lo, tau_hi)?.ok_or(IdentError::NoUsableStep)?;
        let fit = search.fit(tau, 0.0)?.ok_or(IdentError::NoUsableStep)?;
        (tau, 0.0, fit)
    };

    // Quality first: on a record the model cannot describe, the sign of K or the place τ
    // ended up say nothing.
    let quality = search.quality(tau, theta, &fit, h);
    if !(quality.r_squared.is_finite() && quality.r_squared >= opts.min_r_squared) {
        return Err(IdentError::PoorFit { r_squared: quality.r_squared, min: opts.min_r_squared });
    }
    if fit.gain <= 0.0 {
        return Err(IdentError::WrongDirection { gain: fit.gain });
    }
    if tau <= tau_lo * 1.01 {
        return Err(IdentError::TimeConstantAtBound {
            tau_s: tau,
            which: "shorter than a quarter sample period",
        });
    }
    if tau >= tau_hi * 0.99 {
        return Err(IdentError::TimeConstantAtBound {
            tau_s: tau,
            which: "longer than the steps: make each step last at least four time constants",
        });
    }
    let (offset, reverse) = match fixed_offset {
        Some(u0) => (u0, None),
        None if globals == 3 => {
            (fit.offset_gain[0] / fit.gain, Some(fit.offset_gain[1] / fit.gain))
        }
        None => (fit.offset_gain[0] / fit.gain, None),
    };
    Ok(Identification {
        model: VelocityModel {
            gain: fit.gain,
            time_constant_s: tau,
            offset_pct: offset,
            offset_reverse_pct: reverse,
            delay_s: delay_identified.then_some(theta),
        },
        r_squared: quality.r_squared,
        velocity_rms: quality.velocity_rms,
        position_rms: quality.position_rms,
        segments: segments.len(),
        segments_from_rest: from_rest,
        samples_used: quality.samples,
        resolution,
        sample_period_s: h,
    })
}

/// Where a duty ramp first moved the axis.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Breakaway {
    /// Duty applied in the interval in which the first count change happened, % (signed).
    pub duty_pct: f64,
    /// Time of the first sample that shows the motion, s.
    pub t: f64,
}

/// Time within which the second count must follow the first for the motion to count as
/// breakaway (the velocity criterion of [`breakaway`]), s.
pub const BREAKAWAY_CONFIRM_S: f64 = 0.05;

/// Breakaway duty from a slow duty ramp in one direction that starts at rest: the duty
/// applied during the interval in which the position first changed by one count, provided
/// the motion goes on: a second count in the same direction within [`BREAKAWAY_CONFIRM_S`]
/// (a velocity of at least one count per that time) and no return to the start in between.
/// A count that flickers back (an encoder resting on an edge) or a creep slower than that is
/// not breakaway. An upper bound, too high by the ramp rate times the time the axis needs to
/// move one count after breaking away (a few ms on the demo axes): ramp slowly, e.g. 5 %/s.
///
/// This is the one breakaway analysis: `tune breakaway`, `tune identify`, the cockpit and
/// docs/tuning.md all use it.
///
/// # Errors
/// Fewer than 20 samples, bad numbers, no motion, or motion against the duty.
pub fn breakaway(samples: &[DutySample], resolution: Option<f64>) -> Result<Breakaway, IdentError> {
    check_record(samples)?;
    let x0 = samples[0].position;
    let q = resolution
        .filter(|r| r.is_finite() && *r > 0.0)
        .unwrap_or_else(|| estimate_resolution(samples));
    let away = |k: usize| (samples[k].position - x0).abs() >= 0.5 * q && samples[k].position != x0;
    let mut from = 1;
    let found = loop {
        let Some(c) = (from..samples.len()).find(|&j| away(j)) else { break None };
        let dir = (samples[c].position - x0).signum();
        let mut j = c + 1;
        let mut confirmed = true; // the record ending while still away counts
        while j < samples.len() {
            let dx = (samples[j].position - x0) * dir;
            if dx >= 1.5 * q {
                break;
            }
            // Back at the start (a flicker) or too slow (creep): not breakaway.
            if dx < 0.5 * q || samples[j].t - samples[c].t > BREAKAWAY_CONFIRM_S {
                confirmed = false;
                break;
            }
            j += 1;
        }
        if confirmed {
            break Some(c);
        }
        from = j.max(c + 1);
    };
    let Some(k) = found else {
        let span = samples.iter().map(|s| (s.position - x0).abs()).fold(0.0, f64::max);
        return Err(IdentError::NoMotion {
            span,
            counts: if q.is_finite() && q > 0.0 { span / q } else { 0.0 },
        });
    };
    let duty = samples[k - 1].duty;
    if duty == 0.0 {
        return Err(IdentError::NoExcitation);
    }
    if (samples[k].position - x0) * duty < 0.0 {
        return Err(IdentError::MovedAgainstDuty);
    }
    Ok(Breakaway { duty_pct: duty, t: samples[k].t })
}

/// Median sample period, s.
fn median_period(samples: &[DutySample]) -> f64 {
    let mut dt: Vec<f64> = samples.windows(2).map(|w| w[1].t - w[0].t).collect();
    dt.sort_by(f64::total_cmp);
    dt[dt.len() / 2]
}

/// Smallest non-zero position change between consecutive samples (one encoder count on
/// quantised data).
fn estimate_resolution(samples: &[DutySample]) -> f64 {
    samples
        .windows(2)
        .map(|w| (w[1].position - w[0].position).abs())
        .filter(|d| *d > 0.0)
        .fold(f64::INFINITY, f64::min)
        .min(f64::MAX)
}

/// Same-sign duty runs that can be fitted (module docs).
fn find_segments(samples: &[DutySample], q: f64, max_delay: f64, h: f64) -> Vec<Segment> {
    let n = samples.len();
    let sign = |u: f64| {
        if u > 0.0 {
            1.0
        } else if u < 0.0 {
            -1.0
        } else {
            0.0
        }
    };
    let window = ((VELOCITY_WINDOW_S / h).round() as usize).max(1);
    let mut out = Vec::new();
    let mut j = 0;
    while j < n {
        let s = sign(samples[j].duty);
        if s == 0.0 {
            j += 1;
            continue;
        }
        let start = j;
        while j < n && sign(samples[j].duty) == s {
            j += 1;
        }
        // Rows start..j carry the duty; it acts until t[j] (plus the delay).
        let last = j.min(n - 1);
        let t_on = samples[start].t;
        let before: Vec<&DutySample> =
            samples[..=start].iter().rev().take_while(|p| p.t >= t_on - REST_WINDOW_S).collect();
        let from_rest = before.len() >= 2
            && before.iter().all(|p| (p.position - samples[start].position).abs() < 0.5 * q);
        let k0 = if from_rest {
            Some(start)
        } else {
            // Skip the delay, and any reversal still in progress: the friction sign of the
            // model must match the motion.
            (start..=last).find(|&k| {
                samples[k].t >= t_on + max_delay
                    && k >= window
                    && (samples[k].position - samples[k - window].position) * s >= q
            })
        };
        if let Some(k0) = k0 {
            if last >= k0 + MIN_SEGMENT_SAMPLES - 1 {
                out.push(Segment { k0, k1: last, sign: s, from_rest });
            }
        }
    }
    out
}

/// The data and segments shared by every evaluation of the cost.
struct Search<'a> {
    samples: &'a [DutySample],
    segments: &'a [Segment],
    fixed_offset: Option<f64>,
    /// Parameters fitted for every segment: 1 (K, the offset given), 2 (K, K·u0) or 3 (K,
    /// K·u0f, K·u0r).
    globals: usize,
}

/// Fit-quality numbers at the optimum.
struct Quality {
    r_squared: f64,
    velocity_rms: f64,
    position_rms: f64,
    samples: usize,
}

impl Search<'_> {
    /// Best τ for a given θ over `[lo, hi]`: a log-spaced grid, then golden refinement.
    /// `Ok(None)` when nothing could be evaluated.
    fn best_tau(&self, theta: f64, lo: f64, hi: f64) -> Result<Option<(f64, f64)>, IdentError> {
        const GRID: usize = 24;
        let (llo, lhi) = (lo.ln(), hi.ln());
        let mut best: Option<(usize, f64)> = None;
        for i in 0..=GRID {
            let tau = (llo + (lhi - llo) * i as f64 / GRID as f64).exp();
            if let Some(f) = self.fit(tau, theta)? {
                if best.is_none_or(|b| f.sse < b.1) {
                    best = Some((i, f.sse));
                }
            }
        }
        let Some((i, _)) = best else { return Ok(None) };
        let step = (lhi - llo) / GRID as f64;
        let a = (llo + step * (i as f64 - 1.0)).max(llo);
        let b = (llo + step * (i as f64 + 1.0)).min(lhi);
        self.golden_tau(theta, a, b)
    }

    /// Golden refinement of τ for a given θ within `[lo, hi]` (linear bounds).
    fn best_tau_in(&self, theta: f64, lo: f64, hi: f64) -> Result<Option<(f64, f64)>, IdentError> {
        self.golden_tau(theta, lo.ln(), hi.ln())
    }

    fn golden_tau(&self, theta: f64, a: f64, b: f64) -> Result<Option<(f64, f64)>, IdentError> {
        let mut err = None;
        let ltau = golden(a, b, 1e-5, |lt| match self.fit(lt.exp(), theta) {
            Ok(Some(f)) => f.sse,
            Ok(None) => f64::INFINITY,
            Err(e) => {
                err = Some(e);
                f64::INFINITY
            }
        });
        if let Some(e) = err {
            return Err(e);
        }
        let tau = ltau.exp();
        Ok(self.fit(tau, theta)?.map(|f| (tau, f.sse)))
    }

    /// Linear least squares for K, the offsets (times K) and the segment start values at
    /// fixed (τ, θ). Index loops kept: they read as the matrix formulas they implement.
    /// `Ok(None)` when the numbers degenerate (NaN); an error when K and an offset are
    /// collinear.
    #[allow(clippy::needless_range_loop)]
    fn fit(&self, tau: f64, theta: f64) -> Result<Option<LinearFit>, IdentError> {
        // Accumulate, per segment, the normal-equation blocks with local columns A (start
        // position, and start velocity unless from rest) and global columns B (the responses
        // to the duty and to the friction sign), then eliminate A (Schur complement).
        let n = self.globals;
        let mut m = [[0.0; 3]; 3];
        let mut r = [0.0; 3];
        let mut blocks = Vec::with_capacity(self.segments.len());
        for seg in self.segments {
            let cols = self.columns(seg, tau, theta);
            let mut blk = Block::default();
            for c in &cols {
                let a = [1.0, c.phi];
                let b = self.global(c, seg);
                for i in 0..2 {
                    for j in 0..n {
                        blk.ab[i][j] += a[i] * b[j];
                    }
                    for j in 0..2 {
                        blk.aa[i][j] += a[i] * a[j];
                    }
                    blk.ay[i] += a[i] * c.y;
                }
                for i in 0..n {
                    for j in 0..n {
                        blk.bb[i][j] += b[i] * b[j];
                    }
                    blk.by[i] += b[i] * c.y;
                }
                blk.yy += c.y * c.y;
            }
            let local = if seg.from_rest { 1 } else { 2 };
            let inv = invert_local(&blk.aa, local);
            // M += BᵀB − (AᵀB)ᵀ (AᵀA)⁻¹ AᵀB ; r += Bᵀy − (AᵀB)ᵀ (AᵀA)⁻¹ Aᵀy
            for i in 0..n {
                for j in 0..n {
                    let mut s = blk.bb[i][j];
                    for p in 0..local {
                        for q in 0..local {
                            s -= blk.ab[p][i] * inv[p][q] * blk.ab[q][j];
                        }
                    }
                    m[i][j] += s;
                }
                let mut s = blk.by[i];
                for p in 0..local {
                    for q in 0..local {
                        s -= blk.ab[p][i] * inv[p][q] * blk.ay[q];
                    }
                }
                r[i] += s;
            }
            blocks.push((blk, inv, local));
        }
        let g = match solve_small(&m, &r, n) {
            Solved::Unique(g) => g,
            Solved::Collinear if n > 1 => return Err(IdentError::GainOffsetAmbiguous),
            _ => return Ok(None),
        };
        let mut sse = 0.0;
        let mut starts = Vec::with_capacity(blocks.len());
        for (blk, inv, local) in &blocks {
            // p = (AᵀA)⁻¹ (Aᵀy − AᵀB g)
            let mut rhs = blk.ay;
            for i in 0..2 {
                for j in 0..n {
                    rhs[i] -= blk.ab[i][j] * g[j];
                }
            }
            let mut p = [0.0; 2];
            for i in 0..*local {
                for j in 0..*local {
                    p[i] += inv[i][j] * rhs[j];
                }
            }
            // SSE = yᵀy − 2 θᵀ[Aᵀy; Bᵀy] + θᵀ N θ with θ = (p, g).
            let mut s = blk.yy;
            for i in 0..2 {
                s -= 2.0 * p[i] * blk.ay[i];
                for j in 0..2 {
                    s += p[i] * blk.aa[i][j] * p[j];
                }
                for j in 0..n {
                    s += 2.0 * p[i] * blk.ab[i][j] * g[j];
                }
            }
            for i in 0..n {
                s -= 2.0 * g[i] * blk.by[i];
                for j in 0..n {
                    s += g[i] * blk.bb[i][j] * g[j];
                }
            }
            sse += s.max(0.0);
            starts.push((p[0], p[1]));
        }
        if !sse.is_finite() {
            return Ok(None);
        }
        let (gain, offset_gain) = match (self.fixed_offset, n) {
            (Some(u0), _) => (g[0], [g[0] * u0; 2]),
            (None, 3) => (g[0], [-g[1], -g[2]]),
            (None, _) => (g[0], [-g[1]; 2]),
        };
        Ok(Some(LinearFit { sse, gain, offset_gain, starts }))
    }

    /// Global regressors of one sample of `seg`: the response to the duty, then to the
    /// friction sign (one column per direction when the offsets are fitted apart), or the
    /// fixed-offset combination.
    fn global(&self, c: &Columns, seg: &Segment) -> [f64; 3] {
        match (self.fixed_offset, self.globals) {
            (Some(u0), _) => [c.xu - u0 * c.xs, 0.0, 0.0],
            (None, 3) if seg.sign > 0.0 => [c.xu, c.xs, 0.0],
            (None, 3) => [c.xu, 0.0, c.xs],
            (None, _) => [c.xu, c.xs, 0.0],
        }
    }

    /// Regressors of a segment's samples at (τ, θ): position responses of the unit-gain
    /// model `1/(s(τs + 1))` to the delayed duty (`xu`) and to the friction sign (`xs`), from
    /// rest at the segment's first sample; `phi` = response to a unit start velocity
    /// (0 when the segment starts from rest); `y` = position relative to the first sample.
    fn columns(&self, seg: &Segment, tau: f64, theta: f64) -> Vec<Columns> {
        let s = self.samples;
        let t0 = s[seg.k0].t;
        let y0 = s[seg.k0].position;
        let mut out = Vec::with_capacity(seg.k1 - seg.k0 + 1);
        let (mut xu, mut vu, mut xs, mut vs) = (0.0, 0.0, 0.0, 0.0);
        // Index of the duty row in effect at the delayed time: last j with t_j + θ ≤ time.
        let mut j = s.partition_point(|p| p.t + theta <= t0);
        let input = |j: usize| -> (f64, f64) {
            if j == 0 {
                return (0.0, 0.0);
            }
            let u = s[j - 1].duty;
            let friction = if u * seg.sign > 0.0 { seg.sign } else { 0.0 };
            (u, friction)
        };
        for k in seg.k0..=seg.k1 {
            if k > seg.k0 {
                let (mut time, end) = (s[k - 1].t, s[k].t);
                while time < end {
                    let next_switch = if j < s.len() { s[j].t + theta } else { f64::INFINITY };
                    let until = next_switch.min(end);
                    let (u, f) = input(j);
                    advance(&mut xu, &mut vu, u, until - time, tau);
                    advance(&mut xs, &mut vs, f, until - time, tau);
                    time = until;
                    if next_switch <= end {
                        j += 1;
                    }
                }
            }
            let dt = s[k].t - t0;
            let phi = if seg.from_rest { 0.0 } else { tau * -(-dt / tau).exp_m1() };
            out.push(Columns { xu, xs, phi, y: s[k].position - y0 });
        }
        out
    }

    /// Velocity R² and residuals at the optimum (module docs).
    fn quality(&self, tau: f64, theta: f64, fit: &LinearFit, h: f64) -> Quality {
        let window = ((VELOCITY_WINDOW_S / h).round() as usize).max(1);
        let (mut sse_x, mut n_x) = (0.0, 0usize);
        let mut pairs = Vec::new();
        for (seg, &(x0, v0)) in self.segments.iter().zip(&fit.starts) {
            let cols = self.columns(seg, tau, theta);
            let t: Vec<f64> = (seg.k0..=seg.k1).map(|k| self.samples[k].t).collect();
            let model: Vec<f64> = cols
                .iter()
                .map(|c| {
                    let og = if seg.sign < 0.0 { fit.offset_gain[1] } else { fit.offset_gain[0] };
                    x0 + v0 * c.phi + fit.gain * c.xu - og * c.xs
                })
                .collect();
            for (c, m) in cols.iter().zip(&model) {
                sse_x += (c.y - m).powi(2);
                n_x += 1;
            }
            for i in 0..cols.len().saturating_sub(window) {
                let dt = t[i + window] - t[i];
                let measured = (cols[i + window].y - cols[i].y) / dt;
                let predicted = (model[i + window] - model[i]) / dt;
                pairs.push((measured, predicted));
            }
        }
        let mean = pairs.iter().map(|p| p.0).sum::<f64>() / pairs.len().max(1) as f64;
        let sst: f64 = pairs.iter().map(|p| (p.0 - mean).powi(2)).sum();
        let sse: f64 = pairs.iter().map(|p| (p.0 - p.1).powi(2)).sum();
        let r_squared = if sst > 0.0 { 1.0 - sse / sst } else { f64::NEG_INFINITY };
        Quality {
            r_squared,
            velocity_rms: (sse / pairs.len().max(1) as f64).sqrt(),
            position_rms: (sse_x / n_x.max(1) as f64).sqrt(),
            samples: n_x,
        }
    }
}

/// One sample's regressors.
#[derive(Debug, Clone, Copy)]
struct Columns {
    xu: f64,
    xs: f64,
    phi: f64,
    y: f64,
}

/// Normal-equation blocks of one segment.
#[derive(Debug, Clone, Copy, Default)]
struct Block {
    aa: [[f64; 2]; 2],
    ab: [[f64; 3]; 2],
    bb: [[f64; 3]; 3],
    ay: [f64; 2],
    by: [f64; 3],
    yy: f64,
}

/// What [`solve_small`] found.
enum Solved {
    Unique([f64; 3]),
    /// A pivot vanished against its column's scale: two regressors are collinear.
    Collinear,
    /// Not finite numbers.
    Degenerate,
}

/// Solves the leading `n`×`n` (1…3) part of the symmetric positive semi-definite `m·g = r`
/// by Gaussian elimination (no pivoting needed for a positive-definite matrix). A pivot below
/// 1e-9 of its diagonal entry counts as collinear, the test the 2×2 solve used before
/// (det > 1e-9·m00·m11).
#[allow(clippy::needless_range_loop)]
fn solve_small(m: &[[f64; 3]; 3], r: &[f64; 3], n: usize) -> Solved {
    let (mut a, mut b) = (*m, *r);
    for k in 0..n {
        let diag = m[k][k];
        if !(diag.is_finite() && a[k][k].is_finite()) {
            return Solved::Degenerate;
        }
        if !(diag > 0.0 && a[k][k] > 1e-9 * diag) {
            return if diag > 0.0 { Solved::Collinear } else { Solved::Degenerate };
        }
        for i in k + 1..n {
            let f = a[i][k] / a[k][k];
            for j in k..n {
                a[i][j] -= f * a[k][j];
            }
            b[i] -= f * b[k];
        }
    }
    let mut g = [0.0; 3];
    for k in (0..n).rev() {
        let mut s = b[k];
        for j in k + 1..n {
            s -= a[k][j] * g[j];
        }
        g[k] = s / a[k][k];
    }
    if g.iter().all(|x| x.is_finite()) {
        Solved::Unique(g)
    } else {
        Solved::Degenerate
    }
}

/// Inverse of the leading `n`×`n` (1 or 2) part of a symmetric 2×2 matrix; zeros when singular.
fn invert_local(a: &[[f64; 2]; 2], n: usize) -> [[f64; 2]; 2] {
    if n == 1 {
        return if a[0][0] > 0.0 { [[1.0 / a[0][0], 0.0], [0.0, 0.0]] } else { [[0.0; 2]; 2] };
    }
    let det = a[0][0] * a[1][1] - a[0][1] * a[1][0];
    if !(det.is_finite() && det.abs() > 1e-14 * a[0][0].abs() * a[1][1].abs()) {
        return [[0.0; 2]; 2];
    }
    [[a[1][1] / det, -a[0][1] / det], [-a[1][0] / det, a[0][0] / det]]
}

/// Exact advance of `ẋ = v`, `τ v̇ = w − v` over `dt` with `w` constant (unit gain).
fn advance(x: &mut f64, v: &mut f64, w: f64, dt: f64, tau: f64) {
    if dt <= 0.0 {
        return;
    }
    // 1 − e^(−dt/τ) without cancellation for dt ≪ τ.
    let decay = -(-dt / tau).exp_m1();
    *x += w * dt + (*v - w) * tau * decay;
    *v = w + (*v - w) * (1.0 - decay);
}

/// Golden-section minimisation of a unimodal `f` on `[a, b]` to an interval of `tol`.
fn golden(mut a: f64, mut b: f64, tol: f64, mut f: impl FnMut(f64) -> f64) -> f64 {
    const INV_PHI: f64 = 0.618_033_988_749_894_8;
    if !(a.is_finite() && b.is_finite() && b > a) {
        return a;
    }
    let mut c = b - INV_PHI * (b - a);
    let mut d = a + INV_PHI * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..200 {
        if (b - a).abs() <= tol {
            break;
        }
        if fc <= fd {
            b = d;
            d = c;
            fd = fc;
            c = b - INV_PHI * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + INV_PHI * (b - a);
            fd = f(d);
        }
    }
    if fc <= fd {
        c
    } else {
        d
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exact samples of the model itself (no quantisation): pulses from rest at two sizes in
    /// each direction, zero duty long enough for the model to come to rest. The exact
    /// zero-order-hold solution is the one `advance` implements.
    fn synthetic(k: f64, tau: f64, u0: f64, theta_ticks: usize) -> Vec<DutySample> {
        let h = 0.001;
        let mut out = Vec::new();
        let (mut x, mut v) = (100.0_f64, 0.0_f64);
        let mut applied = std::collections::VecDeque::from(vec![0.0; theta_ticks]);
        let mut t = 0.0;
        for &(duty, ms) in &[
            (0.0, 50),
            (40.0, 200),
            (0.0, 300),
            (-40.0, 200),
            (0.0, 300),
            (70.0, 200),
            (0.0, 300),
            (-70.0, 200),
            (0.0, 300),
        ] {
            for _ in 0..ms {
                out.push(DutySample { t, duty, position: x });
                applied.push_back(duty);
                let u: f64 = applied.pop_front().unwrap_or(0.0);
                let w = if u != 0.0 {
                    u - u0 * u.signum()
                } else if v.abs() > 1e-9 {
                    // Coasting: friction against the motion, stopping at zero.
                    -u0 * v.signum()
                } else {
                    0.0
                };
                let before = v;
                advance(&mut x, &mut v, k * w, h, tau);
                if u == 0.0 && before * v <= 0.0 {
                    v = 0.0;
                }
                t += h;
            }
        }
        out
    }

    // Self-consistency: the fit recovers exactly the numbers that generated the record
    // (common practice for checking an estimator, no source).
    #[test]
    fn recovers_the_generating_model() {
        let rec = synthetic(2.5, 0.03, 4.0, 2);
        let id = identify(&rec, &IdentOptions::default()).expect("identifies");
        let m = id.model;
        assert!((m.gain - 2.5).abs() < 1e-4 * 2.5, "{m:?}");
        assert!((m.time_constant_s - 0.03).abs() < 1e-4 * 0.03, "{m:?}");
        assert!((m.offset_pct - 4.0).abs() < 1e-3, "{m:?}");
        assert!((m.delay_s.expect("from rest") - 0.002).abs() < 1e-5, "{m:?}");
        assert!(id.r_squared > 0.999_999, "{id:?}");
    }

    #[test]
    fn fixed_offset_allows_a_single_duty_size() {
        // One duty size in one direction: K·(u − u0) is all the record shows.
        let h = 0.001;
        let mut one = Vec::new();
        let (mut x, mut v) = (0.0, 0.0);
        for k in 0..1200 {
            let duty = if (50..350).contains(&k) { 40.0 } else { 0.0 };
            one.push(DutySample { t: k as f64 * h, duty, position: x });
            let w = if duty != 0.0 { duty - 4.0 } else { 0.0 };
            advance(&mut x, &mut v, 2.5 * w, h, 0.03);
        }
        assert_eq!(identify(&one, &IdentOptions::default()), Err(IdentError::GainOffsetAmbiguous));
        let opts = IdentOptions { offset_pct: Some(4.0), ..IdentOptions::default() };
        let id = identify(&one, &opts).expect("identifies with the offset given");
        assert!((id.model.gain - 2.5).abs() < 1e-4 * 2.5, "{:?}", id.model);
    }

    #[test]
    fn bad_records_are_errors() {
        let rec = synthetic(2.5, 0.03, 4.0, 0);
        assert_eq!(identify(&rec[..10], &IdentOptions::default()), Err(IdentError::TooShort(10)));
        let mut nan = rec.clone();
        nan[7].position = f64::NAN;
        assert_eq!(
            identify(&nan, &IdentOptions::default()),
            Err(IdentError::NotFinite { index: 7 })
        );
        let mut back = rec.clone();
        back[9].t = back[8].t;
        assert_eq!(
            identify(&back, &IdentOptions::default()),
            Err(IdentError::TimeNotIncreasing { index: 9 })
        );
        let idle: Vec<DutySample> = rec.iter().map(|s| DutySample { duty: 0.0, ..*s }).collect();
        assert_eq!(identify(&idle, &IdentOptions::default()), Err(IdentError::NoExcitation));
        // Reversed wiring: the same record with the position mirrored.
        let mirrored: Vec<DutySample> =
            rec.iter().map(|s| DutySample { position: -s.position, ..*s }).collect();
        assert!(matches!(
            identify(&mirrored, &IdentOptions::default()),
            Err(IdentError::WrongDirection { .. }) | Err(IdentError::NoUsableStep)
        ));
    }

    #[test]
    fn steady_velocity_respects_the_offset() {
        let m = VelocityModel {
            gain: 2.0,
            time_constant_s: 0.02,
            offset_pct: 3.0,
            offset_reverse_pct: None,
            delay_s: None,
        };
        assert_eq!(m.steady_velocity(13.0), 20.0);
        assert_eq!(m.steady_velocity(-13.0), -20.0);
        assert_eq!(m.steady_velocity(2.0), 0.0);
    }
}
