//! Property: any configuration that `check` accepts can run. The engine starts, links, homes
//! and makes a short move and a jog on the simulator (simulated time) without a panic in any
//! task. Configurations are the demo's X axis with some keys set to extreme values (zero,
//! negative, tiny, huge, NaN, infinity, or scaled); most are refused, and those accepted must
//! work. Servotty's own contract (brief.md: bad input gets an error, never a panic).

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Once;
use std::time::Duration;

use proptest::prelude::*;
use servotty::config::{AxisConfig, MachineConfig};
use servotty::engine::{AxisCommand, Machine};

static PANICS: AtomicUsize = AtomicUsize::new(0);
static HOOK: Once = Once::new();

/// Counts panics anywhere in the process, including spawned axis tasks whose panics would
/// otherwise only end that task.
fn count_panics() {
    HOOK.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            PANICS.fetch_add(1, Ordering::SeqCst);
            previous(info);
        }));
    });
}

/// Keys a person can set to a number, with a setter on the X axis.
type Setter = fn(&mut AxisConfig, f64);

fn setters() -> Vec<(&'static str, Setter)> {
    vec![
        ("limits.following_error", |a, v| a.limits.following_error = v),
        ("limits.following_error_per_velocity", |a, v| a.limits.following_error_per_velocity = v),
        ("limits.stall_duty", |a, v| a.limits.stall_duty = v),
        ("limits.stall_timeout_s", |a, v| a.limits.stall_timeout_s = v),
        ("limits.link_timeout_s", |a, v| a.limits.link_timeout_s = v),
        ("limits.runaway_duty", |a, v| a.limits.runaway_duty = v),
        ("limits.runaway_timeout_s", |a, v| a.limits.runaway_timeout_s = v),
        ("limits.settle_timeout_s", |a, v| a.limits.settle_timeout_s = v),
        ("limits.continuous_duty", |a, v| a.limits.continuous_duty = v),
        ("limits.thermal_time_s", |a, v| a.limits.thermal_time_s = v),
        ("limits.stall_margin_duty", |a, v| a.limits.stall_margin_duty = v),
        ("limits.soft_min", |a, v| a.limits.soft_min = v),
        ("limits.soft_max", |a, v| a.limits.soft_max = v),
        ("limits.encoder_jump_counts", |a, v| {
            a.limits.encoder_jump_counts = v.clamp(0.0, 4e9) as u32
        }),
        ("motion.max_velocity", |a, v| a.motion.max_velocity = v),
        ("motion.max_acceleration", |a, v| a.motion.max_acceleration = v),
        ("motion.in_position_band", |a, v| a.motion.in_position_band = v),
        ("motion.in_position_dwell_s", |a, v| a.motion.in_position_dwell_s = v),
        ("homing.seek_speed", |a, v| a.homing.seek_speed = v),
        ("homing.touch_speed", |a, v| a.homing.touch_speed = v),
        ("homing.backoff", |a, v| a.homing.backoff = v),
        ("homing.mark_position", |a, v| a.homing.mark_position = v),
        ("homing.seek_limit", |a, v| a.homing.seek_limit = v),
        ("homing.timeout_s", |a, v| a.homing.timeout_s = v),
        ("jog.unhomed_speed", |a, v| a.jog.unhomed_speed = v),
        ("jog.first_step", |a, v| a.jog.first_step = v),
        ("jog.repeat_window_s", |a, v| a.jog.repeat_window_s = v),
        ("jog.deadman_s", |a, v| a.jog.deadman_s = v),
        ("controller.kp", |a, v| a.controller.kp = v),
        ("controller.ki", |a, v| a.controller.ki = v),
        ("controller.kd", |a, v| a.controller.kd = v),
        ("controller.derivative_filter_s", |a, v| a.controller.derivative_filter_s = v),
        ("controller.tracking_time_s", |a, v| a.controller.tracking_time_s = v),
        ("controller.max_duty", |a, v| a.controller.max_duty = v),
        ("controller.min_duty_forward", |a, v| a.controller.min_duty_forward = v),
        ("controller.ff_velocity", |a, v| a.controller.ff_velocity = v),
        ("scale.counts_per_unit", |a, v| a.scale.counts_per_unit = v),
        ("board.tick_hz", |a, v| a.board.tick_hz = v.clamp(0.0, 65535.0) as u16),
        ("board.watchdog_ms", |a, v| a.board.watchdog_ms = v.clamp(0.0, 65535.0) as u16),
    ]
}

/// A value: an extreme, or the present value scaled.
#[derive(Debug, Clone, Copy)]
enum Value {
    Fixed(f64),
    Scaled(f64),
}

