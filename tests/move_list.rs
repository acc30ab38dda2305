//! Move lists and coordinated moves on the demo machine (configs/demo-greenhouse.toml and
//! configs/tray-inspection-list.toml: invented numbers), through the real axis tasks,
//! protocol, simulated boards and plants, in simulated time (deterministic).
//!
//! The behaviour checked here is servotty's own (the list format, stopping a list, resuming);
//! the stop categories are IEC 60204-1 §9.2.2's; the straight-line rule (every axis follows
//! `start + D·σ(t)`) is common practice, no source.

use std::collections::BTreeMap;
use std::path::Path;
use std::time::Duration;

use servotty::cli::move_cmd::{resolve, run_moves};
use servotty::config::MachineConfig;
use servotty::engine::line_move::{move_line, plan_line};
use servotty::engine::{AxisCommand, AxisState, MachineHandle};
use servotty::move_list::runner::{run_list, ListControl};
use servotty::move_list::{check, ListError, MoveList, Start};
use servotty::sim::plant::PlantFaults;
use tokio::sync::watch;

mod engine_support;
use engine_support::{assert_at_spot, demo, started};

fn demo_list(cfg: &MachineConfig) -> MoveList {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("configs/tray-inspection-list.toml");
    MoveList::load(&path, cfg).expect("the demo list loads")
}

fn list(text: &str) -> Result<MoveList, ListError> {
    MoveList::from_toml_str(text, "test.toml", &demo())
}

fn zeros() -> BTreeMap<String, f64> {
    ["x", "y", "z"].iter().map(|a| ((*a).to_owned(), 0.0)).collect()
}

#[test]
fn the_demo_list_checks_out_against_the_soft_limits() {
    let cfg = demo();
    let l = demo_list(&cfg);
    let plan = check(&l, &cfg, &zeros(), 1).expect("inside the limits");
    assert_eq!(plan.len(), l.steps.len());
    // The relative "probe up" steps come back to z = 0 from the probe depth.
    assert!(plan.iter().filter(|p| p.targets.get("z") == Some(&0.0)).count() >= 3);
}

#[test]
fn malformed_steps_are_refused_with_their_number() {
    let two = "[[step]]\nto = { x = 1.0 }\ndwell_s = 1.0\n";
    assert!(matches!(list(two), Err(ListError::Step { step: 1, .. })));
    let axis = "[[step]]\ndwell_s = 1.0\n[[step]]\nby = { w = 1.0 }\n";
    let e = list(axis).expect_err("no axis w");
    assert!(
        matches!(e, ListError::Step { step: 2, .. }) && e.to_string().contains("axes: x, y, z")
    );
    let speed = "[[step]]\nto = { x = 1.0 }\nspeed = 1.5\n";
    assert!(list(speed).expect_err("speed").to_string().contains("0 < speed ≤ 1"));
    let spot = "[[step]]\nto = \"@nowhere\"\n";
    assert!(list(spot).expect_err("spot").to_string().contains("tray1"));
    let typo = "[[step]]\ndwel_s = 1.0\n";
    assert!(matches!(list(typo), Err(ListError::Parse { line: 2, .. })));
}

#[test]
fn a_target_outside_the_limits_on_a_later_pass_is_found_before_anything_moves() {
    // z goes down 60 mm per pass: −60, −120, then −180 is below soft_min −150.
    let l = list("times = 3\n[[step]]\nby = { z = -60.0 }\n").expect("form is fine");
    let e = check(&l, &demo(), &zeros(), 1).expect_err("pass 3 is outside");
    assert_eq!(e, ListError::Step { step: 1, pass: Some(3), message: e_message(&e) });
    assert!(e.to_string().contains("outside the soft limits"), "{e}");
}

fn e_message(e: &ListError) -> String {
    match e {
        ListError::Step { message, .. } => message.clone(),
        _ => String::new(),
    }
}

