//! The common last step of every robust method: a weighted least-squares
//! refit on the χ²-gate inliers, so that once the outliers are out the
//! estimate is as efficient as least squares on the inliers alone.
//!
//! Convergence rule: gate at the current rotation → refit on that set →
//! gate again; stop when the set no longer changes ("stable"), after at most
//! [`REFIT_MAX_PASSES`] refits. With fewer than two inliers, or when the
//! refit fails (e.g. the inliers cancel), the rotation is kept as it is.
//!
//! The gate is `‖b_i − A r_i‖² ≤ (2 sin(k σ_i / 2))²`, the chord form of
//! `θ_i ≤ k σ_i` (cheaper, same set).

use nalgebra::Matrix3;

use super::rotation::{nearest_rotation, ProfileSum};
use super::{Estimate, Pair, Workspace};

/// Refit passes at most.
pub const REFIT_MAX_PASSES: u32 = 5;

/// What a refit produced.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Refit {
    /// The refitted rotation.
    pub a: Matrix3<f64>,
    /// Least-squares refits done.
    pub passes: u32,
    /// Whether the inlier set stopped changing.
    pub stable: bool,
    /// Inliers of the set the rotation was fitted on.
    pub n_inliers: usize,
    /// `Σ_inliers ‖b_i − A r_i‖² σ_i⁻²` at `a` (tie-breaks between hypotheses).
    pub cost: f64,
    /// Whether the last gate was at `a` (its marks are those of `a`).
    pub gated: bool,
}

/// Squared chord residual `‖b − A r‖²`.
#[inline]
pub(crate) fn chord2(a: &Matrix3<f64>, p: &Pair) -> f64 {
    (p.b - a * p.r).norm_squared()
}

/// A rotation's entries as plain numbers, for [`chord2`] in tight loops
/// (the generic matrix product compiled to about twice the instructions).
#[derive(Clone, Copy)]
struct Rows([f64; 9]);

impl Rows {
    fn of(a: &Matrix3<f64>) -> Rows {
        Rows(std::array::from_fn(|k| a[(k / 3, k % 3)]))
    }

    /// [`chord2`] at this rotation, the same sums in the same order.
    #[inline]
    fn chord2(&self, p: &Pair) -> f64 {
        let m = &self.0;
        let (x, y, z) = (p.r.x, p.r.y, p.r.z);
        let d0 = p.b.x - (m[0] * x + m[1] * y + m[2] * z);
        let d1 = p.b.y - (m[3] * x + m[4] * y + m[5] * z);
        let d2 = p.b.z - (m[6] * x + m[7] * y + m[8] * z);
        d0 * d0 + d1 * d1 + d2 * d2
    }
}

/// Inlier count and cost of rotation `a` (see [`Refit::cost`]).
pub(crate) fn score(
    pairs: &[Pair],
    inv_var: &[f64],
    gate_chord2: &[f64],
    a: &Matrix3<f64>,
) -> (usize, f64) {
    let mut count = 0;
    let mut cost = 0.0;
    for ((p, &w), &g) in pairs.iter().zip(inv_var).zip(gate_chord2) {
        let e2 = chord2(a, p);
        if e2 <= g {
            count += 1;
            cost += e2 * w;
        }
    }
    (count, cost)
}

/// Whether `(count, cost)` beats `(best_count, best_cost)`: more inliers, then lower cost.
pub(crate) fn better(count: usize, cost: f64, best_count: usize, best_cost: f64) -> bool {
    count > best_count || (count == best_count && cost < best_cost)
}

/// Where a gate writes its marks: the inlier flags and the squared chords,
/// and the rotation they are of (set by [`refit`] when it returns).
pub(crate) struct GateMarks<'a> {
    /// Inlier flag of each pair.
    pub inl: &'a mut [bool],
    /// `‖b_i − A r_i‖²` of each pair.
    pub chord2: &'a mut [f64],
    /// The rotation `inl` and `chord2` are of, or `None`.
    pub gated_a: &'a mut Option<Matrix3<f64>>,
}

