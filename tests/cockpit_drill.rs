//! The cockpit's fault-drill menu (key `!`): drawn at 80×24 (snapshot), refused on an axis
//! whose board is real, and, end to end, a jam armed from the menu on the in-process
//! simulator trips the axis where it was armed and the trip screen names the cause. The end
//! to end test runs the real event loop against the real engine under paused tokio time.
mod cockpit_support;

use std::sync::Arc;
use std::time::Duration;

use cockpit_support as s;
use crossterm::event::{Event, KeyCode, KeyEvent, KeyModifiers};
use futures::Stream;
use ratatui::backend::TestBackend;
use ratatui::Terminal;
use servotty::cockpit::action::{Action, Effect};
use servotty::cockpit::app::{Overlay, Screen};
use servotty::cockpit::drill::Pick;
use servotty::cockpit::keys::{map_key, Mode};
use servotty::cockpit::runner;
use servotty::cockpit::{App, Theme};
use servotty::config::{ConfigSource, HomingMethod, MachineConfig};
use servotty::diagnosis::Cause;
use servotty::engine::{AxisState, Machine};
use servotty::sim::drill::Drill;
use tokio::sync::mpsc;

fn key(c: char) -> KeyEvent {
    KeyEvent::new(KeyCode::Char(c), KeyModifiers::NONE)
}

fn type_text(app: &mut App, text: &str) -> Vec<Effect> {
    for c in text.chars() {
        let a = map_key(app.mode(), &key(c)).expect("typed");
        app.apply(s::at(210), a);
    }
    let enter = map_key(app.mode(), &KeyEvent::from(KeyCode::Enter)).expect("Enter");
    app.apply(s::at(211), enter)
}

#[test]
fn the_menu_is_marked_and_fits_80_by_24() {
    let mut app = s::normal();
    app.drillable = vec![true, true, true];
    let action = map_key(Mode::Overview, &key('!')).expect("! is bound");
    assert_eq!(action, Action::Drill);
    assert!(app.apply(s::at(200), action).is_empty());
    assert_eq!(app.mode(), Mode::Entry);
    let t = s::draw(&app, 80, 24);
    insta::assert_snapshot!("drill_menu_80x24", t.backend());
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("DRILL · x · simulated board"), "{text}");
    assert!(text.contains("supply sags"), "{text}");
    // A bad choice says why and keeps the menu open.
    assert!(type_text(&mut app, "z").is_empty());
    assert!(matches!(&app.overlay, Overlay::Prompt(p) if p.error.is_some()));
    // A good one closes it and asks the runner to inject it.
    if let Overlay::Prompt(p) = &mut app.overlay {
        p.text.clear();
    }
    let fx = type_text(&mut app, "s0.5");
    assert_eq!(fx, vec![Effect::Drill { axis: 0, pick: Pick::Board(Drill::Sag(0.5)) }]);
    assert_eq!(app.overlay, Overlay::None);
}

#[test]
fn a_real_board_has_no_drills() {
    let mut app = s::normal();
    app.drillable = vec![false, true, true];
    assert!(app.apply(s::at(200), Action::Drill).is_empty());
    assert_eq!(app.overlay, Overlay::None);
    let last = app.log.entries().back().expect("an entry").text.clone();
    assert_eq!(last, "x: drills exist only for simulated axes");
}

fn key_stream(
    rx: mpsc::Receiver<std::io::Result<Event>>,
) -> impl Stream<Item = std::io::Result<Event>> + Unpin {
    Box::pin(futures::stream::unfold(rx, |mut rx| async move { rx.recv().await.map(|e| (e, rx)) }))
}

/// The demo's X axis alone, homed by declaration.
fn x_only() -> MachineConfig {
    let mut cfg = MachineConfig::demo().expect("demo");
    cfg.axes.retain(|a| a.name == "x");
    cfg.axes[0].homing.method = HomingMethod::None;
    cfg
}

