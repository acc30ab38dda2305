//! Shutdown's time limit, under simulated time (deterministic): an axis whose task cannot
//! finish in time does not hold the others up, the machine returns within its limit and
//! names what did not stop; a board that never answers does not delay shutdown at all.
//!
//! The demo gantry (configs/demo-greenhouse.toml, invented numbers): X on a board that takes
//! no bytes (a wedged USB device: every write waits for its time limit), Y on the in-process
//! simulated board, holding, Z on a board that takes bytes but never answers Hello. That an
//! unfinished task is left to the board's watchdog is servotty's own policy (common practice,
//! no source): the software stop is not a safety function, the hardware emergency stop is.

use std::pin::Pin;
use std::sync::Arc;
use std::task::{Context, Poll};
use std::time::Duration;

use futures::future::BoxFuture;
use servotty::config::MachineConfig;
use servotty::engine::{AxisCommand, AxisState, Machine};
use servotty::link::{BoxStream, Link, LinkError};
use servotty::sim::board::SimBoardHandle;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::time::Instant;

/// A board stream that never delivers a byte; its writes either never complete (`wedged`)
/// or vanish into a board that never answers.
struct DeadBoard {
    wedged: bool,
}

impl AsyncRead for DeadBoard {
    fn poll_read(
        self: Pin<&mut Self>,
        _: &mut Context<'_>,
        _: &mut ReadBuf<'_>,
    ) -> Poll<std::io::Result<()>> {
        Poll::Pending
    }
}

impl AsyncWrite for DeadBoard {
    fn poll_write(
        self: Pin<&mut Self>,
        _: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<std::io::Result<usize>> {
        if self.wedged {
            Poll::Pending
        } else {
            Poll::Ready(Ok(buf.len()))
        }
    }

    fn poll_flush(self: Pin<&mut Self>, _: &mut Context<'_>) -> Poll<std::io::Result<()>> {
        if self.wedged {
            Poll::Pending
        } else {
            Poll::Ready(Ok(()))
        }
    }

    fn poll_shutdown(self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<std::io::Result<()>> {
        self.poll_flush(cx)
    }
}

struct DeadLink {
    wedged: bool,
}

impl Link for DeadLink {
    fn open(&self) -> BoxFuture<'static, Result<BoxStream, LinkError>> {
        let wedged = self.wedged;
        Box::pin(async move { Ok(Box::new(DeadBoard { wedged }) as BoxStream) })
    }

    fn describe(&self) -> String {
        if self.wedged { "a board that takes no bytes" } else { "a board that never answers" }
            .to_owned()
    }
}

/// The demo's X, Y and Z: X wedged with writes allowed `x_write_s` each, Y simulated, Z
/// silent. Y is enabled and holding when this returns.
async fn start(x_write_s: f64) -> (Machine, SimBoardHandle) {
    let mut cfg = MachineConfig::demo().expect("demo config");
    cfg.axes.truncate(3);
    // The write limit is the link timeout (the axis task's own rule).
    cfg.axes[0].limits.link_timeout_s = x_write_s;
    let y = servotty::link::build(&cfg.axes[1], 1, None);
    let sim = y.sim.expect("y is simulated in process");
    let links: Vec<Arc<dyn Link>> =
        vec![Arc::new(DeadLink { wedged: true }), y.link, Arc::new(DeadLink { wedged: false })];
    let m = Machine::start_links(&cfg, links, None);
    let y = m.handle().axis("y").expect("y").clone();
    let mut rx = y.watch();
    // The guard `wait_for` returns holds the snapshot's lock: it is dropped at once.
    let linked = tokio::time::timeout(
        Duration::from_secs(3),
        rx.wait_for(|s| s.state != AxisState::Offline),
    )
    .await
    .is_ok_and(|r| r.is_ok());
    assert!(linked, "y links");
    y.send(AxisCommand::Enable).await.expect("y enables");
    // Let Y hold for a moment with its motor on; X is inside its first write by now.
    tokio::time::sleep(Duration::from_millis(100)).await;
    assert_eq!(y.snapshot().state, AxisState::Steady);
    assert!(sim.view().motor_on, "y's board drives its motor");
    (m, sim)
}

#[tokio::test(start_paused = true)]
async fn shutdown_returns_within_its_limit_and_names_the_axis_that_did_not_stop() {
    // X's write may take 5 s; shutdown allows 0.5 s.
    let (m, y_board) = start(5.0).await;
    let limit = Duration::from_millis(500);
    let asked = Instant::now();
    let report = m.shutdown_within(limit).await;
    let took = asked.elapsed();
    // The timer wheel's millisecond resolution is the only slack.
    assert!(took <= limit + Duration::from_millis(2), "shutdown took {took:?}");
    assert_eq!(report.not_stopped, vec!["x".to_owned()], "{report}");
    assert!(report.ended_early.is_empty() && report.engine.is_none(), "{report}");
    assert!(!report.is_clean());
    let words = report.to_string();
    assert!(words.contains("axis x did not stop in time"), "{words}");
    assert!(words.contains("watchdog"), "says who turns the motor off: {words}");
    // Y was told to stop, not left to its watchdog.
    tokio::time::sleep(Duration::from_millis(5)).await;
    let v = y_board.view();
    assert!(!v.motor_on && !v.watchdog_tripped, "{v:?}");
}

#[tokio::test(start_paused = true)]
async fn a_write_that_ends_within_the_limit_is_waited_for() {
    // X's write gives up after 0.2 s, well inside the 2 s limit: X then sees the shutdown.
    let (m, _) = start(0.2).await;
    let limit = Duration::from_secs(2);
    let asked = Instant::now();
    let report = m.shutdown_within(limit).await;
    let took = asked.elapsed();
    assert!(report.is_clean(), "{report}");
    assert!(took <= Duration::from_millis(250), "waited only for X's write: {took:?}");
}
