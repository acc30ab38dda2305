//! The cockpit's list screen (`m`) and spot picker (`@`): drawn from hand-made state at 80×24
//! and 60×18, and driven by keys through the real event loop against the demo machine (real
//! axis tasks, protocol, simulated boards and plants) in simulated time, so every run is the
//! same. The behaviour is servotty's own (no outside source); the stop categories are
//! IEC 60204-1 §9.2.2's; "arrive within one tick" is the coordinated-move rule of
//! docs/daily.md (common practice, no source).
mod cockpit_support;
mod engine_support;

use std::future::Future;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use cockpit_support as s;
use crossterm::event::{Event, KeyCode, KeyEvent, KeyModifiers};
use engine_support::{assert_at_spot, demo, started};
use futures::Stream;
use ratatui::backend::TestBackend;
use ratatui::Terminal;
use servotty::cockpit::action::Action;
use servotty::cockpit::app::Screen;
use servotty::cockpit::lists::{Mark, Phase};
use servotty::cockpit::port::MachinePort;
use servotty::cockpit::{runner, App, Theme};
use servotty::config::{ConfigSource, MachineConfig};
use servotty::engine::line_move::LineOutcome;
use servotty::engine::{AxisCommand, AxisSnapshot, AxisState, Machine, MachineHandle};
use servotty::move_list::catalog;
use servotty::move_list::runner::{ListControl, ListOutcome, Progress, Stopped};
use servotty::move_list::MoveList;
use servotty::sim::plant::PlantFaults;
use tokio::sync::{mpsc, watch};

// ---------------------------------------------------------------------------------------
// Drawn from hand-made state.

fn with_demo_list(mut app: App) -> App {
    let found = catalog::find(&app.config, &ConfigSource::BuiltInDemo);
    app.lists.set_found(found);
    app.screen = Screen::Lists;
    app
}

fn check(name: &str, app: &App, sizes: &[(u16, u16)]) {
    for &(w, h) in sizes {
        let t = s::draw(app, w, h);
        insta::assert_snapshot!(format!("{name}_{w}x{h}"), t.backend());
    }
}

#[test]
fn list_screen_running_marks_the_present_step() {
    let mut app = with_demo_list(s::normal());
    app.lists.phase = Phase::Running;
    app.lists.at = Some((1, 4));
    for m in &mut app.lists.marks[..3] {
        *m = Mark::Done;
    }
    app.lists.marks[3] = Mark::Now;
    check("list_running", &app, &[(80, 24), (60, 18)]);
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("running step 4 of 15"), "{text}");
    assert!(text.contains("to @probe_depth"), "{text}");
    assert!(text.contains(" p ") && text.contains(" x "), "pause and abort in the footer: {text}");
}

#[test]
fn list_screen_says_where_a_trip_stopped_it_and_where_it_resumes() {
    let mut app = with_demo_list(s::normal());
    app.lists.at = Some((1, 2));
    app.lists.marks[0] = Mark::Done;
    app.lists.marks[1] = Mark::Failed;
    app.lists.stopped = Some(Stopped {
        pass: 1,
        step: 2,
        reason: "x: following error: following error 5.1 mm exceeded its band 4.8 mm".to_owned(),
        resume_from: 3,
        resume_pass: 1,
    });
    check("list_stopped", &app, &[(80, 24), (60, 18)]);
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("STOPPED at step 2"), "{text}");
    assert!(text.contains("resumes from step 3"), "{text}");
    assert!(text.contains("FAIL"), "{text}");
}

#[test]
fn spot_picker_shows_values_and_whether_each_spot_can_be_reached() {
    let mut app = s::normal();
    app.apply(s::at(200), Action::OpenSpots);
    app.apply(s::at(200), Action::SpotNext);
    app.apply(s::at(200), Action::SpotNext);
    check("spot_picker", &app, &[(80, 24), (60, 18)]);
    let text = s::screen(&app, 80, 24);
    // z is not homed in the hand-made scene: the spots that name it say so.
    assert!(text.contains("@park") && text.contains("not homed: z"), "{text}");
    assert!(text.contains("x 550  y 300") && text.contains("ready"), "{text}");
}

