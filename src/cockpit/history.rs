//! Per-axis ring buffers of sampled values for sparklines and charts.
//!
//! The cockpit samples each axis's latest snapshot once per frame, so these hold what the
//! operator saw, not every control tick: a history kept by the engine at the board's tick
//! would show the milliseconds before a trip, which frame sampling cannot.
//!
//! Sparklines read an aligned, decimated view: it only changes when a sample whose sequence
//! number is a multiple of the stride arrives, so a sparkline scrolls a few times a second
//! instead of every frame and costs few bytes on a slow link.

use std::collections::VecDeque;

use crate::engine::AxisSnapshot;

/// One sampled moment.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Sample {
    /// Cockpit time, s since start.
    pub t: f64,
    /// Measured position, units.
    pub position: f64,
    /// Profile setpoint, units.
    pub target: f64,
    /// Following error, units.
    pub following_error: f64,
    /// Following-error band at that moment, units.
    pub band: f64,
    /// Duty, %.
    pub duty: f64,
    /// False while the axis was offline (values meaningless).
    pub linked: bool,
}

impl Sample {
    /// The sample for a snapshot taken at `t`.
    pub fn of(t: f64, s: &AxisSnapshot) -> Self {
        Self {
            t,
            position: s.position,
            target: s.target,
            following_error: s.following_error,
            band: s.following_error_band,
            duty: s.duty,
            linked: s.state != crate::engine::AxisState::Offline,
        }
    }
}

/// A bounded history.
#[derive(Debug, Clone)]
pub struct History {
    buf: VecDeque<Sample>,
    cap: usize,
    /// Samples ever pushed: the sequence number of the next one.
    pushed: u64,
}

impl History {
    /// An empty history keeping at most `cap` samples.
    pub fn new(cap: usize) -> Self {
        Self { buf: VecDeque::with_capacity(cap), cap: cap.max(1), pushed: 0 }
    }

    /// Adds a sample, dropping the oldest when full.
    pub fn push(&mut self, s: Sample) {
        if self.buf.len() == self.cap {
            self.buf.pop_front();
        }
        self.buf.push_back(s);
        self.pushed += 1;
    }

    /// Samples held.
    pub fn len(&self) -> usize {
        self.buf.len()
    }

    /// True when nothing has been sampled.
    pub fn is_empty(&self) -> bool {
        self.buf.is_empty()
    }

    /// The newest sample.
    pub fn last(&self) -> Option<&Sample> {
        self.buf.back()
    }

    /// Samples no older than `t0`, oldest first.
    pub fn since(&self, t0: f64) -> impl Iterator<Item = &Sample> {
        let start = self.buf.partition_point(|s| s.t < t0);
        self.buf.range(start..)
    }

    /// At most `n` samples, newest last, taking only those whose sequence number is a multiple
    /// of `stride` (so the view is stable between stride boundaries).
    pub fn aligned(&self, stride: u64, n: usize) -> impl Iterator<Item = &Sample> {
        let stride = stride.max(1);
        let first_seq = self.pushed - self.buf.len() as u64;
        // Index of the newest aligned sample, then walk back `n` strides.
        let newest_aligned = (self.pushed.saturating_sub(1) / stride) * stride;
        let oldest_wanted =
            newest_aligned.saturating_sub(stride * (n as u64).saturating_sub(1)).max(first_seq);
        let oldest_aligned = oldest_wanted.div_ceil(stride) * stride;
        let start = usize::try_from(oldest_aligned.saturating_sub(first_seq)).unwrap_or(usize::MAX);
        let count = if self.buf.is_empty() || n == 0 || newest_aligned < first_seq {
            0
        } else {
            usize::try_from((newest_aligned - oldest_aligned) / stride + 1).unwrap_or(0)
        };
        self.buf.range(start.min(self.buf.len())..).step_by(stride as usize).take(count)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample(t: f64) -> Sample {
        Sample {
            t,
            position: t,
            target: t,
            following_error: 0.0,
            band: 1.0,
            duty: 0.0,
            linked: true,
        }
    }

    #[test]
    fn keeps_the_newest() {
        let mut h = History::new(3);
        for i in 0..5 {
            h.push(sample(f64::from(i)));
        }
        assert_eq!(h.len(), 3);
        assert_eq!(h.since(0.0).map(|s| s.t).collect::<Vec<_>>(), [2.0, 3.0, 4.0]);
        assert_eq!(h.since(3.5).count(), 1);
    }

    #[test]
    fn aligned_view_only_moves_on_stride_boundaries() {
        let mut h = History::new(100);
        for i in 0..23 {
            h.push(sample(f64::from(i)));
        }
        // Sequence numbers 0..=22; stride 5 → 5, 10, 15, 20 (last 4).
        let v: Vec<f64> = h.aligned(5, 4).map(|s| s.t).collect();
        assert_eq!(v, [5.0, 10.0, 15.0, 20.0]);
        h.push(sample(23.0));
        h.push(sample(24.0));
        assert_eq!(h.aligned(5, 4).map(|s| s.t).collect::<Vec<_>>(), v);
        h.push(sample(25.0));
        assert_eq!(h.aligned(5, 4).map(|s| s.t).collect::<Vec<_>>(), [10.0, 15.0, 20.0, 25.0]);
    }

    #[test]
    fn aligned_view_respects_what_was_dropped() {
        let mut h = History::new(7);
        for i in 0..23 {
            h.push(sample(f64::from(i)));
        }
        // Held: 16..=22; aligned to 5 → 20 only (15 was dropped).
        assert_eq!(h.aligned(5, 10).map(|s| s.t).collect::<Vec<_>>(), [20.0]);
        assert_eq!(History::new(4).aligned(5, 10).count(), 0);
        assert_eq!(h.aligned(1, 3).map(|s| s.t).collect::<Vec<_>>(), [20.0, 21.0, 22.0]);
    }
}
