//! Symmetric 3×3 eigen-decomposition by cyclic Jacobi rotations.
//!
//! Used for the information matrix of the verdicts. Bounded work: at most
//! [`MAX_SWEEPS`] sweeps of three rotations each; the sweep loop stops once
//! the off-diagonal mass is below `ε²·‖M‖²`. The result is checked (finite,
//! orthonormal vectors, small recomposition residual) before it is returned.

use nalgebra::{Matrix3, Vector3};

/// Sweep cap; Jacobi converges quadratically, 3×3 needs a handful.
pub const MAX_SWEEPS: usize = 32;

/// Eigenvalues (ascending) and unit eigenvectors (matching columns).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SymmetricEigen3 {
    /// Eigenvalues, ascending.
    pub values: Vector3<f64>,
    /// Eigenvectors as columns, in the order of `values`.
    pub vectors: Matrix3<f64>,
}

/// Eigen-decomposition of the symmetric part of `m`; `None` when the input is
/// not finite or the result fails its checks.
pub fn symmetric_eigen3(m: &Matrix3<f64>) -> Option<SymmetricEigen3> {
    let sym = (m + m.transpose()) * 0.5;
    if !sym.iter().all(|x| x.is_finite()) {
        return None;
    }
    let norm2 = sym.norm_squared();
    let mut a = sym;
    let mut v = Matrix3::<f64>::identity();
    for _ in 0..MAX_SWEEPS {
        let off = a[(0, 1)].powi(2) + a[(0, 2)].powi(2) + a[(1, 2)].powi(2);
        if off <= f64::EPSILON * f64::EPSILON * norm2 * 1e-2 || off == 0.0 {
            break;
        }
        for (p, q) in [(0usize, 1usize), (0, 2), (1, 2)] {
            let apq = a[(p, q)];
            if apq == 0.0 {
                continue;
            }
            let theta = (a[(q, q)] - a[(p, p)]) / (2.0 * apq);
            let t = if theta.abs() > 1e150 {
                0.5 / theta
            } else {
                theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt())
            };
            let c = 1.0 / (t * t + 1.0).sqrt();
            let s = t * c;
            let mut j = Matrix3::identity();
            j[(p, p)] = c;
            j[(q, q)] = c;
            j[(p, q)] = s;
            j[(q, p)] = -s;
            a = j.transpose() * a * j;
            v *= j;
        }
    }
    let mut idx = [0usize, 1, 2];
    idx.sort_by(|&i, &j| a[(i, i)].total_cmp(&a[(j, j)]));
    let values = Vector3::new(
        a[(idx[0], idx[0])],
        a[(idx[1], idx[1])],
        a[(idx[2], idx[2])],
    );
    let vectors = Matrix3::from_columns(&[v.column(idx[0]), v.column(idx[1]), v.column(idx[2])]);
    let finite = values.iter().chain(vectors.iter()).all(|x| x.is_finite());
    let ortho = (vectors.transpose() * vectors - Matrix3::identity())
        .abs()
        .max();
    let recomposed = vectors * Matrix3::from_diagonal(&values) * vectors.transpose();
    let scale = sym.abs().max().max(f64::MIN_POSITIVE);
    if !finite || ortho > 1e-12 || (recomposed - sym).abs().max() > 1e-12 * scale {
        return None;
    }
    Some(SymmetricEigen3 { values, vectors })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decomposes_a_known_matrix() {
        let m = Matrix3::new(2.0, 1.0, 0.0, 1.0, 2.0, 0.0, 0.0, 0.0, 5.0);
        let e = symmetric_eigen3(&m).unwrap();
        assert!((e.values - Vector3::new(1.0, 3.0, 5.0)).abs().max() < 1e-14);
        for k in 0..3 {
            let col = e.vectors.column(k);
            assert!((m * col - col * e.values[k]).norm() < 1e-13);
        }
    }

    #[test]
    fn singular_matrix_has_a_zero_eigenvalue() {
        let b = Vector3::new(1.0, 2.0, 2.0) / 3.0;
        let f = Matrix3::identity() - b * b.transpose();
        let e = symmetric_eigen3(&f).unwrap();
        assert!(e.values[0].abs() < 1e-15);
        assert!((e.vectors.column(0).dot(&b).abs() - 1.0).abs() < 1e-14);
    }

    #[test]
    fn non_finite_input_is_refused() {
        let mut m = Matrix3::identity();
        m[(0, 1)] = f64::NAN;
        assert!(symmetric_eigen3(&m).is_none());
    }
}
