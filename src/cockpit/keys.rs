//! The keymap: one static table from keys to [`Action`]s per input [`Mode`], which is also
//! what the help overlay prints, so the two can never disagree.
//!
//! Designed for this job, not borrowed:
//! - `Space` is stop-all in every mode, prompts included: the biggest key, findable without
//!   looking. Numbers and file names in prompts therefore never contain spaces.
//! - Releasing stop-all is a separate, shifted key (`R`): an operator hammering `Space` in a
//!   hurry must not toggle the latch off again. Releasing never restarts motion.
//! - Lower case acts on the selected axis, upper case on every axis (`e`/`E`, `d`/`D`,
//!   `c`/`C`, `h`/`H`).
//! - Arrows: up/down choose (axis, parameter or log line), left/right jog one step; `<`/`>`
//!   (or shift+arrows where the terminal reports them) jog continuously while held.
//! - Brackets change the jog step, `-`/`+` the jog speed: paired keys for paired changes.

use crossterm::event::{KeyCode, KeyEvent, KeyModifiers};

use crate::cockpit::action::{Action, Dir};

/// Which keys are live: the screen, or the overlay on top of it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    /// Every axis at a glance.
    Overview,
    /// One axis: charts and controller parameters.
    Detail,
    /// The event log, full screen.
    Log,
    /// The key help overlay.
    Help,
    /// "Quit?" confirmation.
    ConfirmQuit,
    /// A typed value (position, gain, file name).
    Entry,
    /// One axis's trip: its history around the trip and the diagnosis.
    Trip,
    /// The move-list screen: choose a list, run, pause, resume, abort.
    Lists,
    /// The spot picker over the screen.
    Spots,
}

impl Mode {
    const fn bit(self) -> u16 {
        match self {
            Self::Overview => 1,
            Self::Detail => 2,
            Self::Log => 4,
            Self::Help => 8,
            Self::ConfirmQuit => 16,
            Self::Entry => 32,
            Self::Trip => 64,
            Self::Lists => 128,
            Self::Spots => 256,
        }
    }
}

/// A set of modes, as bits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Modes(u16);

impl Modes {
    /// Every mode, overlays and prompts included.
    pub const ALL: Self = Self(511);
    /// The screens (no overlay open).
    pub const SCREENS: Self = Self(1 | 2 | 4 | 64 | 128);
    /// Overview and detail: where axis and motion keys work.
    pub const AXIS: Self = Self(1 | 2);
    /// Overview only.
    pub const OVERVIEW: Self = Self(1);
    /// Detail only.
    pub const DETAIL: Self = Self(2);
    /// Log only.
    pub const LOG: Self = Self(4);
    /// Detail, log, trip and lists.
    pub const SUBSCREENS: Self = Self(2 | 4 | 64 | 128);
    /// The move-list screen.
    pub const LISTS: Self = Self(128);
    /// The spot picker.
    pub const SPOTS: Self = Self(256);
    /// Help overlay.
    pub const HELP: Self = Self(8);
    /// Quit confirmation.
    pub const CONFIRM: Self = Self(16);
    /// Prompts.
    pub const ENTRY: Self = Self(32);

    /// Whether `mode` is in the set.
    pub fn contains(self, mode: Mode) -> bool {
        self.0 & mode.bit() != 0
    }
}

/// A key as the table names it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Key {
    /// A printable character, whatever shift state produced it.
    Char(char),
    /// Ctrl + letter.
    Ctrl(char),
    /// A named key with no modifier.
    Code(KeyCode),
    /// A named key with shift.
    Shift(KeyCode),
    /// The digits 1–9 (mapped to an axis number).
    Digit,
}

impl Key {
    fn matches(self, ev: &KeyEvent) -> bool {
        let ctrl_alt = ev.modifiers.intersects(KeyModifiers::CONTROL | KeyModifiers::ALT);
        match self {
            Self::Char(c) => ev.code == KeyCode::Char(c) && !ctrl_alt,
            Self::Ctrl(c) => ev.code == KeyCode::Char(c) && ev.modifiers == KeyModifiers::CONTROL,
            Self::Code(k) => ev.code == k && !ev.modifiers.contains(KeyModifiers::SHIFT),
            Self::Shift(k) => ev.code == k && ev.modifiers.contains(KeyModifiers::SHIFT),
            Self::Digit => matches!(ev.code, KeyCode::Char('1'..='9')) && !ctrl_alt,
        }
    }
}

