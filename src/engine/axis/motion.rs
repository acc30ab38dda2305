//! The axis's motion state: one enum whose variants carry their own data, so a combination
//! that cannot happen (a trip record on a moving axis, a homing duty limit on a jog, a settle
//! timer on a stopped axis) cannot be built either.
//!
//! [`Motion`] says whether the host drives the motor at all; while it does
//! ([`Motion::Driven`]) the [`Run`] says what the motion is doing, and the [`Drive`] says
//! whether the board has shown it applies the host's duty. The public state word
//! ([`AxisState`]: snapshot, JSON, screens) is derived from it by [`Motion::state`].
//!
//! What each state carries and how it is left (the core's files [`super::commands`] and
//! [`super::frame`] make these changes; anything not listed keeps the state):
//!
//! | state | carries | becomes | on |
//! |---|---|---|---|
//! | offline | — | disabled, or stopped while stop-all is latched | link up, or telemetry resumes |
//! | disabled | — | steady | enable (refused while stop-all is latched) |
//! | | | stopped | stop-all |
//! | | | tripped | link lost |
//! | steady | — | moving | move, jog step, first jog press |
//! | | | jogging | a jog key held (repeat within the window) |
//! | | | homing | home |
//! | | | trialing | a trial (bounded tuning motion) |
//! | moving | ramp (until it ends), planned end, in-position dwell timer | steady | in position for the dwell time |
//! | | | moving (a new move) | move, jog step, first jog press |
//! | | | jogging | a jog key held |
//! | | | stopping, then hold | stop |
//! | jogging | ramp, key direction, deadman time | stopping, then hold | deadman passed, key released, stop, other direction |
//! | | | steady | the ramp ends (soft limit reached) |
//! | homing | homing run, present ramp (if any), duty limit (if any) | steady | the run is done (homed) |
//! | | | tripped | the run fails |
//! | | | stopping, then hold | stop |
//! | trialing | the trial | steady | a closed-loop trial ends (holds its last target) |
//! | | | stopping, then hold | an open-loop trial ends; stop |
//! | stopping | ramp and what follows it (hold / power off), or the standstill wait | steady | a hold ramp ends |
//! | | | stopping (standstill wait) | a power-off ramp ends |
//! | | | stopped | standing still, or the wait (0.25 s) is over |
//! | | | moving / jogging | a jog press during a hold stop (not during stop-all) |
//! | stopped | — | disabled (offline without link) | stop-all released |
//! | tripped | the trip record | disabled / stopped / offline | clear (link-loss trips wait for the link) |
//!
//! From every state but offline, tripped and stopped: stop-all makes it *stopped* (category
//! 0: power off at once) or *stopping* with a power-off ramp (category 1); disable makes a
//! driven axis *disabled*; a supervision finding, a board fault or link loss makes it
//! *tripped*. A trial running when it is left this way is filed as ended early.
//!
//! Outside the enum stay the facts that hold in every state: the setpoint and goal, the
//! position estimate, homed, the move statistics, and the jog key memory ([`JogTap`], a
//! first press waiting for its repeat, which may outlive the short step it started; it is
//! never kept while jogging, where the [`JogRun`] holds the key).

use tokio::time::Instant;

use crate::control::{Profile, Setpoint};
use crate::engine::experiment::ExperimentRun;
use crate::engine::homing::HomingRun;
use crate::engine::snapshot::{AxisState, Trip};

/// Where the axis's motion stands.
// One value per axis, changed in place and never collected: the size difference between
// the motor-off variants and a driven one with its profile costs nothing, while boxing would
// allocate in the control loop at every move and stop.
#[allow(clippy::large_enum_variant)]
#[derive(Debug)]
pub(super) enum Motion {
    /// No link to the board.
    Offline,
    /// Linked, motor off.
    Disabled,
    /// The host drives the motor.
    Driven(Driven),
    /// Stop-all latched: motor off until it is released.
    Stopped,
    /// A latched trip: motor off until the operator clears it.
    Tripped(Box<Trip>),
}

/// A driven axis: what the motion is doing and how far the board has taken the duty.
#[derive(Debug)]
pub(super) struct Driven {
    /// The present stretch of duty answers (None until the first one goes out).
    pub(super) drive: Option<Drive>,
    /// What the motion is doing.
    pub(super) run: Run,
}

