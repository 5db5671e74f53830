//! Validation: decoded `obs` / `rate` / `truth` messages become checked values.
//!
//! The checks are the stateless rules of the protocol: finite numbers,
//! non-zero vectors (normalised here), `0 < sigma < π`, the sensor id pattern.
//! Stateful rules (time going backwards for a sensor) belong to the estimator.
//! The error's `Display` text is the `reason` a `reject` carries.

use crate::message::{Obs, Rate, Truth};

/// An observation that passed validation: unit vectors, finite values.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidObs {
    /// Sensor id (checked pattern).
    pub sensor: String,
    /// Sequence number.
    pub seq: u64,
    /// Measurement time, ns.
    pub t: i64,
    /// Body-frame direction, unit length.
    pub b: [f64; 3],
    /// Reference-frame direction, unit length.
    pub r: [f64; 3],
    /// 1-σ noise in radians if the message gave one (`0 < sigma < π`).
    pub sigma: Option<f64>,
}

/// A rate sample that passed validation.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidRate {
    /// Sensor id (checked pattern).
    pub sensor: String,
    /// Sequence number.
    pub seq: u64,
    /// Sample time, ns.
    pub t: i64,
    /// Body angular velocity, rad/s, finite.
    pub w: [f64; 3],
}

/// A truth attitude that passed validation.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidTruth {
    /// Time, ns.
    pub t: i64,
    /// Unit quaternion `[w, x, y, z]` with `w >= 0`.
    pub q: [f64; 4],
}

/// Longest sensor id, characters.
pub const MAX_SENSOR_ID_LEN: usize = 64;

/// Why a decoded message cannot be used. `Display` is the `reject` reason.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ValidationError {
    /// A number is NaN or infinite.
    #[error("{field} is not finite ({value})")]
    NonFinite {
        /// The key, with the component index for vectors (`b[1]`, `sigma`).
        field: &'static str,
        /// The value received.
        value: f64,
    },
    /// A vector or quaternion has zero length and cannot be normalised.
    #[error("{field} has zero length")]
    ZeroVector {
        /// The key (`b`, `r`, `q`).
        field: &'static str,
    },
    /// `sigma` is outside `0 < sigma < π`.
    #[error("sigma {value} rad is outside 0 < sigma < pi")]
    SigmaOutOfRange {
        /// The value received, radians.
        value: f64,
    },
    /// The sensor id does not match 1–64 characters of `[A-Za-z0-9_.-]`.
    #[error("sensor id {why}")]
    BadSensorId {
        /// What is wrong with it.
        why: SensorIdFault,
    },
}

/// What is wrong with a sensor id.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum SensorIdFault {
    /// The id is the empty string.
    #[error("is empty")]
    Empty,
    /// The id is longer than [`MAX_SENSOR_ID_LEN`].
    #[error("is {len} characters long, at most 64 allowed")]
    TooLong {
        /// Its length, characters.
        len: usize,
    },
    /// The id holds a character outside `[A-Za-z0-9_.-]`.
    #[error("has {ch:?} at position {index}; only A-Z a-z 0-9 _ . - allowed")]
    BadChar {
        /// The offending character.
        ch: char,
        /// Its position, characters from 0.
        index: usize,
    },
}

/// Checks a sensor id against 1–64 characters of `[A-Za-z0-9_.-]`.
pub fn check_sensor_id(id: &str) -> Result<(), ValidationError> {
    let fault = if id.is_empty() {
        Some(SensorIdFault::Empty)
    } else if let Some((index, ch)) = id
        .chars()
        .enumerate()
        .find(|(_, c)| !(c.is_ascii_alphanumeric() || matches!(c, '_' | '.' | '-')))
    {
        Some(SensorIdFault::BadChar { ch, index })
    } else if id.len() > MAX_SENSOR_ID_LEN {
        // All ASCII by now, so bytes are characters.
        Some(SensorIdFault::TooLong { len: id.len() })
    } else {
        None
    };
    match fault {
        Some(why) => Err(ValidationError::BadSensorId { why }),
        None => Ok(()),
    }
}

/// Fails on the first non-finite component, naming it.
fn check_finite(values: &[f64], names: &[&'static str]) -> Result<(), ValidationError> {
    match values.iter().zip(names).find(|(v, _)| !v.is_finite()) {
        Some((&value, &field)) => Err(ValidationError::NonFinite { field, value }),
        None => Ok(()),
    }
}

/// Unit vector along finite `v`, or `None` when `v` is zero.
///
/// Scales by the largest component first, so that any non-zero finite input
/// normalises: no overflow of the squared norm near `f64::MAX`, no underflow
/// to zero for subnormal components.
fn unit<const N: usize>(v: [f64; N]) -> Option<[f64; N]> {
    let scale = v.iter().fold(0.0f64, |m, x| m.max(x.abs()));
    if scale == 0.0 {
        return None;
    }
    let scaled = v.map(|x| x / scale);
    let norm = scaled.iter().map(|x| x * x).sum::<f64>().sqrt();
    Some(scaled.map(|x| x / norm))
}

const B: [&str; 3] = ["b[0]", "b[1]", "b[2]"];
const R: [&str; 3] = ["r[0]", "r[1]", "r[2]"];
const W: [&str; 3] = ["w[0]", "w[1]", "w[2]"];
const Q: [&str; 4] = ["q[0]", "q[1]", "q[2]", "q[3]"];

/// Checks an `obs`: sensor id, finite `b` and `r` (normalised), sigma range.
pub fn validate_obs(obs: &Obs) -> Result<ValidObs, ValidationError> {
    check_sensor_id(&obs.sensor)?;
    check_finite(&obs.b, &B)?;
    check_finite(&obs.r, &R)?;
    let b = unit(obs.b).ok_or(ValidationError::ZeroVector { field: "b" })?;
    let r = unit(obs.r).ok_or(ValidationError::ZeroVector { field: "r" })?;
    if let Some(sigma) = obs.sigma {
        check_finite(&[sigma], &["sigma"])?;
        if !(sigma > 0.0 && sigma < std::f64::consts::PI) {
            return Err(ValidationError::SigmaOutOfRange { value: sigma });
        }
    }
    Ok(ValidObs {
        sensor: obs.sensor.clone(),
        seq: obs.seq,
        t: obs.t,
        b,
        r,
        sigma: obs.sigma,
    })
}

/// Checks a `rate`: sensor id, finite `w`.
pub fn validate_rate(rate: &Rate) -> Result<ValidRate, ValidationError> {
    check_sensor_id(&rate.sensor)?;
    check_finite(&rate.w, &W)?;
    Ok(ValidRate {
        sensor: rate.sensor.clone(),
        seq: rate.seq,
        t: rate.t,
        w: rate.w,
    })
}

/// Checks a `truth`: finite, non-zero `q`, normalised with `w >= 0`.
pub fn validate_truth(truth: &Truth) -> Result<ValidTruth, ValidationError> {
    check_finite(&truth.q, &Q)?;
    let mut q = unit(truth.q).ok_or(ValidationError::ZeroVector { field: "q" })?;
    if q[0] < 0.0 {
        q = q.map(|x| -x);
    }
    q[0] += 0.0; // -0.0 becomes +0.0, so "w >= 0" holds for the sign bit too
    Ok(ValidTruth { t: truth.t, q })
}
