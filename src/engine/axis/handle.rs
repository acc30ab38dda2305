//! The axis task's vocabulary: commands, replies, errors, and the cloneable handle that sends
//! them.

use std::sync::Arc;

use tokio::sync::{mpsc, oneshot, watch};

use crate::config::ControllerConfig;
use crate::engine::experiment::{ExperimentBounds, ExperimentResult, ExperimentSpec};
use crate::engine::history::Sample;
use crate::engine::link_meter::LinkReport;
use crate::engine::snapshot::AxisSnapshot;

/// What the operator (or a headless command) asks of one axis.
#[derive(Debug, Clone, PartialEq)]
pub enum AxisCommand {
    /// Motor on, steady at the present position.
    Enable,
    /// Motor off.
    Disable,
    /// Profiled move to an absolute position, units (refused before homing).
    MoveTo(f64),
    /// As `MoveTo`, planned within `limits` (each capped at the axis's own): several axes
    /// given limits in proportion to their distances move on one straight line
    /// ([`crate::engine::line_move`]).
    MoveWithin {
        /// Absolute position, units.
        goal: f64,
        /// Velocity, acceleration and jerk limits for this move.
        limits: crate::control::Limits,
    },
    /// Decelerate to rest and hold (the motor stays on).
    Stop,
    /// Clear a latched trip, if its cause has gone; the axis comes back disabled.
    ClearTrip,
    /// Run the axis's homing sequence (the axis must be enabled).
    Home,
    /// Move one step (sign of `distance` = direction).
    JogStep {
        /// Units.
        distance: f64,
        /// Unit/s (capped before homing).
        speed: f64,
    },
    /// A jog key event (first press or auto-repeat) in `direction` (±1) at `speed` unit/s.
    /// The first press moves a short step; repeats that follow within the repeat window
    /// start continuous motion, which stops when repeats stop for the deadman time.
    JogPulse {
        /// −1 or +1.
        direction: i8,
        /// Unit/s (capped before homing).
        speed: f64,
    },
    /// The jog key was released (terminals that report releases).
    JogRelease,
    /// Replace the controller parameters without a bump; the second field says who (it goes
    /// into the gain-change event).
    SetController(ControllerConfig, crate::engine::events::ChangedBy),
    /// Link measurements since the last report (optionally starting afresh).
    LinkReport {
        /// Start a new measurement window after reporting.
        reset: bool,
    },
    /// A copy of the full-rate history ring.
    History,
    /// The controller parameters in force now (live edits included), for trip captures.
    LiveController,
    /// Run a trial: one bounded tuning motion (the axis must be steady).
    Experiment {
        /// What to do.
        spec: ExperimentSpec,
        /// Travel and time bounds.
        bounds: ExperimentBounds,
    },
    /// The last finished trial's result (taken: a second call gives None).
    TakeExperiment,
}

impl AxisCommand {
    /// Whether this is an operator action worth an event-log line.
    pub fn is_operator_action(&self) -> bool {
        !matches!(
            self,
            Self::LinkReport { .. }
                | Self::History
                | Self::LiveController
                | Self::JogPulse { .. }
                | Self::TakeExperiment
        )
    }

    /// The command in words, for the event log.
    pub fn words(&self) -> String {
        match self {
            Self::Enable => "enable".into(),
            Self::Disable => "disable".into(),
            Self::MoveTo(p) => format!("move to {p}"),
            Self::MoveWithin { goal, .. } => format!("move to {goal} (line)"),
            Self::Stop => "stop".into(),
            Self::ClearTrip => "clear trip".into(),
            Self::Home => "home".into(),
            Self::JogStep { distance, .. } => format!("jog step {distance:+}"),
            Self::JogPulse { direction, speed } => format!("jog {direction:+} at {speed}"),
            Self::JogRelease => "jog release".into(),
            Self::SetController(..) => "set controller".into(),
            Self::LinkReport { .. } => "link report".into(),
            Self::History => "history".into(),
            Self::LiveController => "live controller".into(),
            Self::Experiment { spec, .. } => format!("trial: {}", spec_words(spec)),
            Self::TakeExperiment => "take trial result".into(),
        }
    }
}

