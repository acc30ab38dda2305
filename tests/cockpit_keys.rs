//! Key → action mapping: the keymap table through `map_key`, mode by mode. The layout is
//! our own design (see src/cockpit/keys.rs); these pin it so a change is deliberate.

use crossterm::event::{KeyCode, KeyEvent, KeyModifiers};
use servotty::cockpit::action::{Action, Dir};
use servotty::cockpit::keys::{map_key, Mode, BINDINGS};

const MODES: [Mode; 6] =
    [Mode::Overview, Mode::Detail, Mode::Log, Mode::Help, Mode::ConfirmQuit, Mode::Entry];

fn key(code: KeyCode) -> KeyEvent {
    KeyEvent::new(code, KeyModifiers::NONE)
}

fn ch(c: char) -> KeyEvent {
    // Terminals report shifted letters with SHIFT set; the table must not care.
    let m = if c.is_ascii_uppercase() { KeyModifiers::SHIFT } else { KeyModifiers::NONE };
    KeyEvent::new(KeyCode::Char(c), m)
}

#[test]
fn space_is_stop_all_in_every_mode() {
    for mode in MODES {
        assert_eq!(map_key(mode, &ch(' ')), Some(Action::StopAll), "{mode:?}");
    }
}

#[test]
fn release_is_a_separate_deliberate_key() {
    for mode in [Mode::Overview, Mode::Detail, Mode::Log] {
        assert_eq!(map_key(mode, &ch('R')), Some(Action::ReleaseStopAll));
        assert_eq!(map_key(mode, &ch('r')), None, "lower-case r must not release");
    }
    // Inside a prompt R is just a letter; in help and the quit question it does nothing.
    assert_eq!(map_key(Mode::Entry, &ch('R')), Some(Action::EntryChar('R')));
    assert_eq!(map_key(Mode::Help, &ch('R')), None);
}

#[test]
fn overview_keys() {
    let m = Mode::Overview;
    let cases = [
        (ch('?'), Action::Help),
        (ch('q'), Action::Quit),
        (KeyEvent::new(KeyCode::Char('c'), KeyModifiers::CONTROL), Action::Quit),
        (key(KeyCode::Up), Action::SelectPrev),
        (key(KeyCode::Down), Action::SelectNext),
        (key(KeyCode::Tab), Action::SelectNext),
        (KeyEvent::new(KeyCode::BackTab, KeyModifiers::SHIFT), Action::SelectPrev),
        (ch('3'), Action::SelectAxis(2)),
        (key(KeyCode::Enter), Action::OpenDetail),
        (ch('e'), Action::Enable),
        (ch('E'), Action::EnableAll),
        (ch('d'), Action::Disable),
        (ch('D'), Action::DisableAll),
        (ch('c'), Action::ClearTrip),
        (ch('C'), Action::ClearAllTrips),
        (ch('s'), Action::StopAxis),
        (ch('g'), Action::GoTo),
        (key(KeyCode::Left), Action::JogStep(Dir::Minus)),
        (key(KeyCode::Right), Action::JogStep(Dir::Plus)),
        (ch('<'), Action::JogHold(Dir::Minus)),
        (ch('>'), Action::JogHold(Dir::Plus)),
        (KeyEvent::new(KeyCode::Left, KeyModifiers::SHIFT), Action::JogHold(Dir::Minus)),
        (KeyEvent::new(KeyCode::Right, KeyModifiers::SHIFT), Action::JogHold(Dir::Plus)),
        (ch('['), Action::StepSmaller),
        (ch(']'), Action::StepLarger),
        (ch('-'), Action::SpeedLower),
        (ch('+'), Action::SpeedHigher),
        (ch('='), Action::SpeedHigher),
        (ch('h'), Action::Home),
        (ch('H'), Action::HomeAll),
        (ch('l'), Action::ToggleLog),
        (ch('w'), Action::SaveGains),
    ];
    for (k, want) in cases {
        assert_eq!(map_key(m, &k), Some(want), "{k:?}");
    }
    assert_eq!(map_key(m, &key(KeyCode::Esc)), None);
}

#[test]
fn detail_keys_reuse_arrows_for_parameters() {
    let m = Mode::Detail;
    assert_eq!(map_key(m, &key(KeyCode::Up)), Some(Action::ParamPrev));
    assert_eq!(map_key(m, &key(KeyCode::Down)), Some(Action::ParamNext));
    assert_eq!(map_key(m, &key(KeyCode::Enter)), Some(Action::EditParam));
    assert_eq!(map_key(m, &key(KeyCode::Esc)), Some(Action::Back));
    assert_eq!(map_key(m, &key(KeyCode::Tab)), Some(Action::SelectNext));
    // Motion keys work while watching the charts.
    assert_eq!(map_key(m, &key(KeyCode::Right)), Some(Action::JogStep(Dir::Plus)));
    assert_eq!(map_key(m, &ch('e')), Some(Action::Enable));
}

#[test]
fn log_keys_scroll() {
    let m = Mode::Log;
    assert_eq!(map_key(m, &key(KeyCode::Up)), Some(Action::ScrollUp));
    assert_eq!(map_key(m, &key(KeyCode::PageDown)), Some(Action::PageDown));
    assert_eq!(map_key(m, &key(KeyCode::End)), Some(Action::ScrollEnd));
    assert_eq!(map_key(m, &ch('l')), Some(Action::ToggleLog));
    assert_eq!(map_key(m, &ch('e')), None, "no axis commands from the log screen");
}

#[test]
fn overlays_only_answer_their_own_keys() {
    assert_eq!(map_key(Mode::Help, &key(KeyCode::Esc)), Some(Action::CloseOverlay));
    assert_eq!(map_key(Mode::Help, &ch('q')), Some(Action::CloseOverlay));
    assert_eq!(map_key(Mode::Help, &ch('e')), None);
    assert_eq!(map_key(Mode::ConfirmQuit, &ch('y')), Some(Action::ConfirmQuit));
    assert_eq!(map_key(Mode::ConfirmQuit, &ch('n')), Some(Action::CancelQuit));
    assert_eq!(map_key(Mode::ConfirmQuit, &key(KeyCode::Esc)), Some(Action::CancelQuit));
    assert_eq!(map_key(Mode::ConfirmQuit, &ch('q')), None, "q must not confirm by repetition");
}

#[test]
fn prompts_take_text() {
    let m = Mode::Entry;
    for c in "-12.5e3xq?".chars() {
        assert_eq!(map_key(m, &ch(c)), Some(Action::EntryChar(c)));
    }
    assert_eq!(map_key(m, &key(KeyCode::Backspace)), Some(Action::EntryBackspace));
    assert_eq!(map_key(m, &key(KeyCode::Enter)), Some(Action::EntrySubmit));
    assert_eq!(map_key(m, &key(KeyCode::Esc)), Some(Action::EntryCancel));
    let ctrl_u = KeyEvent::new(KeyCode::Char('u'), KeyModifiers::CONTROL);
    assert_eq!(map_key(m, &ctrl_u), None);
}

#[test]
fn every_action_in_the_table_is_documented_in_help() {
    // Each labelled row carries a help text; unlabelled rows are the second key of a pair.
    for b in BINDINGS {
        assert_eq!(b.label.is_empty(), b.help.is_empty(), "{:?}", b.action);
    }
    let help_rows = BINDINGS.iter().filter(|b| !b.label.is_empty()).count();
    assert!(help_rows >= 20);
}
