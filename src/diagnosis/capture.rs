//! Reading a trip capture back: the `#` metadata lines and the rows of one axis, into the
//! same [`Sample`] rows the history ring holds, so a diagnosis runs the same way over a file
//! and over the in-memory history.
//!
//! The reader is lenient about layout so that captures written before the evidence columns
//! existed still read (missing columns read as zero, and the rules that need them stay
//! silent), and so that column names may carry a unit suffix (`position_mm` for `position`):
//! a header matches a wanted name exactly, or as the name followed by `_` and a suffix that
//! is not the rest of another column's name (`target_velocity` is never `target`).

use std::collections::BTreeMap;

use crate::engine::history::Sample;
use crate::engine::snapshot::AxisState;

/// The trip as the capture's metadata records it.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct RecordedTrip {
    /// Axis that tripped.
    pub axis: Option<String>,
    /// The supervisor's cause, in its words ("following error", "stall", …).
    pub cause: Option<String>,
    /// Board time of the trip, s.
    pub at_s: Option<f64>,
    /// The supervisor's sentence.
    pub detail: Option<String>,
}

/// What the diagnosis needs to know about one axis's configuration.
#[derive(Debug, Clone, PartialEq)]
pub struct AxisFacts {
    /// Unit name.
    pub unit: String,
    /// Encoder counts per unit (0 when unknown; estimated from the rows then).
    pub counts_per_unit: f64,
    /// Duty limit, %.
    pub max_duty: f64,
    /// Profile speed limit, unit/s (0 when unknown).
    pub max_velocity: f64,
    /// Feedforward velocity gain, %/(unit/s) (0 when unknown or off).
    pub ff_velocity: f64,
    /// Soft travel limits, units (None when unknown).
    pub soft_limits: Option<(f64, f64)>,
}

impl Default for AxisFacts {
    fn default() -> Self {
        Self {
            unit: "unit".into(),
            counts_per_unit: 0.0,
            max_duty: 100.0,
            max_velocity: 0.0,
            ff_velocity: 0.0,
            soft_limits: None,
        }
    }
}

impl AxisFacts {
    /// The facts from an axis's configuration.
    pub fn of(a: &crate::config::AxisConfig) -> Self {
        Self {
            unit: a.scale.unit.clone(),
            counts_per_unit: a.scale.counts_per_unit,
            max_duty: a.controller.max_duty,
            max_velocity: a.motion.max_velocity,
            ff_velocity: a.controller.ff_velocity,
            soft_limits: Some((a.limits.soft_min, a.limits.soft_max)),
        }
    }
}

/// One axis's record ready for diagnosis.
#[derive(Debug, Clone, PartialEq)]
pub struct TripRecord {
    /// Axis name.
    pub axis: String,
    /// Its configuration facts.
    pub facts: AxisFacts,
    /// The recorded trip (the capture's, if this is the tripped axis).
    pub trip: RecordedTrip,
    /// Rows, oldest first.
    pub rows: Vec<Sample>,
    /// Whether the record has the evidence columns (count, status, missed frames…).
    pub has_evidence: bool,
}

impl TripRecord {
    /// A record from the in-memory history of an axis (the cockpit's trip screen, tests).
    pub fn from_history(
        cfg: &crate::config::AxisConfig,
        rows: Vec<Sample>,
        trip: Option<&crate::engine::snapshot::Trip>,
    ) -> Self {
        Self {
            axis: cfg.name.clone(),
            facts: AxisFacts::of(cfg),
            trip: trip.map_or_else(RecordedTrip::default, |t| RecordedTrip {
                axis: Some(cfg.name.clone()),
                cause: Some(t.cause.words().to_owned()),
                at_s: Some(t.at_s),
                detail: Some(t.detail.clone()),
            }),
            rows,
            has_evidence: true,
        }
    }
}

