//! Interop of the protocol crate with an independent MessagePack
//! implementation: the PyPI `msgpack` package (the reference implementation
//! for Python), driven by `tests/python/msgpack_interop.py`.
//!
//! (a) Python encodes frames (float 32 and integer encodings of floats, forced
//! wide integer encodings, unknown keys, `type` not first) that the Rust
//! decoder must read field for field; (b) Python decodes the frames the Rust
//! encoder wrote and checks them field for field; (c) Python re-encodes the
//! Rust frames with its own encoding choices and Rust reads back the same
//! messages. Under `CI=true` a missing `msgpack` fails the test.

use wahbad_protocol::*;
use wahbad_tests::python::{require_modules, run};

const SCRIPT: &str = "msgpack_interop.py";

fn decode_stream(bytes: &[u8]) -> Vec<Message> {
    let mut dec = FrameDecoder::new();
    dec.push(bytes);
    let mut out = Vec::new();
    while let Some(msg) = dec.next_message().expect("valid frame") {
        out.push(msg);
    }
    dec.finish().expect("stream ends between frames");
    out
}

/// What each frame of `msgpack_interop.py encode` must decode to, in order.
fn python_encoded_expected() -> Vec<Message> {
    let f32 = |x: f32| f64::from(x); // a float 32 widened exactly
    vec![
        Message::Hello(Hello {
            version: 1,
            role: Role::Subscriber,
            name: Some("banc d'essai — 試験台".into()),
            token: None,
            verdicts: Some(false),
        }),
        Message::Obs(Obs {
            sensor: "sun".into(),
            seq: 0,
            t: 1 << 40,
            b: [f32(0.1), -0.5, 1.0],
            r: [1.0, 300.0, 70000.0],
            sigma: Some(0.25),
            token: None,
        }),
        Message::Obs(Obs {
            sensor: "star.1".into(),
            seq: 7,
            t: 5,
            b: [3.0, -2.0, 0.0],
            r: [0.0, 0.0, 1.0],
            sigma: None,
            token: Some("s3cret".into()),
        }),
        Message::Rate(Rate {
            sensor: "gyro".into(),
            seq: 1,
            t: -1,
            w: [-1.0, -200.0, 0.125],
            token: None,
        }),
        Message::Truth(Truth {
            t: 10,
            q: [0.5, -0.5, 0.0, 0.7],
            token: None,
        }),
        Message::Status(Status::request()),
        Message::Status(Status::answer(StatusReport {
            uptime_s: 3.0,
            sources: 1,
            subscribers: 2,
            accepted: 300,
            rejected: 0,
            dropped: 1 << 33,
            epochs: 9,
        })),
        Message::Solution(Solution {
            t: 100,
            q: [1.0, 0.0, 0.0, 0.0],
            cov: [0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1e12],
            status: SolutionStatus::Degraded,
            inlier_fraction: 0.5,
            n: 2,
            n_inliers: 1,
            method: "lud".into(),
            iterations: 4,
            sensors: vec![SensorCount {
                sensor: "sun".into(),
                n: 2,
                n_inliers: 1,
            }],
            verdicts: Some(
                vec![ObsVerdict {
                    sensor: "sun".into(),
                    seq: 5,
                    residual: 0.25,
                    inlier: true,
                }]
                .into(),
            ),
            propagated: Some(false),
        }),
        Message::Alert(Alert {
            t: 1,
            kind: "stale".into(),
            state: AlertState::Raised,
            value: 2.0,
            threshold: 1.5,
            sensor: Some("mag".into()),
            message: "mag silent 2 s ⚠".into(),
        }),
        Message::Lagged(Lagged { skipped: 12 }),
        Message::Reject(Reject {
            sensor: None,
            seq: Some(3),
            reason: "sigma 4 rad is outside 0 < sigma < pi".into(),
        }),
        Message::Welcome(Welcome {
            version: 1,
            server: "wahbad".into(),
        }),
        Message::Error(ErrorMessage {
            code: "busy".into(),
            message: String::new(),
        }),
    ]
}

