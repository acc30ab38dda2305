//! The controller parameters, one row each: the `[axis.controller]` key, a label, the unit
//! (in terms of the axis unit), the controller modes that use it, how to read and write it
//! on a [`ControllerConfig`], the range a configuration must keep it in, and how a computed
//! value is rounded before a person reads it or a file stores it.
//!
//! Every place that walks the parameters uses this table: the cockpit's gain editor (which
//! ones to offer, their units), the configuration writer (which values to carry into the
//! file), the tuning suggestions (their `key = value` lines and the rounding of applied
//! values), the trip capture's JSON sidecar (the gains in force) and the configuration check
//! (the ranges). **Adding a parameter is one row in [`ALL`]** (after adding the field to
//! `ControllerConfig`); a unit test fails if a numeric field of the controller configuration
//! has no row.
//!
//! Written by hand: the table is the product's own vocabulary.

use std::fmt;

use crate::config::{AntiWindup, ControlMode, ControllerConfig};

/// A parameter's unit, spelled with the axis unit `u` when shown.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// Duty, %.
    Percent,
    /// %/u (a proportional gain).
    PercentPerUnit,
    /// %/(u·s) (an integral gain).
    PercentPerUnitSecond,
    /// %·s/u (a derivative gain, a velocity feedforward).
    PercentSecondPerUnit,
    /// %·s²/u (an acceleration feedforward).
    PercentSecondSquaredPerUnit,
    /// s.
    Seconds,
    /// The axis unit itself.
    AxisUnit,
}

impl Unit {
    /// The unit in words for an axis measured in `u` (e.g. `%/mm`).
    pub fn text(self, u: &str) -> String {
        match self {
            Self::Percent => "%".to_owned(),
            Self::PercentPerUnit => format!("%/{u}"),
            Self::PercentPerUnitSecond => format!("%/({u}·s)"),
            Self::PercentSecondPerUnit => format!("%·s/{u}"),
            Self::PercentSecondSquaredPerUnit => format!("%·s²/{u}"),
            Self::Seconds => "s".to_owned(),
            Self::AxisUnit => u.to_owned(),
        }
    }
}

/// The values a configuration may hold.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Range {
    /// A finite number > 0.
    Positive,
    /// A finite number ≥ 0.
    NonNegative,
    /// A duty, 0…100 %.
    Percent,
    /// A duty that must also be > 0 (an output limit).
    PositivePercent,
    /// A duty of either sign, −100…100 % (a static feedforward: negative where the minimum
    /// duty already pays more than sliding friction).
    SignedPercent,
}

impl Range {
    /// Why `v` is outside the range, in the configuration check's words.
    pub fn problem(self, v: f64) -> Option<String> {
        let positive = v.is_finite() && v > 0.0;
        let percent = v.is_finite() && (0.0..=100.0).contains(&v);
        match self {
            Self::Positive | Self::PositivePercent if !positive => {
                Some(format!("expected a number > 0, found {v}"))
            }
            Self::NonNegative if !(v.is_finite() && v >= 0.0) => {
                Some(format!("expected a number ≥ 0, found {v}"))
            }
            Self::Percent | Self::PositivePercent if !percent => {
                Some(format!("expected 0…100 %, found {v}"))
            }
            Self::SignedPercent if !(v.is_finite() && (-100.0..=100.0).contains(&v)) => {
                Some(format!("expected −100…100 %, found {v}"))
            }
            _ => None,
        }
    }
}

/// How a computed value (a suggestion) is rounded before it is shown, applied or saved.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Rounding {
    /// To this many significant digits.
    Significant(i32),
    /// To a multiple of this step.
    Step(f64),
}

/// Duty on the wire is in steps of 0.01 % (±10 000 = ±100.00 %, docs/protocol.md): finer
/// duty values cannot reach the board.
const DUTY_STEP: f64 = 0.01;

impl Rounding {
    /// `v` rounded. Non-finite values and zero come back unchanged.
    pub fn apply(self, v: f64) -> f64 {
        if v == 0.0 || !v.is_finite() {
            return v;
        }
        match self {
            Self::Significant(digits) => {
                let scale = 10f64.powi(digits - 1 - v.abs().log10().floor() as i32);
                (v * scale).round() / scale
            }
            // Divide by the step's inverse, not multiply by the step: 8.46 stays 8.46, not
            // 8.459999….
            Self::Step(step) => (v / step).round() / (1.0 / step),
        }
    }
}

