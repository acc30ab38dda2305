//! Tuning steps on a live machine: run one or more trials on an axis, analyse the record, and
//! say what was found and which gains follow. Shared by `servotty tune` and the cockpit, so
//! both run exactly the same steps.
//!
//! Words (the same in every message, help text and doc): a *trial* is one bounded motion the
//! axis loop runs and records (`engine::experiment`; state word `trialing`); *tuning* is what
//! the operator does with them, one step at a time (`tune identify`) or all steps in turn
//! (`tune all`, "full tuning"). The trials run in the axis loop; the analysis is pure
//! (`tuning`). This module only sequences them and words the result.

use std::path::PathBuf;
use std::time::Duration;

use clap::ValueEnum;

use crate::config::{AxisConfig, ControllerConfig};
use crate::engine::events::ChangedBy;
use crate::engine::experiment::{ExperimentBounds, ExperimentResult, ExperimentSpec};
use crate::engine::{AxisCommand, AxisHandle, AxisState, MachineHandle, Reply};
use crate::tuning::compare::{self, Comparison};
use crate::tuning::{ident, relay, report, suggest};

/// Which tuning step.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum TuneStep {
    /// A short duty pulse forwards: does the encoder count up?
    Direction,
    /// Slow duty ramps each way: the smallest duty that moves the axis.
    Breakaway,
    /// Open-loop duty pulses: velocity gain, time constant, friction; SIMC gains.
    Identify,
    /// Relay oscillation: one measured point of the frequency response; phase-margin gains.
    Relay,
    /// A closed-loop step: rise, overshoot, settling; CSV and SVG saved.
    Step,
    /// Full tuning, guided, for a freshly wired axis: direction, breakaway, identify (gains),
    /// verification step, step report; stops at the first failure.
    All,
}

/// What to run, with the operator's overrides.
#[derive(Debug, Clone, PartialEq)]
pub struct StepRequest {
    /// The step.
    pub step: TuneStep,
    /// Travel bound, units (a default per step when None).
    pub travel: Option<f64>,
    /// Duty for direction and relay, %.
    pub duty: Option<f64>,
    /// Step size for the step trial, units.
    pub size: Option<f64>,
    /// Folder for the step trial's CSV and SVG (the state folder's `steps` when None).
    pub out_dir: Option<PathBuf>,
    /// Relay: the sliding-friction offset u0 (%) to correct for (from `identify`: the mean of
    /// its two directions); none when None (the result then says so).
    pub friction: Option<f64>,
    /// Run the verification steps on suggested gains ([`verify`]) before offering them.
    pub verify: bool,
    /// Identify: breakaway duties already measured (forward, reverse magnitudes, %), so the
    /// ramps are not run again.
    pub breakaway: Option<(f64, f64)>,
}

impl StepRequest {
    /// The step with every default.
    pub fn new(step: TuneStep) -> Self {
        Self {
            step,
            travel: None,
            duty: None,
            size: None,
            out_dir: None,
            friction: None,
            verify: false,
            breakaway: None,
        }
    }
}

/// What a step found.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// False when the axis did not do what the step checks (or a trial was cut short).
    pub ok: bool,
    /// Lines for a person.
    pub text: String,
    /// The numbers, for JSON.
    pub result: serde_json::Value,
    /// Proposed `[axis.controller]` lines (empty when none).
    pub proposed: String,
    /// The axis's controller with the suggested gains, when the step suggests gains.
    pub suggested: Option<ControllerConfig>,
    /// The suggested gains' verification step against the current gains', when asked for
    /// (boxed: it is large next to the other fields).
    pub verification: Option<Box<Comparison>>,
}

