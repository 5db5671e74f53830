//! Counters of the running server, shared by every task and the core thread.
//!
//! Plain atomics: they are read for `status` answers and the final summary,
//! never used for decisions, so relaxed ordering is enough.

use std::sync::atomic::{AtomicU64, Ordering::Relaxed};
use std::time::Instant;

use serde::Serialize;
use wahbad_protocol::StatusReport;

/// Every counter of the server.
#[derive(Debug)]
pub struct Counters {
    started: Instant,
    /// Source connections open now.
    pub sources: AtomicU64,
    /// Subscriber connections open now.
    pub subscribers: AtomicU64,
    /// Observations and rates the estimator accepted.
    pub accepted: AtomicU64,
    /// Messages rejected (decode, validation or estimator).
    pub rejected: AtomicU64,
    /// UDP datagrams dropped because the estimator queue had no room.
    pub udp_dropped_full: AtomicU64,
    /// Inputs the estimator dropped (too old for any window, or buffer overflow).
    pub estimator_dropped: AtomicU64,
    /// Epochs solved.
    pub epochs: AtomicU64,
    /// Connections refused with `busy`.
    pub busy: AtomicU64,
    /// Connections closed with `timeout` before their hello.
    pub hello_timeouts: AtomicU64,
    /// Hellos refused with `auth`.
    pub auth_failures: AtomicU64,
    /// Hellos refused with `version`.
    pub version_errors: AtomicU64,
    /// First frames refused with `hello`.
    pub hello_errors: AtomicU64,
    /// Connections closed with `framing`.
    pub framing_errors: AtomicU64,
    /// UDP datagrams dropped for a missing or wrong token.
    pub udp_dropped_auth: AtomicU64,
    /// Subscribers disconnected because their socket accepted nothing in time.
    pub subscriber_timeouts: AtomicU64,
    /// Messages skipped for slow subscribers (sum of `lagged.skipped`).
    pub lagged_skipped: AtomicU64,
}

/// A copy of the counters at one moment, for logs and tests.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[allow(missing_docs)]
pub struct CountersSnapshot {
    pub accepted: u64,
    pub rejected: u64,
    pub dropped: u64,
    pub udp_dropped_full: u64,
    pub estimator_dropped: u64,
    pub epochs: u64,
    pub busy: u64,
    pub hello_timeouts: u64,
    pub auth_failures: u64,
    pub version_errors: u64,
    pub hello_errors: u64,
    pub framing_errors: u64,
    pub udp_dropped_auth: u64,
    pub subscriber_timeouts: u64,
    pub lagged_skipped: u64,
}

impl Default for Counters {
    fn default() -> Self {
        Counters {
            started: Instant::now(),
            sources: AtomicU64::new(0),
            subscribers: AtomicU64::new(0),
            accepted: AtomicU64::new(0),
            rejected: AtomicU64::new(0),
            udp_dropped_full: AtomicU64::new(0),
            estimator_dropped: AtomicU64::new(0),
            epochs: AtomicU64::new(0),
            busy: AtomicU64::new(0),
            hello_timeouts: AtomicU64::new(0),
            auth_failures: AtomicU64::new(0),
            version_errors: AtomicU64::new(0),
            hello_errors: AtomicU64::new(0),
            framing_errors: AtomicU64::new(0),
            udp_dropped_auth: AtomicU64::new(0),
            subscriber_timeouts: AtomicU64::new(0),
            lagged_skipped: AtomicU64::new(0),
        }
    }
}

/// Adds one to a counter.
pub fn bump(counter: &AtomicU64) {
    counter.fetch_add(1, Relaxed);
}

impl Counters {
    /// Messages dropped for lack of room: UDP datagrams with no queue space,
    /// plus inputs the estimator could not keep (overflow, too old).
    pub fn dropped(&self) -> u64 {
        self.udp_dropped_full.load(Relaxed) + self.estimator_dropped.load(Relaxed)
    }

    /// The protocol's `status` answer.
    pub fn status_report(&self) -> StatusReport {
        StatusReport {
            uptime_s: self.started.elapsed().as_secs_f64(),
            sources: self.sources.load(Relaxed),
            subscribers: self.subscribers.load(Relaxed),
            accepted: self.accepted.load(Relaxed),
            rejected: self.rejected.load(Relaxed),
            dropped: self.dropped(),
            epochs: self.epochs.load(Relaxed),
        }
    }

    /// Every counter at once.
    pub fn snapshot(&self) -> CountersSnapshot {
        CountersSnapshot {
            accepted: self.accepted.load(Relaxed),
            rejected: self.rejected.load(Relaxed),
            dropped: self.dropped(),
            udp_dropped_full: self.udp_dropped_full.load(Relaxed),
            estimator_dropped: self.estimator_dropped.load(Relaxed),
            epochs: self.epochs.load(Relaxed),
            busy: self.busy.load(Relaxed),
            hello_timeouts: self.hello_timeouts.load(Relaxed),
            auth_failures: self.auth_failures.load(Relaxed),
            version_errors: self.version_errors.load(Relaxed),
            hello_errors: self.hello_errors.load(Relaxed),
            framing_errors: self.framing_errors.load(Relaxed),
            udp_dropped_auth: self.udp_dropped_auth.load(Relaxed),
            subscriber_timeouts: self.subscriber_timeouts.load(Relaxed),
            lagged_skipped: self.lagged_skipped.load(Relaxed),
        }
    }
}

/// Keeps a gauge (`sources`, `subscribers`) raised while alive.
pub struct GaugeGuard<'c>(&'c AtomicU64);

impl<'c> GaugeGuard<'c> {
    /// Raises `gauge` by one until dropped.
    pub fn new(gauge: &'c AtomicU64) -> Self {
        gauge.fetch_add(1, Relaxed);
        GaugeGuard(gauge)
    }
}

impl Drop for GaugeGuard<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Relaxed);
    }
}