/// What a driven axis is doing.
#[derive(Debug)]
pub(super) enum Run {
    /// Holding its goal.
    Steady,
    /// An absolute move or a jog step.
    Moving(MoveRun),
    /// Continuous jog while the key is held.
    Jogging(JogRun),
    /// A homing sequence.
    Homing(Box<HomingDrive>),
    /// A trial: a bounded tuning motion (open-loop duty, relay or step).
    Trialing(Box<ExperimentRun>),
    /// Decelerating to rest.
    Stopping(StopRun),
}

/// A profile being followed, from board time `t0`.
#[derive(Debug, Clone, Copy)]
pub(super) struct Ramp {
    pub(super) profile: Profile,
    /// Board time it started, s.
    pub(super) t0: f64,
}

impl Ramp {
    /// The setpoint at board time `t`, and whether the profile has ended by then.
    pub(super) fn at(&self, t: f64) -> (Setpoint, bool) {
        let tp = t - self.t0;
        (self.profile.sample(tp), tp >= self.profile.duration())
    }
}

/// A move under way.
#[derive(Debug, Clone, Copy)]
pub(super) struct MoveRun {
    /// The profile; None once it has ended and the axis is settling at the goal.
    pub(super) ramp: Option<Ramp>,
    /// Board time the profile ends, s (for the not-in-position rule).
    pub(super) planned_end: f64,
    /// Inside the position band since, board s (the in-position dwell).
    pub(super) settle_since: Option<f64>,
}

/// Continuous jog (host time: jog keys are host events).
#[derive(Debug, Clone, Copy)]
pub(super) struct JogRun {
    /// Toward the soft limit (or far away before homing).
    pub(super) ramp: Ramp,
    /// The held key's direction (sign).
    pub(super) direction: i8,
    /// Decelerate when no key repeat arrives by this host time.
    pub(super) deadman: Instant,
}

/// A first jog press waiting for its repeat: a repeat within the window turns it into
/// continuous jog; otherwise it was a tap (a short step).
#[derive(Debug, Clone, Copy)]
pub(super) struct JogTap {
    /// The key's direction (sign).
    pub(super) direction: i8,
    /// When the press arrived (host time).
    pub(super) first_at: Instant,
}

/// A homing run and what it asked of the axis.
#[derive(Debug)]
pub(super) struct HomingDrive {
    pub(super) run: HomingRun,
    /// The move or stop it ordered last; None once ended (or when it asked to hold).
    pub(super) ramp: Option<Ramp>,
    /// Extra |duty| limit while it pushes into an end stop, %.
    pub(super) duty_limit: Option<f64>,
}

/// A controlled deceleration and what follows it.
// Kept inline for the same reason as `Motion`: a stop must not allocate.
#[allow(clippy::large_enum_variant)]
#[derive(Debug, Clone, Copy)]
pub(super) enum StopRun {
    /// Following the deceleration ramp.
    Ramp {
        ramp: Ramp,
        /// What happens once it ends.
        then: AfterStop,
    },
    /// IEC 60204-1 category 1 removes power once the stop is achieved: the ramp has ended
    /// and its end is held until the axis stands still (or the wait runs out), from board
    /// time `since`, s.
    Standstill { since: f64 },
}

/// What follows a deceleration ramp.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum AfterStop {
    /// Hold where it ended (operator stop, jog release, the end of an open-loop trial).
    Hold,
    /// Wait for standstill, then motor off (stop-all category 1).
    Off,
}

impl Motion {
    /// The public state word.
    pub(super) fn state(&self) -> AxisState {
        match self {
            Self::Offline => AxisState::Offline,
            Self::Disabled => AxisState::Disabled,
            Self::Stopped => AxisState::Stopped,
            Self::Tripped(_) => AxisState::Tripped,
            Self::Driven(d) => match d.run {
                Run::Steady => AxisState::Steady,
                Run::Moving(_) => AxisState::Moving,
                Run::Jogging(_) => AxisState::Jogging,
                Run::Homing(_) => AxisState::Homing,
                Run::Trialing(_) => AxisState::Trialing,
                Run::Stopping(_) => AxisState::Stopping,
            },
        }
    }

    /// True while the host drives the motor.
    pub(super) fn driven(&self) -> bool {
        matches!(self, Self::Driven(_))
    }

