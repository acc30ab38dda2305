//! `servotty analyze`: analysis of recorded files, no machine needed.
//!
//! `servotty analyze step FILE.csv [--band PCT] [--json]` reads a step record (a header with
//! at least `t,target,position`), finds the step in the target and prints its metrics
//! ([`crate::tuning::report`] has the definitions). Any problem with the file is reported
//! with the file name and line, exit code 2.

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
    }
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
