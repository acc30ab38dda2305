//! The list screen: the chosen move list (and how many there are), where its run stands in
//! words, and its steps with the present one marked. When the run ended early the reason and
//! the step to resume from are on screen, not only in the log.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::style::Style;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Borders, Widget};

use crate::cockpit::app::App;
use crate::cockpit::lists::{ListScreen, Mark, Phase};
use crate::cockpit::ui::log_panel::wrap;
use crate::move_list::{describe, MoveList, PlannedStep};

/// Where the run stands, in words (the most important line first), and the style.
fn state_lines(app: &App, s: &ListScreen, list: &MoveList) -> Vec<(String, Style)> {
    let t = app.theme;
    let n = list.steps.len();
    let pass = |p: u32| {
        if list.times > 1 {
            format!(" (pass {p}/{})", list.times)
        } else {
            String::new()
        }
    };
    let (p, step) = s.at.unwrap_or((1, 0));
    let one = |text: String, style: Style| vec![(text, style)];
    match s.phase {
        Phase::Starting => one("starting…".to_owned(), t.bold()),
        Phase::Running => {
            one(format!("running step {step} of {n}{} · p pauses · x aborts", pass(p)), t.good())
        }
        Phase::Pausing => one(format!("pausing at the end of step {step} of {n}"), t.warn()),
        Phase::Paused => one(format!("paused before step {step} of {n} · Enter resumes"), t.warn()),
        Phase::Finished => one(format!("finished: {n} steps × {}", list.times), t.good()),
        Phase::Idle => {
            let mut out = Vec::new();
            if let Some(why) = &s.refused {
                out.push((format!("not started: {why}"), t.alarm()));
            }
            match &s.stopped {
                Some(st) if st.resume(n).is_some() => {
                    out.push((
                        format!(
                            "STOPPED at step {}{}: clear the cause, then Enter resumes from step {}{}",
                            st.step,
                            pass(st.pass),
                            st.resume_from,
                            pass(st.resume_pass)
                        ),
                        t.alarm(),
                    ));
                    out.push((st.reason.clone(), t.warn()));
                }
                Some(st) => {
                    out.push((
                        format!("STOPPED at the last step {}: Enter starts again", st.step),
                        t.alarm(),
                    ));
                    out.push((st.reason.clone(), t.warn()));
                }
                // The dry run, drawn: every target of every pass from where the axes are
                // bound now (the same check Enter makes before anything moves).
                None if out.is_empty() => out.push(match check_from_here(app, list) {
                    Ok(()) => (
                        format!(
                            "ready: {n} steps × {}, inside the soft limits · Enter starts",
                            list.times
                        ),
                        t.bold(),
                    ),
                    Err(e) => (format!("will not start: {e}"), t.alarm()),
                }),
                None => {}
            }
            out
        }
    }
}

/// [`crate::move_list::check`] of the whole list from the axes' present goals.
fn check_from_here(app: &App, list: &MoveList) -> Result<(), crate::move_list::ListError> {
    crate::move_list::check(list, &app.config, &app.goals(), 1).map(|_| ())
}

/// The steps of the pass on screen: as the last run planned them (its targets worked out when
/// it started), else as a run would carry them out from here, else, when a target is outside
/// the limits, as written.
fn planned(app: &App, list: &MoveList) -> Vec<PlannedStep> {
    let s = &app.lists;
    let pass = s.at.map(|(p, _)| p).or_else(|| s.plan.first().map(|p| p.pass));
    let mut steps = from_here(app, list);
    for st in &mut steps {
        if let Some(p) = s.plan.iter().find(|p| Some(p.pass) == pass && p.step == st.step) {
            st.clone_from(p);
        }
    }
    steps
}

fn from_here(app: &App, list: &MoveList) -> Vec<PlannedStep> {
    match crate::move_list::check(&list_one_pass(list), &app.config, &app.goals(), 1) {
        Ok(p) => p,
        Err(_) => list
            .steps
            .iter()
            .enumerate()
            .map(|(i, st)| PlannedStep {
                pass: 1,
                step: i + 1,
                what: st.clone(),
                targets: Default::default(),
            })
            .collect(),
    }
}

/// One pass of `list`, for showing its steps.
fn list_one_pass(list: &MoveList) -> MoveList {
    MoveList { times: 1, ..list.clone() }
}

/// Draws the list screen into `area`.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let s = &app.lists;
    let count = s.found.as_ref().map_or(0, Vec::len);
    let title = match s.chosen_entry() {
        Some(f) if count > 1 => format!(" list {}/{count}: {} (↑↓) ", s.chosen + 1, f.name),
        Some(f) => format!(" list: {} ", f.name),
        None => " move lists ".to_owned(),
    };
    let block = Block::new()
        .borders(Borders::ALL)
        .border_style(t.border(true))
        .title(Span::styled(title, t.bold()))
        .title_bottom(Span::styled(" the list moves the machine on its own ", t.dim()));
    let inner = block.inner(area);
    block.render(area, buf);
    let width = inner.width.saturating_sub(1);
    let mut y = inner.y;
    let mut put = |y: &mut u16, line: Line<'_>| {
        if *y < inner.bottom() {
            buf.set_line(inner.x + 1, *y, &line, width);
            *y += 1;
        }
    };
    let entry = match (&s.found, s.chosen_entry()) {
        (None, _) => {
            put(&mut y, Line::from(Span::styled("looking for lists…", t.dim())));
            return;
        }
        (Some(_), None) => {
            put(&mut y, Line::from("no move lists found"));
            put(
                &mut y,
                Line::from(Span::styled(
                    "put a file whose name contains \"list\" (e.g. tray-list.toml) beside the \
                     machine configuration",
                    t.dim(),
                )),
            );
            return;
        }
        (Some(_), Some(e)) => e,
    };
    let list = match &entry.list {
        Ok(l) => l,
        Err(e) => {
            put(&mut y, Line::from(Span::styled("this list cannot run:", t.alarm())));
            put(&mut y, Line::from(e.clone()));
            return;
        }
    };
    if let Some(title) = &list.title {
        put(&mut y, Line::from(Span::styled(title.clone(), t.bold())));
    }
    for (words, style) in state_lines(app, s, list) {
        for row in wrap(&words, width as usize) {
            put(&mut y, Line::from(Span::styled(row, style)));
        }
    }
    let steps = planned(app, list);
    let rows = inner.bottom().saturating_sub(y) as usize;
    // Keep the present step in view, a couple of rows from the top.
    let present = s.at.map_or(0, |(_, step)| step.saturating_sub(1));
    let first = present.saturating_sub(2).min(steps.len().saturating_sub(rows));
    for p in steps.iter().skip(first).take(rows) {
        let mark = s.marks.get(p.step - 1).copied().unwrap_or_default();
        let here = s.at.is_some_and(|(_, st)| st == p.step) && s.phase.active();
        let (tag, style) = match mark {
            Mark::Now if s.phase == Phase::Paused => ("    ", t.text()),
            Mark::Now => (" now", t.good()),
            Mark::Done => ("  ok", t.dim()),
            Mark::Failed => ("FAIL", t.alarm()),
            Mark::Ahead => ("    ", t.text()),
        };
        let pointer = if here { t.pointer() } else { " " };
        put(
            &mut y,
            Line::from(vec![
                Span::styled(format!("{pointer}{tag} {:>3} ", p.step), style),
                Span::styled(describe(p), if here { t.bold() } else { t.text() }),
            ]),
        );
    }
}
