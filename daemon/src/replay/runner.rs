//! The replay loop: every record through the real decoder and validation
//! ([`record_input`]) into a fresh [`Estimator`], in log order, ticks included,
//! so the outputs are those the live run published, bit for bit.
//!
//! - Pacing ([`Pacer`]): none by default (as fast as the estimator goes);
//!   with a speed `X` the input of data time `t` is handed over no earlier
//!   than `(t − t₀) / X` of wall time after the first input (`t₀` its data time).
//! - A record that passes its checksum but does not decode or validate is
//!   counted as rejected and reported (by record number) and the replay goes
//!   on; the reader's own damage warnings carry file offsets.

use std::fs::File;
use std::io::{BufReader, Read};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering::Relaxed};
use std::sync::Arc;
use std::time::{Duration, Instant};

use wahbad_protocol::{Alert, Solution};

use super::summary::Counts;
use super::truth::TruthTrack;
use super::ReplayError;
use crate::estimator::{Estimator, EstimatorConfig, Input, Output};
use crate::record::{record_input, LogHeader, LogReader, ReadWarning};

/// A reader that counts the bytes it has read (for the progress bar).
pub struct CountingRead<R> {
    inner: R,
    bytes: Arc<AtomicU64>,
}

impl<R: Read> Read for CountingRead<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let got = self.inner.read(buf)?;
        self.bytes.fetch_add(got as u64, Relaxed);
        Ok(got)
    }
}

/// An opened log: its header read and checked.
pub struct LogInput {
    path: PathBuf,
    reader: LogReader<CountingRead<BufReader<File>>>,
    bytes: Arc<AtomicU64>,
    file_len: u64,
}

impl LogInput {
    /// Opens `path` and reads its header; the error names the file.
    pub fn open(path: &Path) -> Result<LogInput, ReplayError> {
        let open_err = |source| ReplayError::Open {
            path: path.to_path_buf(),
            source,
        };
        let file = File::open(path).map_err(|err| open_err(err.into()))?;
        let file_len = file.metadata().map(|m| m.len()).unwrap_or(0);
        let bytes = Arc::new(AtomicU64::new(0));
        let counting = CountingRead {
            inner: BufReader::new(file),
            bytes: bytes.clone(),
        };
        let reader = LogReader::new(counting).map_err(open_err)?;
        Ok(LogInput {
            path: path.to_path_buf(),
            reader,
            bytes,
            file_len,
        })
    }

    /// The log's header.
    pub fn header(&self) -> &LogHeader {
        self.reader.header()
    }

    /// The file's length, bytes.
    pub fn file_len(&self) -> u64 {
        self.file_len
    }

    /// The path it was opened from.
    pub fn path(&self) -> &Path {
        &self.path
    }
}

/// Paces inputs on data time.
#[derive(Debug, Clone)]
pub struct Pacer {
    speed: Option<f64>,
    start: Option<(Instant, i64)>,
}

impl Pacer {
    /// `speed`: data seconds per wall second; `None` for as fast as possible.
    pub fn new(speed: Option<f64>) -> Pacer {
        Pacer { speed, start: None }
    }

    /// Whether inputs are paced at all (a speed was given).
    pub fn is_paced(&self) -> bool {
        self.speed.is_some()
    }

    /// How long to wait before handing over an input of data time `t`.
    pub fn delay(&mut self, t: i64, now: Instant) -> Duration {
        let Some(speed) = self.speed else {
            return Duration::ZERO;
        };
        let (wall0, data0) = *self.start.get_or_insert((now, t));
        let data_s = (t.saturating_sub(data0)).max(0) as f64 * 1e-9;
        let due = wall0 + Duration::from_secs_f64(data_s / speed);
        due.saturating_duration_since(now)
    }
}

/// A record that could not be used although its checksum was good.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BadRecord {
    /// Record number in the log (the header is record 1).
    pub record: u64,
    /// Why.
    pub reason: String,
}

/// Everything a replay produced.
#[derive(Debug, Clone, Default)]
pub struct ReplayRun {
    /// Solutions in order (verdicts kept only when asked for).
    pub solutions: Vec<Solution>,
    /// Alerts in order.
    pub alerts: Vec<Alert>,
    /// The log's truth samples.
    pub truth: TruthTrack,
    /// Observations, rejects, drops.
    pub counts: Counts,
    /// Damage the reader worked around, with file offsets.
    pub warnings: Vec<ReadWarning>,
    /// Records whose content was unusable.
    pub bad_records: Vec<BadRecord>,
    /// Records read, header included.
    pub n_records: u64,
    /// Whether the log ended with its end record.
    pub ended_cleanly: bool,
}