    /// The run of a driven axis.
    pub(super) fn run(&self) -> Option<&Run> {
        match self {
            Self::Driven(d) => Some(&d.run),
            _ => None,
        }
    }

    /// The run of a driven axis, to change in place.
    pub(super) fn run_mut(&mut self) -> Option<&mut Run> {
        match self {
            Self::Driven(d) => Some(&mut d.run),
            _ => None,
        }
    }

    /// The present drive (None while the answers are Stop).
    pub(super) fn drive(&self) -> Option<&Drive> {
        match self {
            Self::Driven(d) => d.drive.as_ref(),
            _ => None,
        }
    }

    /// The present drive, to feed frames to or to begin or end.
    pub(super) fn drive_slot(&mut self) -> Option<&mut Option<Drive>> {
        match self {
            Self::Driven(d) => Some(&mut d.drive),
            _ => None,
        }
    }

    /// The latched trip, if tripped.
    pub(super) fn trip(&self) -> Option<&Trip> {
        match self {
            Self::Tripped(t) => Some(t),
            _ => None,
        }
    }

    /// The homing run, while homing.
    pub(super) fn homing(&self) -> Option<&HomingDrive> {
        match self.run() {
            Some(Run::Homing(h)) => Some(h),
            _ => None,
        }
    }

    /// The homing run, while homing, to change in place.
    pub(super) fn homing_mut(&mut self) -> Option<&mut HomingDrive> {
        match self.run_mut() {
            Some(Run::Homing(h)) => Some(h),
            _ => None,
        }
    }

    /// The extra duty limit homing set, if any.
    pub(super) fn duty_limit(&self) -> Option<f64> {
        self.homing().and_then(|h| h.duty_limit)
    }
}

/// A stretch of duty answers, from the first Duty after Stop answers.
#[derive(Debug, Clone, Copy)]
pub(super) struct Drive {
    /// Seq echoed by the first duty answer.
    pub(super) since_seq: u16,
    /// The board showed its motor on with an `ack_seq` of this drive: from then on a motor
    /// it reports off is a trip.
    pub(super) confirmed: bool,
    /// Board ticks since the drive began.
    pub(super) ticks: u32,
}

impl Drive {
    /// Feeds one frame; true once the board's status counts: confirmed (motor on with an
    /// ack of this drive), or never confirmed within `grace_ticks` (a board that ignores its
    /// duty is as wrong as one that drops it). An ack alone is not proof: after Configure
    /// the board's ack_seq starts at 0, which a drive beginning at seq 0 would match.
    pub(super) fn frame(
        &mut self,
        ack_seq: u16,
        motor_on: bool,
        ticks: u32,
        grace_ticks: u32,
    ) -> bool {
        self.ticks = self.ticks.saturating_add(ticks);
        let acked = ack_seq.wrapping_sub(self.since_seq) < u16::MAX / 2;
        self.confirmed |= acked && motor_on;
        self.confirmed || self.ticks > grace_ticks
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // The board's fresh ack_seq after Configure is 0, the same number a drive that begins
    // with frame 0 echoes: only the motor-on bit with that ack proves the duty arrived.
    #[test]
    fn a_drive_counts_once_the_board_shows_it_applied_or_after_the_grace() {
        let mut d = Drive { since_seq: 0, confirmed: false, ticks: 0 };
        assert!(!d.frame(0, false, 1, 100), "ack 0 before any duty arrived");
        assert!(d.frame(0, true, 1, 100), "motor on with the drive's ack");
        assert!(d.frame(5, false, 1, 100), "confirmed: a motor off now counts");
        let mut d = Drive { since_seq: 7, confirmed: false, ticks: 0 };
        assert!(!d.frame(6, true, 1, 100), "an older duty's ack is not this drive's");
        assert!(!d.frame(6, false, 99, 100));
        assert!(d.frame(6, false, 1, 100), "never applied within the grace");
    }

    #[test]
    fn the_state_word_follows_the_variant() {
        let steady = Motion::Driven(Driven { drive: None, run: Run::Steady });
        assert_eq!(steady.state(), AxisState::Steady);
        assert!(steady.driven() && steady.state().motor_on());
        for m in [Motion::Offline, Motion::Disabled, Motion::Stopped] {
            assert!(!m.driven() && !m.state().motor_on(), "{m:?}");
            assert!(m.trip().is_none() && m.drive().is_none() && m.duty_limit().is_none());
        }
    }
}
