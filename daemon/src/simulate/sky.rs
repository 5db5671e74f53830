//! The star-field stimulator's catalogue: fixed random star directions.
//!
//! Stars are uniform on the sphere of the lab (reference) frame and drawn from
//! the scenario seed, so the field is the same on every run with that seed.
//! Catalogue order is brightness order: a frame reports the first visible
//! stars of the catalogue, as a camera keeps its brightest detections.

use nalgebra::Vector3;
use rand::{Rng, RngExt};

use super::noise::{angle_between, random_direction};

/// Expected number of stars in the field of view per star reported, on
/// average, so that a frame nearly always has its full count.
const STARS_IN_VIEW_PER_REPORTED: f64 = 4.0;
/// Smallest catalogue, whatever the field of view.
const MIN_CATALOGUE: usize = 64;
/// Draws tried when picking a misidentified star.
const MAX_WRONG_STAR_DRAWS: usize = 1000;

/// The stimulator's star field.
#[derive(Debug, Clone)]
pub struct Catalogue {
    stars: Vec<Vector3<f64>>,
}

impl Catalogue {
    /// Size that puts on average 4 × `stars_per_frame` stars inside a cone of
    /// `half_cone` radians (cone share of the sphere: (1 − cos h)/2).
    pub fn size_for(stars_per_frame: u32, half_cone: f64) -> usize {
        let share = (1.0 - half_cone.cos()) / 2.0;
        let n = STARS_IN_VIEW_PER_REPORTED * f64::from(stars_per_frame) / share;
        (n.ceil() as usize).max(MIN_CATALOGUE)
    }

    /// Draws `n_stars` uniform directions.
    pub fn generate<R: Rng + ?Sized>(rng: &mut R, n_stars: usize) -> Self {
        let stars = (0..n_stars).map(|_| random_direction(rng)).collect();
        Catalogue { stars }
    }

    /// Number of stars.
    pub fn len(&self) -> usize {
        self.stars.len()
    }

    /// Direction of star `star_idx` (reference frame, unit).
    pub fn star(&self, star_idx: usize) -> &Vector3<f64> {
        &self.stars[star_idx]
    }

    /// Appends to `out` the indices of stars within `half_cone` of `axis`
    /// (reference frame), in catalogue order, at most `max_stars`.
    pub fn visible(
        &self,
        axis: &Vector3<f64>,
        half_cone: f64,
        max_stars: usize,
        out: &mut Vec<usize>,
    ) {
        let cos_limit = half_cone.cos();
        let (x, y, z) = (axis.x, axis.y, axis.z);
        for (star_idx, star) in self.stars.iter().enumerate() {
            if out.len() >= max_stars {
                break;
            }
            // Written out: this scan is the simulator's hot loop, and the
            // generic `dot` costs several times more in unoptimised builds.
            if star.x * x + star.y * y + star.z * z >= cos_limit {
                out.push(star_idx);
            }
        }
    }

    /// A star at least `min_separation` rad from `direction`, picked at random:
    /// what a misidentification puts in place of the true star.
    /// Falls back to the antipode after a bounded number of draws (only
    /// reachable with a tiny catalogue crowded around `direction`).
    pub fn wrong_star<R: Rng + ?Sized>(
        &self,
        rng: &mut R,
        direction: &Vector3<f64>,
        min_separation: f64,
    ) -> Vector3<f64> {
        for _ in 0..MAX_WRONG_STAR_DRAWS {
            let star = &self.stars[rng.random_range(0..self.stars.len())];
            if angle_between(star, direction) >= min_separation {
                return *star;
            }
        }
        -direction
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    #[test]
    fn catalogue_fills_the_field() {
        let half_cone = 20f64.to_radians();
        let n = Catalogue::size_for(8, half_cone);
        let catalogue = Catalogue::generate(&mut ChaCha8Rng::seed_from_u64(3), n);
        assert_eq!(catalogue.len(), n);
        let mut rng = ChaCha8Rng::seed_from_u64(4);
        let mut visible = Vec::new();
        let mut full = 0;
        for _ in 0..200 {
            let axis = random_direction(&mut rng);
            visible.clear();
            catalogue.visible(&axis, half_cone, 8, &mut visible);
            for &star_idx in &visible {
                assert!(angle_between(catalogue.star(star_idx), &axis) <= half_cone + 1e-12);
            }
            if visible.len() == 8 {
                full += 1;
            }
        }
        // Derived: with a Poisson mean of 32 in view, fewer than 8 is ~1e-8 per frame.
        assert_eq!(full, 200);
    }
}
