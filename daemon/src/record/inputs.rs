//! Turning a record back into the estimator input it was, through the same
//! decoder and validation the live server uses.

use wahbad_protocol::{decode_body, decode_datagram, validate_obs, validate_rate, validate_truth};
use wahbad_protocol::{FrameError, Message, ValidationError};

use super::{LogHeader, Record};
use crate::estimator::{EstimatorConfig, Input};
use crate::settings::{estimator_config, SettingsError};

/// Why a recorded frame is not an input (the live server refused it too).
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum InputError {
    /// The bytes do not decode.
    #[error(transparent)]
    Frame(#[from] FrameError),
    /// The message does not validate.
    #[error(transparent)]
    Invalid(#[from] ValidationError),
    /// A message that is not a source input.
    #[error("recorded message is not obs, rate or truth")]
    NotAnInput,
}

/// The estimator input a record holds; `None` for the end record.
pub fn record_input(record: &Record) -> Result<Option<Input>, InputError> {
    let msg = match record {
        Record::Frame { body, .. } => decode_body(body)?,
        Record::Datagram { body, .. } => decode_datagram(body)?,
        Record::Tick { bench_ns, .. } => return Ok(Some(Input::Tick(*bench_ns))),
        Record::End { .. } => return Ok(None),
    };
    let input = match msg {
        Message::Obs(obs) => Input::Obs(validate_obs(&obs)?),
        Message::Rate(rate) => Input::Rate(validate_rate(&rate)?),
        Message::Truth(truth) => Input::Truth(validate_truth(&truth)?),
        _ => return Err(InputError::NotAnInput),
    };
    Ok(Some(input))
}

impl LogHeader {
    /// The estimator configuration recorded in the header.
    pub fn estimator_config(&self) -> Result<EstimatorConfig, SettingsError> {
        let table: toml::Table = toml::from_str(&self.config).map_err(|err| {
            SettingsError::Estimator(format!("recorded configuration: {}", err.message()))
        })?;
        estimator_config(&table)
    }
}
