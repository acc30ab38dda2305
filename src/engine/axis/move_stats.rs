//! Per-move statistics: how many moves finished, and the latest one's peak following error
//! and settling time — what `move` prints and the cockpit shows.

/// Statistics of the moves an axis made (board time, s; axis units).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct MoveStats {
    /// The last move reached its goal and dwelt there; cleared when motion starts again.
    pub in_position: bool,
    /// Moves that reached their goal since the task started.
    pub moves_done: u64,
    /// Largest |following error| of the present (or last) move, units.
    pub peak_following_error: f64,
    /// Start of the move to in-position, s, of the last finished move.
    pub settle_s: Option<f64>,
    /// Board time the present move started, s.
    started_at: f64,
}

impl MoveStats {
    /// A move (or homing) starts at board time `t`.
    pub fn start(&mut self, t: f64) {
        self.in_position = false;
        self.started_at = t;
        self.peak_following_error = 0.0;
    }

    /// Motion of another kind starts (a jog, a stop, a test): no longer in position.
    pub fn leave(&mut self) {
        self.in_position = false;
    }

    /// One frame of the running move.
    pub fn observe(&mut self, following_error: f64) {
        self.peak_following_error = self.peak_following_error.max(following_error.abs());
    }

    /// The move reached its goal and dwelt there, at board time `t`.
    pub fn arrived(&mut self, t: f64) {
        self.in_position = true;
        self.moves_done += 1;
        self.settle_s = Some(t - self.started_at);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_move_keeps_its_peak_and_settling_time() {
        let mut m = MoveStats::default();
        m.start(2.0);
        for fe in [0.1, -0.7, 0.3] {
            m.observe(fe);
        }
        assert!(!m.in_position);
        m.arrived(3.5);
        assert_eq!((m.moves_done, m.in_position), (1, true));
        assert!((m.peak_following_error - 0.7).abs() < 1e-12);
        assert_eq!(m.settle_s, Some(1.5));
        m.start(4.0);
        assert!(!m.in_position);
        assert_eq!(m.peak_following_error, 0.0);
        // The last finished move's settling time stays until the next one finishes.
        assert_eq!(m.settle_s, Some(1.5));
    }
}