/// Headings of the help overlay.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Group {
    /// Works everywhere.
    Always,
    /// Choosing and commanding axes.
    Axis,
    /// Jogging and homing.
    Motion,
    /// Moving between screens.
    Screens,
    /// Detail screen.
    Detail,
    /// Log screen.
    Log,
    /// Move lists and spots.
    Lists,
    /// Prompts and questions.
    Prompts,
}

impl Group {
    /// Heading text.
    pub fn title(self) -> &'static str {
        match self {
            Self::Always => "always",
            Self::Axis => "axes",
            Self::Motion => "jog and home",
            Self::Screens => "screens",
            Self::Detail => "detail screen",
            Self::Log => "log screen",
            Self::Lists => "lists and spots",
            Self::Prompts => "prompts",
        }
    }
}

/// One row of the keymap.
#[derive(Debug, Clone, Copy)]
pub struct Binding {
    /// The keys that do it.
    pub keys: &'static [Key],
    /// How the keys are written in help.
    pub label: &'static str,
    /// What they do.
    pub action: Action,
    /// Where they work.
    pub modes: Modes,
    /// Help heading.
    pub group: Group,
    /// Help text.
    pub help: &'static str,
}

const fn bind(
    keys: &'static [Key],
    label: &'static str,
    action: Action,
    modes: Modes,
    group: Group,
    help: &'static str,
) -> Binding {
    Binding { keys, label, action, modes, group, help }
}

use Key::{Char, Code, Ctrl, Shift};

