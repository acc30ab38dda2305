//! Links to boards, behind one small trait.
//!
//! A [`Link`] knows how to (re)open the byte stream to one board; the axis task owns the
//! stream it returns, and nothing else reads or writes it. Failures are typed
//! ([`LinkError`]) and each kind carries its retry policy ([`LinkError::retry`]): a board
//! that is unplugged is looked for again every second, a path that is not a serial device or
//! a board that speaks another protocol version is reported once and not retried.
//!
//! - [`serial`]: serial devices (USB CDC or UART), read through [`tty`] (one read(2) per
//!   readiness event, no EAGAIN reads);
//! - [`once`]: a stream handed over once (the in-process simulator, tests);
//! - [`factory`]: builds an axis's link from its configuration — the only place that knows
//!   every kind. A network link would be one more file here plus one configuration variant
//!   and one arm in the factory.

pub mod factory;
pub mod once;
pub mod serial;
pub mod tty;

use std::time::Duration;

use futures::future::BoxFuture;
use tokio::io::{AsyncRead, AsyncWrite};

pub use factory::{build, BuiltLink};
pub use once::OnceLink;
pub use serial::{open_serial, SerialLink};

/// Any byte stream an axis can talk protocol v1 over.
pub trait BoardStream: AsyncRead + AsyncWrite + Send + Unpin + 'static {}
impl<T: AsyncRead + AsyncWrite + Send + Unpin + 'static> BoardStream for T {}

/// A boxed board stream.
pub type BoxStream = Box<dyn BoardStream>;

/// A way to reach one board.
pub trait Link: Send + Sync + 'static {
    /// Opens (or reopens) the stream. Whatever blocks (system calls of a device open) runs
    /// off the calling thread, so the future can be awaited on the engine's thread.
    fn open(&self) -> BoxFuture<'static, Result<BoxStream, LinkError>>;

    /// A short description for screens and logs, e.g. `serial /dev/ttyACM0 at 921600 bit/s`.
    fn describe(&self) -> String;
}

/// What to do after a link failure.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Retry {
    /// Try again after this pause.
    After(Duration),
    /// Trying again cannot help (the configuration or the board must change): report it
    /// once and stay offline.
    Never,
}

/// Why a link could not be opened, or ended.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum LinkError {
    /// The device path does not exist (unplugged, or a different name).
    #[error("{device}: no such device (is the board plugged in? its stable name is under /dev/serial/by-id/: `ls -l /dev/serial/by-id/`)")]
    NotFound {
        /// Device path.
        device: String,
    },
    /// The user may not open the device.
    #[error("{device}: permission denied (add your user to the group that owns it, usually `dialout`: `sudo usermod -aG dialout $USER`, then log in again)")]
    PermissionDenied {
        /// Device path.
        device: String,
    },
    /// Another program holds the device.
    #[error("{device}: in use by another program (servotty opens ports exclusively so that two programs never drive one axis)")]
    Busy {
        /// Device path.
        device: String,
    },
    /// The path exists but is not a serial device (`/dev/null`, a file, a directory).
    #[error("{device}: not a serial device (give the board's port, e.g. one listed by `ls -l /dev/serial/by-id/`)")]
    NotSerial {
        /// Device path.
        device: String,
    },
    /// An open link went away (unplugged, the device closed, a read error).
    #[error("{detail}")]
    Vanished {
        /// What was seen, in the system's words.
        detail: String,
    },
    /// The board answered Hello with another protocol version.
    #[error("the board speaks protocol v{board}, servotty speaks v{host} (update the board's firmware or servotty so that they match)")]
    ProtocolMismatch {
        /// The board's version.
        board: u8,
        /// Ours.
        host: u8,
    },
    /// The board did not answer in time, or did not take a write in time.
    #[error("{what}")]
    TimedOut {
        /// What did not happen in time.
        what: String,
    },
    /// Any other failure to open or configure the device.
    #[error("{device}: {message}")]
    Other {
        /// Device path.
        device: String,
        /// The system's words.
        message: String,
    },
    /// A link handed over once (the in-process simulator) was used and cannot be reopened.
    #[error("the simulated board's link is closed")]
    Used,
}

/// The former name of [`LinkError`].
pub type TransportError = LinkError;

/// Pause before looking for a board again after most failures.
const RETRY_PAUSE: Duration = Duration::from_secs(1);
/// Permission changes need the operator (and usually a new login): look less often.
const PERMISSION_RETRY_PAUSE: Duration = Duration::from_secs(5);

impl LinkError {
    /// The retry policy of this kind of failure.
    pub fn retry(&self) -> Retry {
        match self {
            // Hot-plug, another program letting go, a board that restarts: look again.
            Self::NotFound { .. }
            | Self::Busy { .. }
            | Self::Vanished { .. }
            | Self::TimedOut { .. }
            | Self::Other { .. } => Retry::After(RETRY_PAUSE),
            Self::PermissionDenied { .. } => Retry::After(PERMISSION_RETRY_PAUSE),
            // Reopening gives the same answer until a person changes the configuration or
            // the firmware: report once, do not retry every second.
            Self::NotSerial { .. } | Self::ProtocolMismatch { .. } | Self::Used => Retry::Never,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn failures_a_person_must_fix_are_not_retried() {
        let never = [
            LinkError::NotSerial { device: "/dev/null".into() },
            LinkError::ProtocolMismatch { board: 2, host: 1 },
            LinkError::Used,
        ];
        for e in never {
            assert_eq!(e.retry(), Retry::Never, "{e}");
        }
        let again = [
            LinkError::NotFound { device: "/dev/ttyACM0".into() },
            LinkError::Busy { device: "/dev/ttyACM0".into() },
            LinkError::Vanished { detail: "device closed".into() },
            LinkError::TimedOut { what: "the board did not answer Hello".into() },
        ];
        for e in again {
            assert!(matches!(e.retry(), Retry::After(p) if p <= Duration::from_secs(1)), "{e}");
        }
        assert!(matches!(
            LinkError::PermissionDenied { device: "/dev/ttyACM0".into() }.retry(),
            Retry::After(_)
        ));
    }

    #[test]
    fn a_mismatch_names_both_versions() {
        let e = LinkError::ProtocolMismatch { board: 2, host: 1 };
        assert!(e.to_string().contains("v2") && e.to_string().contains("v1"), "{e}");
    }
}
