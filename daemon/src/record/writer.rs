//! Writing a log: preamble, header, records, end; flushed on a timer by the caller.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::Path;
use std::time::{Duration, Instant};

use super::{
    Crc32, LogEnd, LogHeader, RecordError, RecordKind, FORMAT_VERSION, MAGIC, RECORD_HEAD_LEN,
};

/// Flush interval: the issue asks for at least every 100 ms; half that leaves margin.
pub const FLUSH_EVERY: Duration = Duration::from_millis(50);

/// A log being written. Records go to a buffer; [`LogWriter::flush_if_due`]
/// pushes them to the operating system at least every [`FLUSH_EVERY`], so a
/// crash loses at most that much and never leaves a half-written record
/// before a whole one.
pub struct LogWriter<W: Write> {
    out: BufWriter<W>,
    n_records: u64,
    last_flush: Instant,
    dirty: bool,
}

impl LogWriter<File> {
    /// Creates (or truncates) the file at `path` and writes the preamble and header.
    pub fn create(path: &Path, header: &LogHeader) -> Result<Self, RecordError> {
        LogWriter::new(File::create(path)?, header)
    }

    /// Writes the end record, flushes and syncs the file to disk.
    pub fn close(self, reason: &str, now_ns: i64) -> Result<(), RecordError> {
        let file = self.finish(reason, now_ns)?;
        file.sync_all()?;
        Ok(())
    }
}

impl<W: Write> LogWriter<W> {
    /// Starts a log on `out`: preamble and header record, flushed at once.
    pub fn new(out: W, header: &LogHeader) -> Result<Self, RecordError> {
        let mut writer = LogWriter {
            out: BufWriter::with_capacity(64 * 1024, out),
            n_records: 0,
            last_flush: Instant::now(),
            dirty: false,
        };
        writer.out.write_all(MAGIC)?;
        writer.out.write_all(&FORMAT_VERSION.to_be_bytes())?;
        writer.out.write_all(&0u16.to_be_bytes())?;
        let payload = rmp_serde::to_vec_named(header)
            .map_err(|err| RecordError::BadHeader(err.to_string()))?;
        writer.write_record(RecordKind::Header, header.created_ns, &payload)?;
        writer.flush()?;
        Ok(writer)
    }

    /// Records a stream frame body as it arrived.
    pub fn write_frame(&mut self, recv_ns: i64, body: &[u8]) -> Result<(), RecordError> {
        self.write_record(RecordKind::Frame, recv_ns, body)
    }

    /// Records a datagram (its token already masked).
    pub fn write_datagram(&mut self, recv_ns: i64, body: &[u8]) -> Result<(), RecordError> {
        self.write_record(RecordKind::Datagram, recv_ns, body)
    }

    /// Records a clock tick.
    pub fn write_tick(&mut self, recv_ns: i64, bench_ns: i64) -> Result<(), RecordError> {
        self.write_record(RecordKind::Tick, recv_ns, &bench_ns.to_be_bytes())
    }

    /// Records written so far, header included.
    pub fn n_records(&self) -> u64 {
        self.n_records
    }

    /// Flushes when [`FLUSH_EVERY`] has passed since the last flush and something is pending.
    pub fn flush_if_due(&mut self, now: Instant) -> Result<(), RecordError> {
        if self.dirty && now.duration_since(self.last_flush) >= FLUSH_EVERY {
            self.flush()?;
        }
        Ok(())
    }

    /// Pushes everything buffered to the operating system.
    pub fn flush(&mut self) -> Result<(), RecordError> {
        self.out.flush()?;
        self.last_flush = Instant::now();
        self.dirty = false;
        Ok(())
    }

    /// Writes the end record, flushes, and hands back the underlying writer.
    pub fn finish(mut self, reason: &str, now_ns: i64) -> Result<W, RecordError> {
        let end = LogEnd {
            records: self.n_records,
            reason: reason.to_string(),
        };
        let payload =
            rmp_serde::to_vec_named(&end).map_err(|err| RecordError::BadHeader(err.to_string()))?;
        self.write_record(RecordKind::End, now_ns, &payload)?;
        self.flush()?;
        self.out
            .into_inner()
            .map_err(|err| RecordError::Io(err.into_error()))
    }

    fn write_record(
        &mut self,
        kind: RecordKind,
        recv_ns: i64,
        payload: &[u8],
    ) -> Result<(), RecordError> {
        if payload.len() > kind.max_payload() {
            return Err(RecordError::TooLarge {
                len: payload.len(),
                max: kind.max_payload(),
            });
        }
        let mut head = [0u8; RECORD_HEAD_LEN];
        head[0] = kind.byte();
        head[1..5].copy_from_slice(&(payload.len() as u32).to_be_bytes());
        head[5..13].copy_from_slice(&recv_ns.to_be_bytes());
        let mut crc = Crc32::new();
        crc.update(&head);
        crc.update(payload);
        self.out.write_all(&head)?;
        self.out.write_all(payload)?;
        self.out.write_all(&crc.finish().to_be_bytes())?;
        self.n_records += 1;
        self.dirty = true;
        Ok(())
    }
}
