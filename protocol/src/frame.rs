//! Framing: a 4-byte big-endian length, then one MessagePack value.
//!
//! Streams (TCP, Unix) carry frames; datagrams carry one bare body. This module
//! turns messages into frames ([`encode_frame`]), splits a byte stream back into
//! frames as bytes arrive ([`FrameDecoder`]), and decodes one body into a
//! [`Message`] ([`decode_body`]) with a typed [`FrameError`] that says whether
//! the stream can go on and what the daemon answers.

mod body;
mod fast;
mod skim;

pub use body::{decode_body, decode_datagram};

use crate::message::{ErrorCode, Message, Reject};

/// Largest allowed frame body, bytes (`1 <= N <= 65536`).
pub const MAX_FRAME_LEN: usize = 65536;

/// Size of the length prefix, bytes.
pub const LEN_PREFIX: usize = 4;

/// Deepest allowed nesting of maps and arrays in a body, the top-level map
/// counting as 1. Deeper input is refused before it can exhaust the stack.
pub const MAX_DEPTH: usize = 32;

/// `sensor` and `seq` read best effort from a body that failed to decode, so
/// that the `reject` can name the message.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct MessageIds {
    /// Top-level `sensor`, when it was a string.
    pub sensor: Option<String>,
    /// Top-level `seq`, when it was a non-negative integer.
    pub seq: Option<u64>,
}

/// Why a frame or a body could not be turned into a message.
///
/// [`FrameError::can_continue`] says whether the next frame can still be read;
/// [`FrameError::error_code`] says whether the protocol ends the connection with
/// an `error` (`Some`) or answers a `reject` and goes on (`None`);
/// [`FrameError::first_frame_code`] gives the `error` code when the failing
/// frame was the first of a connection.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum FrameError {
    /// The length prefix is zero (or the datagram is empty).
    #[error("frame length is zero; a frame holds 1 to 65536 bytes")]
    ZeroLength,
    /// The length prefix (or datagram size) exceeds [`MAX_FRAME_LEN`].
    #[error("frame length {len} exceeds the maximum of 65536 bytes")]
    TooLong {
        /// The announced length, bytes.
        len: usize,
    },
    /// The stream ended inside a frame (see [`FrameDecoder::finish`]).
    #[error("stream ended inside a frame: {buffered} of {needed} bytes received")]
    Truncated {
        /// Bytes of the incomplete frame received, prefix included.
        buffered: usize,
        /// Bytes the frame needs, prefix included (4 while the prefix itself is incomplete).
        needed: usize,
    },
    /// The body is not well-formed MessagePack.
    #[error("undecodable MessagePack at byte {offset}: {detail}")]
    Undecodable {
        /// Offset in the body where decoding failed.
        offset: usize,
        /// What was wrong.
        detail: String,
        /// Ids read before the fault.
        ids: MessageIds,
    },
    /// Maps and arrays nest deeper than [`MAX_DEPTH`].
    #[error("MessagePack nesting deeper than {limit} maps/arrays")]
    TooDeep {
        /// The limit, [`MAX_DEPTH`].
        limit: usize,
        /// Ids read before the fault.
        ids: MessageIds,
    },
    /// One whole value ended before the end of the frame.
    #[error("{trailing} trailing bytes after the message in a body of {len} bytes")]
    TrailingBytes {
        /// Body length, bytes.
        len: usize,
        /// Bytes after the first value.
        trailing: usize,
        /// Ids of the first value.
        ids: MessageIds,
    },
    /// Well-formed MessagePack, but not a map.
    #[error("message is a MessagePack {found}, not a map")]
    NotAMap {
        /// The MessagePack family found (`array`, `string`, ...).
        found: &'static str,
    },
    /// A top-level key is not a string.
    #[error("message map has a key that is a MessagePack {found}, not a string")]
    KeyNotString {
        /// The MessagePack family of the key.
        found: &'static str,
        /// Ids read from the string keys.
        ids: MessageIds,
    },
    /// The `type` key names no message of protocol version 1.
    #[error("unknown message type {name:?}")]
    UnknownType {
        /// The `type` string received.
        name: String,
        /// Ids read from the body.
        ids: MessageIds,
    },
    /// A required key is absent.
    #[error("missing key `{key}`")]
    MissingKey {
        /// Path of the key, e.g. `t` or `sensors[0].n`.
        key: String,
        /// Ids read from the body.
        ids: MessageIds,
    },
    /// A key appears twice.
    #[error("duplicate key `{key}`")]
    DuplicateKey {
        /// Path of the key.
        key: String,
        /// Ids read from the body.
        ids: MessageIds,
    },
    /// A value has the wrong MessagePack type or an unusable value.
    #[error("bad value for key `{key}`: {detail}")]
    WrongType {
        /// Path of the value, e.g. `b[1]`, `role`.
        key: String,
        /// What was expected and found.
        detail: String,
        /// Ids read from the body.
        ids: MessageIds,
    },
}

