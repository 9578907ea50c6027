//! A pseudo-terminal pair standing in for a device's serial port: `taucal sim serve` keeps the
//! master side and prints the slave's path, which clients open as `serial:PATH`.
//!
//! The server also keeps the slave open (so the master never sees a hang-up between clients)
//! and puts it in raw mode (no echo, no line editing, no CR/LF translation), as a UART is.

use nix::fcntl::{fcntl, FcntlArg, OFlag};
use nix::sys::termios::{cfmakeraw, tcgetattr, tcsetattr, SetArg};
use std::io;
use std::os::fd::OwnedFd;
use std::path::PathBuf;
use std::pin::Pin;
use std::task::{ready, Context, Poll};
use tokio::io::unix::AsyncFd;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

/// The master side of a pseudo-terminal, as an async byte stream.
pub struct Pty {
    master: AsyncFd<OwnedFd>,
    _slave: OwnedFd,
    /// The slave's path, for clients.
    pub path: PathBuf,
}

impl Pty {
    /// Opens a raw pseudo-terminal pair. Must run inside the tokio runtime.
    pub fn open() -> io::Result<Pty> {
        let pair = nix::pty::openpty(None, None).map_err(io::Error::from)?;
        let mut termios = tcgetattr(&pair.slave).map_err(io::Error::from)?;
        cfmakeraw(&mut termios);
        tcsetattr(&pair.slave, SetArg::TCSANOW, &termios).map_err(io::Error::from)?;
        let path = nix::unistd::ttyname(&pair.slave).map_err(io::Error::from)?;
        let flags = fcntl(&pair.master, FcntlArg::F_GETFL).map_err(io::Error::from)?;
        fcntl(
            &pair.master,
            FcntlArg::F_SETFL(OFlag::from_bits_truncate(flags) | OFlag::O_NONBLOCK),
        )
        .map_err(io::Error::from)?;
        // SAFETY: an `OwnedFd` is a valid open descriptor that stays open and unchanged until
        // the `AsyncFd` owning it drops it.
        let master = unsafe { AsyncFd::register(pair.master) }?;
        Ok(Pty {
            master,
            _slave: pair.slave,
            path,
        })
    }
}

impl AsyncRead for Pty {
    fn poll_read(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        loop {
            let mut guard = ready!(self.master.poll_read_ready(cx))?;
            let unfilled = buf.initialize_unfilled();
            match guard
                .try_io(|fd| nix::unistd::read(fd.get_ref(), unfilled).map_err(io::Error::from))
            {
                Ok(Ok(n)) => {
                    buf.advance(n);
                    return Poll::Ready(Ok(()));
                }
                Ok(Err(e)) => return Poll::Ready(Err(e)),
                Err(_would_block) => continue,
            }
        }
    }
}

impl AsyncWrite for Pty {
    fn poll_write(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        loop {
            let mut guard = ready!(self.master.poll_write_ready(cx))?;
            match guard.try_io(|fd| nix::unistd::write(fd.get_ref(), buf).map_err(io::Error::from))
            {
                Ok(outcome) => return Poll::Ready(outcome),
                Err(_would_block) => continue,
            }
        }
    }

    fn poll_flush(self: Pin<&mut Self>, _: &mut Context<'_>) -> Poll<io::Result<()>> {
        Poll::Ready(Ok(()))
    }

    fn poll_shutdown(self: Pin<&mut Self>, _: &mut Context<'_>) -> Poll<io::Result<()>> {
        Poll::Ready(Ok(()))
    }
}