/// A capture file read back.
#[derive(Debug, Clone, PartialEq)]
pub struct CaptureFile {
    /// The trip recorded in the metadata.
    pub trip: RecordedTrip,
    /// Facts per axis from the `# axis` lines.
    pub facts: BTreeMap<String, AxisFacts>,
    /// Rows per axis, in file order.
    pub rows: BTreeMap<String, Vec<Sample>>,
    /// Whether the header had the evidence columns.
    pub has_evidence: bool,
}

/// A problem reading a capture, with its 1-based line.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("line {line}: {message}")]
pub struct CaptureError {
    /// Line in the file.
    pub line: usize,
    /// What is wrong.
    pub message: String,
}

impl CaptureFile {
    /// Parses a capture's text.
    ///
    /// # Errors
    /// No header, a header without `t` and `position`, a row with a wrong field count or a
    /// field that is not a number, or no rows.
    pub fn parse(text: &str) -> Result<Self, CaptureError> {
        let mut trip = RecordedTrip::default();
        let mut facts = BTreeMap::new();
        let mut header: Option<(usize, Vec<String>)> = None;
        let mut rows: BTreeMap<String, Vec<Sample>> = BTreeMap::new();
        let mut cols = Columns::default();
        // A capture with one row per instant and every axis's columns (`x_position_mm`):
        // each axis's columns, found in the shared header.
        let mut wide: Vec<(String, Columns)> = Vec::new();
        for (i, raw) in text.lines().enumerate() {
            let line = i + 1;
            let l = raw.trim_end_matches('\r');
            if l.trim().is_empty() {
                continue;
            }
            if let Some(meta) = l.strip_prefix('#') {
                read_meta(meta.trim(), &mut trip, &mut facts);
                continue;
            }
            let fields: Vec<&str> = l.split(',').map(|f| f.trim().trim_matches('"')).collect();
            let Some((_, names)) = &header else {
                let names: Vec<String> = fields.iter().map(|f| f.to_ascii_lowercase()).collect();
                wide = wide_axes(&names)
                    .into_iter()
                    .map(|a| {
                        let own = own_columns(&names, &a);
                        Columns::find(&own).map(|c| (a, c))
                    })
                    .collect::<Result<_, _>>()
                    .map_err(|message| CaptureError { line, message })?;
                if wide.is_empty() {
                    cols =
                        Columns::find(&names).map_err(|message| CaptureError { line, message })?;
                } else {
                    cols.evidence = wide.iter().all(|(_, c)| c.evidence);
                }
                header = Some((line, names));
                continue;
            };
            if fields.len() != names.len() {
                return Err(CaptureError {
                    line,
                    message: format!("{} fields, the header has {}", fields.len(), names.len()),
                });
            }
            if wide.is_empty() {
                let (axis, sample) =
                    cols.row(&fields).map_err(|message| CaptureError { line, message })?;
                rows.entry(axis).or_default().push(sample);
            }
            for (axis, c) in &wide {
                // An axis with a shorter history has empty fields in the oldest rows.
                if fields[c.position].is_empty() {
                    continue;
                }
                let (_, sample) =
                    c.row(&fields).map_err(|message| CaptureError { line, message })?;
                rows.entry(axis.clone()).or_default().push(sample);
            }
        }
        let Some((hline, _)) = header else {
            return Err(CaptureError { line: 1, message: "no header row".into() });
        };
        if rows.is_empty() {
            return Err(CaptureError { line: hline, message: "no rows after the header".into() });
        }
        Ok(Self { trip, facts, rows, has_evidence: cols.evidence })
    }

    /// Reads a capture file and, when there is one, its metadata sidecar (the same name with
    /// `.json`: the trip and each axis's configuration).
    ///
    /// # Errors
    /// A sentence naming the file (and line) that cannot be read.
    pub fn read(path: &std::path::Path) -> Result<Self, String> {
        let name = path.display();
        let text =
            std::fs::read_to_string(path).map_err(|e| format!("{name}: cannot read: {e}"))?;
        Self::parse(&text)
            .map_err(|e| format!("{name}:{}: {}", e.line, e.message))?
            .with_sidecar(path)
    }

