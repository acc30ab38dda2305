//! Carries a move list out on a running machine, step by step, with progress, pause at the
//! end of a step, resume and abort.
//!
//! Before anything moves every target of every pass is checked ([`super::check`]), and the
//! list is refused while an axis it uses is tripped (clear the trip first) or a moving axis
//! is not homed. A trip, a refusal, a timeout or stop-all ends the list: every axis of the
//! machine is stopped (controlled deceleration, then motor off: IEC 60204-1 category 1) and the
//! outcome says at which step and pass, and from which step it can resume once the cause is
//! cleared. Space in the cockpit (stop-all) still stops everything as always; the runner
//! sees the axes leave their states and ends the list.

use std::collections::{BTreeMap, BTreeSet};
use std::time::Duration;

use serde::Serialize;
use tokio::sync::watch;

use super::{check, describe, Action, ListError, MoveList, PlannedStep, Start};
use crate::engine::line_move::{move_line, stop_then_off};
use crate::engine::{AxisCommand, AxisHandle, AxisState, MachineHandle};

/// What the operator wants of a running list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ListControl {
    /// Carry on.
    #[default]
    Run,
    /// Stop before the next step starts (the present one finishes).
    Pause,
    /// Stop everything now.
    Abort,
}

/// A progress event.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Progress {
    /// 1-based pass.
    pub pass: u32,
    /// 1-based step.
    pub step: usize,
    /// Steps in the list.
    pub steps: usize,
    /// The step in words.
    pub what: String,
    /// "start", "done", "paused", "failed".
    pub phase: &'static str,
}

/// How one step went.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StepReport {
    /// 1-based pass.
    pub pass: u32,
    /// 1-based step.
    pub step: usize,
    /// The step in words.
    pub what: String,
    /// Whether it finished.
    pub ok: bool,
    /// Time it took, s (host time).
    pub seconds: f64,
    /// Why it failed.
    pub detail: Option<String>,
}

/// Where and why a list stopped early.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Stopped {
    /// 1-based pass.
    pub pass: u32,
    /// 1-based step.
    pub step: usize,
    /// Why.
    pub reason: String,
    /// The step to resume from after clearing the cause (`servotty run --from`); past the
    /// last step when nothing is left.
    pub resume_from: usize,
    /// The pass that step belongs to (`servotty run --pass`).
    pub resume_pass: u32,
}

impl Stopped {
    /// Where a resumed run begins, or `None` when the list stopped at its very last step.
    pub fn resume(&self, steps: usize) -> Option<Start> {
        (self.resume_from <= steps)
            .then_some(Start { pass: self.resume_pass, step: self.resume_from })
    }
}

/// The whole result.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ListOutcome {
    /// True when every step of every pass finished.
    pub ok: bool,
    /// The steps that ran.
    pub steps: Vec<StepReport>,
    /// Set when the list ended early.
    pub stopped: Option<Stopped>,
}

/// Checks `list` against the machine's present positions, from `from` (a step, 1-based, or a
/// step of a later pass).
///
/// # Errors
/// [`ListError`] for a target outside the limits or a relative move of an unknown position.
pub fn plan(
    m: &MachineHandle,
    list: &MoveList,
    from: impl Into<Start>,
) -> Result<Vec<PlannedStep>, ListError> {
    let start: BTreeMap<String, f64> =
        m.axes().iter().map(|a| (a.name().to_owned(), a.snapshot().goal)).collect();
    check(list, m.config(), &start, from)
}

/// The axes a list moves and the axes it reads.
fn axes_used(plan: &[PlannedStep]) -> (BTreeSet<String>, BTreeSet<String>) {
    let mut moved = BTreeSet::new();
    let mut all = BTreeSet::new();
    for p in plan {
        moved.extend(p.targets.keys().cloned());
        all.extend(p.targets.keys().cloned());
        if let Action::Wait { axis, .. } = &p.what.action {
            all.insert(axis.clone());
        }
    }
    (moved, all)
}

