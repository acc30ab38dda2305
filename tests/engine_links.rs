//! How the axis task treats its link, under simulated time (deterministic): which failures
//! are retried and which are reported once and left alone, and what an axis task that dies
//! leaves behind.
//!
//! The retry policy is servotty's own (common practice, no source); the Hello contract is
//! docs/protocol.md's (section on the handshake: a board whose protocol is not v1 is reported
//! and the host goes no further).

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use std::time::Duration;

use futures::future::BoxFuture;
use servotty::config::MachineConfig;
use servotty::engine::{AxisState, EventKind, Machine, MachineHandle};
use servotty::link::{BoxStream, Link, LinkError};
use servotty::protocol::{self, BoardMessage, Capabilities, FrameDecoder, HostMessage};
use tokio::io::{AsyncReadExt, AsyncWriteExt};

/// What the fake link does on each open.
#[derive(Clone)]
enum Behaviour {
    /// Fails with this error.
    Fails(LinkError),
    /// A board that answers Hello announcing protocol v0.
    OldBoard,
    /// The open itself panics (a bug in a link).
    Panics,
}

struct FakeLink {
    opens: Arc<AtomicUsize>,
    behaviour: Behaviour,
}

impl Link for FakeLink {
    fn open(&self) -> BoxFuture<'static, Result<BoxStream, LinkError>> {
        self.opens.fetch_add(1, Ordering::SeqCst);
        let behaviour = self.behaviour.clone();
        Box::pin(async move {
            match behaviour {
                Behaviour::Fails(e) => Err(e),
                Behaviour::Panics => panic!("the fake link broke"),
                Behaviour::OldBoard => {
                    let (host, mut board) = tokio::io::duplex(4096);
                    tokio::spawn(async move {
                        let mut rx = [0u8; 256];
                        let mut decoder = FrameDecoder::new();
                        while let Ok(n) = board.read(&mut rx).await {
                            if n == 0 {
                                return;
                            }
                            decoder.extend(&rx[..n]);
                            while let Some(msg) = decoder.next_message::<HostMessage>() {
                                if matches!(msg, Ok(HostMessage::Hello)) {
                                    let mut tx = Vec::new();
                                    let caps = Capabilities {
                                        protocol_version: 0,
                                        max_tick_hz: 1000,
                                        features: 0,
                                        board_name: "old".into(),
                                    };
                                    protocol::write_frame(&BoardMessage::Hello(caps), &mut tx);
                                    if board.write_all(&tx).await.is_err() {
                                        return;
                                    }
                                }
                            }
                        }
                    });
                    Ok(Box::new(host) as BoxStream)
                }
            }
        })
    }

    fn describe(&self) -> String {
        "fake link".to_owned()
    }
}

/// The demo's X axis alone (invented numbers) on a fake link.
fn start(behaviour: Behaviour) -> (Machine, MachineHandle, Arc<AtomicUsize>) {
    let mut cfg = MachineConfig::demo().expect("demo config");
    cfg.axes.truncate(1);
    let opens = Arc::new(AtomicUsize::new(0));
    let link: Arc<dyn Link> = Arc::new(FakeLink { opens: opens.clone(), behaviour });
    let m = Machine::start_links(&cfg, vec![link], None);
    let h = m.handle();
    (m, h, opens)
}

/// Link-down events seen while `seconds` of simulated time pass.
async fn link_downs_over(h: &MachineHandle, seconds: u64) -> usize {
    let mut events = h.events();
    tokio::time::sleep(Duration::from_secs(seconds)).await;
    let mut downs = 0;
    while let Ok(ev) = events.try_recv() {
        if matches!(ev.kind, EventKind::Link { up: false, .. }) {
            downs += 1;
        }
    }
    downs
}

#[tokio::test(start_paused = true)]
async fn a_board_of_another_protocol_version_is_reported_once_and_not_retried() {
    let (m, h, opens) = start(Behaviour::OldBoard);
    let downs = link_downs_over(&h, 10).await;
    let s = h.axes()[0].snapshot();
    assert_eq!(s.state, AxisState::Offline);
    let why = s.link_error.expect("the reason is kept").to_string();
    assert!(why.contains("protocol v0") && why.contains("v1"), "{why}");
    assert!(h.offline_reason("x").contains("protocol v0"));
    assert_eq!(opens.load(Ordering::SeqCst), 1, "opened once, not every second");
    assert!(downs <= 1, "reported once ({downs} link-down events)");
    assert!(m.shutdown().await.is_clean());
}

#[tokio::test(start_paused = true)]
async fn a_path_that_is_not_a_serial_device_is_not_retried() {
    let (m, h, opens) =
        start(Behaviour::Fails(LinkError::NotSerial { device: "/dev/null".into() }));
    tokio::time::sleep(Duration::from_secs(10)).await;
    assert_eq!(opens.load(Ordering::SeqCst), 1);
    let why = h.axes()[0].snapshot().link_error.expect("kept").to_string();
    assert!(why.contains("not a serial device"), "{why}");
    assert!(m.shutdown().await.is_clean());
}

#[tokio::test(start_paused = true)]
async fn a_missing_board_is_looked_for_every_second_but_reported_once() {
    let (m, h, opens) =
        start(Behaviour::Fails(LinkError::NotFound { device: "/dev/ttyACM9".into() }));
    tokio::time::sleep(Duration::from_millis(100)).await;
    let downs = link_downs_over(&h, 10).await;
    let n = opens.load(Ordering::SeqCst);
    assert!((9..=12).contains(&n), "about one open a second over 10 s, found {n}");
    assert_eq!(downs, 0, "the first report came before; the same failure is not repeated");
    assert!(m.shutdown().await.is_clean());
}

#[tokio::test(start_paused = true)]
async fn an_axis_task_that_panics_is_offline_with_the_reason_and_reported() {
    let (m, h, _) = start(Behaviour::Panics);
    let mut events = h.events();
    let mut rx = h.axes()[0].watch();
    let ended =
        tokio::time::timeout(Duration::from_secs(1), rx.wait_for(|s| s.ended.is_some())).await;
    assert!(ended.is_ok(), "the axis is marked as ended");
    let s = h.axes()[0].snapshot();
    assert_eq!(s.state, AxisState::Offline);
    assert!(s.ended.as_deref().is_some_and(|w| w.contains("the fake link broke")), "{s:#?}");
    let ev = events.try_recv().expect("an event");
    assert!(matches!(ev.kind, EventKind::AxisEnded { .. }), "{ev:?}");
    assert_eq!(h.ended().len(), 1);
    let report = m.shutdown().await;
    assert!(!report.is_clean());
    assert_eq!(report.ended_early.len(), 1, "{report}");
    assert!(report.to_string().contains("x had stopped working"), "{report}");
}
