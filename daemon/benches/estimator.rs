//! Criterion benches of the streaming estimator: the steady-state cost of one
//! epoch with a 200-observation window, `auto` against plain least squares,
//! and the same at 2,000 observations a window (`estimator_epoch_window2000`:
//! every vector sensor ten times as fast, the window of the live latency
//! figure at 2,000 observations a second).
//!
//! Scene (`scene/mod.rs`, shared with the `epoch_ratio` bench): star tracker
//! (5 stars at 10 Hz), sun sensor (50 Hz), magnetometer (100 Hz, 5 %
//! outliers), gyro (100 Hz), slow slew; span 1 s, period 100 ms, so every
//! window holds 200 observations. One iteration feeds the next 100 ms
//! of inputs (20 observations, 10 rate samples) to a warmed-up estimator, which
//! closes exactly one epoch; the estimator runs on from one iteration to the
//! next (steady state, warm buffers), and dropping the outputs is timed too.
//! (Cloning a warmed estimator per iteration, as an earlier version did, timed
//! the cloned buffers' first growth and cold caches rather than the epoch.)
//! The bare solver on the same 200 pairs is benched beside it, and a plain least-squares solve of the very window the epoch
//! closes (`solve_ls_same_window`) in the same group, for the ratio.

use std::hint::black_box;

use std::time::{Duration, Instant};

use criterion::{criterion_group, criterion_main, Criterion};
use nalgebra::{UnitQuaternion, Vector3};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use wahbad::estimator::Output;
use wahbad::{Method, Pair, SolveParams, Solver};

mod scene;
use scene::{noisy, unit, warmed, window_pairs};

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
