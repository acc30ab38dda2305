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

use tokio::io::AsyncWriteExt;

use tokio::time::MissedTickBehavior;

use crate::config::{PlantParams, SimFaults};
use crate::link::BoardStream;
use crate::protocol::{
    self, features, inputs, status, BoardMessage, Capabilities, FrameDecoder, HostMessage,
    Telemetry,
};
use crate::sim::plant::{Plant, PlantFaults};

/// Tick rate the simulated board runs at before the host configures it, Hz.
const POWER_UP_TICK_HZ: u16 = 1000;
/// Longest a frame waits for room in the link before it is dropped.
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
    /// Bursty loss: every `burst_every_ms` the link goes dark both ways for `burst_ms` (a hub
    /// resetting, a loose contact, a host that stalls). 0 = off. The board keeps ticking.
    pub burst_ms: u32,
    /// Period of the bursts, ms (from the board's power-up).
    pub burst_every_ms: u32,
    /// Host jitter: every host message takes effect this much later at the board, ms.
    pub reply_delay_ms: u32,
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
    /// The driver stage reports a fault (docs/protocol.md section 9, rule 7).
    driver_fault: bool,
    /// A one-off blackout still to run, ms (see [`SimBoardHandle::black_out`]).
    blackout_ms: u32,
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
    /// Whether the watchdog has fired (the WATCHDOG_TRIPPED bit).
    pub watchdog_tripped: bool,
    /// Whether the driver stage reports a fault (the DRIVER_FAULT bit).
    pub driver_fault: bool,
    /// Whether the board streams telemetry (a valid Configure since power-up or the last
    /// Hello).
    pub streaming: bool,
    /// Board ticks since power-up.
    pub ticks: u64,
    /// Telemetry frames sent.
    pub frames_sent: u64,
    /// Valid host frames received.
    pub commands_received: u64,
    /// Tick count when the bridge last went from on to off (Stop, or watchdog).
    pub motor_off_at_tick: Option<u64>,
    /// What the board counted about the host's replies, as firmware would.
    pub replies: ReplyCounters,
}

/// The board's account of how the host kept up, in board ticks: what `sim --pty` reports
/// when it stops. A reply is a valid Duty or Stop received while streaming; its `seq` names
/// the telemetry frame it answers (docs/protocol.md section 8).
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize)]
pub struct ReplyCounters {
    /// Host replies received.
    pub host_replies: u64,
    /// Replies that were not there by the tick after the frame they answer (the board reads
    /// once per tick, so "on time" means within one tick period).
    pub late_replies: u64,
    /// Times the watchdog switched the motor off.
    pub watchdog_trips: u64,
    /// Longest board time between two replies from the same host, µs (a new host's Hello
    /// starts afresh, so the pause between two programs does not count).
    pub longest_reply_gap_us: u64,
    /// Ticks run less than half a period after the one before: the simulator catching up
    /// after it fell behind (its own share of the machine, not the host's). The host had
    /// less than a tick to answer the frames before these, so when this is not 0 some late
    /// replies may be the simulator's doing. Firmware on a hardware timer has none.
    pub rushed_ticks: u64,
    /// Longest time between two of the simulator's own ticks, µs: its longest stall. A reply
    /// gap or watchdog trip no longer than this may be the simulator's, not the host's.
    pub longest_tick_gap_us: u64,
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

    /// Cuts the link both ways for `ms` from the board's next tick, then restores it; the
    /// board keeps ticking, counting sequence numbers and running its watchdog meanwhile.
    pub fn black_out(&self, ms: u32) {
        self.lock().blackout_ms = ms;
    }

    /// Makes the driver stage report a fault (true) or clear it (false): while set, the board
    /// keeps its motor off, refuses to drive it and sends the DRIVER_FAULT bit.
    pub fn set_driver_fault(&self, on: bool) {
        self.lock().driver_fault = on;
    }

    /// Whether a driver fault is injected.
    pub fn driver_fault(&self) -> bool {
        self.lock().driver_fault
    }

    /// Current plant faults.
    pub fn plant_faults(&self) -> PlantFaults {
        self.lock().plant_faults.clone()
    }

