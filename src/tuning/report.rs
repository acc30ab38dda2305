//! Step-test records: reading and writing them (CSV `t,target,position,duty`), finding the
//! step, summarising its metrics (text table and JSON), and plotting it (SVG).
//!
//! # Finding and measuring the step
//! The step is the largest jump of `target` between two consecutive rows; the step instant is
//! the time of the first row that carries the new target. The analysis window runs from that
//! row up to (not including) the next row whose target differs from the new one, so a record
//! with a step out and a step back is measured on the first step only. Metrics come from
//! [`crate::control::step_metrics`] with the start value `y0` = the target *before* the step
//! and the step = new target − old target; everything is therefore relative to the commanded
//! step, and the settling band is a fraction of it. Times are from the step instant.
//!
//! A target that *ramps* (its largest single jump under half of its whole change) is refused
//! with that reason: a profiled move is not a step.
//!
//! # Noise
//! The noise is estimated from the window's second differences, `σ = RMS(Δ²y)/√6` (exact for
//! white noise on a smooth signal; common practice, no source). When σ exceeds a quarter of
//! the settling band's half-width, single samples would decide the overshoot and the
//! settling time: the metrics are then taken on the position smoothed by a centred moving
//! average of [`SMOOTHING_SAMPLES`] samples (zero phase, so times do not shift), and the
//! report says so; when σ exceeds the half-width itself it also warns that the band is inside
//! the noise. The steady-state error is reported only when the response settled in the band.
//!
//! Two extra numbers for a servo: the peak following error `max |target − position|` over the
//! window (for an instantaneous step that is at least the step itself, at its first row), and
//! the peak `|duty|` when the record has a duty column.
//!
//! # Files
//! Every file is written atomically: into a temporary file in the destination folder, synced,
//! then renamed over the destination, so a crash or a full disk never leaves half a file.
//! A step record is laid out as a trip capture is (and written by the same code,
//! [`crate::engine::recorder::write_with_sidecar`]): a CSV with one header row naming the
//! units (`t_s,target_mm,position_mm,duty_pct`), numbers only, one row per frame, mode 0644,
//! and beside it a JSON sidecar of the same name with what a reader needs to interpret it
//! (axis, unit, counts per unit, the gains in force, the metrics; [`StepRecordMeta`]), so
//! `pandas.read_csv` or a spreadsheet opens the CSV with no options.
//!
//! The CSV reader is hand-written: the format is four numeric columns with a header, and the
//! error messages must name the line and the column; a CSV crate would add a dependency for
//! what is a `split(',')`.

use std::fmt::Write as _;
use std::path::Path;

use plotters::prelude::*;
use serde::Serialize;

use crate::control::step_metrics::{step_metrics, StepError, StepMetrics};
use crate::engine::history::Sample;

/// One row of a step record.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StepRow {
    /// Time, s.
    pub t: f64,
    /// Commanded position, units.
    pub target: f64,
    /// Measured position, units.
    pub position: f64,
    /// Duty, % (when recorded).
    pub duty: Option<f64>,
}

impl From<&Sample> for StepRow {
    fn from(s: &Sample) -> Self {
        Self { t: s.t, target: s.target, position: s.position, duty: Some(s.duty) }
    }
}

/// A problem at one line of a CSV text.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("line {line}: {message}")]
pub struct CsvError {
    /// 1-based line number in the text.
    pub line: usize,
    pub message: String,
}

/// Why a record could not be summarised.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum StepAnalysisError {
    #[error("the record has no rows")]
    Empty,
    #[error("the target never changes: there is no step to measure")]
    NoStep,
    #[error("the settling band must be between 0 and 100 % (found {0} %)")]
    BadBand(f64),
    #[error(
        "the target ramps rather than steps: it changes on {changes} rows and its largest \
         single jump ({jump}) is {pct:.0} % of its whole change ({total}); a step record needs \
         the target to jump once (record with `tune step`, or use a move's following error)"
    )]
    Ramp { changes: usize, jump: f64, total: f64, pct: f64 },
    #[error("{0}")]
    Metrics(#[from] StepError),
}

