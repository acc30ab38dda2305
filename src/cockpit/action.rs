//! What the operator asked for ([`Action`], from a key) and what the cockpit must do about it
//! outside its own state ([`Effect`], carried out by the runner).
//!
//! Keeping the two apart lets every key be tested as plain data: key → action in
//! [`crate::cockpit::keys`], action → state change and effects in [`crate::cockpit::app`],
//! with no terminal and no engine.

use std::path::PathBuf;

use crate::config::MachineConfig;
use crate::engine::AxisCommand;

/// A direction of travel along an axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dir {
    /// Towards smaller positions.
    Minus,
    /// Towards larger positions.
    Plus,
}

impl Dir {
    /// −1 or +1.
    pub fn sign(self) -> f64 {
        match self {
            Self::Minus => -1.0,
            Self::Plus => 1.0,
        }
    }
}

/// One operator intention. Small and `Copy` so the keymap can be a static table.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Action {
    /// Latch stop-all on every axis (software stop, not safety-rated).
    StopAll,
    /// Release the stop-all latch; nothing starts moving because of it.
    ReleaseStopAll,
    /// Select the previous axis.
    SelectPrev,
    /// Select the next axis.
    SelectNext,
    /// Select axis number n (0-based).
    SelectAxis(usize),
    /// Open the selected axis's detail screen.
    OpenDetail,
    /// Leave the detail or log screen.
    Back,
    /// Open or leave the event-log screen.
    ToggleLog,
    /// Show the key help overlay.
    Help,
    /// Close the help overlay.
    CloseOverlay,
    /// Motor on for the selected axis.
    Enable,
    /// Motor on for every axis that can.
    EnableAll,
    /// Motor off for the selected axis.
    Disable,
    /// Motor off for every axis.
    DisableAll,
    /// Clear the selected axis's trip.
    ClearTrip,
    /// Clear every axis's trip.
    ClearAllTrips,
    /// Controlled stop of the selected axis (motor stays on, steady).
    StopAxis,
    /// Ask for a position and move the selected axis there (or `@spot`: every axis it names).
    GoTo,
    /// Ask for a name and store the homed axes' present positions under it as a spot.
    StoreSpot,
    /// Jog the selected axis one step.
    JogStep(Dir),
    /// Jog the selected axis continuously while the key is held (auto-repeat keeps it going).
    JogHold(Dir),
    /// Run a tuning step on the selected axis (asks which).
    Test,
    /// Apply the gains the last tuning step suggested.
    ApplySuggested,
    /// The held jog key was released (only terminals with the keyboard enhancement protocol
    /// report releases; elsewhere the engine's deadman ends the jog).
    JogRelease,
    /// Smaller jog step.
    StepSmaller,
    /// Larger jog step.
    StepLarger,
    /// Slower jog speed.
    SpeedLower,
    /// Faster jog speed.
    SpeedHigher,
    /// Home the selected axis.
    Home,
    /// Home every axis in the configured order.
    HomeAll,
    /// Detail screen: previous controller parameter.
    ParamPrev,
    /// Detail screen: next controller parameter.
    ParamNext,
    /// Detail screen: type a new value for the chosen parameter.
    EditParam,
    /// Write the live gains to the configuration file.
    SaveGains,
    /// Log screen: one entry back.
    ScrollUp,
    /// Log screen: one entry forward.
    ScrollDown,
    /// Log screen: a page back.
    PageUp,
    /// Log screen: a page forward.
    PageDown,
    /// Log screen: oldest entry.
    ScrollTop,
    /// Log screen: newest entry (and follow new ones).
    ScrollEnd,
    /// Quit (asks first when a motor is on or gains are unsaved).
    Quit,
    /// Confirm quitting.
    ConfirmQuit,
    /// Stay.
    CancelQuit,
    /// Prompt: a typed character.
    EntryChar(char),
    /// Prompt: delete the last character.
    EntryBackspace,
    /// Prompt: accept.
    EntrySubmit,
    /// Prompt: abandon.
    EntryCancel,
    /// Open the trip screen of the selected axis: its history and why it tripped.
    TripView,
}

/// Work outside the cockpit's own state, carried out by the runner without waiting in the
/// key path.
#[derive(Debug, Clone, PartialEq)]
pub enum Effect {
    /// `MachineHandle::stop_all` (never waits).
    StopAll,
    /// `MachineHandle::release_stop_all`.
    ReleaseStopAll,
    /// Send a command to one axis (its answer comes back as a notice).
    Command {
        /// Axis index in configuration order.
        axis: usize,
        /// The command.
        command: AxisCommand,
    },
    /// Home every axis in the configured order (its end comes back as a notice).
    HomeAll,
    /// Run a tuning step (its result comes back as a notice).
    Tune {
        /// Axis index.
        axis: usize,
        /// Which test.
        step: crate::commission::TuneStep,
        /// The axis's live configuration.
        config: Box<crate::config::AxisConfig>,
    },
    /// Save the live controller parameters into an existing configuration file.
    SaveGains {
        /// The file.
        path: PathBuf,
        /// The live configuration.
        config: MachineConfig,
    },
    /// Store a spot in the configuration file (comments kept, atomic, `.bak` kept).
    StoreSpot {
        /// The file.
        path: PathBuf,
        /// The spot's name.
        name: String,
        /// Axis → position.
        position: Vec<(String, f64)>,
    },
    /// Write a new configuration file (the built-in demo has none) with the live gains.
    WriteCopy {
        /// Where; refused if it exists.
        path: PathBuf,
        /// The live configuration.
        config: MachineConfig,
    },
    /// Fetch an axis's full-rate history for the trip screen.
    FetchHistory {
        /// Axis index.
        axis: usize,
    },
}
