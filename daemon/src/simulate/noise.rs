//! Angular noise on unit vectors.
//!
//! The measurement model is the one behind QUEST's covariance: the measured
//! direction is the true one turned by a small angle whose two components
//! perpendicular to it are independent Gaussians of standard deviation σ.
//! The turned angle then follows a Rayleigh law of scale σ.

use nalgebra::{Unit, UnitQuaternion, Vector3};
use rand::{Rng, RngExt};
use rand_distr::StandardNormal;

/// Two unit vectors perpendicular to `v` and to each other.
pub fn perpendicular_basis(v: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
    // Cross with the coordinate axis least aligned with v: never degenerate.
    let abs = v.abs();
    let helper = if abs.x <= abs.y && abs.x <= abs.z {
        Vector3::x()
    } else if abs.y <= abs.z {
        Vector3::y()
    } else {
        Vector3::z()
    };
    let e1 = v.cross(&helper).normalize();
    let e2 = v.cross(&e1).normalize();
    (e1, e2)
}

/// Two independent standard normal draws: the noise of one direction.
///
/// Drawn apart from where it is applied so that every sample draws the same
/// numbers whether or not it is sent or corrupted; a faulty run then matches
/// the nominal run with the same seed outside its faults.
pub fn draw<R: Rng + ?Sized>(rng: &mut R) -> [f64; 2] {
    [rng.sample(StandardNormal), rng.sample(StandardNormal)]
}

/// `v` (unit) turned by the angle whose two components perpendicular to it
/// are `noise · sigma` (rad).
pub fn apply(v: &Vector3<f64>, noise: [f64; 2], sigma: f64) -> Vector3<f64> {
    let (e1, e2) = perpendicular_basis(v);
    let delta = (e1 * noise[0] + e2 * noise[1]) * sigma;
    // Exact rotation by |delta| about v × delta/|delta|: the angle to v is exactly |delta|.
    UnitQuaternion::from_scaled_axis(v.cross(&delta)).transform_vector(v)
}

/// `v` (unit) turned by a random angle with 2-D Gaussian components of σ `sigma` (rad).
#[cfg(test)]
pub fn perturb<R: Rng + ?Sized>(rng: &mut R, v: &Vector3<f64>, sigma: f64) -> Vector3<f64> {
    apply(v, draw(rng), sigma)
}

/// A uniformly distributed unit vector.
pub fn random_direction<R: Rng + ?Sized>(rng: &mut R) -> Vector3<f64> {
    loop {
        let v = Vector3::new(
            rng.sample::<f64, _>(StandardNormal),
            rng.sample::<f64, _>(StandardNormal),
            rng.sample::<f64, _>(StandardNormal),
        );
        // A near-zero draw is astronomically rare; redraw rather than divide by it.
        if v.norm() > 1e-9 {
            return v.normalize();
        }
    }
}

/// `v` turned by `angle` radians about the unit `axis`.
pub fn rotate(v: &Vector3<f64>, axis: &Unit<Vector3<f64>>, angle: f64) -> Vector3<f64> {
    UnitQuaternion::from_axis_angle(axis, angle).transform_vector(v)
}

/// Angle between two vectors, radians, robust near 0 and π.
pub fn angle_between(a: &Vector3<f64>, b: &Vector3<f64>) -> f64 {
    a.cross(b).norm().atan2(a.dot(b))
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// Rayleigh law of scale σ (common practice for 2-D isotropic Gaussian
    /// noise): mean σ·√(π/2), P(angle > kσ) = exp(−k²/2).
    #[test]
    fn perturbation_angle_is_rayleigh() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let sigma = 1e-3;
        let n = 20_000;
        let v = Vector3::new(0.3, -0.4, 0.866).normalize();
        let mut sum = 0.0;
        let mut above_2 = 0usize;
        for _ in 0..n {
            let b = perturb(&mut rng, &v, sigma);
            assert!((b.norm() - 1.0).abs() < 1e-12);
            let angle = angle_between(&b, &v);
            sum += angle;
            if angle > 2.0 * sigma {
                above_2 += 1;
            }
        }
        let mean = sum / n as f64;
        let expected_mean = sigma * (std::f64::consts::PI / 2.0).sqrt();
        // Rayleigh std is σ·√(2 − π/2) ≈ 0.655σ; 5 standard errors.
        assert!((mean - expected_mean).abs() < 5.0 * 0.655 * sigma / (n as f64).sqrt());
        let share = above_2 as f64 / n as f64;
        let expected = (-2.0f64).exp(); // 0.1353
        assert!((share - expected).abs() < 5.0 * (expected * (1.0 - expected) / n as f64).sqrt());
    }

    #[test]
    fn basis_is_orthonormal() {
        for v in [
            Vector3::x(),
            Vector3::y(),
            Vector3::z(),
            Vector3::new(1.0, 1.0, 1.0).normalize(),
        ] {
            let (e1, e2) = perpendicular_basis(&v);
            assert!(
                e1.dot(&v).abs() < 1e-15 && e2.dot(&v).abs() < 1e-15 && e1.dot(&e2).abs() < 1e-15
            );
            assert!((e1.norm() - 1.0).abs() < 1e-15 && (e2.norm() - 1.0).abs() < 1e-15);
        }
    }
}
