//! The diagnosis test matrix: every fault the simulator can produce, injected during moves at
//! several speeds on the demo gantry's X axis and on configurations nobody tuned the rules
//! for (other carriage mass, friction, gains), in simulated time. The diagnosis of the trip
//! capture (read back from its file) must name the injected cause; a slipping belt, which
//! one motor-side encoder cannot see, must be answered with the honest "cannot tell".
//!
//! `cargo test --test diagnosis_matrix -- --nocapture` prints the confusion matrix that
//! docs/reading-a-trip.md reports.

use std::collections::BTreeMap;
use std::time::Duration;

use servotty::config::{HomingMethod, MachineConfig, TransportConfig};
use servotty::diagnosis::{diagnose, CaptureFile, Cause, Diagnosis, TripRecord};
use servotty::engine::axis::Reply;
use servotty::engine::recorder::RecorderPaths;
use servotty::engine::{AxisCommand, AxisState, EventKind, Machine};
use servotty::sim::board::LinkFaults;
use servotty::sim::plant::PlantFaults;

/// What is injected.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum Fault {
    Jam,
    JamAt,
    Saturation,
    GainTooLow,
    CutLink,
    LossyLink,
    EncoderGlitch,
    EncoderJump,
    ReversedMotor,
    LinkBlackout,
    DriverTrip,
    SupplySag,
    BeltSlip,
}

impl Fault {
    /// The cause the diagnosis must name.
    fn expected(self) -> Cause {
        match self {
            Self::Jam | Self::JamAt => Cause::Jam,
            Self::Saturation => Cause::Saturation,
            Self::GainTooLow => Cause::GainTooLow,
            Self::CutLink | Self::LossyLink => Cause::LinkTrouble,
            Self::EncoderGlitch | Self::EncoderJump => Cause::EncoderFault,
            Self::ReversedMotor => Cause::Wiring,
            Self::LinkBlackout => Cause::BoardWatchdog,
            Self::DriverTrip => Cause::DriverFault,
            // Seen as the motor getting weaker mid-move; the record has no volts to say why.
            Self::SupplySag => Cause::WeakerDrive,
            Self::BeltSlip => Cause::Undetermined,
        }
    }
}

/// A configuration the rules were not written against.
#[derive(Debug, Clone, Copy)]
struct Variant {
    name: &'static str,
    mass_kg: f64,
    friction_scale: f64,
    gain_scale: f64,
}

const VARIANTS: [Variant; 3] = [
    Variant { name: "demo", mass_kg: 1.5, friction_scale: 1.0, gain_scale: 1.0 },
    Variant {
        name: "heavy, sticky, soft gains",
        mass_kg: 4.0,
        friction_scale: 1.8,
        gain_scale: 0.6,
    },
    Variant {
        name: "light, slick, stiff gains",
        mass_kg: 0.6,
        friction_scale: 0.5,
        gain_scale: 1.5,
    },
];

/// The X axis alone, homed by declaration (the matrix is about moves, not homing).
fn config(v: Variant, speed: f64, fault: Fault) -> MachineConfig {
    let mut cfg = MachineConfig::demo().expect("demo");
    cfg.axes.retain(|a| a.name == "x");
    let a = &mut cfg.axes[0];
    a.homing.method = HomingMethod::None;
    a.motion.max_velocity = speed;
    a.controller.kp *= v.gain_scale;
    a.controller.ki *= v.gain_scale;
    a.controller.kd *= v.gain_scale;
    if let TransportConfig::Sim(s) = &mut a.transport {
        s.plant.carriage_mass_kg = v.mass_kg;
        s.plant.coulomb_friction_n *= v.friction_scale;
        s.plant.static_friction_n *= v.friction_scale;
    }
    match fault {
        Fault::Saturation => {
            // More speed than the motor has (about 255 mm/s with no load at 12 V): the
            // profile runs away from the carriage with the duty at its limit.
            a.motion.max_velocity = 300.0 + speed / 2.0;
        }
        Fault::GainTooLow => {
            a.controller.kp = 1.5;
            a.controller.ki = 0.0;
            a.controller.kd = 0.0;
            a.controller.ff_velocity = 0.0;
            a.controller.ff_acceleration = 0.0;
            a.controller.ff_static = 0.0;
        }
        _ => {}
    }
    cfg
}

