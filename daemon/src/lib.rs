//! `wahbad`: robust attitude estimation from vector observations.
//!
//! - [`solve`]: the Wahba solvers (least squares, TRIAD, LUD, GNC-TLS, consensus, auto).
//! - [`verdict`]: residuals, inlier flags, covariance and observability.
//! - [`estimator`]: the streaming estimator (window, rate propagation, alerts).
//! - [`study`]: Monte-Carlo studies of the solvers against the Cramér–Rao bound.
//! - [`record`]: the recording log written by `serve --record` and read by `replay`.
//! - [`replay`]: `wahbad replay`: a log through the same estimator, outputs, truth error.
//! - [`settings`]: `serve` flags, the TOML config file, validated [`ServeConfig`].
//! - [`core_thread`]: the estimator on its own thread, with the recorder.
//! - [`serve`]: the live server (TCP, Unix socket, UDP; sources and subscribers).
//! - [`loadgen`]: the load generator behind `wahbad bench`.
//! - [`simulate`]: the bench-scenario simulator (seeded stream of obs, rate, truth).
//! - [`report`]: replay outputs for people and tools (SVG report, CCSDS AEM).
//! - [`svg_doc`]: a small SVG document builder shared by the study chart and the report.

pub mod core_thread;
pub mod estimator;
pub mod loadgen;
pub mod record;
pub mod replay;
pub mod report;
pub mod serve;
pub mod settings;
pub mod simulate;
pub mod solve;
pub mod study;
pub mod svg_doc;
pub mod verdict;

pub use estimator::{
    ConfigError, Estimator, EstimatorConfig, IngestError, Input, Output, SensorConfig, SensorKind,
    Stats,
};
pub use settings::{ServeArgs, ServeConfig};
pub use solve::{FinalGate, LoadedPairs, Method, Outcome, Pair, SolveError, SolveParams, Solver};
pub use verdict::{assess, Observability, Verdict};
