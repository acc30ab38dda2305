//! One axis's panel: its lines in order of importance, so a short panel keeps the numbers
//! and drops the sparklines.
//!
//! 1. state word, homed, position, target, duty (and goal, velocity when wide);
//! 2. following error against its trip band as a bar, link health;
//! 3. when tripped: the cause with its values, then the operator hint;
//! 4. sparklines of following error, duty and (when wide) position.

use ratatui::buffer::Buffer;
use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, BorderType, Borders, Sparkline, Widget};

use crate::cockpit::app::{App, AxisView, SPARK_STRIDE};
use crate::cockpit::format::{num, signed};
use crate::cockpit::history::Sample;
use crate::cockpit::theme::Theme;
use crate::cockpit::ui::row::Row;
use crate::engine::AxisState;

/// Tallest sparkline, rows: taller adds little and costs bytes.
const MAX_SPARK_ROWS: u16 = 3;
/// Sparklines need at least this much width each to show a trend.
const MIN_SPARK_WIDTH: u16 = 12;

/// The state line. `with_name` in bare (borderless) panels, where no title shows the name.
pub fn status_line(app: &App, i: usize, with_name: bool, width: usize) -> Line<'static> {
    let t = app.theme;
    let v = &app.axes[i];
    let s = &v.snap;
    let cfg = &app.config.axes[i];
    let (d, w) = (v.decimals, app.layout.pos_width);
    let u = cfg.scale.unit.clone();
    let linked = s.state != AxisState::Offline;
    let mut row = Row::new();
    if with_name {
        let pointer = if i == app.selected { t.pointer() } else { " " };
        let name_w = app.layout.name_width;
        row.push(
            0,
            vec![
                Span::styled(pointer.to_owned(), t.bold()),
                Span::styled(
                    format!("{:<name_w$}", cfg.name),
                    if i == app.selected { t.selected() } else { t.bold() },
                ),
            ],
        );
    }
    row.text(0, format!("{:<8}", s.state.word()), t.state(s.state));
    row.text(
        3,
        if s.homed { "homed    " } else { "not homed" },
        if s.homed { t.good() } else { t.dim() },
    );
    let val = |x: f64| if linked { num(x, d, w) } else { format!("{:>w$}", "-") };
    row.push(
        0,
        vec![
            Span::styled("pos ", t.dim()),
            Span::styled(val(s.position), t.bold()),
            Span::styled(format!(" {u}"), t.dim()),
        ],
    );
    // `set` is the moving setpoint, `goal` where the motion will end: a step press shows
    // at once in the goal even while the setpoint is still on its way.
    row.push(
        2,
        vec![
            Span::styled("set ", t.dim()),
            Span::raw(val(s.target)),
            Span::styled(format!(" {u}"), t.dim()),
        ],
    );
    let moving = matches!(
        s.state,
        AxisState::Moving | AxisState::Jogging | AxisState::Homing | AxisState::Stopping
    );
    if moving {
        row.push(
            1,
            vec![
                Span::styled("goal ", t.dim()),
                Span::styled(num(s.goal, d, w), t.bold()),
                Span::styled(format!(" {u}"), t.dim()),
            ],
        );
    }
    let duty = if linked { signed(s.duty, 1, 6) } else { format!("{:>6}", "-") };
    row.push(2, vec![Span::styled("duty ", t.dim()), Span::raw(duty), Span::styled(" %", t.dim())]);
    row.push(
        5,
        vec![
            Span::styled("v ", t.dim()),
            Span::raw(if linked { num(s.velocity, 1, 7) } else { format!("{:>7}", "-") }),
            Span::styled(format!(" {u}/s"), t.dim()),
        ],
    );
    row.fit(width, 2)
}

