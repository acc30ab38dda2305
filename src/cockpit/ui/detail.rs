//! The axis detail screen: the axis's numbers, charts of the last seconds (target and
//! position, following error with its band, duty), the controller parameters with the one
//! being edited, and the newest events.
//!
//! Chart ranges snap to a ladder of round values and only change when the data leaves them,
//! so axes do not rescale (and redraw every label) on each frame.

use ratatui::buffer::Buffer;
use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::style::Style;
use ratatui::symbols::Marker;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Axis, Block, Borders, Chart, Dataset, GraphType, Widget};

use crate::cockpit::app::{App, CHART_SECONDS};
use crate::cockpit::format::{num, plain};
use crate::cockpit::ui::{axis_panel, log_panel};
use crate::config::ConfigSource;
use crate::control::params::Param;

/// Width of the parameter column.
fn params_width(area: Rect) -> u16 {
    if area.width >= 120 {
        46
    } else {
        32
    }
}

/// The smallest of 1, 2, 5 × 10ⁿ that is ≥ `v` (for stable chart ranges).
pub fn nice_ceiling(v: f64) -> f64 {
    if !(v.is_finite() && v > 0.0) {
        return 1.0;
    }
    let p = 10f64.powf(v.log10().floor());
    for m in [1.0, 2.0, 5.0, 10.0] {
        if m * p >= v * 0.999_999 {
            return m * p;
        }
    }
    10.0 * p
}

/// Draws the detail screen for the selected axis.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let i = app.selected;
    if i >= app.axes.len() || area.height < 4 {
        return;
    }
    let log_h = if area.height >= 40 {
        8
    } else if area.height >= 20 {
        4
    } else {
        0
    };
    let [summary, middle, log] =
        Layout::vertical([Constraint::Length(3), Constraint::Fill(1), Constraint::Length(log_h)])
            .areas(area);
    let title_style = app.theme.selected();
    let block = Block::new()
        .borders(Borders::TOP)
        .border_style(app.theme.border(true))
        .title(Span::styled(
            format!(" {} {} ", app.theme.pointer(), app.config.axes[i].name),
            title_style,
        ))
        .title(Span::styled(" Esc: overview ", app.theme.dim()));
    let inner = block.inner(summary);
    block.render(summary, buf);
    let w = inner.width as usize;
    buf.set_line(
        inner.x + 1,
        inner.y,
        &axis_panel::status_line(app, i, false, w.saturating_sub(2)),
        inner.width,
    );
    if let Some(trip) = axis_panel::trip_lines(app, i, w.saturating_sub(2)).first() {
        buf.set_line(inner.x + 1, inner.y + 1, trip, inner.width);
    } else {
        buf.set_line(
            inner.x + 1,
            inner.y + 1,
            &axis_panel::measures_line(app, i, w.saturating_sub(2), 0),
            inner.width,
        );
    }
    let [charts, params] =
        Layout::horizontal([Constraint::Fill(1), Constraint::Length(params_width(area))])
            .areas(middle);
    render_charts(app, i, charts, buf);
    render_params(app, i, params, buf);
    log_panel::render_panel(app, log, buf);
}

fn render_charts(app: &App, i: usize, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let v = &app.axes[i];
    let u = &app.config.axes[i].scale.unit;
    let now = app.now.as_secs_f64();
    let samples: Vec<_> =
        v.history.since(now - CHART_SECONDS).filter(|s| s.linked).copied().collect();
    let x = |s: &crate::cockpit::history::Sample| s.t - now;
    let target: Vec<(f64, f64)> = samples.iter().map(|s| (x(s), s.target)).collect();
    let position: Vec<(f64, f64)> = samples.iter().map(|s| (x(s), s.position)).collect();
    let fe: Vec<(f64, f64)> = samples.iter().map(|s| (x(s), s.following_error)).collect();
    let band_hi: Vec<(f64, f64)> = samples.iter().map(|s| (x(s), s.band)).collect();
    let band_lo: Vec<(f64, f64)> = samples.iter().map(|s| (x(s), -s.band)).collect();
    let duty: Vec<(f64, f64)> = samples.iter().map(|s| (x(s), s.duty)).collect();

    let rows = Layout::vertical([Constraint::Fill(1); 3]).split(area);
    let d = v.decimals;

    // Position: a range around the data, snapped outward to a round step.
    let (mut lo, mut hi) = samples
        .iter()
        .flat_map(|s| [s.position, s.target])
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| (a.min(p), b.max(p)));
    if !lo.is_finite() {
        (lo, hi) = (0.0, 1.0);
    }
    let step = nice_ceiling(((hi - lo) / 4.0).max(10f64.powi(-(d as i32))));
    let (lo, hi) = (
        (lo / step).floor() * step,
        ((hi / step).ceil() * step).max((lo / step).floor() * step + step),
    );
    chart(
        app,
        rows[0],
        buf,
        format!(" position (line), target (dots), {u} "),
        vec![
            Dataset::default()
                .marker(Marker::Dot)
                .graph_type(GraphType::Scatter)
                .style(t.series(1))
                .data(&target),
            Dataset::default()
                .marker(t.marker())
                .graph_type(GraphType::Line)
                .style(t.series(0))
                .data(&position),
        ],
        [lo, hi],
        [num(lo, d, 0), num(hi, d, 0)],
        false,
    );

    let fe_max = samples.iter().map(|s| s.following_error.abs().max(s.band)).fold(0.0, f64::max);
    let fe_r = nice_ceiling(fe_max * 1.1);
    chart(
        app,
        rows[1],
        buf,
        format!(" following error and trip band, {u} "),
        vec![
            Dataset::default()
                .marker(Marker::Dot)
                .graph_type(GraphType::Line)
                .style(t.dim())
                .data(&band_hi),
            Dataset::default()
                .marker(Marker::Dot)
                .graph_type(GraphType::Line)
                .style(t.dim())
                .data(&band_lo),
            Dataset::default()
                .marker(t.marker())
                .graph_type(GraphType::Line)
                .style(t.series(0))
                .data(&fe),
        ],
        [-fe_r, fe_r],
        [num(-fe_r, d, 0), num(fe_r, d, 0)],
        false,
    );

    let duty_max = samples.iter().map(|s| s.duty.abs()).fold(0.0, f64::max);
    let duty_r = [10.0, 25.0, 50.0, 100.0].into_iter().find(|&r| duty_max <= r).unwrap_or(100.0);
    chart(
        app,
        rows[2],
        buf,
        " duty, % ".to_owned(),
        vec![Dataset::default()
            .marker(t.marker())
            .graph_type(GraphType::Line)
            .style(t.series(2))
            .data(&duty)],
        [-duty_r, duty_r],
        [format!("{:.0}", -duty_r), format!("{duty_r:.0}")],
        true,
    );
}

