//! Verdicts: residuals, inlier flags, covariance and observability of a solved rotation.
//!
//! - Residual of pair `i`: the angle between `b_i` and `A r_i`,
//!   `θ_i = 2 asin(‖b_i − A r_i‖/2)` by series for small angles,
//!   `atan2(|b_i × A r_i|, b_i · A r_i)` beyond (accurate at all angles).
//! - Inlier: `θ_i ≤ k σ_i` (χ² gate, 2 dof; `k = √13.8155` at 99.9 %),
//!   tested in its chord form `‖b_i − A r_i‖² ≤ (2 sin(k σ_i / 2))²` (the
//!   same set, and no angle needed when the residuals are not wanted).
//! - Covariance (QUEST measurement model, Shuster & Oh 1981):
//!   `P = F⁻¹`, `F = Σ_inliers σ_i⁻² (I − b_i b_iᵀ)`, body frame, for the
//!   error `A_true ≈ (I − [δθ×]) A_est`.
//! - Observability, by the eigenvalues `λ₁ ≤ λ₂ ≤ λ₃` of `F`: `Unobservable`
//!   about the eigenvector of `λ₁` when `λ₁ ≤ OBSERVABILITY_RATIO · λ₃`
//!   (inliers spanning fewer than two independent directions give `λ₁ = 0`).
//!   Measurement noise spreads the measured `b_i` of a single reference
//!   direction into a cone and so hides that zero, so the same test is also
//!   made on the noise-free geometry `G = Σ_inliers σ_i⁻² (I − r_i r_iᵀ)` of
//!   the reference directions; when `G` fails it, `P` is taken from
//!   `A G Aᵀ` and the axis is `A` times `G`'s weak eigenvector. The
//!   unobservable axis then carries [`UNOBSERVABLE_VARIANCE`] in `P`, the other two
//!   their `1/λ`. Fewer than two pairs or two inliers: `Insufficient`, with
//!   `P = UNOBSERVABLE_VARIANCE · I`. Never NaN or infinite.
//! - A pair with a zero or non-finite vector or a bad σ (refused by the
//!   solvers, normally rejected earlier by protocol validation) gets residual
//!   `π` and is an outlier.

use nalgebra::{Matrix3, UnitQuaternion, Vector3};

use crate::solve::eigen::symmetric_eigen3;
use crate::solve::{FinalGate, LoadedPairs, Pair};

/// Variance reported on an unobservable axis, rad² (finite so JSON can carry it).
pub const UNOBSERVABLE_VARIANCE: f64 = 1.0e12;

/// Near-singularity test of the information matrix: smallest over largest
/// eigenvalue at or below this is unobservable (the same ratio as the
/// solvers' [`crate::solve::rotation::DEGENERACY_RATIO`]).
pub const OBSERVABILITY_RATIO: f64 = crate::solve::rotation::DEGENERACY_RATIO;

/// Whether the inliers determine all three axes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Observability {
    /// All three axes determined.
    Full,
    /// Rotation about `axis` (body frame, unit) undetermined.
    Unobservable {
        /// The undetermined axis (sign fixed: its largest-magnitude component is positive).
        axis: Vector3<f64>,
    },
    /// Fewer than two pairs (or inliers).
    Insufficient,
}

/// The verdict on a solved rotation.
#[derive(Debug, Clone, PartialEq)]
pub struct Verdict {
    /// Residual angle of each pair, radians, in input order.
    pub residuals: Vec<f64>,
    /// Inlier flag of each pair (χ² gate).
    pub inliers: Vec<bool>,
    /// Number of inliers.
    pub n_inliers: usize,
    /// Inliers / pairs (0 when there are no pairs).
    pub inlier_fraction: f64,
    /// Attitude-error covariance, rad², body frame (huge on an unobservable axis).
    pub covariance: Matrix3<f64>,
    /// Observability of the inliers.
    pub observability: Observability,
}

impl Default for Verdict {
    /// The verdict on no pairs: `Insufficient`, empty vectors (a buffer for [`assess_into`]).
    fn default() -> Self {
        Verdict {
            residuals: Vec::new(),
            inliers: Vec::new(),
            n_inliers: 0,
            inlier_fraction: 0.0,
            covariance: Matrix3::identity() * UNOBSERVABLE_VARIANCE,
            observability: Observability::Insufficient,
        }
    }
}

/// Judges `q` against `pairs` with gate multiplier `gate_k`.
pub fn assess(pairs: &[Pair], q: &UnitQuaternion<f64>, gate_k: f64) -> Verdict {
    let mut v = Verdict::default();
    assess_into(&mut v, pairs, q, gate_k, true);
    v
}

