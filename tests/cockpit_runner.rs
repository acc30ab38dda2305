//! The real event loop, driven by scripted key presses against a fake machine, under paused
//! tokio time (the frame clock advances on its own, deterministically).
mod cockpit_support;

use std::future::Future;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use cockpit_support as s;
use crossterm::event::{Event, KeyCode, KeyEvent, KeyEventKind, KeyModifiers};
use futures::Stream;
use ratatui::backend::TestBackend;
use ratatui::Terminal;
use servotty::cockpit::port::MachinePort;
use servotty::cockpit::runner;
use servotty::cockpit::{App, Theme};
use servotty::config::ConfigSource;
use servotty::engine::{AxisCommand, AxisSnapshot, AxisState};
use tokio::sync::mpsc;

/// A machine that records what it is asked and refuses enabling while stop-all is latched.
#[derive(Default)]
struct FakeMachine {
    state: Mutex<FakeState>,
}

#[derive(Default)]
struct FakeState {
    snaps: Vec<AxisSnapshot>,
    latched: bool,
    stop_calls: u32,
    sent: Vec<(usize, AxisCommand)>,
}

impl FakeMachine {
    fn with(snaps: Vec<AxisSnapshot>) -> Arc<Self> {
        Arc::new(Self { state: Mutex::new(FakeState { snaps, ..FakeState::default() }) })
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, FakeState> {
        self.state.lock().expect("lock")
    }
}

impl MachinePort for FakeMachine {
    fn snapshots_into(&self, out: &mut Vec<AxisSnapshot>) {
        out.clone_from(&self.lock().snaps);
    }

    fn stop_all(&self) {
        let mut s = self.lock();
        s.latched = true;
        s.stop_calls += 1;
    }

    fn release_stop_all(&self) {
        self.lock().latched = false;
    }

    fn stop_all_latched(&self) -> bool {
        self.lock().latched
    }

    fn send(
        &self,
        axis: usize,
        command: AxisCommand,
    ) -> impl Future<Output = Result<(), String>> + Send + 'static {
        let mut s = self.lock();
        let answer = match (&command, s.latched) {
            (AxisCommand::Enable, true) => Err("stop-all is latched: release it first".to_owned()),
            (AxisCommand::Enable, false) => {
                s.snaps[axis].state = AxisState::Steady;
                Ok(())
            }
            (AxisCommand::Disable, _) => {
                s.snaps[axis].state = AxisState::Disabled;
                Ok(())
            }
            _ => Ok(()),
        };
        s.sent.push((axis, command));
        async move { answer }
    }

    #[allow(clippy::manual_async_fn)] // the trait's signature asks for `+ Send + 'static`
    fn home_all(&self) -> impl Future<Output = Result<(), String>> + Send + 'static {
        async { Ok(()) }
    }
}

fn press(c: KeyCode) -> std::io::Result<Event> {
    Ok(Event::Key(KeyEvent::new(c, KeyModifiers::NONE)))
}

fn ch(c: char) -> std::io::Result<Event> {
    press(KeyCode::Char(c))
}

fn key_stream(
    rx: mpsc::Receiver<std::io::Result<Event>>,
) -> impl Stream<Item = std::io::Result<Event>> + Unpin {
    Box::pin(futures::stream::unfold(rx, |mut rx| async move { rx.recv().await.map(|e| (e, rx)) }))
}

fn disabled_demo() -> Vec<AxisSnapshot> {
    let mut f = s::frame(0);
    for a in &mut f {
        a.state = AxisState::Disabled;
    }
    f
}

/// Runs the real loop against `machine` while `script` types keys into `rx`'s channel; the
/// script must end by quitting (it never returns on its own).
async fn run_until_quit(
    machine: &Arc<FakeMachine>,
    app: &mut App,
    rx: mpsc::Receiver<std::io::Result<Event>>,
    script: impl std::future::Future<Output = ()>,
) {
    let mut term = Terminal::new(TestBackend::new(80, 24)).expect("terminal");
    let run =
        runner::run(&mut term, key_stream(rx), Arc::clone(machine), app, std::future::pending());
    tokio::select! {
        r = run => r.expect("runs until quit"),
        () = script => unreachable!(),
    }
}

/// Lets the loop run a few frames of simulated time.
async fn frames(n: u64) {
    tokio::time::sleep(Duration::from_millis(50 * n)).await;
}

