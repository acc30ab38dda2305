//! Coordinated moves: several axes from rest to their goals on one straight line in axis
//! space, arriving together.
//!
//! # How the line is kept
//! Every axis follows `start + D·σ(t)`, where `D` is its distance and `σ` one profile from 0
//! to 1. `σ`'s limits are the tightest any axis allows: `v_σ = minᵢ vᵢ/|Dᵢ|`,
//! `a_σ = minᵢ aᵢ/|Dᵢ|`, `j_σ = minᵢ jᵢ/|Dᵢ|` over the jerk-limited axes (a trapezoid when
//! none is). The axis that sets a minimum is the slowest, and it sets the time. Each axis is
//! then sent [`AxisCommand::MoveWithin`] with the limits `|Dᵢ|·(v_σ, a_σ, j_σ)` — each at or
//! below its own. Planning from rest is scale-invariant (distance and every limit scaled by
//! `|Dᵢ|` scale the profile by `|Dᵢ|` in the same time, see
//! [`Limits::scaled`](crate::control::Limits::scaled)), so each axis's own profile *is*
//! `start + Dᵢ·σ(t)`: the same duration and the same shape, which is a straight line.
//!
//! The axes' boards have their own clocks and the commands go out one after the other, so
//! the axes start within the time it takes to send them (a tick or so on one host).
//!
//! # When something goes wrong
//! The following-error band and every other rule still apply per axis. When one axis of the
//! move trips, is stopped, or refuses, the others are stopped at once with a controlled
//! deceleration and then switched off (IEC 60204-1 stop category 1); the outcome names the
//! axis that ended the move and why.

use std::collections::BTreeMap;
use std::time::Duration;

use serde::Serialize;
use tokio::sync::watch;

use crate::config::MachineConfig;
use crate::control::{Limits, Profile, Setpoint};
use crate::engine::{
    AxisCommand, AxisHandle, AxisSnapshot, AxisState, CommandError, MachineHandle,
};

/// Distances below this, units, do not move an axis (it stays steady).
const STILL: f64 = 1e-9;
/// Slack on top of the planned time for settling in position, s.
const SETTLE_SLACK_S: f64 = 10.0;
/// Longest wait for the other axes to come to rest after one failed, s.
const STOP_WAIT_S: f64 = 5.0;

/// One axis of a planned line.
#[derive(Debug, Clone, PartialEq)]
pub struct LineAxis {
    /// Axis name.
    pub axis: String,
    /// Where it starts (its setpoint now), units.
    pub start: f64,
    /// Where it ends, units.
    pub goal: f64,
    /// The limits its profile is planned with.
    pub limits: Limits,
}

/// A planned coordinated move.
#[derive(Debug, Clone, PartialEq)]
pub struct LinePlan {
    /// The axes that move (an axis already at its goal is left out).
    pub axes: Vec<LineAxis>,
    /// Time for all of them, s.
    pub duration_s: f64,
}

/// Why a coordinated move did not start.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LineError {
    /// No such axis.
    #[error("no axis called {0:?}")]
    UnknownAxis(String),
    /// An axis is not resting where a line can start.
    #[error("{axis}: a coordinated move starts from steady, not {state}")]
    NotHolding {
        /// Axis.
        axis: String,
        /// Its state.
        state: AxisState,
    },
    /// The speed fraction is not in (0, 1].
    #[error("expected a speed fraction in 0 < speed ≤ 1, found {0}")]
    Speed(f64),
    /// An axis refused its part.
    #[error(transparent)]
    Refused(#[from] CommandError),
}

/// How each axis ended.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LineAxisOutcome {
    /// Axis name.
    pub axis: String,
    /// Commanded position, units.
    pub target: f64,
    /// Position at the end, units.
    #[serde(rename = "final")]
    pub final_position: f64,
    /// Largest |following error| during the move, units.
    pub max_following_error: f64,
    /// State word at the end.
    pub state: String,
}

/// The result of a coordinated move.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LineOutcome {
    /// True when every axis arrived and settled.
    pub ok: bool,
    /// The planned time, s.
    pub planned_s: f64,
    /// Per axis.
    pub axes: Vec<LineAxisOutcome>,
    /// Which axis ended the move early, and why.
    pub ended_by: Option<(String, String)>,
}

