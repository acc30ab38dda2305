//! Saving gains into a configuration file: only the changed values change, comments and
//! layout stay, the previous file is kept as `.bak`, and a value the loader would refuse is
//! never written.

use std::fs;

use servotty::cockpit::gain_edit;
use servotty::config::{MachineConfig, DEMO_CONFIG};
use servotty::config_write::{save_controllers, update_text, write_copy, SaveError};
use servotty::control::params::{self, Param};

/// The table's row for `key`.
fn p(key: &str) -> Param {
    params::find(key).expect(key)
}

fn demo_in(dir: &tempfile::TempDir) -> std::path::PathBuf {
    let p = dir.path().join("gantry.toml");
    fs::write(&p, DEMO_CONFIG).expect("write");
    p
}

/// Lines of `a` and `b` that differ, as (line number, old, new).
fn changed_lines<'a>(a: &'a str, b: &'a str) -> Vec<(usize, &'a str, &'a str)> {
    assert_eq!(a.lines().count(), b.lines().count(), "line count changed");
    a.lines()
        .zip(b.lines())
        .enumerate()
        .filter(|(_, (x, y))| x != y)
        .map(|(i, (x, y))| (i + 1, x, y))
        .collect()
}

#[test]
fn one_gain_changes_one_line_and_keeps_a_backup() {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = demo_in(&dir);
    let cfg = MachineConfig::load(&path).expect("loads");
    let live = gain_edit::edit(&cfg, 0, p("kp"), "9.5").expect("valid");
    let report = save_controllers(&path, &live, "").expect("saved");
    assert_eq!(report.changed, ["x.controller.kp"]);
    let new = fs::read_to_string(&path).expect("read");
    let diff = changed_lines(DEMO_CONFIG, &new);
    assert_eq!(diff.len(), 1, "{diff:?}");
    assert_eq!(diff[0].1.trim(), "kp = 20.0");
    assert_eq!(diff[0].2.trim(), "kp = 9.5");
    // Comments survive, including the header and trailing ones.
    assert!(new.contains("# 20-tooth pulley, 2 mm belt pitch"));
    assert!(new.starts_with("# Demo machine"));
    let bak = dir.path().join("gantry.toml.bak");
    assert_eq!(report.backup.as_deref(), Some(bak.as_path()));
    assert_eq!(fs::read_to_string(&bak).expect("bak"), DEMO_CONFIG);
    assert_eq!(MachineConfig::load(&path).expect("reloads").axes[0].controller.kp, 9.5);
    // No temporary file is left behind.
    let names: Vec<_> =
        fs::read_dir(dir.path()).expect("ls").map(|e| e.expect("entry").file_name()).collect();
    assert_eq!(names.len(), 2, "{names:?}");
}

// A trailing comment described the old value: a changed value gets the note of where the new
// one came from instead; unchanged values keep theirs (common practice, no source).
#[test]
fn a_changed_value_gets_the_note_instead_of_its_stale_comment() {
    let text = DEMO_CONFIG.replacen("kp = 40.0", "kp = 40.0    # tuned by hand, keep", 1);
    let cfg = MachineConfig::from_toml_str(&text, "t").expect("valid");
    let live = gain_edit::edit(&cfg, 2, p("kp"), "35").expect("valid");
    let (out, changed) = update_text(&text, "t", &live, "tune relay, 2026-12-02").expect("updated");
    assert_eq!(changed, ["z.controller.kp"]);
    let diff = changed_lines(&text, &out);
    assert_eq!(diff.len(), 1);
    assert_eq!(diff[0].2, "kp = 35.0  # tune relay, 2026-12-02");
    let (out, _) = update_text(&text, "t", &live, "").expect("updated");
    assert_eq!(changed_lines(&text, &out)[0].2, "kp = 35.0");
    // The demo's ff_velocity comment explains a number; changing kp alone keeps it.
    assert!(out.contains("# 1/(velocity gain) 0.39 + kd 0.25"));
}

