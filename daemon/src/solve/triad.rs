//! TRIAD: the two-vector closed form.
//!
//! The anchor pair is reproduced exactly and the second fixes the rotation
//! about it: `A = [b₁ b̂ b₁×b̂][r₁ r̂ r₁×r̂]ᵀ` with `b̂ = (b₁×b₂)/|b₁×b₂|`,
//! `r̂` likewise. Convergence rule: closed form (one iteration).
//!
//! As the `triad` method it uses the first two pairs, the one with the
//! smaller σ as anchor (the first on a tie); the consensus solver uses it for
//! its hypotheses.

use nalgebra::Matrix3;

use super::Pair;

/// Smallest `|b₁×b₂|` and `|r₁×r₂|` (sine of the separation) TRIAD accepts:
/// below it the rotation about the anchor is lost in rounding.
pub const TRIAD_MIN_SIN: f64 = 1e-8;

/// TRIAD with `anchor` exact; `None` when either pair of vectors is parallel
/// to within `min_sin`.
pub fn triad(anchor: &Pair, other: &Pair, min_sin: f64) -> Option<Matrix3<f64>> {
    let bx = anchor.b.cross(&other.b);
    let rx = anchor.r.cross(&other.r);
    let (nb, nr) = (bx.norm(), rx.norm());
    if !(nb >= min_sin && nr >= min_sin) {
        return None;
    }
    let b2 = bx / nb;
    let r2 = rx / nr;
    let b3 = anchor.b.cross(&b2);
    let r3 = anchor.r.cross(&r2);
    Some(anchor.b * anchor.r.transpose() + b2 * r2.transpose() + b3 * r3.transpose())
}

/// TRIAD on pairs `p` and `q` with the more accurate one (smaller σ) as anchor.
pub fn triad_pair(p: &Pair, q: &Pair, min_sin: f64) -> Option<Matrix3<f64>> {
    if q.sigma < p.sigma {
        triad(q, p, min_sin)
    } else {
        triad(p, q, min_sin)
    }
}
