//! Render time per frame: eight moving axes drawn into a ratatui test terminal, sampling a
//! new frame of snapshots each iteration (so the diff has real work to do).
//!
//! Run: `cargo bench --bench cockpit_render`
//! Bar (the cockpit issue): under 1 ms median at 200×60.

#[path = "../tests/cockpit_support/mod.rs"]
mod cockpit_support;

use std::hint::black_box;

use cockpit_support as s;
use criterion::{criterion_group, criterion_main, Criterion};
use ratatui::backend::TestBackend;
use ratatui::Terminal;
use servotty::cockpit::action::Action;
use servotty::cockpit::{App, Theme};
use servotty::config::ConfigSource;

fn bench_size(c: &mut Criterion, w: u16, h: u16, detail: bool) {
    let cfg = s::eight_axes();
    let mut app = App::new(cfg.clone(), ConfigSource::BuiltInDemo, Theme::default());
    if detail {
        app.apply(s::at(0), Action::OpenDetail);
    }
    for k in 0..600 {
        app.observe(s::at(k), &s::eight_frame(&cfg, k), false);
    }
    let mut term = Terminal::new(TestBackend::new(w, h)).expect("terminal");
    let mut k = 600;
    let name = format!("{} 8 axes {w}x{h}", if detail { "detail" } else { "overview" });
    c.bench_function(&name, |b| {
        b.iter(|| {
            k += 1;
            app.observe(s::at(k), &s::eight_frame(&cfg, k), false);
            term.draw(|f| f.render_widget(&app, f.area())).expect("draw");
            black_box(term.backend());
        });
    });
}

fn render(c: &mut Criterion) {
    bench_size(c, 200, 60, false);
    bench_size(c, 80, 24, false);
    bench_size(c, 200, 60, true);
}

criterion_group!(benches, render);
criterion_main!(benches);
