//! The cockpit's trip screen: one key from a tripped axis asks the engine for its history,
//! and the screen shows the charts with the diagnosis beside them (no engine: the history
//! arrives as the runner would deliver it).
mod cockpit_support;

use cockpit_support as s;
use servotty::cockpit::action::{Action, Effect};
use servotty::cockpit::app::{Notice, Screen};
use servotty::cockpit::keys::{map_key, Mode};
use servotty::engine::history::Sample;
use servotty::engine::AxisState;

/// X at 100 mm/s until it jams at 7.3 s; the duty climbs; the trip row at 7.5 s.
fn jammed_history() -> Vec<Sample> {
    (0..=1000)
        .map(|j| {
            let t = 6.5 + f64::from(j) * 0.001;
            let target = 100.0 * (t - 6.5);
            let stuck = t >= 7.3;
            let position = if stuck { 79.8 } else { target - 0.2 };
            Sample {
                t,
                target,
                position,
                following_error: target - position,
                duty: if stuck { (30.0 + (t - 7.3) * 400.0).min(100.0) } else { 30.0 },
                velocity: if stuck { 0.0 } else { 100.0 },
                state: if j == 1000 { AxisState::Tripped } else { AxisState::Moving },
                count: (position * 24.0).round() as i64,
                board_time_us: (t * 1e6) as u32,
                status: servotty::protocol::status::MOTOR_ON,
                target_velocity: 100.0,
                band: 4.0,
                ..Sample::default()
            }
        })
        .collect()
}

#[test]
fn one_key_opens_the_trip_screen_with_the_diagnosis() {
    let mut app = s::tripped();
    let key = crossterm::event::KeyEvent::from(crossterm::event::KeyCode::Char('v'));
    let action = map_key(Mode::Overview, &key).expect("v is bound");
    assert_eq!(action, Action::TripView);
    let effects = app.apply(s::at(201), action);
    assert_eq!(effects, vec![Effect::FetchHistory { axis: 0 }]);
    assert_eq!(app.screen, Screen::Trip);
    assert!(s::screen(&app, 120, 40).contains("fetching"));

    app.on_notice(s::at(202), Notice::History { axis: 0, result: Ok(jammed_history()) });
    let text = s::screen(&app, 160, 48);
    assert!(text.contains("tripped on following error"), "{text}");
    assert!(text.contains("most likely: mechanical jam"), "{text}");
    assert!(text.contains("following error and band"), "{text}");
    assert!(text.contains("duty and its limits"), "{text}");
    // Small terminals still draw it.
    let small = s::screen(&app, 80, 24);
    assert!(small.contains("most likely"), "{small}");
    // Esc goes back.
    let esc = crossterm::event::KeyEvent::from(crossterm::event::KeyCode::Esc);
    let back = map_key(app.mode(), &esc).expect("Esc");
    app.apply(s::at(203), back);
    assert_eq!(app.screen, Screen::Overview);
}

#[test]
fn a_history_that_cannot_be_had_says_why_and_returns() {
    let mut app = s::tripped();
    app.apply(s::at(201), Action::TripView);
    app.on_notice(s::at(202), Notice::History { axis: 0, result: Err("gone".into()) });
    assert_eq!(app.screen, Screen::Overview);
    assert!(s::screen(&app, 160, 48).contains("no history for the trip screen"));
}
