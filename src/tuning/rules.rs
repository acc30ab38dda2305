//! Tuning rules from the ultimate gain and period (Ku, Tu), and the conversion of their
//! ideal-form results to servotty's parallel gains.
//!
//! # Forms
//! The rules give the *ideal* (ISA) form `C(s) = Kc·(1 + 1/(Ti·s) + Td·s)`. servotty's PID is
//! parallel, `kp·e + ki·∫e − kd·ẏ` (derivative on the measurement), so `kp = Kc`,
//! `ki = Kc/Ti`, `kd = Kc·Td`; with Ku in %/unit, kp is in %/unit, ki in %/(unit·s) and kd in
//! %·s/unit, as in `[axis.controller]`.
//!
//! # Sources
//! - J. G. Ziegler and N. B. Nichols, "Optimum settings for automatic controllers",
//!   *Trans. ASME* 64, 1942, 759–768: P `Kc = 0.5 Ku`; PI `Kc = 0.45 Ku`, `Ti = Tu/1.2`;
//!   PID `Kc = 0.6 Ku`, `Ti = Tu/2`, `Td = Tu/8`.
//! - Tyreus–Luyben, as tabulated in D. E. Seborg, T. F. Edgar and D. A. Mellichamp, *Process
//!   Dynamics and Control*, 2nd ed., Wiley 2004, Table 12.6: PI `Kc = Ku/3.2`, `Ti = 2.2 Tu`;
//!   PID `Kc = Ku/2.2`, `Ti = 2.2 Tu`, `Td = Tu/6.3`.
//!
//! Ziegler–Nichols aims at a quarter-amplitude decay and overshoots a lot; Tyreus–Luyben is
//! the conservative choice (less gain, much slower integral).

use serde::Serialize;

/// A published rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Rule {
    /// Ziegler–Nichols, P only.
    ZieglerNicholsP,
    /// Ziegler–Nichols, PI.
    ZieglerNicholsPi,
    /// Ziegler–Nichols, PID.
    ZieglerNicholsPid,
    /// Tyreus–Luyben, PI.
    TyreusLuybenPi,
    /// Tyreus–Luyben, PID.
    TyreusLuybenPid,
}

impl Rule {
    /// Every rule, for menus and tables.
    pub const ALL: [Rule; 5] = [
        Rule::ZieglerNicholsP,
        Rule::ZieglerNicholsPi,
        Rule::ZieglerNicholsPid,
        Rule::TyreusLuybenPi,
        Rule::TyreusLuybenPid,
    ];

    /// Short name for the command line and reports (`zn-p`, `zn-pi`, `zn-pid`, `tl-pi`,
    /// `tl-pid`).
    pub fn name(self) -> &'static str {
        match self {
            Rule::ZieglerNicholsP => "zn-p",
            Rule::ZieglerNicholsPi => "zn-pi",
            Rule::ZieglerNicholsPid => "zn-pid",
            Rule::TyreusLuybenPi => "tl-pi",
            Rule::TyreusLuybenPid => "tl-pid",
        }
    }

    /// Where the rule is published.
    pub fn source(self) -> &'static str {
        match self {
            Rule::ZieglerNicholsP | Rule::ZieglerNicholsPi | Rule::ZieglerNicholsPid => {
                "Ziegler & Nichols, Trans. ASME 64, 1942"
            }
            Rule::TyreusLuybenPi | Rule::TyreusLuybenPid => {
                "Tyreus-Luyben, in Seborg, Edgar & Mellichamp, Process Dynamics and Control, \
                 2nd ed., Table 12.6"
            }
        }
    }
}

impl std::str::FromStr for Rule {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Rule::ALL.into_iter().find(|r| r.name() == s).ok_or_else(|| {
            let names: Vec<&str> = Rule::ALL.iter().map(|r| r.name()).collect();
            format!("unknown rule {s:?}; expected one of {}", names.join(", "))
        })
    }
}

/// Ideal-form PID settings `Kc·(1 + 1/(Ti s) + Td s)`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IdealPid {
    /// Controller gain Kc, output unit per process-output unit.
    pub kc: f64,
    /// Integral time Ti, s; `None` for no integral action.
    pub ti_s: Option<f64>,
    /// Derivative time Td, s (0 for none).
    pub td_s: f64,
}

/// servotty's parallel gains (`[axis.controller]` kp, ki, kd).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ParallelGains {
    /// %/unit.
    pub kp: f64,
    /// %/(unit·s).
    pub ki: f64,
    /// %·s/unit.
    pub kd: f64,
}

impl IdealPid {
    /// `kp = Kc`, `ki = Kc/Ti` (0 without integral), `kd = Kc·Td`.
    pub fn to_parallel(&self) -> ParallelGains {
        ParallelGains {
            kp: self.kc,
            ki: self.ti_s.map_or(0.0, |ti| self.kc / ti),
            kd: self.kc * self.td_s,
        }
    }
}

/// The rule's settings for an ultimate gain `ku` and ultimate period `tu_s` (module docs).
pub fn from_ultimate(rule: Rule, ku: f64, tu_s: f64) -> IdealPid {
    match rule {
        Rule::ZieglerNicholsP => IdealPid { kc: 0.5 * ku, ti_s: None, td_s: 0.0 },
        Rule::ZieglerNicholsPi => IdealPid { kc: 0.45 * ku, ti_s: Some(tu_s / 1.2), td_s: 0.0 },
        Rule::ZieglerNicholsPid => {
            IdealPid { kc: 0.6 * ku, ti_s: Some(tu_s / 2.0), td_s: tu_s / 8.0 }
        }
        Rule::TyreusLuybenPi => IdealPid { kc: ku / 3.2, ti_s: Some(2.2 * tu_s), td_s: 0.0 },
        Rule::TyreusLuybenPid => {
            IdealPid { kc: ku / 2.2, ti_s: Some(2.2 * tu_s), td_s: tu_s / 6.3 }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip() {
        for r in Rule::ALL {
            assert_eq!(r.name().parse::<Rule>(), Ok(r));
        }
        assert!("zn".parse::<Rule>().is_err());
    }

    // Ideal → parallel: kp = Kc, ki = Kc/Ti, kd = Kc·Td (K. J. Åström and T. Hägglund, PID
    // Controllers: Theory, Design and Tuning, 2nd ed., ISA 1995, ch. 3, forms of the PID).
    #[test]
    fn ideal_to_parallel() {
        let g = IdealPid { kc: 4.0, ti_s: Some(2.0), td_s: 0.5 }.to_parallel();
        assert_eq!(g, ParallelGains { kp: 4.0, ki: 2.0, kd: 2.0 });
        let p = IdealPid { kc: 4.0, ti_s: None, td_s: 0.0 }.to_parallel();
        assert_eq!(p, ParallelGains { kp: 4.0, ki: 0.0, kd: 0.0 });
    }
}
