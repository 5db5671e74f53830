//! Truth from the log and the attitude error of each solution against it.
//!
//! - Truth samples are kept in data-time order; the truth at an epoch is the
//!   slerp between the two samples around it (an exact sample is used as is).
//!   No truth is given outside the samples' span or across a gap longer than
//!   [`MAX_TRUTH_GAP_NS`], so a silent truth source never yields made-up values.
//! - Error convention (protocol § Conventions): `A_true ≈ (I − [δθ×]) A_est`,
//!   δθ in the body frame. Since `A(q)` is the rotation matrix of `q`,
//!   `A_est A_trueᵀ = A(q_est ⊗ q_true⁻¹) ≈ I + [δθ×]`, so δθ is the rotation
//!   vector of `q_est ⊗ q_true⁻¹` and the error angle is its norm.
//! - "Within 3σ": `δθᵀ P⁻¹ δθ <= χ²₃(0.9973)` ([`CHI2_3DOF_3SIGMA`]), the 3-D
//!   counterpart of a 1-D ±3σ band, as the estimator's own accuracy tests judge.

use nalgebra::{Matrix3, Quaternion, UnitQuaternion, Vector3};

/// Longest gap between two truth samples that is still interpolated, ns (1 s).
pub const MAX_TRUTH_GAP_NS: i64 = 1_000_000_000;

/// χ² quantile for 3 degrees of freedom at probability `2Φ(3) − 1 ≈ 0.9973`
/// (the share of a 1-D Gaussian within ±3σ). Derived in this module's test
/// from the closed-form 3-dof CDF; 14.156 to the digits kept.
pub const CHI2_3DOF_3SIGMA: f64 = 14.156;

/// Arcseconds per radian (648000 / π).
pub const ARCSEC_PER_RAD: f64 = 648_000.0 / std::f64::consts::PI;

/// Truth samples of a log, in data-time order.
#[derive(Debug, Clone, Default)]
pub struct TruthTrack {
    samples: Vec<(i64, UnitQuaternion<f64>)>,
}

impl TruthTrack {
    /// Adds a sample; one older than the newest is ignored (truth goes forward).
    pub fn push(&mut self, t: i64, q: [f64; 4]) -> bool {
        if self.samples.last().is_some_and(|&(last, _)| t < last) {
            return false;
        }
        let q = UnitQuaternion::from_quaternion(Quaternion::new(q[0], q[1], q[2], q[3]));
        self.samples.push((t, q));
        true
    }

    /// Whether the log held any truth.
    pub fn is_empty(&self) -> bool {
        self.samples.is_empty()
    }

    /// Samples kept.
    pub fn len(&self) -> usize {
        self.samples.len()
    }

    /// The true attitude at `t`, interpolated; `None` outside the span or across a long gap.
    pub fn at(&self, t: i64) -> Option<UnitQuaternion<f64>> {
        let after = self.samples.partition_point(|&(ts, _)| ts < t);
        let (t1, q1) = *self.samples.get(after)?;
        if t1 == t {
            return Some(q1);
        }
        let (t0, q0) = *self.samples.get(after.checked_sub(1)?)?;
        if t1 - t0 > MAX_TRUTH_GAP_NS {
            return None;
        }
        let frac = (t - t0) as f64 / (t1 - t0) as f64;
        // Shortest path: q and -q are the same attitude.
        let q1 = if q0.coords.dot(&q1.coords) < 0.0 {
            UnitQuaternion::new_unchecked(-q1.into_inner())
        } else {
            q1
        };
        Some(q0.try_slerp(&q1, frac, 1e-12).unwrap_or(q0))
    }
}

/// The solution quaternion `[w, x, y, z]` as a unit quaternion.
pub fn unit_q(q: [f64; 4]) -> UnitQuaternion<f64> {
    UnitQuaternion::from_quaternion(Quaternion::new(q[0], q[1], q[2], q[3]))
}

/// δθ (body frame, rad) of an estimate against the truth (module doc convention).
pub fn attitude_error(est: &UnitQuaternion<f64>, truth: &UnitQuaternion<f64>) -> Vector3<f64> {
    (est * truth.inverse()).scaled_axis()
}

