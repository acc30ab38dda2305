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
    /// Scroll the help by this many rows (negative: up), where it does not fit the screen.
    HelpScroll(i8),
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
    /// Open the move-list screen.
    OpenLists,
    /// List screen: the previous list.
    ListPrev,
    /// List screen: the next list.
    ListNext,
    /// List screen: check the list against the limits and start it, or resume it.
    ListGo,
    /// List screen: pause at the end of the step that is running.
    ListPause,
    /// List screen: abort the list (every axis stops, category 1).
    ListAbort,
    /// Open the spot picker.
    OpenSpots,
    /// Spot picker: previous spot.
    SpotPrev,
    /// Spot picker: next spot.
    SpotNext,
    /// Spot picker: go to the chosen spot.
    SpotGo,
    /// Open the fault-drill menu of the selected axis (simulated axes only).
    Drill,
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
    /// Move these axes together on one straight line, arriving together (a spot); its end
    /// comes back as a notice.
    MoveLine {
        /// What it is, for the log (`@tray2`).
        what: String,
        /// Axis → goal, in configuration order.
        goals: Vec<(String, f64)>,
    },
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
    /// Find and read the move lists beside the configuration (blocking: off the key path).
    FindLists {
        /// The live configuration (axes and spots the lists are checked against).
        config: Box<MachineConfig>,
        /// Where it came from (the lists are beside it).
        source: crate::config::ConfigSource,
    },
    /// Start a move list from step `from` (1-based); progress and the end come back as
    /// notices.
    RunList {
        /// The list.
        list: Box<crate::move_list::MoveList>,
        /// Where it begins.
        from: crate::move_list::Start,
    },
    /// Pause, resume or abort the running list.
    ListControl(crate::move_list::runner::ListControl),
    /// Fetch an axis's full-rate history for the trip screen.
    FetchHistory {
        /// Axis index.
        axis: usize,
    },
    /// Inject a fault drill into an axis's simulated board (never waits).
    Drill {
        /// Axis index.
        axis: usize,
        /// The drill.
        pick: crate::cockpit::drill::Pick,
    },
}
