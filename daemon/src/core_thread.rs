//! The estimator on its own OS thread: inputs in by a bounded crossbeam
//! channel, outputs out by a broadcast feed, the recorder beside it.
//!
//! Determinism: the core takes inputs in the order they reach the channel,
//! records each one (raw bytes and receive time) immediately before handing
//! it to [`Estimator::ingest`], and makes the live clock ticks itself,
//! recording them the same way. The log therefore holds exactly the
//! estimator's input sequence, and a replay of it reproduces the solutions.
//!
//! Backpressure: [`CoreSender::send`] waits (asynchronously) for room, so a
//! TCP source is read only as fast as the core keeps up; UDP uses
//! [`CoreSender::try_send`] and drops what finds no room.
//!
//! Completion: the thread ends when every [`CoreSender`] clone is dropped and
//! the queue is drained; it then closes the current epoch with a final tick,
//! closes the recording, and drops the feed, which tells subscribers.

use std::sync::atomic::AtomicU64;
use std::sync::atomic::Ordering::{Relaxed, SeqCst};
use std::sync::Arc;
use std::time::{Duration, Instant};

use crossbeam_channel::{Receiver, RecvTimeoutError, Sender, TrySendError};
use tokio::sync::{broadcast, mpsc, Notify};
use wahbad_protocol::{encode_frame, try_encode_frame, AlertState, Message, Reject};

use crate::estimator::{Estimator, Input, Output, Stats};
use crate::record::{mask_token, unix_now_ns, LogWriter};
use crate::serve::stats::{bump, Counters};

/// Where an input's raw bytes came from (decides the record kind).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Origin {
    /// A frame body from a TCP or Unix stream.
    Stream,
    /// A UDP datagram.
    Datagram,
}

/// One validated input on its way to the estimator.
#[derive(Debug)]
pub struct SourceInput {
    /// Wall clock when it was received, Unix ns.
    pub recv_ns: i64,
    /// Transport it came by.
    pub origin: Origin,
    /// The frame body or datagram exactly as received.
    pub raw: Vec<u8>,
    /// What it decoded and validated to.
    pub input: Input,
    /// Where to send a `reject` if the estimator refuses it (stream sources only).
    pub reply: Option<mpsc::Sender<Reject>>,
}

/// Sending half towards the core thread; cheap to clone.
#[derive(Clone)]
pub struct CoreSender {
    tx: Sender<SourceInput>,
    room: Arc<Notify>,
}

/// The core thread has ended; nothing more can be sent.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("the estimator thread has stopped")]
pub struct CoreGone;

impl CoreSender {
    /// Queues `input`, waiting for room: nothing accepted is ever dropped.
    pub async fn send(&self, mut input: SourceInput) -> Result<(), CoreGone> {
        loop {
            let notified = self.room.notified();
            tokio::pin!(notified);
            // Registered before trying, so a wake-up between the try and the
            // wait is not lost.
            notified.as_mut().enable();
            match self.tx.try_send(input) {
                Ok(()) => return Ok(()),
                Err(TrySendError::Full(back)) => {
                    input = back;
                    notified.await;
                }
                Err(TrySendError::Disconnected(_)) => return Err(CoreGone),
            }
        }
    }

    /// Queues `input` if there is room now; hands it back if not.
    pub fn try_send(&self, input: SourceInput) -> Result<(), Box<SourceInput>> {
        self.tx
            .try_send(input)
            .map_err(|err| Box::new(err.into_inner()))
    }
}

/// One estimator output, encoded once for every subscriber.
#[derive(Debug)]
pub struct Published {
    /// The frame as subscribers who want verdicts get it.
    pub full: Vec<u8>,
    /// The same solution without verdicts; `None` when `full` has none.
    pub lean: Option<Vec<u8>>,
    /// Whether verdicts were built for the epoch this output came from. The
    /// core builds them only while a subscriber wants them ([`VerdictDemand`]);
    /// a solution too large for a frame with them goes without, but still
    /// counts as built.
    pub verdicts_built: bool,
}