    /// Adds what the sidecar of the capture at `path` says, if it has one.
    ///
    /// # Errors
    /// A sidecar that is not JSON.
    pub fn with_sidecar(mut self, path: &std::path::Path) -> Result<Self, String> {
        let side = path.with_extension("json");
        if let Ok(meta) = std::fs::read_to_string(&side) {
            let v: serde_json::Value = serde_json::from_str(&meta)
                .map_err(|e| format!("{}: not JSON: {e}", side.display()))?;
            self.read_sidecar(&v);
        }
        Ok(self)
    }

    /// Takes the trip and the axes' facts from a capture's sidecar.
    pub fn read_sidecar(&mut self, v: &serde_json::Value) {
        let t = &v["trip"];
        let text = |x: &serde_json::Value| x.as_str().map(str::to_owned);
        self.trip.axis = text(&t["axis"]).or(self.trip.axis.take());
        self.trip.cause = text(&t["cause"]).or(self.trip.cause.take());
        self.trip.at_s = t["board_time_s"].as_f64().or(self.trip.at_s);
        self.trip.detail = text(&t["detail"]).or(self.trip.detail.take());
        // The file's time is seconds from the trip; the rules read board time, as the
        // history holds it.
        let from_trip =
            v["time_base"].as_str().is_some_and(|b| b.starts_with("t_s: seconds from the trip"));
        if let (true, Some(at)) = (from_trip, t["board_time_s"].as_f64()) {
            for rows in self.rows.values_mut() {
                for r in rows.iter_mut() {
                    r.t += at;
                }
            }
        }
        for a in v["axes"].as_array().into_iter().flatten() {
            let Some(name) = a["axis"].as_str() else { continue };
            let num =
                |x: &serde_json::Value, d: f64| x.as_f64().filter(|v| v.is_finite()).unwrap_or(d);
            let f = AxisFacts {
                unit: a["unit"].as_str().unwrap_or("unit").to_owned(),
                counts_per_unit: num(&a["counts_per_unit"], 0.0),
                max_duty: num(&a["controller"]["max_duty"], 100.0),
                max_velocity: num(&a["max_velocity"], 0.0),
                ff_velocity: num(&a["controller"]["ff_velocity"], 0.0),
                soft_limits: a["soft_min"].as_f64().zip(a["soft_max"].as_f64()),
            };
            self.facts.insert(name.to_owned(), f);
        }
    }

    /// Axes whose record ends in the tripped state.
    fn tripped_axes(&self) -> Vec<&str> {
        self.rows
            .iter()
            .filter(|(_, r)| r.last().is_some_and(|s| s.state == AxisState::Tripped))
            .map(|(a, _)| a.as_str())
            .collect()
    }

    /// The axes with rows, in name order.
    pub fn axes(&self) -> Vec<&str> {
        self.rows.keys().map(String::as_str).collect()
    }

    /// One axis's record: `axis`, or the tripped axis, or the only axis.
    ///
    /// # Errors
    /// A sentence naming the axes there are when the choice is unclear or `axis` is absent.
    pub fn record(&self, axis: Option<&str>) -> Result<TripRecord, String> {
        let names = self.axes().join(", ");
        let pick = match axis {
            Some(a) => a.to_owned(),
            None => match (&self.trip.axis, self.rows.len()) {
                (Some(a), _) if self.rows.contains_key(a) => a.clone(),
                (_, 1) => self.axes()[0].to_owned(),
                // No metadata: the axis whose record ends tripped, if only one does.
                _ if self.tripped_axes().len() == 1 => self.tripped_axes()[0].to_owned(),
                _ => {
                    return Err(format!(
                        "the capture holds several axes ({names}) and does not name the tripped \
                         one: give --axis"
                    ))
                }
            },
        };
        let Some(rows) = self.rows.get(&pick) else {
            return Err(format!("no axis {pick:?} in the capture (it has {names})"));
        };
        let tripped_here = self.trip.axis.as_deref().is_none_or(|a| a == pick);
        Ok(TripRecord {
            axis: pick.clone(),
            facts: self.facts.get(&pick).cloned().unwrap_or_default(),
            trip: if tripped_here { self.trip.clone() } else { RecordedTrip::default() },
            rows: rows.clone(),
            has_evidence: self.has_evidence,
        })
    }
}

