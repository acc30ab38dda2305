//! The status line above the footer: what the keys act on, always visible at 80×24. The
//! selected axis, its jog step and speed (so `[ ] - +` give feedback), unsaved gains, and
//! the selected axis's trip with the band it exceeded.

use ratatui::buffer::Buffer;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};

use crate::cockpit::app::App;
use crate::cockpit::format::num;

/// Draws the status line into one row. Every part is kept; when the row is short the
/// parts take their shorter wordings, the trip's first.
pub fn render(app: &App, area: Rect, buf: &mut Buffer) {
    let t = app.theme;
    let (Some(cfg), Some(view)) = (app.config.axes.get(app.selected), app.axes.get(app.selected))
    else {
        return;
    };
    let u = &cfg.scale.unit;
    let width = area.width as usize;
    let (step, speed) = (app.jog.step(&cfg.jog), app.jog.speed(&cfg.jog));
    let trip = view.snap.trip.as_ref().map(|trip| {
        let d = view.decimals;
        let (fe, band) = (num(trip.following_error, d, 0), num(trip.band, d, 0));
        [
            format!("TRIP {}: fe {fe} > band {band} {u}, c clears", trip.cause),
            format!("TRIP {}: fe {fe} > band {band} {u}", trip.cause),
            format!("TRIP {} {fe}>{band} {u}", trip.cause),
            format!("TRIP {fe}>{band} {u}"),
        ]
    });
    let jog = [
        format!("jog step {step} {u} [ ]  speed {speed} {u}/s - +"),
        format!("jog {step} {u} · {speed} {u}/s"),
        format!("jog {step}·{speed}"),
    ];
    let unsaved = ["gains unsaved (w writes)", "gains unsaved", "unsaved"];
    let name = format!(" {} {}", t.pointer(), cfg.name);
    // Wordings from longest to shortest (trip, jog, unsaved); the first that fits wins.
    const LEVELS: [(usize, usize, usize); 9] = [
        (0, 0, 0),
        (1, 0, 0),
        (1, 0, 1),
        (2, 0, 1),
        (1, 1, 1),
        (2, 1, 1),
        (2, 1, 2),
        (2, 2, 2),
        (3, 2, 2),
    ];
    let mut best = None;
    for (k, j, n) in LEVELS {
        let parts = line_parts(
            &name,
            trip.as_ref().map(|x| x[k].as_str()),
            &jog[j],
            app.unsaved().then_some(unsaved[n]),
        );
        let w: usize = parts.iter().map(|(s, _)| s.chars().count()).sum();
        best = Some(parts);
        if w <= width {
            break;
        }
    }
    let Some(parts) = best else { return };
    let spans: Vec<Span<'static>> = parts
        .into_iter()
        .map(|(text, role)| match role {
            Role::Name => Span::styled(text, t.selected()),
            Role::Trip => Span::styled(text, t.alarm()),
            Role::Jog => Span::styled(text, t.bold()),
            Role::Unsaved => Span::styled(text, t.warn()),
            Role::Gap => Span::raw(text),
        })
        .collect();
    buf.set_line(area.x, area.y, &Line::from(spans), area.width);
}

#[derive(Clone, Copy)]
enum Role {
    Name,
    Trip,
    Jog,
    Unsaved,
    Gap,
}

fn line_parts(
    name: &str,
    trip: Option<&str>,
    jog: &str,
    unsaved: Option<&str>,
) -> Vec<(String, Role)> {
    let mut out = vec![(name.to_owned(), Role::Name)];
    let mut add = |text: &str, role| {
        out.push(("  ".to_owned(), Role::Gap));
        out.push((text.to_owned(), role));
    };
    if let Some(tr) = trip {
        add(tr, Role::Trip);
    }
    add(jog, Role::Jog);
    if let Some(un) = unsaved {
        add(un, Role::Unsaved);
    }
    out
}
