//! Link measurements for one axis: frame counts, lost and bad frames, frame rate, and the
//! host's turnaround (frame read → command written).
//!
//! Turnaround goes into a streaming histogram (`hdrhistogram`): a fixed ~90 KB per axis
//! whatever the run's length, one counter increment per frame, and percentiles read off the
//! buckets when a report is asked for. Nothing is stored per sample and nothing is sorted.

use std::time::Duration;

use hdrhistogram::Histogram;
use serde::Serialize;

use crate::engine::snapshot::LinkStats;

/// Largest turnaround the histogram resolves, µs; longer ones count as this (a reply a second
/// late is a lost link anyway). The exact maximum is kept beside the histogram.
const HIGHEST_US: u64 = 1_000_000;
/// Significant decimal digits kept: values up to 2047 µs are exact, above that within 0.1 %.
const SIGNIFICANT_DIGITS: u8 = 3;

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
#[derive(Debug)]
pub struct LinkMeter {
    total: LinkStats,
    window_frames: u64,
    window_bad: u64,
    window_missed: u64,
    window_start_t: Option<f64>,
    last_t: f64,
    turnaround: Option<Histogram<u64>>,
    window_max_us: u32,
    rate_mark: Option<(f64, u64)>,
}

impl Default for LinkMeter {
    fn default() -> Self {
        Self {
            total: LinkStats::default(),
            window_frames: 0,
            window_bad: 0,
            window_missed: 0,
            window_start_t: None,
            last_t: 0.0,
            turnaround: turnaround_histogram(),
            window_max_us: 0,
            rate_mark: None,
        }
    }
}

/// An empty turnaround histogram, 0…[`HIGHEST_US`] µs.
///
/// The bounds are constants the crate accepts (a unit test holds it to that); `None` would
/// only mean empty reports, never a panic on the frame path.
fn turnaround_histogram() -> Option<Histogram<u64>> {
    Histogram::new_with_bounds(1, HIGHEST_US, SIGNIFICANT_DIGITS).ok()
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
        let us = u64::try_from(d.as_micros()).unwrap_or(u64::MAX);
        if let Some(h) = &mut self.turnaround {
            h.saturating_record(us.min(HIGHEST_US));
        }
        self.window_max_us = self.window_max_us.max(u32::try_from(us).unwrap_or(u32::MAX));
    }

    /// Counters for the snapshot.
    pub fn stats(&self) -> LinkStats {
        self.total
    }

    /// The window's report; `reset` starts a new window.
    pub fn report(&mut self, reset: bool) -> LinkReport {
        let h = self.turnaround.as_ref();
        // Nearest rank (common practice, no source): the crate walks the buckets to the
        // ceil(q·n)-th sample and reports the top of that sample's bucket: exact up to 2047 µs.
        let pick = |q: f64| -> u32 {
            match h {
                Some(h) if !h.is_empty() => {
                    u32::try_from(h.value_at_quantile(q)).unwrap_or(u32::MAX)
                }
                _ => 0,
            }
        };
        let report = LinkReport {
            frames: self.window_frames,
            board_seconds: self.window_start_t.map_or(0.0, |t0| self.last_t - t0),
            bad_frames: self.window_bad,
            missed: self.window_missed,
            turnaround_us: Turnaround { p50: pick(0.50), p99: pick(0.99), max: self.window_max_us },
            samples: h.map_or(0, |h| usize::try_from(h.len()).unwrap_or(usize::MAX)),
        };
        if reset {
            self.window_frames = 0;
            self.window_bad = 0;
            self.window_missed = 0;
            self.window_start_t = None;
            if let Some(h) = &mut self.turnaround {
                h.reset();
            }
            self.window_max_us = 0;
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
    fn the_histogram_bounds_are_accepted() {
        assert!(turnaround_histogram().is_some());
    }

    #[test]
    fn long_runs_keep_every_sample_and_the_exact_maximum() {
        // Far beyond the 120 000 samples the meter once kept: nothing is dropped.
        let mut m = LinkMeter::default();
        for i in 0..300_000u64 {
            m.turnaround(Duration::from_micros(if i % 100 == 99 { 40 } else { 8 }));
        }
        m.turnaround(Duration::from_micros(1_234_567));
        let r = m.report(false);
        assert_eq!(r.samples, 300_001);
        assert_eq!(r.turnaround_us, Turnaround { p50: 8, p99: 40, max: 1_234_567 });
    }

    #[test]
    fn above_2047_us_percentiles_are_within_a_tenth_of_a_percent() {
        let mut m = LinkMeter::default();
        for _ in 0..10 {
            m.turnaround(Duration::from_micros(5_000));
        }
        let p50 = m.report(true).turnaround_us.p50;
        assert!((5_000..=5_005).contains(&p50), "{p50}");
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
