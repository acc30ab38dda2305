//! `servotty sim --pty`: serve each simulated axis on a pseudo-terminal so that the engine
//! (or any other program) talks to it over a real tty device.
//!
//! Stdout carries two things for the programs that drive it: first one `AXIS PATH` line per
//! served axis; then, when SIGINT, SIGTERM or SIGHUP ends it, one JSON line per axis with
//! what the board counted about its host (see [`AxisReport`]). It then exits like every
//! command a signal ends, 128 + the signal's number (130, 143, 129; [`crate::signals`]), so a
//! script can tell an ended simulator from one that failed to start.

use serde::Serialize;

use crate::cli::{Failure, SimArgs};
use crate::config::TransportConfig;
use crate::sim::board::{tick_clock, SimBoard, SimBoardHandle, TickClock};

/// One axis's closing report, printed as a JSON line.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct AxisReport {
    /// Axis name.
    pub axis: String,
    /// Board ticks since the simulator started.
    pub ticks: u64,
    /// Valid Duty or Stop messages received while streaming.
    pub host_replies: u64,
    /// Replies not there by the tick after the frame they answer.
    pub late_replies: u64,
    /// Times the board's watchdog switched the motor off.
    pub watchdog_trips: u64,
    /// Longest board time between two replies of one host, ms.
    pub longest_reply_gap_ms: f64,
    /// Ticks run less than half a period after the one before (the simulator catching up
    /// after falling behind; when not 0, some late replies may be its doing, not the host's).
    pub rushed_ticks: u64,
    /// Longest time between two of the simulator's own ticks, ms: its longest stall (a reply
    /// gap or watchdog trip no longer than this may be the simulator's, not the host's).
    pub longest_tick_gap_ms: f64,
}

impl AxisReport {
    fn of(axis: &str, board: &SimBoardHandle) -> Self {
        let v = board.view();
        let r = v.replies;
        Self {
            axis: axis.to_owned(),
            ticks: v.ticks,
            host_replies: r.host_replies,
            late_replies: r.late_replies,
            watchdog_trips: r.watchdog_trips,
            longest_reply_gap_ms: r.longest_reply_gap_us as f64 / 1000.0,
            rushed_ticks: r.rushed_ticks,
            longest_tick_gap_ms: r.longest_tick_gap_us as f64 / 1000.0,
        }
    }
}

/// Reads fault drills ([`crate::sim::drill`]) from standard input, one per line, and answers
/// each on standard error (standard output belongs to the device lines and the report).
/// Ends quietly when standard input closes.
async fn drills_from_stdin(boards: Vec<(String, SimBoardHandle)>) {
    // A plain thread reads the (blocking) standard input and hands lines over.
    let (tx, mut rx) = tokio::sync::mpsc::channel::<String>(16);
    let reader = std::thread::Builder::new().name("drill-stdin".into()).spawn(move || {
        use std::io::BufRead as _;
        for line in std::io::stdin().lock().lines() {
            let Ok(line) = line else { break };
            if tx.blocking_send(line).is_err() {
                break;
            }
        }
    });
    if reader.is_err() {
        eprintln!("servotty: no drill reader (cannot start a thread); drills are off");
        return;
    }
    while let Some(line) = rx.recv().await {
        if line.trim().is_empty() {
            continue;
        }
        if line.trim() == "help" {
            eprintln!("{}", crate::sim::drill::HELP);
            continue;
        }
        let cmd = match crate::sim::drill::parse(&line) {
            Ok(c) => c,
            Err(e) => {
                eprintln!("drill refused: {e}");
                continue;
            }
        };
        let picked: Vec<&(String, SimBoardHandle)> =
            boards.iter().filter(|(n, _)| cmd.axis.as_ref().is_none_or(|a| a == n)).collect();
        if picked.is_empty() {
            let names: Vec<&str> = boards.iter().map(|(n, _)| n.as_str()).collect();
            eprintln!(
                "drill refused: no simulated axis {:?} (served: {})",
                cmd.axis.as_deref().unwrap_or(""),
                names.join(", ")
            );
            continue;
        }
        for (name, board) in picked {
            eprintln!("drill: {name}: {}", crate::sim::drill::apply(board, &cmd.drill));
        }
    }
}

