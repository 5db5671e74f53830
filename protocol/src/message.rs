//! The messages of protocol version 1, as serde types.
//!
//! Every message is a MessagePack map with string keys; the key `type` names
//! it. Unknown keys are ignored. Optional keys that are absent are skipped when
//! encoding, so an encoded message never carries `nil` for "not given".

use serde::{Deserialize, Serialize};

/// A sensor id in observations, rate samples and the daemon's outputs: a
/// string that is copied, not allocated, when short (up to 23 bytes inline,
/// shared beyond), because every message carries one and every solution
/// repeats the id of each observation of its window. On the wire it is an
/// ordinary MessagePack string.
pub type SensorName = smol_str::SmolStr;

/// Protocol version spoken by this crate.
pub const PROTOCOL_VERSION: u32 = 1;

/// Variance, rad², written in `cov` for an axis the inliers leave
/// undetermined (`status` `unobservable`): finite, so that JSON (logs,
/// reports), which has no infinity, carries the same value.
pub const UNOBSERVABLE_VARIANCE: f64 = 1e12;

/// One protocol message, tagged by its `type` key.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "type", rename_all = "snake_case")]
#[non_exhaustive]
pub enum Message {
    /// First frame of a stream connection (client → daemon).
    Hello(Hello),
    /// Answer to a valid `hello` (daemon → client).
    Welcome(Welcome),
    /// Fatal error; the daemon closes the connection after sending it.
    Error(ErrorMessage),
    /// One vector-pair observation (source → daemon).
    Obs(Obs),
    /// One angular-rate sample (source → daemon).
    Rate(Rate),
    /// Reference attitude from a bench truth source (source → daemon).
    Truth(Truth),
    /// A well-framed message that was not used (daemon → source).
    Reject(Reject),
    /// The attitude solved for one epoch (daemon → subscriber).
    Solution(Solution),
    /// An alert raised or cleared (daemon → subscriber).
    Alert(Alert),
    /// The subscriber fell behind and older messages were dropped for it.
    Lagged(Lagged),
    /// Status request (subscriber → daemon, no other keys) or answer
    /// (daemon → subscriber, with counters).
    Status(Status),
}

/// The `type` strings of every message this crate knows, in [`Message`] order.
pub const MESSAGE_TYPES: [&str; 11] = [
    "hello", "welcome", "error", "obs", "rate", "truth", "reject", "solution", "alert", "lagged",
    "status",
];

impl Message {
    /// The wire `type` string of this message.
    pub fn type_name(&self) -> &'static str {
        match self {
            Message::Hello(_) => "hello",
            Message::Welcome(_) => "welcome",
            Message::Error(_) => "error",
            Message::Obs(_) => "obs",
            Message::Rate(_) => "rate",
            Message::Truth(_) => "truth",
            Message::Reject(_) => "reject",
            Message::Solution(_) => "solution",
            Message::Alert(_) => "alert",
            Message::Lagged(_) => "lagged",
            Message::Status(_) => "status",
        }
    }
}

/// Role announced in `hello`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    /// Sends `obs`, `rate` and `truth`.
    Source,
    /// Receives `solution`, `alert`, `lagged` and may ask for `status`.
    Subscriber,
}

/// `hello`: the first frame a client sends on a stream connection.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Hello {
    /// Protocol version the client speaks; `1`.
    ///
    /// The protocol says `int`: any integer is read, and one outside the `u32`
    /// range is clamped (below 0 to 0, above to `u32::MAX`), neither of which
    /// is a supported version, so the daemon answers `error version` as for
    /// any other unsupported version, not `error hello`.
    #[serde(deserialize_with = "int_clamped_to_u32")]
    pub version: u32,
    /// What the connection is for.
    pub role: Role,
    /// Free text for logs.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<String>,
    /// Shared secret, required when the daemon is configured with one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub token: Option<String>,
    /// Subscribers only: include per-observation verdicts (default `true`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub verdicts: Option<bool>,
}

