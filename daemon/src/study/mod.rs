//! Monte-Carlo studies of the solvers: how much contamination a method takes
//! and how close to the Cramér–Rao bound it stays.
//!
//! - [`trial`]: synthetic trials (random attitude, directions, noise, outliers).
//! - [`stats`]: quantiles and the Cramér–Rao bound of a trial.
//! - [`run`] (in `runner`): the trials spread over the threads of the current rayon pool.
//! - [`report`]: the result table as CSV or JSON text.
//! - [`svg`]: the result table as a chart.
//!
//! No I/O here: the command line writes the files.

mod runner;

pub mod report;
pub mod stats;
pub mod svg;
pub mod trial;

pub use runner::{run, trial_seed};
pub use trial::OutlierMode;

use serde::{Deserialize, Serialize};

use crate::solve::{Method, SolveParams};

/// What a study row measures: a solver on all pairs, or the yardstick.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum StudyMethod {
    /// A solver run on every pair of the trial.
    Solver(Method),
    /// `ls-inliers`: least squares on the true inliers only, the efficiency
    /// yardstick (what a perfect outlier detector followed by least squares gives).
    LsInliers,
}

impl StudyMethod {
    /// The name in the table (`"gnc-tls"`, `"ls-inliers"`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            StudyMethod::Solver(m) => m.as_str(),
            StudyMethod::LsInliers => "ls-inliers",
        }
    }
}

impl std::fmt::Display for StudyMethod {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl std::str::FromStr for StudyMethod {
    type Err = crate::solve::UnknownMethod;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        if s == StudyMethod::LsInliers.as_str() {
            return Ok(StudyMethod::LsInliers);
        }
        s.parse().map(StudyMethod::Solver)
    }
}

/// Every setting of a study.
#[derive(Debug, Clone, PartialEq)]
pub struct StudyConfig {
    /// Pair counts per trial.
    pub sizes: Vec<usize>,
    /// Outlier shares, each in `[0, 1)`; the outlier count is `round(share · n)`.
    pub outlier_shares: Vec<f64>,
    /// Trials per (size, share) cell; every method sees the same trials.
    pub trials: usize,
    /// 1-σ noise of every pair, radians.
    pub sigma: f64,
    /// Methods, in table order.
    pub methods: Vec<StudyMethod>,
    /// Master seed; each trial's seed derives from it (see [`trial_seed`]).
    pub seed: u64,
    /// How outliers are made.
    pub outlier_mode: OutlierMode,
    /// Solver parameters (the consensus seed is replaced by the trial's seed).
    pub params: SolveParams,
}

/// A trial succeeds when its error is below this many CRBs.
pub const SUCCESS_CRB_MULTIPLE: f64 = 5.0;

/// One row of the result table: one method at one (size, share) cell.
///
/// Errors of failed solves (the solver returned an error) count as π.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Row {
    /// Method name (`ls-inliers` for the yardstick).
    pub method: String,
    /// Pairs per trial.
    pub n: usize,
    /// Requested outlier share.
    pub outlier_share: f64,
    /// Trials run.
    pub trials: usize,
    /// Share of trials with `error < 5 · crb`.
    pub success_rate: f64,
    /// Median of `error / crb` over all trials.
    pub median_error_over_crb: f64,
    /// 95th percentile of `error / crb` over all trials.
    pub p95_error_over_crb: f64,
    /// Median error, radians.
    pub median_error_rad: f64,
    /// Median wall-clock time of one solve, microseconds (not reproducible).
    pub median_time_us: f64,
}

/// A (size, share) cell left out because too few true inliers remain for a CRB.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SkippedCell {
    /// Pairs per trial.
    pub n: usize,
    /// Requested outlier share.
    pub outlier_share: f64,
    /// True inliers it would have had.
    pub n_inliers: usize,
}

/// What a study produced.
#[derive(Debug, Clone, PartialEq)]
pub struct StudyReport {
    /// Rows by size, then share, then method, in the configured orders.
    pub rows: Vec<Row>,
    /// Cells left out (fewer than two true inliers).
    pub skipped: Vec<SkippedCell>,
}

/// A study that cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum StudyError {
    /// An empty list where at least one entry is needed.
    #[error("no {0} given")]
    Empty(&'static str),
    /// An outlier share outside `[0, 1)`.
    #[error("outlier share {0} is outside [0, 1)")]
    Share(f64),
    /// A pair count below two.
    #[error("pair count {0} is below 2")]
    Size(usize),
    /// σ not finite and positive, or not below π.
    #[error("sigma {0} rad is not in (0, π)")]
    Sigma(f64),
}
