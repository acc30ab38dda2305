//! `servotty tune STEP AXIS`: the tuning steps, headless (the steps themselves are in
//! `commission`, shared with the cockpit).
//!
//! Every step moves the axis: it says how far and how long before it starts and does nothing
//! without `--yes`. Stop-all, any trip, Ctrl-C, the travel bound and the time bound all end it.

use std::path::PathBuf;
use std::time::Duration;

use clap::{Args, ValueEnum as _};

use crate::cli::json_round::{emit_json, Rounding};
use crate::cli::progress::{self, Progress};
use crate::cli::{emit, Failure, MachineArgs, EXIT_FAILED, EXIT_OK};
use crate::commission::{self, StepRequest, TuneStep};
use crate::config::AxisConfig;
use crate::engine::events::ChangedBy;
use crate::engine::{AxisCommand, MachineHandle};

/// `servotty tune`.
#[derive(Debug, Args)]
pub struct TuneArgs {
    /// The step to run.
    #[arg(value_enum)]
    pub step: TuneStep,
    /// The axis.
    pub axis: String,
    /// Which machine.
    #[command(flatten)]
    pub machine: MachineArgs,
    /// Confirm that the axis may move (within the stated bounds).
    #[arg(long)]
    pub yes: bool,
    /// Travel bound, axis units (default depends on the step).
    #[arg(long)]
    pub travel: Option<f64>,
    /// Duty for `direction` and `relay`, % (default 30).
    #[arg(long)]
    pub duty: Option<f64>,
    /// Relay: the sliding-friction offset to correct for, % (the `u0` that `tune identify`
    /// reports; the mean of its two values when it reports one per direction; default:
    /// none).
    #[arg(long, value_name = "PCT")]
    pub friction: Option<f64>,
    /// Step size for `step`, axis units (default 5).
    #[arg(long)]
    pub size: Option<f64>,
    /// Home the machine first (needed for `step`, which moves in absolute terms).
    #[arg(long)]
    pub home: bool,
    /// Apply the suggested gains to the running axis (identify, relay).
    #[arg(long)]
    pub apply: bool,
    /// Also write the suggested gains into the configuration file (atomic, .bak kept).
    #[arg(long)]
    pub save: bool,
    /// Apply or save suggested gains even when their verification step is worse than the
    /// current gains' (it is refused otherwise).
    #[arg(long)]
    pub even_if_worse: bool,
    /// Folder for the step trial's CSV and SVG (default: the state folder's `steps`).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Print one JSON object instead of text.
    #[arg(long)]
    pub json: bool,
}

impl TuneArgs {
    fn request(&self) -> StepRequest {
        StepRequest {
            step: self.step,
            travel: self.travel,
            duty: self.duty,
            size: self.size,
            out_dir: self.out.clone(),
            friction: self.friction,
            verify: self.apply || self.save,
            breakaway: None,
        }
    }
}