#[test]
fn a_key_the_file_left_to_its_default_is_added_to_that_axis() {
    // y's controller table has no tracking_time_s line.
    let cfg = MachineConfig::from_toml_str(DEMO_CONFIG, "t").expect("valid");
    assert!(!DEMO_CONFIG.contains("tracking_time_s"));
    let default = cfg.axes[1].controller.tracking_time_s;
    let live = gain_edit::edit(&cfg, 1, p("tracking_time_s"), "0.08").expect("valid");
    let (out, changed) = update_text(DEMO_CONFIG, "t", &live, "").expect("updated");
    assert_eq!(changed, ["y.controller.tracking_time_s"]);
    let back = MachineConfig::from_toml_str(&out, "t").expect("reloads");
    assert_eq!(back.axes[1].controller.tracking_time_s, 0.08);
    assert_eq!(back.axes[0].controller.tracking_time_s, default);
    assert_eq!(back.axes[2].controller.tracking_time_s, default);
    assert_eq!(out.lines().count(), DEMO_CONFIG.lines().count() + 1);
}

#[test]
fn a_bad_value_is_refused_and_the_file_is_untouched() {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = demo_in(&dir);
    let mut live = MachineConfig::load(&path).expect("loads");
    // Built by hand, past the prompt's check: the save must still refuse it.
    live.axes[0].controller.kp = -1.0;
    let err = save_controllers(&path, &live, "").expect_err("refused");
    assert!(matches!(err, SaveError::Refused(_)), "{err}");
    assert!(err.to_string().contains("kp"), "{err}");
    assert_eq!(fs::read_to_string(&path).expect("read"), DEMO_CONFIG);
    assert!(!dir.path().join("gantry.toml.bak").exists());
}

#[test]
fn the_prompt_check_refuses_what_the_loader_would() {
    let cfg = MachineConfig::demo().expect("demo");
    for (param, text) in
        [(p("kp"), "-1"), (p("max_duty"), "150"), (p("max_duty"), "5"), (p("kd"), "nan")]
    {
        assert!(gain_edit::edit(&cfg, 0, param, text).is_err(), "{} = {text}", param.key());
    }
    assert!(gain_edit::edit(&cfg, 0, p("kd"), " 0.2 ").is_ok());
}

#[test]
fn an_axis_missing_from_the_file_is_an_error() {
    let mut live = MachineConfig::demo().expect("demo");
    live.axes[0].name = "w".into();
    let err = update_text(DEMO_CONFIG, "t", &live, "").expect_err("no axis w");
    assert!(err.to_string().contains("\"w\""), "{err}");
}

#[test]
fn a_copy_never_overwrites() {
    let dir = tempfile::tempdir().expect("tempdir");
    let mut live = MachineConfig::demo().expect("demo");
    live.axes[0].controller.ki = 25.0;
    let path = dir.path().join("mine.toml");
    let report = write_copy(&path, DEMO_CONFIG, &live, "").expect("written");
    assert_eq!(report.changed, ["x.controller.ki"]);
    assert_eq!(MachineConfig::load(&path).expect("loads").axes[0].controller.ki, 25.0);
    let err = write_copy(&path, DEMO_CONFIG, &live, "").expect_err("exists");
    assert!(matches!(err, SaveError::Exists(_)));
}

#[cfg(unix)]
#[test]
fn saving_through_a_symlink_keeps_the_link() {
    let dir = tempfile::tempdir().expect("tempdir");
    let real = demo_in(&dir);
    let link = dir.path().join("current.toml");
    std::os::unix::fs::symlink(&real, &link).expect("symlink");
    let live =
        gain_edit::edit(&MachineConfig::load(&link).expect("loads"), 0, p("ki"), "21").expect("ok");
    save_controllers(&link, &live, "").expect("saved");
    assert!(fs::symlink_metadata(&link).expect("meta").file_type().is_symlink());
    assert_eq!(MachineConfig::load(&real).expect("loads").axes[0].controller.ki, 21.0);
}

