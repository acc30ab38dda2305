//! The fault-drill menu, drawn over the screen: marked as a drill (warning border, the word
//! DRILL and "simulated" in its title) so that nobody takes it for a machine setting. The
//! typed choice sits at the top, so a small terminal still shows it; the menu follows.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Borders, Clear, Widget};

use crate::cockpit::app::{App, Prompt};
use crate::cockpit::drill::{HOW, MENU};

/// Draws the drill menu for axis `axis` over `area`.
pub fn render(app: &App, p: &Prompt, axis: usize, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let name = app.config.axes.get(axis).map_or("?", |a| a.name.as_str());
    let mut lines = vec![
        Line::from(Span::styled(
            "Injects a fault into the simulated board to rehearse a trip.",
            t.warn(),
        )),
        Line::from(Span::styled(format!("Type the {HOW}."), t.dim())),
        Line::from(vec![
            Span::styled("> ", t.bold()),
            Span::styled(p.text.clone(), t.bold()),
            Span::styled("_", t.key()),
        ]),
        match &p.error {
            Some(e) => Line::from(Span::styled(e.clone(), t.warn())),
            None => Line::default(),
        },
    ];
    for item in MENU {
        lines.push(Line::from(vec![
            Span::styled(format!(" {} ", item.letter), t.key()),
            Span::styled(format!(" {:<6}", item.value), t.dim()),
            Span::raw(item.words),
        ]));
    }
    lines.push(Line::from(Span::styled(
        "Enter inject · Esc close · after a trip, v says why",
        t.dim(),
    )));
    let w = 64u16.min(area.width);
    let h = (lines.len() as u16 + 2).min(area.height);
    let r = Rect {
        x: area.x + (area.width - w) / 2,
        y: area.y + (area.height - h) / 2,
        width: w,
        height: h,
    };
    Clear.render(r, buf);
    let block = Block::new()
        .borders(Borders::ALL)
        .border_style(t.warn())
        .title(Span::styled(format!(" DRILL · {name} · simulated board "), t.alarm()));
    let inner = block.inner(r);
    block.render(r, buf);
    for (k, l) in lines.iter().enumerate() {
        let y = inner.y + k as u16;
        if y >= inner.bottom() {
            break;
        }
        buf.set_line(inner.x + 1, y, l, inner.width.saturating_sub(2));
    }
}