#[test]
fn a_line_gives_each_axis_limits_in_proportion_and_the_slowest_sets_the_time() {
    let cfg = demo();
    let goals = vec![("x".to_owned(), 600.0), ("y".to_owned(), 100.0)];
    let plan = plan_line(&cfg, &zeros(), &goals, 1.0).expect("plans");
    let (x, y) = (&plan.axes[0], &plan.axes[1]);
    let own = |a: &str| cfg.axis(a).expect("axis").motion.clone();
    // x is the long axis and has the same limits as y: it sets the pace at its own limits.
    assert!((x.limits.velocity - own("x").max_velocity).abs() < 1e-9);
    assert!((y.limits.velocity - own("x").max_velocity * 100.0 / 600.0).abs() < 1e-9);
    assert!(
        y.limits.velocity <= own("y").max_velocity
            && y.limits.acceleration <= own("y").max_acceleration
    );
    // Its time is x's alone.
    let alone = plan_line(&cfg, &zeros(), &goals[..1], 1.0).expect("plans");
    assert!((plan.duration_s - alone.duration_s).abs() < 1e-9);
}

/// Host (simulated) time at which each axis's setpoint reached its goal.
async fn arrival_times(h: &MachineHandle, goals: &[(String, f64)]) -> Vec<tokio::time::Instant> {
    let mut rxs: Vec<_> = goals.iter().map(|(a, _)| h.axis(a).expect("axis").watch()).collect();
    let mut at = vec![None; goals.len()];
    while at.iter().any(Option::is_none) {
        for (i, r) in rxs.iter_mut().enumerate() {
            let s = r.borrow_and_update();
            if at[i].is_none() && s.target == goals[i].1 {
                at[i] = Some(tokio::time::Instant::now());
            }
        }
        let changed = futures::future::select_all(rxs.iter_mut().map(|r| Box::pin(r.changed())));
        let _ = tokio::time::timeout(Duration::from_secs(20), changed).await.expect("progress");
    }
    at.into_iter().flatten().collect()
}

