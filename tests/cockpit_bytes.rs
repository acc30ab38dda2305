//! Bytes written to the terminal per second while eight axes move, at the default frame
//! rate: what an SSH link has to carry. Measured through the real crossterm backend into a
//! counting writer; deterministic (the scene is synthetic, time is the frame count).
//!
//! Run: `cargo test --release --test cockpit_bytes -- --ignored --nocapture`
//! Bars (the cockpit issue): < 30 KB/s at 80×24, < 100 KB/s at 200×60.
mod cockpit_support;

use std::io::{self, Write};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;

use cockpit_support as s;
use ratatui::backend::CrosstermBackend;
use ratatui::layout::Rect;
use ratatui::{Terminal, TerminalOptions, Viewport};
use servotty::cockpit::runner::FRAME_INTERVAL;
use servotty::cockpit::{App, Theme};
use servotty::config::ConfigSource;

#[derive(Clone, Default)]
struct Counter(Arc<AtomicUsize>);

impl Write for Counter {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        self.0.fetch_add(buf.len(), Ordering::Relaxed);
        Ok(buf.len())
    }

    fn flush(&mut self) -> io::Result<()> {
        Ok(())
    }
}

/// Bytes per second over `seconds` of eight moving axes at `w`×`h`, after the first paint.
fn bytes_per_second(w: u16, h: u16, seconds: u32, detail: bool) -> f64 {
    let cfg = s::eight_axes();
    let mut app = App::new(cfg.clone(), ConfigSource::BuiltInDemo, Theme::default());
    if detail {
        app.apply(s::at(0), servotty::cockpit::action::Action::OpenDetail);
    }
    let counter = Counter::default();
    let viewport = Viewport::Fixed(Rect::new(0, 0, w, h));
    let mut term = Terminal::with_options(
        CrosstermBackend::new(counter.clone()),
        TerminalOptions { viewport },
    )
    .expect("terminal");
    let fps = (1.0 / FRAME_INTERVAL.as_secs_f64()).round() as u32;
    // Warm up: fill the histories and paint once; the first paint is not steady state.
    for k in 0..fps * 20 {
        app.observe(s::at(k), &s::eight_frame(&cfg, k), false);
    }
    term.draw(|f| f.render_widget(&app, f.area())).expect("draw");
    let before = counter.0.load(Ordering::Relaxed);
    for k in fps * 20..fps * (20 + seconds) {
        app.observe(s::at(k), &s::eight_frame(&cfg, k), false);
        term.draw(|f| f.render_widget(&app, f.area())).expect("draw");
    }
    (counter.0.load(Ordering::Relaxed) - before) as f64 / f64::from(seconds)
}

#[test]
#[ignore = "a measurement, not a check: run with --ignored --nocapture"]
fn bytes_per_second_with_eight_moving_axes() {
    for (w, h, bar) in [(80u16, 24u16, 30_000.0), (200, 60, 100_000.0)] {
        let overview = bytes_per_second(w, h, 30, false);
        let detail = bytes_per_second(w, h, 30, true);
        println!(
            "{w}x{h}: overview {:.1} KB/s, detail {:.1} KB/s (bar {:.0} KB/s)",
            overview / 1000.0,
            detail / 1000.0,
            bar / 1000.0
        );
        assert!(overview < bar, "{w}x{h} overview: {overview} B/s");
    }
}
