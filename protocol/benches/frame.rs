//! Criterion benches of the wire format: frame encode and decode per message
//! type, two other `obs` shapes (one on the fast path, one falling back to the
//! general path), the stream decoder over a buffer of many frames, and
//! validation.
//! Short sampling so the whole file runs in well under a minute.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use wahbad_protocol::{
    decode_body, encode_frame_into, validate_obs, validate_rate, Alert, AlertState, FrameDecoder,
    Hello, Message, Obs, ObsVerdict, Rate, Role, SensorCount, Solution, SolutionStatus, Status,
    StatusReport, Truth, LEN_PREFIX, PROTOCOL_VERSION,
};

fn obs() -> Obs {
    Obs {
        sensor: "star_cam".into(),
        seq: 123_456,
        t: 1_234_567_890_123,
        b: [0.267_261_2, 0.534_522_5, 0.801_783_7],
        r: [0.577_350_3, -0.577_350_3, 0.577_350_3],
        sigma: Some(1e-4),
        token: None,
    }
}

fn rate() -> Rate {
    Rate {
        sensor: "gyro".into(),
        seq: 99,
        t: 1_234_567_890_123,
        w: [0.01, -0.02, 0.003],
        token: None,
    }
}

/// A solution of a 200-observation window, with or without its verdicts.
fn solution(verdicts: bool) -> Solution {
    Solution {
        t: 1_234_500_000_000,
        q: [0.9, 0.3, -0.2, 0.244_948_974],
        cov: [1e-8, 0.0, 0.0, 0.0, 1e-8, 0.0, 0.0, 0.0, 2e-8],
        status: SolutionStatus::Ok,
        inlier_fraction: 0.95,
        n: 200,
        n_inliers: 190,
        method: "auto".into(),
        iterations: 3,
        sensors: ["mag", "star_cam", "sun"]
            .iter()
            .map(|s| SensorCount {
                sensor: (*s).into(),
                n: 66,
                n_inliers: 63,
            })
            .collect(),
        verdicts: verdicts.then(|| {
            (0..200)
                .map(|i| ObsVerdict {
                    sensor: ["mag", "star_cam", "sun"][i % 3].into(),
                    seq: 1000 + i as u64,
                    residual: 1.5e-4 * (i % 7) as f64,
                    inlier: i % 20 != 0,
                })
                .collect()
        }),
        propagated: None,
    }
}

fn messages() -> Vec<(&'static str, Message)> {
    vec![
        (
            "hello",
            Message::Hello(Hello {
                version: PROTOCOL_VERSION,
                role: Role::Source,
                name: Some("bench-rig".into()),
                token: None,
                verdicts: None,
            }),
        ),
        ("obs", Message::Obs(obs())),
        ("rate", Message::Rate(rate())),
        (
            "truth",
            Message::Truth(Truth {
                t: 1_234_567_890_123,
                q: [0.9, 0.3, -0.2, 0.244_948_974],
                token: None,
            }),
        ),
        ("solution_lean", Message::Solution(solution(false))),
        ("solution_200_verdicts", Message::Solution(solution(true))),
        (
            "alert",
            Message::Alert(Alert {
                t: 1_234_500_000_000,
                kind: "sensor_inliers".into(),
                state: AlertState::Raised,
                value: 0.55,
                threshold: 0.8,
                sensor: Some("mag".into()),
                message: "sensor `mag`: inlier share 0.550 is below 0.800".into(),
            }),
        ),
        (
            "status",
            Message::Status(Status::answer(StatusReport {
                uptime_s: 12.5,
                sources: 1,
                subscribers: 2,
                accepted: 1_000_000,
                rejected: 3,
                dropped: 0,
                epochs: 125,
            })),
        ),
    ]
}

fn encode(c: &mut Criterion) {
    let mut group = c.benchmark_group("encode_frame");
    let mut buf = Vec::with_capacity(64 * 1024);
    for (name, msg) in messages() {
        group.bench_function(name, |b| {
            b.iter(|| {
                buf.clear();
                encode_frame_into(black_box(&msg), &mut buf);
                black_box(buf.len())
            })
        });
    }
    group.finish();
}

fn decode(c: &mut Criterion) {
    let mut group = c.benchmark_group("decode_body");
    for (name, msg) in messages() {
        let mut frame = Vec::new();
        encode_frame_into(&msg, &mut frame);
        let body = frame[LEN_PREFIX..].to_vec();
        group.bench_function(name, |b| {
            b.iter(|| decode_body(black_box(&body)).expect("decodes"))
        });
    }
    group.finish();
}

/// The sample obs with one extra unknown key of `value` (raw MessagePack).
fn obs_with_unknown(value: &[u8]) -> Vec<u8> {
    let mut body = Vec::new();
    wahbad_protocol::encode_body_into(&Message::Obs(obs()), &mut body);
    // MessagePack spec: fixmap 0x80-0x8f; the sample has 7 pairs (type +
    // 6 fields), so bump the count and append fixstr "x" (a1 78) + value.
    assert!(body[0] & 0xf0 == 0x80 && body[0] < 0x8f);
    body[0] += 1;
    body.extend_from_slice(&[0xa1, b'x']);
    body.extend_from_slice(value);
    body
}

/// Other shapes of `obs`: one the fast path still takes, and one it leaves
/// to the general path (a nested map under an unknown key), to show what a
/// fallback costs.
fn decode_shapes(c: &mut Criterion) {
    let mut group = c.benchmark_group("decode_body_shape");
    // MessagePack spec: array 16 0xdc of two float 32 (0xca); fixmap 0x81
    // holding fixstr "k" (a1 6b) -> positive fixint 1.
    let flat = obs_with_unknown(&[0xdc, 0, 2, 0xca, 0x3f, 0x80, 0, 0, 0xca, 0, 0, 0, 0]);
    let nested = obs_with_unknown(&[0x81, 0xa1, b'k', 0x01]);
    for (name, body) in [
        ("obs_unknown_array", flat),
        ("obs_unknown_map_fallback", nested),
    ] {
        group.bench_function(name, |b| {
            b.iter(|| decode_body(black_box(&body)).expect("decodes"))
        });
    }
    group.finish();
}

fn stream(c: &mut Criterion) {
    // 1000 obs frames pushed at once and split + decoded, as a source's socket delivers them.
    let mut bytes = Vec::new();
    for seq in 0..1000u64 {
        encode_frame_into(&Message::Obs(Obs { seq, ..obs() }), &mut bytes);
    }
    let mut group = c.benchmark_group("stream");
    group.throughput(Throughput::Elements(1000));
    group.bench_function("decoder_1000_obs", |b| {
        b.iter(|| {
            let mut decoder = FrameDecoder::new();
            decoder.push(black_box(&bytes));
            let mut n = 0;
            while let Some(msg) = decoder.next_message().expect("decodes") {
                black_box(msg);
                n += 1;
            }
            n
        })
    });
    group.finish();
}

fn validate(c: &mut Criterion) {
    let mut group = c.benchmark_group("validate");
    let (o, r) = (obs(), rate());
    group.bench_function("obs", |b| b.iter(|| validate_obs(black_box(&o)).unwrap()));
    group.bench_function("rate", |b| b.iter(|| validate_rate(black_box(&r)).unwrap()));
    group.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(15)
        .warm_up_time(Duration::from_millis(200))
        .measurement_time(Duration::from_millis(600));
    targets = encode, decode, decode_shapes, stream, validate
}
criterion_main!(benches);
