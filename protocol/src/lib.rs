//! `wahbad-protocol`: the wire protocol of wahbad, version 1.
//!
//! Sensor sources, subscribers and recorded logs all speak MessagePack maps
//! with string keys, framed on streams by a 4-byte big-endian length. This
//! crate has the message types, the framing and the stateless validation; it
//! uses no async runtime, so any client can depend on it. The protocol as
//! implemented, for client authors in other languages, is in `PROTOCOL.md`.
//!
//! - [`message`]: serde types of every message ([`Message`], tagged by `type`).
//! - [`frame`]: length-prefixed framing ([`encode_frame`], [`FrameDecoder`]),
//!   body and datagram decoding ([`decode_body`], [`decode_datagram`]) and
//!   their typed error ([`FrameError`]).
//! - [`validate`]: checked observations, rates and truth ([`validate_obs`],
//!   [`ValidationError`], whose text is a `reject` reason).
//!
//! # Example
//!
//! A source's `hello` and one observation, through the framing and back:
//!
//! ```
//! use wahbad_protocol::{encode_frame_into, FrameDecoder, Hello, Message, Obs, Role};
//!
//! let hello = Message::Hello(Hello {
//!     version: 1,
//!     role: Role::Source,
//!     name: Some("sun-sensor bench rig".into()),
//!     token: None,
//!     verdicts: None,
//! });
//! let obs = Message::Obs(Obs {
//!     sensor: "sun".into(),
//!     seq: 7,
//!     t: 1_000_000_000,
//!     b: [0.0, 0.0, 2.0], // any non-zero length
//!     r: [1.0, 0.0, 0.0],
//!     sigma: Some(0.001),
//!     token: None,
//! });
//! let mut stream = Vec::new();
//! encode_frame_into(&hello, &mut stream);
//! encode_frame_into(&obs, &mut stream);
//!
//! // Bytes arrive in arbitrary pieces; whole messages come out.
//! let mut decoder = FrameDecoder::new();
//! let mut received = Vec::new();
//! for piece in stream.chunks(5) {
//!     decoder.push(piece);
//!     while let Some(msg) = decoder.next_message()? {
//!         received.push(msg);
//!     }
//! }
//! decoder.finish()?; // the stream ended between frames
//! assert_eq!(received, [hello, obs.clone()]);
//!
//! // Validation normalises the vectors and checks the stateless rules.
//! let Message::Obs(raw) = obs else { unreachable!() };
//! let checked = wahbad_protocol::validate_obs(&raw)?;
//! assert_eq!(checked.b, [0.0, 0.0, 1.0]);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

#![warn(missing_docs)]

pub mod frame;
pub use frame::{
    decode_body, decode_datagram, encode_body, encode_body_into, encode_frame, encode_frame_into,
    try_encode_frame, try_encode_frame_into, EncodeError, FrameDecoder, FrameError, MessageIds,
    LEN_PREFIX, MAX_DEPTH, MAX_FRAME_LEN,
};

pub mod message;
pub use message::*;

pub mod verdicts;
pub use verdicts::{UnknownSensorIndex, VerdictEntry, VerdictIter, VerdictList, VerdictRef};

pub mod validate;
pub use validate::{
    check_sensor_id, validate_obs, validate_rate, validate_truth, SensorIdFault, ValidObs,
    ValidRate, ValidTruth, ValidationError, MAX_SENSOR_ID_LEN,
};
