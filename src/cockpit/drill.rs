//! The cockpit's fault-drill menu: what it offers and how a typed choice becomes a drill.
//!
//! The menu opens (key `!`) only on an axis whose board is simulated in process; the drills
//! are the ones `servotty sim --pty` takes on its standard input ([`crate::sim::drill`]), each
//! behind one letter with a value to rehearse with. The one difference: "jam at" takes a
//! position in the axis's own units, as the operator sees it, and the machine side turns it
//! into a place on the simulated rail ([`rail_mm`]).
//!
//! Pure: parsing and the conversion are tested here; drawing is in
//! [`crate::cockpit::ui::drill`].

use crate::config::{AxisConfig, TransportConfig};
use crate::sim::drill::Drill;

/// What the key says on an axis with a real board.
pub const ONLY_SIMULATED: &str = "drills exist only for simulated axes";

/// A chosen drill, as the cockpit sends it.
#[derive(Debug, Clone, PartialEq)]
pub enum Pick {
    /// A drill as the simulated board takes it.
    Board(Drill),
    /// Jam when the axis reaches this position, in axis units.
    JamAtPosition(f64),
}

/// One line of the menu.
#[derive(Debug, Clone, Copy)]
pub struct Item {
    /// The letter that picks it.
    pub letter: char,
    /// What follows the letter, as help ("" when nothing).
    pub value: &'static str,
    /// What it does.
    pub words: &'static str,
}

/// The menu, in the order drawn.
pub const MENU: &[Item] = &[
    Item { letter: 'j', value: "", words: "jam where the carriage is" },
    Item { letter: 'a', value: "POS", words: "jam when the axis reaches POS" },
    Item { letter: 'b', value: "[0.3]", words: "belt slips (fraction of motion lost)" },
    Item { letter: 'r', value: "", words: "motor leads swapped" },
    Item { letter: 'g', value: "[150]", words: "encoder jumps (counts)" },
    Item { letter: 'k', value: "", words: "cut the link" },
    Item { letter: 'o', value: "[0.3]", words: "lossy link (share of frames lost)" },
    Item { letter: 'd', value: "[70]", words: "link dark for a while (ms)" },
    Item { letter: 's', value: "[0.8]", words: "supply sags (share of voltage lost)" },
    Item { letter: 'f', value: "", words: "driver stage reports a fault" },
    Item { letter: 'c', value: "", words: "clear every drill fault" },
];

/// How a choice is typed, for the menu. Space is stop-all in every prompt, so the value
/// follows its letter with no space.
pub const HOW: &str = "letter and value together, e.g. a250 or s0.5";

/// Parses a typed choice: a letter from [`MENU`], then at once its value if it takes one (the
/// one in brackets when left out). `j`, `r`, `k` and `f` take `off` to undo (`roff`).
///
/// # Errors
/// A sentence saying what is wrong.
pub fn parse(text: &str) -> Result<Pick, String> {
    let text = text.trim();
    let mut chars = text.chars();
    let Some(letter) = chars.next() else {
        return Err(format!("type a letter from the list ({HOW}), then Enter"));
    };
    let value_text = chars.as_str().trim();
    let rest: Vec<&str> = value_text.split_whitespace().collect();
    let rest = rest.as_slice();
    let toggle = |rest: &[&str]| match rest {
        [] | ["on"] => Ok(true),
        ["off"] => Ok(false),
        _ => Err(format!("{letter}: nothing or off after it, not {:?}", rest.join(" "))),
    };
    let value = |rest: &[&str], default: f64, what: &str| -> Result<f64, String> {
        match rest {
            [] => Ok(default),
            [v] => v
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| format!("{letter}: {v:?} is not a number ({what})")),
            _ => Err(format!("{letter}: one value ({what}), e.g. {letter}{default}")),
        }
    };
    let fraction = |x: f64| {
        if (0.0..=1.0).contains(&x) {
            Ok(x)
        } else {
            Err(format!("{letter}: {x} is outside 0…1"))
        }
    };
    let board = |d: Drill| Ok(Pick::Board(d));
    match letter {
        'j' => board(Drill::Jam(toggle(rest)?)),
        'a' => match rest {
            [_] => Ok(Pick::JamAtPosition(value(rest, 0.0, "a position")?)),
            _ => Err("a: the position to jam at follows the letter, e.g. a250".to_owned()),
        },
        'b' => board(Drill::Slip(fraction(value(rest, 0.3, "a fraction 0…1")?)?)),
        'r' => board(Drill::Reverse(toggle(rest)?)),
        'g' => {
            let c = value(rest, 150.0, "counts")?;
            if c.fract() != 0.0 || c.abs() > 1e9 {
                return Err(format!("g: {c} is not a whole count"));
            }
            board(Drill::Glitch(c as i64))
        }
        'k' => board(Drill::Cut(toggle(rest)?)),
        'o' => board(Drill::Lossy(fraction(value(rest, 0.3, "a fraction 0…1")?)?)),
        'd' => {
            let ms = value(rest, 70.0, "milliseconds")?;
            if !(1.0..=60_000.0).contains(&ms) {
                return Err(format!("d: {ms} ms is outside 1…60000"));
            }
            board(Drill::Blackout(ms.round() as u32))
        }
        's' => board(Drill::Sag(fraction(value(rest, 0.8, "a fraction 0…1")?)?)),
        'f' => board(Drill::DriverFault(toggle(rest)?)),
        'c' if rest.is_empty() => board(Drill::Clear),
        _ => Err(format!("{text:?}: not in the list ({HOW})")),
    }
}