/// How many subscribers want per-observation verdicts: the core builds and
/// encodes them only while this is above zero (at 2,000 observations a
/// window they are most of an epoch's encoding time).
///
/// A subscriber counts itself before it subscribes to the feed, and then skips
/// the outputs at the head of its feed that were computed before the core saw
/// it (`verdicts_built` false): it sees the feed as if it had joined a moment
/// later, with verdicts in every solution.
#[derive(Debug, Default)]
pub struct VerdictDemand(AtomicU64);

impl VerdictDemand {
    /// Counts one subscriber that wants verdicts until the guard is dropped.
    pub fn want(&self) -> VerdictWant<'_> {
        self.0.fetch_add(1, SeqCst);
        VerdictWant(&self.0)
    }

    fn any(&self) -> bool {
        self.0.load(SeqCst) > 0
    }
}

/// One subscriber's share of [`VerdictDemand`], given back on drop.
#[derive(Debug)]
pub struct VerdictWant<'d>(&'d AtomicU64);

impl Drop for VerdictWant<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, SeqCst);
    }
}

impl Published {
    /// The frame for a subscriber that does or does not want verdicts.
    pub fn frame(&self, verdicts: bool) -> &[u8] {
        match (&self.lean, verdicts) {
            (Some(lean), false) => lean,
            _ => &self.full,
        }
    }

    /// Encodes `output`, moving it into the message (a solution is not
    /// cloned for its lean form: its verdicts are taken out and put back).
    /// `verdicts_built`: whether the estimator was building verdicts.
    pub fn encode(output: Output, verdicts_built: bool) -> Published {
        match output {
            Output::Solution(mut solution) => {
                let t = solution.t;
                let verdicts = solution.verdicts.take();
                let mut msg = Message::Solution(solution);
                let lean = encode_frame(&msg);
                let (Some(verdicts), Message::Solution(solution)) = (verdicts, &mut msg) else {
                    return Published {
                        full: lean,
                        lean: None,
                        verdicts_built,
                    };
                };
                solution.verdicts = Some(verdicts);
                // Many verdicts can exceed the 65536-byte frame limit, which
                // every subscriber would refuse: such a solution goes without them.
                match try_encode_frame(&msg) {
                    Ok(full) => Published {
                        full,
                        lean: Some(lean),
                        verdicts_built,
                    },
                    Err(err) => {
                        tracing::warn!(t, %err, "solution sent without verdicts");
                        Published {
                            full: lean,
                            lean: None,
                            verdicts_built,
                        }
                    }
                }
            }
            Output::Alert(alert) => Published {
                full: encode_frame(&Message::Alert(alert)),
                lean: None,
                verdicts_built,
            },
        }
    }
}

/// What the core thread needs besides the estimator.
pub struct CoreSetup {
    /// The estimator, configured.
    pub estimator: Estimator,
    /// Epoch period and latency allowance, ns, for the final tick at shutdown.
    pub period_ns: i64,
    /// Latency allowance, ns.
    pub latency_ns: i64,
    /// Tick interval while sources are quiet.
    pub tick: Duration,
    /// Capacity of the input queue.
    pub queue: usize,
    /// The recorder, if recording.
    pub recorder: Option<LogWriter<std::fs::File>>,
    /// Token bytes to mask in recorded bytes.
    pub mask: Option<Vec<u8>>,
    /// Subscribers wanting verdicts.
    pub verdict_demand: Arc<VerdictDemand>,
}

/// What the core thread did, returned when it ends.
#[derive(Debug, Clone)]
pub struct CoreReport {
    /// The estimator's counters at the end.
    pub stats: Stats,
    /// Records written (header and end included), when recording.
    pub records: Option<u64>,
    /// Why recording stopped early, if it did.
    pub record_error: Option<String>,
}

