//! Wahba solvers: weighted vector pairs in, rotation out.
//!
//! All methods share [`Solver::solve`]. Conventions are those of the wire
//! protocol: the attitude matrix `A` maps reference components to body
//! components, `b_i ≈ A r_i`; quaternions are `[w, x, y, z]`, Hamilton,
//! `w >= 0`.
//!
//! Layout:
//! - [`rotation`]: checked nearest rotation (SVD), shortest arc, quaternion and angle helpers;
//! - [`eigen`]: bounded symmetric eigen-decomposition (verdict covariance, q-method);
//! - [`svd`], [`qmethod`]: weighted least squares (Markley's SVD method, Davenport's q-method);
//! - [`triad`]: the two-vector closed form;
//! - `lud`, `gnc`, `consensus`, `auto`: the robust methods, each ending with
//!   `refit`, a weighted least-squares refit on the χ²-gate inliers.
//!
//! Each method's convergence rule is in its module doc. Degenerate geometry:
//! fewer than two pairs is [`SolveError::Insufficient`]; pairs that fix the
//! rotation only up to a turn about one axis (all parallel) give a valid
//! rotation (the shortest arc between the dominant directions) whose
//! [`crate::verdict`] reports [`crate::verdict::Observability::Unobservable`];
//! pairs that cancel (zero attitude profile matrix) and TRIAD on parallel
//! vectors are [`SolveError::Degenerate`]. Invalid numbers are
//! [`SolveError::InvalidPair`], never a NaN result.

mod auto;
mod consensus;
pub mod eigen;
mod gnc;
mod lud;
pub mod qmethod;
mod refit;
pub mod rotation;
pub mod svd;
pub mod triad;

use nalgebra::{Matrix3, UnitQuaternion, Vector3};

/// One weighted vector pair: `b ≈ A r`, both unit length, `sigma` in radians.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pair {
    /// Body-frame unit vector.
    pub b: Vector3<f64>,
    /// Reference-frame unit vector.
    pub r: Vector3<f64>,
    /// 1-σ angular noise, radians, `> 0`.
    pub sigma: f64,
}

/// Solver names, the same in the library, the command line, config and solutions.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Method {
    /// Markley's SVD method (weighted least squares).
    Svd,
    /// Davenport's q-method (weighted least squares).
    QMethod,
    /// Least squares; the same as `svd`.
    Ls,
    /// Two-vector closed form.
    Triad,
    /// Least unsquared deviations by iteratively reweighted least squares.
    Lud,
    /// Truncated least squares by graduated non-convexity.
    GncTls,
    /// TRIAD hypotheses scored by inlier count, refined by least squares.
    Consensus,
    /// Warm-started robust solve with cold fallback; the default.
    Auto,
}

impl Method {
    /// Every method, in documentation order.
    pub const ALL: [Method; 8] = [
        Method::Svd,
        Method::QMethod,
        Method::Ls,
        Method::Triad,
        Method::Lud,
        Method::GncTls,
        Method::Consensus,
        Method::Auto,
    ];

    /// The method's name as written everywhere (`"gnc-tls"`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            Method::Svd => "svd",
            Method::QMethod => "q-method",
            Method::Ls => "ls",
            Method::Triad => "triad",
            Method::Lud => "lud",
            Method::GncTls => "gnc-tls",
            Method::Consensus => "consensus",
            Method::Auto => "auto",
        }
    }
}

impl std::fmt::Display for Method {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// An unknown method name.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "unknown method `{0}`; expected one of svd, q-method, ls, triad, lud, gnc-tls, consensus, auto"
)]
pub struct UnknownMethod(pub String);

impl std::str::FromStr for Method {
    type Err = UnknownMethod;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Method::ALL
            .into_iter()
            .find(|m| m.as_str() == s)
            .ok_or_else(|| UnknownMethod(s.to_string()))
    }
}

/// Every tunable of the solvers, with units and defaults.
#[derive(Debug, Clone, PartialEq)]
pub struct SolveParams {
    /// χ² gate multiplier `k`: a pair is an inlier when `θ_i <= k σ_i`.
    /// Default `√13.8155` (2 dof, 99.9 %; [`CHI2_2DOF_999`]).
    pub gate_k: f64,
    /// GNC-TLS: factor by which μ grows each outer step, `> 1`. Default 1.4.
    pub gnc_mu_factor: f64,
    /// Iteration cap of every iterative method (LUD reweightings, GNC
    /// μ steps). Default 100.
    pub max_iterations: u32,
    /// Seed of the consensus sampler (deterministic results).
    pub seed: u64,
    /// `auto`: a result is accepted without escalating when it explains at
    /// least this share of the pairs (and at least two). Default 0.5.
    pub auto_min_inlier_share: f64,
    /// `consensus`: cap on the hypotheses drawn in sampled mode. Default 100 000.
    pub consensus_max_draws: u32,
}

/// The 2-degree-of-freedom χ² quantile at 99.9 %, `−2 ln 0.001 = 13.8155…`
/// (the χ² CDF with 2 dof is `1 − e^{−x/2}`).
pub const CHI2_2DOF_999: f64 = 13.815_510_557_964_274;

impl Default for SolveParams {
    fn default() -> Self {
        SolveParams {
            gate_k: CHI2_2DOF_999.sqrt(),
            gnc_mu_factor: 1.4,
            max_iterations: 100,
            seed: 0,
            auto_min_inlier_share: 0.5,
            consensus_max_draws: 100_000,
        }
    }
}