/// Why a report file could not be written.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    #[error("nothing to plot: {0}")]
    NothingToPlot(&'static str),
    #[error("cannot draw the plot: {0}")]
    Plot(String),
    #[error(transparent)]
    Io(#[from] std::io::Error),
}

/// Reads a step record: a header naming at least `t`, `target` and `position` (any order,
/// more columns allowed, `duty` used when present), then one row per line. Blank lines and
/// lines starting with `#` are skipped; an empty `duty` field counts as not recorded.
///
/// # Errors
/// No header, a missing or repeated column, a short row, or a field that is not a finite
/// number, each with its line number; no data rows.
pub fn parse_step_csv(text: &str) -> Result<Vec<StepRow>, CsvError> {
    let mut lines = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim_end_matches('\r')))
        .filter(|(_, l)| !l.trim().is_empty() && !l.trim_start().starts_with('#'));
    let Some((header_line, header)) = lines.next() else {
        return Err(CsvError {
            line: 1,
            message: "no header line (expected t,target,position)".into(),
        });
    };
    // Units in the names are allowed (`t_s`, `position_mm`, `duty_pct`): each name is read
    // as the word before its unit.
    let names: Vec<String> = header
        .split(',')
        .map(|f| without_unit(&f.trim().trim_matches('"').to_ascii_lowercase()))
        .collect();
    let find = |want: &str| -> Result<Option<usize>, CsvError> {
        let mut hits = names.iter().enumerate().filter(|(_, n)| n.as_str() == want);
        let first = hits.next().map(|(i, _)| i);
        if hits.next().is_some() {
            return Err(CsvError {
                line: header_line,
                message: format!("column {want:?} appears more than once"),
            });
        }
        Ok(first)
    };
    let required = |want: &str| -> Result<usize, CsvError> {
        find(want)?.ok_or_else(|| CsvError {
            line: header_line,
            message: format!(
                "missing column {want:?} (the header has: {}); expected at least t,target,position",
                names.join(",")
            ),
        })
    };
    let (it, itarget, ipos) = (required("t")?, required("target")?, required("position")?);
    let iduty = find("duty")?;
    let needed = it.max(itarget).max(ipos).max(iduty.unwrap_or(0)) + 1;
    let mut rows = Vec::new();
    for (line, l) in lines {
        let fields: Vec<&str> = l.split(',').map(str::trim).collect();
        if fields.len() < needed {
            return Err(CsvError {
                line,
                message: format!("{} fields, the header asks for at least {needed}", fields.len()),
            });
        }
        let number = |i: usize| -> Result<f64, CsvError> {
            let f = fields[i].trim_matches('"');
            match f.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                _ => Err(CsvError {
                    line,
                    message: format!("column {:?}: {f:?} is not a finite number", names[i]),
                }),
            }
        };
        let duty = match iduty {
            Some(i) if !fields[i].is_empty() => Some(number(i)?),
            _ => None,
        };
        rows.push(StepRow {
            t: number(it)?,
            target: number(itarget)?,
            position: number(ipos)?,
            duty,
        });
    }
    if rows.is_empty() {
        return Err(CsvError {
            line: header_line,
            message: "no data rows after the header".into(),
        });
    }
    Ok(rows)
}

/// The commanded step found in a record.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StepInstant {
    /// First row carrying the new target.
    pub index: usize,
    /// Its time, s.
    pub t: f64,
    /// Target before, units.
    pub from: f64,
    /// Target after, units.
    pub to: f64,
}

/// The largest jump of the target between consecutive rows; `None` if the target never
/// changes.
pub fn find_step(rows: &[StepRow]) -> Option<StepInstant> {
    let (k, jump) = rows
        .windows(2)
        .map(|w| (w[1].target - w[0].target).abs())
        .enumerate()
        .fold((0, 0.0), |best, (k, j)| if j > best.1 { (k, j) } else { best });
    (jump > 0.0).then(|| StepInstant {
        index: k + 1,
        t: rows[k + 1].t,
        from: rows[k].target,
        to: rows[k + 1].target,
    })
}

/// Metrics of a step test (module docs).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StepSummary {
    pub step: StepInstant,
    /// Settling band, fraction of the step.
    pub band_frac: f64,
    pub metrics: StepMetrics,
    /// Largest |target − position| in the window, units.
    pub peak_following_error: f64,
    /// Largest |duty| in the window, % (when recorded).
    pub peak_duty: Option<f64>,
    /// Rows analysed.
    pub rows: usize,
    /// Noise estimate σ of the position, units (module docs).
    pub noise: f64,
    /// Whether the metrics were taken on the smoothed position (module docs).
    pub smoothed: bool,
}

