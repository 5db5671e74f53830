//! Sample messages shared by the integration tests: every message type, with
//! edge values (empty lists, extremes, unicode in free text).

use wahbad_protocol::*;

/// One solution; `verdicts` and `sensors` vary per sample.
pub fn solution(sensors: Vec<SensorCount>, verdicts: Option<Vec<ObsVerdict>>) -> Solution {
    Solution {
        t: 1_500_000_000,
        q: [0.9238795325112867, 0.0, 0.0, 0.3826834323650898],
        cov: [1e-6, 0.0, 0.0, 0.0, 1e-6, 0.0, 0.0, 0.0, 1e12],
        status: SolutionStatus::Unobservable,
        inlier_fraction: 0.75,
        n: 4,
        n_inliers: 3,
        method: "gnc-tls".into(),
        iterations: 17,
        sensors,
        verdicts: verdicts.map(Into::into),
        propagated: Some(false),
    }
}

/// Every message type at least once, with edge values.
pub fn samples() -> Vec<Message> {
    vec![
        Message::Hello(Hello {
            version: 1,
            role: Role::Source,
            name: None,
            token: None,
            verdicts: None,
        }),
        Message::Hello(Hello {
            version: u32::MAX,
            role: Role::Subscriber,
            name: Some("tableau d'essai — 試験台 🛰".into()),
            token: Some(String::new()),
            verdicts: Some(false),
        }),
        Message::Welcome(Welcome {
            version: 1,
            server: "wahbad 0.1.0".into(),
        }),
        Message::Error(ErrorMessage::new(
            ErrorCode::Auth,
            "jeton refusé: « wrong token »",
        )),
        Message::Error(ErrorMessage {
            code: "future-code".into(),
            message: String::new(),
        }),
        Message::Obs(Obs {
            sensor: "sun".into(),
            seq: 0,
            t: 0,
            b: [0.0, 0.0, 1.0],
            r: [1.0, 0.0, 0.0],
            sigma: None,
            token: None,
        }),
        Message::Obs(Obs {
            sensor: "A".repeat(64).into(),
            seq: u64::MAX,
            t: i64::MIN,
            b: [f64::MAX, -f64::MIN_POSITIVE, -0.0],
            r: [5e-324, f64::INFINITY, -1.0],
            sigma: Some(std::f64::consts::PI),
            token: Some("s3cret".into()),
        }),
        Message::Rate(Rate {
            sensor: "gyro.z-1".into(),
            seq: 42,
            t: i64::MAX,
            w: [0.01, -0.02, 0.0],
            token: None,
        }),
        Message::Truth(Truth {
            t: -1,
            q: [-0.5, 0.5, 0.5, 0.5],
            token: Some("t".into()),
        }),
        Message::Reject(Reject {
            sensor: None,
            seq: None,
            reason: "message is a MessagePack array, not a map".into(),
        }),
        Message::Reject(Reject {
            sensor: Some("sun".into()),
            seq: Some(9),
            reason: "b has zero length".into(),
        }),
        Message::Solution(solution(vec![], None)),
        Message::Solution(solution(vec![], Some(vec![]))),
        Message::Solution(Solution {
            status: SolutionStatus::Ok,
            propagated: None,
            ..solution(
                vec![
                    SensorCount {
                        sensor: "sun".into(),
                        n: 2,
                        n_inliers: 2,
                    },
                    SensorCount {
                        sensor: "mag".into(),
                        n: 2,
                        n_inliers: 1,
                    },
                ],
                Some(vec![
                    ObsVerdict {
                        sensor: "sun".into(),
                        seq: 1,
                        residual: 1e-4,
                        inlier: true,
                    },
                    ObsVerdict {
                        sensor: "mag".into(),
                        seq: 2,
                        residual: 0.3,
                        inlier: false,
                    },
                ]),
            )
        }),
        Message::Alert(Alert {
            t: 7,
            kind: "sensor_inliers".into(),
            state: AlertState::Raised,
            value: 0.25,
            threshold: 0.5,
            sensor: Some("mag".into()),
            message: "magnetometer inliers 25 % < 50 % — check the coils".into(),
        }),
        Message::Alert(Alert {
            t: 8,
            kind: "inlier_fraction".into(),
            state: AlertState::Cleared,
            value: 0.9,
            threshold: 0.5,
            sensor: None,
            message: String::new(),
        }),
        Message::Lagged(Lagged { skipped: 0 }),
        Message::Lagged(Lagged { skipped: u64::MAX }),
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
