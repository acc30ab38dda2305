//! The spot picker (`@`): every stored spot with its per-axis values and whether it can be
//! gone to now (inside the soft limits, every axis it names homed). Enter goes there on one
//! straight line.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};

use crate::cockpit::app::App;
use crate::cockpit::format::plain;
use crate::cockpit::ui::overlay::{boxed, centred};

/// Draws the picker with row `chosen` marked, over `area`.
pub fn render(app: &App, chosen: usize, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let spots = &app.config.spots.0;
    let name_w = spots.keys().map(|n| n.chars().count() + 1).max().unwrap_or(4);
    let homed = |axis: &str| app.axes.iter().any(|v| &*v.snap.axis == axis && v.snap.homed);
    let rows = (area.height as usize).saturating_sub(4).max(1);
    let first = chosen.saturating_sub(rows.saturating_sub(1));
    let mut lines: Vec<Line<'_>> = Vec::new();
    for (i, (name, spot)) in spots.iter().enumerate().skip(first).take(rows) {
        let values: Vec<String> = app
            .config
            .axes
            .iter()
            .filter_map(|a| spot.get(&a.name).map(|v| format!("{} {}", a.name, plain(*v))))
            .collect();
        let why = crate::spots::unreachable(&app.config, name, homed);
        let here = i == chosen;
        let pointer = if here { t.pointer() } else { " " };
        lines.push(Line::from(vec![
            Span::styled(
                format!("{pointer} @{name:<name_w$}"),
                if here { t.selected() } else { t.bold() },
            ),
            Span::raw(format!("{:<28}", values.join("  "))),
            match why {
                None => Span::styled("ready", t.good()),
                Some(w) => Span::styled(w, t.warn()),
            },
        ]));
    }
    lines
        .push(Line::from(Span::styled("Enter goes there · Esc closes · Space stops all", t.dim())));
    let h = lines.len() as u16 + 2;
    boxed(app, centred(area, 72, h), buf, "spots", &lines);
}
