//! Boxes drawn over the screen: key help, the quit question and prompts. The footer stays
//! visible under every one of them, so the stop-all key is always on screen.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Borders, Clear, Widget};

use crate::cockpit::app::{App, Overlay, Prompt, Purpose};
use crate::cockpit::keys::{Group, BINDINGS};
use crate::cockpit::ui::log_panel::wrap;

/// A centred rectangle of at most `w`×`h` inside `area`.
pub(crate) fn centred(area: Rect, w: u16, h: u16) -> Rect {
    let w = w.min(area.width);
    let h = h.min(area.height);
    Rect {
        x: area.x + (area.width - w) / 2,
        y: area.y + (area.height - h) / 2,
        width: w,
        height: h,
    }
}

/// A bordered, titled box of `lines` over `area` (cleared first).
pub(crate) fn boxed(app: &App, area: Rect, buf: &mut Buffer, title: &str, lines: &[Line<'_>]) {
    Clear.render(area, buf);
    let block = Block::new()
        .borders(Borders::ALL)
        .border_style(app.theme.border(true))
        .title(Span::styled(format!(" {title} "), app.theme.bold()));
    let inner = block.inner(area);
    block.render(area, buf);
    for (k, l) in lines.iter().enumerate() {
        let y = inner.y + k as u16;
        if y >= inner.bottom() {
            break;
        }
        buf.set_line(inner.x + 1, y, l, inner.width.saturating_sub(2));
    }
}

/// Draws the overlay, if any, over `area` (the screen between header and footer).
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    match &app.overlay {
        Overlay::None => {}
        Overlay::Help => help(app, area, buf),
        Overlay::ConfirmQuit => confirm(app, area, buf),
        Overlay::Prompt(p) => prompt(app, p, area, buf),
        Overlay::Spots(i) => crate::cockpit::ui::spots::render(app, *i, area, buf),
    }
}

/// The help text, one column of lines per group, from the keymap table.
fn help_groups(app: &App) -> Vec<Vec<Line<'static>>> {
    let t = app.theme;
    let mut groups: Vec<(Group, Vec<Line<'static>>)> = Vec::new();
    for b in BINDINGS.iter().filter(|b| !b.label.is_empty()) {
        if groups.last().is_none_or(|(g, _)| *g != b.group) {
            groups.push((
                b.group,
                vec![Line::from(Span::styled(b.group.title().to_owned(), t.bold()))],
            ));
        }
        if let Some((_, lines)) = groups.last_mut() {
            lines.push(Line::from(vec![
                Span::styled(format!(" {:<10} ", b.label), t.bold()),
                Span::raw(b.help.to_owned()),
            ]));
        }
    }
    groups.into_iter().map(|(_, l)| l).collect()
}

fn help(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let groups = help_groups(app);
    let total: usize = groups.iter().map(Vec::len).sum();
    let two = area.width >= 76;
    let mut cols: Vec<Vec<Line<'static>>> = vec![Vec::new()];
    let half = total.div_ceil(2);
    for g in groups {
        if two && cols.len() == 1 && !cols[0].is_empty() && cols[0].len() + g.len() > half {
            cols.push(Vec::new());
        }
        if let Some(c) = cols.last_mut() {
            c.extend(g);
        }
    }
    let col_w: u16 = 46;
    let rows = cols.iter().map(Vec::len).max().unwrap_or(0) as u16;
    let log = match &app.log_file {
        Ok(p) => format!("log file: {}", p.display()),
        Err(e) => format!("no log file: {e}"),
    };
    let w = if two { col_w * 2 + 4 } else { col_w + 2 };
    let w = w.max(80).min(area.width);
    // The cautions are wrapped to the box, never cut: they stay whole on any screen.
    let caution = "Space works in every screen and prompt. It is a software stop, not a \
                   safety function: wire a hardware emergency stop.";
    let mut notes: Vec<Line<'static>> = wrap(caution, usize::from(w.saturating_sub(4)))
        .into_iter()
        .map(|l| Line::from(Span::styled(l, t.warn())))
        .collect();
    notes.push(Line::from(Span::styled(log, t.dim())));
    let r = centred(area, w, rows + notes.len() as u16 + 2);
    let inner_h = r.height.saturating_sub(2);
    let key_rows = inner_h.saturating_sub(notes.len() as u16);
    let hidden = rows.saturating_sub(key_rows);
    let top = app.help_top.min(hidden);
    Clear.render(r, buf);
    let mut block = Block::new()
        .borders(Borders::ALL)
        .border_style(t.border(true))
        .title(Span::styled(" keys ", t.bold()))
        .title(Span::styled(" Esc closes ", t.dim()));
    if hidden > 0 {
        let more = match (top > 0, top < hidden) {
            (true, true) => " ↑↓ more ",
            (false, _) => " ↓ more ",
            (true, false) => " ↑ more ",
        };
        block = block.title(Span::styled(more, t.warn()));
    }
    let inner = block.inner(r);
    block.render(r, buf);
    let cw = if two { inner.width / 2 } else { inner.width };
    // The cautions give way last: when the keys do not all fit, they scroll above them.
    let notes_y = inner.y + rows.saturating_sub(top).min(key_rows);
    for (c, lines) in cols.iter().enumerate() {
        for (k, l) in lines.iter().skip(usize::from(top)).enumerate() {
            let y = inner.y + k as u16;
            if y >= notes_y {
                break;
            }
            buf.set_line(inner.x + 1 + c as u16 * cw, y, l, cw.saturating_sub(1));
        }
    }
    for (k, l) in notes.iter().enumerate() {
        let y = notes_y + k as u16;
        if y < inner.bottom() {
            buf.set_line(inner.x + 1, y, l, inner.width.saturating_sub(2));
        }
    }
}

