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
use wide::{f64x2, CmpLe};

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
///
/// Two pairs at a time in packed arithmetic ([`wide::f64x2`]); each pair's
/// squared chord is the scalar [`Rows::chord2`] to the bit (the same
/// operations in the same order), so the flags are exactly the scalar
/// gate's. The sums (cost, profile) are kept per lane and added up at the
/// end: the same sums in another order, equal to rounding.
fn gate<const PROFILE: bool>(
    pairs: &[Pair],
    inv_var: &[f64],
    gate_chord2: &[f64],
    a: &Matrix3<f64>,
    weights: &mut [f64],
    marks: &mut GateMarks<'_>,
) -> (usize, bool, f64, Matrix3<f64>) {
    let n = pairs
        .len()
        .min(inv_var.len())
        .min(gate_chord2.len())
        .min(weights.len())
        .min(marks.inl.len())
        .min(marks.chord2.len());
    let rows = Rows::of(a);
    let m: [f64x2; 9] = std::array::from_fn(|k| f64x2::splat(rows.0[k]));
    let mut count = 0;
    let mut changed = false;
    let mut cost = f64x2::ZERO;
    let mut sum = [f64x2::ZERO; 9];
    let packed = n - n % 2;
    let blocks = pairs[..packed]
        .chunks_exact(2)
        .zip(inv_var[..packed].chunks_exact(2))
        .zip(gate_chord2[..packed].chunks_exact(2));
    let outs = weights[..packed]
        .chunks_exact_mut(2)
        .zip(marks.inl[..packed].chunks_exact_mut(2))
        .zip(marks.chord2[..packed].chunks_exact_mut(2));
    for (((p, w_in), g), ((w_out, inl), c2)) in blocks.zip(outs) {
        let lane = |f: fn(&Pair) -> f64| f64x2::new([f(&p[0]), f(&p[1])]);
        let (bx, by, bz) = (lane(|p| p.b.x), lane(|p| p.b.y), lane(|p| p.b.z));
        let (rx, ry, rz) = (lane(|p| p.r.x), lane(|p| p.r.y), lane(|p| p.r.z));
        let d0 = bx - (m[0] * rx + m[1] * ry + m[2] * rz);
        let d1 = by - (m[3] * rx + m[4] * ry + m[5] * rz);
        let d2 = bz - (m[6] * rx + m[7] * ry + m[8] * rz);
        let e2 = d0 * d0 + d1 * d1 + d2 * d2;
        let is_in = e2.cmp_le(f64x2::new([g[0], g[1]]));
        // Outliers at weight +0 (the mask clears every bit).
        let w = f64x2::new([w_in[0], w_in[1]]) & is_in;
        cost += e2 * w;
        if PROFILE {
            let (wx, wy, wz) = (w * bx, w * by, w * bz);
            sum[0] += wx * rx;
            sum[1] += wx * ry;
            sum[2] += wx * rz;
            sum[3] += wy * rx;
            sum[4] += wy * ry;
            sum[5] += wy * rz;
            sum[6] += wz * rx;
            sum[7] += wz * ry;
            sum[8] += wz * rz;
        }
        let bits = is_in.move_mask();
        w_out.copy_from_slice(&w.to_array());
        c2.copy_from_slice(&e2.to_array());
        // Both flags as two bits, against the old two at once.
        let before = inl[0] as i32 | (inl[1] as i32) << 1;
        changed |= bits != before;
        inl[0] = bits & 1 != 0;
        inl[1] = bits & 2 != 0;
        count += bits.count_ones() as usize;
    }
    let total = |v: f64x2| {
        let [a, b] = v.to_array();
        a + b
    };
    let mut cost = total(cost);
    let mut profile = ProfileSum::from_entries(std::array::from_fn(|k| total(sum[k])));
    // The last pairs one at a time.
    for i in packed..n {
        let p = &pairs[i];
        let e2 = rows.chord2(p);
        let now = e2 <= gate_chord2[i];
        changed |= now != marks.inl[i];
        marks.inl[i] = now;
        marks.chord2[i] = e2;
        let w = if now { inv_var[i] } else { 0.0 };
        weights[i] = w;
        count += now as usize;
        cost += e2 * w;
        if PROFILE {
            profile.add(w, &p.b, &p.r);
        }
    }
    (count, changed, cost, profile.matrix())
}

