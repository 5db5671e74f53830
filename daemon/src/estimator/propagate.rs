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
//!
//! The buffer keeps, with each sample, the rotation `K` from a fixed anchor
//! time to the start of that sample's hold, built once when the sample
//! arrives (`K_j = exp(-[ω_{j-1}×] Δ) K_{j-1}`). Then `C(t→E) = K(E) K(t)⁻¹`
//! for any two times, so an epoch costs one `K(E)` and each observation one
//! `K(t)`, which stays valid while the samples around `t` do: the buffer says
//! up to which time `K` is settled, and bumps a generation number whenever a
//! change reaches back into settled time (a sample out of order, the capacity
//! dropping one). The rounding of `C` is that of the products between `t` and
//! `E`, whatever the anchor's age; `K` is renormalised at every step.

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

/// One held sample: the sample, the start of its hold and `K` there.
#[derive(Debug, Clone, Copy)]
struct Held {
    sample: RateSample,
    /// Start of the hold: the midpoint with the previous sample, or the
    /// sample's own time when it had none.
    from: i64,
    /// `K(from)`: rotation from the anchor time to `from`.
    k_from: UnitQuaternion<f64>,
}

/// Time-ordered rate samples of the open windows, with their anchored rotations.
#[derive(Debug, Clone)]
pub struct RateBuffer {
    samples: VecDeque<Held>,
    /// Bumped when `K` changes at a time that was settled.
    generation: u64,
}

impl Default for RateBuffer {
    fn default() -> Self {
        RateBuffer::with_capacity(0)
    }
}