/// The plan of one step: trial, bounds, and a sentence for the warning.
pub fn plan(args: &StepRequest, a: &AxisConfig) -> (ExperimentSpec, ExperimentBounds) {
    let max = a.controller.max_duty;
    let duty = args.duty.unwrap_or(30.0).clamp(1.0, max);
    let resolution = 1.0 / a.scale.counts_per_unit;
    match args.step {
        TuneStep::Direction => (
            ExperimentSpec::DutySteps { steps: vec![(duty, 0.15)], settle_s: 0.3 },
            ExperimentBounds { travel: args.travel.unwrap_or(10.0), seconds: 2.0 },
        ),
        TuneStep::Breakaway => (
            breakaway_ramp(1, max),
            ExperimentBounds { travel: args.travel.unwrap_or(10.0), seconds: 15.0 },
        ),
        TuneStep::Identify => {
            // Two sizes each way, each from rest, so that gain, friction and delay separate.
            let (lo, hi) = ((0.3 * max).max(15.0).min(max), (0.5 * max).max(25.0).min(max));
            let on = 0.25;
            let rest = 0.3;
            let steps = vec![
                (lo, on),
                (0.0, rest),
                (-lo, on),
                (0.0, rest),
                (hi, on),
                (0.0, rest),
                (-hi, on),
            ];
            (
                ExperimentSpec::DutySteps { steps, settle_s: rest },
                ExperimentBounds { travel: args.travel.unwrap_or(150.0), seconds: 5.0 },
            )
        }
        TuneStep::Relay => (
            ExperimentSpec::Relay {
                amplitude: duty,
                hysteresis: relay_hysteresis(duty, args.friction.unwrap_or(0.0), resolution),
                seconds: 3.0,
            },
            ExperimentBounds { travel: args.travel.unwrap_or(30.0), seconds: 4.0 },
        ),
        TuneStep::All => {
            // The largest travel of its steps and the sum of their time bounds.
            let mut total = 0.0;
            let mut travel: f64 = 0.0;
            for step in PASS {
                let (_, b) = plan(&StepRequest { step, ..args.clone() }, a);
                total += b.seconds;
                travel = travel.max(b.travel);
            }
            let (_, v) = verify_plan(args.size.unwrap_or(VERIFY_STEP));
            let (spec, _) = plan(&StepRequest { step: TuneStep::Identify, ..args.clone() }, a);
            (spec, ExperimentBounds { travel, seconds: total + 4.0 * v.seconds })
        }
        TuneStep::Step => {
            let size = args.size.unwrap_or(5.0);
            (
                ExperimentSpec::Step { size, lead_s: 0.1, seconds: 1.5 },
                ExperimentBounds {
                    travel: args.travel.unwrap_or(3.0 * size.abs() + 5.0),
                    seconds: 2.5,
                },
            )
        }
    }
}

/// The breakaway ramp: 5 %/s from rest, stopped once the encoder has moved
/// [`BREAKAWAY_STOP_COUNTS`] counts (the analysis, [`ident::breakaway`], reads the duty at the
/// first count and uses the later ones to confirm the motion).
fn breakaway_ramp(direction: i8, max_duty: f64) -> ExperimentSpec {
    ExperimentSpec::BreakawayRamp {
        direction,
        rate: 5.0,
        max_duty: max_duty.min(60.0),
        motion_counts: BREAKAWAY_STOP_COUNTS,
    }
}

/// Counts of motion after which a breakaway ramp stops.
pub const BREAKAWAY_STOP_COUNTS: i64 = 3;

/// Relay hysteresis: proportional to the duty left after sliding friction, `d − u0` (0.3
/// counts per %), so the oscillation keeps about the same shape at every duty (by homogeneity
/// of the linear part; our choice, measured in docs/tuning.md). At least 2 counts, so the band
/// is 3 counts wide and a one-count flicker cannot switch the relay back. The band is a whole
/// number n of counts less half a count, n the count at or above `0.3·(d − u0)`: the relay
/// switches at the n-th count whatever the floating-point rounding. A floor of 3 counts and
/// rounding to the nearest count made the band 0.39, 0.22 and 0.27 counts per % at d = 10,
/// 15 and 20 % on demo X, and the limit cycle moved between 70 and 81 rad/s.
pub fn relay_hysteresis(duty: f64, friction: f64, resolution: f64) -> f64 {
    let n = (0.3 * (duty.abs() - friction.max(0.0))).ceil().max(2.0);
    (n - 0.5) * resolution
}

