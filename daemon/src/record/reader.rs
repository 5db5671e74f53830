//! Reading a log: the header, then the records, tolerating a torn tail and
//! resyncing past a damaged record (see the module doc of [`crate::record`]).

use std::fmt;
use std::fs::File;
use std::io::{BufReader, Read};
use std::path::Path;

use super::{
    Crc32, LogEnd, LogHeader, Record, RecordError, RecordKind, FORMAT_VERSION, MAGIC, PREAMBLE_LEN,
    RECORD_HEAD_LEN, RECORD_TAIL_LEN,
};

/// Something wrong with a log that the reader worked around.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum ReadWarning {
    /// The file ends inside a record (a crash or `kill -9` while writing).
    TornTail {
        /// File offset where the partial record starts.
        offset: u64,
        /// Bytes of the partial record that were ignored.
        bytes: u64,
    },
    /// A damaged stretch was skipped.
    Resynced {
        /// File offset where the damage starts.
        offset: u64,
        /// Bytes skipped until the next whole record.
        skipped: u64,
    },
    /// The file ends after a whole record but without the end record.
    NoCleanEnd {
        /// Records read, header included.
        records: u64,
    },
    /// Bytes follow the end record; they were ignored.
    DataAfterEnd {
        /// File offset of the first ignored byte.
        offset: u64,
    },
}

impl fmt::Display for ReadWarning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ReadWarning::TornTail { offset, bytes } => write!(
                f,
                "log cut short: {bytes} bytes of a partial record at offset {offset} ignored; read up to the last whole record"
            ),
            ReadWarning::Resynced { offset, skipped } => write!(
                f,
                "damaged record at offset {offset}: skipped {skipped} bytes to the next whole record"
            ),
            ReadWarning::NoCleanEnd { records } => write!(
                f,
                "log ended without a clean close after {records} records (the recorder did not finish)"
            ),
            ReadWarning::DataAfterEnd { offset } => {
                write!(f, "bytes after the end record at offset {offset} ignored")
            }
        }
    }
}

/// A log being read, record by record.
pub struct LogReader<R: Read> {
    input: R,
    buf: Vec<u8>,
    /// Index in `buf` of the next unread byte.
    pos: usize,
    /// File offset of `buf[0]`.
    base: u64,
    eof: bool,
    done: bool,
    header: LogHeader,
    n_records: u64,
    ended_cleanly: bool,
    warnings: Vec<ReadWarning>,
}

/// What the bytes at one position hold.
/// Bytes the reader asks the file for at a time.
const READ_CHUNK: usize = 64 * 1024;

enum Parse {
    /// A whole record with a good checksum: kind, receive time, payload range, total length.
    Whole(RecordKind, i64, std::ops::Range<usize>, usize),
    /// Not enough bytes and the file has ended.
    Short,
    /// Not a record (unknown kind, impossible length or bad checksum).
    Bad,
}

impl LogReader<BufReader<File>> {
    /// Opens the log at `path` and reads its header.
    pub fn open(path: &Path) -> Result<Self, RecordError> {
        LogReader::new(BufReader::new(File::open(path)?))
    }
}

