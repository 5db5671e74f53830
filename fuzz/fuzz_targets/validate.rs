//! Fuzz target: validation of decoded messages.
//!
//! Two halves from one input: the bytes as a MessagePack body (decoded, then
//! validated when it is an `obs`, `rate` or `truth`), and the same bytes as
//! raw `arbitrary` fields of an `Obs`/`Rate`/`Truth`, so every f64 bit
//! pattern reaches the checks. Oracles: an accepted value has unit vectors
//! and finite numbers, `0 < sigma < π`, truth with `w >= 0`; a refusal
//! matches the input (non-finite only when a number is, zero only when the
//! vector is).

#![no_main]

use arbitrary::{Arbitrary, Unstructured};
use libfuzzer_sys::fuzz_target;
use wahbad_protocol::{
    check_sensor_id, decode_body, validate_obs, validate_rate, validate_truth, Message, Obs, Rate,
    Truth, ValidationError,
};

fn unit_ok(v: &[f64]) -> bool {
    let norm = v.iter().map(|x| x * x).sum::<f64>().sqrt();
    v.iter().all(|x| x.is_finite()) && (norm - 1.0).abs() < 1e-12
}

fn check_obs(obs: &Obs) {
    match validate_obs(obs) {
        Ok(v) => {
            assert!(unit_ok(&v.b) && unit_ok(&v.r), "{v:?}");
            if let Some(s) = v.sigma {
                assert!(s > 0.0 && s < std::f64::consts::PI);
            }
            assert!(check_sensor_id(&v.sensor).is_ok());
            assert_eq!((v.seq, v.t), (obs.seq, obs.t));
        }
        Err(ValidationError::NonFinite { value, .. }) => assert!(!value.is_finite()),
        Err(ValidationError::ZeroVector { field }) => {
            let v = if field == "b" { obs.b } else { obs.r };
            assert!(v.iter().all(|x| *x == 0.0), "{field} {v:?}");
        }
        Err(ValidationError::SigmaOutOfRange { value }) => {
            assert!(!(value > 0.0 && value < std::f64::consts::PI))
        }
        Err(ValidationError::BadSensorId { .. }) => assert!(check_sensor_id(&obs.sensor).is_err()),
        Err(err) => panic!("unexpected validation error {err}"),
    }
}

fn check_rate(rate: &Rate) {
    match validate_rate(rate) {
        Ok(v) => assert!(v.w.iter().all(|x| x.is_finite())),
        Err(ValidationError::NonFinite { value, .. }) => assert!(!value.is_finite()),
        Err(ValidationError::BadSensorId { .. }) => assert!(check_sensor_id(&rate.sensor).is_err()),
        Err(err) => panic!("unexpected validation error {err}"),
    }
}

fn check_truth(truth: &Truth) {
    match validate_truth(truth) {
        Ok(v) => {
            assert!(unit_ok(&v.q), "{v:?}");
            assert!(v.q[0] >= 0.0 && v.q[0].is_sign_positive(), "{v:?}");
        }
        Err(ValidationError::NonFinite { value, .. }) => assert!(!value.is_finite()),
        Err(ValidationError::ZeroVector { .. }) => assert!(truth.q.iter().all(|x| *x == 0.0)),
        Err(err) => panic!("unexpected validation error {err}"),
    }
}

#[derive(Arbitrary, Debug)]
enum Raw {
    Obs {
        sensor: String,
        seq: u64,
        t: i64,
        b: [f64; 3],
        r: [f64; 3],
        sigma: Option<f64>,
    },
    Rate {
        sensor: String,
        seq: u64,
        t: i64,
        w: [f64; 3],
    },
    Truth {
        t: i64,
        q: [f64; 4],
    },
}

fuzz_target!(|data: &[u8]| {
    match decode_body(data) {
        Ok(Message::Obs(obs)) => check_obs(&obs),
        Ok(Message::Rate(rate)) => check_rate(&rate),
        Ok(Message::Truth(truth)) => check_truth(&truth),
        _ => {}
    }
    let mut u = Unstructured::new(data);
    while let Ok(raw) = Raw::arbitrary(&mut u) {
        match raw {
            Raw::Obs { sensor, seq, t, b, r, sigma } => check_obs(&Obs {
                sensor: sensor.into(),
                seq,
                t,
                b,
                r,
                sigma,
                token: None,
            }),
            Raw::Rate { sensor, seq, t, w } => check_rate(&Rate {
                sensor: sensor.into(),
                seq,
                t,
                w,
                token: None,
            }),
            Raw::Truth { t, q } => check_truth(&Truth { t, q, token: None }),
        }
        if u.is_empty() {
            break;
        }
    }
});
