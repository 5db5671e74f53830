//! `wahbad solve`: one solve of a set of vector pairs read as JSON, the
//! result written as JSON on stdout.
//!
//! Input: `{"pairs":[{"b":[x,y,z],"r":[x,y,z],"sigma":rad,"sensor":"id"},...]}`.
//! `b` and `r` any non-zero finite length (normalised here); `sigma` in
//! `(0, π)` radians, required on every pair unless `--sigma` gives a default;
//! `sensor` optional (1–64 chars of `[A-Za-z0-9_.-]`, as on the wire); other
//! keys are ignored. Bad input ends with exit code 2 and a message naming
//! the pair and the field.
//!
//! Output (one line): `{"q","cov","status","method","iterations",
//! "inlier_fraction","verdicts":[{"index","residual","inlier"}]}`. Too few
//! pairs or degenerate geometry is not an error: the JSON says
//! `insufficient` or `unobservable` and the exit code is 0.

use std::io::Read as _;
use std::path::PathBuf;

use anyhow::Context as _;
use nalgebra::{Matrix3, UnitQuaternion, Vector3};
use serde::Serialize;
use serde_json::Value;
use wahbad::verdict::{assess, Observability, UNOBSERVABLE_VARIANCE};
use wahbad::{Method, Pair, SolveError, SolveParams, Solver};

use super::{bad_input, Failure};

