//! Why did it trip: a diagnosis of one axis's record (a trip capture read back from file, or
//! the in-memory history), naming the most likely cause with its evidence, a confidence and
//! what to check or change.
//!
//! Pure functions over [`Sample`](crate::engine::history::Sample) rows: no I/O, no clock, so
//! every rule is tested with made-up rows ([`rules`] has the tests) and with captures of
//! faults injected into the simulator (`tests/diagnosis_matrix.rs`).
//!
//! # The window
//! The trip row is the first row in state `tripped` (at or after the recorded trip time).
//! The rules look at the [`WINDOW_S`] before it (and at the trip row itself for counts and
//! lost frames); "just before" means the last [`RECENT_S`]. A record with no trip (the
//! history on screen) is read whole. The duty a row's motion answers is the duty commanded one row earlier.
//!
//! # The rules
//! Each rule gives a score between 0 and 1 — a rule-based confidence, not a probability —
//! and the facts it saw. The supervisor's recorded cause, when it names the same thing,
//! raises the score. The thresholds are common practice for reading servo traces, no source;
//! the numbers are ours.
//!
//! | cause | what the record shows | score |
//! |---|---|---|
//! | board watchdog | the board's watchdog bit set, or its motor-on bit cleared for ≥ 3 frames while the host drives | 0.90 (0.97 when recorded) |
//! | board driver fault | the board's driver-fault bit | 0.95 |
//! | link trouble | recorded link loss; or a gap of ≥ 5 lost frames just before, or ≥ 5 % of frames lost in the window; or an encoder-jump trip whose frame followed lost frames | 0.55–0.85 (0.95 when recorded) |
//! | encoder fault | one frame's count change departs from the count rate of the frame before by more than 20 counts and 10 × the window's 95th-percentile change (the motor cannot do that), with no lost frames at that frame | 0.85 (0.95 when recorded) |
//! | wiring / polarity | in the last 0.1 s, ≥ 60 % of the driven rows move against the duty (duty above 10 % of its limit) and the speed grows | 0.85 (0.92 when recorded as runaway) |
//! | jam / hard stop | the count stays within 2 counts for ≥ 10 ms up to the trip while the board drives the motor, the duty is above 15 % of its limit and the error grows | 0.6–0.9 with the duration up to 0.1 s (0.92 when recorded as stall) |
//! | saturation | the output at its limit in ≥ 30 % of the last 0.2 s and ≥ 50 % of the last 50 ms, while the axis moves the duty's way | 0.8 (0.75 when the duty swings limit to limit: gains too high) |
//! | weaker drive (supply sag?) | at one profile speed, the last 20 ms took ≥ 15 % of the duty's limit more than the first 30 ms of the cruise, for ≤ 90 % of the speed and ≤ 60 % of the speed per duty, while still moving (≥ 15 % of the profile speed, ≥ 10 % in the last 10 ms); saturation is then kept below it | 0.8 |
//! | gain too low | during motion the duty stays below 80 % of its limit (never saturated), the axis still moves the profile's way at the trip (≥ 3 counts in the last 20 ms), and the error has grown into the band (≥ 50 % of it the frame before, ≥ 70 % at the trip); \|error\| correlating with profile speed (r ≥ 0.5) raises it. Or: the target moved off but the axis never started, with the duty below 15 % of its limit | 0.5–0.7 (0.65) |
//! | lighter load than tuned (belt slip?) | at cruise, the P + I parts take back ≥ 30 % of the feedforward | 0.45 |
//! | out of travel, homing | the supervisor's record (their own rules) | 0.85 |
//!
//! The best score names the cause; below [`UNDETERMINED_BELOW`] the diagnosis says it cannot
//! name one. When the runner-up is within [`AMBIGUOUS_WITHIN`] of the best (and at least 0.5)
//! the diagnosis is marked ambiguous and names both. A board watchdog usually follows a link
//! gap or a host stall: the gap is reported as its evidence and link trouble is kept as a
//! runner-up below it.
//!
//! # What one motor-side encoder cannot tell
//! The encoder sits on the motor: a slipping belt or a broken coupling lets the motor turn
//! as commanded while the carriage lags, and the record shows a perfect move. At most the
//! load looks lighter than the feedforward was tuned for. Every diagnosis says so. A jam and
//! a motor whose encoder stopped counting look the same too (duty, no counts): the check
//! list says how to tell them apart by hand.
//!
//! A sagging motor supply cannot be told from a move too demanding for the motor either: the
//! record has duty, not volts, and a weak supply makes the same duty weaker. When the cause
//! is saturation or gain too low, the diagnosis says so ([`CANNOT_SEE_SAG`]).

