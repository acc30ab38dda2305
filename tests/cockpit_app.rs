//! The cockpit's state machine: actions → state and effects, snapshots → event log. Plain
//! data in, plain data out; no terminal, no engine.
mod cockpit_support;

use cockpit_support as s;
use servotty::cockpit::action::{Action, Dir, Effect};
use servotty::cockpit::app::{Notice, Overlay, Purpose, Screen};

use servotty::cockpit::event_log::Kind;
use servotty::cockpit::{App, Theme};
use servotty::config::ConfigSource;
use servotty::engine::events::ChangedBy;
use servotty::engine::{AxisCommand, AxisState};

fn now() -> std::time::Duration {
    s::at(200)
}

fn type_text(app: &mut App, text: &str) {
    for c in text.chars() {
        app.apply(now(), Action::EntryChar(c));
    }
}

fn log_texts(app: &App) -> Vec<String> {
    app.log.entries().iter().map(|e| e.text.clone()).collect()
}

#[test]
fn stop_all_goes_out_at_once_and_shows_latched() {
    let mut app = s::normal();
    assert_eq!(app.apply(now(), Action::StopAll), vec![Effect::StopAll]);
    assert!(app.stop_latched);
    assert_eq!(app.apply(now(), Action::ReleaseStopAll), vec![Effect::ReleaseStopAll]);
    assert!(!app.stop_latched);
    // Releasing when not latched does nothing (and says so).
    assert_eq!(app.apply(now(), Action::ReleaseStopAll), vec![]);
}

#[test]
fn stop_all_inside_a_prompt_keeps_the_prompt() {
    let mut app = s::normal();
    app.apply(now(), Action::GoTo);
    type_text(&mut app, "12");
    assert_eq!(app.apply(now(), Action::StopAll), vec![Effect::StopAll]);
    let Overlay::Prompt(p) = &app.overlay else { panic!("prompt closed") };
    assert_eq!(p.text, "12");
}

#[test]
fn axis_commands_go_to_the_selected_axis() {
    let mut app = s::normal();
    app.apply(now(), Action::SelectNext);
    assert_eq!(
        app.apply(now(), Action::Enable),
        vec![Effect::Command { axis: 1, command: AxisCommand::Enable }]
    );
    app.apply(now(), Action::SelectAxis(2));
    assert_eq!(
        app.apply(now(), Action::StopAxis),
        vec![Effect::Command { axis: 2, command: AxisCommand::Stop }]
    );
    assert_eq!(app.apply(now(), Action::DisableAll).len(), 3);
    // Selecting a number past the last axis changes nothing.
    app.apply(now(), Action::SelectAxis(7));
    assert_eq!(app.selected, 2);
}

#[test]
fn clear_all_only_touches_tripped_axes() {
    let mut app = s::tripped();
    assert_eq!(
        app.apply(now(), Action::ClearAllTrips),
        vec![Effect::Command { axis: 0, command: AxisCommand::ClearTrip }]
    );
    let mut calm = s::normal();
    assert_eq!(calm.apply(now(), Action::ClearAllTrips), vec![]);
}

#[test]
fn go_to_checks_soft_limits_before_sending() {
    let mut app = s::normal();
    app.apply(now(), Action::GoTo);
    type_text(&mut app, "1500");
    assert_eq!(app.apply(now(), Action::EntrySubmit), vec![]);
    let Overlay::Prompt(p) = &app.overlay else { panic!("prompt closed") };
    assert!(p.error.as_deref().is_some_and(|e| e.contains("soft limits")), "{p:?}");
    for _ in 0..4 {
        app.apply(now(), Action::EntryBackspace);
    }
    type_text(&mut app, "300.5");
    assert_eq!(
        app.apply(now(), Action::EntrySubmit),
        vec![Effect::Command { axis: 0, command: AxisCommand::MoveTo(300.5) }]
    );
    assert_eq!(app.overlay, Overlay::None);
}