impl<R: Read> LogReader<R> {
    /// Starts reading a log from `input`: checks the preamble and reads the header.
    pub fn new(input: R) -> Result<Self, RecordError> {
        let mut reader = LogReader {
            input,
            buf: Vec::with_capacity(128 * 1024),
            pos: 0,
            base: 0,
            eof: false,
            done: false,
            header: LogHeader {
                created_ns: 0,
                program: String::new(),
                protocol: 0,
                origin: String::new(),
                config: String::new(),
            },
            n_records: 0,
            ended_cleanly: false,
            warnings: Vec::new(),
        };
        reader.fill(PREAMBLE_LEN)?;
        let avail = reader.buf.len();
        if avail == 0 {
            return Err(RecordError::Empty);
        }
        if avail < MAGIC.len() || &reader.buf[..MAGIC.len()] != MAGIC {
            return Err(RecordError::NotALog);
        }
        if avail < PREAMBLE_LEN {
            return Err(RecordError::BadHeader(
                "the file ends inside the preamble".into(),
            ));
        }
        let version = u16::from_be_bytes([reader.buf[8], reader.buf[9]]);
        if version != FORMAT_VERSION {
            return Err(RecordError::UnsupportedVersion(version));
        }
        reader.pos = PREAMBLE_LEN;
        match reader.parse_at(reader.pos)? {
            Parse::Whole(RecordKind::Header, _, payload, total) => {
                reader.header = rmp_serde::from_slice(&reader.buf[payload])
                    .map_err(|err| RecordError::BadHeader(err.to_string()))?;
                reader.pos += total;
                reader.n_records = 1;
            }
            Parse::Whole(..) => {
                return Err(RecordError::BadHeader(
                    "the first record is not a header".into(),
                ))
            }
            Parse::Short => {
                return Err(RecordError::BadHeader(
                    "the header record is cut short".into(),
                ))
            }
            Parse::Bad => {
                return Err(RecordError::BadHeader(
                    "the header record is damaged (bad kind, length or checksum)".into(),
                ))
            }
        }
        Ok(reader)
    }

    /// The log's header.
    pub fn header(&self) -> &LogHeader {
        &self.header
    }

    /// Warnings met so far (also logged with `tracing` as they happen).
    pub fn warnings(&self) -> &[ReadWarning] {
        &self.warnings
    }

    /// Whether the end record has been read.
    pub fn ended_cleanly(&self) -> bool {
        self.ended_cleanly
    }

    /// Whole records read so far, header included.
    pub fn n_records(&self) -> u64 {
        self.n_records
    }

    /// The next record, or `None` at the end of the log (clean or not).
    pub fn next_record(&mut self) -> Result<Option<Record>, RecordError> {
        loop {
            if self.done {
                return Ok(None);
            }
            self.compact();
            match self.parse_at(self.pos)? {
                Parse::Whole(kind, recv_ns, payload, total) => {
                    let record = self.decode(kind, recv_ns, payload);
                    let start = self.pos;
                    self.pos += total;
                    match record {
                        Some(record) => {
                            self.n_records += 1;
                            if matches!(record, Record::End { .. }) {
                                self.ended_cleanly = true;
                                self.done = true;
                                self.fill(1)?;
                                if self.buf.len() > self.pos {
                                    let offset = self.offset_of(self.pos);
                                    self.warn(ReadWarning::DataAfterEnd { offset });
                                }
                            }
                            return Ok(Some(record));
                        }
                        None => {
                            // Checksum good but content unusable: treat as damage.
                            let offset = self.offset_of(start);
                            self.warn(ReadWarning::Resynced {
                                offset,
                                skipped: total as u64,
                            });
                        }
                    }
                }
                Parse::Short => {
                    self.done = true;
                    let left = (self.buf.len() - self.pos) as u64;
                    if left > 0 {
                        let offset = self.offset_of(self.pos);
                        self.warn(ReadWarning::TornTail {
                            offset,
                            bytes: left,
                        });
                    }
                    let records = self.n_records;
                    self.warn(ReadWarning::NoCleanEnd { records });
                    return Ok(None);
                }
                Parse::Bad => self.resync()?,
            }
        }
    }

    /// Skips forward from a damaged record to the next whole one (or the end).
    fn resync(&mut self) -> Result<(), RecordError> {
        let start = self.offset_of(self.pos);
        loop {
            self.pos += 1;
            self.compact();
            match self.parse_at(self.pos)? {
                Parse::Whole(..) => {
                    let skipped = self.offset_of(self.pos) - start;
                    self.warn(ReadWarning::Resynced {
                        offset: start,
                        skipped,
                    });
                    return Ok(());
                }
                Parse::Short if self.buf.len() <= self.pos => {
                    let skipped = self.offset_of(self.pos) - start;
                    self.warn(ReadWarning::Resynced {
                        offset: start,
                        skipped,
                    });
                    return Ok(());
                }
                Parse::Short | Parse::Bad => {}
            }
        }
    }

