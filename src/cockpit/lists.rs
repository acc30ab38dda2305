//! The list screen's state: which move lists there are, which one is chosen, and how its run
//! is going — step by step, from the runner's progress events. Plain data, no I/O: the lists
//! are found on the blocking pool and run by [`crate::move_list::runner`] in a task of its
//! own (effects carried out by the cockpit runner), so neither the draw path nor the engine
//! ever waits for a list.

use crate::move_list::catalog::Found;
use crate::move_list::runner::{ListOutcome, Progress, Stopped};
use crate::move_list::{MoveList, PlannedStep, Start};

/// Where the chosen list's run stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Phase {
    /// Not running.
    #[default]
    Idle,
    /// Asked to start; the runner has not reported yet.
    Starting,
    /// A step is running.
    Running,
    /// A step is running and the list pauses when it ends.
    Pausing,
    /// Paused between steps.
    Paused,
    /// Every step of every pass finished.
    Finished,
}

impl Phase {
    /// Whether a run is under way (started, running or paused).
    pub fn active(self) -> bool {
        matches!(self, Self::Starting | Self::Running | Self::Pausing | Self::Paused)
    }
}

/// How one step of the present pass went.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Mark {
    /// Not reached yet.
    #[default]
    Ahead,
    /// Running now.
    Now,
    /// Finished.
    Done,
    /// Ended the list.
    Failed,
}

/// The list screen.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ListScreen {
    /// The lists found; `None` until the search has answered.
    pub found: Option<Vec<Found>>,
    /// Index of the chosen list in `found`.
    pub chosen: usize,
    /// How its run stands.
    pub phase: Phase,
    /// Pass and step of the latest progress event.
    pub at: Option<(u32, usize)>,
    /// Per step of the chosen list (index = step − 1), for the present pass.
    pub marks: Vec<Mark>,
    /// Where and why the last run ended early; kept until a run finishes, so resuming knows
    /// its step.
    pub stopped: Option<Stopped>,
    /// Why the last start was refused (a limit, a trip, stop-all).
    pub refused: Option<String>,
    /// The checked plan the last run started with (targets worked out then), so the screen
    /// shows what is being carried out, not a plan worked out from where the axes are now.
    pub plan: Vec<PlannedStep>,
}

impl ListScreen {
    /// The chosen list and its name, when it loaded.
    pub fn chosen_list(&self) -> Option<(&str, &MoveList)> {
        let f = self.found.as_ref()?.get(self.chosen)?;
        f.list.as_ref().ok().map(|l| (f.name.as_str(), l))
    }

    /// The chosen entry, loaded or not.
    pub fn chosen_entry(&self) -> Option<&Found> {
        self.found.as_ref()?.get(self.chosen)
    }

    /// Takes the search's answer (kept while a run is under way: the running list stays).
    pub fn set_found(&mut self, found: Vec<Found>) {
        if self.phase.active() {
            return;
        }
        let before = self.chosen_entry().cloned();
        self.chosen =
            before.as_ref().and_then(|b| found.iter().position(|f| f.name == b.name)).unwrap_or(0);
        self.found = Some(found);
        // The same list, unchanged: its marks and resume step stay on screen.
        if self.chosen_entry() != before.as_ref() {
            self.stopped = None;
            self.refused = None;
            self.at = None;
            self.phase = Phase::Idle;
            self.plan.clear();
            self.reset_marks();
        }
    }

    /// Chooses the list `delta` away (wrapping), only while nothing runs.
    pub fn choose(&mut self, delta: isize) {
        let n = self.found.as_ref().map_or(0, Vec::len);
        if n == 0 || self.phase.active() {
            return;
        }
        self.chosen = (self.chosen as isize + delta).rem_euclid(n as isize) as usize;
        self.phase = Phase::Idle;
        self.stopped = None;
        self.refused = None;
        self.at = None;
        self.plan.clear();
        self.reset_marks();
    }

    fn reset_marks(&mut self) {
        let n = self.chosen_list().map_or(0, |(_, l)| l.steps.len());
        self.marks = vec![Mark::Ahead; n];
    }

    /// Where a start would begin: the resume point after an early end (when there is one
    /// left), else the first step.
    pub fn next_from(&self) -> Start {
        let steps = self.marks.len();
        match &self.stopped {
            Some(s) if self.phase != Phase::Finished => s.resume(steps).unwrap_or(Start::from(1)),
            _ => Start::from(1),
        }
    }

    /// A start was asked from `from`, with its checked plan.
    pub fn starting(&mut self, from: Start, plan: Vec<PlannedStep>) {
        if from == Start::from(1) {
            self.reset_marks();
        }
        self.plan = plan;
        self.phase = Phase::Starting;
        self.refused = None;
    }

    /// Takes one progress event.
    pub fn on_progress(&mut self, p: &Progress) {
        let new_pass = self.at.is_some_and(|(pass, _)| p.pass > pass);
        if new_pass {
            self.reset_marks();
        }
        self.at = Some((p.pass, p.step));
        let mark = self.marks.get_mut(p.step.wrapping_sub(1));
        match p.phase {
            "start" => {
                if let Some(m) = mark {
                    *m = Mark::Now;
                }
                if self.phase != Phase::Pausing {
                    self.phase = Phase::Running;
                }
            }
            "done" => {
                if let Some(m) = mark {
                    *m = Mark::Done;
                }
            }
            "failed" => {
                if let Some(m) = mark {
                    *m = Mark::Failed;
                }
            }
            "paused" => self.phase = Phase::Paused,
            _ => {}
        }
    }

    /// Takes the run's end: its outcome, or why it could not start.
    pub fn on_end(&mut self, result: &Result<ListOutcome, String>) {
        match result {
            Ok(out) if out.ok => {
                self.phase = Phase::Finished;
                self.stopped = None;
            }
            Ok(out) => {
                self.phase = Phase::Idle;
                self.stopped.clone_from(&out.stopped);
                if let Some(s) = &out.stopped {
                    if let Some(m) = self.marks.get_mut(s.step.wrapping_sub(1)) {
                        if *m == Mark::Now {
                            *m = Mark::Failed;
                        }
                    }
                }
            }
            Err(why) => {
                // Nothing moved: an earlier stop's resume step still stands.
                self.phase = Phase::Idle;
                self.refused = Some(why.clone());
            }
        }
    }
}
