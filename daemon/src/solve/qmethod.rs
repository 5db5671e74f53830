//! Davenport's q-method: weighted least squares as the eigenvector of the
//! largest eigenvalue of the 4×4 matrix `K`.
//!
//! With `B = Σ w_i b_i r_iᵀ`, `S = B + Bᵀ`, `σ = tr B` and
//! `z = [B₂₃ − B₃₂, B₃₁ − B₁₃, B₁₂ − B₂₁]`, the loss is
//! `tr(A(q) Bᵀ) = qᵀ K q` with, for the Hamilton quaternion `q = [w, x, y, z]`
//! whose standard rotation matrix is `A` (`b ≈ A r`),
//! `K = [[σ, −zᵀ], [−z, S − σ I]]` (our derivation for this ordering; Davenport's
//! form with the vector part negated, since his attitude matrix is the
//! transpose convention).
//!
//! Convergence rule: closed form (one iteration). The symmetric eigen-solver
//! ([`super::eigen`], cyclic Jacobi) runs with a bounded sweep count; its
//! result is checked (finite, orthonormal eigenvectors, small recomposition
//! residual). When the gap
//! between the two largest eigenvalues is below
//! [`super::rotation::DEGENERACY_RATIO`] times the largest, the rotation is not
//! unique and the result is the same shortest-arc rotation as the SVD method.

use nalgebra::{Matrix3, Matrix4, Quaternion, UnitQuaternion};

use super::eigen::symmetric_eigen;
use super::rotation::{attitude_profile, is_rotation, nearest_rotation, DEGENERACY_RATIO};
use super::{Pair, SolveError};

/// Davenport's `K` for the Hamilton ordering `[w, x, y, z]`.
pub fn davenport_k(b: &Matrix3<f64>) -> Matrix4<f64> {
    let s = b + b.transpose();
    let sigma = b.trace();
    let z = [
        b[(1, 2)] - b[(2, 1)],
        b[(2, 0)] - b[(0, 2)],
        b[(0, 1)] - b[(1, 0)],
    ];
    let mut k = Matrix4::zeros();
    k[(0, 0)] = sigma;
    for i in 0..3 {
        k[(0, i + 1)] = -z[i];
        k[(i + 1, 0)] = -z[i];
        for j in 0..3 {
            k[(i + 1, j + 1)] = s[(i, j)] - if i == j { sigma } else { 0.0 };
        }
    }
    k
}

/// The rotation minimising `Σ w_i ‖b_i − A r_i‖²` by the q-method.
pub fn weighted_ls(pairs: &[Pair], weights: &[f64]) -> Result<Matrix3<f64>, SolveError> {
    let b = attitude_profile(pairs, weights);
    let scale = b.abs().max();
    if !scale.is_finite() {
        return Err(SolveError::Numerical(
            "attitude profile matrix is not finite".into(),
        ));
    }
    if scale <= f64::MIN_POSITIVE {
        return Err(SolveError::Degenerate(
            "attitude profile matrix vanishes: the weighted pairs cancel".into(),
        ));
    }
    let k = davenport_k(&(b / scale));
    let (vals, vecs) = symmetric_eigen(&k)
        .ok_or_else(|| SolveError::Numerical("eigen-decomposition failed its checks".into()))?;
    // Ascending order: the largest eigenvalue is last.
    let (l1, l2) = (vals[3], vals[2]);
    // Gap λ1 − λ2 = 2(s2 ± s3) and λ1 = s1 + s2 ± s3 in the singular values of B.
    if 0.5 * (l1 - l2) <= DEGENERACY_RATIO * l1.abs().max(f64::MIN_POSITIVE) {
        return nearest_rotation(&b);
    }
    let v = vecs.column(3);
    let q = UnitQuaternion::from_quaternion(Quaternion::new(v[0], v[1], v[2], v[3]));
    let a = q.to_rotation_matrix().into_inner();
    if !is_rotation(&a) {
        return Err(SolveError::Numerical(
            "q-method produced a non-rotation".into(),
        ));
    }
    Ok(a)
}
