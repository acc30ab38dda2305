//! Machine events: state changes, trips, operator actions, link changes, homing results.
//!
//! Events are rare (a handful per second at most) and go out on a `broadcast` channel to
//! whoever listens: the cockpit's event panel and the recorder that writes the event log.
//! Per-frame data never goes here; that is what snapshots and the history ring are for.

use std::sync::Arc;
use std::time::{SystemTime, UNIX_EPOCH};

use serde::Serialize;

use crate::engine::snapshot::{AxisState, Trip};

/// Events buffered per listener before the slowest one starts missing them.
pub const EVENT_BUFFER: usize = 1024;

/// One event.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Event {
    /// Wall-clock time, RFC 3339 UTC with milliseconds.
    pub time: String,
    /// The axis concerned, or none for machine-wide events.
    pub axis: Option<Arc<str>>,
    /// Board time of the axis, s, when known (written to the microsecond: the board's clock
    /// counts whole microseconds).
    #[serde(serialize_with = "to_micros")]
    pub board_t: Option<f64>,
    /// What happened.
    #[serde(flatten)]
    pub kind: EventKind,
}

/// What happened.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "event", rename_all = "snake_case")]
pub enum EventKind {
    /// The axis state changed.
    State {
        /// Old state.
        from: AxisState,
        /// New state.
        to: AxisState,
    },
    /// A trip latched.
    Trip {
        /// Cause and values.
        trip: Trip,
    },
    /// An operator command, accepted or refused.
    Operator {
        /// The command in words.
        action: String,
        /// Whether it was accepted.
        accepted: bool,
        /// Why it was refused.
        reason: Option<String>,
    },
    /// The link came up or went down.
    Link {
        /// Up or down.
        up: bool,
        /// Details.
        detail: String,
    },
    /// Homing finished.
    Homed {
        /// Position value at the end of homing, units.
        position: f64,
        /// Method used.
        method: String,
    },
    /// Something the operator should know (e.g. homing method "none").
    Notice {
        /// The sentence.
        text: String,
    },
    /// A trip capture was written.
    Capture {
        /// Where.
        path: String,
    },
    /// Controller parameters changed while the axis runs (live tuning), old → new.
    Gains {
        /// One `key old → new` per changed key.
        changes: Vec<String>,
        /// Who changed them.
        by: ChangedBy,
    },
    /// The link's quality over the last window of frames fell below the threshold, or
    /// recovered.
    LinkQuality {
        /// Frames lost (missing sequence numbers) in the window.
        missed: u64,
        /// Frames rejected by the decoder in the window.
        bad: u64,
        /// Frames expected in the window.
        window: u64,
        /// True when the window was poor; false for the recovery.
        poor: bool,
    },
    /// The recorder could not write the event log or a capture.
    RecorderFailed {
        /// What could not be written, and why.
        what: String,
    },
    /// A signal from outside ended the command; every motor is being turned off.
    Interrupted {
        /// `SIGINT`, `SIGTERM` or `SIGHUP`.
        signal: String,
    },
    /// An axis task ended (returned or panicked) while the machine was running: the axis is
    /// offline until the machine restarts, and its board's watchdog turns its motor off.
    AxisEnded {
        /// Why, in words.
        reason: String,
    },
}

/// Who changed an axis's controller while it runs: every live change says so in its
/// [`EventKind::Gains`] event, so a trip after a change can be traced to the hand or the step
/// that made it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ChangedBy {
    /// A value typed into the cockpit's gain editor.
    CockpitEdit,
    /// The cockpit's key that applies a tuning step's suggested gains.
    CockpitSuggestion,
    /// `servotty tune … --apply` (or `--save`) putting verified gains on the running axis.
    TuneApply,
    /// A verification step trying suggested gains on the axis, and putting the current ones
    /// back after.
    Verification,
    /// Full tuning (`tune all`) running its step report with the gains it settled on,
    /// and putting the current ones back after.
    FullTuning,
    /// Anything else that sends new gains (a program using the library, a unit test).
    Other,
}

impl std::fmt::Display for ChangedBy {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Self::CockpitEdit => "cockpit edit",
            Self::CockpitSuggestion => "cockpit (suggestion applied)",
            Self::TuneApply => "tune --apply",
            Self::Verification => "verification step",
            Self::FullTuning => "full tuning",
            Self::Other => "another caller",
        })
    }
}

