//! The physics simulator and board emulation, so servotty runs with no hardware.
//!
//! - [`plant`]: DC motor, gearbox, belt and carriage with friction and hard stops.
//! - [`quadrature`]: 4× quadrature decoding, as a board's firmware does it.
//! - [`board`]: a board speaking protocol v1 over any byte stream, with watchdog and faults.

pub mod board;
pub mod drill;
pub mod plant;
pub mod quadrature;