    /// Current link faults (for drills that change one of them).
    pub fn link_faults(&self) -> LinkFaults {
        self.lock().link_faults.clone()
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
    clock: Option<TickClock>,
}

/// Ticks from a clock outside the runtime (see [`tick_clock`]): a count that a thread of its
/// own advances at `hz`, read by every board that runs at that rate.
#[derive(Debug, Clone)]
pub struct TickClock {
    hz: u16,
    ticks: tokio::sync::watch::Receiver<u64>,
}

/// Starts a thread that counts ticks at `hz` on the operating system's fine-grained sleep,
/// for boards served in real time (`sim --pty`).
///
/// tokio's timers have 1 ms granularity: a 1 kHz interval there runs uneven periods and
/// catches up in pairs, a third of the time on a busy 2-core machine, so a host sees two
/// frames at once far more often than from a board on a hardware timer. A thread sleeping
/// to absolute deadlines keeps the ticks within the scheduler's wake-up jitter instead. The
/// thread ends when every board holding the clock has gone.
pub fn tick_clock(hz: u16) -> std::io::Result<TickClock> {
    let (tx, ticks) = tokio::sync::watch::channel(0u64);
    let period = Duration::from_nanos(1_000_000_000 / u64::from(hz.max(1)));
    std::thread::Builder::new().name("sim-tick-clock".to_owned()).spawn(move || {
        let mut due = std::time::Instant::now();
        let mut n: u64 = 0;
        loop {
            n += 1;
            due += period;
            let now = std::time::Instant::now();
            if due > now {
                std::thread::sleep(due - now);
            }
            // Boards that fell behind see the count jump and catch up (as with Burst below).
            if tx.send(n).is_err() {
                return;
            }
        }
    })?;
    Ok(TickClock { hz, ticks })
}

impl TickClock {
    /// The clock's rate, Hz.
    pub fn hz(&self) -> u16 {
        self.hz
    }
}

/// Where a running board takes its ticks from.
enum Ticker {
    /// The runtime's timer (exact under `tokio::time::pause`).
    Timer(tokio::time::Interval),
    /// An outside clock; `pending` ticks are owed after the count jumped.
    Clock { clock: TickClock, seen: u64, pending: u64 },
}

impl Ticker {
    fn new(clock: Option<&TickClock>, tick_hz: u16) -> Self {
        match clock {
            Some(c) if c.hz == tick_hz => {
                let seen = *c.ticks.borrow();
                Self::Clock { clock: c.clone(), seen, pending: 0 }
            }
            _ => Self::Timer(make_interval(tick_hz)),
        }
    }

    fn period(&self, tick_hz: u16) -> Duration {
        match self {
            Self::Timer(i) => i.period(),
            Self::Clock { .. } => Duration::from_nanos(1_000_000_000 / u64::from(tick_hz.max(1))),
        }
    }

