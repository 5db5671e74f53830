//! Wahba solvers: weighted vector pairs in, rotation out.
//!
//! All methods share [`Solver::solve`]. Conventions are those of the wire
//! protocol: the attitude matrix `A` maps reference components to body
//! components, `b_i ≈ A r_i`; quaternions are `[w, x, y, z]`, Hamilton,
//! `w >= 0`.
//!
//! (Skeleton: the methods are filled in by the solver work.)

use nalgebra::{UnitQuaternion, Vector3};

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
    /// Default `√13.8155` (2 dof, 99.9 %).
    pub gate_k: f64,
    /// GNC-TLS: factor by which μ grows each outer step. Default 1.4.
    pub gnc_mu_factor: f64,
    /// Iteration cap of every iterative method. Default 100.
    pub max_iterations: u32,
    /// Seed of the consensus sampler (deterministic results).
    pub seed: u64,
}

impl Default for SolveParams {
    fn default() -> Self {
        SolveParams {
            gate_k: 13.8155f64.sqrt(),
            gnc_mu_factor: 1.4,
            max_iterations: 100,
            seed: 0,
        }
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
}

/// Reusable solver state: holds scratch buffers so steady-state solves do not allocate.
#[derive(Debug, Clone, Default)]
pub struct Solver {
    params: SolveParams,
    weights: Vec<f64>,
}

impl Solver {
    /// A solver with the given parameters.
    pub fn new(params: SolveParams) -> Self {
        Solver {
            params,
            weights: Vec::new(),
        }
    }

    /// The parameters in force.
    pub fn params(&self) -> &SolveParams {
        &self.params
    }

    /// Per-pair weights of the last solve (robust methods: 0 for rejected pairs).
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// Solves Wahba's problem for `pairs` with `method`, optionally warm-started.
    pub fn solve(
        &mut self,
        pairs: &[Pair],
        method: Method,
        warm: Option<&UnitQuaternion<f64>>,
    ) -> Result<Outcome, SolveError> {
        let _ = (pairs, method, warm);
        todo!("solver work")
    }
}
