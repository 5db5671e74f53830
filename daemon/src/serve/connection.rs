//! A framed stream connection: the buffered socket and its frame decoder.
//!
//! `read_frame` is cancel-safe (it may sit in a `select!`): bytes are moved
//! into the decoder only after a read has completed, so a cancelled read
//! loses nothing. A frame once started must be completed within the stall
//! limit, if one is set ([`Connection::set_stall_limit`]), so a peer that
//! stops mid-frame cannot hold its connection (and its slot) for ever.

use std::io;
use std::time::Duration;

use tokio::time::Instant;

use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt, BufWriter};
use wahbad_protocol::{decode_body, encode_frame_into, FrameDecoder, FrameError, Message};

/// Why reading from a connection failed.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ReadError {
    /// The socket failed (reset, ...).
    #[error("connection i/o: {0}")]
    Io(#[from] io::Error),
    /// The bytes are not a frame, or the body is not a message; see
    /// [`FrameError::can_continue`] and [`FrameError::error_code`].
    #[error(transparent)]
    Frame(#[from] FrameError),
    /// A started frame was not completed within the stall limit.
    #[error("frame not completed within {} ms ({buffered} bytes received)", limit.as_millis())]
    Stalled {
        /// Bytes of the incomplete frame received.
        buffered: usize,
        /// The stall limit.
        limit: Duration,
    },
}

/// One stream connection speaking the wahbad framing.
pub struct Connection<S> {
    stream: BufWriter<S>,
    decoder: FrameDecoder,
    read_buf: Vec<u8>,
    write_buf: Vec<u8>,
    /// Time allowed to complete a started frame; `None`: no limit.
    stall_limit: Option<Duration>,
    /// When the bytes of the incomplete frame began to arrive.
    partial_since: Option<Instant>,
}

impl<S: AsyncRead + AsyncWrite + Unpin> Connection<S> {
    /// Wraps a connected stream.
    pub fn new(stream: S) -> Self {
        Connection {
            stream: BufWriter::new(stream),
            decoder: FrameDecoder::new(),
            read_buf: vec![0; 16 * 1024],
            write_buf: Vec::with_capacity(4096),
            stall_limit: None,
            partial_since: None,
        }
    }

    /// Sets the time a started frame has to be completed in (see [`ReadError::Stalled`]).
    pub fn set_stall_limit(&mut self, limit: Option<Duration>) {
        self.stall_limit = limit;
    }

    /// The next frame's body, exactly as it arrived; `None` when the peer
    /// closed between frames. A close inside a frame is a
    /// [`FrameError::Truncated`].
    pub async fn read_frame(&mut self) -> Result<Option<Vec<u8>>, ReadError> {
        loop {
            if let Some(body) = self.decoder.next_frame()? {
                let body = body.to_vec();
                // Bytes left over belong to a frame that starts now.
                self.partial_since = (self.decoder.buffered() > 0).then(Instant::now);
                return Ok(Some(body));
            }
            let read = self.stream.read(&mut self.read_buf);
            let n_read = match (self.stall_limit, self.partial_since) {
                (Some(limit), Some(since)) => {
                    match tokio::time::timeout_at(since + limit, read).await {
                        Ok(got) => got?,
                        Err(_elapsed) => {
                            let buffered = self.decoder.buffered();
                            return Err(ReadError::Stalled { buffered, limit });
                        }
                    }
                }
                _ => read.await?,
            };
            if n_read == 0 {
                self.decoder.finish()?;
                return Ok(None);
            }
            self.decoder.push(&self.read_buf[..n_read]);
            if self.partial_since.is_none() {
                self.partial_since = Some(Instant::now());
            }
        }
    }

    /// The next message; `None` on a clean close.
    pub async fn read_message(&mut self) -> Result<Option<Message>, ReadError> {
        match self.read_frame().await? {
            Some(body) => Ok(Some(decode_body(&body)?)),
            None => Ok(None),
        }
    }

    /// Encodes, writes and flushes one message.
    pub async fn write_message(&mut self, msg: &Message) -> io::Result<()> {
        self.write_buf.clear();
        encode_frame_into(msg, &mut self.write_buf);
        self.stream.write_all(&self.write_buf).await?;
        self.stream.flush().await
    }

    /// Writes and flushes an already encoded frame (length prefix included).
    pub async fn write_encoded(&mut self, frame: &[u8]) -> io::Result<()> {
        self.stream.write_all(frame).await?;
        self.stream.flush().await
    }

    /// Reads and discards until the peer closes (at most 1 MiB), used after an
    /// `error` so unread bytes do not turn the close into a reset.
    pub async fn drain(&mut self) -> io::Result<()> {
        let mut left = 1usize << 20;
        while left > 0 {
            let n_read = self.stream.read(&mut self.read_buf).await?;
            if n_read == 0 {
                break;
            }
            left = left.saturating_sub(n_read);
        }
        Ok(())
    }

    /// Flushes and shuts the write side down, telling the peer we are done.
    pub async fn shutdown(&mut self) -> io::Result<()> {
        self.stream.flush().await?;
        self.stream.shutdown().await
    }
}
