//! Fuzz target: the estimator fed arbitrary sequences of valid but hostile
//! inputs.
//!
//! Every input passes protocol validation (the estimator never sees anything
//! else), but times sit near the i64 bounds or jump far ahead, σ is subnormal
//! or near π, sequence numbers repeat, vectors are parallel or nearly so, and
//! the configuration is small (tiny windows, few sensors) so limits are hit.
//! Oracles: no panic (overflow checks are on in fuzz builds); every solution
//! has a finite unit quaternion with w >= 0, a finite covariance, counts that
//! add up and strictly increasing epochs; no NaN in alerts; a second
//! estimator fed the same inputs gives the same outputs bit for bit (what a
//! replay relies on).

#![no_main]

use std::collections::BTreeMap;

use arbitrary::Arbitrary;
use libfuzzer_sys::fuzz_target;
use wahbad::estimator::{Estimator, EstimatorConfig, Input, Output, SensorConfig};
use wahbad::solve::Method;
use wahbad_protocol::{
    encode_body, validate_obs, validate_rate, validate_truth, Message, Obs, Rate, Truth,
};

#[derive(Arbitrary, Debug, Clone, Copy)]
enum Time {
    /// A small step from the previous time (may go backwards).
    Step(i16),
    /// A step in whole ms.
    StepMs(i16),
    /// Far into the future: up to ~4e9 s.
    Jump(u32),
    NearMax(u16),
    NearMin(u16),
    Abs(i64),
    Same,
}

#[derive(Arbitrary, Debug, Clone, Copy)]
enum Seq {
    Next,
    Same,
    Back,
    Abs(u64),
    Max,
}

#[derive(Arbitrary, Debug, Clone, Copy)]
enum Dir {
    Axis(u8),
    /// An axis tilted by a tiny angle: almost parallel to `Axis`.
    NearAxis(u8, i8),
    Raw([f64; 3]),
    Tiny([i8; 3]),
}

#[derive(Arbitrary, Debug, Clone, Copy)]
enum Sigma {
    None,
    MinPositive,
    Subnormal,
    NearPi,
    Raw(f64),
    Typical(u8),
}

#[derive(Arbitrary, Debug, Clone, Copy)]
enum Op {
    Obs {
        sensor: u8,
        seq: Seq,
        t: Time,
        b: Dir,
        r: Dir,
        sigma: Sigma,
    },
    Rate {
        sensor: u8,
        seq: Seq,
        t: Time,
        w: [f64; 3],
    },
    Truth {
        t: Time,
        q: [f64; 4],
    },
    Tick(Time),
}

#[derive(Arbitrary, Debug)]
struct Case {
    period_ms: u8,
    span_pick: u8,
    latency_ms: u8,
    max_window_obs: u8,
    max_rate_samples: u8,
    max_sensors: u8,
    method: u8,
    default_sigma: bool,
    ops: Vec<Op>,
}

const SENSORS: [&str; 6] = ["st1", "mag", "sun", "gyro", "x.y-z_9", "extra"];

fn time(pick: Time, last: i64) -> i64 {
    match pick {
        Time::Step(d) => last.saturating_add(i64::from(d)),
        Time::StepMs(d) => last.saturating_add(i64::from(d) * 1_000_000),
        Time::Jump(s) => last.saturating_add(i64::from(s) * 1_000_000_000),
        Time::NearMax(d) => i64::MAX - i64::from(d),
        Time::NearMin(d) => i64::MIN + i64::from(d),
        Time::Abs(t) => t,
        Time::Same => last,
    }
}

fn seq(pick: Seq, last: u64) -> u64 {
    match pick {
        Seq::Next => last.wrapping_add(1),
        Seq::Same => last,
        Seq::Back => last.wrapping_sub(1),
        Seq::Abs(s) => s,
        Seq::Max => u64::MAX,
    }
}

fn dir(pick: Dir) -> [f64; 3] {
    let axis = |a: u8| {
        let mut v = [0.0; 3];
        v[usize::from(a % 3)] = if a & 4 == 0 { 1.0 } else { -1.0 };
        v
    };
    match pick {
        Dir::Axis(a) => axis(a),
        Dir::NearAxis(a, e) => {
            let mut v = axis(a);
            v[(usize::from(a) + 1) % 3] = f64::from(e) * 1e-12;
            v
        }
        Dir::Raw(v) => v,
        Dir::Tiny(v) => v.map(|x| f64::from(x) * 1e-300),
    }
}

fn sigma(pick: Sigma) -> Option<f64> {
    match pick {
        Sigma::None => None,
        Sigma::MinPositive => Some(f64::MIN_POSITIVE),
        Sigma::Subnormal => Some(5e-324),
        Sigma::NearPi => Some(std::f64::consts::PI * (1.0 - f64::EPSILON)),
        Sigma::Raw(s) => Some(s),
        Sigma::Typical(k) => Some(1e-6 * (f64::from(k) + 1.0)),
    }
}