fn spec_words(spec: &ExperimentSpec) -> &'static str {
    match spec {
        ExperimentSpec::DutySteps { .. } => "duty steps",
        ExperimentSpec::BreakawayRamp { .. } => "breakaway ramp",
        ExperimentSpec::Relay { .. } => "relay",
        ExperimentSpec::Step { .. } => "step",
    }
}

/// A successful answer.
#[derive(Debug, Clone, PartialEq)]
pub enum Reply {
    /// Done (or started, for motion).
    Done,
    /// Link measurements.
    Link(LinkReport),
    /// History rows, oldest first.
    History(Vec<Sample>),
    /// The controller parameters in force.
    Controller(Box<ControllerConfig>),
    /// A finished experiment, if there is one.
    Experiment(Option<Box<ExperimentResult>>),
}

/// Why a command was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CommandError {
    /// The axis cannot do it now; the reason says why and what to do.
    #[error("{axis}: {reason}")]
    Refused {
        /// Axis name.
        axis: String,
        /// Why, typed.
        reason: crate::engine::Refusal,
    },
    /// The axis task has ended.
    #[error("{0}: axis task has stopped")]
    Gone(String),
}

/// A command with its reply slot.
#[derive(Debug)]
pub struct Request {
    /// The command.
    pub command: AxisCommand,
    /// Where the answer goes.
    pub reply: oneshot::Sender<Result<Reply, CommandError>>,
}

/// The stop-all signal shared by every axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct StopAll {
    /// Latched until released.
    pub latched: bool,
    /// IEC 60204-1 stop category (0 or 1).
    pub category: u8,
}

/// A cloneable way to talk to one axis task.
#[derive(Debug, Clone)]
pub struct AxisHandle {
    name: Arc<str>,
    commands: mpsc::Sender<Request>,
    snapshots: watch::Receiver<AxisSnapshot>,
}

impl AxisHandle {
    /// Wires a handle to a task's channels.
    pub fn new(
        name: &str,
        commands: mpsc::Sender<Request>,
        snapshots: watch::Receiver<AxisSnapshot>,
    ) -> Self {
        Self { name: Arc::from(name), commands, snapshots }
    }

    /// The axis name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Sends a command and waits for the axis's answer (not for the motion to finish).
    ///
    /// # Errors
    /// [`CommandError`] when refused or when the task has ended.
    pub async fn send(&self, command: AxisCommand) -> Result<Reply, CommandError> {
        let (tx, rx) = oneshot::channel();
        self.commands
            .send(Request { command, reply: tx })
            .await
            .map_err(|_| CommandError::Gone(self.name.to_string()))?;
        rx.await.map_err(|_| CommandError::Gone(self.name.to_string()))?
    }

    /// Queues a command without waiting for the answer; for key handlers that must never
    /// wait. Returns false (and drops the command) only if the queue is full or the task has
    /// ended — the caller should say so.
    pub fn try_send(&self, command: AxisCommand) -> bool {
        let (tx, _rx) = oneshot::channel();
        self.commands.try_send(Request { command, reply: tx }).is_ok()
    }

    /// The latest snapshot.
    pub fn snapshot(&self) -> AxisSnapshot {
        self.snapshots.borrow().clone()
    }

    /// Waits until a published snapshot satisfies `pred` (true), or the axis task ends
    /// (false). Wrap it in a timeout to bound the wait.
    ///
    /// Prefer this to `watch().wait_for(..)`: that answer borrows the snapshot, and a borrow
    /// kept alive blocks the axis loop's next publish — and, once the loop is queued for it,
    /// any further `snapshot()` on the borrowing thread, a deadlock of both threads.
    pub async fn wait_until(&self, pred: impl FnMut(&AxisSnapshot) -> bool) -> bool {
        let mut rx = self.snapshots.clone();
        let reached = rx.wait_for(pred).await.is_ok();
        reached
    }

    /// A receiver for waiting on changes.
    pub fn watch(&self) -> watch::Receiver<AxisSnapshot> {
        self.snapshots.clone()
    }
}