/// Starts the core thread; returns the input sender and the thread handle.
pub fn spawn(
    setup: CoreSetup,
    counters: Arc<Counters>,
    feed: broadcast::Sender<Arc<Published>>,
) -> std::io::Result<(CoreSender, std::thread::JoinHandle<CoreReport>)> {
    let (tx, rx) = crossbeam_channel::bounded(setup.queue);
    let room = Arc::new(Notify::new());
    let sender = CoreSender {
        tx,
        room: room.clone(),
    };
    let handle = std::thread::Builder::new()
        .name("wahbad-core".into())
        .spawn(move || Core::new(setup, counters, feed, room).run(rx))?;
    Ok((sender, handle))
}

struct Core {
    estimator: Estimator,
    period_ns: i64,
    latency_ns: i64,
    tick: Duration,
    recorder: Option<LogWriter<std::fs::File>>,
    mask: Option<Vec<u8>>,
    record_error: Option<String>,
    counters: Arc<Counters>,
    feed: broadcast::Sender<Arc<Published>>,
    room: Arc<Notify>,
    verdict_demand: Arc<VerdictDemand>,
    /// Whether the estimator builds verdicts now (set before each input).
    verdicts_on: bool,
    outputs: Vec<Output>,
    /// Bench time minus wall time (Unix ns) of the newest input, the mapping
    /// the live clock ticks use.
    offset_ns: Option<i64>,
    newest_t: i64,
    last_input: Instant,
    last_tick: Instant,
    last_tick_ns: i64,
}

impl Core {
    fn new(
        setup: CoreSetup,
        counters: Arc<Counters>,
        feed: broadcast::Sender<Arc<Published>>,
        room: Arc<Notify>,
    ) -> Self {
        Core {
            estimator: setup.estimator,
            period_ns: setup.period_ns,
            latency_ns: setup.latency_ns,
            tick: setup.tick,
            recorder: setup.recorder,
            mask: setup.mask,
            record_error: None,
            counters,
            feed,
            room,
            verdict_demand: setup.verdict_demand,
            verdicts_on: true,
            outputs: Vec::new(),
            offset_ns: None,
            newest_t: i64::MIN,
            last_input: Instant::now(),
            last_tick: Instant::now(),
            last_tick_ns: i64::MIN,
        }
    }

    fn run(mut self, rx: Receiver<SourceInput>) -> CoreReport {
        // Wake at least this often to flush the recorder and tick the clock.
        let wake = self.tick.min(Duration::from_millis(25));
        loop {
            match rx.recv_timeout(wake) {
                Ok(input) => {
                    self.room.notify_waiters();
                    self.ingest_source(input);
                }
                Err(RecvTimeoutError::Timeout) => {}
                Err(RecvTimeoutError::Disconnected) => break,
            }
            let now = Instant::now();
            if now.duration_since(self.last_input) >= self.tick
                && now.duration_since(self.last_tick) >= self.tick
            {
                self.live_tick(now);
            }
            if let Some(recorder) = &mut self.recorder {
                if let Err(err) = recorder.flush_if_due(now) {
                    self.stop_recording(err.to_string());
                }
            }
        }
        self.finish()
    }

    fn ingest_source(&mut self, source: SourceInput) {
        let SourceInput {
            recv_ns,
            origin,
            mut raw,
            input,
            reply,
        } = source;
        self.last_input = Instant::now();
        let t = match &input {
            Input::Obs(obs) => Some(obs.t),
            Input::Rate(rate) => Some(rate.t),
            Input::Truth(truth) => Some(truth.t),
            Input::Tick(_) => None,
        };
        if let Some(t) = t {
            if t >= self.newest_t {
                self.newest_t = t;
                self.offset_ns = Some(t.saturating_sub(recv_ns));
            }
        }
        if let Some(recorder) = &mut self.recorder {
            if let Some(token) = &self.mask {
                mask_token(&mut raw, token);
            }
            let written = match origin {
                Origin::Stream => recorder.write_frame(recv_ns, &raw),
                Origin::Datagram => recorder.write_datagram(recv_ns, &raw),
            };
            if let Err(err) = written {
                self.stop_recording(err.to_string());
            }
        }
        let seq = match &input {
            Input::Obs(obs) => Some(obs.seq),
            Input::Rate(rate) => Some(rate.seq),
            _ => None,
        };
        self.follow_verdict_demand();
        if let Err(err) = self.estimator.ingest(input, &mut self.outputs) {
            bump(&self.counters.rejected);
            let sensor = err.sensor();
            tracing::debug!(sensor, seq, %err, "input rejected by the estimator");
            if let Some(reply) = reply {
                // A source that does not read its rejects loses them; the feed never waits.
                let _ = reply.try_send(Reject {
                    sensor: Some(sensor.to_string()),
                    seq,
                    reason: err.to_string(),
                });
            }
        }
        self.publish();
    }

