//! Board emulation: a simulated motor-driver board that speaks protocol v1 over any byte
//! stream, exactly as firmware would: tick, telemetry every tick, duty commands, watchdog,
//! and injected faults.
//!
//! The board's clock is its tick counter, not the host's: board time is `ticks × period`, and
//! the plant integrates exactly one period per tick. Host timers only pace the ticks (a tokio
//! interval, exact under `tokio::time::pause`), so a run under simulated time is
//! deterministic and a run over a real PTY has correct physics even when ticks arrive late.

use std::sync::{Arc, Mutex, PoisonError};
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};

use tokio::time::MissedTickBehavior;

use crate::config::{PlantParams, SimFaults};
use crate::protocol::{
    self, features, inputs, status, BoardMessage, Capabilities, FrameDecoder, HostMessage,
    Telemetry,
};
use crate::sim::plant::{Plant, PlantFaults};
use crate::transport::BoardStream;

/// Tick rate the simulated board runs at before the host configures it, Hz.
const POWER_UP_TICK_HZ: u16 = 1000;
/// Longest a telemetry frame waits for room in the link before it is dropped.
const TX_PATIENCE: Duration = Duration::from_micros(500);
/// Fastest tick the simulated board accepts, Hz.
const MAX_TICK_HZ: u16 = 5000;

/// Faults the link itself can suffer (the plant's faults are in [`PlantFaults`]).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LinkFaults {
    /// The cable is cut: nothing goes either way.
    pub cut: bool,
    /// Probability (0…1) that a telemetry frame is dropped.
    pub drop_probability: f64,
    /// Probability (0…1) that a telemetry frame has one bit flipped.
    pub corrupt_probability: f64,
}

/// What a test or the operator can see and change on a running simulated board.
#[derive(Debug, Clone)]
pub struct SimBoardHandle {
    shared: Arc<Mutex<Shared>>,
}

#[derive(Debug)]
struct Shared {
    plant_faults: PlantFaults,
    link_faults: LinkFaults,
    view: BoardView,
}

/// The board's true state, read from outside for tests and displays.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct BoardView {
    /// Carriage position from the lower hard stop, mm.
    pub position_mm: f64,
    /// Carriage velocity, mm/s.
    pub velocity_mm_s: f64,
    /// Encoder count as the board reports it.
    pub count: i64,
    /// Duty the bridge applies now, −1…1.
    pub duty: f64,
    /// Whether the bridge is on.
    pub motor_on: bool,
    /// Whether the watchdog has turned the motor off.
    pub watchdog_tripped: bool,
    /// Board ticks since power-up.
    pub ticks: u64,
    /// Telemetry frames sent.
    pub frames_sent: u64,
    /// Valid host frames received.
    pub commands_received: u64,
    /// Tick count when the bridge last went from on to off (Stop, or watchdog).
    pub motor_off_at_tick: Option<u64>,
}

impl SimBoardHandle {
    /// The board's true state at its last tick.
    pub fn view(&self) -> BoardView {
        self.lock().view
    }

    /// Changes the plant's faults (jam, slip, reversed motor, encoder glitch).
    pub fn set_plant_faults(&self, f: PlantFaults) {
        self.lock().plant_faults = f;
    }

    /// Changes the link's faults.
    pub fn set_link_faults(&self, f: LinkFaults) {
        self.lock().link_faults = f;
    }