/// The frames this side writes; `EXPECTED` in the script mirrors them.
fn rust_encoded() -> Vec<Message> {
    let solution =
        |status, q, cov, sensors, verdicts: Option<Vec<ObsVerdict>>, propagated| Solution {
            t: 0,
            q,
            cov,
            status,
            inlier_fraction: 0.0,
            n: 0,
            n_inliers: 0,
            method: String::new(),
            iterations: 0,
            sensors,
            verdicts: verdicts.map(Into::into),
            propagated,
        };
    vec![
        Message::Hello(Hello {
            version: 1,
            role: Role::Source,
            name: None,
            token: None,
            verdicts: None,
        }),
        Message::Hello(Hello {
            version: 1,
            role: Role::Subscriber,
            name: Some("試験台 🛰".into()),
            token: Some(String::new()),
            verdicts: Some(true),
        }),
        Message::Welcome(Welcome {
            version: 1,
            server: "wahbad 0.1.0".into(),
        }),
        Message::Error(ErrorMessage::new(
            ErrorCode::Framing,
            "frame length 70000 exceeds the maximum",
        )),
        Message::Obs(Obs {
            sensor: "sun".into(),
            seq: u64::MAX,
            t: i64::MIN,
            b: [0.1, -0.0, 1e300],
            r: [5e-324, f64::INFINITY, -1.0],
            sigma: Some(0.001),
            token: None,
        }),
        Message::Rate(Rate {
            sensor: "gyro.z-1".into(),
            seq: 0,
            t: i64::MAX,
            w: [0.01, -0.02, 0.0],
            token: Some("tok".into()),
        }),
        Message::Truth(Truth {
            t: 5,
            q: [1.0, 0.0, 0.0, 0.0],
            token: None,
        }),
        Message::Reject(Reject {
            sensor: Some("sun".into()),
            seq: Some(9),
            reason: "b has zero length".into(),
        }),
        Message::Reject(Reject {
            sensor: None,
            seq: None,
            reason: "message is a MessagePack array, not a map".into(),
        }),
        Message::Solution(Solution {
            t: 1_500_000_000,
            inlier_fraction: 0.75,
            n: 4,
            n_inliers: 3,
            method: "gnc-tls".into(),
            iterations: 17,
            ..solution(
                SolutionStatus::Ok,
                [0.5; 4],
                [1e-6, 0.0, 0.0, 0.0, 1e-6, 0.0, 0.0, 0.0, 1e12],
                vec![],
                Some(vec![]),
                Some(false),
            )
        }),
        Message::Solution(Solution {
            t: 2,
            n: 1,
            method: "svd".into(),
            ..solution(
                SolutionStatus::Insufficient,
                [1.0, 0.0, 0.0, 0.0],
                [0.0; 9],
                vec![SensorCount {
                    sensor: "mag".into(),
                    n: 1,
                    n_inliers: 0,
                }],
                Some(vec![ObsVerdict {
                    sensor: "mag".into(),
                    seq: 4,
                    residual: 0.3,
                    inlier: false,
                }]),
                None,
            )
        }),
        Message::Alert(Alert {
            t: 7,
            kind: "inlier_fraction".into(),
            state: AlertState::Cleared,
            value: 0.9,
            threshold: 0.5,
            sensor: None,
            message: "inliers back above 50 %".into(),
        }),
        Message::Lagged(Lagged { skipped: 0 }),
        Message::Status(Status::request()),
        Message::Status(Status::answer(StatusReport {
            uptime_s: 12.5,
            sources: 2,
            subscribers: 1,
            accepted: 1000,
            rejected: 3,
            dropped: 0,
            epochs: 50,
        })),
    ]
}

#[test]
fn rust_reads_frames_python_msgpack_encoded() {
    if !require_modules(&["msgpack"]) {
        return;
    }
    let out = run(SCRIPT, &["encode"], b"");
    let got = decode_stream(&out.stdout);
    let want = python_encoded_expected();
    assert_eq!(got.len(), want.len());
    for (idx, (got, want)) in got.iter().zip(&want).enumerate() {
        assert_eq!(got, want, "frame {idx}");
    }
    // The float 32 nearest 0.1 is not 0.1: it must arrive widened, not re-rounded.
    let Message::Obs(obs) = &got[1] else {
        panic!("frame 1 is not an obs")
    };
    assert_eq!(obs.b[0], 0.10000000149011612);
}

#[test]
fn python_msgpack_reads_frames_rust_encoded() {
    if !require_modules(&["msgpack"]) {
        return;
    }
    let mut stream = Vec::new();
    for msg in rust_encoded() {
        encode_frame_into(&msg, &mut stream);
    }
    let out = run(SCRIPT, &["decode"], &stream);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(stdout.trim(), format!("checked {}", rust_encoded().len()));
}

#[test]
fn python_msgpack_re_encoding_of_rust_frames_reads_back_the_same() {
    if !require_modules(&["msgpack"]) {
        return;
    }
    let mut stream = Vec::new();
    for msg in rust_encoded() {
        encode_frame_into(&msg, &mut stream);
    }
    let out = run(SCRIPT, &["echo"], &stream);
    assert_eq!(decode_stream(&out.stdout), rust_encoded());
}
