//! The recording log: what `wahbad serve --record` writes and `wahbad replay` reads.
//!
//! # Format, version 1 (all integers big-endian)
//!
//! ```text
//! file    := magic "WAHBADLG" (8 bytes) | version u16 (= 1) | flags u16 (= 0) | record*
//! record  := kind u8 | len u32 | recv_ns i64 | payload (len bytes) | crc u32
//! ```
//!
//! `crc` is the CRC-32 (zlib's) of `kind`, `len`, `recv_ns` and `payload`.
//! `recv_ns` is the daemon's wall clock (ns since the Unix epoch, UTC) when the
//! record's input reached it. Kinds:
//!
//! | kind | payload |
//! |---|---|
//! | `H` header, first and only once | MessagePack map: `created_ns` (int, Unix ns), `program` (str), `protocol` (int), `origin` (str, who wrote the log), `config` (str: the estimator configuration in force, as TOML) |
//! | `F` stream frame | the frame body exactly as it arrived (the `N` bytes after the length prefix) |
//! | `D` datagram | the UDP datagram exactly as it arrived, except that a configured token's bytes are overwritten with `*` (same length, still decodes) so the log never holds the secret |
//! | `T` clock tick | the bench time the tick carried, i64 ns |
//! | `E` end | MessagePack map: `records` (uint, records before this one, header included), `reason` (str); written on a clean close |
//!
//! The records hold exactly the inputs the estimator ingested, in the order it
//! ingested them, ticks included: replaying them through the decoder,
//! validation and the same `Estimator` reproduces the live solutions bit for
//! bit. Ticks are recorded rather than re-derived because they come from the
//! wall clock, which a replay does not have.
//!
//! # Damage
//!
//! - A file cut short (crash, `kill -9`) is read up to its last whole record,
//!   with a warning; a missing `E` record is reported as "ended without a clean close".
//! - A record whose checksum fails, or whose kind or length is impossible,
//!   makes the reader resync: it scans forward byte by byte for the next
//!   position where a whole record with a known kind and a good checksum
//!   starts, warns with the offset and the number of bytes skipped, and goes on.
//! - An empty file, a file without the magic, an unknown version or a bad
//!   header are errors with a clear message.

mod crc;
mod inputs;
mod reader;
mod writer;

pub use crc::{crc32, Crc32};
pub use inputs::{record_input, InputError};
pub use reader::{LogReader, ReadWarning};
pub use writer::LogWriter;

use serde::{Deserialize, Serialize};

/// First eight bytes of every log.
pub const MAGIC: &[u8; 8] = b"WAHBADLG";
/// Format version written by this build.
pub const FORMAT_VERSION: u16 = 1;
/// Bytes before the first record: magic, version, flags.
pub const PREAMBLE_LEN: usize = 12;
/// Bytes of a record before its payload: kind, len, recv_ns.
pub const RECORD_HEAD_LEN: usize = 13;
/// Bytes of a record after its payload: the checksum.
pub const RECORD_TAIL_LEN: usize = 4;
/// Largest payload of any record (the header may hold a long configuration).
pub const MAX_PAYLOAD_LEN: usize = 1 << 20;

/// Record kinds, as the byte written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RecordKind {
    /// `H`: the log's header.
    Header,
    /// `F`: a stream frame body.
    Frame,
    /// `D`: a datagram.
    Datagram,
    /// `T`: a clock tick.
    Tick,
    /// `E`: the clean end.
    End,
}

impl RecordKind {
    /// The byte that marks this kind.
    pub fn byte(self) -> u8 {
        match self {
            RecordKind::Header => b'H',
            RecordKind::Frame => b'F',
            RecordKind::Datagram => b'D',
            RecordKind::Tick => b'T',
            RecordKind::End => b'E',
        }
    }