    /// Waits for the next tick; false when the outside clock has stopped.
    async fn tick(&mut self) -> bool {
        match self {
            Self::Timer(i) => {
                i.tick().await;
                true
            }
            Self::Clock { clock, seen, pending } => {
                if *pending == 0 {
                    if clock.ticks.changed().await.is_err() {
                        return false;
                    }
                    let now = *clock.ticks.borrow_and_update();
                    *pending = now.saturating_sub(*seen);
                    *seen = now;
                }
                *pending = pending.saturating_sub(1);
                true
            }
        }
    }
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
            burst_ms: faults.burst_ms,
            burst_every_ms: faults.burst_every_ms,
            reply_delay_ms: faults.reply_delay_ms,
        };
        let mut plant = Plant::new(params);
        plant.faults = plant_faults.clone();
        let view = BoardView {
            position_mm: plant.position_mm(),
            count: plant.encoder_count(),
            ..BoardView::default()
        };
        let shared = Arc::new(Mutex::new(Shared {
            plant_faults,
            link_faults,
            driver_fault: false,
            blackout_ms: 0,
            view,
        }));
        Self {
            plant,
            plant_params: params.clone(),
            handle: SimBoardHandle { shared },
            seed,
            persistent: false,
            clock: None,
        }
    }

    /// Take ticks from `clock` whenever the board runs at the clock's rate (its own timer
    /// otherwise, e.g. after a Configure to another rate).
    pub fn with_clock(mut self, clock: TickClock) -> Self {
        self.clock = Some(clock);
        self
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
    /// Mirrors the board contract in docs/protocol.md (sections 6, 7 and 9): motor off and a
    /// lone delimiter at power-up; Hello stops streaming, switches the motor off and is
    /// answered with capabilities; a valid Configure (an out-of-range one is ignored) starts
    /// telemetry every tick; each valid Duty applies at the next tick; motor off on Stop; the
    /// watchdog fires whenever no Duty or Stop came in time while streaming (motor on or not)
    /// and its bit stays until the next valid Duty; a driver fault keeps the motor off.
    ///
    /// Like a firmware main loop, the board does everything at its tick: read what the host
    /// sent since the last tick, then sample, step and send. One wake-up per tick (not one
    /// per host message) keeps eight boards at 1 kHz cheap enough to share a small computer
    /// with the host they are testing.
    pub async fn run<S: BoardStream>(mut self, mut stream: S) {
        let mut b = BoardState::new(self.seed, self.plant_params.home_switch_mm.is_some());
        let mut ticker = Ticker::new(self.clock.as_ref(), b.tick_hz);
        let mut rx = vec![0u8; 4096];
        let mut retry_read_at: Option<tokio::time::Instant> = None;
        let mut last_tick_at: Option<tokio::time::Instant> = None;
        // docs/protocol.md section 3: a lone delimiter at power-up flushes the host's receiver.
        send(&mut stream, &[0]).await;
        loop {
            if !ticker.tick().await {
                b.motor_off();
                self.publish(&b);
                return;
            }
            // 1. What the host sent since the last tick.
            let now = tokio::time::Instant::now();
            if let Some(t) = last_tick_at {
                let r = &mut b.replies;
                if (now - t) * 2 < ticker.period(b.tick_hz) {
                    r.rushed_ticks += 1;
                }
                let gap = u64::try_from((now - t).as_micros()).unwrap_or(u64::MAX);
                r.longest_tick_gap_us = r.longest_tick_gap_us.max(gap);
            }
            last_tick_at = Some(now);
            if retry_read_at.is_none_or(|t| now >= t) {
                retry_read_at = None;
                loop {
                    match read_now(&mut stream, &mut rx).await {
                        None => break,
                        Some(Ok(n)) if n > 0 => {
                            if self.handle.lock().link_faults.cut || b.dark_ticks > 0 {
                                continue;
                            }
                            b.decoder.extend(&rx[..n]);
                            let delay =
                                b.ms_to_ticks(self.handle.lock().link_faults.reply_delay_ms);
                            while let Some(msg) = b.decoder.next_message::<HostMessage>() {
                                // Bad frames are dropped and, per the contract, never feed
                                // the watchdog.
                                let Ok(msg) = msg else { continue };
                                b.inbox.push_back((b.ticks + delay, msg));
                            }
                        }
                        Some(_) if self.persistent => {
                            // A PTY with no host on the other side reads as an error; look
                            // again shortly, ticking on meanwhile.
                            retry_read_at = Some(now + Duration::from_millis(50));
                            break;
                        }
                        Some(_) => {
                            // The host hung up: a real board would stop on its watchdog.
                            b.motor_off();
                            self.publish(&b);
                            return;
                        }
                    }
                }
            }
            b.driver_fault = self.handle.lock().driver_fault;
            // Host messages take effect when due (at once unless a reply delay is injected).
            while b.inbox.front().is_some_and(|(due, _)| *due <= b.ticks) {
                let Some((_, msg)) = b.inbox.pop_front() else { break };
                if let Some(reply) = b.on_host(msg) {
                    send(&mut stream, &reply).await;
                }
            }
            if b.rate_changed {
                b.rate_changed = false;
                ticker = Ticker::new(self.clock.as_ref(), b.tick_hz);
            }
            // 2. The tick itself.
            let (pf, lf, blackout_ms) = {
                let mut s = self.handle.lock();
                (s.plant_faults.clone(), s.link_faults.clone(), std::mem::take(&mut s.blackout_ms))
            };
            self.plant.faults = pf;
            b.ticks += 1;
            // Link blackouts: a one-off, and the periodic bursts.
            if blackout_ms > 0 {
                b.dark_ticks = b.dark_ticks.max(b.ms_to_ticks(blackout_ms));
            }
            if lf.burst_ms > 0 && lf.burst_every_ms > 0 {
                let every = b.ms_to_ticks(lf.burst_every_ms).max(1);
                if b.ticks.is_multiple_of(every) {
                    b.dark_ticks = b.dark_ticks.max(b.ms_to_ticks(lf.burst_ms));
                }
            }
            let dark = lf.cut || b.dark_ticks > 0;
            b.dark_ticks = b.dark_ticks.saturating_sub(1);
            // The watchdog runs while streaming whether or not the motor is on (a host that
            // stops answering an idle axis trips it too); `watchdog_trips` counts the times it
            // switched a running motor off.
            if b.streaming && b.ticks.saturating_sub(b.last_command_tick) > b.watchdog_ticks {
                if b.motor_on {
                    b.replies.watchdog_trips += 1;
                    b.motor_off_at_tick = Some(b.ticks);
                }
                b.motor_on = false;
                b.watchdog_tripped = true;
            }
            if b.driver_fault && b.motor_on {
                b.motor_on = false;
                b.motor_off_at_tick = Some(b.ticks);
            }
            let period = 1.0 / f64::from(b.tick_hz);
            let before_mm = self.plant.position_mm();
            self.plant.step(if b.motor_on { b.duty } else { 0.0 }, period);
            if let Some(mm) = self.plant.faults.jam_at_mm {
                self.arm_jam_at(mm, before_mm);
            }
            self.publish(&b);
            if !b.streaming {
                continue;
            }
            // A frame is made every tick whether or not the link carries it: during a cut
            // the sequence number runs on, so the host sees the gap for what it is.
            let this_seq = b.seq;
            b.seq = b.seq.wrapping_add(1);
            if dark || b.rng.chance(lf.drop_probability) {
                continue;
            }
            let frame = b.telemetry(this_seq, &self.plant);
            b.tx.clear();
            protocol::write_frame(&frame, &mut b.tx);
            if b.rng.chance(lf.corrupt_probability) && b.tx.len() > 2 {
                let bit = (b.rng.next() % ((b.tx.len() as u64 - 1) * 8)) as usize;
                b.tx[bit / 8] ^= 1 << (bit % 8);
                // Keep the delimiter out of the body so only this frame is hit.
                if b.tx[bit / 8] == 0 {
                    b.tx[bit / 8] = 0x55;
                }
            }
            if send(&mut stream, &b.tx).await {
                b.frames_sent += 1;
            }
        }
    }

    /// A jam armed at `mm` (the carriage moved from `before_mm` this tick) becomes a jam
    /// where the carriage is once it reaches or passes `mm`.
    fn arm_jam_at(&self, mm: f64, before_mm: f64) {
        let now = self.plant.position_mm();
        let passed = (before_mm - mm) * (now - mm) < 0.0;
        if passed || (now - mm).abs() < 0.05 {
            let mut s = self.handle.lock();
            // Unless it was changed meanwhile.
            if s.plant_faults.jam_at_mm == Some(mm) {
                s.plant_faults.jam_at_mm = None;
                s.plant_faults.blocked = true;
            }
        }
    }

    fn publish(&self, b: &BoardState) {
        let view = BoardView {
            position_mm: self.plant.position_mm(),
            velocity_mm_s: self.plant.velocity_mm_s(),
            count: self.plant.encoder_count(),
            duty: if b.motor_on { b.duty } else { 0.0 },
            motor_on: b.motor_on,
            watchdog_tripped: b.watchdog_tripped,
            driver_fault: b.driver_fault,
            streaming: b.streaming,
            ticks: b.ticks,
            frames_sent: b.frames_sent,
            commands_received: b.commands_received,
            motor_off_at_tick: b.motor_off_at_tick,
            replies: b.replies,
        };
        self.handle.lock().view = view;
    }
}

