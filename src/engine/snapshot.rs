//! What an axis publishes about itself: its state word, trip record and latest values.
//!
//! Snapshots are latest-value data (a `tokio::sync::watch` per axis): the UI and recorders
//! sample them at their own rate and losing intermediate values is fine. Everything here is
//! plain data so that rendering and tests can build snapshots by hand.

use std::fmt;
use std::sync::Arc;

use serde::Serialize;

/// The axis state machine's states. The words are what the operator reads on screen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum AxisState {
    /// No link to the board (not yet linked, or reconnecting).
    Offline,
    /// Linked, motor off.
    Disabled,
    /// Motor on, standing still at the target position ("steady").
    Steady,
    /// Following a move profile.
    Moving,
    /// Following an operator jog.
    Jogging,
    /// Running a homing sequence.
    Homing,
    /// Running a trial: one bounded tuning motion (open-loop duty, relay or step), recorded
    /// at the board's tick. Was `testing` before the tuning words were settled.
    Trialing,
    /// Decelerating to rest after a stop request (category 1).
    Stopping,
    /// Stop-all latched: motor off until the operator releases stop-all.
    Stopped,
    /// A supervision trip latched: motor off until the operator clears it.
    Tripped,
}

impl AxisState {
    /// The word shown on screen and in JSON.
    pub fn word(self) -> &'static str {
        match self {
            Self::Offline => "offline",
            Self::Disabled => "disabled",
            Self::Steady => "steady",
            Self::Moving => "moving",
            Self::Jogging => "jogging",
            Self::Homing => "homing",
            Self::Trialing => "trialing",
            Self::Stopping => "stopping",
            Self::Stopped => "stopped",
            Self::Tripped => "tripped",
        }
    }

    /// True in the states where the host drives the motor.
    pub fn motor_on(self) -> bool {
        matches!(
            self,
            Self::Steady
                | Self::Moving
                | Self::Jogging
                | Self::Homing
                | Self::Trialing
                | Self::Stopping
        )
    }
}

impl fmt::Display for AxisState {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.word())
    }
}

/// Why an axis tripped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TripCause {
    /// |target − position| exceeded the following-error band.
    FollowingError,
    /// High duty with no encoder motion for the stall timeout.
    Stall,
    /// No valid telemetry for the link timeout, or the device went away.
    LinkLoss,
    /// The count changed more between two frames than the axis can move.
    EncoderJump,
    /// The axis sped up against the sign of its duty: polarity is wrong.
    Runaway,
    /// The position left the soft travel limits.
    SoftLimit,
    /// The board reported a driver fault.
    BoardFault,
    /// A homing step exceeded its travel or time bound.
    Homing,
    /// The board's watchdog turned the motor off while the host was driving it (no duty
    /// reached the board for longer than its watchdog: a host stall, a USB hiccup).
    BoardWatchdog,
    /// The board reports its motor off while the host was driving it, with no watchdog bit
    /// (the board restarted or refused the duty).
    BoardMotorOff,
    /// A move did not reach its in-position band within its planned time plus
    /// `limits.settle_timeout_s`.
    NotInPosition,
    /// The motor heating estimate (duty² filtered with `limits.thermal_time_s`) passed the
    /// square of `limits.continuous_duty`.
    Thermal,
}

impl TripCause {
    /// Short words for the screen and logs.
    pub fn words(self) -> &'static str {
        match self {
            Self::FollowingError => "following error",
            Self::Stall => "stall",
            Self::LinkLoss => "link loss",
            Self::EncoderJump => "encoder jump",
            Self::Runaway => "runaway",
            Self::SoftLimit => "soft limit",
            Self::BoardFault => "board fault",
            Self::Homing => "homing failed",
            Self::BoardWatchdog => "board watchdog",
            Self::BoardMotorOff => "motor off by the board",
            Self::NotInPosition => "not in position",
            Self::Thermal => "motor heating",
        }
    }
}

