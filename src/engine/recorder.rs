//! The recorder: writes every event to the event log (JSON lines) and, on every trip, a
//! capture of all axes' recent full-rate history (CSV with a commented header).
//!
//! It runs as its own task on the engine's thread, fed by the event broadcast; it only
//! gathers and waits. Formatting and file I/O go to the blocking pool, so neither touches an
//! axis task nor the thread the axis tasks run on. Captures are written atomically (temporary file in the same folder, then rename):
//! a reader never sees half a file.

use std::fmt::Write as _;
use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use tokio::io::AsyncWriteExt;
use tokio::sync::{broadcast, watch};

use crate::config::{ConfigSource, MachineConfig};
use crate::engine::axis::{AxisCommand, AxisHandle, Reply};
use crate::engine::events::{rfc3339_utc, Event, EventKind};
use crate::engine::history::Sample;
use crate::engine::snapshot::Trip;

/// Longest the recorder waits for one axis's history for a capture: an axis answers
/// within a frame or two, one that does not (link-less and idle it still answers) is left out.
const HISTORY_WAIT: Duration = Duration::from_millis(500);

/// Where the recorder writes.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RecorderPaths {
    /// Folder for captures.
    pub captures_dir: PathBuf,
    /// Event log file.
    pub event_log: PathBuf,
}

impl RecorderPaths {
    /// Paths from the configuration: relative ones are relative to the configuration file's
    /// folder; missing ones (and all of the built-in demo's) go to the state folder.
    pub fn resolve(cfg: &MachineConfig, source: &ConfigSource) -> Self {
        let base = match source {
            ConfigSource::File(p) => p.parent().map(Path::to_path_buf),
            ConfigSource::BuiltInDemo => None,
        };
        let state = state_dir();
        let pick = |p: &Option<PathBuf>, default: &str| match (p, &base) {
            (Some(p), _) if p.is_absolute() => p.clone(),
            (Some(p), Some(b)) => b.join(p),
            (Some(p), None) => state.join(p),
            (None, _) => state.join(default),
        };
        Self {
            captures_dir: pick(&cfg.machine.captures_dir, "captures"),
            event_log: pick(&cfg.machine.event_log, "events.jsonl"),
        }
    }
}

/// `$XDG_STATE_HOME/servotty`, else `~/.local/state/servotty`, else `./servotty-state`.
pub fn state_dir() -> PathBuf {
    if let Some(x) = std::env::var_os("XDG_STATE_HOME").filter(|v| !v.is_empty()) {
        return PathBuf::from(x).join("servotty");
    }
    if let Some(h) = std::env::var_os("HOME").filter(|v| !v.is_empty()) {
        return PathBuf::from(h).join(".local/state/servotty");
    }
    PathBuf::from("servotty-state")
}

/// A request to finish every capture already due; answered once they are written.
pub type Flush = tokio::sync::oneshot::Sender<()>;

/// Runs until shutdown (or until the event channel closes).
///
/// A capture is taken as soon as its trip event arrives: the histories are asked for at
/// once (they hold the seconds before the trip), never after a delay by which a headless
/// command may have ended the axes. `flush` lets shutdown wait until every trip already
/// reported has its capture written, before the axis tasks end.
pub async fn run(
    paths: RecorderPaths,
    mut events: broadcast::Receiver<Event>,
    emit: broadcast::Sender<Event>,
    axes: Arc<[AxisHandle]>,
    cfg: Arc<MachineConfig>,
    mut shutdown: watch::Receiver<bool>,
    mut flush: tokio::sync::mpsc::Receiver<Flush>,
) {
    let mut log = open_log(&paths.event_log, &emit).await;
    loop {
        let ev = tokio::select! {
            biased;
            Some(done) = flush.recv() => {
                while let Ok(ev) = events.try_recv() {
                    record(&mut log, &ev, &paths, &emit, &axes, &cfg).await;
                }
                let _ = done.send(());
                continue;
            }
            r = events.recv() => match r {
                Ok(ev) => ev,
                Err(broadcast::error::RecvError::Lagged(n)) => {
                    tracing::warn!(missed = n, "event log fell behind");
                    Event::now(None, None, EventKind::Notice {
                        text: format!("event log fell behind: {n} events not recorded"),
                    })
                }
                Err(broadcast::error::RecvError::Closed) => return,
            },
            _ = shutdown.changed() => {
                // Drain what is already queued so the log ends complete.
                while let Ok(ev) = events.try_recv() {
                    write_event(&mut log, &ev, &emit).await;
                }
                return;
            }
        };
        record(&mut log, &ev, &paths, &emit, &axes, &cfg).await;
    }
}

