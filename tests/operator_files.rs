//! What an operator's scripts and spreadsheets read: every `--json` output carries numbers
//! rounded to what they measure, and a step record opens in any CSV reader (one header row
//! with units, numbers only, a JSON sidecar with the metadata, mode 0644).
//!
//! The real binary on the demo gantry (configs/demo-greenhouse.toml, invented numbers); real
//! time, nothing asserted about speed. The rounding rule is common practice, no source: a
//! position is worth the digits one encoder count resolves (the demo's X axis has 24 counts
//! per mm, so 0.01 mm; Z 240, so 0.001 mm), a duration in seconds the microsecond, a
//! percentage 0.01, and any other number at most 6 significant digits.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use servotty::config::MachineConfig;

/// Runs the binary on the demo with its watchdog and link timeout widened (written into
/// `state`): a busy shared machine must not trip it; the scales are the demo's.
fn servotty(args: &[&str], state: &Path) -> Output {
    let cfg_path = state.join("relaxed-demo.toml");
    if !cfg_path.exists() {
        let mut cfg = MachineConfig::demo().expect("demo");
        for a in &mut cfg.axes {
            a.board.watchdog_ms = 1000;
            a.limits.link_timeout_s = 2.0;
        }
        std::fs::write(&cfg_path, toml::to_string(&cfg).expect("serialises")).expect("write");
    }
    let mut full: Vec<&str> = args.to_vec();
    if args.first() != Some(&"analyze") {
        full.extend(["--config", cfg_path.to_str().expect("utf-8")]);
    }
    Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(&full)
        .env("XDG_STATE_HOME", state)
        .output()
        .expect("runs")
}

fn err(o: &Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stderr), String::from_utf8_lossy(&o.stdout))
}

fn json(o: &Output) -> serde_json::Value {
    serde_json::from_slice(&o.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&o.stdout)))
}

/// Decimal places and significant digits of a number as JSON prints it (`1.5e-5` included).
fn digits(text: &str) -> (i32, i32) {
    let (mantissa, exp) = match text.split_once(['e', 'E']) {
        Some((m, e)) => (m, e.parse::<i32>().expect("exponent")),
        None => (text, 0),
    };
    let m = mantissa.trim_start_matches('-');
    let (int, frac) = m.split_once('.').unwrap_or((m, ""));
    let frac = frac.trim_end_matches('0');
    let all = format!("{int}{frac}");
    let sig = all.trim_start_matches('0').len() as i32;
    (frac.len() as i32 - exp, sig)
}

/// Decimal places one count needs: ⌈log10(counts per unit)⌉ (0.0417 mm → 2 places).
fn places(counts_per_unit: f64) -> i32 {
    counts_per_unit.log10().ceil() as i32
}

/// Every float in `v` against the rule of the module docs; `axis` is the axis of the nearest
/// enclosing object (or the command's).
fn check_floats(v: &serde_json::Value, key: &str, axis: &str, cfg: &MachineConfig, at: &str) {
    match v {
        serde_json::Value::Object(m) => {
            let axis = m.get("axis").and_then(|a| a.as_str()).unwrap_or(axis);
            for (k, child) in m {
                check_floats(child, k, axis, cfg, &format!("{at}.{k}"));
            }
        }
        serde_json::Value::Array(items) => {
            for (i, item) in items.iter().enumerate() {
                check_floats(item, key, axis, cfg, &format!("{at}[{i}]"));
            }
        }
        serde_json::Value::Number(n) if n.is_f64() => {
            let (dec, sig) = digits(&n.to_string());
            assert!(sig <= 6, "{at} = {n}: more than 6 significant digits");
            let length = ["position", "target", "final", "error", "moved", "step_", "travel"]
                .iter()
                .any(|w| key.contains(w))
                && !key.ends_with("_pct")
                && !key.ends_with("_s");
            if let Some(a) = cfg.axis(axis).filter(|_| length) {
                let p = places(a.scale.counts_per_unit);
                assert!(dec <= p, "{at} = {n}: more than {p} decimals for axis {axis}");
            }
            if key.ends_with("_s") && !key.ends_with("_per_s") {
                assert!(dec <= 6, "{at} = {n}: finer than a microsecond");
            }
            if key.ends_with("_pct") {
                assert!(dec <= 2, "{at} = {n}: finer than 0.01 %");
            }
            assert!(!n.to_string().starts_with("-0.0") || n.as_f64() != Some(0.0), "{at}: -0");
        }
        _ => {}
    }
}