impl SolveParams {
    /// Checks every field's range.
    pub fn validate(&self) -> Result<(), SolveError> {
        let bad = |what: &str| Err(SolveError::InvalidParams(what.to_string()));
        if !(self.gate_k.is_finite() && self.gate_k > 0.0) {
            return bad("gate_k must be finite and > 0");
        }
        if !(self.gnc_mu_factor.is_finite() && self.gnc_mu_factor > 1.0) {
            return bad("gnc_mu_factor must be finite and > 1");
        }
        if self.max_iterations == 0 {
            return bad("max_iterations must be >= 1");
        }
        if !(0.0..=1.0).contains(&self.auto_min_inlier_share) {
            return bad("auto_min_inlier_share must be within [0, 1]");
        }
        if self.consensus_max_draws == 0 {
            return bad("consensus_max_draws must be >= 1");
        }
        Ok(())
    }
}

/// What a solve produced. Per-pair weights are in [`Solver::weights`].
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// The attitude, `b ≈ A(q) r`.
    pub q: UnitQuaternion<f64>,
    /// Iterations used (1 for closed forms).
    pub iterations: u32,
    /// Whether the method's convergence rule was met before the cap.
    pub converged: bool,
    /// The method that produced the final estimate (for `auto`, the one it ended with).
    pub method: Method,
}

/// Why no rotation could be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SolveError {
    /// Fewer pairs than the method needs.
    #[error("insufficient data: {n} pairs, need at least {needed}")]
    Insufficient {
        /// Pairs given.
        n: usize,
        /// Pairs needed.
        needed: usize,
    },
    /// The pairs do not determine a rotation (e.g. all parallel).
    #[error("degenerate geometry: {0}")]
    Degenerate(String),
    /// A decomposition returned a non-finite or non-orthonormal result.
    #[error("numerical failure: {0}")]
    Numerical(String),
    /// A pair holds a non-finite or zero vector, or a σ that is not finite and `> 0`.
    #[error("pair {index}: {reason}")]
    InvalidPair {
        /// Index of the pair in the input.
        index: usize,
        /// What is wrong with it.
        reason: &'static str,
    },
    /// A [`SolveParams`] field is out of range.
    #[error("invalid solver parameters: {0}")]
    InvalidParams(String),
}

/// Per-solve arrays, kept between solves so steady-state solves do not allocate.
#[derive(Debug, Clone, Default)]
pub(crate) struct Workspace {
    /// The input pairs with unit vectors.
    pub pairs: Vec<Pair>,
    /// `σ_i⁻²`.
    pub inv_var: Vec<f64>,
    /// Squared chord of the gate angle, `(2 sin(min(k σ_i, π)/2))²`.
    pub gate_chord2: Vec<f64>,
    /// Iteration weights of the inner least-squares steps.
    pub work_w: Vec<f64>,
    /// Per-pair scratch values (GNC: inverse squared gate chords).
    pub resid: Vec<f64>,
    /// Inlier flags of the current refit set.
    pub inl: Vec<bool>,
    /// Squared chords `‖b_i − A r_i‖²` of the last gate, at `gated_a`.
    pub chord2: Vec<f64>,
    /// The rotation `inl` and `chord2` were gated at, when they are of one
    /// (`None` after loading, and when a refit fitted again after its last gate).
    pub gated_a: Option<Matrix3<f64>>,
    /// Per-pair normalised residuals (GNC).
    pub rho: Vec<f64>,
    /// Structure-of-arrays copy of the pairs, `[b.x, b.y, b.z, r.x, r.y, r.z]`
    /// (GNC: filled once per solve so its per-pair loops use packed arithmetic).
    pub soa: [Vec<f64>; 6],
}

impl Workspace {
    /// Validates and normalises `pairs` into the workspace.
    fn load(&mut self, pairs: &[Pair], gate_k: f64) -> Result<(), SolveError> {
        self.pairs.clear();
        // One `extend` writes the pairs in place (a `push` per pair built each
        // on the stack and copied it); the first invalid pair is the error.
        let mut invalid = None;
        self.pairs
            .extend(pairs.iter().enumerate().map(|(index, p)| {
                let checked = unit(&p.b)
                    .and_then(|b| Ok((b, unit(&p.r)?)))
                    .and_then(|(b, r)| {
                        if p.sigma.is_finite() && p.sigma > 0.0 {
                            Ok((b, r))
                        } else {
                            Err("sigma must be finite and > 0")
                        }
                    });
                match checked {
                    Ok((b, r)) => Pair {
                        b,
                        r,
                        sigma: p.sigma,
                    },
                    Err(reason) => {
                        invalid.get_or_insert(SolveError::InvalidPair { index, reason });
                        *p
                    }
                }
            }));
        if let Some(err) = invalid {
            return Err(err);
        }
        self.weigh(gate_k);
        Ok(())
    }

    /// [`Workspace::load`] for pairs written into `self.pairs` by the caller:
    /// the same checks, but a vector already unit to within
    /// [`IN_PLACE_UNIT_TOL`] in squared norm is kept as it is, so pairs
    /// checked before (the estimator's, normalised at the door and only
    /// rotated since) cost no square root and no copy.
    fn prepare_in_place(&mut self, gate_k: f64) -> Result<(), SolveError> {
        self.check_in_place()?;
        self.weigh(gate_k);
        Ok(())
    }

    /// [`Workspace::prepare_in_place`] for pairs whose `inv_var` and
    /// `gate_chord2` the caller wrote beside them with [`weigh_pair`]: the
    /// same checks, and the caller's weights and gates are used (weighed
    /// again only if their lengths do not match the pairs').
    fn prepare_weighed(&mut self, gate_k: f64) -> Result<(), SolveError> {
        self.check_in_place()?;
        let n = self.pairs.len();
        if self.inv_var.len() != n || self.gate_chord2.len() != n {
            self.weigh(gate_k);
        } else {
            self.size_scratch();
        }
        Ok(())
    }

