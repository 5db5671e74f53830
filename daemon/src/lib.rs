//! `wahbad`: robust attitude estimation from vector observations.
//!
//! - [`solve`]: the Wahba solvers (least squares, TRIAD, LUD, GNC-TLS, consensus, auto).
//! - [`verdict`]: residuals, inlier flags, covariance and observability.
//! - [`estimator`]: the streaming estimator (window, rate propagation, alerts).

pub mod estimator;
pub mod solve;
pub mod verdict;

pub use estimator::{
    ConfigError, Estimator, EstimatorConfig, IngestError, Input, Output, SensorConfig, SensorKind,
    Stats,
};
pub use solve::{Method, Outcome, Pair, SolveError, SolveParams, Solver};
pub use verdict::{assess, Observability, Verdict};