/// One controller parameter (a row of [`ALL`]).
#[derive(Clone, Copy)]
pub struct Param {
    /// The key under `[axis.controller]`.
    pub key: &'static str,
    /// What it is, in a few words.
    pub label: &'static str,
    /// Its unit.
    pub unit: Unit,
    /// The controller modes that use it.
    pub modes: &'static [ControlMode],
    /// Used only with this anti-windup method (None: with any).
    pub anti_windup: Option<AntiWindup>,
    /// The values a configuration may hold.
    pub range: Range,
    /// Whether the range is checked only where the mode uses the value (otherwise always).
    pub checked_only_when_used: bool,
    /// How a computed value is rounded.
    pub rounding: Rounding,
    get: fn(&ControllerConfig) -> f64,
    set: fn(&mut ControllerConfig, f64),
    /// For a key the file may leave out: what the file holds (None: absent, and `get` gives
    /// the value in force instead).
    stored: Option<fn(&ControllerConfig) -> Option<f64>>,
}

impl Param {
    /// The configuration key under `[axis.controller]`.
    pub fn key(self) -> &'static str {
        self.key
    }

    /// The unit for an axis measured in `u`.
    pub fn unit(self, u: &str) -> String {
        self.unit.text(u)
    }

    /// Its value in force in `c` (for a key left out, the value that stands in for it).
    pub fn get(self, c: &ControllerConfig) -> f64 {
        (self.get)(c)
    }

    /// Its value as the file holds it: None when the key is left out (only for a key that
    /// may be, like `ff_static_reverse`).
    pub fn stored(self, c: &ControllerConfig) -> Option<f64> {
        self.stored.map_or_else(|| Some(self.get(c)), |f| f(c))
    }

    /// Sets its value in `c`.
    pub fn set(self, c: &mut ControllerConfig, v: f64) {
        (self.set)(c, v);
    }

    /// Whether the controller `c` uses this parameter (its mode, and its anti-windup method
    /// where that matters).
    pub fn used_by(self, c: &ControllerConfig) -> bool {
        self.modes.contains(&c.mode) && self.anti_windup.is_none_or(|w| w == c.anti_windup)
    }

    /// `v` rounded as this parameter's computed values are.
    pub fn round(self, v: f64) -> f64 {
        self.rounding.apply(v)
    }

    /// Why `c`'s value of this parameter would be refused by the configuration check.
    pub fn problem(self, c: &ControllerConfig) -> Option<String> {
        if self.checked_only_when_used && !self.used_by(c) {
            return None;
        }
        self.range.problem(self.stored(c)?)
    }
}

impl PartialEq for Param {
    fn eq(&self, other: &Self) -> bool {
        self.key == other.key
    }
}

impl Eq for Param {}

impl fmt::Debug for Param {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Param({})", self.key)
    }
}

use ControlMode::{OnOff, Pid, Proportional as P};

const GAIN: Rounding = Rounding::Significant(4);
const DUTY: Rounding = Rounding::Step(DUTY_STEP);

/// A row: used with any anti-windup method, range checked in every mode.
#[allow(clippy::too_many_arguments)]
const fn row(
    key: &'static str,
    label: &'static str,
    unit: Unit,
    modes: &'static [ControlMode],
    range: Range,
    rounding: Rounding,
    get: fn(&ControllerConfig) -> f64,
    set: fn(&mut ControllerConfig, f64),
) -> Param {
    Param {
        key,
        label,
        unit,
        modes,
        anti_windup: None,
        range,
        checked_only_when_used: false,
        rounding,
        get,
        set,
        stored: None,
    }
}

impl Param {
    /// The same row, used only with anti-windup method `w`.
    const fn only_with(self, w: AntiWindup) -> Self {
        Self { anti_windup: Some(w), ..self }
    }

    /// The same row for a key the file may leave out; `stored` reads it as written.
    const fn optional(self, stored: fn(&ControllerConfig) -> Option<f64>) -> Self {
        Self { stored: Some(stored), ..self }
    }

    /// The same row, its range checked only where the mode uses it.
    const fn checked_only_when_used(self) -> Self {
        Self { checked_only_when_used: true, ..self }
    }
}

