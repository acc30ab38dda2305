//! Link quality over a sliding window of frames: raises an event when the share of missed
//! and rejected frames passes a threshold, and one when it recovers.
//!
//! The link meter counts everything since start-up; an operator needs to hear when the link
//! is poor *now* (a loose cable, a busy USB hub), not to read a counter. Pure logic, fed by
//! the axis loop: [`LinkQuality::frame`] per telemetry frame with the ticks it accounts for,
//! [`LinkQuality::bad_frame`] per frame the decoder rejected.

use crate::engine::events::EventKind;

/// Share of bad or missed frames in a window that makes the link "poor".
pub const POOR_SHARE: f64 = 0.05;
/// Share below which a poor link counts as recovered (hysteresis: no event storm at the
/// threshold).
pub const RECOVERED_SHARE: f64 = 0.01;

/// The window's counts.
#[derive(Debug, Clone, Default)]
pub struct LinkQuality {
    /// Frames per window (one second of ticks).
    window: u64,
    expected: u64,
    missed: u64,
    bad: u64,
    poor: bool,
}

impl LinkQuality {
    /// A window of `tick_hz` frames (one second).
    pub fn new(tick_hz: u16) -> Self {
        Self { window: u64::from(tick_hz.max(1)), ..Self::default() }
    }

    /// Whether the last full window was poor.
    pub fn is_poor(&self) -> bool {
        self.poor
    }

    /// A frame the decoder rejected (CRC, framing).
    pub fn bad_frame(&mut self) {
        self.bad += 1;
    }

    /// A valid frame that accounts for `ticks` board ticks (1 + frames missed before it).
    /// At the end of a window, returns the event to raise, if the verdict changed.
    pub fn frame(&mut self, ticks: u32) -> Option<EventKind> {
        let ticks = u64::from(ticks.max(1));
        self.expected += ticks;
        self.missed += ticks - 1;
        if self.expected < self.window {
            return None;
        }
        // A rejected frame also leaves a gap in the sequence: count it once, as bad.
        let lost = self.missed.max(self.bad);
        let share = lost as f64 / self.expected as f64;
        let event = if !self.poor && share > POOR_SHARE {
            self.poor = true;
            Some(EventKind::LinkQuality {
                missed: self.missed.saturating_sub(self.bad),
                bad: self.bad,
                window: self.expected,
                poor: true,
            })
        } else if self.poor && share < RECOVERED_SHARE {
            self.poor = false;
            Some(EventKind::LinkQuality {
                missed: self.missed.saturating_sub(self.bad),
                bad: self.bad,
                window: self.expected,
                poor: false,
            })
        } else {
            None
        };
        self.expected = 0;
        self.missed = 0;
        self.bad = 0;
        event
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn poor(e: &Option<EventKind>) -> Option<bool> {
        match e {
            Some(EventKind::LinkQuality { poor, .. }) => Some(*poor),
            _ => None,
        }
    }

    // Thresholds are servotty's own (common practice, no source): 5 % lost in a second is
    // worth telling the operator; 1 % or less is normal again.
    #[test]
    fn a_quarter_of_frames_lost_is_reported_once_and_its_recovery_once() {
        let mut q = LinkQuality::new(1000);
        let mut events = Vec::new();
        // 25 % loss: every 4th tick missing (a frame accounting for 4 ticks every 3 frames).
        for k in 0..3000 {
            let e = q.frame(if k % 3 == 2 { 2 } else { 1 });
            events.extend(poor(&e));
        }
        assert_eq!(events, [true], "one event for the poor stretch");
        for _ in 0..3000 {
            events.extend(poor(&q.frame(1)));
        }
        assert_eq!(events, [true, false]);
    }

    #[test]
    fn corrupt_frames_count_as_bad() {
        let mut q = LinkQuality::new(100);
        let mut last = None;
        for k in 0..100 {
            if k % 10 == 0 {
                q.bad_frame();
                last = q.frame(2).or(last);
            } else {
                last = q.frame(1).or(last);
            }
        }
        let Some(EventKind::LinkQuality { bad, missed, poor: true, .. }) = last else {
            panic!("{last:?}")
        };
        assert_eq!((bad, missed), (10, 0));
    }

    #[test]
    fn occasional_loss_is_not_an_event() {
        let mut q = LinkQuality::new(1000);
        for k in 0..10_000 {
            assert_eq!(q.frame(if k % 100 == 0 { 2 } else { 1 }), None);
        }
    }
}
