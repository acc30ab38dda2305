//! Which controller parameters the detail screen offers, and checking a typed value.
//!
//! A typed value is checked exactly as a configuration file would be: the whole machine
//! configuration is rebuilt with the new value and [`MachineConfig::validate`] must accept
//! it, so the screen can never hold a gain the file loader would refuse.

use crate::config::{AntiWindup, ControlMode, ControllerConfig, MachineConfig};

/// An editable controller parameter; the key is the configuration file's key.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Param {
    /// `kp`.
    Kp,
    /// `ki`.
    Ki,
    /// `kd`.
    Kd,
    /// `derivative_filter_s`.
    DerivativeFilter,
    /// `integral_limit`.
    IntegralLimit,
    /// `tracking_time_s`.
    TrackingTime,
    /// `min_duty_forward`.
    MinDutyForward,
    /// `min_duty_reverse`.
    MinDutyReverse,
    /// `max_duty`.
    MaxDuty,
    /// `ff_velocity`.
    FfVelocity,
    /// `ff_acceleration`.
    FfAcceleration,
    /// `ff_static`.
    FfStatic,
    /// `on_off_duty`.
    OnOffDuty,
    /// `tolerance`.
    Tolerance,
}

/// Every editable parameter, in display order.
pub const ALL: [Param; 14] = [
    Param::Kp,
    Param::Ki,
    Param::Kd,
    Param::DerivativeFilter,
    Param::IntegralLimit,
    Param::TrackingTime,
    Param::MinDutyForward,
    Param::MinDutyReverse,
    Param::MaxDuty,
    Param::FfVelocity,
    Param::FfAcceleration,
    Param::FfStatic,
    Param::OnOffDuty,
    Param::Tolerance,
];

impl Param {
    /// The configuration key under `[axis.controller]`.
    pub fn key(self) -> &'static str {
        match self {
            Self::Kp => "kp",
            Self::Ki => "ki",
            Self::Kd => "kd",
            Self::DerivativeFilter => "derivative_filter_s",
            Self::IntegralLimit => "integral_limit",
            Self::TrackingTime => "tracking_time_s",
            Self::MinDutyForward => "min_duty_forward",
            Self::MinDutyReverse => "min_duty_reverse",
            Self::MaxDuty => "max_duty",
            Self::FfVelocity => "ff_velocity",
            Self::FfAcceleration => "ff_acceleration",
            Self::FfStatic => "ff_static",
            Self::OnOffDuty => "on_off_duty",
            Self::Tolerance => "tolerance",
        }
    }

    /// The parameter's unit, given the axis unit `u`.
    pub fn unit(self, u: &str) -> String {
        match self {
            Self::Kp => format!("%/{u}"),
            Self::Ki => format!("%/({u}·s)"),
            Self::Kd => format!("%·s/{u}"),
            Self::DerivativeFilter | Self::TrackingTime => "s".to_owned(),
            Self::IntegralLimit
            | Self::MinDutyForward
            | Self::MinDutyReverse
            | Self::MaxDuty
            | Self::FfStatic
            | Self::OnOffDuty => "%".to_owned(),
            Self::FfVelocity => format!("%·s/{u}"),
            Self::FfAcceleration => format!("%·s²/{u}"),
            Self::Tolerance => u.to_owned(),
        }
    }

    /// Its value in `c`.
    pub fn get(self, c: &ControllerConfig) -> f64 {
        *self.slot_ref(c)
    }

    /// Sets its value in `c`.
    pub fn set(self, c: &mut ControllerConfig, v: f64) {
        *self.slot(c) = v;
    }

    fn slot(self, c: &mut ControllerConfig) -> &mut f64 {
        match self {
            Self::Kp => &mut c.kp,
            Self::Ki => &mut c.ki,
            Self::Kd => &mut c.kd,
            Self::DerivativeFilter => &mut c.derivative_filter_s,
            Self::IntegralLimit => &mut c.integral_limit,
            Self::TrackingTime => &mut c.tracking_time_s,
            Self::MinDutyForward => &mut c.min_duty_forward,
            Self::MinDutyReverse => &mut c.min_duty_reverse,
            Self::MaxDuty => &mut c.max_duty,
            Self::FfVelocity => &mut c.ff_velocity,
            Self::FfAcceleration => &mut c.ff_acceleration,
            Self::FfStatic => &mut c.ff_static,
            Self::OnOffDuty => &mut c.on_off_duty,
            Self::Tolerance => &mut c.tolerance,
        }
    }

    fn slot_ref(self, c: &ControllerConfig) -> &f64 {
        match self {
            Self::Kp => &c.kp,
            Self::Ki => &c.ki,
            Self::Kd => &c.kd,
            Self::DerivativeFilter => &c.derivative_filter_s,
            Self::IntegralLimit => &c.integral_limit,
            Self::TrackingTime => &c.tracking_time_s,
            Self::MinDutyForward => &c.min_duty_forward,
            Self::MinDutyReverse => &c.min_duty_reverse,
            Self::MaxDuty => &c.max_duty,
            Self::FfVelocity => &c.ff_velocity,
            Self::FfAcceleration => &c.ff_acceleration,
            Self::FfStatic => &c.ff_static,
            Self::OnOffDuty => &c.on_off_duty,
            Self::Tolerance => &c.tolerance,
        }
    }
}

