//! Why an axis refused a command, as a typed reason (not a string), so front ends can pick
//! their own words, colours and exit codes, and every reason says what to do about it.
//!
//! The `Display` text is the reason followed by what the operator can do, without the axis
//! name ([`crate::engine::CommandError`] adds it once).

use std::fmt;

use crate::engine::snapshot::AxisState;

/// What was asked, for the messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Asked {
    /// Enable the motor.
    Enable,
    /// An absolute move.
    Move,
    /// A jog (step or continuous).
    Jog,
    /// Homing.
    Home,
    /// A trial (a bounded tuning motion).
    Trial,
}

impl Asked {
    fn word(self) -> &'static str {
        match self {
            Self::Enable => "enable",
            Self::Move => "move",
            Self::Jog => "jog",
            Self::Home => "home",
            Self::Trial => "start a trial",
        }
    }
}

/// Why an axis refused a command.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum Refusal {
    /// Stop-all is latched.
    #[error("stop-all is latched: release it first")]
    StopAllLatched,
    /// The axis is in a state where this cannot start.
    #[error("cannot {} while {state}: {}", asked.word(), remedy(*state))]
    NotNow {
        /// What was asked.
        asked: Asked,
        /// The state the axis was in.
        state: AxisState,
    },
    /// Absolute moves need a homed axis.
    #[error(
        "not homed: positions are not trusted yet, so absolute moves are refused \
         (home the axis first; jogging works at reduced speed)"
    )]
    NotHomed,
    /// The target is outside the soft limits.
    #[error("target {goal} {unit} is outside the soft limits {min} … {max} {unit}")]
    OutsideSoftLimits {
        /// The target asked for.
        goal: f64,
        /// Lower soft limit.
        min: f64,
        /// Upper soft limit.
        max: f64,
        /// The axis unit.
        unit: String,
    },
    /// Already at the soft limit in the jog's direction.
    #[error("at the soft limit in that direction: jog the other way")]
    AtSoftLimit,
    /// A value in the command makes no sense (a zero jog step, a trial with no bound).
    #[error("{0}")]
    BadValue(&'static str),
    /// A link-loss trip cannot be cleared while the link is down.
    #[error("the link is still down: check the cable and the board's power, then clear")]
    LinkStillDown,
}

/// What the operator can do in `state` so that the command can run.
fn remedy(state: AxisState) -> &'static str {
    match state {
        AxisState::Offline => "the link is down (check the cable and the board's power)",
        AxisState::Disabled => "enable the axis first",
        AxisState::Tripped => "clear the trip first (it latches until cleared)",
        AxisState::Stopped | AxisState::Stopping => "release stop-all first",
        AxisState::Homing | AxisState::Moving | AxisState::Jogging | AxisState::Trialing => {
            "wait until it ends, or stop it"
        }
        AxisState::Steady => "it should be possible now; try again",
    }
}

impl Refusal {
    /// The state that caused a [`Refusal::NotNow`].
    pub fn state(&self) -> Option<AxisState> {
        match self {
            Self::NotNow { state, .. } => Some(*state),
            _ => None,
        }
    }
}

impl fmt::Display for Asked {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.word())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_reason_says_what_to_do() {
        let tripped = Refusal::NotNow { asked: Asked::Home, state: AxisState::Tripped };
        assert_eq!(
            tripped.to_string(),
            "cannot home while tripped: clear the trip first (it latches until cleared)"
        );
        let off = Refusal::NotNow { asked: Asked::Enable, state: AxisState::Offline };
        assert!(off.to_string().contains("check the cable"), "{off}");
        let dis = Refusal::NotNow { asked: Asked::Jog, state: AxisState::Disabled };
        assert!(dis.to_string().ends_with("enable the axis first"), "{dis}");
    }
}
