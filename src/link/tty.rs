//! A serial device as an async byte stream that reads only when there is something to read.
//!
//! tokio-serial's stream keeps the device marked readable after a read that drained it, so
//! the next poll makes one more read(2) just to learn "would block" (EAGAIN): measured, that
//! was almost half of the host's reads (docs/performance.md). Here a read that returns less
//! than was asked for — the device is drained — clears the readiness at once, as tokio's own
//! sockets do, and the next read waits for the reactor's next event instead. A race with
//! bytes arriving meanwhile is impossible: tokio only clears readiness that no newer event
//! has renewed.

use std::io::{Read, Write};
use std::pin::Pin;
use std::task::{ready, Context, Poll};

use tokio::io::unix::AsyncFd;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

/// An open serial device registered with the runtime's reactor.
pub struct TtyStream {
    fd: AsyncFd<mio_serial::SerialStream>,
}

impl TtyStream {
    /// Registers an open, non-blocking device (must run inside a tokio runtime).
    ///
    /// # Errors
    /// When the reactor refuses the descriptor.
    pub fn new(port: mio_serial::SerialStream) -> std::io::Result<Self> {
        // `AsyncFd::new` is deprecated because a type that merely borrows its descriptor
        // could close it under the reactor; `SerialStream` owns its descriptor and closes it
        // only on drop, after the registration is gone, so that cannot happen here. The
        // replacement, `register`, is `unsafe`, which this crate forbids.
        #[allow(deprecated)]
        let fd = AsyncFd::new(port)?;
        Ok(Self { fd })
    }
}

impl AsyncRead for TtyStream {
    fn poll_read(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<std::io::Result<()>> {
        loop {
            let mut guard = ready!(self.fd.poll_read_ready(cx))?;
            let room = buf.initialize_unfilled();
            let asked = room.len();
            match guard.get_inner().read(room) {
                Ok(n) => {
                    if n < asked && n > 0 {
                        // Drained: wait for the next event rather than read EAGAIN.
                        guard.clear_ready();
                    }
                    buf.advance(n);
                    return Poll::Ready(Ok(()));
                }
                Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => guard.clear_ready(),
                Err(e) => return Poll::Ready(Err(e)),
            }
        }
    }
}

impl AsyncWrite for TtyStream {
    fn poll_write(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<std::io::Result<usize>> {
        loop {
            let mut guard = ready!(self.fd.poll_write_ready(cx))?;
            match guard.try_io(|inner| inner.get_ref().write(buf)) {
                Ok(result) => return Poll::Ready(result),
                Err(_would_block) => {}
            }
        }
    }

    fn poll_flush(self: Pin<&mut Self>, _cx: &mut Context<'_>) -> Poll<std::io::Result<()>> {
        // Bytes go to the kernel with each write; there is nothing buffered here.
        Poll::Ready(Ok(()))
    }

    fn poll_shutdown(self: Pin<&mut Self>, _cx: &mut Context<'_>) -> Poll<std::io::Result<()>> {
        Poll::Ready(Ok(()))
    }
}