impl fmt::Display for TripCause {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.words())
    }
}

/// A latched trip: the cause and the values at the moment it fired.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Trip {
    /// What tripped.
    pub cause: TripCause,
    /// Board time of the trip, s since link-up.
    pub at_s: f64,
    /// Profile target at the trip, units.
    pub target: f64,
    /// Measured position at the trip, units.
    pub position: f64,
    /// Following error at the trip, units.
    pub following_error: f64,
    /// The following-error band in force at the trip (static plus the velocity part), units.
    pub band: f64,
    /// Duty applied in the tick before the trip, %.
    pub duty: f64,
    /// Estimated velocity at the trip, unit/s.
    pub velocity: f64,
    /// One sentence for the operator: what was exceeded and what to check.
    pub detail: String,
}

/// Link health counters, cumulative since the axis task started.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct LinkStats {
    /// Valid telemetry frames received.
    pub frames: u64,
    /// Frames received per second over the last second of board time.
    pub frames_per_s: f64,
    /// Frames rejected by the decoder (CRC, framing, version).
    pub bad_frames: u64,
    /// Telemetry sequence numbers skipped.
    pub missed: u64,
    /// Times the link came up (handshake completed).
    pub link_ups: u32,
}

/// Everything the UI needs to draw one axis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AxisSnapshot {
    /// Axis name from the configuration.
    pub axis: Arc<str>,
    /// Unit name, e.g. "mm".
    pub unit: Arc<str>,
    /// Current state.
    pub state: AxisState,
    /// True once the axis's position has a known reference.
    pub homed: bool,
    /// Measured position, units.
    pub position: f64,
    /// Profile setpoint now, units.
    pub target: f64,
    /// Where the current move ends, units.
    pub goal: f64,
    /// Estimated velocity, unit/s.
    pub velocity: f64,
    /// target − position, units.
    pub following_error: f64,
    /// Following-error band at the present profile velocity, units.
    pub following_error_band: f64,
    /// Duty applied, % (after minimum-duty compensation and limits).
    pub duty: f64,
    /// Latched trip, if any.
    pub trip: Option<Trip>,
    /// Link health.
    pub link: LinkStats,
    /// Why the link could not be opened last time (missing device, permission…), while offline.
    pub link_error: Option<Arc<str>>,
    /// Why the axis task ended, if it did: the axis stays offline until the machine restarts.
    pub ended: Option<Arc<str>>,
    /// Board time of the latest frame, s.
    pub board_time_s: f64,
    /// True while stop-all is latched for this axis.
    pub stop_latched: bool,
    /// True when the last move has finished inside the in-position band for the dwell time.
    pub in_position: bool,
    /// Counts every completed move, so a waiter can tell a new completion from an old one.
    pub moves_done: u64,
    /// Largest |following error| since the current (or last) move started, units.
    pub move_peak_following_error: f64,
    /// Time from the start of the last completed move to in-position, s (board time).
    pub move_settle_s: Option<f64>,
    /// The board's input bits in the latest frame ([`crate::protocol::inputs`]).
    pub inputs: u8,
}

impl AxisSnapshot {
    /// The snapshot of an axis that has not linked yet.
    pub fn offline(axis: &str, unit: &str) -> Self {
        Self {
            axis: Arc::from(axis),
            unit: Arc::from(unit),
            state: AxisState::Offline,
            homed: false,
            position: 0.0,
            target: 0.0,
            goal: 0.0,
            velocity: 0.0,
            following_error: 0.0,
            following_error_band: 0.0,
            duty: 0.0,
            trip: None,
            link: LinkStats::default(),
            link_error: None,
            ended: None,
            board_time_s: 0.0,
            stop_latched: false,
            in_position: false,
            moves_done: 0,
            move_peak_following_error: 0.0,
            move_settle_s: None,
            inputs: 0,
        }
    }
}
