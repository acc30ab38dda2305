//! Signals that end a command from outside: SIGINT (Ctrl-C in a shell, `kill -INT`),
//! SIGTERM (`timeout`, systemd, `kill`) and SIGHUP (an SSH session or terminal going away).
//!
//! Every command treats the three alike: it stops waiting, turns every motor off through the
//! normal shutdown (stop frames go out), says so on stderr and in the event log, and exits
//! with the shell's convention for death by that signal, 128 + its number, so scripts can
//! tell an interruption from a trip: 130 (INT), 143 (TERM), 129 (HUP).
//!
//! Handlers are installed before the machine starts, so a signal that arrives while the links
//! come up is not lost (and does not kill the process with motors running).

/// Which signal asked the command to end.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Interrupt {
    /// SIGINT.
    Int,
    /// SIGTERM.
    Term,
    /// SIGHUP.
    Hup,
}

impl Interrupt {
    /// The signal's name, e.g. `SIGTERM`.
    pub fn name(self) -> &'static str {
        match self {
            Self::Int => "SIGINT",
            Self::Term => "SIGTERM",
            Self::Hup => "SIGHUP",
        }
    }

    /// The exit code: 128 + the signal number (POSIX numbers: HUP 1, INT 2, TERM 15).
    pub fn exit_code(self) -> u8 {
        match self {
            Self::Int => 130,
            Self::Term => 143,
            Self::Hup => 129,
        }
    }
}

/// The three handlers, installed.
pub struct Signals {
    #[cfg(unix)]
    int: tokio::signal::unix::Signal,
    #[cfg(unix)]
    term: tokio::signal::unix::Signal,
    #[cfg(unix)]
    hup: tokio::signal::unix::Signal,
}

impl Signals {
    /// Installs the handlers. Must run inside a tokio runtime.
    ///
    /// # Errors
    /// When the OS refuses a handler.
    pub fn install() -> std::io::Result<Self> {
        #[cfg(unix)]
        {
            use tokio::signal::unix::{signal, SignalKind};
            Ok(Self {
                int: signal(SignalKind::interrupt())?,
                term: signal(SignalKind::terminate())?,
                hup: signal(SignalKind::hangup())?,
            })
        }
        #[cfg(not(unix))]
        Ok(Self {})
    }

    /// Resolves with the next of the three signals.
    pub async fn recv(&mut self) -> Interrupt {
        #[cfg(unix)]
        {
            tokio::select! {
                _ = self.int.recv() => Interrupt::Int,
                _ = self.term.recv() => Interrupt::Term,
                _ = self.hup.recv() => Interrupt::Hup,
            }
        }
        #[cfg(not(unix))]
        {
            let _ = tokio::signal::ctrl_c().await;
            Interrupt::Int
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // 128 + signal number is the POSIX shell's exit status for a command killed by a signal
    // (IEEE Std 1003.1, Shell Command Language, 2.8.2 "Exit Status for Commands"); the
    // numbers HUP 1, INT 2, TERM 15 are the ones POSIX fixes for `kill -s`.
    #[test]
    fn exit_codes_follow_the_shell_convention() {
        assert_eq!(Interrupt::Hup.exit_code(), 128 + 1);
        assert_eq!(Interrupt::Int.exit_code(), 128 + 2);
        assert_eq!(Interrupt::Term.exit_code(), 128 + 15);
    }
}