/// Identification pulses start towards the side with more room: a homed axis nearer its
/// `soft_max` than its `soft_min` gets the pulses with their signs swapped (a homed lift
/// stands just below its top stop, and the first pulses would run into it). Unhomed, the
/// position says nothing about the ends and the plan is kept.
fn toward_room(
    spec: ExperimentSpec,
    snap: &crate::engine::AxisSnapshot,
    a: &AxisConfig,
) -> ExperimentSpec {
    let l = &a.limits;
    match spec {
        ExperimentSpec::DutySteps { steps, settle_s }
            if snap.homed && l.soft_max - snap.position < snap.position - l.soft_min =>
        {
            let steps = steps.into_iter().map(|(d, s)| (-d, s)).collect();
            ExperimentSpec::DutySteps { steps, settle_s }
        }
        other => other,
    }
}

/// Time the position must stay on one count to count as at rest before a trial, s.
const REST_S: f64 = 0.1;

/// Longest wait for rest before a trial starts anyway, s.
const REST_WAIT_S: f64 = 3.0;

/// Waits until the axis's position has not changed for [`REST_S`] (at most [`REST_WAIT_S`]):
/// an open-loop trial must start from rest. After homing, the demo lift creeps the last counts
/// to its target for about a second under its hold, and a breakaway ramp started then reads
/// that creep as motion.
async fn at_rest(axis: &AxisHandle) {
    let step = Duration::from_millis(10);
    let (mut last, mut still, mut waited) = (axis.snapshot().position, 0.0, 0.0);
    while still < REST_S && waited < REST_WAIT_S {
        tokio::time::sleep(step).await;
        waited += step.as_secs_f64();
        let now = axis.snapshot().position;
        still = if now == last { still + step.as_secs_f64() } else { 0.0 };
        last = now;
    }
}

/// The breakaway of one recorded ramp ([`ident::breakaway`], the one implementation), or why
/// there is none.
fn breakaway_of(r: &ExperimentResult, resolution: f64) -> Result<ident::Breakaway, String> {
    if let Some(why) = &r.aborted {
        return Err(format!("ended early: {why}"));
    }
    let samples: Vec<ident::DutySample> = r.samples.iter().map(ident::DutySample::from).collect();
    ident::breakaway(&samples, Some(resolution)).map_err(|e| e.to_string())
}

/// What identification found, one paragraph (shared with `analyze identify`); `u` the unit.
pub fn identify_text(id: &ident::Identification, s: &suggest::Suggestion, u: &str) -> String {
    let u = if u.is_empty() { "unit" } else { u };
    let m = id.model;
    let offset = match m.offset_reverse_pct {
        Some(r) => format!("{:.2} % forwards, {r:.2} % in reverse", m.offset_pct),
        None => format!("{:.2} %", m.offset_pct),
    };
    format!(
        "velocity gain {:.4} {u}/s per %, time constant {:.4} s, sliding friction offset \
         {offset}, delay {} (fit R² {:.4}, position RMS {:.4} {u})\n{}",
        m.gain,
        m.time_constant_s,
        m.delay_s.map_or_else(|| "not measured".to_owned(), |d| format!("{d:.4} s")),
        id.r_squared,
        id.position_rms,
        s.method
    )
}

/// What a relay trial measured, one paragraph (shared with `analyze relay`).
pub fn relay_text(rr: &relay::RelayResult, s: &suggest::Suggestion, u: &str) -> String {
    let u = if u.is_empty() { "unit" } else { u };
    let p = rr.point;
    format!(
        "oscillation ±{:.4} {u}, period {:.4} s over {} cycles → |G| {:.5} {u}/% at phase \
         {:.1}° (ω {:.1} rad/s){}\n{}",
        rr.amplitude,
        rr.period_s,
        rr.cycles,
        p.gain,
        p.phase_deg,
        p.omega_rad_s,
        rr.ultimate.map_or(String::new(), |x| format!(
            "; ultimate point: Ku {:.2} %/{u}, Tu {:.4} s",
            x.ku, x.tu_s
        )),
        s.method
    )
}

/// A breakaway duty as a minimum duty: its magnitude rounded up to the next 0.5 %.
fn round_up_half(d: f64) -> f64 {
    (d.abs() * 2.0).ceil() / 2.0
}

/// Size of the verification step, units, unless the request gives one.
pub const VERIFY_STEP: f64 = 2.0;

