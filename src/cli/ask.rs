//! Asking the operator before an axis moves.
//!
//! A command that moves an axis first says what will move, then without `--yes` asks
//! `[y/N]` on a terminal; with no terminal to ask on (a script, a pipe) it refuses, so
//! nothing ever moves unconfirmed.

use std::io::{BufRead as _, IsTerminal as _, Write as _};

use crate::cli::Failure;

/// The operator's answer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Answer {
    /// Go ahead.
    Yes,
    /// Typed anything but y/yes, or closed the input.
    No,
    /// No terminal to ask on.
    NoTerminal,
}

/// Asks `question [y/N]` on stderr and reads one line from stdin.
pub fn confirm(question: &str) -> Answer {
    if !(std::io::stdin().is_terminal() && std::io::stderr().is_terminal()) {
        return Answer::NoTerminal;
    }
    eprint!("{question} [y/N] ");
    let _ = std::io::stderr().flush();
    let mut line = String::new();
    match std::io::stdin().lock().read_line(&mut line) {
        Ok(_) if is_yes(&line) => Answer::Yes,
        _ => Answer::No,
    }
}

/// Prints `plan` on stderr (what will move, how far) and, unless `yes`, asks to go ahead.
///
/// # Errors
/// [`Failure::Usage`] when the operator says no, or there is no terminal to ask on.
pub fn go_ahead(yes: bool, plan: &str) -> Result<(), Failure> {
    eprintln!("servotty: {plan}");
    if yes {
        return Ok(());
    }
    match confirm("Go ahead?") {
        Answer::Yes => Ok(()),
        Answer::No => Err(Failure::Usage("nothing moved".to_owned())),
        Answer::NoTerminal => Err(Failure::Usage(
            "nothing moved; no terminal to ask on: add --yes to go ahead".to_owned(),
        )),
    }
}

/// `y` or `yes` in any case; everything else (including an empty line) is no.
fn is_yes(line: &str) -> bool {
    matches!(line.trim().to_lowercase().as_str(), "y" | "yes")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_an_explicit_yes_is_yes() {
        assert!(is_yes("y\n") && is_yes(" YES ") && is_yes("Yes"));
        assert!(!is_yes("\n") && !is_yes("n") && !is_yes("yep") && !is_yes(""));
    }
}