/// Finds the step and measures it with a settling band of `band_frac` of the step.
///
/// # Errors
/// No rows, no step, a band outside (0, 1), or a record the metrics refuse (times that do not
/// increase, fewer than two rows after the step).
pub fn summarize_step(rows: &[StepRow], band_frac: f64) -> Result<StepSummary, StepAnalysisError> {
    if rows.is_empty() {
        return Err(StepAnalysisError::Empty);
    }
    if !(band_frac > 0.0 && band_frac < 1.0) {
        return Err(StepAnalysisError::BadBand(100.0 * band_frac));
    }
    let step = find_step(rows).ok_or(StepAnalysisError::NoStep)?;
    let changes = rows.windows(2).filter(|w| w[1].target != w[0].target).count();
    let (tlo, thi) = rows
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), r| (l.min(r.target), h.max(r.target)));
    let jump = (step.to - step.from).abs();
    if changes > 2 && jump < 0.5 * (thi - tlo) {
        return Err(StepAnalysisError::Ramp {
            changes,
            jump,
            total: thi - tlo,
            pct: 100.0 * jump / (thi - tlo),
        });
    }
    let end = rows[step.index..]
        .iter()
        .position(|r| r.target != step.to)
        .map_or(rows.len(), |p| step.index + p);
    let window = &rows[step.index..end];
    let t: Vec<f64> = window.iter().map(|r| r.t).collect();
    let raw: Vec<f64> = window.iter().map(|r| r.position).collect();
    let noise = noise_sigma(&raw);
    let half_band = band_frac * (step.to - step.from).abs();
    let smoothed = noise > 0.25 * half_band;
    let y = if smoothed { centred_average(&raw, SMOOTHING_SAMPLES) } else { raw };
    let mut metrics = step_metrics(&t, &y, step.from, step.to - step.from, step.t, band_frac)?;
    // `max(0.0)` of a negated zero is −0.0; print and serialise it as 0.
    metrics.overshoot_pct += 0.0;
    metrics.undershoot_pct += 0.0;
    let peak_following_error =
        window.iter().map(|r| (r.target - r.position).abs()).fold(0.0, f64::max);
    let duties: Vec<f64> = window.iter().filter_map(|r| r.duty).map(f64::abs).collect();
    let peak_duty = (!duties.is_empty()).then(|| duties.iter().copied().fold(0.0, f64::max));
    Ok(StepSummary {
        step,
        band_frac,
        metrics,
        peak_following_error,
        peak_duty,
        rows: window.len(),
        noise,
        smoothed,
    })
}

/// Width of the centred moving average used on noisy records, samples.
pub const SMOOTHING_SAMPLES: usize = 5;

/// Noise estimate σ = RMS(second difference)/√6 (module docs); 0 for fewer than 3 samples.
fn noise_sigma(y: &[f64]) -> f64 {
    if y.len() < 3 {
        return 0.0;
    }
    let ss: f64 = y.windows(3).map(|w| (w[2] - 2.0 * w[1] + w[0]).powi(2)).sum();
    (ss / (y.len() - 2) as f64 / 6.0).sqrt()
}

/// Centred moving average over `n` samples (odd), shrinking at the ends.
fn centred_average(y: &[f64], n: usize) -> Vec<f64> {
    let h = n / 2;
    (0..y.len())
        .map(|k| {
            let (a, b) = (k.saturating_sub(h), (k + h + 1).min(y.len()));
            y[a..b].iter().sum::<f64>() / (b - a) as f64
        })
        .collect()
}

impl StepSummary {
    /// JSON object: `rise_s, overshoot_pct, settling_s, steady_state_error, peak_time_s`
    /// (times from the step instant, `null` where undefined), then `undershoot_pct`,
    /// `step_at_s`, `step_from`, `step_to`, `band_pct`, `peak_following_error`, `peak_duty`.
    pub fn to_json(&self) -> serde_json::Value {
        let m = &self.metrics;
        serde_json::json!({
            "rise_s": m.rise_s,
            "overshoot_pct": m.overshoot_pct,
            "settling_s": m.settling_s,
            "steady_state_error": m.settling_s.map(|_| m.steady_state_error),
            "peak_time_s": m.peak_time_s,
            "undershoot_pct": m.undershoot_pct,
            "step_at_s": self.step.t,
            "step_from": self.step.from,
            "step_to": self.step.to,
            "band_pct": 100.0 * self.band_frac,
            "peak_following_error": self.peak_following_error,
            "peak_duty": self.peak_duty,
            "noise": self.noise,
            "smoothed": self.smoothed,
        })
    }