    fn live_tick(&mut self, now: Instant) {
        self.last_tick = now;
        let Some(offset) = self.offset_ns else {
            return;
        };
        let wall_ns = unix_now_ns();
        let bench_ns = wall_ns.saturating_add(offset);
        if bench_ns <= self.last_tick_ns || bench_ns <= self.newest_t {
            return;
        }
        self.tick_at(wall_ns, bench_ns);
    }

    fn tick_at(&mut self, wall_ns: i64, bench_ns: i64) {
        self.last_tick_ns = bench_ns;
        if let Some(recorder) = &mut self.recorder {
            if let Err(err) = recorder.write_tick(wall_ns, bench_ns) {
                self.stop_recording(err.to_string());
            }
        }
        self.follow_verdict_demand();
        // A tick is never refused; the result is ignored for that reason.
        let _ = self
            .estimator
            .ingest(Input::Tick(bench_ns), &mut self.outputs);
        self.publish();
    }

    fn follow_verdict_demand(&mut self) {
        let on = self.verdict_demand.any();
        if on != self.verdicts_on {
            self.verdicts_on = on;
            self.estimator.set_verdicts(on);
        }
    }

    fn publish(&mut self) {
        let stats = self.estimator.stats();
        self.counters.accepted.store(stats.accepted, Relaxed);
        self.counters.epochs.store(stats.epochs, Relaxed);
        self.counters
            .estimator_dropped
            .store(stats.dropped_too_old + stats.dropped_overflow, Relaxed);
        for output in self.outputs.drain(..) {
            match &output {
                Output::Solution(solution) => tracing::debug!(
                    t = solution.t,
                    status = solution.status.as_str(),
                    inlier_fraction = solution.inlier_fraction,
                    n = solution.n,
                    "epoch solved"
                ),
                Output::Alert(alert) => {
                    let state = match alert.state {
                        AlertState::Raised => "raised",
                        AlertState::Cleared => "cleared",
                    };
                    tracing::warn!(
                        t = alert.t,
                        kind = %alert.kind,
                        state,
                        sensor = alert.sensor.as_deref().unwrap_or("-"),
                        value = alert.value,
                        threshold = alert.threshold,
                        "alert {state}: {}",
                        alert.message
                    );
                }
            }
            // No subscriber is not an error: the feed goes on.
            let published = Published::encode(output, self.verdicts_on);
            let _ = self.feed.send(Arc::new(published));
        }
    }

    fn stop_recording(&mut self, why: String) {
        tracing::error!(error = %why, "recording stopped: the log cannot be written");
        self.recorder = None;
        self.record_error = Some(why);
    }

    /// Closes the epoch holding the newest data, then the recording.
    fn finish(mut self) -> CoreReport {
        if self.newest_t != i64::MIN && self.period_ns > 0 {
            let epoch = self.newest_t.div_euclid(self.period_ns)
                + i64::from(self.newest_t.rem_euclid(self.period_ns) != 0);
            let close_ns = (epoch * self.period_ns).saturating_add(self.latency_ns);
            if close_ns > self.last_tick_ns {
                self.tick_at(unix_now_ns(), close_ns);
            }
        }
        let mut records = None;
        if let Some(recorder) = self.recorder.take() {
            let n = recorder.n_records() + 1;
            match recorder.close("shutdown", unix_now_ns()) {
                Ok(()) => records = Some(n),
                Err(err) => self.record_error = Some(err.to_string()),
            }
        }
        CoreReport {
            stats: self.estimator.stats(),
            records,
            record_error: self.record_error,
        }
    }
}
