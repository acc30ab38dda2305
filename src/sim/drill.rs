//! Fault drills: faults injected into running simulated boards by a typed command, so an
//! operator can rehearse a trip and see that the limits catch it before a real machine
//! would need them to. `servotty sim --pty` reads these commands on its standard input.
//!
//! A command is one line, `WHAT AXIS [VALUE]` (or `clear all`, `help`):
//!
//! | command | fault |
//! |---|---|
//! | `jam AXIS` | the carriage jams where it is (`jam AXIS off` frees it) |
//! | `jam AXIS at MM` | the carriage jams when it reaches MM on its rail |
//! | `slip AXIS FRACTION` | the belt slips: FRACTION (0…1) of the motor's motion is lost |
//! | `reverse AXIS` | motor leads swapped (`reverse AXIS off` undoes it) |
//! | `glitch AXIS COUNTS` | the encoder count jumps by COUNTS once |
//! | `cut AXIS` | the link is cut both ways (`cut AXIS off` restores it) |
//! | `blackout AXIS MS` | the link goes dark for MS milliseconds, then comes back |
//! | `lossy AXIS PROBABILITY` | each telemetry frame is lost with PROBABILITY (0…1) |
//! | `sag AXIS FRACTION` | the supply sags: FRACTION (0…1) of its voltage is lost |
//! | `fault AXIS` | the driver stage reports a fault (`fault AXIS off` clears it) |
//! | `clear AXIS` / `clear all` | every drill fault off |
//!
//! Parsing is pure ([`parse`]); [`apply`] acts on a board handle, which the board reads at
//! its next tick (a jam at a position is armed there too, so nothing else needs to run).
//! Drills exist only for simulated boards: nothing here can reach a real one.

use crate::sim::board::{LinkFaults, SimBoardHandle};

/// One drill.
#[derive(Debug, Clone, PartialEq)]
pub enum Drill {
    /// Jam (true) or free (false) where the carriage is.
    Jam(bool),
    /// Jam when the carriage reaches this rail position, mm.
    JamAt(f64),
    /// Belt slip fraction.
    Slip(f64),
    /// Motor leads swapped or not.
    Reverse(bool),
    /// One encoder jump, counts.
    Glitch(i64),
    /// Link cut or restored.
    Cut(bool),
    /// Link dark for this many ms.
    Blackout(u32),
    /// Frame loss probability.
    Lossy(f64),
    /// Fraction of the supply voltage lost.
    Sag(f64),
    /// The driver stage reports a fault (true) or not.
    DriverFault(bool),
    /// Every drill fault off.
    Clear,
}

/// A parsed command: which axis (None = all) and what.
#[derive(Debug, Clone, PartialEq)]
pub struct Command {
    /// Axis name, or None for every axis (`clear all`).
    pub axis: Option<String>,
    /// The drill.
    pub drill: Drill,
}

/// The command list, for `help` and errors.
pub const HELP: &str = "drills: jam AXIS [off|at MM] · slip AXIS FRACTION · reverse AXIS [off] · \
     glitch AXIS COUNTS · cut AXIS [off] · blackout AXIS MS · lossy AXIS PROBABILITY · \
     sag AXIS FRACTION · fault AXIS [off] · clear AXIS|all";

/// Parses one line.
///
/// # Errors
/// A sentence saying what is wrong and what the commands are.
pub fn parse(line: &str) -> Result<Command, String> {
    let words: Vec<&str> = line.split_whitespace().collect();
    let (what, axis, rest) = match words.as_slice() {
        [w, a, rest @ ..] => (*w, (*a).to_owned(), rest),
        [w] => return Err(format!("{w}: name an axis ({HELP})")),
        [] => return Err(HELP.to_owned()),
    };
    let on = |rest: &[&str]| match rest {
        [] | ["on"] => Ok(true),
        ["off"] => Ok(false),
        _ => Err(format!(
            "{what}: expected nothing, on or off after the axis, found {:?}",
            rest.join(" ")
        )),
    };
    let number = |rest: &[&str], what_value: &str| -> Result<f64, String> {
        match rest {
            [v] => v
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| format!("{what}: {v:?} is not a number ({what_value})")),
            _ => Err(format!("{what}: give {what_value}")),
        }
    };
    let fraction = |x: f64| {
        if (0.0..=1.0).contains(&x) {
            Ok(x)
        } else {
            Err(format!("{what}: {x} is outside 0…1"))
        }
    };
    let drill = match what {
        "jam" => match rest {
            ["at", mm] => Drill::JamAt(number(&[mm], "a rail position in mm")?),
            _ => Drill::Jam(on(rest)?),
        },
        "slip" => Drill::Slip(fraction(number(rest, "a fraction 0…1")?)?),
        "reverse" => Drill::Reverse(on(rest)?),
        "glitch" => {
            let c = number(rest, "a count jump")?;
            if c.fract() != 0.0 || c.abs() > 1e9 {
                return Err(format!("glitch: {c} is not a whole count"));
            }
            Drill::Glitch(c as i64)
        }
        "cut" => Drill::Cut(on(rest)?),
        "blackout" => {
            let ms = number(rest, "milliseconds")?;
            if !(ms > 0.0 && ms <= 60_000.0) {
                return Err(format!("blackout: {ms} ms is outside 1…60000"));
            }
            Drill::Blackout(ms.round() as u32)
        }
        "lossy" => Drill::Lossy(fraction(number(rest, "a probability 0…1")?)?),
        "sag" => Drill::Sag(fraction(number(rest, "a fraction 0…1")?)?),
        "fault" => Drill::DriverFault(on(rest)?),
        "clear" if rest.is_empty() => Drill::Clear,
        _ => return Err(format!("unknown drill {what:?} ({HELP})")),
    };
    let axis = if drill == Drill::Clear && axis == "all" { None } else { Some(axis) };
    Ok(Command { axis, drill })
}

