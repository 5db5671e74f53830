//! Criterion benches of the streaming estimator: the steady-state cost of one
//! epoch with a 200-observation window, `auto` against plain least squares.
//!
//! Scene: star tracker (5 stars at 10 Hz), sun sensor (50 Hz), magnetometer
//! (100 Hz, 5 % outliers), gyro (100 Hz), slow slew; span 1 s, period 100 ms,
//! so every window holds 200 observations. One iteration feeds the next 100 ms
//! of inputs (20 observations, 10 rate samples) to a warmed-up estimator, which
//! closes exactly one epoch. The bare solver on the same 200 pairs is benched
//! beside it.

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, BatchSize, Criterion};
use nalgebra::{UnitQuaternion, Vector3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use wahbad::estimator::{Estimator, EstimatorConfig, Input, Output};
use wahbad::{Method, Pair, SolveParams, Solver};
use wahbad_protocol::{ValidObs, ValidRate};

const MS: i64 = 1_000_000;

fn gauss(rng: &mut ChaCha8Rng) -> f64 {
    let u1 = 1.0 - rng.random::<f64>();
    let u2 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

fn unit(rng: &mut ChaCha8Rng) -> Vector3<f64> {
    Vector3::new(gauss(rng), gauss(rng), gauss(rng)).normalize()
}

fn noisy(rng: &mut ChaCha8Rng, v: Vector3<f64>, sigma: f64) -> Vector3<f64> {
    (v + Vector3::new(gauss(rng), gauss(rng), gauss(rng)) * (sigma / 2f64.sqrt())).normalize()
}

/// Inputs of the bench scene for `duration_ms`, in time order.
fn scene(duration_ms: i64) -> Vec<Input> {
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
            for k in 0..5 {
                let r = stars[(ms as usize / 100 * 5 + k) % stars.len()];
                let b = noisy(&mut rng, a * r, 2e-4);
                push_obs(&mut inputs, 0, "st", t, b, r, 2e-4);
            }
        }
        if ms % 20 == 7 {
            let b = noisy(&mut rng, a * sun, 1e-3);
            push_obs(&mut inputs, 1, "sun", t, b, sun, 1e-3);
        }
        if ms % 10 == 5 {
            let b = if rng.random::<f64>() < 0.05 {
                unit(&mut rng)
            } else {
                noisy(&mut rng, a * mag, 3e-3)
            };
            push_obs(&mut inputs, 2, "mag", t, b, mag, 3e-3);
        }
    }
    inputs
}

/// An estimator fed the first 3 s, and the inputs of the next 100 ms.
fn warmed(method: Method) -> (Estimator, Vec<Input>) {
    let inputs = scene(3_200);
    let split = inputs
        .iter()
        .position(|i| input_t(i) >= 3_000 * MS)
        .unwrap();
    let end = inputs
        .iter()
        .position(|i| input_t(i) >= 3_100 * MS)
        .unwrap();
    let config = EstimatorConfig {
        method,
        ..EstimatorConfig::default()
    };
    let mut estimator = Estimator::new(config).unwrap();
    let mut out = Vec::new();
    for input in &inputs[..split] {
        estimator.ingest(input.clone(), &mut out).unwrap();
    }
    (estimator, inputs[split..end].to_vec())
}

fn input_t(input: &Input) -> i64 {
    match input {
        Input::Obs(o) => o.t,
        Input::Rate(r) => r.t,
        Input::Truth(t) => t.t,
        Input::Tick(t) => *t,
    }
}

fn bench_epoch(c: &mut Criterion) {
    let mut group = c.benchmark_group("estimator_epoch_window200");
    for method in [Method::Auto, Method::Ls] {
        let (estimator, next) = warmed(method);
        // Check the setting once: exactly one epoch with a 200-observation window.
        let mut probe = estimator.clone();
        let mut out = Vec::new();
        for input in &next {
            probe.ingest(input.clone(), &mut out).unwrap();
        }
        let sols: Vec<_> = out
            .iter()
            .filter_map(|o| match o {
                Output::Solution(s) => Some(s),
                _ => None,
            })
            .collect();
        assert_eq!(sols.len(), 1);
        assert_eq!(sols[0].n, 200, "window size");
        group.bench_function(method.as_str(), |bench| {
            bench.iter_batched(
                || (estimator.clone(), next.clone(), Vec::with_capacity(8)),
                |(mut estimator, next, mut out)| {
                    for input in next {
                        estimator.ingest(input, &mut out).unwrap();
                    }
                    black_box((estimator, out))
                },
                BatchSize::SmallInput,
            )
        });
    }
    group.finish();
}

fn bench_bare_solver(c: &mut Criterion) {
    // The same kind of window as bare pairs: 200 pairs, 5 % outliers.
    let mut rng = ChaCha8Rng::seed_from_u64(2);
    let truth = UnitQuaternion::from_scaled_axis(Vector3::new(0.3, 0.2, -0.1));
    let pairs: Vec<Pair> = (0..200)
        .map(|i| {
            let r = unit(&mut rng);
            let b = if i % 20 == 0 {
                unit(&mut rng)
            } else {
                noisy(&mut rng, truth * r, 1e-3)
            };
            Pair { b, r, sigma: 1e-3 }
        })
        .collect();
    let warm = UnitQuaternion::from_scaled_axis(Vector3::new(0.301, 0.2, -0.1));
    let mut group = c.benchmark_group("solver_window200");
    let mut solver = Solver::new(SolveParams::default());
    group.bench_function("ls", |bench| {
        bench.iter(|| solver.solve(black_box(&pairs), Method::Ls, None).unwrap())
    });
    group.bench_function("auto_warm", |bench| {
        bench.iter(|| {
            solver
                .solve(black_box(&pairs), Method::Auto, Some(&warm))
                .unwrap()
        })
    });
    group.finish();
}

criterion_group!(benches, bench_epoch, bench_bare_solver);
criterion_main!(benches);
