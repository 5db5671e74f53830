//! Criterion benches of the streaming estimator: the steady-state cost of one
//! epoch with a 200-observation window, `auto` against plain least squares,
//! and the same at 2,000 observations a window (`estimator_epoch_window2000`:
//! every vector sensor ten times as fast, the window of the live latency
//! figure at 2,000 observations a second).
//!
//! Scene: star tracker (5 stars at 10 Hz), sun sensor (50 Hz), magnetometer
//! (100 Hz, 5 % outliers), gyro (100 Hz), slow slew; span 1 s, period 100 ms,
//! so every window holds 200 observations. One iteration feeds the next 100 ms
//! of inputs (20 observations, 10 rate samples) to a warmed-up estimator, which
//! closes exactly one epoch; the estimator runs on from one iteration to the
//! next (steady state, warm buffers), and dropping the outputs is timed too.
//! (Cloning a warmed estimator per iteration, as an earlier version did, timed
//! the cloned buffers' first growth and cold caches rather than the epoch.) The bare solver on the same 200 pairs is benched
//! beside it, and a plain least-squares solve of the very window the epoch
//! closes (`solve_ls_same_window`) in the same group, for the ratio.

use std::hint::black_box;

use std::time::{Duration, Instant};

use criterion::{criterion_group, criterion_main, Criterion};
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

/// Inputs of the bench scene for `duration_ms`, in time order; `dense`
/// multiplies every vector sensor's rate by ten (2,000 observations a second).
fn scene(duration_ms: i64, dense: bool) -> Vec<Input> {
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
const RUN_S: i64 = 30;

/// Seconds of inputs the warm-up feeds: past the first lap of the
/// estimator's ring buffers (10,000 observations: 50 s at 200 a second;
/// 4,000 rate samples: 40 s at 100 Hz), so that the timed epochs do not
/// touch fresh pages of them for the first time, as a long `serve` run
/// does not.
const WARM_S: i64 = 60;

/// An estimator fed the first `WARM_S` seconds, and the inputs of the following
/// `RUN_S` seconds cut into 100 ms chunks (each closes one epoch);
/// `verdicts`: whether solutions carry them (`serve` builds them only while
/// a subscriber wants them).
fn warmed(method: Method, dense: bool, verdicts: bool) -> (Estimator, Vec<Vec<Input>>) {
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

fn input_t(input: &Input) -> i64 {
    match input {
        Input::Obs(o) => o.t,
        Input::Rate(r) => r.t,
        Input::Truth(t) => t.t,
        Input::Tick(t) => *t,
    }
}

fn bench_epoch(c: &mut Criterion) {
    epoch_group(c, false);
    epoch_group(c, true);
}

/// The epoch benches at 200 observations a window, or 2,000 when `dense` (a
/// busy bench at 2,000 observations a second, the live latency's window).
fn epoch_group(c: &mut Criterion, dense: bool) {
    let window = if dense { 2000 } else { 200 };
    let mut group = c.benchmark_group(format!("estimator_epoch_window{window}"));
    for (method, verdicts) in [
        (Method::Auto, true),
        (Method::Auto, false),
        (Method::Ls, true),
    ] {
        // Check the setting once: every chunk closes exactly one epoch with a
        // full window, warm after the first (`auto` stays `auto`).
        let (mut probe, chunks) = warmed(method, dense, verdicts);
        let mut out = Vec::new();
        for chunk in chunks.iter().take(20) {
            out.clear();
            for input in chunk {
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
            assert_eq!(sols[0].n, window, "window size");
            assert_eq!(sols[0].method, method.as_str());
            assert_eq!(sols[0].verdicts.is_some(), verdicts);
        }
        let name = match verdicts {
            true => format!("epoch_{}", method.as_str()),
            false => format!("epoch_{}_no_verdicts", method.as_str()),
        };
        // Steady state: one estimator fed chunk after chunk, its buffers warm,
        // as in `serve`. Timed: the ingest of one chunk and dropping its outputs;
        // not timed: making a fresh warmed estimator when a run's chunks are used up.
        group.bench_function(name, |bench| {
            bench.iter_custom(|iters| {
                let mut total = Duration::ZERO;
                let mut done = 0;
                let mut out = Vec::with_capacity(8);
                while done < iters {
                    let (mut estimator, chunks) = warmed(method, dense, verdicts);
                    for mut chunk in chunks.into_iter().take((iters - done) as usize) {
                        let start = Instant::now();
                        for input in chunk.drain(..) {
                            estimator.ingest(input, &mut out).unwrap();
                        }
                        out.clear();
                        total += start.elapsed();
                        done += 1;
                        // The chunk's own buffer is freed untimed.
                        drop(chunk);
                    }
                }
                total
            })
        });
    }
    // A plain least-squares solve of the same observations (unpropagated
    // vectors: the solve costs the same), beside the epochs.
    let pairs = window_pairs(dense);
    assert_eq!(pairs.len(), window as usize);
    let mut solver = Solver::new(SolveParams::default());
    group.bench_function("solve_ls_same_window", |bench| {
        bench.iter(|| solver.solve(black_box(&pairs), Method::Ls, None).unwrap())
    });
    group.finish();
}

/// The pairs of one window the benched epochs solve (E = `WARM_S`): `E - 1 s < t <= E`.
fn window_pairs(dense: bool) -> Vec<Pair> {
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

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(20)
        .warm_up_time(Duration::from_millis(300))
        .measurement_time(Duration::from_secs(1));
    targets = bench_epoch, bench_bare_solver
}
criterion_main!(benches);