/// The firmware's variables.
struct BoardState {
    tick_hz: u16,
    rate_changed: bool,
    watchdog_ticks: u64,
    streaming: bool,
    decoder: FrameDecoder,
    tx: Vec<u8>,
    rng: SplitMix64,
    ticks: u64,
    seq: u16,
    duty: f64,
    motor_on: bool,
    watchdog_tripped: bool,
    /// The driver stage reports a fault (read from the handle at every tick).
    driver_fault: bool,
    last_command_tick: u64,
    ack_seq: u16,
    commands_received: u64,
    frames_sent: u64,
    motor_off_at_tick: Option<u64>,
    features: u16,
    /// Host messages received, with the tick at which each takes effect.
    inbox: std::collections::VecDeque<(u64, HostMessage)>,
    /// Ticks the link stays dark (injected blackout).
    dark_ticks: u64,
    replies: ReplyCounters,
    /// Board time of the last reply from the current host, µs, for the longest gap.
    last_reply_us: Option<u64>,
}

impl BoardState {
    fn new(seed: u64, home_input: bool) -> Self {
        Self {
            tick_hz: POWER_UP_TICK_HZ,
            rate_changed: false,
            watchdog_ticks: 50,
            streaming: false,
            decoder: FrameDecoder::new(),
            tx: Vec::with_capacity(256),
            rng: SplitMix64(seed),
            ticks: 0,
            seq: 0,
            duty: 0.0,
            motor_on: false,
            watchdog_tripped: false,
            driver_fault: false,
            last_command_tick: 0,
            ack_seq: 0,
            commands_received: 0,
            frames_sent: 0,
            motor_off_at_tick: None,
            features: if home_input {
                features::INDEX_PULSE | features::HOME_INPUT
            } else {
                features::INDEX_PULSE
            },
            inbox: std::collections::VecDeque::new(),
            dark_ticks: 0,
            replies: ReplyCounters::default(),
            last_reply_us: None,
        }
    }