fn confirm(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let on = app.motors_on();
    let mut lines = vec![Line::default()];
    if !on.is_empty() {
        lines.push(Line::from(Span::styled(format!("Motor on: {}.", on.join(", ")), t.warn())));
        lines.push(Line::raw("Quitting turns every motor off."));
    }
    if app.unsaved() {
        lines.push(Line::from(Span::styled(
            format!("Gain changes are not saved ({}).", app.source),
            t.warn(),
        )));
    }
    lines.push(Line::default());
    lines.push(Line::from(vec![
        Span::styled(" y ", t.key()),
        Span::raw(" quit   "),
        Span::styled(" n ", t.key()),
        Span::raw(" stay"),
    ]));
    let h = lines.len() as u16 + 2;
    boxed(app, centred(area, 60, h), buf, "quit servotty?", &lines);
}

fn prompt(app: &App, p: &Prompt, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let (title, help) = match p.purpose {
        Purpose::Drill { axis } => {
            return crate::cockpit::ui::drill::render(app, p, axis, area, buf)
        }
        Purpose::GoTo { axis } => {
            let a = &app.config.axes[axis];
            (
                format!("{}: go to position", a.name),
                if app.config.spots.is_empty() {
                    format!("{} … {} {}", a.limits.soft_min, a.limits.soft_max, a.scale.unit)
                } else {
                    let names: Vec<&str> = app.config.spots.names().collect();
                    format!(
                        "{} … {} {}, or @{}",
                        a.limits.soft_min,
                        a.limits.soft_max,
                        a.scale.unit,
                        names.join(" @")
                    )
                },
            )
        }
        Purpose::StoreSpot => (
            "store the present position".to_owned(),
            "a name for it (every homed axis), then `g @name` goes there".to_owned(),
        ),
        Purpose::Gain { axis, param } => {
            let a = &app.config.axes[axis];
            (
                format!("{}: {}", a.name, param.key()),
                format!("new value in {}, applied live", param.unit(&a.scale.unit)),
            )
        }
        Purpose::SaveCopy => (
            "write a configuration file".to_owned(),
            "the built-in demo has no file; write a copy to:".to_owned(),
        ),
        Purpose::Test { axis } => (
            format!("{}: tune (the axis moves)", app.config.axes[axis].name),
            "d direction · b breakaway · i identify · r relay · s step · p full tuning".to_owned(),
        ),
    };
    let mut lines = vec![
        Line::from(Span::styled(help, t.dim())),
        Line::from(vec![
            Span::styled("> ", t.bold()),
            Span::styled(p.text.clone(), t.bold()),
            Span::styled("_", t.key()),
        ]),
    ];
    match &p.error {
        Some(e) => lines.push(Line::from(Span::styled(e.clone(), t.warn()))),
        None => lines.push(Line::default()),
    }
    lines.push(Line::from(Span::styled("Enter apply · Esc cancel · Space stop-all", t.dim())));
    boxed(app, centred(area, 64, lines.len() as u16 + 2), buf, &title, &lines);
}