    /// A small table for the terminal; `unit` names the position unit (may be empty) and
    /// `decimals` the places one encoder count needs
    /// ([`crate::cockpit::format::decimals_for`]).
    pub fn to_text(&self, unit: &str, decimals: usize) -> String {
        use crate::cockpit::format::num;
        let m = &self.metrics;
        let d = decimals;
        let pos = |v: f64| num(v, d, 0);
        let u = if unit.is_empty() { String::new() } else { format!(" {unit}") };
        let step = self.step.to - self.step.from;
        let secs = |v: Option<f64>, why: &str| v.map_or(why.to_owned(), |s| format!("{s:.4} s"));
        let mut s = String::new();
        let mut row = |k: &str, v: String| {
            let _ = writeln!(s, "{k:<22}{v}");
        };
        row(
            "step",
            format!(
                "{}{}{u} at {:.4} s ({} → {}{u})",
                if step < 0.0 { "-" } else { "+" },
                pos(step.abs()),
                self.step.t,
                pos(self.step.from),
                pos(self.step.to)
            ),
        );
        row(
            "settling band",
            format!(
                "±{} % of the step (±{}{u})",
                100.0 * self.band_frac,
                num(self.band_frac * step.abs(), d + 1, 0)
            ),
        );
        row("rise time 10–90 %", secs(m.rise_s, "never reached 90 %"));
        row("overshoot", format!("{:.2} %", m.overshoot_pct));
        row("undershoot", format!("{:.2} %", m.undershoot_pct));
        row("peak time", format!("{:.4} s", m.peak_time_s));
        row("settling time", secs(m.settling_s, "not settled by the end of the record"));
        row(
            "steady-state error",
            match m.settling_s {
                Some(_) => format!("{}{u}", pos(m.steady_state_error)),
                None => "none reported: the response did not settle".to_owned(),
            },
        );
        row("peak following error", format!("{}{u}", pos(self.peak_following_error)));
        if let Some(d) = self.peak_duty {
            row("peak duty", format!("{d:.1} %"));
        }
        if self.smoothed {
            row(
                "note",
                format!(
                    "noise σ {}{u}: metrics on a {SMOOTHING_SAMPLES}-sample centred moving average",
                    num(self.noise, d + 1, 0)
                ),
            );
        }
        if self.noise > self.band_frac * step.abs() {
            row("WARNING", "the noise exceeds the settling band: widen --band".to_owned());
        }
        s
    }
}

/// `position_mm` → `position`, `t_s` → `t`, `duty_pct` → `duty`; other names unchanged.
pub(crate) fn without_unit(name: &str) -> String {
    for word in ["t", "target", "position", "duty"] {
        if let Some(unit) = name.strip_prefix(word).and_then(|r| r.strip_prefix('_')) {
            // `target_velocity` is another quantity, not a target with a unit.
            if !unit.starts_with("velocity") && !unit.starts_with("acceleration") {
                return word.to_owned();
            }
        }
    }
    name.to_owned()
}

/// What the sidecar of a step record says (module docs, "Files").
#[derive(Debug, Clone, Copy)]
pub struct StepRecordMeta<'a> {
    /// Axis name.
    pub axis: &'a str,
    /// The axis unit, as in the configuration.
    pub unit: &'a str,
    /// Encoder counts per unit (the record's resolution).
    pub counts_per_unit: f64,
    /// What recorded it, e.g. `tune step`.
    pub what: &'a str,
    /// The controller in force while it was recorded.
    pub controller: &'a crate::config::ControllerConfig,
    /// The metrics, when the record was summarised.
    pub summary: Option<&'a StepSummary>,
}

