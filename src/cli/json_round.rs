//! Rounding of every `--json` output: numbers carry the digits their measurement has, no more
//! (`9.54`, not `9.541666666666666`; `0.0`, not `-3.55e-15`).
//!
//! What a number is comes from its key, the words the tables use: a position, error, travel
//! or velocity in the axis unit is rounded to what one encoder count resolves (the cockpit's
//! [`decimals_for`], so screen and JSON agree); durations (`…_s`) to the microsecond, `…_ms`
//! to the microsecond too, `…_us` to whole microseconds; percentages (`…_pct`, duty) to 0.01;
//! rates (`…_per_s`, `…_hz`) to 0.01; anything else (gains, model constants, `resolution`
//! itself, R²) to [`SIGNIFICANT`] significant digits, so a small gain never becomes 0. A key
//! that says nothing (`p50` inside `turnaround_us`, the items of an array) takes its parent's
//! kind. The axis is the `axis` field of the nearest enclosing object, else the command's own
//! axis; a number keyed by an axis's name (`"targets": {"x": 235.71}`) is a position of that
//! axis. Each axis's resolution comes from the configuration.
//!
//! Integers are left as they are. Written by hand: the rules are the product's own.

use std::collections::HashMap;

use serde_json::Value;

use crate::config::MachineConfig;
use crate::format::decimals_for;
use crate::process::Failure;
use crate::tuning::suggest::round_sig;

/// Significant digits kept for numbers that are not in a unit the rules know.
pub const SIGNIFICANT: i32 = 6;

/// Decimal places for positions when the axis's resolution is not known (an analysed file
/// without its sidecar): the most the cockpit ever shows.
pub const UNKNOWN_RESOLUTION_DECIMALS: usize = 4;

/// What a number measures, by its key.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    /// Axis units (or axis units per second, per second²): the axis's resolution.
    Length,
    /// Seconds: 6 decimals (µs).
    Seconds,
    /// Milliseconds: 3 decimals (µs).
    Millis,
    /// Microseconds: whole.
    Micros,
    /// Percent, and rates per second: 2 decimals.
    Hundredths,
    /// Anything else: [`SIGNIFICANT`] significant digits.
    Other,
}

/// Words of a key that make it a quantity in the axis unit.
const LENGTH_WORDS: [&str; 16] = [
    "position",
    "target",
    "final",
    "error",
    "travel",
    "moved",
    "step_from",
    "step_to",
    "band",
    "noise",
    "velocity",
    "acceleration",
    "distance",
    "soft_min",
    "soft_max",
    "rms",
];

/// Keys that are not in the axis unit although a word above is in them.
const OTHER_KEYS: [&str; 6] =
    ["resolution", "counts_per_unit", "r_squared", "gain", "ff_velocity", "ff_acceleration"];

fn kind_of(key: &str) -> Option<Kind> {
    let k = key.to_ascii_lowercase();
    if OTHER_KEYS.contains(&k.as_str()) || k.starts_with("kp") || k.starts_with("ki") {
        return Some(Kind::Other);
    }
    if k.ends_with("_us") {
        return Some(Kind::Micros);
    }
    if k.ends_with("_ms") {
        return Some(Kind::Millis);
    }
    if k.ends_with("_per_s") || k.ends_with("_hz") || k.ends_with("_pct") || k.contains("duty") {
        return Some(Kind::Hundredths);
    }
    if k.ends_with("_s") || k == "t" || k == "seconds" {
        return Some(Kind::Seconds);
    }
    if LENGTH_WORDS.iter().any(|w| k.contains(w)) {
        return Some(Kind::Length);
    }
    None
}

/// The rounding for one command's output: each axis's decimals for its unit.
#[derive(Debug, Clone, Default)]
pub struct Rounding {
    decimals: HashMap<String, usize>,
    /// The axis a number belongs to when no enclosing object names one.
    own_axis: Option<String>,
}

impl Rounding {
    /// Every axis of `cfg`, at its encoder's resolution.
    pub fn of(cfg: &MachineConfig) -> Self {
        let decimals = cfg
            .axes
            .iter()
            .map(|a| (a.name.clone(), decimals_for(a.scale.counts_per_unit)))
            .collect();
        Self { decimals, own_axis: None }
    }

    /// One axis with `counts_per_unit` counts per unit (a file's sidecar, `--resolution`), or
    /// unknown.
    pub fn single(axis: &str, counts_per_unit: Option<f64>) -> Self {
        let mut decimals = HashMap::new();
        if let Some(c) = counts_per_unit {
            decimals.insert(axis.to_owned(), decimals_for(c));
        }
        Self { decimals, own_axis: Some(axis.to_owned()) }
    }

    /// Numbers outside any object naming an axis belong to `axis` (one-axis commands).
    #[must_use]
    pub fn for_axis(mut self, axis: &str) -> Self {
        self.own_axis = Some(axis.to_owned());
        self
    }