/// `Σ w_i b_i r_iᵀ` at the gate's weights (outliers at weight 0), for a
/// gate that left the profile out.
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

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::{UnitQuaternion, Vector3};

    #[test]
    fn packed_gate_marks_the_scalar_gate_set_and_sums_its_profile() {
        // Derived in the test: the packed gate must give every pair the
        // flag and squared chord of the scalar chord `Rows::chord2` against
        // its gate, to the bit, for every length (remainders of 0 and 1);
        // its cost and profile are the scalar sums to rounding.
        let q = UnitQuaternion::from_scaled_axis(Vector3::new(0.3, -0.5, 0.2));
        let a = q.to_rotation_matrix().into_inner();
        let rows = Rows::of(&a);
        for n in [0, 1, 2, 3, 10, 201] {
            let pairs: Vec<Pair> = (0..n)
                .map(|i| {
                    let x = i as f64;
                    let r = Vector3::new((0.37 * x).sin(), (0.71 * x).cos(), 0.3).normalize();
                    // Every third pair off by 0.05 rad, the rest by 1e-4 rad.
                    let off = if i % 3 == 0 { 0.05 } else { 1e-4 };
                    let axis = r.cross(&Vector3::z()).normalize();
                    let b = q * (UnitQuaternion::from_scaled_axis(axis * off) * r);
                    Pair { b, r, sigma: 1e-3 }
                })
                .collect();
            let inv_var: Vec<f64> = (0..n).map(|i| 1e6 * (1.0 + (i % 4) as f64)).collect();
            let gate_chord2 = vec![1e-4; n]; // a gate of 0.01 rad
            let (mut weights, mut inl, mut chord2) = (vec![0.0; n], vec![true; n], vec![0.0; n]);
            let mut gated_a = None;
            let mut marks = GateMarks {
                inl: &mut inl,
                chord2: &mut chord2,
                gated_a: &mut gated_a,
            };
            let (count, changed, cost, profile) =
                gate::<true>(&pairs, &inv_var, &gate_chord2, &a, &mut weights, &mut marks);
            let mut want_cost = 0.0;
            let mut want_weights = vec![0.0; n];
            for i in 0..n {
                let e2 = rows.chord2(&pairs[i]);
                let is_in = e2 <= gate_chord2[i];
                assert_eq!(
                    marks.chord2[i].to_bits(),
                    e2.to_bits(),
                    "n {n}, chord of {i}"
                );
                assert_eq!(marks.inl[i], is_in, "n {n}, flag of {i}");
                assert_eq!(is_in, i % 3 != 0, "n {n}, the planted set at {i}");
                want_weights[i] = if is_in { inv_var[i] } else { 0.0 };
                want_cost += e2 * want_weights[i];
            }
            assert_eq!(weights, want_weights, "n {n}");
            assert_eq!(count, (0..n).filter(|i| i % 3 != 0).count(), "n {n}");
            assert_eq!(
                changed,
                n > 0,
                "n {n}: every third flag went from in to out"
            );
            assert!(
                (cost - want_cost).abs() <= 1e-14 * want_cost.max(1e-300),
                "n {n}"
            );
            let want_profile = super::super::rotation::attitude_profile(&pairs, &want_weights);
            let scale = want_profile.abs().max().max(1e-300);
            assert!(
                (profile - want_profile).abs().max() <= 1e-14 * scale,
                "n {n}"
            );
            // Without the profile: the same marks, a zero matrix.
            let (count2, changed2, cost2, zero) =
                gate::<false>(&pairs, &inv_var, &gate_chord2, &a, &mut weights, &mut marks);
            assert_eq!(
                (count2, changed2, cost2.to_bits()),
                (count, false, cost.to_bits())
            );
            assert_eq!(zero, Matrix3::zeros());
        }
    }
}
