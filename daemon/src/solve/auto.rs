//! `auto`, the default: cheap when a warm start still explains the data,
//! escalating to costlier robust solves when a result explains too few.
//!
//! 1. Warm start given: refit on its gate inliers (gate → least squares →
//!    gate, until the set is stable, see `refit`). Accepted when it explains
//!    at least `auto_min_inlier_share` of the pairs (and at least two);
//!    `Outcome::method` is then `auto`.
//! 2. Otherwise GNC-TLS from least squares (cold), then its refit; accepted
//!    on the same test (`method` = `gnc-tls`).
//! 3. Otherwise consensus, with the warm and GNC-TLS results as extra
//!    hypotheses, then its refit (`method` = `consensus`).
//!
//! The result returned is the one explaining the most pairs (ties: lower
//! normalised residual cost), so escalation never makes the answer worse by
//! that measure. Convergence rule: that of the stage whose result is
//! returned; iterations are summed over every stage run.

use nalgebra::Matrix3;

use super::refit::{better, finish, refit, score, GateMarks, REFIT_MAX_PASSES};
use super::{consensus, gnc, svd, Estimate, Method, SolveError, SolveParams, Workspace};

/// A stage's result with its score.
#[derive(Debug, Clone, Copy)]
struct Candidate {
    est: Estimate,
    count: usize,
    cost: f64,
}

/// Keeps the better of `best` and `cand`.
fn keep(best: &mut Option<Candidate>, cand: Candidate) {
    match best {
        Some(b) if !better(cand.count, cand.cost, b.count, b.cost) => {}
        _ => *best = Some(cand),
    }
}

/// `auto` (see the module doc); writes the final weights into `weights`.
pub(crate) fn solve(
    ws: &mut Workspace,
    params: &SolveParams,
    warm: Option<Matrix3<f64>>,
    weights: &mut [f64],
) -> Result<Estimate, SolveError> {
    let n = ws.pairs.len();
    let need = ((params.auto_min_inlier_share * n as f64).ceil() as usize).max(2);
    let mut iterations = 0u32;
    let mut best: Option<Candidate> = None;
    let mut last_err = None;

    if let Some(a0) = warm {
        let r = refit(
            &ws.pairs,
            &ws.inv_var,
            &ws.gate_chord2,
            a0,
            weights,
            GateMarks {
                inl: &mut ws.inl,
                chord2: &mut ws.chord2,
                gated_a: &mut ws.gated_a,
            },
            REFIT_MAX_PASSES,
        );
        iterations += r.passes.max(1);
        let est = Estimate {
            a: r.a,
            iterations: 0,
            converged: r.stable,
            method: Method::Auto,
        };
        let cand = Candidate {
            est,
            count: r.n_inliers,
            cost: r.cost,
        };
        if cand.count >= need {
            return Ok(Estimate {
                iterations,
                ..cand.est
            });
        }
        keep(&mut best, cand);
    }

    match gnc::solve(ws, params, None) {
        Ok(est) => {
            let est = finish(ws, est, weights);
            iterations = iterations.saturating_add(est.iterations);
            let (count, cost) = score(&ws.pairs, &ws.inv_var, &ws.gate_chord2, &est.a);
            keep(&mut best, Candidate { est, count, cost });
            if let Some(b) = best.filter(|b| b.count >= need) {
                return finalize(ws, b.est, iterations, weights);
            }
        }
        Err(e) => last_err = Some(e),
    }

    let priors_buf: [Matrix3<f64>; 1];
    let priors: &[Matrix3<f64>] = match &best {
        Some(b) => {
            priors_buf = [b.est.a];
            &priors_buf
        }
        None => &[],
    };
    match consensus::solve(ws, params, priors) {
        Ok(est) => {
            let est = finish(ws, est, weights);
            iterations = iterations.saturating_add(est.iterations);
            let (count, cost) = score(&ws.pairs, &ws.inv_var, &ws.gate_chord2, &est.a);
            keep(&mut best, Candidate { est, count, cost });
        }
        Err(e) => last_err = Some(e),
    }

    match best {
        Some(b) => finalize(ws, b.est, iterations, weights),
        None => {
            // Nothing robust worked: plain least squares, or the error.
            let a = svd::weighted_ls(&ws.pairs, &ws.inv_var).map_err(|e| last_err.unwrap_or(e))?;
            weights.copy_from_slice(&ws.inv_var);
            Ok(Estimate {
                a,
                iterations: iterations.saturating_add(1),
                converged: false,
                method: Method::Ls,
            })
        }
    }
}

/// Writes the weights of `est` (its gate inliers) and sets the summed iteration count.
fn finalize(
    ws: &mut Workspace,
    est: Estimate,
    iterations: u32,
    weights: &mut [f64],
) -> Result<Estimate, SolveError> {
    for (i, p) in ws.pairs.iter().enumerate() {
        let e2 = super::refit::chord2(&est.a, p);
        let is_in = e2 <= ws.gate_chord2[i];
        weights[i] = if is_in { ws.inv_var[i] } else { 0.0 };
        ws.inl[i] = is_in;
        ws.chord2[i] = e2;
    }
    ws.gated_a = Some(est.a);
    Ok(Estimate { iterations, ..est })
}