/// `δθᵀ P⁻¹ δθ`, or `None` when `P` cannot be inverted.
pub fn mahalanobis2(err: &Vector3<f64>, cov: &[f64; 9]) -> Option<f64> {
    let cov = Matrix3::from_row_slice(cov);
    let chol = cov.cholesky()?;
    Some(err.dot(&chol.solve(err)))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Derived: Φ by Simpson integration of the normal density; the 3-dof χ²
    /// CDF `F(x) = 2Φ(√x) − 1 − √(2x/π) e^{−x/2}` (standard closed form)
    /// solved for `F(x) = 2Φ(3) − 1` by bisection.
    #[test]
    fn the_3sigma_quantile_is_derived_not_recalled() {
        let phi = |z: f64| {
            let n = 20_000;
            let h = z / n as f64;
            let f = |x: f64| (-0.5 * x * x).exp() / std::f64::consts::TAU.sqrt();
            let mut sum = f(0.0) + f(z);
            for i in 1..n {
                sum += f(i as f64 * h) * if i % 2 == 1 { 4.0 } else { 2.0 };
            }
            0.5 + sum * h / 3.0
        };
        let target = 2.0 * phi(3.0) - 1.0;
        let cdf = |x: f64| {
            2.0 * phi(x.sqrt()) - 1.0 - (2.0 * x / std::f64::consts::PI).sqrt() * (-x / 2.0).exp()
        };
        let (mut lo, mut hi) = (1.0, 40.0);
        for _ in 0..60 {
            let mid = 0.5 * (lo + hi);
            if cdf(mid) < target {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        assert!((lo - CHI2_3DOF_3SIGMA).abs() < 5e-4, "{lo}");
    }

    #[test]
    fn slerp_between_samples_and_none_outside() {
        let mut track = TruthTrack::default();
        let axis = Vector3::z_axis();
        let q0 = UnitQuaternion::from_axis_angle(&axis, 0.0);
        let q1 = UnitQuaternion::from_axis_angle(&axis, 0.2);
        let wire = |q: UnitQuaternion<f64>| [q.w, q.i, q.j, q.k];
        track.push(0, wire(q0));
        // Stored with the opposite sign: still the same attitude.
        track.push(100, wire(q1).map(|c| -c));
        let mid = track.at(25).unwrap();
        assert!((mid.angle_to(&UnitQuaternion::from_axis_angle(&axis, 0.05))).abs() < 1e-12);
        assert_eq!(track.at(100).unwrap().angle_to(&q1), 0.0);
        assert!(track.at(-1).is_none());
        assert!(track.at(101).is_none());
        track.push(100 + MAX_TRUTH_GAP_NS + 1, wire(q1));
        assert!(track.at(200).is_none(), "no truth across a long gap");
        assert!(!track.push(5, wire(q0)), "older sample ignored");
    }

    #[test]
    fn error_sign_follows_the_protocol_convention() {
        // A_true = (I - [δθ×]) A_est for a small δθ about body x.
        let truth = UnitQuaternion::from_euler_angles(0.3, -0.2, 1.0);
        let dtheta = Vector3::new(1e-4, 0.0, 0.0);
        let a_est = truth.to_rotation_matrix().into_inner();
        let skew = dtheta.cross_matrix();
        let a_true_approx = (Matrix3::identity() - skew) * a_est;
        // Estimate from A_est = (I + [δθ×]) A_true to first order.
        let est = UnitQuaternion::from_scaled_axis(dtheta) * truth;
        let err = attitude_error(&est, &truth);
        assert!((err - dtheta).norm() < 1e-12, "{err}");
        let a_true = truth.to_rotation_matrix().into_inner();
        assert!((a_true - a_true_approx).norm() < 1e-7);
        let cov = [1e-8, 0.0, 0.0, 0.0, 1e-8, 0.0, 0.0, 0.0, 1e-8];
        assert!((mahalanobis2(&err, &cov).unwrap() - 1.0).abs() < 1e-9);
    }
}
