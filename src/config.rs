//! Machine configuration: the TOML schema, its units, loading and validation.
//!
//! This module owns the meaning of every configuration key. Every numeric key states its unit
//! in its doc comment; "unit" means the axis's own unit (`scale.unit`, e.g. mm), and duty is
//! in percent of full PWM (−100…100). Unknown keys are errors (`deny_unknown_fields`) so a
//! misspelt limit can never silently fall back to a default.
//!
//! Loading is two-phase: serde checks shape and types (its errors carry line and column), then
//! [`MachineConfig::validate`] checks relations between values (soft_min < soft_max, …) and
//! reports the key path, which [`ConfigError`] turns into a line and column with `toml_edit`.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

/// The demo machine: a greenhouse tray-inspection gantry. Its numbers are invented.
pub const DEMO_CONFIG: &str = include_str!("../configs/demo-greenhouse.toml");

/// Name shown when the embedded demo is in use.
pub const DEMO_SOURCE: &str = "built-in demo (configs/demo-greenhouse.toml)";

/// Whole machine.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MachineConfig {
    pub machine: MachineSection,
    /// One `[[axis]]` table per axis, in display order.
    #[serde(rename = "axis")]
    pub axes: Vec<AxisConfig>,
    /// `[spots]`: named positions ([`crate::spots`]).
    #[serde(default, skip_serializing_if = "crate::spots::Spots::is_empty")]
    pub spots: crate::spots::Spots,
    /// Old key names this file used (still read for one release), as warnings naming the
    /// new keys; not part of the file.
    #[serde(skip)]
    pub renamed_keys: Vec<String>,
}

/// `[machine]`: machine-wide settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MachineSection {
    /// Shown in the cockpit header and written into captures.
    pub name: String,
    /// IEC 60204-1 stop category used by stop-all: 1 = controlled deceleration at each
    /// axis's maximum acceleration, then motor off (default); 0 = motor off at once.
    #[serde(default = "default_stop_category")]
    pub stop_category: u8,
    /// Homing order: groups homed in turn, the axes of a group together, e.g.
    /// `[["z"], ["x", "y"]]` (lift axis first). Axes not listed are homed last, together.
    #[serde(default, alias = "homing_order")]
    pub home_sequence: Vec<Vec<String>>,
    /// Folder for trip captures (CSV); relative to the configuration file's folder. Default:
    /// `captures` in servotty's state folder (`$XDG_STATE_HOME/servotty`, else
    /// `~/.local/state/servotty`).
    #[serde(default)]
    pub captures_dir: Option<PathBuf>,
    /// Event log (JSON lines); relative to the configuration file's folder. Default:
    /// `events.jsonl` in servotty's state folder.
    #[serde(default)]
    pub event_log: Option<PathBuf>,
    /// Seconds of full-rate telemetry each axis keeps for trip captures, s.
    #[serde(default = "default_capture_seconds")]
    pub capture_seconds: f64,
}

fn default_capture_seconds() -> f64 {
    10.0
}

fn default_stop_category() -> u8 {
    1
}

/// `[[axis]]`: one axis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AxisConfig {
    /// Short name used on the command line (`--to x=300`) and on screen; letters, digits, `_`.
    pub name: String,
    pub transport: TransportConfig,
    #[serde(default)]
    pub board: BoardConfig,
    pub scale: ScaleConfig,
    pub controller: ControllerConfig,
    pub motion: MotionConfig,
    pub limits: LimitsConfig,
    #[serde(default)]
    pub homing: HomingConfig,
    #[serde(default)]
    pub jog: JogConfig,
}

/// How an axis finds its reference position.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum HomingMethod {
    /// Approach the home switch, back off, approach slowly, latch on the switch edge.
    Switch,
    /// Drive gently into the mechanical end stop until it stalls, back off.
    HardStop,
    /// Creep until the encoder's index pulse appears; latch there.
    Index,
    /// Declare the present position home (with a warning): nothing is checked.
    #[default]
    None,
}

/// Which way homing searches.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum SearchDirection {
    /// Toward lower positions.
    #[default]
    Negative,
    /// Toward higher positions.
    Positive,
}

impl SearchDirection {
    /// −1 or +1.
    pub fn sign(self) -> f64 {
        match self {
            Self::Negative => -1.0,
            Self::Positive => 1.0,
        }
    }
}

/// `[axis.homing]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct HomingConfig {
    #[serde(default)]
    pub method: HomingMethod,
    /// Search direction.
    #[serde(default)]
    pub direction: SearchDirection,
    /// Speed while searching for the switch or the end stop, unit/s.
    #[serde(default = "default_seek_speed", alias = "search_velocity")]
    pub seek_speed: f64,
    /// Speed of the final slow approach (switch edge, index), unit/s.
    #[serde(default = "default_touch_speed", alias = "latch_velocity")]
    pub touch_speed: f64,
    /// Distance to back off after the switch closes or the end stop is hit, units.
    #[serde(default = "default_backoff")]
    pub backoff: f64,
    /// Position value given to the latched point (switch edge, end stop, index), units.
    #[serde(default, alias = "home_offset")]
    pub mark_position: f64,
    /// Travel bound of every search, units: not found within this distance → trip.
    #[serde(default = "default_seek_limit", alias = "max_travel")]
    pub seek_limit: f64,
    /// Time bound of the whole homing sequence, s.
    #[serde(default = "default_homing_timeout")]
    pub timeout_s: f64,
    /// Duty limit while pushing into an end stop, %.
    #[serde(default = "default_hard_stop_duty")]
    pub hard_stop_duty: f64,
}

impl Default for HomingConfig {
    fn default() -> Self {
        Self {
            method: HomingMethod::None,
            direction: SearchDirection::Negative,
            seek_speed: default_seek_speed(),
            touch_speed: default_touch_speed(),
            backoff: default_backoff(),
            mark_position: 0.0,
            seek_limit: default_seek_limit(),
            timeout_s: default_homing_timeout(),
            hard_stop_duty: default_hard_stop_duty(),
        }
    }
}

fn default_seek_speed() -> f64 {
    20.0
}
fn default_touch_speed() -> f64 {
    2.0
}
fn default_backoff() -> f64 {
    3.0
}
fn default_seek_limit() -> f64 {
    1000.0
}
fn default_homing_timeout() -> f64 {
    120.0
}
fn default_hard_stop_duty() -> f64 {
    25.0
}

/// `[axis.jog]`: operator jogging.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct JogConfig {
    /// Selectable step sizes, units.
    #[serde(default = "default_jog_steps")]
    pub steps: Vec<f64>,
    /// Selectable continuous-jog speeds, unit/s.
    #[serde(default = "default_jog_speeds")]
    pub speeds: Vec<f64>,
    /// Speed cap before the axis is homed, unit/s.
    #[serde(default = "default_unhomed_speed")]
    pub unhomed_speed: f64,
    /// Distance of the short step a first key press makes, units.
    #[serde(default = "default_first_step")]
    pub first_step: f64,
    /// A repeat within this long after the first press starts continuous motion, s (must
    /// bridge the terminal's auto-repeat delay, typically 0.25–0.6 s).
    #[serde(default = "default_repeat_window")]
    pub repeat_window_s: f64,
    /// During continuous jog, with no repeat for this long the axis decelerates to rest, s
    /// (a few auto-repeat intervals).
    #[serde(default = "default_deadman")]
    pub deadman_s: f64,
}

impl Default for JogConfig {
    fn default() -> Self {
        Self {
            steps: default_jog_steps(),
            speeds: default_jog_speeds(),
            unhomed_speed: default_unhomed_speed(),
            first_step: default_first_step(),
            repeat_window_s: default_repeat_window(),
            deadman_s: default_deadman(),
        }
    }
}