#[test]
fn jog_and_home_keys_become_engine_commands() {
    let mut app = s::normal();
    let x = app.config.axes[0].jog.clone();
    let (step, speed) = (app.jog.step(&x), app.jog.speed(&x));
    assert_eq!(
        app.apply(now(), Action::JogStep(Dir::Plus)),
        vec![Effect::Command { axis: 0, command: AxisCommand::JogStep { distance: step, speed } }]
    );
    assert_eq!(
        app.apply(now(), Action::JogHold(Dir::Minus)),
        vec![Effect::Command { axis: 0, command: AxisCommand::JogPulse { direction: -1, speed } }]
    );
    assert_eq!(
        app.apply(now(), Action::Home),
        vec![Effect::Command { axis: 0, command: AxisCommand::Home }]
    );
    assert_eq!(app.apply(now(), Action::HomeAll), vec![Effect::HomeAll]);
    assert_eq!(
        app.apply(now(), Action::JogRelease),
        vec![Effect::Command { axis: 0, command: AxisCommand::JogRelease }]
    );
    // A held key's repeats are not logged one by one.
    let before = app.log.len();
    for _ in 0..30 {
        app.apply(now(), Action::JogHold(Dir::Minus));
    }
    assert_eq!(app.log.len(), before);
}

#[test]
fn jog_step_and_speed_change() {
    let mut app = s::normal();
    let x = app.config.axes[0].jog.clone();
    let (step, speed) = (app.jog.step(&x), app.jog.speed(&x));
    app.apply(now(), Action::StepLarger);
    app.apply(now(), Action::SpeedHigher);
    assert!(app.jog.step(&x) > step && app.jog.speed(&x) > speed);
}

#[test]
fn quitting_asks_only_when_a_motor_is_on() {
    let mut app = s::normal(); // x moving, y holding
    app.apply(now(), Action::Quit);
    assert_eq!(app.overlay, Overlay::ConfirmQuit);
    assert!(!app.quit);
    app.apply(now(), Action::CancelQuit);
    assert_eq!(app.overlay, Overlay::None);
    app.apply(now(), Action::Quit);
    app.apply(now(), Action::ConfirmQuit);
    assert!(app.quit);

    let mut idle = App::new(s::demo(), ConfigSource::BuiltInDemo, Theme::default());
    let mut f = s::frame(0);
    for a in &mut f {
        a.state = AxisState::Disabled;
    }
    idle.observe(now(), &f, false);
    idle.apply(now(), Action::Quit);
    assert!(idle.quit, "nothing on: quit at once");
}

#[test]
fn a_gain_is_checked_applied_live_and_marked_unsaved() {
    let mut app = s::normal();
    app.apply(now(), Action::OpenDetail);
    app.apply(now(), Action::EditParam); // kp, prefilled with the demo's 20
    let Overlay::Prompt(p) = &app.overlay else { panic!("no prompt") };
    assert_eq!(p.text, "20");
    assert!(matches!(p.purpose, Purpose::Gain { axis: 0, .. }));
    app.apply(now(), Action::EntryBackspace);
    app.apply(now(), Action::EntryBackspace);
    type_text(&mut app, "abc");
    assert_eq!(app.apply(now(), Action::EntrySubmit), vec![]);
    for _ in 0..3 {
        app.apply(now(), Action::EntryBackspace);
    }
    type_text(&mut app, "9.5");
    let fx = app.apply(now(), Action::EntrySubmit);
    let [Effect::Command { axis: 0, command: AxisCommand::SetController(c, ChangedBy::CockpitEdit) }] =
        fx.as_slice()
    else {
        panic!("{fx:?}")
    };
    assert_eq!(c.kp, 9.5);
    assert_eq!(app.config.axes[0].controller.kp, 9.5);
    assert!(app.unsaved());
    assert!(log_texts(&app).iter().any(|t| t.contains("kp 20 → 9.5")));
}

#[test]
fn a_gain_the_configuration_check_refuses_never_reaches_the_axis() {
    let mut app = s::normal();
    app.apply(now(), Action::OpenDetail);
    // max_duty below min_duty_forward (8.5): the file loader would refuse it.
    let max_duty = app.params().iter().position(|p| p.key() == "max_duty").expect("listed");
    for _ in 0..max_duty {
        app.apply(now(), Action::ParamNext);
    }
    app.apply(now(), Action::EditParam);
    for _ in 0..3 {
        app.apply(now(), Action::EntryBackspace);
    }
    type_text(&mut app, "8");
    assert_eq!(app.apply(now(), Action::EntrySubmit), vec![]);
    let Overlay::Prompt(p) = &app.overlay else { panic!("prompt closed") };
    assert!(p.error.as_deref().is_some_and(|e| e.contains("max_duty")), "{p:?}");
    assert!(!app.unsaved());
}

