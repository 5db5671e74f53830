//! The buffered observations of the open windows, and epoch arithmetic.
//!
//! Observations are kept in time order (ties in arrival order), so the window
//! of epoch `E`, `E - S < t <= E`, is a contiguous range found by binary search.
//! The buffer holds at most the configured number of observations; inserting
//! beyond it drops the oldest (which may be the one just inserted).

use std::collections::VecDeque;

use nalgebra::Vector3;

/// One accepted observation waiting in the buffer.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BufferedObs {
    /// Measurement time, ns.
    pub t: i64,
    /// Sequence number.
    pub seq: u64,
    /// Index into the estimator's sensor table.
    pub sensor_idx: u16,
    /// Body-frame unit vector at `t`.
    pub b: Vector3<f64>,
    /// Reference-frame unit vector.
    pub r: Vector3<f64>,
    /// 1-σ angular noise, rad (message value or the sensor's default).
    pub sigma: f64,
    /// `b` carried to the rate buffer's anchor time, `K(t)⁻¹ b`, valid while
    /// the buffer's generation is `anchored_gen` (0: not computed).
    pub anchored_b: Vector3<f64>,
    /// See `anchored_b`.
    pub anchored_gen: u64,
}

/// Time-ordered observations of the open windows.
#[derive(Debug, Clone, Default)]
pub struct ObsBuffer {
    obs: VecDeque<BufferedObs>,
}

impl ObsBuffer {
    /// An empty buffer with room for `capacity` observations.
    pub fn with_capacity(capacity: usize) -> Self {
        ObsBuffer {
            obs: VecDeque::with_capacity(capacity + 1),
        }
    }

    /// Observations held.
    pub fn len(&self) -> usize {
        self.obs.len()
    }

    /// Whether none is held.
    pub fn is_empty(&self) -> bool {
        self.obs.is_empty()
    }

    /// The observation at `idx` in time order.
    pub fn get(&self, idx: usize) -> &BufferedObs {
        &self.obs[idx]
    }

    /// The observation at `idx`, to update its cached propagation.
    pub fn get_mut(&mut self, idx: usize) -> &mut BufferedObs {
        &mut self.obs[idx]
    }

    /// The observations of `range` as the ring's two contiguous parts, in
    /// order (the second empty unless the range wraps): loops over plain
    /// slices, without the chained iterator's test per item.
    pub fn slices(&self, range: std::ops::Range<usize>) -> (&[BufferedObs], &[BufferedObs]) {
        let (a, b) = self.obs.as_slices();
        let (in_a, in_b) = split_range(range, a.len());
        (&a[in_a], &b[in_b])
    }

    /// [`ObsBuffer::slices`], mutable.
    pub fn slices_mut(
        &mut self,
        range: std::ops::Range<usize>,
    ) -> (&mut [BufferedObs], &mut [BufferedObs]) {
        let (a, b) = self.obs.as_mut_slices();
        let (in_a, in_b) = split_range(range, a.len());
        (&mut a[in_a], &mut b[in_b])
    }

    /// Time of the oldest observation held.
    pub fn first_t(&self) -> Option<i64> {
        self.obs.front().map(|o| o.t)
    }

    /// Inserts in time order; when more than `capacity` are then held, drops the
    /// oldest and returns true.
    pub fn insert(&mut self, obs: BufferedObs, capacity: usize) -> bool {
        // Most observations come in time order: no search for those.
        if self.obs.back().is_none_or(|last| last.t <= obs.t) {
            self.obs.push_back(obs);
        } else {
            let at = self.obs.partition_point(|o| o.t <= obs.t);
            self.obs.insert(at, obs);
        }
        if self.obs.len() > capacity {
            self.obs.pop_front();
            return true;
        }
        false
    }

    /// Forgets observations with `t <= cutoff` (no open window holds them).
    pub fn prune(&mut self, cutoff: i64) {
        while self.obs.front().is_some_and(|o| o.t <= cutoff) {
            self.obs.pop_front();
        }
    }

