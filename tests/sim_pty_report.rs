//! `servotty sim --pty` reports like a board: on SIGTERM or SIGINT it prints one JSON line per
//! axis with what the board counted about its host, then exits 143 or 130. Real binaries over
//! real PTYs, so this polls under a generous deadline and asserts nothing about speed.

use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use servotty::config::MachineConfig;

const DEADLINE: Duration = Duration::from_secs(60);

struct KillOnDrop(Child);

impl Drop for KillOnDrop {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

/// Starts `sim --pty` on the demo machine (watchdog widened: a busy CI machine must not trip
/// it) and returns the process, its stdout lines and the `AXIS=PATH` pairs it served.
fn start_sim(
    dir: &std::path::Path,
) -> (KillOnDrop, std::io::Lines<BufReader<std::process::ChildStdout>>, Vec<String>, String) {
    let mut cfg = MachineConfig::demo().expect("demo");
    for a in &mut cfg.axes {
        a.board.watchdog_ms = 1000;
        a.limits.link_timeout_s = 2.0;
    }
    let cfg_path = dir.join("relaxed.toml");
    std::fs::write(&cfg_path, toml::to_string(&cfg).expect("serialises")).expect("write");
    let cfg_path = cfg_path.to_str().expect("utf-8 path").to_owned();
    let mut sim = KillOnDrop(
        Command::new(env!("CARGO_BIN_EXE_servotty"))
            .args(["sim", "--pty", "--config", &cfg_path])
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .expect("sim starts"),
    );
    let mut lines = BufReader::new(sim.0.stdout.take().expect("stdout")).lines();
    let ports = (0..cfg.axes.len())
        .map(|_| {
            let line = lines.next().expect("a line per axis").expect("utf-8");
            let (axis, path) = line.split_once(' ').expect("AXIS PATH");
            format!("{axis}={path}")
        })
        .collect();
    (sim, lines, ports, cfg_path)
}

fn signal(child: &Child, name: &str) {
    let ok = Command::new("kill")
        .args([format!("-{name}"), child.id().to_string()])
        .status()
        .expect("kill runs")
        .success();
    assert!(ok, "kill -{name}");
}

/// Waits for the process to end under the deadline; its exit code.
fn wait_exit(child: &mut Child) -> Option<i32> {
    let t0 = Instant::now();
    loop {
        if let Some(st) = child.try_wait().expect("wait") {
            return st.code();
        }
        assert!(t0.elapsed() < DEADLINE, "sim did not end after the signal");
        std::thread::sleep(Duration::from_millis(20));
    }
}

fn reports(lines: std::io::Lines<BufReader<std::process::ChildStdout>>) -> Vec<serde_json::Value> {
    lines.map(|l| serde_json::from_str(&l.expect("utf-8")).expect("each line is JSON")).collect()
}

#[test]
fn sigterm_prints_one_json_line_per_axis_with_the_hosts_replies() {
    let dir = tempfile::tempdir().expect("tempdir");
    let (mut sim, lines, ports, cfg) = start_sim(dir.path());
    // A host answers every frame for a moment (linktest keeps the motors off: Stop replies).
    let mut args = vec!["linktest", "--config", &cfg, "--seconds", "1"];
    for p in &ports {
        args.extend(["--port", p]);
    }
    let out = Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(&args)
        .env("XDG_STATE_HOME", dir.path())
        .output()
        .expect("linktest runs");
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    signal(&sim.0, "TERM");
    // After its report it exits as a command a signal ended does: 128 + 15 (IEEE Std
    // 1003.1, Shell Command Language, 2.8.2 "Exit Status for Commands").
    assert_eq!(wait_exit(&mut sim.0), Some(143));
    let r = reports(lines);
    let names: Vec<&str> = r.iter().map(|v| v["axis"].as_str().expect("axis")).collect();
    assert_eq!(names, ["x", "y", "z"]);
    for v in &r {
        let n = |k: &str| v[k].as_u64().unwrap_or_else(|| panic!("{k} in {v}"));
        assert!(n("ticks") > 0, "{v}");
        // Linktest answered for about a second: some replies, never more than ticks.
        assert!(n("host_replies") > 0 && n("host_replies") <= n("ticks"), "{v}");
        assert!(n("late_replies") <= n("host_replies"), "{v}");
        // Stop replies never switch the motor on, so the watchdog has nothing to trip.
        assert_eq!(n("watchdog_trips"), 0, "{v}");
        n("rushed_ticks");
        assert!(v["longest_tick_gap_ms"].as_f64().is_some(), "{v}");
        assert!(v["longest_reply_gap_ms"].as_f64().is_some_and(|g| g >= 0.0), "{v}");
    }
}

#[test]
fn sigint_reports_too_and_an_unanswered_board_counts_no_replies() {
    let dir = tempfile::tempdir().expect("tempdir");
    let (mut sim, lines, _ports, _cfg) = start_sim(dir.path());
    signal(&sim.0, "INT");
    // 128 + 2, as above.
    assert_eq!(wait_exit(&mut sim.0), Some(130));
    let r = reports(lines);
    assert_eq!(r.len(), 3, "{r:?}");
    for v in &r {
        assert_eq!(v["host_replies"], 0, "{v}");
        assert_eq!(v["longest_reply_gap_ms"], 0.0, "{v}");
    }
}
