//! `servotty analyze`: analysis of recorded files, no machine needed.
//!
//! `servotty analyze step FILE.csv [--band PCT] [--json]` reads a step record (a header with
//! at least `t,target,position`), finds the step in the target and prints its metrics
//! ([`crate::tuning::report`] has the definitions). Any problem with the file is reported
//! with the file name and line, exit code 2.
//!
//! `servotty analyze trip CAPTURE [--axis A] [--json] [--svg OUT]` reads a trip capture and
//! names the most likely cause with its evidence ([`crate::diagnosis`] states the rules);
//! `--svg` also draws the trip chart.

use std::path::{Path, PathBuf};

use clap::{Args, Subcommand};

use super::{emit, Failure, EXIT_OK};
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
    /// CSV file with a header naming at least t, target and position (more columns allowed,
    /// any order; lines starting with # are skipped).
    pub file: PathBuf,
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
    }
}

/// The report for `analyze trip`, or the message for a bad file.
fn trip(a: &TripArgs) -> Result<String, String> {
    let name = a.file.display();
    let text = read_text(&a.file)?;
    let cap = crate::diagnosis::CaptureFile::parse(&text)
        .map_err(|e| format!("{name}:{}: {}", e.line, e.message))?;
    let rec = cap.record(a.axis.as_deref()).map_err(|e| format!("{name}: {e}"))?;
    let d = crate::diagnosis::diagnose(&rec);
    let mut out = if a.json {
        let v = serde_json::to_value(&d).map_err(|e| e.to_string())?;
        format!("{v}\n")
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
    let rows = parse_step_csv(&text).map_err(|e| format!("{name}:{}: {}", e.line, e.message))?;
    let summary = summarize_step(&rows, a.band / 100.0).map_err(|e| format!("{name}: {e}"))?;
    Ok(if a.json {
        format!("{}\n", summary.to_json())
    } else {
        format!("{name}\n{}", summary.to_text(""))
    })
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
            let a = StepArgs { file: PathBuf::from("x.csv"), band, json: false };
            assert!(step(&a).expect_err("bad band").contains("--band"));
        }
    }

    #[test]
    fn missing_file_names_the_file() {
        let a = StepArgs { file: PathBuf::from("/nonexistent/step.csv"), band: 2.0, json: false };
        let msg = step(&a).expect_err("missing");
        assert!(msg.starts_with("/nonexistent/step.csv: cannot read"), "{msg}");
    }
}
