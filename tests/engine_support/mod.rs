//! The demo machine started on the in-process simulator, for engine tests under simulated
//! time: start, link, home; wait for a snapshot condition. The demo gantry's numbers
//! (configs/demo-greenhouse.toml) are invented.
#![allow(dead_code)]

use std::time::Duration;

use servotty::config::MachineConfig;
use servotty::engine::{AxisSnapshot, Machine, MachineHandle};

pub fn demo() -> MachineConfig {
    MachineConfig::demo().expect("demo config")
}

/// Starts the machine, links it and homes every axis (moves are refused before homing).
pub async fn started(cfg: &MachineConfig) -> (Machine, MachineHandle) {
    let m = Machine::start(cfg, &[]).expect("starts");
    let h = m.handle();
    assert!(h.wait_linked(Duration::from_secs(2)).await.is_empty(), "all axes link");
    h.home(None).await.expect("homes");
    (m, h)
}

/// Waits (in simulated time) until `axis`'s snapshot satisfies `f`; returns that snapshot,
/// or fails the test with the last one.
pub async fn wait_for(
    h: &MachineHandle,
    axis: &str,
    within: Duration,
    f: impl FnMut(&AxisSnapshot) -> bool,
) -> AxisSnapshot {
    let a = h.axis(axis).expect("axis");
    let reached = tokio::time::timeout(within, a.wait_until(f)).await.unwrap_or(false);
    let snap = a.snapshot();
    assert!(reached, "{axis}: not reached within {within:?}; last snapshot: {snap:#?}");
    snap
}

/// Asserts every axis of the spot `name` stands within 0.1 of the spot's value.
pub fn assert_at_spot(h: &MachineHandle, cfg: &MachineConfig, name: &str) {
    let spot = cfg.spots.get(name).expect("the spot exists");
    for (axis, want) in spot {
        let s = h.axis(axis).expect("axis").snapshot();
        assert!((s.position - want).abs() <= 0.1, "{axis} at {}, spot {name} {want}", s.position);
    }
}
