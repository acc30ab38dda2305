//! The recorder: writes every event to the event log (JSON lines) and, on every trip, a
//! capture of all axes' recent full-rate history (CSV with a commented header).
//!
//! It runs as its own task on the engine's thread, fed by the event broadcast; it only
//! gathers and waits. Formatting and file I/O go to the blocking pool, so neither touches an
//! axis task nor the thread the axis tasks run on. Captures are written atomically (temporary file in the same folder, then rename):
//! a reader never sees half a file.

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

/// Collects every axis's history and writes one capture file (CSV) with its metadata
/// beside it (JSON, same name). Returns the CSV's path.
///
/// # Errors
/// I/O errors creating the folder or writing the files.
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
    // The gains that were driving the axes, not the file's: an operator may have edited them
    // live, and those are the ones a diagnosis must judge. An axis that does not answer keeps
    // its configured values, and the sidecar says which.
    let mut cfg = cfg.clone();
    let mut live_gains = Vec::new();
    for a in axes {
        if let Ok(Ok(Reply::Controller(c))) =
            tokio::time::timeout(HISTORY_WAIT, a.send(AxisCommand::LiveController)).await
        {
            if let Some(ac) = cfg.axes.iter_mut().find(|ac| ac.name == a.name()) {
                ac.controller = *c;
                live_gains.push(a.name().to_owned());
            }
        }
    }
    let written = rfc3339_utc(std::time::SystemTime::now());
    let stamp = written.replace([':', '.'], "-").to_lowercase();
    // The cause in file-name form: `following-error`, not `followingerror`.
    let cause = trip.cause.to_string().replace(' ', "-");
    let name = format!("capture-{stamp}-{tripped_axis}-{cause}");
    let dir = dir.to_path_buf();
    let (tripped_axis, trip) = (tripped_axis.to_owned(), trip.clone());
    // Formatting 8 axes × 10 s of rows is megabytes of text and tens of milliseconds (more
    // on a small computer): on the engine's thread it would starve every axis loop past its
    // board's watchdog. The blocking pool formats and writes; this task only waits.
    tokio::task::spawn_blocking(move || {
        let csv = capture_csv(&trip, &tripped_axis, &rows, &cfg).map_err(std::io::Error::other)?;
        let mut meta = capture_meta(&tripped_axis, &trip, &rows, &cfg, &written);
        meta["live_controller_axes"] = serde_json::json!(live_gains);
        std::fs::create_dir_all(&dir)?;
        write_with_sidecar(&dir, &name, &csv, &meta)
    })
    .await
    .map_err(std::io::Error::other)?
}

/// Writes a data file `dir/STEM.csv` and its metadata `dir/STEM.json` (pretty JSON), each
/// atomically ([`write_atomically`]), the metadata first: a reader that finds the CSV finds
/// its sidecar too. Trip captures and step records are written by it. Returns the CSV's path.
///
/// # Errors
/// I/O errors (the folder must exist).
pub fn write_with_sidecar(
    dir: &Path,
    stem: &str,
    csv: &[u8],
    meta: &serde_json::Value,
) -> std::io::Result<PathBuf> {
    let meta = serde_json::to_vec_pretty(meta).map_err(std::io::Error::other)?;
    write_atomically(dir, &format!("{stem}.json"), &meta)?;
    write_atomically(dir, &format!("{stem}.csv"), csv)
}

/// A time in a data file: seconds to the microsecond.
pub(crate) fn time_field(t: f64) -> String {
    format!("{:.6}", t + 0.0)
}

/// A position, velocity or band in a data file: 6 decimals (below any encoder's count).
pub(crate) fn length_field(v: f64) -> String {
    format!("{v:.6}")
}

/// A duty or controller part in a data file, %: 3 decimals.
pub(crate) fn duty_field(v: f64) -> String {
    format!("{v:.3}")
}

/// Writes `bytes` to `dir/name` via a synced temporary file in `dir` and a rename, so a reader
/// never sees half a file. `dir` must exist. The file is readable by everyone (0644): records
/// are for sharing, not secrets.
///
/// # Errors
/// I/O errors.
pub fn write_atomically(dir: &Path, name: &str, bytes: &[u8]) -> std::io::Result<PathBuf> {
    let mut tmp = tempfile::Builder::new().prefix(".servotty-").suffix(".tmp").tempfile_in(dir)?;
    tmp.write_all(bytes)?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt as _;
        tmp.as_file().set_permissions(std::fs::Permissions::from_mode(0o644))?;
    }
    tmp.as_file().sync_all()?;
    let path = dir.join(name);
    tmp.persist(&path).map_err(|e| e.error)?;
    Ok(path)
}

/// Per-axis columns of a capture, each prefixed `AXIS_` in the file, with the unit in the
/// name (`{u}` is the axis unit). After the loop's values come the evidence columns a
/// diagnosis reads ([`crate::diagnosis`]): `count` (unwrapped encoder count),
/// `board_time_us` (the board's clock: secondary, the file's time base is `t_s`),
/// `missed_frames` (telemetry frames lost just before this one), `status` and `inputs` (the
/// board's bits, decimal), the profile's velocity and acceleration, `band` (the
/// following-error band in force), `p`, `i`, `d`, `ff` (the controller's parts, %) and
/// `saturated` (1 when the output was cut to its limit).
pub const CAPTURE_COLUMNS: [&str; 19] = [
    "target_{u}",
    "position_{u}",
    "following_error_{u}",
    "duty_pct",
    "velocity_{u}_s",
    "state",
    "count",
    "board_time_us",
    "missed_frames",
    "status",
    "inputs",
    "target_velocity_{u}_s",
    "target_acceleration_{u}_s2",
    "band_{u}",
    "p_pct",
    "i_pct",
    "d_pct",
    "ff_pct",
    "saturated",
];