fn default_jog_steps() -> Vec<f64> {
    vec![0.1, 1.0, 10.0]
}
fn default_jog_speeds() -> Vec<f64> {
    vec![5.0, 20.0, 60.0]
}
fn default_unhomed_speed() -> f64 {
    10.0
}
fn default_first_step() -> f64 {
    0.2
}
fn default_repeat_window() -> f64 {
    0.7
}
fn default_deadman() -> f64 {
    0.15
}

/// `[axis.transport]`: where the axis's board is.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum TransportConfig {
    /// The built-in simulator, in process.
    Sim(SimConfig),
    /// A board on a serial device (USB CDC or UART).
    Serial {
        /// Device path, e.g. `/dev/ttyACM0`.
        device: String,
        /// Baud rate in bit/s (ignored by USB CDC boards but required by UARTs).
        #[serde(default = "default_baud")]
        baud: u32,
    },
}

fn default_baud() -> u32 {
    921_600
}

/// `[axis.board]`: what the host asks of the board at link-up.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BoardConfig {
    /// Telemetry and control rate in Hz (the board's tick). 50…5000.
    #[serde(default = "default_tick_hz")]
    pub tick_hz: u16,
    /// Board watchdog in ms: with no valid duty command for this long the board turns the
    /// motor off by itself. 5…1000.
    #[serde(default = "default_watchdog_ms")]
    pub watchdog_ms: u16,
}

impl Default for BoardConfig {
    fn default() -> Self {
        Self { tick_hz: default_tick_hz(), watchdog_ms: default_watchdog_ms() }
    }
}

fn default_tick_hz() -> u16 {
    1000
}
fn default_watchdog_ms() -> u16 {
    50
}

/// `[axis.transport]` with `kind = "sim"`: the simulated plant behind the simulated board.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimConfig {
    pub plant: PlantParams,
    /// Faults present from start-up (tests inject them at run time instead).
    #[serde(default)]
    pub faults: SimFaults,
}

/// DC gearmotor → gearbox → belt pulley → carriage on a rail with hard stops.
/// All SI except where the key name says mm.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PlantParams {
    /// Supply voltage at the driver, V.
    pub supply_v: f64,
    /// Armature resistance R, Ω.
    pub resistance_ohm: f64,
    /// Armature inductance L, H.
    pub inductance_h: f64,
    /// Torque constant Kt, N·m/A.
    pub torque_constant: f64,
    /// Back-EMF constant Ke, V·s/rad.
    pub back_emf_constant: f64,
    /// Rotor inertia J (motor side, incl. gearbox input), kg·m².
    pub rotor_inertia: f64,
    /// Viscous friction b at the motor shaft, N·m·s/rad.
    pub viscous_friction: f64,
    /// Gearbox ratio: motor revolutions per output revolution.
    pub gear_ratio: f64,
    /// Carriage travel per output-shaft revolution (belt pulley circumference), mm.
    pub mm_per_output_rev: f64,
    /// Moving mass of the carriage, kg.
    pub carriage_mass_kg: f64,
    /// Coulomb (sliding) friction force at the carriage, N.
    pub coulomb_friction_n: f64,
    /// Static (breakaway) friction force at the carriage, N; ≥ coulomb_friction_n.
    pub static_friction_n: f64,
    /// Mass the axis holds against gravity, kg, with a sign: positive when gravity pulls the
    /// carriage towards the negative end (a lift whose positive direction is up), negative
    /// when towards the positive end; 0 (the default) for a horizontal axis. Its weight is a
    /// constant load, so breakaway and sliding friction differ by direction.
    #[serde(default)]
    pub gravity_load_kg: f64,
    /// Driver deadband as a fraction of full duty (0…1): below it the bridge outputs nothing.
    #[serde(default)]
    pub driver_deadband: f64,
    /// Encoder counts per motor revolution after 4× quadrature decoding.
    pub encoder_counts_per_rev: u32,
    /// Rail length between the hard stops, mm (the carriage moves in 0…rail_length_mm).
    pub rail_length_mm: f64,
    /// Carriage position at power-up, mm from the lower hard stop.
    pub start_mm: f64,
    /// Home switch position in mm from the lower stop, if the rail has one.
    #[serde(default)]
    pub home_switch_mm: Option<f64>,
}

impl PlantParams {
    /// Encoder counts per mm of carriage travel implied by the mechanics.
    pub fn counts_per_mm(&self) -> f64 {
        f64::from(self.encoder_counts_per_rev) * self.gear_ratio / self.mm_per_output_rev
    }
}

/// Faults the simulator can carry from start-up.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimFaults {
    /// Motor leads swapped: positive duty drives the carriage backwards.
    #[serde(default)]
    pub reversed_motor: bool,
    /// Probability (0…1) that a telemetry frame is lost.
    #[serde(default)]
    pub drop_frame_probability: f64,
    /// Probability (0…1) that a telemetry frame arrives with a flipped bit.
    #[serde(default)]
    pub corrupt_frame_probability: f64,
    /// Bursty loss: the link goes dark both ways for this long, ms, every `burst_every_ms`.
    /// 0 = off.
    #[serde(default)]
    pub burst_ms: u32,
    /// Period of the bursts, ms.
    #[serde(default)]
    pub burst_every_ms: u32,
    /// Host messages take effect at the board this much later, ms (host jitter). 0 = off.
    #[serde(default)]
    pub reply_delay_ms: u32,
}

/// `[axis.scale]`: counts to units, and which way is positive.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScaleConfig {
    /// Encoder counts per axis unit (after 4× decoding), counts/unit.
    pub counts_per_unit: f64,
    /// The axis unit's name, shown on screen (e.g. "mm", "deg").
    #[serde(default = "default_unit")]
    pub unit: String,
    /// Negate the duty sent to the board (motor wired the other way round).
    #[serde(default)]
    pub invert_motor: bool,
    /// Negate the encoder count (A and B swapped).
    #[serde(default)]
    pub invert_encoder: bool,
}

fn default_unit() -> String {
    "mm".to_owned()
}

/// Position controller family.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ControlMode {
    /// Full `on_off_duty` towards the target while outside `tolerance`, zero inside it.
    OnOff,
    /// duty = kp · error (plus minimum-duty compensation), no I, no D, no feedforward.
    Proportional,
    /// Parallel PID with filtered derivative on measurement, anti-windup and feedforward.
    Pid,
}

/// How the integrator is kept from winding up while the output saturates.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum AntiWindup {
    /// Stop integrating while saturated and the error pushes further into saturation.
    #[default]
    Clamp,
    /// Feed the saturation excess back into the integrator with time constant `tracking_time_s`.
    BackCalculation,
}

