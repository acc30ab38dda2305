//! The event log, as a panel (newest entries that fit) and as a full, scrollable screen.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Borders, Widget};

use crate::cockpit::app::App;
use crate::cockpit::event_log::Entry;

fn entry_line(app: &App, e: &Entry) -> Line<'static> {
    let t = app.theme;
    Line::from(vec![
        Span::styled(e.clock(), t.dim()),
        Span::raw(" "),
        Span::styled(format!("{:<5}", e.kind.tag()), t.event(e.kind)),
        Span::raw(" "),
        Span::raw(e.text_with_count()),
    ])
}

/// The newest entries that fit, newest at the bottom. Bordered from three rows up; long
/// entries wrap when the panel is tall enough to afford it.
pub fn render_panel(app: &App, area: Rect, buf: &mut Buffer) {
    if area.height == 0 || area.width == 0 {
        return;
    }
    let inner = if area.height >= 3 {
        let block = Block::new()
            .borders(Borders::ALL)
            .border_style(app.theme.dim())
            .title(Span::styled(" events ", app.theme.bold()))
            .title(Span::styled(" l: all ", app.theme.dim()));
        let inner = block.inner(area);
        block.render(area, buf);
        inner
    } else {
        area
    };
    if inner.height >= WRAP_FROM_ROWS {
        render_entries(app, inner, 0, buf);
        return;
    }
    let entries = app.log.entries();
    let shown = entries.len().min(inner.height as usize);
    let first = entries.len() - shown;
    for (row, e) in entries.iter().skip(first).enumerate() {
        let y = inner.y + row as u16;
        buf.set_line(inner.x, y, &entry_line(app, e), inner.width);
    }
}

/// Panels at least this tall wrap long entries instead of cutting them (always: a cut line
/// loses the capture's file name or the hint).
const WRAP_FROM_ROWS: u16 = 1;
/// Columns before an entry's text: "hh:mm:ss.d TAG   ".
const PREFIX_WIDTH: usize = 17;

/// The full log, wrapped, ending `app.log_back` entries before the newest.
pub fn render_screen(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let entries = app.log.entries();
    let title = format!(
        " event log: {} entries{} ",
        entries.len(),
        if app.log_back > 0 { format!(", {} newer below", app.log_back) } else { String::new() }
    );
    let block = Block::new()
        .borders(Borders::ALL)
        .border_style(t.dim())
        .title(Span::styled(title, t.bold()));
    let inner = block.inner(area);
    block.render(area, buf);
    render_entries(app, inner, app.log_back, buf);
}

/// Entries wrapped into `inner`, bottom-up, ending `back` entries before the newest.
fn render_entries(app: &App, inner: Rect, back: usize, buf: &mut Buffer) {
    let t = app.theme;
    let entries = app.log.entries();
    if inner.width as usize <= PREFIX_WIDTH + 8 || inner.height == 0 {
        return;
    }
    let text_w = inner.width as usize - PREFIX_WIDTH;
    let end = entries.len().saturating_sub(back);
    let mut y = inner.bottom();
    for e in entries.iter().take(end).rev() {
        let mut chunks = wrap(&e.text_with_count(), text_w);
        let room = y.saturating_sub(inner.y);
        if room == 0 {
            break;
        }
        if chunks.len() as u16 > room {
            if y < inner.bottom() {
                // An older entry that does not fit whole is left out...
                break;
            }
            // ...but the newest shows as much of itself as there is room for.
            chunks.truncate(room as usize);
        }
        let rows = chunks.len() as u16;
        y -= rows;
        for (k, chunk) in chunks.into_iter().enumerate() {
            let line = if k == 0 {
                Line::from(vec![
                    Span::styled(e.clock(), t.dim()),
                    Span::raw(" "),
                    Span::styled(format!("{:<5}", e.kind.tag()), t.event(e.kind)),
                    Span::raw(" "),
                    Span::raw(chunk),
                ])
            } else {
                Line::from(vec![Span::raw(" ".repeat(PREFIX_WIDTH)), Span::raw(chunk)])
            };
            buf.set_line(inner.x, y + k as u16, &line, inner.width);
        }
    }
}

/// Splits `text` into rows of at most `width` characters, at spaces where it can.
pub(crate) fn wrap(text: &str, width: usize) -> Vec<String> {
    let width = width.max(1);
    let mut rows = vec![String::new()];
    for word in text.split(' ') {
        let mut word: Vec<char> = word.chars().collect();
        loop {
            let row = rows.last_mut().expect("rows is never empty");
            let used = row.chars().count();
            let gap = usize::from(used > 0);
            if used + gap + word.len() <= width {
                if gap == 1 {
                    row.push(' ');
                }
                row.extend(word.iter());
                break;
            }
            if used == 0 {
                // A word longer than a row is cut.
                row.extend(word.iter().take(width));
                word.drain(..width);
            }
            rows.push(String::new());
        }
    }
    rows
}

#[cfg(test)]
mod tests {
    use super::wrap;

    #[test]
    fn wraps_at_spaces_and_cuts_only_long_words() {
        assert_eq!(
            wrap("fe 3.36 mm exceeded its band", 12),
            ["fe 3.36 mm", "exceeded its", "band"]
        );
        assert_eq!(wrap("abcdefghij", 4), ["abcd", "efgh", "ij"]);
        assert_eq!(wrap("", 4), [""]);
    }
}
