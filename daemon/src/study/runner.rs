//! The study runner: trials spread over the current rayon pool, results
//! independent of the thread count because every trial has its own seed.

use std::time::Instant;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::stats::{crb, median, quantile};
use super::trial::{generate, Trial, TrialSpec};
use super::{
    Row, SkippedCell, StudyConfig, StudyError, StudyMethod, StudyReport, SUCCESS_CRB_MULTIPLE,
};
use crate::solve::{Method, Solver};

/// The seed of trial `trial_idx` of cell (`n`, `share`), from the master seed.
///
/// Mixing the cell's values (not its position in the lists) means adding a
/// size or a share to a study leaves the other cells' trials unchanged.
pub fn trial_seed(seed: u64, n: usize, share: f64, trial_idx: usize) -> u64 {
    [n as u64, share.to_bits(), trial_idx as u64]
        .into_iter()
        .fold(splitmix64(seed), |h, v| splitmix64(h ^ v))
}

/// Redraws allowed for a trial whose true inliers do not determine the attitude.
const MAX_REDRAWS: u64 = 100;

/// One method's result on one trial.
#[derive(Debug, Clone, Copy)]
struct Sample {
    error_rad: f64,
    crb: f64,
    time_us: f64,
}

struct Cell {
    n: usize,
    share: f64,
    n_outliers: usize,
}

/// Runs the study on the current rayon pool (install a pool to choose the
/// thread count). `on_trial_done` is called once per finished trial, from
/// any thread, for progress display.
pub fn run(
    config: &StudyConfig,
    on_trial_done: &(dyn Fn() + Sync),
) -> Result<StudyReport, StudyError> {
    validate(config)?;
    let mut cells = Vec::new();
    let mut skipped = Vec::new();
    for &n in &config.sizes {
        for &share in &config.outlier_shares {
            let n_outliers = ((share * n as f64).round() as usize).min(n);
            if n - n_outliers < 2 {
                skipped.push(SkippedCell {
                    n,
                    outlier_share: share,
                    n_inliers: n - n_outliers,
                });
            } else {
                cells.push(Cell {
                    n,
                    share,
                    n_outliers,
                });
            }
        }
    }

    let jobs: Vec<(usize, usize)> = (0..cells.len())
        .flat_map(|c| (0..config.trials).map(move |t| (c, t)))
        .collect();
    let samples: Vec<Vec<Sample>> = jobs
        .par_iter()
        .map(|&(cell_idx, trial_idx)| {
            let out = run_trial(config, &cells[cell_idx], trial_idx);
            on_trial_done();
            out
        })
        .collect();

    let mut rows = Vec::new();
    for (cell_idx, cell) in cells.iter().enumerate() {
        let cell_samples = &samples[cell_idx * config.trials..(cell_idx + 1) * config.trials];
        for (method_idx, method) in config.methods.iter().enumerate() {
            let of_method: Vec<Sample> = cell_samples.iter().map(|s| s[method_idx]).collect();
            rows.push(summarise(*method, cell, &of_method));
        }
    }
    Ok(StudyReport { rows, skipped })
}

fn validate(config: &StudyConfig) -> Result<(), StudyError> {
    if config.sizes.is_empty() {
        return Err(StudyError::Empty("pair counts"));
    }
    if config.outlier_shares.is_empty() {
        return Err(StudyError::Empty("outlier shares"));
    }
    if config.methods.is_empty() {
        return Err(StudyError::Empty("methods"));
    }
    if config.trials == 0 {
        return Err(StudyError::Empty("trials"));
    }
    if let Some(&n) = config.sizes.iter().find(|&&n| n < 2) {
        return Err(StudyError::Size(n));
    }
    if let Some(&s) = config
        .outlier_shares
        .iter()
        .find(|s| !(0.0..1.0).contains(*s))
    {
        return Err(StudyError::Share(s));
    }
    if !(config.sigma > 0.0 && config.sigma < std::f64::consts::PI) {
        return Err(StudyError::Sigma(config.sigma));
    }
    Ok(())
}