#[allow(clippy::too_many_arguments)]
fn chart(
    app: &App,
    area: Rect,
    buf: &mut Buffer,
    title: String,
    data: Vec<Dataset<'_>>,
    y: [f64; 2],
    y_labels: [String; 2],
    x_labels: bool,
) {
    let t = app.theme;
    let mut x_axis = Axis::default().bounds([-CHART_SECONDS, 0.0]).style(t.dim());
    if x_labels {
        x_axis = x_axis.labels([format!("-{CHART_SECONDS:.0} s"), "now".to_owned()]);
    }
    panel_chart(&t, title, data, x_axis, y, y_labels).render(area, buf);
}

/// One chart panel as the cockpit draws them (title on a top rule, dim axes, no legend);
/// the detail and trip screens share it so their charts read alike.
pub fn panel_chart<'a>(
    t: &crate::cockpit::theme::Theme,
    title: String,
    data: Vec<Dataset<'a>>,
    x_axis: Axis<'a>,
    y: [f64; 2],
    y_labels: [String; 2],
) -> Chart<'a> {
    Chart::new(data)
        .block(
            Block::new()
                .borders(Borders::TOP)
                .border_style(t.dim())
                .title(Span::styled(title, t.bold())),
        )
        .x_axis(x_axis)
        .y_axis(Axis::default().bounds(y).labels(y_labels).style(t.dim()))
        .legend_position(None)
}

fn render_params(app: &App, i: usize, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let cfg = &app.config.axes[i];
    let c = &cfg.controller;
    let u = &cfg.scale.unit;
    let mode = match c.mode {
        crate::config::ControlMode::OnOff => "on-off",
        crate::config::ControlMode::Proportional => "proportional",
        crate::config::ControlMode::Pid => "PID",
    };
    let block = Block::new()
        .borders(Borders::ALL)
        .border_style(t.dim())
        .title(Span::styled(format!(" controller: {mode} "), t.bold()));
    let inner = block.inner(area);
    block.render(area, buf);
    let wide = inner.width >= 40;
    let mut lines: Vec<Line<'static>> = Vec::new();
    let changed = |p: Param| app.saved_controller(i).is_some_and(|s| p.get(s) != p.get(c));
    for (k, p) in app.params().into_iter().enumerate() {
        let here = k == app.param_cursor;
        let mark = if changed(p) { "*" } else { " " };
        let mut spans = vec![
            Span::styled(if here { t.pointer() } else { " " }, t.bold()),
            Span::styled(format!("{:<19}", p.key()), if here { t.selected() } else { t.text() }),
            Span::styled(format!("{:>9}", plain(p.get(c))), t.bold()),
            Span::styled(mark.to_owned(), t.warn()),
        ];
        if wide {
            spans.push(Span::styled(format!(" {}", p.unit(u)), t.dim()));
        }
        lines.push(Line::from(spans));
    }
    lines.push(Line::default());
    let l = &cfg.limits;
    let m = &cfg.motion;
    lines.push(Line::from(Span::styled(
        format!(" soft {} … {} {u}", plain(l.soft_min), plain(l.soft_max)),
        t.dim(),
    )));
    lines.push(Line::from(Span::styled(
        format!(
            " fe band {} {u} + {} s·v",
            plain(l.following_error),
            plain(l.following_error_per_velocity)
        ),
        t.dim(),
    )));
    lines.push(Line::from(Span::styled(
        format!(" v {} {u}/s  a {} {u}/s²", plain(m.max_velocity), plain(m.max_acceleration)),
        t.dim(),
    )));
    let status = if app.unsaved() {
        match &app.source {
            ConfigSource::File(_) => {
                Line::from(Span::styled(" * unsaved: w writes the file", t.warn()))
            }
            ConfigSource::BuiltInDemo => {
                Line::from(Span::styled(" * unsaved: w writes a copy", t.warn()))
            }
        }
    } else {
        match &app.source {
            ConfigSource::File(p) => {
                Line::from(Span::styled(format!(" file {}", p.display()), t.dim()))
            }
            ConfigSource::BuiltInDemo => {
                Line::from(Span::styled(" built-in demo (no file)", t.dim()))
            }
        }
    };
    lines.push(status);
    let hint = Line::from(Span::styled(" Enter: new value, live", Style::new()));
    lines.push(hint);
    for (k, line) in lines.iter().enumerate() {
        let y = inner.y + k as u16;
        if y >= inner.bottom() {
            break;
        }
        buf.set_line(inner.x, y, line, inner.width);
    }
}
