//! Trials run inside the axis loop: bounded open-loop duty pulses and ramps, relay
//! oscillation, and closed-loop steps, recorded at the full frame rate.
//!
//! "Trial" is the word users read (state `trialing`, "trial ended early"); the types keep
//! the name `Experiment*`, which means the same thing. Tuning (`commission`) runs trials.
//!
//! Pure logic fed one frame at a time (like homing), so that each trial's duty law and
//! bounds can be tested alone. The analysis of what was recorded lives in `tuning`; this
//! module only drives the axis and keeps the samples. Every trial has a travel bound and a
//! time bound; crossing either ends it early with a reason.
//!
//! Written by hand: the trials are the product's own tuning steps.

use serde::Serialize;

use crate::engine::history::Sample;

/// What to do to the axis.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ExperimentSpec {
    /// Open loop: each `(duty %, seconds)` in turn, then duty 0 for `settle_s`.
    DutySteps {
        /// Segments.
        steps: Vec<(f64, f64)>,
        /// Time at zero duty after the last segment, s.
        settle_s: f64,
    },
    /// Open loop: duty rises from 0 at `rate` %/s in `direction` until the encoder moves
    /// `motion_counts` counts (or `max_duty` is reached), then drops to 0.
    BreakawayRamp {
        /// −1 or +1.
        direction: i8,
        /// %/s.
        rate: f64,
        /// Highest duty tried, %.
        max_duty: f64,
        /// Counts of motion that count as "it moved".
        motion_counts: i64,
    },
    /// Relay feedback around the start position: duty = ±`amplitude` % toward the start, with
    /// a hysteresis band of ±`hysteresis` units, for `seconds`.
    Relay {
        /// Duty amplitude, %.
        amplitude: f64,
        /// Hysteresis half-width, units.
        hysteresis: f64,
        /// Length, s.
        seconds: f64,
    },
    /// Closed loop with the axis's controller: hold for `lead_s`, then the target jumps by
    /// `size` units (no profile), recorded for `seconds` after the jump.
    Step {
        /// Units.
        size: f64,
        /// Hold time before the jump, s.
        lead_s: f64,
        /// Recording time after the jump, s.
        seconds: f64,
    },
}

impl ExperimentSpec {
    /// True when the host's controller runs (the step); false for open-loop duty.
    pub fn closed_loop(&self) -> bool {
        matches!(self, Self::Step { .. })
    }

    /// Longest the experiment can take by its own definition, s.
    pub fn nominal_seconds(&self) -> f64 {
        match self {
            Self::DutySteps { steps, settle_s } => {
                steps.iter().map(|s| s.1).sum::<f64>() + settle_s
            }
            Self::BreakawayRamp { rate, max_duty, .. } => max_duty / rate.max(1e-9),
            Self::Relay { seconds, .. } => *seconds,
            Self::Step { lead_s, seconds, .. } => lead_s + seconds,
        }
    }
}

/// Bounds every experiment runs within.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ExperimentBounds {
    /// Largest |position − start| allowed, units.
    pub travel: f64,
    /// Longest run, s.
    pub seconds: f64,
}

/// What the axis loop must do this frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Drive {
    /// Apply this duty, % (open loop).
    Duty(f64),
    /// Run the controller toward this target, units.
    Target(f64),
    /// Finished normally.
    Done,
    /// Stopped early (bound crossed).
    Abort,
}

/// How an experiment ended and what it recorded.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExperimentResult {
    /// What was run.
    pub spec: ExperimentSpec,
    /// Its bounds.
    pub bounds: ExperimentBounds,
    /// Every frame, oldest first; `t` is from the experiment's start.
    pub samples: Vec<Sample>,
    /// None when it ran to the end; otherwise why it stopped early.
    pub aborted: Option<String>,
    /// Breakaway ramp: duty (%) at the first frame with motion, if it moved.
    pub moved_at_duty: Option<f64>,
    /// Axis position at the start, units.
    pub start_position: f64,
}

/// One experiment in progress.
#[derive(Debug, Clone)]
pub struct ExperimentRun {
    spec: ExperimentSpec,
    bounds: ExperimentBounds,
    t0: Option<f64>,
    p0: f64,
    count0: i64,
    relay_high: bool,
    moved_at_duty: Option<f64>,
    aborted: Option<String>,
    samples: Vec<Sample>,
    unit: String,
}

/// Frames kept at most (a minute at 1 kHz), so a long experiment cannot grow without bound.
const MAX_SAMPLES: usize = 60_000;

impl ExperimentRun {
    /// A run starting at the axis's present position and count.
    pub fn new(
        spec: ExperimentSpec,
        bounds: ExperimentBounds,
        p0: f64,
        count0: i64,
        unit: &str,
    ) -> Self {
        Self {
            spec,
            bounds,
            t0: None,
            p0,
            count0,
            relay_high: true,
            moved_at_duty: None,
            aborted: None,
            samples: Vec::new(),
            unit: unit.to_owned(),
        }
    }