/// `[axis.controller]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ControllerConfig {
    pub mode: ControlMode,
    /// On-off: duty applied outside the tolerance band, %.
    #[serde(default = "default_on_off_duty")]
    pub on_off_duty: f64,
    /// On-off: half-width of the band in which the output is zero, units.
    #[serde(default = "default_tolerance")]
    pub tolerance: f64,
    /// Proportional gain, %/unit.
    #[serde(default)]
    pub kp: f64,
    /// Integral gain, %/(unit·s).
    #[serde(default)]
    pub ki: f64,
    /// Derivative gain, %·s/unit (acts on the measurement, not the error).
    #[serde(default)]
    pub kd: f64,
    /// Time constant of the first-order derivative filter, s (Td/N in textbook form).
    #[serde(default = "default_derivative_filter")]
    pub derivative_filter_s: f64,
    /// Largest magnitude the integral term may hold, %.
    #[serde(default = "default_integral_limit")]
    pub integral_limit: f64,
    #[serde(default)]
    pub anti_windup: AntiWindup,
    /// Back-calculation tracking time constant Tt, s.
    #[serde(default = "default_tracking_time")]
    pub tracking_time_s: f64,
    /// Smallest duty that moves the axis forwards (breakaway), %; added to any non-zero
    /// forward output so the controller works on a linear plant.
    #[serde(default)]
    pub min_duty_forward: f64,
    /// Same for the reverse direction, % (a positive number).
    #[serde(default)]
    pub min_duty_reverse: f64,
    /// Output limit, %.
    #[serde(default = "default_max_duty")]
    pub max_duty: f64,
    /// Velocity feedforward, % per unit/s of profile velocity.
    #[serde(default)]
    pub ff_velocity: f64,
    /// Acceleration feedforward, % per unit/s² of profile acceleration.
    #[serde(default)]
    pub ff_acceleration: f64,
    /// Static-friction feedforward, %, added in the direction of profile velocity (in both
    /// directions, unless `ff_static_reverse` gives the reverse one). Negative when the
    /// minimum duty already pays more than sliding friction: it then takes back at most what
    /// the velocity feedforward adds.
    #[serde(default)]
    pub ff_static: f64,
    /// Static-friction feedforward while the profile runs in reverse, % (positive pushes the
    /// reverse way, as `ff_static` does forwards): for an axis whose friction differs by
    /// direction, e.g. a lift carrying a weight. `ff_static` when absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ff_static_reverse: Option<f64>,
}

impl Default for ControllerConfig {
    /// Every key at its documented default, proportional mode with no gain: a neutral base
    /// for building a configuration in code.
    fn default() -> Self {
        Self {
            mode: ControlMode::Proportional,
            on_off_duty: default_on_off_duty(),
            tolerance: default_tolerance(),
            kp: 0.0,
            ki: 0.0,
            kd: 0.0,
            derivative_filter_s: default_derivative_filter(),
            integral_limit: default_integral_limit(),
            anti_windup: AntiWindup::default(),
            tracking_time_s: default_tracking_time(),
            min_duty_forward: 0.0,
            min_duty_reverse: 0.0,
            max_duty: default_max_duty(),
            ff_velocity: 0.0,
            ff_acceleration: 0.0,
            ff_static: 0.0,
            ff_static_reverse: None,
        }
    }
}

fn default_on_off_duty() -> f64 {
    40.0
}
fn default_tolerance() -> f64 {
    0.5
}
fn default_derivative_filter() -> f64 {
    0.002
}
fn default_integral_limit() -> f64 {
    30.0
}
fn default_tracking_time() -> f64 {
    0.05
}
fn default_max_duty() -> f64 {
    100.0
}

/// `[axis.motion]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MotionConfig {
    /// Profile velocity limit, unit/s.
    pub max_velocity: f64,
    /// Profile acceleration and deceleration limit, unit/s².
    pub max_acceleration: f64,
    /// A move is complete when |position − goal| stays inside this band, units.
    #[serde(default = "default_in_position_band")]
    pub in_position_band: f64,
    /// … for this long, s.
    #[serde(default = "default_in_position_dwell")]
    pub in_position_dwell_s: f64,
    /// Shape of moves, jogs and stops: trapezoid (default) or jerk-limited.
    #[serde(default)]
    pub profile: crate::control::ProfileShape,
    /// Jerk limit for `profile = "jerk_limited"`, unit/s³.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_jerk: Option<f64>,
}

fn default_in_position_band() -> f64 {
    0.1
}
fn default_in_position_dwell() -> f64 {
    0.1
}

/// `[axis.limits]`: supervision. Every trip latches until cleared.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LimitsConfig {
    /// Lower soft travel limit, units.
    pub soft_min: f64,
    /// Upper soft travel limit, units.
    pub soft_max: f64,
    /// Following-error band at standstill, units.
    pub following_error: f64,
    /// Extra following-error allowance per unit/s of profile velocity, s.
    #[serde(default)]
    pub following_error_per_velocity: f64,
    /// Stall: |duty| above this, %, …
    #[serde(default = "default_stall_duty")]
    pub stall_duty: f64,
    /// … with no encoder motion for this long, s, trips.
    #[serde(default = "default_stall_timeout")]
    pub stall_timeout_s: f64,
    /// No valid telemetry for this long, s, trips link loss.
    #[serde(default = "default_link_timeout")]
    pub link_timeout_s: f64,
    /// A count change larger than this between two consecutive frames is an encoder fault,
    /// counts.
    #[serde(default = "default_encoder_jump")]
    pub encoder_jump_counts: u32,
    /// Runaway: with |duty| above this, %, …
    #[serde(default = "default_runaway_duty")]
    pub runaway_duty: f64,
    /// … the axis speeding up against the duty's sign for this long, s, trips (the motor or
    /// encoder is wired the wrong way round).
    #[serde(default = "default_runaway_timeout")]
    pub runaway_timeout_s: f64,
    /// Stall also counts below `stall_duty`: |duty| above the axis's breakaway duty in that
    /// direction (`controller.min_duty_forward` / `min_duty_reverse`, measured by `tune
    /// breakaway`) plus this margin, %, with no encoder motion for `stall_timeout_s`. The
    /// margin covers static friction above the sliding level. 0…100.
    #[serde(default = "default_stall_margin_duty")]
    pub stall_margin_duty: f64,
    /// A move that is not inside `motion.in_position_band` this long after its profile has
    /// ended, s, trips as "not in position" (a jam short of the goal, a load it cannot push).
    #[serde(default = "default_settle_timeout")]
    pub settle_timeout_s: f64,
    /// Motor heating guard: the duty, %, the motor can carry continuously (rated continuous
    /// current × R / supply voltage, in %). A running estimate of duty² filtered with
    /// `thermal_time_s` trips when it passes this squared. 100 turns the guard off.
    #[serde(default = "default_continuous_duty")]
    pub continuous_duty: f64,
    /// Time constant of the motor heating estimate, s (the winding's thermal time constant;
    /// small gearmotors: tens of seconds).
    #[serde(default = "default_thermal_time")]
    pub thermal_time_s: f64,
}

fn default_stall_margin_duty() -> f64 {
    10.0
}
fn default_settle_timeout() -> f64 {
    2.0
}
fn default_continuous_duty() -> f64 {
    100.0
}
fn default_thermal_time() -> f64 {
    30.0
}

fn default_stall_duty() -> f64 {
    50.0
}
fn default_stall_timeout() -> f64 {
    0.5
}
fn default_link_timeout() -> f64 {
    0.1
}
fn default_encoder_jump() -> u32 {
    2000
}
fn default_runaway_duty() -> f64 {
    20.0
}
fn default_runaway_timeout() -> f64 {
    0.03
}

/// Where a configuration came from, for messages.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ConfigSource {
    BuiltInDemo,
    File(PathBuf),
}

impl std::fmt::Display for ConfigSource {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::BuiltInDemo => f.write_str(DEMO_SOURCE),
            Self::File(p) => write!(f, "{}", p.display()),
        }
    }
}

/// A configuration that could not be used.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("{source_name}: cannot read: {err}")]
    Read { source_name: String, err: std::io::Error },
    /// Shape or type error from the TOML parser.
    #[error("{source_name}:{line}:{column}: {message}")]
    Parse { source_name: String, line: usize, column: usize, message: String },
    /// Values that parsed but make no sense: every one found, each with its key and place.
    #[error("{}", list_problems(source_name, problems))]
    Invalid { source_name: String, problems: Vec<Problem> },
}

