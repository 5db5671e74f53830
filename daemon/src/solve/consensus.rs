//! Consensus: TRIAD hypotheses from pairs of observations, scored by how many
//! observations they explain within the χ² gate, then refined by least
//! squares on the consensus set.
//!
//! Hypotheses: observations `i ≠ j` give TRIAD with the smaller-σ one as
//! anchor. A hypothesis is rejected before scoring when the two observations
//! cannot both be inliers — their separation differs between frames by more
//! than `k·√(σ_i² + σ_j²)` — or when they are nearly parallel
//! (`|b_i×b_j|` or `|r_i×r_j|` below [`HYPOTHESIS_MIN_SIN`], i.e. closer than
//! about 2°, where TRIAD fixes the turn about them only to ~30 σ). If no
//! hypothesis survives, the search is repeated accepting separations down to
//! [`super::triad::TRIAD_MIN_SIN`].
//!
//! Search: every pair of observations when there are at most
//! [`EXHAUSTIVE_MAX_PAIRS`] of them; otherwise pairs drawn at random
//! (ChaCha8 seeded from `SolveParams::seed`, so results are deterministic).
//! Each new best hypothesis is refined at once (gate → least squares, up to
//! three passes) and kept when that explains more. Extra hypotheses (a warm
//! start, another method's result) can be given and are scored first.
//!
//! Convergence rule: exhaustive mode ends after every pair (or as soon as one
//! hypothesis explains every observation); sampled mode stops when the chance
//! of never having drawn two inliers, `(1 − p)^draws` with
//! `p = ŵ · (n ŵ − 1)/(n − 1)` for the best inlier share `ŵ` seen (the exact
//! draw-two-inliers chance, ≈ `ŵ²`), is below [`MISS_PROBABILITY`]
//! (`converged`), or at `consensus_max_draws` (not converged). Iterations
//! reported: hypotheses examined plus refits. The caller then refits on the
//! consensus set until it is stable (see `refit`).
//!
//! Permutation of the pairs: exhaustive mode examines the same hypotheses, so
//! the result is the same up to exact ties in (count, cost); sampled mode
//! draws different hypotheses, and the result is the same whenever both runs
//! find the same consensus set (the refit then gives the same rotation).

use nalgebra::Matrix3;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::refit::{better, refit, score, GateMarks};
use super::triad::{triad_pair, TRIAD_MIN_SIN};
use super::{Estimate, Method, SolveError, SolveParams, Workspace};

/// Exhaustive search up to this many pairs of observations (n ≤ 64).
pub const EXHAUSTIVE_MAX_PAIRS: usize = 2016;
/// Sine of the smallest separation a hypothesis pair may have (≈ 2°).
pub const HYPOTHESIS_MIN_SIN: f64 = 0.0349;
/// Sampled mode stops when the chance of having missed every all-inlier draw is below this.
pub const MISS_PROBABILITY: f64 = 1e-3;
/// Refit passes when a new best hypothesis is refined.
const LOCAL_REFIT_PASSES: u32 = 3;

/// The best hypothesis so far.
#[derive(Debug, Clone, Copy)]
struct Best {
    a: Matrix3<f64>,
    count: usize,
    cost: f64,
}

/// Search state shared by the exhaustive and sampled loops.
struct Search<'a> {
    ws: &'a mut Workspace,
    gate_k: f64,
    best: Option<Best>,
    refits: u32,
}