#[test]
fn saving_the_demo_offers_a_copy_and_then_uses_it() {
    let mut app = s::normal();
    assert_eq!(app.apply(now(), Action::SaveGains), vec![], "nothing to save yet");
    app.config.axes[0].controller.kp = 9.0;
    assert_eq!(app.apply(now(), Action::SaveGains), vec![]);
    let Overlay::Prompt(p) = &app.overlay else { panic!("no prompt") };
    assert_eq!(p.purpose, Purpose::SaveCopy);
    let fx = app.apply(now(), Action::EntrySubmit);
    assert!(matches!(fx.as_slice(), [Effect::WriteCopy { .. }]), "{fx:?}");
    let report = servotty::config_write::SaveReport {
        path: "servotty.toml".into(),
        backup: None,
        changed: vec!["x.controller.kp".into()],
    };
    let controllers = app.config.axes.iter().map(|a| a.controller.clone()).collect();
    app.on_notice(now(), Notice::Saved { result: Ok(report), controllers, new_file: true });
    assert_eq!(app.source, ConfigSource::File("servotty.toml".into()));
    assert!(!app.unsaved());
    app.config.axes[0].controller.kp = 9.5;
    let fx = app.apply(now(), Action::SaveGains);
    assert!(
        matches!(fx.as_slice(), [Effect::SaveGains { path, .. }] if path.as_os_str() == "servotty.toml")
    );
}

#[test]
fn refusals_are_logged_with_the_reason() {
    let mut app = s::normal();
    app.on_notice(
        now(),
        Notice::Reply { axis: 2, what: "enable".into(), result: Err("stop-all is latched".into()) },
    );
    let e = app.log.last().expect("entry");
    assert_eq!(e.kind, Kind::Refused);
    assert_eq!(e.text, "z: enable refused: stop-all is latched");
}

#[test]
fn a_trip_is_logged_once_with_its_values() {
    let app = s::tripped();
    let trips: Vec<_> = app.log.entries().iter().filter(|e| e.kind == Kind::Trip).collect();
    assert_eq!(trips.len(), 1, "{trips:?}");
    let t = &trips[0].text;
    for want in ["x: following error", "3.36 mm", "band 3.12 mm", "duty 100.0 %", "slipping belt"] {
        assert!(t.contains(want), "{want:?} not in {t:?}");
    }
    assert_eq!(trips[0].clock(), "00:00:07.5");
}

#[test]
fn link_changes_are_logged() {
    let mut app = s::normal();
    let mut f = s::frame(200);
    f[1].state = AxisState::Offline;
    f[2].link.bad_frames = 10;
    app.observe(s::at(201), &f, false);
    let texts = log_texts(&app);
    assert!(texts.iter().any(|t| t == "y: link down"), "{texts:?}");
    assert!(texts.iter().any(|t| t.starts_with("z: 7 bad")), "{texts:?}");
    // A burst of bad frames right after is held back, not logged frame by frame.
    f[2].link.bad_frames = 12;
    app.observe(s::at(202), &f, false);
    assert!(!log_texts(&app).iter().any(|t| t.starts_with("z: 2 bad")));
}

#[test]
fn screens_and_log_scrolling() {
    let mut app = s::normal();
    app.apply(now(), Action::OpenDetail);
    app.apply(now(), Action::ToggleLog);
    assert_eq!(app.screen, Screen::Log);
    app.apply(now(), Action::PageUp);
    assert!(app.log_back > 0);
    app.apply(now(), Action::ScrollEnd);
    assert_eq!(app.log_back, 0);
    app.apply(now(), Action::ToggleLog);
    assert_eq!(app.screen, Screen::Detail, "the log returns where it was opened");
    app.apply(now(), Action::Back);
    assert_eq!(app.screen, Screen::Overview);
}

