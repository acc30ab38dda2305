//! The diagnosis rules, one function per cause (the table in [`super`] states them).
//!
//! Each rule reads a [`View`] of the record (the window before the trip, the trip row, the
//! axis's facts) and returns a [`Candidate`] when its picture is there. Written by hand: these
//! are the product's own reading of a servo trace.

use super::{Candidate, Cause, TripRecord, RECENT_S, WINDOW_S};
use crate::engine::history::Sample;
use crate::engine::snapshot::AxisState;
use crate::protocol::status;

/// Shortest standstill up to the trip that reads as a jam, s. A stiff axis jammed at speed
/// blows its band within a few tens of milliseconds, so the run is short.
const JAM_MIN_S: f64 = 0.01;
/// Fraction of the duty limit above which a standstill is a jam; below it the drive never
/// pushed (the gain-too-low rule's second picture).
const JAM_DUTY: f64 = 0.15;

/// Frames the board's motor-on bit must be clear while the host drives, to count.
const MOTOR_OFF_FRAMES: usize = 3;

/// The record seen from its trip.
pub struct View<'a> {
    rec: &'a TripRecord,
    /// The record's rows, with `missed_frames` also counting gaps the board's clock shows
    /// (a board whose sequence number stopped during a cut still has its clock running).
    rows: Vec<Sample>,
    /// Index of the trip row (`rows.len()` when there is no trip).
    k: usize,
    /// First row of the window.
    w0: usize,
    /// Counts per unit (configured or estimated; 0 when unknown).
    cpu: f64,
    /// Below this |velocity| the axis stands still, unit/s.
    v_noise: f64,
}

impl<'a> View<'a> {
    /// The view of `rec`.
    pub fn new(rec: &'a TripRecord) -> Self {
        let rows = with_clock_gaps(&rec.rows, rec.has_evidence);
        let after = rec.trip.at_s.map_or(f64::NEG_INFINITY, |t| t - 1e-6);
        let k = rows
            .iter()
            .position(|r| r.state == AxisState::Tripped && r.t >= after)
            .or_else(|| rows.iter().position(|r| r.state == AxisState::Tripped))
            .unwrap_or(rows.len());
        let t_end = if k < rows.len() { rows[k].t } else { rows.last().map_or(0.0, |r| r.t) };
        // A record with no trip is read whole: the question is what happened in it.
        let w0 = if k < rows.len() {
            rows[..k].iter().position(|r| r.t >= t_end - WINDOW_S).unwrap_or(k)
        } else {
            0
        };
        let cpu = if rec.facts.counts_per_unit > 0.0 {
            rec.facts.counts_per_unit
        } else {
            estimate_cpu(&rows)
        };
        let floor = if cpu > 0.0 { 200.0 / cpu } else { 0.0 };
        let v_noise = floor.max(0.02 * rec.facts.max_velocity).max(1e-9);
        Self { rec, rows, k, w0, cpu, v_noise }
    }

    /// Board time of the trip row.
    pub fn trip_time(&self) -> Option<f64> {
        self.rows.get(self.k).map(|r| r.t)
    }

    /// Time the window ends (the trip row, or the last row).
    fn t_end(&self) -> f64 {
        self.trip_time().or_else(|| self.rows.last().map(|r| r.t)).unwrap_or(0.0)
    }

    /// Rows before the trip in the window.
    fn before(&self) -> &[Sample] {
        &self.rows[self.w0..self.k]
    }

    /// Window rows and the trip row.
    fn through_trip(&self) -> &[Sample] {
        &self.rows[self.w0..(self.k + 1).min(self.rows.len())]
    }

    /// Rows before the trip within the last `s` seconds.
    fn last(&self, s: f64) -> &[Sample] {
        let b = self.before();
        let from = b.iter().position(|r| r.t >= self.t_end() - s).unwrap_or(b.len());
        &b[from..]
    }

    fn recorded(&self, words: &str) -> bool {
        self.rec.trip.cause.as_deref().is_some_and(|c| c.contains(words))
    }

    fn unit(&self) -> &str {
        &self.rec.facts.unit
    }

    fn max_duty(&self) -> f64 {
        if self.rec.facts.max_duty > 0.0 {
            self.rec.facts.max_duty
        } else {
            100.0
        }
    }

    fn ago(&self, t: f64) -> String {
        format!("{:.0} ms before the trip", (self.t_end() - t) * 1000.0)
    }
}

/// The rows with each one's lost frames taken as the larger of the sequence gap and the
/// board clock's gap in ticks (the tick being the median clock step).
fn with_clock_gaps(rows: &[Sample], has_clock: bool) -> Vec<Sample> {
    let mut out = rows.to_vec();
    if !has_clock || rows.len() < 3 {
        return out;
    }
    let mut steps: Vec<u32> = rows
        .windows(2)
        .map(|w| w[1].board_time_us.wrapping_sub(w[0].board_time_us))
        .filter(|&d| d > 0)
        .collect();
    if steps.is_empty() {
        return out;
    }
    steps.sort_unstable();
    let tick = f64::from(steps[steps.len() / 2]);
    for j in 1..out.len() {
        let d = f64::from(rows[j].board_time_us.wrapping_sub(rows[j - 1].board_time_us));
        // Frames more than an hour apart are a new link-up, not a gap.
        if d > 0.0 && d < 3.6e9 {
            let by_clock = ((d / tick).round() as u32).saturating_sub(1);
            out[j].missed_frames = out[j].missed_frames.max(by_clock);
        }
    }
    out
}