/// [`assess`] into an existing verdict, reusing its vectors (no allocation
/// once they have grown to the window size). Without `residuals` the
/// residual angles are not computed and `v.residuals` is left empty; the
/// flags, covariance and observability are the same either way.
pub fn assess_into(
    v: &mut Verdict,
    pairs: &[Pair],
    q: &UnitQuaternion<f64>,
    gate_k: f64,
    residuals: bool,
) {
    // Consecutive pairs of one sensor often share σ, and so their gate.
    let (mut last_sigma, mut last_gate) = (f64::NAN, 0.0);
    judge(v, pairs.len(), q, residuals, |i| {
        let p = &pairs[i];
        let (b, r) = checked_unit_pair(p)?;
        if p.sigma != last_sigma {
            last_sigma = p.sigma;
            last_gate = gate_of(gate_k * p.sigma);
        }
        Some((b, r, 1.0 / (p.sigma * p.sigma), last_gate))
    });
}

/// [`assess_into`] on the pairs a [`crate::Solver`] validated, normalised
/// and weighed for its last solve ([`crate::Solver::loaded`]), at the
/// solver's gate multiplier: the same verdict as [`assess_into`] on the
/// solver's input, without normalising or weighing the pairs again (the
/// solver caps the gate angle at `π`, which here means every angle passes).
pub fn assess_loaded_into(
    v: &mut Verdict,
    loaded: &LoadedPairs<'_>,
    q: &UnitQuaternion<f64>,
    residuals: bool,
) {
    let (n, pairs, inv_var, gate_chord2) = (
        loaded.len(),
        loaded.pairs,
        loaded.inv_var,
        loaded.gate_chord2,
    );
    judge(v, n, q, residuals, |i| {
        // A chord is at most 2: a gate of 4 or more passes every pair.
        let gate = if gate_chord2[i] >= 4.0 {
            f64::INFINITY
        } else {
            gate_chord2[i]
        };
        Some((pairs[i].b, pairs[i].r, inv_var[i], gate))
    });
}

/// The verdict on `n` pairs, pair `i` given by `pair(i)` as unit `b`, unit
/// `r`, weight `σ⁻²` and squared-chord gate, or `None` when it is invalid
/// (an outlier at `π`). Called once per pair in order, and again for the
/// rare large residual angles.
#[inline]
fn judge(
    v: &mut Verdict,
    n: usize,
    q: &UnitQuaternion<f64>,
    residuals: bool,
    mut pair: impl FnMut(usize) -> Option<(Vector3<f64>, Vector3<f64>, f64, f64)>,
) {
    let a = q.to_rotation_matrix().into_inner();
    v.residuals.clear();
    v.inliers.clear();
    // One pass for the gates and sums, in the chord form of the gate:
    // θ ≤ kσ ⇔ ‖b − A r‖² ≤ (2 sin(kσ/2))² for kσ < π (any θ passes beyond).
    // The squared chords are kept for the angles, which only the
    // per-observation verdicts need.
    let (mut info, mut geometry) = (Spread::default(), Spread::default());
    let mut n_inliers = 0;
    for i in 0..n {
        let Some((b, r, w, gate)) = pair(i) else {
            v.inliers.push(false);
            if residuals {
                v.residuals.push(INVALID_CHORD2);
            }
            continue;
        };
        let chord2 = (b - a * r).norm_squared();
        if residuals {
            v.residuals.push(chord2);
        }
        let inlier = chord2 <= gate;
        v.inliers.push(inlier);
        if inlier {
            n_inliers += 1;
            info.add(w, &b);
            geometry.add(w, &r);
        }
    }
    if residuals {
        chords_to_angles(&mut v.residuals, &a, pair);
    }
    conclude(v, n, n_inliers, &info, &geometry, &a);
}

/// Squared chords to residual angles in place: a branch-free loop the
/// compiler runs two or four pairs wide, with the rare large angles (and the
/// invalid pairs, whose `pair(i)` is `None`) redone after.
fn chords_to_angles(
    residuals: &mut [f64],
    a: &Matrix3<f64>,
    mut pair: impl FnMut(usize) -> Option<(Vector3<f64>, Vector3<f64>, f64, f64)>,
) {
    // Whether any angle needs the second pass, gathered in the same loop
    // (an `or` of comparisons, still packed): none in a window without outliers.
    let mut redo = false;
    for theta in residuals.iter_mut() {
        *theta = small_angle_of_chord2(*theta);
        redo |= theta.is_nan() || *theta > SERIES_MAX_ANGLE;
    }
    if !redo {
        return;
    }
    for (i, theta) in residuals.iter_mut().enumerate() {
        if theta.is_nan() || *theta > SERIES_MAX_ANGLE {
            *theta = match pair(i) {
                Some((b, r, _, _)) => large_angle(&b, &(a * r)),
                None => std::f64::consts::PI,
            };
        }
    }
}