/// The parameters that matter for a controller (others are kept but not shown).
pub fn params_for(c: &ControllerConfig) -> Vec<Param> {
    use Param::*;
    match c.mode {
        ControlMode::OnOff => vec![OnOffDuty, Tolerance],
        ControlMode::Proportional => vec![Kp, MinDutyForward, MinDutyReverse, MaxDuty],
        ControlMode::Pid => {
            let mut v = vec![Kp, Ki, Kd, DerivativeFilter, IntegralLimit];
            if c.anti_windup == AntiWindup::BackCalculation {
                v.push(TrackingTime);
            }
            v.extend([
                MinDutyForward,
                MinDutyReverse,
                MaxDuty,
                FfVelocity,
                FfAcceleration,
                FfStatic,
            ]);
            v
        }
    }
}

/// Why a typed value was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EditError {
    /// Not a finite number.
    #[error("{0:?} is not a number")]
    NotANumber(String),
    /// The configuration check refused it.
    #[error("{key}: {message}")]
    Invalid {
        /// Key path under the axis, e.g. `controller.max_duty`.
        key: String,
        /// Why.
        message: String,
    },
    /// No such axis.
    #[error("no axis number {0}")]
    NoAxis(usize),
}

/// The configuration with `param` of axis `axis` set to the number in `text`, if the
/// configuration check accepts it.
///
/// # Errors
/// [`EditError`] when `text` is not a finite number or the result would not validate.
pub fn edit(
    cfg: &MachineConfig,
    axis: usize,
    param: Param,
    text: &str,
) -> Result<MachineConfig, EditError> {
    let t = text.trim();
    let v: f64 = t.parse().map_err(|_| EditError::NotANumber(t.to_owned()))?;
    if !v.is_finite() {
        return Err(EditError::NotANumber(t.to_owned()));
    }
    let before = cfg.validate();
    let mut new = cfg.clone();
    param.set(&mut new.axes.get_mut(axis).ok_or(EditError::NoAxis(axis))?.controller, v);
    // Only problems this edit introduced count; a file that loaded is already valid.
    match new.validate().into_iter().find(|e| !before.contains(e)) {
        None => Ok(new),
        Some(bad) => Err(EditError::Invalid {
            key: bad.path.get(2..).map_or_else(|| bad.path.join("."), |p| p.join(".")),
            message: bad.message,
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn set_and_get_agree_for_every_param() {
        let mut c = MachineConfig::demo().expect("demo").axes[0].controller.clone();
        for (i, p) in ALL.iter().enumerate() {
            p.set(&mut c, i as f64 + 0.5);
        }
        for (i, p) in ALL.iter().enumerate() {
            assert_eq!(p.get(&c), i as f64 + 0.5, "{}", p.key());
        }
    }
}