// ---------------------------------------------------------------------------------------
// Driven by keys against the demo machine.

/// The real machine, with every list event and outcome recorded for the script to poll, and
/// a hook that sees each progress event as the runner emits it (to inject a fault).
struct Recorded {
    h: MachineHandle,
    events: Arc<Mutex<Vec<Progress>>>,
    ends: Arc<Mutex<Vec<Result<ListOutcome, String>>>>,
    hook: Arc<dyn Fn(&Progress) + Send + Sync>,
}

impl MachinePort for Recorded {
    fn snapshots_into(&self, out: &mut Vec<AxisSnapshot>) {
        self.h.snapshots_into(out);
    }
    fn stop_all(&self) {
        MachinePort::stop_all(&self.h);
    }
    fn release_stop_all(&self) {
        MachinePort::release_stop_all(&self.h);
    }
    fn stop_all_latched(&self) -> bool {
        MachinePort::stop_all_latched(&self.h)
    }
    fn send(
        &self,
        axis: usize,
        command: AxisCommand,
    ) -> impl Future<Output = Result<(), String>> + Send + 'static {
        MachinePort::send(&self.h, axis, command)
    }
    fn home_all(&self) -> impl Future<Output = Result<(), String>> + Send + 'static {
        MachinePort::home_all(&self.h)
    }
    fn move_line(
        &self,
        goals: Vec<(String, f64)>,
    ) -> impl Future<Output = Result<LineOutcome, String>> + Send + 'static {
        MachinePort::move_line(&self.h, goals)
    }
    fn run_list(
        &self,
        list: MoveList,
        from: servotty::move_list::Start,
        control: watch::Receiver<ListControl>,
        progress: mpsc::UnboundedSender<Progress>,
    ) -> impl Future<Output = Result<ListOutcome, String>> + Send + 'static {
        let (h, events, ends, hook) =
            (self.h.clone(), self.events.clone(), self.ends.clone(), self.hook.clone());
        async move {
            let r = servotty::move_list::runner::run_list(&h, &list, from, control, |p| {
                hook(p);
                events.lock().expect("lock").push(p.clone());
                let _ = progress.send(p.clone());
            })
            .await
            .map_err(|e| e.to_string());
            ends.lock().expect("lock").push(r.clone());
            r
        }
    }
}

impl Recorded {
    fn events(&self) -> Vec<(usize, &'static str)> {
        self.events.lock().expect("lock").iter().map(|p| (p.step, p.phase)).collect()
    }
    fn ends(&self) -> Vec<Result<ListOutcome, String>> {
        self.ends.lock().expect("lock").clone()
    }
}

async fn homed_demo() -> (Machine, MachineHandle, MachineConfig) {
    let cfg = demo();
    let (m, h) = started(&cfg).await;
    (m, h, cfg)
}

fn key(c: KeyCode) -> std::io::Result<Event> {
    Ok(Event::Key(KeyEvent::new(c, KeyModifiers::NONE)))
}

fn ch(c: char) -> std::io::Result<Event> {
    key(KeyCode::Char(c))
}

fn key_stream(
    rx: mpsc::Receiver<std::io::Result<Event>>,
) -> impl Stream<Item = std::io::Result<Event>> + Unpin {
    Box::pin(futures::stream::unfold(rx, |mut rx| async move { rx.recv().await.map(|e| (e, rx)) }))
}

