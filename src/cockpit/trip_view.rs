//! The trip screen's data: one axis's full-rate history fetched from the engine at the
//! operator's request, with its diagnosis ([`crate::diagnosis`]) worked out once when it
//! arrives, so drawing stays a pure function of the app.

use crate::config::AxisConfig;
use crate::diagnosis::{diagnose, Diagnosis, TripRecord};
use crate::engine::history::Sample;
use crate::engine::snapshot::Trip;

/// What the trip screen shows.
#[derive(Debug, Clone, PartialEq)]
pub struct TripView {
    /// Axis index.
    pub axis: usize,
    /// The history as the diagnosis read it.
    pub record: TripRecord,
    /// Its verdict.
    pub diagnosis: Diagnosis,
}

impl TripView {
    /// Diagnoses `rows` of axis `axis` (configured as `cfg`, tripped with `trip` if it is).
    pub fn new(axis: usize, cfg: &AxisConfig, rows: Vec<Sample>, trip: Option<&Trip>) -> Self {
        let record = TripRecord::from_history(cfg, rows, trip);
        let diagnosis = diagnose(&record);
        Self { axis, record, diagnosis }
    }
}
