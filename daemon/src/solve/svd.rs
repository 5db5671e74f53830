//! Markley's SVD method: weighted least squares (Wahba's problem) in closed form.
//!
//! `A = U diag(1, 1, det U · det V) Vᵀ` from the SVD of the attitude profile
//! matrix `B = Σ w_i b_i r_iᵀ`, built and checked in [`super::rotation`].
//! Convergence rule: none needed (closed form, one iteration); the SVD itself
//! runs with a bounded iteration count and its result is checked.

use nalgebra::Matrix3;

use super::rotation::{attitude_profile, nearest_rotation};
use super::{Pair, SolveError};

/// The rotation minimising `Σ w_i ‖b_i − A r_i‖²` (weights as given; zero skips a pair).
pub fn weighted_ls(pairs: &[Pair], weights: &[f64]) -> Result<Matrix3<f64>, SolveError> {
    nearest_rotation(&attitude_profile(pairs, weights))
}