/// Every controller parameter, in the order screens list them. Columns: key, label, unit,
/// the modes that use it, range, rounding, then how to read and write it.
#[rustfmt::skip]
pub const ALL: &[Param] = &[
    row("kp", "proportional gain", Unit::PercentPerUnit, &[P, Pid],
        Range::NonNegative, GAIN, |c| c.kp, |c, v| c.kp = v),
    row("ki", "integral gain", Unit::PercentPerUnitSecond, &[Pid],
        Range::NonNegative, GAIN, |c| c.ki, |c, v| c.ki = v),
    row("kd", "derivative gain", Unit::PercentSecondPerUnit, &[Pid],
        Range::NonNegative, GAIN, |c| c.kd, |c, v| c.kd = v),
    row("derivative_filter_s", "derivative filter time", Unit::Seconds, &[Pid],
        Range::Positive, GAIN, |c| c.derivative_filter_s, |c, v| c.derivative_filter_s = v),
    row("integral_limit", "integral term limit", Unit::Percent, &[Pid],
        Range::Percent, DUTY, |c| c.integral_limit, |c, v| c.integral_limit = v),
    row("tracking_time_s", "anti-windup tracking time", Unit::Seconds, &[Pid],
        Range::Positive, GAIN, |c| c.tracking_time_s, |c, v| c.tracking_time_s = v)
        .only_with(AntiWindup::BackCalculation),
    row("min_duty_forward", "breakaway duty forwards", Unit::Percent, &[P, Pid],
        Range::Percent, DUTY, |c| c.min_duty_forward, |c, v| c.min_duty_forward = v),
    row("min_duty_reverse", "breakaway duty in reverse", Unit::Percent, &[P, Pid],
        Range::Percent, DUTY, |c| c.min_duty_reverse, |c, v| c.min_duty_reverse = v),
    row("max_duty", "output limit", Unit::Percent, &[OnOff, P, Pid],
        Range::PositivePercent, DUTY, |c| c.max_duty, |c, v| c.max_duty = v),
    row("ff_velocity", "velocity feedforward", Unit::PercentSecondPerUnit, &[Pid],
        Range::NonNegative, GAIN, |c| c.ff_velocity, |c, v| c.ff_velocity = v),
    row("ff_acceleration", "acceleration feedforward", Unit::PercentSecondSquaredPerUnit, &[Pid],
        Range::NonNegative, GAIN, |c| c.ff_acceleration, |c, v| c.ff_acceleration = v),
    row("ff_static", "static friction feedforward", Unit::Percent, &[Pid],
        Range::SignedPercent, DUTY, |c| c.ff_static, |c, v| c.ff_static = v),
    row("ff_static_reverse", "static friction feedforward in reverse", Unit::Percent, &[Pid],
        Range::SignedPercent, DUTY, |c| c.ff_static_reverse.unwrap_or(c.ff_static),
        |c, v| c.ff_static_reverse = Some(v))
        .optional(|c| c.ff_static_reverse),
    row("on_off_duty", "on-off duty", Unit::Percent, &[OnOff],
        Range::Percent, DUTY, |c| c.on_off_duty, |c, v| c.on_off_duty = v),
    row("tolerance", "on-off tolerance band", Unit::AxisUnit, &[OnOff],
        Range::Positive, GAIN, |c| c.tolerance, |c, v| c.tolerance = v)
        .checked_only_when_used(),
];

/// The parameter with configuration key `key`.
pub fn find(key: &str) -> Option<Param> {
    ALL.iter().copied().find(|p| p.key == key)
}

/// The parameters controller `c` uses, in screen order.
pub fn used_by(c: &ControllerConfig) -> Vec<Param> {
    ALL.iter().copied().filter(|p| p.used_by(c)).collect()
}