    fn decode(
        &self,
        kind: RecordKind,
        recv_ns: i64,
        payload: std::ops::Range<usize>,
    ) -> Option<Record> {
        let bytes = &self.buf[payload];
        match kind {
            RecordKind::Frame => Some(Record::Frame {
                recv_ns,
                body: bytes.to_vec(),
            }),
            RecordKind::Datagram => Some(Record::Datagram {
                recv_ns,
                body: bytes.to_vec(),
            }),
            RecordKind::Tick => {
                let bench_ns = i64::from_be_bytes(bytes.try_into().ok()?);
                Some(Record::Tick { recv_ns, bench_ns })
            }
            RecordKind::End => {
                let end: LogEnd = rmp_serde::from_slice(bytes).ok()?;
                Some(Record::End { recv_ns, end })
            }
            // A second header in the middle of a log is not a record we can use.
            RecordKind::Header => None,
        }
    }

    /// Parses the record starting at `buf[at]`, reading more of the file as needed.
    fn parse_at(&mut self, at: usize) -> Result<Parse, RecordError> {
        self.fill_from(at, RECORD_HEAD_LEN)?;
        let avail = self.buf.len().saturating_sub(at);
        if avail == 0 {
            return Ok(Parse::Short);
        }
        let Some(kind) = RecordKind::from_byte(self.buf[at]) else {
            return Ok(Parse::Bad);
        };
        if avail < RECORD_HEAD_LEN {
            return Ok(Parse::Short);
        }
        let head = &self.buf[at..at + RECORD_HEAD_LEN];
        let len = u32::from_be_bytes(head[1..5].try_into().expect("4 bytes")) as usize;
        if len > kind.max_payload() || (kind == RecordKind::Tick && len != 8) {
            return Ok(Parse::Bad);
        }
        let recv_ns = i64::from_be_bytes(head[5..13].try_into().expect("8 bytes"));
        let total = RECORD_HEAD_LEN + len + RECORD_TAIL_LEN;
        self.fill_from(at, total)?;
        if self.buf.len() - at < total {
            return Ok(Parse::Short);
        }
        let mut crc = Crc32::new();
        crc.update(&self.buf[at..at + RECORD_HEAD_LEN + len]);
        let stored = u32::from_be_bytes(
            self.buf[at + RECORD_HEAD_LEN + len..at + total]
                .try_into()
                .expect("4 bytes"),
        );
        if crc.finish() != stored {
            return Ok(Parse::Bad);
        }
        let payload = at + RECORD_HEAD_LEN..at + RECORD_HEAD_LEN + len;
        Ok(Parse::Whole(kind, recv_ns, payload, total))
    }

    /// Ensures `n` bytes from `buf[at]` are buffered, unless the file ends first.
    #[inline]
    fn fill_from(&mut self, at: usize, n: usize) -> Result<(), RecordError> {
        // Called once per record; the file is read once per chunk.
        if self.buf.len() >= at + n || self.eof {
            return Ok(());
        }
        self.read_more(at + n)
    }

    /// Appends chunks of the file to `buf` until it holds `len` bytes or the
    /// file ends. Read straight into the buffer's spare room (`read_to_end`
    /// on a `take` neither zero-fills it nor goes through a copy on the
    /// stack, which a 64 KB array per call did: twice the cache traffic of
    /// the read itself).
    #[inline(never)]
    fn read_more(&mut self, len: usize) -> Result<(), RecordError> {
        while self.buf.len() < len && !self.eof {
            let got = (&mut self.input)
                .take(READ_CHUNK as u64)
                .read_to_end(&mut self.buf)?;
            if got == 0 {
                self.eof = true;
            }
        }
        Ok(())
    }

    /// Drops consumed bytes so a long log is read in bounded memory.
    fn compact(&mut self) {
        if self.pos > 256 * 1024 {
            self.buf.drain(..self.pos);
            self.base += self.pos as u64;
            self.pos = 0;
        }
    }

    fn fill(&mut self, n: usize) -> Result<(), RecordError> {
        self.fill_from(self.pos, n)
    }

    fn offset_of(&self, idx: usize) -> u64 {
        self.base + idx as u64
    }

    fn warn(&mut self, warning: ReadWarning) {
        tracing::warn!(%warning, "log damage worked around");
        self.warnings.push(warning);
    }
}