impl Event {
    /// An event stamped now.
    pub fn now(axis: Option<Arc<str>>, board_t: Option<f64>, kind: EventKind) -> Self {
        Self { time: rfc3339_utc(SystemTime::now()), axis, board_t, kind }
    }

    /// One line for screens.
    pub fn summary(&self) -> String {
        let who = self.axis.as_deref().unwrap_or("machine");
        let what = self.what();
        let clock = self.time.get(11..19).unwrap_or("");
        format!("{clock} {who}: {what}")
    }

    /// What happened, in words (no time, no axis).
    pub fn what(&self) -> String {
        match &self.kind {
            EventKind::State { from, to } => format!("{from} → {to}"),
            EventKind::Trip { trip } => format!("TRIP {}: {}", trip.cause, trip.detail),
            EventKind::Operator { action, accepted: true, .. } => action.clone(),
            EventKind::Operator { action, reason, .. } => {
                format!("{action} refused: {}", reason.as_deref().unwrap_or(""))
            }
            EventKind::Link { up, detail } => {
                format!("link {} {detail}", if *up { "up" } else { "down" })
            }
            EventKind::Homed { position, method } => format!("homed ({method}) at {position:.3}"),
            EventKind::Notice { text } => text.clone(),
            EventKind::Capture { path } => format!("capture written: {path}"),
            EventKind::Interrupted { signal } => format!("interrupted by {signal}: motors off"),
            EventKind::Gains { changes, by } => {
                format!("gains changed live by {by}: {}", changes.join(", "))
            }
            EventKind::LinkQuality { missed, bad, window, poor: true } => {
                format!("poor link: {missed} missed and {bad} bad of the last {window} frames")
            }
            EventKind::LinkQuality { window, .. } => {
                format!("link quality back to normal over the last {window} frames")
            }
            EventKind::RecorderFailed { what } => format!("RECORDER FAILED: {what}"),
            EventKind::AxisEnded { reason } => format!("AXIS TASK ENDED: {reason}"),
        }
    }
}

/// Serialises a board time rounded to the microsecond (`15.043`, not `15.042999999997102`).
fn to_micros<S: serde::Serializer>(t: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
    match t {
        Some(t) => s.serialize_some(&((t * 1e6).round() / 1e6 + 0.0)),
        None => s.serialize_none(),
    }
}

/// Formats a time as `YYYY-MM-DDTHH:MM:SS.mmmZ`.
///
/// Written by hand to avoid a date crate for one format. The civil-from-days conversion is
/// H. Hinnant's, "chrono-Compatible Low-Level Date Algorithms" (from memory).
pub fn rfc3339_utc(t: SystemTime) -> String {
    let d = t.duration_since(UNIX_EPOCH).unwrap_or_default();
    let secs = d.as_secs();
    let ms = d.subsec_millis();
    let days = i64::try_from(secs / 86_400).unwrap_or(0);
    let rem = secs % 86_400;
    let (h, m, s) = (rem / 3600, rem % 3600 / 60, rem % 60);
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!("{year:04}-{month:02}-{day:02}T{h:02}:{m:02}:{s:02}.{ms:03}Z")
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    // Reference instants: 1970-01-01 is the Unix epoch (POSIX); 951782400 s is
    // 2000-02-29T00:00:00Z and 1709251199 s is 2024-02-29T23:59:59Z (leap days; values
    // checked with GNU `date -u -d @N`).
    #[test]
    fn formats_known_instants() {
        assert_eq!(rfc3339_utc(UNIX_EPOCH), "1970-01-01T00:00:00.000Z");
        let t = UNIX_EPOCH + Duration::from_secs(951_782_400);
        assert_eq!(rfc3339_utc(t), "2000-02-29T00:00:00.000Z");
        let t = UNIX_EPOCH + Duration::from_millis(1_709_251_199_250);
        assert_eq!(rfc3339_utc(t), "2024-02-29T23:59:59.250Z");
    }

    #[test]
    fn board_time_is_written_to_the_microsecond() {
        let e =
            Event::now(None, Some(15.042_999_999_997_102), EventKind::Notice { text: "n".into() });
        let v = serde_json::to_value(&e).expect("serialises");
        assert_eq!(v["board_t"].to_string(), "15.043");
        let e = Event::now(None, None, EventKind::Notice { text: "n".into() });
        assert!(serde_json::to_value(&e).expect("serialises")["board_t"].is_null());
    }
}
