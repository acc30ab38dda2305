//! Drawing: a pure function of [`App`], no I/O and no waiting.
//!
//! - [`header`] and [`footer`]: the top and bottom lines, on every screen; [`status`]: the
//!   line above the footer (selected axis, jog step and speed, unsaved gains, its trip).
//! - [`overview`], [`detail`], [`log_panel`], [`trip`], [`lists`]: the screens.
//! - [`axis_panel`]: one axis's lines, shared by overview and detail.
//! - [`overlay`]: help, quit question, prompts; [`spots`]: the spot picker.
//! - [`row`]: fitting labelled values into the width available.

pub mod axis_panel;
pub mod detail;
pub mod drill;
pub mod footer;
pub mod header;
pub mod lists;
pub mod log_panel;
pub mod overlay;
pub mod overview;
pub mod row;
pub mod spots;
pub mod status;
pub mod trip;

use ratatui::buffer::Buffer;
use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::widgets::Widget;

use crate::cockpit::app::{App, Screen};

/// Smallest useful terminal; below it only the stop-all line is drawn.
const MIN_WIDTH: u16 = 40;
const MIN_HEIGHT: u16 = 6;

impl Widget for &App {
    fn render(self, area: Rect, buf: &mut Buffer) {
        render(self, area, buf);
    }
}

/// Draws the whole cockpit into `area`.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    if area.width < MIN_WIDTH || area.height < MIN_HEIGHT {
        let msg = format!("terminal too small; Space = {}", footer::STOP_ALL_LABEL);
        buf.set_stringn(area.x, area.y, msg, area.width as usize, app.theme.bold());
        return;
    }
    let [head, body, status, foot] = Layout::vertical([
        Constraint::Length(1),
        Constraint::Fill(1),
        Constraint::Length(1),
        Constraint::Length(1),
    ])
    .areas(area);
    header::render(app, head, buf);
    status::render(app, status, buf);
    match app.screen {
        Screen::Overview => overview::render(app, body, buf),
        Screen::Detail => detail::render(app, body, buf),
        Screen::Log => log_panel::render_screen(app, body, buf),
        Screen::Trip => trip::render(app, body, buf),
        Screen::Lists => lists::render(app, body, buf),
    }
    footer::render(app, foot, buf);
    overlay::render(app, body, buf);
}