/// The verification step's plan: a closed-loop step of `size`, then back, each 1.2 s.
pub fn verify_plan(size: f64) -> (ExperimentSpec, ExperimentBounds) {
    (
        ExperimentSpec::Step { size, lead_s: 0.1, seconds: 1.1 },
        ExperimentBounds { travel: 3.0 * size.abs() + 2.0, seconds: 2.0 },
    )
}

/// Verifies `candidate` before it is applied: a closed-loop step of `size` and back with the
/// axis's current gains, the same with `candidate`, then the current gains again; the two
/// outward steps compared ([`compare`]). The axis ends where it started, on its current gains.
///
/// # Errors
/// A sentence when a step could not run or holds no step; a step cut short by a bound counts
/// as a failed verification, not an error, when it is the candidate's.
pub async fn verify(
    h: &MachineHandle,
    a: &AxisConfig,
    candidate: &ControllerConfig,
    size: f64,
) -> Result<Comparison, String> {
    let axis = h.axis(&a.name).ok_or("no such axis")?;
    let on = |axis: &AxisHandle| {
        let state = axis.snapshot().state;
        if state.motor_on() {
            Ok(())
        } else {
            Err(format!("{} is {state}: the verification stops", a.name))
        }
    };
    on(axis)?;
    let resolution = 1.0 / a.scale.counts_per_unit;
    let (out, bounds) = verify_plan(size);
    let (back, _) = verify_plan(-size);
    let figures = |r: &ExperimentResult| {
        let rows: Vec<report::StepRow> = r.samples.iter().map(report::StepRow::from).collect();
        compare::figures(&rows)
    };
    tokio::time::sleep(Duration::from_millis(200)).await;
    let first = run_experiment(axis, out.clone(), bounds).await?;
    if let Some(why) = &first.aborted {
        return Err(format!("the step with the current gains ended early: {why}"));
    }
    let current = figures(&first)?;
    run_experiment(axis, back.clone(), bounds).await?;
    axis.send(AxisCommand::SetController(candidate.clone(), ChangedBy::Verification))
        .await
        .map_err(|e| e.to_string())?;
    let second = run_experiment(axis, out, bounds).await;
    // Back to the current gains whatever happened, then back to the start.
    axis.send(AxisCommand::SetController(a.controller.clone(), ChangedBy::Verification))
        .await
        .map_err(|e| e.to_string())?;
    let second = second?;
    on(axis)?;
    tokio::time::sleep(Duration::from_millis(200)).await;
    run_experiment(axis, back, bounds).await?;
    let suggested = match (&second.aborted, figures(&second)) {
        (None, Ok(f)) => f,
        (why, _) => {
            let why = why.clone().unwrap_or_else(|| "no step in the record".to_owned());
            let mut c = compare::compare(current, current, resolution);
            c.suggested = compare::StepFigures { rise_s: None, settling_s: None, ..current };
            c.worse = vec![format!("the step with the suggested gains ended early: {why}")];
            return Ok(c);
        }
    };
    Ok(compare::compare(current, suggested, resolution))
}

async fn run_experiment(
    a: &AxisHandle,
    spec: ExperimentSpec,
    bounds: ExperimentBounds,
) -> Result<ExperimentResult, String> {
    a.send(AxisCommand::Experiment { spec, bounds }).await.map_err(|e| e.to_string())?;
    let limit = Duration::from_secs_f64(bounds.seconds + 5.0);
    let _ = tokio::time::timeout(
        limit,
        a.wait_until(|s| !matches!(s.state, AxisState::Trialing | AxisState::Stopping)),
    )
    .await;
    match a.send(AxisCommand::TakeExperiment).await.map_err(|e| e.to_string())? {
        Reply::Experiment(Some(r)) => Ok(*r),
        _ => Err("the trial did not finish".to_owned()),
    }
}

/// Runs one step on axis `a` (which must be linked; it is enabled if it is not). The axis is
/// left steady (or as the trial left it); `a` is the axis's live configuration.
///
/// # Errors
/// A sentence: the axis refused, a trial did not finish, or the analysis failed.
pub async fn run(h: &MachineHandle, a: &AxisConfig, args: &StepRequest) -> Result<Outcome, String> {
    if args.step == TuneStep::All {
        return full_tuning(h, a, args).await;
    }
    run_one(h, a, args).await
}