/// `servotty tune`.
///
/// # Errors
/// [`Failure`]: bad arguments, no confirmation, or the step could not run.
pub fn run(args: &TuneArgs) -> Result<u8, Failure> {
    let (cfg, source) = args.machine.load()?;
    let Some(axis_cfg) = cfg.axis(&args.axis).cloned() else {
        let known: Vec<&str> = cfg.axes.iter().map(|a| a.name.as_str()).collect();
        return Err(Failure::Usage(format!(
            "no axis called {:?} (axes: {})",
            args.axis,
            known.join(", ")
        )));
    };
    if args.save && !matches!(source, crate::config::ConfigSource::File(_)) {
        return Err(Failure::Usage(
            "--save needs --config FILE (the built-in demo has no file to write)".to_owned(),
        ));
    }
    let (spec, bounds) = commission::plan(&args.request(), &axis_cfg);
    let u = &axis_cfg.scale.unit;
    let step = args.step.to_possible_value().map(|v| v.get_name().to_owned()).unwrap_or_default();
    let mut plan = format!(
        "tune {step}: enables axis {}, which will move up to {} {u} for up to {} s, {}.\n\
         Stop-all, Ctrl-C, a trip or a bound ends it. The software stop is not a\n\
         safety function: keep the hardware emergency stop at hand.",
        axis_cfg.name,
        bounds.travel,
        bounds.seconds,
        if spec.closed_loop() { "closed loop" } else { "open loop" },
    );
    if args.apply || args.save {
        let size = args.size.unwrap_or(commission::VERIFY_STEP);
        let (_, vb) = commission::verify_plan(size);
        plan.push_str(&format!(
            "\nThen, to verify suggested gains: closed-loop steps of {size} {u} and back with the\n\
             current and the suggested gains (up to {} {u}, {} s each).",
            vb.travel, vb.seconds
        ));
    }
    crate::cli::ask::go_ahead(args.yes, &plan)?;
    let file = match &source {
        crate::config::ConfigSource::File(p) => Some(p.clone()),
        crate::config::ConfigSource::BuiltInDemo => None,
    };
    crate::cli::with_machine(&args.machine, |h| async move {
        let what = format!(
            "tune {}",
            args.step.to_possible_value().map(|v| v.get_name().to_owned()).unwrap_or_default()
        );
        let p = Progress::axes(
            progress::wanted(args.json),
            &what,
            &h,
            std::slice::from_ref(&axis_cfg.name),
        );
        let out = tune(&h, args, &axis_cfg, file).await;
        p.finish();
        let out = out.map_err(Failure::Machine)?;
        if args.json {
            emit_json(&out, &Rounding::of(h.config()).for_axis(&axis_cfg.name))?;
        } else {
            emit(&format!("{}\n", out["text"].as_str().unwrap_or_default()))?;
        }
        Ok(if out["ok"] == true { EXIT_OK } else { EXIT_FAILED })
    })
}

async fn tune(
    h: &MachineHandle,
    args: &TuneArgs,
    a: &AxisConfig,
    file: Option<PathBuf>,
) -> Result<serde_json::Value, String> {
    if let Some(axis) = h.wait_linked(Duration::from_secs(3)).await.into_iter().next() {
        return Err(format!("{axis}: {}", h.offline_reason(&axis)));
    }
    if args.home {
        h.home(None).await.map_err(|e| format!("homing failed: {e}"))?;
    }
    // The operator confirmed a plan that says the axis is enabled.
    if let Some(ax) = h.axis(&a.name) {
        if !ax.snapshot().state.motor_on() {
            ax.send(AxisCommand::Enable).await.map_err(|e| e.to_string())?;
        }
    }
    let out = commission::run(h, a, &args.request()).await;
    let axis = h.axis(&a.name).ok_or("no such axis")?;
    let result = async {
        let out = out?;
        let mut text = out.text.clone();
        let mut ok = out.ok;
        let worse = out.verification.as_ref().is_some_and(|v| v.is_worse());
        if worse && !args.even_if_worse && (args.apply || args.save) {
            text.push_str(
                "\nnot applied, not saved: the suggestion is worse than the current gains \
                 (add --even-if-worse to apply it anyway)",
            );
            ok = false;
        }
        let accepted = !worse || args.even_if_worse;
        if let Some(live) = out.suggested.clone().filter(|_| (args.apply || args.save) && accepted)
        {
            axis.send(AxisCommand::SetController(live.clone(), ChangedBy::TuneApply))
                .await
                .map_err(|e| e.to_string())?;
            text.push_str("\napplied to the running axis");
            if args.save {
                let Some(path) = &file else { return Err("--save needs --config FILE".to_owned()) };
                let (path, machine, name) = (path.clone(), h.config().clone(), a.name.clone());
                let step = format!("{:?}", args.step).to_lowercase();
                let note = crate::config_write::note(&format!(
                    "tune {step}{}",
                    if worse { " (verified worse, saved anyway)" } else { ", verified" }
                ));
                let saved = tokio::task::spawn_blocking(move || {
                    crate::config_write::save_axis_controller(&path, &machine, &name, &live, &note)
                })
                .await
                .map_err(|e| e.to_string())?
                .map_err(|e| e.to_string())?;
                text.push_str(&format!("\nsaved {}", saved.path.display()));
            }
        }
        Ok(serde_json::json!({ "ok": ok, "step": format!("{:?}", args.step).to_lowercase(),
            "axis": a.name, "text": text, "result": out.result, "proposed": out.proposed,
            "verification": out.verification }))
    }
    .await;
    let _ = axis.send(AxisCommand::Disable).await;
    result
}
