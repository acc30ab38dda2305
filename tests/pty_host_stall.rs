//! The board's word is final, over a real tty: `servotty move` drives X on a board served by
//! `servotty sim --pty`; the move's process is stopped (SIGSTOP) for 80 ms, longer than the
//! board's 50 ms watchdog and shorter than the link timeout. The board cuts its motor; the
//! move must report a board-watchdog trip, not carry on as if nothing happened.
//!
//! Real time (PTYs and real processes): conditions are polled under generous deadlines. The
//! 80 ms stop is the fault itself, not a wait. The link timeout is widened to 2 s so that only
//! the watchdog can explain the trip. Rules: brief.md ("the board's word is final") and the
//! watchdog contract of docs/protocol.md; common practice, no outside source.

use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

struct KillOnDrop(Child);

impl Drop for KillOnDrop {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

fn signal(pid: u32, sig: &str) {
    let st = Command::new("kill").args(["-s", sig, &pid.to_string()]).status().expect("kill");
    assert!(st.success(), "kill -s {sig}");
}

#[test]
fn a_host_stopped_past_the_board_watchdog_reports_the_trip() {
    let dir = tempfile::tempdir().expect("tempdir");
    let demo = std::fs::read_to_string(
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("configs/demo-greenhouse.toml"),
    )
    .expect("demo");
    // Only X's link timeout changes (Y and Z stay in process): the watchdog stays at the
    // demo's 50 ms.
    let text = demo.replacen("link_timeout_s = 0.1", "link_timeout_s = 2.0", 1);
    let cfg = dir.path().join("machine.toml");
    std::fs::write(&cfg, &text).expect("config");
    let check = Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(["check"])
        .arg(&cfg)
        .output()
        .expect("check runs");
    assert!(check.status.success(), "{}", String::from_utf8_lossy(&check.stderr));

    let mut sim = KillOnDrop(
        Command::new(env!("CARGO_BIN_EXE_servotty"))
            .args(["sim", "--pty", "--config"])
            .arg(&cfg)
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .expect("sim starts"),
    );
    let mut lines = BufReader::new(sim.0.stdout.take().expect("stdout")).lines();
    let x_path = lines
        .by_ref()
        .map_while(Result::ok)
        .find_map(|l| l.strip_prefix("x ").map(str::to_owned))
        .expect("sim prints x's device");

    let state = dir.path().join("state");
    let mut mv = KillOnDrop(
        Command::new(env!("CARGO_BIN_EXE_servotty"))
            .args(["move", "--home", "--to", "x=1000", "--yes", "--json", "--config"])
            .arg(&cfg)
            .arg("--port")
            .arg(format!("x={x_path}"))
            .env("XDG_STATE_HOME", &state)
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("move starts"),
    );
    // Wait until X is moving towards 1000 (after homing every axis).
    let log = state.join("servotty/events.jsonl");
    let moving = |t: &str| {
        t.lines().any(|l| {
            l.contains("\"axis\":\"x\"") && l.contains("\"to\":\"moving\"") && !l.contains("homing")
        })
    };
    let end = Instant::now() + Duration::from_secs(90);
    while !moving(&std::fs::read_to_string(&log).unwrap_or_default()) {
        assert!(Instant::now() < end, "x never started its move");
        assert!(mv.0.try_wait().expect("wait").is_none(), "move ended before x moved");
        std::thread::sleep(Duration::from_millis(20));
    }
    std::thread::sleep(Duration::from_millis(300)); // at speed
    let pid = mv.0.id();
    signal(pid, "STOP");
    std::thread::sleep(Duration::from_millis(80));
    signal(pid, "CONT");
    let out = std::mem::replace(&mut mv.0, Command::new("true").spawn().expect("true"))
        .wait_with_output()
        .expect("move ends");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{stdout} {}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_str(stdout.trim()).expect("json");
    let trip = v["axes"][0]["trip"].as_str().unwrap_or_default().to_owned();
    assert!(trip.starts_with("board watchdog"), "{v}");
}