impl StepRecordMeta<'_> {
    /// The sidecar's JSON object; `written_utc` is the time of writing (RFC 3339).
    pub fn to_json(&self, written_utc: &str) -> serde_json::Value {
        let u = crate::engine::recorder::unit_word(self.unit);
        serde_json::json!({
            "kind": "servotty step record",
            "software": format!("servotty {}", env!("CARGO_PKG_VERSION")),
            "written_utc": written_utc,
            "what": self.what,
            "axis": self.axis,
            "unit": self.unit,
            "counts_per_unit": self.counts_per_unit,
            "columns": {
                "t_s": "time, s, on the axis's board clock from the start of the record",
                format!("target_{u}"): format!("commanded position, {}", self.unit),
                format!("position_{u}"): format!("measured position, {}", self.unit),
                "duty_pct": "duty, % of full scale (empty when not recorded)",
            },
            "controller": serde_json::to_value(self.controller).unwrap_or_default(),
            "metrics": self.summary.map(StepSummary::to_json),
        })
    }
}

/// The step record as CSV bytes: one header row naming the units, `t_s,target_U,position_U,
/// duty_pct` for the axis unit `unit` (an empty duty field when not recorded), then one row
/// per sample, with the trip capture's number format.
///
/// # Errors
/// The csv writer's (not expected for in-memory output).
pub fn step_csv(rows: &[StepRow], unit: &str) -> Result<Vec<u8>, csv::Error> {
    let u = crate::engine::recorder::unit_word(unit);
    let mut w = csv::Writer::from_writer(Vec::with_capacity(32 * rows.len() + 32));
    w.write_record([
        "t_s".to_owned(),
        format!("target_{u}"),
        format!("position_{u}"),
        "duty_pct".into(),
    ])?;
    for r in rows {
        let duty = r.duty.map(crate::engine::recorder::duty_field).unwrap_or_default();
        w.write_record([
            crate::engine::recorder::time_field(r.t),
            crate::engine::recorder::length_field(r.target),
            crate::engine::recorder::length_field(r.position),
            duty,
        ])?;
    }
    w.into_inner().map_err(|e| e.into_error().into())
}

/// Writes `rows` as CSV ([`step_csv`]) to `path`, atomically, without a sidecar.
///
/// # Errors
/// The folder is missing or not writable, or the disk is full.
pub fn write_step_csv(path: &Path, rows: &[StepRow], unit: &str) -> std::io::Result<()> {
    let bytes = step_csv(rows, unit).map_err(std::io::Error::other)?;
    write_atomically(path, &bytes)
}

/// Writes a step record: `path` (CSV, [`step_csv`]) and its JSON sidecar beside it (same
/// name, `.json`; [`StepRecordMeta`]), both atomically, the sidecar first.
///
/// # Errors
/// The folder is missing or not writable, or the disk is full.
pub fn write_step_record(
    path: &Path,
    rows: &[StepRow],
    meta: &StepRecordMeta<'_>,
) -> std::io::Result<()> {
    let csv = step_csv(rows, meta.unit).map_err(std::io::Error::other)?;
    let written = crate::engine::events::rfc3339_utc(std::time::SystemTime::now());
    let (dir, name) = split_path(path)?;
    let stem = name.strip_suffix(".csv").unwrap_or(&name);
    crate::engine::recorder::write_with_sidecar(dir, stem, &csv, &meta.to_json(&written))
        .map(|_| ())
}

/// The sidecar of a data file, when there is one beside it (`x.csv` → `x.json`).
pub fn read_sidecar(csv: &Path) -> Option<serde_json::Value> {
    let text = std::fs::read_to_string(csv.with_extension("json")).ok()?;
    serde_json::from_str(&text).ok()
}