/// Counts per unit from the rows: count change over position change.
fn estimate_cpu(rows: &[Sample]) -> f64 {
    let (Some(a), Some(b)) = (rows.first(), rows.last()) else { return 0.0 };
    let dp = b.position - a.position;
    if dp.abs() > 1e-9 && b.count != a.count {
        ((b.count - a.count) as f64 / dp).abs()
    } else {
        0.0
    }
}

/// Every rule's finding.
pub fn all(v: &View<'_>) -> Vec<Candidate> {
    let mut out: Vec<Candidate> = [
        watchdog(v),
        driver_fault(v),
        link(v),
        encoder(v),
        wiring(v),
        jam(v),
        saturation(v),
        weaker_drive(v),
        gain_too_low(v),
        light_load(v),
        recorded_only(v),
    ]
    .into_iter()
    .flatten()
    .collect();
    // The watchdog is usually the consequence of a link gap or host stall: keep the gap as
    // the watchdog's evidence and the link below it.
    if out.iter().any(|c| c.cause == Cause::BoardWatchdog) {
        for c in out.iter_mut().filter(|c| c.cause == Cause::LinkTrouble) {
            c.confidence = c.confidence.min(0.6);
        }
    }
    // A drive that weakened mid-move saturates next: the weakening is the finding.
    if out.iter().any(|c| c.cause == Cause::WeakerDrive) {
        for c in out.iter_mut().filter(|c| c.cause == Cause::Saturation) {
            c.confidence = c.confidence.min(0.6);
        }
    }
    out
}

fn cand(cause: Cause, confidence: f64, evidence: Vec<String>, check: Vec<String>) -> Candidate {
    Candidate { cause, confidence: confidence.clamp(0.0, 1.0), evidence, check }
}

/// The largest run of lost frames in `rows`, and the row it came before.
fn largest_gap(rows: &[Sample]) -> Option<&Sample> {
    rows.iter().filter(|r| r.missed_frames > 0).max_by_key(|r| r.missed_frames)
}

/// Board watchdog: its bit, or the motor-on bit cleared while the host drives.
pub fn watchdog(v: &View<'_>) -> Option<Candidate> {
    let rows = v.through_trip();
    let bit = rows.iter().find(|r| r.status & status::WATCHDOG_TRIPPED != 0);
    let mut off_run = 0;
    let mut off_at = None;
    for w in rows.windows(2) {
        let driven = w[0].state.motor_on() && w[1].state.motor_on();
        if driven
            && w[1].status & status::MOTOR_ON == 0
            && (off_run > 0 || w[0].status & status::MOTOR_ON != 0)
        {
            off_run += 1;
            if off_run == 1 {
                off_at = Some(w[1].t);
            }
            if off_run >= MOTOR_OFF_FRAMES {
                break;
            }
        } else {
            off_run = 0;
            off_at = None;
        }
    }
    let recorded = v.recorded("watchdog") || v.recorded("motor off by the board");
    let at = match (bit, off_run >= MOTOR_OFF_FRAMES) {
        (Some(r), _) => r.t,
        (None, true) => off_at?,
        (None, false) if recorded => v.t_end(),
        _ => return None,
    };
    let mut evidence = vec![if bit.is_some() {
        format!("the board reported its watchdog tripped {}", v.ago(at))
    } else if recorded && off_run < MOTOR_OFF_FRAMES {
        "the supervisor recorded the board's watchdog".to_owned()
    } else {
        format!("the board switched the motor off {} while the host was driving it", v.ago(at))
    }];
    let upto: Vec<Sample> = rows.iter().filter(|r| r.t <= at + 1e-9).copied().collect();
    if let Some(g) = largest_gap(&upto) {
        evidence.push(format!(
            "{} telemetry frames were lost just before ({}): the link went dark or the host \
             stalled, and no duty reached the board in time",
            g.missed_frames,
            v.ago(g.t)
        ));
    }
    let conf = if recorded { 0.97 } else { 0.9 };
    Some(cand(
        Cause::BoardWatchdog,
        conf,
        evidence,
        vec![
            "what stalled the host or the link: a loaded or throttled computer, a USB hub or \
             cable, another program on the port"
                .to_owned(),
            "the board's watchdog_ms against the host's tick (servotty linktest shows the \
             longest reply gap)"
                .to_owned(),
        ],
    ))
}

/// The board's driver-fault bit.
pub fn driver_fault(v: &View<'_>) -> Option<Candidate> {
    let r = v.through_trip().iter().find(|r| r.status & status::DRIVER_FAULT != 0)?;
    Some(cand(
        Cause::DriverFault,
        if v.recorded("board fault") { 0.97 } else { 0.95 },
        vec![format!("the board reported a driver fault {}", v.ago(r.t))],
        vec!["motor supply voltage, a short in the motor leads, the driver's temperature and \
             current limit"
            .to_owned()],
    ))
}

