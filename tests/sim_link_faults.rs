//! The simulated board's link faults behave like a real link's, seen from a bare protocol v1
//! host under simulated time: during a cut the board keeps ticking and numbering its frames,
//! a blackout costs exactly its length in frames, and a reply delay holds every host message
//! back by its length. The watchdog contract is docs/protocol.md's (servotty's own protocol;
//! common practice, no outside source).

use std::time::Duration;

use servotty::config::{MachineConfig, SimFaults};
use servotty::protocol::{self, status, BoardMessage, FrameDecoder, HostMessage, Telemetry};
use servotty::sim::board::{spawn_in_process, LinkFaults, SimBoardHandle};
use tokio::io::{AsyncReadExt, AsyncWriteExt, DuplexStream};

/// A minimal host: it answers every telemetry frame with a Duty of `duty` and keeps the
/// frames it saw.
struct Host {
    link: DuplexStream,
    decoder: FrameDecoder,
    seen: Vec<Telemetry>,
}

impl Host {
    async fn start(faults: &SimFaults) -> (Self, SimBoardHandle) {
        let cfg = MachineConfig::demo().expect("demo");
        let servotty::config::TransportConfig::Sim(sim) = &cfg.axes[0].transport else {
            panic!("demo X is simulated")
        };
        let (link, board) = spawn_in_process(&sim.plant, faults, 7);
        let mut h = Self { link, decoder: FrameDecoder::new(), seen: Vec::new() };
        h.send(&HostMessage::Hello).await;
        h.send(&HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }).await;
        (h, board)
    }

    async fn send(&mut self, msg: &HostMessage) {
        let mut out = Vec::new();
        protocol::write_frame(msg, &mut out);
        self.link.write_all(&out).await.expect("write");
    }

    /// Runs the host for `ms` of simulated time, answering each frame.
    async fn run_for(&mut self, ms: u64, duty: i16) {
        let until = tokio::time::Instant::now() + Duration::from_millis(ms);
        let mut buf = [0u8; 4096];
        while let Ok(n) = tokio::time::timeout_at(until, self.link.read(&mut buf)).await {
            let n = n.expect("read");
            self.decoder.extend(&buf[..n]);
            while let Some(m) = self.decoder.next_message::<BoardMessage>() {
                if let Ok(BoardMessage::Telemetry(t)) = m {
                    self.seen.push(t);
                    self.send(&HostMessage::Duty { seq: t.seq, duty }).await;
                }
            }
        }
    }
}

#[tokio::test(start_paused = true)]
async fn during_a_blackout_the_board_ticks_on_and_its_seq_keeps_counting() {
    let (mut host, board) = Host::start(&SimFaults::default()).await;
    host.run_for(200, 2000).await;
    assert!(host.seen.len() > 150, "streams: {}", host.seen.len());
    let before = *host.seen.last().expect("frames");
    let ticks_before = board.view().ticks;
    let n = host.seen.len();
    board.black_out(70);
    host.run_for(200, 2000).await;
    // The first frame after the gap is numbered as if none had been lost in between.
    let after = host.seen[n];
    let gap = after.seq.wrapping_sub(before.seq);
    assert!((69..=72).contains(&gap), "seq jumped by {gap}");
    let dt_us = after.board_time_us.wrapping_sub(before.board_time_us);
    assert!((69_000..=72_000).contains(&dt_us), "board time advanced {dt_us} µs");
    assert!(board.view().ticks >= ticks_before + 200, "the board kept ticking");
    // No Duty reached the board for 70 ms > its 50 ms watchdog: the first frame after says so.
    assert!(after.status & status::WATCHDOG_TRIPPED != 0, "{after:?}");
    assert!(after.status & status::MOTOR_ON == 0, "{after:?}");
}

#[tokio::test(start_paused = true)]
async fn a_held_cut_numbers_frames_on_as_well() {
    let (mut host, board) = Host::start(&SimFaults::default()).await;
    host.run_for(100, 0).await;
    let before = *host.seen.last().expect("frames");
    board.set_link_faults(LinkFaults { cut: true, ..LinkFaults::default() });
    host.run_for(30, 0).await;
    board.set_link_faults(LinkFaults::default());
    let n = host.seen.len();
    host.run_for(50, 0).await;
    let after = host.seen[n];
    let gap = after.seq.wrapping_sub(before.seq);
    assert!((29..=33).contains(&gap), "seq jumped by {gap}");
}

#[tokio::test(start_paused = true)]
async fn bursty_loss_blacks_out_the_link_periodically() {
    let faults = SimFaults { burst_ms: 70, burst_every_ms: 500, ..SimFaults::default() };
    let (mut host, _board) = Host::start(&faults).await;
    host.run_for(2000, 0).await;
    let gaps: Vec<u16> =
        host.seen.windows(2).map(|w| w[1].seq.wrapping_sub(w[0].seq)).filter(|g| *g > 1).collect();
    // Four bursts in two seconds, each losing its 70 frames.
    assert!((3..=4).contains(&gaps.len()), "{gaps:?}");
    assert!(gaps.iter().all(|g| (70..=72).contains(g)), "{gaps:?}");
}

#[tokio::test(start_paused = true)]
async fn a_reply_delay_holds_every_host_message_back() {
    let faults = SimFaults { reply_delay_ms: 20, ..SimFaults::default() };
    let (mut host, _board) = Host::start(&faults).await;
    host.run_for(300, 1000).await;
    let t = *host.seen.last().expect("frames");
    // The host answered every frame at once; the board acknowledges about 20 ticks behind.
    let lag = t.seq.wrapping_sub(t.ack_seq);
    assert!((19..=22).contains(&lag), "ack lags by {lag} frames");
}
