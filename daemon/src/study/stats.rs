//! Statistics of a study: quantiles of trial results and the Cramér–Rao bound of a trial.

use nalgebra::{Matrix3, SymmetricEigen};

use crate::solve::Pair;

/// Smallest eigenvalue ratio `λ_min / λ_max` of the information matrix for
/// which the bound is reported; below it the geometry is taken as degenerate.
pub const CRB_CONDITION_FLOOR: f64 = 1.0e-12;

/// The `p`-quantile (`0 <= p <= 1`) of `values`, by linear interpolation
/// between order statistics (Hyndman & Fan 1996, definition 7; the default
/// of NumPy's `percentile`). `None` when `values` is empty or holds a NaN.
pub fn quantile(values: &[f64], p: f64) -> Option<f64> {
    if values.is_empty() || values.iter().any(|v| v.is_nan()) || !(0.0..=1.0).contains(&p) {
        return None;
    }
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    Some(sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo]))
}

/// The median of `values` (the 0.5 quantile of [`quantile`]).
pub fn median(values: &[f64]) -> Option<f64> {
    quantile(values, 0.5)
}

/// Information matrix `J = Σ σ_i⁻² (I − b_i b_iᵀ)` of the QUEST measurement model.
pub fn information(pairs: &[Pair]) -> Matrix3<f64> {
    pairs.iter().fold(Matrix3::zeros(), |acc, p| {
        acc + (Matrix3::identity() - p.b * p.b.transpose()) / (p.sigma * p.sigma)
    })
}

/// `sqrt(trace P)` with `P = J⁻¹` (Shuster & Oh 1981; Crassidis & Junkins,
/// *Optimal Estimation of Dynamic Systems*): the root-mean-square attitude
/// error an efficient estimator reaches on `pairs`, radians.
///
/// `None` when the pairs do not determine all three axes: fewer than two, or
/// `λ_min / λ_max` of `J` below [`CRB_CONDITION_FLOOR`].
pub fn crb(pairs: &[Pair]) -> Option<f64> {
    if pairs.len() < 2 {
        return None;
    }
    let info = information(pairs);
    if !info.iter().all(|v| v.is_finite()) {
        return None;
    }
    // Bounded iteration count: a 3×3 symmetric matrix converges in a handful.
    let eigen = SymmetricEigen::try_new(info, 1.0e-15, 100)?;
    let max = eigen.eigenvalues.max();
    let min = eigen.eigenvalues.min();
    // Eigenvalues are finite here (the matrix was checked), so `<=` also rejects zero.
    if max <= 0.0 || min < CRB_CONDITION_FLOOR * max {
        return None;
    }
    // trace(J⁻¹) = Σ 1/λ_k for symmetric positive-definite J.
    let trace_p: f64 = eigen.eigenvalues.iter().map(|l| 1.0 / l).sum();
    Some(trace_p.sqrt())
}

#[cfg(test)]
mod tests {
    use nalgebra::Vector3;

    use super::*;

    fn pair(b: [f64; 3], sigma: f64) -> Pair {
        let b = Vector3::from(b).normalize();
        Pair { b, r: b, sigma }
    }

    #[test]
    fn median_of_even_and_odd_counts() {
        // Worked by hand: the middle value, or the mean of the two middle ones.
        assert_eq!(median(&[3.0, 1.0, 2.0]), Some(2.0));
        assert_eq!(median(&[4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&[7.0]), Some(7.0));
    }

    #[test]
    fn p95_of_one_to_hundred() {
        // Hyndman & Fan definition 7: h = (100 − 1)·0.95 = 94.05, so the value
        // is x[94] + 0.05·(x[95] − x[94]) = 95 + 0.05 = 95.05 (0-based order
        // statistics of 1..=100). NumPy's `percentile(arange(1, 101), 95)`
        // gives the same (recalled from memory).
        let values: Vec<f64> = (1..=100).rev().map(f64::from).collect();
        let p95 = quantile(&values, 0.95).unwrap();
        assert!((p95 - 95.05).abs() < 1e-12, "{p95}");
        assert_eq!(quantile(&values, 0.0), Some(1.0));
        assert_eq!(quantile(&values, 1.0), Some(100.0));
    }

    #[test]
    fn quantile_rejects_empty_nan_and_bad_p() {
        assert_eq!(quantile(&[], 0.5), None);
        assert_eq!(quantile(&[1.0, f64::NAN], 0.5), None);
        assert_eq!(quantile(&[1.0], 1.5), None);
    }

    #[test]
    fn crb_of_two_orthogonal_vectors() {
        // By hand: b1 = x, b2 = y, σ = 1. I − xxᵀ = diag(0, 1, 1) and
        // I − yyᵀ = diag(1, 0, 1), so J = diag(1, 1, 2) and P = diag(1, 1, 1/2):
        // the rotation about z is seen by both vectors. trace P = 2.5.
        let pairs = [pair([1.0, 0.0, 0.0], 1.0), pair([0.0, 1.0, 0.0], 1.0)];
        let info = information(&pairs);
        assert!((info - Matrix3::from_diagonal(&Vector3::new(1.0, 1.0, 2.0))).norm() < 1e-15);
        let crb = crb(&pairs).unwrap();
        assert!((crb - 2.5f64.sqrt()).abs() < 1e-12, "{crb}");
    }

    #[test]
    fn crb_scales_with_sigma() {
        // J scales as σ⁻², so sqrt(trace P) scales as σ.
        let pairs = [pair([1.0, 0.0, 0.0], 0.01), pair([0.0, 1.0, 0.0], 0.01)];
        let crb = crb(&pairs).unwrap();
        assert!((crb - 0.01 * 2.5f64.sqrt()).abs() < 1e-14, "{crb}");
    }

    #[test]
    fn crb_is_none_for_parallel_or_single_pairs() {
        let parallel = [pair([0.0, 0.0, 1.0], 0.01), pair([0.0, 0.0, 2.0], 0.02)];
        assert_eq!(crb(&parallel), None);
        assert_eq!(crb(&parallel[..1]), None);
    }
}
