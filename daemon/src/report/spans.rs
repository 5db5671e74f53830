//! Time structure the report draws besides the series: alert spans (raised →
//! cleared), per-sensor outlier epochs and the status of each epoch.

use wahbad_protocol::{Alert, AlertState, Solution, SolutionStatus};

/// One raised-to-cleared interval of an alert, in data seconds.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct AlertSpan {
    pub kind: String,
    pub sensor: Option<String>,
    pub start_s: f64,
    pub end_s: f64,
    /// Still raised when the data ended.
    pub open: bool,
    /// Cleared without a raise in the log (raised before it started).
    pub raised_before_start: bool,
}

/// Pairs raises with clears per (kind, sensor). An alert still raised at the
/// end runs to `end_s`; a clear with no raise before it starts at `start_s`;
/// a second raise while one is open is ignored. Spans come in the order their
/// (kind, sensor) first appears, then by time.
pub(crate) fn alert_spans(alerts: &[Alert], start_s: f64, end_s: f64) -> Vec<AlertSpan> {
    let mut ordered: Vec<&Alert> = alerts.iter().collect();
    ordered.sort_by_key(|a| a.t);
    let mut keys: Vec<(String, Option<String>)> = Vec::new();
    let mut open: Vec<Option<f64>> = Vec::new();
    let mut spans: Vec<(usize, AlertSpan)> = Vec::new();
    for alert in ordered {
        let key = (alert.kind.clone(), alert.sensor.clone());
        let key_idx = keys.iter().position(|k| *k == key).unwrap_or_else(|| {
            keys.push(key);
            open.push(None);
            keys.len() - 1
        });
        let t_s = alert.t as f64 * 1e-9;
        match (alert.state, open[key_idx]) {
            (AlertState::Raised, None) => open[key_idx] = Some(t_s),
            (AlertState::Raised, Some(_)) => {}
            (AlertState::Cleared, raised) => {
                spans.push((
                    key_idx,
                    AlertSpan {
                        kind: alert.kind.clone(),
                        sensor: alert.sensor.clone(),
                        start_s: raised.unwrap_or(start_s),
                        end_s: t_s,
                        open: false,
                        raised_before_start: raised.is_none(),
                    },
                ));
                open[key_idx] = None;
            }
        }
    }
    for (key_idx, raised) in open.iter().enumerate() {
        if let Some(raised) = raised {
            let (kind, sensor) = keys[key_idx].clone();
            spans.push((
                key_idx,
                AlertSpan {
                    kind,
                    sensor,
                    start_s: *raised,
                    end_s: end_s.max(*raised),
                    open: true,
                    raised_before_start: false,
                },
            ));
        }
    }
    spans.sort_by(|a, b| a.0.cmp(&b.0).then(a.1.start_s.total_cmp(&b.1.start_s)));
    spans.into_iter().map(|(_, span)| span).collect()
}

/// Sensor ids in order of first appearance (per-sensor counts, then verdicts).
pub(crate) fn sensor_names(solutions: &[Solution]) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for solution in solutions {
        let from_counts = solution.sensors.iter().map(|c| &c.sensor);
        let from_verdicts = solution.verdicts.iter().flatten().map(|v| v.sensor);
        for name in from_counts.chain(from_verdicts) {
            if !names.iter().any(|n| n == name) {
                names.push(name.to_string());
            }
        }
    }
    names
}

/// Whether `sensor` had at least one outlier in this solution's window: its
/// count shows fewer inliers than observations, or a verdict says so.
pub(crate) fn has_outliers(solution: &Solution, sensor: &str) -> bool {
    let by_count = solution
        .sensors
        .iter()
        .any(|c| c.sensor == sensor && c.n_inliers < c.n);
    let by_verdict = solution
        .verdicts
        .iter()
        .flatten()
        .any(|v| v.sensor == sensor && !v.inlier);
    by_count || by_verdict
}

/// The worse of two statuses, for a column holding several epochs.
pub(crate) fn worse(a: SolutionStatus, b: SolutionStatus) -> SolutionStatus {
    fn rank(s: SolutionStatus) -> u8 {
        match s {
            SolutionStatus::Ok => 0,
            SolutionStatus::Degraded => 1,
            SolutionStatus::Unobservable => 2,
            SolutionStatus::Insufficient => 3,
        }
    }
    if rank(b) > rank(a) {
        b
    } else {
        a
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn alert(t_s: f64, kind: &str, sensor: Option<&str>, state: AlertState) -> Alert {
        Alert {
            t: (t_s * 1e9) as i64,
            kind: kind.into(),
            state,
            value: 0.5,
            threshold: 0.7,
            sensor: sensor.map(Into::into),
            message: String::new(),
        }
    }

    #[test]
    fn pairs_raise_and_clear_per_kind_and_sensor() {
        let alerts = [
            alert(2.0, "sensor_inliers", Some("sun"), AlertState::Raised),
            alert(3.0, "inlier_fraction", None, AlertState::Raised),
            alert(4.0, "sensor_inliers", Some("mag"), AlertState::Cleared),
            alert(5.0, "sensor_inliers", Some("sun"), AlertState::Raised),
            alert(6.0, "sensor_inliers", Some("sun"), AlertState::Cleared),
            alert(7.0, "sensor_inliers", Some("sun"), AlertState::Raised),
        ];
        let spans = alert_spans(&alerts, 0.0, 10.0);
        let span = |kind: &str, sensor: Option<&str>, start_s, end_s, open, before| AlertSpan {
            kind: kind.into(),
            sensor: sensor.map(Into::into),
            start_s,
            end_s,
            open,
            raised_before_start: before,
        };
        assert_eq!(
            spans,
            vec![
                span("sensor_inliers", Some("sun"), 2.0, 6.0, false, false),
                span("sensor_inliers", Some("sun"), 7.0, 10.0, true, false),
                span("inlier_fraction", None, 3.0, 10.0, true, false),
                span("sensor_inliers", Some("mag"), 0.0, 4.0, false, true),
            ]
        );
    }

    #[test]
    fn worst_status_wins() {
        use SolutionStatus::*;
        assert_eq!(worse(Ok, Degraded), Degraded);
        assert_eq!(worse(Insufficient, Unobservable), Insufficient);
        assert_eq!(worse(Ok, Ok), Ok);
    }
}