/// How to run a replay.
#[derive(Debug, Clone, Default)]
pub struct RunOptions {
    /// Pacing speed (1 = real time); `None` for as fast as possible.
    pub speed: Option<f64>,
    /// Keep per-observation verdicts in [`ReplayRun::solutions`] (the report needs them).
    pub keep_verdicts: bool,
    /// Hand solutions to `on_output` with their verdicts (the solutions
    /// file and republished feeds carry them). With neither this nor
    /// `keep_verdicts` the estimator does not build verdicts at all.
    pub emit_verdicts: bool,
}

/// The data time an input carries.
fn data_time(input: &Input) -> i64 {
    match input {
        Input::Obs(obs) => obs.t,
        Input::Rate(rate) => rate.t,
        Input::Truth(truth) => truth.t,
        Input::Tick(t) => *t,
    }
}

/// Replays `log` through a fresh estimator for `config`. Every output goes
/// to `on_output` as it is made; `progress` is told the bytes read so far.
pub fn run(
    mut log: LogInput,
    config: EstimatorConfig,
    options: &RunOptions,
    on_output: &mut dyn FnMut(&Output) -> std::io::Result<()>,
    progress: &mut dyn FnMut(u64),
) -> Result<ReplayRun, ReplayError> {
    let mut estimator =
        Estimator::new(config).map_err(|err| ReplayError::Config(err.to_string()))?;
    estimator.set_verdicts(options.keep_verdicts || options.emit_verdicts);
    let mut pacer = Pacer::new(options.speed);
    let mut reported_bytes = u64::MAX;
    let mut run = ReplayRun::default();
    let mut outputs = Vec::new();
    let mut n_decode_rejects = 0u64;
    loop {
        let record = log
            .reader
            .next_record()
            .map_err(|source| ReplayError::Read {
                path: log.path.clone(),
                source,
            })?;
        let Some(record) = record else { break };
        let input = match record_input(&record) {
            Ok(Some(input)) => input,
            Ok(None) => continue,
            Err(err) => {
                n_decode_rejects += 1;
                let bad = BadRecord {
                    record: log.reader.n_records(),
                    reason: err.to_string(),
                };
                tracing::warn!(record = bad.record, reason = %bad.reason, "record not used");
                run.bad_records.push(bad);
                continue;
            }
        };
        if pacer.is_paced() {
            let wait = pacer.delay(data_time(&input), Instant::now());
            if !wait.is_zero() {
                std::thread::sleep(wait);
            }
        }
        match &input {
            Input::Obs(_) => run.counts.observations += 1,
            Input::Truth(truth) => {
                run.truth.push(truth.t, truth.q);
            }
            _ => {}
        }
        // A rejected input is counted in the estimator's stats.
        let _ = estimator.ingest(input, &mut outputs);
        for output in outputs.drain(..) {
            on_output(&output).map_err(ReplayError::Output)?;
            match output {
                Output::Solution(mut solution) => {
                    if !options.keep_verdicts {
                        solution.verdicts = None;
                    }
                    run.solutions.push(solution);
                }
                Output::Alert(alert) => run.alerts.push(alert),
            }
        }
        // The count moves once per read chunk: report only then (a progress
        // update reads the clock, which per record was a visible cost).
        let bytes = log.bytes.load(Relaxed);
        if bytes != reported_bytes {
            reported_bytes = bytes;
            progress(bytes);
        }
    }
    let stats = estimator.stats();
    run.counts.rejected = stats.rejected + n_decode_rejects;
    run.counts.dropped = stats.dropped_too_old + stats.dropped_overflow;
    run.warnings = log.reader.warnings().to_vec();
    run.n_records = log.reader.n_records();
    run.ended_cleanly = log.reader.ended_cleanly();
    progress(log.file_len);
    Ok(run)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pacing_follows_data_time_at_the_given_speed() {
        let now = Instant::now();
        let mut pacer = Pacer::new(Some(2.0));
        assert_eq!(pacer.delay(5_000_000_000, now), Duration::ZERO);
        // One data second later at speed 2: half a wall second after the start.
        let wait = pacer.delay(6_000_000_000, now);
        assert_eq!(wait, Duration::from_millis(500));
        let later = now + Duration::from_millis(800);
        assert_eq!(pacer.delay(6_000_000_000, later), Duration::ZERO);
        let mut fast = Pacer::new(None);
        assert_eq!(fast.delay(0, now), Duration::ZERO);
        assert_eq!(fast.delay(1_000_000_000_000, now), Duration::ZERO);
    }
}