/// Lost frames or a lost link.
pub fn link(v: &View<'_>) -> Option<Candidate> {
    let rows = v.through_trip();
    let lost: u64 = rows.iter().map(|r| u64::from(r.missed_frames)).sum();
    let n = rows.len() as u64;
    let frac = if n + lost > 0 { lost as f64 / (n + lost) as f64 } else { 0.0 };
    let recent_from = v.t_end() - RECENT_S;
    let gap = largest_gap(rows);
    let recent_gap =
        rows.iter().filter(|r| r.t >= recent_from).map(|r| r.missed_frames).max().unwrap_or(0);
    let trip_row_gap = v.rows.get(v.k).map_or(0, |r| r.missed_frames);
    let mut evidence = Vec::new();
    if lost > 0 {
        evidence.push(format!(
            "{lost} telemetry frames lost in the last {:.1} s ({:.1} % of frames)",
            WINDOW_S,
            frac * 100.0
        ));
    }
    if let Some(g) = gap {
        evidence.push(format!("longest gap {} frames, {}", g.missed_frames, v.ago(g.t)));
    }
    let conf = if v.recorded("link loss") {
        let last = v.before().last().map_or(v.t_end(), |r| r.t);
        evidence.insert(0, format!("no valid telemetry after board time {last:.3} s"));
        0.95
    } else if v.recorded("encoder jump") && trip_row_gap > 0 {
        evidence.push(format!(
            "the jump came with {trip_row_gap} lost frames: the axis moved during the gap"
        ));
        0.85
    } else if recent_gap >= 5 || frac >= 0.05 {
        0.55 + 0.3 * (f64::from(recent_gap) / 20.0).max(frac / 0.2).min(1.0)
    } else if recent_gap >= 1 {
        0.3
    } else {
        return None;
    };
    Some(cand(
        Cause::LinkTrouble,
        conf,
        evidence,
        vec![
            "the USB cable and hub, ground loops and motor noise near the cable".to_owned(),
            "servotty linktest on this port, and other programs on the computer".to_owned(),
        ],
    ))
}

/// A count change between frames that no motor could make.
pub fn encoder(v: &View<'_>) -> Option<Candidate> {
    if !v.rec.has_evidence {
        return None;
    }
    let rows = v.through_trip();
    if rows.len() < 3 {
        return None;
    }
    // Count rate per tick, and how much it changes from one frame to the next.
    let rate: Vec<f64> = rows
        .windows(2)
        .map(|w| (w[1].count - w[0].count) as f64 / f64::from(w[1].missed_frames + 1))
        .collect();
    let change: Vec<(usize, f64)> =
        rate.windows(2).enumerate().map(|(j, w)| (j + 2, (w[1] - w[0]).abs())).collect();
    let mut sorted: Vec<f64> = change.iter().map(|c| c.1).collect();
    sorted.sort_by(f64::total_cmp);
    // A jump shows twice (the rate leaves and comes back): the typical change is taken
    // without the two largest.
    let rest = &sorted[..sorted.len().saturating_sub(2).max(1)];
    let typical = rest[(rest.len() * 95 / 100).min(rest.len() - 1)];
    let limit = 20.0_f64.max(10.0 * typical);
    // The first frame that departs is the jump.
    let &(j, _) = change.iter().find(|c| c.1 > limit)?;
    let r = &rows[j];
    let jump = r.count - rows[j - 1].count;
    let before = rate[j - 2];
    let mut evidence = vec![format!(
        "the count changed by {jump} in one frame {} while the frames before moved {before:.1} \
         counts each (largest frame-to-frame change otherwise {typical:.1})",
        v.ago(r.t)
    )];
    if v.cpu > 0.0 {
        evidence.push(format!(
            "{:.3} {} in {:.1} ms with duty {:.0} %: more than the motor can move",
            jump as f64 / v.cpu,
            v.unit(),
            (r.t - rows[j - 1].t) * 1000.0,
            rows[j - 1].duty
        ));
    }
    let mut conf = if v.recorded("encoder jump") { 0.95 } else { 0.85 };
    if r.missed_frames > 0 {
        evidence.push(format!(
            "{} frames were lost just before it: a glitch, or motion during the gap",
            r.missed_frames
        ));
        conf = 0.65;
    }
    Some(cand(
        Cause::EncoderFault,
        conf,
        evidence,
        vec![
            "encoder wiring and connector, shielding and its ground, its supply voltage".to_owned(),
            "motor leads run beside the encoder cable (noise), a loose encoder disc".to_owned(),
            "re-home before trusting positions again".to_owned(),
        ],
    ))
}

/// Motion against the duty, speeding up.
pub fn wiring(v: &View<'_>) -> Option<Candidate> {
    let rows = v.last(RECENT_S);
    let max = v.max_duty();
    let mut driven = 0usize;
    let mut against = Vec::new();
    for w in rows.windows(2) {
        let duty = w[0].duty;
        if !w[1].state.motor_on() || duty.abs() <= 0.1 * max {
            continue;
        }
        driven += 1;
        if w[1].velocity.abs() > v.v_noise && w[1].velocity.signum() != duty.signum() {
            against.push(w[1]);
        }
    }
    let recorded = v.recorded("runaway");
    let speeding = match (against.first(), against.last()) {
        (Some(a), Some(b)) => b.velocity.abs() > a.velocity.abs(),
        _ => false,
    };
    let share = if driven > 0 { against.len() as f64 / driven as f64 } else { 0.0 };
    if !(recorded || (driven >= 5 && share >= 0.6 && speeding)) {
        return None;
    }
    let mut evidence = vec![format!(
        "{:.0} % of the driven frames in the last {:.0} ms moved against the duty",
        share * 100.0,
        RECENT_S * 1000.0
    )];
    if let (Some(a), Some(b)) = (against.first(), against.last()) {
        evidence.push(format!(
            "speed grew from {:.1} to {:.1} {u}/s against the duty: the loop pushes the wrong way",
            a.velocity.abs(),
            b.velocity.abs(),
            u = v.unit()
        ));
    }
    Some(cand(
        Cause::Wiring,
        if recorded { 0.92 } else { 0.85 },
        evidence,
        vec!["motor leads swapped, or encoder A/B swapped: swap one of them (or set \
             scale.invert_encoder), then run `servotty tune direction` before enabling again"
            .to_owned()],
    ))
}

