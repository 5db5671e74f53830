//! Rate propagation: carries body vectors from their own time to the epoch.
//!
//! Kinematics: with `b(t) = A(t) r` and body rate `ω` (body frame),
//! `dA/dt = -[ω×] A`, so a body vector seen at `t` reads
//! `b(E) = A(E) A(t)ᵀ b(t) = C(t→E) b(t)` at the epoch. Each rate sample is
//! taken as the rate around its own time: it holds from the midpoint with the
//! previous sample to the midpoint with the next (nearest-sample hold). The
//! rate is piecewise constant, so every segment is an exact rotation
//! `exp(-[ω×] Δt)` and `C` is their product, newest on the left. Holding each
//! sample forward to the next one instead lags the rate by half a sample
//! interval: on a 100 Hz gyro during a 2°/s-per-second ramp that is a
//! systematic 30″ over one second, far above a star camera's noise; the
//! midpoint hold is exact for a rate ramping linearly about a fixed axis.
//! Before the first retained sample the first one is held backwards, after the
//! last one the last is held forwards.

use std::collections::VecDeque;

use nalgebra::{Quaternion, UnitQuaternion, Vector3};

/// One rate sample: body angular velocity `w` (rad/s) from time `t` (ns) on.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RateSample {
    /// Sample time, ns.
    pub t: i64,
    /// Body angular velocity, rad/s, body frame.
    pub w: Vector3<f64>,
}

/// Time-ordered rate samples of the open windows.
#[derive(Debug, Clone, Default)]
pub struct RateBuffer {
    samples: VecDeque<RateSample>,
}

impl RateBuffer {
    /// An empty buffer with room for `capacity` samples.
    pub fn with_capacity(capacity: usize) -> Self {
        RateBuffer {
            samples: VecDeque::with_capacity(capacity),
        }
    }

    /// Samples held.
    pub fn len(&self) -> usize {
        self.samples.len()
    }

    /// Whether no sample is held.
    pub fn is_empty(&self) -> bool {
        self.samples.is_empty()
    }

    /// Whether a sample at `t` would be of no use: older than `cutoff` (the start of
    /// the oldest open window) and not newer than the sample already holding the
    /// rate at the cutoff.
    pub fn is_obsolete(&self, t: i64, cutoff: i64) -> bool {
        t <= cutoff
            && self
                .samples
                .front()
                .is_some_and(|front| front.t <= cutoff && front.t >= t)
    }

    /// Inserts in time order (after samples of equal time); drops the oldest when
    /// `capacity` is reached and returns whether it did.
    pub fn insert(&mut self, sample: RateSample, capacity: usize) -> bool {
        let overflow = self.samples.len() >= capacity;
        if overflow {
            self.samples.pop_front();
        }
        let at = self.samples.partition_point(|s| s.t <= sample.t);
        self.samples.insert(at, sample);
        overflow
    }

    /// Forgets samples no window starting after `cutoff` needs, keeping the
    /// latest one at or before `cutoff` (it holds the rate at the window start).
    pub fn prune(&mut self, cutoff: i64) {
        while self.samples.len() >= 2 && self.samples[1].t <= cutoff {
            self.samples.pop_front();
        }
    }

    /// Whether any sample lies in `(from, to]`.
    pub fn any_in(&self, from: i64, to: i64) -> bool {
        let start = self.samples.partition_point(|s| s.t <= from);
        self.samples.get(start).is_some_and(|s| s.t <= to)
    }
}

/// One knot: `c = C(t→E)`, and the rate in effect just before `t`.
#[derive(Debug, Clone, Copy)]
struct Knot {
    t: i64,
    c: UnitQuaternion<f64>,
    w_before: Vector3<f64>,
}

/// Precomputed `C(t→E)` at every rate-sample time between `from` and the epoch `E`.
#[derive(Debug, Clone, Default)]
pub struct Propagator {
    /// Knots in descending time, the first at `E`.
    knots: Vec<Knot>,
}

/// Rotation angle up to which [`segment`] uses its series (rad).
const SERIES_MAX_ANGLE: f64 = 0.1;

