//! Determinism: the same inputs give bit-identical outputs (MessagePack bytes),
//! across fresh estimators and across a clone taken mid-stream.

mod estimator_support;

use estimator_support::*;
use nalgebra::Vector3;
use wahbad::estimator::{Estimator, EstimatorConfig, Output};
use wahbad_protocol::Message;

fn encode(out: &[Output]) -> Vec<Vec<u8>> {
    out.iter()
        .map(|o| {
            let message = match o {
                Output::Solution(s) => Message::Solution(s.clone()),
                Output::Alert(a) => Message::Alert(a.clone()),
            };
            rmp_serde::to_vec_named(&message).expect("encodes")
        })
        .collect()
}

#[test]
fn same_inputs_same_bytes() {
    let scene = bench_scene(&SceneOptions {
        seed: 5,
        duration_ms: 6_000,
        rate: |t| Vector3::new(0.03 * t.sin(), -0.02, 0.06),
        with_rates: true,
        gyro_arw: 3e-5,
        mag_outliers: 0.3,
    });
    let config = EstimatorConfig::default();
    let (_, first) = run_fresh(&config, &scene.inputs);
    let (_, second) = run_fresh(&config, &scene.inputs);
    assert!(solutions(&first).len() >= 50);
    assert!(!alerts(&first).is_empty(), "the scene exercises alerts too");
    assert_eq!(encode(&first), encode(&second));

    // Clone mid-stream: both halves continue identically, and match the full run.
    let half = scene.inputs.len() / 2;
    let mut a = Estimator::new(config).unwrap();
    let mut head = run(&mut a, &scene.inputs[..half]);
    let mut b = a.clone();
    let tail_a = run(&mut a, &scene.inputs[half..]);
    let tail_b = run(&mut b, &scene.inputs[half..]);
    assert_eq!(encode(&tail_a), encode(&tail_b));
    head.extend(tail_a);
    assert_eq!(encode(&head), encode(&first));
}

#[test]
fn without_verdicts_only_the_verdicts_go() {
    let scene = bench_scene(&SceneOptions {
        seed: 9,
        duration_ms: 4_000,
        rate: |t| Vector3::new(0.02, 0.04 * t.cos(), -0.01),
        with_rates: true,
        gyro_arw: 3e-5,
        mag_outliers: 0.3,
    });
    let config = EstimatorConfig::default();
    let (_, with) = run_fresh(&config, &scene.inputs);
    let mut lean = Estimator::new(config).unwrap();
    lean.set_verdicts(false);
    let without = run(&mut lean, &scene.inputs);
    assert_eq!(with.len(), without.len());
    assert!(solutions(&with).len() >= 30);
    let stripped: Vec<Output> = with
        .into_iter()
        .map(|o| match o {
            Output::Solution(mut s) => {
                assert!(s.verdicts.is_some());
                s.verdicts = None;
                Output::Solution(s)
            }
            other => other,
        })
        .collect();
    assert_eq!(encode(&stripped), encode(&without));
}