/// Duty with no motion: a jam or a hard stop.
pub fn jam(v: &View<'_>) -> Option<Candidate> {
    let b = v.before();
    let last = b.last()?;
    let max = v.max_duty();
    // The trailing run with no encoder motion.
    let still = |r: &Sample| {
        if v.rec.has_evidence {
            (r.count - last.count).abs() <= 2
        } else {
            v.cpu > 0.0 && ((r.position - last.position) * v.cpu).abs() <= 2.0
                || (r.position - last.position).abs() < 1e-9
        }
    };
    let start = b.iter().rposition(|r| !still(r)).map_or(0, |i| i + 1);
    let run = &b[start..];
    let first = run.first()?;
    let held_s = last.t - first.t;
    let board_off = v.rec.has_evidence && run.iter().any(|r| r.status & status::MOTOR_ON == 0);
    let peak = run.iter().map(|r| r.duty.abs()).fold(0.0, f64::max);
    let driven = run.iter().all(|r| r.state.motor_on());
    let grows = last.following_error.abs() > first.following_error.abs() + 1e-9;
    let recorded = v.recorded("stall");
    if !(recorded
        || (held_s >= JAM_MIN_S && driven && !board_off && peak > JAM_DUTY * max && grows))
    {
        return None;
    }
    let u = v.unit();
    let mut evidence = vec![format!(
        "no encoder motion for {:.0} ms up to the trip at position {:.3} {u}",
        held_s * 1000.0,
        last.position
    )];
    evidence.push(format!(
        "duty went from {:.0} % to {:.0} % (limit {max:.0} %) and the following error from \
         {:.3} to {:.3} {u}",
        first.duty, last.duty, first.following_error, last.following_error
    ));
    let mut check = vec![
        format!("an obstruction or a seized bearing near {:.1} {u}", last.position),
        "motor power and leads: a motor that gets no current does not move either".to_owned(),
        "an encoder that stopped counting gives the same picture: if the carriage did move, \
         it is the encoder"
            .to_owned(),
    ];
    if let Some((lo, hi)) = v.rec.facts.soft_limits {
        if last.position <= lo || last.position >= hi {
            evidence.push(format!(
                "the position is at or beyond the soft limits ({lo} … {hi} {u}): likely the end \
                 stop"
            ));
            check.insert(
                0,
                "the home reference: a wrong home puts the end stop inside the travel".to_owned(),
            );
        }
    }
    let conf = if recorded { 0.92 } else { 0.6 + 0.3 * (held_s / 0.1).min(1.0) };
    Some(cand(Cause::Jam, conf, evidence, check))
}

/// The output at its limit while the error grows.
pub fn saturation(v: &View<'_>) -> Option<Candidate> {
    let rows: Vec<&Sample> = v.last(0.2).iter().filter(|r| r.state.motor_on()).collect();
    if rows.len() < 5 {
        return None;
    }
    let max = v.max_duty();
    let sat = |r: &Sample| r.saturated || r.duty.abs() >= 0.98 * max;
    let share = rows.iter().filter(|r| sat(r)).count() as f64 / rows.len() as f64;
    let recent: Vec<&&Sample> = rows.iter().filter(|r| r.t >= v.t_end() - 0.05).collect();
    let recent_share = recent.iter().filter(|r| sat(r)).count() as f64 / recent.len().max(1) as f64;
    if share < 0.3 || recent_share < 0.5 {
        return None;
    }
    let sat_rows: Vec<&&Sample> = rows.iter().filter(|r| sat(r)).collect();
    let along =
        sat_rows.iter().map(|r| r.duty.signum() * r.velocity).sum::<f64>() / sat_rows.len() as f64;
    if along <= v.v_noise {
        return None; // not moving the duty's way: a jam or wiring, not saturation
    }
    let flips = sat_rows.windows(2).filter(|w| w[0].duty.signum() != w[1].duty.signum()).count();
    let u = v.unit();
    let (first, last) = (rows[0], rows[rows.len() - 1]);
    let mut evidence = vec![format!(
        "duty at its limit (±{max:.0} %) in {:.0} % of the last 200 ms while the following \
         error went from {:.3} to {:.3} {u}",
        share * 100.0,
        first.following_error,
        last.following_error
    )];
    let accelerating =
        sat_rows.iter().filter(|r| r.target_acceleration.abs() > 1e-9).count() * 2 > sat_rows.len();
    evidence.push(format!(
        "velocity {:.1} {u}/s against the profile's {:.1} {u}/s{}",
        last.velocity,
        last.target_velocity,
        if accelerating { ", mostly while the profile accelerated" } else { "" }
    ));
    if flips >= 4 {
        evidence
            .push(format!("the duty swung between the limits {flips} times: the loop oscillates"));
        return Some(cand(
            Cause::Saturation,
            0.75,
            evidence,
            vec![
                "gains too high: lower kp and kd (or re-run `servotty tune`)".to_owned(),
                "backlash or a loose coupling makes a tight loop oscillate".to_owned(),
            ],
        ));
    }
    let mut check = vec![if accelerating {
        "the profile asks more acceleration than the motor gives: lower max_acceleration".to_owned()
    } else {
        "the profile asks more speed than the motor gives: lower max_velocity".to_owned()
    }];
    check.push(
        "the motor supply voltage under load: a sagging supply gives the same picture (the \
         record has no supply measurement)"
            .to_owned(),
    );
    check.push("extra friction or load (a dragging carriage) on this move".to_owned());
    Some(cand(Cause::Saturation, 0.8, evidence, check))
}

