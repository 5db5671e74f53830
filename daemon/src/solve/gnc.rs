//! Truncated least squares by graduated non-convexity (GNC-TLS; Yang,
//! Antonante, Tzoumas, Carlone, "Graduated Non-Convexity for Robust Spatial
//! Perception", IEEE RA-L 2020).
//!
//! Residuals are normalised to the gate: `ρ_i = ‖b_i − A r_i‖² / c_i²` with
//! `c_i = 2 sin(k σ_i / 2)` the chord of the gate angle `k σ_i`, so the TLS
//! threshold is exactly the verdict's χ² gate (`c_i ≈ k σ_i` for small σ).
//! The closed-form TLS weights of the paper (recalled from it), with threshold
//! 1 in these units: `w = 1` for `ρ ≤ μ/(μ+1)`, `w = √(μ(μ+1)/ρ) − μ` in
//! between, `w = 0` for `ρ ≥ (μ+1)/μ`. μ starts at `1/(2 ρ_max − 1)` from the
//! largest residual of the initial estimate (warm start, else least squares)
//! and grows by `gnc_mu_factor` each step; each step is one weighted
//! least-squares solve with weights `w_i σ_i⁻²` (one pass over the pairs
//! computes the residuals, the next weights and their profile matrix).
//!
//! Convergence rule (`converged`): the weights are binary (no residual in the
//! band where `0 < w < 1`), or, once `μ ≥ 1`, the TLS cost `Σ min(ρ_i, 1)`
//! changes by at most `1e-12·(1 + cost)` between steps. (Below `μ = 1` the
//! weights of the inliers are all fractional and shrink together, so a stalled
//! cost there does not mean GNC is done.) Otherwise stop at `max_iterations`.
//! When every residual of the initial estimate is within the gate, it is the
//! answer (one iteration). The caller then refits on the gate inliers.

use nalgebra::Matrix3;

use super::refit::chord2;
use super::rotation::{nearest_rotation, ProfileSum};
use super::{svd, Estimate, Method, SolveError, SolveParams, Workspace};

/// One pass at `a`: TLS cost, and the profile matrix and fractional-weight count of the weights at `mu`.
///
/// Three loops over the pairs, for speed only (the arithmetic of each pair and
/// the order of the sums are those of a single loop, so results are bit for
/// bit the same): residuals into `rho`; the weights of every pair into
/// `work_w`, so the divisions and square roots of different pairs overlap
/// instead of each waiting on the previous pair's sums; the sums in pair order.
fn pass(ws: &mut Workspace, a: &Matrix3<f64>, mu: f64) -> (f64, Matrix3<f64>, usize) {
    let (lower, upper, mm) = (mu / (mu + 1.0), (mu + 1.0) / mu, mu * (mu + 1.0));
    let n = ws.pairs.len();
    ws.rho.clear();
    ws.rho.extend(
        ws.pairs
            .iter()
            .zip(&ws.resid)
            .map(|(p, &inv_g)| chord2(a, p) * inv_g),
    );
    // The closed-form TLS weights (module doc): 1, fractional in the band, 0.
    ws.work_w.resize(n, 0.0);
    let mut n_band = 0;
    for (w, &rho) in ws.work_w.iter_mut().zip(&ws.rho) {
        let fractional = ((mm / rho).sqrt() - mu).clamp(0.0, 1.0);
        let (weight, in_band) = if rho <= lower {
            (1.0, false)
        } else if rho >= upper {
            (0.0, false)
        } else {
            (fractional, true)
        };
        *w = weight;
        n_band += usize::from(in_band);
    }
    let mut cost = 0.0;
    let mut sum = ProfileSum::default();
    for (((p, &rho), &u), &iv) in ws
        .pairs
        .iter()
        .zip(&ws.rho)
        .zip(&ws.work_w)
        .zip(&ws.inv_var)
    {
        cost += rho.min(1.0);
        if u > 0.0 {
            sum.add(u * iv, &p.b, &p.r);
        }
    }
    (cost, sum.matrix(), n_band)
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
    // `resid` holds the inverse squared gate chords `1/c_i²` during GNC.
    for (inv_g, &g) in ws.resid.iter_mut().zip(&ws.gate_chord2) {
        *inv_g = 1.0 / g;
    }
    let rho_max = ws
        .pairs
        .iter()
        .zip(&ws.resid)
        .map(|(p, &inv_g)| chord2(&a, p) * inv_g)
        .fold(0.0f64, f64::max);
    if rho_max <= 1.0 {
        return Ok(Estimate {
            a,
            iterations: 1,
            converged: true,
            method: Method::GncTls,
        });
    }
    let mut mu = 1.0 / (2.0 * rho_max - 1.0);
    let (mut cost, mut profile, mut n_band) = pass(ws, &a, mu);
    let mut iterations = 0;
    let mut converged = false;
    while iterations < params.max_iterations {
        let Ok(a_new) = nearest_rotation(&profile) else {
            break;
        };
        iterations += 1;
        a = a_new;
        if n_band == 0 {
            converged = true;
            break;
        }
        let mu_next = mu * params.gnc_mu_factor;
        let (cost_new, profile_new, band_new) = pass(ws, &a, mu_next);
        if mu >= 1.0 && (cost_new - cost).abs() <= 1e-12 * (1.0 + cost) {
            converged = true;
            break;
        }
        (cost, profile, n_band, mu) = (cost_new, profile_new, band_new, mu_next);
    }
    Ok(Estimate {
        a,
        iterations: iterations.max(1),
        converged,
        method: Method::GncTls,
    })
}
