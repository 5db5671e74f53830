//! The example messages of `PROTOCOL.md`, and their hex dump format.

use wahbad_protocol::*;

/// (title, JSON-like rendering for the reader, message), in document order.
pub fn doc_examples() -> Vec<(&'static str, Message)> {
    let t = 1_000_000_000;
    vec![
        (
            "hello",
            Message::Hello(Hello {
                version: 1,
                role: Role::Source,
                name: Some("rig-a".into()),
                token: Some("s3cret".into()),
                verdicts: None,
            }),
        ),
        (
            "welcome",
            Message::Welcome(Welcome {
                version: 1,
                server: "wahbad 0.1.0".into(),
            }),
        ),
        (
            "error",
            Message::Error(ErrorMessage::new(ErrorCode::Auth, "wrong token")),
        ),
        (
            "obs",
            Message::Obs(Obs {
                sensor: "sun".into(),
                seq: 7,
                t,
                b: [0.0, 0.0, 1.0],
                r: [1.0, 0.0, 0.0],
                sigma: Some(0.001),
                token: None,
            }),
        ),
        (
            "rate",
            Message::Rate(Rate {
                sensor: "gyro".into(),
                seq: 3,
                t,
                w: [0.0, 0.0, 0.01],
                token: None,
            }),
        ),
        (
            "truth",
            Message::Truth(Truth {
                t,
                q: [1.0, 0.0, 0.0, 0.0],
                token: None,
            }),
        ),
        (
            "reject",
            Message::Reject(Reject {
                sensor: Some("sun".into()),
                seq: Some(8),
                reason: "b has zero length".into(),
            }),
        ),
        (
            "solution",
            Message::Solution(Solution {
                t,
                q: [1.0, 0.0, 0.0, 0.0],
                cov: [1e-6, 0.0, 0.0, 0.0, 1e-6, 0.0, 0.0, 0.0, 1e-6],
                status: SolutionStatus::Ok,
                inlier_fraction: 1.0,
                n: 2,
                n_inliers: 2,
                method: "svd".into(),
                iterations: 1,
                sensors: vec![
                    SensorCount {
                        sensor: "sun".into(),
                        n: 1,
                        n_inliers: 1,
                    },
                    SensorCount {
                        sensor: "mag".into(),
                        n: 1,
                        n_inliers: 1,
                    },
                ],
                verdicts: Some(
                    vec![
                        ObsVerdict {
                            sensor: "sun".into(),
                            seq: 7,
                            residual: 0.0001,
                            inlier: true,
                        },
                        ObsVerdict {
                            sensor: "mag".into(),
                            seq: 3,
                            residual: 0.002,
                            inlier: true,
                        },
                    ]
                    .into(),
                ),
                propagated: None,
            }),
        ),
        (
            "alert",
            Message::Alert(Alert {
                t,
                kind: "inlier_fraction".into(),
                state: AlertState::Raised,
                value: 0.4,
                threshold: 0.5,
                sensor: None,
                message: "inlier fraction 0.40 below 0.50".into(),
            }),
        ),
        ("lagged", Message::Lagged(Lagged { skipped: 5 })),
        ("status request", Message::Status(Status::request())),
        (
            "status answer",
            Message::Status(Status::answer(StatusReport {
                uptime_s: 60.0,
                sources: 2,
                subscribers: 1,
                accepted: 1200,
                rejected: 3,
                dropped: 0,
                epochs: 600,
            })),
        ),
    ]
}

/// Lowercase hex, 16 bytes a line, bytes separated by spaces.
pub fn hex_lines(bytes: &[u8]) -> String {
    bytes
        .chunks(16)
        .map(|line| {
            line.iter()
                .map(|b| format!("{b:02x}"))
                .collect::<Vec<_>>()
                .join(" ")
        })
        .collect::<Vec<_>>()
        .join("\n")
}