    /// The checks of [`Workspace::prepare_in_place`]: σ finite and `> 0`,
    /// vectors unit (a misfit normalised in place, a zero or non-finite one refused).
    fn check_in_place(&mut self) -> Result<(), SolveError> {
        let near_unit = |v: &Vector3<f64>| (v.norm_squared() - 1.0).abs() <= IN_PLACE_UNIT_TOL;
        // Branch-free test of every pair first; the rare misfit is redone below.
        if !all_pairs_fit(&self.pairs) {
            for (index, p) in self.pairs.iter_mut().enumerate() {
                if !(p.sigma.is_finite() && p.sigma > 0.0) {
                    return Err(SolveError::InvalidPair {
                        index,
                        reason: "sigma must be finite and > 0",
                    });
                }
                for v in [&mut p.b, &mut p.r] {
                    if !near_unit(v) {
                        *v = unit(v).map_err(|reason| SolveError::InvalidPair { index, reason })?;
                    }
                }
            }
        }
        Ok(())
    }

    /// The per-pair weights and gates of the loaded pairs, and the scratch
    /// arrays sized to them.
    fn weigh(&mut self, gate_k: f64) {
        self.inv_var.clear();
        self.gate_chord2.clear();
        self.inv_var
            .extend(self.pairs.iter().map(|p| inv_var_of(p.sigma)));
        // Consecutive pairs usually share a σ (one sensor): reuse its gate.
        let (mut last_sigma, mut last_gate) = (f64::NAN, 0.0);
        self.gate_chord2.extend(self.pairs.iter().map(|p| {
            if p.sigma != last_sigma {
                last_gate = gate_of_sigma(p.sigma, gate_k);
                last_sigma = p.sigma;
            }
            last_gate
        }));
        self.size_scratch();
    }

    /// The per-pair scratch arrays sized to the loaded pairs.
    fn size_scratch(&mut self) {
        let n = self.pairs.len();
        self.work_w.resize(n, 0.0);
        self.resid.resize(n, 0.0);
        self.inl.resize(n, false);
        self.chord2.resize(n, 0.0);
        self.gated_a = None;
    }
}

/// Whether every pair has σ finite and `> 0` and both vectors within
/// [`IN_PLACE_UNIT_TOL`] of unit squared length: two pairs at a time in
/// packed arithmetic, each squared norm summed as `norm_squared` sums it
/// (`(x² + y²) + z²`), so the answer is the scalar test's.
fn all_pairs_fit(pairs: &[Pair]) -> bool {
    use wide::{f64x2, CmpGt, CmpLe, CmpLt};
    let near_unit = |x: f64x2, y: f64x2, z: f64x2| {
        ((x * x + y * y) + z * z - f64x2::ONE)
            .abs()
            .cmp_le(f64x2::splat(IN_PLACE_UNIT_TOL))
    };
    let mut fit = 0b11;
    let mut blocks = pairs.chunks_exact(2);
    for p in &mut blocks {
        let lane = |f: fn(&Pair) -> f64| f64x2::new([f(&p[0]), f(&p[1])]);
        let sigma = lane(|p| p.sigma);
        let sigma_ok = sigma.cmp_gt(f64x2::ZERO) & sigma.cmp_lt(f64x2::splat(f64::INFINITY));
        let b = near_unit(lane(|p| p.b.x), lane(|p| p.b.y), lane(|p| p.b.z));
        let r = near_unit(lane(|p| p.r.x), lane(|p| p.r.y), lane(|p| p.r.z));
        fit &= (sigma_ok & b & r).move_mask();
    }
    let scalar = |p: &Pair| {
        let near_unit = |v: &Vector3<f64>| (v.norm_squared() - 1.0).abs() <= IN_PLACE_UNIT_TOL;
        (p.sigma.is_finite() & (p.sigma > 0.0)) & near_unit(&p.b) & near_unit(&p.r)
    };
    fit == 0b11 && blocks.remainder().iter().all(scalar)
}

/// A pair's weight `σ⁻²`, as every solve computes it.
#[inline]
pub(crate) fn inv_var_of(sigma: f64) -> f64 {
    1.0 / (sigma * sigma)
}

/// A pair's squared-chord gate `(2 sin(min(k σ, π)/2))²` at multiplier `gate_k`.
#[inline]
pub(crate) fn gate_of_sigma(sigma: f64, gate_k: f64) -> f64 {
    gate_chord2((gate_k * sigma).min(std::f64::consts::PI))
}

/// A pair's `(σ⁻², gate)` exactly as a solve weighs it, for a caller that
/// writes them beside its pairs ([`Solver::weighed_buffer`]).
#[inline]
pub(crate) fn weigh_pair(sigma: f64, gate_k: f64) -> (f64, f64) {
    (inv_var_of(sigma), gate_of_sigma(sigma, gate_k))
}