/// Runs `list` from `from` (a step, 1-based, or a step of a later pass). `on` sees every
/// progress event.
///
/// # Errors
/// [`ListError`] when the list cannot start (nothing has moved then); failures after the
/// start are in the outcome.
pub async fn run_list(
    m: &MachineHandle,
    list: &MoveList,
    from: impl Into<Start>,
    mut control: watch::Receiver<ListControl>,
    mut on: impl FnMut(&Progress),
) -> Result<ListOutcome, ListError> {
    let plan = plan(m, list, from)?;
    let (moved, used) = axes_used(&plan);
    let handles: Vec<&AxisHandle> = used.iter().filter_map(|a| m.axis(a)).collect();
    for a in &handles {
        let s = a.snapshot();
        if s.state == AxisState::Tripped {
            return Err(ListError::List(format!(
                "{} is tripped: clear the trip first, then resume the list",
                a.name()
            )));
        }
        if moved.contains(a.name()) && !s.homed {
            return Err(ListError::List(format!("{} is not homed: home it first", a.name())));
        }
    }
    if m.stop_all_latched() {
        return Err(ListError::List("stop-all is latched: release it first".into()));
    }
    for a in handles.iter().filter(|a| moved.contains(a.name())) {
        if a.snapshot().state == AxisState::Disabled {
            a.send(AxisCommand::Enable)
                .await
                .map_err(|e| ListError::List(format!("cannot start: {e}")))?;
        }
    }
    // A list that ends early stops the whole machine, not only the axes it names.
    let every: Vec<&AxisHandle> = m.axes().iter().collect();
    let n_steps = list.steps.len();
    let mut reports = Vec::new();
    for p in &plan {
        let what = describe(p);
        let event = |phase| Progress {
            pass: p.pass,
            step: p.step,
            steps: n_steps,
            what: what.clone(),
            phase,
        };
        // Pause takes effect between steps.
        if *control.borrow_and_update() == ListControl::Pause {
            on(&event("paused"));
            let _ = control.wait_for(|c| *c != ListControl::Pause).await;
        }
        if *control.borrow() == ListControl::Abort {
            stop_then_off(&every).await;
            // This step never started: resuming begins with it.
            let stopped = Stopped {
                resume_from: p.step,
                resume_pass: p.pass,
                ..stopped(list, p, "aborted by the operator")
            };
            return Ok(ListOutcome { ok: false, steps: reports, stopped: Some(stopped) });
        }
        on(&event("start"));
        let t0 = tokio::time::Instant::now();
        let result = tokio::select! {
            r = run_step(m, p, &handles) => r,
            _ = control.wait_for(|c| *c == ListControl::Abort) => Err("aborted by the operator".to_owned()),
        };
        let seconds = t0.elapsed().as_secs_f64();
        match result {
            Ok(()) => {
                on(&event("done"));
                reports.push(StepReport {
                    pass: p.pass,
                    step: p.step,
                    what: what.clone(),
                    ok: true,
                    seconds,
                    detail: None,
                });
            }
            Err(why) => {
                stop_then_off(&every).await;
                on(&event("failed"));
                reports.push(StepReport {
                    pass: p.pass,
                    step: p.step,
                    what: what.clone(),
                    ok: false,
                    seconds,
                    detail: Some(why.clone()),
                });
                return Ok(ListOutcome {
                    ok: false,
                    steps: reports,
                    stopped: Some(stopped(list, p, &why)),
                });
            }
        }
    }
    Ok(ListOutcome { ok: true, steps: reports, stopped: None })
}

fn stopped(list: &MoveList, p: &PlannedStep, why: &str) -> Stopped {
    // The failed step may have moved part way; resuming repeats nothing before it and
    // starts with the next one (its targets are absolute or re-checked from where the axes
    // stand then) — the first step of the next pass after a pass's last step.
    let (resume_pass, resume_from) = if p.step < list.steps.len() {
        (p.pass, p.step + 1)
    } else if p.pass < list.times {
        (p.pass + 1, 1)
    } else {
        (p.pass, p.step + 1)
    };
    Stopped { pass: p.pass, step: p.step, reason: why.to_owned(), resume_from, resume_pass }
}

async fn run_step(m: &MachineHandle, p: &PlannedStep, axes: &[&AxisHandle]) -> Result<(), String> {
    match &p.what.action {
        Action::To { .. } | Action::By { .. } => {
            let goals: Vec<(String, f64)> =
                p.targets.iter().map(|(a, v)| (a.clone(), *v)).collect();
            let out = move_line(m, &goals, p.what.speed).await.map_err(|e| e.to_string())?;
            match out.ended_by {
                None => Ok(()),
                Some((axis, why)) => Err(format!("{axis}: {why}")),
            }
        }
        Action::Dwell { seconds } => {
            tokio::select! {
                () = tokio::time::sleep(Duration::from_secs_f64(*seconds)) => Ok(()),
                why = trouble(axes) => Err(why),
            }
        }
        Action::Wait { axis, input, active, timeout_s } => {
            let a = m.axis(axis).ok_or_else(|| format!("no axis called {axis:?}"))?;
            let mut rx = a.watch();
            let bit = input.bit();
            let wait = rx.wait_for(|s| (s.inputs & bit != 0) == *active);
            tokio::select! {
                r = tokio::time::timeout(Duration::from_secs_f64(*timeout_s), wait) => match r {
                    Ok(Ok(_)) => Ok(()),
                    Ok(Err(_)) => Err(format!("{axis}: axis task ended")),
                    Err(_) => Err(format!("{axis}: the input did not change within {timeout_s} s")),
                },
                why = trouble(axes) => Err(why),
            }
        }
    }
}

/// Resolves when an axis of the list trips, loses its link or is stopped while the list
/// stands still (dwell, wait): the list must not carry on.
async fn trouble(axes: &[&AxisHandle]) -> String {
    let bad = |s: &crate::engine::AxisSnapshot| {
        matches!(
            s.state,
            AxisState::Tripped | AxisState::Stopping | AxisState::Stopped | AxisState::Offline
        )
    };
    let mut rxs: Vec<_> = axes.iter().map(|a| a.watch()).collect();
    if rxs.is_empty() {
        return std::future::pending().await;
    }
    loop {
        for r in &mut rxs {
            let s = r.borrow_and_update();
            if bad(&s) {
                return match &s.trip {
                    Some(t) => format!("{}: {}: {}", s.axis, t.cause, t.detail),
                    None => format!("{}: {}", s.axis, s.state),
                };
            }
        }
        let changed = futures::future::select_all(rxs.iter_mut().map(|r| Box::pin(r.changed())));
        if let (Err(_), i, _) = changed.await {
            return format!("{}: axis task ended", axes[i].name());
        }
    }
}
