//! Alert sequences through the estimator: a scripted window inlier fraction
//! that dips, chatters around the level and recovers gives exactly one
//! `raised` and one `cleared` at the expected data times.

mod estimator_support;

use estimator_support::*;
use wahbad::estimator::{EstimatorConfig, Input, LevelConfig};
use wahbad_protocol::{AlertState, SolutionStatus};

/// Window inlier fraction per epoch; epoch `i` is at `(i + 1) · 100 ms`.
const SCRIPT: [f64; 23] = [
    0.9, 0.9, // fine
    0.5, 0.5, 0.5, // below for 200 ms: short of the 300 ms hold
    0.7, // streak broken
    0.5, 0.5, 0.5, 0.5, // below from 700 ms: raised at 1000 ms
    0.6, 0.6, 0.6, // at the level but under level + margin: stays raised
    0.5, 0.7, 0.7, 0.5, // clear streak from 1500 ms broken at 1700 ms
    0.7, 0.7, 0.7, 0.7, // clear streak from 1800 ms: cleared at 2100 ms
    0.5, 0.9, // one short dip: no new episode
];

#[test]
fn scripted_inlier_fraction_gives_one_episode_at_the_expected_times() {
    // Period = span = 100 ms so each window holds exactly its own 10 observations.
    let mut config = EstimatorConfig {
        period_ms: 100,
        span_ms: 100,
        ..EstimatorConfig::default()
    };
    config.alerts.inlier_fraction = LevelConfig {
        level: 0.6,
        margin: 0.05,
        hold_ms: 300,
    };
    let mut noise = Noise::new(3);
    let truth = noise.quaternion();
    let refs: Vec<_> = (0..10).map(|_| noise.unit_vector()).collect();
    let mut inputs = Vec::new();
    let (mut seq_good, mut seq_bad) = (0, 0);
    for (i, &fraction) in SCRIPT.iter().enumerate() {
        let epoch = (i as i64 + 1) * 100 * MS;
        let n_bad = ((1.0 - fraction) * 10.0).round() as usize;
        for (slot, r) in refs.iter().enumerate() {
            let t = epoch - 90 * MS + slot as i64 * 10 * MS;
            if slot < n_bad {
                // An outlier: unrelated body and reference directions.
                inputs.push(obs(
                    "bad",
                    seq_bad,
                    t,
                    noise.unit_vector(),
                    noise.unit_vector(),
                    1e-3,
                ));
                seq_bad += 1;
            } else {
                inputs.push(obs(
                    "good",
                    seq_good,
                    t,
                    noise.perturb(&(truth * r), 1e-3),
                    *r,
                    1e-3,
                ));
                seq_good += 1;
            }
        }
    }
    inputs.push(Input::Tick(2350 * MS));
    let (_, out) = run_fresh(&config, &inputs);
    let sols = solutions(&out);
    assert_eq!(sols.len(), SCRIPT.len());
    for (sol, &fraction) in sols.iter().zip(&SCRIPT) {
        assert!(
            (sol.inlier_fraction - fraction).abs() < 1e-12,
            "epoch {}: {}",
            sol.t,
            sol.inlier_fraction
        );
        let expected = if fraction < 0.6 {
            SolutionStatus::Degraded
        } else {
            SolutionStatus::Ok
        };
        assert_eq!(sol.status, expected, "epoch {}", sol.t);
    }
    assert_eq!(
        alert_events(&out, "inlier_fraction"),
        vec![
            (1000 * MS, AlertState::Raised, None),
            (2100 * MS, AlertState::Cleared, None)
        ]
    );
    let raised = alerts(&out)
        .into_iter()
        .find(|a| a.kind == "inlier_fraction")
        .unwrap();
    assert_eq!((raised.value, raised.threshold), (0.5, 0.6));
    // The all-outlier sensor has an inlier share of 0 whenever judged: one episode, never cleared.
    let bad: Vec<_> = alert_events(&out, "sensor_inliers");
    assert_eq!(bad.len(), 1, "{bad:?}");
    assert_eq!(
        (bad[0].1, bad[0].2.as_deref()),
        (AlertState::Raised, Some("bad"))
    );
}
