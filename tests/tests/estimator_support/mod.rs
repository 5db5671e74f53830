//! Shared scaffolding of the `estimator_*` tests: input constructors, a seeded
//! noise source, scenario helpers and the error statistics the checks use.
#![allow(dead_code)]

use nalgebra::{Matrix3, UnitQuaternion, Vector3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use wahbad::estimator::{Estimator, EstimatorConfig, Input, Output};
use wahbad_protocol::{Alert, AlertState, Solution, ValidObs, ValidRate};

/// Nanoseconds per millisecond.
pub const MS: i64 = 1_000_000;
/// Nanoseconds per second.
pub const S: i64 = 1_000_000_000;

/// An observation input, vectors normalised here as validation would.
pub fn obs(sensor: &str, seq: u64, t: i64, b: Vector3<f64>, r: Vector3<f64>, sigma: f64) -> Input {
    Input::Obs(ValidObs {
        sensor: sensor.into(),
        seq,
        t,
        b: b.normalize().into(),
        r: r.normalize().into(),
        sigma: Some(sigma),
    })
}

/// A rate input.
pub fn rate(sensor: &str, seq: u64, t: i64, w: Vector3<f64>) -> Input {
    Input::Rate(ValidRate {
        sensor: sensor.into(),
        seq,
        t,
        w: w.into(),
    })
}

/// Seeded noise source.
pub struct Noise(pub ChaCha8Rng);

impl Noise {
    pub fn new(seed: u64) -> Self {
        Noise(ChaCha8Rng::seed_from_u64(seed))
    }

    pub fn uniform(&mut self) -> f64 {
        self.0.random::<f64>()
    }

    /// Standard normal by Box–Muller.
    pub fn gauss(&mut self) -> f64 {
        let u1 = 1.0 - self.uniform(); // (0, 1]
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }

    pub fn unit_vector(&mut self) -> Vector3<f64> {
        loop {
            let v = Vector3::new(self.gauss(), self.gauss(), self.gauss());
            if v.norm() > 1e-3 {
                return v.normalize();
            }
        }
    }

    /// `v` turned by a small random angle of 1-σ `sigma` per tangent axis.
    pub fn perturb(&mut self, v: &Vector3<f64>, sigma: f64) -> Vector3<f64> {
        let mut axis = self.unit_vector().cross(v);
        while axis.norm() < 1e-6 {
            axis = self.unit_vector().cross(v);
        }
        let a = axis.normalize();
        let c = v.cross(&a).normalize();
        (v + a * (sigma * self.gauss()) + c * (sigma * self.gauss())).normalize()
    }

    pub fn quaternion(&mut self) -> UnitQuaternion<f64> {
        UnitQuaternion::from_scaled_axis(self.unit_vector() * (self.uniform() * 3.0))
    }
}

/// Feeds every input, panicking on a rejection, and returns all outputs.
pub fn run(estimator: &mut Estimator, inputs: &[Input]) -> Vec<Output> {
    let mut out = Vec::new();
    for input in inputs {
        estimator
            .ingest(input.clone(), &mut out)
            .unwrap_or_else(|e| panic!("rejected: {e}"));
    }
    out
}

/// A fresh estimator fed `inputs`.
pub fn run_fresh(config: &EstimatorConfig, inputs: &[Input]) -> (Estimator, Vec<Output>) {
    let mut estimator = Estimator::new(config.clone()).expect("config");
    let out = run(&mut estimator, inputs);
    (estimator, out)
}

pub fn solutions(out: &[Output]) -> Vec<&Solution> {
    out.iter()
        .filter_map(|o| match o {
            Output::Solution(s) => Some(s),
            _ => None,
        })
        .collect()
}

pub fn alerts(out: &[Output]) -> Vec<&Alert> {
    out.iter()
        .filter_map(|o| match o {
            Output::Alert(a) => Some(a),
            _ => None,
        })
        .collect()
}

/// `(t, state, sensor)` of the alerts of `kind`.
pub fn alert_events(out: &[Output], kind: &str) -> Vec<(i64, AlertState, Option<String>)> {
    alerts(out)
        .into_iter()
        .filter(|a| a.kind == kind)
        .map(|a| (a.t, a.state, a.sensor.clone()))
        .collect()
}

/// The solution's quaternion.
pub fn solution_q(solution: &Solution) -> UnitQuaternion<f64> {
    let [w, x, y, z] = solution.q;
    UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(w, x, y, z))
}

/// Body-frame attitude error per protocol § Conventions:
/// `A_true ≈ (I - [δθ×]) A_est`, so `A_est A_trueᵀ ≈ I + [δθ×]` and `δθ` is the
/// rotation vector of `q_est ⊗ q_true⁻¹`.
pub fn attitude_error(est: &UnitQuaternion<f64>, truth: &UnitQuaternion<f64>) -> Vector3<f64> {
    (est * truth.inverse()).scaled_axis()
}

pub fn cov_matrix(solution: &Solution) -> Matrix3<f64> {
    Matrix3::from_row_slice(&solution.cov)
}

/// Squared Mahalanobis distance `δθᵀ P⁻¹ δθ`.
pub fn mahalanobis2(err: &Vector3<f64>, cov: &Matrix3<f64>) -> f64 {
    let inv = cov.try_inverse().expect("covariance invertible");
    (err.transpose() * inv * err)[(0, 0)]
}