/// Applies `drill` to one board; returns what it did, in words. A [`Drill::JamAt`] arms a jam
/// that the board springs at the tick its carriage reaches the position.
pub fn apply(board: &SimBoardHandle, drill: &Drill) -> String {
    let mut pf = board.plant_faults();
    let lf = board.link_faults();
    match *drill {
        Drill::Jam(on) => {
            pf.blocked = on;
            board.set_plant_faults(pf);
            if on {
                "jammed where it is".into()
            } else {
                "jam freed".into()
            }
        }
        Drill::JamAt(mm) => {
            pf.jam_at_mm = Some(mm);
            board.set_plant_faults(pf);
            format!("will jam at {mm} mm on its rail")
        }
        Drill::Slip(f) => {
            pf.belt_slip = f;
            board.set_plant_faults(pf);
            format!("belt slips {:.0} %", f * 100.0)
        }
        Drill::Reverse(on) => {
            pf.reversed_motor = on;
            board.set_plant_faults(pf);
            if on {
                "motor leads swapped".into()
            } else {
                "motor leads right".into()
            }
        }
        Drill::Glitch(c) => {
            pf.encoder_offset_counts += c;
            board.set_plant_faults(pf);
            format!("encoder jumped {c} counts")
        }
        Drill::Cut(on) => {
            board.set_link_faults(LinkFaults { cut: on, ..lf });
            if on {
                "link cut".into()
            } else {
                "link restored".into()
            }
        }
        Drill::Blackout(ms) => {
            board.black_out(ms);
            format!("link dark for {ms} ms")
        }
        Drill::Lossy(p) => {
            board.set_link_faults(LinkFaults { drop_probability: p, ..lf });
            format!("losing {:.0} % of frames", p * 100.0)
        }
        Drill::Sag(f) => {
            pf.supply_sag = f;
            board.set_plant_faults(pf);
            format!("supply sags {:.0} %", f * 100.0)
        }
        Drill::DriverFault(on) => {
            board.set_driver_fault(on);
            if on {
                "driver stage reports a fault".into()
            } else {
                "driver fault cleared".into()
            }
        }
        Drill::Clear => {
            // The encoder's offset stays: a count that jumped does not jump back.
            let offset = pf.encoder_offset_counts;
            board.set_plant_faults(crate::sim::plant::PlantFaults {
                encoder_offset_counts: offset,
                ..Default::default()
            });
            board.set_link_faults(LinkFaults::default());
            board.set_driver_fault(false);
            "drill faults off".into()
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn commands_parse_and_bad_ones_say_why() {
        assert_eq!(parse("jam x").expect("jam").drill, Drill::Jam(true));
        assert_eq!(parse("jam x off").expect("free").drill, Drill::Jam(false));
        assert_eq!(parse("jam y at 300").expect("at").drill, Drill::JamAt(300.0));
        assert_eq!(parse("slip x 0.3").expect("slip").drill, Drill::Slip(0.3));
        assert_eq!(parse("glitch z -150").expect("glitch").drill, Drill::Glitch(-150));
        assert_eq!(parse("blackout x 70").expect("dark").drill, Drill::Blackout(70));
        assert_eq!(parse("lossy x 0.25").expect("lossy").drill, Drill::Lossy(0.25));
        assert_eq!(parse("sag x 0.4").expect("sag").drill, Drill::Sag(0.4));
        assert_eq!(parse("fault x").expect("fault").drill, Drill::DriverFault(true));
        assert_eq!(parse("fault x off").expect("fault off").drill, Drill::DriverFault(false));
        assert_eq!(parse("clear all").expect("clear"), Command { axis: None, drill: Drill::Clear });
        for bad in [
            "",
            "jam",
            "slip x 2",
            "slip x NaN",
            "glitch x 1.5",
            "blackout x 0",
            "fly x",
            "jam x maybe",
            "sag x 1.5",
            "fault x 3",
        ] {
            assert!(parse(bad).is_err(), "{bad:?} accepted");
        }
    }

    #[tokio::test(start_paused = true)]
    async fn drills_reach_the_board() {
        let cfg = crate::config::MachineConfig::demo().expect("demo");
        let crate::config::TransportConfig::Sim(sim) = &cfg.axes[0].transport else {
            panic!("simulated")
        };
        let (_link, board) = crate::sim::board::spawn_in_process(
            &sim.plant,
            &crate::config::SimFaults::default(),
            1,
        );
        apply(&board, &Drill::Jam(true));
        apply(&board, &Drill::Lossy(0.5));
        assert!(board.plant_faults().blocked);
        assert!((board.link_faults().drop_probability - 0.5).abs() < 1e-12);
        apply(&board, &Drill::Glitch(40));
        apply(&board, &Drill::Sag(0.5));
        apply(&board, &Drill::DriverFault(true));
        apply(&board, &Drill::JamAt(300.0));
        assert!(board.driver_fault());
        assert_eq!(board.plant_faults().jam_at_mm, Some(300.0));
        apply(&board, &Drill::Clear);
        assert!(!board.plant_faults().blocked);
        assert!(!board.driver_fault());
        assert_eq!(board.plant_faults().jam_at_mm, None);
        assert!(board.plant_faults().supply_sag == 0.0);
        assert_eq!(board.plant_faults().encoder_offset_counts, 40);
        assert_eq!(board.link_faults(), LinkFaults::default());
    }
}
