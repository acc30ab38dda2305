//! The cockpit's whole view of the engine, as a small trait.
//!
//! The runner needs a few things from a machine: the latest snapshots, stop-all (set,
//! release, read), a way to send one command to one axis, machine-wide homing, coordinated
//! moves and move lists. Behind a trait, tests drive the
//! real event loop with a fake machine, and the UI cannot grow a dependency on engine
//! internals.

use std::future::Future;

use tokio::sync::{mpsc, watch};

use crate::engine::line_move::LineOutcome;
use crate::engine::{AxisCommand, AxisSnapshot, CommandError, MachineHandle};
use crate::move_list::runner::{ListControl, ListOutcome, Progress};
use crate::move_list::MoveList;

/// What the cockpit needs from a running machine.
pub trait MachinePort: Send + Sync + 'static {
    /// Replaces `out` with every axis's latest snapshot, in configuration order.
    fn snapshots_into(&self, out: &mut Vec<AxisSnapshot>);
    /// Latches stop-all. Must never wait.
    fn stop_all(&self);
    /// Releases stop-all.
    fn release_stop_all(&self);
    /// Whether stop-all is latched.
    fn stop_all_latched(&self) -> bool;
    /// Sends `command` to axis `axis` and resolves to its answer; `Err` carries the reason in
    /// words. The cockpit awaits this only in a background task.
    fn send(
        &self,
        axis: usize,
        command: AxisCommand,
    ) -> impl Future<Output = Result<(), String>> + Send + 'static;
    /// Homes every axis in the configured order; resolves when done or stopped.
    fn home_all(&self) -> impl Future<Output = Result<(), String>> + Send + 'static;
    /// Runs a tuning step on an axis and analyses it.
    fn tune(
        &self,
        axis: usize,
        config: crate::config::AxisConfig,
        step: crate::commission::TuneStep,
    ) -> impl Future<Output = Result<crate::commission::Outcome, String>> + Send + 'static {
        let _ = (axis, config, step);
        async { Err("this machine cannot run tests".to_owned()) }
    }
    /// Moves `goals` together on one straight line ([`crate::engine::line_move::move_line`])
    /// and resolves when every axis is in position or the move ended early.
    fn move_line(
        &self,
        goals: Vec<(String, f64)>,
    ) -> impl Future<Output = Result<LineOutcome, String>> + Send + 'static {
        let _ = goals;
        async { Err("this machine cannot make coordinated moves".to_owned()) }
    }
    /// Runs a move list ([`crate::move_list::runner::run_list`]) from step `from`, under
    /// `control` (pause, resume, abort), sending every progress event to `progress`; resolves
    /// to its outcome, or to why it could not start.
    fn run_list(
        &self,
        list: MoveList,
        from: crate::move_list::Start,
        control: watch::Receiver<ListControl>,
        progress: mpsc::UnboundedSender<Progress>,
    ) -> impl Future<Output = Result<ListOutcome, String>> + Send + 'static {
        let _ = (list, from, control, progress);
        async { Err("this machine cannot run move lists".to_owned()) }
    }
    /// The machine's event stream, when it has one (trip captures, notices).
    fn events(&self) -> Option<tokio::sync::broadcast::Receiver<crate::engine::Event>> {
        None
    }
    /// An axis's full-rate history (for the trip screen).
    fn history(
        &self,
        axis: usize,
    ) -> impl Future<Output = Result<Vec<crate::engine::history::Sample>, String>> + Send + 'static
    {
        let _ = axis;
        async { Err("this machine keeps no history".to_owned()) }
    }
    /// Whether axis `axis` takes fault drills (its board is simulated in process).
    fn drillable(&self, axis: usize) -> bool {
        let _ = axis;
        false
    }
    /// Injects a fault drill into axis `axis`'s simulated board; answers what it did, in
    /// words. Must never wait (the board reads it at its next tick).
    fn drill(&self, axis: usize, pick: &crate::cockpit::drill::Pick) -> Result<String, String> {
        let _ = (axis, pick);
        Err(crate::cockpit::drill::ONLY_SIMULATED.to_owned())
    }
}

