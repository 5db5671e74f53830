//! Least unsquared deviations: minimise `Σ σ_i⁻¹ ‖b_i − A r_i‖` over SO(3)
//! by iteratively reweighted least squares.
//!
//! Each iteration solves weighted least squares (SVD method) with
//! `w_i = σ_i⁻¹ / max(‖b_i − A r_i‖, LUD_FLOOR · σ_i)`; the floor (in chord
//! units, a thousandth of the pair's σ) keeps a pair that is fitted exactly
//! from taking all the weight. Start: the warm start when given, otherwise
//! least squares.
//!
//! Convergence rule: the rotation moves by at most `LUD_TOL · min σ_i` rad
//! between iterations (`converged`), else stop at `max_iterations`. The
//! caller then refits on the gate inliers (see `refit`).

use nalgebra::Matrix3;

use super::refit::chord2;
use super::rotation::{angle_between_matrices, nearest_rotation, ProfileSum};
use super::{svd, Estimate, Method, SolveError, SolveParams, Workspace};

/// Residual floor, in units of the pair's σ.
pub const LUD_FLOOR: f64 = 1e-3;
/// Step tolerance, in units of the smallest σ.
pub const LUD_TOL: f64 = 1e-4;

/// LUD by IRLS from `warm` (or least squares).
pub(crate) fn solve(
    ws: &mut Workspace,
    params: &SolveParams,
    warm: Option<Matrix3<f64>>,
) -> Result<Estimate, SolveError> {
    let mut a = match warm {
        Some(a) => a,
        None => svd::weighted_ls(&ws.pairs, &ws.inv_var)?,
    };
    let sigma_min = ws
        .pairs
        .iter()
        .map(|p| p.sigma)
        .fold(f64::INFINITY, f64::min);
    let tol = LUD_TOL * sigma_min;
    let mut iterations = 0;
    let mut converged = false;
    while iterations < params.max_iterations {
        let mut sum = ProfileSum::default();
        for p in &ws.pairs {
            let e = chord2(&a, p).sqrt();
            sum.add(1.0 / (p.sigma * e.max(LUD_FLOOR * p.sigma)), &p.b, &p.r);
        }
        let Ok(a_new) = nearest_rotation(&sum.matrix()) else {
            break;
        };
        iterations += 1;
        let step = angle_between_matrices(&a, &a_new);
        a = a_new;
        if step <= tol {
            converged = true;
            break;
        }
    }
    Ok(Estimate {
        a,
        iterations: iterations.max(1),
        converged,
        method: Method::Lud,
    })
}