/// One value that makes no sense, located in the file.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    /// 1-based line of the key (or of the nearest table that exists).
    pub line: usize,
    /// 1-based column.
    pub column: usize,
    /// The key as a person looks for it, e.g. `[[axis]] "y": limits.soft_max`.
    pub key: String,
    /// What is wrong and what would be sensible.
    pub message: String,
}

fn list_problems(source_name: &str, problems: &[Problem]) -> String {
    let mut s = String::new();
    for (i, p) in problems.iter().enumerate() {
        if i > 0 {
            s.push('\n');
        }
        s.push_str(&format!("{source_name}:{}:{}: {}: {}", p.line, p.column, p.key, p.message));
    }
    if problems.len() > 1 {
        s.push_str(&format!("\n{} problems in {source_name}", problems.len()));
    }
    s
}

/// A relation between values that does not hold; `path` is the TOML key path,
/// e.g. `["axis", "1", "limits", "soft_max"]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Invalid {
    pub path: Vec<String>,
    pub message: String,
}

impl MachineConfig {
    /// The embedded demo machine.
    ///
    /// # Errors
    /// Only if the embedded file were broken, which a test rules out.
    pub fn demo() -> Result<Self, ConfigError> {
        Self::from_toml_str(DEMO_CONFIG, &ConfigSource::BuiltInDemo.to_string())
    }

    /// Reads and validates a file.
    ///
    /// # Errors
    /// [`ConfigError`] naming the file, line, column and key.
    pub fn load(path: &Path) -> Result<Self, ConfigError> {
        let name = path.display().to_string();
        let bytes = std::fs::read(path)
            .map_err(|err| ConfigError::Read { source_name: name.clone(), err })?;
        let text = String::from_utf8(bytes).map_err(|e| {
            let good = e.utf8_error().valid_up_to();
            let bytes = e.as_bytes();
            // The valid prefix is text: count its lines and characters.
            let prefix = std::str::from_utf8(&bytes[..good]).unwrap_or_default();
            let (line, column) = line_col(prefix, prefix.len());
            ConfigError::Parse {
                source_name: name.clone(),
                line,
                column,
                message: format!(
                    "byte 0x{:02x} is not UTF-8 text: save the file as UTF-8",
                    bytes.get(good).copied().unwrap_or(0)
                ),
            }
        })?;
        Self::from_toml_str(&text, &name)
    }

    /// The file if given, else the embedded demo.
    ///
    /// # Errors
    /// As [`MachineConfig::load`].
    pub fn load_or_demo(path: Option<&Path>) -> Result<(Self, ConfigSource), ConfigError> {
        match path {
            Some(p) => Ok((Self::load(p)?, ConfigSource::File(p.to_path_buf()))),
            None => Ok((Self::demo()?, ConfigSource::BuiltInDemo)),
        }
    }

    /// Parses and validates TOML text; `source_name` is used in messages.
    ///
    /// # Errors
    /// [`ConfigError::Parse`] or [`ConfigError::Invalid`].
    pub fn from_toml_str(text: &str, source_name: &str) -> Result<Self, ConfigError> {
        let cfg: Self = toml::from_str(text).map_err(|e| {
            let (line, column) = e.span().map_or((1, 1), |s| line_col(text, s.start));
            ConfigError::Parse {
                source_name: source_name.to_owned(),
                line,
                column,
                message: plain_words(e.message().trim()),
            }
        })?;
        let mut cfg = cfg;
        cfg.renamed_keys = renamed_keys(text, source_name);
        let mut problems: Vec<Problem> = cfg
            .validate()
            .into_iter()
            .map(|bad| {
                let (line, column) = locate(text, &bad.path).unwrap_or((1, 1));
                Problem { line, column, key: display_path(&bad.path, &cfg), message: bad.message }
            })
            .collect();
        problems.sort_by_key(|p| (p.line, p.column));
        if !problems.is_empty() {
            return Err(ConfigError::Invalid { source_name: source_name.to_owned(), problems });
        }
        Ok(cfg)
    }

