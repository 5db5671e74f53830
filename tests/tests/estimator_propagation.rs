//! Rate propagation: a constant spin against its closed form, and a slewing
//! bench scene with and without rates.

mod estimator_support;

use estimator_support::*;
use nalgebra::{UnitQuaternion, Vector3};
use wahbad::estimator::propagate::{RateBuffer, RateSample};
use wahbad::estimator::{Estimator, EstimatorConfig};
use wahbad::Method;
use wahbad_protocol::SolutionStatus;

/// Closed form, derived in the test: with a constant body rate `ω`,
/// `dA/dt = -[ω×]A` gives `A(t) = exp(-[ω×] t) A(0)`, so a body vector seen at
/// `t` reads `b(E) = exp(-[ω×](E - t)) b(t)` at `E`: Rodrigues' formula with
/// axis `u = ω/|ω|` and angle `θ = -|ω|(E - t)`,
/// `R v = v cos θ + (u × v) sin θ + u (u·v)(1 - cos θ)`.
fn closed_form(w: &Vector3<f64>, dt_s: f64, v: &Vector3<f64>) -> Vector3<f64> {
    let u = w.normalize();
    let theta = -w.norm() * dt_s;
    v * theta.cos() + u.cross(v) * theta.sin() + u * u.dot(v) * (1.0 - theta.cos())
}

#[test]
fn closed_form_worked_example() {
    // Worked example: spin 0.5 rad/s about body z for 0.8 s. A fixed reference
    // direction seen along body x turns by -0.4 rad about z in the body frame:
    // (cos 0.4, -sin 0.4, 0).
    let b = closed_form(&Vector3::new(0.0, 0.0, 0.5), 0.8, &Vector3::x());
    let expected = Vector3::new(0.4f64.cos(), -(0.4f64.sin()), 0.0);
    assert!((b - expected).norm() < 1e-15);
}

#[test]
fn constant_spin_propagation_matches_closed_form() {
    let w = Vector3::new(0.3, -0.2, 0.9); // rad/s, |ω| ≈ 0.97
    let epoch = 2 * S;
    let mut rates = RateBuffer::default();
    // 100 Hz samples from 0.5 s to 2.05 s (some after the epoch, which must be ignored).
    for k in 50..=205 {
        rates.insert(RateSample { t: k * 10 * MS, w }, 1000);
    }
    let mut noise = Noise::new(7);
    let mut worst = 0.0f64;
    for _ in 0..200 {
        // Observation times off the sample grid, anywhere in (1 s, 2 s].
        let t = S + 1 + (noise.uniform() * (S - 1) as f64) as i64;
        let b_t = noise.unit_vector();
        let propagated = rates.carry(t, epoch) * b_t;
        let expected = closed_form(&w, (epoch - t) as f64 * 1e-9, &b_t);
        let angle = propagated
            .cross(&expected)
            .norm()
            .atan2(propagated.dot(&expected));
        worst = worst.max(angle);
    }
    assert!(worst < 1e-9, "worst propagation error {worst:e} rad");
}

