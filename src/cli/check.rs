//! `servotty check FILE`: validate a configuration and summarise its axes.

use std::fmt::Write as _;
use std::path::Path;

use crate::cli::{emit, Failure, EXIT_OK};
use crate::config::{AxisConfig, ControlMode, MachineConfig, TransportConfig};

/// Runs the check and prints the summary.
///
/// # Errors
/// [`Failure::Config`] naming file, line, column and key.
pub fn run(file: &Path) -> Result<u8, Failure> {
    let cfg = MachineConfig::load(file)?;
    crate::cli::warn_renamed(&cfg);
    emit(&summary(&cfg))?;
    Ok(EXIT_OK)
}

/// The text `check` prints for a valid configuration.
pub fn summary(cfg: &MachineConfig) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "machine {:?}: {} {}, stop-all category {}",
        cfg.machine.name,
        cfg.axes.len(),
        if cfg.axes.len() == 1 { "axis" } else { "axes" },
        cfg.machine.stop_category
    );
    for a in &cfg.axes {
        axis_summary(&mut s, a);
    }
    s
}

fn axis_summary(s: &mut String, a: &AxisConfig) {
    let u = &a.scale.unit;
    let link = match &a.transport {
        TransportConfig::Sim(_) => "simulated".to_owned(),
        TransportConfig::Serial { device, baud } => format!("serial {device} at {baud} Bd"),
    };
    let c = &a.controller;
    let ctl = match c.mode {
        ControlMode::OnOff => format!("on-off {} % outside ±{} {u}", c.on_off_duty, c.tolerance),
        ControlMode::Proportional => format!("proportional kp {} %/{u}", c.kp),
        ControlMode::Pid => format!(
            "PID kp {} %/{u}, ki {} %/({u}·s), kd {} %·s/{u},\n           \
             velocity feedforward {} %/({u}/s)",
            c.kp, c.ki, c.kd, c.ff_velocity
        ),
    };
    let _ = writeln!(
        s,
        "  axis {:<6} {link}\n         {} counts/{u}, tick {} Hz, watchdog {} ms",
        a.name, a.scale.counts_per_unit, a.board.tick_hz, a.board.watchdog_ms
    );
    // Every line stays within 80 columns: `check` is read on small screens and over SSH.
    let _ = writeln!(s, "         control: {ctl}");
    let _ = writeln!(
        s,
        "         duty: min {} % forward, {} % reverse, max {} %",
        c.min_duty_forward, c.min_duty_reverse, c.max_duty
    );
    let _ = writeln!(
        s,
        "         motion: {} {u}/s, {} {u}/s²; soft limits {} … {} {u}",
        a.motion.max_velocity, a.motion.max_acceleration, a.limits.soft_min, a.limits.soft_max,
    );
    let _ = writeln!(
        s,
        "         following error band: ±{} {u} + {} s × speed",
        a.limits.following_error, a.limits.following_error_per_velocity
    );
    if let TransportConfig::Sim(sim) = &a.transport {
        let true_scale = sim.plant.counts_per_mm();
        if (true_scale - a.scale.counts_per_unit).abs() > 0.01 * true_scale {
            let _ = writeln!(
                s,
                "         note: the simulated mechanics give {true_scale:.4} counts/mm, the scale says {}",
                a.scale.counts_per_unit
            );
        }
    }
}
