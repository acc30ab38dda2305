//! The cockpit's spot keys: `g` takes `@spot` as well as a number (one coordinated move), `@`
//! picks a spot from a list, `P` stores the homed axes'
//! present positions under a name (in the configuration file when there is one). Plain data
//! in, plain data out. Servotty's own feature: no outside source.
mod cockpit_support;

use cockpit_support as s;
use servotty::cockpit::action::{Action, Effect};
use servotty::cockpit::app::Overlay;
use servotty::config::ConfigSource;

fn now() -> std::time::Duration {
    s::at(200)
}

fn type_text(app: &mut servotty::cockpit::App, text: &str) {
    for c in text.chars() {
        app.apply(now(), Action::EntryChar(c));
    }
}

#[test]
fn go_to_a_spot_moves_every_axis_it_names() {
    let mut app = s::normal();
    app.apply(now(), Action::GoTo);
    type_text(&mut app, "@tray2");
    let fx = app.apply(now(), Action::EntrySubmit);
    // One coordinated move of every axis the spot names, not one move per axis.
    assert_eq!(
        fx,
        vec![Effect::MoveLine {
            what: "@tray2".to_owned(),
            goals: vec![("x".to_owned(), 550.0), ("y".to_owned(), 300.0)],
        }]
    );
    // An unknown spot keeps the prompt open with the names there are.
    app.apply(now(), Action::GoTo);
    type_text(&mut app, "@nowhere");
    assert!(app.apply(now(), Action::EntrySubmit).is_empty());
    let Overlay::Prompt(p) = &app.overlay else { panic!("prompt closed") };
    assert!(p.error.as_deref().is_some_and(|e| e.contains("tray1")), "{p:?}");
}

#[test]
fn the_spot_picker_goes_to_the_chosen_spot_and_refuses_an_unhomed_one() {
    let mut app = s::normal();
    app.apply(now(), Action::OpenSpots);
    assert_eq!(app.overlay, Overlay::Spots(0));
    // Spots in name order: park, probe_depth, tray1, …; Up wraps to the last.
    app.apply(now(), Action::SpotPrev);
    assert_eq!(app.overlay, Overlay::Spots(4));
    let fx = app.apply(now(), Action::SpotGo);
    assert_eq!(
        fx,
        vec![Effect::MoveLine {
            what: "@tray3".to_owned(),
            goals: vec![("x".to_owned(), 900.0), ("y".to_owned(), 300.0)],
        }]
    );
    assert_eq!(app.overlay, Overlay::None, "Enter closes the picker");
    // park names z, which is not homed in this scene: refused, the picker stays open.
    app.apply(now(), Action::OpenSpots);
    assert!(app.apply(now(), Action::SpotGo).is_empty());
    assert_eq!(app.overlay, Overlay::Spots(0));
    let last = app.log.entries().back().map(|e| e.text_with_count()).unwrap_or_default();
    assert!(last.contains("not homed: z"), "{last}");
    app.apply(now(), Action::CloseOverlay);
    assert_eq!(app.overlay, Overlay::None);
}

#[test]
fn store_spot_writes_the_homed_axes_to_the_file_and_knows_it_at_once() {
    let mut app = s::normal();
    let path = std::path::PathBuf::from("/tmp/gantry.toml");
    app.source = ConfigSource::File(path.clone());
    app.apply(now(), Action::StoreSpot);
    type_text(&mut app, "bench");
    let fx = app.apply(now(), Action::EntrySubmit);
    let [Effect::StoreSpot { path: p, name, position }] = fx.as_slice() else { panic!("{fx:?}") };
    assert_eq!((p, name.as_str()), (&path, "bench"));
    let homed: Vec<String> =
        app.axes.iter().filter(|v| v.snap.homed).map(|v| v.snap.axis.to_string()).collect();
    assert_eq!(position.iter().map(|(a, _)| a.clone()).collect::<Vec<_>>(), homed);
    assert!(app.config.spots.get("bench").is_some(), "usable with g @bench at once");
    // A bad name is refused in the prompt.
    app.apply(now(), Action::StoreSpot);
    type_text(&mut app, "no good");
    assert!(app.apply(now(), Action::EntrySubmit).is_empty());
    assert!(matches!(app.overlay, Overlay::Prompt(_)));
}