/// A bar of the following error across its trip band: centre is zero, each end the band.
pub fn fe_bar(theme: Theme, fe: f64, band: f64, width: usize) -> Vec<Span<'static>> {
    let width = width.max(3) | 1; // odd, so zero has a centre cell
    let half = width / 2;
    let ratio = if band > 0.0 { (fe / band).clamp(-1.0, 1.0) } else { 0.0 };
    let over = band > 0.0 && fe.abs() > band;
    let filled = (ratio.abs() * half as f64).round() as usize;
    let style = if over {
        theme.alarm()
    } else if ratio.abs() > 0.7 {
        theme.warn()
    } else {
        theme.good()
    };
    let mut left = String::with_capacity(half * 3);
    let mut right = String::with_capacity(half * 3);
    for k in 0..half {
        // Left half fills from the centre outwards for negative errors.
        left.push(if ratio < 0.0 && half - k <= filled { '█' } else { '·' });
        right.push(if ratio > 0.0 && k < filled { '█' } else { '·' });
    }
    vec![
        Span::styled("[", theme.dim()),
        Span::styled(left, style),
        Span::styled("|", theme.dim()),
        Span::styled(right, style),
        Span::styled("]", theme.dim()),
    ]
}

/// Columns the bare status line spends on the pointer and name (so the line below can
/// start under the state word).
fn name_indent(app: &App) -> usize {
    1 + app.layout.name_width + 2
}

/// Following error and link health. `indent` columns are left blank first.
pub fn measures_line(app: &App, i: usize, width: usize, indent: usize) -> Line<'static> {
    let t = app.theme;
    let v = &app.axes[i];
    let s = &v.snap;
    let u = &app.config.axes[i].scale.unit;
    let d = v.decimals;
    let mut row = Row::new();
    if indent > 0 {
        row.text(0, " ".repeat(indent.saturating_sub(2)), t.text());
    }
    let linked = s.state != AxisState::Offline;
    let bar_w = (width / 4).clamp(9, 41);
    row.text(0, "fe", t.dim());
    if linked {
        row.push(2, fe_bar(t, s.following_error, s.following_error_band, bar_w));
        let over = s.following_error_band > 0.0 && s.following_error.abs() > s.following_error_band;
        row.push(
            0,
            vec![
                Span::styled(
                    num(s.following_error, d, d + 3),
                    if over { t.alarm() } else { t.bold() },
                ),
                Span::styled(format!(" / {} {u}", num(s.following_error_band, d, 0)), t.dim()),
            ],
        );
        row.push(
            1,
            vec![
                Span::styled("link ", t.dim()),
                Span::raw(format!("{:>4.0}", s.link.frames_per_s)),
                Span::styled(" f/s", t.dim()),
            ],
        );
    } else {
        row.text(0, "-", t.dim());
        // Why the link is down and what to do, as far as the row has room.
        let why = s
            .link_error
            .as_deref()
            .map_or_else(|| "link down".to_owned(), |e| format!("link down: {e}"));
        let room = width.saturating_sub(indent + 8).max(9);
        row.text(0, cut(&why, room), t.warn());
        // The reason is worth more than the frame counters.
        return row.fit(width, 2);
    }
    let bad_style = if s.link.bad_frames > 0 { t.warn() } else { t.dim() };
    row.text(3, format!("bad {}", s.link.bad_frames), bad_style);
    row.text(
        4,
        format!("missed {}", s.link.missed),
        if s.link.missed > 0 { t.warn() } else { t.dim() },
    );
    row.fit(width, 2)
}

/// `text` cut to `width` characters, with an ellipsis when cut.
fn cut(text: &str, width: usize) -> String {
    if text.chars().count() <= width {
        return text.to_owned();
    }
    let mut s: String = text.chars().take(width.saturating_sub(1)).collect();
    s.push('…');
    s
}

/// The trip's cause and values, and its hint, when tripped.
pub fn trip_lines(app: &App, i: usize, width: usize) -> Vec<Line<'static>> {
    let t = app.theme;
    let v = &app.axes[i];
    let Some(trip) = &v.snap.trip else { return vec![] };
    let u = &app.config.axes[i].scale.unit;
    let d = v.decimals;
    let mut row = Row::new();
    row.push(0, vec![Span::styled(format!(" TRIP: {} ", trip.cause), t.alarm())]);
    row.text(
        1,
        format!("fe {} > band {} {u}", num(trip.following_error, d, 0), num(trip.band, d, 0)),
        t.bold(),
    );
    row.text(2, format!("pos {}", num(trip.position, d, 0)), t.text());
    row.text(3, format!("set {}", num(trip.target, d, 0)), t.text());
    row.text(2, format!("duty {} %", num(trip.duty, 1, 0)), t.text());
    row.text(4, format!("v {} {u}/s", num(trip.velocity, 1, 0)), t.text());
    let hint = format!("{}  (c clears)", trip.detail);
    vec![row.fit(width, 2), Line::from(Span::styled(hint, t.dim()))]
}

