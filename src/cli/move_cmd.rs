//! `servotty move`: link, enable, one coordinated move of every named axis (a straight line,
//! arriving together: [`crate::engine::line_move`]), wait for in-position, disable.

use std::time::Duration;

use serde::Serialize;

use crate::cli::json_round::{emit_json, Rounding};
use crate::cli::progress::{self, Progress};
use crate::cli::{emit, Failure, MoveArgs, Target, EXIT_FAILED, EXIT_OK, EXIT_USAGE};
use crate::config::MachineConfig;
use crate::engine::line_move::{move_line, LineError};
use crate::engine::{AxisCommand, AxisState, MachineHandle};
use crate::format::num;

/// How long the boards have to link.
const LINK_WAIT: Duration = Duration::from_secs(3);

/// One axis's result, as printed in JSON.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct AxisOutcome {
    /// Axis name.
    pub axis: String,
    /// Commanded position, units.
    pub target: f64,
    /// Position after settling (or at the end), units.
    #[serde(rename = "final")]
    pub final_position: f64,
    /// Largest |following error| during the move, units.
    pub max_following_error: f64,
    /// Time from the start of the move to in-position, s; null if it never got there.
    pub settle_s: Option<f64>,
    /// State word at the end (before disabling).
    pub state: String,
    /// Trip cause and detail, if the axis tripped.
    pub trip: Option<String>,
}

/// The whole result.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct MoveOutcome {
    /// True when every axis settled.
    pub ok: bool,
    /// Per axis, in the order given.
    pub axes: Vec<AxisOutcome>,
}

/// Why the moves could not even start.
#[derive(Debug, thiserror::Error)]
pub enum MoveError {
    /// `--to` names an axis the machine lacks.
    #[error("--to {0}=…: no such axis")]
    UnknownAxis(String),
    /// An axis did not link.
    #[error("{0}: {1}")]
    Offline(String, String),
    /// An axis refused.
    #[error(transparent)]
    Refused(#[from] crate::engine::CommandError),
    /// The coordinated move could not start (an axis not holding).
    #[error("{0}")]
    Line(String),
}

impl MoveError {
    /// Exit code for this error.
    pub fn exit_code(&self) -> u8 {
        match self {
            Self::UnknownAxis(_) => EXIT_USAGE,
            _ => EXIT_FAILED,
        }
    }
}

/// Runs the moves on a started machine and disables the axes afterwards.
///
/// # Errors
/// [`MoveError`] when the moves cannot start; trips during the moves are in the outcome.
pub async fn run_moves(m: &MachineHandle, targets: &[Target]) -> Result<MoveOutcome, MoveError> {
    for t in targets {
        if m.axis(&t.axis).is_none() {
            return Err(MoveError::UnknownAxis(t.axis.clone()));
        }
    }
    if let Some(a) =
        m.wait_linked(LINK_WAIT).await.into_iter().find(|a| targets.iter().any(|t| &t.axis == a))
    {
        let why = m.offline_reason(&a);
        return Err(MoveError::Offline(a, why));
    }
    let result = start_and_wait(m, targets).await;
    for t in targets {
        if let Some(a) = m.axis(&t.axis) {
            let _ = a.send(AxisCommand::Disable).await;
        }
    }
    result
}

async fn start_and_wait(m: &MachineHandle, targets: &[Target]) -> Result<MoveOutcome, MoveError> {
    for t in targets {
        let a = m.axis(&t.axis).ok_or_else(|| MoveError::UnknownAxis(t.axis.clone()))?;
        a.send(AxisCommand::Enable).await?;
    }
    // Every axis of the command on one straight line, arriving together: the same rule as a
    // list step (a trip on one stops the others, category 1).
    let goals: Vec<(String, f64)> = targets.iter().map(|t| (t.axis.clone(), t.position)).collect();
    let line = move_line(m, &goals, 1.0).await.map_err(|e| match e {
        LineError::Refused(c) => MoveError::Refused(c),
        LineError::UnknownAxis(a) => MoveError::UnknownAxis(a),
        e => MoveError::Line(e.to_string()),
    })?;
    let mut outcomes = Vec::new();
    for t in targets {
        let a = m.axis(&t.axis).ok_or_else(|| MoveError::UnknownAxis(t.axis.clone()))?;
        let s = a.snapshot();
        // An axis already at its goal is not part of the line: it counts as arrived.
        let part = line.axes.iter().find(|o| o.axis == t.axis);
        let settled = line.ok && s.state == AxisState::Steady;
        outcomes.push(AxisOutcome {
            axis: t.axis.clone(),
            target: t.position,
            final_position: s.position,
            max_following_error: part.map_or(0.0, |o| o.max_following_error),
            settle_s: if settled && part.is_some() { s.move_settle_s } else { None },
            state: s.state.word().to_owned(),
            trip: s.trip.as_ref().map(|tr| format!("{}: {}", tr.cause, tr.detail)),
        });
    }
    Ok(MoveOutcome { ok: line.ok, axes: outcomes })
}

/// One `--to` item: `AXIS=POS`, or `@SPOT` for a named position of the configuration.
#[derive(Debug, Clone, PartialEq)]
pub enum Destination {
    /// One axis to a position.
    Axis(Target),
    /// Every axis the spot names to its position there.
    Spot(String),
}

impl std::str::FromStr for Destination {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim().strip_prefix('@') {
            Some(name) if crate::spots::valid_name(name) => Ok(Self::Spot(name.to_owned())),
            Some(_) => Err(format!("expected @NAME with letters, digits, _ or -, found {s:?}")),
            None => s.parse().map(Self::Axis),
        }
    }
}