/// `exp(-[ω×] Δt)` as a unit quaternion, `Δt` in ns.
///
/// A gyro segment turns the body by far less than [`SERIES_MAX_ANGLE`]
/// (0.1 rad/s over 10 ms is 1e-3 rad), where the Taylor series of
/// `cos(θ/2)` and `sin(θ/2)/θ` to the `θ⁸` term is exact to rounding (the
/// first term left out is below `(θ/2)¹⁰/10! < 3e-20`) and needs neither a
/// square root nor `sin`/`cos`, which were a quarter of an epoch's time.
/// Larger angles take the closed form.
fn segment(w: &Vector3<f64>, dt_ns: i64) -> UnitQuaternion<f64> {
    let v = -w * (dt_ns as f64 * 1e-9);
    let theta2 = v.norm_squared();
    if theta2.is_nan() || theta2 > SERIES_MAX_ANGLE * SERIES_MAX_ANGLE {
        return UnitQuaternion::from_scaled_axis(v);
    }
    let h2 = 0.25 * theta2; // (θ/2)²
    let cos_half = 1.0 - h2 / 2.0 * (1.0 - h2 / 12.0 * (1.0 - h2 / 30.0 * (1.0 - h2 / 56.0)));
    // sin(θ/2)/θ = ½ · sin(h)/h
    let sinc_half =
        0.5 * (1.0 - h2 / 6.0 * (1.0 - h2 / 20.0 * (1.0 - h2 / 42.0 * (1.0 - h2 / 72.0))));
    UnitQuaternion::new_unchecked(Quaternion::new(
        cos_half,
        v.x * sinc_half,
        v.y * sinc_half,
        v.z * sinc_half,
    ))
}

impl Propagator {
    /// Prepares propagation of any time in `[from, epoch]` to `epoch` using
    /// `rates`, which must not be empty. Reuses its buffer.
    pub fn build(&mut self, rates: &RateBuffer, from: i64, epoch: i64) {
        self.knots.clear();
        let samples = &rates.samples;
        assert!(!samples.is_empty(), "propagator built without rate samples");
        // Sample `j >= 1` takes over from sample `j - 1` at their midpoint.
        let switch = |j: usize| ((samples[j - 1].t as i128 + samples[j].t as i128) / 2) as i64;
        // The sample in effect at the epoch: the last one whose hold has begun.
        let hi = samples.partition_point(|s| s.t <= epoch);
        let mut j = if hi < samples.len() && hi > 0 && switch(hi) <= epoch {
            hi
        } else {
            hi.saturating_sub(1)
        };
        self.knots.push(Knot {
            t: epoch,
            c: UnitQuaternion::identity(),
            w_before: samples[j].w,
        });
        while j >= 1 {
            let t_switch = switch(j);
            if t_switch <= from {
                break;
            }
            let last = self.knots[self.knots.len() - 1];
            let c = last.c * segment(&last.w_before, last.t - t_switch);
            self.knots.push(Knot {
                t: t_switch,
                c,
                w_before: samples[j - 1].w,
            });
            j -= 1;
        }
    }

    /// `C(t→E)`: the rotation carrying a body vector seen at `t` (within the
    /// built range) to the epoch.
    pub fn to_epoch(&self, t: i64) -> UnitQuaternion<f64> {
        let k = self.knots.partition_point(|k| k.t >= t).saturating_sub(1);
        self.carried_by_knot(k, t)
    }

    /// A cursor for [`Propagator::to_epoch_walk`], before the oldest knot.
    pub fn cursor(&self) -> KnotCursor {
        KnotCursor(self.knots.len())
    }

    /// [`Propagator::to_epoch`] for times visited in non-decreasing order: the
    /// cursor walks the knots forward instead of a binary search per call
    /// (same knot, same result bit for bit).
    pub fn to_epoch_walk(&self, t: i64, cursor: &mut KnotCursor) -> UnitQuaternion<f64> {
        // `cursor.0` is the number of knots with `k.t >= t` (knots descend in time).
        let mut m = cursor.0.min(self.knots.len());
        while m > 0 && self.knots[m - 1].t < t {
            m -= 1;
        }
        cursor.0 = m;
        self.carried_by_knot(m.saturating_sub(1), t)
    }

    fn carried_by_knot(&self, k: usize, t: i64) -> UnitQuaternion<f64> {
        let knot = &self.knots[k];
        knot.c * segment(&knot.w_before, knot.t - t)
    }
}

/// Position of a forward walk over a [`Propagator`]'s knots.
#[derive(Debug, Clone, Copy)]
pub struct KnotCursor(usize);

#[cfg(test)]
mod tests {
    use super::*;

    const MS: i64 = 1_000_000;

