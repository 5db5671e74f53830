//! `wahbad replay`: a recorded log (see [`crate::record`]) run through the
//! same [`Estimator`](crate::estimator::Estimator) as the live server.
//!
//! - [`runner`]: the loop over the records (real decoder and validation),
//!   pacing on data time, the outputs handed out as they are made.
//! - [`truth`]: truth interpolation (slerp) and the attitude error against it.
//! - [`summary`]: the `--summary` JSON and its human form.
//! - [`output`]: the `--solutions` JSON lines and the `--csv` table.
//!
//! Configuration ([`resolve_config`]): the `[estimator]` table recorded in
//! the log's header, unless `--config FILE` is given, whose `[estimator]`
//! table then replaces it; the estimator flags (`--period-ms`, ...) patch
//! whichever is used. A replay with the recorded configuration and no flag
//! reproduces the live solutions bit for bit.

pub mod output;
pub mod runner;
pub mod summary;
pub mod truth;

use std::path::{Path, PathBuf};

use wahbad_protocol::{Solution, SolutionStatus};

pub use runner::{run, BadRecord, LogInput, Pacer, ReplayRun, RunOptions};
pub use summary::{AlertSpan, Counts, EpochError, Summary};
pub use truth::{TruthTrack, CHI2_3DOF_3SIGMA};

use crate::estimator::EstimatorConfig;
use crate::record::{LogHeader, RecordError};
use crate::settings::{estimator_config, estimator_table, EstimatorFlags};

/// Why a replay cannot start or stopped.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ReplayError {
    /// The log cannot be opened or is not a usable log (bad input).
    #[error("{path}: {source}", path = path.display())]
    Open {
        /// The log.
        path: PathBuf,
        /// Why.
        source: RecordError,
    },
    /// The configuration is invalid (bad input).
    #[error("configuration: {0}")]
    Config(String),
    /// Reading the log failed part way (an i/o error, not damage).
    #[error("{path}: {source}", path = path.display())]
    Read {
        /// The log.
        path: PathBuf,
        /// Why.
        source: RecordError,
    },
    /// An output could not be written.
    #[error("writing an output: {0}")]
    Output(std::io::Error),
}

impl ReplayError {
    /// Whether the input (log, flags, configuration) is at fault rather than the run.
    pub fn is_bad_input(&self) -> bool {
        matches!(self, ReplayError::Open { .. } | ReplayError::Config(_))
    }
}

/// The estimator configuration of a replay and where it came from.
#[derive(Debug, Clone)]
pub struct ResolvedConfig {
    /// The configuration.
    pub config: EstimatorConfig,
    /// One line saying where it came from, e.g. "recorded in the log header,
    /// with --period-ms 50".
    pub source: String,
}

/// The flags of `flags` that were given, as they would be typed.
fn given_flags(flags: &EstimatorFlags) -> Vec<String> {
    let mut given = Vec::new();
    let mut add = |name: &str, value: Option<String>| {
        if let Some(value) = value {
            given.push(format!("--{name} {value}"));
        }
    };
    add("period-ms", flags.period_ms.map(|v| v.to_string()));
    add("span-ms", flags.span_ms.map(|v| v.to_string()));
    add("latency-ms", flags.latency_ms.map(|v| v.to_string()));
    add("method", flags.method.clone());
    add("inlier-min", flags.inlier_min.map(|v| v.to_string()));
    add("hold-ms", flags.hold_ms.map(|v| v.to_string()));
    given
}

/// The configuration of a replay (see the module doc for the precedence).
pub fn resolve_config(
    header: &LogHeader,
    config_file: Option<&Path>,
    flags: &EstimatorFlags,
) -> Result<ResolvedConfig, ReplayError> {
    let (table, mut source) = match config_file {
        Some(path) => (
            estimator_table(Some(path), flags)
                .map_err(|err| ReplayError::Config(err.to_string()))?,
            format!(
                "[estimator] of {} (instead of the one recorded in the log)",
                path.display()
            ),
        ),
        None => {
            let mut table: toml::Table = toml::from_str(&header.config).map_err(|err| {
                ReplayError::Config(format!(
                    "the configuration recorded in the log header: {}",
                    err.message()
                ))
            })?;
            flags.apply(&mut table);
            (table, "recorded in the log header".to_string())
        }
    };
    let given = given_flags(flags);
    if !given.is_empty() {
        source.push_str(&format!(", overridden by {}", given.join(" ")));
    }
    let config = estimator_config(&table).map_err(|err| ReplayError::Config(err.to_string()))?;
    Ok(ResolvedConfig { config, source })
}

/// Whether a solution carries an estimate of its own epoch (judged against truth).
pub fn has_estimate(solution: &Solution) -> bool {
    matches!(
        solution.status,
        SolutionStatus::Ok | SolutionStatus::Degraded
    )
}

/// Per solution: the error against truth where there is truth at its epoch
/// and an estimate (status `ok` or `degraded`).
pub fn errors_against_truth(solutions: &[Solution], truth: &TruthTrack) -> Vec<Option<EpochError>> {
    solutions
        .iter()
        .map(|solution| {
            if !has_estimate(solution) {
                return None;
            }
            let q_true = truth.at(solution.t)?;
            let err = truth::attitude_error(&truth::unit_q(solution.q), &q_true);
            let within =
                truth::mahalanobis2(&err, &solution.cov).is_some_and(|m2| m2 <= CHI2_3DOF_3SIGMA);
            Some(EpochError {
                arcsec: err.norm() * truth::ARCSEC_PER_RAD,
                within_3sigma: within,
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn log_header(config: &str) -> LogHeader {
        LogHeader {
            created_ns: 0,
            program: "test".into(),
            protocol: 1,
            origin: "test".into(),
            config: config.into(),
        }
    }

    #[test]
    fn recorded_configuration_unless_overridden() {
        let header = log_header("period_ms = 200\nspan_ms = 2000\n");
        let resolved = resolve_config(&header, None, &EstimatorFlags::default()).unwrap();
        assert_eq!(resolved.config.period_ms, 200);
        assert_eq!(resolved.source, "recorded in the log header");
        let flags = EstimatorFlags {
            period_ms: Some(50),
            ..EstimatorFlags::default()
        };
        let resolved = resolve_config(&header, None, &flags).unwrap();
        assert_eq!(resolved.config.period_ms, 50);
        assert_eq!(resolved.config.span_ms, 2000, "the rest stays recorded");
        assert!(resolved.source.ends_with("overridden by --period-ms 50"));
        let bad = log_header("period_ms = \"x\"");
        let err = resolve_config(&bad, None, &flags).unwrap_err();
        assert!(err.is_bad_input(), "{err}");
    }
}
