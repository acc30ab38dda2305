//! `servotty linktest`: measures each link while the axes stay disabled.
//!
//! The board streams and the host answers every frame exactly as in operation (with Stop,
//! since the motors are off), so the turnaround measured here is the control loop's.

use std::time::Duration;

use serde::Serialize;

use crate::cli::json_round::{emit_json, Rounding};
use crate::cli::progress::{self, Progress};
use crate::cli::{emit, Failure, LinktestArgs, EXIT_OK};
use crate::engine::link_meter::Turnaround;
use crate::engine::{AxisCommand, MachineHandle, Reply};

/// One axis's link figures, as printed in JSON.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct AxisLink {
    /// Axis name.
    pub axis: String,
    /// Valid telemetry frames per second of wall time.
    pub frames_per_s: f64,
    /// Host turnaround (frame read → command written), µs.
    pub turnaround_us: Turnaround,
    /// Frames rejected by the decoder (CRC, framing, version): the table's `bad`.
    pub bad: u64,
    /// Telemetry sequence numbers skipped.
    pub missed: u64,
    /// Board time covered by the frames, s (compare with the wall time to judge the board's
    /// clock).
    pub board_s: f64,
    /// Valid telemetry frames.
    pub frames: u64,
}

/// The whole result.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct LinkTestOutcome {
    /// True: every axis linked and was measured (a failure prints `"ok": false`).
    pub ok: bool,
    /// Per axis.
    pub axes: Vec<AxisLink>,
    /// This process's CPU use over the measurement, % of one core.
    pub cpu_pct: f64,
    /// Wall time measured, s.
    pub wall_s: f64,
}

/// Measures every linked axis for `seconds` of wall time.
pub async fn measure(m: &MachineHandle, seconds: f64) -> Result<LinkTestOutcome, String> {
    let offline = m.wait_linked(Duration::from_secs(3)).await;
    if !offline.is_empty() {
        let why: Vec<String> =
            offline.iter().map(|a| format!("{a}: {}", m.offline_reason(a))).collect();
        return Err(why.join("; "));
    }
    for a in m.axes() {
        a.send(AxisCommand::LinkReport { reset: true }).await.map_err(|e| e.to_string())?;
    }
    let cpu0 = process_cpu_seconds();
    let t0 = std::time::Instant::now();
    tokio::time::sleep(Duration::from_secs_f64(seconds)).await;
    let wall = t0.elapsed().as_secs_f64();
    let cpu1 = process_cpu_seconds();
    let mut axes = Vec::new();
    for a in m.axes() {
        let Reply::Link(r) =
            a.send(AxisCommand::LinkReport { reset: true }).await.map_err(|e| e.to_string())?
        else {
            return Err(format!("{}: unexpected reply", a.name()));
        };
        axes.push(AxisLink {
            axis: a.name().to_owned(),
            frames_per_s: r.frames as f64 / wall,
            turnaround_us: r.turnaround_us,
            bad: r.bad_frames,
            missed: r.missed,
            board_s: r.board_seconds,
            frames: r.frames,
        });
    }
    let cpu_pct = match (cpu0, cpu1) {
        (Some(a), Some(b)) if wall > 0.0 => 100.0 * (b - a) / wall,
        _ => 0.0,
    };
    Ok(LinkTestOutcome { ok: true, axes, cpu_pct, wall_s: wall })
}

/// User plus system CPU time of this process, s, from /proc (Linux only; None elsewhere).
pub fn process_cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    // The command name may hold spaces and parentheses; fields resume after the last ')'.
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    // utime and stime are fields 14 and 15 of proc(5), i.e. 11 and 12 after the name.
    let ticks: f64 = f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?;
    // USER_HZ is 100 on every Linux ABI servotty targets (proc(5)).
    Some(ticks / 100.0)
}

/// `servotty linktest`.
///
/// # Errors
/// [`Failure`]: a bad `--seconds`, or a link that does not come up.
pub fn run(args: &LinktestArgs) -> Result<u8, Failure> {
    if !(args.seconds.is_finite() && args.seconds > 0.0 && args.seconds <= 3600.0) {
        return Err(Failure::Usage(format!(
            "--seconds must be between 0 and 3600, found {}",
            args.seconds
        )));
    }
    let (json, seconds) = (args.json, args.seconds);
    crate::cli::with_machine(&args.machine, |h| async move {
        let p = Progress::timed(progress::wanted(json), "measuring", seconds);
        let out = measure(&h, seconds).await;
        p.finish();
        let out = out.map_err(Failure::Machine)?;
        if json {
            emit_json(&out, &Rounding::of(h.config()))?;
        } else {
            emit(&table(&out))?;
        }
        Ok(EXIT_OK)
    })
}

/// The human table; its column words are the JSON keys.
fn table(out: &LinkTestOutcome) -> String {
    let mut s = format!(
        "{:<6} {:>9} {:>8} {:>8} {:>8} {:>6} {:>7}\n",
        "axis", "frames/s", "p50 µs", "p99 µs", "max µs", "bad", "missed"
    );
    for a in &out.axes {
        s.push_str(&format!(
            "{:<6} {:>9.1} {:>8} {:>8} {:>8} {:>6} {:>7}\n",
            a.axis,
            a.frames_per_s,
            a.turnaround_us.p50,
            a.turnaround_us.p99,
            a.turnaround_us.max,
            a.bad,
            a.missed
        ));
    }
    s.push_str(&format!("cpu {:.1} % of one core\n", out.cpu_pct));
    s
}