/// For pairs whose `sigma` holds a variance: `sigma` set to its square
/// root, and each pair's [`weigh_pair`] at `gate_k` written beside it.
/// Four pairs at a time in packed arithmetic (square roots, divisions and
/// the gate series, each correctly rounded or the same products and sums as
/// the scalar form, so the values are [`weigh_pair`]'s to the bit); a block
/// with a gate angle beyond the series' range is done one pair at a time.
pub(crate) fn weigh_variances(
    pairs: &mut [Pair],
    inv_var: &mut [f64],
    gate_chord2: &mut [f64],
    gate_k: f64,
) {
    use wide::{f64x4, CmpLe};
    let n = pairs.len().min(inv_var.len()).min(gate_chord2.len());
    let packed = n - n % 4;
    let scalar = |p: &mut Pair, w: &mut f64, g: &mut f64| {
        p.sigma = p.sigma.sqrt();
        (*w, *g) = weigh_pair(p.sigma, gate_k);
    };
    let blocks = pairs[..packed]
        .chunks_exact_mut(4)
        .zip(inv_var[..packed].chunks_exact_mut(4))
        .zip(gate_chord2[..packed].chunks_exact_mut(4));
    for ((p, w), g) in blocks {
        let sigma = f64x4::new([p[0].sigma, p[1].sigma, p[2].sigma, p[3].sigma]).sqrt();
        let angle = f64x4::splat(gate_k) * sigma;
        // All four within the series (which also rules out NaN): `min(·, π)` is the angle itself.
        if angle.cmp_le(f64x4::splat(GATE_SERIES_MAX)).move_mask() != 0b1111 {
            for ((p, w), g) in p.iter_mut().zip(w.iter_mut()).zip(g.iter_mut()) {
                scalar(p, w, g);
            }
            continue;
        }
        let inv = f64x4::ONE / (sigma * sigma);
        let g2 = angle * angle;
        let c = |k: usize| f64x4::splat(GATE_SERIES[k]);
        let gate =
            g2 * (f64x4::ONE + g2 * (c(0) + g2 * (c(1) + g2 * (c(2) + g2 * (c(3) + g2 * c(4))))));
        let sigma = sigma.to_array();
        for (p, s) in p.iter_mut().zip(sigma) {
            p.sigma = s;
        }
        w.copy_from_slice(&inv.to_array());
        g.copy_from_slice(&gate.to_array());
    }
    for i in packed..n {
        scalar(&mut pairs[i], &mut inv_var[i], &mut gate_chord2[i]);
    }
}

/// Squared-norm tolerance within which [`Solver::solve_in_place`] takes a
/// vector as unit: 16 ε, a length off by at most about 2e-15 (a vector
/// normalised once and rotated twice is off by a few ε).
pub const IN_PLACE_UNIT_TOL: f64 = 16.0 * f64::EPSILON;

/// Gate angle up to which [`gate_chord2`] uses its series, rad.
const GATE_SERIES_MAX: f64 = 0.2;

/// The coefficients after the first of `2 (1 − cos g)` in powers of `g²`
/// (see [`gate_chord2`]).
const GATE_SERIES: [f64; 5] = [
    -1.0 / 12.0,
    1.0 / 360.0,
    -1.0 / 20_160.0,
    1.0 / 1_814_400.0,
    -1.0 / 239_500_800.0,
];

/// Squared chord of the gate angle `g`, `(2 sin(g/2))² = 2 (1 − cos g)`.
///
/// Propagated windows give every pair its own σ, so this runs once per pair
/// and solve; for `g ≤ 0.2` rad (σ up to about 3° at the default gate) the
/// Taylor series to the `g¹²` term is exact to rounding (the first term left
/// out is below `g¹⁴/14·13·…` ≈ 1e-19 relative) and costs less than a `sin`.
#[inline]
pub(crate) fn gate_chord2(g: f64) -> f64 {
    if g > GATE_SERIES_MAX {
        return (2.0 * (0.5 * g).sin()).powi(2);
    }
    // 2 (1 − cos g) = g² − g⁴/12 + g⁶/360 − g⁸/20160 + g¹⁰/1814400 − g¹²/239500800,
    // by Horner with the coefficients as constants: multiplications only (a
    // division per term, as `g2 / 12.0` would be, made this most of a
    // verdict's time).
    const C: [f64; 5] = GATE_SERIES;
    let g2 = g * g;
    g2 * (1.0 + g2 * (C[0] + g2 * (C[1] + g2 * (C[2] + g2 * (C[3] + g2 * C[4])))))
}

/// `v` normalised, or why it cannot be (non-finite, zero).
#[inline]
fn unit(v: &Vector3<f64>) -> Result<Vector3<f64>, &'static str> {
    let n2 = v.norm_squared();
    if !n2.is_finite() {
        if !v.iter().all(|x| x.is_finite()) {
            return Err("vector is not finite");
        }
        // Finite but huge: scale first so the norm does not overflow.
        let s = v / v.amax();
        return Ok(s / s.norm());
    }
    if n2 < 1e-300 {
        return Err("zero vector");
    }
    Ok(v * unit_scale(n2))
}

/// What to multiply a vector of squared norm `n2` (finite, not tiny) by to
/// make it unit: exactly 1 when it is unit to rounding already (kept bit for
/// bit), else the reciprocal of its norm (one division for three
/// components: divisions were most of the cost of loading a window). A
/// select rather than a branch: rotated vectors fall on either side of the
/// test at random, which a branch mispredicts.
#[inline]
pub(crate) fn unit_scale(n2: f64) -> f64 {
    let inv_norm = 1.0 / n2.sqrt();
    if (n2 - 1.0).abs() <= 4.0 * f64::EPSILON {
        1.0
    } else {
        inv_norm
    }
}

/// A rotation estimate inside the solvers, before conversion to a quaternion.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Estimate {
    /// Attitude matrix, `b ≈ A r`.
    pub a: Matrix3<f64>,
    /// Iterations used.
    pub iterations: u32,
    /// Whether the convergence rule was met.
    pub converged: bool,
    /// The method that produced it.
    pub method: Method,
}

