//! `wahbad`: robust attitude estimation from vector observations.
//!
//! - [`solve`]: the Wahba solvers (least squares, TRIAD, LUD, GNC-TLS, consensus, auto).
//! - [`verdict`]: residuals, inlier flags, covariance and observability.
//! - [`study`]: Monte-Carlo studies of the solvers against the Cramér–Rao bound.

pub mod solve;
pub mod study;
pub mod verdict;

pub use solve::{Method, Outcome, Pair, SolveError, SolveParams, Solver};
pub use verdict::{assess, Observability, Verdict};