/// `servotty sim`.
///
/// # Errors
/// [`Failure::Usage`] without `--pty` or with `--port`, [`Failure::Config`], or
/// [`Failure::Machine`] when no pseudo-terminal or runtime can be had; after serving,
/// [`Failure::Ended`] with the signal that ended it (its report printed first).
pub fn run(args: &SimArgs) -> Result<u8, Failure> {
    if !args.pty {
        return Err(Failure::Usage(
            "sim needs --pty (serve each simulated axis on a pseudo-terminal)".to_owned(),
        ));
    }
    if let Some(p) = args.machine.ports.first() {
        return Err(Failure::Usage(format!(
            "--port {}=… does not apply to sim (it serves simulated axes; give the printed \
             devices to the other command's --port)",
            p.axis
        )));
    }
    let (cfg, _) = crate::config::MachineConfig::load_or_demo(args.machine.config.as_deref())?;
    // The boards pay a PTY read and write per tick each (about 8 % of a core for sixteen on
    // the 2-core build VM, docs/performance.md): two workers let them keep their tick while
    // a host or a build takes the other core (the host they test stays on one thread).
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Failure::Machine(format!("cannot start the runtime: {e}")))?;
    rt.block_on(async {
        // From the start: a signal that arrives before the handlers are installed would end
        // the process without its report.
        let mut signals = crate::signals::Signals::install()
            .map_err(|e| Failure::Machine(format!("cannot watch for signals: {e}")))?;
        let mut served = Vec::new();
        // One fine-grained tick clock per configured rate, shared by the boards at that rate.
        let mut clocks: Vec<TickClock> = Vec::new();
        for (i, axis) in cfg.axes.iter().enumerate() {
            let TransportConfig::Sim(sim) = &axis.transport else {
                eprintln!("servotty: axis {} is not simulated; skipped", axis.name);
                continue;
            };
            let (board_end, host_end) = mio_serial::SerialStream::pair()
                .map_err(|e| Failure::Machine(format!("cannot create a pseudo-terminal: {e}")))?;
            // Our own stream type, not tokio-serial's: the master sees a hang-up until the
            // host opens the other side, and tokio keeps a hang-up for good; tokio-serial's
            // stream then read EAGAIN about a hundred times per tick and board (the bulk of
            // this simulator's CPU). `TtyStream` registers afresh instead (see its docs).
            let board_end = crate::link::tty::TtyStream::new(board_end)
                .map_err(|e| Failure::Machine(format!("cannot wait on a pseudo-terminal: {e}")))?;
            let Some(path) = serialport::SerialPort::name(&host_end) else {
                return Err(Failure::Machine("the pseudo-terminal has no name".to_owned()));
            };
            // The host opens the path itself (exclusively), so our handle must go.
            drop(host_end);
            println!("{} {}", axis.name, path);
            let mut board =
                SimBoard::new(&sim.plant, &sim.faults, 0x5E12_0770 + i as u64).persistent();
            let hz = axis.board.tick_hz;
            if !clocks.iter().any(|c| c.hz() == hz) {
                match tick_clock(hz) {
                    Ok(c) => clocks.push(c),
                    // The board's own timer still ticks, only less evenly.
                    Err(e) => eprintln!("servotty: no tick clock thread ({e}); using timers"),
                }
            }
            if let Some(c) = clocks.iter().find(|c| c.hz() == hz) {
                board = board.with_clock(c.clone());
            }
            served.push((axis.name.clone(), board.handle()));
            tokio::spawn(board.run(board_end));
        }
        if served.is_empty() {
            return Err(Failure::Usage("no simulated axes to serve".to_owned()));
        }
        // Others read these lines from a pipe to find the devices.
        use std::io::Write as _;
        let _ = std::io::stdout().flush();
        tokio::spawn(drills_from_stdin(served.clone()));
        let sig = signals.recv().await;
        let mut out = std::io::stdout().lock();
        for (name, board) in &served {
            let line = serde_json::to_string(&AxisReport::of(name, board)).unwrap_or_default();
            let _ = writeln!(out, "{line}");
        }
        let _ = out.flush();
        Err(Failure::Ended(sig))
    })
}