/// Renders the record as an SVG: target and position against time, and the duty in a second
/// panel below when recorded.
///
/// # Errors
/// No rows, numbers that are not finite, or a drawing failure.
pub fn render_step_svg(rows: &[StepRow], title: &str, unit: &str) -> Result<String, ReportError> {
    if rows.is_empty() {
        return Err(ReportError::NothingToPlot("the record is empty"));
    }
    let finite = rows.iter().all(|r| {
        r.t.is_finite()
            && r.target.is_finite()
            && r.position.is_finite()
            && r.duty.is_none_or(f64::is_finite)
    });
    if !finite {
        return Err(ReportError::NothingToPlot("the record holds numbers that are not finite"));
    }
    let has_duty = rows.iter().any(|r| r.duty.is_some());
    let (w, h) = (900u32, if has_duty { 640u32 } else { 440u32 });
    let x_range = padded(rows.iter().map(|r| r.t), 0.0);
    let y_range = padded(rows.iter().flat_map(|r| [r.target, r.position]), 0.05);
    let d_range = padded(rows.iter().filter_map(|r| r.duty), 0.05);
    let unit_label =
        if unit.is_empty() { "position".to_owned() } else { format!("position ({unit})") };
    let plot_err = |e: &dyn std::fmt::Display| ReportError::Plot(e.to_string());
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| plot_err(&e))?;
        let (upper, lower) =
            if has_duty { root.split_vertically(420) } else { (root.clone(), root.clone()) };
        let mut chart = ChartBuilder::on(&upper)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(64)
            .build_cartesian_2d(x_range.clone(), y_range)
            .map_err(|e| plot_err(&e))?;
        chart
            .configure_mesh()
            .x_desc("t (s)")
            .y_desc(unit_label)
            .draw()
            .map_err(|e| plot_err(&e))?;
        chart
            .draw_series(LineSeries::new(
                rows.iter().map(|r| (r.t, r.target)),
                BLUE.stroke_width(2),
            ))
            .map_err(|e| plot_err(&e))?
            .label("target")
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLUE));
        chart
            .draw_series(LineSeries::new(
                rows.iter().map(|r| (r.t, r.position)),
                RED.stroke_width(2),
            ))
            .map_err(|e| plot_err(&e))?
            .label("position")
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], RED));
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::LowerRight)
            .background_style(WHITE.mix(0.8))
            .border_style(BLACK)
            .draw()
            .map_err(|e| plot_err(&e))?;
        if has_duty {
            let mut duty = ChartBuilder::on(&lower)
                .margin(12)
                .x_label_area_size(36)
                .y_label_area_size(64)
                .build_cartesian_2d(x_range, d_range)
                .map_err(|e| plot_err(&e))?;
            duty.configure_mesh()
                .x_desc("t (s)")
                .y_desc("duty (%)")
                .draw()
                .map_err(|e| plot_err(&e))?;
            duty.draw_series(LineSeries::new(
                rows.iter().filter_map(|r| r.duty.map(|d| (r.t, d))),
                RGBColor(0, 110, 0).stroke_width(2),
            ))
            .map_err(|e| plot_err(&e))?;
        }
        root.present().map_err(|e| plot_err(&e))?;
    }
    Ok(svg)
}

/// [`render_step_svg`], written atomically to `path`.
///
/// # Errors
/// As [`render_step_svg`], or the file cannot be written.
pub fn write_step_svg(
    path: &Path,
    rows: &[StepRow],
    title: &str,
    unit: &str,
) -> Result<(), ReportError> {
    let svg = render_step_svg(rows, title, unit)?;
    Ok(write_atomically(path, svg.as_bytes())?)
}

/// Range of the values, widened by `pad` of its span on each side; a flat or empty series
/// gets ±1 around its value so the axis is never empty.
pub(crate) fn padded(values: impl Iterator<Item = f64>, pad: f64) -> std::ops::Range<f64> {
    let (lo, hi) =
        values.fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| (l.min(v), h.max(v)));
    if !(lo.is_finite() && hi.is_finite()) {
        return -1.0..1.0;
    }
    let span = hi - lo;
    if span <= 0.0 {
        return lo - 1.0..hi + 1.0;
    }
    lo - pad * span..hi + pad * span
}

/// Temporary file in the destination's folder, synced, then renamed over the destination (the
/// recorder's atomic write, which trip captures use too).
pub fn write_atomically(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let (dir, name) = split_path(path)?;
    crate::engine::recorder::write_atomically(dir, &name, bytes).map(|_| ())
}