    /// Relations the type system cannot express. Empty when the configuration is usable.
    pub fn validate(&self) -> Vec<Invalid> {
        let mut out = Vec::new();
        if self.machine.stop_category > 1 {
            out_push(
                &mut out,
                keys(&["machine", "stop_category"]),
                format!(
                    "expected 0 or 1 (IEC 60204-1 stop category), found {}",
                    self.machine.stop_category
                ),
            );
        }
        if !(self.machine.capture_seconds.is_finite()
            && (0.5..=120.0).contains(&self.machine.capture_seconds))
        {
            out_push(
                &mut out,
                keys(&["machine", "capture_seconds"]),
                format!("expected 0.5…120 s, found {}", self.machine.capture_seconds),
            );
        }
        for (g, group) in self.machine.home_sequence.iter().enumerate() {
            for name in group {
                let seen_before =
                    self.machine.home_sequence[..g].iter().flatten().any(|n| n == name)
                        || group.iter().filter(|n| *n == name).count() > 1;
                if self.axis(name).is_none() || seen_before {
                    out_push(
                        &mut out,
                        keys(&["machine", "home_sequence"]),
                        if seen_before {
                            format!("axis {name:?} is listed twice")
                        } else {
                            format!("no axis called {name:?}")
                        },
                    );
                }
            }
        }
        if self.axes.is_empty() {
            out_push(&mut out, keys(&["machine"]), "expected at least one [[axis]] table".into());
        }
        for (i, a) in self.axes.iter().enumerate() {
            let at = |rest: &[&str]| {
                let mut p = vec!["axis".to_owned(), i.to_string()];
                p.extend(rest.iter().map(|s| (*s).to_owned()));
                p
            };
            if a.name.is_empty() || !a.name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                out_push(
                    &mut out,
                    at(&["name"]),
                    format!("expected letters, digits or _, found {:?}", a.name),
                );
            }
            if self.axes[..i].iter().any(|o| o.name == a.name) {
                out_push(&mut out, at(&["name"]), format!("axis name {:?} is used twice", a.name));
            }
            let c = &a.controller;
            let l = &a.limits;
            let m = &a.motion;
            for (key, v) in [
                (&["scale", "counts_per_unit"][..], a.scale.counts_per_unit),
                (&["motion", "max_velocity"], m.max_velocity),
                (&["motion", "max_acceleration"], m.max_acceleration),
                (&["motion", "in_position_band"], m.in_position_band),
                (&["limits", "following_error"], l.following_error),
                (&["limits", "stall_timeout_s"], l.stall_timeout_s),
                (&["limits", "link_timeout_s"], l.link_timeout_s),
                (&["limits", "runaway_timeout_s"], l.runaway_timeout_s),
            ] {
                if !(v.is_finite() && v > 0.0) {
                    out_push(&mut out, at(key), format!("expected a number > 0, found {v}"));
                }
            }
            if let Some(why) = crate::control::profile::check_jerk(m) {
                out_push(&mut out, at(&["motion", "max_jerk"]), why);
            }
            // Each controller parameter's range is in its row of the table.
            for p in crate::control::params::ALL {
                if let Some(why) = p.problem(c) {
                    out_push(&mut out, at(&["controller", p.key]), why);
                }
            }
            if c.min_duty_forward >= c.max_duty || c.min_duty_reverse >= c.max_duty {
                out_push(
                    &mut out,
                    at(&["controller", "max_duty"]),
                    format!(
                        "max_duty ({}) must exceed min_duty_forward ({}) and min_duty_reverse ({})",
                        c.max_duty, c.min_duty_forward, c.min_duty_reverse
                    ),
                );
            }
            if !(l.soft_min.is_finite() && l.soft_max.is_finite() && l.soft_min < l.soft_max) {
                out_push(
                    &mut out,
                    at(&["limits", "soft_max"]),
                    format!("expected soft_max > soft_min, found {} ≤ {}", l.soft_max, l.soft_min),
                );
            }
            if !(l.following_error_per_velocity.is_finite()
                && l.following_error_per_velocity >= 0.0)
            {
                out_push(
                    &mut out,
                    at(&["limits", "following_error_per_velocity"]),
                    format!("expected a number ≥ 0, found {}", l.following_error_per_velocity),
                );
            }
            if !(l.stall_duty.is_finite() && (0.0..=100.0).contains(&l.stall_duty)) {
                out_push(
                    &mut out,
                    at(&["limits", "stall_duty"]),
                    format!("expected 0…100 %, found {}", l.stall_duty),
                );
            }
            if !(l.runaway_duty.is_finite() && (0.0..=100.0).contains(&l.runaway_duty)) {
                out_push(
                    &mut out,
                    at(&["limits", "runaway_duty"]),
                    format!("expected 0…100 %, found {}", l.runaway_duty),
                );
            }
            if m.in_position_band >= l.following_error {
                out_push(
                    &mut out,
                    at(&["motion", "in_position_band"]),
                    format!(
                        "in_position_band ({}) must be smaller than limits.following_error ({})",
                        m.in_position_band, l.following_error
                    ),
                );
            }
            if !(m.in_position_dwell_s.is_finite() && m.in_position_dwell_s >= 0.0) {
                out_push(
                    &mut out,
                    at(&["motion", "in_position_dwell_s"]),
                    format!("expected a number ≥ 0, found {}", m.in_position_dwell_s),
                );
            }
            if !(50..=5000).contains(&a.board.tick_hz) {
                out_push(
                    &mut out,
                    at(&["board", "tick_hz"]),
                    format!("expected 50…5000 Hz, found {}", a.board.tick_hz),
                );
            }
            if !(5..=1000).contains(&a.board.watchdog_ms) {
                out_push(
                    &mut out,
                    at(&["board", "watchdog_ms"]),
                    format!("expected 5…1000 ms, found {}", a.board.watchdog_ms),
                );
            }
            let h = &a.homing;
            for (key, v) in [
                ("seek_speed", h.seek_speed),
                ("touch_speed", h.touch_speed),
                ("seek_limit", h.seek_limit),
                ("timeout_s", h.timeout_s),
                ("hard_stop_duty", h.hard_stop_duty),
            ] {
                if !(v.is_finite() && v > 0.0) {
                    out_push(
                        &mut out,
                        at(&["homing", key]),
                        format!("expected a number > 0, found {v}"),
                    );
                }
            }
            if !(h.backoff.is_finite() && h.backoff >= 0.0) {
                out_push(
                    &mut out,
                    at(&["homing", "backoff"]),
                    format!("expected a number ≥ 0, found {}", h.backoff),
                );
            }
            if !h.mark_position.is_finite() {
                out_push(
                    &mut out,
                    at(&["homing", "mark_position"]),
                    "expected a finite number".to_owned(),
                );
            }
            if h.seek_speed > m.max_velocity || h.touch_speed > h.seek_speed {
                out_push(
                    &mut out,
                    at(&["homing", "seek_speed"]),
                    format!(
                        "expected touch_speed ({}) ≤ seek_speed ({}) ≤ motion.max_velocity ({})",
                        h.touch_speed, h.seek_speed, m.max_velocity
                    ),
                );
            }
            if h.hard_stop_duty > c.max_duty {
                out_push(
                    &mut out,
                    at(&["homing", "hard_stop_duty"]),
                    format!("expected ≤ controller.max_duty ({})", c.max_duty),
                );
            }
            let j = &a.jog;
            if j.steps.is_empty() || j.steps.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
                out_push(
                    &mut out,
                    at(&["jog", "steps"]),
                    "expected a non-empty list of numbers > 0".to_owned(),
                );
            }
            if j.speeds.is_empty()
                || j.speeds.iter().any(|v| !(v.is_finite() && *v > 0.0 && *v <= m.max_velocity))
            {
                out_push(
                    &mut out,
                    at(&["jog", "speeds"]),
                    format!(
                        "expected a non-empty list of speeds in 0 < v ≤ motion.max_velocity ({})",
                        m.max_velocity
                    ),
                );
            }
            for (key, v) in [
                ("unhomed_speed", j.unhomed_speed),
                ("first_step", j.first_step),
                ("repeat_window_s", j.repeat_window_s),
                ("deadman_s", j.deadman_s),
            ] {
                if !(v.is_finite() && v > 0.0) {
                    out_push(
                        &mut out,
                        at(&["jog", key]),
                        format!("expected a number > 0, found {v}"),
                    );
                }
            }
            if let TransportConfig::Sim(sim) = &a.transport {
                validate_plant(&sim.plant, &at(&["transport", "plant"]), &mut out);
                validate_sim_faults(&sim.faults, &at(&["transport", "faults"]), &mut out);
            }
            validate_derived(a, &at, &mut out);
        }
        out.extend(crate::spots::check(self));
        out
    }

    /// Homing groups in order: the configured ones, then every unlisted axis in one last
    /// group.
    pub fn homing_groups(&self) -> Vec<Vec<String>> {
        let mut groups: Vec<Vec<String>> =
            self.machine.home_sequence.iter().filter(|g| !g.is_empty()).cloned().collect();
        let rest: Vec<String> = self
            .axes
            .iter()
            .map(|a| a.name.clone())
            .filter(|n| !groups.iter().flatten().any(|g| g == n))
            .collect();
        if !rest.is_empty() {
            groups.push(rest);
        }
        groups
    }

    /// The axis called `name`.
    pub fn axis(&self, name: &str) -> Option<&AxisConfig> {
        self.axes.iter().find(|a| a.name == name)
    }
}

fn out_push(out: &mut Vec<Invalid>, path: Vec<String>, message: String) {
    out.push(Invalid { path, message });
}

/// Longest duration any timing key may hold, s. A bound keeps every duration convertible to
/// a timer (`1e20` s is not) and catches unit slips (ms typed as s).
pub const MAX_DURATION_S: f64 = 3600.0;