/// What one run gave.
struct Outcome {
    diagnosis: Diagnosis,
    tripped: bool,
    /// The carriage on its rail at the end, and before the move, mm.
    trip_mm: f64,
    start_mm: f64,
}

async fn run(v: Variant, speed: f64, fault: Fault) -> Outcome {
    let cfg = config(v, speed, fault);
    let dir = tempfile::tempdir().expect("tempdir");
    let paths = RecorderPaths {
        captures_dir: dir.path().join("captures"),
        event_log: dir.path().join("events.jsonl"),
    };
    let m = Machine::start_with(&cfg, &[], Some(paths)).expect("starts");
    let h = m.handle();
    assert!(h.wait_linked(Duration::from_secs(2)).await.is_empty());
    h.home(Some(&["x".to_owned()])).await.expect("homes");
    let sim = m.sim("x").expect("sim");
    let x = h.axis("x").expect("x").clone();
    let mut events = h.events();
    if fault == Fault::ReversedMotor {
        sim.set_plant_faults(PlantFaults { reversed_motor: true, ..Default::default() });
    }
    let start = x.snapshot().position;
    let start_mm = sim.view().position_mm;
    if fault == Fault::JamAt {
        // Armed before the move, sprung by the board where the carriage gets to: 300 mm on,
        // at cruise for every speed here.
        let rail = sim.view().position_mm + 300.0;
        sim.set_plant_faults(PlantFaults { jam_at_mm: Some(rail), ..Default::default() });
    }
    x.send(AxisCommand::MoveTo(start + 600.0)).await.expect("move accepted");
    // Into the move: at speed for most faults.
    let mut rx = x.watch();
    let cruise = 0.8 * cfg.axes[0].motion.max_velocity.min(speed);
    let _ = tokio::time::timeout(
        Duration::from_secs(3),
        rx.wait_for(|s| s.velocity > cruise || s.state == AxisState::Tripped),
    )
    .await;
    match fault {
        Fault::Jam => sim.set_plant_faults(PlantFaults { blocked: true, ..Default::default() }),
        Fault::EncoderGlitch => {
            sim.set_plant_faults(PlantFaults { encoder_offset_counts: 150, ..Default::default() })
        }
        Fault::EncoderJump => {
            sim.set_plant_faults(PlantFaults { encoder_offset_counts: 1000, ..Default::default() })
        }
        Fault::BeltSlip => {
            sim.set_plant_faults(PlantFaults { belt_slip: 0.3, ..Default::default() })
        }
        Fault::CutLink => sim.set_link_faults(LinkFaults { cut: true, ..Default::default() }),
        Fault::LossyLink => {
            sim.set_link_faults(LinkFaults { drop_probability: 0.3, ..Default::default() })
        }
        Fault::DriverTrip => sim.set_driver_fault(true),
        Fault::SupplySag => {
            // At cruise (past the profile's acceleration), so the record shows the motor
            // before and after. Four fifths of the supply gone: a fifth of the motor's speed is left, below
            // every cruise speed here.
            tokio::time::sleep(Duration::from_millis(150)).await;
            sim.set_plant_faults(PlantFaults { supply_sag: 0.8, ..Default::default() });
        }
        Fault::LinkBlackout => {
            // 70 ms dark: longer than the board's 50 ms watchdog, shorter than the host's
            // 100 ms link timeout.
            sim.set_link_faults(LinkFaults { cut: true, ..Default::default() });
            tokio::time::sleep(Duration::from_millis(70)).await;
            sim.set_link_faults(LinkFaults::default());
        }
        _ => {}
    }
    // A jam armed ahead trips once the carriage gets there.
    let wait = if fault == Fault::JamAt { 2.0 + 300.0 / speed } else { 2.0 };
    let tripped = tokio::time::timeout(
        Duration::from_secs_f64(wait),
        rx.wait_for(|s| s.state == AxisState::Tripped),
    )
    .await
    .is_ok();
    let rec = if tripped {
        let path = loop {
            let ev = tokio::time::timeout(Duration::from_secs(5), events.recv())
                .await
                .expect("capture event in time")
                .expect("event");
            if let EventKind::Capture { path } = ev.kind {
                break path;
            }
        };
        let text = std::fs::read_to_string(&path).expect("capture");
        if let Some(keep) = std::env::var_os("DIAGNOSIS_KEEP") {
            // For docs and for looking at a case by hand.
            let name = format!("{}-{speed}-{fault:?}.csv", v.name.replace([' ', ','], ""));
            let _ = std::fs::create_dir_all(&keep);
            let keep = std::path::Path::new(&keep);
            let _ = std::fs::write(keep.join(&name), &text);
            // The sidecar says what tripped and how the axis was configured.
            let sidecar = std::path::Path::new(&path).with_extension("json");
            let _ = std::fs::copy(sidecar, keep.join(name).with_extension("json"));
        }
        CaptureFile::read(std::path::Path::new(&path)).expect("parses").record(None).expect("x")
    } else {
        // No trip: what the operator would ask of the history on screen.
        let Ok(Reply::History(rows)) = x.send(AxisCommand::History).await else {
            panic!("history")
        };
        TripRecord::from_history(&cfg.axes[0], rows, None)
    };
    let trip_mm = sim.view().position_mm;
    m.shutdown().await;
    Outcome { diagnosis: diagnose(&rec), tripped, trip_mm, start_mm }
}

