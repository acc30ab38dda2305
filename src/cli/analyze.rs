//! `servotty analyze`: analysis of recorded files, no machine needed.
//!
//! `servotty analyze step FILE.csv [--band PCT] [--json]` reads a step record (a header with
//! at least `t,target,position`), finds the step in the target and prints its metrics
//! ([`crate::tuning::report`] has the definitions). Any problem with the file is reported
//! with the file name and line, exit code 2.
//!
//! `servotty analyze relay FILE.csv` and `servotty analyze identify FILE.csv` read a record
//! with the columns `t` (s), `position` (axis units) and `duty` (%, held from that row to the
//! next), in any order with more columns allowed and `#` comment lines skipped, and run the
//! same analysis as `tune relay` and `tune identify` ([`crate::tuning::relay`],
//! [`crate::tuning::ident`]). With no axis configuration they assume no minimum duty (gains
//! not scaled by a compensation slope) and say so.
//!
//! `servotty analyze trip CAPTURE [--axis A] [--json] [--svg OUT]` reads a trip capture and
//! names the most likely cause with its evidence ([`crate::diagnosis`] states the rules);
//! `--svg` also draws the trip chart.

use std::path::{Path, PathBuf};

use clap::{Args, Subcommand};

use super::json_round::{self, json_line, Rounding};
use super::{emit, Failure, EXIT_OK};
use crate::format::decimals_for;
use crate::tuning::report::{parse_step_csv, summarize_step};

/// `servotty analyze`.
#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// What to analyse.
    #[command(subcommand)]
    pub what: AnalyzeWhat,
}

/// The analyses.
#[derive(Debug, Subcommand)]
pub enum AnalyzeWhat {
    /// Step-response metrics of a recorded step: rise 10–90 %, overshoot, settling, steady-state
    /// error, peak time (times from the step instant).
    #[command(after_help = "Example:\n  servotty analyze step x-step.csv --band 2 --json")]
    Step(StepArgs),
    /// Why an axis tripped: the most likely cause in a trip capture, with its evidence, a
    /// confidence and what to check or change.
    #[command(
        after_help = "Example:\n  servotty analyze trip capture-2026-05-04t10-12-03z-x-stall.csv --svg trip.svg"
    )]
    Trip(TripArgs),
    /// A relay trial (columns t, position, duty): the oscillation, the frequency-response
    /// point it measured and phase-margin PID gains, as `tune relay` reports them.
    #[command(after_help = "Example:\n  servotty analyze relay x-relay.csv --friction 3.5")]
    Relay(RelayArgs),
    /// Open-loop duty steps (columns t, position, duty): the velocity model (gain, time
    /// constant, friction offset, delay), its fit, and SIMC gains, as `tune identify` reports.
    #[command(
        after_help = "Example:\n  servotty analyze identify x-pulses.csv --resolution 0.0416667"
    )]
    Identify(IdentifyArgs),
}

/// `servotty analyze relay`.
#[derive(Debug, Args)]
pub struct RelayArgs {
    /// CSV file with a header naming at least t, position and duty.
    pub file: PathBuf,
    /// Relay amplitude d, % (default: half the duty's range in the file).
    #[arg(long, value_name = "PCT")]
    pub duty: Option<f64>,
    /// Relay hysteresis ε, axis units (default 0), for the describing-function comparison.
    #[arg(long, value_name = "UNITS", default_value_t = 0.0)]
    pub hysteresis: f64,
    /// Sliding-friction offset to correct for, % (default: none).
    #[arg(long, value_name = "PCT", default_value_t = 0.0)]
    pub friction: f64,
    /// One encoder count, axis units (default: the smallest position change in the file).
    #[arg(long, value_name = "UNITS")]
    pub resolution: Option<f64>,
    /// Print one JSON object instead of text.
    #[arg(long)]
    pub json: bool,
}

/// `servotty analyze identify`.
#[derive(Debug, Args)]
pub struct IdentifyArgs {
    /// CSV file with a header naming at least t, position and duty.
    pub file: PathBuf,
    /// One encoder count, axis units (default: the smallest position change in the file).
    #[arg(long, value_name = "UNITS")]
    pub resolution: Option<f64>,
    /// Print one JSON object instead of text.
    #[arg(long)]
    pub json: bool,
}