    /// Current plant faults.
    pub fn plant_faults(&self) -> PlantFaults {
        self.lock().plant_faults.clone()
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Shared> {
        self.shared.lock().unwrap_or_else(PoisonError::into_inner)
    }
}

/// A simulated board ready to run.
pub struct SimBoard {
    plant: Plant,
    plant_params: PlantParams,
    handle: SimBoardHandle,
    seed: u64,
    persistent: bool,
}

impl SimBoard {
    /// A board driving `params`, with the start-up faults of the configuration.
    pub fn new(params: &PlantParams, faults: &SimFaults, seed: u64) -> Self {
        let plant_faults =
            PlantFaults { reversed_motor: faults.reversed_motor, ..PlantFaults::default() };
        let link_faults = LinkFaults {
            cut: false,
            drop_probability: faults.drop_frame_probability,
            corrupt_probability: faults.corrupt_frame_probability,
        };
        let mut plant = Plant::new(params);
        plant.faults = plant_faults.clone();
        let view = BoardView {
            position_mm: plant.position_mm(),
            count: plant.encoder_count(),
            ..BoardView::default()
        };
        let shared = Arc::new(Mutex::new(Shared { plant_faults, link_faults, view }));
        Self {
            plant,
            plant_params: params.clone(),
            handle: SimBoardHandle { shared },
            seed,
            persistent: false,
        }
    }

    /// Keep running when the host side closes or errors (serving a PTY that hosts open and
    /// close), instead of ending with the stream.
    pub fn persistent(mut self) -> Self {
        self.persistent = true;
        self
    }

    /// A handle for watching and faulting the board while it runs.
    pub fn handle(&self) -> SimBoardHandle {
        self.handle.clone()
    }

