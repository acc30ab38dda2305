//! Link measurements for one axis: frame counts, lost and bad frames, frame rate, and the
//! host's turnaround (frame read → command written).
//!
//! Turnaround samples go into a bounded buffer so that a long run cannot grow memory; the
//! percentiles are computed when a report is asked for, off the per-frame path.

use std::time::Duration;

use serde::Serialize;

use crate::engine::snapshot::LinkStats;

/// At most this many turnaround samples are kept per report window (≈ 2 min at 1 kHz).
const MAX_SAMPLES: usize = 120_000;

/// Percentiles of host turnaround, µs.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct Turnaround {
    /// Median.
    pub p50: u32,
    /// 99th percentile.
    pub p99: u32,
    /// Largest.
    pub max: u32,
}

/// One report window's measurements.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct LinkReport {
    /// Valid telemetry frames in the window.
    pub frames: u64,
    /// Board time covered by the window, s.
    pub board_seconds: f64,
    /// Frames rejected by the decoder.
    pub bad_frames: u64,
    /// Telemetry sequence numbers skipped.
    pub missed: u64,
    /// Host turnaround.
    pub turnaround_us: Turnaround,
    /// Turnaround samples in the window.
    pub samples: usize,
}

/// Running counters.
#[derive(Debug, Default)]
pub struct LinkMeter {
    total: LinkStats,
    window_frames: u64,
    window_bad: u64,
    window_missed: u64,
    window_start_t: Option<f64>,
    last_t: f64,
    samples: Vec<u32>,
    rate_mark: Option<(f64, u64)>,
}

impl LinkMeter {
    /// A handshake completed.
    pub fn link_up(&mut self) {
        self.total.link_ups += 1;
    }

    /// A valid telemetry frame `ticks` after the previous one, at board time `t` (s).
    pub fn frame(&mut self, ticks: u32, t: f64) {
        self.total.frames += 1;
        self.window_frames += 1;
        if ticks > 1 {
            let lost = u64::from(ticks - 1);
            self.total.missed += lost;
            self.window_missed += lost;
        }
        self.window_start_t.get_or_insert(t);
        self.last_t = t;
        match self.rate_mark {
            None => self.rate_mark = Some((t, self.total.frames)),
            Some((t0, n0)) if t - t0 >= 1.0 => {
                self.total.frames_per_s = (self.total.frames - n0) as f64 / (t - t0);
                self.rate_mark = Some((t, self.total.frames));
            }
            Some(_) => {}
        }
    }

    /// A frame the decoder rejected.
    pub fn bad_frame(&mut self) {
        self.total.bad_frames += 1;
        self.window_bad += 1;
    }

    /// Time from a read completing to the answer being written.
    pub fn turnaround(&mut self, d: Duration) {
        if self.samples.len() < MAX_SAMPLES {
            self.samples.push(u32::try_from(d.as_micros()).unwrap_or(u32::MAX));
        }
    }

    /// Counters for the snapshot.
    pub fn stats(&self) -> LinkStats {
        self.total
    }

    /// The window's report; `reset` starts a new window.
    pub fn report(&mut self, reset: bool) -> LinkReport {
        let mut sorted = self.samples.clone();
        sorted.sort_unstable();
        let pick = |q: f64| -> u32 {
            if sorted.is_empty() {
                return 0;
            }
            // Nearest-rank percentile (common practice, no source).
            let rank = ((q * sorted.len() as f64).ceil() as usize).clamp(1, sorted.len());
            sorted[rank - 1]
        };
        let report = LinkReport {
            frames: self.window_frames,
            board_seconds: self.window_start_t.map_or(0.0, |t0| self.last_t - t0),
            bad_frames: self.window_bad,
            missed: self.window_missed,
            turnaround_us: Turnaround {
                p50: pick(0.50),
                p99: pick(0.99),
                max: sorted.last().copied().unwrap_or(0),
            },
            samples: sorted.len(),
        };
        if reset {
            self.window_frames = 0;
            self.window_bad = 0;
            self.window_missed = 0;
            self.window_start_t = None;
            self.samples.clear();
        }
        report
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn percentiles_by_nearest_rank() {
        let mut m = LinkMeter::default();
        for us in 1..=100 {
            m.turnaround(Duration::from_micros(us));
        }
        let r = m.report(true);
        assert_eq!(r.turnaround_us, Turnaround { p50: 50, p99: 99, max: 100 });
        assert_eq!(m.report(false).samples, 0);
    }

    #[test]
    fn missed_counts_sequence_gaps() {
        let mut m = LinkMeter::default();
        m.frame(1, 0.0);
        m.frame(3, 0.003);
        assert_eq!(m.stats().missed, 2);
        assert_eq!(m.stats().frames, 2);
    }
}