/// The steps of full tuning before the verification, in order.
pub const PASS: [TuneStep; 4] =
    [TuneStep::Direction, TuneStep::Breakaway, TuneStep::Identify, TuneStep::Step];

/// Full tuning ([`TuneStep::All`]): each step says what it will do and what it found; the
/// first failure ends it with its reason. The suggestion is verified
/// against the current gains; when it is not worse, the step report (CSV, SVG, text summary)
/// is made with it, and the axis goes back to its current gains (the front end applies or
/// saves on request).
async fn full_tuning(
    h: &MachineHandle,
    a: &AxisConfig,
    args: &StepRequest,
) -> Result<Outcome, String> {
    let u = &a.scale.unit;
    let mut text = String::new();
    let mut steps = Vec::new();
    let mut breakaway = None;
    let mut found: Option<Outcome> = None;
    let fail = |text: String, steps: Vec<serde_json::Value>| Outcome {
        ok: false,
        text,
        result: serde_json::json!({ "steps": steps }),
        proposed: String::new(),
        suggested: None,
        verification: None,
    };
    for (n, step) in PASS.into_iter().enumerate() {
        let mut req = StepRequest { step, ..args.clone() };
        let name = format!("{step:?}").to_lowercase();
        let (spec, b) = plan(&req, a);
        if step == TuneStep::Step {
            // The step report, with the suggested gains unless they verified worse.
            let Some(out) = &found else { break };
            let worse = out.verification.as_ref().is_some_and(|v| v.is_worse());
            let c = out.suggested.clone().filter(|_| !worse).unwrap_or(a.controller.clone());
            let axis = h.axis(&a.name).ok_or("no such axis")?;
            axis.send(AxisCommand::SetController(c.clone(), ChangedBy::FullTuning))
                .await
                .map_err(|e| e.to_string())?;
            let mut with = a.clone();
            with.controller = c;
            text.push_str(&format!(
                "{}. step report with the {} gains: a closed-loop step, up to {} {u}, {} s\n",
                n + 1,
                if worse { "current (the suggestion verified worse)" } else { "suggested" },
                b.travel,
                b.seconds
            ));
            let r = run_one(h, &with, &req).await;
            axis.send(AxisCommand::SetController(a.controller.clone(), ChangedBy::FullTuning))
                .await
                .map_err(|e| e.to_string())?;
            let r = r?;
            text.push_str(&format!("{}\n", r.text));
            steps.push(serde_json::json!({ "step": name, "ok": r.ok, "result": r.result }));
            if let Some(csv) = r.result["csv"].as_str() {
                let summary = std::path::Path::new(csv).with_extension("txt");
                let body = format!("servotty full tuning, axis {}\n\n{text}", a.name);
                report::write_atomically(&summary, body.as_bytes())
                    .map_err(|e| format!("{}: {e}", summary.display()))?;
                text.push_str(&format!("full-tuning summary saved {}\n", summary.display()));
            }
            break;
        }
        if step == TuneStep::Identify {
            req.breakaway = breakaway;
            req.verify = true;
        }
        text.push_str(&format!(
            "{}. {name}: {}, up to {} {u}, up to {} s\n",
            n + 1,
            if spec.closed_loop() { "closed loop" } else { "open loop" },
            b.travel,
            b.seconds
        ));
        let out = match run_one(h, a, &req).await {
            Ok(out) => out,
            Err(e) => {
                text.push_str(&format!("stopped at {name}: {e}\n"));
                return Ok(fail(text, steps));
            }
        };
        text.push_str(&format!("{}\n", out.text));
        steps.push(serde_json::json!({ "step": name, "ok": out.ok, "result": out.result }));
        if !out.ok {
            text.push_str(&format!("stopped at {name}: its check failed\n"));
            return Ok(fail(text, steps));
        }
        if step == TuneStep::Breakaway {
            let f = out.result["forward_pct"].as_f64();
            let r = out.result["reverse_pct"].as_f64();
            breakaway = f.zip(r).map(|(f, r)| (round_up_half(f), round_up_half(r)));
        }
        if step == TuneStep::Identify {
            found = Some(out);
        }
    }
    let found = found.ok_or("full tuning ended before identification")?;
    let worse = found.verification.as_ref().is_some_and(|v| v.is_worse());
    if worse {
        text.push_str("stopped at the gains: the suggestion is worse than the current gains\n");
    }
    Ok(Outcome {
        ok: !worse,
        text: text.trim_end().to_owned(),
        result: serde_json::json!({ "steps": steps }),
        proposed: found.proposed,
        suggested: found.suggested,
        verification: found.verification,
    })
}

