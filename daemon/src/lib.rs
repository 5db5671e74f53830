//! `wahbad`: robust attitude estimation from vector observations.
//!
//! - [`solve`]: the Wahba solvers (least squares, TRIAD, LUD, GNC-TLS, consensus, auto).
//! - [`verdict`]: residuals, inlier flags, covariance and observability.
//! - [`record`]: the recording log written by `serve --record` and read by `replay`.
//! - [`study`]: Monte-Carlo studies of the solvers against the Cramér–Rao bound.

pub mod record;
pub mod solve;
pub mod study;
pub mod verdict;

pub use solve::{Method, Outcome, Pair, SolveError, SolveParams, Solver};
pub use verdict::{assess, Observability, Verdict};