/// Polls `cond` every 50 ms of simulated time, failing after `seconds`.
async fn until(what: &str, seconds: u64, cond: impl Fn() -> bool) {
    let deadline = tokio::time::Instant::now() + Duration::from_secs(seconds);
    while !cond() {
        assert!(tokio::time::Instant::now() < deadline, "gave up waiting for {what}");
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
}

/// Runs the real loop on `port` while `script` types keys; the script ends by quitting.
async fn drive(
    port: &Arc<Recorded>,
    app: &mut App,
    rx: mpsc::Receiver<std::io::Result<Event>>,
    script: impl Future<Output = ()>,
) {
    let mut term = Terminal::new(TestBackend::new(80, 24)).expect("terminal");
    let run = runner::run(&mut term, key_stream(rx), Arc::clone(port), app, std::future::pending());
    tokio::select! {
        r = run => r.expect("runs until quit"),
        () = script => unreachable!("the script quits the cockpit"),
    }
}

fn recorded(h: &MachineHandle, hook: impl Fn(&Progress) + Send + Sync + 'static) -> Arc<Recorded> {
    Arc::new(Recorded {
        h: h.clone(),
        events: Arc::default(),
        ends: Arc::default(),
        hook: Arc::new(hook),
    })
}

/// `m`, then Enter until the list has started (the lists are read on the blocking pool).
async fn open_and_start(tx: &mpsc::Sender<std::io::Result<Event>>, port: &Recorded) {
    tx.send(ch('m')).await.expect("key");
    while port.events().is_empty() && port.ends().is_empty() {
        tx.send(key(KeyCode::Enter)).await.expect("key");
        tokio::time::sleep(Duration::from_millis(200)).await;
    }
}

async fn quit(tx: &mpsc::Sender<std::io::Result<Event>>) {
    tx.send(key(KeyCode::Esc)).await.expect("key");
    tx.send(ch('q')).await.expect("key");
    tx.send(ch('y')).await.expect("key");
    std::future::pending::<()>().await;
}

#[tokio::test(start_paused = true)]
async fn the_demo_list_runs_from_the_list_screen_pauses_and_resumes() {
    let (m, h, cfg) = homed_demo().await;
    let port = recorded(&h, |_| {});
    let mut app = App::new(cfg.clone(), ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(16);
    let x = h.axis("x").expect("x").clone();
    let script = async {
        open_and_start(&tx, &port).await;
        until("step 2", 60, || port.events().contains(&(2, "start"))).await;
        tx.send(ch('p')).await.expect("key");
        until("the pause", 60, || port.events().iter().any(|e| e.1 == "paused")).await;
        assert_eq!(port.events().last(), Some(&(3, "paused")), "pauses after step 2 ends");
        // Paused: nothing starts and x stays where step 2 left it.
        let held = x.snapshot();
        tokio::time::sleep(Duration::from_secs(3)).await;
        assert!(!port.events().contains(&(3, "start")));
        let now = x.snapshot();
        assert_eq!(
            (now.state, now.goal, now.moves_done),
            (AxisState::Steady, held.goal, held.moves_done)
        );
        tx.send(key(KeyCode::Enter)).await.expect("key");
        until("the end of the list", 180, || !port.ends().is_empty()).await;
        quit(&tx).await;
    };
    drive(&port, &mut app, rx, script).await;
    let ends = port.ends();
    let out = ends[0].as_ref().expect("started");
    assert!(out.ok, "{out:#?}");
    assert_eq!(out.steps.len(), 15);
    assert_eq!(app.lists.phase, Phase::Finished);
    assert!(app.lists.marks.iter().all(|m| *m == Mark::Done), "{:?}", app.lists.marks);
    // The screen keeps the plan the run was checked with (the relative steps' targets as
    // worked out at the start, not from where the axes ended).
    assert_eq!(app.lists.plan.len(), 15);
    assert_eq!(app.lists.plan[5].targets.get("z"), Some(&0.0), "step 6: by z 40 → z 0");
    let log: Vec<String> = app.log.entries().iter().map(|e| e.text_with_count()).collect();
    assert!(log.iter().any(|l| l.contains("step 3/15 paused")), "{log:#?}");
    assert!(log.iter().any(|l| l == "list finished"), "{log:#?}");
    assert_at_spot(&h, &cfg, "park");
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn a_trip_mid_list_stops_it_and_it_resumes_from_the_next_step_once_cleared() {
    let (m, h, cfg) = homed_demo().await;
    let sim = m.sim("x").expect("sim");
    let jam = sim.clone();
    // The x carriage jams as step 2 (to @tray1) starts.
    let port = recorded(&h, move |p| {
        if p.step == 2 && p.phase == "start" {
            jam.set_plant_faults(PlantFaults { blocked: true, ..PlantFaults::default() });
        }
    });
    let mut app = App::new(cfg, ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(16);
    let x = h.axis("x").expect("x").clone();
    let script = async {
        open_and_start(&tx, &port).await;
        until("the trip to end the list", 60, || !port.ends().is_empty()).await;
        // Enter before clearing the trip: refused, nothing moves.
        tx.send(key(KeyCode::Enter)).await.expect("key");
        until("the refusal", 10, || port.ends().len() == 2).await;
        // The operator frees the carriage and clears the trip on the overview, then resumes.
        sim.set_plant_faults(PlantFaults::default());
        tx.send(key(KeyCode::Esc)).await.expect("key");
        tx.send(ch('C')).await.expect("key");
        until("the trip cleared", 10, || x.snapshot().state != AxisState::Tripped).await;
        tx.send(ch('m')).await.expect("key");
        tx.send(key(KeyCode::Enter)).await.expect("key");
        until("the resumed list's end", 180, || port.ends().len() == 3).await;
        quit(&tx).await;
    };
    drive(&port, &mut app, rx, script).await;
    let ends = port.ends();
    let first = ends[0].as_ref().expect("started");
    let stopped = first.stopped.as_ref().expect("stopped early");
    assert_eq!((stopped.step, stopped.resume_from), (2, 3), "{stopped:#?}");
    assert!(stopped.reason.starts_with("x:"), "{stopped:#?}");
    let refused = ends[1].as_ref().expect_err("refused while tripped");
    assert!(refused.contains("clear the trip"), "{refused}");
    let resumed = ends[2].as_ref().expect("resumed");
    assert!(resumed.ok, "{resumed:#?}");
    assert_eq!(resumed.steps.first().map(|s| s.step), Some(3));
    assert_eq!(app.lists.phase, Phase::Finished);
    assert_eq!(&app.lists.marks[..3], &[Mark::Done, Mark::Failed, Mark::Done]);
    let log: Vec<String> = app.log.entries().iter().map(|e| e.text_with_count()).collect();
    assert!(log.iter().any(|l| l.contains("list stopped at step 2")), "{log:#?}");
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn the_spot_picker_moves_the_axes_on_one_line_arriving_within_one_tick() {
    let (m, h, cfg) = homed_demo().await;
    let port = recorded(&h, |_| {});
    let mut app = App::new(cfg.clone(), ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(16);
    let goals: Vec<(String, f64)> =
        cfg.spots.get("tray3").expect("tray3").iter().map(|(a, v)| (a.clone(), *v)).collect();
    let arrived = Arc::new(Mutex::new(Vec::new()));
    let script = async {
        tx.send(ch('E')).await.expect("key");
        until("every axis enabled", 10, || {
            h.axes().iter().all(|a| a.snapshot().state == AxisState::Steady)
        })
        .await;
        // A few frames, so the cockpit has seen the axes homed (as an operator would).
        tokio::time::sleep(Duration::from_millis(300)).await;
        // Spots in name order: park, probe_depth, tray1, tray2, tray3.
        tx.send(ch('@')).await.expect("key");
        for _ in 0..4 {
            tx.send(key(KeyCode::Down)).await.expect("key");
        }
        tx.send(key(KeyCode::Enter)).await.expect("key");
        let mut rxs: Vec<_> = goals.iter().map(|(a, _)| h.axis(a).expect("axis").watch()).collect();
        let mut at = vec![None; goals.len()];
        let deadline = tokio::time::Instant::now() + Duration::from_secs(30);
        while at.iter().any(Option::is_none) {
            if tokio::time::Instant::now() > deadline {
                break;
            }
            for (i, r) in rxs.iter_mut().enumerate() {
                if at[i].is_none() && r.borrow_and_update().target == goals[i].1 {
                    at[i] = Some(tokio::time::Instant::now());
                }
            }
            let changed =
                futures::future::select_all(rxs.iter_mut().map(|r| Box::pin(r.changed())));
            let _ = tokio::time::timeout(Duration::from_secs(30), changed).await.expect("moving");
        }
        *arrived.lock().expect("lock") = at.iter().flatten().copied().collect();
        if at.iter().any(Option::is_none) {
            quit(&tx).await;
        }
        until("in position", 30, || {
            goals
                .iter()
                .all(|(a, v)| (h.axis(a).expect("axis").snapshot().position - v).abs() <= 0.1)
        })
        .await;
        quit(&tx).await;
    };
    drive(&port, &mut app, rx, script).await;
    let log: Vec<String> = app.log.entries().iter().map(|e| e.text_with_count()).collect();
    let at = arrived.lock().expect("lock").clone();
    assert_eq!(at.len(), goals.len(), "every axis arrived: {log:#?}");
    let gap = at.iter().max().copied().zip(at.iter().min().copied()).map(|(a, b)| a - b);
    let tick = Duration::from_millis(1); // the demo boards run at 1 kHz
    println!("arrivals {gap:?} apart");
    assert!(gap.is_some_and(|g| g <= tick), "arrivals {gap:?} apart");
    assert!(
        log.iter().any(|l| l.contains("go to @tray3") && l.contains("on one line")),
        "{log:#?}"
    );
    m.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn space_during_a_list_stops_every_axis_and_ends_the_list() {
    let (m, h, cfg) = homed_demo().await;
    let port = recorded(&h, |_| {});
    let mut app = App::new(cfg, ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(16);
    let x = h.axis("x").expect("x").clone();
    let script = async {
        open_and_start(&tx, &port).await;
        until("step 2 under way", 60, || {
            port.events().contains(&(2, "start")) && x.snapshot().state == AxisState::Moving
        })
        .await;
        tx.send(ch(' ')).await.expect("key");
        until("the list's end", 30, || !port.ends().is_empty()).await;
        until("every motor off", 30, || h.axes().iter().all(|a| !a.snapshot().state.motor_on()))
            .await;
        quit(&tx).await;
    };
    drive(&port, &mut app, rx, script).await;
    let ends = port.ends();
    let out = ends[0].as_ref().expect("started");
    let stopped = out.stopped.as_ref().expect("ended early");
    assert_eq!(stopped.step, 2, "{stopped:#?}");
    assert!(app.stop_latched, "stop-all stays latched until R");
    assert_eq!(app.lists.phase, Phase::Idle);
    assert!(x.snapshot().position < 199.0, "x did not carry on to tray 1");
    m.shutdown().await;
}

#[test]
fn the_list_screen_shows_the_limit_check_before_anything_moves() {
    let app = with_demo_list(s::normal());
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("inside the soft limits"), "{text}");
    // A list whose second pass leaves the limits says so on the screen, and Enter refuses it.
    let mut app = s::normal();
    let list =
        MoveList::from_toml_str("times = 9\n[[step]]\nby = { y = 100.0 }\n", "t.toml", &app.config)
            .expect("form is fine");
    app.lists.set_found(vec![catalog::Found {
        name: "up.toml".into(),
        path: None,
        list: Ok(list),
    }]);
    app.screen = Screen::Lists;
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("will not start") && text.contains("outside the soft limits"), "{text}");
    assert!(app.apply(s::at(200), Action::ListGo).is_empty(), "nothing is started");
    assert!(
        app.lists.refused.as_deref().is_some_and(|r| r.contains("pass")),
        "{:?}",
        app.lists.refused
    );
}
