//! Named positions ("spots"): the demo's `[spots]` table, `move --to @name`, the checks
//! against the soft limits, and storing a position in the configuration file with its
//! comments kept. Servotty's own feature: no outside source; the demo numbers are invented.

use std::time::Duration;

use servotty::cli::move_cmd::{resolve, run_moves, Destination};
use servotty::cli::Target;
use servotty::config::{MachineConfig, DEMO_CONFIG};
use servotty::engine::Machine;
use servotty::spots;

fn demo() -> MachineConfig {
    MachineConfig::demo().expect("demo")
}

fn to(items: &[&str]) -> Vec<Destination> {
    items.iter().map(|s| s.parse().expect("parses")).collect()
}

#[test]
fn a_spot_gives_targets_for_the_axes_it_names() {
    let cfg = demo();
    let t = resolve(&cfg, &to(&["@tray2"])).expect("resolves");
    assert_eq!(
        t,
        vec![
            Target { axis: "x".into(), position: 550.0 },
            Target { axis: "y".into(), position: 300.0 }
        ]
    );
    // A later item for the same axis wins.
    let t = resolve(&cfg, &to(&["@park", "z=-20"])).expect("resolves");
    assert_eq!(t.iter().find(|t| t.axis == "z").map(|t| t.position), Some(-20.0));
    assert_eq!(t.len(), 3);
}

#[test]
fn unknown_spots_and_bad_names_are_clear_errors() {
    let err = resolve(&demo(), &to(&["@tray9"])).expect_err("no such spot");
    assert!(err.contains("tray9") && err.contains("tray1"), "{err}");
    assert!("@".parse::<Destination>().is_err());
    assert!("@a b".parse::<Destination>().is_err());
}

#[test]
fn a_spot_outside_the_soft_limits_is_a_config_error_with_its_line() {
    let text = DEMO_CONFIG.replace("tray3 = { x = 900.0", "tray3 = { x = 1900.0");
    let err = MachineConfig::from_toml_str(&text, "demo.toml").expect_err("refused");
    let msg = err.to_string();
    assert!(msg.contains("spots") && msg.contains("soft limits"), "{msg}");
    let line = text.lines().position(|l| l.starts_with("tray3")).expect("line") + 1;
    assert!(msg.contains(&format!(":{line}:")), "{msg} (line {line})");
    let text = DEMO_CONFIG.replace("probe_depth = { z", "probe_depth = { w");
    let msg = MachineConfig::from_toml_str(&text, "demo.toml").expect_err("no axis w").to_string();
    assert!(msg.contains("no axis called \"w\""), "{msg}");
}

#[test]
fn storing_a_position_keeps_every_other_byte_and_the_result_loads() {
    let pos = vec![("x".to_owned(), 123.456_789), ("y".to_owned(), 42.0)];
    let out = spots::store_text(DEMO_CONFIG, "demo", "seedbed", &pos).expect("stored");
    let cfg = MachineConfig::from_toml_str(&out, "demo").expect("loads");
    let s = cfg.spots.get("seedbed").expect("new spot");
    // Rounded to the encoder's resolution (x: 12 counts/mm → 2 decimals).
    assert_eq!(s.get("x"), Some(&123.46));
    // Everything before is unchanged, comments included.
    assert!(out.starts_with(DEMO_CONFIG.trim_end()), "only an addition");
    // Replacing an existing spot keeps its trailing comment and touches only its line.
    let out = spots::store_text(DEMO_CONFIG, "demo", "tray1", &pos).expect("replaced");
    let changed: Vec<(&str, &str)> =
        DEMO_CONFIG.lines().zip(out.lines()).filter(|(a, b)| a != b).collect();
    assert_eq!(changed.len(), 1, "{changed:?}");
    assert!(changed[0].1.contains("# over the middle of tray 1"), "{changed:?}");
    // Refusals leave nothing half done.
    let far = vec![("x".to_owned(), 5000.0)];
    assert!(spots::store_text(DEMO_CONFIG, "demo", "far", &far).is_err());
    assert!(spots::store_text(DEMO_CONFIG, "demo", "no good", &pos).is_err());
}

#[test]
fn storing_into_a_file_is_atomic_and_keeps_a_backup() {
    let dir = tempfile::tempdir().expect("tmp");
    let path = dir.path().join("gantry.toml");
    std::fs::write(&path, DEMO_CONFIG).expect("write");
    let backup = spots::store(&path, "bench", &[("z".to_owned(), -12.5)]).expect("stored");
    let bak = backup.expect("backup kept");
    assert_eq!(std::fs::read_to_string(bak).expect("bak"), DEMO_CONFIG);
    let cfg = MachineConfig::load(&path).expect("loads");
    assert_eq!(cfg.spots.get("bench").and_then(|s| s.get("z")), Some(&-12.5));
    // No temporary files left behind.
    let names: Vec<_> = std::fs::read_dir(dir.path())
        .expect("dir")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names.len(), 2, "{names:?}");
}

#[tokio::test(start_paused = true)]
async fn move_to_a_spot_on_the_demo_machine() {
    let cfg = demo();
    let m = Machine::start(&cfg, &[]).expect("starts");
    let h = m.handle();
    assert!(h.wait_linked(Duration::from_secs(2)).await.is_empty());
    h.home(None).await.expect("homes");
    let targets = resolve(&cfg, &to(&["@tray1"])).expect("resolves");
    let out = run_moves(&h, &targets).await.expect("runs");
    assert!(out.ok, "{out:#?}");
    for a in &out.axes {
        assert!((a.final_position - a.target).abs() <= 0.1, "{a:#?}");
    }
    m.shutdown().await;
}