fn config(case: &Case) -> EstimatorConfig {
    let period_ms = u64::from(case.period_ms % 200) + 1;
    let span_ms = period_ms * (u64::from(case.span_pick % 10) + 1);
    let method = match case.method % 8 {
        0 => Method::Svd,
        1 => Method::QMethod,
        2 => Method::Ls,
        3 => Method::Triad,
        4 => Method::Lud,
        5 => Method::GncTls,
        6 => Method::Consensus,
        _ => Method::Auto,
    };
    let mut sensors = BTreeMap::new();
    if case.default_sigma {
        sensors.insert(
            "st1".to_string(),
            SensorConfig {
                sigma: Some(1e-4),
                expected_rate_hz: Some(10.0),
                ..SensorConfig::default()
            },
        );
    }
    EstimatorConfig {
        period_ms,
        span_ms,
        latency_ms: u64::from(case.latency_ms),
        max_window_obs: usize::from(case.max_window_obs % 64) + 1,
        max_rate_samples: usize::from(case.max_rate_samples % 64) + 1,
        max_sensors: usize::from(case.max_sensors % 6) + 1,
        method,
        max_iterations: 20,
        sensors,
        ..EstimatorConfig::default()
    }
}

fn inputs(case: &Case) -> Vec<Input> {
    let mut last_t = 0i64;
    let mut last_seq = 0u64;
    let mut out = Vec::new();
    for op in case.ops.iter().take(200) {
        let input = match *op {
            Op::Obs { sensor, seq: s, t, b, r, sigma: sg } => {
                let obs = Obs {
                    sensor: SENSORS[usize::from(sensor) % SENSORS.len()].into(),
                    seq: seq(s, last_seq),
                    t: time(t, last_t),
                    b: dir(b),
                    r: dir(r),
                    sigma: sigma(sg),
                    token: None,
                };
                validate_obs(&obs).ok().map(Input::Obs)
            }
            Op::Rate { sensor, seq: s, t, w } => {
                let rate = Rate {
                    sensor: SENSORS[usize::from(sensor) % SENSORS.len()].into(),
                    seq: seq(s, last_seq),
                    t: time(t, last_t),
                    w,
                    token: None,
                };
                validate_rate(&rate).ok().map(Input::Rate)
            }
            Op::Truth { t, q } => validate_truth(&Truth {
                t: time(t, last_t),
                q,
                token: None,
            })
            .ok()
            .map(Input::Truth),
            Op::Tick(t) => Some(Input::Tick(time(t, last_t))),
        };
        if let Some(input) = input {
            match &input {
                Input::Obs(o) => (last_t, last_seq) = (o.t, o.seq),
                Input::Rate(r) => (last_t, last_seq) = (r.t, r.seq),
                Input::Truth(t) => last_t = t.t,
                Input::Tick(t) => last_t = *t,
            }
            out.push(input);
        }
    }
    out
}

fn encoded(outputs: &[Output]) -> Vec<Vec<u8>> {
    outputs
        .iter()
        .map(|o| match o {
            Output::Solution(s) => encode_body(&Message::Solution(s.clone())),
            Output::Alert(a) => encode_body(&Message::Alert(a.clone())),
        })
        .collect()
}

fn check(outputs: &[Output], last_epoch: &mut Option<i64>) {
    for output in outputs {
        match output {
            Output::Solution(s) => {
                assert!(s.q.iter().all(|x| x.is_finite()), "{s:?}");
                let norm = s.q.iter().map(|x| x * x).sum::<f64>().sqrt();
                assert!((norm - 1.0).abs() < 1e-9, "q not unit: {s:?}");
                assert!(s.q[0] >= 0.0, "w < 0: {s:?}");
                assert!(s.cov.iter().all(|x| x.is_finite()), "cov not finite: {s:?}");
                assert!(s.inlier_fraction.is_finite(), "{s:?}");
                assert!((0.0..=1.0).contains(&s.inlier_fraction), "{s:?}");
                assert!(s.n_inliers <= s.n, "{s:?}");
                let total: u32 = s.sensors.iter().map(|c| c.n).sum();
                assert_eq!(total, s.n, "sensor counts do not add up: {s:?}");
                if let Some(v) = &s.verdicts {
                    assert_eq!(v.len() as u32, s.n);
                    assert!(v.iter().all(|v| !v.residual.is_nan()), "{s:?}");
                }
                if let Some(prev) = *last_epoch {
                    assert!(s.t > prev, "epochs not increasing: {prev} then {}", s.t);
                }
                *last_epoch = Some(s.t);
            }
            Output::Alert(a) => {
                assert!(!a.value.is_nan() && !a.threshold.is_nan(), "{a:?}");
            }
        }
    }
}

fuzz_target!(|case: Case| {
    let config = config(&case);
    let (Ok(mut first), Ok(mut second)) = (
        Estimator::new(config.clone()),
        Estimator::new(config.clone()),
    ) else {
        return;
    };
    let inputs = inputs(&case);
    let mut last_epoch = None;
    let (mut out1, mut out2) = (Vec::new(), Vec::new());
    for input in inputs {
        out1.clear();
        out2.clear();
        let rejected_before = first.stats().rejected;
        let r1 = first.ingest(input.clone(), &mut out1);
        let r2 = second.ingest(input, &mut out2);
        assert_eq!(r1, r2, "same input, different verdict");
        assert_eq!(r1.is_err(), first.stats().rejected == rejected_before + 1);
        check(&out1, &mut last_epoch);
        assert_eq!(encoded(&out1), encoded(&out2), "not deterministic");
    }
    assert_eq!(first.stats(), second.stats());
});
