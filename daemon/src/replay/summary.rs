//! The replay summary: the JSON of `--summary FILE` and its human form.
//!
//! Keys, exactly: `epochs`, `observations`, `rejected`, `dropped`,
//! `status_counts` (every status, also those with count 0), `inlier_fraction`
//! {`min`, `mean`} (null with no epoch), `alerts` (each raise with `kind`,
//! `sensor` (null if none), `raised` and `cleared` ns, `cleared` null while it
//! stayed raised), and, only when the log holds truth, `error_arcsec`
//! {`rms`, `p95`, `max`} and `within_3sigma`.
//!
//! Error statistics cover the epochs that have truth (see [`super::truth`])
//! and a usable estimate, i.e. status `ok` or `degraded`; `unobservable` and
//! `insufficient` epochs carry a previous estimate and are left out. `p95` is
//! the nearest-rank 95th percentile (the smallest error at or above which 5 %
//! of the epochs lie). `within_3sigma` is the share of those epochs with
//! `δθᵀ P⁻¹ δθ <= 14.156` (χ², 3 degrees of freedom, probability of ±3σ).

use std::collections::BTreeMap;
use std::fmt::Write as _;

use serde::{Deserialize, Serialize};
use wahbad_protocol::{Alert, AlertState, Solution, SolutionStatus};

/// `inlier_fraction` of the summary.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InlierStats {
    /// Smallest window inlier fraction over the epochs.
    pub min: Option<f64>,
    /// Mean over the epochs.
    pub mean: Option<f64>,
}

/// One alert from raise to clear.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AlertSpan {
    /// Alert kind.
    pub kind: String,
    /// Sensor concerned, for per-sensor kinds.
    pub sensor: Option<String>,
    /// Data time it was raised, ns.
    pub raised: i64,
    /// Data time it was cleared, ns; `None` if it was still raised at the end.
    pub cleared: Option<i64>,
}

/// `error_arcsec` of the summary.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ErrorStats {
    /// Root mean square of the error angle.
    pub rms: f64,
    /// Nearest-rank 95th percentile.
    pub p95: f64,
    /// Largest error angle.
    pub max: f64,
}

/// What `--summary` writes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Summary {
    /// Epochs solved (solutions).
    pub epochs: u64,
    /// `obs` messages handed to the estimator.
    pub observations: u64,
    /// Records refused by the decoder, validation or the estimator.
    pub rejected: u64,
    /// Inputs the estimator dropped (too old for any window, or buffer overflow).
    pub dropped: u64,
    /// Solutions per status.
    pub status_counts: BTreeMap<String, u64>,
    /// Window inlier fraction over the epochs.
    pub inlier_fraction: InlierStats,
    /// Alerts in the order they were raised.
    pub alerts: Vec<AlertSpan>,
    /// Attitude error against truth, arcsec (only with truth).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub error_arcsec: Option<ErrorStats>,
    /// Share of judged epochs within 3σ (only with truth).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub within_3sigma: Option<f64>,
}

/// Every status, in the order the summary lists them.
pub const STATUSES: [SolutionStatus; 4] = [
    SolutionStatus::Ok,
    SolutionStatus::Degraded,
    SolutionStatus::Unobservable,
    SolutionStatus::Insufficient,
];

/// Counts the replay ends with, besides the outputs.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    /// `obs` messages handed to the estimator.
    pub observations: u64,
    /// Records refused (decoder, validation, estimator).
    pub rejected: u64,
    /// Inputs the estimator dropped.
    pub dropped: u64,
}

/// Pairs raises with their clears (same kind and sensor).
pub fn alert_spans(alerts: &[Alert]) -> Vec<AlertSpan> {
    let mut spans: Vec<AlertSpan> = Vec::new();
    for alert in alerts {
        match alert.state {
            AlertState::Raised => spans.push(AlertSpan {
                kind: alert.kind.clone(),
                sensor: alert.sensor.clone(),
                raised: alert.t,
                cleared: None,
            }),
            AlertState::Cleared => {
                if let Some(span) = spans.iter_mut().rev().find(|span| {
                    span.cleared.is_none() && span.kind == alert.kind && span.sensor == alert.sensor
                }) {
                    span.cleared = Some(alert.t);
                }
            }
        }
    }
    spans
}

/// Per epoch: the error angle (arcsec) and whether it is within 3σ, when judged.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EpochError {
    /// Error angle, arcsec.
    pub arcsec: f64,
    /// Within 3σ by the χ² rule (false when the covariance cannot be inverted).
    pub within_3sigma: bool,
}