/// Checks that need the axis's own numbers: durations against the tick, the encoder-jump
/// threshold against the counts a tick brings at top speed, soft limits against the rail.
/// Each message says what would be sensible for this axis.
fn validate_derived(a: &AxisConfig, at: &dyn Fn(&[&str]) -> Vec<String>, out: &mut Vec<Invalid>) {
    let tick_hz = f64::from(a.board.tick_hz.max(1));
    let tick_s = 1.0 / tick_hz;
    let tick_ms = 1000.0 * tick_s;
    let l = &a.limits;
    let m = &a.motion;
    let j = &a.jog;
    let u = &a.scale.unit;
    // Durations: finite, at least `min_ticks` ticks (shorter cannot be observed at this tick
    // rate), at most an upper bound that still makes the rule mean something.
    let durations: [(&[&str], f64, f64, f64, &str); 11] = [
        (&["limits", "stall_timeout_s"], l.stall_timeout_s, 10.0 * tick_s, 10.0, "0.2…1 s"),
        (
            &["limits", "link_timeout_s"],
            l.link_timeout_s,
            3.0 * tick_s,
            5.0,
            "about 2 × the watchdog, e.g. 0.1 s",
        ),
        (&["limits", "runaway_timeout_s"], l.runaway_timeout_s, 3.0 * tick_s, 5.0, "0.02…0.1 s"),
        (&["limits", "settle_timeout_s"], l.settle_timeout_s, 10.0 * tick_s, 600.0, "1…5 s"),
        (
            &["limits", "thermal_time_s"],
            l.thermal_time_s,
            1.0,
            MAX_DURATION_S,
            "the winding's thermal time constant, typically 10…120 s",
        ),
        (
            &["homing", "timeout_s"],
            a.homing.timeout_s,
            1.0,
            MAX_DURATION_S,
            "a few times the slowest search over seek_limit",
        ),
        (
            &["jog", "deadman_s"],
            j.deadman_s,
            5.0 * tick_s,
            5.0,
            "a few key-repeat intervals, 0.1…0.3 s",
        ),
        (
            &["jog", "repeat_window_s"],
            j.repeat_window_s,
            5.0 * tick_s,
            10.0,
            "longer than the terminal's repeat delay, 0.5…1 s",
        ),
        (&["motion", "in_position_dwell_s"], m.in_position_dwell_s, 0.0, 60.0, "0.05…0.5 s"),
        (
            &["controller", "derivative_filter_s"],
            a.controller.derivative_filter_s,
            tick_s,
            10.0,
            "a few ticks, e.g. 0.002…0.01 s",
        ),
        (
            &["controller", "tracking_time_s"],
            a.controller.tracking_time_s,
            tick_s,
            100.0,
            "√(Ti·Td), e.g. 0.05 s",
        ),
    ];
    for (key, v, lo, hi, hint) in durations {
        if !(v.is_finite() && v >= lo && v <= hi) {
            out_push(
                out,
                at(key),
                format!(
                    "expected {lo:.3}…{hi} s (tick {tick_ms:.3} ms), found {v}; sensible: {hint}"
                ),
            );
        }
    }
    let wd_ticks = f64::from(a.board.watchdog_ms) / tick_ms;
    if wd_ticks < 2.0 {
        out_push(
            out,
            at(&["board", "watchdog_ms"]),
            format!(
                "the watchdog ({} ms) is shorter than two ticks ({:.1} ms): one late frame would \
                 cut the motor; sensible: 20…100 ms",
                a.board.watchdog_ms,
                2.0 * tick_ms
            ),
        );
    }
    // Counts one tick brings at top speed: an honest frame at full speed must never look
    // like a jump, so the threshold needs headroom over it (twice: overshoot, jitter).
    let counts_per_tick = m.max_velocity * a.scale.counts_per_unit * tick_s;
    if counts_per_tick.is_finite() {
        let floor = (2.0 * counts_per_tick).ceil().max(1.0);
        if f64::from(l.encoder_jump_counts) < floor {
            out_push(
                out,
                at(&["limits", "encoder_jump_counts"]),
                format!(
                    "{} counts is below twice what one tick brings at max_velocity ({counts_per_tick:.1} \
                     counts = {} {u}/s × {} counts/{u} / {} Hz); sensible: {} or more",
                    l.encoder_jump_counts,
                    m.max_velocity,
                    a.scale.counts_per_unit,
                    a.board.tick_hz,
                    (floor * 5.0).max(50.0)
                ),
            );
        }
    }
    let span = l.soft_max - l.soft_min;
    if span.is_finite() && span > 0.0 {
        if l.following_error.is_finite() && l.following_error > span {
            out_push(
                out,
                at(&["limits", "following_error"]),
                format!(
                    "a band of ±{} {u} is wider than the whole travel ({span} {u}): it could never \
                     trip; sensible: a few % of the travel, e.g. {:.3}",
                    l.following_error,
                    (span * 0.01).max(a.scale.counts_per_unit.recip() * 10.0)
                ),
            );
        }
        if m.max_velocity.is_finite() && m.max_velocity > 0.0 {
            // A move across the travel must end in a time a timer can hold.
            let crossing = span / m.max_velocity + m.max_velocity / m.max_acceleration;
            if !(crossing.is_finite() && crossing <= MAX_DURATION_S) {
                out_push(
                    out,
                    at(&["motion", "max_velocity"]),
                    format!(
                        "a move across the travel ({span} {u}) would take {crossing:.3e} s at {} {u}/s \
                         and {} {u}/s²; sensible: max_velocity and max_acceleration that cross it in seconds",
                        m.max_velocity, m.max_acceleration
                    ),
                );
            }
        }
    }
    if m.max_velocity.is_finite() && j.unhomed_speed > m.max_velocity {
        out_push(
            out,
            at(&["jog", "unhomed_speed"]),
            format!(
                "expected ≤ motion.max_velocity ({}), found {}; sensible: a slow creep, e.g. {}",
                m.max_velocity,
                j.unhomed_speed,
                m.max_velocity / 10.0
            ),
        );
    }
    let c = &a.controller;
    let breakaway = c.min_duty_forward.max(c.min_duty_reverse);
    if !(l.stall_margin_duty.is_finite() && (0.0..=100.0).contains(&l.stall_margin_duty)) {
        out_push(
            out,
            at(&["limits", "stall_margin_duty"]),
            format!("expected 0…100 %, found {}; sensible: 5…15 %", l.stall_margin_duty),
        );
    }
    if !(l.continuous_duty.is_finite()
        && l.continuous_duty > breakaway
        && l.continuous_duty <= 100.0)
    {
        out_push(
            out,
            at(&["limits", "continuous_duty"]),
            format!(
                "expected above the breakaway duty ({breakaway} %) and ≤ 100 %, found {}; \
                 sensible: the motor's rated continuous current × R / supply voltage, in %",
                l.continuous_duty
            ),
        );
    }
    match &a.transport {
        TransportConfig::Serial { device, baud } => {
            if device.trim().is_empty() {
                out_push(
                    out,
                    at(&["transport", "device"]),
                    "expected a device path, found an empty string; e.g. /dev/ttyACM0".to_owned(),
                );
            }
            if !(1200..=12_000_000).contains(baud) {
                out_push(
                    out,
                    at(&["transport", "baud"]),
                    format!(
                        "expected 1200…12000000 bit/s, found {baud}; sensible: 115200 or 921600"
                    ),
                );
            }
        }
        TransportConfig::Sim(sim) => validate_rail(a, &sim.plant, at, out),
    }
}

/// Soft limits of a simulated axis must lie on its rail. Where homing fixes the frame of
/// reference (a switch or an end stop), the rail's ends are known in axis units; otherwise
/// only the length of the travel can be compared.
fn validate_rail(
    a: &AxisConfig,
    p: &PlantParams,
    at: &dyn Fn(&[&str]) -> Vec<String>,
    out: &mut Vec<Invalid>,
) {
    let l = &a.limits;
    let u = &a.scale.unit;
    // Axis units per mm of carriage travel.
    let k = p.counts_per_mm() / a.scale.counts_per_unit;
    let rail = p.rail_length_mm * k;
    if !(k.is_finite() && k > 0.0 && rail.is_finite()) {
        return;
    }
    let sign = if a.scale.invert_encoder { -1.0 } else { 1.0 };
    let h = &a.homing;
    // Axis coordinate of the rail's lower end (mm 0), if homing pins it.
    let lower_end = match (h.method, p.home_switch_mm) {
        (HomingMethod::Switch, Some(sw)) => Some(h.mark_position - sign * sw * k),
        (HomingMethod::HardStop, _) => Some(match h.direction {
            SearchDirection::Negative => h.mark_position,
            SearchDirection::Positive => h.mark_position - sign * rail,
        }),
        _ => None,
    };
    // A little slack: the switch edge and the stop are not exact points.
    let slack = 0.02 * rail;
    let (lo, hi) = match lower_end {
        Some(e) => {
            let other = e + sign * rail;
            (e.min(other), e.max(other))
        }
        None => {
            let span = l.soft_max - l.soft_min;
            if span > rail + slack {
                out_push(
                    out,
                    at(&["limits", "soft_max"]),
                    format!(
                        "the soft travel ({span} {u}) is longer than the simulated rail \
                         ({rail:.3} {u} = {} mm); sensible: at most {:.3} {u}",
                        p.rail_length_mm, rail
                    ),
                );
            }
            return;
        }
    };
    for (key, v) in [("soft_min", l.soft_min), ("soft_max", l.soft_max)] {
        if v.is_finite() && (v < lo - slack || v > hi + slack) {
            out_push(
                out,
                at(&["limits", key]),
                format!(
                    "{v} {u} is off the simulated rail, which spans {lo:.3} … {hi:.3} {u} after \
                     homing ({} mm of rail, homing.mark_position {}); sensible: inside that range",
                    p.rail_length_mm, h.mark_position
                ),
            );
        }
    }
}

