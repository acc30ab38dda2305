//! Comparing two closed-loop steps: the current gains against suggested ones, before the
//! suggestion is applied or saved. Pure: the steps are run by `commission::verify`.
//!
//! # What is compared (our definitions; the metrics are [`crate::control::step_metrics`])
//! - rise 10–90 %, overshoot, settling time in the 2 % band, and the peak following error
//!   after the rise (the largest |target − position| once the position first reached the
//!   target: overshoot and ringing in units; the last sample's error when it never did).
//! - The suggestion is **worse** when any of these holds (our thresholds, no source):
//!   the step with it does not settle in the record while the current one does; its
//!   overshoot exceeds the current one by more than [`OVERSHOOT_MARGIN_PP`] percentage
//!   points; its settling time exceeds 1.5× the current one plus [`TIME_MARGIN_S`]; its peak
//!   following error after the rise exceeds 1.5× the current one plus one encoder count.
//!   A faster rise alone does not make up for any of them.

use serde::Serialize;

use super::report::{summarize_step, StepRow};

/// Overshoot a suggestion may add before it counts as worse, percentage points.
pub const OVERSHOOT_MARGIN_PP: f64 = 5.0;

/// Settling time a suggestion may add beyond 1.5× the current one, s.
pub const TIME_MARGIN_S: f64 = 0.05;

/// The figures of one verification step.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StepFigures {
    /// 10–90 % rise time, s.
    pub rise_s: Option<f64>,
    /// Overshoot, % of the step.
    pub overshoot_pct: f64,
    /// Settling time in the 2 % band, s; `None` when it did not settle in the record.
    pub settling_s: Option<f64>,
    /// Largest |target − position| after the position first reached the target (the last
    /// sample's when it never did), units.
    pub peak_error_after_rise: f64,
}

/// Current against suggested.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Comparison {
    pub current: StepFigures,
    pub suggested: StepFigures,
    /// Why the suggestion is worse; empty when it is not.
    pub worse: Vec<String>,
}

impl Comparison {
    /// True when the suggestion is worse by any rule (module docs).
    pub fn is_worse(&self) -> bool {
        !self.worse.is_empty()
    }

    /// A small table for a person, `unit` the axis unit.
    pub fn to_text(&self, unit: &str) -> String {
        let t = |v: Option<f64>| v.map_or("not reached".to_owned(), |s| format!("{s:.3} s"));
        let row = |name: &str, a: String, b: String| format!("  {name:<22} {a:>12} {b:>12}\n");
        let mut s = row("", "current".into(), "suggested".into());
        s += &row("rise 10–90 %", t(self.current.rise_s), t(self.suggested.rise_s));
        s += &row(
            "overshoot",
            format!("{:.1} %", self.current.overshoot_pct),
            format!("{:.1} %", self.suggested.overshoot_pct),
        );
        s += &row("settling (2 %)", t(self.current.settling_s), t(self.suggested.settling_s));
        s += &row(
            "peak error after rise",
            format!("{:.3} {unit}", self.current.peak_error_after_rise),
            format!("{:.3} {unit}", self.suggested.peak_error_after_rise),
        );
        if self.is_worse() {
            s += &format!("  the suggestion is WORSE: {}\n", self.worse.join("; "));
        } else {
            s += "  the suggestion is not worse than the current gains\n";
        }
        s
    }
}

/// The figures of a recorded step (rows from the step's experiment).
///
/// # Errors
/// A sentence when the record holds no step.
pub fn figures(rows: &[StepRow]) -> Result<StepFigures, String> {
    let s = summarize_step(rows, 0.02).map_err(|e| e.to_string())?;
    let (from, to) = (s.step.from, s.step.to);
    let size = to - from;
    let k0 = s.step.index;
    let reached = rows[k0..].iter().position(|r| (r.position - from) / size >= 1.0);
    let last = rows.last().map_or(size.abs(), |r| (r.target - r.position).abs());
    let peak = reached.map_or(last, |k| {
        rows[k0 + k..].iter().map(|r| (r.target - r.position).abs()).fold(0.0, f64::max)
    });
    Ok(StepFigures {
        rise_s: s.metrics.rise_s,
        overshoot_pct: s.metrics.overshoot_pct,
        settling_s: s.metrics.settling_s,
        peak_error_after_rise: peak,
    })
}

/// Compares the two steps by the rules of the module docs; `resolution` is one encoder count.
pub fn compare(current: StepFigures, suggested: StepFigures, resolution: f64) -> Comparison {
    let mut worse = Vec::new();
    match (current.settling_s, suggested.settling_s) {
        (Some(_), None) => worse.push("it does not settle in the 2 % band".to_owned()),
        (Some(c), Some(s)) if s > 1.5 * c + TIME_MARGIN_S => {
            worse.push(format!("it settles in {s:.3} s against {c:.3} s"));
        }
        _ => {}
    }
    if suggested.overshoot_pct > current.overshoot_pct + OVERSHOOT_MARGIN_PP {
        worse.push(format!(
            "{:.1} % overshoot against {:.1} %",
            suggested.overshoot_pct, current.overshoot_pct
        ));
    }
    if suggested.peak_error_after_rise > 1.5 * current.peak_error_after_rise + resolution {
        worse.push(format!(
            "peak error after the rise {:.3} against {:.3}",
            suggested.peak_error_after_rise, current.peak_error_after_rise
        ));
    }
    Comparison { current, suggested, worse }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fig(os: f64, ts: Option<f64>, pe: f64) -> StepFigures {
        StepFigures {
            rise_s: Some(0.05),
            overshoot_pct: os,
            settling_s: ts,
            peak_error_after_rise: pe,
        }
    }

    #[test]
    fn worse_by_each_rule_and_not_otherwise() {
        let cur = fig(4.2, Some(0.2), 0.1);
        assert!(!compare(cur, fig(6.0, Some(0.25), 0.12), 0.04).is_worse());
        // The case that once overwrote a good configuration: 4.2 % → 14.6 % on a 2 mm step.
        let c = compare(cur, fig(14.6, Some(0.2), 0.1), 0.04);
        assert!(c.is_worse() && c.worse[0].contains("14.6 % overshoot"), "{c:?}");
        assert!(compare(cur, fig(4.2, None, 0.1), 0.04).is_worse());
        assert!(compare(cur, fig(4.2, Some(0.5), 0.1), 0.04).is_worse());
        assert!(compare(cur, fig(4.2, Some(0.2), 0.3), 0.04).is_worse());
        assert!(c.to_text("mm").contains("WORSE"));
    }

    #[test]
    fn figures_of_a_step_record() {
        // Target steps 0 → 2 at t = 0.1; position rises linearly to 2.079 (the last sample
        // before 0.2), then holds 2.0.
        let rows: Vec<StepRow> = (0..500)
            .map(|k| {
                let t = k as f64 * 0.001;
                let target = if t >= 0.1 { 2.0 } else { 0.0 };
                let position = if t < 0.1 {
                    0.0
                } else if t < 0.2 {
                    21.0 * (t - 0.1)
                } else {
                    2.0
                };
                StepRow { t, target, position, duty: None }
            })
            .collect();
        let f = figures(&rows).expect("a step");
        assert!((f.overshoot_pct - 3.95).abs() < 1e-9, "{f:?}");
        assert!((f.peak_error_after_rise - 0.079).abs() < 1e-9, "{f:?}");
        assert!(f.settling_s.is_some());
    }
}
