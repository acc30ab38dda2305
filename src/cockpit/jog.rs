//! Jog settings (step size, speed) and the one place where jog and home keys become engine
//! commands.
//!
//! The engine has no jog or home command yet. [`motion_command`] is where each of those keys
//! turns into an [`AxisCommand`]; today every arm answers `None` and the cockpit logs that the
//! feature is not available. Wiring one later is a one-line change in that arm.

use crate::cockpit::action::{Action, Dir};
use crate::engine::AxisCommand;

/// Jog step sizes offered, in axis units.
pub const STEPS: [f64; 5] = [0.01, 0.1, 1.0, 10.0, 100.0];
/// Jog speeds offered, % of the axis's maximum velocity.
pub const SPEEDS: [u8; 6] = [2, 5, 10, 25, 50, 100];
/// How long a continuous jog keeps going after the last key auto-repeat, s. Terminals do not
/// report key release, so a held key is a stream of repeats and silence means "let go"; this
/// must outlast the keyboard's initial repeat delay (typically 250–600 ms, from memory).
pub const HOLD_LEASE_S: f64 = 0.7;

/// The operator's jog choices, shared by all axes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct JogSettings {
    step: usize,
    speed: usize,
}

impl Default for JogSettings {
    fn default() -> Self {
        // 1 unit and 10 %: small enough to be safe on any demo axis, big enough to see.
        Self { step: 2, speed: 2 }
    }
}

impl JogSettings {
    /// Step size, units.
    pub fn step(self) -> f64 {
        STEPS[self.step]
    }

    /// Speed, % of maximum velocity.
    pub fn speed_percent(self) -> u8 {
        SPEEDS[self.speed]
    }

    /// A smaller step (stays at the smallest).
    pub fn smaller_step(&mut self) {
        self.step = self.step.saturating_sub(1);
    }

    /// A larger step (stays at the largest).
    pub fn larger_step(&mut self) {
        self.step = (self.step + 1).min(STEPS.len() - 1);
    }

    /// Slower.
    pub fn slower(&mut self) {
        self.speed = self.speed.saturating_sub(1);
    }

    /// Faster.
    pub fn faster(&mut self) {
        self.speed = (self.speed + 1).min(SPEEDS.len() - 1);
    }
}

/// Jog velocity for a direction at the chosen speed, unit/s.
pub fn jog_velocity(dir: Dir, jog: JogSettings, max_velocity: f64) -> f64 {
    dir.sign() * max_velocity * f64::from(jog.speed_percent()) / 100.0
}

/// The engine command for a jog or home action on one axis, or `None` while the engine does
/// not offer it. `max_velocity` is the axis's profile limit, unit/s.
pub fn motion_command(action: Action, jog: JogSettings, max_velocity: f64) -> Option<AxisCommand> {
    // Both are used by the arms below once the engine has the commands.
    let _ = (jog, max_velocity);
    match action {
        // Wire: Action::JogStep(d) => Some(AxisCommand::JogBy(d.sign() * jog.step())),
        Action::JogStep(_) => None,
        // Wire: Action::JogHold(d) => Some(AxisCommand::Jog {
        //     velocity: jog_velocity(d, jog, max_velocity), lease_s: HOLD_LEASE_S }),
        Action::JogHold(_) => None,
        // Wire: Action::Home => Some(AxisCommand::Home),
        Action::Home => None,
        // Machine-wide, in the configured order: wire through a new `Effect::HomeAll` that
        // calls a wished-for `MachineHandle::home_all()`, not through one axis.
        Action::HomeAll => None,
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn steps_and_speeds_stay_in_range() {
        let mut j = JogSettings::default();
        for _ in 0..10 {
            j.larger_step();
            j.faster();
        }
        assert_eq!((j.step(), j.speed_percent()), (100.0, 100));
        for _ in 0..10 {
            j.smaller_step();
            j.slower();
        }
        assert_eq!((j.step(), j.speed_percent()), (0.01, 2));
    }

    #[test]
    fn jog_and_home_are_not_wired_yet() {
        let j = JogSettings::default();
        assert_eq!(motion_command(Action::JogStep(Dir::Plus), j, 100.0), None);
        assert_eq!(motion_command(Action::Home, j, 100.0), None);
    }
}