fn validate_sim_faults(f: &SimFaults, base: &[String], out: &mut Vec<Invalid>) {
    for (k, v) in [
        ("drop_frame_probability", f.drop_frame_probability),
        ("corrupt_frame_probability", f.corrupt_frame_probability),
    ] {
        if !(v.is_finite() && (0.0..=1.0).contains(&v)) {
            let mut path = base.to_vec();
            path.push(k.to_owned());
            out_push(out, path, format!("expected a probability 0…1, found {v}; e.g. 0.01"));
        }
    }
    for (k, v) in [("burst_ms", f.burst_ms), ("reply_delay_ms", f.reply_delay_ms)] {
        if v > 10_000 {
            let mut path = base.to_vec();
            path.push(k.to_owned());
            out_push(out, path, format!("expected 0…10000 ms, found {v}; e.g. 70"));
        }
    }
    if f.burst_ms > 0 && f.burst_every_ms <= f.burst_ms {
        let mut path = base.to_vec();
        path.push("burst_every_ms".to_owned());
        out_push(
            out,
            path,
            format!(
                "expected a period longer than burst_ms ({}), found {}; e.g. 1000",
                f.burst_ms, f.burst_every_ms
            ),
        );
    }
}

fn validate_plant(p: &PlantParams, base: &[String], out: &mut Vec<Invalid>) {
    let at = |k: &str| {
        let mut v = base.to_vec();
        v.push(k.to_owned());
        v
    };
    for (k, v) in [
        ("supply_v", p.supply_v),
        ("resistance_ohm", p.resistance_ohm),
        ("torque_constant", p.torque_constant),
        ("back_emf_constant", p.back_emf_constant),
        ("rotor_inertia", p.rotor_inertia),
        ("gear_ratio", p.gear_ratio),
        ("mm_per_output_rev", p.mm_per_output_rev),
        ("rail_length_mm", p.rail_length_mm),
    ] {
        if !(v.is_finite() && v > 0.0) {
            out_push(out, at(k), format!("expected a number > 0, found {v}"));
        }
    }
    for (k, v) in [
        ("inductance_h", p.inductance_h),
        ("viscous_friction", p.viscous_friction),
        ("carriage_mass_kg", p.carriage_mass_kg),
        ("coulomb_friction_n", p.coulomb_friction_n),
    ] {
        if !(v.is_finite() && v >= 0.0) {
            out_push(out, at(k), format!("expected a number ≥ 0, found {v}"));
        }
    }
    if !(p.static_friction_n.is_finite() && p.static_friction_n >= p.coulomb_friction_n) {
        out_push(
            out,
            at("static_friction_n"),
            format!(
                "expected ≥ coulomb_friction_n ({}), found {}",
                p.coulomb_friction_n, p.static_friction_n
            ),
        );
    }
    if !(0.0..1.0).contains(&p.driver_deadband) {
        out_push(
            out,
            at("driver_deadband"),
            format!("expected 0 ≤ x < 1, found {}", p.driver_deadband),
        );
    }
    if p.encoder_counts_per_rev == 0 {
        out_push(out, at("encoder_counts_per_rev"), "expected a whole number > 0".to_owned());
    }
    if !(0.0..=p.rail_length_mm).contains(&p.start_mm) {
        out_push(
            out,
            at("start_mm"),
            format!("expected 0…rail_length_mm ({}), found {}", p.rail_length_mm, p.start_mm),
        );
    }
    if let Some(h) = p.home_switch_mm {
        if !(0.0..=p.rail_length_mm).contains(&h) {
            out_push(
                out,
                at("home_switch_mm"),
                format!("expected 0…rail_length_mm ({}), found {h}", p.rail_length_mm),
            );
        }
    }
}

fn keys(k: &[&str]) -> Vec<String> {
    k.iter().map(|s| (*s).to_owned()).collect()
}

/// `axis.1.limits.soft_max` → `axis "y" limits.soft_max`, which is what a person looks for.
fn display_path(path: &[String], cfg: &MachineConfig) -> String {
    if path.first().map(String::as_str) == Some("axis") {
        if let Some(i) = path.get(1).and_then(|s| s.parse::<usize>().ok()) {
            let name = cfg.axes.get(i).map_or("?", |a| a.name.as_str());
            return format!("[[axis]] {:?}: {}", name, path[2..].join("."));
        }
    }
    path.join(".")
}

/// 1-based line and column (in characters) of a byte offset.
pub(crate) fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = &text[..offset];
    let line = before.matches('\n').count() + 1;
    let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, col)
}

/// Line and column of the key at `path` (or of the nearest parent that exists); numeric
/// parts index arrays of tables.
/// Keys renamed to words of our own, old → new: the old names are still read for one
/// release (serde aliases), with a warning naming the new key.
pub const RENAMED_KEYS: [(&str, &str); 5] = [
    ("search_velocity", "seek_speed"),
    ("latch_velocity", "touch_speed"),
    ("home_offset", "mark_position"),
    ("max_travel", "seek_limit"),
    ("homing_order", "home_sequence"),
];

/// A warning for every old key name `text` uses.
fn renamed_keys(text: &str, source_name: &str) -> Vec<String> {
    let Ok(doc) = text.parse::<toml::Table>() else { return Vec::new() };
    let say = |table: &str, old: &str, new: &str| {
        format!(
            "{source_name}: {table}{old} is now {table}{new} (the old name is read until the next \
             release; rename it)"
        )
    };
    let mut out = Vec::new();
    let find = |t: &toml::Table, table: &str, out: &mut Vec<String>| {
        for (old, new) in RENAMED_KEYS {
            if t.contains_key(old) {
                out.push(say(table, old, new));
            }
        }
    };
    if let Some(m) = doc.get("machine").and_then(toml::Value::as_table) {
        find(m, "machine.", &mut out);
    }
    for a in doc.get("axis").and_then(toml::Value::as_array).into_iter().flatten() {
        let name = a.get("name").and_then(toml::Value::as_str).unwrap_or("?");
        if let Some(h) = a.get("homing").and_then(toml::Value::as_table) {
            find(h, &format!("axis {name:?} homing."), &mut out);
        }
    }
    out
}

/// The parser's type names in words a person reads ("expected f64" → "expected a number").
fn plain_words(message: &str) -> String {
    [
        ("expected f64", "expected a number"),
        ("expected u64", "expected a whole number"),
        ("expected u32", "expected a whole number"),
        ("expected u16", "expected a whole number"),
        ("expected u8", "expected a whole number"),
        ("expected i64", "expected a whole number"),
        ("expected a boolean", "expected true or false"),
        ("expected struct ", "expected a table "),
        ("expected a sequence", "expected a list [ … ]"),
    ]
    .iter()
    .fold(message.to_owned(), |m, (from, to)| m.replace(from, to))
}

