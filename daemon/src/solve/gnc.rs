//! Truncated least squares by graduated non-convexity (GNC-TLS; Yang,
//! Antonante, Tzoumas, Carlone, "Graduated Non-Convexity for Robust Spatial
//! Perception", IEEE RA-L 2020).
//!
//! Residuals are normalised to the gate: `ρ_i = ‖b_i − A r_i‖² / c_i²` with
//! `c_i = 2 sin(k σ_i / 2)` the chord of the gate angle `k σ_i`, so the TLS
//! threshold is exactly the verdict's χ² gate (`c_i ≈ k σ_i` for small σ).
//! The closed-form TLS weights of the paper, with threshold 1 in these units:
//! `w = 1` for `ρ ≤ μ/(μ+1)`, `w = √(μ(μ+1)/ρ) − μ` in between,
//! `w = 0` for `ρ ≥ (μ+1)/μ`. μ starts at `1/(2 ρ_max − 1)` from the largest
//! residual of the initial estimate (warm start, else least squares) and grows
//! by `gnc_mu_factor` each step; each step is one weighted least-squares solve
//! with weights `w_i σ_i⁻²`.
//!
//! Convergence rule (`converged`): the weights are binary (no residual in the
//! band where `0 < w < 1`), or, once `μ ≥ 1`, the TLS cost `Σ min(ρ_i, 1)`
//! changes by at most `1e-12·(1 + cost)` between steps. (Below `μ = 1` the
//! weights are nearly `∝ ρ^{-1/2}` and only their scale changes, so a stalled
//! cost there does not mean GNC is done.) Otherwise stop at `max_iterations`.
//! When every residual of the initial estimate is within the gate, it is the
//! answer (one iteration). The caller then refits on the gate inliers.

use nalgebra::Matrix3;

use super::refit::chord2;
use super::{svd, Estimate, Method, SolveError, SolveParams, Workspace};

/// Normalised residuals `ρ_i` of `a` into `ws.resid`; returns (max ρ, TLS cost).
fn residuals(ws: &mut Workspace, a: &Matrix3<f64>) -> (f64, f64) {
    let mut max = 0.0f64;
    let mut cost = 0.0;
    for ((p, &g), rho) in ws
        .pairs
        .iter()
        .zip(&ws.gate_chord2)
        .zip(ws.resid.iter_mut())
    {
        *rho = chord2(a, p) / g;
        max = max.max(*rho);
        cost += rho.min(1.0);
    }
    (max, cost)
}

/// GNC-TLS from `warm` (or least squares).
pub(crate) fn solve(
    ws: &mut Workspace,
    params: &SolveParams,
    warm: Option<Matrix3<f64>>,
) -> Result<Estimate, SolveError> {
    let mut a = match warm {
        Some(a) => a,
        None => svd::weighted_ls(&ws.pairs, &ws.inv_var)?,
    };
    let (rho_max, mut cost) = residuals(ws, &a);
    if rho_max <= 1.0 {
        return Ok(Estimate {
            a,
            iterations: 1,
            converged: true,
            method: Method::GncTls,
        });
    }
    let mut mu = 1.0 / (2.0 * rho_max - 1.0);
    let mut iterations = 0;
    let mut converged = false;
    while iterations < params.max_iterations {
        let lower = mu / (mu + 1.0);
        let upper = (mu + 1.0) / mu;
        let mut n_band = 0usize;
        for ((rho, w), &iv) in ws.resid.iter().zip(ws.work_w.iter_mut()).zip(&ws.inv_var) {
            let u = if *rho <= lower {
                1.0
            } else if *rho >= upper {
                0.0
            } else {
                n_band += 1;
                ((mu * (mu + 1.0) / rho).sqrt() - mu).clamp(0.0, 1.0)
            };
            *w = u * iv;
        }
        let Ok(a_new) = svd::weighted_ls(&ws.pairs, &ws.work_w) else {
            break;
        };
        iterations += 1;
        a = a_new;
        let (_, cost_new) = residuals(ws, &a);
        if n_band == 0 {
            converged = true;
            break;
        }
        if mu >= 1.0 && (cost_new - cost).abs() <= 1e-12 * (1.0 + cost) {
            converged = true;
            break;
        }
        cost = cost_new;
        mu *= params.gnc_mu_factor;
    }
    Ok(Estimate {
        a,
        iterations: iterations.max(1),
        converged,
        method: Method::GncTls,
    })
}
