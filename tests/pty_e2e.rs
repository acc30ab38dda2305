//! End to end over real pseudo-terminals: simulated board ↔ engine through tty devices, in
//! process and with the real binaries.
//!
//! These run in real time (a PTY cannot run under simulated time), so they poll for a
//! condition under a generous deadline and assert nothing about speed. Their configuration
//! widens the link timeout and watchdog so that a busy CI machine cannot starve the link into
//! a trip.

use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Stdio};
use std::time::Duration;

use servotty::config::MachineConfig;
use servotty::engine::{AxisCommand, AxisState, Machine, PortOverride};
use servotty::sim::board::SimBoard;

const DEADLINE: Duration = Duration::from_secs(60);

/// The demo with generous link timing (tests on a shared machine, not a real rig).
fn relaxed_demo() -> MachineConfig {
    let mut cfg = MachineConfig::demo().expect("demo");
    for a in &mut cfg.axes {
        a.board.watchdog_ms = 1000;
        a.limits.link_timeout_s = 2.0;
    }
    cfg
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn engine_moves_a_simulated_board_over_a_pty() {
    let cfg = relaxed_demo();
    let servotty::config::TransportConfig::Sim(sim) = &cfg.axes[0].transport else {
        panic!("x is simulated")
    };
    let (board_end, host_end) = tokio_serial::SerialStream::pair().expect("pty pair");
    let path = serialport::SerialPort::name(&host_end).expect("pty path");
    drop(host_end);
    let board = SimBoard::new(&sim.plant, &sim.faults, 7).persistent();
    let view = board.handle();
    tokio::spawn(board.run(board_end));

    let ports = [PortOverride { axis: "x".into(), device: path.clone() }];
    let m = Machine::start(&cfg, &ports).expect("starts");
    let h = m.handle();
    assert!(h.wait_linked(DEADLINE).await.is_empty(), "x links over {path}");
    tokio::time::timeout(DEADLINE, h.home(Some(&["x".to_owned()])))
        .await
        .expect("homing in time")
        .expect("homes");
    let x = h.axis("x").expect("x");
    x.send(AxisCommand::MoveTo(60.0)).await.expect("move");
    let mut rx = x.watch();
    tokio::time::timeout(DEADLINE, rx.wait_for(|s| s.moves_done > 0 || s.trip.is_some()))
        .await
        .expect("settles in time")
        .expect("snapshot");
    let s = x.snapshot();
    assert_eq!(s.state, AxisState::Steady, "{s:#?}");
    assert!((s.position - 60.0).abs() <= cfg.axes[0].motion.in_position_band, "{s:#?}");
    assert!(s.link.frames > 100 && s.link.bad_frames == 0, "{:?}", s.link);
    assert!(view.view().motor_on);
    m.shutdown().await;
    // The engine's Stop reached the board over the tty.
    let mut off = false;
    for _ in 0..200 {
        if !view.view().motor_on {
            off = true;
            break;
        }
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
    assert!(off, "motor off after shutdown: {:#?}", view.view());
}

struct KillOnDrop(Child);

impl Drop for KillOnDrop {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

#[test]
fn binaries_sim_pty_and_move_talk_over_ttys() {
    let bin = env!("CARGO_BIN_EXE_servotty");
    let dir = tempfile::tempdir().expect("tempdir");
    let cfg_path = dir.path().join("relaxed.toml");
    let text = toml::to_string(&relaxed_demo()).expect("serialises");
    std::fs::write(&cfg_path, text).expect("write config");
    let cfg = cfg_path.to_str().expect("utf-8 path");
    let mut sim = KillOnDrop(
        Command::new(bin)
            .args(["sim", "--pty", "--config", cfg])
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .expect("sim starts"),
    );
    let stdout = sim.0.stdout.take().expect("stdout");
    let mut lines = BufReader::new(stdout).lines();
    let mut ports = Vec::new();
    for _ in 0..3 {
        let line = lines.next().expect("a line per axis").expect("utf-8");
        let (axis, path) = line.split_once(' ').expect("AXIS PATH");
        assert!(path.starts_with("/dev/"), "{line}");
        ports.push(format!("{axis}={path}"));
    }
    let mut args =
        vec!["move", "--config", cfg, "--home", "--to", "x=40,y=30,z=-10", "--json", "--yes"];
    for p in &ports {
        args.push("--port");
        args.push(p);
    }
    let out = Command::new(bin)
        .args(&args)
        .env("XDG_STATE_HOME", dir.path())
        .output()
        .expect("move runs");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(v["ok"], true, "{v}");
    for (a, target) in v["axes"].as_array().expect("axes").iter().zip([40.0, 30.0, -10.0]) {
        let f = a["final"].as_f64().expect("final");
        assert!((f - target).abs() <= 0.1, "{a}");
    }
}
