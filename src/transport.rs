//! Links to boards: opening serial devices and the in-process simulator, behind one byte
//! stream type, with errors a person can act on.
//!
//! The axis task owns its stream; nothing else reads or writes it. A [`Connector`] knows how
//! to (re)open the link so that a board that vanishes and comes back can be relinked.

use std::sync::Mutex;

use tokio::io::{AsyncRead, AsyncWrite};

/// Any byte stream an axis can talk protocol v1 over.
pub trait BoardStream: AsyncRead + AsyncWrite + Send + Unpin + 'static {}
impl<T: AsyncRead + AsyncWrite + Send + Unpin + 'static> BoardStream for T {}

/// A boxed board stream.
pub type BoxStream = Box<dyn BoardStream>;

/// Why a link could not be opened.
#[derive(Debug, thiserror::Error)]
pub enum TransportError {
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
    /// Any other failure to open or configure the device.
    #[error("{device}: {message}")]
    Other {
        /// Device path.
        device: String,
        /// The system's words.
        message: String,
    },
    /// The in-process simulator link was already used and cannot be reopened.
    #[error("the simulated board's link is closed")]
    SimClosed,
}

/// Opens a serial device exclusively, in raw mode.
///
/// # Errors
/// [`TransportError`] saying what to do about it.
pub fn open_serial(device: &str, baud: u32) -> Result<BoxStream, TransportError> {
    use tokio_serial::SerialPortBuilderExt;
    refuse_if_held(device)?;
    let stream = tokio_serial::new(device, baud)
        .timeout(std::time::Duration::from_millis(100))
        .open_native_async()
        .map_err(|e| classify(device, &e))?;
    // Frames queued while nobody listened are stale (a PTY holds about a second of them);
    // the axis starts from the newest.
    let _ = serialport::SerialPort::clear(&stream, serialport::ClearBuffer::Input);
    Ok(Box::new(stream))
}

/// Refuses a device that another program holds, before the serial library touches it.
///
/// The library takes the port with TIOCEXCL plus an exclusive `flock`; when the `flock` fails
/// its clean-up clears TIOCEXCL, and that flag belongs to the terminal, not to the handle: the
/// holder loses its exclusivity and any program can then open the port (measured,
/// platform-notes.md). So look first: a probe handle tries the same `flock` and is closed
/// plainly, which leaves the holder's flag alone. A holder that appears between the probe and
/// the library's open is not caught; that window is a few system calls wide.
fn refuse_if_held(device: &str) -> Result<(), TransportError> {
    use std::os::unix::fs::OpenOptionsExt;
    let probe = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        // No controlling terminal, and no waiting for modem lines.
        .custom_flags(
            rustix::fs::OFlags::NOCTTY.bits() as i32 | rustix::fs::OFlags::NONBLOCK.bits() as i32,
        )
        .open(device);
    let probe = match probe {
        Ok(f) => f,
        // The kernel refuses non-root openers of an exclusive terminal with EBUSY.
        Err(e) if e.raw_os_error() == Some(rustix::io::Errno::BUSY.raw_os_error()) => {
            return Err(TransportError::Busy { device: device.to_owned() });
        }
        // Anything else the library reports in its own words.
        Err(_) => return Ok(()),
    };
    match rustix::fs::flock(&probe, rustix::fs::FlockOperation::NonBlockingLockExclusive) {
        Err(e) if e == rustix::io::Errno::WOULDBLOCK => {
            Err(TransportError::Busy { device: device.to_owned() })
        }
        // Free (the lock goes with the probe when it closes here), or flock unsupported.
        _ => Ok(()),
    }
}

fn classify(device: &str, e: &tokio_serial::Error) -> TransportError {
    let device = device.to_owned();
    let msg = e.to_string();
    // serialport reports a held lock as NoDevice; its words are the only way to tell.
    if msg.contains("exclusive") || msg.contains("busy") || msg.contains("EBUSY") {
        return TransportError::Busy { device };
    }
    // ENOTTY ("Not a typewriter"): the path is no terminal device at all.
    let not_a_tty = ["typewriter", "Inappropriate ioctl", "ENOTTY", "Is a directory"];
    if not_a_tty.iter().any(|w| msg.contains(w)) {
        return TransportError::NotSerial { device };
    }
    match e.kind {
        tokio_serial::ErrorKind::NoDevice => TransportError::NotFound { device },
        tokio_serial::ErrorKind::Io(std::io::ErrorKind::NotFound) => {
            TransportError::NotFound { device }
        }
        tokio_serial::ErrorKind::Io(std::io::ErrorKind::PermissionDenied) => {
            TransportError::PermissionDenied { device }
        }
        _ => TransportError::Other { device, message: msg },
    }
}

