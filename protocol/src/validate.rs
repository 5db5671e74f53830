//! Validation: decoded `obs` / `rate` / `truth` messages become checked values.
//!
//! The error's `Display` text is the `reason` a `reject` carries.
//! (Skeleton: the checks are filled in by the protocol work.)

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

/// Why a decoded message cannot be used.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ValidationError {
    /// Placeholder until the checks land.
    #[error("{0}")]
    Other(String),
}

/// Checks an `obs`.
pub fn validate_obs(obs: &Obs) -> Result<ValidObs, ValidationError> {
    let _ = obs;
    todo!("protocol work")
}

/// Checks a `rate`.
pub fn validate_rate(rate: &Rate) -> Result<ValidRate, ValidationError> {
    let _ = rate;
    todo!("protocol work")
}

/// Checks a `truth`.
pub fn validate_truth(truth: &Truth) -> Result<ValidTruth, ValidationError> {
    let _ = truth;
    todo!("protocol work")
}
