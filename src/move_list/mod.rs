//! Move lists: a TOML file of steps the machine carries out in order — moves (absolute,
//! relative, or to a spot of the configuration), dwells, and waits for an input — repeated a
//! given number of times.
//!
//! ```toml
//! title = "inspect three trays"
//! times = 2                          # run the steps twice (default 1)
//!
//! [[step]]
//! to = "@tray1"                      # a spot ([spots] in the machine configuration)
//! [[step]]
//! to = { z = -40.0 }                 # absolute, axis units
//! speed = 0.25                       # a quarter of each axis's max_velocity
//! [[step]]
//! dwell_s = 2.0
//! [[step]]
//! by = { z = 40.0 }                  # relative to where the previous step left the axis
//! [[step]]
//! wait = { axis = "x", input = "home", active = true, timeout_s = 30.0 }
//! ```
//!
//! A step does exactly one thing. A move of several axes is one coordinated move: a straight
//! line, all axes arriving together ([`crate::engine::line_move`]).
//!
//! This module owns the format, reading it with errors that name the file, line and step,
//! and [`check`]: every target of every repetition worked out and checked against the soft
//! limits before anything moves (`servotty run --dry-run` prints it). [`runner`] carries a
//! checked list out on a machine; [`catalog`] finds the lists beside a configuration.

pub mod catalog;
pub mod runner;

use std::collections::BTreeMap;
use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::config::MachineConfig;

/// The file as written.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
struct ListFile {
    #[serde(default)]
    title: Option<String>,
    #[serde(default = "one")]
    times: u32,
    #[serde(rename = "step", default)]
    steps: Vec<StepFile>,
}

fn one() -> u32 {
    1
}

#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
struct StepFile {
    #[serde(default)]
    to: Option<ToFile>,
    #[serde(default)]
    by: Option<BTreeMap<String, f64>>,
    #[serde(default)]
    dwell_s: Option<f64>,
    #[serde(default)]
    wait: Option<WaitFile>,
    #[serde(default)]
    speed: Option<f64>,
    #[serde(default)]
    note: Option<String>,
}

#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(untagged)]
enum ToFile {
    Spot(String),
    Axes(BTreeMap<String, f64>),
}

#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
struct WaitFile {
    axis: String,
    input: Input,
    #[serde(default = "yes")]
    active: bool,
    timeout_s: f64,
}

fn yes() -> bool {
    true
}

/// A board input a step can wait for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Input {
    /// The home switch.
    Home,
    /// The low-end limit switch.
    LimitLow,
    /// The high-end limit switch.
    LimitHigh,
}

impl Input {
    /// Its bit in [`crate::protocol::inputs`].
    pub fn bit(self) -> u8 {
        use crate::protocol::inputs;
        match self {
            Self::Home => inputs::HOME,
            Self::LimitLow => inputs::LIMIT_LOW,
            Self::LimitHigh => inputs::LIMIT_HIGH,
        }
    }
}

/// What one step does.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Action {
    /// Absolute positions per axis (from `to = { … }` or `to = "@spot"`).
    To {
        /// The spot's name when the step named one.
        spot: Option<String>,
        /// Axis → position.
        axes: BTreeMap<String, f64>,
    },
    /// Distances per axis from where the previous steps left it.
    By {
        /// Axis → distance.
        axes: BTreeMap<String, f64>,
    },
    /// Stand still for this long, s.
    Dwell {
        /// Seconds.
        seconds: f64,
    },
    /// Wait until an axis's input is `active` (or not), at most `timeout_s`.
    Wait {
        /// Axis whose board reads the input.
        axis: String,
        /// Which input.
        input: Input,
        /// Wait for active (true) or inactive (false).
        active: bool,
        /// Longest wait, s; then the list stops.
        timeout_s: f64,
    },
}

/// One step.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Step {
    /// What it does.
    pub action: Action,
    /// Fraction of each axis's max_velocity for a move (1 when not given).
    pub speed: f64,
    /// The operator's note, shown with progress.
    pub note: Option<String>,
}

/// A move list, read and checked for form (not yet against a machine's positions).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MoveList {
    /// Shown with progress.
    pub title: Option<String>,
    /// How many times the steps run.
    pub times: u32,
    /// The steps, in order.
    pub steps: Vec<Step>,
}

/// Why a list cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ListError {
    /// The file could not be read.
    #[error("{file}: {message}")]
    Read {
        /// File name.
        file: String,
        /// Why.
        message: String,
    },
    /// The TOML is malformed.
    #[error("{file}:{line}:{column}: {message}")]
    Parse {
        /// File name.
        file: String,
        /// 1-based line.
        line: usize,
        /// 1-based column.
        column: usize,
        /// Why.
        message: String,
    },
    /// A step is wrong (numbered from 1 in the file; `pass` for checks of a repetition).
    #[error("step {step}{}: {message}", pass.map(|p| format!(" (pass {p})")).unwrap_or_default())]
    Step {
        /// 1-based step number.
        step: usize,
        /// 1-based repetition, when the problem only shows on a later pass.
        pass: Option<u32>,
        /// Why.
        message: String,
    },
    /// The list as a whole is wrong.
    #[error("{0}")]
    List(String),
}

