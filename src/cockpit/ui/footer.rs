//! The bottom line: the main keys of the current mode, stop-all always first.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};

use crate::cockpit::app::App;
use crate::cockpit::keys::Mode;

/// The stop-all label: shown in every mode, and honest about what it is.
pub const STOP_ALL_LABEL: &str = "stop-all (not safety-rated)";

fn items(app: &App) -> &'static [(&'static str, &'static str)] {
    match app.mode() {
        Mode::Overview => &[
            ("?", "help"),
            ("q", "quit"),
            ("↑↓", "axis"),
            ("Enter", "detail"),
            ("e/d", "on/off"),
            ("g", "go to"),
            ("c", "clear trip"),
            ("s", "stop axis"),
            ("←→", "jog"),
            ("h", "home"),
            ("l", "log"),
        ],
        Mode::Detail => &[
            ("?", "help"),
            ("Esc", "back"),
            ("↑↓", "parameter"),
            ("Enter", "edit"),
            ("w", "write file"),
            ("Tab", "axis"),
            ("e/d", "on/off"),
            ("g", "go to"),
            ("←→", "jog"),
        ],
        Mode::Log => &[("?", "help"), ("Esc", "back"), ("↑↓", "scroll"), ("End", "newest")],
        Mode::Trip => &[("?", "help"), ("Esc", "back"), ("l", "log")],
        Mode::Help => &[("Esc", "close")],
        Mode::ConfirmQuit => &[("y", "quit, motors off"), ("n", "stay")],
        Mode::Entry => &[("Enter", "apply"), ("Esc", "cancel")],
    }
}

/// Draws the footer into one line.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let width = area.width as usize;
    let mut spans = vec![
        Span::styled(" Space ", t.alarm()),
        Span::styled(format!(" {STOP_ALL_LABEL}"), t.bold()),
    ];
    let mut used: usize = spans.iter().map(Span::width).sum();
    let mut more: Vec<(&str, &str)> = Vec::new();
    if app.stop_latched
        && matches!(app.mode(), Mode::Overview | Mode::Detail | Mode::Log | Mode::Trip)
    {
        more.push(("R", "release"));
    }
    more.extend(items(app).iter().copied());
    for (k, label) in more {
        let w = k.chars().count() + label.chars().count() + 5;
        if used + w > width {
            break;
        }
        spans.push(Span::raw("  "));
        spans.push(Span::styled(format!(" {k} "), t.key()));
        spans.push(Span::raw(format!(" {label}")));
        used += w;
    }
    buf.set_line(area.x, area.y, &Line::from(spans), area.width);
}