#[tokio::test(start_paused = true)]
async fn keys_reach_the_machine_and_answers_reach_the_log() {
    let machine = FakeMachine::with(disabled_demo());
    let mut app = App::new(s::demo(), ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(16);
    let script = {
        let machine = Arc::clone(&machine);
        async move {
            frames(2).await;
            tx.send(ch('e')).await.expect("send");
            frames(2).await;
            assert_eq!(machine.lock().sent, [(0, AxisCommand::Enable)]);
            // Space inside the help overlay still stops everything.
            tx.send(ch('?')).await.expect("send");
            tx.send(ch(' ')).await.expect("send");
            frames(2).await;
            assert_eq!(machine.lock().stop_calls, 1);
            tx.send(press(KeyCode::Esc)).await.expect("send");
            tx.send(press(KeyCode::Down)).await.expect("send");
            tx.send(ch('e')).await.expect("send"); // refused: latched
            frames(2).await;
            tx.send(ch('R')).await.expect("send");
            frames(2).await;
            assert!(!machine.lock().latched);
            // Motor on: q asks, y quits.
            tx.send(ch('q')).await.expect("send");
            frames(1).await;
            tx.send(ch('y')).await.expect("send");
            std::future::pending::<()>().await;
        }
    };
    run_until_quit(&machine, &mut app, rx, script).await;
    assert!(app.quit);
    let texts: Vec<_> = app.log.entries().iter().map(|e| e.text.clone()).collect();
    assert!(
        texts.iter().any(|t| t == "y: enable refused: stop-all is latched: release it first"),
        "{texts:?}"
    );
    assert!(texts.iter().any(|t| t == "x: disabled → steady"), "{texts:?}");
    assert!(texts.iter().any(|t| t.starts_with("STOP-ALL latched")), "{texts:?}");
}

#[tokio::test(start_paused = true)]
async fn space_in_a_prompt_stops_in_the_same_loop_turn() {
    let machine = FakeMachine::with(disabled_demo());
    let mut app = App::new(s::demo(), ConfigSource::BuiltInDemo, Theme::default());
    let mut term = Terminal::new(TestBackend::new(80, 24)).expect("terminal");
    let (tx, rx) = mpsc::channel(16);
    let script = {
        let machine = Arc::clone(&machine);
        async move {
            for e in [ch('g'), ch('1'), ch(' ')] {
                tx.send(e).await.expect("send");
            }
            // No frame needs to pass: the stop goes out with the key.
            tokio::task::yield_now().await;
            tokio::task::yield_now().await;
            assert_eq!(machine.lock().stop_calls, 1);
            std::future::pending::<()>().await;
        }
    };
    let stop = async { frames(3).await };
    let run = runner::run(&mut term, key_stream(rx), Arc::clone(&machine), &mut app, stop);
    tokio::select! {
        r = run => r.expect("ends on the stop request"),
        () = script => unreachable!(),
    }
    assert!(term.backend().to_string().contains("STOP-ALL LATCHED"));
}

#[tokio::test(start_paused = true)]
async fn an_outside_stop_request_ends_the_loop_and_closed_input_is_an_error() {
    let machine = FakeMachine::with(disabled_demo());
    let mut app = App::new(s::demo(), ConfigSource::BuiltInDemo, Theme::default());
    let mut term = Terminal::new(TestBackend::new(80, 24)).expect("terminal");
    let (_tx, rx) = mpsc::channel(1);
    runner::run(&mut term, key_stream(rx), Arc::clone(&machine), &mut app, frames(5))
        .await
        .expect("clean end");
    assert!(term.backend().to_string().contains("disabled"), "{}", term.backend());
    let mut app = App::new(s::demo(), ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(1);
    drop(tx);
    let err = runner::run(&mut term, key_stream(rx), machine, &mut app, std::future::pending())
        .await
        .expect_err("input closed");
    assert!(err.to_string().contains("closed"), "{err}");
}

fn key_of_kind(c: char, kind: KeyEventKind) -> std::io::Result<Event> {
    Ok(Event::Key(KeyEvent::new_with_kind(KeyCode::Char(c), KeyModifiers::NONE, kind)))
}

// Terminals with the keyboard enhancement protocol send Press, Repeat… and Release: the
// repeats keep a held jog going and the release ends it at once.
#[tokio::test(start_paused = true)]
async fn a_reported_key_release_ends_a_held_jog() {
    let machine = FakeMachine::with(s::frame(0));
    let mut app = App::new(s::demo(), ConfigSource::BuiltInDemo, Theme::default());
    let (tx, rx) = mpsc::channel(16);
    let script = {
        let machine = Arc::clone(&machine);
        async move {
            frames(2).await;
            tx.send(key_of_kind('>', KeyEventKind::Press)).await.expect("send");
            tx.send(key_of_kind('>', KeyEventKind::Repeat)).await.expect("send");
            tx.send(key_of_kind('>', KeyEventKind::Release)).await.expect("send");
            frames(2).await;
            let sent: Vec<AxisCommand> =
                machine.lock().sent.iter().map(|(_, c)| c.clone()).collect();
            assert!(matches!(sent[0], AxisCommand::JogPulse { direction: 1, .. }), "{sent:?}");
            assert!(matches!(sent[1], AxisCommand::JogPulse { direction: 1, .. }), "{sent:?}");
            assert_eq!(sent[2], AxisCommand::JogRelease, "{sent:?}");
            tx.send(ch('q')).await.expect("send");
            frames(1).await;
            tx.send(ch('y')).await.expect("send");
            std::future::pending::<()>().await;
        }
    };
    run_until_quit(&machine, &mut app, rx, script).await;
}