/// Sparklines of following error (share of its band), duty and position (share of travel),
/// newest at the right.
pub fn render_sparks(app: &App, i: usize, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let v: &AxisView = &app.axes[i];
    let cfg = &app.config.axes[i];
    let count = if area.width >= 3 * (MIN_SPARK_WIDTH + 6) + 4 { 3 } else { 2 };
    if area.width < count * (MIN_SPARK_WIDTH + 6) {
        return;
    }
    let parts =
        Layout::horizontal(vec![Constraint::Fill(1); count as usize]).spacing(2).split(area);
    let (lo, hi) = (cfg.limits.soft_min, cfg.limits.soft_max);
    // Each as a share of its full scale: the trip band, full duty, the soft travel.
    let share = |k: usize, s: &Sample| match k {
        0 if s.band > 0.0 => s.following_error.abs() / s.band,
        1 => s.duty.abs() / 100.0,
        2 if hi > lo => (s.position - lo) / (hi - lo),
        _ => 0.0,
    };
    let labels = ["fe  ", "duty", "pos "];
    for (k, part) in parts.iter().enumerate() {
        let label = labels[k];
        let [lab, spark] =
            Layout::horizontal([Constraint::Length(5), Constraint::Fill(1)]).areas(*part);
        buf.set_stringn(lab.x, lab.y, label, 5, t.dim());
        let n = spark.width as usize;
        let mut data: Vec<Option<u64>> = v
            .history
            .aligned(SPARK_STRIDE, n)
            .map(|s| s.linked.then(|| (share(k, s).clamp(0.0, 1.0) * 100.0).round() as u64))
            .collect();
        if data.len() < n {
            let mut padded = vec![None; n - data.len()];
            padded.append(&mut data);
            data = padded;
        }
        Sparkline::default()
            .data(data)
            .max(100)
            .bar_set(t.bar_set())
            .style(t.series(k))
            .render(spark, buf);
    }
}

/// Rows axis `i`'s panel can fill: border, numbers, trip lines, tallest sparkline.
pub fn rows_wanted(app: &App, i: usize) -> u16 {
    let trip = if app.axes[i].snap.trip.is_some() { 2 } else { 0 };
    2 + 2 + trip + MAX_SPARK_ROWS
}

/// Draws axis `i`'s panel into `area`: bordered when there is room, bare otherwise.
pub fn render(app: &App, i: usize, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let selected = i == app.selected;
    // A border costs two rows: only worth it with both number lines inside.
    let bordered = area.height >= 4;
    let inner = if bordered {
        let cfg = &app.config.axes[i];
        let title = if selected {
            format!("{} {} ", t.pointer(), cfg.name)
        } else {
            format!(" {} ", cfg.name)
        };
        let block = Block::new()
            .borders(Borders::ALL)
            .border_type(BorderType::Plain)
            .border_style(t.border(selected))
            .title(Span::styled(title, if selected { t.selected() } else { t.bold() }));
        let inner = block.inner(area);
        block.render(area, buf);
        Rect { x: inner.x + 1, width: inner.width.saturating_sub(2), ..inner }
    } else {
        area
    };
    let w = inner.width as usize;
    let mut lines = vec![status_line(app, i, !bordered, w)];
    if !bordered && inner.height < 2 {
        // One row per axis: the state line must carry the following error too.
        let s = &app.axes[i].snap;
        if s.state != AxisState::Offline {
            let mut l = lines.pop().unwrap_or_default();
            let fe = format!("  fe {}", num(s.following_error, app.axes[i].decimals, 0));
            if l.width() + fe.len() <= w {
                l.spans.push(Span::styled(fe, t.dim()));
            }
            lines.push(l);
        }
    } else {
        lines.push(measures_line(app, i, w, if bordered { 0 } else { name_indent(app) }));
        lines.extend(trip_lines(app, i, w));
    }
    let mut y = inner.y;
    for l in &lines {
        if y >= inner.bottom() {
            return;
        }
        buf.set_line(inner.x, y, l, inner.width);
        y += 1;
    }
    let rows = inner.bottom().saturating_sub(y).min(MAX_SPARK_ROWS);
    if rows > 0 {
        render_sparks(app, i, Rect { y, height: rows, ..inner }, buf);
    }
}