fn step_err(step: usize, message: impl Into<String>) -> ListError {
    ListError::Step { step, pass: None, message: message.into() }
}

impl MoveList {
    /// Reads a list file and checks its form against `cfg` (axes, spots, numbers).
    ///
    /// # Errors
    /// [`ListError`] naming the file and line, or the step.
    pub fn load(path: &Path, cfg: &MachineConfig) -> Result<Self, ListError> {
        let file = path.display().to_string();
        let text = std::fs::read_to_string(path)
            .map_err(|e| ListError::Read { file: file.clone(), message: e.to_string() })?;
        Self::from_toml_str(&text, &file, cfg)
    }

    /// As [`MoveList::load`], from text.
    ///
    /// # Errors
    /// [`ListError`].
    pub fn from_toml_str(text: &str, file: &str, cfg: &MachineConfig) -> Result<Self, ListError> {
        let raw: ListFile = toml::from_str(text).map_err(|e| {
            let (line, column) =
                e.span().map_or((1, 1), |s| crate::config::line_col(text, s.start));
            ListError::Parse {
                file: file.to_owned(),
                line,
                column,
                message: e.message().trim().to_owned(),
            }
        })?;
        if raw.times == 0 {
            return Err(ListError::List("times = 0 runs nothing: expected 1 or more".into()));
        }
        if raw.steps.is_empty() {
            return Err(ListError::List("the list has no [[step]]".into()));
        }
        let steps = raw
            .steps
            .into_iter()
            .enumerate()
            .map(|(i, s)| step_from_file(i + 1, s, cfg))
            .collect::<Result<_, _>>()?;
        Ok(Self { title: raw.title, times: raw.times, steps })
    }
}

fn step_from_file(n: usize, s: StepFile, cfg: &MachineConfig) -> Result<Step, ListError> {
    let count = [s.to.is_some(), s.by.is_some(), s.dwell_s.is_some(), s.wait.is_some()]
        .iter()
        .filter(|x| **x)
        .count();
    if count != 1 {
        return Err(step_err(n, "expected exactly one of to, by, dwell_s or wait"));
    }
    let known_axis = |axis: &str| {
        if cfg.axis(axis).is_some() {
            Ok(())
        } else {
            let known: Vec<&str> = cfg.axes.iter().map(|a| a.name.as_str()).collect();
            Err(step_err(n, format!("no axis called {axis:?} (axes: {})", known.join(", "))))
        }
    };
    let check_axes = |axes: &BTreeMap<String, f64>| -> Result<(), ListError> {
        if axes.is_empty() {
            return Err(step_err(n, "a move needs at least one axis"));
        }
        for (a, v) in axes {
            known_axis(a)?;
            if !v.is_finite() {
                return Err(step_err(n, format!("{a}: expected a finite number, found {v}")));
            }
        }
        Ok(())
    };
    let speed = s.speed.unwrap_or(1.0);
    if s.speed.is_some() && (s.dwell_s.is_some() || s.wait.is_some()) {
        return Err(step_err(n, "speed applies to moves (to, by) only"));
    }
    if !(speed.is_finite() && speed > 0.0 && speed <= 1.0) {
        return Err(step_err(
            n,
            format!("speed is a fraction of each axis's max_velocity: expected 0 < speed ≤ 1, found {speed}"),
        ));
    }
    let action = if let Some(to) = s.to {
        match to {
            ToFile::Spot(name) => {
                let bare = name.strip_prefix('@').unwrap_or(&name).to_owned();
                let targets = crate::spots::targets(cfg, &bare).map_err(|e| step_err(n, e))?;
                let axes = targets.into_iter().map(|t| (t.axis, t.position)).collect();
                Action::To { spot: Some(bare), axes }
            }
            ToFile::Axes(axes) => {
                check_axes(&axes)?;
                Action::To { spot: None, axes }
            }
        }
    } else if let Some(axes) = s.by {
        check_axes(&axes)?;
        Action::By { axes }
    } else if let Some(seconds) = s.dwell_s {
        if !(seconds.is_finite() && seconds >= 0.0) {
            return Err(step_err(n, format!("dwell_s: expected seconds ≥ 0, found {seconds}")));
        }
        Action::Dwell { seconds }
    } else if let Some(w) = s.wait {
        known_axis(&w.axis)?;
        if !(w.timeout_s.is_finite() && w.timeout_s > 0.0) {
            return Err(step_err(
                n,
                format!("wait.timeout_s: expected seconds > 0, found {}", w.timeout_s),
            ));
        }
        Action::Wait { axis: w.axis, input: w.input, active: w.active, timeout_s: w.timeout_s }
    } else {
        unreachable!("exactly one action was counted above")
    };
    Ok(Step { action, speed, note: s.note })
}

