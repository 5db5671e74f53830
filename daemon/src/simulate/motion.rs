//! The air-bearing table's motion profile: rests and slews about body axes.
//!
//! A slew turns the body about a fixed body axis `u` with a trapezoidal rate
//! profile (linear ramp up, cruise, linear ramp down). About a fixed axis the
//! motion has a closed form: `A(t) = R(u, −θ(t)) A(t₀)`, which satisfies
//! `dA/dt = −[ω×] A` with the body rate `ω = θ'(t) u`, so truth and gyro are
//! exactly consistent. The profile repeats until the scenario ends.

use nalgebra::{Unit, UnitQuaternion, Vector3};
use serde::{Deserialize, Serialize};

use super::ScenarioError;

/// One step of the motion profile.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum Segment {
    /// The table holds still.
    Rest {
        /// Length of the rest, seconds.
        duration_s: f64,
    },
    /// The table turns about a fixed body axis.
    Slew {
        /// Rotation axis in body components (any non-zero length).
        axis: [f64; 3],
        /// Cruise rate, degrees per second; the sign gives the sense (right hand about `axis`).
        rate_deg_s: f64,
        /// Length of the slew including both ramps, seconds.
        duration_s: f64,
        /// Length of each ramp (rate from 0 to cruise and back), seconds;
        /// `0` gives a rate step. The slew angle is `rate·(duration − ramp)`.
        #[serde(default)]
        ramp_s: f64,
    },
}

impl Segment {
    /// Length of the segment, seconds.
    pub fn duration_s(&self) -> f64 {
        match self {
            Segment::Rest { duration_s } | Segment::Slew { duration_s, .. } => *duration_s,
        }
    }
}

/// The default profile, 120 s, ending where it started (documented in the
/// module of [`super::Scenario`]).
pub fn default_profile() -> Vec<Segment> {
    let z = [0.0, 0.0, 1.0];
    // The tilted axis: 10° from the table's vertical towards body +x.
    let tilt = [10f64.to_radians().sin(), 0.0, 10f64.to_radians().cos()];
    let slew = |axis: [f64; 3], rate_deg_s: f64, duration_s: f64| Segment::Slew {
        axis,
        rate_deg_s,
        duration_s,
        ramp_s: 1.0,
    };
    vec![
        Segment::Rest { duration_s: 10.0 },
        slew(z, 3.0, 10.0), // +27° in yaw
        Segment::Rest { duration_s: 10.0 },
        slew(tilt, 2.0, 10.0), // +18° about the tilted axis
        Segment::Rest { duration_s: 10.0 },
        slew(tilt, -2.0, 10.0), // back
        Segment::Rest { duration_s: 5.0 },
        slew(z, 3.0, 20.0), // +57°: yaw 84°, the lamp leaves the sun sensor's view
        Segment::Rest { duration_s: 10.0 },
        slew(z, -4.0, 22.0), // −84°: back to the start
        Segment::Rest { duration_s: 3.0 },
    ]
}

/// One segment prepared for evaluation.
#[derive(Debug, Clone)]
struct Span {
    start_ns: i64,
    end_ns: i64,
    /// Rotation axis (body), unit; `None` for a rest.
    axis: Option<Unit<Vector3<f64>>>,
    /// Cruise rate, rad/s, signed.
    rate: f64,
    duration: f64,
    ramp: f64,
    /// Left factor accumulated from the cycle start up to this segment's start.
    left_at_start: UnitQuaternion<f64>,
}

impl Span {
    /// Turned angle and rate at `tau` seconds into the segment.
    fn angle_rate(&self, tau: f64) -> (f64, f64) {
        let tau = tau.clamp(0.0, self.duration);
        let (d, r, w) = (self.duration, self.ramp, self.rate);
        if r > 0.0 && tau < r {
            (w * tau * tau / (2.0 * r), w * tau / r)
        } else if r > 0.0 && tau > d - r {
            let s = d - tau;
            (w * (d - r) - w * s * s / (2.0 * r), w * s / r)
        } else {
            (w * (tau - r / 2.0), w)
        }
    }

    /// Left factor `R(u, −θ(τ))` of this segment at `tau` seconds into it.
    fn left_at(&self, tau: f64) -> UnitQuaternion<f64> {
        match &self.axis {
            None => UnitQuaternion::identity(),
            Some(axis) => UnitQuaternion::from_axis_angle(axis, -self.angle_rate(tau).0),
        }
    }
}

/// The motion profile ready for evaluation at any data time.
#[derive(Debug, Clone)]
pub struct Motion {
    spans: Vec<Span>,
    cycle_ns: i64,
    /// Left factor of one whole cycle.
    cycle_left: UnitQuaternion<f64>,
    initial: UnitQuaternion<f64>,
}