    /// What to apply for the frame at board time `t` with the measured `position`/`count`.
    pub fn drive(&mut self, t: f64, position: f64, count: i64) -> Drive {
        let t0 = *self.t0.get_or_insert(t);
        let te = t - t0;
        let u = &self.unit;
        if (position - self.p0).abs() > self.bounds.travel {
            self.aborted = Some(format!(
                "travel bound reached: moved {:.3} {u}, bound {} {u}",
                position - self.p0,
                self.bounds.travel
            ));
            return Drive::Abort;
        }
        if te > self.bounds.seconds {
            self.aborted = Some(format!("time bound reached: {} s", self.bounds.seconds));
            return Drive::Abort;
        }
        match &self.spec {
            ExperimentSpec::DutySteps { steps, settle_s } => {
                let mut edge = 0.0;
                for (duty, len) in steps {
                    edge += len;
                    if te < edge {
                        return Drive::Duty(*duty);
                    }
                }
                if te < edge + settle_s {
                    Drive::Duty(0.0)
                } else {
                    Drive::Done
                }
            }
            ExperimentSpec::BreakawayRamp { direction, rate, max_duty, motion_counts } => {
                if self.moved_at_duty.is_some() {
                    return Drive::Done;
                }
                let duty = (rate * te).min(*max_duty) * f64::from(direction.signum());
                if (count - self.count0).abs() >= *motion_counts {
                    // The duty that was applied while it started to move: the previous
                    // frame's, which is what the recorder holds last.
                    let applied = self.samples.last().map_or(duty, |s| s.duty);
                    self.moved_at_duty = Some(applied);
                    return Drive::Done;
                }
                if rate * te > *max_duty {
                    return Drive::Done;
                }
                Drive::Duty(duty)
            }
            ExperimentSpec::Relay { amplitude, hysteresis, seconds } => {
                if te >= *seconds {
                    return Drive::Done;
                }
                let e = self.p0 - position;
                if self.relay_high && e < -hysteresis {
                    self.relay_high = false;
                } else if !self.relay_high && e > *hysteresis {
                    self.relay_high = true;
                }
                Drive::Duty(if self.relay_high { *amplitude } else { -amplitude })
            }
            ExperimentSpec::Step { size, lead_s, seconds } => {
                if te >= lead_s + seconds {
                    Drive::Done
                } else if te >= *lead_s {
                    Drive::Target(self.p0 + size)
                } else {
                    Drive::Target(self.p0)
                }
            }
        }
    }

    /// Whether the controller runs (step) rather than open-loop duty.
    pub fn spec_closed_loop(&self) -> bool {
        self.spec.closed_loop()
    }

    /// Records the frame (call after the duty is known).
    pub fn record(&mut self, mut s: Sample) {
        if self.samples.len() < MAX_SAMPLES {
            s.t -= self.t0.unwrap_or(s.t);
            self.samples.push(s);
        }
    }

    /// The run's result.
    pub fn finish(self, aborted: Option<String>) -> ExperimentResult {
        ExperimentResult {
            spec: self.spec,
            bounds: self.bounds,
            samples: self.samples,
            aborted: aborted.or(self.aborted),
            moved_at_duty: self.moved_at_duty,
            start_position: self.p0,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::snapshot::AxisState;

    fn bounds() -> ExperimentBounds {
        ExperimentBounds { travel: 10.0, seconds: 5.0 }
    }

    fn sample(t: f64, duty: f64) -> Sample {
        Sample { t, duty, state: AxisState::Trialing, ..Sample::default() }
    }

    #[test]
    fn duty_steps_follow_their_schedule() {
        let spec =
            ExperimentSpec::DutySteps { steps: vec![(30.0, 0.1), (-30.0, 0.1)], settle_s: 0.1 };
        let mut r = ExperimentRun::new(spec, bounds(), 0.0, 0, "mm");
        assert_eq!(r.drive(1.0, 0.0, 0), Drive::Duty(30.0));
        assert_eq!(r.drive(1.15, 0.0, 0), Drive::Duty(-30.0));
        assert_eq!(r.drive(1.25, 0.0, 0), Drive::Duty(0.0));
        assert_eq!(r.drive(1.35, 0.0, 0), Drive::Done);
    }

    #[test]
    fn travel_and_time_bounds_abort() {
        let spec = ExperimentSpec::DutySteps { steps: vec![(30.0, 100.0)], settle_s: 0.0 };
        let mut r = ExperimentRun::new(spec.clone(), bounds(), 0.0, 0, "mm");
        assert_eq!(r.drive(0.0, 10.5, 0), Drive::Abort);
        assert!(r.finish(None).aborted.expect("reason").contains("travel bound"));
        let mut r = ExperimentRun::new(spec, bounds(), 0.0, 0, "mm");
        r.drive(0.0, 0.0, 0);
        assert_eq!(r.drive(5.5, 0.0, 0), Drive::Abort);
    }

    #[test]
    fn breakaway_reports_the_duty_applied_when_it_moved() {
        let spec = ExperimentSpec::BreakawayRamp {
            direction: -1,
            rate: 10.0,
            max_duty: 50.0,
            motion_counts: 3,
        };
        let mut r = ExperimentRun::new(spec, bounds(), 0.0, 100, "mm");
        let mut t = 0.0;
        let mut count = 100;
        loop {
            let d = r.drive(t, 0.0, count);
            let Drive::Duty(duty) = d else { break };
            r.record(sample(t, duty));
            if duty < -12.0 {
                count -= 1;
            }
            t += 0.01;
        }
        let res = r.finish(None);
        let moved = res.moved_at_duty.expect("moved");
        assert!((-15.0..=-12.0).contains(&moved), "{moved}");
    }

    #[test]
    fn relay_switches_with_hysteresis() {
        let spec = ExperimentSpec::Relay { amplitude: 40.0, hysteresis: 0.5, seconds: 10.0 };
        let mut r = ExperimentRun::new(spec, bounds(), 0.0, 0, "mm");
        assert_eq!(r.drive(0.0, 0.0, 0), Drive::Duty(40.0));
        assert_eq!(r.drive(0.1, 0.4, 0), Drive::Duty(40.0));
        assert_eq!(r.drive(0.2, 0.6, 0), Drive::Duty(-40.0));
        assert_eq!(r.drive(0.3, -0.4, 0), Drive::Duty(-40.0));
        assert_eq!(r.drive(0.4, -0.6, 0), Drive::Duty(40.0));
    }
}
