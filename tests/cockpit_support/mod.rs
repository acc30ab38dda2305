//! Hand-made machines for cockpit tests: snapshots are plain data, so every scene is built
//! without an engine, frame by frame, with cockpit time passed in.
#![allow(dead_code)]

use std::sync::Arc;
use std::time::Duration;

use ratatui::backend::TestBackend;
use ratatui::Terminal;
use servotty::cockpit::action::Action;
use servotty::cockpit::{App, Theme};
use servotty::config::{ConfigSource, MachineConfig};
use servotty::engine::{AxisSnapshot, AxisState, LinkStats, Trip, TripCause};

/// Frames per second the scenes are sampled at (the cockpit's default).
pub const FPS: u32 = 20;

/// A linked axis at rest.
pub fn snap(axis: &str, state: AxisState, position: f64) -> AxisSnapshot {
    let mut s = AxisSnapshot::offline(axis, "mm");
    s.state = state;
    s.position = position;
    s.target = position;
    s.goal = position;
    s.following_error_band = 3.0;
    s.link =
        LinkStats { frames: 10_000, frames_per_s: 1000.0, bad_frames: 0, missed: 0, link_ups: 1 };
    s
}

/// The demo gantry's three axes at frame `k`: x moving back and forth, y holding with a
/// little noise, z disabled at its parking position.
pub fn frame(k: u32) -> Vec<AxisSnapshot> {
    let t = f64::from(k) / f64::from(FPS);
    let mut x = snap("x", AxisState::Moving, 0.0);
    x.homed = true;
    x.target = 300.0 + 150.0 * (t * 0.6).sin();
    x.following_error = 0.8 * (t * 0.6).cos() + 0.05 * (t * 9.0).sin();
    x.position = x.target - x.following_error;
    x.velocity = 90.0 * (t * 0.6).cos();
    x.goal = 450.0;
    x.following_error_band = 3.0 + 0.01 * x.velocity.abs();
    x.duty = 40.0 * (t * 0.6).cos() + 12.0;
    x.link.frames = 10_000 + u64::from(k) * 50;
    x.board_time_s = t;
    let mut y = snap("y", AxisState::Steady, 120.0);
    y.homed = true;
    y.following_error = 0.04 * (t * 3.0).sin();
    y.position = 120.0 - y.following_error;
    y.duty = 6.0 * (t * 3.0).sin();
    y.board_time_s = t;
    let mut z = AxisSnapshot::offline("z", "mm");
    z.state = AxisState::Disabled;
    z.position = -5.0;
    z.target = -5.0;
    z.goal = -5.0;
    z.following_error_band = 1.0;
    z.link =
        LinkStats { frames: 10_000, frames_per_s: 1000.0, bad_frames: 3, missed: 1, link_ups: 1 };
    z.board_time_s = t;
    vec![x, y, z]
}

/// The demo configuration.
pub fn demo() -> MachineConfig {
    MachineConfig::demo().expect("demo config")
}

/// A cockpit on the demo that has watched `frames` frames produced by `scene`.
pub fn app_after(
    frames: u32,
    scene: impl Fn(u32) -> Vec<AxisSnapshot>,
    latched: impl Fn(u32) -> bool,
) -> App {
    let mut app = App::new(demo(), ConfigSource::BuiltInDemo, Theme::default());
    for k in 0..frames {
        app.observe(at(k), &scene(k), latched(k));
    }
    app
}

/// Cockpit time of frame `k`.
pub fn at(k: u32) -> Duration {
    Duration::from_millis(u64::from(k) * 1000 / u64::from(FPS))
}

/// Ten seconds of normal operation.
pub fn normal() -> App {
    app_after(200, frame, |_| false)
}