/// Counts, covariance and observability from the inliers' sums.
fn conclude(
    v: &mut Verdict,
    n: usize,
    n_inliers: usize,
    info: &Spread,
    geometry: &Spread,
    a: &Matrix3<f64>,
) {
    let (info, geometry) = (info.projector_sum(), geometry.projector_sum());
    v.n_inliers = n_inliers;
    v.inlier_fraction = if n == 0 {
        0.0
    } else {
        n_inliers as f64 / n as f64
    };
    let (mut covariance, mut observability) = covariance_of(&info, n_inliers);
    if observability == Observability::Full && !spans_two_directions(&geometry) {
        (covariance, observability) = covariance_of(&(a * geometry * a.transpose()), n_inliers);
        if observability == Observability::Full {
            // Rounding put the rotated geometry just past the ratio; the
            // reference directions themselves are the judge.
            observability = Observability::Unobservable {
                axis: weak_axis(&(a * geometry * a.transpose())),
            };
        }
    }
    v.covariance = covariance;
    v.observability = observability;
}

/// The verdict on the pairs a robust [`crate::Solver`] solve loaded, from its
/// final gate ([`crate::Solver::final_gate`]): the flags and squared chords it
/// computed at the very rotation it returned, so no pair is gated twice. The
/// same verdict as [`assess_loaded_into`] at the outcome's quaternion, to the
/// rounding of turning that rotation into a quaternion and back (residuals
/// within about 1e-16 rad).
pub fn assess_gated_into(
    v: &mut Verdict,
    loaded: &LoadedPairs<'_>,
    gate: &FinalGate<'_>,
    residuals: bool,
) {
    let n = loaded.len().min(gate.inliers.len()).min(gate.chord2.len());
    let LoadedPairs {
        pairs,
        inv_var,
        gate_chord2,
    } = *loaded;
    v.residuals.clear();
    v.inliers.clear();
    // The solver's gate caps the angle at `π` (a squared chord of 4),
    // where a chord rounded just past 2 would fail it; here any passes.
    v.inliers.extend(
        gate.inliers[..n]
            .iter()
            .zip(&gate_chord2[..n])
            .map(|(&inl, &g)| inl | (g >= 4.0)),
    );
    let n_inliers = v.inliers.iter().filter(|&&inlier| inlier).count();
    let (info, geometry) = inlier_spreads(&pairs[..n], &inv_var[..n], &v.inliers);
    if residuals {
        v.residuals.extend_from_slice(&gate.chord2[..n]);
        chords_to_angles(&mut v.residuals, &gate.a, |i| {
            Some((pairs[i].b, pairs[i].r, inv_var[i], gate_chord2[i]))
        });
    }
    conclude(v, n, n_inliers, &info, &geometry, &gate.a);
}

/// The [`Spread`]s of the inliers' `b` (information) and `r` (geometry)
/// at their weights `σ⁻²`: two pairs at a time in packed arithmetic, each
/// lane summing every other pair, the lanes added at the end (the sums of
/// [`Spread::add`] in another order, equal to rounding). Branch-free: an
/// outlier adds its pair at weight 0, which leaves the sums as they are.
fn inlier_spreads(pairs: &[Pair], inv_var: &[f64], inliers: &[bool]) -> (Spread, Spread) {
    use wide::f64x2;
    let n = pairs.len().min(inv_var.len()).min(inliers.len());
    let packed = n - n % 2;
    let mut total = f64x2::ZERO;
    let (mut info, mut geometry) = ([f64x2::ZERO; 6], [f64x2::ZERO; 6]);
    let upper = |sums: &mut [f64x2; 6], w: f64x2, x: f64x2, y: f64x2, z: f64x2| {
        let (wx, wy, wz) = (x * w, y * w, z * w);
        sums[0] += wx * x;
        sums[1] += wx * y;
        sums[2] += wx * z;
        sums[3] += wy * y;
        sums[4] += wy * z;
        sums[5] += wz * z;
    };
    let blocks = pairs[..packed]
        .chunks_exact(2)
        .zip(inv_var[..packed].chunks_exact(2))
        .zip(inliers[..packed].chunks_exact(2));
    for ((p, w), inl) in blocks {
        let lane = |f: fn(&Pair) -> f64| f64x2::new([f(&p[0]), f(&p[1])]);
        let pick = |k: usize| if inl[k] { w[k] } else { 0.0 };
        let w = f64x2::new([pick(0), pick(1)]);
        total += w;
        upper(
            &mut info,
            w,
            lane(|p| p.b.x),
            lane(|p| p.b.y),
            lane(|p| p.b.z),
        );
        upper(
            &mut geometry,
            w,
            lane(|p| p.r.x),
            lane(|p| p.r.y),
            lane(|p| p.r.z),
        );
    }
    let sum = |v: f64x2| {
        let [a, b] = v.to_array();
        a + b
    };
    let spread = |sums: &[f64x2; 6]| Spread {
        total: sum(total),
        upper: std::array::from_fn(|k| sum(sums[k])),
    };
    let (mut info, mut geometry) = (spread(&info), spread(&geometry));
    for i in packed..n {
        let w = if inliers[i] { inv_var[i] } else { 0.0 };
        info.add(w, &pairs[i].b);
        geometry.add(w, &pairs[i].r);
    }
    (info, geometry)
}

