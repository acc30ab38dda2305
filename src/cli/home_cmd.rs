//! `servotty home`: link and home every axis in the configured order.

use serde::Serialize;

use crate::cli::json_round::{emit_json, Rounding};
use crate::cli::progress::{self, Progress};
use crate::cli::{emit, Failure, HomeArgs, EXIT_FAILED, EXIT_OK};
use crate::engine::{AxisCommand, MachineHandle};
use crate::format::{decimals_for, num};

/// One axis's result, as printed in JSON.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct AxisHomed {
    /// Axis name.
    pub axis: String,
    /// Whether it is homed.
    pub homed: bool,
    /// Position at the end, units.
    pub position: f64,
    /// Trip cause and detail, if it tripped.
    pub trip: Option<String>,
}

/// The whole result.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct HomeOutcome {
    /// True when every axis homed.
    pub ok: bool,
    /// Per axis, in configuration order.
    pub axes: Vec<AxisHomed>,
    /// Why homing stopped, if it did.
    pub error: Option<String>,
}

/// Homes the machine and reports every axis; disables the axes afterwards.
pub async fn home_all(h: &MachineHandle) -> HomeOutcome {
    // `home` waits for the links itself and names an axis that did not link.
    let result = h.home(None).await.map_err(|e| e.to_string());
    let axes: Vec<AxisHomed> = h
        .axes()
        .iter()
        .map(|a| {
            let s = a.snapshot();
            AxisHomed {
                axis: a.name().to_owned(),
                homed: s.homed,
                position: s.position,
                trip: s.trip.map(|t| format!("{}: {}", t.cause, t.detail)),
            }
        })
        .collect();
    for a in h.axes() {
        let _ = a.send(AxisCommand::Disable).await;
    }
    HomeOutcome { ok: result.is_ok(), axes, error: result.err() }
}

/// Decimals that show one encoder count on `axis`, and its unit.
pub(crate) fn resolution(h: &MachineHandle, axis: &str) -> (usize, String) {
    h.config().axis(axis).map_or((3, String::new()), |a| {
        (decimals_for(a.scale.counts_per_unit), a.scale.unit.clone())
    })
}

/// `servotty home`.
///
/// # Errors
/// [`Failure`] when the machine cannot start; a homing failure is in the outcome (exit 1).
pub fn run(args: &HomeArgs) -> Result<u8, Failure> {
    let json = args.json;
    let (cfg, _) = args.machine.load()?;
    let order: Vec<String> = cfg.homing_groups().iter().map(|g| g.join(" + ")).collect();
    crate::cli::ask::go_ahead(
        args.yes,
        &format!(
            "home: enables and homes every axis, in this order: {}.\n\
             Each axis seeks its home switch; stop-all or Ctrl-C ends it.",
            order.join(", then ")
        ),
    )?;
    crate::cli::with_machine(&args.machine, |h| async move {
        let progress = Progress::axes(progress::wanted(json), "homing", &h, &[]);
        let out = home_all(&h).await;
        progress.finish();
        if json {
            emit_json(&out, &Rounding::of(h.config()))?;
        } else {
            let mut text = String::new();
            for a in &out.axes {
                let (d, unit) = resolution(&h, &a.axis);
                let state = if a.homed { "homed" } else { "not homed" };
                text.push_str(&format!(
                    "{:<6} {state:<9} {} {unit}\n",
                    a.axis,
                    num(a.position, d, 10)
                ));
                if let Some(t) = &a.trip {
                    text.push_str(&format!("       tripped: {t}\n"));
                }
            }
            emit(&text)?;
            // After the table, through the one printer (exit 1); with --json the outcome
            // object already says it.
            if let Some(e) = &out.error {
                return Err(Failure::Machine(format!("homing failed: {e}")));
            }
        }
        Ok(if out.ok { EXIT_OK } else { EXIT_FAILED })
    })
}