    /// Runs the board on `stream` until the stream closes.
    ///
    /// Mirrors the firmware contract in docs/protocol.md: motor off at power-up; answer Hello
    /// with capabilities; stream telemetry every tick after Configure; apply each valid Duty at
    /// the next tick; motor off on Stop, and on watchdog expiry until the next valid Duty.
    pub async fn run<S: BoardStream>(mut self, mut stream: S) {
        let mut tick_hz = POWER_UP_TICK_HZ;
        let mut watchdog_ticks: u64 = 50;
        let mut streaming = false;
        let mut interval = make_interval(tick_hz);
        let mut decoder = FrameDecoder::new();
        let mut rx = vec![0u8; 4096];
        let mut tx: Vec<u8> = Vec::with_capacity(256);
        let mut rng = SplitMix64(self.seed);

        let mut ticks: u64 = 0;
        let mut seq: u16 = 0;
        let mut duty = 0.0_f64;
        let mut motor_on = false;
        let mut watchdog_tripped = false;
        let mut last_command_tick: u64 = 0;
        let mut ack_seq: u16 = 0;
        let mut commands_received: u64 = 0;
        let mut frames_sent: u64 = 0;
        let mut motor_off_at_tick: Option<u64> = None;
        let mut host_absent = false;
        // One read per tick is all a board needs (a duty is applied at the next tick
        // anyway). A PTY signals "readable" several times per host message and most of
        // those reads come back empty; not reading again until the next tick saves those
        // system calls, which otherwise cost more than everything else the board does.
        let mut read_this_tick = false;
        let mut tick_due = false;
        let mut retry_read_at = tokio::time::Instant::now();
        let features = if self.plant_params.home_switch_mm.is_some() {
            features::INDEX_PULSE | features::HOME_INPUT
        } else {
            features::INDEX_PULSE
        };

        loop {
            tokio::select! {
                // Order matters: at a tick, first take what the host sent (a Stop that
                // arrived during the last tick must act on this one), then do the tick.
                biased;
                n = stream.read(&mut rx), if !host_absent && !read_this_tick => {
                    let n = match n {
                        Ok(n) if n > 0 => {
                            read_this_tick = true;
                            n
                        }
                        _ if self.persistent => {
                            // A PTY with no host on the other side reads as an error; look
                            // again shortly, ticking on meanwhile (sleeping here would stall
                            // the ticks and make them burst later).
                            host_absent = true;
                            retry_read_at = tokio::time::Instant::now() + Duration::from_millis(50);
                            continue;
                        }
                        _ => return,
                    };
                    if self.handle.lock().link_faults.cut {
                        continue;
                    }
                    decoder.extend(&rx[..n]);
                    let mut got_any = false;
                    while let Some(msg) = decoder.next_message::<HostMessage>() {
                        got_any = true;
                        // Bad frames are dropped and, per the contract, never feed the
                        // watchdog.
                        let Ok(msg) = msg else { continue };
                        commands_received += 1;
                        match msg {
                            HostMessage::Hello => {
                                // Contract: Hello switches the motor off first.
                                if motor_on {
                                    motor_off_at_tick = Some(ticks);
                                }
                                motor_on = false;
                                duty = 0.0;
                                let caps = BoardMessage::Hello(Capabilities {
                                    protocol_version: protocol::PROTOCOL_VERSION,
                                    max_tick_hz: MAX_TICK_HZ,
                                    features,
                                    board_name: "servotty-sim".to_owned(),
                                });
                                tx.clear();
                                protocol::write_frame(&caps, &mut tx);
                                send_without_waiting(&mut stream, &tx);
                            }
                            HostMessage::Configure { tick_hz: hz, watchdog_ms } => {
                                let hz = hz.clamp(1, MAX_TICK_HZ);
                                if hz != tick_hz {
                                    // Board time stays continuous across a rate change.
                                    ticks = ticks * u64::from(hz) / u64::from(tick_hz);
                                    tick_hz = hz;
                                    interval = make_interval(tick_hz);
                                }
                                watchdog_ticks =
                                    (u64::from(watchdog_ms) * u64::from(tick_hz)).div_ceil(1000).max(1);
                                // Contract: Configure starts from motor off with fresh
                                // sequence numbers.
                                if motor_on {
                                    motor_off_at_tick = Some(ticks);
                                }
                                motor_on = false;
                                duty = 0.0;
                                seq = 0;
                                ack_seq = 0;
                                watchdog_tripped = false;
                                streaming = true;
                            }
                            // Contract: a Duty before Configure is ignored (no watchdog
                            // is armed yet).
                            HostMessage::Duty { .. } if !streaming => {}
                            HostMessage::Duty { seq: s, duty: d } => {
                                duty = f64::from(d.clamp(-protocol::DUTY_FULL_SCALE, protocol::DUTY_FULL_SCALE))
                                    / f64::from(protocol::DUTY_FULL_SCALE);
                                motor_on = true;
                                watchdog_tripped = false;
                                last_command_tick = ticks;
                                ack_seq = s;
                            }
                            HostMessage::Stop { seq: s } => {
                                if motor_on {
                                    // Received after tick `ticks`: the next tick already
                                    // runs with the bridge off.
                                    motor_off_at_tick = Some(ticks);
                                }
                                motor_on = false;
                                duty = 0.0;
                                last_command_tick = ticks;
                                ack_seq = s;
                            }
                        }
                    }
                    if got_any {
                        // Show the bridge state at once, not only at the next tick: a host
                        // that stops the motor and then closes the link must see it off.
                        let mut sh = self.handle.lock();
                        sh.view.motor_on = motor_on;
                        sh.view.duty = if motor_on { duty } else { 0.0 };
                        sh.view.motor_off_at_tick = motor_off_at_tick;
                        sh.view.commands_received = commands_received;
                    }
                }
                () = std::future::ready(()), if tick_due => {
                    tick_due = false;
                    let (pf, lf) = {
                        let s = self.handle.lock();
                        (s.plant_faults.clone(), s.link_faults.clone())
                    };
                    self.plant.faults = pf;
                    let period = 1.0 / f64::from(tick_hz);
                    ticks += 1;
                    if motor_on && ticks.saturating_sub(last_command_tick) > watchdog_ticks {
                        motor_on = false;
                        watchdog_tripped = true;
                        motor_off_at_tick = Some(ticks);
                    }
                    self.plant.step(if motor_on { duty } else { 0.0 }, period);
                    let count = self.plant.encoder_count();
                    {
                        let mut s = self.handle.lock();
                        s.view = BoardView {
                            position_mm: self.plant.position_mm(),
                            velocity_mm_s: self.plant.velocity_mm_s(),
                            count,
                            duty: if motor_on { duty } else { 0.0 },
                            motor_on,
                            watchdog_tripped,
                            ticks,
                            frames_sent,
                            commands_received,
                            motor_off_at_tick,
                        };
                    }
                    if !streaming || lf.cut {
                        continue;
                    }
                    let this_seq = seq;
                    seq = seq.wrapping_add(1);
                    if rng.chance(lf.drop_probability) {
                        continue;
                    }
                    let mut in_bits = 0u8;
                    if self.plant.home_switch() {
                        in_bits |= inputs::HOME;
                    }
                    if self.plant.index_pulse() {
                        in_bits |= inputs::INDEX;
                    }
                    let mut st = 0u8;
                    if motor_on {
                        st |= status::MOTOR_ON;
                    }
                    if watchdog_tripped {
                        st |= status::WATCHDOG_TRIPPED;
                    }
                    let board_time_us = (ticks * 1_000_000 / u64::from(tick_hz)) as u32;
                    let frame = BoardMessage::Telemetry(Telemetry {
                        seq: this_seq,
                        board_time_us,
                        // The wire count is 32 bits and wraps; the host unwraps it.
                        count: count as i32,
                        inputs: in_bits,
                        status: st,
                        ack_seq,
                    });
                    tx.clear();
                    protocol::write_frame(&frame, &mut tx);
                    if rng.chance(lf.corrupt_probability) && tx.len() > 2 {
                        let bit = (rng.next() % ((tx.len() as u64 - 1) * 8)) as usize;
                        tx[bit / 8] ^= 1 << (bit % 8);
                        // Keep the delimiter out of the body so only this frame is hit.
                        if tx[bit / 8] == 0 {
                            tx[bit / 8] = 0x55;
                        }
                    }
                    // A UART drains its FIFO within a fraction of a tick; when nobody reads
                    // and the buffer stays full, the frame (or its tail) is lost and the host
                    // resyncs. Waiting a little (not at all would also drop frames whenever
                    // the OS reports the device busy for a moment) keeps the tick running.
                    let sent = tokio::time::timeout(TX_PATIENCE, stream.write_all(&tx)).await;
                    if matches!(sent, Ok(Ok(()))) {
                        frames_sent += 1;
                    }
                }
                _ = interval.tick(), if !tick_due => {
                    tick_due = true;
                    read_this_tick = false;
                }
                () = tokio::time::sleep_until(retry_read_at), if host_absent => {
                    host_absent = false;
                }
            }
        }
    }
}

/// Writes what the stream takes right now; true if the whole frame went out.
fn send_without_waiting<S: BoardStream>(stream: &mut S, bytes: &[u8]) -> bool {
    use futures::FutureExt;
    let mut done = 0;
    while done < bytes.len() {
        match stream.write(&bytes[done..]).now_or_never() {
            Some(Ok(n)) if n > 0 => done += n,
            _ => return false,
        }
    }
    true
}

fn make_interval(tick_hz: u16) -> tokio::time::Interval {
    let period = Duration::from_nanos(1_000_000_000 / u64::from(tick_hz.max(1)));
    let mut i = tokio::time::interval(period);
    // Real firmware never skips a tick; when the host is late we catch up in a burst so that
    // the board's rate stays right on average.
    i.set_missed_tick_behavior(MissedTickBehavior::Burst);
    i
}

/// A tiny deterministic generator for fault injection; a seeded run repeats exactly.
/// (SplitMix64, Steele, Lea and Flood, "Fast splittable pseudorandom number generators",
/// OOPSLA 2014; constants from memory.)
struct SplitMix64(u64);

impl SplitMix64 {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    fn chance(&mut self, p: f64) -> bool {
        p > 0.0 && (self.next() >> 11) as f64 / (1u64 << 53) as f64 <= p
    }
}

/// Spawns a simulated board on an in-process duplex link and returns the host's end.
///
/// The duplex buffer is about the size of a PTY's, so backpressure looks the same.
pub fn spawn_in_process(
    params: &PlantParams,
    faults: &SimFaults,
    seed: u64,
) -> (tokio::io::DuplexStream, SimBoardHandle) {
    let (host, board_end) = tokio::io::duplex(16 * 1024);
    let board = SimBoard::new(params, faults, seed);
    let handle = board.handle();
    tokio::spawn(board.run(board_end));
    (host, handle)
}