impl RateBuffer {
    /// An empty buffer with room for `capacity` samples.
    pub fn with_capacity(capacity: usize) -> Self {
        RateBuffer {
            samples: VecDeque::with_capacity(capacity),
            generation: 1,
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
                .is_some_and(|front| front.sample.t <= cutoff && front.sample.t >= t)
    }

    /// Inserts in time order (after samples of equal time); drops the oldest when
    /// `capacity` is reached and returns whether it did.
    pub fn insert(&mut self, sample: RateSample, capacity: usize) -> bool {
        let overflow = self.samples.len() >= capacity;
        if overflow {
            // The dropped sample's hold may be in use by buffered observations.
            self.samples.pop_front();
            self.generation += 1;
        }
        // In time order (the usual case) the sample goes last: no search.
        let at = match self.samples.back() {
            Some(last) if last.sample.t > sample.t => {
                self.samples.partition_point(|h| h.sample.t <= sample.t)
            }
            _ => self.samples.len(),
        };
        let held = Held {
            sample,
            from: sample.t,
            k_from: UnitQuaternion::identity(),
        };
        if at == self.samples.len() {
            self.samples.push_back(held);
        } else {
            self.samples.insert(at, held);
        }
        if at + 1 < self.samples.len() {
            // Out of order (or a new first sample, the new anchor): later
            // holds move, and settled time with them.
            self.generation += 1;
        }
        for j in at.max(1)..self.samples.len() {
            self.link(j);
        }
        overflow
    }

    /// Sets the hold start and `K` of sample `j >= 1` from sample `j - 1`.
    fn link(&mut self, j: usize) {
        let prev = self.samples[j - 1];
        let t = self.samples[j].sample.t;
        let from = ((prev.sample.t as i128 + t as i128) / 2) as i64;
        let k = segment(&prev.sample.w, from - prev.from) * prev.k_from;
        let held = &mut self.samples[j];
        held.from = from;
        held.k_from = UnitQuaternion::new_normalize(k.into_inner());
    }

    /// Forgets samples no window starting after `cutoff` needs, keeping the
    /// latest one at or before `cutoff` (it holds the rate at the window
    /// start). `K` after `cutoff` is unchanged.
    pub fn prune(&mut self, cutoff: i64) {
        while self.samples.len() >= 2 && self.samples[1].sample.t <= cutoff {
            self.samples.pop_front();
        }
    }

    /// Whether any sample lies in `(from, to]`.
    pub fn any_in(&self, from: i64, to: i64) -> bool {
        let start = self.samples.partition_point(|h| h.sample.t <= from);
        self.samples.get(start).is_some_and(|h| h.sample.t <= to)
    }

    /// `K(t)`: the rotation from the anchor time to `t`. The buffer must not be empty.
    pub fn anchored(&self, t: i64) -> UnitQuaternion<f64> {
        assert!(!self.samples.is_empty(), "rate propagation without samples");
        // New observations and epochs fall in the newest hold: no search for those.
        let last = self.samples.len() - 1;
        let j = if self.samples[last].from <= t {
            last
        } else {
            self.samples
                .partition_point(|h| h.from <= t)
                .saturating_sub(1)
        };
        let held = &self.samples[j];
        segment(&held.sample.w, t - held.from) * held.k_from
    }

    /// [`Self::anchored`] for times taken in increasing order: `hold` is the
    /// hold the last call found (start at 0), and the search walks forward
    /// from it a few holds before it falls back to the binary search. The
    /// same hold is found, so the same rotation.
    pub fn anchored_from(&self, t: i64, hold: &mut usize) -> UnitQuaternion<f64> {
        let j = match self.samples.get(*hold) {
            Some(h) if h.from <= t => {
                let mut j = *hold;
                let mut steps = 0;
                while steps < HOLD_WALK
                    && j + 1 < self.samples.len()
                    && self.samples[j + 1].from <= t
                {
                    j += 1;
                    steps += 1;
                }
                if steps < HOLD_WALK {
                    j
                } else {
                    self.hold_at(t)
                }
            }
            _ => self.hold_at(t),
        };
        *hold = j;
        let held = &self.samples[j];
        segment(&held.sample.w, t - held.from) * held.k_from
    }

    /// The index of the hold `t` falls in (the last one starting at or before it).
    fn hold_at(&self, t: i64) -> usize {
        assert!(!self.samples.is_empty(), "rate propagation without samples");
        self.samples
            .partition_point(|h| h.from <= t)
            .saturating_sub(1)
    }

    /// `C(t→E)`: the rotation carrying a body vector seen at `t` to `epoch`.
    pub fn carry(&self, t: i64, epoch: i64) -> UnitQuaternion<f64> {
        self.anchored(epoch) * self.anchored(t).inverse()
    }

    /// Times before this have a settled `K`: a sample appended in time order
    /// (at or after the last one) starts its hold at or after the last
    /// sample's time, so `K` before that time stays.
    pub fn settled_before(&self) -> i64 {
        self.samples.back().map_or(i64::MIN, |h| h.sample.t)
    }

    /// Changes whenever `K` changed at a settled time (see the module doc).
    pub fn generation(&self) -> u64 {
        self.generation
    }
}

/// Holds [`RateBuffer::anchored_from`] walks before it searches.
const HOLD_WALK: usize = 8;

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
    // By Horner with the coefficients as constants: multiplications only
    // (a division per term, as `h2 / 12.0` would be, chains the divider's
    // latency through the whole polynomial).
    const COS: [f64; 4] = [-1.0 / 2.0, 1.0 / 24.0, -1.0 / 720.0, 1.0 / 40_320.0];
    const SINC: [f64; 4] = [-1.0 / 6.0, 1.0 / 120.0, -1.0 / 5_040.0, 1.0 / 362_880.0];
    let h2 = 0.25 * theta2; // (θ/2)²
    let cos_half = 1.0 + h2 * (COS[0] + h2 * (COS[1] + h2 * (COS[2] + h2 * COS[3])));
    // sin(θ/2)/θ = ½ · sin(h)/h
    let sinc_half = 0.5 * (1.0 + h2 * (SINC[0] + h2 * (SINC[1] + h2 * (SINC[2] + h2 * SINC[3]))));
    UnitQuaternion::new_unchecked(Quaternion::new(
        cos_half,
        v.x * sinc_half,
        v.y * sinc_half,
        v.z * sinc_half,
    ))
}

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
        let c = rates.carry(100 * MS, 1000 * MS);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(-0.3, 0.0, 0.0))
            * UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.03));
        assert!(c.angle_to(&expected) < 1e-14, "{}", c.angle_to(&expected));
        // At the epoch itself nothing moves.
        assert!(rates.carry(1000 * MS, 1000 * MS).angle() < 1e-15);
        // Before the first sample, the first one is held backwards: from
        // -500 ms, 750 ms about z (-0.15 rad) then 750 ms about x.
        let c = rates.carry(-500 * MS, 1000 * MS);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(-0.3, 0.0, 0.0))
            * UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.15));
        assert!(c.angle_to(&expected) < 1e-14);
        // An epoch between the sample and the switch still uses the earlier
        // sample: from 0 to E = 200 ms, 0.2 rad/s about z only.
        let c = rates.carry(0, 200 * MS);
        let expected = UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, -0.04));
        assert!(c.angle_to(&expected) < 1e-14);
        // An epoch past the switch but before the later sample uses the later
        // one from the switch on: 0..250 ms about z, 250..400 ms about x.
        let c = rates.carry(0, 400 * MS);
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

    /// Samples 10 ms apart with rates that change every sample.
    fn varied(i: i64) -> RateSample {
        let w = Vector3::new(0.1 * i as f64, -0.05, 0.02 * (i % 3) as f64);
        RateSample { t: i * 10 * MS, w }
    }

    /// `C(t→E)` straight from the definition: the product of the exact
    /// segments of the nearest-sample hold, built from scratch.
    fn carry_from_scratch(samples: &[RateSample], t: i64, epoch: i64) -> UnitQuaternion<f64> {
        // The rate in effect at time x: the sample nearest in time (ties: later).
        let switch = |j: usize| (samples[j - 1].t + samples[j].t) / 2;
        let mut bounds: Vec<i64> = (1..samples.len())
            .map(switch)
            .filter(|&b| b > t && b < epoch)
            .collect();
        bounds.insert(0, t);
        bounds.push(epoch);
        let mut c = UnitQuaternion::identity();
        for pair in bounds.windows(2) {
            let mid = pair[0] + (pair[1] - pair[0]) / 2;
            let j = (1..samples.len()).filter(|&j| switch(j) <= mid).count();
            c = UnitQuaternion::from_scaled_axis(
                -samples[j].w * ((pair[1] - pair[0]) as f64 * 1e-9),
            ) * c;
        }
        c
    }

    #[test]
    fn anchored_carry_matches_the_product_of_segments() {
        let samples: Vec<RateSample> = (0..20).map(varied).collect();
        let mut rates = RateBuffer::default();
        for s in &samples {
            rates.insert(*s, 100);
        }
        for (t, e) in [
            (15, 180),
            (23, 100),
            (0, 190),
            (99, 101),
            (-40, 20),
            (150, 250),
        ] {
            let (t, e) = (t * MS, e * MS);
            let got = rates.carry(t, e);
            let want = carry_from_scratch(&samples, t, e);
            assert!(
                got.angle_to(&want) < 1e-14,
                "t {t} E {e}: {:e}",
                got.angle_to(&want)
            );
        }
    }

    #[test]
    fn appends_keep_settled_time_and_out_of_order_bumps_the_generation() {
        let mut rates = RateBuffer::default();
        for i in 0..10 {
            rates.insert(varied(i), 100);
        }
        let (gen, settled) = (rates.generation(), rates.settled_before());
        let before: Vec<_> = [12, 40, settled / MS - 1]
            .map(|ms| rates.anchored(ms * MS))
            .to_vec();
        rates.insert(varied(10), 100);
        assert_eq!(rates.generation(), gen, "an append changes nothing settled");
        let after: Vec<_> = [12, 40, settled / MS - 1]
            .map(|ms| rates.anchored(ms * MS))
            .to_vec();
        for (b, a) in before.iter().zip(&after) {
            assert_eq!(b.coords, a.coords);
        }
        // A late sample in the middle: the generation moves, and carries
        // agree with a buffer that got the samples in order.
        let late = RateSample {
            t: 45 * MS,
            w: Vector3::new(0.0, 0.3, 0.0),
        };
        rates.insert(late, 100);
        assert_ne!(rates.generation(), gen);
        let mut in_order: Vec<RateSample> = (0..11).map(varied).collect();
        in_order.insert(5, late);
        let c = rates.carry(20 * MS, 100 * MS);
        let want = carry_from_scratch(&in_order, 20 * MS, 100 * MS);
        assert!(c.angle_to(&want) < 1e-14);
        // Dropping the oldest at capacity also moves it.
        let gen = rates.generation();
        assert!(rates.insert(varied(11), rates.len()));
        assert_ne!(rates.generation(), gen);
    }

    #[test]
    fn the_walking_hold_search_finds_the_binary_searchs_rotation() {
        // Derived in the test: for times in increasing order, from any
        // starting hint (fresh, stale, past the end, ahead of `t`), and for
        // jumps beyond the walk, `anchored_from` gives `anchored` to the bit.
        let mut rates = RateBuffer::default();
        for i in 0..40 {
            rates.insert(varied(i), 100);
        }
        // Holds start every 10 ms: steps within one hold, of a few holds,
        // of more than the walk (12 ms → 150 ms), and to the last hold.
        let times: Vec<i64> = [
            3, 7, 7, 12, 95, 96, 200, 201, 202, 1_500, 1_510, 3_900, 3_950,
        ]
        .map(|tenths_ms| tenths_ms * MS / 10)
        .to_vec();
        for start in [usize::MAX, 0, 5, 39, 1000] {
            let mut hold = start;
            for &t in &times {
                let (got, want) = (rates.anchored_from(t, &mut hold), rates.anchored(t));
                assert_eq!(got.coords, want.coords, "start {start}, t {t}");
            }
        }
        // Before the first hold (extrapolated back) and past the last.
        let mut hold = 20;
        for t in [-5 * MS, 10_000 * MS] {
            assert_eq!(
                rates.anchored_from(t, &mut hold).coords,
                rates.anchored(t).coords
            );
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
