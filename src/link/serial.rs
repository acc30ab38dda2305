//! Serial links: opening a device exclusively in raw mode, and telling apart why that failed
//! (missing, not permitted, held by another program, not a serial device).

use futures::future::BoxFuture;

use super::{BoxStream, Link, LinkError};

/// Opens a serial device exclusively, in raw mode.
///
/// # Errors
/// [`LinkError`] saying what to do about it.
pub fn open_serial(device: &str, baud: u32) -> Result<BoxStream, LinkError> {
    use tokio_serial::SerialPortBuilderExt;
    let stream = tokio_serial::new(device, baud)
        .timeout(std::time::Duration::from_millis(100))
        .open_native_async()
        .map_err(|e| classify(device, &e))?;
    // Frames queued while nobody listened are stale (a PTY holds about a second of them);
    // the axis starts from the newest.
    let _ = serialport::SerialPort::clear(&stream, serialport::ClearBuffer::Input);
    Ok(Box::new(stream))
}

fn classify(device: &str, e: &tokio_serial::Error) -> LinkError {
    let device = device.to_owned();
    let msg = e.to_string();
    // serialport reports a held lock as NoDevice; its words are the only way to tell.
    if msg.contains("exclusive") || msg.contains("busy") || msg.contains("EBUSY") {
        return LinkError::Busy { device };
    }
    // ENOTTY ("Not a typewriter"): the path is no terminal device at all.
    let not_a_tty = ["typewriter", "Inappropriate ioctl", "ENOTTY", "Is a directory"];
    if not_a_tty.iter().any(|w| msg.contains(w)) {
        return LinkError::NotSerial { device };
    }
    match e.kind {
        tokio_serial::ErrorKind::NoDevice => LinkError::NotFound { device },
        tokio_serial::ErrorKind::Io(std::io::ErrorKind::NotFound) => LinkError::NotFound { device },
        tokio_serial::ErrorKind::Io(std::io::ErrorKind::PermissionDenied) => {
            LinkError::PermissionDenied { device }
        }
        _ => LinkError::Other { device, message: msg },
    }
}

/// A board on a serial device (USB CDC or UART), reopened after it vanishes.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SerialLink {
    /// Device path.
    pub device: String,
    /// Baud rate, bit/s.
    pub baud: u32,
}

impl Link for SerialLink {
    fn open(&self) -> BoxFuture<'static, Result<BoxStream, LinkError>> {
        let (device, baud) = (self.device.clone(), self.baud);
        Box::pin(async move {
            // open(2) and the termios calls block, and a confused USB device can hold them
            // up: the blocking pool does them, so the engine's thread never waits.
            let path = device.clone();
            tokio::task::spawn_blocking(move || open_serial(&path, baud))
                .await
                .unwrap_or_else(|e| Err(LinkError::Other { device, message: e.to_string() }))
        })
    }

    fn describe(&self) -> String {
        format!("serial {} at {} bit/s", self.device, self.baud)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_device_is_named() {
        let err = open_serial("/dev/servotty-no-such-port", 115_200).err().expect("fails");
        assert!(matches!(err, LinkError::NotFound { .. }), "{err:?}");
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
        assert!(matches!(second, LinkError::Busy { .. }), "{second:?}");
        assert!(second.to_string().contains("in use by another program"));
    }
}