fn read_meta(m: &str, trip: &mut RecordedTrip, facts: &mut BTreeMap<String, AxisFacts>) {
    if let Some(v) = m.strip_prefix("trip axis:") {
        trip.axis = Some(v.trim().to_owned());
    } else if let Some(v) = m.strip_prefix("trip cause:") {
        trip.cause = Some(v.trim().to_owned());
    } else if let Some(v) = m.strip_prefix("trip board time s:") {
        trip.at_s = v.trim().parse().ok();
    } else if let Some(v) = m.strip_prefix("trip detail:") {
        trip.detail = Some(v.trim().to_owned());
    } else if let Some(rest) = m.strip_prefix("axis ") {
        let Some((name, kv)) = rest.split_once(':') else { return };
        let mut f = AxisFacts::default();
        let mut soft = (None, None);
        for pair in kv.split_whitespace() {
            let Some((k, v)) = pair.split_once('=') else { continue };
            let num = v.parse::<f64>().ok().filter(|x| x.is_finite());
            match (k, num) {
                ("unit", _) => f.unit = v.to_owned(),
                ("counts_per_unit", Some(x)) => f.counts_per_unit = x,
                ("max_duty", Some(x)) => f.max_duty = x,
                ("max_velocity", Some(x)) => f.max_velocity = x,
                ("ff_velocity", Some(x)) => f.ff_velocity = x,
                ("soft_min", Some(x)) => soft.0 = Some(x),
                ("soft_max", Some(x)) => soft.1 = Some(x),
                _ => {}
            }
        }
        if let (Some(lo), Some(hi)) = soft {
            f.soft_limits = Some((lo, hi));
        }
        facts.insert(name.trim().to_owned(), f);
    }
}

/// The axes of a capture with one row per instant: every `AXIS_position…` column names one.
fn wide_axes(names: &[String]) -> Vec<String> {
    if names.iter().any(|n| n == "axis") {
        return Vec::new();
    }
    names
        .iter()
        .filter_map(|n| {
            let (axis, rest) = n.split_once("_position")?;
            (rest.is_empty() || rest.starts_with('_')).then(|| axis.to_owned())
        })
        .filter(|a| !a.is_empty())
        .collect()
}

/// The header as `axis` sees it: its own columns without the prefix, the shared time, and
/// blanks for every other axis's columns (so positions still match the rows).
fn own_columns(names: &[String], axis: &str) -> Vec<String> {
    let prefix = format!("{axis}_");
    names
        .iter()
        .map(|n| {
            if n == "t_s" || n == "t" {
                n.clone()
            } else {
                n.strip_prefix(&prefix)
                    .filter(|rest| rest.split('_').next().is_some_and(|w| !w.is_empty()))
                    .map(str::to_owned)
                    .unwrap_or_default()
            }
        })
        .collect()
}

/// Column positions in the header.
#[derive(Debug, Default, Clone)]
struct Columns {
    axis: Option<usize>,
    t: usize,
    target: Option<usize>,
    position: usize,
    following_error: Option<usize>,
    duty: Option<usize>,
    velocity: Option<usize>,
    state: Option<usize>,
    count: Option<usize>,
    board_time_us: Option<usize>,
    missed_frames: Option<usize>,
    status: Option<usize>,
    inputs: Option<usize>,
    target_velocity: Option<usize>,
    target_acceleration: Option<usize>,
    band: Option<usize>,
    p: Option<usize>,
    i: Option<usize>,
    d: Option<usize>,
    ff: Option<usize>,
    saturated: Option<usize>,
    evidence: bool,
}

