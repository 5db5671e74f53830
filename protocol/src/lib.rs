//! `wahbad-protocol`: the wire protocol of wahbad, version 1.
//!
//! - [`message`]: serde types of every message.
//! - [`frame`]: length-prefixed framing and datagram decoding.
//! - [`validate`]: checked observations, rates and truth.

pub mod frame;
pub mod message;
pub mod validate;

pub use message::*;
pub use validate::{
    validate_obs, validate_rate, validate_truth, ValidObs, ValidRate, ValidTruth, ValidationError,
};