#[tokio::test(start_paused = true)]
async fn every_injected_fault_is_named() {
    let faults = [
        Fault::Jam,
        Fault::JamAt,
        Fault::Saturation,
        Fault::GainTooLow,
        Fault::CutLink,
        Fault::LossyLink,
        Fault::EncoderGlitch,
        Fault::EncoderJump,
        Fault::ReversedMotor,
        Fault::LinkBlackout,
        Fault::DriverTrip,
        Fault::SupplySag,
        Fault::BeltSlip,
    ];
    let speeds = [60.0, 120.0, 180.0];
    let mut matrix: BTreeMap<(Fault, Cause), usize> = BTreeMap::new();
    let mut wrong = Vec::new();
    for v in VARIANTS {
        for &f in &faults {
            for &speed in &speeds {
                let o = run(v, speed, f).await;
                let d = &o.diagnosis;
                *matrix.entry((f, d.cause)).or_default() += 1;
                let ok = match f {
                    // Unobservable: no claim of a cause, and the record says what it cannot see.
                    Fault::BeltSlip => {
                        (d.cause == Cause::Undetermined || d.cause == Cause::LightLoad)
                            && d.cannot_tell.iter().any(|c| c.contains("belt"))
                    }
                    // Named as a weaker drive, and the record says it cannot see the supply.
                    Fault::SupplySag => {
                        d.cause == f.expected()
                            && !d.ambiguous
                            && d.cannot_tell.iter().any(|c| c.contains("supply sagged"))
                    }
                    // The jam sprang where it was armed, not anywhere.
                    Fault::JamAt => {
                        d.cause == f.expected()
                            && !d.ambiguous
                            && (o.trip_mm - o.start_mm - 300.0).abs() < 5.0
                    }
                    _ => d.cause == f.expected() && !d.ambiguous,
                };
                if !ok {
                    wrong.push(format!(
                        "{} @ {speed} mm/s, {f:?} (tripped {}): {}",
                        v.name,
                        o.tripped,
                        if std::env::var_os("DIAGNOSIS_FULL").is_some() {
                            d.to_text()
                        } else {
                            d.to_text().lines().take(3).collect::<Vec<_>>().join(" / ")
                        }
                    ));
                }
            }
        }
    }
    println!("confusion matrix (rows: injected, columns: named; 3 speeds × 3 configurations):");
    let named: Vec<Cause> = {
        let mut c: Vec<Cause> = matrix.keys().map(|k| k.1).collect();
        c.sort();
        c.dedup();
        c
    };
    println!("| injected | {} |", named.iter().map(|c| c.words()).collect::<Vec<_>>().join(" | "));
    println!("|---|{}", "---|".repeat(named.len()));
    for &f in &faults {
        let cells: Vec<String> = named
            .iter()
            .map(|c| matrix.get(&(f, *c)).map_or(String::new(), usize::to_string))
            .collect();
        println!("| {f:?} | {} |", cells.join(" | "));
    }
    assert!(wrong.is_empty(), "{} misdiagnosed:\n{}", wrong.len(), wrong.join("\n"));
}