/// x trips on following error at frame 150 and stays tripped.
pub fn tripped() -> App {
    app_after(
        200,
        |k| {
            let mut f = frame(k.min(150));
            if k >= 150 {
                let x = &mut f[0];
                x.state = AxisState::Tripped;
                x.following_error = 3.36;
                x.position = x.target - 3.36;
                x.trip = Some(Trip {
                    cause: TripCause::FollowingError,
                    at_s: 7.5,
                    target: x.target,
                    position: x.position,
                    following_error: 3.36,
                    band: 3.12,
                    duty: 100.0,
                    velocity: x.velocity,
                    detail:
                        "following error 3.36 mm exceeded its band 3.12 mm: look for a stall, a \
                             slipping belt or too little gain"
                            .to_owned(),
                });
                x.duty = 0.0;
                for a in &mut f[1..] {
                    a.board_time_s = f64::from(k) / f64::from(FPS);
                }
            }
            f
        },
        |_| false,
    )
}

/// z homing (moving up towards its switch) while x and y hold.
pub fn homing() -> App {
    app_after(
        200,
        |k| {
            let mut f = frame(k);
            f[0].state = AxisState::Steady;
            if k >= 100 {
                let z = &mut f[2];
                let t = f64::from(k - 100) / f64::from(FPS);
                z.state = AxisState::Homing;
                z.target = -5.0 + 0.4 * t;
                z.following_error = 0.12;
                z.position = z.target - 0.12;
                z.velocity = 0.4;
                z.goal = 0.0;
                z.following_error_band = 1.04;
                z.duty = 24.0;
            }
            f
        },
        |_| false,
    )
}

/// Stop-all latched at frame 120: x decelerates and stops, every axis ends stopped.
pub fn stop_latched() -> App {
    let mut app = app_after(120, frame, |_| false);
    app.apply(at(120), Action::StopAll);
    for k in 120..200 {
        let mut f = frame(119);
        for a in &mut f {
            a.state =
                if k < 130 && &*a.axis == "x" { AxisState::Stopping } else { AxisState::Stopped };
            a.stop_latched = true;
            a.duty = 0.0;
            a.following_error = 0.0;
            a.target = a.position;
        }
        app.observe(at(k), &f, true);
    }
    app
}

/// Renders `app` into a `w`×`h` test terminal.
pub fn draw(app: &App, w: u16, h: u16) -> Terminal<TestBackend> {
    let mut t = Terminal::new(TestBackend::new(w, h)).expect("test terminal");
    t.draw(|f| f.render_widget(app, f.area())).expect("draw");
    t
}

/// The screen as text.
pub fn screen(app: &App, w: u16, h: u16) -> String {
    draw(app, w, h).backend().to_string()
}

/// Eight axes (the demo's three, repeated under new names) for size and speed checks.
pub fn eight_axes() -> MachineConfig {
    let mut cfg = demo();
    let base = cfg.axes.clone();
    cfg.axes = (0..8)
        .map(|i| {
            let mut a = base[i % base.len()].clone();
            a.name = format!("{}{}", a.name, i / base.len() + 1);
            a
        })
        .collect();
    cfg
}

/// Frame `k` of eight moving axes.
pub fn eight_frame(cfg: &MachineConfig, k: u32) -> Vec<AxisSnapshot> {
    let t = f64::from(k) / f64::from(FPS);
    cfg.axes
        .iter()
        .enumerate()
        .map(|(i, a)| {
            let ph = i as f64 * 0.7;
            let mut s = snap(&a.name, AxisState::Moving, 0.0);
            let (lo, hi) = (a.limits.soft_min, a.limits.soft_max);
            s.target = (lo + hi) / 2.0 + (hi - lo) * 0.4 * (t * 0.5 + ph).sin();
            s.following_error = 0.5 * (t * 0.5 + ph).cos() + 0.03 * (t * 11.0 + ph).sin();
            s.position = s.target - s.following_error;
            s.velocity = (hi - lo) * 0.2 * (t * 0.5 + ph).cos();
            s.goal = if s.velocity >= 0.0 { lo + (hi - lo) * 0.9 } else { lo + (hi - lo) * 0.1 };
            s.duty = 50.0 * (t * 0.5 + ph).cos();
            s.link.frames = 1000 * u64::from(k);
            s.board_time_s = t;
            s.homed = true;
            s.unit = Arc::from(a.scale.unit.as_str());
            s
        })
        .collect()
}