impl FrameError {
    /// Whether the next frame of the stream can still be read: `true` for a bad
    /// body inside a well-framed frame, `false` for a bad length or a cut stream.
    pub fn can_continue(&self) -> bool {
        !matches!(
            self,
            FrameError::ZeroLength | FrameError::TooLong { .. } | FrameError::Truncated { .. }
        )
    }

    /// The `error` code the daemon sends before closing, or `None` when the
    /// frame was well framed and is answered with a `reject`.
    ///
    /// Only a bad length prefix (zero, over [`MAX_FRAME_LEN`]) or a stream cut
    /// inside a frame is fatal (`framing`): after those the next frame cannot
    /// be found. A body that is not one well-formed MessagePack value
    /// (undecodable, too deep, trailing bytes) sits in a well-formed frame, so
    /// it is rejected and the stream goes on. The first frame of a connection
    /// has its own rule, [`FrameError::first_frame_code`].
    pub fn error_code(&self) -> Option<ErrorCode> {
        match self {
            FrameError::ZeroLength | FrameError::TooLong { .. } | FrameError::Truncated { .. } => {
                Some(ErrorCode::Framing)
            }
            _ => None,
        }
    }

    /// Whether the body is not one well-formed MessagePack value (undecodable,
    /// nested deeper than [`MAX_DEPTH`], or followed by trailing bytes).
    pub fn is_undecodable(&self) -> bool {
        matches!(
            self,
            FrameError::Undecodable { .. }
                | FrameError::TooDeep { .. }
                | FrameError::TrailingBytes { .. }
        )
    }

    /// The `error` code answering this error in the first frame of a stream
    /// connection, where `hello` is expected; the daemon then closes.
    ///
    /// `framing` when the frame or its body is not decodable at all (a fatal
    /// framing error or [`FrameError::is_undecodable`]); `hello` when it is
    /// well-formed MessagePack but not a valid `hello`.
    pub fn first_frame_code(&self) -> ErrorCode {
        if self.error_code().is_some() || self.is_undecodable() {
            ErrorCode::Framing
        } else {
            ErrorCode::Hello
        }
    }

    /// The ids read from the failed body, when there was a body to read.
    pub fn ids(&self) -> Option<&MessageIds> {
        match self {
            FrameError::Undecodable { ids, .. }
            | FrameError::TooDeep { ids, .. }
            | FrameError::TrailingBytes { ids, .. }
            | FrameError::KeyNotString { ids, .. }
            | FrameError::UnknownType { ids, .. }
            | FrameError::MissingKey { ids, .. }
            | FrameError::DuplicateKey { ids, .. }
            | FrameError::WrongType { ids, .. } => Some(ids),
            _ => None,
        }
    }

    /// The `reject` answering this error, when it is answered by one
    /// ([`FrameError::error_code`] is `None`); its `reason` is this error's text.
    pub fn to_reject(&self) -> Option<Reject> {
        if self.error_code().is_some() {
            return None;
        }
        let ids = self.ids().cloned().unwrap_or_default();
        Some(Reject {
            sensor: ids.sensor,
            seq: ids.seq,
            reason: self.to_string(),
        })
    }
}

/// Why a message could not be encoded into a frame.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum EncodeError {
    /// The encoded body exceeds [`MAX_FRAME_LEN`] (a solution with very many verdicts).
    #[error("encoded message is {len} bytes, over the 65536-byte frame limit")]
    TooLarge {
        /// Encoded body length, bytes.
        len: usize,
    },
}

/// Appends the MessagePack body of `msg` (no prefix) to `out`: a datagram.
pub fn encode_body_into(msg: &Message, out: &mut Vec<u8>) {
    // Writing into a Vec cannot fail, and every message serialises: all map
    // keys are strings and every field type has a MessagePack form.
    rmp_serde::encode::write_named(out, msg).expect("messages always serialise to MessagePack");
}

/// The MessagePack body of `msg` (no prefix): a datagram.
pub fn encode_body(msg: &Message) -> Vec<u8> {
    let mut out = Vec::new();
    encode_body_into(msg, &mut out);
    out
}

/// Appends the frame of `msg` (prefix + body) to `out`, reusing its capacity.
///
/// Never fails; a body over [`MAX_FRAME_LEN`] is still written with its true
/// length, which a peer will refuse. Where a message can be that large, use
/// [`try_encode_frame_into`].
pub fn encode_frame_into(msg: &Message, out: &mut Vec<u8>) {
    let start = out.len();
    out.extend_from_slice(&[0; LEN_PREFIX]);
    encode_body_into(msg, out);
    let len = out.len() - start - LEN_PREFIX;
    // Bodies are far below 4 GiB; saturate rather than wrap if one ever is not.
    let prefix = u32::try_from(len).unwrap_or(u32::MAX).to_be_bytes();
    out[start..start + LEN_PREFIX].copy_from_slice(&prefix);
}

