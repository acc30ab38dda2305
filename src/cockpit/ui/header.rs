//! The top line: machine name, stop-all state and category, homed summary (jog settings
//! and unsaved gains are on the status line, which never drops them).

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::Span;

use crate::cockpit::app::App;
use crate::cockpit::ui::row::Row;

/// Draws the header into one line.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let mut row = Row::new();
    let stop = if app.stop_latched {
        Span::styled(" STOP-ALL LATCHED ", t.alarm())
    } else {
        Span::styled("stop-all clear", t.good())
    };
    let mut stop_seg = vec![stop];
    if app.stop_latched {
        stop_seg.push(Span::styled(" R releases", t.dim()));
    }
    let (homed, total) = app.homed();
    row.push(0, stop_seg);
    row.text(1, format!("stop cat {}", app.stop_category), t.dim());
    row.text(1, format!("homed {homed}/{total}"), if homed == total { t.good() } else { t.warn() });
    let name = format!(" {}", app.config.machine.name);
    // The name keeps up to 30 columns; the least important status goes first.
    let name_keep = name.chars().count().min(30) + 2;
    let right = row.fit(area.width.saturating_sub(name_keep as u16) as usize, 3);
    let right_w = right.width() as u16;
    let name_w = area.width.saturating_sub(right_w + 2);
    buf.set_stringn(area.x, area.y, &name, name_w as usize, t.bold());
    buf.set_line(area.x + area.width.saturating_sub(right_w + 1), area.y, &right, right_w);
}