    /// Whole ticks (rounded up) in `ms` at the present rate.
    fn ms_to_ticks(&self, ms: u32) -> u64 {
        (u64::from(ms) * u64::from(self.tick_hz)).div_ceil(1000)
    }

    /// Counts a Duty or Stop answering telemetry `answered` (its echoed seq), read at the
    /// start of tick `ticks + 1`, i.e. before frame `self.seq` goes out.
    fn count_reply(&mut self, answered: u16) {
        let now_us = self.board_time_us();
        let r = &mut self.replies;
        r.host_replies += 1;
        // The frame read at this tick answers `self.seq - 1` when on time; wrapping seq
        // arithmetic as in docs/protocol.md section 8.
        if self.seq.wrapping_sub(answered) > 1 {
            r.late_replies += 1;
        }
        if let Some(prev) = self.last_reply_us {
            r.longest_reply_gap_us = r.longest_reply_gap_us.max(now_us.saturating_sub(prev));
        }
        self.last_reply_us = Some(now_us);
    }

    /// Board time since power-up, µs (ticks × period; continuous across rate changes).
    fn board_time_us(&self) -> u64 {
        self.ticks * 1_000_000 / u64::from(self.tick_hz)
    }

    fn motor_off(&mut self) {
        if self.motor_on {
            // Received after tick `ticks`: the next tick already runs with the bridge off.
            self.motor_off_at_tick = Some(self.ticks);
        }
        self.motor_on = false;
        self.duty = 0.0;
    }

    /// Applies one valid host message; returns bytes to send back, if any.
    fn on_host(&mut self, msg: HostMessage) -> Option<Vec<u8>> {
        self.commands_received += 1;
        match msg {
            HostMessage::Hello => {
                // Contract: Hello switches the motor off first and stops streaming until the
                // next Configure.
                self.motor_off();
                self.streaming = false;
                self.last_reply_us = None;
                let caps = BoardMessage::Hello(Capabilities {
                    protocol_version: protocol::PROTOCOL_VERSION,
                    max_tick_hz: MAX_TICK_HZ,
                    features: self.features,
                    board_name: "servotty-sim".to_owned(),
                });
                let mut out = Vec::new();
                protocol::write_frame(&caps, &mut out);
                Some(out)
            }
            // Contract: an out-of-range Configure is ignored; the board stays as it was.
            HostMessage::Configure { tick_hz, watchdog_ms }
                if tick_hz == 0 || tick_hz > MAX_TICK_HZ || watchdog_ms == 0 =>
            {
                None
            }
            HostMessage::Configure { tick_hz: hz, watchdog_ms } => {
                if hz != self.tick_hz {
                    // Board time stays continuous across a rate change.
                    self.ticks = self.ticks * u64::from(hz) / u64::from(self.tick_hz);
                    self.tick_hz = hz;
                    self.rate_changed = true;
                }
                self.watchdog_ticks =
                    (u64::from(watchdog_ms) * u64::from(self.tick_hz)).div_ceil(1000).max(1);
                // Contract: Configure starts from motor off with fresh sequence numbers.
                self.motor_off();
                self.seq = 0;
                self.ack_seq = 0;
                self.watchdog_tripped = false;
                // The watchdog is armed from now.
                self.last_command_tick = self.ticks;
                self.streaming = true;
                None
            }
            // Contract: a Duty before Configure is ignored (no watchdog is armed yet).
            HostMessage::Duty { .. } if !self.streaming => None,
            HostMessage::Duty { seq, duty } => {
                self.count_reply(seq);
                self.watchdog_tripped = false;
                self.last_command_tick = self.ticks;
                self.ack_seq = seq;
                if self.driver_fault {
                    // Contract: a Duty does not switch a faulted driver on.
                    self.motor_off();
                    return None;
                }
                let full = protocol::DUTY_FULL_SCALE;
                self.duty = f64::from(duty.clamp(-full, full)) / f64::from(full);
                self.motor_on = true;
                None
            }
            HostMessage::Stop { seq } => {
                if self.streaming {
                    self.count_reply(seq);
                }
                self.motor_off();
                self.last_command_tick = self.ticks;
                self.ack_seq = seq;
                None
            }
        }
    }