/// A solver's validated copy of the pairs of its last solve ([`Solver::loaded`]).
#[derive(Debug, Clone, Copy)]
pub struct LoadedPairs<'a> {
    /// The pairs with unit vectors and a finite σ `> 0`.
    pub pairs: &'a [Pair],
    /// `σ_i⁻²`, computed as `1 / (σ_i σ_i)`.
    pub inv_var: &'a [f64],
    /// Squared-chord gates `(2 sin(min(k σ_i, π)/2))²` at the solver's `k`.
    pub gate_chord2: &'a [f64],
}

impl LoadedPairs<'_> {
    /// Pairs loaded (with their `σ⁻²` and gate each).
    pub fn len(&self) -> usize {
        self.pairs
            .len()
            .min(self.inv_var.len())
            .min(self.gate_chord2.len())
    }

    /// Whether no pair is loaded.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// The buffers of [`Solver::weighed_buffer`]: entry `i` of `inv_var` and
/// `gate_chord2` is [`weigh_pair`] of `pairs[i].sigma` at `gate_k`.
pub(crate) struct WeighedBuffer<'a> {
    pub pairs: &'a mut Vec<Pair>,
    pub inv_var: &'a mut Vec<f64>,
    pub gate_chord2: &'a mut Vec<f64>,
    pub gate_k: f64,
}

/// A robust solve's final gate ([`Solver::final_gate`]).
#[derive(Debug, Clone, Copy)]
pub struct FinalGate<'a> {
    /// The rotation gated at (the solve's result, as a matrix).
    pub a: Matrix3<f64>,
    /// Inlier flag of each loaded pair: `‖b_i − A r_i‖² ≤` its gate.
    pub inliers: &'a [bool],
    /// `‖b_i − A r_i‖²` of each loaded pair.
    pub chord2: &'a [f64],
}

/// Reusable solver state: holds scratch buffers so steady-state solves do not allocate.
#[derive(Debug, Clone, Default)]
pub struct Solver {
    params: SolveParams,
    weights: Vec<f64>,
    ws: Workspace,
    /// The rotation of the last successful solve.
    last_a: Option<Matrix3<f64>>,
}

impl Solver {
    /// A solver with the given parameters.
    pub fn new(params: SolveParams) -> Self {
        Solver {
            params,
            weights: Vec::new(),
            ws: Workspace::default(),
            last_a: None,
        }
    }

    /// The parameters in force.
    pub fn params(&self) -> &SolveParams {
        &self.params
    }

