//! Colours and glyphs, chosen once at start from the environment.
//!
//! Only the 16 basic ANSI colours are used, so a Linux virtual console shows everything.
//! With `NO_COLOR` set (non-empty, per no-color.org) no colour at all is emitted; bold and
//! reverse still mark the important things, and every state is a word anyway. On the Linux
//! console (`TERM=linux`) whose fonts lack eighth-blocks and Braille, sparklines and charts
//! fall back to glyphs those fonts have.

use ratatui::style::{Color, Modifier, Style};
use ratatui::symbols;

use crate::cockpit::event_log::Kind;
use crate::engine::AxisState;

/// Which glyphs the terminal's font can show.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Glyphs {
    /// A modern terminal font: eighth-block sparklines, Braille charts, ▶.
    Unicode,
    /// The Linux console font: half blocks and ASCII.
    Console,
}

/// How the cockpit looks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Theme {
    /// False with `NO_COLOR`.
    pub color: bool,
    /// Glyph set.
    pub glyphs: Glyphs,
}

impl Default for Theme {
    fn default() -> Self {
        Self { color: true, glyphs: Glyphs::Unicode }
    }
}

impl Theme {
    /// From `NO_COLOR` and `TERM`.
    pub fn from_env() -> Self {
        Self::from_vars(
            std::env::var_os("NO_COLOR").as_deref(),
            std::env::var("TERM").ok().as_deref(),
        )
    }

    /// From the values of `NO_COLOR` and `TERM` (absent: `None`). An empty `NO_COLOR` counts
    /// as unset, as no-color.org says.
    pub fn from_vars(no_color: Option<&std::ffi::OsStr>, term: Option<&str>) -> Self {
        let no_color = no_color.is_some_and(|v| !v.is_empty());
        let console = term == Some("linux");
        Self { color: !no_color, glyphs: if console { Glyphs::Console } else { Glyphs::Unicode } }
    }

    /// No colour, Unicode glyphs.
    pub fn monochrome() -> Self {
        Self { color: false, glyphs: Glyphs::Unicode }
    }

    fn fg(self, c: Color) -> Style {
        if self.color {
            Style::new().fg(c)
        } else {
            Style::new()
        }
    }

    /// Plain text.
    pub fn text(self) -> Style {
        Style::new()
    }

    /// Labels and units: quieter than values.
    pub fn dim(self) -> Style {
        if self.color {
            Style::new().fg(Color::Gray)
        } else {
            Style::new()
        }
    }

    /// Emphasis.
    pub fn bold(self) -> Style {
        Style::new().add_modifier(Modifier::BOLD)
    }

    /// An alarm: red, or inverted colours when there is no colour.
    pub fn alarm(self) -> Style {
        if self.color {
            Style::new().fg(Color::White).bg(Color::Red).add_modifier(Modifier::BOLD)
        } else {
            Style::new().add_modifier(Modifier::REVERSED | Modifier::BOLD)
        }
    }

    /// A warning.
    pub fn warn(self) -> Style {
        self.fg(Color::Yellow).add_modifier(Modifier::BOLD)
    }

    /// Good news.
    pub fn good(self) -> Style {
        self.fg(Color::Green)
    }

    /// A key name in the footer and help.
    pub fn key(self) -> Style {
        Style::new().add_modifier(Modifier::REVERSED)
    }

    /// The selected axis or row.
    pub fn selected(self) -> Style {
        Style::new().add_modifier(Modifier::REVERSED | Modifier::BOLD)
    }

    /// Panel borders; the selected panel's is bold.
    pub fn border(self, selected: bool) -> Style {
        if selected {
            self.fg(Color::Cyan).add_modifier(Modifier::BOLD)
        } else {
            self.dim()
        }
    }

    /// A state word: the word carries the meaning, colour only helps.
    pub fn state(self, s: AxisState) -> Style {
        match s {
            AxisState::Tripped => self.alarm(),
            AxisState::Stopped => self.warn().add_modifier(Modifier::REVERSED),
            AxisState::Stopping => self.warn(),
            AxisState::Offline => self.dim(),
            AxisState::Disabled => self.text(),
            AxisState::Steady => self.good().add_modifier(Modifier::BOLD),
            AxisState::Moving | AxisState::Jogging | AxisState::Homing | AxisState::Trialing => {
                self.fg(Color::Cyan).add_modifier(Modifier::BOLD)
            }
        }
    }

    /// An event-log entry's tag.
    pub fn event(self, k: Kind) -> Style {
        match k {
            Kind::Trip => self.alarm(),
            Kind::Refused => self.warn(),
            Kind::Operator => self.fg(Color::Cyan),
            Kind::Link => self.fg(Color::Magenta),
            Kind::State | Kind::Info => self.dim(),
        }
    }

    /// A data series in charts and sparklines.
    pub fn series(self, i: usize) -> Style {
        self.fg([Color::Yellow, Color::Cyan, Color::Green, Color::Magenta][i % 4])
    }

    /// Sparkline bar glyphs.
    pub fn bar_set(self) -> symbols::bar::Set<'static> {
        match self.glyphs {
            Glyphs::Unicode => symbols::bar::NINE_LEVELS,
            Glyphs::Console => symbols::bar::THREE_LEVELS,
        }
    }

    /// Chart marker.
    pub fn marker(self) -> symbols::Marker {
        match self.glyphs {
            Glyphs::Unicode => symbols::Marker::Braille,
            Glyphs::Console => symbols::Marker::Dot,
        }
    }

    /// Marks the selected axis or parameter.
    pub fn pointer(self) -> &'static str {
        match self.glyphs {
            Glyphs::Unicode => "▶",
            Glyphs::Console => ">",
        }
    }
}

#[cfg(test)]
mod tests {
    use std::ffi::OsStr;

    use super::*;

    #[test]
    fn environment_choices() {
        assert!(Theme::from_vars(None, Some("xterm-256color")).color);
        assert!(Theme::from_vars(Some(OsStr::new("")), None).color, "empty NO_COLOR is unset");
        assert!(!Theme::from_vars(Some(OsStr::new("1")), None).color);
        assert_eq!(Theme::from_vars(None, Some("linux")).glyphs, Glyphs::Console);
        assert_eq!(Theme::from_vars(None, Some("screen")).glyphs, Glyphs::Unicode);
    }
}
