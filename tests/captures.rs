//! Every trip capture has its data: the real binary, a headless `move` that trips, and the
//! capture file it leaves must hold rows for every axis, also when the trip is a link loss.
//! (Before, the recorder asked for history 200 ms after the trip, when `move` had already
//! ended the axes: the file had its header and no rows.)
//!
//! The demo gantry (configs/demo-greenhouse.toml, invented numbers) with faults injected in
//! the simulator; real time, polling under generous bounds.

use std::path::PathBuf;
use std::process::Command;

fn repo(p: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(p)
}

/// Runs `servotty move --home --to x=600 --yes` on the demo edited by `edit`; returns the
/// capture files written and the event log.
fn tripping_move(edit: impl Fn(String) -> String) -> (Vec<String>, String) {
    tripping_move_into(None, edit)
}

/// As [`tripping_move`], with captures going to `captures_dir` when given.
fn tripping_move_into(
    captures_dir: Option<&str>,
    edit: impl Fn(String) -> String,
) -> (Vec<String>, String) {
    let dir = tempfile::tempdir().expect("tempdir");
    let text = std::fs::read_to_string(repo("configs/demo-greenhouse.toml")).expect("demo");
    let text = edit(text).replacen(
        "capture_seconds = 10.0",
        &format!(
            "capture_seconds = 2.0\ncaptures_dir = {:?}\nevent_log = {:?}",
            captures_dir.map_or_else(|| dir.path().join("captures"), PathBuf::from),
            dir.path().join("events.jsonl")
        ),
        1,
    );
    let cfg = dir.path().join("machine.toml");
    std::fs::write(&cfg, text).expect("write config");
    let out = Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(["move", "--home", "--to", "x=600", "--yes", "--config"])
        .arg(&cfg)
        .env("XDG_STATE_HOME", dir.path())
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(1), "{}", String::from_utf8_lossy(&out.stderr));
    // A capture is a CSV file (one row per instant, every axis's columns) and a JSON sidecar
    // with its metadata; both are returned, joined, per capture.
    let mut captures: Vec<String> = std::fs::read_dir(dir.path().join("captures"))
        .map(|d| {
            d.filter_map(Result::ok)
                .map(|e| e.path())
                .filter(|p| p.extension().is_some_and(|x| x == "csv"))
                .map(|p| {
                    let csv = std::fs::read_to_string(&p).expect("capture readable");
                    let meta =
                        std::fs::read_to_string(p.with_extension("json")).unwrap_or_default();
                    format!("{meta}\n{csv}")
                })
                .collect()
        })
        .unwrap_or_default();
    captures.sort();
    let log = std::fs::read_to_string(dir.path().join("events.jsonl")).unwrap_or_default();
    (captures, log)
}

/// The axes whose columns hold a value in at least one row of the capture's CSV part.
fn axes_with_rows(capture: &str) -> Vec<String> {
    let csv = &capture[capture.find("t_s,").expect("a header row")..];
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap_or_default().split(',').collect();
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    let mut seen = Vec::new();
    for axis in ["x", "y", "z"] {
        let Some(col) = header.iter().position(|h| h.starts_with(&format!("{axis}_"))) else {
            continue;
        };
        if rows.iter().any(|r| r.get(col).is_some_and(|v| !v.is_empty())) {
            seen.push(axis.to_owned());
        }
    }
    seen
}

fn check(captures: &[String], log: &str, cause: &str) {
    assert_eq!(captures.len(), 1, "one trip, one capture; log: {log}");
    let c = &captures[0];
    assert!(c.contains(cause), "{}", &c[..c.len().min(600)]);
    assert_eq!(axes_with_rows(c), ["x", "y", "z"], "rows for every axis");
    assert!(log.contains("\"event\":\"capture\""), "the log points to the capture: {log}");
}

#[test]
fn a_headless_move_that_trips_leaves_a_capture_with_rows_for_every_axis() {
    // X's motor leads swapped, homing declared (method none): the move runs away.
    let (captures, log) = tripping_move(|t| {
        t.replacen("method = \"switch\"", "method = \"none\"", 1).replacen(
            "home_switch_mm = 2.0            # switch closes within 2 mm of the lower end stop",
            "home_switch_mm = 2.0\n\n[axis.transport.faults]\nreversed_motor = true",
            1,
        )
    });
    check(&captures, &log, "runaway");
}

#[test]
fn a_link_loss_leaves_a_capture_with_rows_for_every_axis() {
    // X's link goes dark for 150 ms (over the 100 ms link timeout) every 2 s.
    let (captures, log) = tripping_move(|t| {
        t.replacen(
            "home_switch_mm = 2.0            # switch closes within 2 mm of the lower end stop",
            "home_switch_mm = 2.0\n\n[axis.transport.faults]\nburst_ms = 150\nburst_every_ms = 2000",
            1,
        )
    });
    check(&captures, &log, "link loss");
}

fn reversed_x(t: String) -> String {
    t.replacen("method = \"switch\"", "method = \"none\"", 1).replacen(
        "home_switch_mm = 2.0            # switch closes within 2 mm of the lower end stop",
        "home_switch_mm = 2.0\n\n[axis.transport.faults]\nreversed_motor = true",
        1,
    )
}

#[test]
fn a_capture_that_cannot_be_written_is_an_event_not_only_a_trace() {
    // A folder under a regular file cannot be created.
    let (captures, log) = tripping_move_into(Some("/dev/null/captures"), reversed_x);
    assert!(captures.is_empty());
    let line = log
        .lines()
        .find(|l| l.contains("\"event\":\"recorder_failed\""))
        .unwrap_or_else(|| panic!("no recorder_failed event: {log}"));
    assert!(line.contains("/dev/null/captures"), "{line}");
}