#[tokio::test(start_paused = true)]
async fn a_jam_armed_from_the_menu_trips_the_axis_and_the_trip_screen_names_it() {
    let cfg = x_only();
    let machine = Machine::start(&cfg, &[]).expect("starts");
    let h = machine.handle();
    assert!(h.wait_linked(Duration::from_secs(2)).await.is_empty());
    h.home(Some(&["x".to_owned()])).await.expect("homes");
    let x = h.axis("x").expect("x").clone();
    let start = x.snapshot().position;
    let (jam_at, goal) = (start + 200.0, start + 400.0);
    let board = machine.sim("x").expect("simulated");
    let mut app = App::new(cfg, ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(64);
    let script = {
        let x = x.clone();
        async move {
            let send = |c: KeyEvent| {
                let tx = tx.clone();
                async move { tx.send(Ok(Event::Key(c))).await.expect("send") }
            };
            let typed = |text: String| {
                let tx = tx.clone();
                async move {
                    for c in text.chars() {
                        tx.send(Ok(Event::Key(key(c)))).await.expect("send");
                    }
                    tx.send(Ok(Event::Key(KeyEvent::from(KeyCode::Enter)))).await.expect("send");
                }
            };
            tokio::time::sleep(Duration::from_millis(200)).await;
            send(key('!')).await;
            typed(format!("a{jam_at}")).await;
            tokio::time::sleep(Duration::from_millis(200)).await;
            send(key('g')).await;
            typed(format!("{goal}")).await;
            let mut rx = x.watch();
            tokio::time::timeout(
                Duration::from_secs(20),
                rx.wait_for(|s| s.state == AxisState::Tripped),
            )
            .await
            .expect("the jam tripped the axis in time")
            .expect("snapshots");
            tokio::time::sleep(Duration::from_millis(200)).await;
            send(key('v')).await;
            tokio::time::sleep(Duration::from_millis(500)).await;
            send(key('q')).await;
            tokio::time::sleep(Duration::from_millis(200)).await;
            send(key('y')).await;
            std::future::pending::<()>().await;
        }
    };
    let mut term = Terminal::new(TestBackend::new(80, 24)).expect("terminal");
    let port = Arc::new(h.clone());
    tokio::select! {
        r = runner::run(&mut term, key_stream(rx), port, &mut app, std::future::pending()) => {
            r.expect("runs until quit");
        }
        () = script => unreachable!(),
    }
    let texts: Vec<String> = app.log.entries().iter().map(|e| e.text.clone()).collect();
    assert!(texts.iter().any(|t| t.starts_with("x: drill: will jam at")), "{texts:?}");
    let trip = x.snapshot().trip.expect("tripped");
    assert!((trip.position - jam_at).abs() < 5.0, "tripped at {} not {jam_at}", trip.position);
    assert!(board.plant_faults().blocked);
    assert_eq!(app.screen, Screen::Trip);
    let view = app.trip_view.as_ref().expect("the trip screen has its history");
    assert_eq!(view.diagnosis.cause, Cause::Jam, "{}", view.diagnosis.to_text());
    let text = s::screen(&app, 120, 40);
    assert!(text.contains("most likely: mechanical jam"), "{text}");
    machine.shutdown().await;
}

#[tokio::test(start_paused = true)]
async fn only_in_process_boards_take_drills_from_the_machine() {
    use servotty::cockpit::port::MachinePort;
    use servotty::engine::PortOverride;
    // X on a serial device (which need not exist: nothing here waits for its link).
    let cfg = MachineConfig::demo().expect("demo");
    let port = PortOverride { axis: "x".into(), device: "/dev/servotty-no-such-device".into() };
    let machine = Machine::start(&cfg, &[port]).expect("starts");
    let h = machine.handle();
    assert!(!h.drillable(0));
    assert!(h.drillable(1) && h.drillable(2));
    assert_eq!(
        h.drill(0, &Pick::Board(Drill::Jam(true))),
        Err("drills exist only for simulated axes".to_owned())
    );
    assert_eq!(h.drill(1, &Pick::Board(Drill::Sag(0.5))), Ok("supply sags 50 %".to_owned()));
    let sag = machine.sim("y").expect("simulated").plant_faults().supply_sag;
    assert!((sag - 0.5).abs() < 1e-12);
    assert!(h.drill(7, &Pick::Board(Drill::Clear)).is_err());
    machine.shutdown().await;
}