    /// The kind a byte marks, if any.
    pub fn from_byte(byte: u8) -> Option<Self> {
        match byte {
            b'H' => Some(RecordKind::Header),
            b'F' => Some(RecordKind::Frame),
            b'D' => Some(RecordKind::Datagram),
            b'T' => Some(RecordKind::Tick),
            b'E' => Some(RecordKind::End),
            _ => None,
        }
    }

    /// Largest payload a record of this kind may have.
    pub fn max_payload(self) -> usize {
        match self {
            RecordKind::Header | RecordKind::End => MAX_PAYLOAD_LEN,
            RecordKind::Frame | RecordKind::Datagram => 65_536,
            RecordKind::Tick => 8,
        }
    }
}

/// The header record's content.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LogHeader {
    /// When the log was created, ns since the Unix epoch (UTC).
    pub created_ns: i64,
    /// Program and version that wrote it.
    pub program: String,
    /// Wire protocol version of the recorded frames.
    pub protocol: u32,
    /// Who wrote it: `serve`, `simulate`, ...
    pub origin: String,
    /// The estimator configuration in force, as TOML text.
    pub config: String,
}

/// The end record's content.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LogEnd {
    /// Records written before the end record, header included.
    pub records: u64,
    /// Why the log was closed (`shutdown`, `finished`, ...).
    pub reason: String,
}

/// One record after the header.
#[derive(Debug, Clone, PartialEq)]
pub enum Record {
    /// A stream frame body as it arrived.
    Frame {
        /// Receive time, Unix ns.
        recv_ns: i64,
        /// The MessagePack body.
        body: Vec<u8>,
    },
    /// A datagram as it arrived (token masked).
    Datagram {
        /// Receive time, Unix ns.
        recv_ns: i64,
        /// The MessagePack datagram.
        body: Vec<u8>,
    },
    /// A clock tick handed to the estimator.
    Tick {
        /// Wall clock when the tick was made, Unix ns.
        recv_ns: i64,
        /// Bench time the tick carried, ns.
        bench_ns: i64,
    },
    /// The clean end of the log.
    End {
        /// Wall clock at the close, Unix ns.
        recv_ns: i64,
        /// What the end record says.
        end: LogEnd,
    },
}

/// Why a log cannot be written or read.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum RecordError {
    /// The operating system refused a read or write.
    #[error("log i/o: {0}")]
    Io(#[from] std::io::Error),
    /// The file holds no bytes at all.
    #[error("the file is empty: not a wahbad log")]
    Empty,
    /// The file does not start with the magic.
    #[error("not a wahbad log (the first bytes are not the \"WAHBADLG\" magic)")]
    NotALog,
    /// Written by a newer (or unknown) format version.
    #[error("log format version {0} is not supported (this build reads version {FORMAT_VERSION})")]
    UnsupportedVersion(u16),
    /// The header record is missing, damaged or undecodable.
    #[error("bad log header: {0}")]
    BadHeader(String),
    /// A record to write is larger than the format allows.
    #[error("record payload of {len} bytes exceeds the {max}-byte limit of its kind")]
    TooLarge {
        /// Payload length offered.
        len: usize,
        /// Limit for that kind.
        max: usize,
    },
}

/// Wall clock now, ns since the Unix epoch.
pub fn unix_now_ns() -> i64 {
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap_or_default();
    i64::try_from(now.as_nanos()).unwrap_or(i64::MAX)
}

/// Overwrites every occurrence of `token`'s bytes in `body` with `*`, keeping the length.
///
/// Used on datagrams before they are recorded: the MessagePack structure is
/// untouched (a str stays a str of the same length), so the record still decodes.
pub fn mask_token(body: &mut [u8], token: &[u8]) {
    if token.is_empty() || token.len() > body.len() {
        return;
    }
    let mut idx = 0;
    while idx + token.len() <= body.len() {
        if &body[idx..idx + token.len()] == token {
            body[idx..idx + token.len()].fill(b'*');
            idx += token.len();
        } else {
            idx += 1;
        }
    }
}

#[cfg(test)]
mod tests;