#[test]
fn a_commissioning_test_is_asked_for_run_and_its_gains_applied() {
    use servotty::commission::{Outcome, TuneStep};
    let mut app = s::normal();
    app.apply(now(), Action::OpenDetail);
    app.apply(now(), Action::Test);
    let Overlay::Prompt(p) = &app.overlay else { panic!("no prompt") };
    assert!(matches!(p.purpose, Purpose::Test { axis: 0 }));
    type_text(&mut app, "q");
    assert_eq!(app.apply(now(), Action::EntrySubmit), vec![], "an unknown letter is refused");
    app.apply(now(), Action::EntryBackspace);
    type_text(&mut app, "i");
    let fx = app.apply(now(), Action::EntrySubmit);
    let [Effect::Tune { axis: 0, step: TuneStep::Identify, .. }] = fx.as_slice() else {
        panic!("{fx:?}")
    };
    // The result comes back; its gains wait for `a`.
    let mut c = app.config.axes[0].controller.clone();
    c.kp = 18.88;
    app.on_notice(
        now(),
        Notice::Tuned {
            axis: 0,
            result: Ok(Outcome {
                ok: true,
                text: "x: velocity gain 2.5".to_owned(),
                result: serde_json::Value::Null,
                proposed: "kp = 18.88\n".to_owned(),
                suggested: Some(c.clone()),
                verification: None,
            }),
        },
    );
    assert!(log_texts(&app).iter().any(|t| t.contains("velocity gain 2.5")));
    let fx = app.apply(now(), Action::ApplySuggested);
    assert_eq!(
        fx,
        vec![Effect::Command {
            axis: 0,
            command: AxisCommand::SetController(c, ChangedBy::CockpitSuggestion)
        }]
    );
    assert_eq!(app.config.axes[0].controller.kp, 18.88);
    assert!(app.unsaved());
    // Nothing left to apply.
    assert_eq!(app.apply(now(), Action::ApplySuggested), vec![]);

    // A suggestion whose verification step was worse needs a second `a`.
    let mut worse = app.config.axes[0].controller.clone();
    worse.kp = 30.0;
    let figures = |os: f64| servotty::tuning::compare::StepFigures {
        rise_s: Some(0.04),
        overshoot_pct: os,
        settling_s: Some(0.3),
        peak_error_after_rise: 0.1,
    };
    let v = servotty::tuning::compare::compare(figures(4.2), figures(14.6), 1.0 / 24.0);
    app.on_notice(
        now(),
        Notice::Tuned {
            axis: 0,
            result: Ok(Outcome {
                ok: true,
                text: "x: relay".to_owned(),
                result: serde_json::Value::Null,
                proposed: "kp = 30\n".to_owned(),
                suggested: Some(worse.clone()),
                verification: Some(Box::new(v)),
            }),
        },
    );
    assert!(log_texts(&app).iter().any(|t| t.contains("WORSE")));
    assert_eq!(app.apply(now(), Action::ApplySuggested), vec![]);
    assert_eq!(app.config.axes[0].controller.kp, 18.88);
    let fx = app.apply(now(), Action::ApplySuggested);
    assert_eq!(
        fx,
        vec![Effect::Command {
            axis: 0,
            command: AxisCommand::SetController(worse, ChangedBy::CockpitSuggestion)
        }]
    );
}

#[test]
fn a_test_never_enables_an_axis_by_itself() {
    let mut app = s::normal();
    app.axes[0].snap.state = AxisState::Disabled;
    app.apply(now(), Action::OpenDetail);
    app.apply(now(), Action::Test);
    type_text(&mut app, "i");
    assert_eq!(app.apply(now(), Action::EntrySubmit), vec![], "no test starts");
    let Overlay::Prompt(p) = &app.overlay else { panic!("the prompt stays open") };
    let why = p.error.as_deref().unwrap_or_default();
    assert!(why.contains("disabled") && why.contains("press e"), "{why}");
}

#[test]
fn engine_events_an_operator_must_know_reach_the_event_panel() {
    use servotty::engine::{Event, EventKind};
    let mut app = s::normal();
    let x = Some(std::sync::Arc::from("x"));
    let feed = [
        (
            x.clone(),
            EventKind::Gains {
                changes: vec!["kp 20.0 → 25.0".into()], by: ChangedBy::CockpitEdit
            },
            Kind::Info,
        ),
        (
            x.clone(),
            EventKind::LinkQuality { missed: 250, bad: 0, window: 1000, poor: true },
            Kind::Link,
        ),
        (None, EventKind::RecorderFailed { what: "event log write failed".into() }, Kind::Refused),
        (None, EventKind::Interrupted { signal: "SIGTERM".into() }, Kind::Info),
    ];
    for (axis, kind, _) in &feed {
        app.on_notice(now(), Notice::Engine(Event::now(axis.clone(), None, kind.clone())));
    }
    let entries: Vec<_> = app.log.entries().iter().rev().take(4).collect();
    let texts: Vec<&str> = entries.iter().rev().map(|e| e.text.as_str()).collect();
    assert_eq!(
        texts,
        [
            "x: gains changed live by cockpit edit: kp 20.0 → 25.0",
            "x: poor link: 250 missed and 0 bad of the last 1000 frames",
            "machine: RECORDER FAILED: event log write failed",
            "machine: interrupted by SIGTERM: motors off",
        ]
    );
    let kinds: Vec<Kind> = entries.iter().rev().map(|e| e.kind).collect();
    assert_eq!(kinds, feed.iter().map(|f| f.2).collect::<Vec<_>>());
}