/// `servotty analyze trip`.
#[derive(Debug, Args)]
pub struct TripArgs {
    /// Trip capture (CSV written by servotty on a trip).
    pub file: PathBuf,
    /// Axis to diagnose (default: the one that tripped).
    #[arg(long, value_name = "AXIS")]
    pub axis: Option<String>,
    /// Print one JSON object instead of text.
    #[arg(long)]
    pub json: bool,
    /// Also draw the trip chart into this SVG file.
    #[arg(long, value_name = "OUT")]
    pub svg: Option<PathBuf>,
}

/// `servotty analyze step`.
#[derive(Debug, Args)]
pub struct StepArgs {
    /// CSV file with a header naming at least t, target and position, with or without units
    /// (t_s, target_mm, position_mm; more columns allowed, any order; # lines skipped). A
    /// capture of several axes (x_position_mm, y_position_mm…) needs --axis.
    pub file: PathBuf,
    /// The axis to analyse in a file holding several.
    #[arg(long, value_name = "AXIS")]
    pub axis: Option<String>,
    /// Settling band, % of the commanded step.
    #[arg(long, default_value_t = 2.0, value_name = "PCT")]
    pub band: f64,
    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

impl AnalyzeArgs {
    /// Whether the analysis asked for JSON.
    pub fn json(&self) -> bool {
        match &self.what {
            AnalyzeWhat::Step(a) => a.json,
            AnalyzeWhat::Trip(a) => a.json,
            AnalyzeWhat::Relay(a) => a.json,
            AnalyzeWhat::Identify(a) => a.json,
        }
    }
}

/// Runs `servotty analyze …`.
///
/// # Errors
/// [`Failure::Usage`] naming the file (and line) for a file that cannot be analysed.
pub fn run(args: &AnalyzeArgs) -> Result<u8, Failure> {
    match &args.what {
        AnalyzeWhat::Step(a) => {
            emit(&step(a).map_err(Failure::Usage)?)?;
            Ok(EXIT_OK)
        }
        AnalyzeWhat::Trip(a) => {
            emit(&trip(a).map_err(Failure::Usage)?)?;
            Ok(EXIT_OK)
        }
        AnalyzeWhat::Relay(a) => {
            emit(&relay(a).map_err(Failure::Usage)?)?;
            Ok(EXIT_OK)
        }
        AnalyzeWhat::Identify(a) => {
            emit(&identify(a).map_err(Failure::Usage)?)?;
            Ok(EXIT_OK)
        }
    }
}

/// The columns every duty record has.
const DUTY_COLUMNS: [&str; 3] = ["t", "position", "duty"];

fn read_duty_record(file: &Path) -> Result<Vec<Vec<f64>>, String> {
    let text = read_text(file)?;
    crate::tuning::columns::read_columns(&text, &DUTY_COLUMNS)
        .map_err(|e| format!("{}:{}: {}", file.display(), e.line, e.message))
}

/// The report for `analyze relay`.
fn relay(a: &RelayArgs) -> Result<String, String> {
    use crate::tuning::{relay, suggest};
    let name = a.file.display();
    let c = read_duty_record(&a.file)?;
    let (lo, hi) =
        c[2].iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| (l.min(v), h.max(v)));
    let d = a.duty.unwrap_or(0.5 * (hi - lo));
    let opts = relay::RelayOptions {
        hysteresis: a.hysteresis,
        resolution: a.resolution,
        friction_pct: a.friction,
        ..relay::RelayOptions::ideal(d)
    };
    let r = relay::analyze_relay(&c[0], &c[1], &c[2], &opts).map_err(|e| format!("{name}: {e}"))?;
    let base = crate::config::ControllerConfig::default();
    let s = suggest::from_relay(&r, suggest::RelayDesign::default(), &base, 10.0)
        .map_err(|e| format!("{name}: {e}"))?;
    if a.json {
        let v = serde_json::json!({ "relay": r, "suggestion": s });
        return Ok(json_line(v, &Rounding::single("", a.resolution.map(|q| 1.0 / q))));
    }
    let mut out = format!("{name}\n{}\n", crate::commission::relay_text(&r, &s, ""));
    out.push_str(&format!("proposed [axis.controller] lines:\n{}", s.patch.to_toml_lines()));
    for n in &s.notes {
        out.push_str(&format!("  note: {n}\n"));
    }
    out.push_str("  note: no axis configuration: gains not scaled for a minimum duty\n");
    Ok(out)
}