impl Hello {
    /// Whether a subscriber gets per-observation verdicts in its solutions:
    /// the `verdicts` key, `true` when absent. Meaningless for a source.
    pub fn wants_verdicts(&self) -> bool {
        self.verdicts.unwrap_or(true)
    }
}

/// Reads any MessagePack integer into a `u32`, clamping out-of-range values.
fn int_clamped_to_u32<'de, D: serde::Deserializer<'de>>(deserializer: D) -> Result<u32, D::Error> {
    struct Clamped;
    impl serde::de::Visitor<'_> for Clamped {
        type Value = u32;
        fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
            f.write_str("an integer")
        }
        fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<u32, E> {
            Ok(u32::try_from(v).unwrap_or(u32::MAX))
        }
        fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<u32, E> {
            Ok(if v < 0 {
                0
            } else {
                u32::try_from(v).unwrap_or(u32::MAX)
            })
        }
    }
    deserializer.deserialize_u32(Clamped)
}

/// `welcome`: the daemon accepted the `hello`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Welcome {
    /// Protocol version the daemon speaks.
    pub version: u32,
    /// Free text naming the server and its version.
    pub server: String,
}

/// `error`: a fatal error; the connection is closed after it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ErrorMessage {
    /// Machine-readable code, see [`ErrorCode`].
    pub code: String,
    /// Human-readable explanation.
    pub message: String,
}

/// The error codes the daemon uses in `error` messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum ErrorCode {
    /// Unsupported protocol version.
    Version,
    /// Missing or wrong token.
    Auth,
    /// The first frame is not a valid `hello`.
    Hello,
    /// Bad length prefix (zero, over 65536) or a stream cut inside a frame;
    /// in the first frame of a connection also a body that is not decodable
    /// MessagePack (later, such a body only gets a `reject`).
    Framing,
    /// Connection limit reached.
    Busy,
    /// A per-connection timeout expired (hello not sent in time, subscriber not reading).
    Timeout,
    /// The daemon is shutting down.
    Shutdown,
}

impl ErrorCode {
    /// The wire string of this code.
    pub fn as_str(self) -> &'static str {
        match self {
            ErrorCode::Version => "version",
            ErrorCode::Auth => "auth",
            ErrorCode::Hello => "hello",
            ErrorCode::Framing => "framing",
            ErrorCode::Busy => "busy",
            ErrorCode::Timeout => "timeout",
            ErrorCode::Shutdown => "shutdown",
        }
    }
}

impl ErrorCode {
    /// Every code, in declaration order.
    pub const ALL: [ErrorCode; 7] = [
        ErrorCode::Version,
        ErrorCode::Auth,
        ErrorCode::Hello,
        ErrorCode::Framing,
        ErrorCode::Busy,
        ErrorCode::Timeout,
        ErrorCode::Shutdown,
    ];

    /// The code whose wire string is `code`, if it is one of ours.
    pub fn from_wire(code: &str) -> Option<ErrorCode> {
        ErrorCode::ALL.into_iter().find(|c| c.as_str() == code)
    }
}

impl ErrorMessage {
    /// An `error` message with one of our codes.
    pub fn new(code: ErrorCode, message: impl Into<String>) -> ErrorMessage {
        ErrorMessage {
            code: code.as_str().to_string(),
            message: message.into(),
        }
    }
}

impl std::fmt::Display for ErrorCode {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// `obs`: one vector-pair observation, as decoded (not yet validated).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Obs {
    /// Sensor id, 1–64 chars of `[A-Za-z0-9_.-]`.
    pub sensor: SensorName,
    /// Sequence number, per sensor, increasing.
    pub seq: u64,
    /// Measurement time, integer nanoseconds on the bench clock.
    pub t: i64,
    /// Measured direction in the body frame (any non-zero length).
    pub b: [f64; 3],
    /// The same direction in the reference frame (any non-zero length).
    pub r: [f64; 3],
    /// 1-σ angular noise in radians, `0 < sigma < π`; absent: the sensor's
    /// configured default, and rejected when the sensor has none.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma: Option<f64>,
    /// Shared secret; only meaningful on UDP, where there is no `hello`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub token: Option<String>,
}