pub mod capture;
pub mod chart;
pub mod rules;

use serde::Serialize;

pub use capture::{AxisFacts, CaptureFile, RecordedTrip, TripRecord};

/// Seconds before the trip that the rules look at.
pub const WINDOW_S: f64 = 0.5;
/// "Just before the trip", s.
pub const RECENT_S: f64 = 0.1;
/// Best score below which no cause is named.
pub const UNDETERMINED_BELOW: f64 = 0.4;
/// Runner-up this close to the best makes the diagnosis ambiguous.
pub const AMBIGUOUS_WITHIN: f64 = 0.1;

/// The causes a diagnosis can name.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Cause {
    /// Mechanical jam or hard stop: duty, no motion.
    Jam,
    /// The output at its limit while the error grows.
    Saturation,
    /// The same profile speed took more duty for less speed as the move went on.
    WeakerDrive,
    /// The axis follows but lags: gains (or feedforward) too low for the speed.
    GainTooLow,
    /// Lost frames or a lost link.
    LinkTrouble,
    /// A count change no motor could make.
    EncoderFault,
    /// Motion against the duty: motor or encoder polarity.
    Wiring,
    /// The board's watchdog switched the motor off.
    BoardWatchdog,
    /// The board's driver stage reported a fault.
    DriverFault,
    /// The load is lighter than tuned: a slipping belt, a broken coupling, a lost load.
    LightLoad,
    /// The position left the soft limits.
    OutOfTravel,
    /// A homing step failed its bound.
    Homing,
    /// Nothing in the record explains it.
    Undetermined,
}

impl Cause {
    /// Words for people.
    pub fn words(self) -> &'static str {
        match self {
            Self::Jam => "mechanical jam or hard stop",
            Self::Saturation => "duty saturation",
            Self::WeakerDrive => "motor weaker than at the start of the move (supply sag?)",
            Self::GainTooLow => "gain too low",
            Self::LinkTrouble => "link trouble",
            Self::EncoderFault => "encoder fault",
            Self::Wiring => "wiring or polarity",
            Self::BoardWatchdog => "board watchdog",
            Self::DriverFault => "board driver fault",
            Self::LightLoad => "load lighter than tuned (slipping belt?)",
            Self::OutOfTravel => "out of travel",
            Self::Homing => "homing failed",
            Self::Undetermined => "cannot tell",
        }
    }
}

impl std::fmt::Display for Cause {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.words())
    }
}

/// One rule's finding.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Candidate {
    /// What it points to.
    pub cause: Cause,
    /// Rule-based confidence 0…1.
    pub confidence: f64,
    /// The facts the rule saw, with numbers.
    pub evidence: Vec<String>,
    /// What to check or change.
    pub check: Vec<String>,
}

/// The diagnosis of one axis's record.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Diagnosis {
    /// Axis.
    pub axis: String,
    /// The supervisor's recorded cause, if the record has one.
    pub recorded_cause: Option<String>,
    /// Board time of the trip row, s (None when the record has no trip).
    pub trip_at_s: Option<f64>,
    /// Most likely cause.
    pub cause: Cause,
    /// Its confidence 0…1.
    pub confidence: f64,
    /// True when another cause scores nearly as well (named in `others`).
    pub ambiguous: bool,
    /// Facts behind the cause.
    pub evidence: Vec<String>,
    /// What to check or change.
    pub check: Vec<String>,
    /// Other candidates, best first.
    pub others: Vec<Candidate>,
    /// What this record cannot tell.
    pub cannot_tell: Vec<String>,
}

/// The sentence about what one motor-side encoder cannot see; in every diagnosis.
pub const CANNOT_SEE_SLIP: &str = "whether the belt slipped: the encoder is on the motor, so a \
     slipping belt or broken coupling shows as a good move while the carriage lags (mark the \
     carriage and compare its travel with the reading, or re-home and compare the switch \
     position)";

/// The sentence about a supply the record does not measure; with saturation and gain too low
/// (a weaker drive says it its own way).
pub const CANNOT_SEE_SAG: &str = "whether the motor supply sagged: the record has the duty, not \
     the voltage, so a weak supply looks like a move too demanding for the motor (measure the \
     supply at the board while the axis accelerates)";

