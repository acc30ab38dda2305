//! The bare host: the least a host can do on protocol v1, as a yardstick for servotty's host.
//!
//! For each `AXIS=PATH` it opens the serial device, says Hello, waits for the board's Hello,
//! sends Configure, and then answers telemetry with a fixed duty (0: the carriage stays where
//! it is) and nothing else: no control law, no snapshots, no supervision. Like servotty it
//! answers once per read, naming the newest frame, and measures turnaround the same way (read
//! returned → reply written) with servotty's own link meter. One current-thread runtime, one
//! task per axis, and one read per readiness: after a read the task waits for the next
//! readiness edge instead of reading again until the device says "would block".
//!
//! ```sh
//! servotty sim --pty --config configs/bench-8-axes.toml > /tmp/ptys &
//! cargo run --release --example bare_host -- --seconds 20 \
//!     $(awk '{printf "%s=%s ", $1, $2}' /tmp/ptys)
//! ```
//!
//! Prints one JSON object: per axis frames, missed, turnaround p50/p99/max (µs), and the
//! process's CPU over the measurement (% of one core). `host_cost` runs it side by side with
//! servotty (docs/performance.md).

use std::io::{Read as _, Write as _};
use std::sync::atomic::{AtomicU8, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use clap::Parser;
use serde::Serialize;
use servotty::engine::link_meter::{LinkMeter, Turnaround};
use servotty::protocol::{self, BoardMessage, FrameDecoder, HostMessage};
use tokio::io::unix::AsyncFd;
use tokio::sync::mpsc;

/// Command line.
#[derive(Parser, Debug)]
#[command(about = "Answer every telemetry frame with a fixed duty; measure the cost")]
struct Args {
    /// Seconds to measure once every axis streams.
    #[arg(long, default_value_t = 20.0)]
    seconds: f64,
    /// Board tick rate to configure, Hz.
    #[arg(long, default_value_t = 1000)]
    tick_hz: u16,
    /// Board watchdog to configure, ms.
    #[arg(long, default_value_t = 50)]
    watchdog_ms: u16,
    /// `AXIS=PATH`, one per axis.
    #[arg(required = true)]
    ports: Vec<String>,
}

/// What one axis measured.
#[derive(Debug, Serialize)]
struct AxisFigures {
    axis: String,
    frames: u64,
    missed: u64,
    bad_frames: u64,
    turnaround_us: Turnaround,
}

/// The whole result, printed as JSON.
#[derive(Debug, Serialize)]
struct Outcome {
    host: &'static str,
    axes: Vec<AxisFigures>,
    cpu_pct: f64,
    wall_s: f64,
}

/// Phases the axis tasks follow (read once per frame: one relaxed atomic load).
const WARMING: u8 = 0;
const MEASURING: u8 = 1;
const FINISHING: u8 = 2;

/// Answer duty, in protocol units: 0 keeps the carriage still with the bridge on.
const DUTY: i16 = 0;

enum Note {
    Streaming,
    Done(AxisFigures),
    Failed(String),
}

fn main() -> std::process::ExitCode {
    let args = Args::parse();
    // One thread, like the board loops servotty runs (and for a fair CPU comparison).
    let rt = match tokio::runtime::Builder::new_current_thread().enable_all().build() {
        Ok(rt) => rt,
        Err(e) => {
            eprintln!("bare_host: cannot start the runtime: {e}");
            return std::process::ExitCode::FAILURE;
        }
    };
    match rt.block_on(run(args)) {
        Ok(out) => {
            println!("{}", serde_json::to_string(&out).unwrap_or_default());
            std::process::ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("bare_host: {e}");
            std::process::ExitCode::FAILURE
        }
    }
}

async fn run(args: Args) -> Result<Outcome, String> {
    let phase = Arc::new(AtomicU8::new(WARMING));
    let (notes, mut inbox) = mpsc::channel(64);
    let n = args.ports.len();
    for spec in &args.ports {
        let (axis, path) =
            spec.split_once('=').ok_or_else(|| format!("{spec}: expected AXIS=PATH"))?;
        let port = open(path).map_err(|e| format!("{axis}: {path}: {e}"))?;
        let (axis, phase, notes) = (axis.to_owned(), phase.clone(), notes.clone());
        let (hz, wd) = (args.tick_hz, args.watchdog_ms);
        tokio::spawn(async move {
            let note = match serve(&axis, port, hz, wd, &phase, &notes).await {
                Ok(f) => Note::Done(f),
                Err(e) => Note::Failed(format!("{axis}: {e}")),
            };
            let _ = notes.send(note).await;
        });
    }
    drop(notes);
    let mut streaming = 0;
    while streaming < n {
        match tokio::time::timeout(Duration::from_secs(5), inbox.recv()).await {
            Ok(Some(Note::Streaming)) => streaming += 1,
            Ok(Some(Note::Failed(e))) => return Err(e),
            Ok(Some(Note::Done(_)) | None) => return Err("an axis ended early".to_owned()),
            Err(_) => return Err("not every board streams after 5 s".to_owned()),
        }
    }
    phase.store(MEASURING, Ordering::Relaxed);
    let cpu0 = process_cpu_seconds();
    let t0 = Instant::now();
    tokio::time::sleep(Duration::from_secs_f64(args.seconds)).await;
    let wall_s = t0.elapsed().as_secs_f64();
    let cpu1 = process_cpu_seconds();
    phase.store(FINISHING, Ordering::Relaxed);
    let mut axes = Vec::new();
    while axes.len() < n {
        match tokio::time::timeout(Duration::from_secs(5), inbox.recv()).await {
            Ok(Some(Note::Done(f))) => axes.push(f),
            Ok(Some(Note::Failed(e))) => return Err(e),
            Ok(Some(Note::Streaming)) => {}
            Ok(None) | Err(_) => return Err("an axis did not report".to_owned()),
        }
    }
    axes.sort_by(|a, b| a.axis.cmp(&b.axis));
    let cpu_pct = match (cpu0, cpu1) {
        (Some(a), Some(b)) if wall_s > 0.0 => 100.0 * (b - a) / wall_s,
        _ => 0.0,
    };
    Ok(Outcome { host: "bare", axes, cpu_pct, wall_s })
}

/// Opens the device raw and non-blocking, registered with the runtime.
fn open(path: &str) -> std::io::Result<AsyncFd<mio_serial::SerialStream>> {
    let port = mio_serial::SerialStream::open(&mio_serial::new(path, 115_200))
        .map_err(std::io::Error::other)?;
    // `AsyncFd::new` is deprecated for lack of I/O safety in general; here the descriptor is
    // owned by the port that the AsyncFd owns, so it stays open exactly as long as the
    // registration (the same pattern tokio-serial uses inside).
    #[allow(deprecated)]
    AsyncFd::new(port)
}

/// Handshake, then answer frames until told to finish.
async fn serve(
    axis: &str,
    port: AsyncFd<mio_serial::SerialStream>,
    tick_hz: u16,
    watchdog_ms: u16,
    phase: &AtomicU8,
    notes: &mpsc::Sender<Note>,
) -> std::io::Result<AxisFigures> {
    let mut rx = vec![0u8; 4096];
    let mut tx = Vec::with_capacity(64);
    let mut decoder = FrameDecoder::new();
    send(&port, &HostMessage::Hello, &mut tx).await?;
    let hello = async {
        loop {
            let n = read_once(&port, &mut rx).await?;
            decoder.extend(&rx[..n]);
            while let Some(m) = decoder.next_message::<BoardMessage>() {
                if let Ok(BoardMessage::Hello(_)) = m {
                    return Ok::<(), std::io::Error>(());
                }
            }
        }
    };
    tokio::time::timeout(Duration::from_secs(2), hello)
        .await
        .map_err(|_| std::io::Error::other("no Hello from the board within 2 s"))??;
    send(&port, &HostMessage::Configure { tick_hz, watchdog_ms }, &mut tx).await?;
    decoder.clear();
    let mut meter = LinkMeter::default();
    let mut last_seq: Option<u16> = None;
    let mut measuring = false;
    let _ = notes.send(Note::Streaming).await;
    loop {
        let n = read_once(&port, &mut rx).await?;
        let read_at = Instant::now();
        decoder.extend(&rx[..n]);
        let mut newest = None;
        while let Some(m) = decoder.next_message::<BoardMessage>() {
            match m {
                Ok(BoardMessage::Telemetry(t)) => {
                    let ticks = last_seq.map_or(1, |p| u32::from(t.seq.wrapping_sub(p)));
                    last_seq = Some(t.seq);
                    meter.frame(ticks, f64::from(t.board_time_us) * 1e-6);
                    newest = Some(t.seq);
                }
                Ok(BoardMessage::Hello(_)) => {}
                Err(_) => meter.bad_frame(),
            }
        }
        let Some(seq) = newest else { continue };
        match phase.load(Ordering::Relaxed) {
            WARMING => {}
            MEASURING if !measuring => {
                measuring = true;
                let _ = meter.report(true);
            }
            MEASURING => {}
            _ => {
                // Leave the motor off so the board's watchdog has nothing to trip.
                send(&port, &HostMessage::Stop { seq }, &mut tx).await?;
                let r = meter.report(false);
                return Ok(AxisFigures {
                    axis: axis.to_owned(),
                    frames: r.frames,
                    missed: r.missed,
                    bad_frames: r.bad_frames,
                    turnaround_us: r.turnaround_us,
                });
            }
        }
        send(&port, &HostMessage::Duty { seq, duty: DUTY }, &mut tx).await?;
        meter.turnaround(read_at.elapsed());
    }
}

/// Waits for readiness and reads once. The readiness is then cleared (tokio keeps it if a new
/// event came meanwhile), so the next call waits for new bytes instead of reading again only
/// to hear "would block": one read system call per frame instead of two.
async fn read_once(
    port: &AsyncFd<mio_serial::SerialStream>,
    buf: &mut [u8],
) -> std::io::Result<usize> {
    loop {
        let mut ready = port.readable().await?;
        let got = ready.get_inner().read(buf);
        // A full buffer may have left bytes behind: then stay ready and read again.
        if !matches!(got, Ok(n) if n == buf.len()) {
            ready.clear_ready();
        }
        match got {
            Ok(0) => return Err(std::io::ErrorKind::UnexpectedEof.into()),
            Ok(n) => return Ok(n),
            Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {}
            Err(e) => return Err(e),
        }
    }
}

/// Writes one message; a PTY with room takes it in one call.
async fn send(
    port: &AsyncFd<mio_serial::SerialStream>,
    msg: &HostMessage,
    tx: &mut Vec<u8>,
) -> std::io::Result<()> {
    tx.clear();
    protocol::write_frame(msg, tx);
    let mut rest = &tx[..];
    while !rest.is_empty() {
        match port.get_ref().write(rest) {
            Ok(n) => rest = &rest[n..],
            Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                port.writable().await?.clear_ready();
            }
            Err(e) => return Err(e),
        }
    }
    Ok(())
}

/// User plus system CPU time of this process, s (Linux /proc; see proc(5)).
fn process_cpu_seconds() -> Option<f64> {
    servotty::cli::linktest::process_cpu_seconds()
}