/// One step of one pass, with every axis target worked out.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PlannedStep {
    /// 1-based pass.
    pub pass: u32,
    /// 1-based step number in the file.
    pub step: usize,
    /// The step.
    #[serde(flatten)]
    pub what: Step,
    /// For moves: the absolute target of every axis the step moves, units.
    pub targets: BTreeMap<String, f64>,
}

/// Where a run begins: a step of a pass (both 1-based). A bare step number means that step of
/// the first pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Start {
    /// Pass.
    pub pass: u32,
    /// Step.
    pub step: usize,
}

impl From<usize> for Start {
    fn from(step: usize) -> Self {
        Self { pass: 1, step }
    }
}

/// Works out every target of every pass from `start` (each axis's position now) and checks
/// each against the soft limits — before anything moves. Begins at `from` (a step, or a step
/// of a later pass), for resuming: the passes before it do not run again.
///
/// # Errors
/// [`ListError::Step`] naming the first step (and pass) whose target is outside the limits,
/// or a relative move of an axis whose position is not known.
pub fn check(
    list: &MoveList,
    cfg: &MachineConfig,
    start: &BTreeMap<String, f64>,
    from: impl Into<Start>,
) -> Result<Vec<PlannedStep>, ListError> {
    let Start { pass: first_pass, step: from } = from.into();
    if from == 0 || from > list.steps.len() {
        return Err(ListError::List(format!(
            "--from {from}: the list has steps 1 … {}",
            list.steps.len()
        )));
    }
    if first_pass == 0 || first_pass > list.times {
        return Err(ListError::List(format!(
            "--pass {first_pass}: the list runs passes 1 … {}",
            list.times
        )));
    }
    let mut at = start.clone();
    let mut out = Vec::new();
    for pass in first_pass..=list.times {
        let first = if pass == first_pass { from } else { 1 };
        for (i, step) in list.steps.iter().enumerate().skip(first - 1) {
            let n = i + 1;
            let err = |message: String| ListError::Step {
                step: n,
                pass: (list.times > 1).then_some(pass),
                message,
            };
            let mut targets = BTreeMap::new();
            match &step.action {
                Action::To { axes, .. } => targets.clone_from(axes),
                Action::By { axes } => {
                    for (a, d) in axes {
                        let here = at.get(a).ok_or_else(|| {
                            err(format!(
                                "{a}: position unknown, so a relative move cannot be checked"
                            ))
                        })?;
                        targets.insert(a.clone(), here + d);
                    }
                }
                Action::Dwell { .. } | Action::Wait { .. } => {}
            }
            for (a, &v) in &targets {
                let Some(ax) = cfg.axis(a) else {
                    return Err(err(format!("no axis called {a:?}")));
                };
                let (lo, hi, u) = (ax.limits.soft_min, ax.limits.soft_max, &ax.scale.unit);
                if !(lo..=hi).contains(&v) {
                    return Err(err(format!(
                        "{a} to {v} {u} is outside the soft limits {lo} … {hi} {u}"
                    )));
                }
                at.insert(a.clone(), v);
            }
            out.push(PlannedStep { pass, step: n, what: step.clone(), targets });
        }
    }
    Ok(out)
}

/// A step in words, for progress lines.
pub fn describe(p: &PlannedStep) -> String {
    let axes = |m: &BTreeMap<String, f64>| {
        m.iter().map(|(a, v)| format!("{a} {v}")).collect::<Vec<_>>().join(", ")
    };
    let speed = if p.what.speed < 1.0 {
        format!(" at {:.0} %", p.what.speed * 100.0)
    } else {
        String::new()
    };
    let what = match &p.what.action {
        Action::To { spot: Some(s), .. } => format!("to @{s} ({}){speed}", axes(&p.targets)),
        Action::To { spot: None, .. } => format!("to {}{speed}", axes(&p.targets)),
        Action::By { axes: d } => format!("by {} → {}{speed}", axes(d), axes(&p.targets)),
        Action::Dwell { seconds } => format!("dwell {seconds} s"),
        Action::Wait { axis, input, active, timeout_s } => format!(
            "wait for {axis} {} {} (at most {timeout_s} s)",
            serde_json::to_value(input)
                .ok()
                .and_then(|v| v.as_str().map(str::to_owned))
                .unwrap_or_default(),
            if *active { "active" } else { "inactive" }
        ),
    };
    match &p.what.note {
        Some(n) => format!("{what} — {n}"),
        None => what,
    }
}
