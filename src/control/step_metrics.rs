//! Step-response metrics of a recorded response: rise time, overshoot, settling time,
//! steady-state error, peak. Used by tuning to judge a set of gains.
//!
//! Hand-written rather than taken from a crate: no well-kept Rust crate computes these, and
//! the definitions must be ours (band relative to the commanded step, interpolated crossings)
//! so that a short, coarsely sampled servo record gives stable numbers.
//!
//! # Definitions
//! The response is normalised by the commanded step: `r(t) = (y(t) − y0)/step`, so negative
//! steps and offsets need no special case. Only samples at or after `t_step` count, and every
//! time is measured from `t_step`.
//!
//! - **Rise time** (10–90 %): time between the first crossings of `r = 0.1` and `r = 0.9`,
//!   each linearly interpolated between the two samples around it. `None` if the response
//!   never reaches 90 %.
//! - **Peak**: the sample with the largest `r` (first one if several), not interpolated;
//!   `peak_value` is `y` there.
//! - **Overshoot**: `100·(r_max − 1)` %, 0 if the response stays below the commanded value.
//!   **Undershoot**: `100·(−r_min)` %, 0 if it never goes the wrong way.
//! - **Settling time**: the band is `±band_frac·|step|` around the commanded final value
//!   `y0 + step` (not around the final measured value: a servo that stops short has not
//!   settled on its target). Settling time is the last time the response leaves the band:
//!   the last sample outside it, interpolated to the band edge between that sample and the
//!   next. `None` if the last sample is still outside; 0 if no sample after the step is
//!   outside.
//! - **Steady-state error**: commanded final value minus the mean of the last 5 % of the
//!   samples (at least one), in the units of `y`. The mean, rather than the last sample, keeps
//!   one encoder count of jitter from deciding the number.
//!
//! Ogata's rise time is the exact 10–90 % crossing time of the continuous response and his
//! "exact" settling time the last time `|y − 1|` equals the band; with interpolation these are
//! reproduced to well under one sample period. python-control's `step_info` picks samples
//! instead (first sample ≥ 10 % and ≥ 90 %; the sample after the last one outside the band;
//! band around the final value), so on the same grid its times differ from ours by up to one
//! sample period; the tests compare both.
//!
//! # Sources
//! K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall 2010, §5-3 (transient
//! response specifications of second-order systems).

/// Default settling band: 2 % of the commanded step (Ogata, §5-3).
pub const DEFAULT_BAND_FRAC: f64 = 0.02;

/// Fraction of the samples (the last ones) averaged for the steady-state error.
pub const STEADY_STATE_FRACTION: f64 = 0.05;

/// Metrics of one step response; times in s from the step instant.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StepMetrics {
    /// 10–90 % rise time, s; `None` if the response never reached 90 %.
    pub rise_s: Option<f64>,
    /// Peak above the commanded value, % of the step.
    pub overshoot_pct: f64,
    /// Largest excursion in the wrong direction, % of the step.
    pub undershoot_pct: f64,
    /// Last time the response leaves the band, s; `None` if it ends outside the band.
    pub settling_s: Option<f64>,
    /// Commanded final value minus the mean of the last 5 % of samples, units of `y`.
    pub steady_state_error: f64,
    /// Time of the peak sample, s.
    pub peak_time_s: f64,
    /// `y` at the peak sample.
    pub peak_value: f64,
}

/// Why metrics could not be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum StepError {
    #[error("time and response have different lengths ({t} and {y} samples)")]
    LengthMismatch { t: usize, y: usize },
    #[error("sample {index} is not a finite number")]
    NotFinite { index: usize },
    #[error("sample times must increase (sample {index} does not)")]
    TimeNotIncreasing { index: usize },
    #[error("the commanded step must be a finite, non-zero number (found {0})")]
    BadStep(f64),
    #[error("the start value and step instant must be finite")]
    BadStart,
    #[error("the settling band must be a fraction between 0 and 1 (found {0})")]
    BadBand(f64),
    #[error("the record needs at least 2 samples at or after the step instant ({0} found)")]
    TooShort(usize),
}