/// The frame of `msg`: 4-byte big-endian body length, then the body.
pub fn encode_frame(msg: &Message) -> Vec<u8> {
    let mut out = Vec::new();
    encode_frame_into(msg, &mut out);
    out
}

/// Like [`encode_frame_into`], but refuses a body over [`MAX_FRAME_LEN`],
/// leaving `out` as it was. Returns the body length.
pub fn try_encode_frame_into(msg: &Message, out: &mut Vec<u8>) -> Result<usize, EncodeError> {
    let start = out.len();
    encode_frame_into(msg, out);
    let len = out.len() - start - LEN_PREFIX;
    if len > MAX_FRAME_LEN {
        out.truncate(start);
        return Err(EncodeError::TooLarge { len });
    }
    Ok(len)
}

/// Like [`encode_frame`], but refuses a body over [`MAX_FRAME_LEN`].
pub fn try_encode_frame(msg: &Message) -> Result<Vec<u8>, EncodeError> {
    let mut out = Vec::new();
    try_encode_frame_into(msg, &mut out)?;
    Ok(out)
}

/// Splits a byte stream into frames as the bytes arrive.
///
/// Owns its read buffer: [`push`](FrameDecoder::push) what the socket gave,
/// then call [`next_frame`](FrameDecoder::next_frame) or
/// [`next_message`](FrameDecoder::next_message) until `Ok(None)` (not enough
/// bytes yet). A bad body consumes its frame and the next call goes on; a bad
/// length is fatal and is returned again by every later call.
#[derive(Debug, Default)]
pub struct FrameDecoder {
    buf: Vec<u8>,
    /// Bytes of `buf` already handed out as frames.
    consumed: usize,
    /// A fatal framing error, repeated on every later call.
    fatal: Option<FrameError>,
}

impl FrameDecoder {
    /// An empty decoder.
    pub fn new() -> FrameDecoder {
        FrameDecoder::default()
    }

    /// Appends bytes received from the stream.
    pub fn push(&mut self, bytes: &[u8]) {
        if self.consumed > 0 {
            self.buf.drain(..self.consumed);
            self.consumed = 0;
        }
        self.buf.extend_from_slice(bytes);
    }

    /// Bytes received and not yet handed out as frames.
    pub fn buffered(&self) -> usize {
        self.buf.len() - self.consumed
    }

    /// The raw body of the next whole frame, `Ok(None)` while it is incomplete.
    ///
    /// A zero or oversize length prefix is reported as soon as the 4 prefix
    /// bytes are in, without waiting for the body.
    pub fn next_frame(&mut self) -> Result<Option<&[u8]>, FrameError> {
        if let Some(err) = &self.fatal {
            return Err(err.clone());
        }
        let pending = &self.buf[self.consumed..];
        let Some(prefix) = pending.first_chunk::<LEN_PREFIX>() else {
            return Ok(None);
        };
        let len = u32::from_be_bytes(*prefix) as usize;
        if len == 0 || len > MAX_FRAME_LEN {
            let err = if len == 0 {
                FrameError::ZeroLength
            } else {
                FrameError::TooLong { len }
            };
            self.fatal = Some(err.clone());
            return Err(err);
        }
        if pending.len() < LEN_PREFIX + len {
            return Ok(None);
        }
        let start = self.consumed + LEN_PREFIX;
        self.consumed = start + len;
        Ok(Some(&self.buf[start..start + len]))
    }

    /// The next whole frame decoded, `Ok(None)` while it is incomplete.
    ///
    /// A body error ([`FrameError::can_continue`] is `true`) has already
    /// consumed its frame: call again for the next one.
    pub fn next_message(&mut self) -> Result<Option<Message>, FrameError> {
        match self.next_frame()? {
            Some(body) => decode_body(body).map(Some),
            None => Ok(None),
        }
    }

    /// Call when the stream has ended: `Ok` if it ended between frames,
    /// [`FrameError::Truncated`] if a frame was cut off.
    pub fn finish(&self) -> Result<(), FrameError> {
        if let Some(err) = &self.fatal {
            return Err(err.clone());
        }
        let buffered = self.buffered();
        if buffered == 0 {
            return Ok(());
        }
        let pending = &self.buf[self.consumed..];
        let needed = match pending.first_chunk::<LEN_PREFIX>() {
            Some(prefix) => LEN_PREFIX + u32::from_be_bytes(*prefix) as usize,
            None => LEN_PREFIX,
        };
        Err(FrameError::Truncated { buffered, needed })
    }
}

#[cfg(test)]
mod equivalence;
#[cfg(test)]
mod tests;
