//! Statistical and edge-case checks of the solvers and verdicts.
//!
//! - Clean data: every method recovers the rotation to ≤ 1e-12 rad (common
//!   practice: exact data gives machine precision), including 180° turns.
//! - Cramér–Rao consistency: the QUEST measurement model (Shuster & Oh 1981;
//!   the same bound in Crassidis & Junkins, *Optimal Estimation of Dynamic
//!   Systems*) makes `P = (Σ σ_i⁻² (I − b_i b_iᵀ))⁻¹` the error covariance of
//!   least squares, so the mean NEES `δθᵀ P⁻¹ δθ` is 3 (χ², 3 dof).
//! - Contamination: with 30 % random outliers least squares loses precision,
//!   the robust methods keep it (≥ 100× smaller errors) and their verdicts
//!   find the planted outliers (≥ 99 %, ≤ 1 % false alarms).
//! - χ² gate: 13.8155, the 2-dof 0.999 quantile (NIST/SEMATECH e-Handbook of
//!   Statistical Methods, χ² critical values table; also `−2 ln 0.001`).
//! - Degenerate inputs: right status, no panic, no NaN.

use nalgebra::{UnitQuaternion, Vector3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use wahbad::solve::rotation::angle_between;
use wahbad::solve::CHI2_2DOF_999;
use wahbad::{assess, Method, Observability, Pair, SolveError, SolveParams, Solver};
use wahbad_tests::random::{perturb, unit};

fn random_rotation(rng: &mut ChaCha8Rng) -> UnitQuaternion<f64> {
    UnitQuaternion::from_scaled_axis(unit(rng) * rng.random_range(0.0..std::f64::consts::PI))
}

/// Body-frame error `δθ` with `A_true ≈ (I − [δθ×]) A_est` (protocol convention).
fn attitude_error(q_true: &UnitQuaternion<f64>, q_est: &UnitQuaternion<f64>) -> Vector3<f64> {
    (q_est * q_true.inverse()).scaled_axis()
}

#[test]
fn every_method_recovers_clean_data_to_machine_precision() {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let mut solver = Solver::new(SolveParams::default());
    for trial in 0..60 {
        let q = if trial % 3 == 0 {
            // 180° turns about a random axis.
            UnitQuaternion::from_scaled_axis(unit(&mut rng) * std::f64::consts::PI)
        } else {
            random_rotation(&mut rng)
        };
        let n = rng.random_range(3..40);
        let pairs: Vec<Pair> = (0..n)
            .map(|_| {
                let r = unit(&mut rng);
                Pair {
                    b: q * r,
                    r,
                    sigma: 10f64.powf(rng.random_range(-5.0..-2.0)),
                }
            })
            .collect();
        for method in Method::ALL {
            let out = solver.solve(&pairs, method, None).expect("solve");
            let err = angle_between(&q, &out.q);
            assert!(err <= 1e-12, "trial {trial} {method}: {err:e} rad");
            assert!(out.q.w >= 0.0);
        }
    }
}

#[test]
fn least_squares_is_consistent_with_the_cramer_rao_bound() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let mut solver = Solver::new(SolveParams::default());
    let trials = 10_000;
    let mut nees_sum = 0.0;
    for _ in 0..trials {
        let q = random_rotation(&mut rng);
        let pairs: Vec<Pair> = (0..10)
            .map(|_| {
                let r = unit(&mut rng);
                // Mixed σ: a star-tracker-like and a sun-sensor-like class.
                let sigma = if rng.random_range(0.0..1.0) < 0.5 {
                    1e-4
                } else {
                    3e-3
                };
                Pair {
                    b: perturb(&mut rng, &(q * r), sigma),
                    r,
                    sigma,
                }
            })
            .collect();
        let out = solver.solve(&pairs, Method::Svd, None).expect("solve");
        // Gate wide open so every pair counts: the bound is that of all pairs.
        let verdict = assess(&pairs, &out.q, 1e6);
        assert_eq!(verdict.observability, Observability::Full);
        let d = attitude_error(&q, &out.q);
        let info = verdict.covariance.try_inverse().expect("invertible");
        nees_sum += (d.transpose() * info * d)[0];
    }
    let mean = nees_sum / trials as f64;
    eprintln!("mean NEES over {trials} trials: {mean:.4}");
    assert!((2.9..=3.1).contains(&mean), "mean NEES {mean}");
}

