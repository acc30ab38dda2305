//! The real binary on good and bad input: exit codes and messages a person can act on.

use std::path::PathBuf;
use std::process::{Command, Output};

fn servotty(args: &[&str]) -> Output {
    // Event logs and captures go to a throwaway state folder, not the user's.
    let state = std::env::temp_dir().join(format!("servotty-cli-test-{}", std::process::id()));
    Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(args)
        .env("XDG_STATE_HOME", state)
        .output()
        .expect("runs")
}

fn repo(p: &str) -> String {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(p).display().to_string()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

#[test]
fn every_shipped_config_checks() {
    for f in
        ["configs/demo-greenhouse.toml", "configs/bench-8-axes.toml", "configs/one-real-axis.toml"]
    {
        let out = servotty(&["check", &repo(f)]);
        assert_eq!(out.status.code(), Some(0), "{f}: {}", text(&out.stderr));
        assert!(text(&out.stdout).contains("axis"), "{f}");
    }
}

#[test]
fn demo_check_lists_each_axis() {
    let out = servotty(&["check", &repo("configs/demo-greenhouse.toml")]);
    let s = text(&out.stdout);
    for name in ["x ", "y ", "z "] {
        assert!(s.contains(&format!("axis {name}")), "{s}");
    }
}

fn write_tmp(name: &str, body: &str) -> (tempfile::TempDir, String) {
    let dir = tempfile::tempdir().expect("tempdir");
    let p = dir.path().join(name);
    std::fs::write(&p, body).expect("write");
    let s = p.display().to_string();
    (dir, s)
}

fn demo_text() -> String {
    std::fs::read_to_string(repo("configs/demo-greenhouse.toml")).expect("demo")
}

#[test]
fn unknown_key_names_file_line_column_and_key() {
    let body = demo_text().replacen("stall_timeout_s = 0.5", "stall_timout_s = 0.5", 1);
    let line = body.lines().position(|l| l.starts_with("stall_timout_s")).expect("line") + 1;
    let (_d, path) = write_tmp("typo.toml", &body);
    let out = servotty(&["check", &path]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains(&format!("{path}:{line}:1")), "{err}");
    assert!(err.contains("stall_timout_s"), "{err}");
    assert!(err.contains("expected"), "{err}");
}

#[test]
fn wrong_type_is_located() {
    let body = demo_text().replacen("max_velocity = 180.0", "max_velocity = \"fast\"", 1);
    let line = body.lines().position(|l| l.contains("\"fast\"")).expect("line") + 1;
    let (_d, path) = write_tmp("type.toml", &body);
    let out = servotty(&["check", &path]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains(&format!("{path}:{line}:")), "{err}");
    // Words, not the parser's type names.
    assert!(err.contains("expected a number") && !err.contains("f64"), "{err}");
}

#[test]
fn inverted_soft_limits_are_located_at_the_key() {
    let body = demo_text().replacen("soft_max = 600.0", "soft_max = -10.0", 1);
    let line = body.lines().position(|l| l.starts_with("soft_max = -10.0")).expect("line") + 1;
    let (_d, path) = write_tmp("limits.toml", &body);
    let out = servotty(&["check", &path]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains(&format!("{path}:{line}:1")), "{err}");
    assert!(err.contains("\"y\"") && err.contains("limits.soft_max"), "{err}");
}

#[test]
fn missing_file_and_garbage_are_errors_not_panics() {
    let out = servotty(&["check", "/nonexistent/servotty.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(text(&out.stderr).contains("/nonexistent/servotty.toml"));
    let (_d, path) = write_tmp("garbage.toml", "\u{0}\u{1}[[[not toml");
    let out = servotty(&["check", &path]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
}

#[test]
fn move_to_unknown_axis_is_a_usage_error() {
    let out = servotty(&["move", "--to", "w=10"]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    assert!(text(&out.stderr).contains("w"), "{}", text(&out.stderr));
    let out = servotty(&["move", "--to", "x=ten"]);
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn port_override_for_unknown_axis_is_a_usage_error() {
    let out = servotty(&["linktest", "--port", "q=/dev/null", "--seconds", "1"]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    assert!(text(&out.stderr).contains("no axis called"), "{}", text(&out.stderr));
}

#[test]
fn move_before_homing_is_refused_with_a_reason() {
    let out = servotty(&["move", "--to", "x=50", "--yes"]);
    assert_eq!(out.status.code(), Some(1));
    assert!(text(&out.stderr).contains("not homed"), "{}", text(&out.stderr));
}

#[test]
fn home_prints_json_for_every_axis() {
    let out = servotty(&["home", "--json", "--yes"]);
    assert_eq!(out.status.code(), Some(0), "{}{}", text(&out.stdout), text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(v["ok"], true);
    let axes = v["axes"].as_array().expect("axes");
    assert_eq!(axes.len(), 3);
    assert!(axes.iter().all(|a| a["homed"] == true && a["trip"].is_null()), "{v}");
}

#[test]
fn move_on_the_simulated_demo_prints_json() {
    let out = servotty(&["move", "--home", "--to", "x=50,z=-20", "--json", "--yes"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(v["ok"], true);
    let axes = v["axes"].as_array().expect("axes");
    assert_eq!(axes.len(), 2);
    assert_eq!(axes[0]["axis"], "x");
    assert!((axes[0]["final"].as_f64().expect("final") - 50.0).abs() <= 0.1);
    assert!(axes[0]["trip"].is_null());
}

#[test]
fn commands_that_move_refuse_without_yes_and_a_terminal() {
    // With no terminal to ask on (stdin is not one here), nothing moves without --yes.
    for args in [&["tune", "direction", "x"][..], &["home"][..], &["move", "--to", "x=5"][..]] {
        let out = servotty(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = text(&out.stderr);
        assert!(err.contains("nothing moved") && err.contains("--yes"), "{args:?}: {err}");
    }
    let err = text(&servotty(&["tune", "direction", "x"]).stderr);
    assert!(err.contains("enables axis x, which will move up to"), "{err}");
}

#[test]
fn tune_direction_and_identify_on_the_demo() {
    let out = servotty(&["tune", "direction", "x", "--yes", "--json"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(v["ok"], true, "{v}");
    assert!(v["result"]["counts"].as_f64().expect("counts") > 3.0, "{v}");

    let out = servotty(&["tune", "identify", "x", "--yes", "--json"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    // The demo X axis's true velocity gain follows from its (invented) motor constants:
    // K = supply/100 · Kt/(R·b + Kt·Ke) · r·1000/N with r = 40 mm/(2π), N = 15
    // (University of Michigan Control Tutorials, "DC Motor Speed: System Modeling").
    let (kt, ke, r_ohm, b) = (0.02_f64, 0.02_f64, 2.0_f64, 1.0e-6_f64);
    let k_true = 12.0 / 100.0 * kt / (r_ohm * b + kt * ke) * (40.0 / std::f64::consts::TAU) / 15.0;
    let k = v["result"]["model"]["gain"].as_f64().expect("gain");
    assert!((k / k_true - 1.0).abs() < 0.05, "identified {k}, true {k_true}");
    assert!(v["proposed"].as_str().expect("lines").contains("kp = "), "{v}");
}

#[test]
fn a_missing_serial_device_is_named_with_what_to_do() {
    let out = servotty(&["home", "--yes", "--port", "x=/dev/servotty-no-such-port"]);
    assert_eq!(out.status.code(), Some(1));
    let err = text(&out.stderr);
    assert!(err.contains("/dev/servotty-no-such-port") && err.contains("no such device"), "{err}");
}

#[test]
fn devices_that_are_not_serial_ports_say_where_to_look() {
    for dev in ["/dev/null", "/tmp"] {
        let out = servotty(&["home", "--yes", "--port", &format!("x={dev}")]);
        assert_eq!(out.status.code(), Some(1));
        let err = text(&out.stderr);
        assert!(err.contains("not a serial device") && err.contains("/dev/serial/by-id/"), "{err}");
        assert!(!err.contains("typewriter") && !err.contains("x: x:"), "{err}");
    }
    let out = servotty(&["home", "--yes", "--port", "x=/dev/servotty-no-such-port"]);
    assert!(text(&out.stderr).contains("/dev/serial/by-id/"), "{}", text(&out.stderr));
}

#[test]
fn every_json_command_prints_an_object_on_failure() {
    for args in [
        &["move", "--to", "x=50", "--json", "--yes"][..],
        &["move", "--to", "w=50", "--json"][..],
        &["linktest", "--seconds", "0.2", "--json", "--port", "x=/dev/null"][..],
        &["tune", "direction", "x", "--json"][..],
        &["home", "--json", "--yes", "--port", "x=/dev/null"][..],
        &["home", "--json"][..],
        &["analyze", "step", "/nonexistent/step.csv", "--json"][..],
    ] {
        let out = servotty(args);
        assert_ne!(out.status.code(), Some(0), "{args:?}");
        let v: serde_json::Value = serde_json::from_slice(&out.stdout)
            .unwrap_or_else(|e| panic!("{args:?}: {e}: {:?}", text(&out.stdout)));
        assert_eq!(v["ok"], false, "{args:?}: {v}");
        assert!(v["error"].is_string(), "{args:?}: {v}");
    }
}

#[test]
fn a_closed_output_pipe_is_a_quiet_exit() {
    use std::io::Read as _;
    use std::process::Stdio;
    let mut child = Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(["man"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("runs");
    // Close our end before it writes: its write then fails with a broken pipe.
    drop(child.stdout.take());
    let status = child.wait().expect("waits");
    let mut err = String::new();
    child.stderr.take().expect("stderr").read_to_string(&mut err).expect("reads");
    assert_eq!(status.code(), Some(0), "{err}");
    assert!(err.is_empty(), "{err}");
}

#[test]
fn linktest_json_keys_are_the_table_words() {
    let out = servotty(&["linktest", "--seconds", "0.3", "--json"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    let a = &v["axes"][0];
    assert!(a["bad"].is_u64() && a["missed"].is_u64(), "{v}");
    let out = servotty(&["linktest", "--seconds", "0.3"]);
    let table = text(&out.stdout);
    let header = table.lines().next().expect("header");
    assert!(header.contains("bad") && header.contains("missed"), "{table}");
}

#[test]
fn analyze_step_never_mixes_the_axes_of_a_capture() {
    // A capture-shaped file: one time base, every axis's columns with units.
    let mut body =
        String::from("t_s,x_target_mm,x_position_mm,x_duty_pct,y_target_mm,y_position_mm\n");
    for k in 0..200 {
        let t = f64::from(k) * 0.005;
        let target = if t >= 0.1 { 5.0 } else { 0.0 };
        let x = if t >= 0.1 { 5.0 * (1.0 - (-(t - 0.1) / 0.05).exp()) } else { 0.0 };
        body.push_str(&format!("{t},{target},{x},10,{},{}\n", 300.0, 240.0 + t));
    }
    let (_d, path) = write_tmp("capture.csv", &body);
    let out = servotty(&["analyze", "step", &path]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stdout));
    assert!(text(&out.stderr).contains("give --axis"), "{}", text(&out.stderr));
    let out = servotty(&["analyze", "step", &path, "--axis", "x", "--json"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(v["step_to"], 5.0, "x's own columns, not y's: {v}");
    // First-order response: 10–90 % rise time = τ·ln 9 (Ogata, Modern Control Engineering,
    // 5th ed., §5-2; from memory), here τ = 0.05 s, to within one 5 ms sample.
    let rise = v["rise_s"].as_f64().expect("rise");
    assert!((rise - 0.05 * 9f64.ln()).abs() < 0.005, "{v}");
    let out = servotty(&["analyze", "step", &path, "--axis", "q"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(text(&out.stderr).contains("no such axis"), "{}", text(&out.stderr));
}

#[test]
fn old_homing_key_names_still_read_with_a_warning_naming_the_new_key() {
    let body = demo_text().replacen("seek_speed", "search_velocity", 1).replacen(
        "home_sequence",
        "homing_order",
        1,
    );
    assert!(body.contains("search_velocity") && body.contains("homing_order"));
    let (_d, path) = write_tmp("old-names.toml", &body);
    let out = servotty(&["check", &path]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let err = text(&out.stderr);
    assert!(
        err.contains("homing.search_velocity is now") && err.contains("homing.seek_speed"),
        "{err}"
    );
    assert!(err.contains("machine.homing_order is now machine.home_sequence"), "{err}");
    // The new names give no warning.
    let out = servotty(&["check", &repo("configs/demo-greenhouse.toml")]);
    assert!(!text(&out.stderr).contains("warning"), "{}", text(&out.stderr));
}