/// Flags of `wahbad solve`.
#[derive(Debug, clap::Args)]
#[command(after_help = "\
Input: {\"pairs\":[{\"b\":[x,y,z],\"r\":[x,y,z],\"sigma\":rad,\"sensor\":\"id\"},...]}, b ≈ A r; \
vectors are normalised; sigma is required unless --sigma is given; sensor is optional.
Output: {\"q\":[w,x,y,z],\"cov\":[9, row-major, rad²],\"status\",\"method\",\"iterations\",\
\"inlier_fraction\",\"verdicts\":[{\"index\",\"residual\",\"inlier\"}]}.
Status: ok; degraded (inlier fraction below --inlier-min); unobservable (inliers span one \
direction; q is the identity when no rotation could be computed); insufficient (fewer than two pairs).
Exit codes: 0 result printed (whatever the status), 2 bad input or flags, 1 solver failure.")]
pub struct SolveArgs {
    /// JSON file of pairs, or `-` for standard input.
    #[arg(default_value = "-")]
    pub input: String,
    /// Solver: svd, q-method, ls, triad, lud, gnc-tls, consensus or auto.
    #[arg(long, default_value = "auto")]
    pub method: Method,
    /// Default 1-σ noise (radians) for pairs without a `sigma` field.
    #[arg(long)]
    pub sigma: Option<f64>,
    /// Status is `degraded` when the inlier fraction is below this level.
    #[arg(long, default_value_t = 0.5)]
    pub inlier_min: f64,
}

/// The JSON written on stdout, keys in this order.
#[derive(Debug, Serialize)]
struct SolveOutput {
    q: [f64; 4],
    cov: [f64; 9],
    status: &'static str,
    method: String,
    iterations: u32,
    inlier_fraction: f64,
    verdicts: Vec<PairVerdict>,
}

#[derive(Debug, Serialize)]
struct PairVerdict {
    index: usize,
    residual: f64,
    inlier: bool,
}

/// Runs `wahbad solve`.
pub fn run(args: &SolveArgs) -> Result<(), Failure> {
    if let Some(sigma) = args.sigma {
        check_sigma(sigma).map_err(|why| bad_input(format!("--sigma: {why}")))?;
    }
    if !(0.0..=1.0).contains(&args.inlier_min) {
        return Err(bad_input(format!(
            "--inlier-min: {} is outside [0, 1]",
            args.inlier_min
        )));
    }
    let text = read_input(&args.input).map_err(Failure::BadInput)?;
    let pairs = parse_pairs(&text, args.sigma)?;
    let output = solve(&pairs, args)?;
    let line = serde_json::to_string(&output)
        .context("encoding the result")
        .map_err(Failure::Failed)?;
    println!("{line}");
    Ok(())
}

fn read_input(input: &str) -> anyhow::Result<String> {
    let mut text = String::new();
    if input == "-" {
        std::io::stdin()
            .read_to_string(&mut text)
            .context("reading standard input")?;
    } else {
        let path = PathBuf::from(input);
        text = std::fs::read_to_string(&path)
            .with_context(|| format!("reading {}", path.display()))?;
    }
    Ok(text)
}

/// Parses and validates the input document.
fn parse_pairs(text: &str, default_sigma: Option<f64>) -> Result<Vec<Pair>, Failure> {
    let doc: Value = serde_json::from_str(text)
        .map_err(|e| bad_input(format!("input is not valid JSON: {e}")))?;
    let list = doc
        .get("pairs")
        .ok_or_else(|| bad_input("input: missing key `pairs`"))?
        .as_array()
        .ok_or_else(|| bad_input("input: `pairs` must be an array"))?;
    list.iter()
        .enumerate()
        .map(|(idx, item)| {
            parse_pair(item, default_sigma)
                .map_err(|(field, why)| bad_input(format!("pair {idx}: field `{field}`: {why}")))
        })
        .collect()
}

/// One pair, or the offending field and what is wrong with it.
fn parse_pair(item: &Value, default_sigma: Option<f64>) -> Result<Pair, (&'static str, String)> {
    let obj = item
        .as_object()
        .ok_or(("pair", "must be an object".to_string()))?;
    let b = unit_vector(obj.get("b")).map_err(|why| ("b", why))?;
    let r = unit_vector(obj.get("r")).map_err(|why| ("r", why))?;
    let sigma = match obj.get("sigma") {
        None => default_sigma.ok_or((
            "sigma",
            "missing (give it on every pair or pass --sigma)".to_string(),
        ))?,
        Some(v) => {
            let sigma = v
                .as_f64()
                .ok_or(("sigma", format!("must be a number, got {v}")))?;
            check_sigma(sigma).map_err(|why| ("sigma", why))?;
            sigma
        }
    };
    if let Some(sensor) = obj.get("sensor") {
        let id = sensor
            .as_str()
            .ok_or(("sensor", format!("must be a string, got {sensor}")))?;
        let valid_chars = id
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || "_.-".contains(c));
        if id.is_empty() || id.len() > 64 || !valid_chars {
            return Err((
                "sensor",
                format!("`{id}` is not 1-64 chars of [A-Za-z0-9_.-]"),
            ));
        }
    }
    Ok(Pair { b, r, sigma })
}

fn check_sigma(sigma: f64) -> Result<(), String> {
    if sigma.is_finite() && sigma > 0.0 && sigma < std::f64::consts::PI {
        Ok(())
    } else {
        Err(format!("must be in (0, π) rad, got {sigma}"))
    }
}

/// A 3-vector field, normalised.
fn unit_vector(value: Option<&Value>) -> Result<Vector3<f64>, String> {
    let value = value.ok_or("missing")?;
    let items = value
        .as_array()
        .filter(|a| a.len() == 3)
        .ok_or_else(|| format!("must be an array of 3 numbers, got {value}"))?;
    let mut v = Vector3::zeros();
    for (k, item) in items.iter().enumerate() {
        v[k] = item
            .as_f64()
            .ok_or_else(|| format!("component {k} is not a number: {item}"))?;
        if !v[k].is_finite() {
            return Err(format!("component {k} is not finite"));
        }
    }
    // Scale by the largest component first so huge components do not overflow the norm.
    let scale = v.amax();
    if scale == 0.0 {
        return Err("zero vector".to_string());
    }
    let v = v / scale;
    Ok(v / v.norm())
}

fn solve(pairs: &[Pair], args: &SolveArgs) -> Result<SolveOutput, Failure> {
    let params = SolveParams::default();
    let gate_k = params.gate_k;
    let mut solver = Solver::new(params);
    match solver.solve(pairs, args.method, None) {
        Ok(outcome) => {
            let verdict = assess(pairs, &outcome.q, gate_k);
            let status = match verdict.observability {
                Observability::Insufficient => "insufficient",
                Observability::Unobservable { .. } => "unobservable",
                Observability::Full if verdict.inlier_fraction < args.inlier_min => "degraded",
                Observability::Full => "ok",
            };
            let output = SolveOutput {
                q: quaternion_array(&outcome.q),
                cov: row_major(&verdict.covariance),
                status,
                method: outcome.method.as_str().to_string(),
                iterations: outcome.iterations,
                inlier_fraction: verdict.inlier_fraction,
                verdicts: pair_verdicts(&verdict.residuals, &verdict.inliers),
            };
            check_finite(&output)?;
            Ok(output)
        }
        Err(err @ (SolveError::Insufficient { .. } | SolveError::Degenerate(_))) => {
            tracing::info!(error = %err, "No rotation determined; reporting the identity.");
            // No estimate: report the identity with a huge covariance on every
            // axis, and the verdicts of the pairs against that identity.
            let identity = UnitQuaternion::identity();
            let verdict = assess(pairs, &identity, gate_k);
            let status = match err {
                SolveError::Insufficient { .. } => "insufficient",
                _ => "unobservable",
            };
            Ok(SolveOutput {
                q: quaternion_array(&identity),
                cov: row_major(&(Matrix3::identity() * UNOBSERVABLE_VARIANCE)),
                status,
                method: args.method.as_str().to_string(),
                iterations: 0,
                inlier_fraction: verdict.inlier_fraction,
                verdicts: pair_verdicts(&verdict.residuals, &verdict.inliers),
            })
        }
        Err(err) => Err(Failure::Failed(
            anyhow::Error::new(err).context("solver failed"),
        )),
    }
}

/// `[w, x, y, z]` with `w >= 0`.
fn quaternion_array(q: &UnitQuaternion<f64>) -> [f64; 4] {
    let sign = if q.w < 0.0 { -1.0 } else { 1.0 };
    [sign * q.w, sign * q.i, sign * q.j, sign * q.k]
}

fn row_major(m: &Matrix3<f64>) -> [f64; 9] {
    std::array::from_fn(|k| m[(k / 3, k % 3)])
}

fn pair_verdicts(residuals: &[f64], inliers: &[bool]) -> Vec<PairVerdict> {
    residuals
        .iter()
        .zip(inliers)
        .enumerate()
        .map(|(index, (&residual, &inlier))| PairVerdict {
            index,
            residual,
            inlier,
        })
        .collect()
}

/// A NaN would be written as `null`: refuse rather than print a broken result.
fn check_finite(output: &SolveOutput) -> Result<(), Failure> {
    let numbers = output
        .q
        .iter()
        .chain(&output.cov)
        .chain(std::iter::once(&output.inlier_fraction))
        .chain(output.verdicts.iter().map(|v| &v.residual));
    if numbers.into_iter().all(|v| v.is_finite()) {
        Ok(())
    } else {
        Err(Failure::Failed(anyhow::anyhow!(
            "the solver returned a non-finite result"
        )))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn message(text: &str, sigma: Option<f64>) -> String {
        match parse_pairs(text, sigma) {
            Err(Failure::BadInput(e)) => format!("{e:#}"),
            other => panic!("expected bad input, got {other:?}"),
        }
    }

    #[test]
    fn names_pair_and_field() {
        let text = r#"{"pairs":[{"b":[1,0,0],"r":[1,0,0],"sigma":0.01},
                                 {"b":[0,0,0],"r":[1,0,0],"sigma":0.01}]}"#;
        assert_eq!(message(text, None), "pair 1: field `b`: zero vector");
        let text = r#"{"pairs":[{"b":[1,0,0],"r":[1,0],"sigma":0.01}]}"#;
        assert!(message(text, None).starts_with("pair 0: field `r`: must be an array of 3"));
        let text = r#"{"pairs":[{"b":[1,0,0],"r":[1,0,0],"sigma":-1}]}"#;
        assert!(message(text, None).starts_with("pair 0: field `sigma`: must be in (0, π)"));
        let text = r#"{"pairs":[{"b":[1,0,0],"r":[1,0,0]}]}"#;
        assert!(message(text, None).starts_with("pair 0: field `sigma`: missing"));
        let text = r#"{"pairs":[{"b":[1,0,0],"r":[1,0,0],"sigma":0.1,"sensor":"a b"}]}"#;
        assert!(message(text, None).starts_with("pair 0: field `sensor`"));
    }

    #[test]
    fn normalises_and_applies_default_sigma() {
        let text = r#"{"pairs":[{"b":[0,3e300,4e300],"r":[2,0,0],"extra":1}]}"#;
        let pairs = parse_pairs(text, Some(0.02))
            .map_err(|e| format!("{e:?}"))
            .unwrap();
        assert!((pairs[0].b - Vector3::new(0.0, 0.6, 0.8)).norm() < 1e-15);
        assert_eq!(pairs[0].r, Vector3::x());
        assert_eq!(pairs[0].sigma, 0.02);
    }

    #[test]
    fn quaternion_sign_fixed_and_row_major() {
        let q = UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(-0.5, 0.5, 0.5, 0.5));
        assert_eq!(quaternion_array(&q), [0.5, -0.5, -0.5, -0.5]);
        let m = Matrix3::new(1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0);
        assert_eq!(row_major(&m), [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0]);
    }
}
