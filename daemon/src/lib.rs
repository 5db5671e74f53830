//! `wahbad`: robust attitude estimation from vector observations.
//!
//! - [`solve`]: the Wahba solvers (least squares, TRIAD, LUD, GNC-TLS, consensus, auto).
//! - [`verdict`]: residuals, inlier flags, covariance and observability.
//! - [`simulate`]: the bench-scenario simulator (seeded stream of obs, rate, truth).

pub mod simulate;
pub mod solve;
pub mod verdict;

pub use solve::{Method, Outcome, Pair, SolveError, SolveParams, Solver};
pub use verdict::{assess, Observability, Verdict};