/// Generates the trial (redrawing if its inliers leave the CRB undefined) and
/// runs every method on it.
fn run_trial(config: &StudyConfig, cell: &Cell, trial_idx: usize) -> Vec<Sample> {
    let seed = trial_seed(config.seed, cell.n, cell.share, trial_idx);
    let spec = TrialSpec {
        n: cell.n,
        n_outliers: cell.n_outliers,
        sigma: config.sigma,
        outlier_mode: config.outlier_mode,
    };
    let (trial, inliers, crb) = (0..MAX_REDRAWS)
        .find_map(|redraw| {
            let mut rng = ChaCha8Rng::seed_from_u64(splitmix64(seed ^ redraw));
            let trial = generate(&spec, &mut rng);
            let inliers = trial.inlier_pairs();
            crb(&inliers).map(|crb| (trial, inliers, crb))
        })
        .expect("two or more random inlier directions determine the attitude");

    let mut params = config.params.clone();
    params.seed = seed;
    let mut solver = Solver::new(params);
    config
        .methods
        .iter()
        .map(|method| {
            let (pairs, solver_method) = match method {
                StudyMethod::Solver(m) => (&trial.pairs, *m),
                StudyMethod::LsInliers => (&inliers, Method::Ls),
            };
            let start = Instant::now();
            let result = solver.solve(pairs, solver_method, None);
            let time_us = start.elapsed().as_secs_f64() * 1e6;
            Sample {
                error_rad: error_of(&trial, result.ok().map(|o| o.q)),
                crb,
                time_us,
            }
        })
        .collect()
}

/// Rotation angle between estimate and truth; π when the solve failed.
fn error_of(trial: &Trial, estimate: Option<nalgebra::UnitQuaternion<f64>>) -> f64 {
    match estimate {
        Some(q) => {
            let angle = q.angle_to(&trial.truth);
            if angle.is_finite() {
                angle
            } else {
                std::f64::consts::PI
            }
        }
        None => std::f64::consts::PI,
    }
}

fn summarise(method: StudyMethod, cell: &Cell, samples: &[Sample]) -> Row {
    let ratios: Vec<f64> = samples.iter().map(|s| s.error_rad / s.crb).collect();
    let errors: Vec<f64> = samples.iter().map(|s| s.error_rad).collect();
    let times: Vec<f64> = samples.iter().map(|s| s.time_us).collect();
    let successes = ratios.iter().filter(|&&r| r < SUCCESS_CRB_MULTIPLE).count();
    // Samples are finite by construction (errors ≤ π, CRB > 0), so the quantiles exist.
    Row {
        method: method.as_str().to_string(),
        n: cell.n,
        outlier_share: cell.share,
        trials: samples.len(),
        success_rate: successes as f64 / samples.len() as f64,
        median_error_over_crb: median(&ratios).unwrap_or(f64::NAN),
        p95_error_over_crb: quantile(&ratios, 0.95).unwrap_or(f64::NAN),
        median_error_rad: median(&errors).unwrap_or(f64::NAN),
        median_time_us: median(&times).unwrap_or(f64::NAN),
    }
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014): a bijective 64-bit mix.
fn splitmix64(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trial_seeds_differ_across_cells_and_trials() {
        let a = trial_seed(1, 50, 0.5, 0);
        assert_ne!(a, trial_seed(1, 50, 0.5, 1));
        assert_ne!(a, trial_seed(1, 200, 0.5, 0));
        assert_ne!(a, trial_seed(1, 50, 0.7, 0));
        assert_ne!(a, trial_seed(2, 50, 0.5, 0));
        assert_eq!(a, trial_seed(1, 50, 0.5, 0));
    }

    #[test]
    fn splitmix64_reference_value() {
        // SplitMix64 seeded with 0: first output 0xE220A8397B1DCDAF (reference
        // implementation by Vigna, prng.di.unimi.it/splitmix64.c; recalled from memory).
        assert_eq!(splitmix64(0), 0xE220_A839_7B1D_CDAF);
    }
}