fn value() -> impl Strategy<Value = Value> {
    prop_oneof![
        prop::sample::select(vec![
            0.0,
            -1.0,
            1e-300,
            1e-6,
            0.5,
            3.0,
            100.0,
            1e6,
            1e20,
            1e308,
            f64::NAN,
            f64::INFINITY
        ])
        .prop_map(Value::Fixed),
        prop::sample::select(vec![0.01, 0.1, 0.5, 0.9, 1.1, 2.0, 10.0, 1000.0])
            .prop_map(Value::Scaled),
    ]
}

/// The present value of a key, read back through the TOML of the axis.
fn current(a: &AxisConfig, key: &str) -> f64 {
    let v = toml::Value::try_from(a).expect("serialises");
    let mut at = &v;
    for part in key.split('.') {
        match at.get(part) {
            Some(x) => at = x,
            None => return 1.0,
        }
    }
    at.as_float().or_else(|| at.as_integer().map(|i| i as f64)).unwrap_or(1.0)
}

fn one_axis_demo() -> MachineConfig {
    let mut cfg = MachineConfig::demo().expect("demo");
    cfg.axes.truncate(1);
    cfg.machine.home_sequence.clear();
    // Named positions name the other axes too.
    cfg.spots = servotty::spots::Spots::default();
    cfg
}

/// Link, home, enable, a short move and a jog, then shut down, all in simulated time.
async fn exercise(cfg: MachineConfig) {
    let m = Machine::start(&cfg, &[]).expect("an accepted configuration starts");
    let h = m.handle();
    let _ = h.wait_linked(Duration::from_secs(2)).await;
    let _ = tokio::time::timeout(Duration::from_secs(8), h.home(None)).await;
    if let Some(x) = h.axis("x") {
        let _ = x.send(AxisCommand::Enable).await;
        let p = x.snapshot().position;
        let _ = x.send(AxisCommand::MoveTo(p + 1.0)).await;
        tokio::time::sleep(Duration::from_secs(1)).await;
        let _ = x.send(AxisCommand::JogPulse { direction: 1, speed: 5.0 }).await;
        tokio::time::sleep(Duration::from_millis(300)).await;
        let _ = x.send(AxisCommand::JogPulse { direction: 1, speed: 5.0 }).await;
        tokio::time::sleep(Duration::from_secs(1)).await;
        let _ = x.send(AxisCommand::Stop).await;
        tokio::time::sleep(Duration::from_millis(500)).await;
    }
    m.shutdown().await;
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]

    #[test]
    fn an_accepted_configuration_runs_without_a_panic(
        edits in prop::collection::vec((0usize..39, value()), 1..4)
    ) {
        count_panics();
        let table = setters();
        let mut cfg = one_axis_demo();
        let mut said = Vec::new();
        for (k, v) in &edits {
            let (key, set) = table[k % table.len()];
            let x = match v {
                Value::Fixed(x) => *x,
                Value::Scaled(f) => current(&cfg.axes[0], key) * f,
            };
            set(&mut cfg.axes[0], x);
            said.push(format!("{key} = {x}"));
        }
        // What `check` does: serialise, parse and validate the text.
        let Ok(text) = toml::to_string(&cfg) else { return Ok(()) };
        let Ok(accepted) = MachineConfig::from_toml_str(&text, "generated") else { return Ok(()) };
        let before = PANICS.load(Ordering::SeqCst);
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .start_paused(true)
            .build()
            .expect("runtime");
        rt.block_on(exercise(accepted));
        prop_assert_eq!(PANICS.load(Ordering::SeqCst), before, "panicked with {:?}", said);
    }
}

const EXTREMES: [f64; 9] = [0.0, -1.0, 1e-300, 1e-6, 1e6, 1e20, 1e308, f64::NAN, f64::INFINITY];

/// Every key alone at every extreme value: exhaustive where the property test samples.
#[test]
fn every_key_at_every_extreme_runs_or_is_refused() {
    count_panics();
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .start_paused(true)
        .build()
        .expect("runtime");
    let mut ran = 0;
    for (key, set) in setters() {
        for x in EXTREMES {
            let mut cfg = one_axis_demo();
            set(&mut cfg.axes[0], x);
            let Ok(text) = toml::to_string(&cfg) else { continue };
            let Ok(accepted) = MachineConfig::from_toml_str(&text, "generated") else { continue };
            let before = PANICS.load(Ordering::SeqCst);
            rt.block_on(exercise(accepted));
            assert_eq!(PANICS.load(Ordering::SeqCst), before, "panicked with {key} = {x}");
            ran += 1;
        }
    }
    assert!(ran > 30, "only {ran} configurations were accepted: the test would prove little");
}