/// Where on the simulated rail (mm from its lower stop) the axis is at `target`, given that
/// it is at `now` (axis units) while the carriage is at `now_mm`. None when the axis is not
/// simulated or its scale is unusable.
pub fn rail_mm(axis: &AxisConfig, now: f64, now_mm: f64, target: f64) -> Option<f64> {
    let TransportConfig::Sim(sim) = &axis.transport else { return None };
    let per_mm = sim.plant.counts_per_mm();
    let per_unit = axis.scale.counts_per_unit;
    if !(per_mm.is_finite() && per_mm > 0.0 && per_unit.is_finite() && per_unit != 0.0) {
        return None;
    }
    let sign = if axis.scale.invert_encoder { -1.0 } else { 1.0 };
    Some(now_mm + (target - now) * per_unit * sign / per_mm)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn letters_parse_with_their_defaults_and_bad_ones_say_why() {
        assert_eq!(parse("j"), Ok(Pick::Board(Drill::Jam(true))));
        assert_eq!(parse("j off"), Ok(Pick::Board(Drill::Jam(false))));
        assert_eq!(parse("a250"), Ok(Pick::JamAtPosition(250.0)));
        assert_eq!(parse(" a 250 "), Ok(Pick::JamAtPosition(250.0)));
        assert_eq!(parse("a-12.5"), Ok(Pick::JamAtPosition(-12.5)));
        assert_eq!(parse("b"), Ok(Pick::Board(Drill::Slip(0.3))));
        assert_eq!(parse("b0.5"), Ok(Pick::Board(Drill::Slip(0.5))));
        assert_eq!(parse("g-40"), Ok(Pick::Board(Drill::Glitch(-40))));
        assert_eq!(parse("d"), Ok(Pick::Board(Drill::Blackout(70))));
        assert_eq!(parse("s"), Ok(Pick::Board(Drill::Sag(0.8))));
        assert_eq!(parse("foff"), Ok(Pick::Board(Drill::DriverFault(false))));
        assert_eq!(parse("c"), Ok(Pick::Board(Drill::Clear)));
        for bad in ["", "a", "ax", "b2", "g1.5", "d0", "jam", "z", "kmaybe", "c3", "oNaN"] {
            assert!(parse(bad).is_err(), "{bad:?} accepted");
        }
        // Every letter in the menu parses (with a value where one is needed).
        for item in MENU {
            let text = if item.letter == 'a' { "a1".to_owned() } else { item.letter.to_string() };
            assert!(parse(&text).is_ok(), "{text}");
        }
    }

    #[test]
    fn a_position_maps_onto_the_rail() {
        let cfg = crate::config::MachineConfig::demo().expect("demo");
        let x = &cfg.axes[0];
        let TransportConfig::Sim(sim) = &x.transport else { panic!("simulated") };
        let k = x.scale.counts_per_unit / sim.plant.counts_per_mm();
        let at = rail_mm(x, 100.0, 140.0, 150.0).expect("simulated");
        assert!((at - (140.0 + 50.0 * k)).abs() < 1e-9, "{at}");
        let mut inverted = x.clone();
        inverted.scale.invert_encoder = true;
        let at = rail_mm(&inverted, 100.0, 140.0, 150.0).expect("simulated");
        assert!((at - (140.0 - 50.0 * k)).abs() < 1e-9, "{at}");
    }
}