/// Logs one event and, for a trip, writes its capture.
async fn record(
    log: &mut Option<tokio::fs::File>,
    ev: &Event,
    paths: &RecorderPaths,
    emit: &broadcast::Sender<Event>,
    axes: &[AxisHandle],
    cfg: &MachineConfig,
) {
    write_event(log, ev, emit).await;
    let EventKind::Trip { trip } = &ev.kind else { return };
    let axis = ev.axis.as_deref().unwrap_or("?").to_owned();
    match capture(&paths.captures_dir, &axis, trip, axes, cfg).await {
        Ok(path) => {
            let _ = emit.send(Event::now(
                ev.axis.clone(),
                None,
                EventKind::Capture { path: path.display().to_string() },
            ));
        }
        Err(e) => {
            tracing::error!(error = %e, "capture not written");
            let _ = emit.send(Event::now(
                ev.axis.clone(),
                None,
                EventKind::RecorderFailed {
                    what: format!(
                        "trip capture not written in {}: {e}",
                        paths.captures_dir.display()
                    ),
                },
            ));
        }
    }
}

async fn open_log(path: &Path, emit: &broadcast::Sender<Event>) -> Option<tokio::fs::File> {
    if let Some(dir) = path.parent() {
        let _ = tokio::fs::create_dir_all(dir).await;
    }
    match tokio::fs::OpenOptions::new().create(true).append(true).open(path).await {
        Ok(f) => Some(f),
        Err(e) => {
            tracing::error!(path = %path.display(), error = %e, "cannot open the event log");
            let _ = emit.send(Event::now(
                None,
                None,
                EventKind::RecorderFailed {
                    what: format!("event log {} cannot be opened: {e}", path.display()),
                },
            ));
            None
        }
    }
}

async fn write_event(
    log: &mut Option<tokio::fs::File>,
    ev: &Event,
    emit: &broadcast::Sender<Event>,
) {
    let Some(f) = log.as_mut() else { return };
    let Ok(mut line) = serde_json::to_string(ev) else { return };
    line.push('\n');
    if let Err(e) = async {
        f.write_all(line.as_bytes()).await?;
        f.flush().await
    }
    .await
    {
        tracing::error!(error = %e, "event log write failed; event logging stops");
        *log = None;
        // Shown on screens (the cockpit's event panel); the log itself can no longer say it.
        let _ = emit.send(Event::now(
            None,
            None,
            EventKind::RecorderFailed {
                what: format!("event log write failed, logging stopped: {e}"),
            },
        ));
    }
}

/// Collects every axis's history and writes one capture file. Returns its path.
///
/// # Errors
/// I/O errors creating the folder or writing the file.
pub async fn capture(
    dir: &Path,
    tripped_axis: &str,
    trip: &Trip,
    axes: &[AxisHandle],
    cfg: &MachineConfig,
) -> std::io::Result<PathBuf> {
    let mut rows: Vec<(String, Vec<Sample>)> = Vec::new();
    for a in axes {
        if let Ok(Ok(Reply::History(h))) =
            tokio::time::timeout(HISTORY_WAIT, a.send(AxisCommand::History)).await
        {
            rows.push((a.name().to_owned(), h));
        }
    }
    let stamp = rfc3339_utc(std::time::SystemTime::now()).replace([':', '.'], "-");
    let name = format!("capture-{stamp}-{tripped_axis}-{:?}.csv", trip.cause).to_lowercase();
    let dir = dir.to_path_buf();
    let (tripped_axis, trip, cfg) = (tripped_axis.to_owned(), trip.clone(), cfg.clone());
    // Formatting 8 axes × 10 s of rows is megabytes of text and tens of milliseconds (more
    // on a small computer): on the engine's thread it would starve every axis loop past its
    // board's watchdog. The blocking pool formats and writes; this task only waits.
    tokio::task::spawn_blocking(move || {
        let text = capture_text(&tripped_axis, &trip, &rows, &cfg);
        std::fs::create_dir_all(&dir)?;
        write_atomically(&dir, &name, text.as_bytes())
    })
    .await
    .map_err(std::io::Error::other)?
}

