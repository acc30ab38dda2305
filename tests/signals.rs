//! The real binary under SIGINT, SIGTERM and SIGHUP: a headless `move` stops, turns the
//! motors off through its normal shutdown, says so on stderr and in the event log, and exits
//! 128 + the signal number (the POSIX shell's convention, IEEE Std 1003.1 §2.8.2).
//!
//! Real time (a real process); the test polls for conditions under generous deadlines.

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn wait_until(deadline: Duration, mut f: impl FnMut() -> bool) -> bool {
    let end = Instant::now() + deadline;
    while Instant::now() < end {
        if f() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    false
}

fn log_text(state: &Path) -> String {
    std::fs::read_to_string(state.join("servotty/events.jsonl")).unwrap_or_default()
}

fn interrupt_a_move(signal: &str, code: i32) {
    let state = tempfile::tempdir().expect("tempdir");
    let mut child = Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(["move", "--home", "--to", "x=1000", "--yes"])
        .env("XDG_STATE_HOME", state.path())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("starts");
    // The handlers are installed before the machine starts; once homing has begun, the
    // motors are on.
    let homing = wait_until(Duration::from_secs(30), || log_text(state.path()).contains("homing"));
    if !homing {
        let _ = child.kill();
        panic!("the move never started homing: {}", log_text(state.path()));
    }
    let st = Command::new("kill")
        .args(["-s", signal, &child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(st.success());
    let out = child.wait_with_output().expect("ends");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(code), "SIG{signal}: {:?} {stderr}", out.status);
    assert!(stderr.contains(&format!("interrupted by SIG{signal}; motors off")), "{stderr}");
    let log = log_text(state.path());
    assert!(
        log.lines().any(|l| l.contains("\"event\":\"interrupted\"")
            && l.contains(&format!("\"signal\":\"SIG{signal}\""))),
        "{log}"
    );
}

#[test]
fn sigterm_stops_a_move_with_143() {
    interrupt_a_move("TERM", 143);
}

#[test]
fn sighup_stops_a_move_with_129() {
    interrupt_a_move("HUP", 129);
}

#[test]
fn sigint_stops_a_move_with_130() {
    interrupt_a_move("INT", 130);
}
