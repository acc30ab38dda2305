//! `servotty run LIST`: carry out a move list ([`crate::move_list`]) — progress per step on
//! stderr, a summary table or one JSON object on stdout; `--dry-run` checks every target of
//! every pass against the soft limits and prints the plan without moving anything.

use std::path::PathBuf;

use clap::Args;
use serde::Serialize;
use tokio::sync::watch;

use crate::cli::json_round::{emit_json, Rounding};
use crate::cli::{emit, Failure, MachineArgs, EXIT_FAILED, EXIT_OK};
use crate::move_list::runner::{self, ListControl, ListOutcome};
use crate::move_list::{describe, ListError, MoveList, PlannedStep};

/// `servotty run`.
#[derive(Debug, Args)]
pub struct RunArgs {
    /// Which machine.
    #[command(flatten)]
    pub machine: MachineArgs,
    /// The move list (TOML; see configs/tray-inspection-list.toml).
    pub list: PathBuf,
    /// Check every target against the soft limits and print the plan; nothing moves.
    #[arg(long)]
    pub dry_run: bool,
    /// Start at this step (1-based) of the first pass, e.g. to resume after a trip.
    #[arg(long, value_name = "STEP", default_value_t = 1)]
    pub from: usize,
    /// With --from: the pass that step belongs to (the passes before it do not run again).
    #[arg(long, value_name = "PASS", default_value_t = 1)]
    pub pass: u32,
    /// Home the axes (in the configured order) first (not with --dry-run).
    #[arg(long)]
    pub home: bool,
    /// Confirm that the axes may move (asked on a terminal; required without one).
    #[arg(long)]
    pub yes: bool,
    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// `--dry-run --json`.
#[derive(Debug, Serialize)]
struct DryRun<'a> {
    ok: bool,
    dry_run: bool,
    steps: &'a [PlannedStep],
}

fn list_failure(e: &ListError) -> Failure {
    Failure::Usage(e.to_string())
}

/// `servotty run`.
///
/// # Errors
/// [`Failure`] when the list cannot be read or checked, or the machine cannot start; a
/// step that fails is in the outcome (exit 1).
pub fn run(args: &RunArgs) -> Result<u8, Failure> {
    let (cfg, _) = args.machine.load()?;
    let list = MoveList::load(&args.list, &cfg).map_err(|e| list_failure(&e))?;
    let (json, home, dry) = (args.json, args.home, args.dry_run);
    let from = crate::move_list::Start { pass: args.pass, step: args.from };
    if !dry {
        crate::cli::ask::go_ahead(
            args.yes,
            &format!(
                "run: {}enables and moves the axes of {} ({} steps × {}).",
                if home { "homes every axis, then " } else { "" },
                args.list.display(),
                list.steps.len(),
                list.times
            ),
        )?;
    }
    let list = &list;
    crate::cli::with_machine(&args.machine, |h| async move {
        let rounding = Rounding::of(h.config());
        let offline = h.wait_linked(std::time::Duration::from_secs(3)).await;
        if let Some(a) = offline.first() {
            return Err(Failure::Machine(format!("{a}: {}", h.offline_reason(a))));
        }
        // A dry run moves nothing, so it does not home either: targets are checked from
        // where the axes stand.
        if home && !dry {
            h.home(None).await?;
        }
        if dry {
            let plan = runner::plan(&h, list, from).map_err(|e| list_failure(&e))?;
            if json {
                emit_json(&DryRun { ok: true, dry_run: true, steps: &plan }, &rounding)?;
            } else {
                emit(&plan_table(&plan))?;
            }
            return Ok(EXIT_OK);
        }
        // The CLI has no pause key: Ctrl-C ends the command (motors off) as everywhere.
        let (_control, rx) = watch::channel(ListControl::Run);
        let out = runner::run_list(&h, list, from, rx, |p| {
            if !json {
                eprintln!(
                    "servotty: pass {} step {}/{} {}: {}",
                    p.pass, p.step, p.steps, p.phase, p.what
                );
            }
        })
        .await;
        // Leave the motors off, as `move` does.
        for a in h.axes() {
            if a.snapshot().state.motor_on() {
                let _ = a.send(crate::engine::AxisCommand::Disable).await;
            }
        }
        let out = out.map_err(|e| match e {
            ListError::Step { .. } | ListError::List(_) => Failure::Machine(e.to_string()),
            e => list_failure(&e),
        })?;
        if json {
            emit_json(&out, &rounding)?;
        } else {
            emit(&outcome_table(&out, list.steps.len()))?;
        }
        Ok(if out.ok { EXIT_OK } else { EXIT_FAILED })
    })
}

fn plan_table(plan: &[PlannedStep]) -> String {
    let mut s = String::from("pass step  what\n");
    for p in plan {
        s.push_str(&format!("{:>4} {:>4}  {}\n", p.pass, p.step, describe(p)));
    }
    s.push_str(&format!("{} steps checked against the soft limits; nothing moved.\n", plan.len()));
    s
}

fn outcome_table(out: &ListOutcome, steps: usize) -> String {
    let mut s = String::from("pass step  result  time      what\n");
    for r in &out.steps {
        s.push_str(&format!(
            "{:>4} {:>4}  {:<6}  {:>6.2} s  {}\n",
            r.pass,
            r.step,
            if r.ok { "done" } else { "FAILED" },
            r.seconds,
            r.what
        ));
    }
    match &out.stopped {
        None => s.push_str("list finished.\n"),
        Some(st) => {
            s.push_str(&format!(
                "list stopped at pass {} step {}: {}\n",
                st.pass, st.step, st.reason
            ));
            s.push_str(&match st.resume(steps) {
                Some(r) if r.pass > 1 => {
                    format!(
                        "clear the cause, then resume with --from {} --pass {}\n",
                        r.step, r.pass
                    )
                }
                Some(r) => format!("clear the cause, then resume with --from {}\n", r.step),
                None => "it was the last step: nothing is left to resume\n".to_owned(),
            });
        }
    }
    s
}