/// χ² (3 dof) quantile with the probability of ±3σ in one dimension, derived in
/// the test: Φ by Simpson integration of the normal density, then the 3-dof CDF
/// `F(x) = 2Φ(√x) − 1 − √(2x/π) e^{−x/2}` (chi-square with 3 dof, standard
/// closed form), solved for `F(x) = 2Φ(3) − 1` by bisection. About 14.16.
pub fn chi2_3dof_three_sigma() -> f64 {
    let phi = |z: f64| {
        let n = 20_000;
        let h = z / n as f64;
        let f = |x: f64| (-0.5 * x * x).exp() / (std::f64::consts::TAU).sqrt();
        let mut sum = f(0.0) + f(z);
        for i in 1..n {
            sum += f(i as f64 * h) * if i % 2 == 1 { 4.0 } else { 2.0 };
        }
        0.5 + sum * h / 3.0
    };
    let target = 2.0 * phi(3.0) - 1.0;
    let cdf = |x: f64| {
        2.0 * phi(x.sqrt()) - 1.0 - (2.0 * x / std::f64::consts::PI).sqrt() * (-x / 2.0).exp()
    };
    let (mut lo, mut hi) = (1.0, 40.0);
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if cdf(mid) < target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// A recorded bench scenario: inputs in arrival order and truth on a 1 ms grid.
pub struct Scenario {
    pub inputs: Vec<Input>,
    /// Truth attitude at every millisecond from 0.
    pub truth: Vec<UnitQuaternion<f64>>,
}

impl Scenario {
    pub fn truth_at(&self, t: i64) -> UnitQuaternion<f64> {
        assert_eq!(t % MS, 0, "truth is on the 1 ms grid");
        self.truth[(t / MS) as usize]
    }
}

/// Options of [`bench_scene`].
pub struct SceneOptions {
    pub seed: u64,
    pub duration_ms: i64,
    /// Body rate held over each 10 ms step, as a function of time in s. The
    /// motion is piecewise-constant rate at 100 Hz, so the gyro's zero-order
    /// hold is the exact model and only the gyro noise remains.
    pub rate: fn(f64) -> Vector3<f64>,
    /// Send the 100 Hz gyro samples.
    pub with_rates: bool,
    /// Gyro angle random walk, rad/√s (sample noise `arw / √0.01 s`).
    pub gyro_arw: f64,
    /// Share of the magnetometer's observations replaced by random directions.
    pub mag_outliers: f64,
}

/// Star tracker `st` (3 stars at 10 Hz, σ 2e-4), sun sensor `sun` (20 Hz, σ 1e-3),
/// magnetometer `mag` (50 Hz, σ 3e-3) and gyro `gyro` (100 Hz), in a lab frame
/// with fixed reference directions.
pub fn bench_scene(options: &SceneOptions) -> Scenario {
    let mut noise = Noise::new(options.seed);
    let q0 = noise.quaternion();
    let n_ms = options.duration_ms as usize + 1;
    let mut truth = Vec::with_capacity(n_ms);
    let mut q = q0;
    for ms in 0..n_ms {
        truth.push(q);
        // dA/dt = -[ω×]A: A(t + dt) = exp(-[ω×]dt) A(t), the smooth rate taken
        // at the middle of each 1 ms step; the gyro below samples it every
        // 10 ms, as a real one samples a continuously varying rate.
        let w = (options.rate)((ms as f64 + 0.5) * 1e-3);
        q = UnitQuaternion::from_scaled_axis(-w * 1e-3) * q;
    }
    let stars: Vec<Vector3<f64>> = (0..12).map(|_| noise.unit_vector()).collect();
    let sun_ref = Vector3::new(0.3, -0.5, 0.8).normalize();
    let mag_ref = Vector3::new(0.2, 0.9, -0.4).normalize();
    let mut inputs = Vec::new();
    let (mut seq_st, mut seq_sun, mut seq_mag, mut seq_gyro) = (0u64, 0u64, 0u64, 0u64);
    for ms in 0..=options.duration_ms {
        let t = ms * MS;
        let a = truth[ms as usize];
        if ms % 10 == 0 && options.with_rates {
            let w = (options.rate)(ms as f64 * 1e-3);
            let sd = options.gyro_arw / 0.01f64.sqrt();
            let measured = w + Vector3::new(noise.gauss(), noise.gauss(), noise.gauss()) * sd;
            inputs.push(rate("gyro", seq_gyro, t, measured));
            seq_gyro += 1;
        }
        if ms % 100 == 3 {
            for k in 0..3 {
                let r = stars[(ms as usize / 100 * 3 + k) % stars.len()];
                let b = noise.perturb(&(a * r), 2e-4);
                inputs.push(obs("st", seq_st, t, b, r, 2e-4));
                seq_st += 1;
            }
        }
        if ms % 50 == 7 {
            let b = noise.perturb(&(a * sun_ref), 1e-3);
            inputs.push(obs("sun", seq_sun, t, b, sun_ref, 1e-3));
            seq_sun += 1;
        }
        if ms % 20 == 11 {
            let b = if noise.uniform() < options.mag_outliers {
                noise.unit_vector()
            } else {
                noise.perturb(&(a * mag_ref), 3e-3)
            };
            inputs.push(obs("mag", seq_mag, t, b, mag_ref, 3e-3));
            seq_mag += 1;
        }
    }
    Scenario { inputs, truth }
}
