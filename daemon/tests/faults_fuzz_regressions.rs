//! Findings of the fuzz targets in `fuzz/`, kept as ordinary tests so they
//! stay fixed. Each names the target that found it and what went wrong.

use wahbad::estimator::{Estimator, EstimatorConfig, IngestError, Input, Output, SensorConfig};
use wahbad::solve::Method;
use wahbad_protocol::{validate_obs, validate_rate, Obs, Rate};

fn obs_at(t: i64, seq: u64) -> Input {
    Input::Obs(
        validate_obs(&Obs {
            sensor: "st1".into(),
            seq,
            t,
            b: [1.0, 0.0, 0.0],
            r: [1.0, 0.0, 0.0],
            sigma: None,
            token: None,
        })
        .unwrap(),
    )
}

fn config() -> EstimatorConfig {
    let mut config = EstimatorConfig {
        period_ms: 187,
        span_ms: 187,
        latency_ms: 166,
        method: Method::Svd,
        ..EstimatorConfig::default()
    };
    config.sensors.insert(
        "st1".into(),
        SensorConfig {
            sigma: Some(1e-4),
            expected_rate_hz: Some(10.0),
            ..SensorConfig::default()
        },
    );
    config
}

/// Target `estimator`: a tick at `i64::MAX`, then an observation at
/// `i64::MAX`, hung `ingest` for ever: the first epoch saturated at
/// `i64::MAX`, was always closable, and `epoch + period` saturated back to it.
#[test]
fn an_observation_at_the_end_of_the_i64_time_line_does_not_hang_the_estimator() {
    let mut estimator = Estimator::new(config()).unwrap();
    let mut out = Vec::new();
    estimator.ingest(Input::Tick(i64::MAX), &mut out).unwrap();
    estimator.ingest(obs_at(i64::MAX, 1), &mut out).unwrap();
    estimator.ingest(obs_at(i64::MAX, 2), &mut out).unwrap();
    estimator.ingest(Input::Tick(i64::MAX), &mut out).unwrap();
    let epochs: Vec<i64> = out
        .iter()
        .filter_map(|o| match o {
            Output::Solution(s) => Some(s.t),
            Output::Alert(_) => None,
        })
        .collect();
    // At most one epoch there, never solved twice.
    assert!(epochs.len() <= 1, "{epochs:?}");
}

/// The same at the other end: times near `i64::MIN`, then a jump to `i64::MAX`.
#[test]
fn a_jump_across_the_whole_i64_time_line_costs_a_bounded_number_of_solves() {
    let mut estimator = Estimator::new(config()).unwrap();
    let mut out = Vec::new();
    estimator.ingest(obs_at(i64::MIN + 5, 1), &mut out).unwrap();
    estimator.ingest(obs_at(i64::MAX - 5, 2), &mut out).unwrap();
    estimator.ingest(Input::Tick(i64::MAX), &mut out).unwrap();
    let n_solutions = out
        .iter()
        .filter(|o| matches!(o, Output::Solution(_)))
        .count();
    // Each observation's window can hold it in ceil(S/P) + 1 epochs at most.
    assert!((1..=4).contains(&n_solutions), "{n_solutions} solutions");
}

/// Target `estimator`: a finite but absurd rate (-5.5e303 rad/s) passed
/// validation, and carrying the previous estimate with it gave a solution
/// whose `q` was NaN. Such rates are now rejected; ordinary ones still work.
#[test]
fn an_absurd_rate_is_rejected_and_no_solution_is_nan() {
    let mut config = config();
    config.period_ms = 1;
    config.span_ms = 3;
    config.latency_ms = 0;
    let mut estimator = Estimator::new(config).unwrap();
    let mut out = Vec::new();
    let rate = |w: [f64; 3], seq: u64| {
        Input::Rate(
            validate_rate(&Rate {
                sensor: "gyro".into(),
                seq,
                t: -217_000_000,
                w,
                token: None,
            })
            .unwrap(),
        )
    };
    estimator.ingest(Input::Tick(0), &mut out).unwrap();
    let err = estimator
        .ingest(
            rate([-5.508893606288651e303, 4.7e-62, 4.7e-62], 1),
            &mut out,
        )
        .unwrap_err();
    assert!(matches!(err, IngestError::RateTooLarge { .. }), "{err}");
    estimator
        .ingest(rate([0.1, 0.0, 0.0], 2), &mut out)
        .unwrap();
    estimator.ingest(obs_at(-217_000_000, 1), &mut out).unwrap();
    estimator.ingest(Input::Tick(0), &mut out).unwrap();
    let solutions: Vec<_> = out
        .iter()
        .filter_map(|o| match o {
            Output::Solution(s) => Some(s),
            Output::Alert(_) => None,
        })
        .collect();
    assert!(solutions.len() >= 2, "{} solutions", solutions.len());
    for s in solutions {
        assert!(s.q.iter().all(|x| x.is_finite()), "{s:?}");
    }
}