    /// Per-pair weights of the last solve: `σ_i⁻²` for least squares; for
    /// TRIAD `σ_i⁻²` on the two pairs used; for the robust methods `σ_i⁻²` on
    /// the pairs of the final refit and 0 for rejected pairs.
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// The robust methods' final gate, when the last solve's rotation is
    /// the one it gated at (the robust methods and `auto`, unless a refit hit
    /// its pass cap; never the closed forms): the inlier flags and squared
    /// chords of every loaded pair at that rotation, which is the one the
    /// outcome's quaternion was made from.
    pub fn final_gate(&self) -> Option<FinalGate<'_>> {
        let a = self.ws.gated_a.filter(|a| Some(*a) == self.last_a)?;
        Some(FinalGate {
            a,
            inliers: &self.ws.inl,
            chord2: &self.ws.chord2,
        })
    }

    /// The pairs of the last solve as validated and normalised, with their
    /// `σ⁻²` and gates: all of them when the solve got past validation
    /// (see [`crate::verdict::assess_loaded_into`]).
    pub fn loaded(&self) -> LoadedPairs<'_> {
        LoadedPairs {
            pairs: &self.ws.pairs,
            inv_var: &self.ws.inv_var,
            gate_chord2: &self.ws.gate_chord2,
        }
    }

    /// Solves Wahba's problem for `pairs` with `method`, optionally warm-started.
    ///
    /// The warm start is used by `lud` and `gnc-tls` (initial estimate), by
    /// `consensus` (an extra hypothesis) and by `auto` (cheap refinement);
    /// the closed forms ignore it. Vectors are normalised here; pairs with
    /// non-finite or zero vectors or a bad σ are refused.
    pub fn solve(
        &mut self,
        pairs: &[Pair],
        method: Method,
        warm: Option<&UnitQuaternion<f64>>,
    ) -> Result<Outcome, SolveError> {
        self.last_a = None;
        self.params.validate()?;
        self.ws.load(pairs, self.params.gate_k)?;
        self.solve_loaded(method, warm)
    }

    /// The solver's own pair buffer, emptied, for a caller that builds its
    /// pairs in place and then calls [`Solver::solve_in_place`] (no copy of
    /// the window per solve). Until then only the `pairs` of
    /// [`Solver::loaded`] are current (its weights and gates are the last solve's).
    pub fn pair_buffer(&mut self) -> &mut Vec<Pair> {
        self.last_a = None;
        self.ws.pairs.clear();
        &mut self.ws.pairs
    }

    /// The solver's pair, weight and gate buffers and its gate multiplier,
    /// for a caller in this crate that writes each pair with its
    /// [`weigh_pair`] (or the pairs' variances, then [`weigh_variances`]),
    /// then calls [`Solver::solve_weighed`].
    /// The buffers hold the last solve's values (not cleared: a caller
    /// resizes them to its pairs and overwrites every entry, so that a
    /// window of the same size costs no fill).
    pub(crate) fn weighed_buffer(&mut self) -> WeighedBuffer<'_> {
        self.last_a = None;
        WeighedBuffer {
            pairs: &mut self.ws.pairs,
            inv_var: &mut self.ws.inv_var,
            gate_chord2: &mut self.ws.gate_chord2,
            gate_k: self.params.gate_k,
        }
    }

    /// [`Solver::solve_in_place`] on the pairs, weights and gates written
    /// into [`Solver::weighed_buffer`]: the same checks and the same
    /// result, without weighing the pairs again.
    pub(crate) fn solve_weighed(
        &mut self,
        method: Method,
        warm: Option<&UnitQuaternion<f64>>,
    ) -> Result<Outcome, SolveError> {
        self.solve_prepared(method, warm, Workspace::prepare_weighed)
    }

    /// [`Solver::solve`] on the pairs written into [`Solver::pair_buffer`],
    /// with the same checks; a vector within [`IN_PLACE_UNIT_TOL`] of unit
    /// length is used as it is, any other is normalised in place. An invalid
    /// pair is refused as by `solve`, and the buffer keeps the pairs.
    pub fn solve_in_place(
        &mut self,
        method: Method,
        warm: Option<&UnitQuaternion<f64>>,
    ) -> Result<Outcome, SolveError> {
        self.solve_prepared(method, warm, Workspace::prepare_in_place)
    }

    /// The in-place solves: `prepare` checks and weighs the pairs already
    /// in the workspace at the solver's gate multiplier, then the solve proper.
    fn solve_prepared(
        &mut self,
        method: Method,
        warm: Option<&UnitQuaternion<f64>>,
        prepare: fn(&mut Workspace, f64) -> Result<(), SolveError>,
    ) -> Result<Outcome, SolveError> {
        self.last_a = None;
        self.params.validate()?;
        prepare(&mut self.ws, self.params.gate_k)?;
        self.solve_loaded(method, warm)
    }

    /// The solve proper, on the pairs loaded and weighed.
    fn solve_loaded(
        &mut self,
        method: Method,
        warm: Option<&UnitQuaternion<f64>>,
    ) -> Result<Outcome, SolveError> {
        let n = self.ws.pairs.len();
        self.weights.clear();
        self.weights.resize(n, 0.0);
        if n < 2 {
            return Err(SolveError::Insufficient { n, needed: 2 });
        }
        let warm_a = warm.map(|q| q.to_rotation_matrix().into_inner());
        let est = match method {
            Method::Svd | Method::Ls | Method::QMethod => {
                self.weights.copy_from_slice(&self.ws.inv_var);
                let a = if method == Method::QMethod {
                    qmethod::weighted_ls(&self.ws.pairs, &self.weights)?
                } else {
                    svd::weighted_ls(&self.ws.pairs, &self.weights)?
                };
                Estimate {
                    a,
                    iterations: 1,
                    converged: true,
                    method,
                }
            }
            Method::Triad => {
                let (p, q) = (&self.ws.pairs[0], &self.ws.pairs[1]);
                let a = triad::triad_pair(p, q, triad::TRIAD_MIN_SIN).ok_or_else(|| {
                    SolveError::Degenerate("the first two pairs are parallel".into())
                })?;
                self.weights[0] = self.ws.inv_var[0];
                self.weights[1] = self.ws.inv_var[1];
                Estimate {
                    a,
                    iterations: 1,
                    converged: true,
                    method,
                }
            }
            Method::Lud => {
                let est = lud::solve(&mut self.ws, &self.params, warm_a)?;
                refit::finish(&mut self.ws, est, &mut self.weights)
            }
            Method::GncTls => {
                let est = gnc::solve(&mut self.ws, &self.params, warm_a)?;
                refit::finish(&mut self.ws, est, &mut self.weights)
            }
            Method::Consensus => {
                let priors: &[Matrix3<f64>] = match &warm_a {
                    Some(a) => std::slice::from_ref(a),
                    None => &[],
                };
                let est = consensus::solve(&mut self.ws, &self.params, priors)?;
                refit::finish(&mut self.ws, est, &mut self.weights)
            }
            Method::Auto => auto::solve(&mut self.ws, &self.params, warm_a, &mut self.weights)?,
        };
        if !rotation::is_rotation(&est.a) {
            return Err(SolveError::Numerical(format!(
                "{method} produced a non-rotation"
            )));
        }
        self.last_a = Some(est.a);
        Ok(Outcome {
            q: rotation::quat_from_matrix(&est.a),
            iterations: est.iterations,
            converged: est.converged,
            method: est.method,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn unit(rng: &mut ChaCha8Rng) -> Vector3<f64> {
        loop {
            let v = Vector3::new(
                rng.random_range(-1.0..1.0),
                rng.random_range(-1.0..1.0),
                rng.random_range(-1.0..1.0),
            );
            let n = v.norm();
            if n > 0.1 && n <= 1.0 {
                return v / n;
            }
        }
    }

    #[test]
    fn gate_chord_series_matches_the_sine_form() {
        // Reference: the closed form (2 sin(g/2))² with libm's `sin`.
        for i in 0..=3000 {
            let g = 1e-9 * (0.4f64 / 1e-9).powf(i as f64 / 3000.0);
            let closed = (2.0 * (0.5 * g).sin()).powi(2);
            let got = gate_chord2(g);
            assert!(
                (got - closed).abs() <= 4.0 * f64::EPSILON * closed,
                "g = {g:e}: {got:e} vs {closed:e}"
            );
        }
    }

    #[test]
    fn packed_weighing_of_variances_is_the_scalar_weighing_to_the_bit() {
        // Derived in the test: `weigh_variances` must give, for every
        // length (remainders of 0 to 3 pairs) and for blocks that leave the
        // series (σ large enough for a gate angle past 0.2 rad), exactly
        // `weigh_pair(sqrt(var))`, the scalar path's values.
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let k = SolveParams::default().gate_k;
        for n in [0, 1, 2, 3, 4, 5, 7, 13, 200] {
            let vars: Vec<f64> = (0..n)
                .map(|i| {
                    let sigma: f64 = if i % 11 == 6 {
                        rng.random_range(0.06..0.5) // gate angle beyond the series
                    } else {
                        rng.random_range(1e-6..1e-2)
                    };
                    sigma * sigma + rng.random_range(0.0..1e-8)
                })
                .collect();
            let mut pairs: Vec<Pair> = vars
                .iter()
                .map(|&var| Pair {
                    b: Vector3::x(),
                    r: Vector3::y(),
                    sigma: var,
                })
                .collect();
            let (mut inv_var, mut gate) = (vec![0.0; n], vec![0.0; n]);
            weigh_variances(&mut pairs, &mut inv_var, &mut gate, k);
            for (i, &var) in vars.iter().enumerate() {
                let sigma = var.sqrt();
                let (w, g) = weigh_pair(sigma, k);
                assert_eq!(pairs[i].sigma.to_bits(), sigma.to_bits(), "n {n}, σ of {i}");
                assert_eq!(inv_var[i].to_bits(), w.to_bits(), "n {n}, σ⁻² of {i}");
                assert_eq!(gate[i].to_bits(), g.to_bits(), "n {n}, gate of {i}");
            }
        }
    }

    #[test]
    fn packed_pair_check_is_the_scalar_check() {
        // Derived in the test: `all_pairs_fit` must agree with the scalar
        // test of every pair, one misfit at a time at every position (odd
        // and even, in the remainder too): σ zero, negative, infinite, NaN;
        // a vector off unit length; a NaN component.
        let mut rng = ChaCha8Rng::seed_from_u64(6);
        let q = UnitQuaternion::from_scaled_axis(Vector3::new(0.2, -0.4, 0.1));
        let scalar = |pairs: &[Pair]| {
            pairs.iter().all(|p| {
                let near_unit =
                    |v: &Vector3<f64>| (v.norm_squared() - 1.0).abs() <= IN_PLACE_UNIT_TOL;
                p.sigma.is_finite() && p.sigma > 0.0 && near_unit(&p.b) && near_unit(&p.r)
            })
        };
        let misfits: [fn(&mut Pair); 7] = [
            |p| p.sigma = 0.0,
            |p| p.sigma = -1e-3,
            |p| p.sigma = f64::INFINITY,
            |p| p.sigma = f64::NAN,
            |p| p.b *= 1.0 + 1e-12,
            |p| p.r.y = f64::NAN,
            |p| p.r *= 0.5,
        ];
        for n in [1, 2, 5, 8] {
            let clean = clean_pairs(&mut rng, &q, n);
            assert!(all_pairs_fit(&clean) && scalar(&clean), "n {n}");
            for at in 0..n {
                for misfit in misfits {
                    let mut pairs = clean.clone();
                    misfit(&mut pairs[at]);
                    assert_eq!(all_pairs_fit(&pairs), scalar(&pairs), "n {n}, at {at}");
                    assert!(!all_pairs_fit(&pairs), "n {n}, at {at}");
                }
            }
        }
    }

    fn clean_pairs(rng: &mut ChaCha8Rng, q: &UnitQuaternion<f64>, n: usize) -> Vec<Pair> {
        (0..n)
            .map(|_| {
                let r = unit(rng);
                Pair {
                    b: q * r,
                    r,
                    sigma: rng.random_range(1e-4..1e-2),
                }
            })
            .collect()
    }

    #[test]
    fn in_place_solve_matches_the_copying_solve_and_refuses_the_same_pairs() {
        // Derived in the test: the in-place path must give `solve`'s
        // rotation (to rounding) on pairs with vectors off unit length, and
        // refuse a zero vector with the same error.
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let q = UnitQuaternion::from_scaled_axis(unit(&mut rng) * 1.3);
        let mut pairs = clean_pairs(&mut rng, &q, 40);
        pairs[3].b *= 2.5;
        pairs[7].r *= 0.3;
        for method in [Method::Ls, Method::Auto] {
            let mut copying = Solver::new(SolveParams::default());
            let want = copying.solve(&pairs, method, None).unwrap();
            let mut in_place = Solver::new(SolveParams::default());
            in_place.pair_buffer().extend_from_slice(&pairs);
            let got = in_place.solve_in_place(method, None).unwrap();
            let angle = want.q.angle_to(&got.q);
            assert!(angle < 1e-14, "{method}: {angle:e}");
            assert!((in_place.loaded().pairs[3].b.norm() - 1.0).abs() < 1e-15);
            assert!((in_place.loaded().pairs[7].r.norm() - 1.0).abs() < 1e-15);
        }
        pairs[5].r = Vector3::zeros();
        let mut copying = Solver::new(SolveParams::default());
        let mut in_place = Solver::new(SolveParams::default());
        in_place.pair_buffer().extend_from_slice(&pairs);
        assert_eq!(
            in_place.solve_in_place(Method::Ls, None).unwrap_err(),
            copying.solve(&pairs, Method::Ls, None).unwrap_err()
        );
    }

    #[test]
    fn every_method_recovers_clean_data() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let q = UnitQuaternion::from_scaled_axis(unit(&mut rng) * 2.0);
        let pairs = clean_pairs(&mut rng, &q, 12);
        let mut solver = Solver::new(SolveParams::default());
        for method in Method::ALL {
            let out = solver.solve(&pairs, method, None).unwrap();
            let err = rotation::angle_between(&q, &out.q);
            assert!(err <= 1e-12, "{method}: error {err}");
            assert!(out.q.w >= 0.0);
        }
    }

    #[test]
    fn robust_methods_reject_planted_outliers() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let q = UnitQuaternion::from_scaled_axis(unit(&mut rng) * 1.0);
        let mut pairs = clean_pairs(&mut rng, &q, 40);
        for p in pairs.iter_mut().take(16) {
            p.b = unit(&mut rng);
        }
        let mut solver = Solver::new(SolveParams::default());
        for method in [Method::Lud, Method::GncTls, Method::Consensus, Method::Auto] {
            let out = solver.solve(&pairs, method, None).unwrap();
            let err = rotation::angle_between(&q, &out.q);
            assert!(err <= 1e-12, "{method}: error {err}");
            assert!(solver.weights()[..16].iter().all(|&w| w == 0.0), "{method}");
            assert!(solver.weights()[16..].iter().all(|&w| w > 0.0), "{method}");
        }
    }

    #[test]
    fn bad_input_is_refused() {
        let mut solver = Solver::default();
        let good = Pair {
            b: Vector3::x(),
            r: Vector3::x(),
            sigma: 0.01,
        };
        let mut bad = good;
        bad.r = Vector3::zeros();
        assert!(matches!(
            solver.solve(&[good, bad], Method::Svd, None),
            Err(SolveError::InvalidPair { index: 1, .. })
        ));
        assert!(matches!(
            solver.solve(&[good], Method::Auto, None),
            Err(SolveError::Insufficient { n: 1, needed: 2 })
        ));
    }
}

