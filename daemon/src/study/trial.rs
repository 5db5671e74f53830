//! Synthetic trials: a random attitude, random reference directions, noisy
//! inliers and planted outliers.

use nalgebra::{UnitQuaternion, Vector3};
use rand::{Rng, RngExt};
use rand_distr::{Distribution, StandardNormal};

use crate::solve::Pair;

/// How outliers are made.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OutlierMode {
    /// Each outlier's `b` replaced by an independent uniformly random direction.
    Random,
    /// All outliers consistent with one wrong attitude (as a biased sensor
    /// would give): `b = A_wrong r` with the same noise as the inliers, the
    /// wrong attitude `5°`–`90°` away from the truth about a random axis.
    Structured,
}

impl OutlierMode {
    /// The mode's name on the command line.
    pub fn as_str(self) -> &'static str {
        match self {
            OutlierMode::Random => "random",
            OutlierMode::Structured => "structured",
        }
    }
}

/// One generated trial.
#[derive(Debug, Clone, PartialEq)]
pub struct Trial {
    /// The true attitude, `b ≈ A(truth) r` for inliers.
    pub truth: UnitQuaternion<f64>,
    /// The pairs handed to the solvers, outliers at random positions.
    pub pairs: Vec<Pair>,
    /// Whether each pair is a true inlier.
    pub is_inlier: Vec<bool>,
}

impl Trial {
    /// The true inliers alone.
    pub fn inlier_pairs(&self) -> Vec<Pair> {
        self.pairs
            .iter()
            .zip(&self.is_inlier)
            .filter(|(_, &ok)| ok)
            .map(|(p, _)| *p)
            .collect()
    }
}

/// What to generate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrialSpec {
    /// Pairs in the trial.
    pub n: usize,
    /// Number of them that are outliers (`<= n`).
    pub n_outliers: usize,
    /// 1-σ angular noise of every pair, radians.
    pub sigma: f64,
    /// How outliers are made.
    pub outlier_mode: OutlierMode,
}

/// A uniformly distributed unit vector.
pub fn random_direction<R: Rng + ?Sized>(rng: &mut R) -> Vector3<f64> {
    loop {
        let v = Vector3::new(normal(rng), normal(rng), normal(rng));
        let norm = v.norm();
        // Normalising a Gaussian vector gives a uniform direction; reject the
        // (practically impossible) near-zero draw instead of dividing by it.
        if norm > 1e-6 {
            return v / norm;
        }
    }
}

/// A uniformly distributed rotation (normalised 4-D Gaussian, Haar measure).
pub fn random_rotation<R: Rng + ?Sized>(rng: &mut R) -> UnitQuaternion<f64> {
    loop {
        let q = nalgebra::Quaternion::new(normal(rng), normal(rng), normal(rng), normal(rng));
        if q.norm() > 1e-6 {
            return UnitQuaternion::from_quaternion(q);
        }
    }
}

/// `u` deflected by isotropic tangent-plane noise of 1-σ `sigma` per axis:
/// the deflection angle is Rayleigh distributed, as the χ² 2-dof gate assumes.
pub fn perturb<R: Rng + ?Sized>(u: &Vector3<f64>, sigma: f64, rng: &mut R) -> Vector3<f64> {
    let (e1, e2) = tangent_basis(u);
    let t = (e1 * normal(rng) + e2 * normal(rng)) * sigma;
    let angle = t.norm();
    if angle == 0.0 {
        return *u;
    }
    (u * angle.cos() + t * (angle.sin() / angle)).normalize()
}

/// Generates one trial from `rng`.
pub fn generate<R: Rng + ?Sized>(spec: &TrialSpec, rng: &mut R) -> Trial {
    let truth = random_rotation(rng);
    let n_outliers = spec.n_outliers.min(spec.n);
    let wrong = match spec.outlier_mode {
        OutlierMode::Random => None,
        OutlierMode::Structured => {
            let angle = rng.random_range(5.0f64..90.0).to_radians();
            let axis = nalgebra::Unit::new_unchecked(random_direction(rng));
            Some(UnitQuaternion::from_axis_angle(&axis, angle) * truth)
        }
    };

    let mut is_inlier = vec![true; spec.n];
    // Partial Fisher–Yates: pick which positions hold the outliers.
    let mut order: Vec<usize> = (0..spec.n).collect();
    for k in 0..n_outliers {
        let j = rng.random_range(k..spec.n);
        order.swap(k, j);
        is_inlier[order[k]] = false;
    }

    let pairs = is_inlier
        .iter()
        .map(|&inlier| {
            let r = random_direction(rng);
            let b = match (inlier, wrong) {
                (true, _) => perturb(&(truth * r), spec.sigma, rng),
                (false, Some(wrong)) => perturb(&(wrong * r), spec.sigma, rng),
                (false, None) => random_direction(rng),
            };
            Pair {
                b,
                r,
                sigma: spec.sigma,
            }
        })
        .collect();
    Trial {
        truth,
        pairs,
        is_inlier,
    }
}