/// The whole keymap, in help order. The first row matching a key in the current mode wins.
pub const BINDINGS: &[Binding] = &[
    bind(
        &[Char(' ')],
        "Space",
        Action::StopAll,
        Modes::ALL,
        Group::Always,
        "stop-all, not safety-rated",
    ),
    bind(
        &[Char('R')],
        "R",
        Action::ReleaseStopAll,
        Modes::SCREENS,
        Group::Always,
        "release the stop-all latch",
    ),
    bind(&[Char('?')], "?", Action::Help, Modes::SCREENS, Group::Always, "this help"),
    bind(
        &[Char('q'), Ctrl('c')],
        "q",
        Action::Quit,
        Modes::SCREENS,
        Group::Always,
        "quit, every motor off",
    ),
    bind(
        &[Code(KeyCode::Up)],
        "↑↓ Tab 1-9",
        Action::SelectPrev,
        Modes::OVERVIEW,
        Group::Axis,
        "select axis",
    ),
    bind(&[Code(KeyCode::Down)], "", Action::SelectNext, Modes::OVERVIEW, Group::Axis, ""),
    bind(&[Code(KeyCode::Tab)], "", Action::SelectNext, Modes::AXIS, Group::Axis, ""),
    bind(
        &[Code(KeyCode::BackTab), Shift(KeyCode::BackTab)],
        "",
        Action::SelectPrev,
        Modes::AXIS,
        Group::Axis,
        "",
    ),
    bind(&[Key::Digit], "", Action::SelectAxis(0), Modes::AXIS, Group::Axis, ""),
    bind(&[Char('e')], "e E", Action::Enable, Modes::AXIS, Group::Axis, "enable axis / all"),
    bind(&[Char('E')], "", Action::EnableAll, Modes::AXIS, Group::Axis, ""),
    bind(&[Char('d')], "d D", Action::Disable, Modes::AXIS, Group::Axis, "disable axis / all"),
    bind(&[Char('D')], "", Action::DisableAll, Modes::AXIS, Group::Axis, ""),
    bind(&[Char('c')], "c C", Action::ClearTrip, Modes::AXIS, Group::Axis, "clear trip / all"),
    bind(&[Char('C')], "", Action::ClearAllTrips, Modes::AXIS, Group::Axis, ""),
    bind(&[Char('g')], "g", Action::GoTo, Modes::AXIS, Group::Axis, "go to a typed position"),
    bind(&[Char('P')], "P", Action::StoreSpot, Modes::AXIS, Group::Axis, "store position as @spot"),
    bind(
        &[Char('s')],
        "s",
        Action::StopAxis,
        Modes::AXIS,
        Group::Axis,
        "stop axis, motor stays on",
    ),
    bind(
        &[Code(KeyCode::Enter)],
        "Enter",
        Action::OpenDetail,
        Modes::OVERVIEW,
        Group::Screens,
        "axis detail",
    ),
    bind(&[Char('l')], "l", Action::ToggleLog, Modes::SCREENS, Group::Screens, "event log"),
    bind(
        &[Char('v')],
        "v !",
        Action::TripView,
        Modes::AXIS,
        Group::Screens,
        "why it tripped / drills",
    ),
    bind(&[Char('!')], "", Action::Drill, Modes::AXIS, Group::Screens, ""),
    bind(
        &[Code(KeyCode::Esc)],
        "Esc",
        Action::Back,
        Modes::SUBSCREENS,
        Group::Screens,
        "back to overview",
    ),
    bind(
        &[Code(KeyCode::Left)],
        "← →",
        Action::JogStep(Dir::Minus),
        Modes::AXIS,
        Group::Motion,
        "jog one step",
    ),
    bind(&[Code(KeyCode::Right)], "", Action::JogStep(Dir::Plus), Modes::AXIS, Group::Motion, ""),
    bind(
        &[Char('<'), Shift(KeyCode::Left)],
        "< >",
        Action::JogHold(Dir::Minus),
        Modes::AXIS,
        Group::Motion,
        "jog while held",
    ),
    bind(
        &[Char('>'), Shift(KeyCode::Right)],
        "",
        Action::JogHold(Dir::Plus),
        Modes::AXIS,
        Group::Motion,
        "",
    ),
    bind(&[Char('[')], "[ ]", Action::StepSmaller, Modes::AXIS, Group::Motion, "jog step size"),
    bind(&[Char(']')], "", Action::StepLarger, Modes::AXIS, Group::Motion, ""),
    bind(&[Char('-')], "- +", Action::SpeedLower, Modes::AXIS, Group::Motion, "jog speed"),
    bind(&[Char('+'), Char('=')], "", Action::SpeedHigher, Modes::AXIS, Group::Motion, ""),
    bind(&[Char('h')], "h H", Action::Home, Modes::AXIS, Group::Motion, "home axis / all"),
    bind(&[Char('H')], "", Action::HomeAll, Modes::AXIS, Group::Motion, ""),
    bind(
        &[Code(KeyCode::Up)],
        "↑ ↓",
        Action::ParamPrev,
        Modes::DETAIL,
        Group::Detail,
        "choose parameter",
    ),
    bind(&[Code(KeyCode::Down)], "", Action::ParamNext, Modes::DETAIL, Group::Detail, ""),
    bind(
        &[Code(KeyCode::Enter)],
        "Enter",
        Action::EditParam,
        Modes::DETAIL,
        Group::Detail,
        "type a new value (live)",
    ),
    bind(
        &[Char('t')],
        "t a w",
        Action::Test,
        Modes::DETAIL,
        Group::Detail,
        "tune · apply · write gains",
    ),
    bind(&[Char('a')], "", Action::ApplySuggested, Modes::DETAIL, Group::Detail, ""),
    bind(&[Char('w')], "", Action::SaveGains, Modes::AXIS, Group::Detail, ""),
    bind(&[Code(KeyCode::Up)], "↑ ↓", Action::ScrollUp, Modes::LOG, Group::Log, "scroll"),
    bind(&[Code(KeyCode::Down)], "", Action::ScrollDown, Modes::LOG, Group::Log, ""),
    bind(&[Code(KeyCode::PageUp)], "PgUp PgDn", Action::PageUp, Modes::LOG, Group::Log, "page"),
    bind(&[Code(KeyCode::PageDown)], "", Action::PageDown, Modes::LOG, Group::Log, ""),
    bind(
        &[Code(KeyCode::Home)],
        "Home End",
        Action::ScrollTop,
        Modes::LOG,
        Group::Log,
        "oldest / newest",
    ),
    bind(&[Code(KeyCode::End)], "", Action::ScrollEnd, Modes::LOG, Group::Log, ""),
    bind(
        &[Char('m')],
        "m @",
        Action::OpenLists,
        Modes::AXIS,
        Group::Lists,
        "list screen · spot picker",
    ),
    bind(&[Char('@')], "", Action::OpenSpots, Modes::AXIS, Group::Lists, ""),
    bind(&[Code(KeyCode::Up)], "", Action::ListPrev, Modes::LISTS, Group::Lists, ""),
    bind(&[Code(KeyCode::Down)], "", Action::ListNext, Modes::LISTS, Group::Lists, ""),
    bind(
        &[Code(KeyCode::Enter)],
        "Enter p x",
        Action::ListGo,
        Modes::LISTS,
        Group::Lists,
        "run/resume · pause · abort",
    ),
    bind(&[Char('p')], "", Action::ListPause, Modes::LISTS, Group::Lists, ""),
    bind(&[Char('x')], "", Action::ListAbort, Modes::LISTS, Group::Lists, ""),
    bind(
        &[Char('?'), Char('q'), Code(KeyCode::Esc)],
        "",
        Action::CloseOverlay,
        Modes::HELP,
        Group::Prompts,
        "",
    ),
    bind(
        &[Code(KeyCode::Up)],
        "↑↓ PgUp/Dn",
        Action::HelpScroll(-1),
        Modes::HELP,
        Group::Prompts,
        "scroll this help",
    ),
    bind(&[Code(KeyCode::Down)], "", Action::HelpScroll(1), Modes::HELP, Group::Prompts, ""),
    bind(&[Code(KeyCode::PageUp)], "", Action::HelpScroll(-10), Modes::HELP, Group::Prompts, ""),
    bind(&[Code(KeyCode::PageDown)], "", Action::HelpScroll(10), Modes::HELP, Group::Prompts, ""),
    bind(&[Code(KeyCode::Up)], "", Action::SpotPrev, Modes::SPOTS, Group::Prompts, ""),
    bind(&[Code(KeyCode::Down)], "", Action::SpotNext, Modes::SPOTS, Group::Prompts, ""),
    bind(&[Code(KeyCode::Enter)], "", Action::SpotGo, Modes::SPOTS, Group::Prompts, ""),
    bind(&[Code(KeyCode::Esc)], "", Action::CloseOverlay, Modes::SPOTS, Group::Prompts, ""),
    bind(&[Char('y')], "y n", Action::ConfirmQuit, Modes::CONFIRM, Group::Prompts, "quit / stay"),
    bind(
        &[Char('n'), Code(KeyCode::Esc)],
        "",
        Action::CancelQuit,
        Modes::CONFIRM,
        Group::Prompts,
        "",
    ),
    bind(
        &[Code(KeyCode::Enter)],
        "Enter Esc",
        Action::EntrySubmit,
        Modes::ENTRY,
        Group::Prompts,
        "accept / cancel typing",
    ),
    bind(&[Code(KeyCode::Esc)], "", Action::EntryCancel, Modes::ENTRY, Group::Prompts, ""),
    bind(&[Code(KeyCode::Backspace)], "", Action::EntryBackspace, Modes::ENTRY, Group::Prompts, ""),
];