/// The axis follows, but lags more with speed, with duty to spare.
pub fn gain_too_low(v: &View<'_>) -> Option<Candidate> {
    if let Some(c) = too_weak_to_start(v) {
        return Some(c);
    }
    let rows: Vec<&Sample> = v
        .before()
        .iter()
        .filter(|r| {
            matches!(r.state, AxisState::Moving | AxisState::Jogging | AxisState::Homing)
                && r.target_velocity.abs() > v.v_noise
        })
        .collect();
    if rows.len() < 20 {
        return None;
    }
    let max = v.max_duty();
    let peak = rows.iter().map(|r| r.duty.abs()).fold(0.0, f64::max);
    if peak >= 0.8 * max || rows.iter().any(|r| r.saturated) {
        return None;
    }
    let follows = rows
        .iter()
        .filter(|r| {
            r.velocity.signum() == r.target_velocity.signum()
                && r.velocity.abs() >= 0.3 * r.target_velocity.abs()
        })
        .count() as f64
        / rows.len() as f64;
    let last = v.before().last()?;
    let at_trip = v.rows.get(v.k).unwrap_or(last);
    let band = if last.band > 0.0 { last.band } else { f64::INFINITY };
    // Grown into the band over the move, not one frame's spike.
    let near_band =
        last.following_error.abs() >= 0.5 * band && at_trip.following_error.abs() >= 0.7 * band;
    // Still moving the profile's way at the trip (at least 3 counts in the last 20 ms): a
    // jam is not a lag, and motion against the profile is the wiring rule's.
    let end = v.last(0.02);
    let moving_at_end = match (end.first(), end.last()) {
        (Some(a), Some(b)) => {
            ((b.count - a.count) as f64) * b.target_velocity.signum() >= 3.0
                || !v.rec.has_evidence
                    && (b.position - a.position) * b.target_velocity.signum() > 0.0
        }
        _ => false,
    };
    if !near_band || !moving_at_end {
        return None;
    }
    let r = correlation(
        rows.iter().map(|r| r.target_velocity.abs()),
        rows.iter().map(|r| r.following_error.abs()),
    );
    let u = v.unit();
    let mut evidence = vec![format!(
        "the axis moved the profile's way (at {:.1} of {:.1} {u}/s at the end) and kept up \
         (at least 30 % of the profile's speed) in {:.0} % of the moving frames, yet lagged \
         {:.3} {u} at the trip (band {:.3} {u})",
        last.velocity,
        last.target_velocity,
        follows * 100.0,
        last.following_error.abs(),
        last.band
    )];
    evidence.push(format!(
        "duty peaked at {peak:.0} % of a {max:.0} % limit: there was drive to spare"
    ));
    if r.is_finite() {
        evidence.push(format!("|following error| against profile speed: correlation {r:.2}"));
    }
    let ff: f64 = rows.iter().map(|r| r.ff.abs()).sum::<f64>();
    let duty: f64 = rows.iter().map(|r| r.duty.abs()).sum::<f64>();
    let mut check = vec!["raise kp, or run `servotty tune` on this axis".to_owned()];
    if duty > 0.0 {
        evidence.push(format!("feedforward gave {:.0} % of the duty", 100.0 * ff / duty));
        if ff < 0.5 * duty {
            check.insert(
                0,
                "raise ff_velocity: the feedforward leaves the error to do the work".to_owned(),
            );
        }
    }
    check.push(
        "the band (following_error, following_error_per_velocity) may be tighter than this \
         axis can follow; a dragging load gives the same picture"
            .to_owned(),
    );
    let conf = if r >= 0.5 { 0.7 } else { 0.5 };
    Some(cand(Cause::GainTooLow, conf, evidence, check))
}