/// The report for `analyze identify`.
fn identify(a: &IdentifyArgs) -> Result<String, String> {
    use crate::tuning::{ident, suggest};
    let name = a.file.display();
    let c = read_duty_record(&a.file)?;
    let samples: Vec<ident::DutySample> = (0..c[0].len())
        .map(|k| ident::DutySample { t: c[0][k], position: c[1][k], duty: c[2][k] })
        .collect();
    let opts = ident::IdentOptions { resolution: a.resolution, ..Default::default() };
    let id = ident::identify(&samples, &opts).map_err(|e| format!("{name}: {e}"))?;
    let base = crate::config::ControllerConfig::default();
    let mut so = suggest::SimcOptions::new(id.sample_period_s);
    so.resolution = Some(id.resolution);
    let s = suggest::simc(&id.model, &base, &so).map_err(|e| format!("{name}: {e}"))?;
    if a.json {
        let v = serde_json::json!({ "identification": id, "suggestion": s });
        return Ok(json_line(v, &Rounding::single("", Some(1.0 / id.resolution))));
    }
    let mut out = format!("{name}\n{}\n", crate::commission::identify_text(&id, &s, ""));
    out.push_str(&format!("proposed [axis.controller] lines:\n{}", s.patch.to_toml_lines()));
    for n in &s.notes {
        out.push_str(&format!("  note: {n}\n"));
    }
    out.push_str(
        "  note: no axis configuration and no breakaway measured: minimum duty from the friction \
         offset, gains not scaled for the configured one\n",
    );
    Ok(out)
}

/// The report for `analyze trip`, or the message for a bad file.
fn trip(a: &TripArgs) -> Result<String, String> {
    let name = a.file.display();
    let text = read_text(&a.file)?;
    let cap = crate::diagnosis::CaptureFile::parse(&text)
        .map_err(|e| format!("{name}:{}: {}", e.line, e.message))?
        .with_sidecar(&a.file)?;
    let rec = cap.record(a.axis.as_deref()).map_err(|e| format!("{name}: {e}"))?;
    let d = crate::diagnosis::diagnose(&rec);
    let mut out = if a.json {
        let v = serde_json::to_value(&d).map_err(|e| e.to_string())?;
        let counts = cap.facts.get(&rec.axis).map(|f| f.counts_per_unit).filter(|c| *c > 0.0);
        json_line(v, &Rounding::single(&rec.axis, counts))
    } else {
        format!("{name}\n{}", d.to_text())
    };
    if let Some(svg) = &a.svg {
        crate::diagnosis::chart::write_trip_svg(svg, &rec, &d)
            .map_err(|e| format!("{}: {e}", svg.display()))?;
        if !a.json {
            out.push_str(&format!("chart written: {}\n", svg.display()));
        }
    }
    Ok(out)
}

/// The report for `analyze step`, or the message for a bad file or band.
fn step(a: &StepArgs) -> Result<String, String> {
    if !(a.band.is_finite() && a.band > 0.0 && a.band < 100.0) {
        return Err(format!("--band must be a percentage between 0 and 100 (found {})", a.band));
    }
    let name = a.file.display();
    let text = read_text(&a.file)?;
    let text = step_columns(&text, a.axis.as_deref()).map_err(|e| format!("{name}: {e}"))?;
    let rows = parse_step_csv(&text).map_err(|e| format!("{name}:{}: {}", e.line, e.message))?;
    let summary = summarize_step(&rows, a.band / 100.0).map_err(|e| format!("{name}: {e}"))?;
    let (unit, counts) = recorded_scale(&a.file, a.axis.as_deref());
    let axis = a.axis.as_deref().unwrap_or("");
    Ok(if a.json {
        json_line(summary.to_json(), &Rounding::single(axis, counts))
    } else {
        let d = counts.map_or(json_round::UNKNOWN_RESOLUTION_DECIMALS, decimals_for);
        format!("{name}\n{}", summary.to_text(&unit, d))
    })
}

/// The unit and counts per unit of the record's axis, from the file's sidecar when it has
/// one (a step record's, or a capture's for the `--axis` picked): unknown otherwise.
fn recorded_scale(file: &Path, axis: Option<&str>) -> (String, Option<f64>) {
    let Some(meta) = crate::tuning::report::read_sidecar(file) else {
        return (String::new(), None);
    };
    let of = |v: &serde_json::Value| {
        let unit = v["unit"].as_str().unwrap_or_default().to_owned();
        (unit, v["counts_per_unit"].as_f64().filter(|c| c.is_finite() && *c > 0.0))
    };
    if meta.get("counts_per_unit").is_some() {
        return of(&meta);
    }
    meta["axes"]
        .as_array()
        .and_then(|axes| axes.iter().find(|x| axis.is_some_and(|a| x["axis"] == a)))
        .map_or((String::new(), None), of)
}