    fn telemetry(&self, seq: u16, plant: &Plant) -> BoardMessage {
        let mut in_bits = 0u8;
        if plant.home_switch() {
            in_bits |= inputs::HOME;
        }
        if plant.index_pulse() {
            in_bits |= inputs::INDEX;
        }
        let mut st = 0u8;
        if self.motor_on {
            st |= status::MOTOR_ON;
        }
        if self.watchdog_tripped {
            st |= status::WATCHDOG_TRIPPED;
        }
        if self.driver_fault {
            st |= status::DRIVER_FAULT;
        }
        BoardMessage::Telemetry(Telemetry {
            seq,
            board_time_us: self.board_time_us() as u32,
            // The wire count is 32 bits and wraps; the host unwraps it.
            count: plant.encoder_count() as i32,
            inputs: in_bits,
            status: st,
            ack_seq: self.ack_seq,
        })
    }
}

/// Sends a frame; true if it all went out.
///
/// A UART drains its FIFO within a fraction of a tick; when nobody reads and the buffer stays
/// full, the frame (or its tail) is lost and the host resyncs. Waiting a moment (not at all
/// would drop frames whenever the OS reports the device busy for an instant) keeps the tick
/// running either way.
async fn send<S: BoardStream>(stream: &mut S, bytes: &[u8]) -> bool {
    matches!(tokio::time::timeout(TX_PATIENCE, stream.write_all(bytes)).await, Ok(Ok(())))
}

