//! Commissioning analysis: from recorded experiments on an axis to a model, gains and step
//! metrics. Everything here is a pure function of plain slices of samples; running the
//! bounded experiments on a live axis (pulses, ramps, relay, steps) is the engine's job, and
//! the engine hands the recorded rows to these functions.
//!
//! - [`ident`]: the first-order velocity model (gain, time constant, friction offset, delay)
//!   fitted to an open-loop duty experiment, with its fit quality; the breakaway duty from a
//!   slow duty ramp.
//! - [`relay`]: the steady oscillation of a relay-feedback experiment, and the ultimate gain
//!   and period it implies.
//! - [`rules`]: Ziegler–Nichols and Tyreus–Luyben settings from the ultimate gain and period,
//!   and the conversion of ideal-form settings to servotty's parallel gains.
//! - [`suggest`]: a `[axis.controller]` patch with its reasoning, from the identified model
//!   (SIMC rules and model-based feedforward) or from a relay result (a rule above).
//! - [`columns`]: named numeric columns of a recorded CSV (for `analyze relay|identify`).
//! - [`compare`]: the current gains' closed-loop step against a suggestion's, and when the
//!   suggestion counts as worse.
//! - [`report`]: step records (CSV in and out, SVG plot), finding the step, and the metrics
//!   summary as text or JSON (metrics from [`crate::control::step_metrics`]).
//!
//! docs/tuning.md is the practitioner's guide that goes with this module.

pub mod columns;
pub mod compare;
pub mod ident;
pub mod relay;
pub mod report;
pub mod rules;
pub mod suggest;