/// The squared-chord gate of angle `k σ`; infinite from `π` on, where every
/// angle passes (NaN for a NaN argument, which no chord passes).
#[inline]
fn gate_of(angle: f64) -> f64 {
    if angle >= std::f64::consts::PI {
        f64::INFINITY
    } else {
        crate::solve::gate_chord2(angle)
    }
}

/// The pair's vectors at unit length, or `None` when a vector is zero or not
/// finite or σ is not finite and `> 0` (such a pair is an outlier at `π`).
#[inline]
fn checked_unit_pair(p: &Pair) -> Option<(Vector3<f64>, Vector3<f64>)> {
    if !(p.sigma.is_finite() && p.sigma > 0.0) {
        return None;
    }
    Some((unit_or_none(&p.b)?, unit_or_none(&p.r)?))
}

/// `v` at unit length, or `None` when it is zero or not finite. A vector
/// already unit to rounding is kept as it is (the usual case: inputs are
/// normalised at the door).
#[inline]
fn unit_or_none(v: &Vector3<f64>) -> Option<Vector3<f64>> {
    let n2 = v.norm_squared();
    if !(n2.is_finite() && n2 > 1e-300) {
        return None;
    }
    Some(v * crate::solve::unit_scale(n2))
}

/// Residual angle up to which the arcsine series is used, rad (half-chord 0.05).
const SERIES_MAX_ANGLE: f64 = 0.1;

/// Marks an invalid pair among the squared chords (any negative value).
const INVALID_CHORD2: f64 = -1.0;

/// The angle of squared chord `c2` between unit vectors, `θ = 2 asin(√c2 / 2)`,
/// by the arcsine's Taylor series; meant for `θ ≤ SERIES_MAX_ANGLE` (half-chord
/// `x ≤ 0.05`), where it is exact to rounding: the first term left out,
/// `(143/10240)·x¹⁵`, is below 1e-21 relative. Beyond that, or for a negative
/// `c2`, it returns a value above `SERIES_MAX_ANGLE` or NaN, and the caller
/// uses [`large_angle`]. Branch-free, so a loop over many chords runs packed.
/// The series replaces an `atan2` per pair, which was most of the verdict's
/// time; it carries the same absolute rounding as the `atan2` form (that of the
/// vector components, about 1e-16 rad).
#[inline]
fn small_angle_of_chord2(c2: f64) -> f64 {
    let x = 0.5 * c2.sqrt();
    let x2 = x * x;
    let tail = x2
        * (1.0 / 6.0
            + x2 * (3.0 / 40.0
                + x2 * (5.0 / 112.0
                    + x2 * (35.0 / 1152.0 + x2 * (63.0 / 2816.0 + x2 * (231.0 / 13312.0))))));
    2.0 * (x + x * tail)
}

/// The angle between unit vectors at any size, `atan2(|b × Ar|, b · Ar)`.
fn large_angle(b: &Vector3<f64>, ar: &Vector3<f64>) -> f64 {
    b.cross(ar).norm().atan2(b.dot(ar))
}

/// The angle between unit vectors `b` and `ar` (the two forms above).
#[cfg(test)]
fn residual_angle(b: &Vector3<f64>, ar: &Vector3<f64>) -> f64 {
    let theta = small_angle_of_chord2((b - ar).norm_squared());
    if theta <= SERIES_MAX_ANGLE {
        theta
    } else {
        large_angle(b, ar)
    }
}

/// Running `Σ w_i` and the upper triangle of `Σ w_i v_i v_iᵀ`, for
/// `Σ w_i (I − v_i v_iᵀ)` at the end (fewer operations per pair than adding
/// each projector, and exactly symmetric).
#[derive(Debug, Clone, Copy, Default)]
struct Spread {
    total: f64,
    /// xx, xy, xz, yy, yz, zz.
    upper: [f64; 6],
}

impl Spread {
    #[inline]
    fn add(&mut self, w: f64, v: &Vector3<f64>) {
        let wv = v * w;
        self.total += w;
        self.upper[0] += wv.x * v.x;
        self.upper[1] += wv.x * v.y;
        self.upper[2] += wv.x * v.z;
        self.upper[3] += wv.y * v.y;
        self.upper[4] += wv.y * v.z;
        self.upper[5] += wv.z * v.z;
    }

    /// `Σ w_i (I − v_i v_iᵀ)`.
    fn projector_sum(&self) -> Matrix3<f64> {
        let [xx, xy, xz, yy, yz, zz] = self.upper;
        let t = self.total;
        Matrix3::new(t - xx, -xy, -xz, -xy, t - yy, -yz, -xz, -yz, t - zz)
    }
}

/// Whether the weighted reference directions behind `geometry` span two
/// independent directions, by the eigenvalue ratio of the module doc.
fn spans_two_directions(geometry: &Matrix3<f64>) -> bool {
    // Shortcut, no eigenvalues: for a positive semi-definite 3×3 matrix
    // λ₂λ₃ ≤ (tr/2)², so λ₁ ≥ 4 det / tr², and λ₃ ≤ tr. Hence
    // 4 det > 2 · ratio · tr³ gives λ₁ > 2 · ratio · λ₃: the test passes
    // with a margin far beyond the rounding of det and of the eigenvalues
    // (about 1e-16 · tr³), so the answer is the eigenvalues' answer.
    let tr = geometry.trace();
    if tr > 0.0 && 4.0 * geometry.determinant() > 2.0 * OBSERVABILITY_RATIO * tr * tr * tr {
        return true;
    }
    spans_by_eigenvalues(geometry)
}