/// Diagnoses one axis's record.
pub fn diagnose(rec: &TripRecord) -> Diagnosis {
    let view = rules::View::new(rec);
    let mut cands = rules::all(&view);
    cands.sort_by(|a, b| b.confidence.total_cmp(&a.confidence).then(a.cause.cmp(&b.cause)));
    let mut cannot_tell = vec![CANNOT_SEE_SLIP.to_owned()];
    if !rec.has_evidence {
        cannot_tell.push(
            "lost frames, board status bits and the controller's parts: this record has no \
             evidence columns (written by an older servotty)"
                .to_owned(),
        );
    }
    let best = cands.first().filter(|c| c.confidence >= UNDETERMINED_BELOW).cloned();
    let (head, others) = match best {
        Some(b) => (b, cands.into_iter().skip(1).collect::<Vec<_>>()),
        None => {
            let mut evidence = vec!["no rule found its picture in the record".to_owned()];
            if let Some(d) = &rec.trip.detail {
                evidence.push(format!("the supervisor recorded: {d}"));
            }
            (
                Candidate {
                    cause: Cause::Undetermined,
                    confidence: 0.0,
                    evidence,
                    check: vec!["repeat the move with the same load and look at the trip chart \
                         (servotty analyze trip CAPTURE --svg chart.svg)"
                        .to_owned()],
                },
                cands,
            )
        }
    };
    match head.cause {
        Cause::Saturation | Cause::GainTooLow => cannot_tell.push(CANNOT_SEE_SAG.to_owned()),
        Cause::WeakerDrive => cannot_tell.push(
            "whether the supply sagged or the load grew: the record has the duty, not the \
             voltage or the current (measure the supply at the board while the axis moves, \
             then move the carriage by hand with the motor unpowered)"
                .to_owned(),
        ),
        _ => {}
    }
    let ambiguous = others
        .first()
        .is_some_and(|o| o.confidence >= 0.5 && head.confidence - o.confidence < AMBIGUOUS_WITHIN);
    Diagnosis {
        axis: rec.axis.clone(),
        recorded_cause: rec.trip.cause.clone(),
        trip_at_s: view.trip_time(),
        cause: head.cause,
        confidence: head.confidence,
        ambiguous,
        evidence: head.evidence,
        check: head.check,
        others,
        cannot_tell,
    }
}

impl Diagnosis {
    /// The report for a terminal (fits 80 columns apart from long numbers).
    pub fn to_text(&self) -> String {
        use std::fmt::Write as _;
        let mut s = String::new();
        let at = self.trip_at_s.map_or_else(String::new, |t| format!(" at board time {t:.3} s"));
        match &self.recorded_cause {
            Some(c) => {
                let _ = writeln!(s, "{}: tripped on {c}{at}", self.axis);
            }
            None if self.trip_at_s.is_some() => {
                let _ = writeln!(s, "{}: tripped{at}", self.axis);
            }
            None => {
                let _ = writeln!(s, "{}: no trip in this record", self.axis);
            }
        }
        if self.cause == Cause::Undetermined {
            let _ = writeln!(s, "most likely: cannot tell from this record");
        } else {
            let _ = writeln!(
                s,
                "most likely: {} (confidence {:.0} %)",
                self.cause,
                self.confidence * 100.0
            );
        }
        if self.ambiguous {
            if let Some(o) = self.others.first() {
                let _ = writeln!(
                    s,
                    "ambiguous: {} scores nearly as well ({:.0} %); check both",
                    o.cause,
                    o.confidence * 100.0
                );
            }
        }
        let list = |s: &mut String, title: &str, items: &[String]| {
            if !items.is_empty() {
                let _ = writeln!(s, "{title}:");
                for i in items {
                    let _ = writeln!(s, "  - {i}");
                }
            }
        };
        list(&mut s, "evidence", &self.evidence);
        list(&mut s, "check", &self.check);
        let others: Vec<String> = self
            .others
            .iter()
            .filter(|o| o.confidence >= 0.2)
            .map(|o| {
                format!("{} ({:.0} %): {}", o.cause, o.confidence * 100.0, o.evidence.join("; "))
            })
            .collect();
        list(&mut s, "also considered", &others);
        list(&mut s, "cannot tell from this record", &self.cannot_tell);
        s
    }
}