/// Plans the line from `starts` (each axis's present setpoint) to `goals`, at `speed` (a
/// fraction of every axis's velocity limit). Pure: no machine needed.
///
/// # Errors
/// [`LineError`] for an unknown axis or a bad speed.
pub fn plan_line(
    cfg: &MachineConfig,
    starts: &BTreeMap<String, f64>,
    goals: &[(String, f64)],
    speed: f64,
) -> Result<LinePlan, LineError> {
    if !(speed.is_finite() && speed > 0.0 && speed <= 1.0) {
        return Err(LineError::Speed(speed));
    }
    let mut moving = Vec::new();
    for (axis, goal) in goals {
        let a = cfg.axis(axis).ok_or_else(|| LineError::UnknownAxis(axis.clone()))?;
        let start = *starts.get(axis).ok_or_else(|| LineError::UnknownAxis(axis.clone()))?;
        let d = (goal - start).abs();
        if d > STILL {
            moving.push((
                axis.clone(),
                start,
                *goal,
                d,
                Limits::of(&a.motion).slower(a.motion.max_velocity * speed),
            ));
        }
    }
    let tightest = |f: &dyn Fn(&Limits) -> Option<f64>| {
        moving
            .iter()
            .filter_map(|(.., d, l)| f(l).map(|x| x / d))
            .fold(None, |m: Option<f64>, x| Some(m.map_or(x, |m| m.min(x))))
    };
    let unit = Limits {
        velocity: tightest(&|l| Some(l.velocity)).unwrap_or(1.0),
        acceleration: tightest(&|l| Some(l.acceleration)).unwrap_or(1.0),
        jerk: tightest(&|l| l.jerk),
    };
    let rest = Setpoint::default();
    let duration_s =
        if moving.is_empty() { 0.0 } else { Profile::plan(rest, 1.0, unit).duration() };
    let axes = moving
        .into_iter()
        .map(|(axis, start, goal, d, _)| LineAxis { axis, start, goal, limits: unit.scaled(d) })
        .collect();
    Ok(LinePlan { axes, duration_s })
}

/// Moves `goals` together on a straight line at `speed` (fraction of each axis's velocity
/// limit) and waits until every axis is in position, or one of them fails — then the others
/// are stopped (category 1) and the outcome says which axis ended it.
///
/// # Errors
/// [`LineError`] when the move cannot start; an axis that had started is stopped first.
pub async fn move_line(
    m: &MachineHandle,
    goals: &[(String, f64)],
    speed: f64,
) -> Result<LineOutcome, LineError> {
    let mut handles = Vec::new();
    let mut starts = BTreeMap::new();
    for (axis, _) in goals {
        let a = m.axis(axis).ok_or_else(|| LineError::UnknownAxis(axis.clone()))?;
        let s = a.snapshot();
        if s.state != AxisState::Steady {
            return Err(LineError::NotHolding { axis: axis.clone(), state: s.state });
        }
        starts.insert(axis.clone(), s.target);
        handles.push(a.clone());
    }
    let plan = plan_line(m.config(), &starts, goals, speed)?;
    let movers: Vec<&AxisHandle> =
        plan.axes.iter().filter_map(|p| handles.iter().find(|h| h.name() == p.axis)).collect();
    let before: Vec<u64> = movers.iter().map(|h| h.snapshot().moves_done).collect();
    for (i, p) in plan.axes.iter().enumerate() {
        let cmd = AxisCommand::MoveWithin { goal: p.goal, limits: p.limits };
        if let Err(e) = movers[i].send(cmd).await {
            stop_then_off(&movers[..i]).await;
            return Err(e.into());
        }
    }
    let deadline =
        tokio::time::Instant::now() + Duration::from_secs_f64(plan.duration_s + SETTLE_SLACK_S);
    let mut rxs: Vec<watch::Receiver<AxisSnapshot>> = movers.iter().map(|h| h.watch()).collect();
    let ended_by = loop {
        let snaps: Vec<AxisSnapshot> =
            rxs.iter_mut().map(|r| r.borrow_and_update().clone()).collect();
        if let Some(s) =
            snaps.iter().find(|s| !matches!(s.state, AxisState::Moving | AxisState::Steady))
        {
            let why = s.trip.as_ref().map_or_else(
                || format!("left the move ({})", s.state),
                |t| format!("{}: {}", t.cause, t.detail),
            );
            break Some((s.axis.to_string(), why));
        }
        if snaps.iter().zip(&before).all(|(s, b)| s.moves_done > *b) {
            break None;
        }
        let changed = futures::future::select_all(rxs.iter_mut().map(|r| Box::pin(r.changed())));
        match tokio::time::timeout_at(deadline, changed).await {
            Ok((Ok(()), ..)) => {}
            Ok((Err(_), i, _)) => {
                break Some((movers[i].name().to_owned(), "axis task ended".into()))
            }
            Err(_) => break Some(("-".to_owned(), "did not arrive in time".to_owned())),
        }
    };
    if ended_by.is_some() {
        stop_then_off(&movers).await;
    }
    let axes = plan
        .axes
        .iter()
        .zip(&movers)
        .map(|(p, h)| {
            let s = h.snapshot();
            LineAxisOutcome {
                axis: p.axis.clone(),
                target: p.goal,
                final_position: s.position,
                max_following_error: s.move_peak_following_error,
                state: s.state.word().to_owned(),
            }
        })
        .collect();
    Ok(LineOutcome { ok: ended_by.is_none(), planned_s: plan.duration_s, axes, ended_by })
}

/// Stop category 1 for these axes: decelerate under control, then motor off once at rest.
pub async fn stop_then_off(axes: &[&AxisHandle]) {
    for a in axes {
        let _ = a.send(AxisCommand::Stop).await;
    }
    for a in axes {
        let _ = tokio::time::timeout(
            Duration::from_secs_f64(STOP_WAIT_S),
            a.wait_until(|s| s.state != AxisState::Stopping && s.state != AxisState::Moving),
        )
        .await;
        if a.snapshot().state.motor_on() {
            let _ = a.send(AxisCommand::Disable).await;
        }
    }
}
