//! Accuracy on a static multi-sensor bench scene with 30 % outliers on the
//! magnetometer: errors consistent with the reported covariance, and the faulty
//! sensor flagged by its `sensor_inliers` alert.

mod estimator_support;

use estimator_support::*;
use nalgebra::Vector3;
use wahbad::estimator::EstimatorConfig;
use wahbad_protocol::{AlertState, SolutionStatus};

#[test]
fn static_scene_with_an_outlier_sensor() {
    let scene = bench_scene(&SceneOptions {
        seed: 21,
        duration_ms: 30_000,
        rate: |_| Vector3::zeros(),
        with_rates: false,
        gyro_arw: 0.0,
        mag_outliers: 0.3,
    });
    let (estimator, out) = run_fresh(&EstimatorConfig::default(), &scene.inputs);
    let gate = chi2_3dof_three_sigma();
    let full: Vec<_> = solutions(&out).into_iter().filter(|s| s.t >= S).collect();
    assert!(full.len() >= 280, "{} epochs", full.len());
    let mut within = 0;
    for sol in &full {
        assert_eq!(sol.propagated, Some(false), "no rates: static window");
        assert_eq!(sol.status, SolutionStatus::Ok, "epoch {}", sol.t);
        let err = attitude_error(&solution_q(sol), &scene.truth_at(sol.t));
        if mahalanobis2(&err, &cov_matrix(sol)) <= gate {
            within += 1;
        }
    }
    let share = within as f64 / full.len() as f64;
    eprintln!("static scene: {} epochs, {share:.4} within 3σ", full.len());
    assert!(share >= 0.99, "{share:.4} of epochs within 3σ");

    let sensor_alerts = alert_events(&out, "sensor_inliers");
    assert!(
        sensor_alerts
            .first()
            .is_some_and(|a| a.1 == AlertState::Raised && a.2.as_deref() == Some("mag")),
        "{sensor_alerts:?}"
    );
    assert!(
        sensor_alerts.iter().all(|a| a.2.as_deref() == Some("mag")),
        "{sensor_alerts:?}"
    );
    assert!(alert_events(&out, "inlier_fraction").is_empty());
    assert_eq!(estimator.stats().rejected, 0);
}