/// The capture's names without units, for readers matching either form.
pub const CAPTURE_NAMES: [&str; 21] = [
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

/// The header of a capture of `axes` (name, unit): `t_s`, then every axis's columns.
pub fn capture_header(axes: &[(&str, &str)]) -> Vec<String> {
    let mut h = vec!["t_s".to_owned()];
    for (name, unit) in axes {
        for c in &CAPTURE_COLUMNS {
            h.push(format!("{name}_{}", c.replace("{u}", &unit_word(unit))));
        }
    }
    h
}

/// A unit as it can stand in a column name (`mm`, `deg`; `°` becomes `deg`).
pub(crate) fn unit_word(unit: &str) -> String {
    let u = unit.replace('°', "deg");
    let w: String = u.chars().map(|c| if c.is_ascii_alphanumeric() { c } else { '_' }).collect();
    if w.is_empty() {
        "unit".to_owned()
    } else {
        w
    }
}

/// The capture as CSV: one header row, then one row per instant with every axis's columns.
///
/// The time base is the tripped axis's board ticks, `t_s` seconds from the trip (negative
/// before it). Every history ends at the same moment (the capture request), so the other
/// axes' rows are aligned newest to newest; at equal tick rates that is within one tick.
/// An axis with a shorter history leaves its fields empty in the oldest rows.
///
/// # Errors
/// The csv writer's (not expected for in-memory output).
pub fn capture_csv(
    trip: &Trip,
    tripped_axis: &str,
    rows: &[(String, Vec<Sample>)],
    cfg: &MachineConfig,
) -> Result<Vec<u8>, csv::Error> {
    let units: Vec<(&str, &str)> = rows
        .iter()
        .map(|(a, _)| (a.as_str(), cfg.axis(a).map_or("unit", |c| c.scale.unit.as_str())))
        .collect();
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(capture_header(&units))?;
    let base = rows.iter().find(|(a, _)| a == tripped_axis).or_else(|| rows.first());
    let Some((_, base)) = base else { return w.into_inner().map_err(|e| e.into_error().into()) };
    let n = base.len();
    let empty = vec![String::new(); CAPTURE_COLUMNS.len()];
    for (k, now) in base.iter().enumerate() {
        let mut rec = vec![time_field(now.t - trip.at_s)];
        for (_, samples) in rows {
            // Aligned from the newest sample back.
            let back = n - k;
            match samples.len().checked_sub(back).and_then(|i| samples.get(i)) {
                Some(r) => rec.extend(sample_fields(r)),
                None => rec.extend(empty.iter().cloned()),
            }
        }
        w.write_record(&rec)?;
    }
    w.flush()?;
    w.into_inner().map_err(|e| e.into_error().into())
}

fn sample_fields(r: &Sample) -> [String; 19] {
    [
        length_field(r.target),
        length_field(r.position),
        length_field(r.following_error),
        duty_field(r.duty),
        length_field(r.velocity),
        r.state.word().to_owned(),
        r.count.to_string(),
        r.board_time_us.to_string(),
        r.missed_frames.to_string(),
        r.status.to_string(),
        r.inputs.to_string(),
        length_field(r.target_velocity),
        length_field(r.target_acceleration),
        length_field(r.band),
        duty_field(r.p),
        duty_field(r.i),
        duty_field(r.d),
        duty_field(r.ff),
        u8::from(r.saturated).to_string(),
    ]
}

/// The capture's sidecar: what tripped, and each axis's configuration as it was, so the CSV
/// itself stays one header row and numbers.
pub fn capture_meta(
    tripped_axis: &str,
    trip: &Trip,
    rows: &[(String, Vec<Sample>)],
    cfg: &MachineConfig,
    written_utc: &str,
) -> serde_json::Value {
    let axes: Vec<serde_json::Value> = rows
        .iter()
        .filter_map(|(a, _)| cfg.axis(a))
        .map(|a| {
            let c = &a.controller;
            let l = &a.limits;
            serde_json::json!({
                "axis": a.name,
                "unit": a.scale.unit,
                "counts_per_unit": a.scale.counts_per_unit,
                // Every parameter of the table, keyed as in the file.
                "controller": crate::control::params::to_json(c),
                "max_velocity": a.motion.max_velocity,
                "max_acceleration": a.motion.max_acceleration,
                "following_error": l.following_error,
                "following_error_per_velocity": l.following_error_per_velocity,
                "soft_min": l.soft_min,
                "soft_max": l.soft_max,
            })
        })
        .collect();
    serde_json::json!({
        "kind": "servotty trip capture",
        "software": format!("servotty {}", env!("CARGO_PKG_VERSION")),
        "written_utc": written_utc,
        "machine": cfg.machine.name,
        "time_base": "t_s: seconds from the trip, on the tripped axis's board ticks",
        "trip": {
            "axis": tripped_axis,
            "cause": trip.cause.to_string(),
            "board_time_s": trip.at_s,
            "target": trip.target,
            "position": trip.position,
            "following_error": trip.following_error,
            "band": trip.band,
            "duty": trip.duty,
            "velocity": trip.velocity,
            "detail": trip.detail,
        },
        "axes": axes,
    })
}