fn locate(text: &str, path: &[String]) -> Option<(usize, usize)> {
    let doc = toml_edit::Document::parse(text).ok()?;
    let mut best = None;
    let mut table: &dyn toml_edit::TableLike = doc.as_table();
    let mut parts = path.iter().peekable();
    while let Some(part) = parts.next() {
        let Some((key, item)) = table.get_key_value(part) else { break };
        if let Some(s) = key.span().or_else(|| item.span()) {
            best = Some(line_col(text, s.start));
        }
        if let toml_edit::Item::ArrayOfTables(arr) = item {
            let Some(t) =
                parts.next().and_then(|i| i.parse::<usize>().ok()).and_then(|i| arr.get(i))
            else {
                break;
            };
            if let Some(s) = t.span() {
                best = Some(line_col(text, s.start));
            }
            table = t;
            continue;
        }
        match item.as_table_like() {
            Some(t) => table = t,
            None => break,
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_config_is_valid() {
        let cfg = MachineConfig::demo().expect("embedded demo parses");
        assert_eq!(cfg.axes.len(), 3);
        assert_eq!(cfg.homing_groups(), vec![vec!["z".to_owned()], vec!["x".into(), "y".into()]]);
    }

    #[test]
    fn a_configuration_survives_a_toml_round_trip() {
        let cfg = MachineConfig::demo().expect("demo");
        let text = toml::to_string(&cfg).expect("serialises");
        let back = MachineConfig::from_toml_str(&text, "round trip").expect("parses back");
        assert_eq!(cfg, back);
    }

    #[test]
    fn unlisted_axes_home_last_together() {
        let mut cfg = MachineConfig::demo().expect("demo");
        cfg.machine.home_sequence = vec![vec!["y".into()]];
        assert_eq!(cfg.homing_groups(), vec![vec!["y".to_owned()], vec!["x".into(), "z".into()]]);
        cfg.machine.home_sequence = vec![vec!["y".into()], vec!["y".into(), "q".into()]];
        let bad = cfg.validate();
        assert!(bad.iter().any(|b| b.message.contains("listed twice")), "{bad:?}");
        assert!(bad.iter().any(|b| b.message.contains("no axis called \"q\"")), "{bad:?}");
    }

    /// Sets one key of the demo's X axis in the TOML text and returns every problem found.
    fn problems_with(edit: &str, with: &str) -> Vec<Problem> {
        let text = DEMO_CONFIG.replacen(edit, with, 1);
        assert_ne!(text, DEMO_CONFIG, "{edit} is in the demo");
        match MachineConfig::from_toml_str(&text, "t.toml") {
            Err(ConfigError::Invalid { problems, .. }) => problems,
            other => panic!("{with}: expected Invalid, got {other:?}"),
        }
    }

    // Each value below was accepted before and then panicked or made supervision meaningless
    // at run time. The bounds are servotty's own (common practice, no source).
    #[test]
    fn values_that_cannot_work_are_refused_with_key_and_line() {
        let cases: &[(&str, &str, &str)] = &[
            ("link_timeout_s = 0.1", "link_timeout_s = 1e20", "limits.link_timeout_s"),
            ("link_timeout_s = 0.1", "link_timeout_s = 1000.0", "limits.link_timeout_s"),
            ("link_timeout_s = 0.1", "link_timeout_s = 0.0005", "limits.link_timeout_s"),
            ("timeout_s = 60.0", "timeout_s = 1e308", "homing.timeout_s"),
            ("unhomed_speed = 15.0", "unhomed_speed = 15.0\ndeadman_s = 1e308", "jog.deadman_s"),
            ("encoder_jump_counts = 200", "encoder_jump_counts = 0", "limits.encoder_jump_counts"),
            ("encoder_jump_counts = 200", "encoder_jump_counts = 5", "limits.encoder_jump_counts"),
            ("stall_timeout_s = 0.5", "stall_timeout_s = 1e9", "limits.stall_timeout_s"),
            ("following_error = 3.0", "following_error = 1e308", "limits.following_error"),
            ("soft_max = 1200.0", "soft_max = 5000.0", "limits.soft_max"),
            ("unhomed_speed = 15.0", "unhomed_speed = 500.0", "jog.unhomed_speed"),
            ("[axis.board]\ntick_hz = 1000", "[axis.transport.faults]\ndrop_frame_probability = 2.0\n[axis.board]\ntick_hz = 1000", "drop_frame_probability"),
            ("[axis.board]\ntick_hz = 1000", "[axis.transport.faults]\ncorrupt_frame_probability = -1.0\n[axis.board]\ntick_hz = 1000", "corrupt_frame_probability"),
            ("[axis.board]\ntick_hz = 1000", "[axis.transport.faults]\ndrop_frame_probability = nan\n[axis.board]\ntick_hz = 1000", "drop_frame_probability"),
        ];
        for (from, to, key) in cases {
            let p = problems_with(from, to);
            let hit =
                p.iter().find(|p| p.key.contains(key)).unwrap_or_else(|| panic!("{to}: {p:?}"));
            assert!(hit.line > 1, "{to}: located {hit:?}");
            assert!(hit.message.contains("sensible") || hit.message.contains("e.g."), "{hit:?}");
        }
    }

    #[test]
    fn a_watchdog_shorter_than_two_ticks_is_refused() {
        let text = DEMO_CONFIG.replacen("tick_hz = 1000", "tick_hz = 100", 1).replacen(
            "watchdog_ms = 50",
            "watchdog_ms = 15",
            1,
        );
        let Err(ConfigError::Invalid { problems, .. }) = MachineConfig::from_toml_str(&text, "t")
        else {
            panic!("accepted a 15 ms watchdog at 100 Hz");
        };
        assert!(problems.iter().any(|p| p.key.contains("board.watchdog_ms")), "{problems:?}");
    }

    #[test]
    fn a_serial_device_needs_a_path_and_a_baud_rate() {
        let mut cfg = MachineConfig::demo().expect("demo");
        cfg.axes[0].transport = TransportConfig::Serial { device: String::new(), baud: 0 };
        let bad = cfg.validate();
        assert!(bad.iter().any(|b| b.path.ends_with(&keys(&["transport", "device"]))), "{bad:?}");
        assert!(bad.iter().any(|b| b.path.ends_with(&keys(&["transport", "baud"]))), "{bad:?}");
    }

    #[test]
    fn every_problem_is_listed_not_only_the_first() {
        let text = DEMO_CONFIG
            .replacen("stall_timeout_s = 0.5", "stall_timeout_s = 1e9", 1)
            .replacen("encoder_jump_counts = 200", "encoder_jump_counts = 0", 1)
            .replacen("soft_max = 600.0", "soft_max = -10.0", 1);
        let err = MachineConfig::from_toml_str(&text, "t.toml").expect_err("refused");
        let ConfigError::Invalid { problems, .. } = &err else { panic!("{err:?}") };
        assert!(problems.len() >= 3, "{problems:?}");
        let shown = err.to_string();
        assert!(shown.lines().count() >= 4, "{shown}");
        assert!(shown.contains("problems in t.toml"), "{shown}");
    }

    #[test]
    fn a_non_utf8_byte_names_its_line() {
        let dir = tempfile::tempdir().expect("tempdir");
        let p = dir.path().join("latin1.toml");
        let mut bytes = b"[machine]\nname = \"serre\"\n# caf".to_vec();
        bytes.push(0xe9);
        bytes.extend_from_slice(b"\n");
        std::fs::write(&p, bytes).expect("write");
        let err = MachineConfig::load(&p).expect_err("refused");
        let ConfigError::Parse { line, column, message, .. } = &err else { panic!("{err:?}") };
        assert_eq!((*line, *column), (3, 6), "{err}");
        assert!(message.contains("0xe9") && message.contains("UTF-8"), "{err}");
    }
}