/// A file path as its folder (`.` when none) and its name.
fn split_path(path: &Path) -> std::io::Result<(&Path, String)> {
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d,
        _ => Path::new("."),
    };
    let name = path.file_name().ok_or_else(|| {
        std::io::Error::new(std::io::ErrorKind::InvalidInput, "the path names no file")
    })?;
    Ok((dir, name.to_string_lossy().into_owned()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(t: f64, target: f64, position: f64) -> StepRow {
        StepRow { t, target, position, duty: None }
    }

    #[test]
    fn parses_columns_in_any_order_with_comments() {
        let text = "# a comment\n\nposition, t ,extra,target,duty\r\n1.5,0,x,1,\n2.5,0.1,y,3,40\n";
        let rows = parse_step_csv(text).expect("parses");
        assert_eq!(
            rows,
            vec![
                StepRow { t: 0.0, target: 1.0, position: 1.5, duty: None },
                StepRow { t: 0.1, target: 3.0, position: 2.5, duty: Some(40.0) },
            ]
        );
    }

    #[test]
    fn csv_errors_name_the_line() {
        let missing = parse_step_csv("t,position\n0,1\n").expect_err("no target");
        assert_eq!(missing.line, 1);
        assert!(missing.message.contains("\"target\""), "{missing}");
        let bad = parse_step_csv("# c\nt,target,position\n0,1,2\n0.1,1,abc\n").expect_err("text");
        assert_eq!(bad.line, 4);
        assert!(bad.message.contains("position") && bad.message.contains("abc"), "{bad}");
        let short = parse_step_csv("t,target,position\n0,1\n").expect_err("short");
        assert_eq!(short.line, 2);
        assert!(parse_step_csv("t,target,position\n0,nan,1\n").is_err());
        assert!(parse_step_csv("").is_err());
        assert!(parse_step_csv("t,target,position\n").is_err());
        assert!(parse_step_csv("t,t,target,position\n1,1,1,1\n").is_err());
    }

    #[test]
    fn finds_the_largest_jump_and_stops_at_the_next_change() {
        let rows: Vec<StepRow> = (0..40)
            .map(|k| {
                let t = f64::from(k) * 0.1;
                let target = if (10..30).contains(&k) { 10.0 } else { 0.0 };
                row(t, target, if (12..30).contains(&k) { 10.0 } else { 0.0 })
            })
            .collect();
        let s = summarize_step(&rows, 0.02).expect("summarises");
        assert_eq!(s.step.index, 10);
        assert_eq!(s.step.t, 1.0);
        assert_eq!(s.rows, 20);
        assert_eq!(s.peak_following_error, 10.0);
        assert_eq!(s.metrics.steady_state_error, 0.0);
        let flat: Vec<StepRow> = (0..5).map(|k| row(f64::from(k), 1.0, 1.0)).collect();
        assert_eq!(summarize_step(&flat, 0.02), Err(StepAnalysisError::NoStep));
        assert_eq!(summarize_step(&[], 0.02), Err(StepAnalysisError::Empty));
        assert_eq!(summarize_step(&rows, 1.5), Err(StepAnalysisError::BadBand(150.0)));
    }

    #[test]
    fn csv_round_trips_and_svg_renders() {
        let dir = tempfile::tempdir().expect("temp dir");
        let rows: Vec<StepRow> = (0..50)
            .map(|k| {
                let t = f64::from(k) * 0.01;
                StepRow {
                    t,
                    target: 5.0,
                    position: 5.0 * (1.0 - (-t / 0.05).exp()),
                    duty: Some(50.0 - f64::from(k)),
                }
            })
            .collect();
        let csv = dir.path().join("step.csv");
        write_step_csv(&csv, &rows, "mm").expect("writes");
        let back = parse_step_csv(&std::fs::read_to_string(&csv).expect("reads")).expect("parses");
        // The capture's number format: 1 µs, 1e-6 units, 0.001 % duty.
        assert_eq!(back.len(), rows.len());
        for (b, r) in back.iter().zip(&rows) {
            assert!((b.t - r.t).abs() <= 5e-7 && (b.position - r.position).abs() <= 5e-7);
            assert!((b.duty.unwrap_or(0.0) - r.duty.unwrap_or(0.0)).abs() <= 5e-4);
        }
        let svg = dir.path().join("step.svg");
        write_step_svg(&svg, &rows, "x step", "mm").expect("plots");
        let text = std::fs::read_to_string(&svg).expect("reads");
        assert!(text.starts_with("<svg") && text.contains("</svg>"));
        assert!(text.contains("duty (%)") && text.contains("position (mm)"));
        // Only the two files: the temporary files were renamed, not left behind.
        assert_eq!(std::fs::read_dir(dir.path()).expect("lists").count(), 2);
        assert!(write_step_csv(&dir.path().join("missing/step.csv"), &rows, "mm").is_err());
        assert!(matches!(render_step_svg(&[], "t", ""), Err(ReportError::NothingToPlot(_))));
    }
}
