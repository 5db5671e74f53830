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
//! computes the residuals, the next weights and their profile matrix). The
//! 3×3 SVD of each step starts its Jacobi rotations from the previous step's
//! right singular vectors (same stopping rule and checks; a failed check
//! redoes it from the identity).
//!
//! Convergence rule (`converged`): the weights are binary (no residual in the
//! band where `0 < w < 1`), or, once `μ ≥ 1`, the TLS cost `Σ min(ρ_i, 1)`
//! changes by at most `1e-12·(1 + cost)` between steps. (Below `μ = 1` the
//! weights of the inliers are all fractional and shrink together, so a stalled
//! cost there does not mean GNC is done.) Otherwise stop at `max_iterations`.
//! When every residual of the initial estimate is within the gate, it is the
//! answer (one iteration). The caller then refits on the gate inliers.

use nalgebra::Matrix3;

use super::rotation::{nearest_rotation_seeded, ProfileSum};
use super::{svd, Estimate, Method, SolveError, SolveParams, Workspace};

/// Fills `ws.soa` from `ws.pairs`.
fn load_soa(ws: &mut Workspace) {
    for (k, col) in ws.soa.iter_mut().enumerate() {
        col.clear();
        col.extend(
            ws.pairs
                .iter()
                .map(|p| if k < 3 { p.b[k] } else { p.r[k - 3] }),
        );
    }
}

/// `rho_i = ‖b_i − A r_i‖² · inv_g_i` for every pair, from the structure-of-arrays copy.
///
/// The same operations in the same order as [`super::refit::chord2`] (the
/// product row by row, `(a₀x + a₁y) + a₂z`; the squared norm summed x, y, z),
/// so the values are bit for bit those of `chord2(a, p) * inv_g`, but packed.
fn residuals(soa: &[Vec<f64>; 6], inv_g: &[f64], a: &Matrix3<f64>, rho: &mut Vec<f64>) {
    rho.clear();
    rho.resize(inv_g.len(), 0.0);
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the CPU supports AVX2 (checked just above).
        return unsafe { residuals_avx2(soa, inv_g, a, rho) };
    }
    residuals_body(soa, inv_g, a, rho);
}

/// [`residuals_body`] compiled for AVX2 (no FMA: each operation rounds as in the SSE2 build).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn residuals_avx2(soa: &[Vec<f64>; 6], inv_g: &[f64], a: &Matrix3<f64>, rho: &mut [f64]) {
    residuals_body(soa, inv_g, a, rho);
}

#[inline(always)]
fn residuals_body(soa: &[Vec<f64>; 6], inv_g: &[f64], a: &Matrix3<f64>, rho: &mut [f64]) {
    let n = inv_g.len();
    let [bx, by, bz, rx, ry, rz] = soa;
    let (bx, by, bz, rx, ry, rz) = (&bx[..n], &by[..n], &bz[..n], &rx[..n], &ry[..n], &rz[..n]);
    let m = |i: usize, j: usize| a[(i, j)];
    let (a00, a01, a02) = (m(0, 0), m(0, 1), m(0, 2));
    let (a10, a11, a12) = (m(1, 0), m(1, 1), m(1, 2));
    let (a20, a21, a22) = (m(2, 0), m(2, 1), m(2, 2));
    let rho = &mut rho[..n];
    for i in 0..n {
        let (x, y, z) = (rx[i], ry[i], rz[i]);
        let ex = bx[i] - (a00 * x + a01 * y + a02 * z);
        let ey = by[i] - (a10 * x + a11 * y + a12 * z);
        let ez = bz[i] - (a20 * x + a21 * y + a22 * z);
        rho[i] = (ex * ex + ey * ey + ez * ez) * inv_g[i];
    }
}

/// One pass at `a`: TLS cost, and the profile matrix and fractional-weight count of the weights at `mu`.
///
/// Three loops over the pairs, for speed only (the arithmetic of each pair and
/// the order of the sums are those of a single loop, so results are bit for
/// bit the same): residuals into `rho` (packed); the weights of every pair
/// into `work_w` (packed division and square root, no branches); the sums in
/// pair order.
fn pass(ws: &mut Workspace, a: &Matrix3<f64>, mu: f64) -> (f64, Matrix3<f64>, usize) {
    let n = ws.pairs.len();
    residuals(&ws.soa, &ws.resid[..n], a, &mut ws.rho);
    ws.work_w.resize(n, 0.0);
    let n_band = tls_weights(&ws.rho[..n], &mut ws.work_w[..n], mu);
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
    (cost, sum.matrix(), n_band as usize)
}

/// The closed-form TLS weights at `mu` (module doc) of `rho` into `w`: 1,
/// fractional in the band, 0; returns how many are in the band.
///
/// Division and square root are IEEE-exact in every instruction set, so the
/// 4-lane AVX2 build gives the same bits as the 2-lane SSE2 one, at twice the
/// divider throughput on CPUs with a 256-bit divider.
fn tls_weights(rho: &[f64], w: &mut [f64], mu: f64) -> u64 {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the CPU supports AVX2 (checked just above).
        return unsafe { tls_weights_avx2(rho, w, mu) };
    }
    tls_weights_body(rho, w, mu)
}

/// [`tls_weights_body`] compiled for AVX2 (no FMA: each operation rounds as in the SSE2 build).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn tls_weights_avx2(rho: &[f64], w: &mut [f64], mu: f64) -> u64 {
    tls_weights_body(rho, w, mu)
}

#[inline(always)]
fn tls_weights_body(rho: &[f64], w: &mut [f64], mu: f64) -> u64 {
    let (lower, upper, mm) = (mu / (mu + 1.0), (mu + 1.0) / mu, mu * (mu + 1.0));
    let n = rho.len();
    let w = &mut w[..n];
    let mut n_band = 0u64;
    for i in 0..n {
        let rho = rho[i];
        let fractional = ((mm / rho).sqrt() - mu).clamp(0.0, 1.0);
        let (at_one, at_zero) = (rho <= lower, rho >= upper);
        w[i] = if at_one {
            1.0
        } else if at_zero {
            0.0
        } else {
            fractional
        };
        n_band += u64::from(!at_one & !at_zero);
    }
    n_band
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
    load_soa(ws);
    let n = ws.pairs.len();
    residuals(&ws.soa, &ws.resid[..n], &a, &mut ws.rho);
    let rho_max = ws.rho.iter().copied().fold(0.0f64, f64::max);
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
    let mut seed = None;
    while iterations < params.max_iterations {
        // Each step's profile is close to the last one's: seed its SVD with the last `V`.
        let Ok((a_new, v)) = nearest_rotation_seeded(&profile, seed.as_ref()) else {
            break;
        };
        seed = Some(v);
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