/// The controller's mode and every parameter as a JSON object keyed like the file (null for
/// a key left out), for records that must say which gains were in force (the trip
/// capture's sidecar).
pub fn to_json(c: &ControllerConfig) -> serde_json::Value {
    let mut m = serde_json::Map::new();
    m.insert("mode".into(), serde_json::to_value(c.mode).unwrap_or_default());
    m.insert("anti_windup".into(), serde_json::to_value(c.anti_windup).unwrap_or_default());
    for p in ALL {
        m.insert(p.key.into(), serde_json::json!(p.stored(c)));
    }
    serde_json::Value::Object(m)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Asks `ControllerConfig`'s own `Deserialize` for the field names it knows (serde hands
    /// them to `deserialize_struct`), so a key the file may leave out counts too.
    struct FieldNames<'a>(&'a mut Vec<&'static str>);

    impl<'de> serde::Deserializer<'de> for FieldNames<'_> {
        type Error = serde::de::value::Error;

        fn deserialize_any<V: serde::de::Visitor<'de>>(
            self,
            _: V,
        ) -> Result<V::Value, Self::Error> {
            Err(serde::de::Error::custom("only a struct's field names are wanted"))
        }

        fn deserialize_struct<V: serde::de::Visitor<'de>>(
            self,
            _name: &'static str,
            fields: &'static [&'static str],
            _visitor: V,
        ) -> Result<V::Value, Self::Error> {
            self.0.extend_from_slice(fields);
            Err(serde::de::Error::custom("field names taken"))
        }

        serde::forward_to_deserialize_any! {
            bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string bytes byte_buf
            option unit unit_struct newtype_struct seq tuple tuple_struct map enum identifier
            ignored_any
        }
    }

    #[test]
    fn every_numeric_controller_field_has_a_row_and_no_row_is_extra() {
        let mut fields = Vec::new();
        let _ = <ControllerConfig as serde::Deserialize>::deserialize(FieldNames(&mut fields));
        // The two choices that are not numbers; a new non-numeric key must be added here.
        let mut numeric: Vec<&str> =
            fields.into_iter().filter(|f| !["mode", "anti_windup"].contains(f)).collect();
        numeric.sort_unstable();
        let mut table: Vec<&str> = ALL.iter().map(|p| p.key).collect();
        table.sort_unstable();
        assert_eq!(numeric, table, "ControllerConfig's numeric keys and the table's rows");
        let mut unique = table.clone();
        unique.dedup();
        assert_eq!(unique, table, "a key appears twice");
    }

    #[test]
    fn get_reads_what_set_wrote_for_every_row_and_touches_only_its_field() {
        let mut c = ControllerConfig::default();
        for (i, p) in ALL.iter().enumerate() {
            p.set(&mut c, i as f64 + 0.5);
        }
        for (i, p) in ALL.iter().enumerate() {
            assert_eq!(p.get(&c), i as f64 + 0.5, "{}", p.key);
        }
        // The serialised file agrees with the getters: each row reads its own field.
        let table: toml::Table = toml::to_string(&c).expect("ser").parse().expect("de");
        for p in ALL {
            assert_eq!(table[p.key].as_float(), Some(p.get(&c)), "{}", p.key);
        }
    }

    #[test]
    fn the_modes_pick_the_parameters_each_controller_uses() {
        let mut c = ControllerConfig { mode: ControlMode::OnOff, ..ControllerConfig::default() };
        let keys = |c: &ControllerConfig| used_by(c).iter().map(|p| p.key).collect::<Vec<_>>();
        assert_eq!(keys(&c), ["max_duty", "on_off_duty", "tolerance"]);
        c.mode = ControlMode::Proportional;
        assert_eq!(keys(&c), ["kp", "min_duty_forward", "min_duty_reverse", "max_duty"]);
        c.mode = ControlMode::Pid;
        c.anti_windup = AntiWindup::BackCalculation;
        assert!(keys(&c).contains(&"tracking_time_s"));
        c.anti_windup = AntiWindup::Clamp;
        assert!(!keys(&c).contains(&"tracking_time_s"));
        assert_eq!(keys(&c).len(), 12);
    }

    #[test]
    fn units_are_spelled_with_the_axis_unit() {
        let unit = |k: &str| find(k).expect(k).unit("mm");
        assert_eq!(unit("kp"), "%/mm");
        assert_eq!(unit("ki"), "%/(mm·s)");
        assert_eq!(unit("kd"), "%·s/mm");
        assert_eq!(unit("ff_acceleration"), "%·s²/mm");
        assert_eq!(unit("tolerance"), "mm");
        assert_eq!(unit("ff_static"), "%");
    }

    #[test]
    fn rounding_keeps_four_digits_of_a_gain_and_the_wire_step_of_a_duty() {
        let kp = find("kp").expect("kp");
        assert_eq!(kp.round(19.5634), 19.56);
        assert_eq!(kp.round(0.0012345), 0.001235);
        assert_eq!(kp.round(0.0), 0.0);
        let min = find("min_duty_forward").expect("row");
        assert_eq!(min.round(8.4567), 8.46);
        assert_eq!(min.round(12.0), 12.0);
        assert!(min.round(f64::NAN).is_nan());
    }

    #[test]
    fn ranges_say_what_is_wrong() {
        assert_eq!(Range::Percent.problem(101.0).as_deref(), Some("expected 0…100 %, found 101"));
        assert_eq!(
            Range::PositivePercent.problem(0.0).as_deref(),
            Some("expected a number > 0, found 0")
        );
        assert!(Range::NonNegative.problem(0.0).is_none());
        assert!(Range::Positive.problem(f64::NAN).is_some());
        // The tolerance matters only to an on-off controller.
        let tol = find("tolerance").expect("row");
        let c = ControllerConfig { tolerance: 0.0, ..ControllerConfig::default() };
        assert!(tol.problem(&c).is_none());
        let c = ControllerConfig { mode: ControlMode::OnOff, ..c };
        assert!(tol.problem(&c).is_some());
    }

    #[test]
    fn a_key_the_file_leaves_out_reads_as_the_value_standing_in_for_it() {
        let rev = find("ff_static_reverse").expect("row");
        let mut c = ControllerConfig { ff_static: 2.5, ..ControllerConfig::default() };
        assert_eq!((rev.get(&c), rev.stored(&c)), (2.5, None));
        rev.set(&mut c, -1.0);
        assert_eq!((rev.get(&c), rev.stored(&c)), (-1.0, Some(-1.0)));
        assert_eq!(to_json(&c)["ff_static_reverse"], -1.0);
        assert!(to_json(&ControllerConfig::default())["ff_static_reverse"].is_null());
    }
}