/// Metrics of the response `y(t)` to a step of `step` from `y0` commanded at `t_step`, with a
/// settling band of `band_frac` (e.g. [`DEFAULT_BAND_FRAC`]) of the step. See the module docs
/// for the definitions.
///
/// # Errors
/// Mismatched lengths, non-finite numbers, times that do not increase, a zero step, a band
/// outside (0, 1) or fewer than two samples after the step.
pub fn step_metrics(
    t: &[f64],
    y: &[f64],
    y0: f64,
    step: f64,
    t_step: f64,
    band_frac: f64,
) -> Result<StepMetrics, StepError> {
    if t.len() != y.len() {
        return Err(StepError::LengthMismatch { t: t.len(), y: y.len() });
    }
    if !(step.is_finite() && step != 0.0) {
        return Err(StepError::BadStep(step));
    }
    if !(y0.is_finite() && t_step.is_finite()) {
        return Err(StepError::BadStart);
    }
    if !(band_frac > 0.0 && band_frac < 1.0) {
        return Err(StepError::BadBand(band_frac));
    }
    if let Some(index) = t.iter().zip(y).position(|(a, b)| !(a.is_finite() && b.is_finite())) {
        return Err(StepError::NotFinite { index });
    }
    if let Some(w) = t.windows(2).position(|w| w[1] <= w[0]) {
        return Err(StepError::TimeNotIncreasing { index: w + 1 });
    }
    let first = t.partition_point(|&ti| ti < t_step);
    let t = &t[first..];
    let y = &y[first..];
    if t.len() < 2 {
        return Err(StepError::TooShort(t.len()));
    }
    let r: Vec<f64> = y.iter().map(|yi| (yi - y0) / step).collect();

    let rise_s = match (crossing(t, &r, 0.1), crossing(t, &r, 0.9)) {
        (Some(t10), Some(t90)) => Some(t90 - t10),
        _ => None,
    };

    let (peak, r_max) =
        r.iter().enumerate().fold(
            (0, f64::NEG_INFINITY),
            |(bi, bv), (i, &v)| if v > bv { (i, v) } else { (bi, bv) },
        );
    let r_min = r.iter().copied().fold(f64::INFINITY, f64::min);

    let outside = |v: f64| (v - 1.0).abs() > band_frac;
    let settling_s = match r.iter().rposition(|&v| outside(v)) {
        None => Some(0.0),
        Some(k) if k + 1 == r.len() => None,
        Some(k) => {
            let edge = if r[k] > 1.0 { 1.0 + band_frac } else { 1.0 - band_frac };
            Some(interpolate(t[k], r[k], t[k + 1], r[k + 1], edge) - t_step)
        }
    };

    let n_tail = ((y.len() as f64 * STEADY_STATE_FRACTION).ceil() as usize).clamp(1, y.len());
    let tail = &y[y.len() - n_tail..];
    let final_mean = tail.iter().sum::<f64>() / tail.len() as f64;

    Ok(StepMetrics {
        rise_s,
        overshoot_pct: 100.0 * (r_max - 1.0).max(0.0),
        undershoot_pct: 100.0 * (-r_min).max(0.0),
        settling_s,
        steady_state_error: y0 + step - final_mean,
        peak_time_s: t[peak] - t_step,
        peak_value: y[peak],
    })
}

/// First time `r` reaches `level`, interpolated; absolute time (not from the step).
fn crossing(t: &[f64], r: &[f64], level: f64) -> Option<f64> {
    let j = r.iter().position(|&v| v >= level)?;
    if j == 0 {
        return Some(t[0]);
    }
    Some(interpolate(t[j - 1], r[j - 1], t[j], r[j], level))
}

/// Time at which the straight line through (ta, ra) and (tb, rb) takes the value `level`.
fn interpolate(ta: f64, ra: f64, tb: f64, rb: f64, level: f64) -> f64 {
    if rb == ra {
        return tb;
    }
    ta + (level - ra) / (rb - ra) * (tb - ta)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Bad input gives a clear error, never a panic (project rule; common practice, no source).
    #[test]
    fn bad_input_is_an_error() {
        let t = [0.0, 1.0, 2.0];
        let y = [0.0, 0.5, 1.0];
        assert!(matches!(
            step_metrics(&t, &y[..2], 0.0, 1.0, 0.0, 0.02),
            Err(StepError::LengthMismatch { .. })
        ));
        assert_eq!(step_metrics(&t, &y, 0.0, 0.0, 0.0, 0.02), Err(StepError::BadStep(0.0)));
        assert_eq!(step_metrics(&t, &y, 0.0, 1.0, 0.0, 1.5), Err(StepError::BadBand(1.5)));
        assert_eq!(step_metrics(&t, &y, 0.0, 1.0, 1.5, 0.02), Err(StepError::TooShort(1)));
        assert_eq!(
            step_metrics(&[0.0, 1.0, 1.0], &y, 0.0, 1.0, 0.0, 0.02),
            Err(StepError::TimeNotIncreasing { index: 2 })
        );
        assert_eq!(
            step_metrics(&t, &[0.0, f64::NAN, 1.0], 0.0, 1.0, 0.0, 0.02),
            Err(StepError::NotFinite { index: 1 })
        );
    }

    // A straight ramp reaching the target at t = 1 s: 10–90 % takes 0.8 s, the 2 % band is
    // entered at 0.98 s. Exact by construction (linear interpolation is exact on a line).
    #[test]
    fn ramp_crossings_are_interpolated_exactly() {
        let t: Vec<f64> = (0..=20).map(|i| f64::from(i) * 0.1).collect();
        let y: Vec<f64> = t.iter().map(|&ti| ti.min(1.0)).collect();
        let m = step_metrics(&t, &y, 0.0, 1.0, 0.0, 0.02).expect("valid record");
        assert!((m.rise_s.expect("rises") - 0.8).abs() < 1e-12);
        assert!((m.settling_s.expect("settles") - 0.98).abs() < 1e-12);
        assert_eq!(m.overshoot_pct, 0.0);
        assert_eq!(m.steady_state_error, 0.0);
    }
}
