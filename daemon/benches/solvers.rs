//! Criterion benches of the solvers: every method at N = 10, 100, 1000
//! (σ = 1e-4 rad, 30 % random outliers), `auto` warm vs cold against plain
//! least squares at a window of 200 (10 % outliers), cold `consensus` at
//! N = 200 with 95 % outliers, and `assess` at N = 200. Short sampling so the
//! whole run takes about a minute.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion};
use nalgebra::{UnitQuaternion, Vector3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use wahbad::{assess, Method, Pair, SolveParams, Solver};

fn unit(rng: &mut ChaCha8Rng) -> Vector3<f64> {
    loop {
        let v = Vector3::new(
            rng.random_range(-1.0..1.0),
            rng.random_range(-1.0..1.0),
            rng.random_range(-1.0..1.0),
        );
        let n = v.norm();
        if n > 0.1 && n <= 1.0 {
            return v / n;
        }
    }
}

/// `n` pairs seen at attitude `q`, σ = 1e-4 rad, the first `outlier_share·n` replaced by random directions.
fn scene(seed: u64, n: usize, outlier_share: f64) -> (UnitQuaternion<f64>, Vec<Pair>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let q = UnitQuaternion::from_scaled_axis(unit(&mut rng) * rng.random_range(0.0..3.0));
    let sigma = 1e-4;
    let n_out = (outlier_share * n as f64).round() as usize;
    let pairs = (0..n)
        .map(|i| {
            let r = unit(&mut rng);
            let b = if i < n_out {
                unit(&mut rng)
            } else {
                // Small-angle noise: perpendicular offset of size ~σ.
                let e = Vector3::new(
                    rng.random_range(-1.0..1.0),
                    rng.random_range(-1.0..1.0),
                    rng.random_range(-1.0..1.0),
                ) * (sigma * 1.7);
                (q * r + e).normalize()
            };
            Pair { b, r, sigma }
        })
        .collect();
    (q, pairs)
}

fn per_method(c: &mut Criterion) {
    let mut group = c.benchmark_group("solve");
    for n in [10usize, 100, 1000] {
        let (_, pairs) = scene(n as u64, n, 0.3);
        for method in Method::ALL {
            let mut solver = Solver::new(SolveParams::default());
            group.bench_with_input(
                BenchmarkId::new(method.as_str(), n),
                &pairs,
                |bch, pairs| {
                    bch.iter(|| solver.solve(black_box(pairs), method, None).expect("solve"))
                },
            );
        }
    }
    group.finish();
}

fn auto_warm_vs_cold(c: &mut Criterion) {
    let mut group = c.benchmark_group("window200");
    let (q, pairs) = scene(200, 200, 0.1);
    let mut solver = Solver::new(SolveParams::default());
    group.bench_function("ls", |bch| {
        bch.iter(|| {
            solver
                .solve(black_box(&pairs), Method::Ls, None)
                .expect("ls")
        })
    });
    group.bench_function("auto-warm", |bch| {
        bch.iter(|| {
            solver
                .solve(black_box(&pairs), Method::Auto, Some(&q))
                .expect("auto")
        })
    });
    group.bench_function("auto-cold", |bch| {
        bch.iter(|| {
            solver
                .solve(black_box(&pairs), Method::Auto, None)
                .expect("auto")
        })
    });
    group.bench_function("assess", |bch| {
        bch.iter(|| assess(black_box(&pairs), &q, solver.params().gate_k))
    });
    let (_, hard) = scene(201, 200, 0.95);
    group.bench_function("consensus-95pct-outliers", |bch| {
        bch.iter(|| {
            solver
                .solve(black_box(&hard), Method::Consensus, None)
                .expect("consensus")
        })
    });
    group.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(15)
        .warm_up_time(Duration::from_millis(200))
        .measurement_time(Duration::from_millis(800));
    targets = per_method, auto_warm_vs_cold
}
criterion_main!(benches);