fn check(out: &Output, what: &str, axis: &str, cfg: &MachineConfig) -> serde_json::Value {
    let v = json(out);
    check_floats(&v, "", axis, cfg, what);
    v
}

#[test]
fn json_outputs_are_rounded_to_what_they_measure() {
    let cfg = MachineConfig::demo().expect("demo");
    let dir = tempfile::tempdir().expect("tempdir");
    let st = dir.path();
    // Commands that move run in real time on a shared machine: a trip or a bound under load
    // is a failure with its JSON object, which must be rounded just the same.
    let moved = |out: &Output| assert!(matches!(out.status.code(), Some(0 | 1)), "{}", err(out));
    let out = servotty(&["home", "--yes", "--json"], st);
    moved(&out);
    check(&out, "home", "", &cfg);
    let out = servotty(&["move", "--home", "--to", "x=300.3,y=100", "--yes", "--json"], st);
    moved(&out);
    check(&out, "move", "", &cfg);
    let out = servotty(&["linktest", "--seconds", "0.5", "--json"], st);
    assert_eq!(out.status.code(), Some(0), "{}", err(&out));
    check(&out, "linktest", "", &cfg);
    // 229 counts is 9.541666… mm: printed to the count's 0.01 mm.
    let out = servotty(&["tune", "direction", "x", "--yes", "--json"], st);
    moved(&out);
    check(&out, "tune direction", "x", &cfg);
    let out = servotty(&["tune", "identify", "x", "--yes", "--json"], st);
    moved(&out);
    check(&out, "tune identify", "x", &cfg);
    let (csv, v) = step_record(st);
    check_floats(&v, "", "x", &cfg, "tune step");
    // `analyze step` on the record: its sidecar gives the axis's resolution.
    let out = servotty(&["analyze", "step", csv.to_str().expect("utf-8"), "--json"], st);
    assert_eq!(out.status.code(), Some(0), "{}", err(&out));
    let a = check(&out, "analyze step", "x", &cfg);
    assert_eq!(a["overshoot_pct"], v["result"]["metrics"]["overshoot_pct"], "{a}\n{v}");
    // A failure is a JSON object too, with no unrounded number in its message.
    let out = servotty(&["move", "--to", "z=20", "--yes", "--json"], st);
    assert_eq!(out.status.code(), Some(1), "{}", err(&out));
    assert_eq!(check(&out, "move failure", "", &cfg)["ok"], false);
}

/// The step record a `tune step` leaves, as the files it wrote.
fn step_record(dir: &Path) -> (PathBuf, serde_json::Value) {
    let steps = dir.join("steps");
    let out = servotty(
        &[
            "tune",
            "step",
            "x",
            "--home",
            "--yes",
            "--json",
            "--out",
            steps.to_str().expect("utf-8"),
        ],
        dir,
    );
    assert_eq!(out.status.code(), Some(0), "{}", err(&out));
    let v = json(&out);
    (PathBuf::from(v["result"]["csv"].as_str().expect("csv path")), v)
}