#[test]
fn robust_methods_beat_least_squares_under_contamination() {
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    let mut solver = Solver::new(SolveParams::default());
    let methods = [Method::Lud, Method::GncTls, Method::Consensus, Method::Auto];
    let trials = 150;
    let n = 40;
    let n_out = 12; // 30 %
    let mut ls_err = Vec::new();
    let mut robust_err = vec![Vec::new(); methods.len()];
    let (mut found, mut planted, mut false_alarms, mut clean) = (0usize, 0usize, 0usize, 0usize);
    for _ in 0..trials {
        let q = random_rotation(&mut rng);
        let pairs: Vec<Pair> = (0..n)
            .map(|i| {
                let r = unit(&mut rng);
                let sigma = if i % 2 == 0 { 1e-4 } else { 5e-4 };
                let b = if i < n_out {
                    unit(&mut rng)
                } else {
                    perturb(&mut rng, &(q * r), sigma)
                };
                Pair { b, r, sigma }
            })
            .collect();
        let ls = solver.solve(&pairs, Method::Ls, None).expect("ls");
        ls_err.push(angle_between(&q, &ls.q));
        for (k, &method) in methods.iter().enumerate() {
            let out = solver.solve(&pairs, method, None).expect("robust");
            robust_err[k].push(angle_between(&q, &out.q));
            let verdict = assess(&pairs, &out.q, solver.params().gate_k);
            for (i, &inlier) in verdict.inliers.iter().enumerate() {
                if i < n_out {
                    planted += 1;
                    found += usize::from(!inlier);
                } else {
                    clean += 1;
                    false_alarms += usize::from(!inlier);
                }
            }
        }
    }
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        v[v.len() / 2]
    };
    let ls_median = median(&mut ls_err);
    for (k, method) in methods.iter().enumerate() {
        let m = median(&mut robust_err[k]);
        eprintln!("{method}: median error {m:.3e} rad vs least squares {ls_median:.3e}");
        assert!(
            m * 100.0 <= ls_median,
            "{method}: median {m:e} vs LS {ls_median:e}"
        );
    }
    let detection = found as f64 / planted as f64;
    let false_rate = false_alarms as f64 / clean as f64;
    eprintln!("outliers found {detection:.4}, false alarms {false_rate:.4}");
    assert!(detection >= 0.99, "found {detection}");
    assert!(false_rate <= 0.01, "false alarms {false_rate}");
}

#[test]
fn chi2_gate_is_the_published_quantile() {
    // NIST/SEMATECH e-Handbook χ² table, ν = 2, upper-tail 0.001: 13.816 (13.8155 to 4 places).
    assert!((CHI2_2DOF_999 - 13.8155).abs() < 5e-5);
    // The 2-dof χ² CDF is 1 − e^{−x/2}: the quantile is −2 ln 0.001.
    assert!((CHI2_2DOF_999 - (-2.0 * 0.001f64.ln())).abs() < 1e-12);
    assert_eq!(SolveParams::default().gate_k, CHI2_2DOF_999.sqrt());
}

fn assert_finite(pairs: &[Pair], q: &UnitQuaternion<f64>) -> Observability {
    assert!(q.coords.iter().all(|x| x.is_finite()));
    let v = assess(pairs, q, SolveParams::default().gate_k);
    assert!(v.covariance.iter().all(|x| x.is_finite()));
    assert!(v.residuals.iter().all(|x| x.is_finite()));
    v.observability
}