/// Every column name the capture uses, for telling a unit suffix from a longer name.
const KNOWN: [&str; 21] = crate::engine::recorder::CAPTURE_NAMES;

fn find(names: &[String], want: &str) -> Option<usize> {
    if let Some(i) = names.iter().position(|n| n == want) {
        return Some(i);
    }
    names.iter().position(|n| {
        n.strip_prefix(want).and_then(|r| r.strip_prefix('_')).is_some_and(|suffix| {
            // `target_velocity_mm_s` is not a `target` column with a unit.
            !KNOWN.iter().any(|k| {
                k.len() > want.len()
                    && k.starts_with(want)
                    && (suffix == &k[want.len() + 1..]
                        || suffix.starts_with(&format!("{}_", &k[want.len() + 1..])))
            })
        })
    })
}

impl Columns {
    fn find(names: &[String]) -> Result<Self, String> {
        let need = |w: &str| {
            find(names, w).ok_or_else(|| {
                format!("missing column {w:?} (the header has: {})", names.join(","))
            })
        };
        let count = find(names, "count");
        let status = find(names, "status");
        Ok(Self {
            axis: find(names, "axis"),
            t: need("t")?,
            target: find(names, "target"),
            position: need("position")?,
            following_error: find(names, "following_error"),
            duty: find(names, "duty"),
            velocity: find(names, "velocity"),
            state: find(names, "state"),
            count,
            board_time_us: find(names, "board_time_us"),
            missed_frames: find(names, "missed_frames"),
            status,
            inputs: find(names, "inputs"),
            target_velocity: find(names, "target_velocity"),
            target_acceleration: find(names, "target_acceleration"),
            band: find(names, "band"),
            p: find(names, "p"),
            i: find(names, "i"),
            d: find(names, "d"),
            ff: find(names, "ff"),
            saturated: find(names, "saturated"),
            evidence: count.is_some() && status.is_some(),
        })
    }

    fn row(&self, f: &[&str]) -> Result<(String, Sample), String> {
        let num = |i: Option<usize>| -> Result<f64, String> {
            let Some(i) = i else { return Ok(0.0) };
            match f[i].parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                _ => Err(format!("field {} ({:?}) is not a finite number", i + 1, f[i])),
            }
        };
        let int = |i: Option<usize>| -> Result<i64, String> {
            let Some(i) = i else { return Ok(0) };
            f[i].parse::<i64>()
                .map_err(|_| format!("field {} ({:?}) is not a whole number", i + 1, f[i]))
        };
        // A state word this version does not know (renamed since the file was written)
        // reads as motor on and standing: only `tripped` and the motion states steer the
        // rules, and those are kept.
        let state = match self.state {
            Some(i) if f[i].is_empty() => return Err(format!("field {} (state) is empty", i + 1)),
            Some(i) => state_of(f[i]).unwrap_or(AxisState::Steady),
            None => AxisState::Moving,
        };
        let target = num(self.target)?;
        let position = num(Some(self.position))?;
        let s = Sample {
            t: num(Some(self.t))?,
            target,
            position,
            following_error: if self.following_error.is_some() {
                num(self.following_error)?
            } else {
                target - position
            },
            duty: num(self.duty)?,
            velocity: num(self.velocity)?,
            state,
            count: int(self.count)?,
            board_time_us: u32::try_from(int(self.board_time_us)?).unwrap_or(0),
            missed_frames: u32::try_from(int(self.missed_frames)?).unwrap_or(0),
            status: u8::try_from(int(self.status)?).unwrap_or(0),
            inputs: u8::try_from(int(self.inputs)?).unwrap_or(0),
            target_velocity: num(self.target_velocity)?,
            target_acceleration: num(self.target_acceleration)?,
            band: num(self.band)?,
            p: num(self.p)?,
            i: num(self.i)?,
            d: num(self.d)?,
            ff: num(self.ff)?,
            saturated: int(self.saturated)? != 0,
        };
        let axis = self.axis.map_or_else(|| "axis".to_owned(), |i| f[i].to_owned());
        Ok((axis, s))
    }
}