impl MachinePort for MachineHandle {
    fn tune(
        &self,
        _axis: usize,
        config: crate::config::AxisConfig,
        step: crate::commission::TuneStep,
    ) -> impl Future<Output = Result<crate::commission::Outcome, String>> + Send + 'static {
        let h = self.clone();
        async move {
            // Suggested gains are verified by a short step against the current ones before
            // `a` offers them.
            let req = crate::commission::StepRequest {
                verify: true,
                ..crate::commission::StepRequest::new(step)
            };
            crate::commission::run(&h, &config, &req).await
        }
    }

    fn move_line(
        &self,
        goals: Vec<(String, f64)>,
    ) -> impl Future<Output = Result<LineOutcome, String>> + Send + 'static {
        let h = self.clone();
        async move {
            crate::engine::line_move::move_line(&h, &goals, 1.0).await.map_err(|e| e.to_string())
        }
    }

    fn run_list(
        &self,
        list: MoveList,
        from: crate::move_list::Start,
        control: watch::Receiver<ListControl>,
        progress: mpsc::UnboundedSender<Progress>,
    ) -> impl Future<Output = Result<ListOutcome, String>> + Send + 'static {
        let h = self.clone();
        async move {
            crate::move_list::runner::run_list(&h, &list, from, control, |p| {
                let _ = progress.send(p.clone());
            })
            .await
            .map_err(|e| e.to_string())
        }
    }

    fn events(&self) -> Option<tokio::sync::broadcast::Receiver<crate::engine::Event>> {
        Some(MachineHandle::events(self))
    }

    fn history(
        &self,
        axis: usize,
    ) -> impl Future<Output = Result<Vec<crate::engine::history::Sample>, String>> + Send + 'static
    {
        let handle = self.axes().get(axis).cloned();
        async move {
            let Some(h) = handle else { return Err(format!("no axis number {axis}")) };
            match h.send(AxisCommand::History).await {
                Ok(crate::engine::axis::Reply::History(rows)) => Ok(rows),
                Ok(_) => Err("the axis answered something else".to_owned()),
                Err(CommandError::Refused { reason, .. }) => Err(reason.to_string()),
                Err(CommandError::Gone(_)) => Err("the axis task has stopped".to_owned()),
            }
        }
    }

    fn drillable(&self, axis: usize) -> bool {
        self.axes().get(axis).is_some_and(|a| self.sim_board(a.name()).is_some())
    }

    fn drill(&self, axis: usize, pick: &crate::cockpit::drill::Pick) -> Result<String, String> {
        use crate::cockpit::drill::{rail_mm, Pick, ONLY_SIMULATED};
        use crate::sim::drill::{apply, Drill};
        let h = self.axes().get(axis).ok_or_else(|| format!("no axis number {axis}"))?;
        let board = self.sim_board(h.name()).ok_or_else(|| ONLY_SIMULATED.to_owned())?;
        match pick {
            Pick::Board(d) => Ok(apply(&board, d)),
            Pick::JamAtPosition(p) => {
                let cfg = self.config().axes.get(axis).ok_or("no such axis")?;
                let rail = rail_mm(cfg, h.snapshot().position, board.view().position_mm, *p)
                    .ok_or("this axis's scale cannot place the jam")?;
                apply(&board, &Drill::JamAt(rail));
                Ok(format!("will jam at {p} {} ({rail:.1} mm on its rail)", cfg.scale.unit))
            }
        }
    }

    fn home_all(&self) -> impl Future<Output = Result<(), String>> + Send + 'static {
        let h = self.clone();
        async move { h.home(None).await.map_err(|e| e.to_string()) }
    }

    fn snapshots_into(&self, out: &mut Vec<AxisSnapshot>) {
        out.clear();
        out.extend(self.axes().iter().map(crate::engine::AxisHandle::snapshot));
    }

    fn stop_all(&self) {
        MachineHandle::stop_all(self);
    }

    fn release_stop_all(&self) {
        MachineHandle::release_stop_all(self);
    }

    fn stop_all_latched(&self) -> bool {
        MachineHandle::stop_all_latched(self)
    }

    fn send(
        &self,
        axis: usize,
        command: AxisCommand,
    ) -> impl Future<Output = Result<(), String>> + Send + 'static {
        let handle = self.axes().get(axis).cloned();
        async move {
            let Some(h) = handle else { return Err(format!("no axis number {axis}")) };
            match h.send(command).await {
                Ok(_) => Ok(()),
                Err(CommandError::Refused { reason, .. }) => Err(reason.to_string()),
                Err(CommandError::Gone(_)) => Err("the axis task has stopped".to_owned()),
            }
        }
    }
}