/// [`spans_two_directions`] by the eigenvalues alone.
fn spans_by_eigenvalues(geometry: &Matrix3<f64>) -> bool {
    match symmetric_eigen3(geometry) {
        Some(eig) => eig.values[0] > OBSERVABILITY_RATIO * eig.values[2],
        None => false,
    }
}

/// The eigenvector of the smallest eigenvalue, sign fixed by its largest component.
fn weak_axis(info: &Matrix3<f64>) -> Vector3<f64> {
    let mut axis: Vector3<f64> = match symmetric_eigen3(info) {
        Some(eig) => eig.vectors.column(0).into_owned(),
        None => Vector3::z(),
    };
    let imax = axis.iamax();
    if axis[imax] < 0.0 {
        axis = -axis;
    }
    axis
}

/// `F⁻¹` with the observability test of the module doc.
/// Condition bound of [`well_conditioned_inverse`]: `λ₁ > 2 · this · λ₃`,
/// so the cofactor inverse loses at most about `ε / this` ≈ 1e-10 relative
/// (the usual window is conditioned to within a factor of a few hundred).
const COFACTOR_RATIO: f64 = 1e-6;

/// `m⁻¹` by cofactors for a symmetric positive semi-definite `m` that
/// passes the eigenvalue-free test of [`spans_two_directions`] at
/// [`COFACTOR_RATIO`] (far inside the observability ratio, so the answer is
/// `Full`), else `None`: the eigen decomposition then decides. Most windows
/// take this path, which costs a small fraction of the decomposition.
fn well_conditioned_inverse(m: &Matrix3<f64>) -> Option<Matrix3<f64>> {
    let tr = m.trace();
    // Cofactors of the upper triangle (`m` is symmetric).
    let c00 = m[(1, 1)] * m[(2, 2)] - m[(1, 2)] * m[(2, 1)];
    let c01 = m[(1, 2)] * m[(2, 0)] - m[(1, 0)] * m[(2, 2)];
    let c02 = m[(1, 0)] * m[(2, 1)] - m[(1, 1)] * m[(2, 0)];
    let c11 = m[(0, 0)] * m[(2, 2)] - m[(0, 2)] * m[(2, 0)];
    let c12 = m[(0, 2)] * m[(1, 0)] - m[(0, 0)] * m[(1, 2)];
    let c22 = m[(0, 0)] * m[(1, 1)] - m[(0, 1)] * m[(1, 0)];
    let det = m[(0, 0)] * c00 + m[(0, 1)] * c01 + m[(0, 2)] * c02;
    // `!(a > b)` also refuses NaN.
    if !(tr > 0.0 && tr.is_finite() && 4.0 * det > 2.0 * COFACTOR_RATIO * tr * tr * tr) {
        return None;
    }
    let inv_det = 1.0 / det;
    let (p00, p01, p02) = (c00 * inv_det, c01 * inv_det, c02 * inv_det);
    let (p11, p12, p22) = (c11 * inv_det, c12 * inv_det, c22 * inv_det);
    Some(Matrix3::new(p00, p01, p02, p01, p11, p12, p02, p12, p22))
}

