//! Cross-check of the least-squares solvers and the verdict covariance
//! against SciPy (`scipy.spatial.transform.Rotation.align_vectors`, SciPy
//! reference documentation: returns the rotation `C` minimising
//! `Σ w_i ‖a_i − C b_i‖²` and, with `return_sensitivity=True`, a sensitivity
//! matrix in frame A that times the harmonic mean of the variances is the
//! attitude-error covariance; with `w_i = σ_i⁻²` that is the sensitivity
//! divided by the mean weight).
//!
//! Rust generates the cases, `tests/python/scipy_align.py` runs SciPy, Rust
//! compares: `svd` and `q-method` agree with SciPy to ≤ 1e-9 rad; our
//! covariance `(Σ σ_i⁻² (I − b_i b_iᵀ))⁻¹` equals SciPy's to 1e-9 relative on
//! noise-free data (where cond(F) ≤ 1e6; 100·cond·ε beyond) and, with noise
//! σ ≤ 1e-2 rad, within 1 % in at least 99 % of the cases and within 5 % in
//! all (the two formulas agree exactly only on consistent data).

use nalgebra::{Matrix3, Quaternion, UnitQuaternion};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Deserialize;
use serde_json::json;
use wahbad::solve::rotation::angle_between;
use wahbad::{assess, Method, Observability, Pair, SolveParams, Solver};
use wahbad_tests::python;
use wahbad_tests::random::{perturb, unit};

#[derive(Clone, Copy, PartialEq, Debug)]
enum Kind {
    /// Noise-free, general geometry.
    Clean,
    /// Noise-free, reference vectors in a narrow cone (near-degenerate).
    NearDegenerate,
    /// Noise-free, two pairs only.
    TwoPairs,
    /// Noisy, σ ≤ 1e-2 rad.
    Noisy,
}

struct Case {
    kind: Kind,
    pairs: Vec<Pair>,
}

fn make_case(rng: &mut ChaCha8Rng, kind: Kind) -> Case {
    let q =
        UnitQuaternion::from_scaled_axis(unit(rng) * rng.random_range(0.0..std::f64::consts::PI));
    let n = match kind {
        Kind::TwoPairs => 2,
        _ => rng.random_range(3..30),
    };
    let axis = unit(rng);
    let pairs = (0..n)
        .map(|_| {
            let sigma = 10f64.powf(rng.random_range(-4.0..-2.0));
            let r = match kind {
                Kind::NearDegenerate => perturb(rng, &axis, 1e-2),
                _ => unit(rng),
            };
            let b = q * r;
            let b = if kind == Kind::Noisy {
                perturb(rng, &b, sigma)
            } else {
                b
            };
            Pair { b, r, sigma }
        })
        .collect();
    Case { kind, pairs }
}

#[derive(Deserialize)]
struct Reference {
    q: [f64; 4],
    sens: [f64; 9],
}

#[derive(Deserialize)]
struct References {
    results: Vec<Reference>,
}

#[test]
fn least_squares_and_covariance_match_scipy() {
    if !python::require_modules(&["numpy", "scipy"]) {
        return;
    }
    let mut rng = ChaCha8Rng::seed_from_u64(2024);
    let kinds = [
        (Kind::Clean, 500),
        (Kind::NearDegenerate, 200),
        (Kind::TwoPairs, 100),
        (Kind::Noisy, 500),
    ];
    let cases: Vec<Case> = kinds
        .iter()
        .flat_map(|&(k, n)| (0..n).map(move |_| k))
        .map(|k| make_case(&mut rng, k))
        .collect();
    assert!(cases.len() >= 1000);
    let input = json!({
        "cases": cases.iter().map(|c| json!({
            "b": c.pairs.iter().map(|p| [p.b.x, p.b.y, p.b.z]).collect::<Vec<_>>(),
            "r": c.pairs.iter().map(|p| [p.r.x, p.r.y, p.r.z]).collect::<Vec<_>>(),
            "w": c.pairs.iter().map(|p| p.sigma.powi(-2)).collect::<Vec<_>>(),
        })).collect::<Vec<_>>()
    });
    let out = python::run("scipy_align.py", &[], input.to_string().as_bytes());
    let refs: References = serde_json::from_slice(&out.stdout).expect("scipy output");
    assert_eq!(refs.results.len(), cases.len());

    let mut solver = Solver::new(SolveParams::default());
    let mut worst_angle = 0.0f64;
    let mut worst_cov_clean = 0.0f64;
    let mut worst_cov_noisy = 0.0f64;
    let mut n_ill = 0usize;
    let (mut n_noisy, mut n_noisy_within) = (0usize, 0usize);
    for (i, (case, reference)) in cases.iter().zip(&refs.results).enumerate() {
        let [w, x, y, z] = reference.q;
        let q_ref = UnitQuaternion::from_quaternion(Quaternion::new(w, x, y, z));
        for method in [Method::Svd, Method::QMethod] {
            let got = solver.solve(&case.pairs, method, None).expect("solve");
            let angle = angle_between(&q_ref, &got.q);
            assert!(
                angle <= 1e-9,
                "case {i} ({:?}) {method}: {angle:e} rad from SciPy",
                case.kind
            );
            worst_angle = worst_angle.max(angle);
        }
        let got = solver.solve(&case.pairs, Method::Svd, None).expect("solve");
        let verdict = assess(&case.pairs, &got.q, SolveParams::default().gate_k);
        assert_eq!(verdict.observability, Observability::Full, "case {i}");
        let mean_w =
            case.pairs.iter().map(|p| p.sigma.powi(-2)).sum::<f64>() / case.pairs.len() as f64;
        let cov_ref = Matrix3::from_row_slice(&reference.sens) / mean_w;
        let rel = (verdict.covariance - cov_ref).norm() / cov_ref.norm();
        if case.kind == Kind::Noisy {
            // The formulas differ at first order in the noise (ours uses the
            // measured b_i, SciPy's the SVD of the noisy B), amplified by
            // the conditioning of F; checked in aggregate below.
            assert!(
                rel <= 5e-2,
                "case {i}: covariance {rel:e} relative from SciPy"
            );
            n_noisy_within += usize::from(rel <= 1e-2);
            n_noisy += 1;
            worst_cov_noisy = worst_cov_noisy.max(rel);
        } else {
            // Both formulas are accurate only to about cond(F)·ε in floating
            // point (a 50-digit evaluation of one case with cond 1.3e7 put ours
            // 5e-10 and SciPy's 2.5e-9 from the exact inverse), so the 1e-9
            // bound is held where cond(F) ≤ 1e6 and 100·cond·ε beyond.
            let eig = verdict.covariance.symmetric_eigenvalues();
            let cond = eig.max() / eig.min();
            let tol = if cond <= 1e6 {
                1e-9
            } else {
                100.0 * cond * f64::EPSILON
            };
            assert!(
                rel <= tol,
                "case {i} ({:?}): covariance {rel:e} relative from SciPy (cond {cond:e})",
                case.kind
            );
            worst_cov_clean = worst_cov_clean.max(rel);
            n_ill += usize::from(cond > 1e6);
        }
    }
    assert!(
        n_noisy_within as f64 >= 0.99 * n_noisy as f64,
        "only {n_noisy_within} of {n_noisy} noisy covariances within 1 % of SciPy"
    );
    eprintln!(
        "scipy: {n_noisy_within}/{n_noisy} noisy covariances within 1 %; {} cases, worst angle {worst_angle:e} rad, worst covariance {worst_cov_clean:e} (clean; {n_ill} with cond > 1e6) {worst_cov_noisy:e} (noisy)",
        cases.len()
    );
}