fn normal<R: Rng + ?Sized>(rng: &mut R) -> f64 {
    StandardNormal.sample(rng)
}

/// Two unit vectors completing `u` to a right-handed orthonormal basis.
fn tangent_basis(u: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
    // Cross with the axis least aligned with u, so the product is well conditioned.
    let helper = if u.x.abs() < 0.6 {
        Vector3::x()
    } else {
        Vector3::y()
    };
    let e1 = u.cross(&helper).normalize();
    let e2 = u.cross(&e1);
    (e1, e2)
}

#[cfg(test)]
mod tests {
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    use super::*;

    fn spec(n: usize, n_outliers: usize, mode: OutlierMode) -> TrialSpec {
        TrialSpec {
            n,
            n_outliers,
            sigma: 1e-3,
            outlier_mode: mode,
        }
    }

    #[test]
    fn plants_the_requested_outliers_and_unit_vectors() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let trial = generate(&spec(50, 35, OutlierMode::Random), &mut rng);
        assert_eq!(trial.pairs.len(), 50);
        assert_eq!(trial.is_inlier.iter().filter(|&&ok| !ok).count(), 35);
        for p in &trial.pairs {
            assert!((p.b.norm() - 1.0).abs() < 1e-12 && (p.r.norm() - 1.0).abs() < 1e-12);
        }
        // Inliers sit within a few σ of the truth (6σ: Rayleigh tail e^-18).
        for p in trial.inlier_pairs() {
            assert!((trial.truth * p.r).angle(&p.b) < 6e-3);
        }
    }

    #[test]
    fn structured_outliers_agree_with_one_wrong_attitude() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let trial = generate(&spec(40, 20, OutlierMode::Structured), &mut rng);
        let outliers: Vec<Pair> = trial
            .pairs
            .iter()
            .zip(&trial.is_inlier)
            .filter(|(_, &ok)| !ok)
            .map(|(p, _)| *p)
            .collect();
        // Every outlier is far from the truth (≥ 5° rotation moves most
        // directions by more than 6σ = 0.34°; allow a few near the axis) ...
        let far = outliers
            .iter()
            .filter(|p| (trial.truth * p.r).angle(&p.b) > 6e-3)
            .count();
        assert!(far >= outliers.len() - 3, "{far} of {}", outliers.len());
        // ... yet two outliers determine the wrong attitude and it explains the rest.
        let (a, b) = (outliers[0], outliers[1]);
        let wrong = triad(&a, &b);
        for p in &outliers {
            assert!(
                (wrong * p.r).angle(&p.b) < 0.05,
                "{}",
                (wrong * p.r).angle(&p.b)
            );
        }
    }

    #[test]
    fn perturbation_has_the_stated_spread() {
        // E[θ²] = 2σ² for isotropic 2-D tangent noise.
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let u = Vector3::new(0.3, -0.4, 0.5).normalize();
        let sigma = 1e-3;
        let n = 20_000;
        let mean_sq: f64 = (0..n)
            .map(|_| perturb(&u, sigma, &mut rng).angle(&u).powi(2))
            .sum::<f64>()
            / n as f64;
        let ratio = mean_sq / (2.0 * sigma * sigma);
        assert!((ratio - 1.0).abs() < 0.05, "{ratio}");
    }

    #[test]
    fn same_seed_same_trial() {
        let s = spec(20, 5, OutlierMode::Random);
        let a = generate(&s, &mut ChaCha8Rng::seed_from_u64(42));
        let b = generate(&s, &mut ChaCha8Rng::seed_from_u64(42));
        assert_eq!(a, b);
    }

    /// Independent two-vector attitude (TRIAD), so the check does not lean on the solvers.
    fn triad(a: &Pair, b: &Pair) -> UnitQuaternion<f64> {
        let frame = |u: Vector3<f64>, v: Vector3<f64>| {
            let t2 = u.cross(&v).normalize();
            nalgebra::Matrix3::from_columns(&[u, t2, u.cross(&t2)])
        };
        let m = frame(a.b, b.b) * frame(a.r, b.r).transpose();
        UnitQuaternion::from_matrix(&m)
    }
}
