//! The machine core and the per-axis tasks.
//!
//! - [`machine`]: starts one task per axis, routes operator commands, owns stop-all and
//!   shutdown.
//! - [`axis`]: the per-axis task (link, loop, state machine) and its handle.
//! - [`supervisor`]: the trip rules, as pure per-frame logic.
//! - [`snapshot`]: what an axis publishes for the UI and recorders.
//! - [`link_meter`]: link health and host turnaround measurements.

pub mod axis;
pub mod link_meter;
pub mod machine;
pub mod snapshot;
pub mod supervisor;

pub use axis::{AxisCommand, AxisHandle, CommandError, Reply, StopAll};
pub use machine::{Machine, MachineHandle, PortOverride, StartError};
pub use snapshot::{AxisSnapshot, AxisState, LinkStats, Trip, TripCause};