impl Search<'_> {
    /// Scores `a`; when it is a new best, refines it and keeps the better of the two.
    fn consider(&mut self, a: Matrix3<f64>) {
        let ws = &mut *self.ws;
        let (count, cost) = score(&ws.pairs, &ws.inv_var, &ws.gate_chord2, &a);
        let (best_count, best_cost) = self.best.map_or((0, f64::INFINITY), |b| (b.count, b.cost));
        if !better(count, cost, best_count, best_cost) {
            return;
        }
        let mut cand = Best { a, count, cost };
        if count >= 2 {
            let r = refit(
                &ws.pairs,
                &ws.inv_var,
                &ws.gate_chord2,
                a,
                &mut ws.work_w,
                GateMarks {
                    inl: &mut ws.inl,
                    chord2: &mut ws.chord2,
                    gated_a: &mut ws.gated_a,
                },
                LOCAL_REFIT_PASSES,
            );
            self.refits += r.passes;
            let (rc, rcost) = score(&ws.pairs, &ws.inv_var, &ws.gate_chord2, &r.a);
            if better(rc, rcost, cand.count, cand.cost) {
                cand = Best {
                    a: r.a,
                    count: rc,
                    cost: rcost,
                };
            }
        }
        self.best = Some(cand);
    }

    /// The TRIAD hypothesis of observations `i`, `j`, unless rejected (see the module doc).
    fn hypothesis(&self, i: usize, j: usize, min_sin: f64) -> Option<Matrix3<f64>> {
        let (p, q) = (&self.ws.pairs[i], &self.ws.pairs[j]);
        let tol = self.gate_k * p.sigma.hypot(q.sigma);
        let (cb, cr) = (p.b.dot(&q.b), p.r.dot(&q.r));
        // |Δcos| ≤ |Δangle|: a cheap first rejection.
        if (cb - cr).abs() > tol {
            return None;
        }
        let (sb, sr) = (p.b.cross(&q.b).norm(), p.r.cross(&q.r).norm());
        if sb < min_sin || sr < min_sin || (sb.atan2(cb) - sr.atan2(cr)).abs() > tol {
            return None;
        }
        triad_pair(p, q, min_sin)
    }

    fn best_count(&self) -> usize {
        self.best.map_or(0, |b| b.count)
    }
}

/// Draws needed so that `(1 − p)^draws < MISS_PROBABILITY` for `count` inliers of `n`.
fn draws_needed(count: usize, n: usize) -> f64 {
    if count < 2 {
        return f64::INFINITY;
    }
    let p = (count as f64 / n as f64) * ((count - 1) as f64 / (n - 1) as f64);
    if p >= 1.0 {
        return 1.0;
    }
    (MISS_PROBABILITY.ln() / (-p).ln_1p()).ceil()
}

/// Consensus search; `priors` are extra hypotheses scored first.
pub(crate) fn solve(
    ws: &mut Workspace,
    params: &SolveParams,
    priors: &[Matrix3<f64>],
) -> Result<Estimate, SolveError> {
    let n = ws.pairs.len();
    let n_pairs = n * (n - 1) / 2;
    let mut search = Search {
        ws,
        gate_k: params.gate_k,
        best: None,
        refits: 0,
    };
    for a in priors {
        search.consider(*a);
    }
    let mut examined: u64 = 0;
    let mut converged = false;
    for min_sin in [HYPOTHESIS_MIN_SIN, TRIAD_MIN_SIN] {
        let mut found_any = false;
        if n_pairs <= EXHAUSTIVE_MAX_PAIRS {
            'outer: for i in 0..n {
                for j in i + 1..n {
                    examined += 1;
                    if let Some(a) = search.hypothesis(i, j, min_sin) {
                        found_any = true;
                        search.consider(a);
                        if search.best_count() == n {
                            break 'outer;
                        }
                    }
                }
            }
            converged = true;
        } else {
            let mut rng = ChaCha8Rng::seed_from_u64(params.seed);
            let mut draws: u64 = 0;
            while draws < u64::from(params.consensus_max_draws) {
                if draws as f64 >= draws_needed(search.best_count(), n) {
                    converged = true;
                    break;
                }
                draws += 1;
                let i = rng.random_range(0..n);
                let mut j = rng.random_range(0..n - 1);
                if j >= i {
                    j += 1;
                }
                if let Some(a) = search.hypothesis(i, j, min_sin) {
                    found_any = true;
                    search.consider(a);
                }
            }
            if !converged && draws as f64 >= draws_needed(search.best_count(), n) {
                converged = true;
            }
            examined += draws;
        }
        if found_any || search.best.is_some() {
            break;
        }
    }
    let refits = search.refits;
    let best = search.best.ok_or_else(|| {
        SolveError::Degenerate("no two observations give a usable TRIAD hypothesis".into())
    })?;
    let iterations = u32::try_from(examined)
        .unwrap_or(u32::MAX)
        .saturating_add(refits)
        .max(1);
    Ok(Estimate {
        a: best.a,
        iterations,
        converged,
        method: Method::Consensus,
    })
}
