//! The event log: trips with their values, operator actions, link changes and state changes,
//! each with the cockpit time it was seen.
//!
//! Bounded, and an entry identical to the previous one within a few seconds is counted
//! (`×3`) instead of repeated, so a held key or a flapping link cannot push everything else
//! out. Every entry is also written to the log file, whose lines carry wall-clock time.

use std::collections::VecDeque;
use std::fmt::Write as _;
use std::time::Duration;

/// Entries kept on screen.
const CAPACITY: usize = 1000;
/// Identical entries closer than this are folded into one.
const FOLD_WINDOW: Duration = Duration::from_secs(3);

/// What kind of event, for colour and filtering.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// A supervision trip.
    Trip,
    /// Something the operator did.
    Operator,
    /// A command the engine refused, or a failure.
    Refused,
    /// Link up, down, bad frames.
    Link,
    /// A state change.
    State,
    /// Anything else worth knowing.
    Info,
}

impl Kind {
    /// Short tag shown before the text (so the log reads without colour).
    pub fn tag(self) -> &'static str {
        match self {
            Self::Trip => "TRIP",
            Self::Operator => "op",
            Self::Refused => "FAIL",
            Self::Link => "link",
            Self::State => "state",
            Self::Info => "info",
        }
    }
}

/// One line of the log.
#[derive(Debug, Clone, PartialEq)]
pub struct Entry {
    /// Cockpit time, since start.
    pub at: Duration,
    /// Kind.
    pub kind: Kind,
    /// The text, axis name first when it concerns one axis.
    pub text: String,
    /// How many times it happened in a row (1 normally).
    pub count: u32,
    /// Local time of day at cockpit time zero, s since midnight (0 in tests: the clock then
    /// reads as time since start).
    pub day_origin_s: f64,
}

impl Entry {
    /// `hh:mm:ss.d`, the local time of day (one clock for everything a person reads; files
    /// carry the date).
    pub fn clock(&self) -> String {
        let day_ms = 86_400_000_u128;
        let origin_ms = (self.day_origin_s.max(0.0) * 1000.0) as u128;
        let ds = (origin_ms + self.at.as_millis()) % day_ms / 100;
        let (h, m, s, d) = (ds / 36_000, ds / 600 % 60, ds / 10 % 60, ds % 10);
        format!("{h:02}:{m:02}:{s:02}.{d}")
    }

    /// The text with its repeat count.
    pub fn text_with_count(&self) -> String {
        let mut t = self.text.clone();
        if self.count > 1 {
            let _ = write!(t, " (×{})", self.count);
        }
        t
    }
}

/// The log.
#[derive(Debug, Clone, Default)]
pub struct EventLog {
    entries: VecDeque<Entry>,
    day_origin_s: f64,
}

impl EventLog {
    /// Sets the local time of day at cockpit time zero (s since midnight), for every entry.
    pub fn set_day_origin(&mut self, seconds: f64) {
        self.day_origin_s = seconds;
        for e in &mut self.entries {
            e.day_origin_s = seconds;
        }
    }

    /// Adds an entry at time `at`.
    pub fn push(&mut self, at: Duration, kind: Kind, text: impl Into<String>) {
        let text = text.into();
        tracing::info!(target: "servotty::cockpit::event", kind = kind.tag(), "{text}");
        if let Some(last) = self.entries.back_mut() {
            if last.kind == kind && last.text == text && at.saturating_sub(last.at) < FOLD_WINDOW {
                last.count += 1;
                last.at = at;
                return;
            }
        }
        if self.entries.len() == CAPACITY {
            self.entries.pop_front();
        }
        self.entries.push_back(Entry { at, kind, text, count: 1, day_origin_s: self.day_origin_s });
    }

    /// Entries held, oldest first.
    pub fn entries(&self) -> &VecDeque<Entry> {
        &self.entries
    }

    /// Entries held.
    pub fn len(&self) -> usize {
        self.entries.len()
    }

    /// True when empty.
    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }

    /// The newest entry.
    pub fn last(&self) -> Option<&Entry> {
        self.entries.back()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn repeats_fold_and_clock_reads_naturally() {
        let mut log = EventLog::default();
        let s = Duration::from_secs;
        log.push(s(1), Kind::Info, "jog/home not available yet");
        log.push(s(2), Kind::Info, "jog/home not available yet");
        log.push(s(9), Kind::Info, "jog/home not available yet");
        assert_eq!(log.len(), 2);
        assert_eq!(log.entries()[0].text_with_count(), "jog/home not available yet (×2)");
        let e = Entry {
            at: Duration::from_millis(3_723_450),
            kind: Kind::Info,
            text: String::new(),
            count: 1,
            day_origin_s: 0.0,
        };
        assert_eq!(e.clock(), "01:02:03.4");
        // Started at 23:59:00 local: the clock wraps at midnight.
        let late = Entry { day_origin_s: 86_340.0, at: Duration::from_secs(90), ..e };
        assert_eq!(late.clock(), "00:00:30.0");
    }

    #[test]
    fn bounded() {
        let mut log = EventLog::default();
        for i in 0..(CAPACITY + 10) {
            log.push(Duration::ZERO, Kind::Info, i.to_string());
        }
        assert_eq!(log.len(), CAPACITY);
        assert_eq!(log.entries()[0].text, "10");
    }
}
