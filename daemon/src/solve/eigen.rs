//! Symmetric eigen-decomposition (3×3 information matrices, Davenport's 4×4
//! `K`) by cyclic Jacobi rotations.
//!
//! Bounded work: at most [`MAX_SWEEPS`] sweeps over every off-diagonal
//! element; the loop stops once the off-diagonal mass is below `ε²·‖M‖²/100`.
//! Jacobi keeps eigenvectors accurate to `ε‖M‖/gap`. The result is checked
//! (finite, orthonormal vectors, small recomposition residual) before it is
//! returned.

use nalgebra::{Matrix3, SMatrix, SVector, Vector3};

/// Sweep cap; Jacobi converges quadratically, 3×3 and 4×4 need a handful.
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
    let (values, vectors) = symmetric_eigen(m)?;
    Some(SymmetricEigen3 { values, vectors })
}

/// Eigenvalues (ascending) and eigenvectors (columns) of the symmetric part
/// of the `N×N` matrix `m`; `None` when not finite or a check fails.
pub fn symmetric_eigen<const N: usize>(
    m: &SMatrix<f64, N, N>,
) -> Option<(SVector<f64, N>, SMatrix<f64, N, N>)> {
    let sym = (m + m.transpose()) * 0.5;
    if !sym.iter().all(|x| x.is_finite()) {
        return None;
    }
    let norm2 = sym.norm_squared();
    let mut a = sym;
    let mut v = SMatrix::<f64, N, N>::identity();
    for _ in 0..MAX_SWEEPS {
        let mut off = 0.0;
        for p in 0..N {
            for q in p + 1..N {
                off += a[(p, q)] * a[(p, q)];
            }
        }
        if off == 0.0 || off <= f64::EPSILON * f64::EPSILON * norm2 * 1e-2 {
            break;
        }
        for p in 0..N {
            for q in p + 1..N {
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
                for k in 0..N {
                    let (akp, akq) = (a[(k, p)], a[(k, q)]);
                    a[(k, p)] = c * akp - s * akq;
                    a[(k, q)] = s * akp + c * akq;
                }
                for k in 0..N {
                    let (apk, aqk) = (a[(p, k)], a[(q, k)]);
                    a[(p, k)] = c * apk - s * aqk;
                    a[(q, k)] = s * apk + c * aqk;
                }
                for k in 0..N {
                    let (vkp, vkq) = (v[(k, p)], v[(k, q)]);
                    v[(k, p)] = c * vkp - s * vkq;
                    v[(k, q)] = s * vkp + c * vkq;
                }
            }
        }
    }
    let mut idx = [0usize; N];
    for (i, x) in idx.iter_mut().enumerate() {
        *x = i;
    }
    idx.sort_by(|&i, &j| a[(i, i)].total_cmp(&a[(j, j)]));
    let values = SVector::<f64, N>::from_fn(|i, _| a[(idx[i], idx[i])]);
    let vectors = SMatrix::<f64, N, N>::from_fn(|r, c| v[(r, idx[c])]);
    let finite = values.iter().chain(vectors.iter()).all(|x| x.is_finite());
    let ortho = (vectors.transpose() * vectors - SMatrix::<f64, N, N>::identity())
        .abs()
        .max();
    let recomposed = vectors * SMatrix::<f64, N, N>::from_diagonal(&values) * vectors.transpose();
    let scale = sym.abs().max().max(f64::MIN_POSITIVE);
    if !finite || ortho > 1e-12 || (recomposed - sym).abs().max() > 1e-12 * scale {
        return None;
    }
    Some((values, vectors))
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
