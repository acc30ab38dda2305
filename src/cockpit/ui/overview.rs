//! The overview screen: one panel per axis and the event log.
//!
//! Wide terminals put the log beside the axes; narrow ones put it underneath and give it
//! what the axes leave. When the axes do not all fit as full panels they shrink in steps
//! that keep both number lines: bordered with two lines, then bare with two lines, then
//! one line each. Sparklines are the first thing to go.

use ratatui::buffer::Buffer;
use ratatui::layout::{Constraint, Layout, Rect};

use crate::cockpit::app::App;
use crate::cockpit::ui::{axis_panel, log_panel};

/// From this width the log goes beside the axes.
const SIDE_LOG_WIDTH: u16 = 140;
/// Rows of the smallest full panel: border, two number lines, one sparkline row.
const PANEL_ROWS: u16 = 5;
/// Log rows below the axes on a narrow screen, at most.
const MAX_LOG_ROWS: u16 = 10;
/// Log rows below the axes worth a bordered panel.
const MIN_LOG_ROWS: u16 = 4;
/// Log rows (five entries) the log gets before panels grow past their smallest full size.
const COMFORT_LOG_ROWS: u16 = 7;

/// Rows for each panel in `height` rows, leaving `reserve` for the log if possible.
fn panel_heights(app: &App, height: u16, reserve: u16) -> Vec<u16> {
    let n = app.axes.len();
    let n16 = u16::try_from(n).unwrap_or(u16::MAX).max(1);
    let wants: Vec<u16> = (0..n).map(|i| axis_panel::rows_wanted(app, i)).collect();
    let avail = height.saturating_sub(reserve);
    if wants.iter().sum::<u16>() <= avail {
        return wants;
    }
    if n16 * PANEL_ROWS <= avail {
        let per = avail / n16;
        let extra = avail - per * n16;
        // Spare rows go to the first panels, one each: they stay full panels either way.
        return (0..n16).map(|i| per + u16::from(i < extra)).collect();
    }
    // Crowded: every axis the same shrunken shape, the log takes what is left.
    let per = [4, 2, 1].into_iter().find(|&p| n16 * p < height).unwrap_or(1);
    vec![per; n]
}

/// Draws the overview into `area`.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let (axes, log, heights) = if area.width >= SIDE_LOG_WIDTH {
        let log_w = (area.width * 35 / 100).clamp(48, 90);
        let [a, l] =
            Layout::horizontal([Constraint::Fill(1), Constraint::Length(log_w)]).areas(area);
        (a, l, panel_heights(app, a.height, 0))
    } else {
        // The log first gets enough for a few entries, then the panels what they can fill,
        // then the log whatever is still left.
        let n = u16::try_from(app.axes.len()).unwrap_or(u16::MAX);
        let mut log_h = area.height.saturating_sub(n * PANEL_ROWS).min(COMFORT_LOG_ROWS);
        if log_h < MIN_LOG_ROWS {
            log_h = MIN_LOG_ROWS;
        }
        let heights = panel_heights(app, area.height, log_h);
        let used: u16 = heights.iter().sum();
        let log_h = area.height.saturating_sub(used).min(MAX_LOG_ROWS);
        let [a, l] = Layout::vertical([Constraint::Fill(1), Constraint::Length(log_h)]).areas(area);
        (a, l, heights)
    };
    let mut y = axes.y;
    for (i, h) in heights.into_iter().enumerate() {
        if h == 0 || y >= axes.bottom() {
            break;
        }
        let h = h.min(axes.bottom() - y);
        axis_panel::render(app, i, Rect { y, height: h, ..axes }, buf);
        y += h;
    }
    log_panel::render_panel(app, log, buf);
}
