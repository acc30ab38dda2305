//! No axis loop waits on slow work: boards on a thread of their own (as real boards are: they
//! do not freeze with the host), the engine on its thread, and slow work happening — a trip
//! capture of 8 axes × 10 s, a commissioning analysis — while every board measures how long
//! it goes without hearing from the host.
//!
//! These tests run in real time by necessity (the point is what wall-clock work does to the
//! loops). The bound is [`LONGEST_SILENCE`] = 25 ms on top of what the operating system
//! made an idle thread wait in the same window (a thread that only sleeps 1 ms at a time
//! measures it):
//! - 25 ms is far below the 67 ms stall this guards against (a capture formatted on the
//!   engine's thread; in a debug build that takes hundreds of milliseconds) and half the demo
//!   boards' 50 ms watchdog (configs/demo-greenhouse.toml), so a regression fails clearly;
//! - it is far above the 1 ms tick, and the scheduler's own delay is added because on a
//!   loaded two-core machine (several builds at once, load average 8) a runnable thread was
//!   seen to wait over 30 ms for a core — no fault of the engine's, and the board thread that
//!   measures is subject to it too.
//!
//! The watchdog contract (the board stops the motor when the host is silent for longer than
//! `watchdog_ms`) is docs/protocol.md's; the bound is our own engineering margin (common
//! practice, no source).

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::task::{Context, Poll};
use std::time::{Duration, Instant};

use servotty::config::{MachineConfig, TransportConfig};
use servotty::engine::recorder::RecorderPaths;
use servotty::engine::{AxisCommand, AxisState, EngineThread, EventKind, Machine, MachineHandle};
use servotty::link::{Link, OnceLink};
use servotty::protocol::{FrameDecoder, HostMessage};
use servotty::sim::board::{SimBoard, SimBoardHandle};
use servotty::sim::plant::PlantFaults;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

/// Longest any healthy axis's board may go without a reply from the host (see module docs).
const LONGEST_SILENCE: Duration = Duration::from_millis(25);
const AXES: usize = 8;

/// A thread that sleeps 1 ms at a time and keeps its worst oversleep: what the OS alone
/// imposes on a thread that wants to run, in the measuring window.
struct Canary {
    stop: Arc<AtomicBool>,
    thread: std::thread::JoinHandle<Duration>,
}

impl Canary {
    fn start() -> Self {
        let stop = Arc::new(AtomicBool::new(false));
        let s = stop.clone();
        let thread = std::thread::spawn(move || {
            let mut worst = Duration::ZERO;
            while !s.load(Ordering::Relaxed) {
                let t = Instant::now();
                std::thread::sleep(Duration::from_millis(1));
                worst = worst.max(t.elapsed().saturating_sub(Duration::from_millis(1)));
            }
            worst
        });
        Self { stop, thread }
    }

    fn worst(self) -> Duration {
        self.stop.store(true, Ordering::Relaxed);
        self.thread.join().expect("canary")
    }
}

/// Real-time tests share two cores with everything else: one at a time.
static ONE_AT_A_TIME: Mutex<()> = Mutex::new(());

/// What a board saw of the host's replies.
#[derive(Default)]
struct ReplyGaps {
    measuring: AtomicBool,
    /// Longest gap between two host replies while measuring, µs.
    longest_us: AtomicU64,
    /// When that gap ended, µs after measuring started (to tell what caused it).
    longest_at_us: AtomicU64,
    since: Mutex<Option<Instant>>,
    replies: AtomicU64,
}

/// The board's end of the link, watching the host's replies go by.
struct Watched<S> {
    inner: S,
    decoder: FrameDecoder,
    last_reply: Option<Instant>,
    gaps: Arc<ReplyGaps>,
}