/// The other picture of a gain too low: the profile moved off, the error grew, yet the duty
/// stayed too small to start the motor.
fn too_weak_to_start(v: &View<'_>) -> Option<Candidate> {
    let b = v.before();
    let last = b.last()?;
    let start = b.iter().rposition(|r| (r.count - last.count).abs() > 2).map_or(0, |i| i + 1);
    let run = &b[start..];
    let first = run.first()?;
    let max = v.max_duty();
    let peak = run.iter().map(|r| r.duty.abs()).fold(0.0, f64::max);
    let target_moved = (last.target - first.target).abs() > last.band.max(1e-9) * 0.5;
    let driven = run.iter().all(|r| r.state.motor_on());
    if !(v.rec.has_evidence
        && last.t - first.t >= JAM_MIN_S
        && driven
        && target_moved
        && peak <= JAM_DUTY * max
        && last.following_error.abs() > first.following_error.abs())
    {
        return None;
    }
    let u = v.unit();
    Some(cand(
        Cause::GainTooLow,
        0.65,
        vec![
            format!(
                "the target moved {:.3} {u} away but the axis never started: the duty reached                  only {peak:.1} % (limit {max:.0} %)",
                (last.target - first.target).abs()
            ),
            format!("following error grew to {:.3} {u} at {:.1} % duty", last.following_error, last.duty),
        ],
        vec![
            "raise kp (and ff_velocity, ff_static): the output stays below the motor's breakaway              duty, or run `servotty tune` on this axis"
                .to_owned(),
            "set the minimum duty (breakaway) from commissioning".to_owned(),
        ],
    ))
}

/// Rows of the early cruise that [`weaker_drive`] compares with, s.
const WEAKER_EARLY_S: f64 = 0.03;
/// The end of the record [`weaker_drive`] compares, s.
const WEAKER_LATE_S: f64 = 0.02;

/// At one profile speed (cruise), the motor gives less speed for more duty than it did
/// earlier in the window: its drive weakened (supply sag) or its load grew (drag), while the
/// axis still moves (a standstill is the jam rule's).
pub fn weaker_drive(v: &View<'_>) -> Option<Candidate> {
    let before = v.before();
    let cruise_v = before.last()?.target_velocity;
    if cruise_v.abs() <= v.v_noise {
        return None;
    }
    let at_cruise = |r: &&Sample| {
        r.state.motor_on()
            && r.target_acceleration.abs() < 1e-9
            && (r.target_velocity - cruise_v).abs() < 1e-6 * cruise_v.abs().max(1.0)
    };
    let cruise: Vec<&Sample> = before.iter().filter(at_cruise).collect();
    let (first, last) = (cruise.first()?, cruise.last()?);
    let early: Vec<&&Sample> = cruise.iter().filter(|r| r.t <= first.t + WEAKER_EARLY_S).collect();
    let late: Vec<&&Sample> = cruise.iter().filter(|r| r.t >= last.t - WEAKER_LATE_S).collect();
    if early.len() < 5 || late.len() < 5 || last.t - first.t < 3.0 * WEAKER_EARLY_S {
        return None;
    }
    let mean = |rows: &[&&Sample], f: fn(&Sample) -> f64| {
        rows.iter().map(|r| f(r)).sum::<f64>() / rows.len() as f64
    };
    let s = cruise_v.signum();
    let (v_early, d_early) = (mean(&early, |r| r.velocity) * s, mean(&early, |r| r.duty) * s);
    let (v_late, d_late) = (mean(&late, |r| r.velocity) * s, mean(&late, |r| r.duty) * s);
    // Still moving at the very end: a standstill is a jam.
    let slowest_end = cruise
        .iter()
        .filter(|r| r.t >= last.t - 0.01)
        .map(|r| r.velocity * s)
        .fold(f64::INFINITY, f64::min);
    // More duty for less speed, by a margin no cruise wobble gives.
    let weaker = d_early > 0.0
        && v_early > 0.0
        && d_late - d_early >= 0.15 * v.max_duty()
        && v_late / d_late <= 0.6 * v_early / d_early
        && v_late <= 0.9 * v_early
        && v_late >= 0.15 * cruise_v.abs()
        && slowest_end >= 0.1 * cruise_v.abs();
    if !weaker {
        return None;
    }
    let u = v.unit();
    Some(cand(
        Cause::WeakerDrive,
        0.8,
        vec![
            format!(
                "at the one profile speed {:.1} {u}/s: {d_early:.0} % duty gave {v_early:.1} \
                 {u}/s at first ({}), {d_late:.0} % gave only {v_late:.1} {u}/s at the end",
                cruise_v.abs(),
                v.ago(first.t)
            ),
            "the axis still moved: not a jam, but the motor got weaker or its load heavier \
             during the move"
                .to_owned(),
        ],
        vec![
            "the motor supply at the board while the axis moves: a sagging supply, a weak \
             battery, a thin or long supply cable"
                .to_owned(),
            "something dragging on the carriage: a cable, a brake, debris on the rail".to_owned(),
        ],
    ))
}

/// At cruise the P and I parts take back a good part of the feedforward: the load is lighter
/// than the feedforward was tuned for.
pub fn light_load(v: &View<'_>) -> Option<Candidate> {
    if !v.rec.has_evidence {
        return None;
    }
    let peak_v = v.before().iter().map(|r| r.target_velocity.abs()).fold(0.0, f64::max);
    let cruise: Vec<&Sample> = v
        .before()
        .iter()
        .filter(|r| {
            r.state == AxisState::Moving
                && r.target_acceleration.abs() < 1e-9
                && r.target_velocity.abs() > 0.5 * peak_v
                && peak_v > v.v_noise
        })
        .collect();
    if cruise.len() < 50 {
        return None;
    }
    let ff: f64 = cruise.iter().map(|r| r.ff * r.target_velocity.signum()).sum();
    let pi: f64 = cruise.iter().map(|r| (r.p + r.i) * r.target_velocity.signum()).sum();
    if ff <= 0.0 || pi > -0.3 * ff {
        return None;
    }
    Some(cand(
        Cause::LightLoad,
        0.45,
        vec![format!(
            "at cruise the P and I parts took back {:.0} % of the feedforward: the motor \
             needed less drive than it was tuned for",
            -100.0 * pi / ff
        )],
        vec![
            "the belt and its tension, the coupling and the pulley set screws: a slipping belt \
             unloads the motor"
                .to_owned(),
            "a lost or changed load; or re-run `servotty tune` if the machine changed".to_owned(),
        ],
    ))
}

