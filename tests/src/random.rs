//! Seeded random geometry shared by the solver cross-checks: unit vectors,
//! standard normal draws, and tangent-plane noise of the QUEST measurement model.

use nalgebra::Vector3;
use rand::RngExt;
use rand_chacha::ChaCha8Rng;

/// A uniformly distributed unit vector (rejection sampling in the unit ball).
pub fn unit(rng: &mut ChaCha8Rng) -> Vector3<f64> {
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

/// A standard normal draw (Box–Muller).
pub fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = rng.random_range(f64::EPSILON..1.0);
    let u2: f64 = rng.random_range(0.0..1.0);
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// `v` turned by a Gaussian tangent error of σ per axis (2 dof).
pub fn perturb(rng: &mut ChaCha8Rng, v: &Vector3<f64>, sigma: f64) -> Vector3<f64> {
    let e1 = v.cross(&unit(rng)).normalize();
    let e2 = v.cross(&e1);
    let d = (e1 * normal(rng) + e2 * normal(rng)) * sigma;
    let angle = d.norm();
    if angle == 0.0 {
        return *v;
    }
    (v * angle.cos() + d / angle * angle.sin()).normalize()
}