/// The per-axis targets of `--to`, in the order given; a later item for the same axis
/// replaces an earlier one (`--to @tray3,z=-20`).
///
/// # Errors
/// Text naming the unknown axis or spot.
pub fn resolve(cfg: &MachineConfig, to: &[Destination]) -> Result<Vec<Target>, String> {
    let mut out: Vec<Target> = Vec::new();
    for d in to {
        let more = match d {
            Destination::Axis(t) => vec![t.clone()],
            Destination::Spot(name) => crate::spots::targets(cfg, name)?,
        };
        for t in more {
            if cfg.axis(&t.axis).is_none() {
                let known: Vec<&str> = cfg.axes.iter().map(|a| a.name.as_str()).collect();
                return Err(format!(
                    "--to {}=…: no such axis (axes: {})",
                    t.axis,
                    known.join(", ")
                ));
            }
            out.retain(|o| o.axis != t.axis);
            out.push(t);
        }
    }
    Ok(out)
}

/// `servotty move`.
///
/// # Errors
/// [`Failure`] when the moves cannot start; a trip during a move is in the outcome (exit 1).
pub fn run(args: &MoveArgs) -> Result<u8, Failure> {
    let (cfg, _) = args.machine.load()?;
    let targets = resolve(&cfg, &args.to).map_err(Failure::Usage)?;
    let (json, home) = (args.json, args.home);
    let words: Vec<String> =
        targets.iter().map(|t| format!("{} to {}", t.axis, t.position)).collect();
    crate::cli::ask::go_ahead(
        args.yes,
        &format!(
            "move: {}enables and moves {}.",
            if home { "homes every axis, then " } else { "" },
            words.join(", ")
        ),
    )?;
    let targets = &targets;
    crate::cli::with_machine(&args.machine, |h| async move {
        let show = progress::wanted(json);
        if home {
            let p = Progress::axes(show, "homing", &h, &[]);
            h.home(None).await?;
            p.finish();
        }
        let names: Vec<String> = targets.iter().map(|t| t.axis.clone()).collect();
        let p = Progress::axes(show, "moving", &h, &names);
        let out = run_moves(&h, targets).await;
        p.finish();
        let out = out.map_err(|e| match e {
            MoveError::UnknownAxis(_) => Failure::Usage(e.to_string()),
            MoveError::Refused(c) => Failure::Refused(c),
            MoveError::Offline(..) | MoveError::Line(_) => Failure::Machine(e.to_string()),
        })?;
        if json {
            emit_json(&out, &Rounding::of(h.config()))?;
        } else {
            emit(&table(&h, &out))?;
        }
        Ok(if out.ok { EXIT_OK } else { EXIT_FAILED })
    })
}

fn table(h: &MachineHandle, out: &MoveOutcome) -> String {
    let mut s = format!(
        "{:<6} {:>10} {:>10} {:>9} {:>8}  {:<5} state\n",
        "axis", "target", "final", "max fe", "settle", "unit"
    );
    for a in &out.axes {
        let (d, unit) = crate::cli::home_cmd::resolution(h, &a.axis);
        let settle = a.settle_s.map_or_else(|| "-".to_owned(), |s| format!("{s:.2} s"));
        s.push_str(&format!(
            "{:<6} {} {} {} {:>8}  {unit:<5} {}\n",
            a.axis,
            num(a.target, d, 10),
            num(a.final_position, d, 10),
            num(a.max_following_error, d, 9),
            settle,
            a.state
        ));
        if let Some(t) = &a.trip {
            s.push_str(&format!("       tripped: {t}\n"));
        }
    }
    s
}
