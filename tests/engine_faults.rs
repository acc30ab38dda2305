//! Faults a real machine has, caught by the engine under simulated time with the in-process
//! simulator: a jam on a short move, a move that never arrives, a board whose watchdog cut
//! the motor while the host stalled. The demo gantry's X axis (configs/demo-greenhouse.toml,
//! invented numbers). The rules are servotty's own supervision policy (brief.md; the board's
//! word is final, "Settled in round two"); common practice, no outside source.

use std::time::Duration;

use servotty::engine::events::ChangedBy;
use servotty::engine::{AxisCommand, AxisState, EventKind, TripCause};
use servotty::sim::plant::PlantFaults;

mod engine_support;
use engine_support::{demo, started, wait_for};

/// A 1 mm move into a jam: the duty settles around 30–50 %, below `stall_duty` (60 %) and far
/// inside the following-error band (3 mm), so only the breakaway stall rule can catch it.
#[tokio::test(start_paused = true)]
async fn a_jam_on_a_short_move_trips_stall() {
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    let x = h.axis("x").expect("x");
    x.send(AxisCommand::Enable).await.expect("enable");
    m.sim("x")
        .expect("sim")
        .set_plant_faults(PlantFaults { blocked: true, ..PlantFaults::default() });
    let start = x.snapshot().position;
    x.send(AxisCommand::MoveTo(start + 1.0)).await.expect("move");
    let s = wait_for(&h, "x", Duration::from_secs(3), |s| s.state == AxisState::Tripped).await;
    let trip = s.trip.expect("trip");
    assert_eq!(trip.cause, TripCause::Stall, "{trip:?}");
    assert!(trip.duty.abs() < cfg.axes[0].limits.stall_duty, "{trip:?}");
    m.shutdown().await;
}

/// With the stall rule out of the way, the same jam is a move that never arrives.
#[tokio::test(start_paused = true)]
async fn a_move_that_never_arrives_trips_not_in_position() {
    let mut cfg = demo();
    cfg.axes[0].limits.stall_duty = 100.0;
    cfg.axes[0].limits.stall_margin_duty = 100.0;
    let (m, h) = started(&cfg).await;
    let x = h.axis("x").expect("x");
    x.send(AxisCommand::Enable).await.expect("enable");
    m.sim("x")
        .expect("sim")
        .set_plant_faults(PlantFaults { blocked: true, ..PlantFaults::default() });
    let start = x.snapshot().position;
    x.send(AxisCommand::MoveTo(start + 1.0)).await.expect("move");
    let t0 = tokio::time::Instant::now();
    let s = wait_for(&h, "x", Duration::from_secs(5), |s| s.state == AxisState::Tripped).await;
    assert_eq!(s.trip.as_ref().map(|t| t.cause), Some(TripCause::NotInPosition), "{s:#?}");
    // Planned time of a 1 mm move is tens of ms; the margin is settle_timeout_s.
    let took = t0.elapsed().as_secs_f64();
    let margin = cfg.axes[0].limits.settle_timeout_s;
    assert!(took > margin && took < margin + 0.5, "tripped after {took} s");
    m.shutdown().await;
}

/// A 70 ms silence (longer than the 50 ms board watchdog, shorter than the 100 ms link
/// timeout) during a move at speed: the board cuts the motor; the host must latch a trip
/// with its own cause, not power the motor again with its next duty.
#[tokio::test(start_paused = true)]
async fn a_board_watchdog_during_a_move_latches_a_trip() {
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    let mut events = h.events();
    let x = h.axis("x").expect("x");
    x.send(AxisCommand::Enable).await.expect("enable");
    x.send(AxisCommand::MoveTo(800.0)).await.expect("move");
    wait_for(&h, "x", Duration::from_secs(3), |s| s.velocity > 100.0).await;
    let sim = m.sim("x").expect("sim");
    sim.black_out(70);
    let s = wait_for(&h, "x", Duration::from_secs(1), |s| s.state == AxisState::Tripped).await;
    let trip = s.trip.expect("trip");
    assert_eq!(trip.cause, TripCause::BoardWatchdog, "{trip:?}");
    // Never re-driven: the board's motor stays off after the link is back.
    tokio::time::sleep(Duration::from_millis(200)).await;
    assert!(!sim.view().motor_on, "{:?}", sim.view());
    let mut saw = false;
    while let Ok(ev) = events.try_recv() {
        saw |=
            matches!(&ev.kind, EventKind::Trip { trip } if trip.cause == TripCause::BoardWatchdog);
    }
    assert!(saw, "a trip event with the board-watchdog cause");
    m.shutdown().await;
}

/// Collects the events that arrived so far.
fn drained(rx: &mut tokio::sync::broadcast::Receiver<servotty::engine::Event>) -> Vec<EventKind> {
    let mut out = Vec::new();
    while let Ok(ev) = rx.try_recv() {
        out.push(ev.kind);
    }
    out
}

/// A quarter of the frames lost: the operator hears it once, and hears the recovery.
#[tokio::test(start_paused = true)]
async fn a_poor_link_and_its_recovery_are_events() {
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    let mut events = h.events();
    let sim = m.sim("x").expect("sim");
    sim.set_link_faults(servotty::sim::board::LinkFaults {
        drop_probability: 0.25,
        ..Default::default()
    });
    tokio::time::sleep(Duration::from_secs(3)).await;
    sim.set_link_faults(servotty::sim::board::LinkFaults::default());
    tokio::time::sleep(Duration::from_secs(3)).await;
    let q: Vec<bool> = drained(&mut events)
        .into_iter()
        .filter_map(|k| match k {
            EventKind::LinkQuality { poor, missed, window, .. } => {
                if poor {
                    assert!(missed * 10 > window, "{missed} of {window}");
                }
                Some(poor)
            }
            _ => None,
        })
        .collect();
    assert_eq!(q, [true, false]);
    m.shutdown().await;
}

/// Gains changed while the axis runs are an event naming each key, old → new, and who.
#[tokio::test(start_paused = true)]
async fn a_live_gain_change_is_an_event_with_old_and_new() {
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    let mut events = h.events();
    let mut c = cfg.axes[0].controller.clone();
    c.kp = 25.0;
    let x = h.axis("x").expect("x");
    x.send(AxisCommand::SetController(c.clone(), ChangedBy::CockpitEdit)).await.expect("set");
    c.kd = 0.5;
    x.send(AxisCommand::SetController(c.clone(), ChangedBy::TuneApply)).await.expect("set");
    // The same gains again change nothing: no event.
    x.send(AxisCommand::SetController(c, ChangedBy::Other)).await.expect("set");
    let changes: Vec<(Vec<String>, ChangedBy)> = drained(&mut events)
        .into_iter()
        .filter_map(|k| match k {
            EventKind::Gains { changes, by } => Some((changes, by)),
            _ => None,
        })
        .collect();
    assert_eq!(changes.len(), 2, "{changes:?}");
    assert_eq!(changes[0], (vec!["kp 20.0 → 25.0".to_owned()], ChangedBy::CockpitEdit));
    assert_eq!(changes[1].1, ChangedBy::TuneApply);
    assert!(
        changes[1].0.iter().any(|c| c.starts_with("kd ") && c.ends_with("→ 0.5")),
        "{changes:?}"
    );
    m.shutdown().await;
}
