//! Verdicts: residuals, inlier flags, covariance and observability of a solved rotation.
//!
//! (Skeleton: filled in by the solver work.)

use nalgebra::{Matrix3, UnitQuaternion, Vector3};

use crate::solve::Pair;

/// Variance reported on an unobservable axis, rad² (finite so JSON can carry it).
pub const UNOBSERVABLE_VARIANCE: f64 = 1.0e12;

/// Whether the inliers determine all three axes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Observability {
    /// All three axes determined.
    Full,
    /// Rotation about `axis` (body frame, unit) undetermined.
    Unobservable {
        /// The undetermined axis.
        axis: Vector3<f64>,
    },
    /// Fewer than two pairs (or inliers).
    Insufficient,
}

/// The verdict on a solved rotation.
#[derive(Debug, Clone, PartialEq)]
pub struct Verdict {
    /// Residual angle of each pair, radians, in input order.
    pub residuals: Vec<f64>,
    /// Inlier flag of each pair (χ² gate).
    pub inliers: Vec<bool>,
    /// Number of inliers.
    pub n_inliers: usize,
    /// Inliers / pairs (0 when there are no pairs).
    pub inlier_fraction: f64,
    /// Attitude-error covariance, rad², body frame (huge on an unobservable axis).
    pub covariance: Matrix3<f64>,
    /// Observability of the inliers.
    pub observability: Observability,
}

/// Judges `q` against `pairs` with gate multiplier `gate_k`.
pub fn assess(pairs: &[Pair], q: &UnitQuaternion<f64>, gate_k: f64) -> Verdict {
    let _ = (pairs, q, gate_k);
    todo!("solver work")
}