/// The action for a key press in `mode`, if any.
pub fn map_key(mode: Mode, ev: &KeyEvent) -> Option<Action> {
    for b in BINDINGS.iter().filter(|b| b.modes.contains(mode)) {
        if let Some(k) = b.keys.iter().find(|k| k.matches(ev)) {
            return Some(match (k, ev.code) {
                (Key::Digit, KeyCode::Char(d)) => {
                    Action::SelectAxis(d.to_digit(10).map_or(0, |n| n as usize - 1))
                }
                _ => b.action,
            });
        }
    }
    // In a prompt every other printable character is typed text.
    match ev.code {
        KeyCode::Char(c)
            if mode == Mode::Entry
                && !ev.modifiers.intersects(KeyModifiers::CONTROL | KeyModifiers::ALT) =>
        {
            Some(Action::EntryChar(c))
        }
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use crossterm::event::KeyEvent;

    use super::*;

    fn key(code: KeyCode) -> KeyEvent {
        KeyEvent::new(code, KeyModifiers::NONE)
    }

    const MODES: [Mode; 9] = [
        Mode::Overview,
        Mode::Detail,
        Mode::Log,
        Mode::Help,
        Mode::ConfirmQuit,
        Mode::Entry,
        Mode::Trip,
        Mode::Lists,
        Mode::Spots,
    ];

    #[test]
    fn no_key_is_bound_twice_in_one_mode() {
        // A duplicate would silently shadow the later row; every named key is probed.
        for mode in MODES {
            let mut seen: Vec<Key> = Vec::new();
            for b in BINDINGS.iter().filter(|b| b.modes.contains(mode)) {
                for k in b.keys {
                    assert!(!seen.contains(k), "{k:?} bound twice in {mode:?}");
                    seen.push(*k);
                }
            }
        }
    }

    #[test]
    fn digits_select_axes() {
        assert_eq!(map_key(Mode::Overview, &key(KeyCode::Char('1'))), Some(Action::SelectAxis(0)));
        assert_eq!(map_key(Mode::Detail, &key(KeyCode::Char('9'))), Some(Action::SelectAxis(8)));
        assert_eq!(map_key(Mode::Overview, &key(KeyCode::Char('0'))), None);
    }

    #[test]
    fn entry_types_text_but_space_still_stops() {
        assert_eq!(map_key(Mode::Entry, &key(KeyCode::Char('7'))), Some(Action::EntryChar('7')));
        assert_eq!(map_key(Mode::Entry, &key(KeyCode::Char('q'))), Some(Action::EntryChar('q')));
        assert_eq!(map_key(Mode::Entry, &key(KeyCode::Char(' '))), Some(Action::StopAll));
    }
}
