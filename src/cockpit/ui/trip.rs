//! The trip screen: the selected axis's full-rate history around its trip (target and
//! position; following error against its band; duty against its limits; the trip instant
//! as a vertical line at 0 s) with the diagnosis beside it.

use ratatui::buffer::Buffer;
use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::symbols::Marker;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Axis, Block, Borders, Dataset, GraphType, Paragraph, Widget, Wrap};

use crate::cockpit::app::App;
use crate::cockpit::ui::detail::{nice_ceiling, panel_chart};
use crate::diagnosis::Cause;

/// One chart: title, lines (points and style), y range.
type Panel<'a> = (String, Vec<(&'a [(f64, f64)], ratatui::style::Style)>, [f64; 2]);

/// Seconds of history drawn before the trip.
const BEFORE_S: f64 = 1.0;

/// Draws the trip screen into `area`.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let Some(view) = app.trip_view.as_ref() else {
        let msg = "fetching the history…";
        buf.set_stringn(area.x + 1, area.y, msg, area.width as usize, t.dim());
        return;
    };
    let d = &view.diagnosis;
    let rec = &view.record;
    let side = (area.width / 3).clamp(24, 60);
    let [charts, text] =
        Layout::horizontal([Constraint::Fill(1), Constraint::Length(side)]).areas(area);

    // The verdict first: it is what the operator came for.
    let mut lines = vec![Line::from(Span::styled(
        match &d.recorded_cause {
            Some(c) => format!("{}: tripped on {c}", rec.axis),
            None => format!("{}: no trip in the history", rec.axis),
        },
        t.bold(),
    ))];
    lines.push(Line::from(if d.cause == Cause::Undetermined {
        "most likely: cannot tell".to_owned()
    } else {
        format!("most likely: {} ({:.0} %)", d.cause, d.confidence * 100.0)
    }));
    if d.ambiguous {
        if let Some(o) = d.others.first() {
            lines.push(Line::from(format!(
                "ambiguous with {} ({:.0} %)",
                o.cause,
                o.confidence * 100.0
            )));
        }
    }
    for (title, items) in
        [("evidence", &d.evidence), ("check", &d.check), ("cannot tell", &d.cannot_tell)]
    {
        lines.push(Line::from(Span::styled(title, t.bold())));
        for i in items {
            lines.push(Line::from(format!("- {i}")));
        }
    }
    Paragraph::new(lines)
        .wrap(Wrap { trim: true })
        .block(Block::new().borders(Borders::LEFT).border_style(t.dim()))
        .render(text, buf);

    let t0 = d.trip_at_s.or_else(|| rec.rows.last().map(|r| r.t)).unwrap_or(0.0);
    let rows: Vec<_> = rec.rows.iter().filter(|r| r.t >= t0 - BEFORE_S).collect();
    let x_hi = rows.last().map_or(0.0, |r| r.t - t0).max(0.05);
    let pts = |f: &dyn Fn(&crate::engine::history::Sample) -> f64| -> Vec<(f64, f64)> {
        rows.iter().map(|r| (r.t - t0, f(r))).collect()
    };
    let target = pts(&|r| r.target);
    let position = pts(&|r| r.position);
    let fe = pts(&|r| r.following_error);
    let band_hi = pts(&|r| r.band);
    let band_lo = pts(&|r| -r.band);
    let duty = pts(&|r| r.duty);
    let max = rec.facts.max_duty;
    let limit_hi = pts(&|_| max);
    let limit_lo = pts(&|_| -max);
    let u = &rec.facts.unit;

    let (lo, hi) = target
        .iter()
        .chain(&position)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| (a.min(p.1), b.max(p.1)));
    let (lo, hi) = if lo.is_finite() { (lo, hi.max(lo + 1e-3)) } else { (0.0, 1.0) };
    let pad = (hi - lo) * 0.05;
    let fe_r = nice_ceiling(
        rows.iter().map(|r| r.following_error.abs().max(r.band)).fold(0.0, f64::max) * 1.1,
    );
    let duty_r = max.max(rows.iter().map(|r| r.duty.abs()).fold(0.0, f64::max)) * 1.05;
    let panels = Layout::vertical([Constraint::Fill(1); 3]).split(charts);
    let specs: [Panel<'_>; 3] = [
        (
            format!(" target (dots), position (line), {u}; trip at the vertical line "),
            vec![(&target[..], t.series(1)), (&position[..], t.series(0))],
            [lo - pad, hi + pad],
        ),
        (
            format!(" following error and band, {u} "),
            vec![(&band_hi[..], t.dim()), (&band_lo[..], t.dim()), (&fe[..], t.series(0))],
            [-fe_r, fe_r],
        ),
        (
            " duty and its limits, % ".to_owned(),
            vec![(&limit_hi[..], t.dim()), (&limit_lo[..], t.dim()), (&duty[..], t.series(2))],
            [-duty_r, duty_r],
        ),
    ];
    for (k, (title, series, y)) in specs.into_iter().enumerate() {
        let trip_line = [(0.0, y[0]), (0.0, y[1])];
        let mut data: Vec<Dataset<'_>> = series
            .into_iter()
            .enumerate()
            .map(|(j, (pts, style))| {
                let scatter = k == 0 && j == 0;
                Dataset::default()
                    .marker(if scatter { Marker::Dot } else { t.marker() })
                    .graph_type(if scatter { GraphType::Scatter } else { GraphType::Line })
                    .style(style)
                    .data(pts)
            })
            .collect();
        data.push(
            Dataset::default()
                .marker(t.marker())
                .graph_type(GraphType::Line)
                .style(t.bold())
                .data(&trip_line),
        );
        let mut x_axis = Axis::default().bounds([-BEFORE_S, x_hi]).style(t.dim());
        if k == 2 {
            // Two labels only: a middle one would not sit at the trip.
            x_axis = x_axis.labels([format!("-{BEFORE_S:.0} s"), format!("+{x_hi:.1} s")]);
        }
        let y_labels = [format!("{:.1}", y[0]), format!("{:.1}", y[1])];
        panel_chart(&t, title, data, x_axis, y, y_labels).render(panels[k], buf);
    }
}