/// Gates at `a` into `weights` and `marks`; returns (inliers, whether the
/// set changed, cost, profile matrix of the set when `PROFILE`, else zero:
/// a gate whose set comes out unchanged ends the refit, and its profile
/// would go unused, so later gates leave it to [`profile_of`]).
fn gate<const PROFILE: bool>(
    pairs: &[Pair],
    inv_var: &[f64],
    gate_chord2: &[f64],
    a: &Matrix3<f64>,
    weights: &mut [f64],
    marks: &mut GateMarks<'_>,
) -> (usize, bool, f64, Matrix3<f64>) {
    let mut count = 0;
    let mut changed = false;
    let mut cost = 0.0;
    let mut sum = ProfileSum::default();
    // Branch-free: an outlier adds its pair at weight 0, which leaves the
    // sums as they are (the pairs are finite); a branch per pair cost more
    // than the additions it skipped. Zipped slices: no bounds checks.
    let marked = marks.inl.iter_mut().zip(marks.chord2.iter_mut());
    let weighed = inv_var.iter().zip(gate_chord2).zip(weights.iter_mut());
    let rows = Rows::of(a);
    for ((p, ((&w_in, &gate), w_out)), (inl, c2)) in pairs.iter().zip(weighed).zip(marked) {
        let e2 = rows.chord2(p);
        let is_in = e2 <= gate;
        changed |= is_in != *inl;
        *inl = is_in;
        *c2 = e2;
        let w = if is_in { w_in } else { 0.0 };
        *w_out = w;
        count += is_in as usize;
        cost += e2 * w;
        if PROFILE {
            sum.add(w, &p.b, &p.r);
        }
    }
    (count, changed, cost, sum.matrix())
}

/// `Σ w_i b_i r_iᵀ` at the gate's weights, added exactly as [`gate`] adds
/// them (outliers at weight 0 included), so the matrix is the same to the bit.
fn profile_of(pairs: &[Pair], weights: &[f64]) -> Matrix3<f64> {
    let mut sum = ProfileSum::default();
    for (p, &w) in pairs.iter().zip(weights) {
        sum.add(w, &p.b, &p.r);
    }
    sum.matrix()
}

/// Refits from `a0` on the gate inliers (see the module doc for the rule).
/// On return `weights`/`marks.inl` hold the set `a` was fitted on, and
/// `marks` the gate at `a` itself when [`Refit::gated`] (`marks.gated_a`
/// says so: `Some(a)`, else `None`).
pub(crate) fn refit(
    pairs: &[Pair],
    inv_var: &[f64],
    gate_chord2: &[f64],
    a0: Matrix3<f64>,
    weights: &mut [f64],
    mut marks: GateMarks<'_>,
    max_passes: u32,
) -> Refit {
    let mut a = a0;
    let (mut n_in, _, mut cost, mut profile) =
        gate::<true>(pairs, inv_var, gate_chord2, &a, weights, &mut marks);
    let mut gated = true;
    let mut passes = 0;
    let mut stable = false;
    while n_in >= 2 && passes < max_passes {
        let Ok(a_new) = nearest_rotation(&profile) else {
            break;
        };
        passes += 1;
        let (n_new, changed, cost_new, _) =
            gate::<false>(pairs, inv_var, gate_chord2, &a_new, weights, &mut marks);
        a = a_new;
        n_in = n_new;
        cost = cost_new;
        if !changed {
            stable = true;
            break;
        }
        profile = profile_of(pairs, weights);
    }
    if !stable && passes > 0 && n_in >= 2 {
        // The cap was hit with a changed set: fit once more so `a` matches `weights`.
        if let Ok(a_new) = nearest_rotation(&profile) {
            a = a_new;
            gated = false;
            passes += 1;
            cost = score(pairs, inv_var, gate_chord2, &a).1;
        }
    }
    *marks.gated_a = gated.then_some(a);
    Refit {
        a,
        passes,
        stable,
        n_inliers: n_in,
        cost,
        gated,
    }
}

/// Ends a robust method: refit on the inliers, writing the final weights.
pub(crate) fn finish(ws: &mut Workspace, est: Estimate, weights: &mut [f64]) -> Estimate {
    let r = refit(
        &ws.pairs,
        &ws.inv_var,
        &ws.gate_chord2,
        est.a,
        weights,
        GateMarks {
            inl: &mut ws.inl,
            chord2: &mut ws.chord2,
            gated_a: &mut ws.gated_a,
        },
        REFIT_MAX_PASSES,
    );
    Estimate {
        a: r.a,
        iterations: est.iterations + r.passes,
        converged: est.converged && r.stable,
        method: est.method,
    }
}
