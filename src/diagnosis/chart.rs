//! The trip chart (SVG): target and position; following error against its band; duty against
//! its limits; the trip instant marked in every panel, time in seconds from the trip.
//!
//! Drawn with plotters' SVG backend like the step report ([`crate::tuning::report`]), so it
//! needs no system libraries and opens in any browser.

use std::path::Path;

use plotters::prelude::*;

use super::{Diagnosis, TripRecord};
use crate::engine::history::Sample;
use crate::tuning::report::padded;

/// One line of a panel: legend label ("" for none), colour, points.
type Line<'a> = (&'a str, RGBColor, Vec<(f64, f64)>);

/// Seconds of record drawn before the trip.
const BEFORE_S: f64 = 1.0;

/// Why a chart could not be made.
#[derive(Debug, thiserror::Error)]
pub enum ChartError {
    /// Nothing to draw.
    #[error("nothing to draw: the record has no rows")]
    Empty,
    /// plotters failed.
    #[error("cannot draw the chart: {0}")]
    Plot(String),
    /// Writing failed.
    #[error(transparent)]
    Io(#[from] std::io::Error),
}

/// Renders the chart for `rec` with `d`'s verdict in the title.
///
/// # Errors
/// An empty record or a drawing failure.
pub fn render_trip_svg(rec: &TripRecord, d: &Diagnosis) -> Result<String, ChartError> {
    let t0 = d.trip_at_s.or_else(|| rec.rows.last().map(|r| r.t)).ok_or(ChartError::Empty)?;
    let rows: Vec<&Sample> = rec
        .rows
        .iter()
        .filter(|r| {
            r.t >= t0 - BEFORE_S
                && [r.t, r.target, r.position, r.duty].iter().all(|v| v.is_finite())
        })
        .collect();
    if rows.is_empty() {
        return Err(ChartError::Empty);
    }
    let err = |e: &dyn std::fmt::Display| ChartError::Plot(e.to_string());
    let unit = &rec.facts.unit;
    let max = rec.facts.max_duty;
    let x = |r: &Sample| r.t - t0;
    let x_range = padded(rows.iter().map(|r| x(r)), 0.0);
    let title = format!(
        "{}: {} — most likely {} ({:.0} %)",
        rec.axis,
        d.recorded_cause.as_deref().unwrap_or("no trip"),
        d.cause,
        d.confidence * 100.0
    );
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (900, 760)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| err(&e))?;
        let root = root.titled(&title, ("sans-serif", 18)).map_err(|e| err(&e))?;
        let panels = root.split_evenly((3, 1));
        let trip_color = RGBColor(200, 0, 160);
        let series: [(&str, Vec<Line<'_>>); 3] = [
            (
                "position",
                vec![
                    ("target", BLUE, rows.iter().map(|r| (x(r), r.target)).collect()),
                    ("position", RED, rows.iter().map(|r| (x(r), r.position)).collect()),
                ],
            ),
            (
                "following error",
                vec![
                    (
                        "following error",
                        RED,
                        rows.iter().map(|r| (x(r), r.following_error)).collect(),
                    ),
                    ("band", BLACK, rows.iter().map(|r| (x(r), r.band)).collect()),
                    ("", BLACK, rows.iter().map(|r| (x(r), -r.band)).collect()),
                ],
            ),
            (
                "duty",
                vec![
                    ("duty", RGBColor(0, 110, 0), rows.iter().map(|r| (x(r), r.duty)).collect()),
                    ("limit", BLACK, rows.iter().map(|r| (x(r), max)).collect()),
                    ("", BLACK, rows.iter().map(|r| (x(r), -max)).collect()),
                ],
            ),
        ];
        for (panel, (name, lines)) in panels.iter().zip(series) {
            let y_range = padded(lines.iter().flat_map(|l| l.2.iter().map(|p| p.1)), 0.08);
            let y_desc = match name {
                "duty" => "duty (%)".to_owned(),
                n => format!("{n} ({unit})"),
            };
            let mut chart = ChartBuilder::on(panel)
                .margin(10)
                .x_label_area_size(30)
                .y_label_area_size(64)
                .build_cartesian_2d(x_range.clone(), y_range.clone())
                .map_err(|e| err(&e))?;
            chart
                .configure_mesh()
                .x_desc("t from the trip (s)")
                .y_desc(y_desc)
                .draw()
                .map_err(|e| err(&e))?;
            for (label, color, pts) in lines {
                let s = chart
                    .draw_series(LineSeries::new(
                        pts,
                        color.stroke_width(
                            if label.is_empty() || label == "band" || label == "limit" {
                                1
                            } else {
                                2
                            },
                        ),
                    ))
                    .map_err(|e| err(&e))?;
                if !label.is_empty() {
                    s.label(label)
                        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], color));
                }
            }
            chart
                .draw_series(LineSeries::new(
                    [(0.0, y_range.start), (0.0, y_range.end)],
                    trip_color.stroke_width(2),
                ))
                .map_err(|e| err(&e))?
                .label("trip")
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], trip_color));
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperLeft)
                .background_style(WHITE.mix(0.8))
                .border_style(BLACK)
                .draw()
                .map_err(|e| err(&e))?;
        }
        root.present().map_err(|e| err(&e))?;
    }
    Ok(svg)
}

/// [`render_trip_svg`] written atomically to `path`.
///
/// # Errors
/// As [`render_trip_svg`], or the file cannot be written.
pub fn write_trip_svg(path: &Path, rec: &TripRecord, d: &Diagnosis) -> Result<(), ChartError> {
    let svg = render_trip_svg(rec, d)?;
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let name = path.file_name().ok_or_else(|| {
        std::io::Error::new(std::io::ErrorKind::InvalidInput, "the path names no file")
    })?;
    crate::engine::recorder::write_atomically(dir, &name.to_string_lossy(), svg.as_bytes())?;
    Ok(())
}