async fn run_one(h: &MachineHandle, a: &AxisConfig, args: &StepRequest) -> Result<Outcome, String> {
    let (spec, bounds) = plan(args, a);
    let axis = h.axis(&a.name).ok_or("no such axis")?;
    let spec =
        if args.step == TuneStep::Identify { toward_room(spec, &axis.snapshot(), a) } else { spec };
    // A trial never enables an axis behind the operator's back: the front end enables it
    // when the operator asked for that (the CLI says so in the plan it confirms).
    let state = axis.snapshot().state;
    if !state.motor_on() {
        return Err(format!("{} is {state}: enable it first, then tune", a.name));
    }
    // Let the hold settle so the trial starts from rest.
    tokio::time::sleep(Duration::from_millis(200)).await;
    at_rest(axis).await;
    let u = a.scale.unit.clone();
    let resolution = 1.0 / a.scale.counts_per_unit;
    // Identification starts with the breakaway ramps: the suggestion's minimum duty must come
    // from the measured breakaway, never from the sliding-friction offset alone.
    let ramps = if args.step == TuneStep::Identify && args.breakaway.is_none() {
        let rb = ExperimentBounds { travel: 10.0, seconds: 15.0 };
        let f = run_experiment(axis, breakaway_ramp(1, a.controller.max_duty), rb).await?;
        let r = run_experiment(axis, breakaway_ramp(-1, a.controller.max_duty), rb).await?;
        Some((f, r))
    } else {
        None
    };
    let mut runs = vec![run_experiment(axis, spec.clone(), bounds).await?];
    if args.step == TuneStep::Breakaway {
        // The other direction, from where the first ramp left the axis.
        runs.push(run_experiment(axis, breakaway_ramp(-1, a.controller.max_duty), bounds).await?);
    }
    let r = &runs[0];
    if let Some(why) = &r.aborted {
        return Ok(Outcome {
            ok: false,
            text: format!("trial ended early: {why}"),
            result: serde_json::json!({ "aborted": why }),
            proposed: String::new(),
            suggested: None,
            verification: None,
        });
    }
    let samples: Vec<ident::DutySample> = r.samples.iter().map(ident::DutySample::from).collect();
    let mut patch_text = String::new();
    let mut suggestion: Option<suggest::Suggestion> = None;
    let (ok, text, extra) = match args.step {
        TuneStep::All => unreachable!("full tuning runs its steps one at a time"),
        TuneStep::Direction => {
            let moved = r.samples.last().map_or(0.0, |s| s.position) - r.start_position;
            let counts = (moved / resolution).round();
            if counts.abs() < 3.0 {
                (
                    false,
                    format!(
                    "{}: did not move ({counts} counts): check motor power and wiring, then run \
                     `tune breakaway` (the pulse may be below the minimum duty)", a.name),
                    serde_json::json!({ "moved": moved, "counts": counts }),
                )
            } else if counts > 0.0 {
                (true, format!("{}: forward duty counts up ({counts} counts, {moved:+.3} {u}): direction is right", a.name),
                    serde_json::json!({ "moved": moved, "counts": counts }))
            } else {
                (
                    false,
                    format!(
                    "{}: forward duty counted DOWN ({counts} counts). If the carriage moved in \
                     its positive direction, set scale.invert_encoder = {}; if it moved the \
                     negative way, set scale.invert_motor = {}.",
                    a.name, !a.scale.invert_encoder, !a.scale.invert_motor),
                    serde_json::json!({ "moved": moved, "counts": counts }),
                )
            }
        }
        TuneStep::Breakaway => {
            let fwd = breakaway_of(&runs[0], resolution);
            let rev =
                runs.get(1).map_or(Err("not run".to_owned()), |r| breakaway_of(r, resolution));
            match (&fwd, &rev) {
                (Ok(f), Ok(r)) => {
                    let (f, r) = (f.duty_pct, r.duty_pct);
                    patch_text = format!(
                        "min_duty_forward = {}\nmin_duty_reverse = {}\n",
                        round_up_half(f),
                        round_up_half(r)
                    );
                    (
                        true,
                        format!(
                            "{}: breaks away at {f:+.2} % forwards and {r:+.2} % in reverse \
                             (duty at the first count of motion, confirmed by the velocity)",
                            a.name
                        ),
                        serde_json::json!({ "forward_pct": f, "reverse_pct": r }),
                    )
                }
                _ => {
                    let say = |b: &Result<ident::Breakaway, String>| {
                        b.as_ref().map_or_else(|e| e.clone(), |b| format!("{:+.2} %", b.duty_pct))
                    };
                    (
                        false,
                        format!(
                            "{}: no breakaway within the ramp (forwards: {}, reverse: {}): check \
                             motor power, the driver enable and the wiring",
                            a.name,
                            say(&fwd),
                            say(&rev)
                        ),
                        serde_json::json!({
                            "forward_pct": fwd.as_ref().ok().map(|b| b.duty_pct),
                            "reverse_pct": rev.as_ref().ok().map(|b| b.duty_pct),
                        }),
                    )
                }
            }
        }
        TuneStep::Identify => {
            let opts = ident::IdentOptions { resolution: Some(resolution), ..Default::default() };
            let id =
                ident::identify(&samples, &opts).map_err(|e| format!("identification: {e}"))?;
            let mut so = suggest::SimcOptions::new(1.0 / f64::from(a.board.tick_hz));
            so.resolution = Some(resolution);
            let found = ramps
                .as_ref()
                .map(|(f, r)| (breakaway_of(f, resolution), breakaway_of(r, resolution)));
            let (bf, br) = found.as_ref().map_or((None, None), |(f, r)| {
                (f.as_ref().ok().copied(), r.as_ref().ok().copied())
            });
            // Never below the measured breakaway of that direction (nor its sliding offset, in
            // case a ramp read low); without a breakaway, never below the configured minimum
            // duty (which a breakaway trial or a person set).
            let measured = args.breakaway.or_else(|| {
                bf.zip(br).map(|(f, r)| (round_up_half(f.duty_pct), round_up_half(r.duty_pct)))
            });
            let (mf, mr) =
                measured.unwrap_or((a.controller.min_duty_forward, a.controller.min_duty_reverse));
            let m = id.model;
            so.breakaway_forward_pct = Some(mf.max(round_up_half(m.offset_pct)));
            so.breakaway_reverse_pct = Some(mr.max(round_up_half(m.offset_for(-1.0))));
            let s = suggest::simc(&id.model, &a.controller, &so).map_err(|e| e.to_string())?;
            let mut text = format!("{}: {}", a.name, identify_text(&id, &s, &u));
            let raw = bf.zip(br).map(|(f, r)| (f.duty_pct, r.duty_pct));
            match (raw, &found) {
                (Some((f, r)), _) => text.push_str(&format!(
                    "\nbreaks away at {f:+.2} % forwards and {r:+.2} % in reverse (ramps)"
                )),
                (None, Some((f, r))) => {
                    let say = |b: &Result<ident::Breakaway, String>| {
                        b.as_ref().map_or_else(|e| e.clone(), |b| format!("{:+.2} %", b.duty_pct))
                    };
                    text.push_str(&format!(
                        "\nbreakaway ramps: forwards {}, reverse {}; the minimum duty stays as \
                         configured",
                        say(f),
                        say(r)
                    ));
                }
                (None, None) => {}
            }
            patch_text = s.patch.to_toml_lines();
            let mut extra = serde_json::to_value(&id).unwrap_or_default();
            if let Some(obj) = extra.as_object_mut() {
                let (f, r) = raw.map_or((None, None), |(f, r)| (Some(f), Some(r)));
                obj.insert("breakaway_forward_pct".into(), serde_json::json!(f));
                obj.insert("breakaway_reverse_pct".into(), serde_json::json!(r));
            }
            suggestion = Some(s);
            (true, text, extra)
        }
        TuneStep::Relay => {
            let t: Vec<f64> = r.samples.iter().map(|s| s.t).collect();
            let y: Vec<f64> = r.samples.iter().map(|s| s.position).collect();
            let duty: Vec<f64> = r.samples.iter().map(|s| s.duty).collect();
            let ExperimentSpec::Relay { amplitude, hysteresis, .. } = spec else {
                unreachable!("planned as a relay")
            };
            let opts = relay::RelayOptions {
                hysteresis,
                resolution: Some(resolution),
                friction_pct: args.friction.unwrap_or(0.0),
                ..relay::RelayOptions::ideal(amplitude)
            };
            let rr =
                relay::analyze_relay(&t, &y, &duty, &opts).map_err(|e| format!("relay: {e}"))?;
            let s = suggest::from_relay(&rr, suggest::RelayDesign::default(), &a.controller, 10.0)
                .map_err(|e| e.to_string())?;
            let mut text = format!("{}: {}", a.name, relay_text(&rr, &s, &u));
            if args.friction.is_none() {
                text.push_str(
                    "\n  note: sliding friction not corrected (pass --friction PCT, the offset \
                     `tune identify` reports): the gain reads low at small duties",
                );
            }
            patch_text = s.patch.to_toml_lines();
            let extra = serde_json::to_value(rr).unwrap_or_default();
            suggestion = Some(s);
            (true, text, extra)
        }
        TuneStep::Step => {
            let rows: Vec<report::StepRow> = r.samples.iter().map(report::StepRow::from).collect();
            let summary = report::summarize_step(&rows, 0.02).map_err(|e| e.to_string())?;
            let dir = args
                .out_dir
                .clone()
                .unwrap_or_else(|| crate::engine::recorder::state_dir().join("steps"));
            let stamp = crate::engine::events::rfc3339_utc(std::time::SystemTime::now())
                .replace([':', '.'], "-");
            let base = dir.join(format!("step-{}-{stamp}", a.name).to_lowercase());
            let csv = base.with_extension("csv");
            let svg = base.with_extension("svg");
            std::fs::create_dir_all(&dir).map_err(|e| format!("{}: {e}", dir.display()))?;
            let meta = report::StepRecordMeta {
                axis: &a.name,
                unit: &u,
                counts_per_unit: a.scale.counts_per_unit,
                what: "tune step",
                controller: &a.controller,
                summary: Some(&summary),
            };
            report::write_step_record(&csv, &rows, &meta)
                .map_err(|e| format!("{}: {e}", csv.display()))?;
            report::write_step_svg(&svg, &rows, &format!("{} step", a.name), &u)
                .map_err(|e| e.to_string())?;
            let text = format!(
                "{}\nsaved {} (its metadata beside it, .json) and {}",
                summary.to_text(&u, crate::cockpit::format::decimals_for(a.scale.counts_per_unit)),
                csv.display(),
                svg.display()
            );
            (
                true,
                text,
                serde_json::json!({ "metrics": summary.to_json(), "csv": csv, "svg": svg }),
            )
        }
    };
    let mut text = text;
    if !patch_text.is_empty() {
        text.push_str(&format!("\nproposed [axis.controller] lines for {}:\n{patch_text}", a.name));
    }
    if let Some(s) = &suggestion {
        for n in &s.notes {
            text.push_str(&format!("  note: {n}\n"));
        }
    }
    // Rounded as the proposed lines are (the parameter table's rounding): what is applied
    // live is what a person reads and what `w` writes.
    let suggested = suggestion.as_ref().map(|s| s.patch.apply_rounded(&a.controller));
    let mut verification = None;
    if let Some(c) = suggested.as_ref().filter(|_| args.verify) {
        let size = args.size.unwrap_or(VERIFY_STEP);
        let v = verify(h, a, c, size).await?;
        text.push_str(&format!(
            "\nverification: a {size} {u} step and back with the current gains, then with the \
             suggested ones:\n{}",
            v.to_text(&u)
        ));
        verification = Some(Box::new(v));
    }
    Ok(Outcome {
        ok,
        text: text.trim_end().to_owned(),
        result: extra,
        proposed: patch_text,
        suggested,
        verification,
    })
}