    /// Index range of the observations with `after < t <= upto`.
    pub fn range(&self, after: i64, upto: i64) -> std::ops::Range<usize> {
        let lo = self.obs.partition_point(|o| o.t <= after);
        let hi = self.obs.partition_point(|o| o.t <= upto);
        lo..hi.max(lo)
    }
}

/// `range` of a ring split at `split` (the length of its first slice):
/// the parts in the first and in the second slice.
fn split_range(
    range: std::ops::Range<usize>,
    split: usize,
) -> (std::ops::Range<usize>, std::ops::Range<usize>) {
    (
        range.start.min(split)..range.end.min(split),
        range.start.saturating_sub(split)..range.end.saturating_sub(split),
    )
}

/// The first multiple of `period` at or after `t`.
pub fn epoch_at_or_after(t: i64, period: i64) -> i64 {
    let rem = t.rem_euclid(period);
    if rem == 0 {
        t
    } else {
        t.saturating_add(period - rem)
    }
}

/// The first epoch `E` (multiple of `period`) not yet closable at `newest`,
/// i.e. with `E + latency > newest`.
pub fn first_open_epoch(newest: i64, period: i64, latency: i64) -> i64 {
    epoch_at_or_after(newest.saturating_sub(latency).saturating_add(1), period)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn obs(t: i64, seq: u64) -> BufferedObs {
        BufferedObs {
            t,
            seq,
            sensor_idx: 0,
            b: Vector3::x(),
            r: Vector3::x(),
            sigma: 1e-3,
            anchored_b: Vector3::zeros(),
            anchored_gen: 0,
        }
    }

    #[test]
    fn epoch_arithmetic_handles_negative_and_exact_times() {
        assert_eq!(epoch_at_or_after(0, 100), 0);
        assert_eq!(epoch_at_or_after(1, 100), 100);
        assert_eq!(epoch_at_or_after(100, 100), 100);
        assert_eq!(epoch_at_or_after(-150, 100), -100);
        // Newest 1049 with L = 50: epoch 1000 needs 1050, so it is still open.
        assert_eq!(first_open_epoch(1049, 100, 50), 1000);
        assert_eq!(first_open_epoch(1050, 100, 50), 1100);
    }

    #[test]
    fn ranges_read_across_the_ring_wrap() {
        // Capacity 4, six in: the ring wraps, the ranges still come in order.
        let mut buf = ObsBuffer::with_capacity(4);
        for i in 0..6 {
            buf.insert(obs(10 * i, i as u64), 4);
        }
        for (lo, hi) in [(0, 4), (1, 3), (0, 0), (2, 4), (3, 4)] {
            let (a, b) = buf.slices(lo..hi);
            let seqs: Vec<u64> = a.iter().chain(b).map(|o| o.seq).collect();
            let want: Vec<u64> = (lo..hi).map(|i| buf.get(i).seq).collect();
            assert_eq!(seqs, want);
            let (a, b) = buf.slices_mut(lo..hi);
            let seqs_mut: Vec<u64> = a.iter().chain(b.iter()).map(|o| o.seq).collect();
            assert_eq!(seqs_mut, want);
        }
        assert_eq!(buf.get(0).seq, 2);
    }

    #[test]
    fn buffer_keeps_time_order_and_caps() {
        let mut buf = ObsBuffer::with_capacity(3);
        assert!(!buf.insert(obs(30, 1), 3));
        assert!(!buf.insert(obs(10, 2), 3));
        assert!(!buf.insert(obs(30, 3), 3));
        let seqs: Vec<u64> = (0..buf.len()).map(|i| buf.get(i).seq).collect();
        assert_eq!(seqs, [2, 1, 3]);
        assert_eq!(buf.range(10, 30), 1..3);
        assert_eq!(buf.range(30, 40), 3..3);
        assert!(buf.insert(obs(5, 4), 3)); // the newcomer is the oldest: it goes
        assert_eq!(buf.first_t(), Some(10));
        buf.prune(30);
        assert!(buf.is_empty());
    }
}