/// The state for its screen word. `testing` is the word older captures used for a trial.
pub fn state_of(word: &str) -> Option<AxisState> {
    use AxisState::*;
    if word == "testing" {
        return Some(Trialing);
    }
    [Offline, Disabled, Steady, Moving, Jogging, Homing, Trialing, Stopping, Stopped, Tripped]
        .into_iter()
        .find(|s| s.word() == word)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unit_suffixes_match_but_longer_names_do_not() {
        let names: Vec<String> =
            ["t_s", "target_mm", "target_velocity_mm_s", "position_mm", "duty_pct"]
                .iter()
                .map(|s| (*s).to_owned())
                .collect();
        assert_eq!(find(&names, "target"), Some(1));
        assert_eq!(find(&names, "target_velocity"), Some(2));
        assert_eq!(find(&names, "t"), Some(0));
        assert_eq!(find(&names, "duty"), Some(4));
        assert_eq!(find(&names, "target_acceleration"), None);
    }

    #[test]
    fn every_state_word_reads_back_and_the_old_trial_word_too() {
        use AxisState::*;
        for s in [Offline, Disabled, Steady, Moving, Jogging, Homing, Trialing, Stopping] {
            assert_eq!(state_of(s.word()), Some(s));
        }
        assert_eq!(state_of("testing"), Some(Trialing), "captures written before the rename");
    }

    #[test]
    fn an_old_capture_without_evidence_reads() {
        let text = "# trip axis: x\n# trip cause: stall\naxis,t,target,position,following_error,duty,velocity,state\n\
                    x,0.001,1,0.5,0.5,40,0,moving\nx,0.002,1,0.5,0.5,0,0,tripped\n";
        let c = CaptureFile::parse(text).expect("reads");
        assert!(!c.has_evidence);
        let r = c.record(None).expect("x");
        assert_eq!(r.rows.len(), 2);
        assert_eq!(r.trip.cause.as_deref(), Some("stall"));
    }

    #[test]
    fn bad_rows_name_their_line() {
        let text = "axis,t,position\nx,0.1,2\nx,zz,3\n";
        let e = CaptureFile::parse(text).expect_err("bad");
        assert_eq!(e.line, 3);
        let e = CaptureFile::parse("axis,t,position\nx,0.1\n").expect_err("short");
        assert_eq!(e.line, 2);
        let e = CaptureFile::parse("# only\n").expect_err("empty");
        assert!(e.message.contains("header"));
    }

    #[test]
    fn a_state_word_from_another_version_still_reads() {
        let text = "axis,t,position,state\nx,0.1,2,holding\nx,0.2,2,tripped\n";
        let r = CaptureFile::parse(text).expect("reads").record(None).expect("x");
        assert_eq!(r.rows[0].state, AxisState::Steady);
        assert_eq!(r.rows[1].state, AxisState::Tripped);
        assert!(CaptureFile::parse("axis,t,position,state\nx,0.1,2,\n").is_err());
    }

    #[test]
    fn several_axes_need_a_choice() {
        let text = "axis,t,position\nx,0.1,2\ny,0.1,3\n";
        let c = CaptureFile::parse(text).expect("reads");
        assert!(c.record(None).expect_err("ambiguous").contains("--axis"));
        assert_eq!(c.record(Some("y")).expect("y").rows[0].position, 3.0);
        assert!(c.record(Some("z")).expect_err("absent").contains("x, y"));
    }
}