#[tokio::test(start_paused = true)]
async fn a_coordinated_move_arrives_together_within_one_tick() {
    let mut cfg = demo();
    // One jerk-limited axis makes the whole line jerk-limited.
    cfg.axes[1].motion.profile = servotty::control::ProfileShape::JerkLimited;
    cfg.axes[1].motion.max_jerk = Some(20_000.0);
    let (m, h) = started(&cfg).await;
    for a in ["x", "y"] {
        h.axis(a).expect("axis").send(AxisCommand::Enable).await.expect("enable");
    }
    let goals = vec![("x".to_owned(), 700.0), ("y".to_owned(), 120.0)];
    let watcher = arrival_times(&h, &goals);
    let (out, at) = tokio::join!(move_line(&h, &goals, 0.8), watcher);
    let out = out.expect("moves");
    assert!(out.ok, "{out:#?}");
    let tick = Duration::from_millis(1); // the demo boards run at 1 kHz
    let gap = if at[0] > at[1] { at[0] - at[1] } else { at[1] - at[0] };
    println!("arrivals {gap:?} apart, planned {:.3} s", out.planned_s);
    assert!(gap <= tick, "arrivals {gap:?} apart");
    for a in &out.axes {
        assert!((a.final_position - a.target).abs() <= 0.1, "{a:#?}");
    }
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn move_to_a_spot_is_one_line_arriving_within_one_tick() {
    // `servotty move --to @tray3` runs through run_moves.
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    let targets = resolve(&cfg, &["@tray3".parse().expect("spot")]).expect("resolves");
    let goals: Vec<(String, f64)> = targets.iter().map(|t| (t.axis.clone(), t.position)).collect();
    let (out, at) = tokio::join!(run_moves(&h, &targets), arrival_times(&h, &goals));
    let out = out.expect("moves");
    assert!(out.ok, "{out:#?}");
    let gap = if at[0] > at[1] { at[0] - at[1] } else { at[1] - at[0] };
    println!("move --to @tray3: arrivals {gap:?} apart");
    assert!(gap <= Duration::from_millis(1), "arrivals {gap:?} apart");
    for a in &out.axes {
        assert!((a.final_position - a.target).abs() <= 0.1, "{a:#?}");
    }
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn a_trip_on_one_axis_of_a_line_stops_the_others_and_switches_them_off() {
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    for a in ["x", "y"] {
        h.axis(a).expect("axis").send(AxisCommand::Enable).await.expect("enable");
    }
    m.sim("y")
        .expect("sim")
        .set_plant_faults(PlantFaults { blocked: true, ..PlantFaults::default() });
    let goals = vec![("x".to_owned(), 700.0), ("y".to_owned(), 300.0)];
    let out = move_line(&h, &goals, 1.0).await.expect("starts");
    assert!(!out.ok);
    assert_eq!(out.ended_by.as_ref().map(|(a, _)| a.as_str()), Some("y"), "{out:#?}");
    let x = h.axis("x").expect("x").snapshot();
    assert_eq!(x.state, AxisState::Disabled, "x stopped, then off (category 1)");
    assert!(x.position < 650.0, "x did not run on to its goal: {}", x.position);
    assert_eq!(h.axis("y").expect("y").snapshot().state, AxisState::Tripped);
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn the_demo_list_runs_end_to_end() {
    let cfg = demo();
    let l = demo_list(&cfg);
    let (m, h) = started(&cfg).await;
    let (_tx, rx) = watch::channel(ListControl::Run);
    let mut events = Vec::new();
    let out = run_list(&h, &l, 1, rx, |p| events.push((p.step, p.phase))).await.expect("runs");
    assert!(out.ok, "{out:#?}");
    assert_eq!(out.steps.len(), l.steps.len());
    assert_eq!(events.iter().filter(|e| e.1 == "done").count(), l.steps.len());
    // It ends parked.
    assert_at_spot(&h, &cfg, "park");
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn a_trip_mid_list_stops_everything_and_resumes_only_after_clearing() {
    let cfg = demo();
    let l =
        list("[[step]]\nto = \"@tray1\"\n[[step]]\nto = \"@tray2\"\n[[step]]\nto = \"@tray3\"\n")
            .expect("list");
    let (m, h) = started(&cfg).await;
    let sim = m.sim("x").expect("sim");
    let (_tx, rx) = watch::channel(ListControl::Run);
    let jam = sim.clone();
    let out = run_list(&h, &l, 1, rx.clone(), move |p| {
        if p.step == 2 && p.phase == "start" {
            jam.set_plant_faults(PlantFaults { blocked: true, ..PlantFaults::default() });
        }
    })
    .await
    .expect("starts");
    assert!(!out.ok);
    let stopped = out.stopped.expect("stopped");
    assert_eq!((stopped.step, stopped.resume_from), (2, 3), "{stopped:#?}");
    assert!(stopped.reason.starts_with("x:"), "{stopped:#?}");
    for a in h.axes() {
        assert!(!a.snapshot().state.motor_on(), "{}: every motor off", a.name());
    }
    // Not resumable while the trip stands.
    let e = run_list(&h, &l, 3, rx.clone(), |_| {}).await.expect_err("refused");
    assert!(e.to_string().contains("clear the trip"), "{e}");
    // The operator frees the carriage and clears the trip: the list goes on from step 3.
    sim.set_plant_faults(PlantFaults::default());
    h.axis("x").expect("x").send(AxisCommand::ClearTrip).await.expect("cleared");
    let out = run_list(&h, &l, 3, rx, |_| {}).await.expect("resumes");
    assert!(out.ok, "{out:#?}");
    assert_eq!(out.steps.iter().map(|s| s.step).collect::<Vec<_>>(), vec![3]);
    m.shutdown().await;
}

#[test]
fn a_resume_in_a_later_pass_runs_only_what_is_left() {
    let l =
        list("times = 3\n[[step]]\nto = \"@tray1\"\n[[step]]\nto = \"@tray2\"\n").expect("list");
    let plan = check(&l, &demo(), &zeros(), Start { pass: 2, step: 2 }).expect("inside");
    let at: Vec<(u32, usize)> = plan.iter().map(|p| (p.pass, p.step)).collect();
    assert_eq!(at, vec![(2, 2), (3, 1), (3, 2)]);
    assert!(check(&l, &demo(), &zeros(), Start { pass: 4, step: 1 }).is_err(), "3 passes only");
}

#[tokio::test(start_paused = true)]
async fn a_trip_at_the_last_step_of_a_pass_resumes_with_the_next_pass() {
    let cfg = demo();
    let l =
        list("times = 2\n[[step]]\nto = \"@tray1\"\n[[step]]\nto = \"@tray3\"\n").expect("list");
    let (m, h) = started(&cfg).await;
    let sim = m.sim("x").expect("sim");
    let (_tx, rx) = watch::channel(ListControl::Run);
    let jam = sim.clone();
    let out = run_list(&h, &l, 1, rx.clone(), move |p| {
        if (p.pass, p.step, p.phase) == (1, 2, "start") {
            jam.set_plant_faults(PlantFaults { blocked: true, ..PlantFaults::default() });
        }
    })
    .await
    .expect("starts");
    let stopped = out.stopped.expect("stopped");
    assert_eq!((stopped.pass, stopped.step), (1, 2));
    let from = stopped.resume(l.steps.len()).expect("something is left");
    assert_eq!(from, Start { pass: 2, step: 1 });
    sim.set_plant_faults(PlantFaults::default());
    h.axis("x").expect("x").send(AxisCommand::ClearTrip).await.expect("cleared");
    let out = run_list(&h, &l, from, rx, |_| {}).await.expect("resumes");
    assert!(out.ok, "{out:#?}");
    let ran: Vec<(u32, usize)> = out.steps.iter().map(|s| (s.pass, s.step)).collect();
    assert_eq!(ran, vec![(2, 1), (2, 2)], "only the second pass is left");
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn pause_waits_at_the_end_of_a_step_and_abort_stops_at_once() {
    let cfg = demo();
    let l = list("[[step]]\nto = \"@tray1\"\n[[step]]\nto = \"@tray3\"\n").expect("list");
    let (m, h) = started(&cfg).await;
    let (tx, rx) = watch::channel(ListControl::Run);
    let ctl = tx.clone();
    let mut seen = Vec::new();
    let run = run_list(&h, &l, 1, rx, |p| {
        if p.step == 1 && p.phase == "start" {
            let _ = ctl.send(ListControl::Pause);
        }
        seen.push((p.step, p.phase));
    });
    let operator = async {
        // Once paused, the first step has finished: x stands at tray 1.
        let mut x = h.axis("x").expect("x").watch();
        let _ = x.wait_for(|s| s.moves_done > 0 && s.state == AxisState::Steady).await;
        tokio::time::sleep(Duration::from_millis(500)).await;
        let _ = tx.send(ListControl::Run);
        // Abort during the long move to tray 3.
        let _ = x.wait_for(|s| s.state == AxisState::Moving).await;
        tokio::time::sleep(Duration::from_millis(300)).await;
        let _ = tx.send(ListControl::Abort);
    };
    let (out, ()) = tokio::join!(run, operator);
    let out = out.expect("runs");
    assert!(seen.contains(&(2, "paused")), "{seen:?}");
    let stopped = out.stopped.expect("aborted");
    assert_eq!(stopped.step, 2);
    assert!(stopped.reason.contains("aborted"));
    let x = h.axis("x").expect("x").snapshot();
    assert!(!x.state.motor_on() && x.position < 850.0, "{x:#?}");
    m.shutdown().await;
}

#[test]
fn run_dry_run_prints_the_checked_plan_and_refuses_a_list_outside_the_limits() {
    let bin = env!("CARGO_BIN_EXE_servotty");
    let root = env!("CARGO_MANIFEST_DIR");
    let out = std::process::Command::new(bin)
        .current_dir(root)
        .args(["run", "configs/tray-inspection-list.toml", "--dry-run", "--json"])
        .output()
        .expect("runs");
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("one JSON object");
    assert_eq!(v["ok"], true);
    assert_eq!(v["steps"].as_array().map(Vec::len), Some(15));
    let dir = tempfile::tempdir().expect("tmp");
    let bad = dir.path().join("bad.toml");
    std::fs::write(&bad, "[[step]]\nto = { y = 50.0 }\n[[step]]\nby = { y = 600.0 }\n").expect("w");
    let out = std::process::Command::new(bin)
        .current_dir(root)
        .args(["run", bad.to_str().expect("path"), "--dry-run"])
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("step 2") && err.contains("soft limits"), "{err}");
}