impl<S: AsyncRead + Unpin> AsyncRead for Watched<S> {
    fn poll_read(
        mut self: std::pin::Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<std::io::Result<()>> {
        let before = buf.filled().len();
        let r = std::pin::Pin::new(&mut self.inner).poll_read(cx, buf);
        if let Poll::Ready(Ok(())) = r {
            let this = &mut *self;
            this.decoder.extend(&buf.filled()[before..]);
            while let Some(msg) = this.decoder.next_message::<HostMessage>() {
                if !matches!(msg, Ok(HostMessage::Duty { .. } | HostMessage::Stop { .. })) {
                    continue;
                }
                let now = Instant::now();
                if this.gaps.measuring.load(Ordering::Relaxed) {
                    this.gaps.replies.fetch_add(1, Ordering::Relaxed);
                    if let Some(last) = this.last_reply {
                        let us = now.duration_since(last).as_micros() as u64;
                        if this.gaps.longest_us.fetch_max(us, Ordering::Relaxed) < us {
                            let since = this.gaps.since.lock().ok().and_then(|s| *s);
                            let at = since.map_or(0, |s| now.duration_since(s).as_micros() as u64);
                            this.gaps.longest_at_us.store(at, Ordering::Relaxed);
                        }
                    }
                }
                this.last_reply = Some(now);
            }
        }
        r
    }
}

impl<S: AsyncWrite + Unpin> AsyncWrite for Watched<S> {
    fn poll_write(
        mut self: std::pin::Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<std::io::Result<usize>> {
        std::pin::Pin::new(&mut self.inner).poll_write(cx, buf)
    }

    fn poll_flush(
        mut self: std::pin::Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<std::io::Result<()>> {
        std::pin::Pin::new(&mut self.inner).poll_flush(cx)
    }

    fn poll_shutdown(
        mut self: std::pin::Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<std::io::Result<()>> {
        std::pin::Pin::new(&mut self.inner).poll_shutdown(cx)
    }
}

/// Eight copies of the demo's X axis (invented numbers), all simulated.
fn eight_axes() -> MachineConfig {
    let mut cfg = MachineConfig::demo().expect("demo config");
    let x = cfg.axes[0].clone();
    cfg.axes = (0..AXES)
        .map(|i| {
            let mut a = x.clone();
            a.name = format!("a{i}");
            a
        })
        .collect();
    cfg
}

/// The machine on the engine's thread, its boards on another thread with its own runtime.
struct Rig {
    engine: EngineThread,
    boards: Vec<SimBoardHandle>,
    gaps: Vec<Arc<ReplyGaps>>,
    canary: Mutex<Option<Canary>>,
    _captures: tempfile::TempDir,
    captures_dir: std::path::PathBuf,
}

impl Rig {
    fn start() -> Self {
        let cfg = eight_axes();
        let mut host_ends = Vec::new();
        let mut board_ends = Vec::new();
        let mut boards = Vec::new();
        let mut gaps = Vec::new();
        for (i, a) in cfg.axes.iter().enumerate() {
            let TransportConfig::Sim(sim) = &a.transport else { panic!("demo X is simulated") };
            let (host, board_end) = tokio::io::duplex(16 * 1024);
            let board = SimBoard::new(&sim.plant, &sim.faults, 0x5E12_0770 + i as u64);
            boards.push(board.handle());
            let g = Arc::new(ReplyGaps::default());
            gaps.push(g.clone());
            let link: Arc<dyn Link> = Arc::new(OnceLink::new(Box::new(host)));
            host_ends.push(link);
            board_ends.push((
                board,
                Watched {
                    inner: board_end,
                    decoder: FrameDecoder::new(),
                    last_reply: None,
                    gaps: g,
                },
            ));
        }
        std::thread::Builder::new()
            .name("boards".into())
            .spawn(move || {
                let rt = tokio::runtime::Builder::new_current_thread()
                    .enable_all()
                    .build()
                    .expect("board runtime");
                rt.block_on(async move {
                    let mut set = tokio::task::JoinSet::new();
                    for (board, end) in board_ends {
                        set.spawn(board.run(end));
                    }
                    // Each board ends when the host hangs up.
                    while set.join_next().await.is_some() {}
                });
            })
            .expect("board thread");
        let captures = tempfile::tempdir().expect("temp dir");
        let captures_dir = captures.path().join("captures");
        let paths = RecorderPaths {
            captures_dir: captures_dir.clone(),
            event_log: captures.path().join("events.jsonl"),
        };
        let engine =
            EngineThread::spawn(move || Ok(Machine::start_links(&cfg, host_ends, Some(paths))))
                .expect("engine starts");
        Self { engine, boards, gaps, canary: Mutex::new(None), _captures: captures, captures_dir }
    }

    fn handle(&self) -> MachineHandle {
        self.engine.handle().clone()
    }

    /// Links, enables and waits until every axis has held for `board_s` of board time.
    async fn all_holding_for(&self, board_s: f64) {
        let h = self.handle();
        assert!(h.wait_linked(Duration::from_secs(10)).await.is_empty(), "every axis links");
        for a in h.axes() {
            a.send(AxisCommand::Enable).await.expect("enables");
        }
        for a in h.axes() {
            let mut rx = a.watch();
            let reached = tokio::time::timeout(
                Duration::from_secs_f64(board_s + 20.0),
                rx.wait_for(|s| s.state == AxisState::Steady && s.board_time_s >= board_s),
            )
            .await;
            assert!(reached.is_ok(), "{} held for {board_s} s: {:#?}", a.name(), a.snapshot());
        }
    }

    fn start_measuring(&self) {
        *self.canary.lock().expect("lock") = Some(Canary::start());
        for g in &self.gaps {
            g.longest_us.store(0, Ordering::Relaxed);
            g.replies.store(0, Ordering::Relaxed);
            *g.since.lock().expect("lock") = Some(Instant::now());
            g.measuring.store(true, Ordering::Relaxed);
        }
    }

    /// Longest silence per axis (ms), replies seen and when that silence ended (ms), except
    /// `skip`; and the OS's own worst delay in the window.
    fn silences(&self, skip: Option<usize>) -> (Vec<(usize, f64, u64, f64)>, Duration) {
        let os = self.canary.lock().expect("lock").take().map_or(Duration::ZERO, Canary::worst);
        let s = self
            .gaps
            .iter()
            .enumerate()
            .filter(|(i, _)| Some(*i) != skip)
            .map(|(i, g)| {
                g.measuring.store(false, Ordering::Relaxed);
                (
                    i,
                    g.longest_us.load(Ordering::Relaxed) as f64 / 1000.0,
                    g.replies.load(Ordering::Relaxed),
                    g.longest_at_us.load(Ordering::Relaxed) as f64 / 1000.0,
                )
            })
            .collect();
        (s, os)
    }
}

/// `silences`: (axis, longest silence ms, replies, when that silence ended ms).
fn assert_no_long_silence((silences, os): &(Vec<(usize, f64, u64, f64)>, Duration), what: &str) {
    eprintln!(
        "longest host silence per axis while {what} (axis, ms, replies, at ms): {silences:?}; \
         the OS kept an idle thread waiting up to {os:?}"
    );
    let bound = LONGEST_SILENCE + *os;
    for (i, ms, replies, _) in silences {
        assert!(*replies > 100, "a{i} got only {replies} replies while {what}");
        assert!(
            *ms < bound.as_secs_f64() * 1000.0,
            "a{i} went {ms:.1} ms without a reply while {what} (bound {LONGEST_SILENCE:?} + \
             the OS's own {os:?})"
        );
    }
}

/// Runs `case` on a runtime of its own, one real-time case at a time.
fn alone(case: impl std::future::Future<Output = ()>) {
    let _one = ONE_AT_A_TIME.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
    // The front ends' runtime, blocking pool included.
    servotty::process::runtime().expect("front-end runtime").block_on(case);
}

#[test]
fn a_trip_capture_of_eight_full_histories_holds_up_no_other_axis() {
    alone(trip_capture());
}

async fn trip_capture() {
    let rig = Rig::start();
    let h = rig.handle();
    let capture_s = h.config().machine.capture_seconds;
    assert!(capture_s >= 10.0, "the demo keeps 10 s of history");
    // Full rings: the capture is as large as it gets.
    rig.all_holding_for(capture_s + 0.5).await;
    let mut events = h.events();
    rig.start_measuring();
    let tripped = 3;
    // An encoder glitch far beyond encoder_jump_counts trips the axis at once.
    rig.boards[tripped].set_plant_faults(PlantFaults {
        encoder_offset_counts: 1_000_000,
        ..PlantFaults::default()
    });
    let path = tokio::time::timeout(Duration::from_secs(30), async {
        loop {
            match events.recv().await {
                Ok(ev) => {
                    if let EventKind::Capture { path } = ev.kind {
                        return path;
                    }
                }
                Err(tokio::sync::broadcast::error::RecvError::Lagged(_)) => {}
                Err(e) => panic!("event stream ended: {e}"),
            }
        }
    })
    .await
    .expect("a capture is written");
    let silences = rig.silences(Some(tripped));
    let size = std::fs::metadata(&path).expect("capture exists").len();
    assert!(std::path::Path::new(&path).starts_with(&rig.captures_dir));
    // 8 axes × 10 000 rows of about 60 bytes.
    assert!(size > 3_000_000, "capture holds every axis's full history ({size} bytes)");
    assert_eq!(h.axes()[tripped].snapshot().state, AxisState::Tripped);
    assert_no_long_silence(&silences, "a trip capture was built and written");
    for (i, a) in h.axes().iter().enumerate() {
        if i != tripped {
            assert_eq!(a.snapshot().state, AxisState::Steady, "{} kept holding", a.name());
        }
    }
    let report = rig.engine.shutdown();
    assert!(report.is_clean(), "{report}");
}

/// A first-order velocity response to duty pulses, the kind of record identification fits.
fn pulse_record(n: usize) -> Vec<servotty::tuning::ident::DutySample> {
    let (h, gain, tau) = (0.001, 2.0, 0.05);
    let (mut v, mut x) = (0.0, 0.0);
    (0..n)
        .map(|k| {
            let duty = [30.0, 0.0, 60.0, 0.0, -45.0, 0.0][(k / 400) % 6];
            let s = servotty::tuning::ident::DutySample { t: k as f64 * h, duty, position: x };
            v += h / tau * (gain * duty - v);
            x += h * v;
            s
        })
        .collect()
}

#[test]
fn a_commissioning_analysis_holds_up_no_axis() {
    alone(analysis());
}

async fn analysis() {
    let rig = Rig::start();
    let h = rig.handle();
    rig.all_holding_for(0.5).await;
    rig.start_measuring();
    // The front end analyses as the cockpit's commissioning does: on its blocking pool, for
    // a second of fits back to back (each a full identification of a 4 s record).
    let fits = tokio::task::spawn_blocking(|| {
        let record = pulse_record(4_000);
        let opts = servotty::tuning::ident::IdentOptions::default();
        let t0 = Instant::now();
        let mut fits = 0;
        while t0.elapsed() < Duration::from_secs(1) {
            servotty::tuning::ident::identify(&record, &opts).expect("the record fits");
            fits += 1;
        }
        fits
    })
    .await
    .expect("analysis ran");
    let silences = rig.silences(None);
    eprintln!("{fits} identifications in 1 s");
    assert_no_long_silence(&silences, "identification ran");
    for a in h.axes() {
        assert_eq!(a.snapshot().state, AxisState::Steady, "{} kept holding", a.name());
    }
    let report = rig.engine.shutdown();
    assert!(report.is_clean(), "{report}");
}