/// Reads what has arrived, without waiting: None when nothing is there.
///
/// Polls with the task's own waker: a readiness event then merely wakes the task, which goes
/// back to waiting for its tick without a system call.
async fn read_now<S: BoardStream>(
    stream: &mut S,
    buf: &mut [u8],
) -> Option<std::io::Result<usize>> {
    use std::task::Poll;
    std::future::poll_fn(|cx| {
        let mut rb = tokio::io::ReadBuf::new(buf);
        match std::pin::Pin::new(&mut *stream).poll_read(cx, &mut rb) {
            Poll::Ready(Ok(())) => Poll::Ready(Some(Ok(rb.filled().len()))),
            Poll::Ready(Err(e)) => Poll::Ready(Some(Err(e))),
            Poll::Pending => Poll::Ready(None),
        }
    })
    .await
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

#[cfg(test)]
mod tests {
    use tokio::io::{AsyncReadExt, AsyncWriteExt};

    use super::*;
    use crate::config::MachineConfig;

    /// A host that answers frames by a script, under simulated time.
    struct ScriptedHost {
        link: tokio::io::DuplexStream,
        decoder: FrameDecoder,
        rx: Vec<u8>,
        tx: Vec<u8>,
    }

    impl ScriptedHost {
        async fn send(&mut self, msg: HostMessage) {
            self.tx.clear();
            protocol::write_frame(&msg, &mut self.tx);
            self.link.write_all(&self.tx).await.expect("write");
        }

        async fn next_telemetry(&mut self) -> Telemetry {
            loop {
                while let Some(m) = self.decoder.next_message::<BoardMessage>() {
                    if let Ok(BoardMessage::Telemetry(t)) = m {
                        return t;
                    }
                }
                let n = self.link.read(&mut self.rx).await.expect("read");
                assert!(n > 0, "board closed");
                self.decoder.extend(&self.rx[..n]);
            }
        }
    }

    #[tokio::test(start_paused = true)]
    async fn the_board_counts_replies_late_replies_watchdog_trips_and_the_longest_gap() {
        let cfg = MachineConfig::demo().expect("demo");
        let crate::config::TransportConfig::Sim(sim) = &cfg.axes[0].transport else {
            panic!("the demo is simulated")
        };
        let (link, board) = spawn_in_process(&sim.plant, &SimFaults::default(), 1);
        let mut host =
            ScriptedHost { link, decoder: FrameDecoder::new(), rx: vec![0; 1024], tx: Vec::new() };
        host.send(HostMessage::Hello).await;
        host.send(HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }).await;
        // 100 frames answered at once, 60 not answered (longer than the 50 ms watchdog), 40
        // answered one frame behind (each reply names the frame before the newest).
        for i in 0..200u16 {
            let t = host.next_telemetry().await;
            assert_eq!(t.seq, i);
            match i {
                0..100 => host.send(HostMessage::Duty { seq: t.seq, duty: 0 }).await,
                100..160 => {}
                _ => host.send(HostMessage::Duty { seq: t.seq - 1, duty: 0 }).await,
            }
        }
        // One more tick reads the last reply.
        host.next_telemetry().await;
        let r = board.view().replies;
        assert_eq!(r.host_replies, 140, "{r:?}");
        assert_eq!(r.late_replies, 40, "{r:?}");
        assert_eq!(r.watchdog_trips, 1, "{r:?}");
        // Reply to frame 99 read at the tick of frame 100, the next one (to frame 159, sent
        // after frame 160) at the tick of frame 161: 61 ticks of 1 ms.
        assert_eq!(r.longest_reply_gap_us, 61_000, "{r:?}");
        assert_eq!(r.rushed_ticks, 0, "simulated time never runs late: {r:?}");
        assert_eq!(r.longest_tick_gap_us, 1_000, "{r:?}");
    }

    fn demo_board(faults: &SimFaults) -> (ScriptedHost, SimBoardHandle) {
        let cfg = MachineConfig::demo().expect("demo");
        let crate::config::TransportConfig::Sim(sim) = &cfg.axes[0].transport else {
            panic!("the demo is simulated")
        };
        let (link, board) = spawn_in_process(&sim.plant, faults, 1);
        (
            ScriptedHost { link, decoder: FrameDecoder::new(), rx: vec![0; 1024], tx: Vec::new() },
            board,
        )
    }

    impl ScriptedHost {
        /// Telemetry within `ms` of simulated time, or None.
        async fn telemetry_within(&mut self, ms: u64) -> Option<Telemetry> {
            tokio::time::timeout(Duration::from_millis(ms), self.next_telemetry()).await.ok()
        }
    }

    /// docs/protocol.md sections 6.1, 6.2 and 9 (rules 1, 2, 3 and 6), read against what the
    /// board does.
    #[tokio::test(start_paused = true)]
    async fn the_board_follows_the_session_and_watchdog_contract() {
        let (mut host, board) = demo_board(&SimFaults::default());
        // Rule 1: no telemetry before Configure.
        assert!(host.telemetry_within(20).await.is_none());
        // 6.2: an out-of-range Configure is ignored.
        for bad in [
            HostMessage::Configure { tick_hz: 0, watchdog_ms: 50 },
            HostMessage::Configure { tick_hz: MAX_TICK_HZ + 1, watchdog_ms: 50 },
            HostMessage::Configure { tick_hz: 1000, watchdog_ms: 0 },
        ] {
            host.send(bad).await;
            assert!(host.telemetry_within(20).await.is_none(), "{bad:?} started streaming");
        }
        host.send(HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }).await;
        let t = host.next_telemetry().await;
        assert_eq!((t.seq, t.status), (0, 0));
        // Rule 2: the watchdog fires while streaming even with the motor off, and (rule 3)
        // a Stop leaves the bit as it is.
        let mut tripped = None;
        for _ in 0..100 {
            let t = host.next_telemetry().await;
            if t.status & status::WATCHDOG_TRIPPED != 0 {
                tripped = Some(t.seq);
                break;
            }
        }
        let seq = tripped.expect("the watchdog fired with the motor off");
        assert!((50..=52).contains(&seq), "fired at frame {seq}");
        host.send(HostMessage::Stop { seq }).await;
        host.next_telemetry().await;
        let t = host.next_telemetry().await;
        assert_ne!(t.status & status::WATCHDOG_TRIPPED, 0, "Stop cleared the bit");
        // A Duty clears it and drives.
        host.send(HostMessage::Duty { seq: t.seq, duty: 1000 }).await;
        host.next_telemetry().await;
        let t = host.next_telemetry().await;
        assert_eq!(t.status, status::MOTOR_ON, "{t:?}");
        assert_eq!(board.view().replies.watchdog_trips, 0, "no running motor was cut");
        // 6.1 and rule 6: Hello switches the motor off and stops streaming.
        host.send(HostMessage::Hello).await;
        let mut hello = false;
        let quiet = tokio::time::timeout(Duration::from_millis(30), async {
            loop {
                let n = host.link.read(&mut host.rx).await.expect("read");
                host.decoder.extend(&host.rx[..n]);
                while let Some(m) = host.decoder.next_message::<BoardMessage>() {
                    match m {
                        Ok(BoardMessage::Hello(_)) => hello = true,
                        // Frames already on their way before the Hello are fine.
                        Ok(BoardMessage::Telemetry(_)) if !hello => {}
                        other => panic!("after Hello: {other:?}"),
                    }
                }
            }
        })
        .await;
        assert!(quiet.is_err() && hello, "the board answered Hello and fell silent");
        let v = board.view();
        assert!(!v.motor_on && !v.streaming, "{v:?}");
    }

    /// docs/protocol.md section 9, rule 7: while the driver reports a fault the motor is off,
    /// DRIVER_FAULT is set and a Duty does not switch it on.
    #[tokio::test(start_paused = true)]
    async fn a_driver_fault_keeps_the_motor_off_and_says_so() {
        let (mut host, board) = demo_board(&SimFaults::default());
        host.send(HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }).await;
        for _ in 0..5 {
            let t = host.next_telemetry().await;
            host.send(HostMessage::Duty { seq: t.seq, duty: 2000 }).await;
        }
        assert!(board.view().motor_on);
        board.set_driver_fault(true);
        for _ in 0..5 {
            let t = host.next_telemetry().await;
            host.send(HostMessage::Duty { seq: t.seq, duty: 2000 }).await;
        }
        let t = host.next_telemetry().await;
        assert_eq!(t.status, status::DRIVER_FAULT, "{t:?}");
        assert!(!board.view().motor_on && board.view().driver_fault);
        board.set_driver_fault(false);
        host.send(HostMessage::Duty { seq: t.seq, duty: 2000 }).await;
        host.next_telemetry().await;
        assert_eq!(host.next_telemetry().await.status, status::MOTOR_ON);
    }

    /// A jam armed at a rail position springs when the carriage gets there, not before.
    #[tokio::test(start_paused = true)]
    async fn a_jam_armed_at_a_position_springs_there() {
        let (mut host, board) = demo_board(&SimFaults::default());
        let start = board.view().position_mm;
        let at = start + 20.0;
        board.set_plant_faults(PlantFaults { jam_at_mm: Some(at), ..PlantFaults::default() });
        host.send(HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }).await;
        for _ in 0..3000 {
            let t = host.next_telemetry().await;
            host.send(HostMessage::Duty { seq: t.seq, duty: 5000 }).await;
            if board.plant_faults().blocked {
                break;
            }
            assert!(board.view().position_mm < at + 0.5, "passed the jam: {:?}", board.view());
        }
        let pf = board.plant_faults();
        assert!(pf.blocked && pf.jam_at_mm.is_none(), "{pf:?}");
        let p = board.view().position_mm;
        assert!((p - at).abs() < 0.5, "jammed at {p}, armed at {at}");
    }

    /// A sagging supply weakens the motor: half the supply, about half the speed at one duty.
    #[test]
    fn a_sagging_supply_weakens_the_motor() {
        let cfg = MachineConfig::demo().expect("demo");
        let crate::config::TransportConfig::Sim(sim) = &cfg.axes[0].transport else {
            panic!("the demo is simulated")
        };
        let speed = |sag: f64| {
            let mut p = Plant::new(&sim.plant);
            p.faults.supply_sag = sag;
            for _ in 0..300 {
                p.step(0.6, 0.001);
            }
            p.velocity_mm_s()
        };
        let (full, half) = (speed(0.0), speed(0.5));
        assert!(full > 0.0 && half > 0.0 && half < 0.6 * full, "{full} {half}");
    }

    #[tokio::test]
    async fn an_outside_clock_that_jumps_is_caught_up_tick_by_tick() {
        let (tx, ticks) = tokio::sync::watch::channel(0u64);
        let clock = TickClock { hz: 1000, ticks };
        let mut t = Ticker::new(Some(&clock), 1000);
        assert!(matches!(t, Ticker::Clock { .. }));
        // A board that fell three ticks behind runs three ticks at once (as Burst does).
        tx.send(3).expect("receiver");
        for _ in 0..3 {
            let ticked = tokio::time::timeout(Duration::from_secs(5), t.tick()).await;
            assert_eq!(ticked, Ok(true));
        }
        // The fourth waits for the clock.
        let waits = tokio::time::timeout(Duration::from_millis(20), t.tick()).await;
        assert!(waits.is_err());
        drop(tx);
        assert!(!t.tick().await, "a stopped clock ends the board");
        // Another rate falls back to the board's own timer.
        assert!(matches!(Ticker::new(Some(&clock), 500), Ticker::Timer(_)));
    }

    #[test]
    fn the_tick_clock_thread_counts() {
        let clock = tick_clock(1000).expect("thread");
        let t0 = std::time::Instant::now();
        // Real time: poll under a generous deadline, nothing asserted about speed.
        while *clock.ticks.borrow() < 5 {
            assert!(t0.elapsed() < Duration::from_secs(30), "the clock does not tick");
            std::thread::sleep(Duration::from_millis(5));
        }
    }
}
