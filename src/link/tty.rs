//! A serial device as an async byte stream that reads only when there is something to read.
//!
//! tokio-serial's stream keeps the device marked readable after a read that drained it, so
//! the next poll makes one more read(2) just to learn "would block" (EAGAIN): measured, that
//! was almost half of the host's reads (docs/performance.md). Here a read that returns less
//! than was asked for — the device is drained — clears the readiness at once, as tokio's own
//! sockets do, and the next read waits for the reactor's next event instead. A race with
//! bytes arriving meanwhile is impossible: tokio only clears readiness that no newer event
//! has renewed.
//!
//! A hang-up seen once stays in tokio's readiness for good ("closed" is final for sockets):
//! the master side of a pseudo-terminal reports one whenever no program holds the other
//! side, e.g. before the host first opens it. Every later read would then find the device
//! "ready", read EAGAIN, and try again until the task's budget ran out: measured on the
//! simulator's boards, about a hundred failed reads per tick and board. A read that finds
//! nothing while the readiness says "closed" therefore registers the device afresh, which
//! forgets the stale hang-up (a real one is reported again at once).

use std::io::{Read, Write};
use std::pin::Pin;
use std::task::{ready, Context, Poll};

use tokio::io::unix::AsyncFd;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

/// An open serial device registered with the runtime's reactor.
pub struct TtyStream {
    /// None only if registering afresh failed; every later call then reports that.
    fd: Option<AsyncFd<mio_serial::SerialStream>>,
}

impl TtyStream {
    /// Registers an open, non-blocking device (must run inside a tokio runtime).
    ///
    /// # Errors
    /// When the reactor refuses the descriptor.
    pub fn new(port: mio_serial::SerialStream) -> std::io::Result<Self> {
        Ok(Self { fd: Some(register(port)?) })
    }

    fn fd(&self) -> std::io::Result<&AsyncFd<mio_serial::SerialStream>> {
        self.fd.as_ref().ok_or_else(|| {
            std::io::Error::other("the device could not be registered with the runtime again")
        })
    }

    /// Drops the registration (and with it a stale hang-up) and registers the device again.
    fn register_again(&mut self) -> std::io::Result<()> {
        if let Some(fd) = self.fd.take() {
            self.fd = Some(register(fd.into_inner())?);
        }
        self.fd().map(|_| ())
    }
}

fn register(port: mio_serial::SerialStream) -> std::io::Result<AsyncFd<mio_serial::SerialStream>> {
    // `AsyncFd::new` is deprecated because a type that merely borrows its descriptor could
    // close it under the reactor; `SerialStream` owns its descriptor and closes it only on
    // drop, after the registration is gone, so that cannot happen here. The replacement,
    // `register`, is `unsafe`, which this crate forbids.
    #[allow(deprecated)]
    AsyncFd::new(port)
}

impl AsyncRead for TtyStream {
    fn poll_read(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<std::io::Result<()>> {
        let this = self.get_mut();
        // Once per call at most: a hang-up that is still true is reported again at once.
        let mut registered_again = false;
        loop {
            let stale_hang_up = {
                let mut guard = ready!(this.fd()?.poll_read_ready(cx))?;
                let closed = guard.ready().is_read_closed();
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
                    Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                        guard.clear_ready();
                        closed && !registered_again
                    }
                    Err(e) => return Poll::Ready(Err(e)),
                }
            };
            if stale_hang_up {
                this.register_again()?;
                registered_again = true;
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
            let mut guard = ready!(self.fd()?.poll_write_ready(cx))?;
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

#[cfg(test)]
mod tests {
    use std::time::Duration;

    use futures::FutureExt;
    use serialport::SerialPort;
    use tokio::io::{AsyncReadExt, AsyncWriteExt};

    use super::*;

    // The simulator's situation: the master of a pseudo-terminal registered while nobody held
    // the other side (a hang-up), then a host opens it. Registering afresh must not lose the
    // wake-up for the host's first bytes.
    #[tokio::test]
    async fn after_a_stale_hang_up_the_next_bytes_still_arrive() {
        let (master, slave) = mio_serial::SerialStream::pair().expect("pty pair");
        let path = slave.name().expect("slave path");
        drop(slave);
        let mut board = TtyStream::new(master).expect("registers");
        // Let the reactor take in the hang-up.
        for _ in 0..3 {
            tokio::task::yield_now().await;
        }
        let mut host = crate::link::open_serial(&path, 115_200).expect("host opens");
        let mut buf = [0u8; 16];
        assert!(board.read(&mut buf).now_or_never().is_none(), "nothing was sent yet");
        host.write_all(b"v1 hello").await.expect("host writes");
        let n = tokio::time::timeout(Duration::from_secs(10), board.read(&mut buf))
            .await
            .expect("the bytes wake the reader")
            .expect("read");
        assert_eq!(&buf[..n], b"v1 hello");
    }
}