/// Causes only the supervisor's own record names: out of travel, homing.
pub fn recorded_only(v: &View<'_>) -> Option<Candidate> {
    let detail = v.rec.trip.detail.clone().unwrap_or_default();
    if v.recorded("soft limit") {
        return Some(cand(
            Cause::OutOfTravel,
            0.85,
            vec![format!("the supervisor recorded: {detail}")],
            vec!["the command or jog that went there, and the home reference (a wrong home \
                 shifts the whole travel)"
                .to_owned()],
        ));
    }
    if v.recorded("homing") {
        return Some(cand(
            Cause::Homing,
            0.85,
            vec![format!("the supervisor recorded: {detail}")],
            vec!["the home switch and its wiring, the homing speeds and travel bound".to_owned()],
        ));
    }
    None
}

/// Pearson correlation of two equally long series (NaN when undefined).
fn correlation(x: impl Iterator<Item = f64>, y: impl Iterator<Item = f64>) -> f64 {
    let pairs: Vec<(f64, f64)> = x.zip(y).collect();
    let n = pairs.len() as f64;
    if n < 2.0 {
        return f64::NAN;
    }
    let mx = pairs.iter().map(|p| p.0).sum::<f64>() / n;
    let my = pairs.iter().map(|p| p.1).sum::<f64>() / n;
    let sxy: f64 = pairs.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    let sxx: f64 = pairs.iter().map(|p| (p.0 - mx).powi(2)).sum();
    let syy: f64 = pairs.iter().map(|p| (p.1 - my).powi(2)).sum();
    sxy / (sxx * syy).sqrt()
}

#[cfg(test)]
mod tests {
    use super::super::{diagnose, AxisFacts, RecordedTrip};
    use super::*;

    const CPU: f64 = 100.0;

    /// A 1 kHz move at `speed` unit/s with a well-following axis; `f` edits each row.
    fn record(n: usize, speed: f64, f: impl Fn(usize, &mut Sample)) -> TripRecord {
        let mut rows = Vec::new();
        for j in 0..=n {
            let t = j as f64 * 0.001;
            let target = speed * t;
            let position = target - 0.2;
            let mut s = Sample {
                t,
                target,
                position,
                following_error: 0.2,
                duty: 30.0,
                velocity: speed,
                state: AxisState::Moving,
                count: (position * CPU).round() as i64,
                board_time_us: (j * 1000) as u32,
                status: status::MOTOR_ON,
                target_velocity: speed,
                band: 3.0 + 0.01 * speed,
                p: 4.0,
                ff: 26.0,
                ..Sample::default()
            };
            f(j, &mut s);
            s.following_error = s.target - s.position;
            if j == n {
                // The trip row: the frame that tripped, motor off from here.
                s.state = AxisState::Tripped;
                s.duty = 0.0;
            }
            rows.push(s);
        }
        TripRecord {
            axis: "x".into(),
            facts: AxisFacts {
                unit: "mm".into(),
                counts_per_unit: CPU,
                max_duty: 100.0,
                max_velocity: 200.0,
                ff_velocity: 0.26,
                soft_limits: Some((0.0, 1000.0)),
            },
            trip: RecordedTrip::default(),
            rows,
            has_evidence: true,
        }
    }

    fn recorded(mut r: TripRecord, cause: &str) -> TripRecord {
        r.trip.cause = Some(cause.into());
        r
    }

    #[test]
    fn a_clean_move_names_nothing_and_says_what_it_cannot_see() {
        let r = record(600, 100.0, |_, _| {});
        let d = diagnose(&r);
        assert_eq!(d.cause, Cause::Undetermined, "{d:#?}");
        assert!(d.cannot_tell[0].contains("belt"), "{d:?}");
    }

    #[test]
    fn a_jam_is_duty_rising_with_no_counts() {
        // Stuck at row 400: position freezes, duty climbs.
        let r = record(600, 100.0, |j, s| {
            if j >= 400 {
                s.position = 40.0 - 0.2;
                s.count = (s.position * CPU) as i64;
                s.velocity = 0.0;
                s.duty = (30.0 + (j - 400) as f64 * 0.5).min(100.0);
            }
        });
        let d = diagnose(&recorded(r, "following error"));
        assert_eq!(d.cause, Cause::Jam, "{d:#?}");
        assert!(d.confidence >= 0.85, "{d:?}");
    }