#[test]
fn a_step_record_opens_in_any_csv_reader_with_its_metadata_beside_it() {
    let dir = tempfile::tempdir().expect("tempdir");
    let (csv_path, v) = step_record(dir.path());
    // The csv crate, as any general reader: one header row with units, numbers only.
    let mut rdr = csv::Reader::from_path(&csv_path).expect("opens");
    let header: Vec<String> = rdr.headers().expect("header").iter().map(str::to_owned).collect();
    assert_eq!(header, ["t_s", "target_mm", "position_mm", "duty_pct"]);
    let mut rows = 0;
    for rec in rdr.records() {
        let rec = rec.expect("a record");
        assert_eq!(rec.len(), 4);
        for f in &rec {
            let x: f64 = f.parse().unwrap_or_else(|_| panic!("{f:?} in {rec:?}"));
            assert!(x.is_finite());
            assert!(digits(f).0 <= 6, "{f}: more decimals than the capture format");
        }
        rows += 1;
    }
    assert!(rows > 100, "{rows} rows");
    // The sidecar: what the CSV cannot say in numbers.
    let meta: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(csv_path.with_extension("json")).expect("sidecar"),
    )
    .expect("sidecar JSON");
    assert_eq!(meta["kind"], "servotty step record", "{meta}");
    assert_eq!(meta["axis"], "x");
    assert_eq!(meta["unit"], "mm");
    assert_eq!(meta["counts_per_unit"], 24.0);
    assert!(meta["controller"]["kp"].as_f64().is_some(), "{meta}");
    assert!(meta["columns"]["position_mm"].as_str().is_some(), "{meta}");
    assert!(meta["metrics"]["overshoot_pct"].as_f64().is_some(), "{meta}");
    assert!(v["text"].as_str().is_some_and(|t| t.contains(".json")), "{v}");
    // Readable by everyone, as captures are.
    #[cfg(unix)]
    for p in [&csv_path, &csv_path.with_extension("json")] {
        use std::os::unix::fs::PermissionsExt as _;
        let mode = std::fs::metadata(p).expect("stat").permissions().mode() & 0o777;
        assert_eq!(mode, 0o644, "{}", p.display());
    }
    // Python's csv module: a reader that shares no code with ours. Skipped locally without
    // python3; under CI=true (where .ci/run installs it) its absence fails.
    let script = "import csv, sys\n\
        rows = list(csv.DictReader(open(sys.argv[1], newline='')))\n\
        assert rows and list(rows[0]) == ['t_s', 'target_mm', 'position_mm', 'duty_pct'], rows[:1]\n\
        [float(r[k]) for r in rows for k in r]\n\
        print(len(rows))\n";
    match Command::new("python3").arg("-c").arg(script).arg(&csv_path).output() {
        Ok(out) => {
            assert!(out.status.success(), "python3 csv: {}", err(&out));
            let n: usize = String::from_utf8_lossy(&out.stdout).trim().parse().expect("a count");
            assert_eq!(n, rows);
        }
        Err(_) => {
            assert!(std::env::var("CI").as_deref() != Ok("true"), "CI=true but no python3");
            eprintln!("python3 is not installed: skipping the Python csv reader check")
        }
    }
}

// `analyze trip --json` on a real capture: X's motor leads swapped (homing declared, method
// none), so the move runs away and trips; the diagnosis's numbers are rounded as the rest.
#[test]
fn a_trip_diagnosis_in_json_is_rounded_too() {
    use servotty::config::{HomingMethod, TransportConfig};
    let dir = tempfile::tempdir().expect("tempdir");
    let mut cfg = MachineConfig::demo().expect("demo");
    for a in &mut cfg.axes {
        a.board.watchdog_ms = 1000;
        a.limits.link_timeout_s = 2.0;
    }
    cfg.axes[0].homing.method = HomingMethod::None;
    let TransportConfig::Sim(sim) = &mut cfg.axes[0].transport else {
        panic!("demo x is simulated")
    };
    sim.faults.reversed_motor = true;
    let captures = dir.path().join("captures");
    cfg.machine.captures_dir = Some(captures.clone());
    let cfg_path = dir.path().join("reversed-x.toml");
    std::fs::write(&cfg_path, toml::to_string(&cfg).expect("serialises")).expect("write");
    let out = Command::new(env!("CARGO_BIN_EXE_servotty"))
        .args(["move", "--home", "--to", "x=600", "--yes", "--json", "--config"])
        .arg(&cfg_path)
        .env("XDG_STATE_HOME", dir.path())
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(1), "{}", err(&out));
    check(&out, "tripped move", "", &cfg);
    let capture = std::fs::read_dir(&captures)
        .expect("captures written")
        .filter_map(Result::ok)
        .map(|e| e.path())
        .find(|p| p.extension().is_some_and(|x| x == "csv"))
        .expect("a capture");
    let out =
        servotty(&["analyze", "trip", capture.to_str().expect("utf-8"), "--json"], dir.path());
    assert_eq!(out.status.code(), Some(0), "{}", err(&out));
    check(&out, "analyze trip", "x", &cfg);
}
