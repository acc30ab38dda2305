//! servotty: a terminal cockpit and simulator for small DC-servo machines.
//!
//! # Layout
//! Data flows one way: board frames → axis loop → telemetry snapshots → UI; operator
//! commands → machine core → axis loop.
//!
//! - [`config`]: the TOML schema, units, loading and validation.
//! - [`format`]: numbers for screens and tables (resolution-aware, no `-0.00`).
//! - [`config_write`]: writing the configuration file in place (tuned gains), atomically,
//!   keeping its comments; used by the cockpit and the CLI alike.
//! - [`protocol`]: wire protocol v1 (COBS framing, CRC, messages) shared by host and boards.
//! - [`link`]: links to boards behind one small trait (serial devices, the in-process
//!   simulator), typed link errors with their retry policy, and the factory.
//! - [`sim`]: the physics simulator (DC motor, gearbox, carriage) and board emulation.
//! - [`control`]: controllers (on-off, proportional, PID) and motion profiles.
//! - [`engine`]: one task per axis (loop, supervision, state machine) and the machine core.
//! - [`cockpit`]: the terminal UI (overview, axis detail, event log, keymap, gain saving).
//! - [`tuning`]: tuning analysis (identification, relay autotuning, tuning rules, gain
//!   suggestions, step reports); pure functions on recorded trials.
//! - [`commission`]: tuning steps on a live machine (trials, then analysis).
//! - [`process`]: exit codes and the runtime every front end shares.
//! - [`cli`]: the headless subcommands and argument parsing; `main.rs` only dispatches.

pub mod cli;
pub mod cockpit;
pub mod commission;
pub mod config;
pub mod config_write;
pub mod control;
pub mod diagnosis;
pub mod engine;
pub mod format;
pub mod link;
pub mod move_list;
pub mod process;
pub mod protocol;
pub mod signals;
pub mod sim;
pub mod spots;
/// The former name of [`link`].
pub use link as transport;
pub mod tuning;