/// Property tests: proper rotation out, equivariance under a body rotation,
/// invariance under permutation of the pairs.
#[cfg(test)]
mod properties {
    use super::*;
    use proptest::prelude::*;

    fn unit_vec() -> impl Strategy<Value = Vector3<f64>> {
        (-1.0f64..1.0, -1.0f64..1.0, -1.0f64..1.0)
            .prop_filter("not tiny", |(x, y, z)| x * x + y * y + z * z > 0.01)
            .prop_map(|(x, y, z)| Vector3::new(x, y, z).normalize())
    }

    fn rotation() -> impl Strategy<Value = UnitQuaternion<f64>> {
        (unit_vec(), 0.0f64..std::f64::consts::PI)
            .prop_map(|(axis, angle)| UnitQuaternion::from_scaled_axis(axis * angle))
    }

    /// Pairs at attitude `q`: inliers with small deterministic offsets, the
    /// first `n_out` replaced by arbitrary directions.
    fn scene() -> impl Strategy<Value = (UnitQuaternion<f64>, Vec<Pair>)> {
        (
            rotation(),
            prop::collection::vec((unit_vec(), unit_vec(), unit_vec()), 6..30),
            0usize..4,
        )
            .prop_map(|(q, raw, n_out)| {
                let sigma = 1e-3;
                let pairs = raw
                    .iter()
                    .enumerate()
                    .map(|(i, (r, junk, jitter))| {
                        let b = if i < n_out {
                            *junk
                        } else {
                            (q * r + jitter * (0.5 * sigma)).normalize()
                        };
                        Pair { b, r: *r, sigma }
                    })
                    .collect();
                (q, pairs)
            })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(48))]

        #[test]
        fn output_is_a_proper_rotation((_q, pairs) in scene(), warm in rotation()) {
            let mut solver = Solver::default();
            for method in Method::ALL {
                for w in [None, Some(&warm)] {
                    let out = solver.solve(&pairs, method, w).unwrap();
                    let a = out.q.to_rotation_matrix().into_inner();
                    prop_assert!(rotation::is_rotation(&a));
                    prop_assert!((out.q.norm() - 1.0).abs() < 1e-12);
                    prop_assert!(out.q.w >= 0.0);
                }
            }
        }

        #[test]
        fn rotating_the_body_vectors_rotates_the_answer((q, pairs) in scene(), turn in rotation()) {
            let turned: Vec<Pair> = pairs.iter().map(|p| Pair { b: turn * p.b, ..*p }).collect();
            let mut solver = Solver::default();
            for method in Method::ALL {
                let a = solver.solve(&pairs, method, None).unwrap().q;
                // The property concerns the answer, not a failure: where a
                // method (least squares, or GNC at half outliers on six
                // pairs) missed the planted attitude, its path to a wrong
                // optimum may branch differently under rounding.
                if rotation::angle_between(&a, &q) > 1e-2 {
                    continue;
                }
                let b = solver.solve(&turned, method, None).unwrap().q;
                let err = rotation::angle_between(&(turn * a), &b);
                prop_assert!(err < 1e-9, "{method}: {err:e}");
            }
        }

        #[test]
        fn permuting_the_pairs_changes_nothing((_q, pairs) in scene(), shift in 1usize..5) {
            // Reversed and rotated order. TRIAD is excluded: it uses the first
            // two pairs by definition. Consensus is exhaustive at these sizes.
            let mut permuted = pairs.clone();
            permuted.reverse();
            let k = shift % permuted.len();
            permuted.rotate_left(k);
            let mut solver = Solver::default();
            for method in Method::ALL.into_iter().filter(|m| *m != Method::Triad) {
                let a = solver.solve(&pairs, method, None).unwrap().q;
                let b = solver.solve(&permuted, method, None).unwrap().q;
                let err = rotation::angle_between(&a, &b);
                prop_assert!(err < 1e-9, "{method}: {err:e}");
            }
        }
    }
}