impl Summary {
    /// Builds the summary; `errors` is `Some` (one entry per solution, `None`
    /// where not judged) when the log holds truth.
    pub fn build(
        solutions: &[Solution],
        alerts: &[Alert],
        counts: Counts,
        errors: Option<&[Option<EpochError>]>,
    ) -> Summary {
        let mut status_counts: BTreeMap<String, u64> = STATUSES
            .iter()
            .map(|status| (status.as_str().to_string(), 0))
            .collect();
        for solution in solutions {
            *status_counts
                .entry(solution.status.as_str().to_string())
                .or_default() += 1;
        }
        let fractions = solutions.iter().map(|s| s.inlier_fraction);
        let inlier_fraction = InlierStats {
            min: fractions.clone().reduce(f64::min),
            mean: (!solutions.is_empty()).then(|| fractions.sum::<f64>() / solutions.len() as f64),
        };
        let (error_arcsec, within_3sigma) = match errors {
            Some(errors) => {
                let judged: Vec<EpochError> = errors.iter().flatten().copied().collect();
                error_stats(&judged)
            }
            None => (None, None),
        };
        Summary {
            epochs: solutions.len() as u64,
            observations: counts.observations,
            rejected: counts.rejected,
            dropped: counts.dropped,
            status_counts,
            inlier_fraction,
            alerts: alert_spans(alerts),
            error_arcsec,
            within_3sigma,
        }
    }

    /// Whether any alert was raised.
    pub fn any_alert(&self) -> bool {
        !self.alerts.is_empty()
    }

    /// The human form printed at the end of a replay.
    pub fn human(&self) -> String {
        let mut text = String::new();
        let _ = writeln!(
            text,
            "epochs {}  observations {}  rejected {}  dropped {}",
            self.epochs, self.observations, self.rejected, self.dropped
        );
        let statuses: Vec<String> = self
            .status_counts
            .iter()
            .map(|(status, n)| format!("{status} {n}"))
            .collect();
        let _ = writeln!(text, "status: {}", statuses.join(", "));
        if let (Some(min), Some(mean)) = (self.inlier_fraction.min, self.inlier_fraction.mean) {
            let _ = writeln!(text, "inlier fraction: min {min:.3}, mean {mean:.3}");
        }
        if let Some(err) = &self.error_arcsec {
            let _ = writeln!(
                text,
                "error vs truth: rms {:.2}\", p95 {:.2}\", max {:.2}\"; within 3σ {:.2} %",
                err.rms,
                err.p95,
                err.max,
                100.0 * self.within_3sigma.unwrap_or(0.0)
            );
        }
        if self.alerts.is_empty() {
            let _ = writeln!(text, "alerts: none");
        } else {
            let _ = writeln!(text, "alerts: {}", self.alerts.len());
            for span in &self.alerts {
                let cleared = match span.cleared {
                    Some(t) => format!("cleared {:.3} s", t as f64 * 1e-9),
                    None => "still raised at the end".to_string(),
                };
                let _ = writeln!(
                    text,
                    "  {} {}: raised {:.3} s, {cleared}",
                    span.kind,
                    span.sensor.as_deref().unwrap_or("-"),
                    span.raised as f64 * 1e-9
                );
            }
        }
        text
    }
}

/// RMS, p95, max and the within-3σ share; `(None, None)` with nothing judged.
fn error_stats(judged: &[EpochError]) -> (Option<ErrorStats>, Option<f64>) {
    if judged.is_empty() {
        return (None, None);
    }
    let n = judged.len();
    let mut sorted: Vec<f64> = judged.iter().map(|e| e.arcsec).collect();
    sorted.sort_by(f64::total_cmp);
    let rms = (sorted.iter().map(|e| e * e).sum::<f64>() / n as f64).sqrt();
    let rank = (0.95 * n as f64).ceil() as usize;
    let p95 = sorted[rank.clamp(1, n) - 1];
    let within = judged.iter().filter(|e| e.within_3sigma).count() as f64 / n as f64;
    (
        Some(ErrorStats {
            rms,
            p95,
            max: sorted[n - 1],
        }),
        Some(within),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn alert(t: i64, kind: &str, sensor: Option<&str>, state: AlertState) -> Alert {
        Alert {
            t,
            kind: kind.into(),
            state,
            value: 0.0,
            threshold: 0.0,
            sensor: sensor.map(String::from),
            message: String::new(),
        }
    }

    #[test]
    fn raises_pair_with_their_own_clears() {
        let alerts = [
            alert(1, "sensor_inliers", Some("a"), AlertState::Raised),
            alert(2, "sensor_inliers", Some("b"), AlertState::Raised),
            alert(3, "sensor_inliers", Some("a"), AlertState::Cleared),
            alert(4, "stale", None, AlertState::Raised),
        ];
        let spans = alert_spans(&alerts);
        assert_eq!(spans.len(), 3);
        assert_eq!(spans[0].cleared, Some(3));
        assert_eq!(spans[1].cleared, None);
        assert_eq!(spans[2].sensor, None);
    }

    #[test]
    fn nearest_rank_percentile_and_share() {
        // 20 errors 1..=20: nearest rank ceil(0.95·20) = 19 → 19.
        let judged: Vec<EpochError> = (1..=20)
            .map(|k| EpochError {
                arcsec: k as f64,
                within_3sigma: k <= 18,
            })
            .collect();
        let (stats, within) = error_stats(&judged);
        let stats = stats.unwrap();
        assert_eq!(stats.p95, 19.0);
        assert_eq!(stats.max, 20.0);
        let rms = ((1..=20).map(|k| (k * k) as f64).sum::<f64>() / 20.0).sqrt();
        assert!((stats.rms - rms).abs() < 1e-12);
        assert_eq!(within, Some(0.9));
    }
}