/// Writes `bytes` to `dir/name` via a synced temporary file in `dir` and a rename, so a reader
/// never sees half a file. `dir` must exist.
///
/// # Errors
/// I/O errors.
pub fn write_atomically(dir: &Path, name: &str, bytes: &[u8]) -> std::io::Result<PathBuf> {
    let mut tmp = tempfile::Builder::new().prefix(".servotty-").suffix(".tmp").tempfile_in(dir)?;
    tmp.write_all(bytes)?;
    tmp.as_file().sync_all()?;
    let path = dir.join(name);
    tmp.persist(&path).map_err(|e| e.error)?;
    Ok(path)
}

/// The capture file's text: `#` metadata lines, a header row, then rows of every axis.
pub fn capture_text(
    tripped_axis: &str,
    trip: &Trip,
    rows: &[(String, Vec<Sample>)],
    cfg: &MachineConfig,
) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "# servotty trip capture");
    let _ = writeln!(s, "# software: servotty {}", env!("CARGO_PKG_VERSION"));
    let _ = writeln!(s, "# written: {}", rfc3339_utc(std::time::SystemTime::now()));
    let _ = writeln!(s, "# machine: {}", cfg.machine.name.replace('\n', " "));
    let _ = writeln!(s, "# trip axis: {tripped_axis}");
    let _ = writeln!(s, "# trip cause: {}", trip.cause);
    let _ = writeln!(s, "# trip board time s: {:.6}", trip.at_s);
    let _ = writeln!(
        s,
        "# trip values: target={:.6} position={:.6} following_error={:.6} duty={:.3} velocity={:.6}",
        trip.target, trip.position, trip.following_error, trip.duty, trip.velocity
    );
    let _ = writeln!(s, "# trip detail: {}", trip.detail.replace('\n', " "));
    for a in &cfg.axes {
        let c = &a.controller;
        let l = &a.limits;
        let _ = writeln!(
            s,
            "# axis {}: unit={} counts_per_unit={} mode={:?} kp={} ki={} kd={} ff_velocity={} \
             max_duty={} max_velocity={} max_acceleration={} following_error={} \
             following_error_per_velocity={} soft_min={} soft_max={}",
            a.name,
            a.scale.unit,
            a.scale.counts_per_unit,
            c.mode,
            c.kp,
            c.ki,
            c.kd,
            c.ff_velocity,
            c.max_duty,
            a.motion.max_velocity,
            a.motion.max_acceleration,
            l.following_error,
            l.following_error_per_velocity,
            l.soft_min,
            l.soft_max
        );
    }
    let _ = writeln!(s, "{}", CAPTURE_COLUMNS.join(","));
    for (axis, samples) in rows {
        for r in samples {
            let _ = writeln!(
                s,
                "{axis},{:.6},{:.6},{:.6},{:.6},{:.3},{:.6},{},{},{},{},{},{},{:.6},{:.6},{:.6},\
                 {:.3},{:.3},{:.3},{:.3},{}",
                r.t,
                r.target,
                r.position,
                r.following_error,
                r.duty,
                r.velocity,
                r.state.word(),
                r.count,
                r.board_time_us,
                r.missed_frames,
                r.status,
                r.inputs,
                r.target_velocity,
                r.target_acceleration,
                r.band,
                r.p,
                r.i,
                r.d,
                r.ff,
                u8::from(r.saturated)
            );
        }
    }
    s
}

/// The capture's columns, in order. After the loop's values (target … state) come the
/// evidence columns a diagnosis reads ([`crate::diagnosis`]): `count` (unwrapped encoder
/// count), `board_time_us` (the board's clock), `missed_frames` (telemetry frames lost just
/// before this one), `status` and `inputs` (the board's bits, decimal), `target_velocity` and
/// `target_acceleration` (the profile), `band` (the following-error band in force), `p`, `i`,
/// `d`, `ff` (the controller's parts, %) and `saturated` (1 when the output was cut to its
/// limit).
pub const CAPTURE_COLUMNS: [&str; 21] = [
    "axis",
    "t",
    "target",
    "position",
    "following_error",
    "duty",
    "velocity",
    "state",
    "count",
    "board_time_us",
    "missed_frames",
    "status",
    "inputs",
    "target_velocity",
    "target_acceleration",
    "band",
    "p",
    "i",
    "d",
    "ff",
    "saturated",
];