fn covariance_of(info: &Matrix3<f64>, n_inliers: usize) -> (Matrix3<f64>, Observability) {
    let insufficient = (
        Matrix3::identity() * UNOBSERVABLE_VARIANCE,
        Observability::Insufficient,
    );
    if n_inliers < 2 {
        return insufficient;
    }
    if let Some(cov) = well_conditioned_inverse(info) {
        return (cov, Observability::Full);
    }
    let Some(eig) = symmetric_eigen3(info) else {
        return insufficient;
    };
    let (l, e) = (eig.values, eig.vectors);
    if l[2].is_nan() || l[2] <= 0.0 {
        return insufficient;
    }
    let unobservable = l[0] <= OBSERVABILITY_RATIO * l[2];
    let mut cov = Matrix3::zeros();
    for k in 0..3 {
        let var = if k == 0 && unobservable {
            UNOBSERVABLE_VARIANCE
        } else {
            1.0 / l[k]
        };
        let col = e.column(k);
        cov += col * col.transpose() * var;
    }
    if !unobservable {
        return (cov, Observability::Full);
    }
    let mut axis: Vector3<f64> = e.column(0).into_owned();
    let imax = axis.iamax();
    if axis[imax] < 0.0 {
        axis = -axis;
    }
    (cov, Observability::Unobservable { axis })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair(b: [f64; 3], r: [f64; 3], sigma: f64) -> Pair {
        Pair {
            b: Vector3::from(b).normalize(),
            r: Vector3::from(r).normalize(),
            sigma,
        }
    }

    #[test]
    fn the_span_shortcut_gives_the_eigenvalue_answer() {
        // Geometries from two to forty directions spread by 1 rad down to
        // 1e-9 rad about one axis (a single sensor's reference directions,
        // nearly parallel), weights from 1e-2 to 1e10: the determinant
        // shortcut never changes the eigenvalue test's answer, and both
        // answers occur.
        let mut seen = [false; 2];
        for case in 0..400 {
            let spread = 10f64.powf(-(case % 10) as f64);
            let n = 2 + case % 39;
            let mut g = Spread::default();
            for i in 0..n {
                let x = (case * 41 + i) as f64;
                let tilt = Vector3::new((0.37 * x).sin(), (0.71 * x).cos(), 0.0) * spread;
                let r = (Vector3::new(0.2, -0.3, 1.0) + tilt).normalize();
                let w = 10f64.powf(-2.0 + 12.0 * (0.618 * x).fract());
                g.add(w, &r);
            }
            let geometry = g.projector_sum();
            let want = spans_by_eigenvalues(&geometry);
            assert_eq!(spans_two_directions(&geometry), want, "case {case}");
            seen[want as usize] = true;
        }
        assert_eq!(seen, [true, true]);
    }

    #[test]
    fn two_orthogonal_pairs_are_fully_observable() {
        let pairs = [
            pair([1., 0., 0.], [1., 0., 0.], 0.01),
            pair([0., 1., 0.], [0., 1., 0.], 0.02),
        ];
        let v = assess(&pairs, &UnitQuaternion::identity(), 3.0);
        assert_eq!(v.n_inliers, 2);
        assert_eq!(v.observability, Observability::Full);
        // F = 1e4 diag(0,1,1) + 2.5e3 diag(1,0,1) → P = diag(1/2.5e3, 1/1e4, 1/1.25e4).
        let want = Matrix3::from_diagonal(&Vector3::new(4e-4, 1e-4, 8e-5));
        assert!((v.covariance - want).abs().max() < 1e-16);
    }

    #[test]
    fn parallel_inliers_are_unobservable_about_their_direction() {
        let pairs = [
            pair([0., 0., 1.], [0., 0., 1.], 0.01),
            pair([0., 0., 1.], [0., 0., 1.], 0.01),
        ];
        let v = assess(&pairs, &UnitQuaternion::identity(), 3.0);
        match v.observability {
            Observability::Unobservable { axis } => assert!((axis - Vector3::z()).norm() < 1e-12),
            other => panic!("expected unobservable, got {other:?}"),
        }
        assert_eq!(v.covariance[(2, 2)], UNOBSERVABLE_VARIANCE);
        assert!(v.covariance.iter().all(|x| x.is_finite()));
    }

    #[test]
    fn noisy_sightings_of_one_reference_direction_are_unobservable() {
        // One magnetometer at rest: every pair has the same reference
        // direction, the measured b scatter by their noise (derived in the
        // test: a ring of b at 0.5σ about the true direction). The scatter
        // alone makes F full rank; the reference geometry has rank two.
        let sigma: f64 = 0.012;
        let (s, c): (f64, f64) = (0.5 * sigma).sin_cos();
        let pairs: Vec<Pair> = (0..20)
            .map(|i| {
                let phi = i as f64 * 0.7;
                pair([s * phi.cos(), s * phi.sin(), c], [0., 0., 1.], sigma)
            })
            .collect();
        let v = assess(&pairs, &UnitQuaternion::identity(), 3.7);
        assert_eq!(v.n_inliers, 20);
        match v.observability {
            Observability::Unobservable { axis } => {
                assert!((axis - Vector3::z()).norm() < 1e-9, "{axis}")
            }
            other => panic!("expected unobservable, got {other:?}"),
        }
        let z = Vector3::<f64>::z();
        let var_z = z.dot(&(v.covariance * z));
        assert!(var_z >= 0.5 * UNOBSERVABLE_VARIANCE, "{var_z}");
        assert!(v.covariance.iter().all(|x| x.is_finite()));
    }

    #[test]
    fn one_pair_is_insufficient() {
        let pairs = [pair([0., 0., 1.], [0., 0., 1.], 0.01)];
        let v = assess(&pairs, &UnitQuaternion::identity(), 3.0);
        assert_eq!(v.observability, Observability::Insufficient);
        assert_eq!(v.inlier_fraction, 1.0);
    }

    #[test]
    fn residual_is_the_angle_and_gates_outliers() {
        let pairs = [
            pair([1., 0., 0.], [1., 0., 0.], 0.01),
            pair([0., 1., 0.], [0., 1., 0.], 0.01),
            pair([0., 0., 1.], [1., 0., 0.], 0.01),
        ];
        let v = assess(&pairs, &UnitQuaternion::identity(), 3.0);
        assert!((v.residuals[2] - std::f64::consts::FRAC_PI_2).abs() < 1e-15);
        assert_eq!(v.inliers, vec![true, true, false]);
        assert!((v.inlier_fraction - 2.0 / 3.0).abs() < 1e-15);
    }

    #[test]
    fn invalid_pairs_are_outliers_not_nan() {
        let mut bad = pair([1., 0., 0.], [1., 0., 0.], 0.01);
        bad.b = Vector3::new(f64::NAN, 0.0, 0.0);
        let v = assess(&[bad], &UnitQuaternion::identity(), 3.0);
        assert_eq!(v.residuals, vec![std::f64::consts::PI]);
        assert_eq!(v.inliers, vec![false]);
    }

    #[test]
    fn the_final_gate_gives_the_verdict_of_the_returned_quaternion() {
        // 120 pairs, σ from 1e-4 to 1e-2, a quarter of them corrupted; each
        // robust method (and `auto`, warm and cold) hands its final gate to
        // the verdict, which must be the verdict judged afresh at the
        // outcome's quaternion: same flags and observability, residuals to
        // the rounding of the matrix → quaternion → matrix round trip.
        let q = UnitQuaternion::from_scaled_axis(Vector3::new(0.4, -0.2, 0.7));
        let pairs: Vec<Pair> = (0..120)
            .map(|i| {
                let x = i as f64;
                let r = Vector3::new((0.37 * x).sin(), (0.71 * x).cos(), (0.13 * x).sin() + 0.2)
                    .normalize();
                let sigma = [1e-4, 1e-3, 1e-2][i % 3];
                let axis = r.cross(&Vector3::new(0.3, 0.1, -0.9)).normalize();
                let angle = if i % 4 == 1 {
                    0.3 + 0.01 * x
                } else {
                    0.8 * sigma * (0.618 * x).fract()
                };
                let b = q * (UnitQuaternion::from_scaled_axis(axis * angle) * r);
                Pair { b, r, sigma }
            })
            .collect();
        let mut solver = crate::Solver::default();
        let k = solver.params().gate_k;
        let warm = UnitQuaternion::from_scaled_axis(Vector3::new(0.4001, -0.2, 0.7));
        let cases = [
            (crate::Method::Auto, Some(warm)),
            (crate::Method::Auto, None),
            (crate::Method::GncTls, None),
            (crate::Method::Lud, None),
            (crate::Method::Consensus, None),
        ];
        for (method, start) in cases {
            let outcome = solver.solve(&pairs, method, start.as_ref()).unwrap();
            let gate = solver
                .final_gate()
                .unwrap_or_else(|| panic!("{method}: no final gate"));
            let mut gated = Verdict::default();
            assess_gated_into(&mut gated, &solver.loaded(), &gate, true);
            let fresh = assess(&pairs, &outcome.q, k);
            assert_eq!(gated.inliers, fresh.inliers, "{method}");
            assert_eq!(gated.n_inliers, 90, "{method}");
            assert_eq!(gated.observability, fresh.observability, "{method}");
            for (g, f) in gated.residuals.iter().zip(&fresh.residuals) {
                assert!(
                    (g - f).abs() <= 1e-15 + 1e-12 * f,
                    "{method}: {g:e} vs {f:e}"
                );
            }
            // Fully observable: `F` is summed from the same `b` and `σ⁻²`
            // (in another order: the gated verdict's sums are packed).
            assert_eq!(gated.observability, Observability::Full);
            let scale = fresh.covariance.abs().max();
            let diff = (gated.covariance - fresh.covariance).abs().max();
            assert!(diff <= 1e-13 * scale, "{method}: {diff:e} of {scale:e}");
        }
        // The closed forms gate nothing.
        solver.solve(&pairs, crate::Method::Ls, None).unwrap();
        assert!(solver.final_gate().is_none());
    }

    #[test]
    fn cofactor_covariance_matches_the_lu_inverse_and_the_eigen_path() {
        // Reference: nalgebra's LU inverse (`try_inverse`) and this module's
        // eigen path; information matrices of two to six unit directions at
        // several weights, conditioned from about 1 to about 1e5.
        let mut worst: f64 = 0.0;
        let mut taken = 0;
        for case in 0..200 {
            let x = case as f64;
            let mut info = Matrix3::zeros();
            for k in 0..(2 + case % 5) {
                let y = x + 0.37 * k as f64;
                let spread = 10f64.powf(-((case % 6) as f64) * 0.5);
                let v = Vector3::new(
                    (1.3 * y).sin(),
                    spread * (0.7 * y).cos(),
                    (2.1 * y).sin() + 0.1,
                )
                .normalize();
                let w = 10f64.powi((k % 3) * 2);
                info += (Matrix3::identity() - v * v.transpose()) * w;
            }
            let lu = info.try_inverse().unwrap();
            if let Some(p) = well_conditioned_inverse(&info) {
                taken += 1;
                let scale = lu.abs().max();
                worst = worst.max((p - lu).abs().max() / scale);
                assert_eq!(p, p.transpose(), "symmetric");
                // The eigen path gives the same covariance to rounding.
                let eig = symmetric_eigen3(&info).unwrap();
                let mut by_eigen = Matrix3::zeros();
                for k in 0..3 {
                    let col = eig.vectors.column(k);
                    by_eigen += col * col.transpose() / eig.values[k];
                }
                assert!((p - by_eigen).abs().max() <= 1e-9 * scale, "case {case}");
            }
        }
        assert!(taken > 100, "most cases are well conditioned: {taken}");
        assert!(worst <= 1e-10, "{worst:e}");
        // A single direction (rank 2) and a zero matrix take the eigen path.
        let v = Vector3::new(0.3, -0.2, 0.9).normalize();
        assert!(well_conditioned_inverse(&(Matrix3::identity() - v * v.transpose())).is_none());
        assert!(well_conditioned_inverse(&Matrix3::zeros()).is_none());
        assert!(well_conditioned_inverse(&(Matrix3::identity() * f64::NAN)).is_none());
    }

    #[test]
    fn chord_gate_picks_the_angle_gate_set_with_or_without_residuals() {
        // Pairs at residual angles spread around their gate kσ (from 0.2 kσ to
        // 5 kσ, none within 1e-9 of it), several σ, a few invalid pairs: the
        // flags must be those of θ ≤ kσ on the atan2 angle, and the verdict
        // the same whether or not the angles are computed.
        let q = UnitQuaternion::from_scaled_axis(Vector3::new(0.4, -0.3, 0.9));
        let k = 13.8155f64.sqrt();
        let mut pairs = Vec::new();
        let mut want = Vec::new();
        for i in 0..600 {
            let x = i as f64;
            let r = Vector3::new((0.37 * x).sin(), (0.71 * x).cos(), (0.13 * x).sin() + 0.3)
                .normalize();
            let sigma = [1e-4, 1e-3, 3e-2, 0.5][i % 4];
            let ratio = 0.2 + 4.8 * ((0.618 * x).fract());
            let angle = (ratio * k * sigma).min(3.0);
            let axis = r.cross(&Vector3::new(0.3, 0.1, -0.9)).normalize();
            let b = q * (UnitQuaternion::from_scaled_axis(axis * angle) * r);
            let reference = b.cross(&(q * r)).norm().atan2(b.dot(&(q * r)));
            if (reference - k * sigma).abs() < 1e-9 {
                continue;
            }
            want.push(reference <= k * sigma);
            pairs.push(Pair { b, r, sigma });
        }
        pairs.push(Pair {
            b: Vector3::zeros(),
            r: Vector3::x(),
            sigma: 1e-3,
        });
        want.push(false);
        let with = assess(&pairs, &q, k);
        let mut without = Verdict::default();
        assess_into(&mut without, &pairs, &q, k, false);
        assert_eq!(with.inliers, want);
        assert!(want.iter().filter(|&&w| w).count() > 100);
        assert!(want.iter().filter(|&&w| !w).count() > 100);
        assert!(without.residuals.is_empty());
        assert_eq!(without.inliers, with.inliers);
        assert_eq!(without.covariance, with.covariance);
        assert_eq!(without.observability, with.observability);
        assert_eq!(with.residuals.len(), pairs.len());
        // The solver's own copy of the valid pairs gives the same verdict.
        let valid = &pairs[..pairs.len() - 1];
        let mut solver = crate::Solver::new(crate::SolveParams {
            gate_k: k,
            ..crate::SolveParams::default()
        });
        solver.solve(valid, crate::Method::Ls, None).unwrap();
        let mut reused = Verdict::default();
        assess_loaded_into(&mut reused, &solver.loaded(), &q, true);
        assert_eq!(reused, assess(valid, &q, k));
    }

    #[test]
    fn residual_angle_agrees_with_the_atan2_form_at_all_angles() {
        // Reference: θ = atan2(|b × c|, b · c), the standard robust angle
        // between vectors (common practice), on angles from 1e-12 rad to π.
        let axis = Vector3::new(0.2, -0.7, 0.4).normalize();
        let b = axis.cross(&Vector3::x()).normalize();
        let mut worst_rel: f64 = 0.0;
        for i in 0..=4000 {
            let theta = 1e-12 * (std::f64::consts::PI / 1e-12).powf(i as f64 / 4000.0);
            let c = UnitQuaternion::from_scaled_axis(axis * theta) * b;
            let reference = b.cross(&c).norm().atan2(b.dot(&c));
            let got = residual_angle(&b, &c);
            let err = (got - reference).abs();
            assert!(
                err <= 4e-16 + 1e-14 * reference,
                "θ = {theta:e}: {got:e} vs {reference:e}"
            );
            // Below ~1e-3 rad both forms carry the same absolute rounding
            // (~1e-16 rad), which is no longer small relative to θ.
            if reference > 1e-3 {
                worst_rel = worst_rel.max(err / reference);
            }
        }
        assert!(worst_rel < 1e-12, "{worst_rel:e}");
    }
}
