//! Validation: decoded `obs` / `rate` / `truth` messages become checked values.
//!
//! The checks are the stateless rules of the protocol: finite numbers,
//! non-zero vectors (normalised here), `0 < sigma < π`, the sensor id pattern.
//! Stateful rules (time going backwards for a sensor) belong to the estimator.
//! The error's `Display` text is the `reason` a `reject` carries.

use crate::message::{Obs, Rate, SensorName, Truth};

/// An observation that passed validation: unit vectors, finite values.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidObs {
    /// Sensor id (checked pattern).
    pub sensor: SensorName,
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

impl ValidObs {
    /// The 1-σ noise to use: the message's `sigma`, else the sensor's
    /// configured `default`; neither is [`ValidationError::NoSigma`].
    ///
    /// `default` comes from configuration and is not checked here.
    pub fn sigma_or(&self, default: Option<f64>) -> Result<f64, ValidationError> {
        self.sigma
            .or(default)
            .ok_or_else(|| ValidationError::NoSigma {
                sensor: self.sensor.to_string(),
            })
    }
}

/// A rate sample that passed validation.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidRate {
    /// Sensor id (checked pattern).
    pub sensor: SensorName,
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
    /// The `obs` gives no `sigma` and its sensor has no configured default.
    #[error("no sigma given and sensor {sensor:?} has no configured default sigma")]
    NoSigma {
        /// The sensor id.
        sensor: String,
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

#[cfg(test)]
mod tests {
    use super::*;

    fn obs(b: [f64; 3], r: [f64; 3], sigma: Option<f64>) -> Obs {
        Obs {
            sensor: "star_tracker-1.a".into(),
            seq: 3,
            t: -5,
            b,
            r,
            sigma,
            token: Some("secret".into()),
        }
    }

    fn norm(v: &[f64]) -> f64 {
        v.iter().map(|x| x * x).sum::<f64>().sqrt()
    }

    #[test]
    fn obs_vectors_are_normalised_and_fields_kept() {
        let v = validate_obs(&obs([0.0, 3.0, 4.0], [-2.0, 0.0, 0.0], Some(1e-3))).unwrap();
        assert_eq!(v.b, [0.0, 0.6, 0.8]);
        assert_eq!(v.r, [-1.0, 0.0, 0.0]);
        assert_eq!(
            (v.sensor.as_str(), v.seq, v.t, v.sigma),
            ("star_tracker-1.a", 3, -5, Some(1e-3))
        );
    }

    #[test]
    fn extreme_but_non_zero_lengths_normalise() {
        for scale in [f64::MAX / 2.0, 1e300, 1e-300, 5e-324] {
            let v = validate_obs(&obs([scale, scale, 0.0], [0.0, 0.0, -scale], None)).unwrap();
            assert!((norm(&v.b) - 1.0).abs() < 1e-15, "scale {scale}: {:?}", v.b);
            assert_eq!(v.r, [0.0, 0.0, -1.0]);
        }
    }

    #[test]
    fn non_finite_numbers_name_the_field() {
        let err = validate_obs(&obs([0.0, f64::NAN, 1.0], [1.0, 0.0, 0.0], None)).unwrap_err();
        assert!(matches!(
            err,
            ValidationError::NonFinite { field: "b[1]", .. }
        ));
        assert_eq!(err.to_string(), "b[1] is not finite (NaN)");
        let err =
            validate_obs(&obs([0.0, 0.0, 1.0], [1.0, 0.0, f64::NEG_INFINITY], None)).unwrap_err();
        assert_eq!(err.to_string(), "r[2] is not finite (-inf)");
        let err = validate_obs(&obs([0.0, 0.0, 1.0], [1.0, 0.0, 0.0], Some(f64::NAN))).unwrap_err();
        assert!(matches!(
            err,
            ValidationError::NonFinite { field: "sigma", .. }
        ));
    }

    #[test]
    fn zero_vectors_are_refused() {
        let err = validate_obs(&obs([0.0, -0.0, 0.0], [1.0, 0.0, 0.0], None)).unwrap_err();
        assert_eq!(err, ValidationError::ZeroVector { field: "b" });
        assert_eq!(err.to_string(), "b has zero length");
        let err = validate_obs(&obs([1.0, 0.0, 0.0], [0.0; 3], None)).unwrap_err();
        assert_eq!(err, ValidationError::ZeroVector { field: "r" });
    }

    #[test]
    fn sigma_must_be_inside_zero_to_pi() {
        let pi = std::f64::consts::PI;
        for bad in [0.0, -0.0, -1e-9, pi, 4.0] {
            let err = validate_obs(&obs([1.0, 0.0, 0.0], [1.0, 0.0, 0.0], Some(bad))).unwrap_err();
            assert!(
                matches!(err, ValidationError::SigmaOutOfRange { .. }),
                "{bad}: {err:?}"
            );
        }
        let err = validate_obs(&obs([1.0, 0.0, 0.0], [1.0, 0.0, 0.0], Some(pi))).unwrap_err();
        assert_eq!(
            err.to_string(),
            format!("sigma {pi} rad is outside 0 < sigma < pi")
        );
        for good in [f64::MIN_POSITIVE, 1e-6, std::f64::consts::PI - 1e-9] {
            assert!(validate_obs(&obs([1.0, 0.0, 0.0], [1.0, 0.0, 0.0], Some(good))).is_ok());
        }
    }

    #[test]
    fn sigma_falls_back_to_the_sensor_default_or_is_refused() {
        let given = validate_obs(&obs([1.0, 0.0, 0.0], [1.0, 0.0, 0.0], Some(2e-3))).unwrap();
        assert_eq!(given.sigma_or(Some(1e-2)), Ok(2e-3));
        assert_eq!(given.sigma_or(None), Ok(2e-3));
        let absent = validate_obs(&obs([1.0, 0.0, 0.0], [1.0, 0.0, 0.0], None)).unwrap();
        assert_eq!(absent.sigma_or(Some(1e-2)), Ok(1e-2));
        let err = absent.sigma_or(None).unwrap_err();
        assert_eq!(
            err,
            ValidationError::NoSigma {
                sensor: "star_tracker-1.a".into()
            }
        );
        assert_eq!(
            err.to_string(),
            "no sigma given and sensor \"star_tracker-1.a\" has no configured default sigma"
        );
    }

    #[test]
    fn sensor_id_pattern() {
        assert!(check_sensor_id("a").is_ok());
        assert!(check_sensor_id(&"Z9_.-".repeat(13)[..64]).is_ok());
        let err = check_sensor_id("").unwrap_err();
        assert_eq!(err.to_string(), "sensor id is empty");
        let err = check_sensor_id(&"x".repeat(65)).unwrap_err();
        assert_eq!(
            err,
            ValidationError::BadSensorId {
                why: SensorIdFault::TooLong { len: 65 }
            }
        );
        assert_eq!(
            err.to_string(),
            "sensor id is 65 characters long, at most 64 allowed"
        );
        let err = check_sensor_id("sun/2").unwrap_err();
        assert_eq!(
            err.to_string(),
            "sensor id has '/' at position 3; only A-Z a-z 0-9 _ . - allowed"
        );
        for bad in ["a b", "é", "tab\t", "星"] {
            assert!(
                matches!(
                    check_sensor_id(bad),
                    Err(ValidationError::BadSensorId { .. })
                ),
                "{bad:?}"
            );
        }
        let mut o = obs([1.0, 0.0, 0.0], [1.0, 0.0, 0.0], None);
        o.sensor = "bad id".into();
        assert!(matches!(
            validate_obs(&o),
            Err(ValidationError::BadSensorId { .. })
        ));
    }

    #[test]
    fn rate_checks() {
        let rate = Rate {
            sensor: "gyro".into(),
            seq: 1,
            t: 2,
            w: [0.1, -0.2, 1e3],
            token: None,
        };
        assert_eq!(
            validate_rate(&rate).unwrap(),
            ValidRate {
                sensor: "gyro".into(),
                seq: 1,
                t: 2,
                w: [0.1, -0.2, 1e3]
            }
        );
        // Zero rate is a valid (static) sample.
        assert!(validate_rate(&Rate {
            w: [0.0; 3],
            ..rate.clone()
        })
        .is_ok());
        let err = validate_rate(&Rate {
            w: [0.0, f64::INFINITY, 0.0],
            ..rate.clone()
        });
        assert!(matches!(
            err,
            Err(ValidationError::NonFinite { field: "w[1]", .. })
        ));
        let err = validate_rate(&Rate {
            sensor: SensorName::default(),
            ..rate
        });
        assert!(matches!(
            err,
            Err(ValidationError::BadSensorId {
                why: SensorIdFault::Empty
            })
        ));
    }

    #[test]
    fn truth_is_normalised_with_non_negative_w() {
        let t = |q| Truth {
            t: 9,
            q,
            token: None,
        };
        let v = validate_truth(&t([-2.0, 0.0, 0.0, 0.0])).unwrap();
        assert_eq!(
            v,
            ValidTruth {
                t: 9,
                q: [1.0, 0.0, 0.0, 0.0]
            }
        );
        let v = validate_truth(&t([-1.0, 1.0, -1.0, 1.0])).unwrap();
        assert_eq!(v.q, [0.5, -0.5, 0.5, -0.5]);
        // w = -0: the sign bit is cleared too, the rest kept.
        let v = validate_truth(&t([-0.0, 0.0, 0.0, 3.0])).unwrap();
        assert!(v.q[0].is_sign_positive());
        assert_eq!(v.q[3], 1.0);
        assert_eq!(
            validate_truth(&t([0.0; 4])).unwrap_err(),
            ValidationError::ZeroVector { field: "q" }
        );
        let err = validate_truth(&t([1.0, 0.0, 0.0, f64::NAN])).unwrap_err();
        assert!(matches!(
            err,
            ValidationError::NonFinite { field: "q[3]", .. }
        ));
    }
}
