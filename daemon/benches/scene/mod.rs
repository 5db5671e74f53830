//! The bench scene shared by the estimator benches: star tracker (5 stars
//! at 10 Hz), sun sensor (50 Hz), magnetometer (100 Hz, 5 % outliers), gyro
//! (100 Hz), slow slew; span 1 s, period 100 ms, so every window holds 200
//! observations (2,000 when `dense`).

// Each bench uses part of the scene.
#![allow(dead_code)]

use nalgebra::{UnitQuaternion, Vector3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use wahbad::estimator::{Estimator, EstimatorConfig, Input};
use wahbad::{Method, Pair};
use wahbad_protocol::{ValidObs, ValidRate};

pub const MS: i64 = 1_000_000;

pub fn gauss(rng: &mut ChaCha8Rng) -> f64 {
    let u1 = 1.0 - rng.random::<f64>();
    let u2 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

pub fn unit(rng: &mut ChaCha8Rng) -> Vector3<f64> {
    Vector3::new(gauss(rng), gauss(rng), gauss(rng)).normalize()
}

pub fn noisy(rng: &mut ChaCha8Rng, v: Vector3<f64>, sigma: f64) -> Vector3<f64> {
    (v + Vector3::new(gauss(rng), gauss(rng), gauss(rng)) * (sigma / 2f64.sqrt())).normalize()
}

/// Inputs of the bench scene for `duration_ms`, in time order; `dense`
/// multiplies every vector sensor's rate by ten (2,000 observations a second).
pub fn scene(duration_ms: i64, dense: bool) -> Vec<Input> {
    let x = if dense { 10 } else { 1 };
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let w = Vector3::new(0.01, 0.02, -0.03);
    let q0 = UnitQuaternion::from_scaled_axis(Vector3::new(0.3, 0.2, -0.1));
    let stars: Vec<Vector3<f64>> = (0..40).map(|_| unit(&mut rng)).collect();
    let (sun, mag) = (
        Vector3::new(0.3, -0.5, 0.8).normalize(),
        Vector3::new(0.2, 0.9, -0.4).normalize(),
    );
    let mut inputs = Vec::new();
    let mut seqs = [0u64; 4];
    let mut push_obs = |inputs: &mut Vec<Input>,
                        idx: usize,
                        name: &str,
                        t: i64,
                        b: Vector3<f64>,
                        r: Vector3<f64>,
                        sigma: f64| {
        inputs.push(Input::Obs(ValidObs {
            sensor: name.into(),
            seq: seqs[idx],
            t,
            b: b.into(),
            r: r.into(),
            sigma: Some(sigma),
        }));
        seqs[idx] += 1;
    };
    let mut gyro_seq = 0;
    for ms in 0..duration_ms {
        let t = ms * MS;
        let a = UnitQuaternion::from_scaled_axis(-w * (ms as f64 * 1e-3)) * q0;
        if ms % 10 == 0 {
            inputs.push(Input::Rate(ValidRate {
                sensor: "gyro".into(),
                seq: gyro_seq,
                t,
                w: w.into(),
            }));
            gyro_seq += 1;
        }
        if ms % 100 == 3 {
            for k in 0..5 * x {
                let r = stars[(ms as usize / 100 * 5 * x + k) % stars.len()];
                let b = noisy(&mut rng, a * r, 2e-4);
                push_obs(&mut inputs, 0, "st", t, b, r, 2e-4);
            }
        }
        // Dense: the sun and magnetometer samples come in bursts of ten.
        if ms % 20 == 7 {
            for _ in 0..x {
                let b = noisy(&mut rng, a * sun, 1e-3);
                push_obs(&mut inputs, 1, "sun", t, b, sun, 1e-3);
            }
        }
        if ms % 10 == 5 {
            for _ in 0..x {
                let b = if rng.random::<f64>() < 0.05 {
                    unit(&mut rng)
                } else {
                    noisy(&mut rng, a * mag, 3e-3)
                };
                push_obs(&mut inputs, 2, "mag", t, b, mag, 3e-3);
            }
        }
    }
    inputs
}

/// Seconds of inputs after the warm-up in one steady-state run.
pub const RUN_S: i64 = 30;

/// Seconds of inputs the warm-up feeds: past the first lap of the
/// estimator's ring buffers (10,000 observations: 50 s at 200 a second;
/// 4,000 rate samples: 40 s at 100 Hz), so that the timed epochs do not
/// touch fresh pages of them for the first time, as a long `serve` run
/// does not.
pub const WARM_S: i64 = 60;

/// An estimator fed the first `WARM_S` seconds, and the inputs of the following
/// `RUN_S` seconds cut into 100 ms chunks (each closes one epoch);
/// `verdicts`: whether solutions carry them (`serve` builds them only while
/// a subscriber wants them).
pub fn warmed(method: Method, dense: bool, verdicts: bool) -> (Estimator, Vec<Vec<Input>>) {
    let inputs = scene((WARM_S + RUN_S) * 1_000, dense);
    let config = EstimatorConfig {
        method,
        ..EstimatorConfig::default()
    };
    let mut estimator = Estimator::new(config).unwrap();
    estimator.set_verdicts(verdicts);
    let mut out = Vec::new();
    let mut chunks: Vec<Vec<Input>> = Vec::new();
    for input in inputs {
        let t = input_t(&input);
        if t < WARM_S * 1_000 * MS {
            estimator.ingest(input, &mut out).unwrap();
            out.clear();
            continue;
        }
        let chunk_idx = ((t - WARM_S * 1_000 * MS) / (100 * MS)) as usize;
        if chunks.len() <= chunk_idx {
            chunks.resize_with(chunk_idx + 1, Vec::new);
        }
        chunks[chunk_idx].push(input);
    }
    (estimator, chunks)
}

pub fn input_t(input: &Input) -> i64 {
    match input {
        Input::Obs(o) => o.t,
        Input::Rate(r) => r.t,
        Input::Truth(t) => t.t,
        Input::Tick(t) => *t,
    }
}

/// The pairs of one window the benched epochs solve (E = `WARM_S`): `E - 1 s < t <= E`.
pub fn window_pairs(dense: bool) -> Vec<Pair> {
    let inputs = scene(WARM_S * 1_000 + 200, dense);
    let epoch = WARM_S * 1_000 * MS;
    inputs
        .iter()
        .filter_map(|i| match i {
            Input::Obs(o) if o.t > epoch - 1_000 * MS && o.t <= epoch => Some(Pair {
                b: Vector3::from(o.b),
                r: Vector3::from(o.r),
                sigma: o.sigma.unwrap(),
            }),
            _ => None,
        })
        .collect()
}