// The cockpit (`a` applies a suggestion, `w` writes it) and `servotty tune --save` go through
// the one writer: for the same gains and the same note they leave the same bytes.
#[test]
fn the_cockpit_and_the_cli_write_the_same_bytes_for_the_same_gains() {
    use servotty::cockpit::action::{Action, Effect};
    use servotty::cockpit::app::Notice;
    use servotty::cockpit::{App, Theme};
    use servotty::commission::Outcome;
    use servotty::config::ConfigSource;
    use servotty::config_write::save_axis_controller;

    const NOTE: &str = "tune identify, verified, 2026-12-02";
    let (dir_a, dir_b) = (tempfile::tempdir().expect("tempdir"), tempfile::tempdir().expect("t"));
    let (cockpit_file, cli_file) = (demo_in(&dir_a), demo_in(&dir_b));
    let cfg = MachineConfig::load(&cockpit_file).expect("loads");
    let mut c = cfg.axes[0].controller.clone();
    c.kp = 18.88;
    c.ki = 41.2;
    c.ff_static = 2.5;
    c.min_duty_forward = 8.46;
    c.ff_velocity = 0.7; // its old trailing comment is replaced by the note

    // The cockpit: the suggestion comes back, `a` applies it, `w` asks for the write, and the
    // runner hands that configuration to the writer.
    let mut app = App::new(cfg.clone(), ConfigSource::File(cockpit_file.clone()), Theme::default());
    let now = std::time::Duration::from_secs(1);
    let outcome = Outcome {
        ok: true,
        text: String::new(),
        result: serde_json::Value::Null,
        proposed: String::new(),
        suggested: Some(c.clone()),
        verification: None,
    };
    app.on_notice(now, Notice::Tuned { axis: 0, result: Ok(outcome) });
    assert_eq!(app.apply(now, Action::ApplySuggested).len(), 1, "the gains go to the axis");
    let fx = app.apply(now, Action::SaveGains);
    let [Effect::SaveGains { path, config }] = fx.as_slice() else { panic!("{fx:?}") };
    let cockpit = save_controllers(path, config, NOTE).expect("cockpit saves");

    // The CLI: what `tune --save` calls.
    let cli = save_axis_controller(&cli_file, &cfg, "x", &c, NOTE).expect("CLI saves");

    assert_eq!(cockpit.changed, cli.changed);
    assert_eq!(cli.changed.len(), 5, "{:?}", cli.changed);
    let (a, b) = (fs::read(&cockpit_file).expect("read"), fs::read(&cli_file).expect("read"));
    assert_ne!(a, DEMO_CONFIG.as_bytes(), "something was written");
    assert_eq!(a, b, "the two front ends wrote different files");
}

// A key the file may leave out (`ff_static_reverse`: "same as ff_static" when absent) is
// added when a value is given and taken out again when it is dropped; nothing else moves.
#[test]
fn a_key_the_file_may_leave_out_is_added_and_taken_out() {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = demo_in(&dir);
    let cfg = MachineConfig::load(&path).expect("loads");
    assert_eq!(cfg.axes[0].controller.ff_static_reverse, None, "the demo's x leaves it out");
    let live = gain_edit::edit(&cfg, 0, p("ff_static_reverse"), "-1.5").expect("valid");
    let report = save_controllers(&path, &live, "").expect("saved");
    assert_eq!(report.changed, ["x.controller.ff_static_reverse"]);
    let added = fs::read_to_string(&path).expect("read");
    assert_eq!(added.lines().count(), DEMO_CONFIG.lines().count() + 1);
    assert_eq!(
        MachineConfig::load(&path).expect("loads").axes[0].controller,
        live.axes[0].controller
    );
    let mut back = live.clone();
    back.axes[0].controller.ff_static_reverse = None;
    let report = save_controllers(&path, &back, "").expect("saved");
    assert_eq!(report.changed, ["x.controller.ff_static_reverse"]);
    assert_eq!(fs::read_to_string(&path).expect("read"), DEMO_CONFIG);
}
