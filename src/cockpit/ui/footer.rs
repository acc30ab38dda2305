//! The bottom line: the keys that work in this screen now, stop-all always first.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};

use crate::cockpit::app::App;
use crate::cockpit::keys::Mode;
use crate::engine::AxisState;

/// The stop-all label: shown in every mode, and honest about what it is.
pub const STOP_ALL_LABEL: &str = "stop-all (not safety-rated)";

/// The keys that do something now, most useful first: on the overview and detail screens
/// they follow the selected axis's state (a tripped axis offers `c` first, a disabled one
/// `e`), so the few that fit at 80 columns are the ones worth pressing.
fn items(app: &App) -> Vec<(&'static str, &'static str)> {
    let state = app.axes.get(app.selected).map(|v| v.snap.state);
    let for_axis: &[(&str, &str)] = match state {
        Some(AxisState::Tripped) => &[("c", "clear trip"), ("v", "why")],
        Some(AxisState::Offline) => &[("l", "log: why")],
        Some(AxisState::Disabled) => &[("e", "enable"), ("H", "home all")],
        Some(AxisState::Stopped) => &[("R", "release")],
        Some(AxisState::Steady) => {
            &[("←→", "jog"), ("g", "go to"), ("h", "home"), ("[ ]", "step"), ("d", "off")]
        }
        _ => &[("s", "stop axis"), ("←→", "jog")],
    };
    let mut out: Vec<(&str, &str)> = Vec::new();
    match app.mode() {
        Mode::Overview => {
            out.extend_from_slice(for_axis);
            out.extend_from_slice(&[
                ("↑↓", "axis"),
                ("Enter", "detail"),
                ("?", "help"),
                ("q", "quit"),
            ]);
        }
        Mode::Detail => {
            out.extend_from_slice(&[("Esc", "back"), ("↑↓", "parameter"), ("Enter", "edit")]);
            if app.unsaved() {
                out.push(("w", "write file"));
            }
            out.extend_from_slice(for_axis);
            out.extend_from_slice(&[
                ("t", "tune (p: full tuning)"),
                ("Tab", "axis"),
                ("?", "help"),
            ]);
        }
        Mode::Log => out.extend_from_slice(&[("Esc", "back"), ("↑↓", "scroll"), ("End", "newest")]),
        Mode::Trip => out.extend_from_slice(&[("Esc", "back"), ("l", "log"), ("?", "help")]),
        Mode::Lists => {
            use crate::cockpit::lists::Phase;
            match app.lists.phase {
                Phase::Running | Phase::Starting => {
                    out.extend_from_slice(&[("p", "pause"), ("x", "abort")]);
                }
                Phase::Pausing => out.extend_from_slice(&[("Enter", "carry on"), ("x", "abort")]),
                Phase::Paused => out.extend_from_slice(&[("Enter", "resume"), ("x", "abort")]),
                Phase::Idle | Phase::Finished
                    if app.lists.next_from() != crate::move_list::Start::from(1) =>
                {
                    out.push(("Enter", "resume"));
                }
                Phase::Idle | Phase::Finished => out.push(("Enter", "start")),
            }
            if app.lists.found.as_ref().is_some_and(|f| f.len() > 1) && !app.lists.phase.active() {
                out.push(("↑↓", "list"));
            }
            out.extend_from_slice(&[("Esc", "back"), ("?", "help")]);
        }
        Mode::Spots => {
            out.extend_from_slice(&[("Enter", "go there"), ("↑↓", "spot"), ("Esc", "close")])
        }
        Mode::Help => out.push(("Esc", "close")),
        Mode::ConfirmQuit => out.extend_from_slice(&[("y", "quit, motors off"), ("n", "stay")]),
        Mode::Entry => out.extend_from_slice(&[("Enter", "apply"), ("Esc", "cancel")]),
    }
    out
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
        && matches!(
            app.mode(),
            Mode::Overview | Mode::Detail | Mode::Log | Mode::Trip | Mode::Lists
        )
    {
        more.push(("R", "release"));
    }
    for item in items(app) {
        if !more.contains(&item) {
            more.push(item);
        }
    }
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