impl Motion {
    /// Prepares `segments` (repeated cyclically) starting from attitude `initial`.
    pub fn new(segments: &[Segment], initial: UnitQuaternion<f64>) -> Result<Self, ScenarioError> {
        if segments.is_empty() {
            return Err(ScenarioError::EmptyMotion);
        }
        let mut spans = Vec::with_capacity(segments.len());
        let mut start_ns = 0i64;
        let mut left = UnitQuaternion::identity();
        for (segment_idx, segment) in segments.iter().enumerate() {
            let duration = segment.duration_s();
            if !(duration.is_finite() && duration > 0.0) {
                return Err(ScenarioError::Segment {
                    segment_idx,
                    reason: "duration_s must be finite and > 0",
                });
            }
            let (axis, rate, ramp) = match segment {
                Segment::Rest { .. } => (None, 0.0, 0.0),
                Segment::Slew {
                    axis,
                    rate_deg_s,
                    ramp_s,
                    ..
                } => {
                    let axis = Vector3::from(*axis);
                    if !(axis.iter().all(|c| c.is_finite()) && axis.norm() > 1e-12) {
                        return Err(ScenarioError::Segment {
                            segment_idx,
                            reason: "slew axis must be finite and non-zero",
                        });
                    }
                    if !rate_deg_s.is_finite() {
                        return Err(ScenarioError::Segment {
                            segment_idx,
                            reason: "rate_deg_s must be finite",
                        });
                    }
                    if !(ramp_s.is_finite() && *ramp_s >= 0.0 && 2.0 * ramp_s <= duration) {
                        return Err(ScenarioError::Segment {
                            segment_idx,
                            reason: "ramp_s must be >= 0 and at most half the duration",
                        });
                    }
                    (
                        Some(Unit::new_normalize(axis)),
                        rate_deg_s.to_radians(),
                        *ramp_s,
                    )
                }
            };
            let end_ns = start_ns + (duration * 1e9).round() as i64;
            let span = Span {
                start_ns,
                end_ns,
                axis,
                rate,
                duration: (end_ns - start_ns) as f64 * 1e-9,
                ramp,
                left_at_start: left,
            };
            left = span.left_at(span.duration) * left;
            start_ns = end_ns;
            spans.push(span);
        }
        Ok(Motion {
            spans,
            cycle_ns: start_ns,
            cycle_left: left,
            initial,
        })
    }

    /// Length of one cycle of the profile, ns.
    pub fn cycle_ns(&self) -> i64 {
        self.cycle_ns
    }

    /// The segment holding `t` and the time into it (seconds), with the cycle index.
    fn locate(&self, t_ns: i64) -> (usize, f64, i64) {
        let t_ns = t_ns.max(0);
        let cycle = t_ns / self.cycle_ns;
        let in_cycle = t_ns - cycle * self.cycle_ns;
        let span_idx = self
            .spans
            .partition_point(|span| span.end_ns <= in_cycle)
            .min(self.spans.len() - 1);
        let tau = (in_cycle - self.spans[span_idx].start_ns) as f64 * 1e-9;
        (span_idx, tau, cycle)
    }

    /// True attitude at data time `t_ns` (times before 0 give the initial attitude).
    pub fn attitude_at(&self, t_ns: i64) -> UnitQuaternion<f64> {
        let (span_idx, tau, cycle) = self.locate(t_ns);
        let span = &self.spans[span_idx];
        let cycles = if cycle == 0 {
            UnitQuaternion::identity()
        } else {
            self.cycle_left.powf(cycle as f64)
        };
        span.left_at(tau) * span.left_at_start * cycles * self.initial
    }

    /// True body angular velocity at data time `t_ns`, rad/s, body frame.
    pub fn body_rate_at(&self, t_ns: i64) -> Vector3<f64> {
        if t_ns < 0 {
            return Vector3::zeros();
        }
        let (span_idx, tau, _) = self.locate(t_ns);
        let span = &self.spans[span_idx];
        match &span.axis {
            None => Vector3::zeros(),
            Some(axis) => axis.into_inner() * span.angle_rate(tau).1,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Derived: the default profile returns to its start (z +27 +57 −84, tilt +18 −18).
    #[test]
    fn default_profile_closes() {
        let motion = Motion::new(&default_profile(), UnitQuaternion::identity()).unwrap();
        assert_eq!(motion.cycle_ns(), 120_000_000_000);
        assert!(motion.attitude_at(motion.cycle_ns()).angle() < 1e-12);
        // Yaw 84° at the rest after the long slew.
        let q = motion.attitude_at(90_000_000_000);
        assert!((q.angle().to_degrees() - 84.0).abs() < 1e-9);
    }

    /// Derived: the closed form obeys dA/dt = −[ω×]A (central difference).
    #[test]
    fn rate_matches_attitude_derivative() {
        let motion = Motion::new(&default_profile(), UnitQuaternion::identity()).unwrap();
        let h = 1_000_000i64; // 1 ms
        for t in [
            10_500_000_000i64,
            15_000_000_000,
            32_300_000_000,
            100_900_000_000,
        ] {
            let a_minus = motion.attitude_at(t - h).to_rotation_matrix().into_inner();
            let a_plus = motion.attitude_at(t + h).to_rotation_matrix().into_inner();
            let a = motion.attitude_at(t).to_rotation_matrix().into_inner();
            let da = (a_plus - a_minus) / (2.0 * h as f64 * 1e-9);
            let expected = -motion.body_rate_at(t).cross_matrix() * a;
            assert!(
                (da - expected).norm() < 1e-6,
                "t={t}: {}",
                (da - expected).norm()
            );
        }
    }

    #[test]
    fn rejects_bad_segments() {
        assert!(matches!(
            Motion::new(&[], UnitQuaternion::identity()),
            Err(ScenarioError::EmptyMotion)
        ));
        let bad = Segment::Slew {
            axis: [0.0; 3],
            rate_deg_s: 1.0,
            duration_s: 1.0,
            ramp_s: 0.0,
        };
        assert!(Motion::new(&[bad], UnitQuaternion::identity()).is_err());
        let ramp = Segment::Slew {
            axis: [0.0, 0.0, 1.0],
            rate_deg_s: 1.0,
            duration_s: 1.0,
            ramp_s: 0.6,
        };
        assert!(Motion::new(&[ramp], UnitQuaternion::identity()).is_err());
    }
}