    #[test]
    fn piecewise_constant_rates_compose_exactly() {
        // Derived in the test: samples 0.2 rad/s about z at 0 ms and 0.4 rad/s
        // about x at 500 ms; the hold switches at their midpoint, 250 ms.
        // From t = 100 ms to E = 1000 ms the body turns 150 ms at 0.2 rad/s
        // about z (-0.03 rad), then 750 ms at 0.4 rad/s about x (-0.3 rad).
        let mut rates = RateBuffer::default();
        rates.insert(
            RateSample {
                t: 0,
                w: Vector3::new(0.0, 0.0, 0.2),
            },
            10,
        );
        rates.insert(
            RateSample {
                t: 500 * MS,
                w: Vector3::new(0.4, 0.0, 0.0),
            },
            10,
        );
        let mut prop = Propagator::default();
        prop.build(&rates, 100 * MS, 1000 * MS);
        let c = prop.to_epoch(100 * MS);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(-0.3, 0.0, 0.0))
            * UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.03));
        assert!(c.angle_to(&expected) < 1e-14, "{}", c.angle_to(&expected));
        // At the epoch itself nothing moves.
        assert!(prop.to_epoch(1000 * MS).angle() < 1e-15);
        // Before the first sample, the first one is held backwards: from
        // -500 ms, 750 ms about z (-0.15 rad) then 750 ms about x.
        prop.build(&rates, -500 * MS, 1000 * MS);
        let c = prop.to_epoch(-500 * MS);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(-0.3, 0.0, 0.0))
            * UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.15));
        assert!(c.angle_to(&expected) < 1e-14);
        // An epoch between the sample and the switch still uses the earlier
        // sample: from 0 to E = 200 ms, 0.2 rad/s about z only.
        prop.build(&rates, 0, 200 * MS);
        let c = prop.to_epoch(0);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.04));
        assert!(c.angle_to(&expected) < 1e-14);
        // An epoch past the switch but before the later sample uses the later
        // one from the switch on: 0..250 ms about z, 250..400 ms about x.
        prop.build(&rates, 0, 400 * MS);
        let c = prop.to_epoch(0);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(-0.06, 0.0, 0.0))
            * UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.05));
        assert!(c.angle_to(&expected) < 1e-14);
    }

    #[test]
    fn series_segment_matches_the_closed_form() {
        // Reference: nalgebra's `UnitQuaternion::from_scaled_axis`
        // (cos(θ/2), sin(θ/2)·axis), the closed form the series replaces.
        let mut worst: f64 = 0.0;
        for i in 0..=2000 {
            let scale = SERIES_MAX_ANGLE * (i as f64 / 2000.0).powi(3);
            let w =
                Vector3::new(0.3, -0.8, 0.52).normalize() * scale * (1.0 + 1e-3 * (i % 7) as f64);
            let dt_ns = 1_000_000_000 - 1000 * (i % 5) as i64;
            let series = segment(&w, dt_ns);
            let closed = UnitQuaternion::from_scaled_axis(-w * (dt_ns as f64 * 1e-9));
            worst = worst.max((series.coords - closed.coords).amax());
            assert!((series.norm() - 1.0).abs() < 4.0 * f64::EPSILON);
        }
        assert!(
            worst < 4.0 * f64::EPSILON,
            "worst component difference {worst:e}"
        );
        // Past the series range the closed form is used as it is.
        let w = Vector3::new(0.0, 0.0, 2.0);
        assert_eq!(
            segment(&w, 1_000_000_000).coords,
            UnitQuaternion::from_scaled_axis(-w).coords
        );
    }

    #[test]
    fn forward_walk_matches_the_binary_search_bit_for_bit() {
        let mut rates = RateBuffer::default();
        for i in 0..20 {
            let w = Vector3::new(0.1 * i as f64, -0.05, 0.02 * (i % 3) as f64);
            rates.insert(RateSample { t: i * 10 * MS, w }, 100);
        }
        let mut prop = Propagator::default();
        prop.build(&rates, 15 * MS, 180 * MS);
        let mut cursor = prop.cursor();
        // Ascending times, with repeats, on and between knots.
        for t in [15, 15, 20, 23, 30, 30, 31, 99, 100, 150, 179, 180].map(|ms| ms * MS) {
            let walked = prop.to_epoch_walk(t, &mut cursor);
            let searched = prop.to_epoch(t);
            assert_eq!(walked.coords, searched.coords, "t = {t}");
        }
    }

    #[test]
    fn buffer_prunes_but_keeps_the_hold_sample() {
        let mut rates = RateBuffer::default();
        for i in 0..10 {
            assert!(!rates.insert(
                RateSample {
                    t: i * 10 * MS,
                    w: Vector3::zeros()
                },
                100
            ));
        }
        rates.prune(45 * MS);
        assert_eq!(rates.len(), 6); // 40 ms (hold) .. 90 ms
        assert!(rates.is_obsolete(30 * MS, 45 * MS));
        assert!(!rates.is_obsolete(42 * MS, 45 * MS));
        assert!(rates.any_in(85 * MS, 90 * MS));
        assert!(!rates.any_in(90 * MS, 200 * MS));
        assert!(rates.insert(
            RateSample {
                t: 95 * MS,
                w: Vector3::zeros()
            },
            6
        ));
        assert_eq!(rates.len(), 6);
    }
}