/// `rate`: one angular-rate sample, as decoded (not yet validated).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Rate {
    /// Sensor id of the gyro.
    pub sensor: SensorName,
    /// Sequence number, per sensor, increasing.
    pub seq: u64,
    /// Sample time, integer nanoseconds on the bench clock.
    pub t: i64,
    /// Body angular velocity, rad/s, body frame.
    pub w: [f64; 3],
    /// Shared secret; only meaningful on UDP.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub token: Option<String>,
}

/// `truth`: a reference attitude, never used by the estimator.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Truth {
    /// Time, integer nanoseconds on the bench clock.
    pub t: i64,
    /// Attitude quaternion `[w, x, y, z]` (normalised by validation).
    pub q: [f64; 4],
    /// Shared secret; only meaningful on UDP.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub token: Option<String>,
}

/// `reject`: a well-framed message that was not used; the connection stays open.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Reject {
    /// Sensor id of the rejected message, when it had a readable one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sensor: Option<String>,
    /// Sequence number of the rejected message, when it had a readable one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub seq: Option<u64>,
    /// Why it was rejected.
    pub reason: String,
}

/// Quality of a published solution.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SolutionStatus {
    /// Inlier fraction at or above the alert level, all three axes observable.
    Ok,
    /// Estimate published but the inlier fraction is below the alert level.
    Degraded,
    /// The inliers span fewer than two independent directions.
    Unobservable,
    /// Fewer than two observations in the window.
    Insufficient,
}

impl SolutionStatus {
    /// The wire string of this status.
    pub fn as_str(self) -> &'static str {
        match self {
            SolutionStatus::Ok => "ok",
            SolutionStatus::Degraded => "degraded",
            SolutionStatus::Unobservable => "unobservable",
            SolutionStatus::Insufficient => "insufficient",
        }
    }
}

/// Per-sensor counts inside a `solution`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SensorCount {
    /// Sensor id.
    pub sensor: SensorName,
    /// Observations of this sensor in the window.
    pub n: u32,
    /// Of those, inliers.
    pub n_inliers: u32,
}

/// Verdict on one observation of the window.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ObsVerdict {
    /// Sensor id.
    pub sensor: SensorName,
    /// The observation's sequence number.
    pub seq: u64,
    /// Angle between the propagated `b` and `A r`, radians.
    pub residual: f64,
    /// Whether the χ² gate passed it.
    pub inlier: bool,
}

/// `solution`: the attitude solved for one epoch.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Solution {
    /// Epoch, nanoseconds on the bench clock.
    pub t: i64,
    /// Attitude quaternion `[w, x, y, z]`, unit, `w >= 0`; maps reference to body.
    pub q: [f64; 4],
    /// 3×3 attitude-error covariance, row-major, rad², body frame.
    pub cov: [f64; 9],
    /// Quality of this solution.
    pub status: SolutionStatus,
    /// Inliers / observations in the window.
    pub inlier_fraction: f64,
    /// Observations in the window.
    pub n: u32,
    /// Inliers in the window.
    pub n_inliers: u32,
    /// Solver that produced the estimate.
    pub method: String,
    /// Solver iterations.
    pub iterations: u32,
    /// Per-sensor counts.
    pub sensors: Vec<SensorCount>,
    /// Per-observation verdicts; absent when the subscriber asked for none.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub verdicts: Option<crate::verdicts::VerdictList>,
    /// Extension key: `false` when no rate samples reached this window and it
    /// was treated as static. Absent means rates were used.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub propagated: Option<bool>,
}

/// Whether an alert starts or ends.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum AlertState {
    /// The condition has held for the hold time.
    Raised,
    /// The condition has been clear (with hysteresis) for the hold time.
    Cleared,
}

