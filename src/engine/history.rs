//! Full-rate telemetry history of one axis: the last N seconds of every frame, kept so that a
//! trip capture can show what led up to the trip.
//!
//! A fixed-capacity ring filled in the frame handler (one copy of a small `Copy` struct, no
//! allocation after start-up); copied out only when a capture is asked for.
//!
//! Each row holds the evidence a trip diagnosis needs (see [`crate::diagnosis`]): besides the
//! loop's values, what the board said (count, board clock, status and input bits, frames lost
//! before this one) and what the controller did with it (its P, I, D and feedforward parts and
//! whether the output hit its limit). About 130 bytes a row: 10 s at 1 kHz is 1.3 MB an axis.

use std::collections::VecDeque;

use serde::Serialize;

use crate::engine::snapshot::AxisState;

/// One frame's values.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Sample {
    /// Board time, s.
    pub t: f64,
    /// Profile setpoint, units.
    pub target: f64,
    /// Measured position, units.
    pub position: f64,
    /// target − position, units.
    pub following_error: f64,
    /// Duty commanded for the next interval, %.
    pub duty: f64,
    /// Estimated velocity, unit/s.
    pub velocity: f64,
    /// State after the frame.
    pub state: AxisState,
    /// Encoder count as the host has unwrapped it (after `invert_encoder`), counts.
    pub count: i64,
    /// The board's own clock in the frame, µs (32 bits, wraps).
    pub board_time_us: u32,
    /// Telemetry frames lost between the previous frame and this one (sequence gap − 1).
    pub missed_frames: u32,
    /// The board's status bits ([`crate::protocol::status`]).
    pub status: u8,
    /// The board's input bits ([`crate::protocol::inputs`]).
    pub inputs: u8,
    /// Profile velocity at this instant, unit/s.
    pub target_velocity: f64,
    /// Profile acceleration at this instant, unit/s².
    pub target_acceleration: f64,
    /// Following-error band at the profile velocity, units.
    pub band: f64,
    /// Controller proportional part, %.
    pub p: f64,
    /// Controller integral part, %.
    pub i: f64,
    /// Controller derivative part, %.
    pub d: f64,
    /// Controller feedforward part, %.
    pub ff: f64,
    /// True when the controller's output was cut to its duty limit.
    pub saturated: bool,
}

impl Default for Sample {
    fn default() -> Self {
        Self {
            t: 0.0,
            target: 0.0,
            position: 0.0,
            following_error: 0.0,
            duty: 0.0,
            velocity: 0.0,
            state: AxisState::Offline,
            count: 0,
            board_time_us: 0,
            missed_frames: 0,
            status: 0,
            inputs: 0,
            target_velocity: 0.0,
            target_acceleration: 0.0,
            band: 0.0,
            p: 0.0,
            i: 0.0,
            d: 0.0,
            ff: 0.0,
            saturated: false,
        }
    }
}

/// The ring.
#[derive(Debug, Clone)]
pub struct History {
    rows: VecDeque<Sample>,
    capacity: usize,
}

impl History {
    /// A ring holding `seconds` at `tick_hz`.
    pub fn new(seconds: f64, tick_hz: u16) -> Self {
        let capacity = ((seconds * f64::from(tick_hz)).ceil() as usize).max(1);
        Self { rows: VecDeque::with_capacity(capacity), capacity }
    }

    /// Adds a frame, dropping the oldest when full.
    pub fn push(&mut self, s: Sample) {
        if self.rows.len() == self.capacity {
            self.rows.pop_front();
        }
        self.rows.push_back(s);
    }

    /// A copy of the rows, oldest first.
    pub fn to_vec(&self) -> Vec<Sample> {
        self.rows.iter().copied().collect()
    }

    /// Rows held.
    pub fn len(&self) -> usize {
        self.rows.len()
    }

    /// True when empty.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keeps_the_newest_rows() {
        let mut h = History::new(0.005, 1000);
        for k in 0..8 {
            h.push(Sample { t: f64::from(k), state: AxisState::Steady, ..Sample::default() });
        }
        let v = h.to_vec();
        assert_eq!(v.len(), 5);
        assert_eq!(v[0].t, 3.0);
        assert_eq!(v[4].t, 7.0);
    }
}
