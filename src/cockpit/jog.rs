//! Jog settings (which of the axis's configured step sizes and speeds is chosen) and the one
//! place where jog and home keys become engine commands.
//!
//! Step sizes and speeds come from each axis's `[axis.jog]` table, so a fine lift axis and a
//! long belt axis each get sensible choices; the operator picks a position in those lists.

use crate::cockpit::action::Action;
use crate::config::JogConfig;
use crate::engine::AxisCommand;

/// The longest list the selection walks through; longer configured lists are cut here.
const MAX_CHOICES: usize = 9;

/// The operator's jog choices: positions in the selected axis's lists.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct JogSettings {
    step: usize,
    speed: usize,
}

impl Default for JogSettings {
    fn default() -> Self {
        // The middle entries of the demo's lists: small enough to be safe, big enough to see.
        Self { step: 1, speed: 1 }
    }
}

fn pick(list: &[f64], i: usize) -> f64 {
    list.get(i.min(list.len().saturating_sub(1))).copied().unwrap_or(0.0)
}

impl JogSettings {
    /// Step size for this axis, units.
    pub fn step(self, cfg: &JogConfig) -> f64 {
        pick(&cfg.steps, self.step)
    }

    /// Jog speed for this axis, unit/s.
    pub fn speed(self, cfg: &JogConfig) -> f64 {
        pick(&cfg.speeds, self.speed)
    }

    /// A smaller step (stays at the smallest).
    pub fn smaller_step(&mut self) {
        self.step = self.step.saturating_sub(1);
    }

    /// A larger step (stays at the largest the longest list allows).
    pub fn larger_step(&mut self) {
        self.step = (self.step + 1).min(MAX_CHOICES - 1);
    }

    /// Slower.
    pub fn slower(&mut self) {
        self.speed = self.speed.saturating_sub(1);
    }

    /// Faster.
    pub fn faster(&mut self) {
        self.speed = (self.speed + 1).min(MAX_CHOICES - 1);
    }

    /// Keeps the choices inside this axis's lists (after switching axes), so that pressing
    /// "larger" once always changes something.
    pub fn clamp_to(&mut self, cfg: &JogConfig) {
        self.step = self.step.min(cfg.steps.len().saturating_sub(1));
        self.speed = self.speed.min(cfg.speeds.len().saturating_sub(1));
    }
}

/// The engine command for a jog or home action on one axis (`None` for machine-wide homing,
/// which is its own effect).
pub fn motion_command(action: Action, jog: JogSettings, cfg: &JogConfig) -> Option<AxisCommand> {
    let speed = jog.speed(cfg);
    match action {
        Action::JogStep(d) => {
            Some(AxisCommand::JogStep { distance: d.sign() * jog.step(cfg), speed })
        }
        // Each auto-repeat of a held key is one pulse; the engine turns a stream of pulses
        // into continuous motion and stops when they stop (its deadman).
        Action::JogHold(d) => {
            Some(AxisCommand::JogPulse { direction: if d.sign() > 0.0 { 1 } else { -1 }, speed })
        }
        Action::Home => Some(AxisCommand::Home),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cockpit::action::Dir;

    #[test]
    fn choices_come_from_the_axis_lists_and_stay_in_range() {
        let cfg = JogConfig {
            steps: vec![0.1, 1.0],
            speeds: vec![5.0, 20.0, 60.0],
            ..JogConfig::default()
        };
        let mut j = JogSettings::default();
        for _ in 0..20 {
            j.larger_step();
            j.faster();
        }
        assert_eq!((j.step(&cfg), j.speed(&cfg)), (1.0, 60.0));
        j.clamp_to(&cfg);
        j.smaller_step();
        assert_eq!(j.step(&cfg), 0.1);
    }

    #[test]
    fn keys_become_engine_commands() {
        let cfg = JogConfig::default();
        let j = JogSettings::default();
        assert_eq!(
            motion_command(Action::JogStep(Dir::Minus), j, &cfg),
            Some(AxisCommand::JogStep { distance: -1.0, speed: 20.0 })
        );
        assert_eq!(
            motion_command(Action::JogHold(Dir::Plus), j, &cfg),
            Some(AxisCommand::JogPulse { direction: 1, speed: 20.0 })
        );
        assert_eq!(motion_command(Action::Home, j, &cfg), Some(AxisCommand::Home));
        assert_eq!(motion_command(Action::HomeAll, j, &cfg), None);
    }
}