    #[test]
    fn saturation_is_duty_at_the_limit_while_moving_and_lagging() {
        // The motor never had the profile's speed: at its limit all through the window.
        let r = record(600, 150.0, |j, s| {
            if j >= 50 {
                let lag = (j - 50) as f64 * 0.004;
                s.position -= lag;
                s.count = (s.position * CPU).round() as i64;
                s.velocity = 146.0;
                s.duty = 100.0;
                s.saturated = true;
            }
        });
        let d = diagnose(&recorded(r, "following error"));
        assert_eq!(d.cause, Cause::Saturation, "{d:#?}");
        assert!(d.cannot_tell.iter().any(|c| c.contains("supply sagged")), "{d:?}");
    }

    #[test]
    fn a_drive_that_weakens_at_cruise_is_named_before_saturation() {
        // At 150 mm/s on its usual duty, then all the duty there is for less speed.
        let r = record(600, 150.0, |j, s| {
            if j >= 450 {
                let lag = (j - 450) as f64 * 0.02;
                s.position -= lag;
                s.count = (s.position * CPU).round() as i64;
                s.velocity = 130.0;
                s.duty = 100.0;
                s.saturated = true;
            }
        });
        let d = diagnose(&recorded(r, "following error"));
        assert_eq!(d.cause, Cause::WeakerDrive, "{d:#?}");
        assert!(!d.ambiguous, "{d:#?}");
        assert!(d.others.iter().any(|o| o.cause == Cause::Saturation), "{d:?}");
    }

    #[test]
    fn gain_too_low_is_lag_growing_with_speed_with_duty_to_spare() {
        // Accelerating profile, lag proportional to speed, duty at 40 %.
        let r = record(600, 0.0, |j, s| {
            let t = j as f64 * 0.001;
            s.target_velocity = 400.0 * t;
            s.target = 200.0 * t * t;
            s.target_acceleration = 400.0;
            s.velocity = s.target_velocity * 0.95;
            s.position = s.target - 0.025 * s.target_velocity;
            s.count = (s.position * CPU).round() as i64;
            s.band = 3.0 + 0.01 * s.target_velocity;
            s.duty = 10.0 + 0.1 * s.target_velocity;
        });
        let d = diagnose(&recorded(r, "following error"));
        assert_eq!(d.cause, Cause::GainTooLow, "{d:#?}");
    }

    #[test]
    fn an_encoder_jump_is_one_impossible_frame() {
        let r = record(600, 100.0, |j, s| {
            if j >= 590 {
                s.count += 150;
                s.position += 1.5;
            }
        });
        let d = diagnose(&r);
        assert_eq!(d.cause, Cause::EncoderFault, "{d:#?}");
    }

    #[test]
    fn lost_frames_before_the_trip_are_link_trouble() {
        let r = record(600, 100.0, |j, s| {
            if j % 10 == 0 && j > 300 {
                s.missed_frames = 3;
            }
            if j == 595 {
                s.missed_frames = 30;
            }
        });
        let d = diagnose(&recorded(r, "following error"));
        assert_eq!(d.cause, Cause::LinkTrouble, "{d:#?}");
    }

    #[test]
    fn the_watchdog_bit_names_the_watchdog_and_keeps_the_gap_as_evidence() {
        let r = record(600, 100.0, |j, s| {
            if j == 590 {
                s.missed_frames = 70;
            }
            if j >= 590 {
                s.status = status::WATCHDOG_TRIPPED;
            }
        });
        let d = diagnose(&r);
        assert_eq!(d.cause, Cause::BoardWatchdog, "{d:#?}");
        assert!(d.evidence.iter().any(|e| e.contains("70 telemetry frames")), "{d:?}");
        assert!(d.others.iter().any(|o| o.cause == Cause::LinkTrouble), "{d:?}");
    }

    #[test]
    fn motion_against_the_duty_is_wiring() {
        let r = record(600, 0.0, |j, s| {
            if j >= 520 {
                let k = (j - 520) as f64;
                s.velocity = -2.0 * k;
                s.position = -0.001 * k * k;
                s.target = 1.0;
                s.count = (s.position * CPU).round() as i64;
                s.duty = 60.0;
                s.target_velocity = 0.0;
            } else {
                s.target = 0.0;
                s.position = 0.0;
                s.velocity = 0.0;
                s.count = 0;
                s.duty = 0.0;
                s.target_velocity = 0.0;
            }
        });
        let d = diagnose(&r);
        assert_eq!(d.cause, Cause::Wiring, "{d:#?}");
    }

    #[test]
    fn close_scores_are_ambiguous() {
        // A count jump in the very frame that follows ten lost ones: a glitch, or motion
        // during the gap? The record cannot say which.
        let r = record(600, 100.0, |j, s| {
            if j == 590 {
                s.missed_frames = 10;
            }
            if j >= 590 {
                s.count += 1000;
            }
        });
        let d = diagnose(&recorded(r, "following error"));
        assert!(d.ambiguous, "{d:#?}");
        let two = [d.cause, d.others[0].cause];
        assert!(two.contains(&Cause::LinkTrouble) && two.contains(&Cause::EncoderFault), "{d:#?}");
        assert!(d.to_text().contains("ambiguous"), "{}", d.to_text());
    }

    #[test]
    fn correlation_of_a_line_is_one() {
        let r = correlation([1.0, 2.0, 3.0].into_iter(), [2.0, 4.0, 6.0].into_iter());
        assert!((r - 1.0).abs() < 1e-12);
        assert!(correlation([1.0].into_iter(), [1.0].into_iter()).is_nan());
    }
}
