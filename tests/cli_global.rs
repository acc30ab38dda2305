//! `--config` and `--port` before or after the subcommand reach it, for every subcommand;
//! where they do not apply they are refused, never silently ignored (ignoring them once
//! homed the built-in demo instead of the machine the operator named).

use std::process::{Command, Output};

fn servotty(args: &[&str]) -> Output {
    let state = std::env::temp_dir().join(format!("servotty-global-test-{}", std::process::id()));
    Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(args)
        .env("XDG_STATE_HOME", state)
        .output()
        .expect("runs")
}

fn err(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// A configuration that does not load: every machine command must say so, naming the file.
fn broken() -> (tempfile::TempDir, String) {
    let dir = tempfile::tempdir().expect("tempdir");
    let p = dir.path().join("broken.toml");
    std::fs::write(&p, "[machine\nname = ").expect("write");
    let s = p.display().to_string();
    (dir, s)
}

/// Each machine command, with arguments that would otherwise run on the demo.
const MACHINE_COMMANDS: &[&[&str]] = &[
    &["home", "--yes"],
    &["move", "--to", "x=1", "--yes"],
    &["linktest", "--seconds", "0.1"],
    &["tune", "direction", "x", "--yes"],
    &["cockpit"],
    &["sim", "--pty"],
    &["check"],
];

#[test]
fn config_before_or_after_the_subcommand_is_used() {
    let (_d, path) = broken();
    for cmd in MACHINE_COMMANDS {
        let before: Vec<&str> = ["-c", path.as_str()].iter().chain(cmd.iter()).copied().collect();
        let mut after: Vec<&str> = cmd.to_vec();
        after.extend(["--config", path.as_str()]);
        for args in [before, after] {
            let out = servotty(&args);
            assert_eq!(out.status.code(), Some(2), "{args:?}: {}", err(&out));
            assert!(err(&out).contains("broken.toml"), "{args:?}: {}", err(&out));
        }
    }
    // No subcommand: the cockpit, which reads the file before it needs a terminal.
    let out = servotty(&["-c", &path]);
    assert_eq!(out.status.code(), Some(2), "{}", err(&out));
    assert!(err(&out).contains("broken.toml"), "{}", err(&out));
}

// One printer for every front end: the cockpit and `sim` fail as the headless commands do,
// with the same single `servotty: ` line and the same exit code.
#[test]
fn every_front_end_fails_the_same_way() {
    let (_d, path) = broken();
    let home = servotty(&["-c", &path, "home", "--yes"]);
    assert_eq!(home.status.code(), Some(2), "{}", err(&home));
    for args in [&["-c", &path][..], &["-c", &path, "cockpit"], &["-c", &path, "sim", "--pty"]] {
        let out = servotty(args);
        assert_eq!(out.status.code(), home.status.code(), "{args:?}: {}", err(&out));
        assert_eq!(err(&out), err(&home), "{args:?}");
    }
    assert_eq!(err(&home).lines().count(), 1, "{}", err(&home));
    assert!(err(&home).starts_with("servotty: "), "{}", err(&home));
    // Usage problems of the cockpit and of `sim` are exit 2 with one line too.
    for args in [&["cockpit"][..], &["sim"]] {
        let out = servotty(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", err(&out));
        assert_eq!(err(&out).lines().count(), 1, "{args:?}: {}", err(&out));
        assert!(err(&out).starts_with("servotty: "), "{args:?}: {}", err(&out));
    }
}

#[test]
fn port_before_or_after_the_subcommand_is_used() {
    let dev = "x=/dev/servotty-no-such-port";
    for args in [
        &["--port", dev, "home", "--yes"][..],
        &["home", "--yes", "--port", dev][..],
        &["--port", dev, "move", "--yes", "--to", "x=1"][..],
        &["move", "--to", "x=1", "--yes", "--port", dev][..],
        &["--port", dev, "linktest", "--seconds", "0.1"][..],
        &["linktest", "--seconds", "0.1", "--port", dev][..],
        &["--port", dev, "tune", "direction", "x", "--yes"][..],
        &["tune", "direction", "x", "--yes", "--port", dev][..],
    ] {
        let out = servotty(args);
        assert_eq!(out.status.code(), Some(1), "{args:?}: {}", err(&out));
        assert!(err(&out).contains("/dev/servotty-no-such-port"), "{args:?}: {}", err(&out));
    }
    // The cockpit checks the axis name of an override before it needs a terminal.
    for args in [&["--port", "q=/dev/null"][..], &["cockpit", "--port", "q=/dev/null"][..]] {
        let out = servotty(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", err(&out));
    }
}

#[test]
fn options_that_do_not_apply_are_refused() {
    let (_d, path) = broken();
    for args in [
        &["-c", path.as_str(), "analyze", "step", "x.csv"][..],
        &["analyze", "step", "x.csv", "--config", path.as_str()][..],
        &["--port", "x=/dev/null", "analyze", "step", "x.csv"][..],
        &["--port", "x=/dev/null", "check", "configs/demo-greenhouse.toml"][..],
        &["sim", "--pty", "--port", "x=/dev/null"][..],
        &["-c", path.as_str(), "completions", "bash"][..],
        &["man", "--port", "x=/dev/null"][..],
    ] {
        let out = servotty(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", err(&out));
        assert!(err(&out).contains("does not apply"), "{args:?}: {}", err(&out));
    }
}

#[test]
fn check_takes_the_file_as_argument_or_config() {
    let demo = concat!(env!("CARGO_MANIFEST_DIR"), "/configs/demo-greenhouse.toml");
    for args in [&["check", demo][..], &["-c", demo, "check"][..], &["check", "-c", demo][..]] {
        let out = servotty(args);
        assert_eq!(out.status.code(), Some(0), "{args:?}: {}", err(&out));
    }
    let out = servotty(&["check"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(err(&out).contains("servotty check FILE"), "{}", err(&out));
}

#[test]
fn completions_and_manual_page_come_from_the_definition() {
    let out = servotty(&["completions", "bash"]);
    assert_eq!(out.status.code(), Some(0), "{}", err(&out));
    let s = String::from_utf8_lossy(&out.stdout);
    assert!(s.contains("linktest") && s.contains("--config"), "{s}");
    let out = servotty(&["man"]);
    assert_eq!(out.status.code(), Some(0), "{}", err(&out));
    let s = String::from_utf8_lossy(&out.stdout);
    assert!(s.contains(".TH servotty 1") && s.contains("linktest"), "{s}");
}

#[test]
fn help_fits_80_columns_and_has_examples() {
    for cmd in [
        &[][..],
        &["cockpit"][..],
        &["check"][..],
        &["sim"][..],
        &["move"][..],
        &["home"][..],
        &["tune"][..],
        &["linktest"][..],
        &["analyze"][..],
        &["analyze", "step"][..],
    ] {
        let mut args = cmd.to_vec();
        args.push("--help");
        let out = servotty(&args);
        assert_eq!(out.status.code(), Some(0), "{args:?}");
        let s = String::from_utf8_lossy(&out.stdout);
        for line in s.lines() {
            assert!(line.chars().count() <= 80, "{args:?}: {line:?}");
        }
        assert!(s.contains("Example"), "{args:?}: no example\n{s}");
    }
}

#[test]
fn check_output_fits_80_columns() {
    for f in ["demo-greenhouse.toml", "bench-8-axes.toml", "one-real-axis.toml"] {
        let path = format!("{}/configs/{f}", env!("CARGO_MANIFEST_DIR"));
        let out = servotty(&["check", &path]);
        assert_eq!(out.status.code(), Some(0), "{f}: {}", err(&out));
        let s = String::from_utf8_lossy(&out.stdout);
        assert!(!s.contains("axis(es)"), "{s}");
        for line in s.lines() {
            assert!(line.chars().count() <= 80, "{f}: {line:?}");
        }
    }
}
