//! Progress on a terminal while a command works (homing, moves, tuning, link
//! measurements): one line on stderr, redrawn in place, showing each axis's state word and
//! position, or the time left. Silent with `--json` or when stdout is not a terminal, so
//! scripts and pipes see only the result.
//!
//! The line is fed from its own thread, which reads the axes' latest snapshots (a `watch`
//! borrow, no waiting); indicatif draws on its own ticker thread. Nothing here runs on the
//! runtime thread that closes the loops.

use std::io::IsTerminal as _;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

use crate::engine::MachineHandle;
use crate::format::{decimals_for, num};

/// How often the line is refreshed: often enough to follow an axis, rare enough to cost
/// nothing over SSH.
const REFRESH: Duration = Duration::from_millis(100);

/// Whether a command should show progress: a person is watching stdout and asked for text.
pub fn wanted(json: bool) -> bool {
    !json && std::io::stdout().is_terminal() && std::io::stderr().is_terminal()
}

/// A progress line; cleared when finished or dropped.
#[derive(Debug)]
pub struct Progress {
    bar: Option<ProgressBar>,
    stop: Arc<AtomicBool>,
    feeder: Option<std::thread::JoinHandle<()>>,
}

impl Progress {
    /// No line at all (for `--json` and pipes).
    pub fn none() -> Self {
        Self { bar: None, stop: Arc::new(AtomicBool::new(true)), feeder: None }
    }

    /// A spinner titled `what` that shows the state and position of `axes` (all of the
    /// machine's when empty) and the time elapsed.
    pub fn axes(show: bool, what: &str, h: &MachineHandle, axes: &[String]) -> Self {
        if !show {
            return Self::none();
        }
        let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{spinner} {prefix} {elapsed:>4} {wide_msg}")
                .unwrap_or_else(|_| ProgressStyle::default_spinner()),
        );
        bar.set_prefix(what.to_owned());
        bar.enable_steady_tick(REFRESH);
        let handles: Vec<(crate::engine::AxisHandle, usize)> = h
            .axes()
            .iter()
            .filter(|a| axes.is_empty() || axes.iter().any(|n| n == a.name()))
            .map(|a| {
                let d =
                    h.config().axis(a.name()).map_or(3, |c| decimals_for(c.scale.counts_per_unit));
                (a.clone(), d)
            })
            .collect();
        let stop = Arc::new(AtomicBool::new(false));
        let (b, s) = (bar.clone(), stop.clone());
        let feeder = std::thread::Builder::new()
            .name("servotty-progress".into())
            .spawn(move || {
                while !s.load(Ordering::Relaxed) {
                    let line: Vec<String> = handles
                        .iter()
                        .map(|(a, d)| {
                            let snap = a.snapshot();
                            format!(
                                "{} {} {} {}",
                                a.name(),
                                snap.state,
                                num(snap.position, *d, 0),
                                snap.unit
                            )
                        })
                        .collect();
                    b.set_message(line.join(" · "));
                    std::thread::sleep(REFRESH);
                }
            })
            .ok();
        Self { bar: Some(bar), stop, feeder }
    }

    /// A bar titled `what` that fills over `seconds`.
    pub fn timed(show: bool, what: &str, seconds: f64) -> Self {
        if !show {
            return Self::none();
        }
        let tenths = (seconds * 10.0).round().max(1.0) as u64;
        let bar = ProgressBar::with_draw_target(Some(tenths), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{prefix} [{bar:30}] {elapsed:>4} of {msg}")
                .unwrap_or_else(|_| ProgressStyle::default_bar())
                .progress_chars("=> "),
        );
        bar.set_prefix(what.to_owned());
        bar.set_message(format!("{seconds} s"));
        let stop = Arc::new(AtomicBool::new(false));
        let (b, s) = (bar.clone(), stop.clone());
        let t0 = std::time::Instant::now();
        let feeder = std::thread::Builder::new()
            .name("servotty-progress".into())
            .spawn(move || {
                while !s.load(Ordering::Relaxed) {
                    b.set_position(((t0.elapsed().as_secs_f64() * 10.0) as u64).min(tenths));
                    std::thread::sleep(REFRESH);
                }
            })
            .ok();
        Self { bar: Some(bar), stop, feeder }
    }

    /// Clears the line (the result is printed after it).
    pub fn finish(mut self) {
        self.end();
    }

    fn end(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(f) = self.feeder.take() {
            let _ = f.join();
        }
        if let Some(b) = self.bar.take() {
            b.finish_and_clear();
        }
    }
}

impl Drop for Progress {
    fn drop(&mut self) {
        self.end();
    }
}