#[test]
fn all_parallel_pairs_are_unobservable_or_degenerate() {
    let q = UnitQuaternion::from_euler_angles(0.4, -0.2, 1.1);
    let r = Vector3::new(0.2, -0.5, 0.8).normalize();
    let pairs: Vec<Pair> = (0..5)
        .map(|k| Pair {
            b: q * r,
            r,
            sigma: 1e-3 * (k + 1) as f64,
        })
        .collect();
    let mut solver = Solver::default();
    for method in Method::ALL {
        match solver.solve(&pairs, method, None) {
            Ok(out) => {
                assert!(
                    !matches!(method, Method::Triad | Method::Consensus),
                    "{method} should refuse"
                );
                assert!(
                    (out.q * r - q * r).norm() < 1e-12,
                    "{method} must align the common direction"
                );
                match assert_finite(&pairs, &out.q) {
                    Observability::Unobservable { axis } => {
                        assert!((axis.dot(&(q * r)).abs() - 1.0).abs() < 1e-12, "{method}");
                    }
                    other => panic!("{method}: expected unobservable, got {other:?}"),
                }
            }
            Err(SolveError::Degenerate(_)) => {
                assert!(
                    matches!(method, Method::Triad | Method::Consensus),
                    "{method} should solve"
                );
            }
            Err(e) => panic!("{method}: unexpected {e}"),
        }
    }
}

#[test]
fn one_pair_is_insufficient_everywhere() {
    let pairs = [Pair {
        b: Vector3::x(),
        r: Vector3::y(),
        sigma: 1e-3,
    }];
    let mut solver = Solver::default();
    for method in Method::ALL {
        assert_eq!(
            solver.solve(&pairs, method, None),
            Err(SolveError::Insufficient { n: 1, needed: 2 })
        );
    }
    assert_eq!(
        assert_finite(&pairs, &UnitQuaternion::identity()),
        Observability::Insufficient
    );
}

#[test]
fn zero_and_nan_vectors_are_refused_not_propagated() {
    let good = Pair {
        b: Vector3::x(),
        r: Vector3::x(),
        sigma: 1e-3,
    };
    let other = Pair {
        b: Vector3::y(),
        r: Vector3::y(),
        sigma: 1e-3,
    };
    let mut solver = Solver::default();
    for bad in [
        Pair {
            b: Vector3::zeros(),
            ..good
        },
        Pair {
            r: Vector3::new(f64::NAN, 0.0, 1.0),
            ..good
        },
        Pair {
            b: Vector3::new(f64::INFINITY, 0.0, 1.0),
            ..good
        },
        Pair { sigma: 0.0, ..good },
        Pair {
            sigma: f64::NAN,
            ..good
        },
    ] {
        for method in Method::ALL {
            let got = solver.solve(&[good, other, bad], method, None);
            assert!(
                matches!(got, Err(SolveError::InvalidPair { index: 2, .. })),
                "{method}: {got:?}"
            );
        }
    }
}

#[test]
fn huge_sigma_spread_stays_finite() {
    let mut rng = ChaCha8Rng::seed_from_u64(13);
    let mut solver = Solver::default();
    for _ in 0..20 {
        let q = random_rotation(&mut rng);
        let pairs: Vec<Pair> = (0..12)
            .map(|i| {
                let r = unit(&mut rng);
                let sigma = if i % 3 == 0 { 1e-9 } else { 0.5 };
                Pair {
                    b: perturb(&mut rng, &(q * r), sigma),
                    r,
                    sigma,
                }
            })
            .collect();
        for method in Method::ALL {
            let out = solver.solve(&pairs, method, None).expect("solve");
            let obs = assert_finite(&pairs, &out.q);
            assert_ne!(obs, Observability::Insufficient, "{method}");
            if method != Method::Triad {
                // The precise pairs dominate: the error is at their level, not the coarse ones'.
                assert!(angle_between(&q, &out.q) < 1e-6, "{method}");
            }
        }
    }
}
