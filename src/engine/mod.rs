//! The machine core and the per-axis tasks.
//!
//! - [`machine`]: starts one task per axis, routes operator commands, owns stop-all and
//!   shutdown.
//! - [`axis`]: the per-axis task (link, loop, state machine) and its handle.
//! - [`supervisor`]: the trip rules, as pure per-frame logic.
//! - [`snapshot`]: what an axis publishes for the UI and recorders.
//! - [`link_meter`]: link health and host turnaround measurements.
//! - [`link_quality`]: events when the link's recent frames are poor, and when it recovers.
//! - [`homing`]: homing sequences as a pure state machine.
//! - [`experiment`]: trials, the bounded tuning motions (duty pulses, ramps, relay, steps).
//! - [`history`]: the full-rate history ring kept for trip captures.
//! - [`events`]: state changes, trips, operator actions, link changes.
//! - [`recorder`]: writes the event log and trip captures.
//! - [`thread`]: the engine's own thread and runtime, which every front end uses.

pub mod axis;
pub mod events;
pub mod experiment;
pub mod history;
pub mod homing;
pub mod line_move;
pub mod link_meter;
pub mod link_quality;
pub mod machine;
pub mod recorder;
pub mod refusal;
pub mod snapshot;
pub mod supervisor;
pub mod thread;

pub use axis::{AxisCommand, AxisHandle, CommandError, Reply, StopAll};
pub use events::{Event, EventKind};
pub use machine::{Machine, MachineHandle, PortOverride, ShutdownReport, StartError};
pub use refusal::{Asked, Refusal};
pub use snapshot::{AxisSnapshot, AxisState, LinkStats, Trip, TripCause};
pub use thread::{EngineStartError, EngineThread};