#[test]
fn constant_spin_through_the_estimator_recovers_the_closed_form_attitude() {
    // Noise-free observations of three fixed directions taken at scattered
    // times while spinning; the epoch solution must equal A(E) = exp(-[ω×]E) A(0).
    let w = Vector3::new(0.0, 0.4, -0.7);
    let a0 = UnitQuaternion::from_scaled_axis(Vector3::new(0.4, 0.1, -0.3));
    let refs = [
        Vector3::x(),
        Vector3::new(0.0, 1.0, 1.0).normalize(),
        Vector3::new(-1.0, 0.2, 0.5).normalize(),
    ];
    let attitude = |t: i64| UnitQuaternion::from_scaled_axis(-w * (t as f64 * 1e-9)) * a0;
    let mut inputs = Vec::new();
    let (mut seq_rate, mut seq_obs) = (0, 0);
    for ms in 0..=1500i64 {
        let t = ms * MS;
        if ms % 10 == 0 {
            inputs.push(rate("gyro", seq_rate, t, w));
            seq_rate += 1;
        }
        if ms % 30 == 13 {
            let r = refs[(ms as usize / 30) % 3];
            inputs.push(obs("st", seq_obs, t, attitude(t) * r, r, 1e-4));
            seq_obs += 1;
        }
    }
    let config = EstimatorConfig {
        method: Method::Svd,
        gyro_arw: 0.0,
        ..EstimatorConfig::default()
    };
    let (_, out) = run_fresh(&config, &inputs);
    let sols = solutions(&out);
    assert!(sols.len() >= 10, "{} solutions", sols.len());
    for sol in sols.iter().filter(|s| s.n >= 10) {
        assert_eq!(sol.propagated, None, "rates were used");
        let err = attitude_error(&solution_q(sol), &attitude(sol.t)).norm();
        assert!(err < 1e-9, "epoch {}: error {err:e} rad", sol.t);
    }
}

fn slew(t: f64) -> Vector3<f64> {
    Vector3::new(0.02 * (0.4 * t).sin(), 0.05, 0.08 * (0.25 * t).cos())
}

/// Per-epoch (error angle, squared Mahalanobis distance) of solved epochs.
fn slew_errors(with_rates: bool) -> Vec<(f64, f64)> {
    let scene = bench_scene(&SceneOptions {
        seed: 11,
        duration_ms: 20_000,
        rate: slew,
        with_rates,
        gyro_arw: 3e-5,
        mag_outliers: 0.0,
    });
    let config = EstimatorConfig {
        gyro_arw: 3e-5,
        ..EstimatorConfig::default()
    };
    let mut estimator = Estimator::new(config).unwrap();
    let out = run(&mut estimator, &scene.inputs);
    solutions(&out)
        .into_iter()
        .filter(|s| s.t >= S) // full windows only
        .filter(|s| matches!(s.status, SolutionStatus::Ok | SolutionStatus::Degraded))
        .map(|s| {
            assert_eq!(s.propagated, if with_rates { None } else { Some(false) });
            let err = attitude_error(&solution_q(s), &scene.truth_at(s.t));
            (err.norm(), mahalanobis2(&err, &cov_matrix(s)))
        })
        .collect()
}

#[test]
fn slewing_scene_is_consistent_with_rates_and_drifts_without() {
    let gate = chi2_3dof_three_sigma();
    assert!((gate - 14.16).abs() < 0.01, "{gate}"); // about 14.16 (recalled from memory)
    let with = slew_errors(true);
    assert!(with.len() >= 180, "{} solved epochs", with.len());
    let within = with.iter().filter(|e| e.1 <= gate).count() as f64 / with.len() as f64;
    assert!(
        within >= 0.99,
        "with rates: {:.3} of epochs within 3σ",
        within
    );

    let without = slew_errors(false);
    let median = |v: &[(f64, f64)]| {
        let mut a: Vec<f64> = v.iter().map(|e| e.0).collect();
        a.sort_by(f64::total_cmp);
        a[a.len() / 2]
    };
    let (m_with, m_without) = (
        median(&with),
        if without.is_empty() {
            f64::INFINITY
        } else {
            median(&without)
        },
    );
    let within_static =
        without.iter().filter(|e| e.1 <= gate).count() as f64 / without.len().max(1) as f64;
    eprintln!(
        "slew: {} epochs with rates, {:.4} within 3σ, median error {m_with:.3e} rad; \
         without rates {} epochs, {within_static:.3} within 3σ, median {m_without:.3e} rad",
        with.len(),
        within,
        without.len()
    );
    assert!(
        m_without > 10.0 * m_with,
        "median error with rates {m_with:e}, without {m_without:e}"
    );
    assert!(
        within_static < 0.5,
        "without rates {within_static:.3} of epochs within 3σ"
    );
}