/// How to reach one axis's board.
pub enum Connector {
    /// A serial device, reopened after it vanishes.
    Serial {
        /// Device path.
        device: String,
        /// Baud rate, bit/s.
        baud: u32,
    },
    /// A stream handed over once (the in-process simulator, test fakes).
    Once(Mutex<Option<BoxStream>>),
}

impl std::fmt::Debug for Connector {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Serial { device, baud } => write!(f, "serial {device} at {baud} bit/s"),
            Self::Once(_) => f.write_str("in-process link"),
        }
    }
}

impl Connector {
    /// Wraps an already open stream.
    pub fn once(stream: BoxStream) -> Self {
        Self::Once(Mutex::new(Some(stream)))
    }

    /// Opens (or reopens) the link.
    ///
    /// # Errors
    /// [`TransportError`].
    pub fn connect(&self) -> Result<BoxStream, TransportError> {
        match self {
            Self::Serial { device, baud } => open_serial(device, *baud),
            Self::Once(slot) => {
                let mut slot = slot.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
                slot.take().ok_or(TransportError::SimClosed)
            }
        }
    }

    /// Whether reconnecting after a failure can help.
    pub fn can_reconnect(&self) -> bool {
        matches!(self, Self::Serial { .. })
    }

    /// A short description for screens and logs.
    pub fn describe(&self) -> String {
        format!("{self:?}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_device_is_named() {
        let err = open_serial("/dev/servotty-no-such-port", 115_200).err().expect("fails");
        assert!(matches!(err, TransportError::NotFound { .. }), "{err:?}");
        assert!(err.to_string().contains("/dev/servotty-no-such-port"));
    }

    #[tokio::test]
    async fn second_open_of_a_pty_is_refused() {
        use serialport::SerialPort;
        let (_master, slave) = tokio_serial::SerialStream::pair().expect("pty pair");
        let path = slave.name().expect("slave path");
        // Release our own handle so that the test's first open is the only one.
        drop(slave);
        let first = open_serial(&path, 115_200);
        assert!(first.is_ok(), "{:?}", first.err());
        let second = open_serial(&path, 115_200).err().expect("second open fails");
        assert!(matches!(second, TransportError::Busy { .. }), "{second:?}");
        assert!(second.to_string().contains("in use by another program"));
    }

    /// Whether a program with no privileges can open `path` for reading now. Root bypasses
    /// the kernel's exclusive flag, so as root the attempt runs as user `nobody`.
    fn plain_reader_can_open(path: &str) -> Option<bool> {
        use std::os::unix::fs::MetadataExt;
        let root = std::fs::metadata("/proc/self").ok()?.uid() == 0;
        if !root {
            return Some(std::fs::File::open(path).is_ok());
        }
        // Let `nobody` past the permission bits, so only the exclusive flag can refuse it.
        let _ = std::process::Command::new("chmod").args(["0666", path]).status();
        let st = std::process::Command::new("setpriv")
            .args(["--reuid=65534", "--regid=65534", "--clear-groups", "--", "sh", "-c"])
            .arg(format!("exec 3<'{path}'"))
            .status();
        match st {
            Ok(st) => Some(st.success()),
            Err(_) if std::env::var("CI").as_deref() == Ok("true") => {
                panic!("setpriv (util-linux) is needed for this test in CI")
            }
            Err(_) => None,
        }
    }

    // platform-notes.md (measured): a refused open that runs the library's close path clears
    // the holder's exclusive flag (TIOCEXCL, tty_ioctl(4)), after which anyone can open it.
    #[tokio::test]
    async fn a_refused_second_open_leaves_the_port_exclusive() {
        use serialport::SerialPort;
        let (_master, slave) = tokio_serial::SerialStream::pair().expect("pty pair");
        let path = slave.name().expect("slave path");
        drop(slave);
        let first = open_serial(&path, 115_200).expect("first open");
        let Some(before) = plain_reader_can_open(&path) else {
            eprintln!("skipped: setpriv not found");
            return;
        };
        assert!(!before, "the first open is not exclusive");
        for _ in 0..2 {
            let second = open_serial(&path, 115_200).err().expect("second open fails");
            assert!(matches!(second, TransportError::Busy { .. }), "{second:?}");
        }
        assert_eq!(
            plain_reader_can_open(&path),
            Some(false),
            "after refusing a second open, a plain reader could open the port"
        );
        drop(first);
    }
}