    fn length_decimals(&self, axis: Option<&str>) -> usize {
        axis.or(self.own_axis.as_deref())
            .and_then(|a| self.decimals.get(a))
            .copied()
            .unwrap_or(UNKNOWN_RESOLUTION_DECIMALS)
    }

    /// `value` with every float rounded by the module's rules.
    pub fn apply(&self, mut value: Value) -> Value {
        self.walk(&mut value, Kind::Other, None);
        value
    }

    fn walk(&self, v: &mut Value, kind: Kind, axis: Option<&str>) {
        match v {
            Value::Object(map) => {
                let here = map.get("axis").and_then(Value::as_str).map(str::to_owned);
                let axis = here.as_deref().or(axis);
                for (k, child) in map.iter_mut() {
                    if child.is_number() && self.decimals.contains_key(k.as_str()) {
                        // `{"x": 10.0, "z": -40.0}`: a position keyed by its axis.
                        self.walk(child, Kind::Length, Some(k.as_str()));
                    } else {
                        self.walk(child, kind_of(k).unwrap_or(kind), axis);
                    }
                }
            }
            Value::Array(items) => {
                for item in items {
                    self.walk(item, kind, axis);
                }
            }
            Value::Number(n) if n.is_f64() => {
                let Some(x) = n.as_f64() else { return };
                let r = match kind {
                    Kind::Length => round_to(x, self.length_decimals(axis)),
                    Kind::Seconds => round_to(x, 6),
                    Kind::Millis => round_to(x, 3),
                    Kind::Micros => round_to(x, 0),
                    Kind::Hundredths => round_to(x, 2),
                    Kind::Other => round_sig(x, SIGNIFICANT),
                };
                // `+ 0.0` turns a negative zero into zero.
                if let Some(num) = serde_json::Number::from_f64(r + 0.0) {
                    *n = num;
                }
            }
            _ => {}
        }
    }
}

/// Writes `value` as one line of JSON on stdout, rounded by `rounding`.
///
/// # Errors
/// [`Failure::Output`], or [`Failure::Machine`] for a value serde cannot represent.
pub fn emit_json(value: &impl serde::Serialize, rounding: &Rounding) -> Result<(), Failure> {
    let v = serde_json::to_value(value).map_err(|e| Failure::Machine(e.to_string()))?;
    crate::process::emit_json(&rounding.apply(v))
}

/// `value` rounded by `rounding`, as one line of text (for commands that build their output
/// as a string first).
pub fn json_line(value: Value, rounding: &Rounding) -> String {
    format!("{}\n", rounding.apply(value))
}

/// `x` to `d` decimal places.
fn round_to(x: f64, d: usize) -> f64 {
    let scale = 10f64.powi(i32::try_from(d).unwrap_or(6));
    let r = (x * scale).round() / scale;
    if r.is_finite() {
        r
    } else {
        x
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn rounding() -> Rounding {
        let mut r = Rounding::default();
        r.decimals.insert("x".into(), 2); // 24 counts/mm: one count 0.0417 mm
        r.decimals.insert("z".into(), 3);
        r
    }

    #[test]
    fn numbers_keep_the_digits_of_their_unit() {
        let v = rounding().apply(json!({
            "axes": [
                {"axis": "x", "position": 235.708_333_333_333_31, "max_following_error": -0.0001,
                 "settle_s": 0.123_456_789, "trip": null},
                {"axis": "z", "final_position": -0.004_166_666_666_666_874},
            ],
            "cpu_pct": 7.994_684_078_726_164,
            "turnaround_us": {"p50": 5, "max": 23.4},
            "frames_per_s": 998.336_174_330_929_7,
            "longest_reply_gap_ms": 1.234_567,
            "kp": 0.000_123_456_789,
            "resolution": 0.041_666_666_666_666_664,
            "targets": {"x": 235.708_333, "z": -40.000_4},
        }));
        assert_eq!(v["targets"]["x"], 235.71);
        assert_eq!(v["targets"]["z"], -40.0);
        assert_eq!(v["axes"][0]["position"], 235.71);
        assert_eq!(v["axes"][0]["max_following_error"].to_string(), "0.0");
        assert_eq!(v["axes"][0]["settle_s"], 0.123_457);
        assert_eq!(v["axes"][1]["final_position"], -0.004);
        assert_eq!(v["cpu_pct"], 7.99);
        assert_eq!(v["turnaround_us"]["p50"], 5);
        assert_eq!(v["turnaround_us"]["max"], 23.0);
        assert_eq!(v["frames_per_s"], 998.34);
        assert_eq!(v["longest_reply_gap_ms"], 1.235);
        assert_eq!(v["kp"], 0.000_123_457);
        assert_eq!(v["resolution"], 0.041_666_7);
    }

    #[test]
    fn an_unnamed_axis_is_the_commands_own_or_unknown() {
        let v = Rounding::single("x", Some(24.0)).apply(json!({"step_to": 5.041_666_666_666_664}));
        assert_eq!(v["step_to"], 5.04);
        let v = Rounding::default().apply(json!({"step_to": 5.041_666_666_666_664}));
        assert_eq!(v["step_to"], 5.0417);
    }
}