/// `alert`: a condition raised or cleared.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Alert {
    /// Data time at which the alert changed state, ns.
    pub t: i64,
    /// `inlier_fraction`, `sensor_inliers`, `stale` or `unobservable`.
    pub kind: String,
    /// Raised or cleared.
    pub state: AlertState,
    /// The measured value that triggered the change.
    pub value: f64,
    /// The configured level it was compared with.
    pub threshold: f64,
    /// Sensor concerned, for per-sensor kinds.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sensor: Option<String>,
    /// Human-readable explanation.
    pub message: String,
}

/// `lagged`: older messages were dropped for a slow subscriber.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Lagged {
    /// How many messages were dropped.
    pub skipped: u64,
}

/// `status`: a request (no counters) or an answer (all counters present).
///
/// On the wire a request is `{type:"status"}` and an answer carries every
/// counter of [`StatusReport`] beside `type`. A map with some counters but not
/// all is invalid (missing key), never silently taken for a request.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Status {
    /// The counters; `None` in a request.
    pub report: Option<StatusReport>,
}

impl Status {
    /// A status request: `{type:"status"}`.
    pub fn request() -> Status {
        Status { report: None }
    }

    /// A status answer carrying `report`.
    pub fn answer(report: StatusReport) -> Status {
        Status {
            report: Some(report),
        }
    }
}

/// Wire names of the counters, in encoding order.
const STATUS_KEYS: [&str; 7] = [
    "uptime_s",
    "sources",
    "subscribers",
    "accepted",
    "rejected",
    "dropped",
    "epochs",
];

impl Serialize for Status {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeStruct;
        let Some(report) = &self.report else {
            return serializer.serialize_struct("Status", 0)?.end();
        };
        let mut map = serializer.serialize_struct("Status", STATUS_KEYS.len())?;
        map.serialize_field("uptime_s", &report.uptime_s)?;
        map.serialize_field("sources", &report.sources)?;
        map.serialize_field("subscribers", &report.subscribers)?;
        map.serialize_field("accepted", &report.accepted)?;
        map.serialize_field("rejected", &report.rejected)?;
        map.serialize_field("dropped", &report.dropped)?;
        map.serialize_field("epochs", &report.epochs)?;
        map.end()
    }
}

impl<'de> Deserialize<'de> for Status {
    fn deserialize<D: serde::Deserializer<'de>>(deserializer: D) -> Result<Status, D::Error> {
        // Every counter optional here; "all or none" is decided below so that a
        // partial answer is an error naming the first missing counter.
        #[derive(Deserialize)]
        struct Keys {
            uptime_s: Option<f64>,
            sources: Option<u64>,
            subscribers: Option<u64>,
            accepted: Option<u64>,
            rejected: Option<u64>,
            dropped: Option<u64>,
            epochs: Option<u64>,
        }
        let k = Keys::deserialize(deserializer)?;
        let present = [
            k.uptime_s.is_some(),
            k.sources.is_some(),
            k.subscribers.is_some(),
            k.accepted.is_some(),
            k.rejected.is_some(),
            k.dropped.is_some(),
            k.epochs.is_some(),
        ];
        if present.iter().all(|p| !p) {
            return Ok(Status::request());
        }
        if let Some(idx) = present.iter().position(|p| !p) {
            return Err(serde::de::Error::missing_field(STATUS_KEYS[idx]));
        }
        let counter = |v: Option<u64>| v.unwrap_or_default();
        Ok(Status::answer(StatusReport {
            uptime_s: k.uptime_s.unwrap_or_default(),
            sources: counter(k.sources),
            subscribers: counter(k.subscribers),
            accepted: counter(k.accepted),
            rejected: counter(k.rejected),
            dropped: counter(k.dropped),
            epochs: counter(k.epochs),
        }))
    }
}

/// Counters carried by a `status` answer, counted since the daemon started.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StatusReport {
    /// Seconds since start.
    pub uptime_s: f64,
    /// Source connections open now.
    pub sources: u64,
    /// Subscriber connections open now.
    pub subscribers: u64,
    /// Observations and rates accepted.
    pub accepted: u64,
    /// Messages rejected.
    pub rejected: u64,
    /// Messages dropped for lack of room.
    pub dropped: u64,
    /// Epochs solved.
    pub epochs: u64,
}