/// The file's table as the step reader wants it: `t,target,position[,duty]` of one axis.
///
/// Column names may carry units (`t_s`, `position_mm`, `duty_pct`); a file with several
/// axes' columns (`x_position_mm`, `y_position_mm`) is refused unless `axis` picks one, so
/// axes are never mixed. A file already in the plain form is returned as it is, so the
/// reader's own messages (with their line numbers) still apply.
fn step_columns(text: &str, axis: Option<&str>) -> Result<String, String> {
    let mut rdr = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let Ok(header) = rdr.headers().cloned() else { return Ok(text.to_owned()) };
    let names: Vec<String> = header.iter().map(str::to_ascii_lowercase).collect();
    let axes: Vec<&str> = names
        .iter()
        .filter_map(|n| n.split_once("_position").map(|(a, _)| a))
        .filter(|a| !a.is_empty())
        .collect();
    let prefix = match (axis, axes.len()) {
        (Some(a), _) if axes.contains(&a) => format!("{a}_"),
        (Some(a), 0) => return Err(format!("--axis {a}: the file holds one record, no axes")),
        (Some(a), _) => {
            return Err(format!("--axis {a}: no such axis (the file has {})", axes.join(", ")))
        }
        (None, 0) => String::new(),
        (None, 1) => format!("{}_", axes[0]),
        (None, _) => {
            return Err(format!(
                "the file holds several axes ({}): give --axis to pick one",
                axes.join(", ")
            ))
        }
    };
    let base = |n: &str| -> Option<&'static str> {
        let n =
            n.strip_prefix(prefix.as_str()).or_else(|| (n == "t_s" || n == "t").then_some(n))?;
        ["t", "target", "position", "duty"].into_iter().find(|w| {
            n == *w
                || n.strip_prefix(w).is_some_and(|r| {
                    r.starts_with('_') && !r.starts_with("_v") && !r.starts_with("_a")
                })
        })
    };
    let pick: Vec<(usize, &str)> =
        names.iter().enumerate().filter_map(|(i, n)| base(n).map(|b| (i, b))).collect();
    if prefix.is_empty() && pick.iter().all(|(i, b)| names[*i] == *b) {
        return Ok(text.to_owned());
    }
    let mut w = csv::Writer::from_writer(Vec::new());
    let err = |e: csv::Error| e.to_string();
    w.write_record(pick.iter().map(|(_, b)| *b)).map_err(err)?;
    let pos = pick.iter().find(|(_, b)| *b == "position").map(|(i, _)| *i);
    for rec in rdr.records() {
        let rec = rec.map_err(err)?;
        // An axis with a shorter history has empty fields in a capture's oldest rows.
        if pos.is_some_and(|i| rec.get(i).is_none_or(str::is_empty)) {
            continue;
        }
        w.write_record(pick.iter().map(|(i, _)| rec.get(*i).unwrap_or(""))).map_err(err)?;
    }
    let bytes = w.into_inner().map_err(|e| e.to_string())?;
    String::from_utf8(bytes).map_err(|e| e.to_string())
}

fn read_text(path: &Path) -> Result<String, String> {
    let bytes = std::fs::read(path).map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
    String::from_utf8(bytes).map_err(|e| {
        let line =
            e.as_bytes()[..e.utf8_error().valid_up_to()].iter().filter(|&&b| b == b'\n').count()
                + 1;
        format!("{}:{line}: not UTF-8 text", path.display())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_must_be_a_percentage() {
        for band in [0.0, -1.0, 100.0, f64::NAN] {
            let a = StepArgs { file: PathBuf::from("x.csv"), band, json: false, axis: None };
            assert!(step(&a).expect_err("bad band").contains("--band"));
        }
    }

    #[test]
    fn missing_file_names_the_file() {
        let a = StepArgs {
            file: PathBuf::from("/nonexistent/step.csv"),
            band: 2.0,
            json: false,
            axis: None,
        };
        let msg = step(&a).expect_err("missing");
        assert!(msg.starts_with("/nonexistent/step.csv: cannot read"), "{msg}");
    }
}
