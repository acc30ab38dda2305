//! `servotty analyze trip` on a real capture: a jam injected into the simulator during a
//! move (simulated time), the capture the recorder wrote, then the real binary on it.

use std::process::Command;
use std::time::Duration;

use servotty::config::{HomingMethod, MachineConfig};
use servotty::engine::recorder::RecorderPaths;
use servotty::engine::{AxisCommand, AxisState, EventKind, Machine};
use servotty::sim::plant::PlantFaults;

/// A jam at speed on the demo's X axis; returns the capture's path.
async fn jam_capture(dir: &std::path::Path) -> String {
    let mut cfg = MachineConfig::demo().expect("demo");
    cfg.axes.retain(|a| a.name == "x");
    cfg.axes[0].homing.method = HomingMethod::None;
    let paths =
        RecorderPaths { captures_dir: dir.join("captures"), event_log: dir.join("events.jsonl") };
    let m = Machine::start_with(&cfg, &[], Some(paths)).expect("starts");
    let h = m.handle();
    assert!(h.wait_linked(Duration::from_secs(2)).await.is_empty());
    h.home(Some(&["x".to_owned()])).await.expect("homes");
    let x = h.axis("x").expect("x").clone();
    let mut events = h.events();
    x.send(AxisCommand::MoveTo(x.snapshot().position + 500.0)).await.expect("move");
    let mut rx = x.watch();
    tokio::time::timeout(Duration::from_secs(3), rx.wait_for(|s| s.velocity > 120.0))
        .await
        .expect("at speed")
        .expect("watch");
    m.sim("x").expect("sim").set_plant_faults(PlantFaults { blocked: true, ..Default::default() });
    tokio::time::timeout(Duration::from_secs(2), rx.wait_for(|s| s.state == AxisState::Tripped))
        .await
        .expect("trips")
        .expect("watch");
    let path = loop {
        let ev = tokio::time::timeout(Duration::from_secs(5), events.recv())
            .await
            .expect("capture in time")
            .expect("event");
        if let EventKind::Capture { path } = ev.kind {
            break path;
        }
    };
    m.shutdown().await;
    path
}

fn servotty(args: &[&str]) -> std::process::Output {
    let state = std::env::temp_dir().join(format!("servotty-diag-test-{}", std::process::id()));
    Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(args)
        .env("XDG_STATE_HOME", state)
        .output()
        .expect("runs")
}

#[tokio::test(start_paused = true)]
async fn analyze_trip_names_a_jam_in_text_json_and_draws_the_chart() {
    let dir = tempfile::tempdir().expect("tempdir");
    let capture = jam_capture(dir.path()).await;

    let out = servotty(&["analyze", "trip", &capture]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{text}{}", String::from_utf8_lossy(&out.stderr));
    assert!(text.contains("most likely: mechanical jam or hard stop"), "{text}");
    assert!(text.contains("evidence:") && text.contains("check:"), "{text}");
    assert!(text.contains("cannot tell from this record"), "{text}");

    let svg = dir.path().join("trip.svg");
    let out =
        servotty(&["analyze", "trip", &capture, "--json", "--svg", &svg.display().to_string()]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("one JSON object");
    assert_eq!(v["cause"], "jam", "{v}");
    assert_eq!(v["axis"], "x", "{v}");
    assert!(v["confidence"].as_f64().is_some_and(|c| c > 0.5), "{v}");
    let chart = std::fs::read_to_string(&svg).expect("chart written");
    assert!(chart.starts_with("<svg") || chart.contains("<svg"), "not an SVG");
    for label in ["target", "following error", "duty", "trip", "limit", "band"] {
        assert!(chart.contains(label), "the chart lacks {label:?}");
    }

    let out = servotty(&["analyze", "trip", &capture, "--axis", "q"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no axis \"q\""));
}

#[test]
fn a_broken_capture_names_the_file_and_line() {
    let dir = tempfile::tempdir().expect("tempdir");
    let f = dir.path().join("broken.csv");
    std::fs::write(&f, "# servotty trip capture\naxis,t,position\nx,0.001,1.0\nx,oops,1.0\n")
        .expect("write");
    let out = servotty(&["analyze", "trip", &f.display().to_string()]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("broken.csv:4:"), "{err}");
}
